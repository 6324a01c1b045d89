"""Subgroups and fairness: does the threshold hold in every site, age band, segment?

A threshold that is right on average can fail one group. At the current
threshold, for every group of every group column (and of chosen
intersections of columns), :func:`subgroup_report` gives the rows, events,
prevalence, precision, recall, specificity, FPR, NPV and flag rate, each with
an interval, and each group against the rest of the cases with an interval
for the difference. Everything is judged at the **validation counts**: each
group at its own prevalence (precision, NPV and flag rate differ between
groups partly because their prevalences differ; recall, specificity and FPR
do not depend on it).

Intervals
---------
* Without clusters (``interval="analytic"``): the Wilson score interval of
  each proportion (:func:`core.intervals.wilson_interval`) and Newcombe's
  hybrid score interval for a difference of two independent proportions
  (:func:`newcombe_interval`; Newcombe, Stat Med 1998, method 10; reference
  statsmodels ``confint_proportions_2indep(method="newcomb")``). A group and
  the rest (or another group of the same column) share no case, so they are
  independent samples. Sampling weights use Kish's effective size of each
  denominator as the trials.
* With a cluster column (``interval="auto"`` then resamples clusters): the
  cluster bootstrap of :mod:`core.clusters` -- every cluster's tp, fp, fn, tn
  in every group form one sparse matrix, a replicate is the clusters it
  draws times that matrix -- and percentile intervals of each group's value
  and of each difference computed within the replicates.

p-values come from inverting the interval: the smallest ``alpha`` at which
the ``1 - alpha`` interval excludes the value (for Newcombe found by bisection
on z, for the bootstrap twice the share of replicates on the far side).

Multiplicity
------------
Many groups x metrics throw up differences by chance. ``adjust="holm"``
(default) applies Holm's step-down (Holm, Scand J Statist 1979;
:func:`holm_adjust`, reference statsmodels ``multipletests(method="holm")``)
over every comparison of the table; a difference is called only when its
adjusted p-value is below ``1 - confidence``. ``adjust="none"`` leaves them
unadjusted and labels every verdict "exploratory".

Fairness criterion
------------------
The policy's ``[fairness]`` (metric, group columns, tolerance, reference)
is judged with intervals (:func:`fairness_verdict`): for each group, the gap
of the metric to the rest (or to the reference group) is

* **holds** when its interval lies within ``+/- tolerance``,
* **fails** when its interval lies entirely outside ``+/- tolerance``,
* **unclear** otherwise -- then the report gives the largest gap the data
  cannot exclude (the farther end of the interval, "cannot exclude a recall
  gap of 0.19"): a small group is never waved through as too small to judge.

The two verdicts are tests (the p-value of "outside", the p-value of
"within", both by inverting the interval) Holm-adjusted across the groups
compared; the criterion holds when every group holds and fails when any
group fails. Recall parity, precision parity and within-group calibration
cannot all hold when prevalences differ, so the report names the one the
policy targets (:data:`TRADEOFF_STATEMENT`).

Groups with one class only (no events, or no non-events) are reported with
their counts; their undefined metrics are NaN and they get no ROC AUC or
average precision (they are not passed to a curve). Fulcrum reports
subgroup results at one threshold; it does not set per-group thresholds
(:data:`PER_GROUP_THRESHOLDS`).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, fields

import numpy as np
import pandas as pd
from scipy import stats

from core import intervals as _iv
from core.bootstrap import DEFAULT_REPLICATES, percentile_interval
from core.clusters import (
    CLUSTER_METHOD_NAME,
    METRIC_CELLS,
    METRIC_LABELS,
    cluster_codes,
    cluster_matrix,
    resample_cluster_sums,
    uses_cluster_bootstrap,
)
from core.errors import InputError

__all__ = [
    "ADJUSTMENTS",
    "BASIS_STATEMENT",
    "FEW_GROUP_EVENTS",
    "GROUP_METRICS",
    "INTERVALS",
    "MISSING_GROUP",
    "PER_GROUP_THRESHOLDS",
    "TABLE_METRICS",
    "TRADEOFF_STATEMENT",
    "FairnessComparison",
    "FairnessResult",
    "GroupDifference",
    "GroupRow",
    "GroupValue",
    "SubgroupReport",
    "fairness_verdict",
    "holm_adjust",
    "newcombe_interval",
    "newcombe_p_value",
    "subgroup_report",
]

#: Metrics of every group, in display order.
GROUP_METRICS = ("prevalence", "precision", "recall", "specificity", "fpr", "npv", "flag_rate")
#: Metrics compared group against rest in the table (and Holm-adjusted together).
TABLE_METRICS = ("prevalence", "precision", "recall", "specificity", "flag_rate")
ADJUSTMENTS = ("holm", "none")
INTERVALS = ("auto", "analytic", "cluster_bootstrap")
#: Label of rows without a value in a group column (reported, never dropped).
MISSING_GROUP = "(missing)"
#: Below this many events a group's statement gives the largest gap it cannot exclude.
FEW_GROUP_EVENTS = 100

TRADEOFF_STATEMENT = (
    "Recall parity, precision parity and within-group calibration cannot all hold at once when "
    "the groups' prevalences differ (Kleinberg, Mullainathan & Raghavan 2016; Chouldechova "
    "2017; from memory): a policy must choose which one it targets.")

PER_GROUP_THRESHOLDS = (
    "Fulcrum reports subgroup results at one threshold; it does not set per-group thresholds. "
    "Different thresholds for different groups may be unlawful in some uses (for example credit "
    "decisions) and need explicit approval under the governing policy before any use.")

BASIS_STATEMENT = (
    "Group metrics are judged at the validation counts, each group at its own prevalence: "
    "precision, NPV and flag rate differ between groups partly because their prevalences "
    "differ; recall, specificity and the false-positive rate do not depend on prevalence.")

NEWCOMBE_NAME = "Newcombe hybrid score interval for a difference of proportions (Newcombe 1998)"
WILSON_NAME = _iv.METHOD_NAMES["wilson"]

_SHORT = {"prevalence": "prevalence", "precision": "precision", "recall": "recall",
          "specificity": "specificity", "fpr": "false-positive rate", "npv": "NPV",
          "flag_rate": "flag rate"}

_Z_MAX = 40.0
_BISECT = 64


def _json(obj):
    from core.choose import json_safe

    return json_safe(obj)


def _fmt(x, digits=3):
    return "—" if x is None or not np.isfinite(x) else f"{x:.{digits}f}"


# --------------------------------------------------------------------------- intervals

def _wilson_z(x, n, z):
    """Wilson limits at critical value(s) z (arrays broadcast); NaN where n = 0."""
    x, n, z = np.broadcast_arrays(*(np.asarray(a, dtype=np.float64) for a in (x, n, z)))
    with np.errstate(divide="ignore", invalid="ignore"):
        p = x / n
        z2n = z * z / n
        centre = (p + z2n / 2.0) / (1.0 + z2n)
        half = z / (1.0 + z2n) * np.sqrt(np.maximum(p * (1.0 - p) / n + z2n / (4.0 * n), 0.0))
    lo = np.clip(centre - half, 0.0, 1.0)
    hi = np.clip(centre + half, 0.0, 1.0)
    lo = np.where(x <= 0, 0.0, lo)
    hi = np.where(x >= n, 1.0, hi)
    bad = ~(n > 0)
    return p, np.where(bad, np.nan, lo), np.where(bad, np.nan, hi)


def _newcombe_z(x1, n1, x2, n2, z):
    p1, l1, u1 = _wilson_z(x1, n1, z)
    p2, l2, u2 = _wilson_z(x2, n2, z)
    d = p1 - p2
    low = d - np.sqrt((p1 - l1) ** 2 + (u2 - p2) ** 2)
    high = d + np.sqrt((u1 - p1) ** 2 + (p2 - l2) ** 2)
    return d, low, high


def newcombe_interval(x1, n1, x2, n2, confidence: float = 0.95):
    """Newcombe's hybrid score interval for ``p1 - p2`` of two independent proportions.

    With ``(l_i, u_i)`` the Wilson interval of ``p_i = x_i / n_i``::

        low  = (p1 - p2) - sqrt((p1 - l1)^2 + (u2 - p2)^2)
        high = (p1 - p2) + sqrt((u1 - p1)^2 + (p2 - l2)^2)

    Vectorised; counts may be weighted or effective (non-integer). NaN when
    either side has no trials.

    Reference: Newcombe, "Interval estimation for the difference between
    independent proportions", Stat Med 1998 (method 10); statsmodels
    ``confint_proportions_2indep(method="newcomb", compare="diff")``.

    Returns
    -------
    (low, high) : floats or arrays
    """
    z = _iv.normal_quantile(confidence)
    _, lo, hi = _newcombe_z(x1, n1, x2, n2, z)
    if np.ndim(lo) == 0:
        return float(lo), float(hi)
    return lo, hi


def _sup_z(cond, shape):
    """Largest z in [0, 40] where the monotone condition ``cond(z)`` (True for small z)
    still holds, by bisection; -1 where it fails already at z = 0."""
    lo = np.zeros(shape)
    hi = np.full(shape, _Z_MAX)
    at0 = cond(lo)
    at_max = cond(hi)
    for _ in range(_BISECT):
        mid = 0.5 * (lo + hi)
        c = cond(mid)
        lo = np.where(c, mid, lo)
        hi = np.where(c, hi, mid)
    z = np.where(at_max, _Z_MAX, lo)
    return np.where(at0, z, -1.0)


def _p_from_z(z):
    """Two-sided alpha of critical value z; 1 where the condition never held (z < 0)."""
    return np.where(z < 0, 1.0, np.minimum(1.0, 2.0 * stats.norm.sf(np.maximum(z, 0.0))))


def _newcombe_p_outside(x1, n1, x2, n2, lower, upper):
    """Smallest alpha at which the Newcombe interval lies entirely outside [lower, upper]
    (above ``upper`` or below ``lower``); 1 when the difference itself is inside."""
    x1, n1, x2, n2, lower, upper = np.broadcast_arrays(
        *(np.asarray(a, dtype=np.float64) for a in (x1, n1, x2, n2, lower, upper)))
    d, _, _ = _newcombe_z(x1, n1, x2, n2, 0.0)
    above = d > upper
    below = d < lower

    def cond(z):
        _, lo, hi = _newcombe_z(x1, n1, x2, n2, z)
        return np.where(above, lo > upper, np.where(below, hi < lower, False))

    p = _p_from_z(_sup_z(cond, d.shape))
    return np.where(np.isfinite(d), p, np.nan)


def _newcombe_p_within(x1, n1, x2, n2, tol):
    """Smallest alpha at which the Newcombe interval lies within [-tol, tol]."""
    x1, n1, x2, n2, tol = np.broadcast_arrays(
        *(np.asarray(a, dtype=np.float64) for a in (x1, n1, x2, n2, tol)))
    d, _, _ = _newcombe_z(x1, n1, x2, n2, 0.0)

    def cond(z):
        _, lo, hi = _newcombe_z(x1, n1, x2, n2, z)
        return (lo >= -tol) & (hi <= tol)

    p = _p_from_z(_sup_z(cond, d.shape))
    return np.where(np.isfinite(d), p, np.nan)


def newcombe_p_value(x1, n1, x2, n2, delta=0.0):
    """Two-sided p-value of ``p1 - p2 = delta`` by inverting Newcombe's interval.

    The smallest ``alpha`` at which the ``1 - alpha`` interval of
    :func:`newcombe_interval` excludes ``delta`` (bisection on z to 1e-15);
    1 when the observed difference equals ``delta``, NaN when undefined. So
    "the 95 % interval excludes delta" and "p < 0.05" always agree.
    """
    out = _newcombe_p_outside(x1, n1, x2, n2, delta, delta)
    return float(out) if np.ndim(out) == 0 else out


def holm_adjust(p_values):
    """Holm's step-down adjusted p-values (Holm, Scand J Statist 1979).

    With the m defined p-values sorted, ``p_(1) <= ... <= p_(m)``::

        adj_(i) = max_{j <= i} min(1, (m - j + 1) p_(j))

    NaN entries stay NaN and do not count in m. Rejecting where the adjusted
    value is below alpha controls the family-wise error at alpha. Reference:
    statsmodels ``multipletests(method="holm")``.
    """
    p = np.asarray(p_values, dtype=np.float64)
    out = np.full(p.shape, np.nan)
    flat = p.ravel()
    ok = np.isfinite(flat)
    q = flat[ok]
    m = q.shape[0]
    if m:
        order = np.argsort(q, kind="mergesort")
        adj = np.minimum(1.0, np.maximum.accumulate((m - np.arange(m)) * q[order]))
        res = np.empty(m)
        res[order] = adj
        o = out.ravel()
        o[ok] = res
        out = o.reshape(p.shape)
    return out


def _boot_p_outside(D, d, lower, upper):
    """Bootstrap counterpart of :func:`_newcombe_p_outside` on replicate differences D (R, m)."""
    with np.errstate(invalid="ignore"):
        ok = np.isfinite(D)
        n = ok.sum(axis=0)
        le = np.where(ok, D <= upper, False).sum(axis=0) / n
        ge = np.where(ok, D >= lower, False).sum(axis=0) / n
    p = np.where(d > upper, 2.0 * le, np.where(d < lower, 2.0 * ge, 1.0))
    return np.where(np.isfinite(d) & (n > 0), np.minimum(p, 1.0), np.nan)


def _boot_p_within(D, d, tol):
    with np.errstate(invalid="ignore"):
        ok = np.isfinite(D)
        n = ok.sum(axis=0)
        below = np.where(ok, D < -tol, False).sum(axis=0) / n
        above = np.where(ok, D > tol, False).sum(axis=0) / n
    p = np.where(np.abs(d) <= tol, np.minimum(1.0, 2.0 * np.maximum(below, above)), 1.0)
    return np.where(np.isfinite(d) & (n > 0), p, np.nan)


# --------------------------------------------------------------------------- results

@dataclass(frozen=True)
class GroupValue:
    """One metric of one group: estimate and interval (``method``), with the analytic
    (Wilson) interval always beside it; ``successes`` / ``trials`` are the (effective)
    counts of the Wilson interval."""

    metric: str
    estimate: float
    low: float
    high: float
    method: str
    wilson_low: float
    wilson_high: float
    successes: float
    trials: float

    def to_dict(self) -> dict:
        return _json({f.name: getattr(self, f.name) for f in fields(self)})


@dataclass(frozen=True)
class GroupDifference:
    """A group's metric minus the rest's, with its interval and (adjusted) verdict.

    ``verdict``: "differs", "no clear difference" or "undefined" (with
    ``adjust="none"``, "(exploratory)" is appended). ``largest_gap`` is the
    largest absolute difference the interval cannot exclude.
    """

    metric: str
    against: str
    difference: float
    low: float
    high: float
    p_value: float
    p_adjusted: float
    verdict: str
    largest_gap: float
    method: str

    def to_dict(self) -> dict:
        return _json({f.name: getattr(self, f.name) for f in fields(self)})


@dataclass(frozen=True)
class GroupRow:
    """One group of one group column (or intersection) at the threshold.

    ``rows`` counts data rows (for a count table: its cases); ``cases``,
    ``events``, ``tp`` ... are weighted. ``one_class``: the group holds only
    events or only non-events (reported, no curve). ``values`` and
    ``differences`` map a metric name to its :class:`GroupValue` /
    :class:`GroupDifference` (against the rest).
    """

    column: str
    columns: tuple[str, ...]
    group: str
    rows: int
    cases: float
    events: float
    non_events: float
    flagged: float
    tp: float
    fp: float
    fn: float
    tn: float
    one_class: bool
    values: dict
    differences: dict
    roc_auc: float
    average_precision: float
    notes: tuple[str, ...]

    def to_dict(self) -> dict:
        d = {f.name: getattr(self, f.name) for f in fields(self)
             if f.name not in ("values", "differences")}
        d["values"] = {k: v.to_dict() for k, v in self.values.items()}
        d["differences"] = {k: v.to_dict() for k, v in self.differences.items()}
        return _json(d)


@dataclass(frozen=True)
class FairnessComparison:
    """The fairness metric's gap of one group to the rest (or to the reference group)."""

    column: str
    group: str
    against: str
    metric: str
    value: float
    other_value: float
    gap: float
    low: float
    high: float
    p_outside: float
    p_within: float
    p_outside_adjusted: float
    p_within_adjusted: float
    verdict: str
    largest_gap: float
    statement: str

    def to_dict(self) -> dict:
        return _json({f.name: getattr(self, f.name) for f in fields(self)})


@dataclass(frozen=True)
class FairnessResult:
    """The policy's fairness criterion judged with intervals (see the module docstring).

    ``verdict``: "holds" (every group within tolerance), "fails" (some group
    entirely outside), "unclear" or "undefined" (no comparison defined).
    """

    metric: str
    label: str
    columns: tuple[str, ...]
    tolerance: float
    reference: str
    confidence: float
    adjust: str
    method: str
    verdict: str
    comparisons: tuple[FairnessComparison, ...]
    statements: tuple[str, ...]

    def to_dict(self) -> dict:
        d = {f.name: getattr(self, f.name) for f in fields(self) if f.name != "comparisons"}
        d["comparisons"] = [c.to_dict() for c in self.comparisons]
        return _json(d)


@dataclass(frozen=True, eq=False)
class SubgroupReport:
    """Everything of the subgroup table and the fairness verdict at one threshold."""

    threshold: float
    point_threshold: float
    confidence: float
    adjust: str
    interval: str
    methods: dict
    n_comparisons: int
    rows: tuple[GroupRow, ...]
    fairness: FairnessResult | None
    n_replicates: int
    seed: int
    statements: tuple[str, ...]

    def group(self, column: str, group: str) -> GroupRow:
        for r in self.rows:
            if r.column == column and r.group == group:
                return r
        raise KeyError((column, group))

    def table(self) -> pd.DataFrame:
        """One row per group: counts, each metric with its interval, each difference's verdict."""
        recs = []
        for r in self.rows:
            d = {"column": r.column, "group": r.group, "rows": r.rows, "cases": r.cases,
                 "events": r.events, "flagged": r.flagged, "one_class": r.one_class}
            for m, v in r.values.items():
                d[m] = v.estimate
                d[f"{m}_low"] = v.low
                d[f"{m}_high"] = v.high
            for m, v in r.differences.items():
                d[f"{m}_diff"] = v.difference
                d[f"{m}_diff_low"] = v.low
                d[f"{m}_diff_high"] = v.high
                d[f"{m}_p_adjusted"] = v.p_adjusted
                d[f"{m}_verdict"] = v.verdict
            d["roc_auc"] = r.roc_auc
            d["average_precision"] = r.average_precision
            recs.append(d)
        return pd.DataFrame.from_records(recs)

    def to_dict(self) -> dict:
        d = {f.name: getattr(self, f.name) for f in fields(self)
             if f.name not in ("rows", "fairness")}
        d["rows"] = [r.to_dict() for r in self.rows]
        d["fairness"] = None if self.fairness is None else self.fairness.to_dict()
        return _json(d)


# --------------------------------------------------------------------------- data

class _Partition:
    """One group column (or an intersection of columns): a code per unit and the labels."""

    def __init__(self, name, columns, codes, labels):
        self.name = name
        self.columns = tuple(columns)
        self.codes = codes
        self.labels = list(labels)

    @property
    def n(self):
        return len(self.labels)


def _text_codes(values):
    arr = np.asarray(values, dtype=object)
    filled = np.where(pd.isna(arr), MISSING_GROUP, arr).astype(str)
    labels, codes = np.unique(filled, return_inverse=True)
    return codes.astype(np.int64), [str(x) for x in labels]


def _partitions(ds, columns, intersections):
    have = tuple(ds.groups)
    cols = have if columns is None else tuple(columns)
    for c in cols:
        if c not in ds.groups:
            raise InputError(c, f"is not a mapped group column (mapped: {', '.join(have) or 'none'})")
    coded = {}

    def code(c):
        if c not in coded:
            coded[c] = _text_codes(ds.groups[c])
        return coded[c]

    parts = [_Partition(c, (c,), *code(c)) for c in cols]
    for combo in intersections:
        combo = (combo,) if isinstance(combo, str) else tuple(combo)
        if len(combo) < 2 or len(set(combo)) != len(combo):
            raise InputError("intersections", f"{combo!r} must name two or more different group "
                             "columns")
        for c in combo:
            if c not in ds.groups:
                raise InputError(c, "is not a mapped group column (mapped: "
                                 f"{', '.join(have) or 'none'})")
        key = np.zeros(ds.y_score.shape[0], dtype=np.int64)
        mult = 1
        pieces = [code(c) for c in combo]
        for codes, labels in reversed(pieces):
            key = key + codes * mult
            mult *= len(labels)
        uk, inv = np.unique(key, return_inverse=True)
        labels = []
        for k in uk:
            parts_k = []
            rem = int(k)
            for codes, lab in reversed(pieces):
                parts_k.append(lab[rem % len(lab)])
                rem //= len(lab)
            labels.append(" & ".join(reversed(parts_k)))
        parts.append(_Partition(" & ".join(combo), combo, inv.astype(np.int64), labels))
    return parts


class _Units:
    """Per unit (a row, or a count-table line): event and non-event weight, their squares,
    flagged or not."""

    def __init__(self, ds, t_point):
        hi = ds.higher_is_riskier
        s = ds.y_score
        self.flagged = (s >= t_point) if hi else (s <= t_point)
        if ds.kind == "rows":
            y = ds.y_true
            w = np.ones(y.shape[0]) if ds.sample_weight is None else ds.sample_weight
            self.ev = np.where(y, w, 0.0)
            self.ne = np.where(y, 0.0, w)
            self.ev_sq = self.ev * self.ev
            self.ne_sq = self.ne * self.ne
            self.rows = np.ones(y.shape[0])
            self.sampling = ds.weight_kind == "sampling" and ds.sample_weight is not None
        else:
            self.ev = ds.events
            self.ne = ds.non_events
            self.sampling = ds.events_sq is not None
            self.ev_sq = ds.events_sq if self.sampling else self.ev
            self.ne_sq = ds.non_events_sq if self.sampling else self.ne
            self.rows = ds.events + ds.non_events

    def sums(self, codes, G):
        f = self.flagged
        out = {}
        for name, wt, sq in (("tp", self.ev * f, self.ev_sq * f), ("fp", self.ne * f, self.ne_sq * f),
                             ("fn", self.ev * ~f, self.ev_sq * ~f),
                             ("tn", self.ne * ~f, self.ne_sq * ~f)):
            out[name] = np.bincount(codes, weights=wt, minlength=G)
            out[name + "_sq"] = np.bincount(codes, weights=sq, minlength=G)
        out["rows"] = np.bincount(codes, weights=self.rows, minlength=G)
        return out


def _analytic(counts, metric, sampling):
    """(estimate, successes, trials) of a metric from (group) counts dicts of arrays."""
    num, den = METRIC_CELLS[metric]
    a = sum(counts[c] for c in num)
    b = sum(counts[c] for c in den)
    with np.errstate(invalid="ignore", divide="ignore"):
        p = a / b
        if sampling:
            trials = np.asarray(_iv.effective_size_from_sums(b, sum(counts[c + "_sq"] for c in den)))
        else:
            trials = np.asarray(b, dtype=np.float64)
        trials = np.where(b > 0, trials, 0.0)
        x = np.where(b > 0, p * trials, 0.0)
    return p, x, trials


def _rest(group, total):
    return {k: total[k] - group[k] for k in group}


def _replicate_values(C, metric):
    """Replicate metric values from replicate counts C: dict cell -> (R, G)."""
    num, den = METRIC_CELLS[metric]
    a = sum(C[c] for c in num)
    b = sum(C[c] for c in den)
    with np.errstate(invalid="ignore", divide="ignore"):
        return a / b


# --------------------------------------------------------------------------- main

def _resolve_fairness(policy, fairness):
    from core.policy import DEFAULT_TOLERANCE, FAIRNESS_METRICS, Fairness

    fair = fairness if fairness is not None else (None if policy is None else policy.fairness)
    if fair is None:
        return None
    if not isinstance(fair, Fairness):
        raise TypeError(f"fairness must be a core.policy.Fairness, got {type(fair).__name__}")
    if fair.metric not in FAIRNESS_METRICS:
        raise InputError("fairness.metric", f"must be one of {', '.join(FAIRNESS_METRICS)}, "
                         f"got {fair.metric!r}")
    tol = DEFAULT_TOLERANCE if fair.tolerance is None else float(fair.tolerance)
    return Fairness(metric=fair.metric, groups=tuple(fair.groups), tolerance=tol,
                    reference=fair.reference or "")


def subgroup_report(dataset, threshold: float, *, policy=None, fairness=None,
                    confidence: float = 0.95, columns=None, intersections=(),
                    adjust: str = "holm", interval: str = "auto",
                    n_replicates: int = DEFAULT_REPLICATES, seed: int = 0,
                    chunk: int | None = None, progress=None) -> SubgroupReport:
    """The subgroup table and the fairness verdict at one threshold.

    Parameters
    ----------
    dataset : Dataset
        Rows or a count table with group columns (a count table's groups are
        per table line).
    threshold : float
        In score units; a case is flagged when its score reaches the curve
        point's threshold (ties move together), as everywhere.
    policy : Policy, optional
        Its ``[fairness]`` criterion is judged (or pass ``fairness``, a
        :class:`core.policy.Fairness`, directly).
    confidence : float
        Of every interval; verdicts use ``alpha = 1 - confidence``.
    columns : sequence of str, optional
        Group columns to report (default: all mapped).
    intersections : sequence of sequences of str
        Combinations of columns reported as groups of their own, e.g.
        ``[("site", "age_band")]`` (only combinations present in the data).
    adjust : {"holm", "none"}
        Holm's step-down over all comparisons of the table (and, separately,
        over the fairness comparisons), or none ("exploratory").
    interval : {"auto", "analytic", "cluster_bootstrap"}
        ``"auto"``: the cluster bootstrap when a cluster column is mapped
        (row data), else Wilson / Newcombe.
    n_replicates, seed, chunk, progress
        For the cluster bootstrap (replicate r uses ``default_rng([seed, r])``).

    Returns
    -------
    SubgroupReport
    """
    from core.curve import Curve, sweep
    from core.dataset import Dataset

    if not isinstance(dataset, Dataset):
        raise TypeError(f"dataset must be a Dataset, got {type(dataset).__name__}")
    if adjust not in ADJUSTMENTS:
        raise InputError("adjust", f"must be one of {', '.join(ADJUSTMENTS)}, got {adjust!r}")
    if interval not in INTERVALS:
        raise InputError("interval", f"must be one of {', '.join(INTERVALS)}, got {interval!r}")
    conf = float(confidence)
    if not 0.0 < conf < 1.0:
        raise InputError("confidence", f"must lie strictly between 0 and 1, got {confidence!r}")
    alpha = 1.0 - conf
    if not dataset.groups:
        raise InputError("groups", "no group column is mapped; map a site, age band or segment "
                         "column to see subgroups")
    if interval == "cluster_bootstrap" and not uses_cluster_bootstrap(dataset):
        codes = cluster_codes(dataset)  # raises the count-table / no-cluster message
    boot = interval == "cluster_bootstrap" or (interval == "auto"
                                               and uses_cluster_bootstrap(dataset))
    fair = _resolve_fairness(policy, fairness)
    if fair is not None:
        missing = [g for g in fair.groups if g not in dataset.groups]
        if missing:
            raise InputError("fairness.groups", f"{', '.join(missing)} not among the data's group "
                             f"columns (mapped: {', '.join(dataset.groups)})")

    curve = dataset.curve()
    k = curve.index_at(threshold)
    t_point = float(curve.thresholds[k])
    units = _Units(dataset, t_point)
    parts = _partitions(dataset, columns, intersections)
    if fair is not None:  # fairness columns are judged even when not listed in ``columns``
        names = {p.name for p in parts}
        parts += [p for p in _partitions(dataset, [g for g in fair.groups if g not in names], ())]
    sampling = units.sampling
    total = units.sums(np.zeros(units.ev.shape[0], dtype=np.int64), 1)
    sums = [units.sums(p.codes, p.n) for p in parts]

    # ---- cluster bootstrap: replicate tp, fp, fn, tn of every group and of all cases
    reps = None
    if boot:
        codes, K = cluster_codes(dataset)
        w = units.ev + units.ne
        cell = np.where(units.flagged, np.where(units.ev > 0, 0, 1),
                        np.where(units.ev > 0, 2, 3))
        offs = np.cumsum([0] + [4 * p.n for p in parts])
        J = int(offs[-1]) + 4
        keys = [codes] + [codes for _ in parts]
        colsl = [offs[-1] + cell] + [offs[i] + 4 * p.codes + cell for i, p in enumerate(parts)]
        vals = [w] + [w for _ in parts]
        M = cluster_matrix(np.concatenate(keys), K, np.concatenate(colsl), np.concatenate(vals), J)
        S = np.empty((int(n_replicates), J))
        for lo, hi, blk in resample_cluster_sums(M, n_replicates, seed, chunk=chunk,
                                                 progress=progress):
            S[lo:hi] = blk
        cellnames = ("tp", "fp", "fn", "tn")
        rep_total = {c: S[:, int(offs[-1]) + j][:, None] for j, c in enumerate(cellnames)}
        reps = []
        for i, p in enumerate(parts):
            block = S[:, int(offs[i]):int(offs[i + 1])].reshape(S.shape[0], p.n, 4)
            reps.append({c: block[:, :, j] for j, c in enumerate(cellnames)})

    # ---- values and differences
    method = CLUSTER_METHOD_NAME if boot else WILSON_NAME
    diff_method = CLUSTER_METHOD_NAME if boot else NEWCOMBE_NAME
    z = _iv.normal_quantile(conf)
    per_part = []
    all_p = []
    for i, p in enumerate(parts):
        g = sums[i]
        rest = _rest(g, {k_: np.broadcast_to(v, g[k_].shape) for k_, v in total.items()})
        vals, diffs = {}, {}
        for m in GROUP_METRICS:
            est, x, n = _analytic(g, m, sampling)
            wlo, whi = _wilson_z(x, n, z)[1:]
            lo, hi = wlo, whi
            if boot:
                rv = _replicate_values(reps[i], m)
                lo, hi = percentile_interval(rv, conf)
            vals[m] = (est, lo, hi, wlo, whi, x, n)
        for m in TABLE_METRICS:
            est, x1, n1 = _analytic(g, m, sampling)
            est2, x2, n2 = _analytic(rest, m, sampling)
            d = est - est2
            if boot:
                rest_rep = {c: rep_total[c] - reps[i][c] for c in reps[i]}
                D = _replicate_values(reps[i], m) - _replicate_values(rest_rep, m)
                lo, hi = percentile_interval(D, conf)
                pv = _boot_p_outside(D, d, 0.0, 0.0)
            else:
                _, lo, hi = _newcombe_z(x1, n1, x2, n2, z)
                pv = _newcombe_p_outside(x1, n1, x2, n2, 0.0, 0.0)
            d = np.where(np.isfinite(est) & np.isfinite(est2), d, np.nan)
            pv = np.where(np.isfinite(d), pv, np.nan)
            diffs[m] = [d, np.asarray(lo, dtype=float), np.asarray(hi, dtype=float), pv]
            all_p.append(pv)
        per_part.append((vals, diffs))

    flat = np.concatenate([np.ravel(a) for a in all_p]) if all_p else np.array([])
    n_comp = int(np.isfinite(flat).sum())
    adj_flat = holm_adjust(flat) if adjust == "holm" else flat.copy()
    pos = 0
    rows = []
    statements = []
    for i, p in enumerate(parts):
        vals, diffs = per_part[i]
        g = sums[i]
        adj_of = {}
        for m in TABLE_METRICS:
            adj_of[m] = adj_flat[pos:pos + p.n]
            pos += p.n
        for j, label in enumerate(p.labels):
            ev, ne = float(g["tp"][j] + g["fn"][j]), float(g["fp"][j] + g["tn"][j])
            one_class = not (ev > 0 and ne > 0)
            notes = []
            if one_class:
                which = "no events" if not ev > 0 else "no non-events"
                notes.append(f"{p.name} = {label} has {which}: its undefined metrics are shown "
                             "as missing and it is not passed to a curve (no ROC AUC or average "
                             "precision).")
            gv = {}
            for m in GROUP_METRICS:
                est, lo, hi, wlo, whi, x, n = vals[m]
                gv[m] = GroupValue(metric=m, estimate=float(est[j]), low=float(np.ravel(lo)[j]),
                                   high=float(np.ravel(hi)[j]),
                                   method=method if boot else WILSON_NAME,
                                   wilson_low=float(wlo[j]), wilson_high=float(whi[j]),
                                   successes=float(x[j]), trials=float(n[j]))
            gd = {}
            for m in TABLE_METRICS:
                d, lo, hi, pv = diffs[m]
                dj, loj, hij, pj = (float(np.ravel(a)[j]) for a in (d, lo, hi, pv))
                aj = float(adj_of[m][j])
                if not np.isfinite(dj) or not np.isfinite(pj):
                    verdict = "undefined"
                    if not np.isfinite(dj):
                        loj = hij = math.nan
                else:
                    verdict = "differs" if aj < alpha else "no clear difference"
                    if adjust == "none":
                        verdict += " (exploratory)"
                gap = max(abs(loj), abs(hij)) if np.isfinite(loj) and np.isfinite(hij) else math.nan
                gd[m] = GroupDifference(metric=m, against="rest", difference=dj, low=loj,
                                        high=hij, p_value=pj, p_adjusted=aj if np.isfinite(pj)
                                        else math.nan, verdict=verdict, largest_gap=gap,
                                        method=diff_method)
            auc = ap = math.nan
            if not one_class:
                mask = p.codes == j
                if dataset.kind == "rows":
                    cg = sweep(dataset.y_true[mask], dataset.y_score[mask],
                               None if dataset.sample_weight is None else dataset.sample_weight[mask],
                               higher_is_riskier=dataset.higher_is_riskier)
                else:
                    cg = Curve.from_counts(dataset.y_score[mask], dataset.events[mask],
                                           dataset.non_events[mask],
                                           higher_is_riskier=dataset.higher_is_riskier)
                auc, ap = float(cg.roc_auc), float(cg.average_precision)
            if 0 < ev < FEW_GROUP_EVENTS:
                rd = gd["recall"]
                notes.append(f"{p.name} = {label} has {ev:,.0f} events: its recall is "
                             f"{_fmt(gv['recall'].estimate)} ({_fmt(gv['recall'].low)} to "
                             f"{_fmt(gv['recall'].high)}); the data cannot exclude a recall gap "
                             f"of {_fmt(rd.largest_gap, 2)} against the rest.")
            rows.append(GroupRow(
                column=p.name, columns=p.columns, group=label, rows=int(round(g["rows"][j])),
                cases=ev + ne, events=ev, non_events=ne, flagged=float(g["tp"][j] + g["fp"][j]),
                tp=float(g["tp"][j]), fp=float(g["fp"][j]), fn=float(g["fn"][j]),
                tn=float(g["tn"][j]), one_class=one_class, values=gv, differences=gd,
                roc_auc=auc, average_precision=ap, notes=tuple(notes)))
            statements.extend(notes)

    # ---- fairness
    fres = None
    if fair is not None:
        fparts = [(i, p) for i, p in enumerate(parts) if p.columns in [(c,) for c in fair.groups]]
        fres = _fairness(fair, fparts, sums, total, reps, rep_total if boot else None, sampling,
                         conf, adjust, boot, z)

    methods = {
        "values": (f"{CLUSTER_METHOD_NAME}, {int(n_replicates):,} replicates, seed {int(seed)}"
                   if boot else WILSON_NAME),
        "differences": (f"{CLUSTER_METHOD_NAME} of the difference within each replicate"
                        if boot else NEWCOMBE_NAME),
        "p_values": ("twice the share of replicates on the far side of the value" if boot else
                     "inversion of the Newcombe interval (smallest alpha that excludes the value)"),
        "adjustment": ("Holm step-down (Holm 1979)" if adjust == "holm"
                       else "none: exploratory"),
        "weights": ("Kish's effective size of each denominator (sampling weights)" if sampling
                    and not boot else "weighted counts" if dataset.kind == "rows"
                    and dataset.sample_weight is not None else "unweighted"),
    }
    head = []
    if boot:
        head.append(f"Intervals resample whole clusters ({dataset.mapping.cluster or 'cluster'}): "
                    f"cluster bootstrap percentile intervals, {int(n_replicates):,} replicates, "
                    f"seed {int(seed)}; differences are taken within each replicate.")
    else:
        head.append("Each group's proportions carry Wilson score intervals; each group against "
                    "the rest carries Newcombe's hybrid score interval for the difference "
                    "(Newcombe 1998); p-values invert that interval.")
    if dataset.kind == "counts":
        head.append("Count table: subgroups come from its group columns per table line; cases "
                    "that repeat (patients, customers) cannot be seen in a count table.")
    head.append(BASIS_STATEMENT)
    if adjust == "holm":
        head.append(f"Multiplicity: Holm's step-down adjustment (Holm 1979) over the {n_comp:,} "
                    f"group-versus-rest comparisons of the table (groups x {len(TABLE_METRICS)} "
                    f"metrics) keeps the chance of any false 'differs' at {alpha:.0%}.")
    else:
        head.append(f"Exploratory: the {n_comp:,} group-versus-rest comparisons are not adjusted "
                    "for multiplicity, so some 'differs' will appear by chance.")
    head.append(PER_GROUP_THRESHOLDS)
    if fres is not None:
        head.extend(fres.statements)
    else:
        head.append("The policy declares no fairness criterion: subgroup differences are "
                    "reported, not judged against a tolerance.")
    return SubgroupReport(
        threshold=float(threshold), point_threshold=t_point, confidence=conf, adjust=adjust,
        interval="cluster_bootstrap" if boot else "analytic", methods=methods,
        n_comparisons=n_comp, rows=tuple(rows), fairness=fres,
        n_replicates=int(n_replicates) if boot else 0, seed=int(seed),
        statements=tuple(head + statements))


def _fairness(fair, fparts, sums, total, reps, rep_total, sampling, conf, adjust, boot, z):
    """Judge the fairness criterion on the partitions of its columns."""
    metric = fair.metric
    tol = float(fair.tolerance)
    ref = fair.reference
    alpha = 1.0 - conf
    recs = []  # (column, group, against, value, other, gap, lo, hi, p_out, p_in)
    for i, p in fparts:
        g = sums[i]
        est, x1, n1 = _analytic(g, metric, sampling)
        ref_j = p.labels.index(ref) if ref and ref in p.labels else None
        if ref_j is None:
            other = _rest(g, {k: np.broadcast_to(v, g[k].shape) for k, v in total.items()})
            against = "rest"
            idx = np.arange(p.n)
        else:
            other = {k: np.broadcast_to(v[ref_j], v.shape) for k, v in g.items()}
            against = f"{p.name} = {ref}"
            idx = np.array([j for j in range(p.n) if j != ref_j], dtype=np.int64)
        est2, x2, n2 = _analytic(other, metric, sampling)
        d = est - est2
        if boot:
            R = reps[i]
            if ref_j is None:
                orep = {c: rep_total[c] - R[c] for c in R}
            else:
                orep = {c: R[c][:, [ref_j]] for c in R}
            D = _replicate_values(R, metric) - _replicate_values(orep, metric)
            lo, hi = percentile_interval(D, conf)
            p_out = _boot_p_outside(D, d, -tol, tol)
            p_in = _boot_p_within(D, d, tol)
        else:
            _, lo, hi = _newcombe_z(x1, n1, x2, n2, z)
            p_out = _newcombe_p_outside(x1, n1, x2, n2, -tol, tol)
            p_in = _newcombe_p_within(x1, n1, x2, n2, tol)
        lo, hi = np.asarray(lo, dtype=float), np.asarray(hi, dtype=float)
        for j in idx:
            ok = np.isfinite(est[j]) and np.isfinite(est2[j])
            recs.append((p.name, p.labels[j], against, float(est[j]), float(est2[j]),
                         float(d[j]) if ok else math.nan, float(lo[j]) if ok else math.nan,
                         float(hi[j]) if ok else math.nan, float(p_out[j]) if ok else math.nan,
                         float(p_in[j]) if ok else math.nan))
    p_out = np.array([r[8] for r in recs], dtype=float)
    p_in = np.array([r[9] for r in recs], dtype=float)
    if adjust == "holm":
        a_out, a_in = holm_adjust(p_out), holm_adjust(p_in)
    else:
        a_out, a_in = p_out.copy(), p_in.copy()
    label = _SHORT[metric]
    comps = []
    for r, ao, ai in zip(recs, a_out, a_in):
        col, grp, against, v, ov, gap, lo, hi, po, pi = r
        if not np.isfinite(gap):
            verdict = "undefined"
            st = (f"{col} = {grp}: the {label} gap to {against} is undefined (a side has no "
                  "cases in its denominator).")
            largest = math.nan
        else:
            largest = max(abs(lo), abs(hi))
            if ao < alpha:
                verdict = "fails"
            elif ai <= alpha:
                verdict = "holds"
            else:
                verdict = "unclear"
            span = f"{conf:.0%} interval {lo:+.3f} to {hi:+.3f}"
            if verdict == "holds":
                st = (f"{col} = {grp}: {label} gap to {against} {gap:+.3f} ({span}) lies within "
                      f"+/-{tol:g}: holds.")
            elif verdict == "fails":
                st = (f"{col} = {grp}: {label} gap to {against} {gap:+.3f} ({span}) lies outside "
                      f"+/-{tol:g}: fails.")
            else:
                st = (f"{col} = {grp}: {label} gap to {against} {gap:+.3f} ({span}) is unclear: "
                      f"the data cannot exclude a {label} gap of {largest:.2f}.")
        comps.append(FairnessComparison(
            column=col, group=grp, against=against, metric=metric, value=v, other_value=ov,
            gap=gap, low=lo, high=hi, p_outside=po, p_within=pi,
            p_outside_adjusted=float(ao), p_within_adjusted=float(ai), verdict=verdict,
            largest_gap=largest, statement=st))
    verdicts = [c.verdict for c in comps if c.verdict != "undefined"]
    if not verdicts:
        overall = "undefined"
    elif "fails" in verdicts:
        overall = "fails"
    elif all(v == "holds" for v in verdicts):
        overall = "holds"
    else:
        overall = "unclear"
    m = len(verdicts)
    how = ("cluster bootstrap percentile intervals of each gap" if boot else
           "Newcombe's hybrid score interval of each gap")
    adj = (f"Holm-adjusted across the {m} groups compared" if adjust == "holm" else
           "not adjusted for multiplicity (exploratory)")
    method = (f"{how}; 'holds' when the {conf:.0%} interval lies within +/-{tol:g}, 'fails' when "
              f"it lies entirely outside, else 'unclear'; the p-values of 'outside' and "
              f"'within' invert the interval and are {adj}")
    against_txt = (f"the reference group {ref!r}" if ref else "the rest of the cases")
    st = [(f"Fairness criterion: {label} parity, each group of {', '.join(fair.groups)} "
           f"against {against_txt}, within +/-{tol:g} ({method}). Verdict: {overall}."),
          (TRADEOFF_STATEMENT + f" This policy targets {label} parity; the other metrics are "
           "reported, not judged."),
          ]
    if metric in ("precision", "npv", "flag_rate"):
        st.append(f"{METRIC_LABELS[metric]} depends on prevalence: it is judged at the validation "
                  "counts, each group at its own prevalence.")
    if ref:
        no_ref = [p.name for _, p in fparts if ref not in p.labels]
        if no_ref:
            st.append(f"{', '.join(no_ref)} has no group {ref!r}: its groups are compared with "
                      "the rest of the cases.")
    st.extend(c.statement for c in comps if c.verdict in ("fails", "unclear", "undefined"))
    return FairnessResult(metric=metric, label=METRIC_LABELS[metric], columns=tuple(fair.groups),
                          tolerance=tol, reference=ref, confidence=conf, adjust=adjust,
                          method=method, verdict=overall, comparisons=tuple(comps),
                          statements=tuple(st))


def fairness_verdict(dataset, threshold: float, policy=None, *, fairness=None,
                     confidence: float = 0.95, adjust: str = "holm", interval: str = "auto",
                     n_replicates: int = DEFAULT_REPLICATES, seed: int = 0,
                     progress=None) -> FairnessResult | None:
    """Only the fairness criterion of :func:`subgroup_report` (None when none is declared)."""
    fair = _resolve_fairness(policy, fairness)
    if fair is None:
        return None
    rep = subgroup_report(dataset, threshold, fairness=fair, confidence=confidence,
                          columns=list(fair.groups), adjust=adjust, interval=interval,
                          n_replicates=n_replicates, seed=seed, progress=progress)
    return rep.fairness
