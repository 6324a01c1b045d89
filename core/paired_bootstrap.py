"""The paired bootstrap: two (or more) scores on the same cases, resampled together.

A replicate draws the *rows* with replacement, events and non-events
separately (stratified: each class keeps its size), and every score sees
the same drawn rows -- so the replicate differences carry the correlation
between the scores. What each score needs from a replicate is only the
weight of drawn rows in each of its *cells* (the runs of its curve between
consecutive event scores, plus any extra cut such as a fixed operating
point; see :mod:`core.bootstrap` for why these counts are sufficient for
ROC AUC, average precision, precision at a recall level, the events caught
at a workload and every count at a cut). So a replicate is one vector of
row multiplicities per class, and each score's cell counts follow by
``bincount`` over that score's row-to-cell map: no sort of scores, no curve
rebuilt per replicate.

The draws of replicate r (generator ``numpy.random.default_rng([seed, r])``;
events first, then non-events, each class's rows in data order):

* unweighted rows and sampling weights: ``g.integers(0, n_c, size=n_c,
  dtype=numpy.int32)`` -- n_c rows drawn uniformly; a drawn row adds its
  weight (1 unweighted) to its cells;
* frequency weights (case counts): M = round(W_c) cases drawn with
  probability proportional to the weights, ``u = g.random(M)`` mapped to
  rows by binary search in the cumulative weights (``side="right"``); each
  drawn case counts W_c / M (1 for whole weights: then each replicate
  resamples the cases exactly).

Cost per replicate: the draws, one sort of the non-event draws (so every
gather that follows runs forward through memory) and one gather and
``bincount`` per score -- O(rows) in all, since pairing needs the rows
themselves (about 10 ms per replicate
at 1M rows and two scores; see ``benchmarks/bench_compare.py``). Replicates
are independent and may run on several threads (``n_jobs``); replicate r
always uses its own generator, so chunking, threads and progress reporting
never change a result.

The percentile interval of a difference is taken by
:func:`core.bootstrap.percentile_interval` (Efron & Tibshirani 1993).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from core.curve import Curve
from core.errors import InputError

__all__ = ["ModelCells", "PairedResampler", "cell_statistics", "model_cells"]

#: Relative slack when a replicate's count is compared with a target (float rounding).
_TARGET_RTOL = 1e-12


# --------------------------------------------------------------------------- cells

@dataclass(frozen=True, eq=False)
class ModelCells:
    """One score's cells: the row-to-cell map and the boundaries on its curve.

    ``row_cell[i]`` is row i's cell (0 = strictest); ``boundaries`` the
    curve point index that ends each cell (cumulative cell sums are the
    curve's ``tp`` / ``fp`` there); ``is_tie`` marks the cells that are
    one event point (events may sit only there).
    """

    row_cell: np.ndarray
    boundaries: np.ndarray
    is_tie: np.ndarray

    @property
    def n_cells(self) -> int:
        return int(self.boundaries.shape[0])

    def column_of_index(self, k: int) -> int:
        """Column of curve point ``k`` in a cumulative replicate vector (0: "flag none")."""
        if k == 0:
            return 0
        j = int(np.searchsorted(self.boundaries, k))
        if j >= self.boundaries.shape[0] or self.boundaries[j] != k:
            raise InputError("index", f"curve point {k} is not a cell boundary")
        return j + 1


def model_cells(curve: Curve, run_of_row: np.ndarray, extra_points=()) -> ModelCells:
    """Cells of ``curve`` and the cell of every row.

    ``run_of_row[i]`` is row i's index among the curve's distinct scores in
    ascending order of *risk* (0 = least risky; run d - 1 is the strictest
    point, curve point 1), as :func:`core.paired_tests._rank` gives it.
    ``extra_points``: curve point indices that must end a cell.
    """
    d = curve.n_points - 1
    ev = np.flatnonzero(curve.event_point_mask)
    ev = ev[ev > 0]
    parts = [ev, ev - 1, np.asarray(list(extra_points), dtype=np.int64), [d]]
    b = np.unique(np.concatenate([np.asarray(p, dtype=np.int64) for p in parts]))
    b = b[b >= 1]
    # run j (ascending risk) is curve point d - j; its cell is the first boundary at or after it
    cell_of_run = np.searchsorted(b, d - np.arange(d, dtype=np.int64), side="left")
    dtype = np.int32 if b.shape[0] < 2**31 else np.int64
    row_cell = cell_of_run.astype(dtype)[run_of_row]
    ev_cells = np.diff(np.concatenate([[0.0], curve.tp[b]]))
    is_tie = curve.event_point_mask[b] & (ev_cells > 0)
    for a in (row_cell, b, is_tie):
        a.setflags(write=False)
    return ModelCells(row_cell=row_cell, boundaries=b, is_tie=is_tie)


# --------------------------------------------------------------------------- draws

class _ClassDraw:
    """How one class's rows are drawn (see the module docstring)."""

    def __init__(self, rows: np.ndarray, w: np.ndarray | None, weight_kind: str | None):
        self.rows = rows
        self.n = int(rows.shape[0])
        self.kind = "plain" if w is None else weight_kind
        self.w = None if w is None else w[rows]
        self.scale = 1.0
        if self.kind == "frequency":
            self.cum = np.cumsum(self.w)
            W = float(self.cum[-1]) if self.n else 0.0
            self.M = round(W)
            self.W = W
            self.scale = W / self.M if self.M > 0 else 0.0
        else:
            self.M = self.n

    def draw(self, g: np.random.Generator) -> np.ndarray:
        if self.M == 0:
            return np.zeros(0, dtype=np.int32)
        if self.kind == "frequency":
            u = g.random(self.M)
            u *= self.W
            u.sort()  # the same draws; sorted keys make the binary searches run forward
            idx = np.searchsorted(self.cum, u, side="right")
            np.minimum(idx, self.n - 1, out=idx)
            return idx
        return g.integers(0, self.n, size=self.n, dtype=np.int32)


class PairedResampler:
    """Draws the paired replicates: each score's replicate cell weights from the same rows.

    Parameters
    ----------
    y : ndarray of bool (n,)
    cells : list of ModelCells, one per score (all on the same rows)
    sample_weight : ndarray (n,), optional
    weight_kind : {"frequency", "sampling"}, optional (required with weights)
    """

    def __init__(self, y: np.ndarray, cells: list[ModelCells], *, sample_weight=None,
                 weight_kind: str | None = None):
        if sample_weight is not None and weight_kind not in ("frequency", "sampling"):
            raise InputError("weight_kind", f"must be 'frequency' or 'sampling' with weights, got "
                             f"{weight_kind!r}")
        self.cells = cells
        self.k = len(cells)
        ev_rows = np.flatnonzero(y)
        ne_rows = np.flatnonzero(~y)
        w = None if sample_weight is None else np.asarray(sample_weight, dtype=np.float64)
        self.events = _ClassDraw(ev_rows, w, weight_kind)
        self.ev_cell = [c.row_cell[ev_rows] for c in cells]
        self.non_events = _ClassDraw(ne_rows, w, weight_kind)
        self.ne_cell = [c.row_cell[ne_rows] for c in cells]

    @property
    def n_events_rows(self) -> int:
        return self.events.n

    def replicate(self, seed: int, r: int):
        """Replicate r: ``(events, non_events, event_mass)``.

        ``events[m]`` / ``non_events[m]``: (C_m,) replicate cell weights of
        score m; ``event_mass`` (P,): the replicate weight of each event row
        (its number of draws times its unit weight), for per-event values
        such as miss costs.
        """
        g = np.random.default_rng([int(seed), int(r)])
        E = self.events
        ie = E.draw(g)
        mass = np.bincount(ie, minlength=E.n).astype(np.float64)
        if E.kind == "sampling":
            mass *= E.w
        elif E.scale != 1.0:
            mass *= E.scale
        events = [np.bincount(cell, weights=mass, minlength=c.n_cells)
                  for cell, c in zip(self.ev_cell, self.cells)]
        Nd = self.non_events
        idx = Nd.draw(g)
        idx.sort()  # the same multiset; every gather below then runs forward through memory
        wd = Nd.w[idx] if Nd.kind == "sampling" else None
        non_events = []
        for m in range(self.k):
            cnt = np.bincount(self.ne_cell[m][idx], weights=wd, minlength=self.cells[m].n_cells)
            cnt = cnt.astype(np.float64, copy=False)
            if wd is None and Nd.scale != 1.0:
                cnt = cnt * Nd.scale
            non_events.append(cnt)
        return events, non_events, mass

    def run(self, n_replicates: int, seed: int, consume, *, start: int = 0, progress=None,
            n_jobs: int = 1, chunk: int | None = None) -> None:
        """Call ``consume(r, events, non_events, event_mass)`` for replicates start..start+n-1.

        ``progress(done, total)`` after each chunk; ``n_jobs`` threads draw
        replicates side by side (numpy releases the GIL in its draws, sorts
        and searches). Results never depend on ``chunk`` or ``n_jobs``.
        """
        n_rep = int(n_replicates)
        if n_rep < 1:
            raise InputError("n_replicates", f"must be at least 1, got {n_replicates!r}")
        if int(n_jobs) < 1:
            raise InputError("n_jobs", f"must be at least 1, got {n_jobs!r}")
        size = int(chunk) if chunk is not None else max(1, min(50, n_rep // 20 or 1))
        if size < 1:
            raise InputError("chunk", f"must be at least 1, got {chunk!r}")

        def one(r):
            consume(r, *self.replicate(seed, r))

        pool = None
        if int(n_jobs) > 1:
            from concurrent.futures import ThreadPoolExecutor

            pool = ThreadPoolExecutor(max_workers=int(n_jobs))
        try:
            stop = start + n_rep
            for lo in range(start, stop, size):
                hi = min(lo + size, stop)
                if pool is None:
                    for r in range(lo, hi):
                        one(r)
                else:
                    list(pool.map(one, range(lo, hi)))
                if progress is not None:
                    progress(hi - start, n_rep)
        finally:
            if pool is not None:
                pool.shutdown(wait=True)


# --------------------------------------------------------------------------- statistics

def _dot(a: np.ndarray, b: np.ndarray) -> float:
    """Inner product of two vectors by einsum's own loop, not BLAS: a multi-threaded BLAS
    spins its threads on every small call, which costs more than the product on a busy
    machine (and makes replicate threads (``n_jobs``) fight over the cores)."""
    return float(np.einsum("i,i->", a, b))


def cell_statistics(events: np.ndarray, non_events: np.ndarray, *,
                    flag_rate: float | None = None, recall: float | None = None,
                    columns=()) -> dict:
    """The statistics of one score in one replicate, from its cell weights.

    With TP_i, FP_i the cumulative event / non-event weight through cell i
    ("flag none" = column 0), P and N the totals:

    * ``roc_auc`` = (sum_i N_i TP_i - sum_i N_i E_i / 2) / (P N) (trapezoids;
      ties count one half);
    * ``average_precision`` = sum_i E_i TP_i / (TP_i + FP_i), over P (only tie
      cells hold events, and each is one point of the curve);
    * ``tp_at_flag_rate``: TP at the strictest point flagging at least
      ``flag_rate`` x (P + N) (its cell's TP: events sit only at tie cells,
      so within a gap cell TP does not move);
    * ``precision_at_recall``: precision at the strictest point with
      TP >= ``recall`` x P (always a tie cell);
    * ``tp`` / ``fp`` at the given cumulative ``columns``.

    NaN where a denominator is 0.
    """
    C = events.shape[0]
    tp = np.empty(C + 1)
    fp = np.empty(C + 1)
    tp[0] = fp[0] = 0.0
    np.cumsum(events, out=tp[1:])
    np.cumsum(non_events, out=fp[1:])
    P, N = float(tp[-1]), float(fp[-1])
    out = {"P": P, "N": N}
    flagged = tp + fp
    with np.errstate(invalid="ignore", divide="ignore"):
        area = float(_dot(non_events, tp[1:]) - 0.5 * _dot(non_events, events))
        out["roc_auc"] = area / (P * N)
        # E_i TP_i / (TP_i + FP_i) summed over every cell: a gap cell has E_i = 0, and a cell
        # with nothing flagged has TP_i = 0 (the floor only avoids 0/0), so only tie cells add
        prec = tp[1:] / np.maximum(flagged[1:], 1e-300)
        out["average_precision"] = float(_dot(events, prec)) / P
        if flag_rate is not None:
            target = float(flag_rate) * (P + N) * (1.0 - _TARGET_RTOL)
            j = min(int(np.searchsorted(flagged, target, side="left")), C)
            out["tp_at_flag_rate"] = float(tp[j])
        if recall is not None:
            target = float(recall) * P * (1.0 - _TARGET_RTOL)
            j = min(int(np.searchsorted(tp, target, side="left")), C)
            out["precision_at_recall"] = float(tp[j] / (tp[j] + fp[j]))
    cols = np.asarray(list(columns), dtype=np.int64)
    out["tp"] = tp[cols]
    out["fp"] = fp[cols]
    return out
