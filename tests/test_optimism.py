"""Optimism of the chosen threshold: cross-fitting and Harrell's correction.

Sources named beside each check:
* simulation from a known population (binormal scores: non-events N(0, 1),
  events N(1.5, 1), prevalence 2 %), so the population recall at any
  threshold t is 1 - Phi(t - 1.5) exactly (common practice, no source);
* Harrell, Lee & Mark, Stat Med 1996 (from memory): corrected = apparent -
  mean(bootstrap apparent - bootstrap test).

Tolerance of the simulation (200 validation sets of 2,000 / 5,000 / 10,000
cases holding exactly 40 / 100 / 200 events): the mean of (apparent - population) recall
is positive, above 0.005 and above 3 standard errors; the mean of (cross-fitted -
population) lies within +/-0.015; the mean of (corrected - population) within
+/-0.02 and closer to 0 than the apparent bias. (Measured with these seeds:
apparent +0.010 / +0.034, cross-fitted -0.003 / -0.008, corrected -0.005 / +0.007
for "recall at least 0.8" / lowest cost.)
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy import stats

from core import sweep
from core.choose import choose
from core.dataset import Dataset
from core.errors import InputError
from core.optimism import (
    QUANTITIES,
    _split_counts,
    _stratified_folds,
    cross_fit,
    harrell_correction,
    optimism,
)
from core.policy import Costs, Deployment, Objective, Policy, Rules

MU = 1.5
PREV = 0.02


def _sample(rng, n, events=None):
    if events is None:
        y = rng.random(n) < PREV
        y[:2] = [True, False]
    else:  # exactly this many events
        y = np.zeros(n, dtype=bool)
        y[rng.choice(n, events, replace=False)] = True
    return y, rng.normal(MU * y, 1.0)


@pytest.mark.slow
@pytest.mark.parametrize("policy", [
    Policy(objective=Objective("max_precision"), rules=Rules(min_recall=0.8)),
    Policy(objective=Objective("min_cost"), costs=Costs(false_positive=1.0, false_negative=40.0)),
], ids=["recall_at_least_0.8", "min_cost"])
def test_apparent_recall_is_optimistic_cross_fit_and_correction_are_not(policy):
    # Source: simulation from a known binormal population (common practice, no source);
    # Harrell, Lee & Mark 1996 for the correction (from memory).
    rng = np.random.default_rng(20260101)
    rows = []
    for sim in range(200):
        m = int(rng.choice([40, 100, 200]))
        y, s = _sample(rng, int(m / PREV), events=m)
        ds = Dataset.from_arrays(y, s)
        ch = choose(ds, policy)
        t = ch.point.threshold
        population = 1.0 - stats.norm.cdf(t - MU)
        apparent = ch.point.validation["recall"]
        cf = cross_fit(ds, policy, k=5, seed=sim).values["recall"]
        hc = harrell_correction(ds, policy, n_replicates=200, seed=sim).corrected["recall"]
        rows.append((y.sum(), apparent - population, cf - population, hc - population))
    r = np.array(rows)
    assert r[:, 0].min() == 40 and r[:, 0].max() == 200
    bias = r[:, 1:].mean(axis=0)
    se = r[:, 1:].std(axis=0) / np.sqrt(len(r))
    assert bias[0] > 0.005 and bias[0] > 3 * se[0], bias
    assert abs(bias[1]) < 0.015, bias
    assert abs(bias[2]) < 0.02 and abs(bias[2]) < bias[0], bias


def test_every_case_is_held_out_exactly_once():
    # Cross-fitting pools the held-out folds: their counts add up to the data's.
    rng = np.random.default_rng(1)
    y, s = _sample(rng, 5000)
    ds = Dataset.from_arrays(y, s)
    pol = Policy(objective=Objective("max_precision"), rules=Rules(min_recall=0.7))
    cf = cross_fit(ds, pol, k=5, seed=3)
    c = ds.curve()
    assert cf.counts["tp"] + cf.counts["fn"] == c.n_events
    assert cf.counts["fp"] + cf.counts["tn"] == c.n_nonevents
    assert len(cf.thresholds) == 5 and cf.n_infeasible_folds == 0
    assert cf.values["recall"] == pytest.approx(cf.counts["tp"] / c.n_events)
    # the same seed gives the same folds and result; another seed another one
    assert cross_fit(ds, pol, k=5, seed=3) == cf
    assert cross_fit(ds, pol, k=5, seed=4).thresholds != cf.thresholds


def test_folds_are_stratified():
    y = np.zeros(1003, dtype=bool)
    y[:57] = True
    fold = _stratified_folds(y, 5, np.random.default_rng(0))
    ev = np.bincount(fold[y], minlength=5)
    ne = np.bincount(fold[~y], minlength=5)
    assert ev.max() - ev.min() <= 1 and ne.max() - ne.min() <= 1
    assert ev.sum() == 57 and ne.sum() == 946
    # a count table's cells split into folds of the same sizes
    counts = np.array([3, 0, 10, 1, 200, 7])
    parts = _split_counts(counts, 4, np.random.default_rng(1))
    np.testing.assert_array_equal(parts.sum(axis=0), counts)
    sizes = parts.sum(axis=1)
    assert sizes.max() - sizes.min() <= 1


def test_count_table_cross_fit_matches_rows_in_distribution():
    # The hypergeometric split of a count table is a random stratified split of its
    # cases: mean out-of-fold recall over seeds agrees with the row split (4 SE).
    rng = np.random.default_rng(2)
    y, s = _sample(rng, 4000)
    s = np.round(s, 1)
    ds = Dataset.from_arrays(y, s)
    c = ds.curve()
    pol = Policy(objective=Objective("min_cost"), costs=Costs(false_positive=1.0, false_negative=30.0))
    a = np.array([cross_fit(ds, pol, seed=i).values["recall"] for i in range(60)])
    b = np.array([cross_fit(c, pol, seed=i).values["recall"] for i in range(60)])
    se = np.sqrt(a.var() / a.size + b.var() / b.size)
    assert abs(a.mean() - b.mean()) <= 4 * se + 1e-12


def test_harrell_reuses_the_stability_replicates():
    from core.stability import threshold_stability

    rng = np.random.default_rng(3)
    y, s = _sample(rng, 3000)
    c = sweep(y, s)
    pol = Policy(objective=Objective("max_fbeta", beta=2.0))
    st = threshold_stability(c, pol, n_replicates=150, seed=5)
    a = harrell_correction(c, pol, stability=st)
    b = harrell_correction(c, pol, n_replicates=150, seed=5)
    assert a.to_dict() == b.to_dict()
    used = st.columns >= 0
    opt = np.mean(st.apparent["recall"][used] - st.on_data["recall"][used])
    assert a.optimism["recall"] == pytest.approx(opt)
    assert a.corrected["recall"] == pytest.approx(st.data_values["recall"] - opt)
    assert set(a.corrected) == set(QUANTITIES)


def test_optimism_report_states_the_origin():
    rng = np.random.default_rng(4)
    y, s = _sample(rng, 3000)
    ds = Dataset.from_arrays(y, s)
    pol = Policy(objective=Objective("min_cost"), costs=Costs(false_positive=1.0, false_negative=25.0),
                 deployment=Deployment(prevalence=0.01))
    derived = optimism(ds, pol, n_replicates=100)
    assert derived.threshold_origin == "derived" and "derived" in derived.statement
    tab = {r["quantity"]: r for r in derived.table()}
    assert np.isfinite(tab["cost"]["cross_fitted"]) and np.isfinite(tab["cost"]["corrected"])
    fixed = optimism(ds, pol, threshold=1.0, n_replicates=100)
    assert fixed.threshold_origin == "pre-specified" and "pre-specified" in fixed.statement
    assert fixed.cross_fit is None and fixed.harrell is None
    for r in fixed.table():
        assert r["apparent"] == r["cross_fitted"] == r["corrected"]
    d = derived.to_dict()
    assert d["threshold_origin"] == "derived" and len(d["table"]) == len(QUANTITIES)


def test_cross_fit_refuses_too_few_events():
    y = np.zeros(200, dtype=bool)
    y[:3] = True
    s = np.linspace(0, 1, 200)
    pol = Policy(objective=Objective("max_youden"))
    with pytest.raises(InputError, match="at least 5 events"):
        cross_fit(Dataset.from_arrays(y, s), pol, k=5)
    with pytest.raises(InputError, match="at least 2"):
        cross_fit(Dataset.from_arrays(y, s), pol, k=1)


def test_capacity_quantile_policy_cross_fits_on_row_subsets():
    # A capacity-quantile rule needs score times: each training fold is swept as rows,
    # with the full data's cases per period (a fold holds fewer cases per period).
    rng = np.random.default_rng(6)
    y, s = _sample(rng, 6000)
    t = np.datetime64("2025-01-01") + (rng.integers(0, 60 * 24, y.size) * 60).astype("timedelta64[m]")
    ds = Dataset.from_arrays(y, np.round(s, 2), score_time=t)
    pol = Policy(objective=Objective("max_recall"),
                 rules=Rules(max_flagged_per_period=25.0, capacity_quantile=0.9))
    cf = cross_fit(ds, pol, k=4, seed=1)
    c = ds.curve()
    assert cf.counts["tp"] + cf.counts["fn"] == c.n_events
    assert cf.counts["fp"] + cf.counts["tn"] == c.n_nonevents
    full = choose(ds, pol).point.threshold
    # folds choose near the full-data limit (the same volume per period) ...
    assert all(abs(th - full) <= 0.05 for th in cf.thresholds)
    # ... where a fold resolved on its own 3/4 of the cases per period flags far more
    fold = _stratified_folds(ds.y_true, 4, np.random.default_rng(1))
    naive = [choose(ds.subset(fold != j), pol).point.threshold for j in range(4)]
    assert all(full - th > 0.1 for th in naive)


def test_cross_fitting_keeps_clusters_whole():
    # Common practice, no source: with repeated cases, folds must split patients, not rows.
    import numpy as np

    from core.bootstrap import event_cells
    from core.dataset import Dataset
    from core.optimism import _fold_cells

    rng = np.random.default_rng(8)
    n_clusters, size = 400, 5
    cl = np.repeat(np.arange(n_clusters), size)
    y = rng.random(cl.size) < 0.1
    s = rng.normal(y * 1.0, 1.0)
    ds = Dataset.from_arrays(y, s, cluster=cl.astype(str))
    _, fold = _fold_cells(ds, event_cells(ds), 5, 0)
    per_cluster = [np.unique(fold[cl == c]).size for c in range(n_clusters)]
    assert max(per_cluster) == 1
    assert np.bincount(fold).min() >= 0.15 * cl.size  # folds stay balanced
