"""Compare model versions on the same cases: did the change help, or does it just flag less?

:func:`compare_scores` takes one label column and two or more score columns
on the same rows -- the first (or ``reference``) is the *current* score, the
others *candidates* -- each with its own direction, and returns a
:class:`Comparison`:

* one exact :class:`~core.curve.Curve` per score (:func:`core.curve.sweep`),
  for overlaid PR and ROC curves;
* ROC AUC of each and each candidate's difference with DeLong's variance
  for correlated AUCs (:mod:`core.paired_tests`; O(n log n), no pairwise
  loop) and a normal interval; average precision of each and the difference
  with the paired bootstrap (:mod:`core.paired_bootstrap`: rows resampled
  jointly, events and non-events separately);
* the fair comparisons at an operating point (:class:`PointSet`):

  - ``"workload"`` -- every score at the same flag rate q: each at the
    strictest point of its own exact curve whose flag rate reaches q. Ties
    move together, so a score whose tied block straddles q flags a little
    more; each point's actual flag rate is reported beside it. The headline
    number is events caught per 1,000 flagged at the workload,
    ``1000 TP / (q n)`` (q n is the same for every score), and the recall
    difference; q defaults to the reference's flag rate at its own point
    (under the policy, or at its given threshold), else to the validation
    prevalence (flag as many cases as there are events);
  - ``"recall"`` -- precision of each at the same recall (the strictest
    point reaching it; default: the reference's recall at the workload);
  - ``"policy"`` -- each score under the same policy at its own threshold
    (:func:`core.choose.choose` on each curve), with the expected-cost
    difference at the deployment prevalence;
  - ``"thresholds"`` -- each score at a threshold the user gives (e.g. the
    one in production);

* case-level disagreement at each point set: events caught by only one
  score, false alarms raised by only one, and McNemar's test on the paired
  decisions (events caught, false alarms, correct decisions;
  :func:`core.paired_tests.mcnemar_test`, exact binomial below 25 discordant
  cases, chi-square with continuity correction from 25, as statsmodels);
* the accuracy trap made explicit: accuracy, flag rate, recall and
  precision of each score at its own point side by side, and a sentence when
  the score with the higher accuracy has the lower recall;
* a plain-words verdict with intervals.

What the bootstrap re-derives in each replicate: the AUC, the average
precision, the point reaching the workload q (q fixed) and the point
reaching the recall target (fixed); the policy's and the user's thresholds
stay fixed (the intervals are those of the two chosen thresholds on new
cases from the same population, not of re-running the choice). Workload,
recall and accuracy comparisons are on the validation mix (these cases);
expected cost is at the policy's deployment prevalence, as in
:func:`core.choose.choose`. Differences are always candidate minus
reference.

Directions: a score whose ROC AUC under its declared direction is below 0.5
ranks non-events above events -- almost always a direction mapped the wrong
way -- and raises :class:`~core.errors.InputError` asking to flip it. A
score that is (nearly) the negation of another (Spearman rank correlation
<= -0.999 on an even sample of up to 65,536 rows) is named in the message;
when the directions are mapped so that the two rank cases alike, or two
scores rank cases alike anyway (>= 0.999), the comparison is run and
flagged in ``relations`` and ``warnings``: such scores are one model, not
two.

Weights: frequency weights are case counts everywhere. With sampling
weights DeLong's variance does not hold (the AUC interval comes from the
paired bootstrap only) and McNemar's test is not reported.
"""

from __future__ import annotations

import dataclasses
import math
from dataclasses import dataclass, field, fields
from typing import Any

import numpy as np
from scipy import stats

from core import formatting as _formatting
from core import intervals as _iv
from core.bootstrap import percentile_interval
from core.choose import Choice, choose, json_safe
from core.curve import Curve, _check_finite, _check_labels, sweep
from core.dataset import Dataset
from core.errors import InputError
from core.paired_bootstrap import PairedResampler, _dot, cell_statistics, model_cells
from core.paired_tests import (
    AucDifference,
    McNemarResult,
    _delong_from_rankings,
    _rank,
    mcnemar_test,
)
from core.policy import Policy

__all__ = [
    "POINT_SETS",
    "Comparison",
    "Difference",
    "Disagreement",
    "ModelPoint",
    "ModelSummary",
    "PairComparison",
    "PointSet",
    "compare_dataset",
    "compare_mapped",
    "compare_scores",
]

#: The operating-point comparisons, in display order.
POINT_SETS = {
    "workload": "same workload (flag rate)",
    "recall": "same recall",
    "policy": "same policy, each at its own threshold",
    "thresholds": "each at its given threshold",
}

#: |Spearman| at or above this counts as the same (or the reversed) ranking.
SAME_RANKING = 0.999
_RANK_SAMPLE = 65536
_RTOL = 1e-12
_FEW_EVENTS = 100


# --------------------------------------------------------------------------- results

@dataclass(frozen=True)
class ModelSummary:
    """One score over all thresholds: its direction, ROC AUC (DeLong SE and
    interval, clipped to [0, 1]) and average precision."""

    name: str
    higher_is_riskier: bool
    roc_auc: float
    roc_auc_se: float
    roc_auc_low: float
    roc_auc_high: float
    average_precision: float
    n_points: int
    n_event_points: int

    def to_dict(self):
        return {f.name: json_safe(getattr(self, f.name)) for f in fields(self)}


@dataclass(frozen=True)
class ModelPoint:
    """One score at one operating point (validation counts and metrics).

    ``interval_low`` / ``interval_high`` / ``closed`` give every threshold
    with these counts (see :meth:`core.curve.Curve.interval`). ``flagged`` is
    the flagged weight. ``cost_per_case`` (at the policy's deployment
    prevalence), ``cost_per_period``, ``meets_rules`` and ``deployment``
    (metrics at that prevalence) are set for policy points.
    """

    model: str
    kind: str
    threshold: float
    index: int
    interval_low: float
    interval_high: float
    closed: str
    higher_is_riskier: bool
    tp: float
    fp: float
    fn: float
    tn: float
    flagged: float
    flag_rate: float
    recall: float
    precision: float
    specificity: float
    accuracy: float
    cost_per_case: float | None = None
    cost_per_period: float | None = None
    meets_rules: bool | None = None
    deployment: dict | None = None

    def to_dict(self):
        return {f.name: json_safe(getattr(self, f.name)) for f in fields(self)}


@dataclass(frozen=True)
class PointSet:
    """Every score at one kind of operating point (see :data:`POINT_SETS`).

    ``target`` is the common flag rate (``"workload"``) or recall
    (``"recall"``), None otherwise; ``points`` maps each score to its point,
    None where it has none (a policy no point of it meets).
    """

    kind: str
    label: str
    target: float | None
    target_source: str
    points: dict
    notes: tuple[str, ...] = ()

    def to_dict(self):
        return {"kind": self.kind, "label": self.label, "target": json_safe(self.target),
                "target_source": self.target_source,
                "points": {k: None if v is None else v.to_dict() for k, v in self.points.items()},
                "notes": list(self.notes)}


@dataclass(frozen=True)
class Difference:
    """Candidate minus reference for one statistic, with its interval.

    ``low`` / ``high`` are None when no interval was computed (the paired
    bootstrap not run); ``method`` says how they were obtained. ``unit``:
    ``"proportion"``, ``"per 1,000 flagged"``, ``"AUC"`` or a cost unit.
    ``better`` is ``"higher"`` or ``"lower"``: which sign favours the candidate.
    """

    metric: str
    label: str
    reference: float
    candidate: float
    difference: float
    low: float | None
    high: float | None
    method: str
    unit: str = "proportion"
    better: str = "higher"
    se: float | None = None
    p_value: float | None = None

    @property
    def settled(self) -> str:
        """``"candidate"`` / ``"reference"`` when the interval excludes 0 in its
        favour, ``"unclear"`` when it contains 0, ``"no interval"`` without one."""
        if self.low is None or self.high is None or not (np.isfinite(self.low)
                                                          and np.isfinite(self.high)):
            return "no interval"
        if self.low > 0 or self.high < 0:
            cand_up = self.low > 0
            good = cand_up if self.better == "higher" else not cand_up
            return "candidate" if good else "reference"
        return "unclear"

    def to_dict(self):
        out = {f.name: json_safe(getattr(self, f.name)) for f in fields(self)}
        out["settled"] = self.settled
        return out


@dataclass(frozen=True)
class Disagreement:
    """Case-level disagreement of reference (a) and candidate (b) at one point set.

    Counts are (weighted) cases. ``events``: McNemar table of events caught
    (``only_a`` = caught by the reference only); ``false_alarms``: of
    non-events flagged; ``correct``: of correct decisions. The McNemar
    results are None with sampling or non-integer weights.
    """

    kind: str
    events_both: float
    events_only_reference: float
    events_only_candidate: float
    events_neither: float
    false_alarms_both: float
    false_alarms_only_reference: float
    false_alarms_only_candidate: float
    false_alarms_neither: float
    correct_only_reference: float
    correct_only_candidate: float
    mcnemar_events: McNemarResult | None
    mcnemar_false_alarms: McNemarResult | None
    mcnemar_correct: McNemarResult | None
    text: str

    def to_dict(self):
        return {f.name: json_safe(getattr(self, f.name)) for f in fields(self)}


@dataclass(frozen=True)
class PairComparison:
    """The reference against one candidate.

    ``roc_auc``: DeLong's difference (None with sampling weights);
    ``roc_auc_difference`` the AUC difference shown (DeLong's interval, or
    the bootstrap's with sampling weights); ``roc_auc_bootstrap`` and
    ``average_precision`` from the paired bootstrap (None without it); ``at[kind][metric]`` the differences at each point set;
    ``disagreement[kind]`` the case-level tables; ``verdict`` one of
    ``"better"``, ``"worse"``, ``"no clear difference"``, ``"mixed"``.
    """

    reference: str
    candidate: str
    roc_auc: AucDifference | None
    roc_auc_difference: Difference
    roc_auc_bootstrap: Difference | None
    average_precision: Difference
    at: dict
    disagreement: dict
    accuracy_trap: bool
    accuracy_trap_text: str | None
    verdict: str
    verdict_text: str

    def to_dict(self):
        return {
            "reference": self.reference, "candidate": self.candidate,
            "roc_auc_delong": None if self.roc_auc is None else json_safe(self.roc_auc),
            "roc_auc_difference": self.roc_auc_difference.to_dict(),
            "roc_auc_bootstrap": None if self.roc_auc_bootstrap is None
            else self.roc_auc_bootstrap.to_dict(),
            "average_precision": self.average_precision.to_dict(),
            "at": {k: {m: d.to_dict() for m, d in v.items()} for k, v in self.at.items()},
            "disagreement": {k: v.to_dict() for k, v in self.disagreement.items()},
            "accuracy_trap": self.accuracy_trap, "accuracy_trap_text": self.accuracy_trap_text,
            "verdict": self.verdict, "verdict_text": self.verdict_text,
        }


@dataclass(frozen=True, eq=False)
class Comparison:
    """Two or more scores compared on the same cases (see the module docstring).

    ``models`` lists the scores, the reference first. ``curves`` (one exact
    Curve per score), ``choices`` (the policy's :class:`~core.choose.Choice`
    per score) and ``replicates`` (per-replicate values of the paired
    bootstrap) are kept for drawing and checking but left out of
    :meth:`to_dict`.
    """

    models: tuple[str, ...]
    reference: str
    summaries: dict
    auc_covariance: np.ndarray | None
    point_sets: dict
    own_points: str
    accuracy_table: tuple[dict, ...]
    pairs: tuple[PairComparison, ...]
    relations: tuple[dict, ...]
    warnings: tuple[str, ...]
    bootstrap: dict | None
    confidence: float
    data: dict
    verdict_text: str
    curves: dict = field(default_factory=dict, repr=False)
    choices: dict = field(default_factory=dict, repr=False)
    replicates: dict = field(default_factory=dict, repr=False)

    def pair(self, candidate: str) -> PairComparison:
        for p in self.pairs:
            if p.candidate == candidate:
                return p
        raise KeyError(candidate)

    def to_dict(self) -> dict:
        """JSON-safe dict (NaN -> None, +/-inf -> "inf"/"-inf"); no rows, no curves."""
        return json_safe({
            "models": list(self.models), "reference": self.reference,
            "summaries": {k: v.to_dict() for k, v in self.summaries.items()},
            "auc_covariance": self.auc_covariance,
            "point_sets": {k: v.to_dict() for k, v in self.point_sets.items()},
            "own_points": self.own_points, "accuracy_table": list(self.accuracy_table),
            "pairs": [p.to_dict() for p in self.pairs], "relations": list(self.relations),
            "warnings": list(self.warnings), "bootstrap": self.bootstrap,
            "confidence": self.confidence, "data": self.data, "verdict_text": self.verdict_text,
        })


# --------------------------------------------------------------------------- formatting

_pct = _formatting.sentence_pct


def _pts(x, digits=1):
    """A difference of proportions in percentage points, signed."""
    if x is None or not np.isfinite(x):
        return "undefined"
    return f"{100 * x:+.{digits}f} points"


_num = _formatting.sentence_num


def _per1000(x):
    if x is None or not np.isfinite(x):
        return "undefined"
    return f"{x:,.0f}" if abs(x) >= 10 else f"{x:.1f}"


# --------------------------------------------------------------------------- input

def _directions(names, higher_is_riskier) -> dict:
    if isinstance(higher_is_riskier, (bool, np.bool_)):
        return {n: bool(higher_is_riskier) for n in names}
    if not isinstance(higher_is_riskier, dict):
        raise InputError("higher_is_riskier", "must be a bool or a dict of score name -> bool")
    unknown = [k for k in higher_is_riskier if k not in names]
    if unknown:
        raise InputError("higher_is_riskier", f"names {', '.join(map(repr, unknown))}, which are not "
                         f"among the scores ({', '.join(map(repr, names))})")
    return {n: bool(higher_is_riskier.get(n, True)) for n in names}


def _direction_words(hir: bool) -> str:
    return "higher is riskier" if hir else "lower is riskier"


def _spearman_sample(arrs, n):
    step = max(1, n // _RANK_SAMPLE)
    ranks = np.stack([stats.rankdata(a[::step]) for a in arrs])
    with np.errstate(invalid="ignore", divide="ignore"):
        sd = ranks.std(axis=1)
        D = ranks - ranks.mean(axis=1)[:, None]
        rho = (D @ D.T) / ranks.shape[1] / np.outer(sd, sd)
    return rho, int(ranks.shape[1])


def _relations(names, arrs, dirs, n):
    """Pairs of scores that rank cases (nearly) alike or reversed."""
    rho, m = _spearman_sample(arrs, n)
    out = []
    for i in range(len(names)):
        for j in range(i + 1, len(names)):
            r = float(rho[i, j])
            if not np.isfinite(r):
                continue
            identical = bool(np.array_equal(arrs[i], arrs[j]))
            same_dir = dirs[names[i]] == dirs[names[j]]
            oriented = r if same_dir else -r
            if abs(r) < SAME_RANKING and not identical:
                continue
            kind = ("identical" if identical else
                    "negation" if r <= -SAME_RANKING else "same ranking")
            out.append({"a": names[i], "b": names[j], "kind": kind, "spearman": r,
                        "spearman_with_directions": oriented, "rows_sampled": m,
                        "directions_agree": bool(oriented >= SAME_RANKING)})
    return out


def _relation_words(rel) -> str:
    a, b = rel["a"], rel["b"]
    if rel["kind"] == "identical":
        return f"'{b}' holds exactly the same values as '{a}'"
    if rel["kind"] == "negation":
        return (f"'{b}' is (nearly) the negation of '{a}' (Spearman rank correlation "
                f"{rel['spearman']:.4f} on {rel['rows_sampled']:,} rows)")
    return (f"'{b}' ranks the cases (nearly) as '{a}' does (Spearman rank correlation "
            f"{rel['spearman']:.4f} on {rel['rows_sampled']:,} rows)")


def _model_dataset(ds: Dataset, name: str, score: np.ndarray, hir: bool, given) -> Dataset:
    """The dataset with another score in place of its own (same rows, same columns);
    the dataset itself (and its cached curve) for its own score."""
    if given is ds.y_score and hir == ds.higher_is_riskier:
        return ds
    mapping = dataclasses.replace(ds.mapping, score=name, higher_is_riskier=bool(hir))
    return Dataset(kind="rows", mapping=mapping, y_score=score, y_true=ds.y_true,
                   sample_weight=ds.sample_weight, weight_kind=ds.weight_kind, groups=ds.groups,
                   cluster=ds.cluster, score_time=ds.score_time, outcome_time=ds.outcome_time,
                   case_cost=ds.case_cost, file_name=ds.file_name, source_rows=ds.source_rows)


# --------------------------------------------------------------------------- per model

def _average_precision(curve: Curve) -> float:
    """:attr:`core.curve.Curve.average_precision` with the same arithmetic on the same
    elements (so the same float), without computing every metric at every point."""
    cached = curve.__dict__.get("average_precision")
    if cached is not None:
        return cached
    rec = curve.tp / curve.n_events
    dr = np.diff(rec)
    use = dr > 0
    tp, fp = curve.tp[1:][use], curve.fp[1:][use]
    with np.errstate(invalid="ignore", divide="ignore"):
        prec = np.divide(tp, tp + fp)
    return float(np.sum(dr[use] * prec))


@dataclass(eq=False)
class _Model:
    name: str
    hir: bool
    score: np.ndarray
    curve: Curve
    ranking: Any
    data: Any  # Dataset or Curve for choose()
    choice: Choice | None = None

    @property
    def d(self) -> int:
        return self.curve.n_points - 1

    def flags(self, k: int) -> np.ndarray:
        """Rows flagged at curve point k (run index >= d - k)."""
        return self.ranking.inv >= self.d - int(k)

    def first_reaching_flagged(self, target: float) -> int:
        flagged = self.curve.tp + self.curve.fp
        k = int(np.searchsorted(flagged, target * (1.0 - _RTOL), side="left"))
        return min(k, self.curve.n_points - 1)

    def first_reaching_tp(self, target: float) -> int:
        k = int(np.searchsorted(self.curve.tp, target * (1.0 - _RTOL), side="left"))
        return min(k, self.curve.n_points - 1)


def _model_point(m: _Model, k: int, kind: str, *, threshold=None, report=None) -> ModelPoint:
    c = m.curve
    op = c.point(k, threshold=threshold)
    mt = op.metrics
    kw = {}
    if report is not None:
        kw = {"cost_per_case": report.cost_per_case, "cost_per_period": report.cost_per_period,
              "meets_rules": report.meets_rules, "deployment": dict(report.deployment)}
    return ModelPoint(
        model=m.name, kind=kind, threshold=op.threshold, index=op.index,
        interval_low=op.interval_low, interval_high=op.interval_high, closed=op.closed,
        higher_is_riskier=m.hir, tp=op.tp, fp=op.fp, fn=op.fn, tn=op.tn, flagged=op.tp + op.fp,
        flag_rate=mt["flag_rate"], recall=mt["recall"], precision=mt["precision"],
        specificity=mt["specificity"], accuracy=mt["accuracy"], **kw)


# --------------------------------------------------------------------------- disagreement

def _disagreement(kind, ref: _Model, cand: _Model, k_ref, k_cand, y, w, mcnemar_ok) -> Disagreement:
    fa = ref.flags(k_ref)
    fb = cand.flags(k_cand)
    code = fa.astype(np.int8) * 2 + fb.astype(np.int8) + 4 * y.astype(np.int8)
    cnt = np.bincount(code, weights=w, minlength=8).astype(np.float64)
    # non-events: 0 neither, 1 cand only, 2 ref only, 3 both; events: +4
    ne_neither, ne_b, ne_a, ne_both = cnt[0:4]
    ev_neither, ev_b, ev_a, ev_both = cnt[4:8]
    # correct decisions: events flagged, non-events not flagged
    corr_a = ev_a + ne_b  # reference right, candidate wrong
    corr_b = ev_b + ne_a
    tests = (None, None, None)
    if mcnemar_ok:
        tests = (mcnemar_test(ev_a, ev_b, both=ev_both, neither=ev_neither),
                 mcnemar_test(ne_a, ne_b, both=ne_both, neither=ne_neither),
                 mcnemar_test(corr_a, corr_b, both=ev_both + ne_neither, neither=ev_neither + ne_both))
    r, c = ref.name, cand.name
    text = (f"Events caught by both: {_num(ev_both)}; only by '{c}': {_num(ev_b)}; only by '{r}': "
            f"{_num(ev_a)}; by neither: {_num(ev_neither)}. False alarms raised only by '{c}': "
            f"{_num(ne_b)}; only by '{r}': {_num(ne_a)}.")
    if tests[0] is not None:
        t = tests[0]
        text += (f" McNemar's test on the events caught: p = {_num(t.p_value, 3)} ({t.method}, "
                 f"{_num(t.discordant)} discordant events).")
    return Disagreement(
        kind=kind, events_both=ev_both, events_only_reference=ev_a, events_only_candidate=ev_b,
        events_neither=ev_neither, false_alarms_both=ne_both, false_alarms_only_reference=ne_a,
        false_alarms_only_candidate=ne_b, false_alarms_neither=ne_neither,
        correct_only_reference=corr_a, correct_only_candidate=corr_b, mcnemar_events=tests[0],
        mcnemar_false_alarms=tests[1], mcnemar_correct=tests[2], text=text)


# --------------------------------------------------------------------------- bootstrap

class _Replicates:
    """Per-replicate statistics of every score, written by the resampler's callback."""

    def __init__(self, models, cells, n_rep, *, q, rho, fixed_cols, cost_flags):
        self.models = models
        self.cells = cells
        self.q, self.rho = q, rho
        self.fixed_cols = fixed_cols  # model -> list of columns (point-set order)
        self.cost_flags = cost_flags  # model -> (event miss costs a_e, flagged mask) or None
        k = len(models)
        self.auc = np.full((n_rep, k), np.nan)
        self.ap = np.full((n_rep, k), np.nan)
        self.tp_w = np.full((n_rep, k), np.nan)
        self.prec_r = np.full((n_rep, k), np.nan)
        self.P = np.full(n_rep, np.nan)
        self.N = np.full(n_rep, np.nan)
        ncol = max((len(v) for v in fixed_cols), default=0)
        self.tp = np.full((n_rep, k, max(ncol, 1)), np.nan)
        self.fp = np.full((n_rep, k, max(ncol, 1)), np.nan)
        self.cost_total = np.full(n_rep, np.nan)
        self.cost_flagged = np.full((n_rep, k), np.nan)
        self.start = 0

    def __call__(self, r, events, non_events, mass):
        i = r - self.start
        for m in range(len(self.models)):
            st = cell_statistics(events[m], non_events[m], flag_rate=self.q,
                                 recall=self.rho, columns=self.fixed_cols[m])
            self.auc[i, m] = st["roc_auc"]
            self.ap[i, m] = st["average_precision"]
            self.tp_w[i, m] = st["tp_at_flag_rate"]
            if self.rho is not None:
                self.prec_r[i, m] = st["precision_at_recall"]
            ncol = len(self.fixed_cols[m])
            if ncol:
                self.tp[i, m, :ncol] = st["tp"]
                self.fp[i, m, :ncol] = st["fp"]
            if m == 0:
                self.P[i], self.N[i] = st["P"], st["N"]
            cf = self.cost_flags[m]
            if cf is not None:
                a, flagged = cf
                self.cost_total[i] = float(_dot(mass, a))
                self.cost_flagged[i, m] = float(_dot(mass[flagged], a[flagged]))


def _cost(rp, tpr, fpr, miss_share=None):
    """Expected cost per case at the policy's prevalence (see core.costs)."""
    pi = rp.prevalence
    if rp.false_negative_column is not None:
        miss = miss_share  # missed events' summed cost / event weight
    else:
        miss = rp.false_negative * (1.0 - tpr)
    return (pi * miss + rp.false_positive * (1.0 - pi) * fpr + rp.true_positive * pi * tpr
            + rp.true_negative * (1.0 - pi) * (1.0 - fpr))


# --------------------------------------------------------------------------- main

def compare_scores(y_true, scores: dict, *, higher_is_riskier=True, sample_weight=None,
                   weight_kind: str | None = None, event_cost=None, policy: Policy | None = None,
                   dataset: Dataset | None = None, reference: str | None = None,
                   flag_rate: float | None = None, recall: float | None = None,
                   thresholds: dict | None = None, calibrated: bool = False,
                   confidence: float = 0.95, n_replicates: int = 2000, seed: int = 0,
                   bootstrap: bool = True, progress=None, n_jobs: int = 1) -> Comparison:
    """Compare two or more scores on the same cases (see the module docstring).

    Parameters
    ----------
    y_true : array-like (n,)
        1 / True for the event.
    scores : dict of name -> array-like (n,)
        At least two scores on the same rows; the first is the reference
        (current) unless ``reference`` names another.
    higher_is_riskier : bool or dict of name -> bool
        Each score's direction (names missing from the dict: True).
    sample_weight, weight_kind
        Optional weights and their kind (``"frequency"`` or ``"sampling"``;
        required with weights).
    event_cost : array-like (n,), optional
        Per-case miss costs (for a policy with ``false_negative_column``).
    policy : Policy, optional
        Each score's own point under it (:func:`core.choose.choose`).
    dataset : Dataset, optional
        The row dataset the scores belong to: supplies weights, per-case
        costs and score times (capacity rules) to the policy; its own score
        is used only if passed in ``scores``.
    flag_rate : float in (0, 1], optional
        The common workload (default: see the module docstring).
    recall : float in (0, 1], optional
        The common recall (default: the reference's recall at the workload).
    thresholds : dict of name -> float, optional
        Each score's own threshold (e.g. the one in production): the
        ``"thresholds"`` point set.
    calibrated : bool
        Passed to :func:`core.choose.choose`.
    confidence : float
        Level of every interval.
    n_replicates, seed, bootstrap, progress, n_jobs
        The paired bootstrap (see :mod:`core.paired_bootstrap`):
        ``bootstrap=False`` skips it (every bootstrap interval is then None);
        ``progress(done, total)`` is called as replicates finish.

    Raises
    ------
    InputError
        Fewer than two scores, a length mismatch, a non-finite score (naming
        the score column and the rows), labels other than 0/1, a single class,
        a score whose ROC AUC under its declared direction is below 0.5.
    """
    conf = float(confidence)
    if not 0.0 < conf < 1.0:
        raise InputError("confidence", f"must lie strictly between 0 and 1, got {confidence!r}")
    if not isinstance(scores, dict) or len(scores) < 2:
        raise InputError("scores", "need at least two score columns on the same rows to compare")
    names = [str(k) for k in scores]
    if any(not n.strip() for n in names) or len(set(names)) != len(names):
        raise InputError("scores", "names must be distinct, non-empty column names")
    if reference is None:
        reference = names[0]
    if reference not in names:
        raise InputError("reference", f"{reference!r} is not among the scores "
                         f"({', '.join(map(repr, names))})")
    names = [reference] + [n for n in names if n != reference]
    raw = {str(k): v for k, v in scores.items()}
    dirs = _directions(names, higher_is_riskier)

    if dataset is not None and (not isinstance(dataset, Dataset) or dataset.kind != "rows"):
        raise InputError("dataset", "must be a row Dataset (a count table holds one score only)")
    y = _check_labels(y_true)
    n = y.shape[0]
    if dataset is not None:
        if dataset.y_true.shape[0] != n or not np.array_equal(dataset.y_true, y):
            raise InputError("dataset", "its labels differ from y_true: the scores must be on the "
                             "dataset's own rows")
        given = [k for k, v in (("sample_weight", sample_weight), ("weight_kind", weight_kind),
                                ("event_cost", event_cost)) if v is not None]
        if given:
            raise InputError(given[0], "comes from the dataset when one is given; leave it out")
        sample_weight, weight_kind = dataset.sample_weight, dataset.weight_kind
        event_cost = dataset.case_cost
    arrs = {nm: _check_finite(nm, raw[nm], n) + 0.0 for nm in names}
    w = None
    if sample_weight is not None:
        w = _check_finite("sample_weight", sample_weight, n, allow_negative=False)
        if weight_kind not in ("frequency", "sampling"):
            raise InputError("weight_kind", f"must be 'frequency' or 'sampling' when weights are "
                             f"given, got {weight_kind!r}")
    else:
        weight_kind = None
    if flag_rate is not None and not (0.0 < float(flag_rate) <= 1.0):
        raise InputError("flag_rate", f"must lie in (0, 1], got {flag_rate!r}")
    if recall is not None and not (0.0 < float(recall) <= 1.0):
        raise InputError("recall", f"must lie in (0, 1], got {recall!r}")
    if thresholds is not None:
        unknown = [k for k in thresholds if k not in names]
        if unknown:
            raise InputError("thresholds", f"names {', '.join(map(repr, unknown))}, which are not "
                             "among the scores")
        for k, t in thresholds.items():
            if t is None or math.isnan(float(t)):
                raise InputError("thresholds", f"the threshold of {k!r} is not a number")

    # ---------------------------------------------------------------- curves and rankings
    models: list[_Model] = []
    for nm in names:
        s = arrs[nm]
        if dataset is not None:
            data = _model_dataset(dataset, nm, s, dirs[nm], raw[nm])
            curve = data.curve()
        else:
            curve = sweep(y, s, w, higher_is_riskier=dirs[nm], event_cost=event_cost)
            data = curve
        rk = _rank(y, s, w, dirs[nm])
        if rk.n_runs != curve.n_points - 1:  # pragma: no cover - both count distinct scores
            raise AssertionError("ranking and curve disagree on the distinct scores")
        models.append(_Model(name=nm, hir=dirs[nm], score=s, curve=curve, ranking=rk, data=data))
    ref = models[0]
    c0 = ref.curve
    P, N = c0.n_events, c0.n_nonevents
    n_total = P + N
    warnings: list[str] = []

    relations = _relations(names, [m.score for m in models], dirs, n)
    bad = [m for m in models if m.curve.roc_auc < 0.5]
    if bad:
        m = bad[0]
        rel = [r for r in relations if m.name in (r["a"], r["b"]) and r["kind"] != "identical"]
        extra = ""
        if rel:
            extra = " " + "; ".join(_relation_words(r) for r in rel) + "."
        flip = "lower" if m.hir else "higher"
        raise InputError(
            m.name, f"ROC AUC {m.curve.roc_auc:.4f} under the declared direction "
            f"({_direction_words(m.hir)}) is below 0.5: the score ranks non-events above events, "
            f"so comparing it as declared would be misleading.{extra}",
            hint=f"If {flip} values of '{m.name}' mean higher risk, declare it "
                 f"{flip}-is-riskier (command line: {'--lower-is-riskier ' + m.name if m.hir else 'drop --lower-is-riskier ' + m.name})")
    for r in relations:
        if not r["directions_agree"]:  # reversed as declared, yet neither AUC is below 0.5
            warnings.append(_relation_words(r) + f", but as declared ('{r['a']}' "
                            f"{_direction_words(dirs[r['a']])}, '{r['b']}' "
                            f"{_direction_words(dirs[r['b']])}) they rank cases in reverse of each "
                            "other: check the directions.")
        elif r["kind"] == "negation":
            warnings.append(_relation_words(r) + f"; with '{r['b']}' declared "
                            f"{_direction_words(dirs[r['b']])} the two rank cases alike, so every "
                            "difference is (close to) zero: they are one model, not two.")
        else:
            warnings.append(_relation_words(r) + ": every difference is (close to) zero; they are "
                            "one model, not two.")

    if P < _FEW_EVENTS:
        from core.uncertainty import few_events_statement

        msg = few_events_statement(P)
        if msg:
            warnings.append(msg)
    if dataset is not None and dataset.cluster is not None:
        warnings.append("The data have a cluster column (repeated cases), but the paired bootstrap "
                        "and DeLong's variance treat rows as independent: intervals may be too "
                        "narrow.")

    # ---------------------------------------------------------------- DeLong
    delong = None
    if weight_kind != "sampling":
        delong = _delong_from_rankings(y, [m.ranking for m in models], w)
    else:
        warnings.append("Sampling weights: DeLong's variance does not apply; the AUC differences "
                        "carry the paired bootstrap interval only, and McNemar's test is not "
                        "reported.")
    z = _iv.normal_quantile(conf)
    summaries = {}
    for i, m in enumerate(models):
        se = delong.se(i) if delong is not None else np.nan
        auc = m.curve.roc_auc
        summaries[m.name] = ModelSummary(
            name=m.name, higher_is_riskier=m.hir, roc_auc=auc, roc_auc_se=se,
            roc_auc_low=max(0.0, auc - z * se) if np.isfinite(se) else np.nan,
            roc_auc_high=min(1.0, auc + z * se) if np.isfinite(se) else np.nan,
            average_precision=_average_precision(m.curve), n_points=m.curve.n_points,
            n_event_points=int(np.count_nonzero(m.curve.event_point_mask)))

    # ---------------------------------------------------------------- own points
    point_sets: dict[str, PointSet] = {}
    resolved = None
    if policy is not None:
        pts = {}
        notes = []
        for m in models:
            wk = None if isinstance(m.data, Dataset) else weight_kind
            m.choice = choose(m.data, policy, calibrated=calibrated, weight_kind=wk)
            rep = m.choice.point
            if rep is None:
                pts[m.name] = None
                notes.append(f"No threshold of '{m.name}' meets every rule of the policy.")
            else:
                pts[m.name] = _model_point(m, rep.index, "policy", report=rep)
        resolved = ref.choice.resolved
        point_sets["policy"] = PointSet("policy", POINT_SETS["policy"], None, "policy", pts,
                                        tuple(notes))
    if thresholds:
        pts = {}
        for m in models:
            t = thresholds.get(m.name)
            pts[m.name] = None if t is None else _model_point(m, m.curve.index_at(float(t)),
                                                              "thresholds", threshold=float(t))
        point_sets["thresholds"] = PointSet("thresholds", POINT_SETS["thresholds"], None, "user",
                                            pts)

    # ---------------------------------------------------------------- workload and recall
    if flag_rate is not None:
        q, q_src = float(flag_rate), "user"
    else:
        q, q_src = None, None
        for kind in ("policy", "thresholds"):
            p = point_sets.get(kind)
            if p is not None and p.points.get(ref.name) is not None and p.points[ref.name].flagged > 0:
                q, q_src = p.points[ref.name].flag_rate, f"the flag rate of '{ref.name}' at its {kind} point"
                break
        if q is None:
            q, q_src = c0.prevalence, "the validation prevalence (as many flags as events)"
    target = q * n_total
    pts, notes = {}, []
    row_w = 1.0 if w is None else float(w.max())
    for m in models:
        k = m.first_reaching_flagged(target)
        pts[m.name] = _model_point(m, k, "workload")
        over = pts[m.name].flagged - target
        if over > row_w * (1 + 1e-9):
            notes.append(f"Ties: '{m.name}' cannot flag exactly {_pct(q, 2)}; its strictest point "
                         f"reaching it flags {_pct(pts[m.name].flag_rate, 2)}.")
    point_sets["workload"] = PointSet("workload", POINT_SETS["workload"], q, q_src, pts, tuple(notes))
    if recall is not None:
        rho, rho_src = float(recall), "user"
    else:
        rho = point_sets["workload"].points[ref.name].recall
        rho_src = f"the recall of '{ref.name}' at the workload"
    if rho > 0:
        pts = {m.name: _model_point(m, m.first_reaching_tp(rho * P), "recall") for m in models}
        point_sets["recall"] = PointSet("recall", POINT_SETS["recall"], rho, rho_src, pts)
    else:
        rho = None
        warnings.append(f"'{ref.name}' catches no event at the workload: no same-recall comparison.")
    point_sets = {k: point_sets[k] for k in POINT_SETS if k in point_sets}
    own = "policy" if "policy" in point_sets else ("thresholds" if "thresholds" in point_sets
                                                  else "workload")

    # ---------------------------------------------------------------- bootstrap
    fixed_kinds = [k for k in ("policy", "thresholds") if k in point_sets]
    reps = None
    boot_info = None
    if bootstrap:
        cells, fixed_cols = [], []
        for m in models:
            extra = [point_sets[k].points[m.name].index for k in fixed_kinds
                     if point_sets[k].points[m.name] is not None]
            mc = model_cells(m.curve, m.ranking.inv, extra)
            cells.append(mc)
            fixed_cols.append([mc.column_of_index(point_sets[k].points[m.name].index)
                               if point_sets[k].points[m.name] is not None else 0
                               for k in fixed_kinds])
        cost_flags = [None] * len(models)
        if resolved is not None and resolved.costs_given and resolved.false_negative_column is not None:
            ev_rows = np.flatnonzero(y)
            a = np.asarray(event_cost, dtype=np.float64)[ev_rows]
            for i, m in enumerate(models):
                p = point_sets["policy"].points[m.name]
                if p is not None:
                    cost_flags[i] = (a, m.flags(p.index)[ev_rows])
        sampler = PairedResampler(y, cells, sample_weight=w, weight_kind=weight_kind)
        reps = _Replicates(models, cells, int(n_replicates), q=q, rho=rho, fixed_cols=fixed_cols,
                           cost_flags=cost_flags)
        sampler.run(int(n_replicates), seed, reps, progress=progress, n_jobs=n_jobs)
        boot_info = {
            "n_replicates": int(n_replicates), "seed": int(seed),
            "design": "paired, stratified by class (events and non-events resampled separately)",
            "seeds": "replicate r uses numpy.random.default_rng([seed, r])",
            "weights": ("unweighted" if weight_kind is None else
                        "frequency weights: cases drawn in proportion to the weights" if
                        weight_kind == "frequency" else
                        "sampling weights: rows drawn uniformly, each carrying its weight"),
            "interval": f"{conf:g} percentile interval (Efron & Tibshirani 1993)",
            "fixed": "policy and given thresholds stay fixed; the workload and recall points are "
                     "re-derived in each replicate at the fixed targets",
        }
    else:
        warnings.append("The paired bootstrap was not run: average precision and the operating-"
                        "point differences carry no interval yet.")

    # ---------------------------------------------------------------- pairs
    mcnemar_ok = w is None or (weight_kind == "frequency" and bool(np.all(w == np.round(w))))
    if w is not None and not mcnemar_ok:
        warnings.append("McNemar's test needs case counts: not reported with these weights.")
    pairs = []
    replicate_store = {}
    for j in range(1, len(models)):
        pairs.append(_pair(models, j, point_sets, fixed_kinds, delong, reps, conf, q, rho, n_total,
                           y, w, mcnemar_ok, resolved, own, replicate_store))

    acc_rows = []
    ps_own = point_sets[own]
    for m in models:
        p = ps_own.points.get(m.name)
        acc_rows.append({"model": m.name, "point_set": own,
                         "threshold": None if p is None else p.threshold,
                         "accuracy": np.nan if p is None else p.accuracy,
                         "flag_rate": np.nan if p is None else p.flag_rate,
                         "recall": np.nan if p is None else p.recall,
                         "precision": np.nan if p is None else p.precision})
    acc_rows.append({"model": "flag none", "point_set": "baseline", "threshold": None,
                     "accuracy": 1.0 - c0.prevalence, "flag_rate": 0.0, "recall": 0.0,
                     "precision": np.nan})

    data = {"n_rows": int(n), "n_events": P, "n_nonevents": N, "validation_prevalence": c0.prevalence,
            "weight_kind": weight_kind,
            "fingerprint": dataset.fingerprint if dataset is not None else None,
            "policy": None if resolved is None else resolved.to_dict()}
    verdict_text = " ".join(p.verdict_text for p in pairs)
    return Comparison(
        models=tuple(names), reference=ref.name, summaries=summaries,
        auc_covariance=None if delong is None else delong.covariance, point_sets=point_sets,
        own_points=own, accuracy_table=tuple(acc_rows), pairs=tuple(pairs),
        relations=tuple(relations), warnings=tuple(warnings), bootstrap=boot_info, confidence=conf,
        data=data, verdict_text=verdict_text, curves={m.name: m.curve for m in models},
        choices={m.name: m.choice for m in models if m.choice is not None},
        replicates=replicate_store)


def _boot_diff(values, conf):
    v = np.asarray(values, dtype=np.float64)
    if v.size == 0 or not np.isfinite(v).any():
        return None, None, None
    lo, hi = percentile_interval(v, conf)
    return lo, hi, float(np.nanstd(v, ddof=1)) if np.isfinite(v).sum() > 1 else np.nan


def _pair(models, j, point_sets, fixed_kinds, delong, reps, conf, q, rho, n_total, y, w,
          mcnemar_ok, resolved, own, store) -> PairComparison:
    ref, cand = models[0], models[j]
    rn, cn = ref.name, cand.name
    boot_method = f"paired bootstrap, {conf:g} percentile interval"
    key = cn
    store[key] = {}
    # ---------------------------------------------------------------- AUC and AP
    auc_d = None if delong is None else delong.difference(0, j, conf)
    a_ref, a_cand = ref.curve.roc_auc, cand.curve.roc_auc
    if auc_d is not None:
        auc_diff = Difference("roc_auc", "ROC AUC", a_ref, a_cand, a_cand - a_ref, auc_d.low, auc_d.high,
                              auc_d.method + (" (degenerate: zero variance)" if auc_d.degenerate
                                              else ""), unit="AUC", se=auc_d.se,
                              p_value=auc_d.p_value)
    else:
        auc_diff = None  # the bootstrap's, below
    auc_boot = None
    ap_ref, ap_cand = _average_precision(ref.curve), _average_precision(cand.curve)
    lo = hi = se = None
    if reps is not None:
        dv = reps.auc[:, j] - reps.auc[:, 0]
        store[key]["roc_auc"] = dv
        blo, bhi, bse = _boot_diff(dv, conf)
        auc_boot = Difference("roc_auc", "ROC AUC", a_ref, a_cand, a_cand - a_ref, blo, bhi,
                              boot_method, unit="AUC", se=bse)
        dv = reps.ap[:, j] - reps.ap[:, 0]
        store[key]["average_precision"] = dv
        lo, hi, se = _boot_diff(dv, conf)
    ap_diff = Difference("average_precision", "Average precision", ap_ref, ap_cand,
                         ap_cand - ap_ref, lo, hi, boot_method, se=se)
    if auc_diff is None:
        auc_diff = auc_boot if auc_boot is not None else Difference(
            "roc_auc", "ROC AUC", a_ref, a_cand, a_cand - a_ref, None, None, boot_method, unit="AUC")

    # ---------------------------------------------------------------- point sets
    at: dict[str, dict[str, Difference]] = {}
    disagreement: dict[str, Disagreement] = {}
    ps = point_sets["workload"]
    pr, pc = ps.points[rn], ps.points[cn]
    per = 1000.0 / (q * n_total)
    d = {}
    lo = hi = se = None
    lo2 = hi2 = se2 = None
    if reps is not None:
        dtp = reps.tp_w[:, j] - reps.tp_w[:, 0]
        rec = dtp / reps.P
        flag_den = q * (reps.P + reps.N)
        p1000 = 1000.0 * dtp / flag_den
        store[key]["workload_recall"] = rec
        store[key]["workload_per_1000"] = p1000
        lo, hi, se = _boot_diff(rec, conf)
        lo2, hi2, se2 = _boot_diff(p1000, conf)
    d["recall"] = Difference("recall", "Recall at the same workload", pr.recall, pc.recall,
                             pc.recall - pr.recall, lo, hi, boot_method, se=se)
    d["events_per_1000_flagged"] = Difference(
        "events_per_1000_flagged", "Events caught per 1,000 flagged at the same workload",
        pr.tp * per, pc.tp * per, (pc.tp - pr.tp) * per, lo2, hi2, boot_method,
        unit="per 1,000 flagged", se=se2)
    d["flag_rate"] = Difference("flag_rate", "Actual flag rate at the workload", pr.flag_rate,
                                pc.flag_rate, pc.flag_rate - pr.flag_rate, None, None,
                                "exact (ties can make flag rates differ)", better="none")
    at["workload"] = d
    disagreement["workload"] = _disagreement("workload", ref, cand, pr.index, pc.index, y, w,
                                             mcnemar_ok)
    if "recall" in point_sets:
        ps = point_sets["recall"]
        pr, pc = ps.points[rn], ps.points[cn]
        lo = hi = se = None
        if reps is not None:
            dv = reps.prec_r[:, j] - reps.prec_r[:, 0]
            store[key]["recall_precision"] = dv
            lo, hi, se = _boot_diff(dv, conf)
        at["recall"] = {
            "precision": Difference("precision", "Precision at the same recall", pr.precision,
                                    pc.precision, pc.precision - pr.precision, lo, hi,
                                    boot_method, se=se),
            "actual_recall": Difference("actual_recall", "Actual recall at the target", pr.recall,
                                        pc.recall, pc.recall - pr.recall, None, None,
                                        "exact (ties can make recalls differ)", better="none")}
        disagreement["recall"] = _disagreement("recall", ref, cand, pr.index, pc.index, y, w,
                                               mcnemar_ok)
    for ci, kind in enumerate(fixed_kinds):
        ps = point_sets[kind]
        pr, pc = ps.points.get(rn), ps.points.get(cn)
        if pr is None or pc is None:
            continue
        d = {}
        bt = None
        if reps is not None:
            bt = {}
            with np.errstate(invalid="ignore", divide="ignore"):
                P_, N_ = reps.P, reps.N
                tp0, fp0 = reps.tp[:, 0, ci], reps.fp[:, 0, ci]
                tp1, fp1 = reps.tp[:, j, ci], reps.fp[:, j, ci]
                bt["recall"] = tp1 / P_ - tp0 / P_
                bt["precision"] = tp1 / (tp1 + fp1) - tp0 / (tp0 + fp0)
                bt["flag_rate"] = ((tp1 + fp1) - (tp0 + fp0)) / (P_ + N_)
                bt["accuracy"] = ((tp1 - fp1) - (tp0 - fp0)) / (P_ + N_)
                if kind == "policy" and resolved is not None and resolved.costs_given:
                    if resolved.false_negative_column is not None:
                        ms0 = (reps.cost_total - reps.cost_flagged[:, 0]) / P_
                        ms1 = (reps.cost_total - reps.cost_flagged[:, j]) / P_
                    else:
                        ms0 = ms1 = None
                    bt["cost_per_case"] = (_cost(resolved, tp1 / P_, fp1 / N_, ms1)
                                           - _cost(resolved, tp0 / P_, fp0 / N_, ms0))
            for mname, v in bt.items():
                store[key][f"{kind}_{mname}"] = v
        labels = {"recall": "Recall", "precision": "Precision", "flag_rate": "Flag rate",
                  "accuracy": "Accuracy"}
        for mname, lab in labels.items():
            lo = hi = se = None
            if bt is not None:
                lo, hi, se = _boot_diff(bt[mname], conf)
            rv, cv = getattr(pr, mname), getattr(pc, mname)
            d[mname] = Difference(mname, f"{lab} ({POINT_SETS[kind]})", rv, cv, cv - rv, lo, hi,
                                  boot_method + ", thresholds fixed", se=se,
                                  better="none" if mname == "flag_rate" else "higher")
        if kind == "policy" and resolved is not None and resolved.costs_given:
            lo = hi = se = None
            if bt is not None:
                lo, hi, se = _boot_diff(bt["cost_per_case"], conf)
            d["cost_per_case"] = Difference(
                "cost_per_case", f"Expected cost per case at prevalence {resolved.prevalence:.4g}",
                pr.cost_per_case, pc.cost_per_case, pc.cost_per_case - pr.cost_per_case, lo, hi,
                boot_method + ", thresholds fixed", unit=resolved.unit, better="lower", se=se)
        at[kind] = d
        disagreement[kind] = _disagreement(kind, ref, cand, pr.index, pc.index, y, w, mcnemar_ok)

    # ---------------------------------------------------------------- accuracy trap
    po = point_sets[own].points
    trap, trap_text = False, None
    a_p, b_p = po.get(rn), po.get(cn)
    if a_p is not None and b_p is not None:
        hi_m, lo_m = (b_p, a_p) if b_p.accuracy > a_p.accuracy else (a_p, b_p)
        tol = _RTOL * max(abs(hi_m.accuracy), 1e-300)
        if hi_m.accuracy - lo_m.accuracy > tol and hi_m.recall < lo_m.recall - _RTOL:
            trap = True
            fewer = "flags fewer cases" if hi_m.flag_rate < lo_m.flag_rate else "flags as many cases or more"
            trap_text = (f"Accuracy trap: '{hi_m.model}' has the higher accuracy "
                         f"({_pct(hi_m.accuracy, 2)} against {_pct(lo_m.accuracy, 2)}) but {fewer} "
                         f"({_pct(hi_m.flag_rate, 2)} against {_pct(lo_m.flag_rate, 2)}) and catches "
                         f"fewer events (recall {_pct(hi_m.recall)} against {_pct(lo_m.recall)}). "
                         f"On a rare event accuracy rewards flagging less: flagging no one scores an "
                         f"accuracy of {_pct(1.0 - ref.curve.prevalence, 2)}. Compare recall at "
                         "the same workload instead.")

    verdict, text = _verdict(rn, cn, auc_diff, auc_d, ap_diff, at, point_sets, disagreement, own,
                             q, rho, resolved, trap_text, conf)
    return PairComparison(reference=rn, candidate=cn, roc_auc=auc_d, roc_auc_difference=auc_diff,
                          roc_auc_bootstrap=auc_boot, average_precision=ap_diff, at=at, disagreement=disagreement,
                          accuracy_trap=trap, accuracy_trap_text=trap_text, verdict=verdict,
                          verdict_text=text)


def _verdict(rn, cn, auc_diff, auc_d, ap_diff, at, point_sets, disagreement, own, q, rho,
             resolved, trap_text, conf):
    lines = []
    level = f"{100 * conf:g} %"

    def ci(d: Difference, fmt, suffix="") -> str:
        if d.low is None or d.high is None or not (np.isfinite(d.low) and np.isfinite(d.high)):
            return "no interval: the paired bootstrap was not run"
        return f"{level} interval {fmt(d.low)} to {fmt(d.high)}{suffix}"

    w = at["workload"]
    p1000 = w["events_per_1000_flagged"]
    rec = w["recall"]
    # headline: the same workload when its interval exists, else the ranking (ROC AUC)
    settled_w = p1000.settled
    settled_a = auc_diff.settled
    if settled_w in ("candidate", "reference") and settled_a in ("candidate", "reference") \
            and settled_w != settled_a:
        verdict, basis = "mixed", ("events caught at the same workload and ROC AUC point in "
                                   "opposite directions")
    elif settled_w != "no interval":
        verdict = {"candidate": "better", "reference": "worse"}.get(settled_w, "no clear difference")
        basis = "events caught at the same workload"
    else:
        verdict = {"candidate": "better", "reference": "worse"}.get(settled_a, "no clear difference")
        basis = "ROC AUC only; the paired bootstrap was not run"
    head = {"better": f"'{cn}' does better than '{rn}'",
            "worse": f"'{cn}' does worse than '{rn}'",
            "no clear difference": f"no clear difference between '{cn}' and '{rn}'",
            "mixed": f"mixed evidence for '{cn}' against '{rn}'"}[verdict]
    lines.append(f"Verdict: {head} ({basis}).")
    diff = p1000.difference
    if diff == 0:
        caught = f"'{cn}' catches as many events as '{rn}'"
    else:
        caught = (f"'{cn}' catches {_per1000(abs(diff))} {'more' if diff > 0 else 'fewer'} events "
                  f"per 1,000 flagged than '{rn}'")
    lines.append(f"At the same workload (flagging {_pct(q, 2)} of cases) {caught} "
                 f"({ci(p1000, _per1000_signed)}); recall {_pct(rec.candidate)} against "
                 f"{_pct(rec.reference)} ({_pts(rec.difference)}).")
    tail = ""
    if auc_d is not None:
        tail = "; DeLong" + ("" if np.isnan(auc_d.p_value) else f", p = {_num(auc_d.p_value, 2)}")
        if auc_d.degenerate:
            tail += ", zero variance: the two rank every event-non-event pair alike"
    lines.append(f"ROC AUC {auc_diff.candidate:.3f} against {auc_diff.reference:.3f}: difference "
                 f"{auc_diff.difference:+.3f} ({ci(auc_diff, _auc_fmt)}{tail}).")
    lines.append(f"Average precision {ap_diff.candidate:.3f} against {ap_diff.reference:.3f}: "
                 f"difference {ap_diff.difference:+.3f} ({ci(ap_diff, _auc_fmt)}).")
    if "recall" in at:
        pd_ = at["recall"]["precision"]
        lines.append(f"At the same recall ({_pct(rho)}) precision is {_pct(pd_.candidate)} against "
                     f"{_pct(pd_.reference)} ({_pts(pd_.difference)}; "
                     f"{ci(pd_, _pts_bare, ' points')}).")
    if "policy" in point_sets:
        pts = point_sets["policy"].points
        if pts.get(rn) is None or pts.get(cn) is None:
            none = [nm for nm in (rn, cn) if pts.get(nm) is None]
            lines.append("Under the policy no threshold of " + " or ".join(f"'{x}'" for x in none)
                         + " meets every rule, so the two cannot be compared at their own points.")
        elif "cost_per_case" in at.get("policy", {}):
            cd = at["policy"]["cost_per_case"]
            lines.append(f"Under the same policy, each at its own threshold, expected cost is "
                         f"{_num(cd.candidate)} against {_num(cd.reference)} {resolved.unit} per "
                         f"case (difference {cd.difference:+.4g}; "
                         f"{ci(cd, lambda x: f'{x:+.4g}')}).")
    dis = disagreement.get(own)
    if dis is not None:
        lines.append(_OWN_WORDS[own] + ": " + dis.text)
    if trap_text:
        lines.append(trap_text)
    return verdict, " ".join(lines)


_OWN_WORDS = {"workload": "At the same workload", "policy": "At each score's own point under the policy",
              "thresholds": "At each score's given threshold"}


def _pts_bare(x):
    if x is None or not np.isfinite(x):
        return "undefined"
    return f"{100 * x:+.1f}"


def _per1000_signed(x):
    if x is None or not np.isfinite(x):
        return "undefined"
    return f"{x:+,.0f}" if abs(x) >= 10 else f"{x:+.1f}"


def _auc_fmt(x):
    return f"{x:+.3f}"


def compare_dataset(dataset: Dataset, other_scores: dict, *, higher_is_riskier=True,
                    name: str | None = None, **kwargs) -> Comparison:
    """Compare a Dataset's own score (the reference) with other score columns on its rows.

    ``other_scores``: name -> array (n,) on the dataset's rows, in row order;
    ``higher_is_riskier``: a bool or dict for the other scores (the
    reference keeps the dataset's direction); ``name``: the reference's name
    (default: the dataset's score column). Other keyword arguments go to
    :func:`compare_scores`.
    """
    if not isinstance(dataset, Dataset) or dataset.kind != "rows":
        raise InputError("dataset", "must be a row Dataset (a count table holds one score only)")
    ref = name if name is not None else dataset.mapping.score
    others = {str(k): v for k, v in other_scores.items()}
    if not others:
        raise InputError("other_scores", "name at least one other score column to compare")
    if ref in others:
        raise InputError("other_scores", f"{ref!r} is the dataset's own score; name the others")
    dirs = _directions(list(others), higher_is_riskier)
    dirs[ref] = dataset.higher_is_riskier
    scores = {ref: dataset.y_score, **others}
    return compare_scores(dataset.y_true, scores, higher_is_riskier=dirs, dataset=dataset,
                          reference=ref, **kwargs)


def compare_mapped(dataset: Dataset, **kwargs) -> Comparison:
    """Compare a Dataset's own score with the extra score columns its mapping holds.

    The reference is the mapping's ``score``; the candidates are
    ``mapping.extra_scores`` (in order) with the directions
    ``mapping.extra_lower_is_riskier`` gives them. The same call serves the
    command line (``fulcrum compare``), the Compare page and the memo's
    comparison section. Keyword arguments go to :func:`compare_scores`.

    Raises
    ------
    InputError
        When the dataset has no extra score (one score cannot be compared).
    """
    if not isinstance(dataset, Dataset) or dataset.kind != "rows":
        raise InputError("dataset", "must be a row Dataset (a count table holds one score only)")
    if not dataset.extra_scores:
        raise InputError("extra_scores", "only one score is mapped; map a second score column on "
                         "the same rows (the candidate) to compare it with "
                         f"'{dataset.mapping.score}'")
    return compare_dataset(dataset, dataset.extra_scores,
                           higher_is_riskier=dataset.extra_higher_is_riskier, **kwargs)
