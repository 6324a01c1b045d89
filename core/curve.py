"""The exact threshold sweep: one operating point per distinct score.

A case is *flagged* when ``score >= threshold`` (or ``score <= threshold`` when
lower scores mean higher risk). :func:`sweep` returns a :class:`Curve` whose
points are "flag none" (threshold +inf, or -inf for lower-is-riskier) followed
by every distinct score from the strictest to the loosest. Ties move together:
all cases sharing a score are flagged at once. Every threshold in the
half-open interval between a point's score and the next looser distinct score
gives the same counts (:meth:`Curve.at` returns both ends).

Algorithm (no Python loop over rows or thresholds): one ``numpy.sort`` of all
scores gives the distinct values and their row counts; the events are placed
among them by binary search (``searchsorted``) and counted with ``bincount``;
cumulative sums in float64 give the flagged event weight ``tp`` and non-event
weight ``fp`` at every point. Weighted input places every row by binary search
instead (no argsort of rows). A count table (what one SQL ``GROUP BY score``
returns) goes through :meth:`Curve.from_counts` and gives the identical curve.

References: scikit-learn's ``confusion_matrix_at_thresholds``, ``roc_curve``
(``drop_intermediate=False``) and ``precision_recall_curve`` compute the same
counts in the other order; the tests check them against each other.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from functools import cached_property

import numpy as np
import pandas as pd

from core.errors import InputError
from core.metrics import confusion_metrics

__all__ = ["Curve", "OperatingPoint", "sweep"]


# --------------------------------------------------------------------------- checks

def _positions(mask) -> np.ndarray:
    return np.flatnonzero(mask)


def _as_1d(name: str, values) -> np.ndarray:
    arr = np.asarray(values)
    if arr.ndim != 1:
        raise InputError(name, f"must be one-dimensional, got shape {arr.shape}")
    return arr


def _check_labels(y_true) -> np.ndarray:
    y = _as_1d("y_true", y_true)
    if y.dtype == np.bool_:
        return y
    if y.dtype.kind in "iuf":
        with np.errstate(invalid="ignore"):
            bad = ~((y == 0) | (y == 1))
        if bad.any():
            others = pd.unique(pd.Series(y[bad])).tolist()[:5]
            raise InputError("y_true", f"must be 0/1 or bool; other values found {others}", _positions(bad))
        return y == 1
    # object arrays (e.g. a pandas object column): numbers and bools only, no strings
    kind = pd.api.types.infer_dtype(y, skipna=False)
    if kind in ("boolean", "integer", "floating", "mixed-integer-float"):
        return _check_labels(y.astype(np.float64))
    ser = pd.Series(y, dtype=object)
    numeric = pd.to_numeric(ser, errors="coerce")
    is_str = ser.map(type).isin([str]).to_numpy()
    bad = is_str | ~(numeric.isin([0, 1]).to_numpy())
    others = pd.unique(ser[bad]).tolist()[:5]
    raise InputError("y_true", f"must be 0/1 or bool; other values found {others}", _positions(bad))


def _check_finite(name: str, values, n: int, *, allow_negative: bool = True,
                  check_values: bool = True) -> np.ndarray:
    arr = _as_1d(name, values)
    if arr.shape[0] != n:
        raise InputError(name, f"has {arr.shape[0]:,} values but y_true has {n:,}; lengths must match")
    if arr.dtype.kind not in "iufb":
        try:
            arr = arr.astype(np.float64)
        except (TypeError, ValueError):
            ser = pd.to_numeric(pd.Series(arr, dtype=object), errors="coerce")
            bad = ser.isna().to_numpy() & ~pd.isna(pd.Series(arr, dtype=object)).to_numpy()
            raise InputError(name, "holds values that are not numbers", _positions(bad)) from None
    arr = np.asarray(arr, dtype=np.float64)
    if not check_values:  # the caller sorts and checks the ends (NaN sorts last)
        return arr
    _raise_if_not_finite(name, arr)
    if not allow_negative:
        neg = arr < 0
        if neg.any():
            raise InputError(name, "holds negative values", _positions(neg))
    return arr


def _raise_if_not_finite(name: str, arr: np.ndarray) -> None:
    bad = ~np.isfinite(arr)
    if bad.any():
        raise InputError(name, "holds NaN or infinite values", _positions(bad))


def _check_sorted_ends(name: str, sorted_values: np.ndarray, original: np.ndarray) -> None:
    """After a sort, NaN sits at the end and infinities at the ends: O(1) check."""
    if sorted_values.shape[0] and not (np.isfinite(sorted_values[0]) and np.isfinite(sorted_values[-1])):
        _raise_if_not_finite(name, original)


def _check_both_classes(pos_total: float, neg_total: float, n: int, weighted: bool) -> None:
    what = "weight" if weighted else "rows"
    if n == 0:
        raise InputError("y_true", "is empty: no cases to sweep")
    if pos_total <= 0:
        raise InputError("y_true", f"holds no events (y = 1) with positive {what}: need both classes")
    if neg_total <= 0:
        raise InputError("y_true", f"holds no non-events (y = 0) with positive {what}: need both classes")


# --------------------------------------------------------------------------- curve

def _readonly(a):
    if a is None:
        return None
    a = np.ascontiguousarray(a)
    a.setflags(write=False)
    return a


def _positive_zero(asc: np.ndarray) -> np.ndarray:
    """Write -0.0 as +0.0 in a sorted distinct array (at most one zero: O(log n))."""
    asc = np.asarray(asc, dtype=np.float64)
    i = int(np.searchsorted(asc, 0.0))
    if i < asc.shape[0] and asc[i] == 0.0 and np.signbit(asc[i]):
        if not asc.flags.writeable:
            asc = asc.copy()
        asc[i] = 0.0
    return asc


@dataclass(frozen=True)
class OperatingPoint:
    """Counts and metrics at one threshold.

    ``threshold`` is the value asked for; ``point_threshold`` is the curve's
    own threshold for the same counts (the distinct score s_k, or +/-inf for
    "flag none"); every threshold from ``interval_low`` to ``interval_high``
    gives these counts, with ``closed`` naming the end that is included
    ("high" when higher is riskier, "low" otherwise).
    """

    threshold: float
    point_threshold: float
    index: int
    interval_low: float
    interval_high: float
    closed: str
    higher_is_riskier: bool
    tp: float
    fp: float
    fn: float
    tn: float
    metrics: dict[str, float]
    prevalence: float | None = None
    deployment: dict[str, float] | None = None
    miss_cost: float | None = None

    @property
    def counts(self) -> dict[str, float]:
        return {"tp": self.tp, "fp": self.fp, "fn": self.fn, "tn": self.tn}


@dataclass(frozen=True, eq=False)
class Curve:
    """The exact operating curve of a score, strictest point first.

    Attributes
    ----------
    thresholds : ndarray (d + 1,)
        +inf ("flag none"; -inf when lower is riskier), then the d distinct
        scores from strictest to loosest, in the user's score units.
    tp, fp : ndarray (d + 1,)
        Flagged event and non-event weight at each threshold (cumulative,
        float64); ``tp[0] == fp[0] == 0``.
    n_events, n_nonevents : float
        Total event and non-event weight (P and N).
    higher_is_riskier : bool
    event_cost_flagged : ndarray (d + 1,) or None
        Summed (weighted) miss cost of the events flagged at each threshold,
        when per-case miss costs were given; ``event_cost_total`` is the sum
        over all events.
    tp_sq, fp_sq : ndarray (d + 1,) or None
        Cumulative sums of squared weights (for Kish's effective size with
        sampling weights); None when unweighted.
    n_rows : int
        Number of input rows (or the summed unweighted count of a table).
    """

    thresholds: np.ndarray
    tp: np.ndarray
    fp: np.ndarray
    n_events: float
    n_nonevents: float
    higher_is_riskier: bool = True
    event_cost_flagged: np.ndarray | None = None
    event_cost_total: float | None = None
    tp_sq: np.ndarray | None = None
    fp_sq: np.ndarray | None = None
    n_rows: int = 0
    weighted: bool = False
    _ascending: np.ndarray = field(default=None, repr=False)

    # ------------------------------------------------------------------ builders
    @classmethod
    def _from_cumulative(cls, asc, tp_strict, flagged_strict, *, higher_is_riskier, cost_strict=None,
                         tp_sq_strict=None, flagged_sq_strict=None, n_rows, weighted,
                         fp_strict=None, fp_sq_strict=None):
        """Build from distinct scores ``asc`` (ascending) and cumulative sums in point order.

        The ``*_strict`` arrays hold, for the distinct scores from strictest to
        loosest, the flagged event weight, the flagged total weight (and
        optionally the flagged miss cost and squared-weight sums); "flag none"
        (all zeros) is prepended here.
        """
        asc = _positive_zero(asc)
        d = asc.shape[0]

        def stack(first, values):
            if values.shape[0] == d + 1 and values.dtype == np.float64 and values.flags.writeable:
                values.setflags(write=False)  # already in point order with its first entry
                return values
            out = np.empty(d + 1, dtype=np.float64)
            out[0] = first
            out[1:] = values
            out.setflags(write=False)
            return out

        thresholds = stack(np.inf if higher_is_riskier else -np.inf,
                           asc[::-1] if higher_is_riskier else asc)
        tp = stack(0.0, tp_strict)
        if fp_strict is not None:  # weighted sums: cumulate the non-events themselves (monotone)
            fp = stack(0.0, np.asarray(fp_strict, dtype=np.float64))
        else:
            fp = np.array(flagged_strict, dtype=np.float64, copy=None)
            if fp.shape[0] == d:
                fp = stack(0.0, fp)
            fp.setflags(write=True)
            np.subtract(fp, tp, out=fp)
            fp.setflags(write=False)
        ec = stack(0.0, cost_strict) if cost_strict is not None else None
        tps = fps = None
        if tp_sq_strict is not None:
            tps = stack(0.0, tp_sq_strict)
            if fp_sq_strict is not None:
                fps = stack(0.0, np.asarray(fp_sq_strict, dtype=np.float64))
            else:
                fps = stack(0.0, flagged_sq_strict)
                fps.setflags(write=True)
                np.subtract(fps, tps, out=fps)
                fps.setflags(write=False)
        return cls(
            thresholds=thresholds, tp=tp, fp=fp,
            n_events=float(tp[-1]), n_nonevents=float(fp[-1]),
            higher_is_riskier=bool(higher_is_riskier),
            event_cost_flagged=ec, event_cost_total=None if ec is None else float(ec[-1]),
            tp_sq=tps, fp_sq=fps, n_rows=int(n_rows), weighted=bool(weighted),
            _ascending=_readonly(asc),
        )

    @classmethod
    def _from_cells(cls, asc, pos, neg, *, higher_is_riskier, cost=None, pos_sq=None, neg_sq=None,
                    n_rows, weighted):
        """Build from per-distinct-score cells given in ascending score order."""
        def cum(cells):
            if cells is None:
                return None
            cells = np.asarray(cells, dtype=np.float64)
            return np.cumsum(cells[::-1] if higher_is_riskier else cells)

        return cls._from_cumulative(
            asc, cum(pos), None, higher_is_riskier=higher_is_riskier,
            cost_strict=cum(cost), tp_sq_strict=cum(pos_sq), fp_strict=cum(neg),
            fp_sq_strict=cum(neg_sq), n_rows=n_rows, weighted=weighted)

    @classmethod
    def from_counts(cls, score, events, non_events, *, higher_is_riskier=True, event_cost=None,
                    events_sq=None, non_events_sq=None) -> "Curve":
        """The curve from a count table: one row per score (any order, repeats summed).

        Parameters
        ----------
        score : array-like
            Score of each table row.
        events, non_events : array-like
            (Weighted) number of events and non-events with that score.
        event_cost : array-like, optional
            Summed miss cost of the events in each row.
        events_sq, non_events_sq : array-like, optional
            Sums of squared weights, when the table came from sampling weights.

        Gives exactly the row-level curve for unweighted data; for weighted
        data the per-score sums agree to float rounding of their order.
        """
        s = _as_1d("score", score)
        n = s.shape[0]
        s = _check_finite("score", s, n)
        e = _check_finite("events", events, n, allow_negative=False)
        ne = _check_finite("non_events", non_events, n, allow_negative=False)
        extras = {}
        for name, arr in (("event_cost", event_cost), ("events_sq", events_sq),
                          ("non_events_sq", non_events_sq)):
            extras[name] = None if arr is None else _check_finite(name, arr, n, allow_negative=False)
        _check_both_classes(float(e.sum()), float(ne.sum()), n, weighted=True)
        order = np.argsort(s, kind="stable")
        s_sorted = s[order]
        starts = np.flatnonzero(np.r_[True, s_sorted[1:] != s_sorted[:-1]])

        def cells(a):
            return None if a is None else np.add.reduceat(a[order], starts)

        weighted = (events_sq is not None or non_events_sq is not None
                    or not (np.all(e == np.round(e)) and np.all(ne == np.round(ne))))
        return cls._from_cells(
            s_sorted[starts], cells(e), cells(ne), higher_is_riskier=higher_is_riskier,
            cost=cells(extras["event_cost"]), pos_sq=cells(extras["events_sq"]),
            neg_sq=cells(extras["non_events_sq"]), n_rows=int(round(float(e.sum() + ne.sum())))
            if not weighted else n, weighted=weighted,
        )

    # ------------------------------------------------------------------ derived counts
    @property
    def n_points(self) -> int:
        return int(self.thresholds.shape[0])

    @property
    def n_total(self) -> float:
        return self.n_events + self.n_nonevents

    @property
    def prevalence(self) -> float:
        """Validation prevalence P / (P + N) (weighted)."""
        return self.n_events / self.n_total

    @property
    def fn(self) -> np.ndarray:
        return self.n_events - self.tp

    @property
    def tn(self) -> np.ndarray:
        return self.n_nonevents - self.fp

    @property
    def flagged(self) -> np.ndarray:
        return self.tp + self.fp

    @property
    def distinct_scores(self) -> np.ndarray:
        """Distinct scores in ascending order."""
        return self._ascending

    @cached_property
    def event_point_mask(self) -> np.ndarray:
        """True at "flag none" and at every point whose own score holds an event.

        Every objective and rule improves when false positives fall at fixed
        true positives, so an optimum always sits on one of these points.
        """
        m = np.empty(self.n_points, dtype=bool)
        m[0] = True
        m[1:] = self.tp[1:] > self.tp[:-1]
        m.setflags(write=False)
        return m

    # ------------------------------------------------------------------ metrics
    def metrics(self, *, prevalence: float | None = None, beta: float = 1.0) -> dict[str, np.ndarray]:
        """Every metric of :data:`core.metrics.METRIC_NAMES` at every point.

        With ``prevalence``, prevalence-dependent metrics are judged at that
        deployment prevalence (label shift; see :mod:`core.metrics`).
        """
        return confusion_metrics(self.tp, self.fp, self.fn, self.tn, prevalence=prevalence, beta=beta)

    @cached_property
    def _validation_metrics(self) -> dict[str, np.ndarray]:
        out = self.metrics()
        for v in out.values():
            v.setflags(write=False)
        return out

    @property
    def precision(self) -> np.ndarray:
        return self._validation_metrics["precision"]

    @property
    def recall(self) -> np.ndarray:
        return self._validation_metrics["recall"]

    tpr = recall
    sensitivity = recall

    @property
    def specificity(self) -> np.ndarray:
        return self._validation_metrics["specificity"]

    @property
    def fpr(self) -> np.ndarray:
        return self._validation_metrics["fpr"]

    @property
    def flag_rate(self) -> np.ndarray:
        return self._validation_metrics["flag_rate"]

    @cached_property
    def roc_auc(self) -> float:
        """Exact ROC AUC: trapezoids through every point (ties count one half).

        Equals the Mann-Whitney probability that a random event outranks a
        random non-event, ties counted 1/2 (scikit-learn ``roc_auc_score``).
        """
        tpr = self.tp / self.n_events
        fpr = self.fp / self.n_nonevents
        return float(np.sum(np.diff(fpr) * (tpr[1:] + tpr[:-1])) / 2.0)

    @cached_property
    def average_precision(self) -> float:
        """Average precision = sum_k (R_k - R_{k-1}) P_k over the points.

        The step-wise (not interpolated) area under the precision-recall curve,
        as scikit-learn's ``average_precision_score``; points whose recall does
        not move add nothing, so the undefined precision of "flag none" is
        never used.
        """
        rec = self.tp / self.n_events
        dr = np.diff(rec)
        prec = self.precision[1:]
        use = dr > 0
        return float(np.sum(dr[use] * prec[use]))

    # ------------------------------------------------------------------ points
    def index_at(self, threshold: float) -> int:
        """Index of the curve point whose counts any threshold ``t`` produces (O(log n))."""
        t = float(threshold)
        if np.isnan(t):
            raise InputError("threshold", "is NaN; give a number in score units, or inf / -inf")
        d = self._ascending.shape[0]
        if self.higher_is_riskier:
            return int(d - np.searchsorted(self._ascending, t, side="left"))
        return int(np.searchsorted(self._ascending, t, side="right"))

    def interval(self, index: int) -> tuple[float, float, str]:
        """Thresholds giving the counts of point ``index``: ``(low, high, closed_end)``."""
        k = int(index)
        th = self.thresholds
        if not 0 <= k < self.n_points:
            raise IndexError(f"point index {k} outside 0..{self.n_points - 1}")
        if self.higher_is_riskier:
            high = np.inf if k == 0 else float(th[k])
            low = float(th[k + 1]) if k + 1 < self.n_points else -np.inf
            return low, high, "high"
        low = -np.inf if k == 0 else float(th[k])
        high = float(th[k + 1]) if k + 1 < self.n_points else np.inf
        return low, high, "low"

    def point(self, index: int, *, prevalence: float | None = None, beta: float = 1.0,
              threshold: float | None = None) -> OperatingPoint:
        """Counts and every metric at curve point ``index``."""
        k = int(index)
        low, high, closed = self.interval(k)
        tp, fp = float(self.tp[k]), float(self.fp[k])
        fn, tn = self.n_events - tp, self.n_nonevents - fp
        val = {m: float(v) for m, v in confusion_metrics(tp, fp, fn, tn, beta=beta).items()}
        dep = None
        if prevalence is not None:
            dep = {m: float(v) for m, v in
                   confusion_metrics(tp, fp, fn, tn, prevalence=prevalence, beta=beta).items()}
        miss = None
        if self.event_cost_flagged is not None:
            miss = float(self.event_cost_total - self.event_cost_flagged[k])
        pt = float(self.thresholds[k])
        return OperatingPoint(
            threshold=pt if threshold is None else float(threshold), point_threshold=pt, index=k,
            interval_low=low, interval_high=high, closed=closed,
            higher_is_riskier=self.higher_is_riskier, tp=tp, fp=fp, fn=fn, tn=tn, metrics=val,
            prevalence=None if prevalence is None else float(prevalence), deployment=dep,
            miss_cost=miss,
        )

    def at(self, threshold: float, *, prevalence: float | None = None, beta: float = 1.0) -> OperatingPoint:
        """Exact counts and metrics at ANY real threshold (binary search, O(log n))."""
        k = self.index_at(threshold)
        return self.point(k, prevalence=prevalence, beta=beta, threshold=float(threshold))

    # ------------------------------------------------------------------ tables and drawing
    def table(self, *, prevalence: float | None = None, beta: float = 1.0) -> pd.DataFrame:
        """One row per point: threshold, counts and every metric."""
        df = pd.DataFrame({
            "threshold": self.thresholds, "tp": self.tp, "fp": self.fp, "fn": self.fn, "tn": self.tn,
        })
        for name, values in self.metrics(prevalence=prevalence, beta=beta).items():
            df[name] = values
        return df

    def downsample(self, max_points: int = 2000, *, keep=(), space: str = "roc") -> np.ndarray:
        """Indices of at most about ``max_points`` points for drawing.

        Keeps both ends, every index in ``keep`` (e.g. the operating point)
        and the curve's shape: half the budget is spread evenly along the
        curve's arc length in ``space`` ("roc": FPR-TPR, "pr": recall-precision),
        half evenly over the point index. Numbers shown must still come from
        the exact curve; this only thins what is drawn.
        """
        n = self.n_points
        keep = np.asarray(list(keep), dtype=np.int64)
        keep = keep[(keep >= 0) & (keep < n)]
        budget = max(int(max_points) - 2 - keep.size, 2)
        if n <= budget + 2:
            return np.arange(n)
        if space == "pr":
            x = self.recall
            y = np.nan_to_num(self.precision, nan=1.0)
        elif space == "roc":
            x, y = self.fpr, self.recall
        else:
            raise ValueError(f"space must be 'roc' or 'pr', got {space!r}")
        seg = np.hypot(np.diff(x), np.diff(y))
        arc = np.concatenate([[0.0], np.cumsum(seg)])
        half = budget // 2
        by_arc = np.searchsorted(arc, np.linspace(0.0, arc[-1], half), side="left")
        by_index = np.linspace(0, n - 1, budget - half).round().astype(np.int64)
        idx = np.unique(np.concatenate([[0, n - 1], keep, by_arc, by_index]))
        return idx[(idx >= 0) & (idx < n)]


# --------------------------------------------------------------------------- sweep

def sweep(y_true, y_score, sample_weight=None, *, higher_is_riskier: bool = True,
          event_cost=None) -> Curve:
    """Sweep every threshold of a score exactly.

    Parameters
    ----------
    y_true : array-like of shape (n,)
        1 (or True) for the event, 0 (or False) otherwise.
    y_score : array-like of shape (n,)
        Finite scores; converted to float64.
    sample_weight : array-like of shape (n,), optional
        Non-negative finite weights (frequency or sampling; the kind matters
        only for intervals). Squared-weight sums are kept for Kish's effective
        sample size.
    higher_is_riskier : bool, default True
        When False, a case is flagged when ``score <= threshold``.
    event_cost : array-like of shape (n,), optional
        Per-case miss cost (e.g. an invoice amount); only the events' values
        are used, and they must be finite and non-negative.

    Returns
    -------
    Curve

    Raises
    ------
    InputError (a ValueError)
        Labels other than 0/1/bool, a length mismatch, NaN or infinite
        scores, negative or non-finite weights, a single class; the message
        names the argument, the problem, how many rows and which.
    """
    y = _check_labels(y_true)
    n = y.shape[0]
    s = _check_finite("y_score", y_score, n, check_values=False)  # finiteness: after the sort
    w = None if sample_weight is None else _check_finite("sample_weight", sample_weight, n,
                                                          allow_negative=False)
    a = None
    if event_cost is not None:
        a_raw = _as_1d("event_cost", event_cost)
        if a_raw.shape[0] != n:
            raise InputError("event_cost", f"has {a_raw.shape[0]:,} values but y_true has {n:,}; lengths must match")
        a = np.asarray(pd.to_numeric(pd.Series(a_raw), errors="coerce"), dtype=np.float64)
        bad = y & ~(np.isfinite(a) & (a >= 0))
        if bad.any():
            raise InputError("event_cost", "must be a finite, non-negative amount for every event",
                             _positions(bad))
    if w is None:
        n_pos = int(np.count_nonzero(y))
        _check_both_classes(n_pos, n - n_pos, n, weighted=False)
    else:
        _check_both_classes(float(w[y].sum()), float(w[~y].sum()), n, weighted=True)

    if w is None:
        return _sweep_unweighted(y, s, a, higher_is_riskier)
    return _sweep_weighted(y, s, w, a, higher_is_riskier)


def _distinct(sorted_scores: np.ndarray):
    """Distinct values of a sorted array and the start of each run (None: all distinct)."""
    same = sorted_scores[1:] == sorted_scores[:-1]
    if not same.any():
        return sorted_scores, None
    new_value = np.flatnonzero(~same)
    new_value += 1
    starts = np.empty(new_value.shape[0] + 1, dtype=np.int64)
    starts[0] = 0
    starts[1:] = new_value
    return sorted_scores[starts], starts


def _event_steps(ev_idx: np.ndarray, d: int, higher_is_riskier: bool) -> np.ndarray:
    """Flagged events at points 0..d ("flag none" first) from the sorted distinct-score index of each event.

    The count is a step function that rises only at the events' own points, so
    it is written with one ``numpy.repeat`` of the running event count over
    the gaps between them: no cumulative sum over all d points.
    """
    if higher_is_riskier:
        q = (d - 1) - ev_idx[::-1]  # point order (0-based among points 1..d), ascending
    else:
        q = ev_idx
    u, first = np.unique(q, return_index=True) if q.size else (q, q)
    # events flagged once point u_i is reached: count of q <= u_i
    reached = np.empty(u.shape[0] + 1, dtype=np.float64)
    reached[0] = 0.0
    reached[1:-1] = first[1:]
    reached[-1] = q.shape[0]
    lengths = np.empty(u.shape[0] + 1, dtype=np.int64)
    lengths[0] = (u[0] if u.size else d) + 1  # the leading entry is "flag none"
    lengths[1:-1] = np.diff(u)
    if u.size:
        lengths[-1] = d - u[-1]
    return np.repeat(reached, lengths)


def _sweep_unweighted(y, s, a, higher_is_riskier):
    """One sort of the scores; events placed by binary search (sorted keys: cache friendly)."""
    n = s.shape[0]
    ss = np.sort(s)
    _check_sorted_ends("y_score", ss, s)
    asc, starts = _distinct(ss)
    d = asc.shape[0]
    ev_scores = s[y]
    order = None
    if a is not None:
        order = np.argsort(ev_scores)  # events only: they are few
        ev_scores = ev_scores[order]
    else:
        ev_scores = np.sort(ev_scores)
    ev_idx = np.searchsorted(asc, ev_scores, side="left")
    # flagged rows at the k-th point (k = 1..d), from the run starts of the sorted scores
    if starts is None:
        flagged = np.arange(0, d + 1, dtype=np.float64)  # includes "flag none"
    elif higher_is_riskier:
        flagged = n - starts[::-1]
    else:
        flagged = np.empty(d, dtype=np.int64)
        flagged[:-1] = starts[1:]
        flagged[-1] = n
    tp = _event_steps(ev_idx, d, higher_is_riskier)
    cost = None
    if a is not None:
        cells = np.bincount(ev_idx, weights=a[y][order], minlength=d)
        cost = np.cumsum(cells[::-1] if higher_is_riskier else cells)
    return Curve._from_cumulative(asc, tp, flagged, higher_is_riskier=higher_is_riskier,
                                  cost_strict=cost, n_rows=n, weighted=False)


def _few_distinct(s: np.ndarray) -> bool:
    """Whether the scores look coarse (many ties): judged on an even sample of ~65k rows."""
    step = max(1, s.shape[0] // 65536)
    sample = s[::step]
    return np.unique(sample).shape[0] <= sample.shape[0] // 4


def _sweep_weighted(y, s, w, a, higher_is_riskier):
    """Weighted rows: each row's weight must reach its score's cell.

    Coarse scores (few distinct values, e.g. rounded to 4 decimals) are hashed
    to their value with ``pandas.factorize`` and summed per value with
    ``bincount``: no permutation of the rows (:func:`_sweep_weighted_coarse`).
    Otherwise one argsort carries each weight to its score (no way around a
    permutation when every row has its own weight) and cumulative sums are
    read at the boundary of each run of tied scores, in point order.

    Memory: the curve itself holds six arrays of the distinct-score count
    (thresholds, ascending scores, tp, fp and their squared-weight sums), so
    the temporaries are kept few. Each cumulative sum is taken in place in a
    buffer that already holds the leading "flag none" zero; with no tied
    scores that buffer *is* the curve's array, otherwise it is read at the
    run ends and reused. The values summed, and their order, are those of
    ``cumsum(where(y, w, 0))`` and ``cumsum(w - where(y, w, 0))`` over the
    rows in the argsort's order, so the sums are the same to the last bit.
    """
    n = s.shape[0]
    if _few_distinct(s):
        return _sweep_weighted_coarse(y, s, w, a, higher_is_riskier)
    order = np.argsort(s)  # the same sort as ever: tied rows' weights add up in its order
    asc = s[order]
    _check_sorted_ends("y_score", asc, s)
    asc, starts = _distinct(asc)
    if higher_is_riskier:
        order = order[::-1].copy()  # strictest first; contiguous, so take() needs no copy of it
    ends = _run_ends(starts, n, higher_is_riskier)
    del starts
    yo = y[order]
    ws = np.empty(n + 1, dtype=np.float64)  # ws[0] stays 0.0: the "flag none" point
    ws[0] = 0.0
    np.take(w, order, out=ws[1:], mode="clip")
    cost = None
    if a is not None:
        c = np.empty(n + 1, dtype=np.float64)
        c[0] = 0.0
        np.take(a, order, out=c[1:], mode="clip")
        np.multiply(ws, c, out=c)  # w * a, exactly as ws * a[order]
        np.copyto(c[1:], 0.0, where=~yo)
        cost = _cumulate_at(c, ends)
        del c
    del order

    wy = ws.copy()  # where(y, w, 0): events keep their weight
    np.copyto(wy[1:], 0.0, where=~yo)
    sq = np.multiply(wy, wy)
    tp = _cumulate_at(wy, ends)
    tp_sq = _cumulate_at(sq, ends)
    del wy, sq
    wn = ws  # w - where(y, w, 0): equal to w for non-events, +0.0 for events
    del ws
    np.copyto(wn[1:], 0.0, where=yo)
    del yo
    sq = np.multiply(wn, wn)
    fp = _cumulate_at(wn, ends)
    fp_sq = _cumulate_at(sq, ends)
    del wn, sq, ends
    return Curve._from_cumulative(
        asc, tp, None, higher_is_riskier=higher_is_riskier,
        cost_strict=cost, tp_sq_strict=tp_sq, fp_strict=fp, fp_sq_strict=fp_sq,
        n_rows=n, weighted=True)


def _run_ends(starts, n: int, higher_is_riskier: bool):
    """Last row (in strictest-first row order) of each tied run, in point order; None: no ties.

    ``starts`` are the run starts of the ascending sorted scores (see :func:`_distinct`).
    """
    if starts is None:
        return None
    if higher_is_riskier:
        # strictest-first row j is ascending row n-1-j: a run ends where its ascending run starts
        return np.subtract(n - 1, starts[::-1])
    ends = np.empty_like(starts)
    np.subtract(starts[1:], 1, out=ends[:-1])
    ends[-1] = n - 1
    return ends


def _cumulate_at(buf: np.ndarray, ends) -> np.ndarray:
    """Running sums of ``buf[1:]`` (``buf[0]`` is 0.0) in place, read at ``ends``.

    Returns the curve's array (length d + 1, "flag none" first): ``buf``
    itself when there are no ties (``ends`` None), else a new array.
    """
    np.cumsum(buf[1:], out=buf[1:])
    if ends is None:
        return buf
    out = np.empty(ends.shape[0] + 1, dtype=np.float64)
    out[0] = 0.0
    np.take(buf[1:], ends, out=out[1:], mode="clip")
    return out


def _sweep_weighted_coarse(y, s, w, a, higher_is_riskier):
    """Weighted rows with few distinct scores: per-value sums by ``bincount`` over hashed codes.

    The weights summed (``where(y, w, 0)``, ``w`` minus it, their squares and
    ``where(y, w * a, 0)``) and their row order are the same as ever; each
    temporary is freed before the next is made.
    """
    n = s.shape[0]
    codes, uniques = pd.factorize(s, sort=False)
    uniques = np.asarray(uniques, dtype=np.float64)
    _check_sorted_ends("y_score", np.sort(uniques), s)
    asc = np.unique(uniques)  # sorted distinct values (-0.0 and 0.0 are one value)
    cell = np.searchsorted(asc, uniques)[codes]
    del codes
    d = asc.shape[0]
    cost = None
    if a is not None:
        wa = np.multiply(w, a)
        np.copyto(wa, 0.0, where=~y)  # where(y, w * a, 0)
        cost = np.bincount(cell, weights=wa, minlength=d)
        del wa
    wy = np.where(y, w, 0.0)
    wn = np.subtract(w, wy)
    pos = np.bincount(cell, weights=wy, minlength=d)
    np.multiply(wy, wy, out=wy)
    pos_sq = np.bincount(cell, weights=wy, minlength=d)
    del wy
    neg = np.bincount(cell, weights=wn, minlength=d)
    np.multiply(wn, wn, out=wn)
    neg_sq = np.bincount(cell, weights=wn, minlength=d)
    del wn, cell
    return Curve._from_cells(
        asc, pos, neg, higher_is_riskier=higher_is_riskier, cost=cost, pos_sq=pos_sq,
        neg_sq=neg_sq, n_rows=n, weighted=True)
