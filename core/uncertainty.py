"""How sure are we: intervals at the operating point, and the Evidence in one call.

At any threshold every number carries an interval, and every interval names
its method:

* **Analytic** (:func:`point_intervals`): recall, specificity, precision,
  NPV and flag rate as binomial proportions with the Wilson score interval
  (default) or the Clopper-Pearson interval (:mod:`core.intervals`); PPV,
  NPV and flag rate at a deployment prevalence pi with the adjusted logit
  interval of Mercaldo, Lau & Zhou (2007) and the delta-method flag-rate
  interval (pi taken as known).
* **Bootstrap** (:func:`bootstrap_intervals`, :func:`curve_intervals`):
  percentile intervals from the exact cell bootstrap (:mod:`core.bootstrap`)
  for the same metrics and for ROC AUC, average precision, expected cost and
  flagged cases per period.

Weights. Frequency weights (a row stands for w identical cases) use the
weighted counts as they are. Sampling weights use Kish's effective sample
size ``(sum w)^2 / sum w^2`` of each interval's own denominator -- events for
recall, non-events for specificity, flagged cases for precision, unflagged
cases for NPV, all cases for the flag rate -- as the number of trials, the
weighted proportion times it as the successes; the bootstrap resamples the
rows with their weights (see :mod:`core.bootstrap`).

Design. ``"cohort"`` (default): the cases were sampled together, so the
validation prevalence is itself uncertain: precision, NPV and flag rate at
the validation mix are binomial proportions, and the bootstrap resamples all
cases together. ``"case-control"``: events and non-events were sampled
separately, so the validation prevalence is fixed by design and carries no
information about deployment: precision, NPV and flag rate are given at a
prevalence taken as known (the deployment prevalence, or the sample
prevalence if none is given, said so) with the logit / delta-method
intervals, and the bootstrap resamples within each class.

Few events. Below 100 events (Collins et al., Stat Med 2016) intervals are
wide and a chosen threshold may not transfer: :func:`few_events_statement`
says so and gives the number of events a recall interval of +/-0.05 would
need, from the Wilson width at the observed recall
(:func:`events_for_recall_half_width`).

:func:`evidence` runs everything of the Evidence page and the record in one
bootstrap pass: analytic and bootstrap intervals at the point, AUC and AP
intervals, PR and ROC bands, threshold stability, cross-fitting and
Harrell's correction, and the statements about design, weights and events.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field, fields

import numpy as np

from core import intervals as _iv
from core.bootstrap import (
    DEFAULT_FPR_GRID,
    DEFAULT_RECALL_GRID,
    DEFAULT_REPLICATES,
    DESIGNS,
    BootstrapResult,
    _check_design,
    bootstrap,
    event_cells,
    percentile_interval,
)
from core.cautions import FEW_EVENTS
from core.clusters import cluster_bootstrap, cluster_statement, uses_cluster_bootstrap
from core.errors import InputError

__all__ = [
    "DESIGNS",
    "INTERVAL_METHODS",
    "FEW_EVENTS_LIMIT",
    "Interval",
    "point_intervals",
    "bootstrap_intervals",
    "curve_intervals",
    "wilson_half_width",
    "events_for_recall_half_width",
    "few_events_statement",
    "design_statement",
    "weights_statement",
    "Evidence",
    "evidence",
]

INTERVAL_METHODS = ("wilson", "clopper_pearson")

#: Below this many events the app and memo say that numbers are shaky (Collins et al. 2016).
FEW_EVENTS_LIMIT = 100

_LABELS = {
    "recall": "Recall (sensitivity)",
    "specificity": "Specificity",
    "precision": "Precision (PPV)",
    "npv": "NPV",
    "flag_rate": "Flag rate",
    "flagged_per_period": "Flagged per period",
    "cost": "Expected cost per case",
    "roc_auc": "ROC AUC",
    "average_precision": "Average precision",
}

BOOTSTRAP_METHOD = "bootstrap percentile interval (exact cell bootstrap)"


def _method_name(result) -> str:
    """The bootstrap's own name (the cluster bootstrap names itself)."""
    return getattr(result, "method_name", BOOTSTRAP_METHOD)


@dataclass(frozen=True)
class Interval:
    """One number with its interval and the name of the method that gave it.

    ``basis`` says what the number is judged on: ``"validation"`` (the
    validation cases as sampled) or ``"prevalence 0.02"`` (at that
    prevalence, taken as known). ``successes`` / ``trials`` are the
    (effective) counts an analytic interval used.
    """

    metric: str
    label: str
    estimate: float
    low: float
    high: float
    confidence: float
    method: str
    method_name: str
    basis: str
    successes: float | None = None
    trials: float | None = None
    note: str | None = None

    def to_dict(self) -> dict:
        from core.choose import json_safe

        return {f.name: json_safe(getattr(self, f.name)) for f in fields(self)}


# --------------------------------------------------------------------------- analytic

def _proportion(method, x, n, confidence):
    if method == "wilson":
        return _iv.wilson_interval(x, n, confidence)
    return _iv.clopper_pearson_interval(x, n, confidence)


def _check_method(method):
    if method not in INTERVAL_METHODS:
        raise InputError("method", f"must be one of {', '.join(INTERVAL_METHODS)}, got {method!r}")
    return method


def _curve_and_kind(data, weight_kind):
    from core.dataset import Dataset

    if isinstance(data, Dataset):
        c = data.curve()
        wk = data.weight_kind if data.kind == "rows" else (
            "sampling" if data.events_sq is not None else ("frequency" if c.weighted else None))
    else:
        c = data
        wk = weight_kind if weight_kind is not None else (
            "sampling" if c.tp_sq is not None else ("frequency" if c.weighted else None))
    return c, wk


def point_intervals(data, threshold: float, *, method: str = "wilson", confidence: float = 0.95,
                    design: str = "cohort", prevalence: float | None = None,
                    cases_per_period: float | None = None,
                    weight_kind: str | None = None) -> list[Interval]:
    """Analytic intervals of every metric at one threshold (see the module docstring).

    Parameters
    ----------
    data : Dataset or Curve
    threshold : float
        Any threshold in score units (its curve point's counts are used).
    method : {"wilson", "clopper_pearson"}
        For the binomial proportions.
    design : {"cohort", "case-control"}
    prevalence : float, optional
        Deployment prevalence: adds PPV, NPV and flag rate at pi (and flagged
        per period with ``cases_per_period``).
    weight_kind : {"frequency", "sampling"}, optional
        For a Curve; a Dataset knows its own.

    Returns
    -------
    list of Interval
        Recall and specificity; precision, NPV and flag rate at the
        validation mix (cohort) or at a known prevalence (case-control); and
        the deployment-prevalence values when ``prevalence`` is given.
    """
    _check_method(method)
    _check_design(design)
    c, wk = _curve_and_kind(data, weight_kind)
    k = c.index_at(threshold)
    tp, fp = float(c.tp[k]), float(c.fp[k])
    P, N = c.n_events, c.n_nonevents
    fn, tn = P - tp, N - fp
    sampling = wk == "sampling" and c.tp_sq is not None

    def eff(w, w2):
        """Kish's effective size of a denominator (sampling weights), else the weight itself."""
        if not sampling:
            return w
        return float(_iv.effective_size_from_sums(w, w2))

    if sampling:
        qp, qn = float(c.tp_sq[-1]), float(c.fp_sq[-1])
        qtp, qfp = float(c.tp_sq[k]), float(c.fp_sq[k])
        n_ev, n_ne = eff(P, qp), eff(N, qn)
        n_flag, n_unflag = eff(tp + fp, qtp + qfp), eff(fn + tn, (qp - qtp) + (qn - qfp))
        n_all = eff(P + N, qp + qn)
        size_note = "Kish's effective sample size of the denominator (sampling weights)"
    else:
        n_ev, n_ne, n_flag, n_unflag, n_all = P, N, tp + fp, fn + tn, P + N
        size_note = "frequency weights used as counts" if wk == "frequency" else None
    mname = _iv.METHOD_NAMES[method]
    out: list[Interval] = []

    def binom(metric, num, den, n_eff):
        with np.errstate(invalid="ignore", divide="ignore"):
            p = num / den if den > 0 else math.nan
        if den > 0 and n_eff > 0 and np.isfinite(n_eff):
            lo, hi = _proportion(method, p * n_eff, n_eff, confidence)
        else:
            lo = hi = math.nan
        out.append(Interval(metric=metric, label=_LABELS[metric], estimate=float(p), low=float(lo),
                            high=float(hi), confidence=float(confidence), method=method,
                            method_name=mname, basis="validation",
                            successes=None if not den > 0 else float(p * n_eff),
                            trials=float(n_eff), note=size_note))

    binom("recall", tp, P, n_ev)
    binom("specificity", tn, N, n_ne)

    def at_prevalence(pi, basis, note):
        dep = dict(n_events=n_ev, n_nonevents=n_ne)
        with np.errstate(invalid="ignore", divide="ignore"):
            # numpy floats, so 0/0 (flag none, flag all) is NaN rather than an exception
            tpr, fpr = np.float64(tp) / np.float64(P), np.float64(fp) / np.float64(N)
            ppv = pi * tpr / (pi * tpr + (1 - pi) * fpr)
            npv = (1 - pi) * (1 - fpr) / ((1 - pi) * (1 - fpr) + pi * (1 - tpr))
            fr = pi * tpr + (1 - pi) * fpr
        lo, hi = _iv.ppv_logit_interval(tp, fn, fp, tn, pi, confidence, **dep)
        if tp + fp <= 0:
            lo = hi = math.nan
        out.append(Interval("precision", _LABELS["precision"], float(ppv), float(lo), float(hi),
                            float(confidence), "ppv_logit", _iv.METHOD_NAMES["ppv_logit"], basis,
                            note=note))
        lo, hi = _iv.npv_logit_interval(tp, fn, fp, tn, pi, confidence, **dep)
        if fn + tn <= 0:
            lo = hi = math.nan
        out.append(Interval("npv", _LABELS["npv"], float(npv), float(lo), float(hi),
                            float(confidence), "npv_logit", _iv.METHOD_NAMES["npv_logit"], basis,
                            note=note))
        lo, hi = _iv.flag_rate_interval(tp, fn, fp, tn, pi, confidence, **dep)
        out.append(Interval("flag_rate", _LABELS["flag_rate"], float(fr), float(lo), float(hi),
                            float(confidence), "flag_rate", _iv.METHOD_NAMES["flag_rate"], basis,
                            note=note))
        if cases_per_period is not None:
            cp = float(cases_per_period)
            out.append(Interval("flagged_per_period", _LABELS["flagged_per_period"], float(fr) * cp,
                                float(lo) * cp, float(hi) * cp, float(confidence), "flag_rate",
                                _iv.METHOD_NAMES["flag_rate"] + " x cases per period", basis,
                                note=note))

    if design == "cohort":
        binom("precision", tp, tp + fp, n_flag)
        binom("npv", tn, fn + tn, n_unflag)
        binom("flag_rate", tp + fp, P + N, n_all)
    else:
        pv = c.prevalence
        pi = pv if prevalence is None else float(prevalence)
        basis = f"prevalence {pi:.4g}"
        note = ("case-control design: the sample prevalence is fixed by design and taken as known"
                if prevalence is None else "case-control design: at the deployment prevalence")
        at_prevalence(pi, basis, note)
        return out
    if prevalence is not None:
        at_prevalence(float(prevalence), f"prevalence {float(prevalence):.4g}",
                      "deployment prevalence taken as known (label shift)")
    return out


# --------------------------------------------------------------------------- bootstrap

def bootstrap_intervals(result: BootstrapResult, threshold: float, *, confidence: float = 0.95,
                        prevalence: float | None = None) -> list[Interval]:
    """Percentile intervals at one of the thresholds of a :class:`~core.bootstrap.BootstrapResult`.

    Recall, specificity, precision, NPV and flag rate at the validation mix
    of each replicate; precision, NPV and flag rate at ``prevalence`` (or at
    the prevalence the pass used); expected cost and flagged per period when
    the pass computed them. Estimates are the full-data values.
    """
    t = float(threshold)
    if t not in result.at:
        raise InputError("threshold", f"{threshold!r} was not among the bootstrap's thresholds")
    c = result.cells.curve
    pt = c.at(t)
    desc = result.describe()
    out = []

    def add(metric, values, estimate, basis, note=None):
        lo, hi = percentile_interval(values, confidence)
        out.append(Interval(metric, _LABELS[metric], float(estimate), float(lo), float(hi),
                            float(confidence), "bootstrap", _method_name(result), basis,
                            note=desc if note is None else f"{note}; {desc}"))

    for m in ("recall", "specificity", "precision", "npv", "flag_rate"):
        add(m, result.metric_at(t, m, prevalence=None), pt.metrics[m], "validation")
    pi = prevalence if prevalence is not None else result.prevalence
    if pi is not None:
        dep = c.at(t, prevalence=float(pi)).deployment
        for m in ("precision", "npv", "flag_rate"):
            add(m, result.metric_at(t, m, prevalence=float(pi)), dep[m],
                f"prevalence {float(pi):.4g}")
    d = result.at[t]
    pi_est = float(pi) if pi is not None else c.prevalence
    if "cost" in d:
        add("cost", d["cost"], _full_data_cost(result, t, pi_est), f"prevalence {pi_est:.4g}")
    if "flagged_per_period" in d:
        fr = c.at(t, prevalence=pi_est).deployment["flag_rate"]
        per = result.cases_per_period
        add("flagged_per_period", d["flagged_per_period"], fr * per if per is not None else np.nan,
            f"prevalence {pi_est:.4g}")
    return out


def _full_data_cost(result, t, pi):
    costs = result.costs
    c = result.cells.curve
    k = c.index_at(t)
    tpr, fpr = c.tp[k] / c.n_events, c.fp[k] / c.n_nonevents
    if costs.get("false_negative") is None:
        miss = (c.event_cost_total - c.event_cost_flagged[k]) / c.n_events
    else:
        miss = float(costs["false_negative"]) * (1 - tpr)
    return float(pi * miss + float(costs["false_positive"]) * (1 - pi) * fpr
                 + float(costs.get("true_positive", 0.0)) * pi * tpr
                 + float(costs.get("true_negative", 0.0)) * (1 - pi) * (1 - fpr))


def curve_intervals(result: BootstrapResult, *, confidence: float = 0.95) -> list[Interval]:
    """Percentile intervals of ROC AUC and average precision."""
    c = result.cells.curve
    out = []
    for m, vals, est in (("roc_auc", result.roc_auc, c.roc_auc),
                         ("average_precision", result.average_precision, c.average_precision)):
        lo, hi = percentile_interval(vals, confidence)
        out.append(Interval(m, _LABELS[m], float(est), float(lo), float(hi), float(confidence),
                            "bootstrap", _method_name(result), "validation", note=result.describe()))
    return out


# --------------------------------------------------------------------------- few events

def wilson_half_width(recall: float, n_events: float, confidence: float = 0.95) -> float:
    """Half the width of the Wilson interval for ``recall`` measured on ``n_events`` events."""
    lo, hi = _iv.wilson_interval(float(recall) * float(n_events), float(n_events), confidence)
    return (hi - lo) / 2.0


def events_for_recall_half_width(recall: float, half_width: float = 0.05,
                                 confidence: float = 0.95) -> int:
    """Fewest events for which the Wilson interval of ``recall`` is at most +/- ``half_width``.

    Binary search on n of :func:`wilson_half_width` (which falls as n grows
    at fixed recall). At recall 0.5 and 95 % this is the familiar
    ``z^2 / (4 h^2) - z^2`` = 381 events for h = 0.05; at recall 0.8, 243.
    """
    r = float(recall)
    h = float(half_width)
    if not (0.0 <= r <= 1.0) or not np.isfinite(r):
        raise InputError("recall", f"must lie in [0, 1], got {recall!r}")
    if not 0.0 < h < 0.5:
        raise InputError("half_width", f"must lie strictly between 0 and 0.5, got {half_width!r}")
    lo, hi = 1, 1
    while wilson_half_width(r, hi, confidence) > h:
        hi *= 2
        if hi > 2 ** 40:  # pragma: no cover - unreachable for h > 0
            raise InputError("half_width", "is too small")
    while lo < hi:
        mid = (lo + hi) // 2
        if wilson_half_width(r, mid, confidence) <= h:
            hi = mid
        else:
            lo = mid + 1
    return int(lo)


def few_events_statement(n_events: float, recall: float | None = None, *, half_width: float = 0.05,
                         confidence: float = 0.95) -> str | None:
    """The few-events caution (None at 100 events or more), with the events a
    +/- ``half_width`` recall interval would need at the observed ``recall``."""
    if n_events >= FEW_EVENTS_LIMIT:
        return None
    r = 0.5 if recall is None or not np.isfinite(recall) else float(recall)
    need = events_for_recall_half_width(r, half_width, confidence)
    now = wilson_half_width(r, n_events, confidence) if n_events > 0 else math.nan
    observed = recall is not None and np.isfinite(recall)
    where = "at the observed recall" if observed else "at recall 0.5"
    return (f"{FEW_EVENTS} With {n_events:,.0f} events the {confidence:.0%} Wilson interval for "
            f"recall {where} ({r:.1%}) is about +/-{now:.3f}; +/-{half_width:g} would need about "
            f"{need:,} events.")


def design_statement(design: str) -> str:
    """One sentence on the declared sampling design (for the record and memo)."""
    _check_design(design)
    if design == "cohort":
        return ("Design: cohort -- the validation cases were sampled together, so the prevalence "
                "is part of the sampling uncertainty; the bootstrap resamples all cases together.")
    return ("Design: case-control -- events and non-events were sampled separately; the sample "
            "prevalence carries no information, predictive values are given at a prevalence taken "
            "as known, and the bootstrap resamples within each class.")


def weights_statement(weight_kind: str | None, cells=None) -> str:
    """How weights enter the intervals and the bootstrap."""
    if weight_kind is None:
        return "Unweighted: every row is one case."
    if weight_kind == "frequency":
        return ("Frequency weights: each row stands for w identical cases; intervals and the "
                "bootstrap use the weighted counts as they are.")
    how = ("the bootstrap resamples rows with their weights" if cells is None
           or cells.sampling_method == "rows" else
           "the bootstrap carries the sums of squared weights per cell (approximate)")
    return ("Sampling weights: analytic intervals use Kish's effective sample size of each "
            f"denominator; {how}.")


# --------------------------------------------------------------------------- evidence

@dataclass(frozen=True, eq=False)
class Evidence:
    """Everything of the Evidence page and the record for one data set and policy.

    ``threshold_origin`` is "derived" (chosen by the policy) or
    "pre-specified". ``to_dict()`` is JSON-safe (no rows, no NaN).
    """

    threshold: float | None
    threshold_origin: str
    design: str
    confidence: float
    method: str
    n_replicates: int
    seed: int
    n_events: float
    analytic: tuple[Interval, ...]
    bootstrap: tuple[Interval, ...]
    curve: tuple[Interval, ...]
    bands: dict
    stability: object | None
    optimism: object | None
    few_events: str | None
    events_for_recall_0_05: int | None
    statements: tuple[str, ...]
    result: BootstrapResult = field(repr=False, default=None)

    def to_dict(self) -> dict:
        from core.choose import json_safe

        return json_safe({
            "threshold": self.threshold, "threshold_origin": self.threshold_origin,
            "design": self.design, "confidence": self.confidence, "interval_method": self.method,
            "n_replicates": self.n_replicates, "seed": self.seed, "n_events": self.n_events,
            "analytic": [i.to_dict() for i in self.analytic],
            "bootstrap": [i.to_dict() for i in self.bootstrap],
            "curve": [i.to_dict() for i in self.curve],
            "bands": self.bands,
            "stability": None if self.stability is None else self.stability.to_dict(),
            "optimism": None if self.optimism is None else self.optimism.to_dict(),
            "few_events": self.few_events, "events_for_recall_0_05": self.events_for_recall_0_05,
            "statements": list(self.statements),
        })


def evidence(data, policy, *, threshold: float | None = None,
             n_replicates: int = DEFAULT_REPLICATES, seed: int = 0, design: str = "cohort",
             method: str = "wilson", confidence: float = 0.95,
             k: int = 5, recall_grid=DEFAULT_RECALL_GRID, fpr_grid=DEFAULT_FPR_GRID,
             chunk: int | None = None, progress=None, sampling_weights: str = "rows",
             n_jobs: int = 1) -> Evidence:
    """The whole Evidence for ``data`` under ``policy`` in one bootstrap pass.

    ``threshold=None`` takes the policy's recommended point (derived from
    these data); a number is a pre-specified threshold. The same arguments
    give the same result in the app and on the command line (replicate r
    always uses ``default_rng([seed, r])``, whatever ``chunk`` and ``n_jobs``).
    With sampling weights and rows, ``sampling_weights="rows"`` resamples every
    row (exact, O(rows) per replicate); ``"moments"`` is fast and approximate
    (see :mod:`core.bootstrap`).
    """
    from core.choose import choose, evaluate
    from core.optimism import QUANTITIES, Optimism, _harrell_from, _values, cross_fit
    from core.policy import resolve_policy
    from core.stability import ReplicateChooser, StabilityCollector, _summarise, data_choice_column

    _check_method(method)
    _check_design(design)
    rp = resolve_policy(policy, data)
    if threshold is None:
        ch = choose(data, policy)
        origin = "derived"
    else:
        ch = evaluate(data, policy, float(threshold))
        origin = "pre-specified"
    t = None if ch.point is None else float(ch.point.threshold)
    ths = () if t is None else (t,)
    cells = event_cells(data, thresholds=ths, sampling_weights=sampling_weights)
    curve = cells.curve
    pi_fixed = rp.prevalence if rp.sources.get("deployment.prevalence") == "file" else None
    costs = None
    if rp.costs_given:
        costs = {"false_positive": rp.false_positive, "false_negative": rp.false_negative,
                 "true_positive": rp.true_positive, "true_negative": rp.true_negative}
    chooser = ReplicateChooser(cells, policy, data)
    # stability is about the policy's own choice, also beside a pre-specified threshold
    col0 = data_choice_column(cells, ch if origin == "derived" else choose(data, policy))
    coll = StabilityCollector(chooser, n_replicates)
    common = dict(n_replicates=n_replicates, seed=seed, thresholds=ths, prevalence=pi_fixed,
                  costs=costs, cases_per_period=rp.cases_per_period, recall_grid=recall_grid,
                  fpr_grid=fpr_grid, chunk=chunk, progress=progress, collectors=(coll,), cells=cells)
    if uses_cluster_bootstrap(data, design):
        # repeated cases (a cluster column): every interval and band resamples whole clusters
        res = cluster_bootstrap(data, **common)
    else:
        res = bootstrap(data, design=design, n_jobs=n_jobs, **common)
    stab = _summarise(coll, cells, col0, seed=seed, design=design, notes=chooser.notes)
    analytic: list[Interval] = []
    boot: list[Interval] = []
    if t is not None:
        analytic = point_intervals(data, t, method=method, confidence=confidence, design=design,
                                   prevalence=rp.prevalence if rp.prevalence_shifted else None,
                                   cases_per_period=rp.cases_per_period)
        boot = bootstrap_intervals(res, t, confidence=confidence)
    bands = {}
    for which in ("pr", "roc"):
        grid, lo, hi = res.band(which, confidence)
        bands[which] = {"grid": grid, "low": lo, "high": hi,
                        "x": "recall" if which == "pr" else "fpr",
                        "y": "precision" if which == "pr" else "tpr"}
    # optimism: apparent, cross-fitted, corrected
    if ch.point is None:
        apparent = {q: np.nan for q in QUANTITIES}
    else:
        p = ch.point
        apparent = _values(p.counts["tp"], p.counts["fp"], p.counts["tp"] + p.counts["fn"],
                           p.counts["fp"] + p.counts["tn"], rp.prevalence, rp,
                           missed_cost=p.missed_cost)
    if origin == "derived":
        hc = _harrell_from(stab, design)
        statement = ("The threshold was derived from these data by the policy, so its apparent "
                     "values are optimistic; the cross-fitted and corrected values estimate how "
                     "the same rule performs on new cases.")
        try:
            cf = cross_fit(data, policy, k=k, seed=seed, cells=cells)
        except InputError as exc:
            cf = None
            if exc.column == "k":
                # fewer events than folds: no fold could hold an event of each kind
                statement += (f" Cross-fitting was not run: {exc.problem}. Only the "
                              "bootstrap-corrected values are given, and with so few events "
                              "even they are rough.")
            elif getattr(data, "kind", None) == "counts":
                # a weighted count table cannot be split into folds; the rest needs no rows
                statement += (f" Cross-fitting was not run ({exc.problem}): a count table of "
                              "weight sums cannot be split into folds case by case, so only the "
                              "bootstrap-corrected values are given; load the rows for "
                              "cross-fitted ones.")
            else:
                raise
    else:
        cf = hc = None
        statement = ("The threshold was pre-specified (fixed before these data were seen): no "
                     "selection was made on these data, so the apparent values are honest "
                     "estimates and need no optimism correction.")
    opt = Optimism(threshold_origin=origin, threshold=t, apparent=apparent, cross_fit=cf,
                   harrell=hc, statement=statement)
    rec = None if ch.point is None else ch.point.validation["recall"]
    few = few_events_statement(curve.n_events, rec, confidence=confidence)
    need = events_for_recall_half_width(rec if rec is not None and np.isfinite(rec) else 0.5,
                                        0.05, confidence)
    statements = [design_statement(design), weights_statement(cells.weight_kind, cells),
                  cluster_statement(data, design), f"Bootstrap: {res.describe()}.", statement]
    statements.extend(stab.notes)
    statements.extend(res.notes)
    return Evidence(threshold=t, threshold_origin=origin, design=design,
                    confidence=float(confidence),
                    method=method, n_replicates=int(n_replicates), seed=int(seed),
                    n_events=float(curve.n_events), analytic=tuple(analytic), bootstrap=tuple(boot),
                    curve=tuple(curve_intervals(res, confidence=confidence)), bands=bands,
                    stability=stab, optimism=opt, few_events=few, events_for_recall_0_05=need,
                    statements=tuple(statements), result=res)
