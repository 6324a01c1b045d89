"""The exact bootstrap: resample the cells between event scores, not the rows.

Every objective and rule improves when false positives fall at fixed true
positives, so everything Fulcrum decides depends on the data only through
the counts at the *event points* (the distinct scores that hold an event,
plus "flag none"). Cut the sorted data into cells, strictest first:

* a cell for every event point: its events, and the run of non-event scores
  between it and the previous (stricter) event point -- a *step*: on the ROC
  curve those non-events come first (horizontal), then the events
  (vertical);
* where non-events share the event score (ties move together), the tie
  keeps a cell of its own (the ties' diagonal) and the run before it is a
  *gap cell* of non-events only;
* a gap cell after the loosest event score, and extra cuts at any threshold
  whose counts are wanted (a pre-specified threshold that is not an event
  score).

With continuous scores almost no event score is shared, so there is about
one cell per event (half as many cells as a separate gap cell before every
event would make, and half the work per replicate).

Drawing n rows with replacement puts a Multinomial(n, cell counts / n) number
of rows in the cells, separately for events and non-events within each
cell. So drawing the *cell counts* from that multinomial gives exactly the
distribution of row resampling for every statistic that depends only on the
counts at the cell boundaries: the choice of every objective and rule (with
or without a confidence bound), ROC AUC (the trapezoids through every point
of a row curve run through the cell boundaries: gap cells are horizontal,
step cells horizontal then vertical, tie cells the diagonal of the ties),
average precision, precision
at a recall level, TPR at an FPR level, and every metric, expected cost and
flag count at a cell boundary. Designs:

* ``"cohort"`` (default): the rows were sampled together, so the number of
  events is part of the sampling uncertainty; each replicate draws the
  event total from Binomial(n, P / n) and then the cells of each class
  (the two steps factor the joint multinomial over all cells exactly);
* ``"case-control"``: events and non-events were sampled separately
  (stratified resampling): each class keeps its total and only the cells
  within it are drawn.

The exceptions (what is not a function of cell counts):

* per-case miss costs: the events are resampled as rows (they are few) when
  the rows are at hand (a :class:`~core.dataset.Dataset`); from a bare Curve
  each cell's events carry the cell's mean cost (exact when a cell holds one
  event, as with continuous scores, or its events share one cost);
* sampling weights: from a Dataset the rows are resampled with their weights
  (exact, O(n) per replicate); from a Curve the cell sums of weights and of
  squared weights are carried and each cell is drawn as W^2 / Q equal-weight
  units of weight Q / W (``"moments"``: the replicate cell totals keep the
  row bootstrap's mean and, up to the multinomial covariance, its variance;
  exact when weights are equal within each cell);
* capacity over time (flags per period from score times): not resampled; a
  capacity-quantile rule enters every replicate as the full-data limit on the
  threshold (see :mod:`core.stability`).

Frequency weights (a row stands for w identical cases) are used as the
counts they are: with integer weights each replicate resamples the cases
exactly. Non-integer frequency weights are masses: a replicate draws
round(W) cases with probabilities proportional to the masses and scales
each by W / round(W).

How a class's multinomial is drawn (exactly, no approximation): cells of
at most 4 rows are drawn as rows (a uniform integer per drawn row, mapped
to its cell); the larger cells get independent Poisson counts with means
proportional to their size, whose total S is then corrected to the class
total m -- m - S more rows drawn in proportion to the cells when S < m, a
uniformly random S - m of the drawn rows removed when S > m. Given S, the
Poisson counts are multinomial with the cells' shares, and adding or
removing uniformly chosen rows keeps them multinomial, so the result is
Multinomial(m, shares). Whole-count cells use the mean = the cell's own
count (any common scale of the means is equally exact) and draw it by
inversion of a table of the Poisson distribution function per distinct
count (``_PoissonTable``: a guide table, one uniform per cell, the rare
draw beyond the table from the exact tail), a few times faster than a
Poisson sampler; fractional masses (scaled weights) use numpy's Poisson.

Cost per replicate: one uniform (or Poisson draw) per large cell, about one
uniform integer per row of the small cells, O(sqrt(n)) for the correction,
then one O(cells) pass for the cumulative sums, AUC, AP and both bands
(compiled loops: :mod:`core.bootstrap_kernels`; the random numbers stay
numpy's) and the policy's choice on its candidate window -- no sort and
nothing of order n (except sampling weights with rows, which resample every
row). Building the tables costs a few tens of milliseconds once per data.
Measured (CPU time, one thread, on this project's 2-core machine) with 1M
rows at 2 % events (see ``benchmarks/bench_bootstrap.py``): about 0.33 ms
per replicate with bands, AUC, AP and the policy's choice when the scores
have 4 decimals (about 6,500 cells), about 0.65 ms with continuous scores
(every event its own score: about 20,000 cells), against 0.28-0.39 s per
replicate for resampling the rows and running scikit-learn's two curves.
With ``n_jobs=2`` a worker thread draws the next replicates while the
statistics of the current ones are computed.

Reproducibility: replicate r draws from its own generator
``numpy.random.default_rng([seed, r])`` and makes the same calls in the
same order however replicates are grouped, so any chunking (for a progress
bar), the number of threads, the app and the command line give the same
replicates.

The percentile interval (Efron & Tibshirani, *An Introduction to the
Bootstrap*, 1993) of a statistic is the pair of empirical quantiles
(``numpy.quantile``, linear interpolation) at (1 - c) / 2 and (1 + c) / 2 of
the replicates where the statistic is defined.
"""

from __future__ import annotations

import itertools
import warnings
from dataclasses import dataclass, field

import numpy as np

from core.curve import Curve
from core.errors import InputError

__all__ = [
    "DESIGNS",
    "SMALL_CELL",
    "EventCells",
    "ReplicateChunk",
    "event_cells",
    "bootstrap_counts",
    "roc_auc",
    "average_precision",
    "counts_at",
    "precision_at_recall",
    "tpr_at_fpr",
    "percentile_interval",
    "BootstrapResult",
    "bootstrap",
    "DEFAULT_REPLICATES",
    "DEFAULT_RECALL_GRID",
    "DEFAULT_FPR_GRID",
]

#: Sampling designs: rows drawn together, or events and non-events drawn separately.
DESIGNS = ("cohort", "case-control")

#: Cells of at most this many (integer) rows are drawn as rows, larger ones by Poisson counts.
SMALL_CELL = 4

DEFAULT_REPLICATES = 2000
DEFAULT_RECALL_GRID = np.linspace(0.01, 1.0, 100)
DEFAULT_FPR_GRID = np.linspace(0.0, 1.0, 101)
DEFAULT_RECALL_GRID.setflags(write=False)
DEFAULT_FPR_GRID.setflags(write=False)

_SAMPLING_METHODS = ("rows", "moments")


def _check_design(design: str) -> str:
    if design not in DESIGNS:
        raise InputError("design", f"must be one of {', '.join(DESIGNS)}, got {design!r}")
    return design


# --------------------------------------------------------------------------- units

#: Whole-count cells up to this mass get an inversion table; larger ones use numpy's Poisson.
TABLE_MAX_MASS = 1 << 13
#: At most this many table entries per class (cells of the most frequent masses first):
#: 8 bytes of distribution function and 16 of guide each, so at most 24 MB per class.
TABLE_BUDGET = 1 << 20


class _PoissonTable:
    """Independent Poisson(lam_i) counts for whole-number means, by inversion.

    For each distinct mean v up to :data:`TABLE_MAX_MASS` the table holds
    the cumulative distribution F(x) = P(X <= x) for x = 0..K (K = v +
    ceil(10 sqrt(v)) + 20), computed once as the cumulative sum of
    exp(x log v - v - lgamma(x + 1)), and a guide: for bucket j of 2 (K + 2)
    equal slices of [0, 1), a lower bound of the first x with F(x) > j / M.
    A draw is x = the first x with F(x) > u for one uniform u: start at the
    guide and walk up (exact: only comparisons with F are used; a compiled
    loop, :func:`core.bootstrap_kernels.poisson_lookup`). u >= F(K) (probability below 1e-20) draws
    from the tail X | X > K by sequential inversion, so nothing is truncated.
    Means above the cap, or beyond the table budget, use ``Generator.poisson``.
    About 10 vectorised operations per cell instead of a Poisson rejection
    sampler (4-8x faster per cell).
    """

    PAD_SD = 10.0
    PAD = 20

    def __init__(self, lam, *, pad_sd: float | None = None, pad: int | None = None):
        lam = np.asarray(lam, dtype=np.int64)
        self.k = lam.shape[0]
        pad_sd = self.PAD_SD if pad_sd is None else float(pad_sd)
        pad = self.PAD if pad is None else int(pad)
        vals, inv, counts = np.unique(lam, return_inverse=True, return_counts=True)
        K = vals + np.ceil(pad_sd * np.sqrt(vals)).astype(np.int64) + pad
        size = K + 2  # x = 0..K and a sentinel F = 2 above every uniform
        keep = vals <= TABLE_MAX_MASS
        if size[keep].sum() > TABLE_BUDGET:  # the masses serving most cells first
            order = np.flatnonzero(keep)[np.argsort(-counts[keep] / size[keep], kind="stable")]
            within = np.cumsum(size[order]) <= TABLE_BUDGET
            keep = np.zeros(vals.shape[0], dtype=bool)
            keep[order[within]] = True
        kv = np.flatnonzero(keep)
        sizes = size[kv]
        foff = (np.cumsum(sizes) - sizes).astype(np.intp)
        M = 2 * sizes  # guide buckets per table
        goff = (np.cumsum(M + 1) - (M + 1)).astype(np.intp)
        # every table at once: x, its table's mean, the log pmf; the cumulative sums per
        # table in extended precision (the tables' running total is subtracted exactly)
        seg = np.repeat(np.arange(kv.shape[0]), sizes)
        x = np.arange(seg.shape[0], dtype=np.intp) - foff[seg]
        ld = np.longdouble
        v = vals[kv].astype(ld)
        # log P(X = x) = -v + sum_{k<=x} log(v / k): small terms summed in extended precision
        logk = np.log(np.arange(1, int(sizes.max()) + 1 if kv.size else 2, dtype=ld))
        step = np.log(v)[seg] - logk[np.maximum(x, 1) - 1]
        step[foff] = 0.0
        logp = (_segment_cumsum(step, foff, seg) - v[seg]).astype(np.float64)
        pmf = np.exp(logp).astype(ld)
        top = foff + sizes - 1  # the sentinel's position
        pmf[top] = 0.0
        F = _segment_cumsum(pmf, foff, seg).astype(np.float64)
        F[top] = 2.0
        # bucket j of a table covers [j/M, (j+1)/M): its answer is at or after the first x
        # with F(x) > j/M; counted conservatively (F(x) M (1 + 1e-12) <= j) it never overshoots
        Ms = M[seg]
        b = np.ceil(F * Ms * (1.0 + 1e-12)).astype(np.intp)
        ok = b <= Ms
        cnt = np.cumsum(np.bincount((goff[seg] + b)[ok], minlength=int((M + 1).sum())))
        segg = np.repeat(np.arange(kv.shape[0]), M + 1)
        before = np.concatenate([[0], cnt[:-1]])[goff]
        G = foff[segg] + np.minimum(cnt - before[segg], (sizes - 2)[segg])
        self.F, self.G = F, G
        tab = keep[inv]
        self.tab_idx = np.flatnonzero(tab)
        self.other_idx = np.flatnonzero(~tab)
        self.other_lam = lam[~tab].astype(np.float64)
        seg = np.searchsorted(kv, inv[tab])  # each tabled cell's table
        self.cell_M = M[seg].astype(np.float64)
        self.cell_goff = goff[seg]
        self.cell_foff = foff[seg]
        self.cell_top = top[seg]
        self.cell_past = self.cell_top - self.cell_foff  # K + 1: the count past the table
        self.cell_lam = lam[tab].astype(np.float64)
        self.all_tab = self.other_idx.size == 0

    @property
    def n_tabled(self) -> int:
        return int(self.tab_idx.shape[0])

    def lookup(self, U: np.ndarray):
        """Tabled counts for uniforms ``U`` (R, n_tabled): ``(X, tail)`` where ``tail`` lists
        the flat positions that fell beyond the table (to be drawn by :meth:`fill_tail`).

        Each count is the first table position at or after the guide's lower bound
        whose F exceeds the uniform (:func:`core.bootstrap_kernels.poisson_lookup`)."""
        from core.bootstrap_kernels import poisson_lookup

        U = np.ascontiguousarray(U, dtype=np.float64)
        X = np.empty(U.shape, dtype=np.int64)
        n_tail = poisson_lookup(U, self.F, self.G, self.cell_M, self.cell_goff, self.cell_foff,
                                self.cell_past, X)
        tail = np.flatnonzero(X == self.cell_past) if n_tail else np.zeros(0, dtype=np.intp)
        return X, tail

    def fill_tail(self, g: np.random.Generator, x: np.ndarray, cols) -> None:
        """Draw X | X > K for the tabled cells ``cols`` of one row ``x`` (beyond the table)."""
        for c in cols:
            x[c] = _poisson_tail(g, self.cell_lam[c], int(x[c]) - 1)

    def draw(self, g: np.random.Generator) -> np.ndarray:
        """One Poisson count per cell (int64)."""
        X, tail = self.lookup(g.random(self.n_tabled)[None, :])
        x = X[0]
        self.fill_tail(g, x, tail.tolist())
        if self.all_tab:
            return x
        out = np.empty(self.k, dtype=np.int64)
        out[self.tab_idx] = x
        out[self.other_idx] = g.poisson(self.other_lam)
        return out


def _segment_cumsum(a, starts, seg):
    """Cumulative sums of ``a`` restarting at each of ``starts`` (``seg``: each entry's
    segment), in ``a``'s precision."""
    run = np.cumsum(a)
    before = np.concatenate([np.zeros(1, dtype=run.dtype), run[:-1]])[starts]
    return run - before[seg]


def _poisson_tail(g: np.random.Generator, lam: float, K: int) -> int:
    """One draw of X | X > K for X ~ Poisson(lam), K >= lam: sequential inversion of
    P(X = k) / P(X > K) from k = K + 1 (the terms fall at least geometrically)."""
    from scipy.special import gammaln, pdtrc

    sf = float(pdtrc(K, lam))
    k = K + 1
    p = float(np.exp(k * np.log(lam) - lam - gammaln(k + 1.0)))
    u = g.random() * sf
    while u >= p > 0.0:
        u -= p
        k += 1
        p *= lam / k
    return k


class _Units:
    """One class's resampling units (cells, or rows) and how they map to cells.

    ``mass`` is how many cases each unit stands for (a cell's row count, a
    row's frequency weight, or a cell's effective size); a drawn unit adds
    ``unit_weight`` (x ``scale``) to its cell's weight, its square to the
    cell's squared weight and ``unit_cost`` (x ``scale``) to its cell's miss
    cost.
    """

    def __init__(self, mass, n_cells, *, cell=None, unit_weight=None, unit_cost=None,
                 track_sq=False):
        mass = np.asarray(mass, dtype=np.float64)
        self.n_cells = int(n_cells)
        self.cell = None if cell is None else np.asarray(cell, dtype=np.int64)
        self.unit_weight = (None if unit_weight is None
                            else np.asarray(unit_weight, dtype=np.float64))
        self.unit_cost = None if unit_cost is None else np.asarray(unit_cost, dtype=np.float64)
        self.track_sq = bool(track_sq)
        self.k = mass.shape[0]
        total = float(mass.sum())
        self.total_mass = total
        self.integer = bool(np.all(mass == np.round(mass)))
        self.n_units = int(round(total))
        self.scale = 1.0 if self.integer or self.n_units == 0 else total / self.n_units
        positive = mass > 0
        if self.integer:
            small = positive & (mass <= SMALL_CELL)
        else:
            small = np.zeros(self.k, dtype=bool)
        large = positive & ~small
        self.small_idx = np.flatnonzero(small)
        self.small_cum = np.cumsum(mass[small].astype(np.int64))
        self.small_total = int(self.small_cum[-1]) if self.small_cum.size else 0
        self.small_singletons = bool(self.small_idx.size and np.all(mass[small] == 1))
        # row -> small unit (empty: one row per unit), so a drawn row finds its unit by a gather
        self.small_unit_of = (np.zeros(0, dtype=np.int64) if self.small_singletons
                              else np.repeat(np.arange(self.small_idx.size, dtype=np.int64),
                                             mass[small].astype(np.int64)))
        # large cells in order of mass (then position): the table draws then walk its
        # segments in order, which keeps them in cache (any fixed order is equally exact)
        self.large_idx = np.flatnonzero(large)
        self.large_idx = self.large_idx[np.argsort(mass[self.large_idx], kind="stable")]
        self.large_mass = mass[self.large_idx]
        self.large_total = float(self.large_mass.sum())
        if self.integer:
            self.large_cum = np.cumsum(self.large_mass.astype(np.int64))
        else:
            self.large_cum = np.cumsum(self.large_mass)
        self.large_share = (self.large_mass / self.large_total if self.large_idx.size
                            else self.large_mass)
        self.small_share = (self.small_total / total) if total > 0 else 0.0
        # whole-count large cells: Poisson(mass) by table inversion (see _PoissonTable)
        self.table = (_PoissonTable(self.large_mass.astype(np.int64))
                      if self.integer and self.large_idx.size else None)

    # ------------------------------------------------------------------ draws
    @property
    def plain(self) -> bool:
        """Units are the cells themselves, each drawn unit counting 1 (no weights, no costs)."""
        return (self.cell is None and self.unit_weight is None and self.unit_cost is None
                and not self.track_sq and self.scale == 1.0)

    def draw(self, g: np.random.Generator, m: int, out: np.ndarray | None = None) -> np.ndarray:
        """Multinomial(m, mass / total) counts over the units (exact; see the module docstring).

        ``out``: a zeroed row to write the counts into (float64), else a new int64 array.
        """
        counts = np.zeros((1, self.k), dtype=np.int64) if out is None else out[None, :]
        self.draw_rows([g], [m], counts)
        return counts[0]

    def draw_rows(self, gens, ms, out: np.ndarray) -> None:
        """:meth:`draw` for several replicates at once: row i of ``out`` gets
        Multinomial(ms[i]) counts from generator ``gens[i]`` alone.

        Only the units' own columns are written (every one of them, so a
        reused row needs no clearing); the columns of cells without mass in
        this class are left as they are: zero in any row that started zeroed.

        Each generator makes the same calls in the same order as a lone
        :meth:`draw` (split between small and large cells, small rows, the
        large cells' uniforms; then beyond-table draws and the correction), so
        the rows do not depend on how replicates are grouped; the table
        look-up runs once over all rows.
        """
        from core.bootstrap_kernels import count_into

        R = len(gens)
        m_large = np.zeros(R, dtype=np.int64)
        scratch = np.empty(self.small_idx.size, dtype=np.int64)
        tab = self.table
        U = np.zeros((R, tab.n_tabled)) if tab is not None else None
        X = None if tab is not None else np.zeros((R, self.large_idx.size), dtype=np.int64)
        for i in range(R):
            g, m = gens[i], int(ms[i])
            if m <= 0:
                out[i, self.small_idx] = 0
                out[i, self.large_idx] = 0
                continue
            if self.large_idx.size == 0:
                m_small = m
            elif self.small_idx.size == 0:
                m_small = 0
            else:
                m_small = int(g.binomial(m, self.small_share))
            if self.small_idx.size:
                u = g.integers(0, self.small_total, m_small) if m_small else self.small_idx[:0]
                count_into(out[i], self.small_idx, self.small_unit_of, u, scratch)
            m_large[i] = m - m_small
            if m_large[i]:
                if tab is not None:
                    g.random(out=U[i])
                else:
                    X[i] = g.poisson(m_large[i] * self.large_share)
        if self.large_idx.size:
            out[np.flatnonzero(m_large == 0)[:, None], self.large_idx[None, :]] = 0
        if not m_large.any():
            return
        if tab is not None:  # Poisson(mass) per large cell: any Poisson means work
            XT, tail = tab.lookup(U)
            tails = [[] for _ in range(R)]
            for f in tail.tolist():
                tails[f // tab.n_tabled].append(f % tab.n_tabled)
            if tab.all_tab:
                X = XT
            else:
                X = np.empty((R, self.large_idx.size), dtype=np.int64)
                X[:, tab.tab_idx] = XT
        for i in np.flatnonzero(m_large).tolist():
            g = gens[i]
            x = X[i]
            if tab is not None:
                if tails[i]:
                    if tab.all_tab:
                        tab.fill_tail(g, x, tails[i])
                    else:
                        xt = x[tab.tab_idx]
                        tab.fill_tail(g, xt, tails[i])
                        x[tab.tab_idx] = xt
                if not tab.all_tab:
                    x[tab.other_idx] = g.poisson(tab.other_lam)
            self._correct(g, x, int(m_large[i]))
            out[i, self.large_idx] = x

    def _correct(self, g, x, m):
        """Poisson counts ``x`` (any common scale of the masses) -> Multinomial(m) in place."""
        from core.bootstrap_kernels import add_rows, remove_rows

        s = int(x.sum())
        if s < m:  # add m - s rows drawn in proportion to the cells
            if self.integer:
                u = g.integers(0, int(self.large_cum[-1]), m - s)
            else:
                u = g.random(m - s) * self.large_cum[-1]
            u.sort()  # sorted: each lands in its cell by one walk (core.bootstrap_kernels)
            add_rows(x, self.large_cum, u)
        elif s > m:  # remove a uniformly random s - m of the s drawn rows
            remove_rows(x, np.sort(g.choice(s, size=s - m, replace=False)))

    def to_cells(self, counts: np.ndarray):
        """Cell weight, squared weight and miss cost of drawn unit ``counts``."""
        c = counts.astype(np.float64)
        w = c if self.unit_weight is None else c * self.unit_weight
        sq = None
        if self.track_sq:
            uw = np.ones(self.k) if self.unit_weight is None else self.unit_weight
            sq = c * (uw * self.scale) ** 2
        cost = None if self.unit_cost is None else c * self.unit_cost
        if self.scale != 1.0:
            w = w * self.scale
            if cost is not None:
                cost = cost * self.scale
        if self.cell is not None:
            n = self.n_cells
            w = np.bincount(self.cell, weights=w, minlength=n)
            if sq is not None:
                sq = np.bincount(self.cell, weights=sq, minlength=n)
            if cost is not None:
                cost = np.bincount(self.cell, weights=cost, minlength=n)
        return w, sq, cost


# --------------------------------------------------------------------------- cells

@dataclass(frozen=True, eq=False)
class EventCells:
    """A curve compressed to the cells between consecutive event scores.

    Cells are in point order (strictest first); cell i covers the curve
    points after ``index[i - 1]`` up to and including ``index[i]`` (after
    "flag none" for i = 0), so the cumulative sums of ``events`` and
    ``non_events`` are the curve's ``tp`` and ``fp`` at ``index``.

    Attributes
    ----------
    thresholds : ndarray (C,)
        Each cell's loosest score: the threshold at its boundary.
    index : ndarray (C,)
        The boundary's point index on the source curve.
    events, non_events : ndarray (C,)
        (Weighted) events and non-events in each cell.
    is_event : ndarray (C,) of bool
        True for a cell whose boundary is an event point.
    steps : ndarray (C,) of bool
        True for a step cell: an event point with non-events before it (a run
        of non-event scores) and none at its own score; on the ROC curve its
        non-events come before its events.
    step_thresholds : ndarray (C,)
        For a step cell, the loosest score of its non-event run (the curve's
        point just before the event point); NaN elsewhere.
    events_sq, non_events_sq : ndarray (C,) or None
        Sums of squared weights (sampling weights).
    event_cost : ndarray (C,) or None
        Summed miss cost of each cell's events.
    weight_kind : None, "frequency" or "sampling"
    sampling_method : None, "rows" or "moments"
        How sampling weights are resampled (see the module docstring).
    cost_exact : bool
        Whether replicate miss costs are exact (events resampled as rows, or
        one event unit per cell).
    curve : Curve
        The source curve.
    """

    thresholds: np.ndarray
    index: np.ndarray
    events: np.ndarray
    non_events: np.ndarray
    is_event: np.ndarray
    higher_is_riskier: bool
    curve: Curve
    steps: np.ndarray = None
    step_thresholds: np.ndarray = None
    weight_kind: str | None = None
    sampling_method: str | None = None
    events_sq: np.ndarray | None = None
    non_events_sq: np.ndarray | None = None
    event_cost: np.ndarray | None = None
    cost_exact: bool = True
    _event_units: _Units = field(default=None, repr=False)
    _nonevent_units: _Units = field(default=None, repr=False)

    @property
    def n_cells(self) -> int:
        return int(self.index.shape[0])

    @property
    def n_events(self) -> float:
        return float(self.curve.n_events)

    @property
    def n_nonevents(self) -> float:
        return float(self.curve.n_nonevents)

    @property
    def n_event_cells(self) -> int:
        return int(np.count_nonzero(self.is_event))

    @property
    def has_costs(self) -> bool:
        return self.event_cost is not None

    @property
    def exact(self) -> bool:
        """True when a replicate is distributed exactly as row (or case) resampling."""
        integer = self._event_units.integer and self._nonevent_units.integer
        if self.weight_kind == "sampling":
            return self.sampling_method == "rows"
        return integer and self.cost_exact

    def column(self, threshold: float) -> int:
        """Column of ``threshold`` in a cumulative replicate matrix (0: "flag none").

        Raises InputError when the threshold's counts are not a cell boundary
        (pass it to :func:`event_cells` in ``thresholds``).
        """
        k = self.curve.index_at(threshold)
        if k == 0:
            return 0
        j = int(np.searchsorted(self.index, k))
        if j >= self.index.shape[0] or self.index[j] != k:
            raise InputError("threshold", f"{threshold!r} does not sit on a cell boundary; pass "
                             "it to event_cells(..., thresholds=[...]) so its counts are kept")
        return j + 1

    def column_of_index(self, k: int) -> int:
        """Column of curve point ``k`` (which must be a boundary); 0 for "flag none"."""
        if k == 0:
            return 0
        j = int(np.searchsorted(self.index, k))
        if j >= self.index.shape[0] or self.index[j] != k:
            raise InputError("index", f"curve point {k} is not a cell boundary")
        return j + 1

    def cell_of(self, scores) -> np.ndarray:
        """Cell index of each score (scores must be the source data's own)."""
        asc = self.curve.distinct_scores
        s = np.asarray(scores, dtype=np.float64)
        j = np.searchsorted(asc, s, side="left")
        d = asc.shape[0]
        if np.any(j >= d) or np.any(asc[np.minimum(j, d - 1)] != s):
            raise InputError("y_score", "holds scores that are not on the curve (use the data's "
                             "own cells)")
        return _row_cells(self.curve, self.index, s)

    def to_curve(self, events=None, non_events=None, *, event_cost=None, events_sq=None,
                 non_events_sq=None, drop_empty: bool = True) -> Curve:
        """A Curve whose points are the cell boundaries, from (replicate) cell counts.

        A step cell gives two points: its non-events at the loosest score of
        their run, then its events at the event score. With no arguments this
        is the source data's curve at its boundaries: the same counts at every
        event point, the same ROC AUC and average precision. Points with no
        case are dropped (they are not points of a row curve) unless
        ``drop_empty=False``.
        """
        e = self.events if events is None else np.asarray(events, dtype=np.float64)
        n = self.non_events if non_events is None else np.asarray(non_events, dtype=np.float64)
        if events is None:
            event_cost, events_sq = self.event_cost, self.events_sq
            non_events_sq = self.non_events_sq

        def f(a):
            return None if a is None else np.asarray(a, dtype=np.float64)

        event_cost, events_sq, non_events_sq = f(event_cost), f(events_sq), f(non_events_sq)
        st = np.flatnonzero(self.steps)
        if st.size:  # a step cell's non-events first, at their own loosest score
            at = st  # np.insert puts each new point before the step cell's own
            zero = np.zeros(st.size)
            thr = np.insert(self.thresholds, at, self.step_thresholds[st])
            e2 = np.insert(np.asarray(e, dtype=np.float64), at, zero)
            n1 = np.asarray(n, dtype=np.float64).copy()
            gap = n1[st].copy()
            n1[st] = 0.0
            n2 = np.insert(n1, at, gap)
            event_cost = None if event_cost is None else np.insert(event_cost, at, zero)
            events_sq = None if events_sq is None else np.insert(events_sq, at, zero)
            if non_events_sq is not None:
                q = non_events_sq.copy()
                gq = q[st].copy()
                q[st] = 0.0
                non_events_sq = np.insert(q, at, gq)
            e, n = e2, n2
        else:
            thr = self.thresholds
        keep = (e + n > 0) if drop_empty else np.ones(e.shape[0], dtype=bool)

        def k(a):
            return None if a is None else a[keep]

        return Curve.from_counts(thr[keep], e[keep], n[keep],
                                 higher_is_riskier=self.higher_is_riskier, event_cost=k(event_cost),
                                 events_sq=k(events_sq), non_events_sq=k(non_events_sq))

    def describe(self) -> str:
        """One sentence on how this data is resampled (for the record and memo)."""
        parts = [f"{self.n_cells:,} cells ({self.n_event_cells:,} event scores)"]
        if self.weight_kind == "sampling":
            if self.sampling_method == "rows":
                parts.append("sampling weights: rows resampled with their weights (exact, O(rows) "
                             "per replicate)")
            else:
                parts.append("sampling weights: each cell drawn as W^2/Q units of weight Q/W "
                             "(carries the sums of squared weights; matches each cell's mean and "
                             "variance, approximate)")
        elif self.weight_kind == "frequency":
            parts.append("frequency weights used as case counts"
                         + ("" if self._event_units.integer and self._nonevent_units.integer
                            else " (non-integer: scaled masses, approximate)"))
        if self.has_costs:
            parts.append("per-case miss costs: events resampled as rows" if self._event_units.cell
                         is not None else
                         "per-case miss costs: each cell's events carry its mean cost"
                         + ("" if self.cost_exact else " (approximate where a cell holds "
                                                       "several events)"))
        return "; ".join(parts)


def _boundaries(curve: Curve, extra_points) -> np.ndarray:
    """Point indices (>= 1) that end a cell: each event point, the point just before an
    event point that non-events share (its tie keeps a cell of its own), every extra
    point and the last point."""
    d = curve.n_points - 1
    ev = np.flatnonzero(curve.event_point_mask)
    ev = ev[ev > 0]
    tied = ev[curve.fp[ev] > curve.fp[ev - 1]]
    parts = [ev, tied - 1, np.asarray(extra_points, dtype=np.int64), [d]]
    b = np.unique(np.concatenate([np.asarray(p, dtype=np.int64) for p in parts]))
    return b[b >= 1]


def _row_cells(curve: Curve, boundaries: np.ndarray, scores) -> np.ndarray:
    asc = curve.distinct_scores
    d = asc.shape[0]
    j = np.searchsorted(asc, np.asarray(scores, dtype=np.float64), side="left")
    point = (d - j) if curve.higher_is_riskier else (j + 1)
    return np.searchsorted(boundaries, point, side="left")


def _diff0(cum, idx):
    """Cell sums from a cumulative array (``cum[0] == 0``) read at boundaries ``idx``."""
    v = np.asarray(cum, dtype=np.float64)[idx]
    out = np.empty_like(v)
    out[0] = v[0]
    out[1:] = np.diff(v)
    return out


def event_cells(data, *, thresholds=(), weight_kind: str | None = None,
                sampling_weights: str = "rows") -> EventCells:
    """Compress a Curve (or a Dataset's curve) to its event cells (see the module docstring).

    Parameters
    ----------
    data : Curve or Dataset
    thresholds : sequence of float
        Thresholds (score units) whose counts must be kept although they
        are not event scores, e.g. a pre-specified operating point.
    weight_kind : {"frequency", "sampling"}, optional
        For a Curve only; a weighted Curve carrying squared-weight sums counts
        as sampling-weighted (as in :func:`core.choose.choose`).
    sampling_weights : {"rows", "moments"}
        With sampling weights and the rows at hand (a row Dataset): resample
        rows (exact, slow) or carry the squared weights (fast, approximate).
        A Curve always uses "moments".

    Returns
    -------
    EventCells
    """
    from core.dataset import Dataset

    ds = data if isinstance(data, Dataset) else None
    curve = data.curve() if ds is not None else data
    if not isinstance(curve, Curve):
        raise TypeError(f"expected a Curve or a Dataset, got {type(data).__name__}")
    if ds is not None:
        wk = ds.weight_kind if ds.kind == "rows" else (
            "sampling" if ds.events_sq is not None else ("frequency" if curve.weighted else None))
        if weight_kind is not None and ds.kind == "rows" and weight_kind != wk:
            raise InputError("weight_kind", f"{weight_kind!r} differs from the dataset's {wk!r}")
    else:
        wk = weight_kind if weight_kind is not None else (
            "sampling" if curve.tp_sq is not None else ("frequency" if curve.weighted else None))
    if wk is not None and wk not in ("frequency", "sampling"):
        raise InputError("weight_kind", f"must be 'frequency' or 'sampling', got {wk!r}")
    if sampling_weights not in _SAMPLING_METHODS:
        raise InputError("sampling_weights", f"must be one of {', '.join(_SAMPLING_METHODS)}, "
                         f"got {sampling_weights!r}")
    if wk == "frequency" and not curve.weighted:
        wk = None  # integer counts with no weights: nothing to say

    extra = []
    for t in thresholds:
        t = float(t)
        if np.isnan(t):
            raise InputError("thresholds", "holds NaN")
        extra.append(curve.index_at(t))
    b = _boundaries(curve, extra)
    C = b.shape[0]
    ev_cells = _diff0(curve.tp, b)
    ne_cells = _diff0(curve.fp, b)
    is_event = curve.event_point_mask[b] & (ev_cells > 0)
    # a step: an event point whose cell also holds a run of non-event points before it
    # (none of them at the event score itself, or that tie would have its own cell)
    first = np.concatenate([[1], b[:-1] + 1])  # each cell's first point
    steps = is_event & (ne_cells > 0) & (first < b)
    step_thr = np.full(C, np.nan)
    step_thr[steps] = curve.thresholds[b[steps] - 1]
    ev_sq = ne_sq = None
    if curve.tp_sq is not None:
        ev_sq = _diff0(curve.tp_sq, b)
        ne_sq = _diff0(curve.fp_sq, b)
    cost = None if curve.event_cost_flagged is None else _diff0(curve.event_cost_flagged, b)

    rows = ds is not None and ds.kind == "rows"
    method = None
    if wk == "sampling":
        method = sampling_weights if rows else "moments"
        if method == "moments" and ev_sq is None:
            raise InputError("weight_kind", "sampling weights need the sums of squared weights "
                             "(a count table's events_sq / non_events_sq)")
    cost_exact = True
    ev_units = ne_units = None
    row_cell = None
    if rows and (method == "rows" or cost is not None):
        # cell of every row: its curve point, then the first boundary at or after it
        row_cell = _row_cells(curve, b, ds.y_score)
    w_rows = None if (not rows or ds.sample_weight is None) else ds.sample_weight

    if method == "rows":
        y = ds.y_true
        for cls_mask, is_ev in ((y, True), (~y, False)):
            idx = np.flatnonzero(cls_mask)
            wi = w_rows[idx]
            uc = None
            if is_ev and cost is not None:
                uc = wi * ds.case_cost[idx]
            u = _Units(np.ones(idx.shape[0]), C, cell=row_cell[idx], unit_weight=wi, unit_cost=uc,
                       track_sq=True)
            if is_ev:
                ev_units = u
            else:
                ne_units = u
    elif method == "moments":
        with np.errstate(invalid="ignore", divide="ignore"):
            for cells_w, cells_q, is_ev in ((ev_cells, ev_sq, True), (ne_cells, ne_sq, False)):
                ok = (cells_w > 0) & (cells_q > 0)
                neff = np.where(ok, cells_w ** 2 / np.where(ok, cells_q, 1.0), 0.0)
                unit = np.where(ok, cells_q / np.where(ok, cells_w, 1.0), 0.0)
                uc = None
                if is_ev and cost is not None:
                    uc = np.where(ok, cost / np.where(ok, cells_w, 1.0), 0.0) * unit
                u = _Units(neff, C, unit_weight=unit, unit_cost=uc, track_sq=True)
                if is_ev:
                    ev_units = u
                else:
                    ne_units = u
        cost_exact = False
    else:
        if cost is not None and rows:
            idx = np.flatnonzero(ds.y_true)
            mass = np.ones(idx.shape[0]) if w_rows is None else w_rows[idx]
            ev_units = _Units(mass, C, cell=row_cell[idx], unit_cost=ds.case_cost[idx])
        else:
            uc = None
            if cost is not None:
                with np.errstate(invalid="ignore", divide="ignore"):
                    uc = np.where(ev_cells > 0, cost / np.where(ev_cells > 0, ev_cells, 1.0), 0.0)
                cost_exact = bool(np.all(ev_cells <= 1))
            ev_units = _Units(ev_cells, C, unit_cost=uc)
        ne_units = _Units(ne_cells, C)

    def ro(a):
        if a is None:
            return None
        a = np.ascontiguousarray(a)
        a.setflags(write=False)
        return a

    return EventCells(
        thresholds=ro(curve.thresholds[b]), index=ro(b), events=ro(ev_cells),
        non_events=ro(ne_cells),
        is_event=ro(is_event), higher_is_riskier=curve.higher_is_riskier, curve=curve,
        steps=ro(steps), step_thresholds=ro(step_thr),
        weight_kind=wk, sampling_method=method, events_sq=ro(ev_sq), non_events_sq=ro(ne_sq),
        event_cost=ro(cost), cost_exact=cost_exact, _event_units=ev_units, _nonevent_units=ne_units,
    )


# --------------------------------------------------------------------------- replicates

@dataclass(frozen=True, eq=False)
class ReplicateChunk:
    """Replicates ``start..stop-1``: cell counts, one row per replicate.

    ``events`` / ``non_events`` are (R, C) replicate cell weights (integers when
    they are whole counts -- no weights, no costs: int32 below 2^31 cases, which
    halves the memory a replicate moves, else int64; sums of them upcast);
    ``events_sq`` / ``non_events_sq`` (R, C) squared-weight sums (sampling
    weights only); ``event_cost`` (R, C) the replicate cells' miss cost.
    """

    start: int
    stop: int
    events: np.ndarray
    non_events: np.ndarray
    events_sq: np.ndarray | None = None
    non_events_sq: np.ndarray | None = None
    event_cost: np.ndarray | None = None

    @property
    def n(self) -> int:
        return self.stop - self.start

    def cumulative(self):
        """``(tp, fp)``: (R, C + 1) flagged weight at "flag none" and every boundary."""
        return _cum0(self.events), _cum0(self.non_events)

    def cumulative_sq(self):
        if self.events_sq is None:
            return None, None
        return _cum0(self.events_sq), _cum0(self.non_events_sq)

    def cumulative_cost(self):
        return None if self.event_cost is None else _cum0(self.event_cost)


def _cum0(a):
    """(R, C + 1) float64 cumulative sums with a leading 0 column (integer counts are
    summed as integers: exact, and several times faster than a float cumulative sum)."""
    out = np.empty((a.shape[0], a.shape[1] + 1))
    out[:, 0] = 0.0
    if a.dtype.kind in "iu":
        out[:, 1:] = np.cumsum(a, axis=1)
    else:
        np.cumsum(a, axis=1, out=out[:, 1:])
    return out


def _default_chunk(n_cells: int) -> int:
    """Replicates per chunk: about 2^19 matrix entries (a few MB per array), which balances
    the per-chunk work of the chooser and statistics against cache misses."""
    return int(np.clip((1 << 19) // max(n_cells, 1), 1, 256))


def _draw_block(eu: _Units, nu: _Units, design: str, seed: int, r0: int, mats) -> None:
    """Replicates r0, r0 + 1, ... into the rows of ``mats`` = (events, non_events, events_sq,
    non_events_sq, cost) (R, C) blocks; replicate r draws from its own generator
    ``default_rng([seed, r])`` only, in a fixed order (the cohort's event total, then
    the events' cells, then the non-events' cells), so grouping changes nothing."""
    E, N, Esq, Nsq, K = mats
    R = E.shape[0]
    gens = [np.random.default_rng([int(seed), int(r0 + i)]) for i in range(R)]
    if design == "cohort":  # the event total first: Binomial(n, P / n), then each class's cells
        total = eu.n_units + nu.n_units
        p_ev = eu.total_mass / (eu.total_mass + nu.total_mass)
        m_ev = np.array([int(g.binomial(total, p_ev)) for g in gens], dtype=np.int64)
        m_ne = total - m_ev
    else:
        m_ev = np.full(R, eu.n_units, dtype=np.int64)
        m_ne = np.full(R, nu.n_units, dtype=np.int64)
    if eu.plain and nu.plain:  # whole counts straight into the blocks, one table look-up each
        eu.draw_rows(gens, m_ev, E)
        nu.draw_rows(gens, m_ne, N)
        return
    for i, g in enumerate(gens):
        for units, m, row, sq_row in ((eu, m_ev[i], E[i], None if Esq is None else Esq[i]),
                                      (nu, m_ne[i], N[i], None if Nsq is None else Nsq[i])):
            if units.plain:
                units.draw(g, int(m), out=row)
                continue
            w, sq, cost = units.to_cells(units.draw(g, int(m)))
            row[:] = w
            if sq_row is not None:
                sq_row[:] = sq
            if K is not None and cost is not None:
                K[i] = cost


def bootstrap_counts(cells: EventCells, n_replicates: int = DEFAULT_REPLICATES, seed: int = 0,
                     design: str = "cohort", *, chunk: int | None = None, start: int = 0,
                     progress=None, n_jobs: int = 1, reuse: bool = False):
    """Yield :class:`ReplicateChunk` s of replicate cell counts, ``chunk`` replicates at a time.

    Replicate r uses ``numpy.random.default_rng([seed, r])`` alone, so the
    replicates do not depend on ``chunk``, on ``start`` or on ``n_jobs``
    (``n_jobs > 1``: ``n_jobs - 1`` threads draw the next chunk, split between
    them, while the caller works on the current one; numpy's generators and
    array operations release the GIL). ``progress(done, total)`` is called
    after each chunk. See the module docstring for the draws and their cost.

    ``reuse=True``: the chunks' arrays are recycled (each chunk is overwritten
    by the one after next, or by the next one with ``n_jobs=1``), which spares
    the allocation and first touch of fresh pages -- a large part of a
    replicate's cost with many cells. Use each chunk before asking for the
    next one and keep no reference to its arrays (as :func:`bootstrap` does).
    """
    _check_design(design)
    n_rep = int(n_replicates)
    if n_rep < 1:
        raise InputError("n_replicates", f"must be at least 1, got {n_replicates!r}")
    C = cells.n_cells
    size = _default_chunk(C) if chunk is None else int(chunk)
    if size < 1:
        raise InputError("chunk", f"must be at least 1, got {chunk!r}")
    if int(n_jobs) < 1:
        raise InputError("n_jobs", f"must be at least 1, got {n_jobs!r}")
    eu, nu = cells._event_units, cells._nonevent_units
    # plain cells hold whole counts: integers (exact, and cumulative sums run far faster),
    # 32 bits while every count fits
    dtype = np.float64
    if eu.plain and nu.plain:
        dtype = np.int32 if eu.n_units + nu.n_units < 2**31 else np.int64
    track_sq, has_cost = eu.track_sq, eu.unit_cost is not None

    def fresh(R):
        return (np.zeros((R, C), dtype=dtype), np.zeros((R, C), dtype=dtype),
                np.zeros((R, C)) if track_sq else None, np.zeros((R, C)) if track_sq else None,
                np.zeros((R, C)) if has_cost else None)

    # with reuse: one set of blocks per chunk in flight, taken in turn (a drawn row writes
    # every column it owns, and the columns it does not own stay zero)
    spare = [fresh(size) for _ in range(1 if int(n_jobs) < 2 else 2)] if reuse else None
    turn = itertools.count()

    def alloc(R):
        if spare is None:
            return fresh(R)
        mats = spare[next(turn) % len(spare)]
        return tuple(None if M is None else M[:R] for M in mats)

    def part(mats, a, b):
        return tuple(None if M is None else M[a:b] for M in mats)

    def chunk_of(lo, hi, mats):
        E, N, Esq, Nsq, K = mats
        return ReplicateChunk(start=lo, stop=hi, events=E, non_events=N, events_sq=Esq,
                              non_events_sq=Nsq, event_cost=K)

    stop_all = start + n_rep
    bounds = [(lo, min(lo + size, stop_all)) for lo in range(start, stop_all, size)]
    workers = int(n_jobs) - 1
    if workers < 1:
        for lo, hi in bounds:
            mats = alloc(hi - lo)
            _draw_block(eu, nu, design, seed, lo, mats)
            yield chunk_of(lo, hi, mats)
            if progress is not None:
                progress(hi - start, n_rep)
        return

    # worker threads draw the next chunk while the caller works on this one (numpy's
    # generators and array operations release the GIL); each replicate still draws
    # from its own generator, so the threads change nothing in the values
    from concurrent.futures import ThreadPoolExecutor

    pool = ThreadPoolExecutor(max_workers=workers)

    def submit(lo, hi):
        mats = alloc(hi - lo)
        cuts = np.linspace(0, hi - lo, min(workers, hi - lo) + 1).astype(int).tolist()
        futs = [pool.submit(_draw_block, eu, nu, design, seed, lo + a, part(mats, a, b))
                for a, b in itertools.pairwise(cuts)]
        return lo, hi, mats, futs

    try:
        pending = submit(*bounds[0])
        for k in range(len(bounds)):
            lo, hi, mats, futs = pending
            for f in futs:
                f.result()
            if k + 1 < len(bounds):
                pending = submit(*bounds[k + 1])
            yield chunk_of(lo, hi, mats)
            if progress is not None:
                progress(hi - start, n_rep)
    finally:
        pool.shutdown(wait=True, cancel_futures=True)


# --------------------------------------------------------------------------- statistics

def _totals(tp, fp):
    return tp[:, -1], fp[:, -1]


def roc_auc(tp, fp, steps=None):
    """ROC AUC of each replicate row: trapezoids through (FP, TP) at every boundary.

    ``tp``, ``fp``: (R, C + 1) cumulative counts with "flag none" first;
    ``steps``: the cells' :attr:`EventCells.steps` (their non-events come
    before their events: a horizontal then a vertical edge, no diagonal).
    ``sum_i (FP_i - FP_{i-1}) (TP_i + TP_{i-1}) / (2 P N)``, with ``TP_{i-1}``
    for both ends in a step cell; NaN when a replicate has no events or no
    non-events. Equals :attr:`core.curve.Curve.roc_auc` of the replicate's
    row curve.
    """
    P, N = _totals(tp, fp)
    dfp = np.diff(fp, axis=1)
    height = tp[:, 1:] + tp[:, :-1]
    if steps is not None and np.any(steps):
        st = np.flatnonzero(steps)
        height[:, st] = 2.0 * tp[:, st]  # column st is the point before the step cell st
    area = np.einsum("ij,ij->i", dfp, height) / 2.0
    with np.errstate(invalid="ignore", divide="ignore"):
        return area / (P * N)


def average_precision(tp, fp):
    """Average precision of each replicate row: ``sum_i (R_i - R_{i-1}) P_i``.

    Only boundaries where recall moves contribute (as scikit-learn's
    ``average_precision_score``); NaN without events.
    """
    P, _ = _totals(tp, fp)
    dtp = np.diff(tp, axis=1)
    flagged = tp[:, 1:] + fp[:, 1:]
    with np.errstate(invalid="ignore", divide="ignore"):
        prec = np.where(dtp > 0, tp[:, 1:] / np.where(flagged > 0, flagged, 1.0), 0.0)
        return np.einsum("ij,ij->i", dtp, prec) / P


def counts_at(tp, fp, columns):
    """``(tp, fp, fn, tn)`` of each replicate at the given boundary ``columns``: (R, k) each."""
    cols = np.asarray(columns, dtype=np.int64)
    P, N = _totals(tp, fp)
    t = tp[:, cols]
    f = fp[:, cols]
    return t, f, P[:, None] - t, N[:, None] - f


def precision_at_recall(tp, fp, recall_grid=DEFAULT_RECALL_GRID):
    """Precision of each replicate at the strictest boundary reaching each recall level.

    For recall level r the point is the first (strictest) with
    ``TP >= r P`` (less 1e-12 P for float rounding): the threshold a "recall
    at least r" rule would pick. One binary search per replicate row, no
    pass over the whole matrix. (R, G); NaN for a replicate without events.
    """
    r = np.asarray(recall_grid, dtype=np.float64)
    R, M = tp.shape
    out = np.full((R, r.shape[0]), np.nan)
    for i in range(R):
        P = tp[i, -1]
        if not P > 0:
            continue
        pos = np.minimum(np.searchsorted(tp[i], (r - 1e-12) * P, side="left"), M - 1)
        t = tp[i, pos]
        out[i] = t / (t + fp[i, pos])
    return out


def tpr_at_fpr(tp, fp, fpr_grid=DEFAULT_FPR_GRID, steps=None):
    """TPR of each replicate's ROC curve at each FPR level (linear between boundaries).

    Between two boundaries the row curve is a straight segment (horizontal in
    a gap cell, the ties' diagonal in a tie cell) or, in a step cell
    (``steps``: :attr:`EventCells.steps`), horizontal and then vertical; at a
    vertical step the top is taken. One binary search per replicate row.
    (R, G); NaN for a replicate without events or without non-events.
    """
    f = np.asarray(fpr_grid, dtype=np.float64)
    R, M = tp.shape
    out = np.full((R, f.shape[0]), np.nan)
    for i in range(R):
        P, N = tp[i, -1], fp[i, -1]
        if not (P > 0 and N > 0):
            continue
        x = f * N  # the grid in counts
        j0 = np.clip(np.searchsorted(fp[i], x, side="right") - 1, 0, M - 1)
        j1 = np.minimum(j0 + 1, M - 1)
        x0, x1 = fp[i, j0], fp[i, j1]
        y0, y1 = tp[i, j0], tp[i, j1]
        step = x1 > x0
        if steps is not None:  # horizontal through a step cell (its events at its end)
            step &= ~np.asarray(steps, dtype=bool)[np.minimum(j0, M - 2)]
        slope = np.where(step, (y1 - y0) / np.where(step, x1 - x0, 1.0), 0.0)
        out[i] = np.minimum((y0 + (x - x0) * slope) / P, 1.0)
    return out


def percentile_interval(values, confidence: float = 0.95, axis: int = 0):
    """Percentile bootstrap interval ``(low, high)`` over the defined (non-NaN) replicates.

    Empirical quantiles at (1 - c) / 2 and (1 + c) / 2 with linear
    interpolation (``numpy.nanquantile``); NaN where no replicate is defined.
    Reference: Efron & Tibshirani, *An Introduction to the Bootstrap*, 1993.
    """
    c = float(confidence)
    if not 0.0 < c < 1.0:
        raise InputError("confidence", f"must lie strictly between 0 and 1, got {confidence!r}")
    v = np.asarray(values, dtype=np.float64)
    a = (1.0 - c) / 2.0
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", RuntimeWarning)  # all-NaN slices give NaN, said above
        q = np.nanquantile(v, [a, 1.0 - a], axis=axis)
    if q.ndim == 1:
        return float(q[0]), float(q[1])
    return q[0], q[1]


# --------------------------------------------------------------------------- one pass

@dataclass(frozen=True, eq=False)
class BootstrapResult:
    """Replicate values of the standard statistics (one pass over the replicates).

    Arrays have one row per replicate. ``at`` maps each requested threshold
    to a dict of (R,) arrays: ``tp``, ``fp``, ``fn``, ``tn`` and, when asked,
    ``cost`` (expected cost per case at the prevalence), ``flagged_per_period``
    and ``prevalence`` (the prevalence each replicate was judged at).
    """

    cells: EventCells
    n_replicates: int
    seed: int
    design: str
    roc_auc: np.ndarray
    average_precision: np.ndarray
    recall_grid: np.ndarray
    precision_band: np.ndarray
    fpr_grid: np.ndarray
    tpr_band: np.ndarray
    thresholds: tuple[float, ...]
    at: dict
    events: np.ndarray
    non_events: np.ndarray
    prevalence: float | None
    costs: dict | None = None
    cases_per_period: float | None = None
    notes: tuple[str, ...] = ()

    def band(self, which: str, confidence: float = 0.95):
        """``(grid, low, high)`` percentile band: ``"pr"`` (precision at recall) or ``"roc"``."""
        if which == "pr":
            lo, hi = percentile_interval(self.precision_band, confidence)
            return self.recall_grid, lo, hi
        if which == "roc":
            lo, hi = percentile_interval(self.tpr_band, confidence)
            return self.fpr_grid, lo, hi
        raise ValueError(f"which must be 'pr' or 'roc', got {which!r}")

    def metric_at(self, threshold: float, metric: str, *, prevalence: float | None | str = "same"):
        """Replicate values of a metric at one of the requested thresholds.

        Metrics: those of :func:`core.metrics.confusion_metrics`, plus
        ``cost`` and ``flagged_per_period`` when they were computed.
        ``prevalence="same"`` judges prevalence-dependent metrics at the
        prevalence the pass used (each replicate's own validation prevalence
        when none was given); None at the replicate's validation mix; a number
        at that prevalence.
        """
        from core.metrics import confusion_metrics

        d = self.at[float(threshold)]
        if metric in ("cost", "flagged_per_period"):
            if metric not in d:
                raise KeyError(f"{metric} was not computed (give costs / cases_per_period)")
            return d[metric]
        if prevalence == "same":
            prevalence = self.prevalence
        with np.errstate(invalid="ignore", divide="ignore"):
            if prevalence is None:
                return confusion_metrics(d["tp"], d["fp"], d["fn"], d["tn"])[metric]
            return confusion_metrics(d["tp"], d["fp"], d["fn"], d["tn"],
                                     prevalence=float(prevalence))[metric]

    def describe(self) -> str:
        return (f"exact cell bootstrap, {self.n_replicates:,} replicates, design {self.design}, "
                f"seed {self.seed}; {self.cells.describe()}")


class _ChunkStatistics:
    """Cumulative counts, AUC, AP and both bands of each chunk in one compiled pass per
    replicate (:func:`core.bootstrap_kernels.cell_statistics`: the values of
    :func:`roc_auc`, :func:`average_precision`, :func:`precision_at_recall` and
    :func:`tpr_at_fpr` on ``chunk.cumulative()``), into buffers reused from chunk to
    chunk: the ``tp`` / ``fp`` it returns are overwritten by the next call."""

    def __init__(self, cells: EventCells, n_replicates: int, chunk, recall_grid, fpr_grid):
        both = (cells.events > 0) & (cells.non_events > 0)
        self.tie_weight = np.where(cells.steps, 1.0, np.where(both, 0.5, 0.0))
        self.steps = np.ascontiguousarray(cells.steps, dtype=np.bool_)
        self.rg, self.fg = recall_grid, fpr_grid
        size = _default_chunk(cells.n_cells) if chunk is None else int(chunk)
        self.tp = np.empty((max(1, min(size, int(n_replicates))), cells.n_cells + 1))
        self.fp = np.empty_like(self.tp)

    def __call__(self, ch, auc, ap, pb, tb):
        from core.bootstrap_kernels import cell_statistics

        if ch.n > self.tp.shape[0]:
            self.tp = np.empty((ch.n, self.tp.shape[1]))
            self.fp = np.empty_like(self.tp)
        tp, fp = self.tp[: ch.n], self.fp[: ch.n]
        cell_statistics(ch.events, ch.non_events, self.tie_weight, self.steps, self.rg, self.fg,
                        tp, fp, auc, ap, pb, tb)
        return tp, fp


def _cost_per_case(tp, fp, P, N, cost_cum, cols, costs, pi):
    """Expected cost per case (R, k) at boundary ``cols`` (see core.costs.expected_cost)."""
    with np.errstate(invalid="ignore", divide="ignore"):
        tpr = tp / P[:, None]
        fpr = fp / N[:, None]
        if costs.get("false_negative") is None:
            tot = cost_cum[:, -1][:, None]
            miss = (tot - cost_cum[:, cols]) / P[:, None]
        else:
            miss = float(costs["false_negative"]) * (1.0 - tpr)
        return (pi * miss + float(costs["false_positive"]) * (1.0 - pi) * fpr
                + float(costs.get("true_positive", 0.0)) * pi * tpr
                + float(costs.get("true_negative", 0.0)) * (1.0 - pi) * (1.0 - fpr))


def _prepare(cells, ths, costs, prevalence, n_replicates, recall_grid, fpr_grid):
    """Check a bootstrap's inputs and allocate its per-replicate result arrays."""
    cols = [cells.column(t) for t in ths]
    if costs is not None and costs.get("false_negative") is None and not cells.has_costs:
        raise InputError("costs", "false_negative is missing and the data hold no per-case miss "
                         "costs")
    if prevalence is not None and not 0.0 < float(prevalence) < 1.0:
        raise InputError("prevalence", f"must lie strictly between 0 and 1, got {prevalence!r}")
    n_rep = int(n_replicates)
    rg = np.asarray(recall_grid, dtype=np.float64)
    fg = np.asarray(fpr_grid, dtype=np.float64)
    k = len(cols)
    arrays = (np.empty(n_rep), np.empty(n_rep), np.empty((n_rep, rg.shape[0])),
              np.empty((n_rep, fg.shape[0])), np.empty(n_rep), np.empty(n_rep),
              np.empty((n_rep, k)), np.empty((n_rep, k)),
              np.empty((n_rep, k)) if costs is not None else None, np.empty(n_rep))
    return cols, n_rep, rg, fg, arrays


def _record_points(ch, tp, fp, P, N, s, cols, costs, prevalence, at_tp, at_fp, at_cost, at_pi) -> None:
    """Store one chunk's prevalence, counts and cost at the fixed thresholds' columns."""
    with np.errstate(invalid="ignore", divide="ignore"):
        pi = np.full(ch.n, float(prevalence)) if prevalence is not None else P / (P + N)
    at_pi[s] = pi
    if len(cols):
        t, f, _, _ = counts_at(tp, fp, cols)
        at_tp[s], at_fp[s] = t, f
        if at_cost is not None:
            at_cost[s] = _cost_per_case(t, f, P, N, ch.cumulative_cost(), cols, costs, pi[:, None])


def _points_by_threshold(ths, at_tp, at_fp, at_cost, at_pi, Ps, Ns, cases_per_period) -> dict:
    """Replicate counts (and cost, flags per period) at each fixed threshold."""
    at = {}
    for j, t in enumerate(ths):
        d = {"tp": at_tp[:, j], "fp": at_fp[:, j], "fn": Ps - at_tp[:, j], "tn": Ns - at_fp[:, j],
             "prevalence": at_pi}
        if at_cost is not None:
            d["cost"] = at_cost[:, j]
        if cases_per_period is not None:
            with np.errstate(invalid="ignore", divide="ignore"):
                tpr = d["tp"] / Ps
                fpr = d["fp"] / Ns
            d["flagged_per_period"] = (at_pi * tpr + (1.0 - at_pi) * fpr) * float(cases_per_period)
        at[t] = d
    return at


def bootstrap(data, *, n_replicates: int = DEFAULT_REPLICATES, seed: int = 0,
              design: str = "cohort", thresholds=(), prevalence: float | None = None,
              costs: dict | None = None, cases_per_period: float | None = None,
              recall_grid=DEFAULT_RECALL_GRID, fpr_grid=DEFAULT_FPR_GRID, chunk: int | None = None,
              progress=None, collectors=(), cells: EventCells | None = None,
              sampling_weights: str = "rows", n_jobs: int = 1) -> BootstrapResult:
    """The exact bootstrap of the curve's statistics in one pass.

    Parameters
    ----------
    data : Curve or Dataset
    n_replicates, seed, design, chunk, progress
        See :func:`bootstrap_counts`.
    thresholds : sequence of float
        Operating points whose counts (and cost, flags per period) are kept
        per replicate.
    prevalence : float, optional
        Deployment prevalence for cost and flags per period; None judges each
        replicate at its own validation prevalence (with ``"case-control"``
        that is the fixed sample prevalence).
    costs : dict, optional
        ``false_positive``, ``false_negative`` (None: per-case miss costs),
        ``true_positive``, ``true_negative``: expected cost per case.
    cases_per_period : float, optional
        Cases per period: flagged per period = flag rate at the prevalence x it.
    recall_grid, fpr_grid : array-like
        Levels for the PR and ROC bands.
    collectors : sequence
        Objects with ``update(chunk, tp, fp)`` called on every chunk (e.g.
        the threshold-stability collector), so one pass serves them all. The
        chunk's and ``tp`` / ``fp``'s arrays are recycled for later chunks:
        copy what must outlive the call.
    cells : EventCells, optional
        Reuse cells already built from ``data`` (they must keep ``thresholds``).
    n_jobs : int, default 1
        Threads drawing replicates (see :func:`bootstrap_counts`).

    Returns
    -------
    BootstrapResult
    """
    _check_design(design)
    ths = tuple(float(t) for t in thresholds)
    if cells is None:
        cells = event_cells(data, thresholds=ths, sampling_weights=sampling_weights)
    cols, n_rep, rg, fg, (auc, ap, pb, tb, Ps, Ns, at_tp, at_fp, at_cost, at_pi) = _prepare(
        cells, ths, costs, prevalence, n_replicates, recall_grid, fpr_grid)
    stats = _ChunkStatistics(cells, n_rep, chunk, rg, fg)
    for ch in bootstrap_counts(cells, n_rep, seed, design, chunk=chunk, progress=progress,
                               n_jobs=n_jobs, reuse=True):
        s = slice(ch.start, ch.stop)
        tp, fp = stats(ch, auc[s], ap[s], pb[s], tb[s])
        P, N = _totals(tp, fp)
        Ps[s], Ns[s] = P, N
        _record_points(ch, tp, fp, P, N, s, cols, costs, prevalence, at_tp, at_fp, at_cost, at_pi)
        for c in collectors:
            c.update(ch, tp, fp)
    at = _points_by_threshold(ths, at_tp, at_fp, at_cost, at_pi, Ps, Ns, cases_per_period)
    notes = []
    if not cells.exact:
        notes.append("approximate: " + cells.describe())
    return BootstrapResult(
        cells=cells, n_replicates=n_rep, seed=int(seed), design=design, roc_auc=auc,
        average_precision=ap, recall_grid=rg, precision_band=pb, fpr_grid=fg, tpr_band=tb,
        thresholds=ths, at=at, events=Ps, non_events=Ns,
        prevalence=None if prevalence is None else float(prevalence),
        costs=None if costs is None else dict(costs),
        cases_per_period=None if cases_per_period is None else float(cases_per_period),
        notes=tuple(notes))
