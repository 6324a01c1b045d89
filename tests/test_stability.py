"""Threshold stability: the vectorised replicate choice against choose() itself.

Sources named beside each check:
* :func:`core.choose.choose` on each replicate's own curve is the reference
  for the vectorised chooser (identity, replicate by replicate);
* the row bootstrap (Efron & Tibshirani 1993, from memory) with
  ``choose(sweep(rows))`` per replicate is the reference for the distribution
  of the chosen threshold (KS p > 0.001, 2,000 replicates each).
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy import stats

from core import sweep
from core.bootstrap import bootstrap_counts, event_cells
from core.choose import choose
from core.dataset import Dataset
from core.policy import Costs, Deployment, Objective, Policy, Rules
from core.stability import ReplicateChooser, threshold_stability


def _data(seed=0, n=2500, prevalence=0.04, decimals=1, shift=1.3):
    rng = np.random.default_rng(seed)
    y = rng.random(n) < prevalence
    y[:2] = [True, False]
    s = rng.normal(shift * y, 1.0)
    if decimals is not None:
        s = np.round(s, decimals)
    return y, s


POLICIES = {
    "cost": Policy(objective=Objective("min_cost"), costs=Costs(false_positive=1.0, false_negative=30.0)),
    "cost_tp_tn_prev": Policy(objective=Objective("min_cost"),
                              costs=Costs(false_positive=2.0, false_negative=50.0, true_positive=1.0,
                                          true_negative=0.5),
                              deployment=Deployment(prevalence=0.01)),
    "recall_rule": Policy(objective=Objective("max_precision"), rules=Rules(min_recall=0.7)),
    "recall_rule_conf": Policy(objective=Objective("max_precision"),
                               rules=Rules(min_recall=0.6, confidence=0.9)),
    "precision_rule_conf": Policy(objective=Objective("max_recall"),
                                  rules=Rules(min_precision=0.08, confidence=0.95)),
    "flag_rate_conf": Policy(objective=Objective("max_recall"),
                             rules=Rules(max_flag_rate=0.08, min_specificity=0.9, confidence=0.95),
                             deployment=Deployment(prevalence=0.02)),
    "per_period": Policy(objective=Objective("max_fbeta", beta=2.0),
                         rules=Rules(max_flagged_per_period=30.0, confidence=0.8),
                         deployment=Deployment(cases_per_period=400.0)),
    "net_benefit": Policy(objective=Objective("max_net_benefit", threshold_probability=0.05)),
    "youden": Policy(objective=Objective("max_youden"), rules=Rules(min_recall=0.5)),
}


def _thr(cells, col):
    if col < 0:
        return None
    return float(cells.curve.thresholds[0]) if col == 0 else float(cells.thresholds[col - 1])


def _check_identity(data, policy, *, design="cohort", n_rep=120, seed=1):
    """Chooser vs choose() on each replicate's curve; returns the number of replicates."""
    cells = event_cells(data)
    chooser = ReplicateChooser(cells, policy, data)
    wk = cells.weight_kind
    n = 0
    for ch in bootstrap_counts(cells, n_rep, seed, design, chunk=40):
        tp, fp = ch.cumulative()
        cols = chooser.choose(tp, fp, cost_cum=ch.cumulative_cost(),
                              sq=ch.cumulative_sq() if ch.events_sq is not None else None,
                              events=ch.events)
        for i in range(ch.n):
            rc = cells.to_curve(ch.events[i], ch.non_events[i],
                                event_cost=None if ch.event_cost is None else ch.event_cost[i],
                                events_sq=None if ch.events_sq is None else ch.events_sq[i],
                                non_events_sq=None if ch.non_events_sq is None else ch.non_events_sq[i])
            ref = choose(rc, policy, weight_kind=wk)
            want = None if ref.point is None else float(ref.point.threshold)
            assert _thr(cells, cols[i]) == want, (policy, i)
            n += 1
    return n


@pytest.mark.parametrize("name", list(POLICIES))
def test_vectorised_choice_equals_choose_on_every_replicate(name):
    # Source: core.choose.choose on the replicate's own curve (the reference implementation).
    y, s = _data(1)
    assert _check_identity(sweep(y, s), POLICIES[name]) == 120


@pytest.mark.parametrize("name", ["cost", "precision_rule_conf", "per_period"])
def test_identity_case_control_and_lower_is_riskier(name):
    # Source: core.choose.choose on the replicate's own curve.
    y, s = _data(2)
    _check_identity(sweep(y, -s, higher_is_riskier=False), POLICIES[name], design="case-control")


def test_identity_with_per_case_costs_and_weights():
    # Source: core.choose.choose on the replicate's own curve.
    rng = np.random.default_rng(3)
    y, s = _data(3, n=1500, prevalence=0.06)
    amount = np.round(rng.lognormal(4, 1, y.size), 2)
    pol = Policy(objective=Objective("min_cost"),
                 costs=Costs(false_positive=5.0, false_negative_column="case_cost"))
    _check_identity(Dataset.from_arrays(y, s, case_cost=amount), pol)
    w = rng.integers(1, 4, y.size)
    _check_identity(Dataset.from_arrays(y, s, w, weight_kind="frequency"), POLICIES["recall_rule_conf"])
    ws = rng.uniform(0.5, 2.0, y.size)
    # sampling weights from the curve: moment-matched cells, Kish sizes from the replicate
    _check_identity(sweep(y, s, ws), POLICIES["recall_rule_conf"], n_rep=60)


@pytest.mark.slow
def test_chosen_threshold_distribution_equals_row_resampling():
    # Source: row bootstrap (Efron & Tibshirani 1993) with choose(sweep(rows)) per replicate.
    y, s = _data(4, n=600, prevalence=0.08, decimals=1)
    pol = POLICIES["cost"]
    st = threshold_stability(sweep(y, s), pol, n_replicates=2000, seed=2)
    g = np.random.default_rng(7)
    ref = []
    for _ in range(2000):
        idx = g.integers(0, y.size, y.size)
        ch = choose(sweep(y[idx], s[idx]), pol)
        ref.append(np.nan if ch.point is None else ch.point.threshold)
    ref = np.array(ref)
    ours = st.chosen
    assert stats.ks_2samp(ours[np.isfinite(ours)], ref[np.isfinite(ref)]).pvalue > 1e-3
    # the share landing on the data's own point agrees within 4 standard errors
    same_ref = np.mean(ref == st.threshold)
    se = np.sqrt(2 * same_ref * (1 - same_ref) / 2000)
    assert abs(st.share_same - same_ref) <= 4 * se


def test_stability_summary_means_what_it_says():
    # Common practice, no source: more events pin the chosen point down more firmly.
    pol = POLICIES["recall_rule"]
    small = threshold_stability(sweep(*_data(5, n=1500, decimals=2)), pol, n_replicates=400, seed=0)
    large = threshold_stability(sweep(*_data(5, n=40000, decimals=2)), pol, n_replicates=400, seed=0)
    for st in (small, large):
        assert 0.0 <= st.share_same <= st.share_within_one <= 1.0
        lo, hi = st.threshold_range
        assert lo <= st.threshold <= hi
        sp = st.spread["apparent"]["recall"]
        assert sp["low"] <= sp["median"] <= sp["high"]
        assert st.data_values["recall"] >= 0.7
        assert np.all(st.apparent["recall"][st.columns >= 0] >= 0.7 - 1e-12)  # the rule holds
    assert (large.threshold_range[1] - large.threshold_range[0]
            < small.threshold_range[1] - small.threshold_range[0])
    def width(st):
        sp = st.spread["on_data"]["recall"]
        return sp["high"] - sp["low"]

    assert width(large) < width(small)
    d = small.to_dict()
    assert d["share_same_point"] == small.share_same
    assert sum(d["chosen_threshold_counts"].values()) == 400


def test_infeasible_replicates_are_counted():
    # A rule that the data only just meet fails in some replicates.
    y, s = _data(6, n=3000, prevalence=0.03, decimals=1)
    c = sweep(y, s)
    best_prec = np.nanmax(np.where(c.event_point_mask & (c.tp >= 5), c.precision, np.nan))
    pol = Policy(objective=Objective("max_recall"), rules=Rules(min_precision=float(best_prec) * 0.98))
    st = threshold_stability(c, pol, n_replicates=300, seed=1)
    assert 0 < st.n_infeasible < 300
    assert np.isnan(st.chosen[st.columns < 0]).all()


def test_chunking_changes_nothing():
    y, s = _data(7)
    c = sweep(y, s)
    a = threshold_stability(c, POLICIES["cost"], n_replicates=90, seed=4)
    b = threshold_stability(c, POLICIES["cost"], n_replicates=90, seed=4, chunk=7)
    np.testing.assert_array_equal(a.columns, b.columns)
    assert a.to_dict() == b.to_dict()


def test_capacity_quantile_is_held_at_the_full_data_limit():
    # The capacity-quantile rule needs score times: not resampled, said in the notes.
    rng = np.random.default_rng(8)
    y, s = _data(8, n=3000, prevalence=0.05, decimals=2)
    t = np.datetime64("2025-01-01") + rng.integers(0, 60 * 24, y.size).astype("timedelta64[m]") * 60
    ds = Dataset.from_arrays(y, s, score_time=t)
    pol = Policy(objective=Objective("max_recall"),
                 rules=Rules(max_flagged_per_period=30.0, capacity_quantile=0.9))
    st = threshold_stability(ds, pol, n_replicates=200, seed=0)
    assert any("capacity" in n for n in st.notes)
    full = choose(ds, pol)
    # no replicate chooses a looser point than the full-data capacity allows
    cells = event_cells(ds)
    limit_col = max(c for c in range(cells.n_cells + 1)
                    if c == 0 or cells.thresholds[c - 1] >= full.point.threshold)
    assert st.columns.max() <= limit_col


@pytest.mark.parametrize("window", [1, 3, 256])
@pytest.mark.parametrize("rising", [True, False])
def test_wilson_rule_edge_equals_evaluating_every_column(monkeypatch, window, rising):
    # Source: core.intervals.wilson_interval evaluated at every column (the reference);
    # small windows force the binary-search fallbacks on both sides.
    import core.stability as stab
    from core.intervals import wilson_interval

    monkeypatch.setattr(stab, "_WINDOW", window)
    rng = np.random.default_rng(window)
    R, K = 40, 300
    steps = rng.integers(0, 3, (R, K)).astype(float)
    n = rng.integers(50, 400, R).astype(float)
    rate = np.cumsum(steps, axis=1) / np.cumsum(steps, axis=1)[:, -1:]
    if not rising:
        rate = 1.0 - rate
    for floor in (0.0, 0.3, 0.7, 0.95, 1.0):
        value_met = rate >= floor
        lo = wilson_interval(rate * n[:, None], np.broadcast_to(n[:, None], rate.shape), 0.9,
                             sided="lower")[0]
        want = value_met & (lo >= floor)
        got = value_met & stab._wilson_bound_met(rate, n, 0.9, floor, value_met, rising=rising)
        np.testing.assert_array_equal(got, want)


WINDOW_POLICIES = {
    "recall_floor": Policy(objective=Objective("max_precision"), rules=Rules(min_recall=0.8)),
    "recall_floor_conf": Policy(objective=Objective("max_fbeta", beta=1.0),
                                rules=Rules(min_recall=0.9, confidence=0.95)),
    "recall_one": Policy(objective=Objective("max_precision"), rules=Rules(min_recall=1.0)),
    "specificity_floor": Policy(objective=Objective("max_recall"),
                                rules=Rules(min_specificity=0.97)),
    "both": Policy(objective=Objective("min_cost"),
                   costs=Costs(false_positive=1.0, false_negative=40.0),
                   rules=Rules(min_recall=0.5, min_specificity=0.9, confidence=0.9)),
    "tight": Policy(objective=Objective("max_youden"),
                    rules=Rules(min_recall=0.95, min_specificity=0.95)),
}


@pytest.mark.parametrize("name", list(WINDOW_POLICIES))
@pytest.mark.parametrize("decimals", [None, 2])
def test_candidate_window_changes_no_choice(monkeypatch, name, decimals):
    # Source: the same chooser evaluating every candidate (itself checked against
    # core.choose.choose above) -- the window only skips candidates no replicate can use.
    y, s = _data(7, n=4000, prevalence=0.05, decimals=decimals)
    c = sweep(y, s)
    cells = event_cells(c)
    chooser = ReplicateChooser(cells, WINDOW_POLICIES[name], c)
    got, full = [], []
    for ch in bootstrap_counts(cells, 150, 3, chunk=50):
        tp, fp = ch.cumulative()
        got.append(chooser.choose(tp, fp, events=ch.events))
        with monkeypatch.context() as m:
            m.setattr(ReplicateChooser, "_window", lambda self, *a: None)
            full.append(chooser.choose(tp, fp, events=ch.events))
    got, full = np.concatenate(got), np.concatenate(full)
    np.testing.assert_array_equal(got, full)
    sel = chooser._window(tp, fp, tp[:, -1], fp[:, -1], np.zeros(tp.shape[0], dtype=bool))
    if name in ("recall_floor", "specificity_floor", "tight"):
        assert sel is not None and sel.size < chooser.cand_cols.size  # the window is used
