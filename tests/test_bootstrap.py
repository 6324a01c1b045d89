"""The exact cell bootstrap checked against plain row resampling and scikit-learn.

Sources named beside each check:
* scikit-learn ``roc_auc_score`` / ``average_precision_score`` (reference
  library) for the statistics of the cells and of every row-resampled replicate;
* the nonparametric bootstrap itself (Efron & Tibshirani 1993, from memory):
  "draw n rows with replacement" is the reference the engine must equal in
  distribution; cohort = all rows together, case-control = events and
  non-events each with their own total;
* the multinomial's moments (common practice, no source): E = m p,
  Var = m p (1 - p), Cov = -m p_i p_j.

Tolerances for "same distribution": two-sample Kolmogorov-Smirnov p > 0.001
(scipy ``ks_2samp``), means within 4 standard errors of their difference,
standard deviations within 8 % of each other, with 3,000 replicates each.
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy import stats
from sklearn import metrics as skm

from core import InputError, sweep
from core.bootstrap import (
    DEFAULT_FPR_GRID,
    DEFAULT_RECALL_GRID,
    _Units,
    average_precision,
    bootstrap,
    bootstrap_counts,
    counts_at,
    event_cells,
    percentile_interval,
    precision_at_recall,
    roc_auc,
    tpr_at_fpr,
)
from core.dataset import Dataset

R = 3000


def _small(seed=0, n=400, prevalence=0.1, decimals=1, shift=1.2):
    rng = np.random.default_rng(seed)
    y = rng.random(n) < prevalence
    y[:2] = [True, False]
    s = rng.normal(shift * y, 1.0)
    if decimals is not None:
        s = np.round(s, decimals)
    return y, s


def _same_distribution(a, b, what):
    a = np.asarray(a, dtype=float)
    b = np.asarray(b, dtype=float)
    a, b = a[~np.isnan(a)], b[~np.isnan(b)]
    p = stats.ks_2samp(a, b).pvalue
    se = np.sqrt(a.var() / a.size + b.var() / b.size)
    assert p > 1e-3, f"{what}: KS p = {p:.2g}"
    assert abs(a.mean() - b.mean()) <= 4 * se + 1e-15, f"{what}: means {a.mean()} vs {b.mean()}"
    assert 0.92 <= a.std() / b.std() <= 1.08, f"{what}: sd {a.std()} vs {b.std()}"


# --------------------------------------------------------------------------- cells

@pytest.mark.parametrize("decimals", [None, 1, 0])
@pytest.mark.parametrize("higher", [True, False])
def test_cells_keep_every_event_point_auc_and_ap(decimals, higher):
    # Source: scikit-learn roc_auc_score / average_precision_score (reference library).
    y, s = _small(1, n=3000, prevalence=0.05, decimals=decimals)
    if not higher:
        s = -s
    c = sweep(y, s, higher_is_riskier=higher)
    cells = event_cells(c)
    rc = cells.to_curve()
    ev = np.flatnonzero(c.event_point_mask)
    # every event point is a boundary with the same counts
    cols = [cells.column_of_index(k) for k in ev]
    tp = np.concatenate([[0], np.cumsum(cells.events)])
    fp = np.concatenate([[0], np.cumsum(cells.non_events)])
    np.testing.assert_array_equal(tp[cols], c.tp[ev])
    np.testing.assert_array_equal(fp[cols], c.fp[ev])
    assert cells.n_cells < c.n_points or decimals == 0
    score = s if higher else -s
    assert rc.roc_auc == pytest.approx(skm.roc_auc_score(y, score), rel=1e-12)
    assert rc.average_precision == pytest.approx(skm.average_precision_score(y, score), rel=1e-12)
    assert rc.roc_auc == pytest.approx(c.roc_auc, rel=1e-12)
    # the vectorised statistics on the data itself (one "replicate")
    assert roc_auc(tp[None, :], fp[None, :], cells.steps)[0] == pytest.approx(c.roc_auc,
                                                                              rel=1e-12)
    if decimals is None:  # continuous scores: about one cell per event, most of them steps
        assert cells.n_cells <= cells.n_event_cells + 1 and cells.steps.sum() > 0
    assert average_precision(tp[None, :], fp[None, :])[0] == pytest.approx(c.average_precision,
                                                                           rel=1e-12)


def test_bands_on_cells_equal_bands_on_every_point():
    # Source: common practice, no source -- the ROC curve through every point is piecewise
    # linear and the PR step at recall r is the strictest point reaching r; computed here
    # by brute force over ALL points of the row curve and compared with the cell version.
    y, s = _small(2, n=2500, prevalence=0.06, decimals=2)
    c = sweep(y, s)
    cells = event_cells(c)
    tp = np.concatenate([[0], np.cumsum(cells.events)])[None, :]
    fp = np.concatenate([[0], np.cumsum(cells.non_events)])[None, :]
    tpr_full, fpr_full = c.tp / c.n_events, c.fp / c.n_nonevents
    ref_roc = []
    for f in DEFAULT_FPR_GRID:
        i = np.flatnonzero(fpr_full <= f)[-1]
        if i + 1 < c.n_points and fpr_full[i + 1] > fpr_full[i]:
            ref_roc.append(tpr_full[i] + (f - fpr_full[i]) * (tpr_full[i + 1] - tpr_full[i])
                           / (fpr_full[i + 1] - fpr_full[i]))
        else:
            ref_roc.append(tpr_full[i])
    np.testing.assert_allclose(tpr_at_fpr(tp, fp, steps=cells.steps)[0], ref_roc, rtol=1e-9,
                               atol=1e-12)
    ref_pr = []
    for r in DEFAULT_RECALL_GRID:
        i = np.flatnonzero(tpr_full >= r - 1e-12)[0]
        ref_pr.append(c.tp[i] / (c.tp[i] + c.fp[i]))
    np.testing.assert_allclose(precision_at_recall(tp, fp)[0], ref_pr, rtol=1e-12)


def test_replicate_statistics_equal_the_replicate_curve():
    # Source: scikit-learn roc_auc_score / average_precision_score on the replicate's
    # rows (each replicate's cell counts expanded back into rows).
    y, s = _small(3, n=600, decimals=1)
    c = sweep(y, s)
    cells = event_cells(c, thresholds=[0.35])
    col = cells.column(0.35)
    for ch in bootstrap_counts(cells, 40, seed=5, chunk=16):
        tp, fp = ch.cumulative()
        auc, ap = roc_auc(tp, fp, cells.steps), average_precision(tp, fp)
        t, f, fn, tn = counts_at(tp, fp, [col])
        for i in range(ch.n):
            e, n = ch.events[i], ch.non_events[i]
            ys = np.r_[np.ones(int(e.sum())), np.zeros(int(n.sum()))]
            # a step cell's non-events sit at the loosest score of their run
            ne_score = np.where(cells.steps, cells.step_thresholds, cells.thresholds)
            ss = np.r_[np.repeat(cells.thresholds, e.astype(int)),
                       np.repeat(ne_score, n.astype(int))]
            assert auc[i] == pytest.approx(skm.roc_auc_score(ys, ss), rel=1e-12)
            assert ap[i] == pytest.approx(skm.average_precision_score(ys, ss), rel=1e-12)
            flagged = ss >= 0.35
            assert t[i, 0] == np.sum(flagged & (ys == 1))
            assert f[i, 0] == np.sum(flagged & (ys == 0))
            assert fn[i, 0] + tn[i, 0] == np.sum(~flagged)


def test_one_pass_statistics_equal_the_public_functions():
    y, s = _small(13, n=1500, prevalence=0.05, decimals=1)
    c = sweep(y, s)
    res = bootstrap(c, n_replicates=60, seed=2, chunk=25)
    tp, fp = np.vstack([np.hstack(ch.cumulative()) for ch in bootstrap_counts(res.cells, 60, 2)]), None
    width = res.cells.n_cells + 1
    tp, fp = tp[:, :width], tp[:, width:]
    np.testing.assert_allclose(res.average_precision, average_precision(tp, fp), rtol=1e-12)
    np.testing.assert_allclose(res.roc_auc, roc_auc(tp, fp, res.cells.steps), rtol=1e-12)


def test_threshold_off_the_boundaries_is_refused():
    y, s = _small(4, n=500, decimals=None)
    c = sweep(y, s)
    cells = event_cells(c)
    gap = np.flatnonzero(~c.event_point_mask)
    gap = gap[(gap > 1) & ~c.event_point_mask[np.minimum(gap + 1, c.n_points - 1)]]
    t = float(c.thresholds[gap[0]])
    with pytest.raises(InputError, match="cell boundary"):
        cells.column(t)
    assert event_cells(c, thresholds=[t]).column(t) > 0


# --------------------------------------------------------------------------- the sampler

@pytest.mark.parametrize("integer", [True, False])
def test_unit_sampler_has_multinomial_moments(integer):
    # Source: multinomial moments (common practice, no source).
    mass = np.array([1, 1, 2, 3, 4, 5, 40, 200, 1, 600], dtype=float)
    if not integer:
        mass = mass * 1.37
    u = _Units(mass, mass.size)
    m = int(round(mass.sum()))
    draws = np.array([u.draw(np.random.default_rng([9, r]), m) for r in range(20000)])
    assert np.all(draws.sum(axis=1) == m)
    p = mass / mass.sum()
    mean, var = draws.mean(0), draws.var(0)
    assert np.all(np.abs(mean - m * p) <= 4 * np.sqrt(m * p * (1 - p) / 20000))
    np.testing.assert_allclose(var, m * p * (1 - p), rtol=0.05)
    cov = np.cov(draws[:, 7], draws[:, 9])[0, 1]
    assert cov == pytest.approx(-m * p[7] * p[9], rel=0.1)


def test_chunking_and_start_change_nothing():
    # Source: common practice, no source -- replicate r uses default_rng([seed, r]) alone.
    y, s = _small(5, n=800)
    cells = event_cells(sweep(y, s))
    full = list(bootstrap_counts(cells, 23, seed=3))
    e_full = np.vstack([ch.events for ch in full])
    for chunk in (1, 4, 7):
        e = np.vstack([ch.events for ch in bootstrap_counts(cells, 23, seed=3, chunk=chunk)])
        np.testing.assert_array_equal(e, e_full)
    threads = np.vstack([ch.events for ch in bootstrap_counts(cells, 23, seed=3, chunk=5, n_jobs=2)])
    np.testing.assert_array_equal(threads, e_full)
    tail = np.vstack([ch.events for ch in bootstrap_counts(cells, 8, seed=3, start=15)])
    np.testing.assert_array_equal(tail, e_full[15:])
    seen = []
    list(bootstrap_counts(cells, 23, seed=3, chunk=10, progress=lambda d, t: seen.append((d, t))))
    assert seen == [(10, 23), (20, 23), (23, 23)]


def test_case_control_keeps_class_totals_cohort_does_not():
    y, s = _small(6, n=700)
    cells = event_cells(sweep(y, s))
    P, N = int(y.sum()), int((~y).sum())
    cc = np.vstack([ch.events.sum(1) for ch in bootstrap_counts(cells, 200, 1, "case-control")])
    assert np.all(cc == P)
    co = np.concatenate([ch.events.sum(1) for ch in bootstrap_counts(cells, 400, 1, "cohort")])
    tot = np.concatenate([ch.events.sum(1) + ch.non_events.sum(1)
                          for ch in bootstrap_counts(cells, 400, 1, "cohort")])
    assert np.all(tot == P + N)
    # Source: binomial variance of the event total, n pi (1 - pi) (common practice).
    assert co.var() == pytest.approx((P + N) * (P / (P + N)) * (N / (P + N)), rel=0.2)


def test_frequency_weights_resample_the_cases():
    # Integer frequency weights are cases: the cells (and so every replicate) equal those
    # of the expanded rows. Source: definition of a frequency weight (common practice).
    rng = np.random.default_rng(7)
    y, s = _small(7, n=300, decimals=1)
    w = rng.integers(1, 4, y.size)
    a = event_cells(Dataset.from_arrays(y, s, w, weight_kind="frequency"))
    b = event_cells(Dataset.from_arrays(np.repeat(y, w), np.repeat(s, w)))
    np.testing.assert_array_equal(a.events, b.events)
    np.testing.assert_array_equal(a.non_events, b.non_events)
    ea = np.vstack([ch.events for ch in bootstrap_counts(a, 30, 2)])
    eb = np.vstack([ch.events for ch in bootstrap_counts(b, 30, 2)])
    np.testing.assert_array_equal(ea, eb)
    assert a.exact


# --------------------------------------------------------------------------- against row resampling

def _row_loop(y, s, design, seed, stat):
    """Plain bootstrap: draw rows with replacement, recompute the statistic."""
    rng = np.random.default_rng(seed)
    n = y.size
    ev, ne = np.flatnonzero(y), np.flatnonzero(~y)
    out = []
    for _ in range(R):
        if design == "cohort":
            idx = rng.integers(0, n, n)
        else:
            idx = np.r_[ev[rng.integers(0, ev.size, ev.size)], ne[rng.integers(0, ne.size, ne.size)]]
        yy, ss = y[idx], s[idx]
        if yy.all() or not yy.any():
            out.append((np.nan,) * 4)
            continue
        flagged = ss >= 0.6
        tp = np.sum(flagged & yy)
        out.append((skm.roc_auc_score(yy, ss), skm.average_precision_score(yy, ss),
                    tp / yy.sum(), tp / max(flagged.sum(), 1)))
    return np.array(out)


@pytest.mark.slow
@pytest.mark.parametrize("design", ["cohort", "case-control"])
def test_exact_bootstrap_equals_row_resampling(design):
    # Source: the row bootstrap (Efron & Tibshirani 1993) with scikit-learn's
    # roc_auc_score / average_precision_score per replicate (reference library).
    y, s = _small(8, n=400, prevalence=0.1, decimals=1)
    res = bootstrap(sweep(y, s), n_replicates=R, seed=1, design=design, thresholds=[0.6])
    ref = _row_loop(y, s, design, 2, None)
    ours = np.column_stack([res.roc_auc, res.average_precision,
                            res.metric_at(0.6, "recall", prevalence=None),
                            res.metric_at(0.6, "precision", prevalence=None)])
    for j, name in enumerate(["ROC AUC", "average precision", "recall", "precision"]):
        _same_distribution(ours[:, j], ref[:, j], f"{design} {name}")


@pytest.mark.slow
def test_per_case_costs_resample_events_as_rows():
    # Source: row bootstrap (Efron & Tibshirani 1993): missed cost at a threshold, the
    # summed amount of the missed events of each row-resampled replicate.
    rng = np.random.default_rng(9)
    y, s = _small(9, n=500, prevalence=0.12, decimals=1)
    amount = np.round(rng.lognormal(3, 1, y.size), 2)
    ds = Dataset.from_arrays(y, s, case_cost=amount)
    cells = event_cells(ds, thresholds=[0.6])
    assert cells.exact and cells._event_units.cell is not None
    res = bootstrap(ds, n_replicates=R, seed=4, thresholds=[0.6],
                    costs={"false_positive": 1.0, "false_negative": None})
    ours = res.at[0.6]["cost"]
    g = np.random.default_rng(5)
    ref = []
    for _ in range(R):
        idx = g.integers(0, y.size, y.size)
        yy, ss, aa = y[idx], s[idx], amount[idx]
        P, N = yy.sum(), (~yy).sum()
        pi = P / (P + N)
        miss = aa[yy & (ss < 0.6)].sum() / P
        fpr = np.sum(~yy & (ss >= 0.6)) / N
        ref.append(pi * miss + (1 - pi) * fpr)
    _same_distribution(ours, ref, "cost with per-case miss costs")


@pytest.mark.slow
def test_sampling_weights_rows_exact_and_moments_close():
    # Source: row bootstrap with weights carried (Efron & Tibshirani 1993): weighted recall
    # at a threshold per row-resampled replicate.
    rng = np.random.default_rng(10)
    y, s = _small(10, n=600, prevalence=0.1, decimals=1)
    w = rng.uniform(0.5, 3.0, y.size)
    ds = Dataset.from_arrays(y, s, w, weight_kind="sampling")
    rows = bootstrap(ds, n_replicates=R, seed=1, thresholds=[0.6])
    assert rows.cells.sampling_method == "rows" and rows.cells.exact
    ours = rows.metric_at(0.6, "recall", prevalence=None)
    g = np.random.default_rng(3)
    ref = []
    for _ in range(R):
        idx = g.integers(0, y.size, y.size)
        yy, ss, ww = y[idx], s[idx], w[idx]
        ref.append(ww[yy & (ss >= 0.6)].sum() / ww[yy].sum())
    _same_distribution(ours, ref, "weighted recall, rows")
    # from the curve alone: moment-matched cells, approximate (SD within 15 %)
    mom = bootstrap(ds.curve(), n_replicates=R, seed=1, thresholds=[0.6])
    assert mom.cells.sampling_method == "moments" and not mom.cells.exact
    sd = np.nanstd(mom.metric_at(0.6, "recall", prevalence=None))
    assert sd == pytest.approx(np.std(ref), rel=0.15)


# --------------------------------------------------------------------------- summaries

def test_percentile_interval_skips_undefined_replicates():
    # Source: numpy.quantile (linear interpolation) on the defined replicates.
    v = np.r_[np.arange(100.0), np.nan, np.nan]
    lo, hi = percentile_interval(v, 0.9)
    assert (lo, hi) == pytest.approx(tuple(np.quantile(np.arange(100.0), [0.05, 0.95])))
    lo, hi = percentile_interval(np.full(5, np.nan))
    assert np.isnan(lo) and np.isnan(hi)


def test_bootstrap_bands_cover_the_data_curve_and_record_method():
    y, s = _small(11, n=4000, prevalence=0.05, decimals=2)
    c = sweep(y, s)
    res = bootstrap(c, n_replicates=300, seed=0)
    grid, lo, hi = res.band("roc")
    cells = res.cells
    tp = np.concatenate([[0], np.cumsum(cells.events)])[None, :]
    fp = np.concatenate([[0], np.cumsum(cells.non_events)])[None, :]
    data = tpr_at_fpr(tp, fp, grid, cells.steps)[0]
    inside = (data >= lo - 1e-12) & (data <= hi + 1e-12)
    assert inside.mean() > 0.9
    mid = (grid > 0) & (grid <= 0.5)  # beyond, every replicate may reach TPR 1
    assert np.all(hi[mid] - lo[mid] > 0)
    assert "exact cell bootstrap" in res.describe() and "cohort" in res.describe()
    lo_auc, hi_auc = percentile_interval(res.roc_auc)
    assert lo_auc < c.roc_auc < hi_auc


def test_bad_input_is_refused():
    y, s = _small(12, n=300)
    cells = event_cells(sweep(y, s))
    with pytest.raises(InputError, match="design"):
        next(bootstrap_counts(cells, 10, design="stratified"))
    with pytest.raises(InputError, match="n_replicates"):
        next(bootstrap_counts(cells, 0))
    with pytest.raises(InputError, match="sampling_weights"):
        event_cells(sweep(y, s), sampling_weights="guess")
    with pytest.raises(InputError, match="costs"):
        bootstrap(sweep(y, s), n_replicates=5, thresholds=[0.5],
                  costs={"false_positive": 1.0, "false_negative": None})


# --------------------------------------------------------------------------- Poisson tables

@pytest.mark.parametrize("pads", [{}, {"pad_sd": 0.5, "pad": 0}])
def test_poisson_table_draws_follow_the_poisson_distribution(pads):
    # Source: scipy.stats.poisson (reference library) -- chi-square goodness of fit of each
    # cell's counts, p > 0.001; scipy.special.pdtr for the table itself. Tiny pads send
    # about a third of the draws beyond the table (the exact tail path).
    from core.bootstrap import _PoissonTable

    lam = np.array([600, 5, 40, 1, 3000, 40, 12])
    table = _PoissonTable(lam, **pads)
    if not pads:
        for c in range(lam.size):
            lo, top = table.cell_foff[c], table.cell_top[c]
            F = table.F[lo:top]
            np.testing.assert_allclose(F, stats.poisson.cdf(np.arange(F.size), lam[c]),
                                       rtol=0, atol=1e-13)
    g = np.random.default_rng(4)
    n = 8000
    draws = np.vstack([table.draw(g) for _ in range(n)])  # beyond-table cells included
    for c, v in enumerate(lam):
        k = np.arange(0, int(v + 8 * np.sqrt(v) + 10))
        obs = np.bincount(draws[:, c], minlength=k.size)[:k.size]
        exp = stats.poisson.pmf(k, v) * n
        keep = exp >= 5
        o, e = obs[keep], exp[keep]
        # pool the rest into one class so the totals agree
        o = np.r_[o, n - o.sum()]
        e = np.r_[e, n - e.sum()]
        assert stats.chisquare(o, e).pvalue > 1e-3, v
        assert abs(draws[:, c].mean() - v) <= 4 * np.sqrt(v / n)


def test_unit_sampler_with_unsorted_large_cells_and_untabled_masses(monkeypatch):
    # Source: multinomial moments (common practice, no source). Large cells out of mass
    # order, masses above the table cap and a table budget that leaves some masses out
    # (drawn by numpy's Poisson) must give the same multinomial.
    import sys

    cbm = sys.modules["core.bootstrap"]  # the module (core.bootstrap is also a function)
    monkeypatch.setattr(cbm, "TABLE_MAX_MASS", 500)
    monkeypatch.setattr(cbm, "TABLE_BUDGET", 200)
    mass = np.array([600, 1, 40, 5, 200, 3, 9000, 40, 7], dtype=float)
    u = _Units(mass, mass.size)
    assert u.table is not None and u.table.other_idx.size >= 2  # mixed tables and Poisson
    m = int(mass.sum())
    draws = np.array([u.draw(np.random.default_rng([3, r]), m) for r in range(6000)])
    assert np.all(draws.sum(axis=1) == m)
    p = mass / mass.sum()
    assert np.all(np.abs(draws.mean(0) - m * p) <= 4 * np.sqrt(m * p * (1 - p) / 6000))
    np.testing.assert_allclose(draws.var(0), m * p * (1 - p), rtol=0.1)


def test_rows_drawn_together_equal_rows_drawn_alone():
    # Source: common practice, no source -- each row uses its own generator in the same
    # order whether drawn alone or with others (chunks, threads).
    mass = np.array([1, 1, 2, 9, 40, 200, 600, 3, 1], dtype=float)
    u = _Units(mass, mass.size)
    ms = [int(mass.sum()) + d for d in (-30, 0, 17, 5)]
    alone = np.array([u.draw(np.random.default_rng([8, r]), m) for r, m in enumerate(ms)])
    together = np.zeros((len(ms), mass.size), dtype=np.int64)
    u.draw_rows([np.random.default_rng([8, r]) for r in range(len(ms))], ms, together)
    np.testing.assert_array_equal(together, alone)
    assert np.array_equal(together.sum(axis=1), ms)


def test_more_threads_change_nothing_either():
    # Source: common practice, no source -- replicate r uses default_rng([seed, r]) alone.
    y, s = _small(6, n=3000, decimals=2)
    cells = event_cells(sweep(y, s))
    one = np.vstack([ch.non_events for ch in bootstrap_counts(cells, 37, seed=4, chunk=6)])
    for jobs in (2, 3):
        got = np.vstack([ch.non_events for ch in bootstrap_counts(cells, 37, seed=4, chunk=6,
                                                                  n_jobs=jobs)])
        np.testing.assert_array_equal(got, one)
