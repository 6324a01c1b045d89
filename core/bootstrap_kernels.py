"""Compiled inner loops of the exact bootstrap (see :mod:`core.bootstrap`).

A replicate of the exact bootstrap touches every cell a handful of times:
place its drawn counts, look up its Poisson count, correct the class total,
sum the cells cumulatively, and read the ROC AUC, the average precision and
the two bands off the sums. As numpy calls each of these is a pass over the
row, and with continuous scores (about 40,000 cells at 1M rows) the passes,
not the arithmetic, set the time. Here each is one loop, compiled by numba
(``cache=True``: compiled once, then loaded from ``__pycache__``; ``nogil``:
the drawing thread runs beside the statistics).

Every kernel computes exactly what the numpy expression in its docstring
computes, in the same order where floating point is involved (sequential
sums), and the random numbers stay with numpy's generators in the caller,
so replicates are unchanged; ``tests/test_bootstrap_kernels.py`` checks each
against its numpy expression on random input. Nothing here loops over rows.
"""

from __future__ import annotations

import numba
import numpy as np

__all__ = ["cell_statistics", "count_into", "poisson_lookup", "add_rows", "remove_rows"]

_jit = numba.njit(cache=True, nogil=True)


@_jit
def cell_statistics(E, N, tie_weight, steps, recall_grid, fpr_grid, tp, fp, auc, ap, pb, tb):  # noqa: E501 pragma: no cover
    """Cumulative counts, ROC AUC, average precision and both bands of every replicate.

    ``E``, ``N``: (R, C) replicate cell counts of events and non-events;
    ``tie_weight``: (C,) 1/2 for a tie cell holding both classes, 1 for a step
    cell (``EventCells.steps``), 0 elsewhere; ``steps``: (C,) bool. Writes
    ``tp``, ``fp`` (R, C + 1): cumulative counts with "flag none" first
    (``ReplicateChunk.cumulative``); ``auc`` (R,): ``(sum_i N_i TP_i -
    sum_i w_i N_i E_i) / (P N)``, the edges of ``roc_auc`` with ``TP_{i-1} =
    TP_i - E_i`` (a tie's diagonal halves its N_i E_i, a step's horizontal
    edge removes all of it; elsewhere a replicate's N_i E_i is zero); ``ap`` (R,): ``sum_i E_i TP_i / (TP_i + FP_i) / P`` over the cells
    with an event (``average_precision``: recall moves only there); ``pb``
    (R, G1): precision at the first column with ``TP >= (r - 1e-12) P``
    (``precision_at_recall``: its binary search becomes one walk, the grid
    being sorted); ``tb`` (R, G2): TPR at each FPR level, linear between the
    last column with ``FP <= f N`` and the next, flat through a step cell
    (``tpr_at_fpr``). NaN where a replicate lacks a class, as there.
    """
    R, C = E.shape
    M = C + 1
    G1 = recall_grid.shape[0]
    G2 = fpr_grid.shape[0]
    for i in range(R):
        t = 0.0  # float64 sums of whole counts are exact below 2^53 (as the int sums cast)
        f = 0.0
        area = 0.0
        ties = 0.0
        apsum = 0.0
        tp[i, 0] = 0.0
        fp[i, 0] = 0.0
        for j in range(C):
            e = float(E[i, j])
            n = float(N[i, j])
            t += e
            f += n
            tp[i, j + 1] = t
            fp[i, j + 1] = f
            area += n * t
            if tie_weight[j] != 0.0:
                ties += tie_weight[j] * (n * e)
            if e > 0:
                apsum += e * (t / (t + f))
        P = tp[i, C]
        Nn = fp[i, C]
        auc[i] = (area - ties) / (P * Nn) if (P > 0 and Nn > 0) else np.nan
        ap[i] = apsum / P if P > 0 else np.nan
        if P > 0:
            k = 0
            for g in range(G1):
                target = (recall_grid[g] - 1e-12) * P
                while k < M - 1 and tp[i, k] < target:
                    k += 1
                pb[i, g] = tp[i, k] / (tp[i, k] + fp[i, k])
        else:
            pb[i, :] = np.nan
        if P > 0 and Nn > 0:
            k = 0
            for g in range(G2):
                x = fpr_grid[g] * Nn
                while k < M - 1 and fp[i, k + 1] <= x:
                    k += 1
                j1 = min(k + 1, M - 1)
                x0 = fp[i, k]
                x1 = fp[i, j1]
                y0 = tp[i, k]
                slope = (tp[i, j1] - y0) / (x1 - x0) if (x1 > x0 and not steps[k]) else 0.0
                v = (y0 + (x - x0) * slope) / P
                tb[i, g] = v if v < 1.0 else 1.0
        else:
            tb[i, :] = np.nan


@_jit
def count_into(row, columns, unit_of, u, scratch):  # pragma: no cover - compiled
    """``row[columns] = bincount(unit_of[u], minlength=len(columns))``: the cell counts
    of rows drawn as uniform integers ``u`` (``unit_of`` empty: each unit one row).

    Counted in ``scratch`` (at least ``len(columns)`` long, overwritten) and then
    written in column order: a compact count and a forward write are several times
    faster than scattering the rows into the wide row directly."""
    k = columns.shape[0]
    for c in range(k):
        scratch[c] = 0
    if unit_of.shape[0] == 0:
        for v in u:
            scratch[v] += 1
    else:
        for v in u:
            scratch[unit_of[v]] += 1
    for c in range(k):
        row[columns[c]] = scratch[c]


@_jit
def poisson_lookup(U, F, G, cell_M, cell_goff, cell_foff, cell_past, X):  # pragma: no cover
    """Poisson counts by inversion of the tables of :class:`core.bootstrap._PoissonTable`.

    For each uniform ``U[i, c]``: the first table position ``x >= G[j]``
    (``j = int(u M_c) + goff_c``, the guide's lower bound) with ``F[x] > u``,
    written as ``X[i, c] = x - foff_c``; the same first position the guide
    and bisection find. Returns how many counts fell past the table
    (``X == cell_past``: to be drawn from the exact tail by the caller).
    """
    R, k = U.shape
    tails = 0
    for i in range(R):
        for c in range(k):
            u = U[i, c]
            x = G[int(u * cell_M[c]) + cell_goff[c]]
            while F[x] <= u:
                x += 1
            X[i, c] = x - cell_foff[c]
            if X[i, c] == cell_past[c]:
                tails += 1
    return tails


@_jit
def add_rows(x, cum, u):  # pragma: no cover - compiled
    """``x += bincount(minimum(searchsorted(cum, u, "right"), len(x) - 1))`` for sorted ``u``
    (rows added in proportion to the cells: one walk instead of binary searches)."""
    k = x.shape[0]
    j = 0
    for v in u:
        while j < k and cum[j] <= v:
            j += 1
        x[min(j, k - 1)] += 1


@_jit
def remove_rows(x, pos):  # pragma: no cover - compiled
    """``x -= bincount(searchsorted(cumsum(x), pos, "right"))`` for sorted ``pos`` (the
    drawn rows at those positions removed: one walk, the running sum taken before
    each cell loses a row)."""
    run = 0
    j = -1
    for p in pos:
        while run <= p:
            j += 1
            run += x[j]
        x[j] -= 1


def warm_up() -> None:
    """Compile (or load from the cache) every kernel for the types the bootstrap uses."""
    i4 = np.zeros((1, 1), dtype=np.int32)
    i8 = np.zeros((1, 1), dtype=np.int64)
    f8 = np.zeros((1, 1))
    grid = np.zeros(1)
    out = (np.zeros((1, 2)), np.zeros((1, 2)), np.zeros(1), np.zeros(1), np.zeros((1, 1)),
           np.zeros((1, 1)))
    weight, steps = np.zeros(1), np.zeros(1, dtype=np.bool_)
    for m in (i4, i8, f8):
        cell_statistics(m, m, weight, steps, grid, grid, *out)
    idx = np.zeros(1, dtype=np.int64)
    for row in (np.zeros(1, dtype=np.int32), np.zeros(1, dtype=np.int64), np.zeros(1)):
        count_into(row, idx, idx, idx, np.zeros(1, dtype=np.int64))
    one = np.ones(1)
    poisson_lookup(np.zeros((1, 1)), np.array([2.0]), idx, one, idx, idx, idx,
                   np.zeros((1, 1), dtype=np.int64))
    add_rows(np.zeros(1, dtype=np.int64), np.ones(1, dtype=np.int64), idx)
    remove_rows(np.ones(1, dtype=np.int64), idx)
