"""Score drift: PSI from stored bins, binned KS and its bound, prevalence change, calibration."""

import json
import math

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm
from scipy.special import expit, logit
from scipy.stats import chi2, ks_2samp
from statsmodels.stats.proportion import confint_proportions_2indep

from core.calibration import calibration_report
from core.dataset import Dataset
from core.drift import (
    DEFAULT_PSI_FLOOR,
    PSI_SHIFTED,
    PSI_STABLE,
    ScoreBins,
    bin_dataset,
    binned_ks,
    calibration_drift,
    population_stability_index,
    prevalence_change,
    psi_band,
    score_bins,
    score_drift,
)
from core.errors import InputError


def _sample(rng, n, prevalence, shift=0.0, scale=1.0, rounding=None):
    y = rng.random(n) < prevalence
    s = rng.normal(shift + 1.5 * y, scale)
    if rounding is not None:
        s = np.round(s, rounding)
    return y, s


def _quantile_edges(s, n_bins):
    inner = np.unique(np.quantile(s, np.arange(1, n_bins) / n_bins, method="inverted_cdf"))
    inner = inner[inner > s.min()]
    return np.concatenate(([-np.inf], inner, [np.inf]))


def _psi_raw(ref_scores, new_scores, edges, floor=DEFAULT_PSI_FLOOR):
    """PSI written out on raw scores (common practice, no source): shares per bin by pandas.cut
    with left-closed bins, floored, then sum (q - p) ln(q / p)."""
    def cut(s):
        return pd.cut(pd.Series(s), bins=edges, right=False)

    p = cut(ref_scores).value_counts(sort=False, normalize=True).to_numpy()
    q = cut(new_scores).value_counts(sort=False, normalize=True).to_numpy()
    p, q = np.maximum(p, floor), np.maximum(q, floor)
    return float(np.sum((q - p) * np.log(q / p)))


# ------------------------------------------------------------------ PSI

@pytest.mark.parametrize("seed", range(6))
def test_psi_from_stored_bins_equals_psi_from_raw_data(seed):
    # Reference: the PSI formula applied to the raw scores on the same bins (common practice,
    # no source), binned independently with pandas.cut.
    rng = np.random.default_rng(seed)
    y0, s0 = _sample(rng, 6000, 0.03, rounding=2 if seed % 2 else None)
    y1, s1 = _sample(rng, 2500 + 500 * seed, 0.04, shift=0.1 * seed,
                     rounding=2 if seed % 2 else None)
    edges = _quantile_edges(s0, 20)
    ref = bin_dataset(Dataset.from_arrays(y0, s0), edges)
    # the stored form: JSON with open ends written as strings
    stored = json.loads(json.dumps({"edges": ["-inf"] + [float(e) for e in edges[1:-1]] + ["inf"],
                                    "events": ref.events.tolist(),
                                    "non_events": ref.non_events.tolist()}))
    ref = score_bins(stored["edges"], stored["events"], stored["non_events"])
    new = bin_dataset(Dataset.from_arrays(y1, s1), ref.edges)
    d = score_drift(ref, new)
    assert d.psi.value == pytest.approx(_psi_raw(s0, s1, edges), rel=1e-12, abs=1e-15)
    assert d.psi_events.value == pytest.approx(_psi_raw(s0[y0], s1[y1], edges), rel=1e-12,
                                               abs=1e-15)
    assert d.psi_non_events.value == pytest.approx(_psi_raw(s0[~y0], s1[~y1], edges), rel=1e-12,
                                                   abs=1e-15)
    json.dumps(d.to_dict(), allow_nan=False)


def test_psi_bands_common_practice():
    # Common practice, no source: < 0.1 stable, 0.1-0.25 watch, > 0.25 shifted.
    assert (PSI_STABLE, PSI_SHIFTED) == (0.1, 0.25)
    assert psi_band(0.0) == "stable"
    assert psi_band(0.0999) == "stable"
    assert psi_band(0.1) == "watch"
    assert psi_band(0.25) == "watch"
    assert psi_band(0.2501) == "shifted"
    assert psi_band(math.nan) == "undefined"


def test_psi_is_symmetric_zero_on_equal_shares_and_grows_with_shift():
    a = np.array([10.0, 20, 30, 40])
    r = population_stability_index(a, 3 * a)
    assert r.value == 0.0 and r.band == "stable" and r.floored_bins == ()
    b = np.array([15.0, 25, 30, 30])
    assert population_stability_index(a, b).value == pytest.approx(
        population_stability_index(b, a).value, rel=1e-14)
    rng = np.random.default_rng(1)
    y0, s0 = _sample(rng, 20000, 0.02)
    edges = _quantile_edges(s0, 10)
    ref = bin_dataset(Dataset.from_arrays(y0, s0), edges)
    values = []
    for shift in (0.0, 0.2, 0.5, 1.0):
        y1, s1 = _sample(rng, 20000, 0.02, shift=shift)
        values.append(score_drift(ref, bin_dataset(Dataset.from_arrays(y1, s1), edges)).psi.value)
    assert values == sorted(values)
    assert psi_band(values[0]) == "stable" and psi_band(values[-1]) == "shifted"


def test_empty_bin_floor_and_its_stated_effect():
    # A bin empty in one sample with share s in the other adds (s - floor) ln(s / floor).
    ref = np.array([50.0, 30, 19, 1])
    new = np.array([50.0, 30, 20, 0])
    r = population_stability_index(ref, new)
    assert r.floored_bins == (3,)
    s, f = 0.01, DEFAULT_PSI_FLOOR
    assert r.floored_contribution == pytest.approx((s - f) * math.log(s / f), rel=1e-12)
    rest = (0.2 - 0.19) * math.log(0.2 / 0.19)
    assert r.value == pytest.approx(rest + (s - f) * math.log(s / f), rel=1e-12)
    assert "floored at 0.0001" in r.statement()
    # a smaller floor makes the empty bin weigh more
    assert population_stability_index(ref, new, floor=1e-6).value > r.value
    # both empty: contributes nothing
    assert population_stability_index([5.0, 0, 5], [5.0, 0, 5]).value == 0.0
    with pytest.raises(InputError):
        population_stability_index(ref, new, floor=0.0)


def test_psi_noise_level_matches_simulation_of_an_unchanged_population():
    # Reference: the chi-square law of Pearson's homogeneity statistic (textbook); here checked by
    # simulation: two multinomial samples from one population, seeded.
    rng = np.random.default_rng(7)
    p = np.array([0.05, 0.1, 0.15, 0.2, 0.2, 0.15, 0.1, 0.05])
    n0, n1 = 3000, 1200
    ref = rng.multinomial(n0, p, size=2000)
    new = rng.multinomial(n1, p, size=2000)
    sims = np.array([population_stability_index(a, b).value for a, b in zip(ref, new)])
    r = population_stability_index(ref[0], new[0])
    inv = 1 / n0 + 1 / n1
    assert r.noise_mean == pytest.approx(7 * inv, rel=1e-12)
    assert r.noise_95 == pytest.approx(chi2.ppf(0.95, 7) * inv, rel=1e-12)
    assert np.mean(sims) == pytest.approx(r.noise_mean, rel=0.08)
    assert np.quantile(sims, 0.95) == pytest.approx(r.noise_95, rel=0.08)
    assert 0.03 < np.mean(sims > r.noise_95) < 0.07


def test_small_event_counts_are_said_to_sit_within_noise():
    # 20 bins and ~150 events: an unchanged population's event PSI often reaches "watch".
    rng = np.random.default_rng(11)
    y0, s0 = _sample(rng, 15000, 0.03)
    y1, s1 = _sample(rng, 5000, 0.03)
    edges = _quantile_edges(s0, 20)
    d = score_drift(bin_dataset(Dataset.from_arrays(y0, s0), edges),
                    bin_dataset(Dataset.from_arrays(y1, s1), edges))
    ev = d.psi_events
    assert ev.noise_95 > 0.1
    if ev.band != "stable":
        assert not ev.beyond_noise and "does not show a shift" in ev.statement()


# ------------------------------------------------------------------ KS

def _ks_cases():
    for seed in range(40):
        rng = np.random.default_rng(100 + seed)
        n0 = int(rng.integers(30, 4000))
        n1 = int(rng.integers(30, 4000))
        shift = rng.choice([0.0, 0.1, 0.3, 1.0])
        scale = rng.choice([1.0, 1.5])
        rounding = rng.choice([None, 1, 2])
        n_bins = int(rng.choice([2, 5, 10, 20, 50]))
        yield seed, n0, n1, shift, scale, rounding, n_bins


@pytest.mark.parametrize("case", list(_ks_cases()), ids=lambda c: f"seed{c[0]}")
def test_binned_ks_lies_within_its_bound_of_scipy(case):
    # Reference: scipy.stats.ks_2samp (exact two-sample statistic). Claim: binned <= D <= bound
    # <= binned + largest bin share (derived in core.drift's docstring).
    seed, n0, n1, shift, scale, rounding, n_bins = case
    rng = np.random.default_rng(seed)
    _, s0 = _sample(rng, n0, 0.05, rounding=rounding)
    _, s1 = _sample(rng, n1, 0.05, shift=shift, scale=scale, rounding=rounding)
    if seed % 3 == 0:  # equal-width finite edges over the reference range: outer bins open
        edges = np.linspace(s0.min(), s0.max(), n_bins + 1)
    else:
        edges = _quantile_edges(s0, n_bins)
    ref = bin_dataset(Dataset.from_arrays(np.zeros(n0, bool), s0), edges)
    new = bin_dataset(Dataset.from_arrays(np.zeros(n1, bool), s1), edges)
    ks = binned_ks(ref.cases, new.cases, edges)
    exact = ks_2samp(s0, s1).statistic
    assert ks.statistic <= exact + 1e-12
    assert exact <= ks.upper_bound + 1e-12
    assert ks.upper_bound <= ks.simple_bound + 1e-12
    assert ks.simple_bound == pytest.approx(min(ks.statistic + ks.max_bin_share, 1.0), abs=1e-15)


def test_binned_ks_equals_exact_when_each_bin_is_one_distinct_score():
    # Bins that each hold one distinct value lose nothing: scipy's statistic is reached exactly.
    rng = np.random.default_rng(5)
    s0 = rng.integers(0, 8, 700).astype(float)
    s1 = rng.integers(1, 9, 500).astype(float)
    edges = np.concatenate(([-np.inf], np.arange(1, 9) - 0.5, [np.inf]))
    ref = bin_dataset(Dataset.from_arrays(np.zeros(700, bool), s0), edges)
    new = bin_dataset(Dataset.from_arrays(np.zeros(500, bool), s1), edges)
    assert binned_ks(ref.cases, new.cases).statistic == pytest.approx(
        ks_2samp(s0, s1).statistic, abs=1e-12)


def test_binned_ks_bound_is_attained():
    # Reference mass at a bin's left edge, new mass just below its right edge: D equals the bound.
    s0 = np.array([0.0] * 5 + [1.0] * 5)      # bins [-inf, 1), [1, 2), [2, inf)
    s1 = np.array([0.999] * 5 + [1.999] * 5)
    edges = [-np.inf, 1.0, 2.0, np.inf]
    a = bin_dataset(Dataset.from_arrays(np.zeros(10, bool), s0), edges).cases
    b = bin_dataset(Dataset.from_arrays(np.zeros(10, bool), s1), edges).cases
    ks = binned_ks(a, b)
    assert ks.statistic == 0.0
    assert ks.upper_bound == pytest.approx(0.5, abs=1e-15)
    assert ks_2samp(s0, s1).statistic == pytest.approx(ks.upper_bound, abs=1e-12)


def test_binned_ks_edge_and_empty_sample():
    ks = binned_ks([5.0, 5.0, 0.0], [0.0, 5.0, 5.0], edges=["-inf", 0.5, 1.5, "inf"])
    assert ks.statistic == pytest.approx(0.5) and ks.edge == 0 and ks.edge_value == 0.5
    assert math.isnan(binned_ks([1.0, 2.0], [0.0, 0.0]).statistic)
    one = binned_ks([3.0], [4.0])
    assert one.statistic == 0.0 and one.upper_bound == 1.0


# ------------------------------------------------------------------ prevalence, bins

@pytest.mark.parametrize("x1,n1,x0,n0", [(60, 2500, 120, 6000), (5, 300, 2, 900), (0, 400, 8, 500),
                                         (30, 30, 10, 40), (13.5, 711.2, 40.0, 2100.0)])
def test_prevalence_change_is_newcombe_like_statsmodels(x1, n1, x0, n0):
    # Reference: statsmodels confint_proportions_2indep(method="newcomb") (Newcombe 1998,
    # method 10).
    ch = prevalence_change(x1, n1, x0, n0, 0.95)
    lo, hi = confint_proportions_2indep(x1, n1, x0, n0, method="newcomb", compare="diff",
                                        alpha=0.05)
    assert ch.low == pytest.approx(lo, abs=1e-12) and ch.high == pytest.approx(hi, abs=1e-12)
    assert ch.difference == pytest.approx(x1 / n1 - x0 / n0, rel=1e-14)
    assert ch.changed == (lo > 0 or hi < 0)
    assert "Newcombe" in ch.statement()


def test_prevalence_change_flags_a_real_change_and_rejects_bad_counts():
    assert prevalence_change(200, 5000, 100, 5000).changed
    assert not prevalence_change(101, 5000, 100, 5000).changed
    with pytest.raises(InputError):
        prevalence_change(6, 5, 1, 10)


def test_bin_dataset_counts_every_case_and_reports_scores_outside_the_range():
    rng = np.random.default_rng(2)
    y0, s0 = _sample(rng, 1000, 0.1)
    edges = np.linspace(s0.min(), s0.max(), 11)  # finite outer edges, as class_histogram's default
    y1 = np.array([True, False, False, True, False])
    s1 = np.array([s0.min() - 1, s0.max() + 1, s0.max(), 0.0, s0.min()])
    new = bin_dataset(Dataset.from_arrays(y1, s1), edges)
    assert new.n_cases == 5 and new.n_events == 2
    assert new.below == 1 and new.above == 2  # at or above the last edge
    assert new.events[0] == 1 and new.non_events[-1] == 2
    ref = bin_dataset(Dataset.from_arrays(y0, s0), edges)
    assert ref.n_cases == 1000 and ref.below == 0 and ref.above == 1  # the maximum itself
    d = score_drift(ref, new)
    assert "outside the reference range" in " ".join(d.statements)


def test_bin_dataset_weights_count_tables_and_kish_sizes():
    rng = np.random.default_rng(4)
    y, s = _sample(rng, 3000, 0.05, rounding=1)
    w = rng.uniform(0.5, 3, 3000)
    edges = _quantile_edges(s, 8)
    freq = bin_dataset(Dataset.from_arrays(y, s, w, weight_kind="frequency"), edges)
    samp = bin_dataset(Dataset.from_arrays(y, s, w, weight_kind="sampling"), edges)
    np.testing.assert_allclose(freq.events, samp.events, rtol=1e-13)
    assert freq.events_size == pytest.approx(w[y].sum(), rel=1e-13)
    # Kish 1965: (sum w)^2 / sum w^2
    assert samp.events_size == pytest.approx(w[y].sum() ** 2 / (w[y] ** 2).sum(), rel=1e-12)
    assert samp.cases_size == pytest.approx(w.sum() ** 2 / (w ** 2).sum(), rel=1e-12)
    # a count table of the same cases bins the same
    tab = pd.DataFrame({"s": s, "e": y.astype(float), "n": (~y).astype(float)}).groupby("s").sum()
    ct = Dataset.from_count_table(tab.index.to_numpy(), tab["e"].to_numpy(), tab["n"].to_numpy())
    rows = bin_dataset(Dataset.from_arrays(y, s), edges)
    cnt = bin_dataset(ct, edges)
    np.testing.assert_allclose(cnt.events, rows.events)
    np.testing.assert_allclose(cnt.non_events, rows.non_events)


def test_bad_bins_are_input_errors():
    with pytest.raises(InputError, match="increase strictly"):
        score_bins([0, 1, 1, 2], [1, 1, 1], [1, 1, 1])
    with pytest.raises(InputError, match="bins"):
        score_bins([0, 1, 2], [1, 1, 1], [1, 1])
    with pytest.raises(InputError, match="non-negative"):
        score_bins([0, 1, 2], [1, -1], [1, 1])
    with pytest.raises(InputError, match="only the outer"):
        score_bins([0, np.inf, 2], [1, 1], [1, 1])
    a = score_bins([-np.inf, 0, np.inf], [1, 1], [5, 5])
    b = score_bins([-np.inf, 0.5, np.inf], [1, 1], [5, 5])
    with pytest.raises(InputError, match="reference's edges"):
        score_drift(a, b)
    assert isinstance(a, ScoreBins)


# ------------------------------------------------------------------ calibration drift

def _probability_sample(n, seed, outcome_shift=0.0, sites=("Ashgrove", "Wendlecombe")):
    """Scores p and outcomes from expit(shift + logit(p)) (common practice; invented data)."""
    rng = np.random.default_rng(seed)
    p = expit(rng.normal(-3.0, 1.0, n))
    y = rng.random(n) < expit(outcome_shift + logit(p))
    return Dataset.from_arrays(y, p, groups={"site": rng.choice(list(sites), n)})


def _stored(report):
    """The record's form: JSON with undefined values as null."""
    return json.loads(json.dumps(report.to_dict(), allow_nan=False))


def test_outcomes_shifted_with_scores_unchanged_fail_calibration_while_psi_stays_low():
    ref = _probability_sample(40000, 1)
    new = _probability_sample(30000, 2, outcome_shift=0.6)  # same scores, more events
    edges = _quantile_edges(ref.y_score, 20)
    drift = score_drift(bin_dataset(ref, edges), bin_dataset(new, edges))
    assert drift.psi.band == "stable" and not drift.psi.beyond_noise
    assert drift.psi_non_events.band == "stable"
    cal = calibration_drift(_stored(calibration_report(ref)), calibration_report(new))
    assert cal.verdict == "fails" and cal.drifted
    oe = cal.measure("oe_ratio")
    assert oe.verdict == "fails" and oe.new_low > 1.0 and oe.changed and oe.change_low > 1.0
    assert cal.measure("intercept").verdict == "fails"
    assert cal.measure("slope").verdict == "holds" and not cal.measure("slope").changed
    assert "more events than the scores predict" in cal.statement
    assert "a low PSI does not clear calibration" in cal.statement
    assert {g.where for g in cal.groups} == {"site = Ashgrove", "site = Wendlecombe"}
    assert all(g.verdict == "fails" for g in cal.groups)
    json.dumps(cal.to_dict(), allow_nan=False)


def test_same_population_keeps_calibration():
    ref = _probability_sample(40000, 3)
    new = _probability_sample(30000, 4)
    cal = calibration_drift(calibration_report(ref), calibration_report(new))
    assert cal.verdict == "holds" and not cal.drifted
    assert all(m.verdict == "holds" for m in cal.measures)


def test_calibration_change_intervals_against_statsmodels():
    # Reference: statsmodels GLM (Binomial) of y on logit(p) -- with logit(p) as an offset for the
    # intercept in the large -- on each sample; the Wald interval of the difference uses their
    # standard errors. O/E ratio: statsmodels confint_proportions_2indep(compare="ratio",
    # method="log") (Katz 1978) times the ratio of mean scores.
    ref = _probability_sample(20000, 5)
    new = _probability_sample(15000, 6, outcome_shift=0.3)
    cal = calibration_drift(calibration_report(ref, groups=False),
                            calibration_report(new, groups=False))
    z = 1.959963984540054

    def fits(ds):
        y = ds.y_true.astype(float)
        L = logit(ds.y_score)
        off = sm.GLM(y, np.ones((y.size, 1)), family=sm.families.Binomial(), offset=L).fit()
        full = sm.GLM(y, sm.add_constant(L), family=sm.families.Binomial()).fit()
        return off.params[0], off.bse[0], full.params[1], full.bse[1]

    a0, sa0, b0, sb0 = fits(ref)
    a1, sa1, b1, sb1 = fits(new)
    m = cal.measure("intercept")
    assert m.change == pytest.approx(a1 - a0, abs=1e-6)
    assert m.change_low == pytest.approx(a1 - a0 - z * math.hypot(sa0, sa1), abs=1e-5)
    m = cal.measure("slope")
    assert m.change_high == pytest.approx(b1 - b0 + z * math.hypot(sb0, sb1), abs=1e-5)
    x1, n1 = ref.y_true.sum(), ref.n_rows
    x2, n2 = new.y_true.sum(), new.n_rows
    lo, hi = confint_proportions_2indep(x2, n2, x1, n1, compare="ratio", method="log")
    k = ref.y_score.mean() / new.y_score.mean()
    m = cal.measure("oe_ratio")
    assert m.change_low == pytest.approx(lo * k, rel=1e-10)
    assert m.change_high == pytest.approx(hi * k, rel=1e-10)
    oe_ratio = (new.y_true.sum() / new.y_score.sum()) / (ref.y_true.sum() / ref.y_score.sum())
    assert m.change == pytest.approx(oe_ratio, rel=1e-10)


def test_calibration_drift_few_events_groups_and_non_probabilities():
    ref = _probability_sample(20000, 7, sites=("Ashgrove", "Wendlecombe"))
    new = _probability_sample(800, 8, sites=("Ashgrove", "Brindlemoor"))
    cal = calibration_drift(calibration_report(ref), calibration_report(new))
    # same population, few events: nothing excludes the ideal, too few events to call it held
    assert cal.events_new < 100 and cal.verdict == "unclear"
    assert "at least 100" in cal.statement
    assert cal.new_groups == ("site = Brindlemoor",)
    assert cal.vanished_groups == ("site = Wendlecombe",)
    assert [g.where for g in cal.groups] == ["site = Ashgrove"]
    rng = np.random.default_rng(0)
    raw = Dataset.from_arrays(rng.random(500) < 0.1, rng.normal(0, 3, 500))
    na = calibration_drift(calibration_report(ref), calibration_report(raw))
    assert na.verdict == "not applicable" and not na.available and "new data" in na.reason
