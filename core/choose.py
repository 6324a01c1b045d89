"""The recommended operating point, derived from the policy, with its evidence.

:func:`choose` searches every point of the exact curve for the best value
of the policy's objective among the points that meet every rule, all judged
at the deployment prevalence pi; :func:`evaluate` reports the same things for
a threshold the user picked. Both return a :class:`Choice`: the point with
its interval of equivalent thresholds, counts and metrics at validation and
at pi (and at the low / high prevalence of a range), expected cost per case
and per period, each rule's verdict (with ``confidence``: its one-sided
bound and the method), which rules bind, alternatives at meaningful
spacings, the "flag none" and "flag all" baselines, the cost-ratio
sensitivity, the decision curve, the cost-derived threshold for calibrated
probabilities, and a plain-words explanation.

Why only event points are searched
----------------------------------
Let point k hold no event of its own (``tp[k] == tp[k-1]``, so
``fp[k] >= fp[k-1]``): point k - 1 flags the same events and no more
non-events. Then at k - 1, at any prevalence,

* recall is equal; specificity, the flag rate and every period's flag count
  are no worse (its flagged cases are a subset);
* precision pi TPR / (pi TPR + (1 - pi) FPR) is no lower, except that with
  no event flagged it is 0 at k and undefined ("flag none"), which meets no
  ``min_precision`` (a rule above 0) either way;
* with ``confidence``: the Wilson lower bounds of recall and specificity
  rise with successes at a fixed size; the adjusted-logit lower bound of
  precision falls strictly in FP at fixed TP (its derivative's sign reduces
  to ``fp tn + (z^2 / 4)(fp + tn) > 0`` after the z^2/2 adjustment); the
  flag-rate upper bound rises with FP (the adjusted rates keep
  ``n0 FPR (1 - FPR) >= z^2 / 4``);
* every objective is no worse: cost with C_FP > C_TN, F-beta, net benefit,
  Youden's J, recall and precision (undefined precision at "flag none"
  ranks as 0, the value of flagging only non-events);

and ties go to fewer flags. So the best feasible point is an event point or
"flag none" (the exhaustive test over all points confirms it).

Rules with a confidence are met only when both the point value and the
one-sided bound clear the limit. Rule comparisons and objective ties use a
relative tolerance of 1e-12 so that float rounding never decides.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field, fields, is_dataclass
from typing import Any

import numpy as np
import pandas as pd

from core import costs as _costs
from core import formatting as _formatting
from core import intervals as _iv
from core.capacity import PeriodFlags
from core.dataset import Dataset
from core.errors import InputError
from core.metrics import confusion_metrics
from core.policy import OBJECTIVE_LABELS, RULE_LABELS, Policy, ResolvedPolicy, resolve_policy

__all__ = ["RuleCheck", "PointReport", "Choice", "choose", "evaluate", "cost_by_threshold", "json_safe"]

_RTOL = _costs.TIE_RTOL

CALIBRATION_WARNING = (
    "The cost-derived threshold holds only if the scores are calibrated probabilities "
    "(a score of 0.2 means a 20 % chance of the event). For uncalibrated scores use the "
    "empirical optimum.")


# --------------------------------------------------------------------------- JSON

def json_safe(obj):
    """Convert to JSON-safe Python: NaN -> None, +/-inf -> "inf"/"-inf", arrays -> lists."""
    if obj is None or isinstance(obj, (bool, str)):
        return obj
    if isinstance(obj, (np.bool_,)):
        return bool(obj)
    if isinstance(obj, (int, np.integer)):
        return int(obj)
    if isinstance(obj, (float, np.floating)):
        x = float(obj)
        if math.isnan(x):
            return None
        if math.isinf(x):
            return "inf" if x > 0 else "-inf"
        return x
    if isinstance(obj, np.datetime64):
        return None if np.isnat(obj) else str(obj)
    if isinstance(obj, pd.Timestamp):
        return obj.isoformat()
    if isinstance(obj, pd.DataFrame):
        return {str(c): json_safe(obj[c].to_numpy()) for c in obj.columns}
    if isinstance(obj, np.ndarray):
        return [json_safe(x) for x in obj.tolist()] if obj.dtype.kind not in "Mm" else \
            [json_safe(x) for x in obj]
    if isinstance(obj, dict):
        return {str(k): json_safe(v) for k, v in obj.items()}
    if isinstance(obj, (list, tuple)):
        return [json_safe(x) for x in obj]
    if hasattr(obj, "to_dict"):
        return json_safe(obj.to_dict())
    if is_dataclass(obj):
        return {f.name: json_safe(getattr(obj, f.name)) for f in fields(obj)}
    raise TypeError(f"cannot convert {type(obj).__name__} to JSON")


# --------------------------------------------------------------------------- results

@dataclass(frozen=True)
class RuleCheck:
    """One rule's verdict at one point.

    ``value`` is the point value at the deployment prevalence; ``bound`` the
    one-sided bound (lower for ``min_*``, upper for ``max_*``) when the policy
    sets a confidence and the method gives one; ``judged`` is what decides
    (the worse of value and bound); ``margin = judged - limit`` for ``min_*``
    rules and ``limit - judged`` for ``max_*`` rules (negative: broken).
    ``binding`` (for the recommended point only) is True when dropping this
    rule alone would move the recommended point.
    """

    name: str
    label: str
    limit: float
    value: float
    bound: float | None
    judged: float
    margin: float
    met: bool
    method: str
    binding: bool | None = None

    def to_dict(self):
        return {f.name: json_safe(getattr(self, f.name)) for f in fields(self)}


@dataclass(frozen=True)
class PointReport:
    """Everything about one operating point (see :class:`Choice`)."""

    label: str
    role: str
    index: int
    threshold: float
    interval_low: float
    interval_high: float
    closed: str
    counts: dict[str, float]
    validation: dict[str, float]
    deployment: dict[str, float]
    prevalence: float
    objective_value: float
    cost_per_case: float | None
    cost_per_period: float | None
    flagged_per_period: float | None
    rules: tuple[RuleCheck, ...]
    meets_rules: bool
    capacity: dict[str, float] | None = None
    scenarios: tuple[dict, ...] = ()
    missed_cost: float | None = None

    @property
    def is_flag_none(self) -> bool:
        return self.index == 0

    def rule(self, name: str) -> RuleCheck:
        for r in self.rules:
            if r.name == name:
                return r
        raise KeyError(name)

    def to_dict(self):
        return {f.name: json_safe(getattr(self, f.name)) for f in fields(self)}


@dataclass(frozen=True)
class Choice:
    """The recommended (or user-set) operating point and its evidence.

    ``origin`` is ``"recommended"`` (from :func:`choose`) or ``"user"``
    (from :func:`evaluate`). When no point meets the rules, ``feasible`` is
    False, ``point`` is None (for ``"recommended"``) and ``infeasible`` says
    which rule cannot be met and the best value any point reaches.
    """

    origin: str
    feasible: bool
    point: PointReport | None
    objective: str
    objective_label: str
    alternatives: tuple[PointReport, ...]
    baselines: dict[str, PointReport]
    infeasible: tuple[str, ...]
    best_reachable: dict[str, dict]
    unconstrained: PointReport | None
    sensitivity: dict[str, Any]
    decision_curve: pd.DataFrame | None
    cost_derived: dict[str, Any] | None
    explanation: str
    warnings: tuple[str, ...]
    resolved: ResolvedPolicy
    data: dict[str, Any] = field(default_factory=dict)

    @property
    def threshold(self) -> float | None:
        return None if self.point is None else self.point.threshold

    def to_dict(self) -> dict:
        """JSON-safe dict: NaN -> None, +/-inf -> "inf"/"-inf"."""
        out = {}
        for f in fields(self):
            v = getattr(self, f.name)
            out[f.name] = json_safe(v)
        return out


# --------------------------------------------------------------------------- analysis

_fmt_pct = _formatting.sentence_pct
_fmt_num = _formatting.sentence_num


class _Analysis:
    """Per-point arrays shared by :func:`choose` and :func:`evaluate`."""

    def __init__(self, data, policy: Policy, *, calibrated=False, weight_kind=None):
        if isinstance(data, Dataset):
            self.ds = data
            self.curve = data.curve()
            wk = data.weight_kind
        elif hasattr(data, "thresholds") and hasattr(data, "event_point_mask"):
            self.ds = None
            self.curve = data
            wk = weight_kind if weight_kind is not None else (
                "sampling" if data.tp_sq is not None else None)
        else:
            raise TypeError(f"expected a Dataset or a Curve, got {type(data).__name__}")
        if weight_kind is not None and self.ds is not None and weight_kind != wk:
            raise InputError("weight_kind", f"{weight_kind!r} differs from the dataset's {wk!r}")
        self.weight_kind = wk
        self.rp = resolve_policy(policy, data)
        self.calibrated = bool(calibrated)
        c = self.curve
        self.n = c.n_points
        self.pi = self.rp.prevalence
        self.tpr = c.tp / c.n_events
        self.fpr = c.fp / c.n_nonevents
        self.cand = np.flatnonzero(c.event_point_mask)
        if wk == "sampling" and c.tp_sq is not None:
            self.n1 = float(_iv.effective_size_from_sums(c.n_events, c.tp_sq[-1]))
            self.n0 = float(_iv.effective_size_from_sums(c.n_nonevents, c.fp_sq[-1]))
            self.size_note = (f" with Kish's effective sizes ({self.n1:,.1f} events, "
                              f"{self.n0:,.1f} non-events)")
        else:
            self.n1, self.n0 = c.n_events, c.n_nonevents
            self.size_note = ""
        self.case_dep = self.rp.case_dependent_costs
        if self.case_dep:
            self.caught_share = c.event_cost_flagged / c.event_cost_total
        self.period_flags = None
        if self.rp.has_score_time:
            ds = self.ds
            self.period_flags = PeriodFlags(
                c, ds.y_score, ds.score_time, period=self.rp.period, y_true=ds.y_true,
                sample_weight=ds.sample_weight, prevalence=self.pi,
                cases_per_period=self.rp.cases_per_period)
        self._cap_cache: dict[float, int] = {}
        self.warnings: list[str] = []
        if c.n_events < 100:
            self.warnings.append(
                f"Only {c.n_events:,.0f} events: every number here is shaky (validation studies "
                "want at least 100 events).")
        self.warnings.append(
            "The threshold chosen on this data looks better here than it will on new cases "
            "(optimism); see the out-of-sample estimates.")
        if self.rp.prevalence_shifted:
            self.warnings.append(
                f"Judged at a deployment prevalence of {_fmt_pct(self.pi, 2)} (validation "
                f"{_fmt_pct(self.rp.validation_prevalence, 2)}): assumes sensitivity and "
                "specificity carry over unchanged (label shift).")

    # ------------------------------------------------------------------ per-point values
    def cost(self, idx, pi):
        """Expected cost per case at points ``idx`` (NaN without costs)."""
        rp = self.rp
        if not rp.costs_given:
            return np.full(np.shape(idx), np.nan)
        tpr, fpr = self.tpr[idx], self.fpr[idx]
        if self.case_dep:
            c = self.curve
            miss = (c.event_cost_total - c.event_cost_flagged[idx]) / c.n_events
        else:
            miss = rp.false_negative * (1.0 - tpr)
        return (pi * miss + rp.false_positive * (1.0 - pi) * fpr
                + rp.true_positive * pi * tpr + rp.true_negative * (1.0 - pi) * (1.0 - fpr))

    def metrics(self, idx, pi):
        c = self.curve
        tp, fp = c.tp[idx], c.fp[idx]
        return confusion_metrics(tp, fp, c.n_events - tp, c.n_nonevents - fp, prevalence=pi,
                                 beta=self.rp.beta)

    def objective(self, idx, pi=None):
        """Objective values to maximise at points ``idx`` (NaN ranks lowest)."""
        pi = self.pi if pi is None else pi
        rp = self.rp
        tpr, fpr = self.tpr[idx], self.fpr[idx]
        tpp, fpp = pi * tpr, (1.0 - pi) * fpr
        kind = rp.objective
        with np.errstate(invalid="ignore", divide="ignore"):
            if kind == "min_cost":
                v = -self.cost(idx, pi)
            elif kind == "max_fbeta":
                b2 = rp.beta ** 2
                v = (1 + b2) * tpp / ((1 + b2) * tpp + b2 * (pi - tpp) + fpp)
            elif kind == "max_net_benefit":
                pt = rp.threshold_probability
                v = tpp - fpp * pt / (1.0 - pt)
            elif kind == "max_youden":
                v = tpr - fpr
            elif kind == "max_recall":
                v = tpr + 0.0
            elif kind == "max_precision":
                v = np.where(tpp + fpp > 0, tpp / (tpp + fpp), 0.0)
            else:  # pragma: no cover - validated in the policy
                raise AssertionError(kind)
        v = np.asarray(v, dtype=np.float64)
        return np.where(np.isnan(v), -np.inf, v)

    def cap_index(self, pi):
        """Largest point within the capacity quantile at prevalence ``pi``."""
        key = float(pi)
        if key not in self._cap_cache:
            self._cap_cache[key] = self.period_flags.largest_index_within(
                self.rp.rules["max_flagged_per_period"], self.rp.capacity_quantile, prevalence=pi)
        return self._cap_cache[key]

    def rule_values(self, idx, pi, *, exact_capacity=True):
        """For each active rule: ``(value, bound, met, method)`` arrays at points ``idx``.

        With a capacity quantile and ``exact_capacity=False`` (the full search)
        the capacity values are NaN and ``met`` comes from the binary search.
        """
        rp = self.rp
        c = self.curve
        idx = np.asarray(idx, dtype=np.int64)
        conf = rp.confidence
        tp, fp = c.tp[idx], c.fp[idx]
        fn, tn = c.n_events - tp, c.n_nonevents - fp
        tpr, fpr = self.tpr[idx], self.fpr[idx]
        tpp, fpp = pi * tpr, (1.0 - pi) * fpr
        out = {}
        for name, lim in rp.rules.items():
            bound = None
            method = "point value"
            lower_rule = name.startswith("min_")
            if name == "min_recall":
                value = tpr
                if conf is not None:
                    bound = _iv.wilson_interval(tpr * self.n1, np.full_like(tpr, self.n1), conf,
                                                sided="lower")[0]
                    method = f"one-sided {conf:g} Wilson lower bound{self.size_note}"
            elif name == "min_specificity":
                value = 1.0 - fpr
                if conf is not None:
                    bound = _iv.wilson_interval((1.0 - fpr) * self.n0, np.full_like(fpr, self.n0),
                                                conf, sided="lower")[0]
                    method = f"one-sided {conf:g} Wilson lower bound{self.size_note}"
            elif name == "min_precision":
                with np.errstate(invalid="ignore", divide="ignore"):
                    value = tpp / (tpp + fpp)
                if conf is not None:
                    bound = _iv.ppv_logit_interval(tp, fn, fp, tn, pi, conf, sided="lower",
                                                   n_events=self.n1, n_nonevents=self.n0)[0]
                    bound = np.where(tp + fp > 0, bound, np.nan)
                    method = (f"one-sided {conf:g} lower bound, adjusted logit interval at prevalence "
                              f"{pi:.4g} (Mercaldo, Lau & Zhou 2007){self.size_note}")
            elif name == "max_flag_rate":
                value = tpp + fpp
                if conf is not None:
                    bound = _iv.flag_rate_interval(tp, fn, fp, tn, pi, conf, sided="upper",
                                                   n_events=self.n1, n_nonevents=self.n0)[1]
                    method = (f"one-sided {conf:g} upper bound, Wald (delta method) on adjusted "
                              f"rates at prevalence {pi:.4g}{self.size_note}")
            elif name == "max_flagged_per_period":
                per = rp.period
                if rp.capacity_quantile is not None:
                    q = rp.capacity_quantile
                    if exact_capacity:
                        value = self.period_flags.quantile(
                            self.period_flags.counts(idx, prevalence=pi), q)
                    else:
                        value = np.full(idx.shape, np.nan)
                    method = (f"empirical {q:g}-quantile of flagged cases per {per} over "
                              f"{self.period_flags.n_periods:,} {per}s (no sampling bound)")
                else:
                    value = (tpp + fpp) * rp.cases_per_period
                    method = f"expected flagged cases per {per} at prevalence {pi:.4g}"
                    if conf is not None:
                        fr_hi = _iv.flag_rate_interval(tp, fn, fp, tn, pi, conf, sided="upper",
                                                       n_events=self.n1, n_nonevents=self.n0)[1]
                        bound = fr_hi * rp.cases_per_period
                        method = (f"one-sided {conf:g} upper bound of the expected flagged cases per "
                                  f"{per} (flag-rate Wald bound on adjusted rates){self.size_note}")
            else:  # pragma: no cover
                raise AssertionError(name)
            value = np.asarray(value, dtype=np.float64)
            slack = _RTOL * abs(lim)
            with np.errstate(invalid="ignore"):
                if lower_rule:
                    met = value >= lim - slack
                    judged = value if bound is None else np.fmin(value, bound)
                    if bound is not None:
                        met = met & (bound >= lim - slack)
                else:
                    met = value <= lim + slack
                    judged = value if bound is None else np.fmax(value, bound)
                    if bound is not None:
                        met = met & (bound <= lim + slack)
            if name == "max_flagged_per_period" and rp.capacity_quantile is not None \
                    and not exact_capacity:
                met = idx <= self.cap_index(pi)
            out[name] = {"value": value, "bound": bound, "met": np.asarray(met, dtype=bool),
                         "judged": np.asarray(judged, dtype=np.float64), "method": method,
                         "lower": lower_rule, "limit": lim}
        return out

    # ------------------------------------------------------------------ search
    def search(self):
        all_idx = np.arange(self.n)
        self.obj_all = self.objective(all_idx)
        self.rules_all = self.rule_values(all_idx, self.pi, exact_capacity=False)
        self.feasible_all = np.ones(self.n, dtype=bool)
        for r in self.rules_all.values():
            self.feasible_all &= r["met"]
        self.best = self._best(self.feasible_all)
        self.unconstrained = self._best(np.ones(self.n, dtype=bool))
        self.binding = {}
        for name in self.rules_all:
            mask = np.ones(self.n, dtype=bool)
            for other, r in self.rules_all.items():
                if other != name:
                    mask &= r["met"]
            self.binding[name] = self.best is not None and self._best(mask) != self.best

    def _best(self, mask):
        """Best event point (or "flag none") under ``mask``; ties to fewer flags. None: empty."""
        cand = self.cand[mask[self.cand]]
        if cand.size == 0:
            return None
        v = self.obj_all[cand]
        best = np.max(v)
        if best == -np.inf:
            return int(cand[0])
        tol = _RTOL * abs(best)
        return int(cand[np.flatnonzero(v >= best - tol)[0]])

    # ------------------------------------------------------------------ reports
    def report(self, k, label, role, *, binding=None, threshold=None) -> PointReport:
        c = self.curve
        rp = self.rp
        k = int(k)
        idx = np.array([k])
        low, high, closed = c.interval(k)
        tp, fp = float(c.tp[k]), float(c.fp[k])
        fn, tn = c.n_events - tp, c.n_nonevents - fp
        val = {m: float(v) for m, v in confusion_metrics(tp, fp, fn, tn, beta=rp.beta).items()}
        dep = {m: float(v[0]) for m, v in self.metrics(idx, self.pi).items()}
        cost = float(self.cost(idx, self.pi)[0]) if rp.costs_given else None
        cases = rp.cases_per_period
        per_period = None if cost is None or cases is None else cost * cases
        flagged = None if cases is None else dep["flag_rate"] * cases
        rules = []
        for name, r in self.rule_values(idx, self.pi).items():
            rules.append(self._rule_check(name, r, binding=None if binding is None
                                          else binding.get(name)))
        meets = all(r.met for r in rules)
        cap = None
        if self.period_flags is not None:
            lim = rp.rules.get("max_flagged_per_period")
            s = self.period_flags.summary(idx, quantile=rp.capacity_quantile or 0.9, capacity=lim,
                                          prevalence=self.pi)
            cap = {key: float(v[0]) for key, v in s.items()}
            cap["period"] = rp.period
            cap["n_periods"] = self.period_flags.n_periods
            cap["quantile_level"] = rp.capacity_quantile or 0.9
        scen = []
        for name, p in (("low", rp.prevalence_low), ("high", rp.prevalence_high)):
            if p is None:
                continue
            m = {key: float(v[0]) for key, v in self.metrics(idx, p).items()}
            sc = float(self.cost(idx, p)[0]) if rp.costs_given else None
            rv = self.rule_values(idx, p)
            scen.append({
                "name": name, "prevalence": float(p), "metrics": m, "cost_per_case": sc,
                "cost_per_period": None if sc is None or cases is None else sc * cases,
                "flagged_per_period": None if cases is None else m["flag_rate"] * cases,
                "rules_met": {n: bool(r["met"][0]) for n, r in rv.items()},
                "meets_rules": all(bool(r["met"][0]) for r in rv.values()),
            })
        missed = None
        if c.event_cost_flagged is not None:
            missed = float(c.event_cost_total - c.event_cost_flagged[k])
        pt = float(c.thresholds[k])
        return PointReport(
            label=label, role=role, index=k, threshold=pt if threshold is None else float(threshold),
            interval_low=low, interval_high=high, closed=closed,
            counts={"tp": tp, "fp": fp, "fn": fn, "tn": tn}, validation=val, deployment=dep,
            prevalence=self.pi, objective_value=float(self.obj_all[k]), cost_per_case=cost,
            cost_per_period=per_period, flagged_per_period=flagged, rules=tuple(rules),
            meets_rules=meets, capacity=cap, scenarios=tuple(scen), missed_cost=missed,
        )

    def _rule_check(self, name, r, binding=None) -> RuleCheck:
        value = float(r["value"][0])
        bound = None if r["bound"] is None else float(np.asarray(r["bound"])[0])
        judged = float(r["judged"][0])
        lim = float(r["limit"])
        margin = judged - lim if r["lower"] else lim - judged
        return RuleCheck(name=name, label=RULE_LABELS[name], limit=lim, value=value, bound=bound,
                         judged=judged, margin=margin, met=bool(r["met"][0]), method=r["method"],
                         binding=binding)

    # ------------------------------------------------------------------ alternatives
    def alternatives(self, k) -> list[PointReport]:
        out = []
        seen = set()
        cand = self.cand
        for name, r in self.rules_all.items():
            ok = cand[r["met"][cand]]
            if ok.size == 0:
                continue
            b = int(ok[0] if name == "min_recall" else ok[-1])
            lim = r["limit"]
            out.append(self.report(b, f"edge of rule: {RULE_LABELS[name]} {_fmt_lim(name, lim)}",
                                   "rule_boundary"))
        if k is not None:
            fr = self.metrics(cand, self.pi)["flag_rate"]
            base = float(self.metrics(np.array([k]), self.pi)["flag_rate"][0])
            if base > 0:
                for delta in (-0.25, -0.10, 0.10, 0.25):
                    target = base * (1 + delta)
                    dist = np.abs(fr - target)
                    j = int(cand[np.flatnonzero(dist <= dist.min() * (1 + _RTOL))[0]])
                    if j == k or j in seen:
                        continue
                    seen.add(j)
                    out.append(self.report(j, f"{delta:+.0%} workload", "workload"))
            pos = np.searchsorted(cand, k)
            if pos > 0:
                out.append(self.report(int(cand[pos - 1]), "stricter neighbour", "neighbour"))
            nxt = pos + 1 if pos < cand.size and cand[pos] == k else pos
            if nxt < cand.size:
                out.append(self.report(int(cand[nxt]), "looser neighbour", "neighbour"))
        return out

    # ------------------------------------------------------------------ infeasibility
    def infeasibility(self):
        msgs, best = [], {}
        cand = self.cand
        alone_ok = {}
        th = self.curve.thresholds
        for name, r in self.rules_all.items():
            alone_ok[name] = r["met"][cand]
            if r["judged"] is not None and not np.all(np.isnan(r["judged"][cand])):
                j = r["judged"][cand]
                pos = np.nanargmax(j) if r["lower"] else np.nanargmin(j)
                best[name] = {"value": float(j[pos]), "threshold": float(th[cand[pos]]),
                              "limit": float(r["limit"])}
            if not alone_ok[name].any():
                lim = r["limit"]
                if name in best:
                    b = best[name]
                    which = "highest" if r["lower"] else "lowest"
                    msgs.append(f"The rule '{RULE_LABELS[name]} {_fmt_lim(name, lim)}' cannot be met: "
                                f"the {which} value any point reaches is "
                                f"{_fmt_val(name, b['value'])} (threshold {_fmt_num(b['threshold'], 6)}).")
                else:
                    msgs.append(f"The rule '{RULE_LABELS[name]} {_fmt_lim(name, lim)}' cannot be met "
                                "at any point.")
        if not msgs:
            names = list(self.rules_all)
            for i, a in enumerate(names):
                for b in names[i + 1:]:
                    if not (alone_ok[a] & alone_ok[b]).any():
                        msgs.append(f"The rules '{RULE_LABELS[a]} {_fmt_lim(a, self.rp.rules[a])}' and "
                                    f"'{RULE_LABELS[b]} {_fmt_lim(b, self.rp.rules[b])}' cannot both "
                                    "be met at any one point.")
            if not msgs:
                msgs.append("The rules " + ", ".join(f"'{RULE_LABELS[n]} {_fmt_lim(n, self.rp.rules[n])}'"
                                                     for n in names)
                            + " cannot all be met at any one point (each pair can).")
        return msgs, best

    # ------------------------------------------------------------------ sensitivity
    def sensitivity(self, k):
        rp = self.rp
        d = rp.false_positive - rp.true_negative
        kw = dict(prevalence=self.pi, false_positive=rp.false_positive, true_positive=rp.true_positive,
                  true_negative=rp.true_negative, case_dependent=self.case_dep)
        if not rp.costs_given:
            kw.update(false_positive=1.0, true_positive=0.0, true_negative=0.0)
        c = self.curve
        if rp.costs_given:
            if self.case_dep:
                ratio = (c.event_cost_total / c.n_events) / d
            else:
                ratio = (rp.false_negative - rp.true_positive) / d
        else:
            ratio = None
        grid = _costs.cost_ratio_sensitivity(c, candidates=self.cand, **kw)
        feas_cand = self.cand[self.feasible_all[self.cand]]
        with_rules = None
        if feas_cand.size and self.rules_all:
            g2 = _costs.cost_ratio_sensitivity(c, candidates=feas_cand, **kw)
            with_rules = g2["threshold"].to_numpy()
        out = {
            "ratio_definition": ("mean miss cost / (C_FP - C_TN), amounts scaled together"
                                 if self.case_dep else "(C_FN - C_TP) / (C_FP - C_TN)"),
            "policy_ratio": ratio,
            "ratios": grid["ratio"].to_numpy(),
            "thresholds": grid["threshold"].to_numpy(),
            "recall": grid["recall"].to_numpy(),
            "thresholds_with_rules": with_rules,
            "optimal_range": None,
            "optimal_range_with_rules": None,
        }
        if k is not None:
            cand_k = np.union1d(self.cand, [k])
            r1 = _costs.implied_cost_ratio(c, k, candidates=cand_k, **kw)
            out["optimal_range"] = None if r1 is None else list(r1)
            if self.feasible_all[k]:
                r2 = _costs.implied_cost_ratio(c, k, candidates=np.union1d(feas_cand, [k]), **kw)
                out["optimal_range_with_rules"] = None if r2 is None else list(r2)
        return out

    # ------------------------------------------------------------------ probabilities
    def probability_scores(self):
        asc = self.curve.distinct_scores
        return bool(self.curve.higher_is_riskier and asc[0] >= 0 and asc[-1] <= 1)

    def decision_curve(self):
        if not self.probability_scores():
            return None
        return _costs.decision_curve(self.curve, prevalence=self.pi)

    def cost_derived(self):
        rp = self.rp
        if not self.calibrated:
            return None
        if not self.probability_scores():
            self.warnings.append("The scores were declared calibrated, but they are not all in [0, 1] "
                                 "with higher meaning riskier: no cost-derived threshold.")
            return None
        if not rp.costs_given:
            return None
        if self.case_dep:
            return {"available": False,
                    "reason": ("each missed event costs its own amount, so the cost-derived rule is "
                               "per case (flag when p >= C_FP / (C_FP + amount)), not one threshold"),
                    "warning": CALIBRATION_WARNING}
        p_star = _costs.cost_derived_threshold(rp.false_positive, rp.false_negative, rp.true_positive,
                                               rp.true_negative)
        t = p_star
        if rp.prevalence_shifted:
            t = _costs.prior_shift_threshold(p_star, rp.validation_prevalence, self.pi)
        emp = self.unconstrained_cost_index()
        return {
            "available": True,
            "formula": "(C_FP - C_TN) / ((C_FP - C_TN) + (C_FN - C_TP))",
            "cost_derived": p_star,
            "prior_shift_corrected": t,
            "corrected": bool(rp.prevalence_shifted),
            "empirical_threshold": float(self.curve.thresholds[emp]),
            "empirical_cost_per_case": float(self.cost(np.array([emp]), self.pi)[0]),
            "cost_derived_cost_per_case": float(self.cost(np.array([self.curve.index_at(t)]),
                                                          self.pi)[0]),
            "warning": CALIBRATION_WARNING,
        }

    def unconstrained_cost_index(self):
        v = -self.cost(self.cand, self.pi)
        best = np.max(v)
        return int(self.cand[np.flatnonzero(v >= best - _RTOL * abs(best))[0]])


def _fmt_lim(name, lim):
    if name == "max_flagged_per_period":
        return _fmt_num(lim)
    return _fmt_pct(lim, 1)


def _fmt_val(name, v):
    return _fmt_lim(name, v)


# --------------------------------------------------------------------------- explanation

def _direction(curve):
    return ">=" if curve.higher_is_riskier else "<="


def _explain(a: _Analysis, choice_point, origin, infeasible_msgs, sens) -> str:
    rp = a.rp
    c = a.curve
    lines = []
    obj_label = OBJECTIVE_LABELS[rp.objective]
    if rp.objective == "max_fbeta":
        obj_label += f" (beta = {rp.beta:g})"
    if rp.objective == "max_net_benefit":
        obj_label += f" (threshold probability {rp.threshold_probability:g})"
    prev = f"a deployment prevalence of {_fmt_pct(a.pi, 2)}"
    if rp.sources.get("deployment.prevalence") == "data":
        prev += " (the validation prevalence)"
    elif rp.prevalence_source:
        prev += f" ({rp.prevalence_source})"
    if choice_point is None:
        lines.append("No threshold meets every rule, so Fulcrum recommends none.")
        lines.extend(infeasible_msgs)
        lines.append("Relax a rule, or improve the score, before deployment.")
        return " ".join(lines)
    p = choice_point
    if origin == "recommended":
        head = "Fulcrum recommends "
    else:
        head = "At the threshold you set, Fulcrum reports "
    if p.is_flag_none:
        lines.append(head + "flagging no one: no threshold beats it on the objective while "
                     "meeting the rules.")
    else:
        lo, hi = p.interval_low, p.interval_high
        rng = (f"({_fmt_num(lo, 6)}, {_fmt_num(hi, 6)}]" if c.higher_is_riskier
               else f"[{_fmt_num(lo, 6)}, {_fmt_num(hi, 6)})")
        lines.append(head + f"flagging cases with score {_direction(c)} {_fmt_num(p.threshold, 6)} "
                     f"(every threshold in {rng} flags the same cases).")
    lines.append(f"The objective is the {obj_label}, judged at {prev}.")
    d = p.deployment
    lines.append(f"Here recall is {_fmt_pct(d['recall'])}, precision {_fmt_pct(d['precision'])}, "
                 f"specificity {_fmt_pct(d['specificity'])}, and {_fmt_pct(d['flag_rate'], 2)} of "
                 "cases are flagged" + (f" (about {_fmt_num(p.flagged_per_period)} per {rp.period})."
                                        if p.flagged_per_period is not None else "."))
    if p.cost_per_case is not None:
        none_c = a.cost(np.array([0]), a.pi)[0]
        all_c = a.cost(np.array([c.n_points - 1]), a.pi)[0]
        txt = (f"Expected cost is {_fmt_num(p.cost_per_case)} {rp.unit} per case")
        if p.cost_per_period is not None:
            txt += f" ({_fmt_num(p.cost_per_period)} per {rp.period})"
        txt += (f", against {_fmt_num(none_c)} for flagging no one and {_fmt_num(all_c)} for "
                "flagging everyone.")
        lines.append(txt)
    for r in p.rules:
        shown = _fmt_val(r.name, r.value)
        if r.bound is not None:
            shown += f" (bound {_fmt_val(r.name, r.bound)})"
        state = "met" if r.met else "NOT met"
        extra = ""
        if r.binding:
            extra = "; it binds: without it the point would move"
        lines.append(f"Rule '{r.label} {_fmt_lim(r.name, r.limit)}': {shown}, {state}{extra}.")
    if origin == "recommended" and a.unconstrained is not None and a.best is not None \
            and a.unconstrained != a.best:
        t = c.thresholds[a.unconstrained]
        lines.append(f"Without the rules the objective alone would pick threshold {_fmt_num(t, 6)}.")
    rr = sens.get("optimal_range_with_rules") or sens.get("optimal_range")
    if rr is not None:
        lo, hi = rr
        what = "mean miss cost : false alarm" if a.case_dep else "miss : false alarm"
        lines.append(f"This point is cost-optimal for cost ratios ({what}) from "
                     f"{_fmt_num(lo, 3)} to {_fmt_num(hi, 3)}"
                     + (f"; the policy's ratio is {_fmt_num(sens['policy_ratio'], 3)}."
                        if sens.get("policy_ratio") is not None else "."))
    elif not p.is_flag_none:
        lines.append("No cost ratio makes this point cost-optimal.")
    return " ".join(lines)


# --------------------------------------------------------------------------- public

def _data_summary(a: _Analysis) -> dict:
    c = a.curve
    return {
        "n_events": c.n_events, "n_nonevents": c.n_nonevents,
        "validation_prevalence": c.prevalence, "higher_is_riskier": c.higher_is_riskier,
        "n_points": c.n_points, "n_event_points": int(a.cand.size), "weight_kind": a.weight_kind,
        "fingerprint": a.ds.fingerprint if a.ds is not None else None,
        "calibrated": a.calibrated,
    }


def _build(a: _Analysis, k, origin, *, threshold=None) -> Choice:
    rp = a.rp
    c = a.curve
    infeasible, best = [], {}
    if a.best is None:
        infeasible, best = a.infeasibility()
    if k is not None:
        role = "recommended" if origin == "recommended" else "user"
        label = "recommended point" if origin == "recommended" else "your threshold"
        point = a.report(k, label, role, binding=a.binding if origin == "recommended" else None,
                         threshold=threshold)
    else:
        point = None
    baselines = {"flag_none": a.report(0, "flag none", "baseline"),
                 "flag_all": a.report(c.n_points - 1, "flag all", "baseline")}
    unconstrained = None
    if a.unconstrained is not None and rp.rules:
        unconstrained = a.report(a.unconstrained, "objective without rules", "unconstrained")
    sens = a.sensitivity(k)
    dc = a.decision_curve()
    cd = a.cost_derived()
    warnings = list(a.warnings)
    if dc is not None and not a.calibrated:
        warnings.append("The decision curve reads the scores as probabilities; it is meaningful "
                        "only if they are calibrated.")
    feasible = point is not None and point.meets_rules
    expl = _explain(a, point, origin, infeasible, sens)
    return Choice(
        origin=origin, feasible=feasible, point=point, objective=rp.objective,
        objective_label=OBJECTIVE_LABELS[rp.objective], alternatives=tuple(a.alternatives(k)),
        baselines=baselines, infeasible=tuple(infeasible), best_reachable=best,
        unconstrained=unconstrained, sensitivity=sens, decision_curve=dc, cost_derived=cd,
        explanation=expl, warnings=tuple(warnings), resolved=rp, data=_data_summary(a),
    )


def choose(data, policy: Policy, *, calibrated: bool = False, weight_kind: str | None = None) -> Choice:
    """The recommended operating point for ``policy`` on a Dataset or a Curve.

    Searches every event point and "flag none" of the exact curve (see the
    module docstring for why that suffices) for the best objective value
    among the points meeting every rule at the deployment prevalence; ties go
    to fewer flags. Never returns a point that breaks a rule: when none meets
    them all, ``Choice.point`` is None and ``Choice.infeasible`` says which
    rule (or pair of rules) cannot be met and the best value any point reaches.

    Parameters
    ----------
    data : Dataset or Curve
        A Dataset gives the score-time column (capacity over time), the
        case-cost column and the weight kind; a bare Curve has none of the
        first and its weights count as sampling weights when it carries sums
        of squared weights (override with ``weight_kind``).
    policy : Policy
    calibrated : bool, default False
        The user's statement that the scores are calibrated probabilities
        (they must also all lie in [0, 1]); only then is the cost-derived
        threshold reported.
    weight_kind : {"frequency", "sampling"}, optional
        For a Curve only.

    Raises
    ------
    PolicyError
        When the policy does not fit the data (see :func:`core.policy.resolve_policy`).
    """
    a = _Analysis(data, policy, calibrated=calibrated, weight_kind=weight_kind)
    a.search()
    return _build(a, a.best, "recommended")


def evaluate(data, policy: Policy, threshold: float, *, calibrated: bool = False,
             weight_kind: str | None = None) -> Choice:
    """The same report as :func:`choose` for a threshold the user set (``origin="user"``).

    The point is the curve's point for ``threshold`` (any real number; the
    report keeps the threshold as given, its interval of equivalent
    thresholds beside it). ``feasible`` tells whether it meets every rule;
    the sensitivity block gives the range of cost ratios that would make it
    cost-optimal (its implied cost ratio), or None when no ratio does.
    """
    t = float(threshold)
    if math.isnan(t):
        raise InputError("threshold", "is NaN")
    a = _Analysis(data, policy, calibrated=calibrated, weight_kind=weight_kind)
    a.search()
    k = a.curve.index_at(t)
    return _build(a, k, "user", threshold=t)


def cost_by_threshold(data, policy: Policy) -> pd.DataFrame:
    """Expected cost at every point of the curve, at the deployment prevalence (the cost chart).

    Columns: ``threshold``, ``flag_rate`` (at pi), ``cost_per_case`` and,
    when the policy gives (or the data imply) cases per period,
    ``cost_per_period``; one row per curve point, "flag none" first.
    Raises :class:`~core.policy.PolicyError` when the policy has no costs.
    """
    from core.policy import PolicyError

    curve = data.curve() if isinstance(data, Dataset) else data
    rp = resolve_policy(policy, data)
    if not rp.costs_given:
        raise PolicyError(["[costs]: needed for the cost chart; give false_positive and false_negative "
                           "(or false_negative_column)"])
    cost = _costs.expected_cost(curve, false_positive=rp.false_positive, false_negative=rp.false_negative,
                                true_positive=rp.true_positive, true_negative=rp.true_negative,
                                prevalence=rp.prevalence)
    df = pd.DataFrame({"threshold": curve.thresholds,
                       "flag_rate": curve.metrics(prevalence=rp.prevalence)["flag_rate"],
                       "cost_per_case": cost})
    if rp.cases_per_period is not None:
        df["cost_per_period"] = cost * rp.cases_per_period
    return df
