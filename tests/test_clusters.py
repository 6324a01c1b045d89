"""Repeated cases: cluster codes, the cluster bootstrap, design effects, patient-level counts."""

import json

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm
from scipy.stats import norm
from statsmodels.stats.proportion import proportion_confint

from core.bootstrap import bootstrap, event_cells, percentile_interval
from core.clusters import (
    COUNT_TABLE_NO_CLUSTERS,
    ClusterBootstrapResult,
    cluster_bootstrap,
    cluster_bootstrap_counts,
    cluster_codes,
    cluster_draws,
    cluster_metric_intervals,
    cluster_statement,
    cluster_summary,
    ratio_design_effect,
    resample_cluster_sums,
    uses_cluster_bootstrap,
)
from core.dataset import Dataset
from core.errors import InputError


def _clustered(k=300, m=5, seed=0, su=1.0, weights=False, costs=False):
    g = np.random.default_rng(seed)
    cl = np.repeat(np.arange(k), m)
    u = np.repeat(g.normal(0, su, k), m)
    y = g.random(k * m) < 0.2
    s = np.round(1 / (1 + np.exp(-(u + g.normal(0, 0.8, k * m) + 1.3 * y - 1.5))), 3)
    w = g.integers(1, 4, k * m).astype(float) if weights else None
    cc = np.where(y, g.uniform(10, 100, k * m), np.nan) if costs else None
    ids = np.array([f"P{c:04d}" for c in range(k)])[cl]
    return y, s, ids, w, cc


# ------------------------------------------------------------------ codes and draws

def test_cluster_codes_and_their_errors():
    codes, K = cluster_codes(np.array(["b", "a", "b", "c"], dtype=object))
    assert K == 3 and codes.tolist() == [0, 1, 0, 2]
    with pytest.raises(InputError, match="rows without a cluster id") as e:
        cluster_codes(np.array(["a", None, "b", None], dtype=object))
    assert e.value.rows == (2, 4)
    ct = Dataset.from_count_table([0.1, 0.5, 0.9], [1, 2, 5], [50, 20, 3])
    with pytest.raises(InputError) as e:
        cluster_codes(ct)
    assert COUNT_TABLE_NO_CLUSTERS in str(e.value)
    y, s, _, _, _ = _clustered(k=20)
    with pytest.raises(InputError, match="no cluster column"):
        cluster_codes(Dataset.from_arrays(y, s))
    with pytest.raises(InputError, match="count table"):
        cluster_summary(ct, 0.5)


def test_draws_are_per_replicate_multinomials():
    # Replicate r uses default_rng([seed, r]) alone: K uniform draws of a cluster (brief).
    D = cluster_draws(50, 7, 3, 9)
    assert D.shape == (6, 50) and np.all(D.sum(axis=1) == 50)
    g = np.random.default_rng([7, 5])
    np.testing.assert_array_equal(D[2], np.bincount(g.integers(0, 50, 50), minlength=50))
    M = np.random.default_rng(1).random((50, 4))
    a = np.vstack([s for _, _, s in resample_cluster_sums(M, 40, 7, chunk=7)])
    b = np.vstack([s for _, _, s in resample_cluster_sums(M, 40, 7)])
    np.testing.assert_allclose(a, b, rtol=1e-13)
    np.testing.assert_allclose(a[3:9], cluster_draws(50, 7, 3, 9) @ M, rtol=1e-13)


@pytest.mark.parametrize("weights,costs", [(False, False), (True, False), (False, True)])
def test_replicate_cells_equal_resampling_whole_clusters_of_rows(weights, costs):
    # Exactness: a replicate's cell counts are those of the rows of the drawn clusters
    # (each drawn copy with all its rows), recomputed by repeating rows (definition).
    y, s, ids, w, cc = _clustered(k=60, m=4, seed=2, weights=weights, costs=costs)
    ds = Dataset.from_arrays(y, s, w, weight_kind="frequency" if weights else None, cluster=ids,
                             case_cost=cc)
    cells = event_cells(ds, thresholds=(0.4,))
    codes, K = cluster_codes(ds)
    chunks = list(cluster_bootstrap_counts(ds, cells, 12, seed=5, chunk=5))
    D = cluster_draws(K, 5, 0, 12)
    row_cell = cells.cell_of(s)
    ww = np.ones(y.shape[0]) if w is None else w
    for ch in chunks:
        for i, r in enumerate(range(ch.start, ch.stop)):
            times = D[r][codes]  # how often each row's cluster was drawn
            ev = np.bincount(row_cell, weights=times * ww * y, minlength=cells.n_cells)
            ne = np.bincount(row_cell, weights=times * ww * ~y, minlength=cells.n_cells)
            np.testing.assert_allclose(ch.events[i], ev, rtol=1e-12)
            np.testing.assert_allclose(ch.non_events[i], ne, rtol=1e-12)
            if costs:
                k_ = np.bincount(row_cell[y], weights=(times * ww * cc)[y],
                                 minlength=cells.n_cells)
                np.testing.assert_allclose(ch.event_cost[i], k_, rtol=1e-12)


def test_sampling_weights_carry_squared_weights():
    y, s, ids, _, _ = _clustered(k=40, m=3, seed=3)
    w = np.random.default_rng(2).uniform(0.5, 2.0, y.shape[0])
    ds = Dataset.from_arrays(y, s, w, weight_kind="sampling", cluster=ids)
    cells = event_cells(ds)
    ch = next(cluster_bootstrap_counts(ds, cells, 4, seed=1))
    codes, K = cluster_codes(ds)
    times = cluster_draws(K, 1, 0, 1)[0][codes]
    rc = cells.cell_of(s)
    np.testing.assert_allclose(ch.events_sq[0],
                               np.bincount(rc, weights=times * w * w * y, minlength=cells.n_cells))


# ------------------------------------------------------------------ the bootstrap result

def test_cluster_bootstrap_result_works_with_the_evidence_helpers():
    from core.uncertainty import bootstrap_intervals

    y, s, ids, _, _ = _clustered(seed=4)
    ds = Dataset.from_arrays(y, s, cluster=ids)
    t = 0.4
    res = cluster_bootstrap(ds, n_replicates=300, seed=2, thresholds=(t,),
                            costs={"false_positive": 1.0, "false_negative": 10.0},
                            cases_per_period=100.0)
    assert isinstance(res, ClusterBootstrapResult) and res.n_clusters == 300
    assert "cluster bootstrap" in res.describe()
    ivs = {i.metric: i for i in bootstrap_intervals(res, t)}
    assert ivs["recall"].low < ivs["recall"].estimate < ivs["recall"].high
    assert "cost" in ivs and "flagged_per_period" in ivs
    _, lo, hi = res.band("pr")
    assert np.all(lo[np.isfinite(lo)] <= hi[np.isfinite(lo)])
    # the same statistics as the cell bootstrap would compute from these replicate counts
    ch = next(cluster_bootstrap_counts(ds, res.cells, 300, seed=2))
    tp, fp = ch.cumulative()
    from core.bootstrap import roc_auc

    np.testing.assert_allclose(res.roc_auc[:ch.n], roc_auc(tp, fp, res.cells.steps), rtol=1e-12)
    with pytest.raises(InputError, match="cohort"):
        cluster_bootstrap(ds, design="case-control")


def test_singleton_clusters_agree_with_the_row_bootstrap():
    # With one row per cluster, resampling clusters is resampling rows: the percentile
    # intervals agree with the exact cell bootstrap up to Monte Carlo error (Efron &
    # Tibshirani 1993).
    g = np.random.default_rng(5)
    n = 3000
    y = g.random(n) < 0.1
    s = np.round(1 / (1 + np.exp(-(g.normal(0, 1, n) + 1.5 * y - 2))), 3)
    ds = Dataset.from_arrays(y, s, cluster=np.arange(n).astype(str))
    a = cluster_bootstrap(ds, n_replicates=2000, seed=1, thresholds=(0.3,))
    b = bootstrap(ds, n_replicates=2000, seed=1, thresholds=(0.3,))
    for m in ("recall", "precision"):
        la, ha = percentile_interval(a.metric_at(0.3, m))
        lb, hb = percentile_interval(b.metric_at(0.3, m))
        assert la == pytest.approx(lb, abs=0.015) and ha == pytest.approx(hb, abs=0.015)
    assert percentile_interval(a.roc_auc) == pytest.approx(percentile_interval(b.roc_auc),
                                                           abs=0.006)


def test_threshold_stability_runs_on_cluster_replicates():
    # The hook for the Evidence: the stability collector takes cluster chunks unchanged.
    from core.choose import choose
    from core.policy import Objective, Policy, Rules
    from core.stability import ReplicateChooser, StabilityCollector, _summarise, data_choice_column

    y, s, ids, _, _ = _clustered(seed=6)
    ds = Dataset.from_arrays(y, s, cluster=ids)
    pol = Policy(objective=Objective(kind="max_precision"), rules=Rules(min_recall=0.6))
    cells = event_cells(ds)
    coll = StabilityCollector(ReplicateChooser(cells, pol, ds), 200)
    cluster_bootstrap(ds, n_replicates=200, seed=0, collectors=(coll,), cells=cells)
    stab = _summarise(coll, cells, data_choice_column(cells, choose(ds, pol)), seed=0,
                      design="cohort", notes=[])
    assert 0.0 < stab.share_within_one <= 1.0
    assert np.isfinite(stab.chosen).mean() > 0.9


# ------------------------------------------------------------------ design effect

def test_design_effect_of_a_proportion_matches_cluster_robust_ols():
    # Reference: statsmodels OLS of the indicator on a constant with cov_type="cluster"
    # (the linearisation variance of the ratio, with K/(K-1)); Kish 1965 for the ratio.
    y, s, ids, _, _ = _clustered(k=200, m=6, seed=7)
    codes, K = cluster_codes(ids)
    de = ratio_design_effect(y.astype(float), np.ones(y.shape[0]), codes, K)
    ols = sm.OLS(y.astype(float), np.ones((y.shape[0], 1))).fit(
        cov_type="cluster", cov_kwds={"groups": codes})
    assert de["variance"] == pytest.approx(ols.bse[0] ** 2, rel=1e-10)
    p = y.mean()
    assert de["design_effect"] == pytest.approx(ols.bse[0] ** 2 / (p * (1 - p) / y.shape[0]),
                                                rel=1e-10)
    # recall: the ratio over event rows is the constant-only regression on those rows
    f = (s >= 0.4).astype(float)
    ev = y
    dr = ratio_design_effect(f * ev, ev.astype(float), codes, K)
    ols = sm.OLS(f[ev], np.ones((ev.sum(), 1))).fit(cov_type="cluster",
                                                    cov_kwds={"groups": codes[ev]})
    assert dr["variance"] == pytest.approx(ols.bse[0] ** 2, rel=1e-10)


def test_design_effect_without_clustering_is_n_over_n_minus_1():
    # Each row its own cluster: V = p(1-p)/(n-1), so deff = n/(n-1) (algebra of the formula).
    g = np.random.default_rng(8)
    y = g.random(500) < 0.3
    de = ratio_design_effect(y.astype(float), np.ones(500), np.arange(500), 500)
    assert de["design_effect"] == pytest.approx(500 / 499, rel=1e-12)
    assert np.isnan(de["icc"])  # m = 1: no correlation to speak of


def test_design_effect_by_strata_equals_separate_calls():
    y, s, ids, _, _ = _clustered(k=100, m=4, seed=9)
    codes, K = cluster_codes(ids)
    strata = (s > 0.3).astype(np.int64)
    both = ratio_design_effect(y.astype(float), np.ones(y.shape[0]), codes, K, strata=strata,
                               n_strata=2)
    for j in (0, 1):
        m = strata == j
        one = ratio_design_effect(y[m].astype(float), np.ones(m.sum()), codes[m], K)
        assert both["design_effect"][j] == pytest.approx(one["design_effect"], rel=1e-12)


# ------------------------------------------------------------------ intervals and coverage

def test_naive_intervals_are_wilson_and_clustering_widens():
    # Reference: statsmodels proportion_confint(method="wilson") for the naive interval.
    y, s, ids, _, _ = _clustered(k=200, m=10, seed=10, su=1.5)
    out = {m.metric: m for m in cluster_metric_intervals(y, s, ids, 0.4, n_replicates=500,
                                                         seed=1)}
    f = s >= 0.4
    r = out["recall"]
    lo, hi = proportion_confint((f & y).sum(), y.sum(), method="wilson")
    assert (r.naive_low, r.naive_high) == pytest.approx((lo, hi), rel=1e-12)
    fr = out["flag_rate"]
    assert fr.design_effect > 2 and fr.design_effect_bootstrap > 2
    assert (fr.high - fr.low) > 1.3 * (fr.naive_high - fr.naive_low)
    assert fr.effective_size == pytest.approx(fr.trials / fr.design_effect)


@pytest.mark.slow
def test_cluster_bootstrap_restores_coverage_with_30_rows_per_cluster():
    # Seeded simulation (common practice, no source; resampling clusters: Davison & Hinkley
    # 1997, from memory): 100 clusters of 30 rows, a cluster effect on the score, 500 data
    # sets, 500 replicates each. Naive Wilson intervals treat the 3,000 rows as independent
    # and cover the true recall and flag rate less than 90 % of the time; the cluster
    # bootstrap brings coverage to 93-97 %.
    K, M, S, R, su, t = 100, 30, 500, 500, 0.5, 1.0
    true_rec = norm.sf((t - 1.0) / np.sqrt(su ** 2 + 1))
    true_fr = 0.3 * true_rec + 0.7 * norm.sf(t / np.sqrt(su ** 2 + 1))
    cl = np.repeat(np.arange(K), M)
    hits = np.zeros(4)
    for sim in range(S):
        g = np.random.default_rng([2024, sim])
        y = g.random(K * M) < 0.3
        s = np.repeat(g.normal(0, su, K), M) + g.normal(0, 1, K * M) + y * 1.0
        out = {m.metric: m for m in cluster_metric_intervals(
            y, s, cl, t, metrics=("recall", "flag_rate"), n_replicates=R, seed=sim)}
        r, f = out["recall"], out["flag_rate"]
        hits += [r.naive_low <= true_rec <= r.naive_high, r.low <= true_rec <= r.high,
                 f.naive_low <= true_fr <= f.naive_high, f.low <= true_fr <= f.high]
    naive_rec, boot_rec, naive_fr, boot_fr = hits / S
    assert naive_rec < 0.90 and naive_fr < 0.90
    assert 0.93 <= boot_rec <= 0.97
    assert 0.93 <= boot_fr <= 0.97


# ------------------------------------------------------------------ summary and statements

def test_cluster_summary_counts_distinct_patients_by_hand():
    # Distinct clusters flagged, with events and caught, recomputed with pandas (common
    # practice); the cluster-level recall's Wilson interval against statsmodels.
    y, s, ids, _, _ = _clustered(k=250, m=4, seed=11)
    ids = ids.copy()
    ids[:40] = "P9999"  # one large cluster
    ds = Dataset.from_arrays(y, s, cluster=ids)
    t = 0.45
    cs = cluster_summary(ds, t, n_replicates=200, seed=3)
    df = pd.DataFrame({"id": ids, "y": y, "f": s >= t})
    assert cs.n_clusters == df["id"].nunique()
    assert cs.clusters_flagged == df.loc[df.f, "id"].nunique()
    assert cs.event_clusters == df.loc[df.y, "id"].nunique()
    assert cs.event_clusters_caught == df.loc[df.y & df.f, "id"].nunique()
    lo, hi = proportion_confint(cs.event_clusters_caught, cs.event_clusters, method="wilson")
    assert cs.cluster_recall == pytest.approx(
        (cs.event_clusters_caught / cs.event_clusters, lo, hi), rel=1e-12)
    assert sum(cs.sizes.values()) == cs.n_clusters and "10+" in cs.sizes
    assert cs.max_size == 40
    codes, K = cluster_codes(ids)
    de = ratio_design_effect(y.astype(float), np.ones(y.shape[0]), codes, K)
    assert cs.design_effect == pytest.approx(de["design_effect"], rel=1e-12)
    assert cs.icc == pytest.approx(de["icc"], rel=1e-12)
    assert any("distinct clusters" in st for st in cs.statements)
    json.dumps(cs.to_dict(), allow_nan=False)


def test_statements_and_default():
    y, s, ids, _, _ = _clustered(k=30, m=3, seed=12)
    with_ids = Dataset.from_arrays(y, s, cluster=ids)
    plain = Dataset.from_arrays(y, s)
    ct = Dataset.from_count_table([0.1, 0.5, 0.9], [1, 2, 5], [50, 20, 3])
    assert uses_cluster_bootstrap(with_ids) and not uses_cluster_bootstrap(plain)
    assert not uses_cluster_bootstrap(with_ids, "case-control") and not uses_cluster_bootstrap(ct)
    assert "resamples whole clusters" in cluster_statement(with_ids)
    assert "independent" in cluster_statement(plain)
    assert cluster_statement(ct) == COUNT_TABLE_NO_CLUSTERS
    assert "too narrow" in cluster_statement(with_ids, "case-control")
