"""Flagged cases per period: what staff must absorb, as a distribution over periods.

An average hides the busy days. With a score-time column every case falls
into a period (hour, 8-hour shift, day, week starting Monday, calendar
month); at any threshold the flagged cases per period are counted, and the
distribution over *every* period from the first to the last (periods with no
cases count as zero) is summarised by its median, 90th percentile (or any
quantile), maximum and the share of periods over capacity.

Quantiles here are empirical ("inverted CDF"): the q-quantile is the
smallest count c such that at least a share q of periods have at most c
flags, so "the 0.9-quantile is within capacity" means "at least 90 % of
periods are within capacity".

Rescaling: when a deployment prevalence pi and a volume of
``cases_per_period`` are given, every row is reweighted -- events by
pi / pi_v, non-events by (1 - pi) / (1 - pi_v), where pi_v is the
validation prevalence (this keeps the total) -- and then all by
``cases_per_period x periods / cases``, so the periods keep the data's time
pattern while their mean volume and case mix are those of deployment.

Algorithm (no Python loop over rows): rows are sorted once by risk, which
gives each row's curve point (the first point that flags it: a running
count of distinct scores), so the rows flagged at point k are a prefix and
the per-period counts at k are one ``bincount`` of that prefix's period
ids. Counts at m points at once come from one ``bincount`` over (period,
first point among the m that flags the row) followed by a cumulative sum. Flags per period never fall as the threshold
loosens, so the largest point whose quantile stays within capacity is found
by binary search (O(log n) counts).
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from core.errors import InputError

__all__ = ["PERIOD_NAMES", "period_index", "PeriodFlags", "flags_per_period"]

PERIOD_NAMES = ("hour", "shift", "day", "week", "month")


def period_index(score_time, period: str = "day") -> tuple[np.ndarray, np.ndarray]:
    """Period of every case: ``(ids, starts)``.

    ``ids[i]`` is the 0-based number of row i's period counted from the
    first period in the data; ``starts`` holds the start time of every period
    from the first to the last (``datetime64[ns]``), including periods
    without cases. Periods: ``hour``; ``shift`` (8 hours from midnight:
    00-08, 08-16, 16-24); ``day``; ``week`` (Monday to Sunday); ``month``
    (calendar month).

    Raises
    ------
    InputError
        Unknown period, or missing (NaT) times -- every case needs one; the
        rows are named.
    """
    if period not in PERIOD_NAMES:
        raise InputError("period", f"must be one of {', '.join(PERIOD_NAMES)}, got {period!r}")
    t = np.asarray(score_time, dtype="datetime64[ns]")
    if t.ndim != 1:
        raise InputError("score_time", f"must be one-dimensional, got shape {t.shape}")
    if t.shape[0] == 0:
        raise InputError("score_time", "is empty")
    nat = np.isnat(t)
    if nat.any():
        raise InputError("score_time", "is missing; counting flags per period needs a time for "
                         "every case", np.flatnonzero(nat))
    if period == "hour":
        units = t.astype("datetime64[h]").astype(np.int64)
        to_start = lambda u: u.astype("datetime64[h]")  # noqa: E731
    elif period == "shift":
        units = np.floor_divide(t.astype("datetime64[h]").astype(np.int64), 8)
        to_start = lambda u: (u * 8).astype("datetime64[h]")  # noqa: E731
    elif period == "day":
        units = t.astype("datetime64[D]").astype(np.int64)
        to_start = lambda u: u.astype("datetime64[D]")  # noqa: E731
    elif period == "week":
        # 1970-01-01 was a Thursday: shifting by 3 days makes weeks start on Monday
        units = np.floor_divide(t.astype("datetime64[D]").astype(np.int64) + 3, 7)
        to_start = lambda u: (u * 7 - 3).astype("datetime64[D]")  # noqa: E731
    else:
        units = t.astype("datetime64[M]").astype(np.int64)
        to_start = lambda u: u.astype("datetime64[M]")  # noqa: E731
    first = int(units.min())
    ids = units - first
    n_periods = int(ids.max()) + 1
    starts = to_start(np.arange(first, first + n_periods, dtype=np.int64)).astype("datetime64[ns]")
    return ids.astype(np.int64), starts


def _sorted_row_points(curve, y_score) -> tuple[np.ndarray, np.ndarray]:
    """Rows from the riskiest score down, and the first curve point that flags each.

    Returns ``(order, points)``: ``order`` sorts the rows by risk (one
    ``argsort``), ``points[i]`` is the point index of row ``order[i]``
    (non-decreasing; ties share a point, as the curve's ties move together).
    """
    s = np.asarray(y_score, dtype=np.float64) + 0.0
    order = np.argsort(-s if curve.higher_is_riskier else s, kind="stable")
    ss = s[order]
    # a new distinct score starts a new point; the first row's point is 1
    points = np.empty(ss.shape[0], dtype=np.int64)
    if ss.shape[0]:
        points[0] = 1
        np.cumsum(ss[1:] != ss[:-1], out=points[1:])
        points[1:] += 1
    d = curve.distinct_scores.shape[0]
    if ss.shape[0] and (points[-1] != d or ss[0] != curve.thresholds[1]
                        or ss[-1] != curve.thresholds[-1]):
        raise InputError("y_score", "holds scores that are not those of the curve "
                         "(use the dataset's own curve)")
    return order, points


class PeriodFlags:
    """Flagged cases per period at any point of one curve.

    Parameters
    ----------
    curve : Curve
        The curve of the same rows (gives the points and their thresholds).
    y_score, score_time : array-like (n,)
        Each row's score and score time.
    period : str
        One of :data:`PERIOD_NAMES`.
    y_true, sample_weight : array-like (n,), optional
        Labels (needed for rescaling to a deployment prevalence) and weights.
    prevalence : float, optional
        Deployment prevalence to rescale to (see the module docstring).
    cases_per_period : float, optional
        Deployment volume per period to rescale to.
    """

    def __init__(self, curve, y_score, score_time, *, period="day", y_true=None, sample_weight=None,
                 prevalence=None, cases_per_period=None):
        ids, starts = period_index(score_time, period)
        n = ids.shape[0]
        if np.asarray(y_score).shape[0] != n:
            raise InputError("score_time", f"has {n:,} values but y_score has "
                             f"{np.asarray(y_score).shape[0]:,}")
        w = np.ones(n) if sample_weight is None else np.asarray(sample_weight, dtype=np.float64)
        if prevalence is not None and y_true is None:
            raise ValueError("y_true is needed to rescale to a deployment prevalence")
        ev = np.zeros(n, dtype=bool) if y_true is None else np.asarray(y_true, dtype=bool)
        self.n_periods = int(starts.shape[0])
        self.period = period
        self.starts = starts
        self.validation_prevalence = float(curve.prevalence)
        self.prevalence = None if prevalence is None else float(prevalence)
        # reweighting to another prevalence keeps the total, so the volume scale is fixed
        self.data_cases_per_period = float(w.sum()) / self.n_periods
        self.cases_per_period = None if cases_per_period is None else float(cases_per_period)
        self.scale = 1.0
        if cases_per_period is not None and self.data_cases_per_period > 0:
            self.scale = float(cases_per_period) / self.data_cases_per_period
        self.n_curve_points = curve.n_points
        order, self._rp = _sorted_row_points(curve, y_score)
        self._ids = ids[order]
        self._w = w[order] * self.scale
        self._ev = ev[order]

    def _weights(self, stop=None, prevalence=None):
        """Row weights (sorted order, first ``stop`` rows) rescaled to ``prevalence``."""
        pi = self.prevalence if prevalence is None else float(prevalence)
        w = self._w if stop is None else self._w[:stop]
        if pi is None:
            return w
        pv = self.validation_prevalence
        ev = self._ev if stop is None else self._ev[:stop]
        return w * np.where(ev, pi / pv, (1.0 - pi) / (1.0 - pv))

    # -------------------------------------------------------------- counts
    def counts_at(self, index: int, *, prevalence=None) -> np.ndarray:
        """Flagged (weighted, rescaled) cases in every period at curve point ``index``.

        ``prevalence`` overrides the deployment prevalence given at construction.
        """
        m = int(np.searchsorted(self._rp, int(index), side="right"))
        return np.bincount(self._ids[:m], weights=self._weights(m, prevalence),
                           minlength=self.n_periods)

    def counts(self, indices, *, prevalence=None) -> np.ndarray:
        """Counts at several points at once: array (n_periods, len(indices))."""
        ks = np.asarray(indices, dtype=np.int64).ravel()
        m = ks.shape[0]
        if m == 0:
            return np.zeros((self.n_periods, 0))
        order = np.argsort(ks, kind="stable")
        ks_sorted = ks[order]
        # rows are sorted by point, so the rows first flagged at each of the sorted points form
        # consecutive segments of the flagged prefix
        bounds = np.searchsorted(self._rp, ks_sorted, side="right")
        stop = int(bounds[-1])
        seg = np.repeat(np.arange(m, dtype=np.int64), np.diff(np.concatenate([[0], bounds])))
        cells = np.bincount(self._ids[:stop] * m + seg, weights=self._weights(stop, prevalence),
                            minlength=self.n_periods * m).reshape(self.n_periods, m)
        cum = np.cumsum(cells, axis=1)
        out = np.empty_like(cum)
        out[:, order] = cum
        return out

    # -------------------------------------------------------------- summaries
    @staticmethod
    def quantile(counts, q: float, axis=0):
        """Empirical q-quantile (inverted CDF, see the module docstring)."""
        return np.quantile(counts, q, axis=axis, method="inverted_cdf")

    def summary(self, indices, *, quantile: float = 0.9, capacity: float | None = None,
                prevalence=None) -> dict:
        """Median, ``quantile``, 90th percentile, maximum, mean and share over capacity.

        Each value is an array over ``indices``; ``share_over`` (the share of
        periods with more flags than ``capacity``) is NaN without a capacity.
        """
        c = self.counts(indices, prevalence=prevalence)
        out = {
            "median": self.quantile(c, 0.5),
            "p90": self.quantile(c, 0.9),
            "quantile": self.quantile(c, quantile),
            "max": c.max(axis=0),
            "mean": c.mean(axis=0),
        }
        if capacity is None:
            out["share_over"] = np.full(c.shape[1], np.nan)
        else:
            out["share_over"] = (c > float(capacity) * (1 + 1e-12)).mean(axis=0)
        return out

    def largest_index_within(self, capacity: float, quantile: float = 1.0, *, prevalence=None) -> int:
        """Largest curve point whose ``quantile`` of flags per period is at most ``capacity``.

        Flags per period never fall as the threshold loosens, so the points
        within capacity are 0..k*; binary search finds k* with O(log n)
        counts. Point 0 ("flag none") is always within a positive capacity.
        Comparison allows the same 1e-12 relative tolerance as the rules.
        """
        cap = float(capacity) * (1 + 1e-12)

        def ok(k):
            return self.quantile(self.counts_at(k, prevalence=prevalence), quantile) <= cap

        lo, hi = 0, self.n_curve_points - 1
        if ok(hi):
            return hi
        while lo < hi:
            mid = (lo + hi + 1) // 2
            if ok(mid):
                lo = mid
            else:
                hi = mid - 1
        return lo


def flags_per_period(curve, y_score, score_time, thresholds, *, period="day", sample_weight=None,
                     y_true=None, prevalence=None, cases_per_period=None) -> pd.DataFrame:
    """Flagged cases per period at each of ``thresholds`` (one column per threshold).

    The index holds every period's start, from the first period to the last
    (periods without cases show 0). See :class:`PeriodFlags` for rescaling.
    """
    pf = PeriodFlags(curve, y_score, score_time, period=period, y_true=y_true,
                     sample_weight=sample_weight, prevalence=prevalence,
                     cases_per_period=cases_per_period)
    th = np.atleast_1d(np.asarray(thresholds, dtype=np.float64))
    idx = [curve.index_at(float(t)) for t in th]
    c = pf.counts(idx)
    return pd.DataFrame(c, index=pd.DatetimeIndex(pf.starts, name="period_start"),
                        columns=list(th))
