"""Expected cost, cost-ratio sensitivity, net benefit and the cost-derived threshold."""

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from core.costs import (
    cost_derived_threshold,
    cost_ratio_grid,
    cost_ratio_sensitivity,
    decision_curve,
    expected_cost,
    implied_cost_ratio,
    net_benefit,
    prior_shift_probability,
    prior_shift_threshold,
    treat_all_net_benefit,
)
from core.curve import sweep


def _direct_counts(y, s, w, threshold, higher=True):
    flagged = s >= threshold if higher else s <= threshold
    return (w * (y & flagged)).sum(), (w * (~y & flagged)).sum(), (w * (y & ~flagged)).sum(), \
        (w * (~y & ~flagged)).sum()


# ------------------------------------------------------------------ expected cost

@settings(derandomize=True, deadline=None, max_examples=80)
@given(st.integers(5, 80), st.integers(0, 10_000), st.booleans(), st.booleans())
def test_expected_cost_at_validation_prevalence_is_the_plain_average(n, seed, weighted, higher):
    # Common practice, no source: at the validation prevalence the formula equals
    # (C_FN FN + C_FP FP + C_TP TP + C_TN TN) / n computed row by row.
    rng = np.random.default_rng(seed)
    y = rng.random(n) < 0.3
    y[:2] = [True, False]
    s = rng.integers(0, 8, n) / 8
    w = rng.uniform(0.2, 3, n) if weighted else np.ones(n)
    curve = sweep(y, s, w if weighted else None, higher_is_riskier=higher)
    got = expected_cost(curve, false_positive=2.0, false_negative=30.0, true_positive=1.5,
                        true_negative=-0.25)
    for k, t in enumerate(curve.thresholds):
        tp, fp, fn, tn = _direct_counts(y, s, w, t, higher)
        ref = (30 * fn + 2 * fp + 1.5 * tp - 0.25 * tn) / w.sum()
        assert got[k] == pytest.approx(ref, rel=1e-10, abs=1e-12)


def test_expected_cost_at_a_deployment_prevalence_by_hand():
    # Hand computation on a small table (common practice, no source): 4 events, 6 non-events.
    y = np.array([1, 1, 1, 1, 0, 0, 0, 0, 0, 0], bool)
    s = np.array([0.9, 0.8, 0.4, 0.2, 0.85, 0.5, 0.3, 0.2, 0.1, 0.05])
    curve = sweep(y, s)
    k = curve.index_at(0.5)  # flags 0.9, 0.85, 0.8, 0.5: TPR 2/4, FPR 2/6
    cost = expected_cost(curve, false_positive=1.0, false_negative=10.0, prevalence=0.1)[k]
    assert cost == pytest.approx(10 * 0.1 * 0.5 + 1 * 0.9 * (2 / 6))
    none = expected_cost(curve, false_positive=1.0, false_negative=10.0, prevalence=0.1)[0]
    assert none == pytest.approx(10 * 0.1)


@settings(derandomize=True, deadline=None, max_examples=60)
@given(st.integers(5, 60), st.integers(0, 10_000), st.booleans(), st.floats(0.005, 0.5))
def test_case_dependent_miss_costs(n, seed, weighted, pi):
    # Common practice, no source: each missed event costs its own amount; the mean over
    # events of the missed amounts replaces C_FN (1 - TPR).
    rng = np.random.default_rng(seed)
    y = rng.random(n) < 0.3
    y[:2] = [True, False]
    s = rng.integers(0, 6, n) / 6
    a = rng.integers(1, 1000, n).astype(float)
    w = rng.uniform(0.5, 2, n) if weighted else np.ones(n)
    curve = sweep(y, s, w if weighted else None, event_cost=a)
    got = expected_cost(curve, false_positive=15.0, prevalence=pi)
    for k, t in enumerate(curve.thresholds):
        flagged = s >= t
        missed = (w * a * (y & ~flagged)).sum() / (w * y).sum()
        fpr = (w * (~y & flagged)).sum() / (w * ~y).sum()
        assert got[k] == pytest.approx(pi * missed + 15.0 * (1 - pi) * fpr, rel=1e-10, abs=1e-12)


# ------------------------------------------------------------------ Elkan (IJCAI 2001)

def _calibrated(n, seed):
    rng = np.random.default_rng(seed)
    p = rng.beta(1.0, 6.0, n)
    y = rng.random(n) < p
    return rng, y, np.round(p, 4)


@pytest.mark.parametrize("costs", [(1.0, 9.0, 0.0, 0.0), (2.0, 10.0, 1.0, -0.5), (1.0, 25.0, 0.0, 0.0)])
def test_cost_optimal_threshold_approaches_the_cost_derived_one(costs):
    # Elkan, IJCAI 2001 (from memory): for calibrated probabilities the cost-optimal decision
    # flags p >= (C_FP - C_TN) / ((C_FP - C_TN) + (C_FN - C_TP)).
    fp, fn, tp, tn = costs
    _, y, p = _calibrated(400_000, 11)
    curve = sweep(y, p)
    p_star = cost_derived_threshold(fp, fn, tp, tn)
    cost = expected_cost(curve, false_positive=fp, false_negative=fn, true_positive=tp, true_negative=tn)
    k = int(np.argmin(cost))
    assert abs(curve.thresholds[k] - p_star) < 0.02
    # the cost at p* is within 0.3 % of the empirical minimum
    assert cost[curve.index_at(p_star)] <= cost[k] * 1.003


def test_cost_derived_threshold_formula():
    # Elkan 2001: C_FP / (C_FP + C_FN) with free correct decisions.
    assert cost_derived_threshold(1, 25) == pytest.approx(1 / 26)
    assert cost_derived_threshold(2, 10, 1, -0.5) == pytest.approx(2.5 / (2.5 + 9))
    with pytest.raises(ValueError):
        cost_derived_threshold(1, 1, 2, 0)


@pytest.mark.parametrize("keep", [("nonevents", 0.3), ("events", 0.2)])
def test_prior_shift_correction_holds_on_resampled_data(keep):
    # Elkan 2001, Theorem 2 (from memory): resampling one class changes the base rate from b to b';
    # the calibrated score's cost-optimal cut moves to the prior-shifted threshold.
    which, rate = keep
    rng, y, p = _calibrated(400_000, 5)
    sel = (y | (rng.random(y.shape[0]) < rate)) if which == "nonevents" else \
        (~y | (rng.random(y.shape[0]) < rate))
    b, b2 = y.mean(), y[sel].mean()
    p_star = cost_derived_threshold(1.0, 9.0)
    t_shift = prior_shift_threshold(p_star, b, b2)
    resampled = sweep(y[sel], p[sel])
    cost = expected_cost(resampled, false_positive=1.0, false_negative=9.0)
    t_emp = resampled.thresholds[int(np.argmin(cost))]
    assert abs(t_emp - t_shift) < 0.15 * t_shift
    assert cost[resampled.index_at(t_shift)] <= cost.min() * 1.003
    # the same answer from the original data judged at the deployment prevalence b' (label shift)
    full = sweep(y, p)
    cost_pi = expected_cost(full, false_positive=1.0, false_negative=9.0, prevalence=b2)
    assert abs(full.thresholds[int(np.argmin(cost_pi))] - t_shift) < 0.15 * t_shift


def test_prior_shift_probability_is_an_odds_rescaling():
    # Elkan 2001 (from memory): odds(p') = odds(p) x odds(b') / odds(b); the inverse undoes it.
    p = np.array([0.01, 0.2, 0.5, 0.9])
    q = prior_shift_probability(p, 0.1, 0.02)
    np.testing.assert_allclose(q / (1 - q), p / (1 - p) * (0.02 / 0.98) / (0.1 / 0.9), rtol=1e-12)
    np.testing.assert_allclose(prior_shift_probability(q, 0.02, 0.1), p, rtol=1e-12)
    assert prior_shift_probability(0.1, 0.1, 0.1) == pytest.approx(0.1)


# ------------------------------------------------------------------ Vickers & Elkin (2006)

def _dca_table():
    # 10 events (8 scored 0.6, 2 scored 0.1) and 90 non-events (20 scored 0.3, 70 scored 0.05)
    y = np.r_[np.ones(10, bool), np.zeros(90, bool)]
    s = np.r_[np.full(8, 0.6), np.full(2, 0.1), np.full(20, 0.3), np.full(70, 0.05)]
    return y, s


def test_net_benefit_by_hand():
    # Vickers & Elkin, Med Decis Making 2006 (from memory): NB = TP/n - FP/n x p_t/(1 - p_t);
    # treat all = pi - (1 - pi) p_t/(1 - p_t); treat none = 0.
    y, s = _dca_table()
    dc = decision_curve(sweep(y, s), [0.08, 0.2, 0.5])
    np.testing.assert_allclose(dc["model"], [10 / 100 - 20 / 100 * 0.08 / 0.92,
                                             8 / 100 - 20 / 100 * 0.25, 8 / 100], rtol=1e-12)
    np.testing.assert_allclose(dc["treat_all"], [0.1 - 0.9 * 0.08 / 0.92, 0.1 - 0.9 * 0.25, 0.1 - 0.9],
                               rtol=1e-12)
    assert np.all(dc["treat_none"] == 0)
    assert net_benefit(8, 20, 100, 0.2) == pytest.approx(0.03)
    assert treat_all_net_benefit(0.1, 0.2) == pytest.approx(-0.125)


def test_decision_curve_at_a_deployment_prevalence_uses_normalised_cells():
    y, s = _dca_table()
    dc = decision_curve(sweep(y, s), [0.2], prevalence=0.02)
    assert dc["model"][0] == pytest.approx(0.02 * 0.8 - 0.98 * (20 / 90) * 0.25)
    assert dc["treat_all"][0] == pytest.approx(0.02 - 0.98 * 0.25)
    with pytest.raises(ValueError, match="probability scores"):
        decision_curve(sweep(y, s * 3))
    with pytest.raises(ValueError, match="higher means riskier"):
        decision_curve(sweep(y, s, higher_is_riskier=False))


# ------------------------------------------------------------------ cost-ratio sensitivity

def _brute_best(y, s, ratio, pi=None, candidates=None, higher=True):
    """Cost-optimal point by scanning every threshold: cost = pi r (1 - TPR) + (1 - pi) FPR."""
    curve = sweep(y, s, higher_is_riskier=higher)
    pi = y.mean() if pi is None else pi
    best_k, best_v = None, None
    for k, t in enumerate(curve.thresholds):
        if candidates is not None and k not in candidates:
            continue
        tp, fp, fn, tn = _direct_counts(y, s, np.ones(len(y)), t, higher)
        v = pi * ratio * fn / (tp + fn) + (1 - pi) * fp / (fp + tn)
        if best_v is None or v < best_v - 1e-12 * abs(best_v):
            best_k, best_v = k, v
    return best_k


@settings(derandomize=True, deadline=None, max_examples=40)
@given(st.integers(6, 50), st.integers(0, 10_000), st.one_of(st.none(), st.floats(0.01, 0.5)),
       st.booleans())
def test_sensitivity_grid_equals_a_scan_of_every_threshold(n, seed, pi, higher):
    # Brute force written independently (no outside source); every point is a candidate.
    rng = np.random.default_rng(seed)
    y = rng.random(n) < 0.3
    y[:2] = [True, False]
    s = rng.integers(0, 10, n) / 10
    curve = sweep(y, s, higher_is_riskier=higher)
    ratios = np.array([0.5, 1.0, 3.3, 10.0, 47.0, 1000.0])
    got = cost_ratio_sensitivity(curve, prevalence=pi, ratios=ratios, candidates=np.arange(curve.n_points))
    for r, k in zip(ratios, got["index"]):
        assert k == _brute_best(y, s, r, pi, higher=higher)
    # the event-point search gives the same points
    got2 = cost_ratio_sensitivity(curve, prevalence=pi, ratios=ratios)
    assert list(got2["index"]) == list(got["index"])
    # a dearer miss never asks for fewer flags (common practice, no source)
    assert np.all(np.diff(got["index"]) >= 0)


@settings(derandomize=True, deadline=None, max_examples=40)
@given(st.integers(6, 40), st.integers(0, 10_000), st.data())
def test_implied_cost_ratio_is_where_the_point_is_optimal(n, seed, data):
    # Brute force over ratios (no outside source): inside the range the point is the optimum,
    # outside it is not; None means no ratio on a fine grid makes it optimal.
    rng = np.random.default_rng(seed)
    y = rng.random(n) < 0.3
    y[:2] = [True, False]
    s = rng.integers(0, 12, n) / 12
    curve = sweep(y, s)
    k = data.draw(st.integers(0, curve.n_points - 1))
    rng_ = implied_cost_ratio(curve, k)
    grid = np.geomspace(1e-3, 1e4, 300)
    if rng_ is None:
        assert all(_brute_best(y, s, r) != k for r in grid)
        return
    lo, hi = rng_
    assert 0 <= lo <= hi
    inside = [r for r in grid if lo * (1 + 1e-6) < r < hi * (1 - 1e-6)]
    outside = [r for r in grid if r < lo * (1 - 1e-6) or r > hi * (1 + 1e-6)]
    assert all(_brute_best(y, s, r) == k for r in inside)
    assert all(_brute_best(y, s, r) != k for r in outside)
    if np.isfinite(hi) and lo < hi:
        assert _brute_best(y, s, np.sqrt(max(lo, 1e-9) * hi)) == k


def test_cost_ratio_grid():
    g = cost_ratio_grid()
    assert g[0] == pytest.approx(1) and g[-1] == pytest.approx(1000) and len(g) == 31
    np.testing.assert_allclose(np.diff(np.log10(g)), 0.1)
