"""Intervals for proportions and predictive values, against outside references."""

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from statsmodels.stats.proportion import proportion_confint

from core.intervals import (
    clopper_pearson_interval,
    effective_size_from_sums,
    flag_rate_interval,
    kish_effective_size,
    normal_quantile,
    npv_logit_interval,
    ppv_logit_interval,
    wilson_interval,
)

X = np.array([0, 1, 3, 7, 15, 50, 81, 99, 100, 263])
N = np.array([10, 10, 20, 20, 148, 100, 263, 100, 100, 263])


# ------------------------------------------------------------------ Wilson / Clopper-Pearson

@pytest.mark.parametrize("confidence", [0.8, 0.9, 0.95, 0.99])
def test_wilson_two_sided_matches_statsmodels(confidence):
    # Reference: statsmodels proportion_confint(method="wilson").
    lo, hi = wilson_interval(X, N, confidence)
    rlo, rhi = proportion_confint(X, N, alpha=1 - confidence, method="wilson")
    np.testing.assert_allclose(lo, rlo, rtol=1e-12, atol=1e-14)
    np.testing.assert_allclose(hi, rhi, rtol=1e-12, atol=1e-14)


@pytest.mark.parametrize("confidence", [0.9, 0.95, 0.975])
def test_wilson_one_sided_is_end_of_two_sided_at_2c_minus_1(confidence):
    # Reference: statsmodels Wilson interval at alpha = 2 (1 - c): its ends are the one-sided bounds.
    rlo, rhi = proportion_confint(X, N, alpha=2 * (1 - confidence), method="wilson")
    lo, top = wilson_interval(X, N, confidence, sided="lower")
    bottom, hi = wilson_interval(X, N, confidence, sided="upper")
    np.testing.assert_allclose(lo, rlo, rtol=1e-12, atol=1e-14)
    np.testing.assert_allclose(hi, rhi, rtol=1e-12, atol=1e-14)
    assert np.all(top == 1.0) and np.all(bottom == 0.0)


def test_wilson_newcombe_worked_examples():
    # Newcombe, Stat Med 1998, Table I, score method (from memory): 81/263, 15/148, 0/20, 1/29.
    lo, hi = wilson_interval(np.array([81, 15, 0, 1]), np.array([263, 148, 20, 29]))
    np.testing.assert_allclose(lo, [0.2553, 0.0624, 0.0, 0.0061], atol=5e-5)
    np.testing.assert_allclose(hi, [0.3662, 0.1605, 0.1611, 0.1718], atol=5e-5)


@pytest.mark.parametrize("confidence", [0.9, 0.95])
def test_clopper_pearson_matches_statsmodels(confidence):
    # Reference: statsmodels proportion_confint(method="beta").
    lo, hi = clopper_pearson_interval(X, N, confidence)
    rlo, rhi = proportion_confint(X, N, alpha=1 - confidence, method="beta")
    np.testing.assert_allclose(lo, rlo, rtol=1e-10, atol=1e-14)
    np.testing.assert_allclose(hi, rhi, rtol=1e-10, atol=1e-14)
    lo1, _ = clopper_pearson_interval(X, N, confidence, sided="lower")
    rlo1, _ = proportion_confint(X, N, alpha=2 * (1 - confidence), method="beta")
    np.testing.assert_allclose(lo1, rlo1, rtol=1e-10, atol=1e-14)


def test_edges_and_undefined():
    # 0/0 is undefined (NaN); x = 0 has lower end 0 and x = n upper end 1 (common practice, no source).
    lo, hi = wilson_interval(np.array([0, 0, 5]), np.array([0, 5, 5]))
    assert np.isnan(lo[0]) and np.isnan(hi[0])
    assert lo[1] == 0.0 and hi[2] == 1.0
    lo, hi = clopper_pearson_interval(0, 0)
    assert np.isnan(lo) and np.isnan(hi)
    assert isinstance(wilson_interval(3, 10)[0], float)
    with pytest.raises(ValueError, match="sided"):
        wilson_interval(3, 10, sided="left")
    with pytest.raises(ValueError, match="confidence"):
        wilson_interval(3, 10, confidence=1.0)
    with pytest.raises(ValueError, match="successes"):
        wilson_interval(11, 10)


def test_normal_quantile():
    # Reference values of the standard normal (common practice, no source).
    assert normal_quantile(0.95) == pytest.approx(1.959964, abs=1e-6)
    assert normal_quantile(0.95, "lower") == pytest.approx(1.644854, abs=1e-6)


@settings(derandomize=True, deadline=None, max_examples=200)
@given(st.integers(1, 500), st.data())
def test_wilson_lower_bound_rises_with_successes(n, data):
    # Property the threshold search relies on (common practice, no source).
    x = data.draw(st.integers(0, n - 1))
    a = wilson_interval(x, n, 0.95, sided="lower")[0]
    b = wilson_interval(x + 1, n, 0.95, sided="lower")[0]
    assert b > a
    lo, hi = wilson_interval(x, n, 0.95)
    assert lo <= x / n <= hi


# ------------------------------------------------------------------ Kish

def test_kish_effective_size():
    # Kish, Survey Sampling 1965: (sum w)^2 / sum w^2 (from memory); equal weights give n.
    assert kish_effective_size(np.ones(40)) == pytest.approx(40.0)
    assert kish_effective_size(np.full(40, 3.5)) == pytest.approx(40.0)
    assert kish_effective_size([1, 1, 2, 2]) == pytest.approx(36 / 10)
    assert np.isnan(kish_effective_size(np.zeros(3)))
    np.testing.assert_allclose(effective_size_from_sums([6.0, 0.0], [10.0, 0.0]), [3.6, np.nan])


# ------------------------------------------------------------------ PPV / NPV at a prevalence

# Altman & Bland, BMJ 1994 (Diagnostic tests 1 and 2): liver scan vs pathology.
AB = dict(tp=231, fn=27, fp=32, tn=54)
AB_PREV = 258 / 344


def _expit(x):
    return 1 / (1 + np.exp(-x))


def test_ppv_npv_logit_centre_is_bayes_at_the_study_prevalence():
    # Altman & Bland 1994 (from memory): PPV 231/263, NPV 54/81 at the study's own prevalence;
    # the unadjusted logit interval is centred (on the logit scale) at that value.
    lo, hi = ppv_logit_interval(**AB, prevalence=AB_PREV, adjusted=False)
    centre = _expit((np.log(lo / (1 - lo)) + np.log(hi / (1 - hi))) / 2)
    assert centre == pytest.approx(231 / 263, rel=1e-12)
    lo, hi = npv_logit_interval(**AB, prevalence=AB_PREV, adjusted=False)
    centre = _expit((np.log(lo / (1 - lo)) + np.log(hi / (1 - hi))) / 2)
    assert centre == pytest.approx(54 / 81, rel=1e-12)


def test_ppv_logit_interval_formula():
    # Mercaldo, Lau & Zhou, Stat Med 2007 (from memory): Var(logit PPV) = (1-Se)/(Se n1) + Sp/((1-Sp) n0).
    se, sp, n1, n0, pi, z = 231 / 258, 54 / 86, 258, 86, 0.1, 1.959963984540054
    logit = np.log(pi * se / ((1 - pi) * (1 - sp)))
    sd = np.sqrt((1 - se) / (se * n1) + sp / ((1 - sp) * n0))
    lo, hi = ppv_logit_interval(**AB, prevalence=pi, adjusted=False)
    assert lo == pytest.approx(_expit(logit - z * sd), rel=1e-12)
    assert hi == pytest.approx(_expit(logit + z * sd), rel=1e-12)
    # the adjusted version adds z^2/2 to successes and failures
    c = z * z
    se2, sp2 = (231 + c / 2) / (258 + c), (54 + c / 2) / (86 + c)
    logit2 = np.log(pi * se2 / ((1 - pi) * (1 - sp2)))
    sd2 = np.sqrt((1 - se2) / (se2 * (258 + c)) + sp2 / ((1 - sp2) * (86 + c)))
    lo2, _ = ppv_logit_interval(**AB, prevalence=pi)
    assert lo2 == pytest.approx(_expit(logit2 - z * sd2), rel=1e-12)


def test_unadjusted_logit_is_undefined_at_perfect_specificity():
    lo, hi = ppv_logit_interval(10, 5, 0, 100, 0.1, adjusted=False)
    assert np.isnan(lo) and np.isnan(hi)
    lo, hi = ppv_logit_interval(10, 5, 0, 100, 0.1)
    assert 0 < lo < hi < 1


@pytest.mark.parametrize("kind", ["ppv", "npv", "flag_rate"])
def test_interval_coverage_by_simulation(kind):
    # Mercaldo, Lau & Zhou 2007 report near-nominal coverage for the logit intervals (from memory);
    # seeded simulation: Se 0.8 on 150 events, Sp 0.9 on 1,500 non-events, deployment prevalence 2 %.
    rng = np.random.default_rng(12345)
    se, sp, n1, n0, pi, reps = 0.8, 0.9, 150, 1500, 0.02, 4000
    tp = rng.binomial(n1, se, reps)
    tn = rng.binomial(n0, sp, reps)
    fn, fp = n1 - tp, n0 - tn
    if kind == "ppv":
        truth = pi * se / (pi * se + (1 - pi) * (1 - sp))
        lo, hi = ppv_logit_interval(tp, fn, fp, tn, pi)
        lo1, _ = ppv_logit_interval(tp, fn, fp, tn, pi, sided="lower")
    elif kind == "npv":
        truth = (1 - pi) * sp / ((1 - pi) * sp + pi * (1 - se))
        lo, hi = npv_logit_interval(tp, fn, fp, tn, pi)
        lo1, _ = npv_logit_interval(tp, fn, fp, tn, pi, sided="lower")
    else:
        truth = pi * se + (1 - pi) * (1 - sp)
        lo, hi = flag_rate_interval(tp, fn, fp, tn, pi)
        lo1, _ = flag_rate_interval(tp, fn, fp, tn, pi, sided="lower")
    cover = np.mean((lo <= truth) & (truth <= hi))
    cover1 = np.mean(lo1 <= truth)
    assert 0.93 <= cover <= 0.97
    assert 0.93 <= cover1 <= 0.99  # one-sided: near nominal or conservative (NPV sits near 1)


@settings(derandomize=True, deadline=None, max_examples=300)
@given(st.integers(0, 60), st.integers(1, 60), st.integers(1, 400), st.data(),
       st.floats(0.001, 0.6), st.sampled_from([0.6, 0.8, 0.9, 0.95, 0.99]))
def test_precision_and_flag_rate_bounds_move_with_false_positives(tp, fn_plus, n0, data, pi, conf):
    # The threshold search relies on these (derivation in core.choose; no outside source):
    # at fixed TP the precision lower bound falls and the flag-rate upper bound rises with FP.
    fp = data.draw(st.integers(0, n0 - 1))
    n1 = tp + fn_plus
    a = ppv_logit_interval(tp, n1 - tp, fp, n0 - fp, pi, conf, sided="lower")[0]
    b = ppv_logit_interval(tp, n1 - tp, fp + 1, n0 - fp - 1, pi, conf, sided="lower")[0]
    assert b < a
    u1 = flag_rate_interval(tp, n1 - tp, fp, n0 - fp, pi, conf, sided="upper")[1]
    u2 = flag_rate_interval(tp, n1 - tp, fp + 1, n0 - fp - 1, pi, conf, sided="upper")[1]
    assert u2 >= u1


def test_effective_sizes_widen_the_interval():
    wide = ppv_logit_interval(80, 20, 100, 900, 0.05, n_events=50, n_nonevents=500)
    narrow = ppv_logit_interval(80, 20, 100, 900, 0.05)
    assert wide[0] < narrow[0] and wide[1] > narrow[1]
    with pytest.raises(ValueError, match="prevalence"):
        ppv_logit_interval(80, 20, 100, 900, 0.0)
