"""The compiled loops of the exact bootstrap equal the numpy expressions they replace.

Source for every check here: the numpy expression named in each kernel's
docstring (``numpy.cumsum``, ``numpy.bincount``, ``numpy.searchsorted``) and
the public statistics of ``core.bootstrap`` (``roc_auc``,
``average_precision``, ``precision_at_recall``, ``tpr_at_fpr``), which the
test suite checks against scikit-learn elsewhere. Random inputs, seeded.
"""

from __future__ import annotations

import numpy as np
import pytest

from core.bootstrap import (
    DEFAULT_FPR_GRID,
    DEFAULT_RECALL_GRID,
    _PoissonTable,
    _Units,
    average_precision,
    bootstrap_counts,
    event_cells,
    precision_at_recall,
    roc_auc,
    tpr_at_fpr,
)
from core.bootstrap_kernels import add_rows, cell_statistics, count_into, remove_rows, warm_up
from core.curve import sweep


def _cells_like(g, R, C, dtype):
    """Replicate cell counts shaped like the bootstrap's: each cell holds events, non-events
    or both (a tie, or a step: non-events before events); a row without events, one
    without non-events. Returns ``(E, N, tie_weight, steps)``."""
    kind = g.integers(0, 4, C)  # 0: events only, 1: non-events only, 2: tie, 3: step
    E = g.poisson(2.0, (R, C)) * (kind != 1)
    N = g.poisson(30.0, (R, C)) * (kind != 0)
    E[0] = 0  # no events: NaN statistics
    N[1] = 0  # no non-events
    if dtype == np.float64:
        E = E * g.uniform(0.5, 2.0, (R, C))
        N = N * g.uniform(0.5, 2.0, (R, C))
    weight = np.select([kind == 2, kind == 3], [0.5, 1.0], 0.0)
    return E.astype(dtype), N.astype(dtype), weight, kind == 3


@pytest.mark.parametrize("dtype", [np.int32, np.int64, np.float64])
def test_cell_statistics_equal_the_numpy_statistics(dtype):
    g = np.random.default_rng(7)
    R, C = 9, 700
    E, N, weight, steps = _cells_like(g, R, C, dtype)
    rg, fg = np.asarray(DEFAULT_RECALL_GRID), np.asarray(DEFAULT_FPR_GRID)
    tp, fp = np.empty((R, C + 1)), np.empty((R, C + 1))
    auc, ap = np.empty(R), np.empty(R)
    pb, tb = np.empty((R, rg.size)), np.empty((R, fg.size))
    cell_statistics(E, N, weight, steps, rg, fg, tp, fp, auc, ap, pb, tb)

    ref_tp = np.concatenate([np.zeros((R, 1)), np.cumsum(E, axis=1, dtype=np.float64)], axis=1)
    ref_fp = np.concatenate([np.zeros((R, 1)), np.cumsum(N, axis=1, dtype=np.float64)], axis=1)
    if dtype == np.float64:  # sequential float sums, as numpy's cumsum
        np.testing.assert_allclose(tp, ref_tp, rtol=1e-13)
        np.testing.assert_allclose(fp, ref_fp, rtol=1e-13)
        ref_tp, ref_fp = tp, fp
    else:
        np.testing.assert_array_equal(tp, ref_tp)
        np.testing.assert_array_equal(fp, ref_fp)
    with np.errstate(invalid="ignore", divide="ignore"):
        want_auc = roc_auc(ref_tp, ref_fp, steps)
        want_ap = average_precision(ref_tp, ref_fp)
    np.testing.assert_allclose(auc, want_auc, rtol=1e-12)
    np.testing.assert_allclose(ap, want_ap, rtol=1e-12)
    assert np.isnan(auc[0]) and np.isnan(auc[1]) and np.isnan(ap[0]) and not np.isnan(ap[1])
    np.testing.assert_allclose(pb, precision_at_recall(ref_tp, ref_fp, rg), rtol=1e-14)
    np.testing.assert_allclose(tb, tpr_at_fpr(ref_tp, ref_fp, fg, steps), rtol=1e-14, atol=1e-15)
    assert steps.any() and (weight == 0.5).any()


def test_cell_statistics_sums_stay_exact_past_32_bits():
    # counts whose products pass 2^31 (10M-row cells) must not wrap in 32-bit arithmetic
    E = np.array([[3_000_000, 0, 2_000_000]], dtype=np.int32)
    N = np.array([[900_000_000, 1_000_000_000, 100_000_000]], dtype=np.int32)
    weight, steps = np.array([0.5, 0.0, 1.0]), np.array([False, False, True])
    rg, fg = np.array([0.5, 1.0]), np.array([0.0, 0.5, 1.0])
    out = (np.empty((1, 4)), np.empty((1, 4)), np.empty(1), np.empty(1), np.empty((1, 2)),
           np.empty((1, 3)))
    cell_statistics(E, N, weight, steps, rg, fg, *out)
    tp, fp = out[0], out[1]
    np.testing.assert_allclose(out[2], roc_auc(tp, fp, steps), rtol=1e-12)
    np.testing.assert_allclose(out[3], average_precision(tp, fp), rtol=1e-12)


def test_count_into_equals_bincount_and_writes_only_its_columns():
    g = np.random.default_rng(3)
    width = 50
    columns = np.sort(g.choice(width, 20, replace=False))
    mass = g.integers(1, 5, columns.size)
    unit_of = np.repeat(np.arange(columns.size), mass)
    scratch = np.empty(columns.size, dtype=np.int64)
    for dtype in (np.int32, np.int64, np.float64):
        row = np.full(width, 7, dtype=dtype)
        u = g.integers(0, unit_of.size, 300)
        count_into(row, columns, unit_of, u, scratch)
        want = np.full(width, 7, dtype=dtype)
        want[columns] = np.bincount(unit_of[u], minlength=columns.size)
        np.testing.assert_array_equal(row, want)
        # one row per unit (the empty map), and no draws at all
        count_into(row, columns, unit_of[:0], np.arange(columns.size), scratch)
        assert np.all(row[columns] == 1)
        count_into(row, columns, unit_of[:0], u[:0], scratch)
        assert np.all(row[columns] == 0) and np.all(np.delete(row, columns) == 7)


@pytest.mark.parametrize("pads", [{}, {"pad_sd": 0.5, "pad": 0}])
def test_table_lookup_is_the_first_position_past_each_uniform(pads):
    # tiny pads send many uniforms past the table: those are the reported tails
    lam = np.array([600, 5, 40, 1, 3000, 40, 12, 0])
    table = _PoissonTable(lam[lam > 0], **pads)
    U = np.random.default_rng(5).random((40, table.n_tabled))
    X, tail = table.lookup(U)
    want = np.empty_like(X)
    for c in range(table.n_tabled):
        F = table.F[table.cell_foff[c]: table.cell_top[c] + 1]  # the sentinel included
        want[:, c] = np.searchsorted(F, U[:, c], side="right")
    np.testing.assert_array_equal(X, want)
    np.testing.assert_array_equal(tail, np.flatnonzero(want == table.cell_past))
    if pads:
        assert tail.size > 0


def test_rows_added_and_removed_as_the_numpy_expressions():
    g = np.random.default_rng(11)
    for _ in range(50):
        x = g.integers(0, 30, 40)
        cum = np.cumsum(g.integers(1, 60, 40))
        u = np.sort(g.integers(0, int(cum[-1]) + 40, 25))  # some past the end: the last cell
        want = x + np.bincount(np.minimum(np.searchsorted(cum, u, side="right"), x.size - 1),
                               minlength=x.size)
        got = x.copy()
        add_rows(got, cum, u)
        np.testing.assert_array_equal(got, want)
        s = int(x.sum())
        pos = np.sort(g.choice(s, size=min(s, 20), replace=False))
        want = x - np.bincount(np.searchsorted(np.cumsum(x), pos, side="right"), minlength=x.size)
        got = x.copy()
        remove_rows(got, pos)
        np.testing.assert_array_equal(got, want)
        assert got.min() >= 0


def test_reused_blocks_give_the_same_replicates():
    # a drawn row writes every column its class owns, so recycled blocks need no clearing
    g = np.random.default_rng(2)
    y = g.random(4000) < 0.05
    s = np.round(g.normal(y * 1.0, 1.0), 2)
    cells = event_cells(sweep(y, s))
    for n_jobs in (1, 2):
        fresh = [(c.events.copy(), c.non_events.copy())
                 for c in bootstrap_counts(cells, 23, seed=9, chunk=5, n_jobs=n_jobs)]
        reused = [(c.events.copy(), c.non_events.copy())
                  for c in bootstrap_counts(cells, 23, seed=9, chunk=5, n_jobs=n_jobs,
                                            reuse=True)]
        for (a, b), (c, d) in zip(fresh, reused, strict=True):
            np.testing.assert_array_equal(a, c)
            np.testing.assert_array_equal(b, d)


def test_a_class_with_no_draws_clears_its_columns():
    u = _Units(np.array([1, 3, 50, 0, 700], dtype=float), 5)
    row = np.full((1, 5), 9, dtype=np.int64)
    u.draw_rows([np.random.default_rng(0)], [0], row)
    np.testing.assert_array_equal(row, [[0, 0, 0, 9, 0]])  # the massless cell is not its column


def test_warm_up_compiles_every_kernel():
    warm_up()
    for k in (cell_statistics, count_into, add_rows, remove_rows):
        assert k.signatures
