"""Does each rule of an approved policy still hold on new data? Verdicts with bounds.

At the approved threshold the new data give counts (tp, fp, fn, tn). Every
rule of the record's policy is judged as the approval judged it -- the same
one-sided bounds at the record's ``confidence`` (0.95 when it had none),
from :mod:`core.intervals` with the methods :func:`core.choose.choose` uses:

* recall, specificity: the Wilson score bound (Wilson 1927) on the events /
  non-events (Kish's effective sizes with sampling weights);
* precision at the prevalence pi: the adjusted logit bound of Mercaldo, Lau
  & Zhou (Stat Med 2007);
* flag rate and expected flagged cases per period at pi: the Wald (delta
  method) bound on adjusted rates;
* flagged cases per period with a ``capacity_quantile``: the empirical
  quantile over the periods of the new data, as at approval -- this rule has
  **no sampling bound**.

Each rule gets one of three verdicts, never from the point estimate alone:

* **holds** -- the bound on the approval's side clears the limit (for a
  ``min_*`` rule the one-sided lower bound is at least the limit; for a
  ``max_*`` rule the upper bound is at most the limit), and so does the
  point value;
* **fails** -- the opposite one-sided bound at the same confidence lies on
  the wrong side (a ``min_*`` rule's upper bound below the limit, a
  ``max_*`` rule's lower bound above it);
* **unclear** -- neither. The verdict then says how large a sample would
  settle it (:class:`SettleSize`): with the observed proportions held fixed,
  the smallest size at which the bound clears the limit (towards "holds"
  when the point value is on the right side of the limit, towards "fails"
  otherwise), found by doubling the size and then bisecting on whole
  numbers -- events for recall, non-events for specificity, cases (with the
  same mix of events and non-events) for precision, flag rate and expected
  flagged cases. Each bound tightens monotonically towards the observed
  value as the size grows at fixed proportions (the Wilson bound solves
  ``(p - theta)^2 = z^2 theta (1 - theta) / n``). At the observed rate only:
  if the true value is nearer the limit, more are needed.

Comparisons use the same relative tolerance of 1e-12 as the approval, so
float rounding never decides. :func:`verdict_summary` writes the plain-words
line at the top of a recheck ("2 of 3 rules hold; recall at site
Wendlecombe fails"); :func:`overall_verdict` folds many verdicts into one.
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, fields

import numpy as np

from core import intervals as _iv
from core.costs import TIE_RTOL
from core.errors import InputError
from core.policy import RULE_LABELS, RULES

__all__ = [
    "DEFAULT_CONFIDENCE",
    "RULE_NAMES",
    "VERDICTS",
    "RuleVerdict",
    "SettleSize",
    "judge_rule",
    "judge_rules",
    "overall_verdict",
    "verdict_summary",
]

VERDICTS = ("holds", "fails", "unclear")
#: The confidence of a recheck when the approved policy set none.
DEFAULT_CONFIDENCE = 0.95
#: Short names of the rules' metrics, for plain-words summaries.
RULE_NAMES = {
    "min_recall": "recall",
    "min_precision": "precision",
    "min_specificity": "specificity",
    "max_flag_rate": "flag rate",
    "max_flagged_per_period": "flagged cases per period",
}

_MAX_SIZE = 10 ** 12
_UNITS = {"min_recall": "events", "min_specificity": "non-events", "min_precision": "cases",
          "max_flag_rate": "cases", "max_flagged_per_period": "cases"}
SETTLE_METHOD = ("smallest size at which the one-sided bound clears the limit with the observed "
                 "proportions held fixed (doubling, then bisection on whole numbers)")


def _json(obj):
    from core.choose import json_safe

    return json_safe(obj)


def _num(x, digits=3):
    if x is None or not np.isfinite(x):
        return "undefined"
    return f"{x:,.{digits}f}"


def _digits(name) -> int:
    return 1 if name == "max_flagged_per_period" else 3


# --------------------------------------------------------------------------- results

@dataclass(frozen=True)
class SettleSize:
    """How large a sample would settle an unclear verdict, at the observed proportions.

    ``outcome`` is the verdict the rule would reach (``"holds"`` or
    ``"fails"``); ``unit`` is ``"events"``, ``"non-events"`` or ``"cases"``;
    ``needed`` is the total size of that unit, ``more`` how many beyond the
    present ``current``; for cases, ``events`` is how many of them would be
    events at the present mix. ``needed`` is None when even 10^12 would not
    settle it.
    """

    rule: str
    outcome: str
    unit: str
    current: float
    needed: int | None
    more: int | None
    events: float | None
    confidence: float
    method: str

    def statement(self) -> str:
        what = RULE_NAMES[self.rule]
        if self.needed is None:
            return (f"At the observed {what}, no sample up to {_MAX_SIZE:,} {self.unit} would "
                    "settle it.")
        extra = ""
        if self.unit == "cases" and self.events is not None:
            extra = f", about {self.events:,.0f} of them events at the present mix"
        return (f"At the observed {what}, about {self.needed:,} {self.unit} in all "
                f"({self.more:,} more than the {self.current:,.0f} now{extra}) would show that it "
                f"{self.outcome}: the one-sided {100 * self.confidence:g} % bound would then clear "
                "the limit. If the true value lies nearer the limit, more are needed.")

    def to_dict(self) -> dict:
        d = {f.name: getattr(self, f.name) for f in fields(self)}
        d["statement"] = self.statement()
        return _json(d)


@dataclass(frozen=True)
class RuleVerdict:
    """One rule judged on new data (see the module docstring).

    ``value`` is the point estimate; ``lower`` / ``upper`` the one-sided
    bounds at ``confidence`` (None for the capacity quantile, which has no
    sampling bound); ``verdict`` one of :data:`VERDICTS`; ``reason`` says why
    in words; ``settle`` (unclear verdicts only) the size that would settle
    it; ``approval_margin`` the margin by which the rule cleared at approval
    (when given), ``tight`` True when that margin is narrower than the new
    bound's distance from the point value (a rule approved this tightly can
    be unclear on a new sample even when nothing has changed).
    """

    name: str
    label: str
    limit: float
    value: float
    lower: float | None
    upper: float | None
    confidence: float
    method: str
    verdict: str
    reason: str
    n_events: float
    n_nonevents: float
    prevalence: float | None
    settle: SettleSize | None = None
    approval_margin: float | None = None
    tight: bool = False

    @property
    def short(self) -> str:
        return RULE_NAMES[self.name]

    @property
    def holds(self) -> bool:
        return self.verdict == "holds"

    def to_dict(self) -> dict:
        d = {f.name: getattr(self, f.name) for f in fields(self)}
        d["settle"] = None if self.settle is None else self.settle.to_dict()
        return _json(d)


# --------------------------------------------------------------------------- bounds

def _check_confidence(confidence) -> tuple[float, str]:
    if confidence is None:
        return DEFAULT_CONFIDENCE, (" (the approved policy set no confidence: "
                                    f"{DEFAULT_CONFIDENCE:g})")
    c = float(confidence)
    if not (0.5 < c < 1.0):
        raise InputError("confidence", f"must lie strictly between 0.5 and 1 for a recheck (below "
                                       f"0.5 the one-sided lower bound exceeds the upper), got "
                                       f"{confidence!r}")
    return c, ""


class _Counts:
    """New-data counts at the threshold, with the sizes the bounds use."""

    def __init__(self, tp, fp, fn, tn, n_events, n_nonevents):
        vals = []
        for name, v in (("tp", tp), ("fp", fp), ("fn", fn), ("tn", tn)):
            x = float(v)
            if not np.isfinite(x) or x < 0:
                raise InputError(name, f"must be a finite, non-negative count, got {v!r}")
            vals.append(x)
        self.tp, self.fp, self.fn, self.tn = vals
        self.P = self.tp + self.fn
        self.N = self.fp + self.tn
        self.n1 = self.P if n_events is None else float(n_events)
        self.n0 = self.N if n_nonevents is None else float(n_nonevents)
        for name, v in (("n_events", self.n1), ("n_nonevents", self.n0)):
            if not np.isfinite(v) or v < 0:
                raise InputError(name, f"must be a finite, non-negative size, got {v!r}")
        self.weighted = n_events is not None or n_nonevents is not None

    def scaled(self, k: float) -> _Counts:
        out = object.__new__(_Counts)
        out.tp, out.fp, out.fn, out.tn = self.tp * k, self.fp * k, self.fn * k, self.tn * k
        out.P, out.N = self.P * k, self.N * k
        out.n1, out.n0 = self.n1 * k, self.n0 * k
        out.weighted = self.weighted
        return out


def _bounds(name, c: _Counts, pi, conf, cases_per_period):
    """(value, lower, upper) of one rule's metric at the counts (one-sided bounds at conf)."""
    with np.errstate(invalid="ignore", divide="ignore"):
        tpr = c.tp / c.P if c.P > 0 else math.nan
        fpr = c.fp / c.N if c.N > 0 else math.nan
    if name == "min_recall":
        if not c.n1 > 0 or math.isnan(tpr):
            return math.nan, math.nan, math.nan
        lo = _iv.wilson_interval(tpr * c.n1, c.n1, conf, sided="lower")[0]
        hi = _iv.wilson_interval(tpr * c.n1, c.n1, conf, sided="upper")[1]
        return tpr, lo, hi
    if name == "min_specificity":
        if not c.n0 > 0 or math.isnan(fpr):
            return math.nan, math.nan, math.nan
        spec = 1.0 - fpr
        lo = _iv.wilson_interval(spec * c.n0, c.n0, conf, sided="lower")[0]
        hi = _iv.wilson_interval(spec * c.n0, c.n0, conf, sided="upper")[1]
        return spec, lo, hi
    if pi is None or not (0.0 < pi < 1.0) or math.isnan(tpr) or math.isnan(fpr):
        return math.nan, math.nan, math.nan
    tpp, fpp = pi * tpr, (1.0 - pi) * fpr
    if name == "min_precision":
        if c.tp + c.fp <= 0:
            return math.nan, math.nan, math.nan
        value = tpp / (tpp + fpp)
        lo = _iv.ppv_logit_interval(c.tp, c.fn, c.fp, c.tn, pi, conf, sided="lower",
                                    n_events=c.n1, n_nonevents=c.n0)[0]
        hi = _iv.ppv_logit_interval(c.tp, c.fn, c.fp, c.tn, pi, conf, sided="upper",
                                    n_events=c.n1, n_nonevents=c.n0)[1]
        return value, lo, hi
    value = tpp + fpp
    lo = _iv.flag_rate_interval(c.tp, c.fn, c.fp, c.tn, pi, conf, sided="lower",
                                n_events=c.n1, n_nonevents=c.n0)[0]
    hi = _iv.flag_rate_interval(c.tp, c.fn, c.fp, c.tn, pi, conf, sided="upper",
                                n_events=c.n1, n_nonevents=c.n0)[1]
    if name == "max_flag_rate":
        return value, lo, hi
    k = float(cases_per_period)
    return value * k, lo * k, hi * k


def _method(name, conf, pi, weighted, period, pi_note):
    sizes = " with Kish's effective sizes" if weighted else ""
    c = f"{conf:g}"
    if name in ("min_recall", "min_specificity"):
        return f"one-sided {c} Wilson bounds{sizes}"
    if name == "min_precision":
        return (f"one-sided {c} bounds, adjusted logit interval at prevalence {pi:.4g}{pi_note} "
                f"(Mercaldo, Lau & Zhou 2007){sizes}")
    if name == "max_flag_rate":
        return (f"one-sided {c} bounds, Wald (delta method) on adjusted rates at prevalence "
                f"{pi:.4g}{pi_note}{sizes}")
    return (f"one-sided {c} bounds of the expected flagged cases per {period} (flag-rate Wald "
            f"bounds on adjusted rates at prevalence {pi:.4g}{pi_note}){sizes}")


def _decide(lower_rule, lim, value, lo, hi):
    slack = TIE_RTOL * abs(lim)
    if any(v is None or math.isnan(v) for v in (value, lo, hi)):
        return "unclear"
    if lower_rule:
        if value >= lim - slack and lo >= lim - slack:
            return "holds"
        if hi < lim - slack:
            return "fails"
    else:
        if value <= lim + slack and hi <= lim + slack:
            return "holds"
        if lo > lim + slack:
            return "fails"
    return "unclear"


def _settle(name, c: _Counts, lim, value, pi, conf, cpp) -> SettleSize | None:
    lower_rule = name.startswith("min_")
    slack = TIE_RTOL * abs(lim)
    if not np.isfinite(value) or abs(value - lim) <= slack:
        return None
    good = value > lim if lower_rule else value < lim
    target = "holds" if good else "fails"
    unit = _UNITS[name]
    current = {"events": c.n1, "non-events": c.n0}.get(unit, c.n1 + c.n0)
    if not current > 0:
        return None

    def settled(n: int) -> bool:
        v, lo, hi = _bounds(name, c.scaled(n / current), pi, conf, cpp)
        return _decide(lower_rule, lim, v, lo, hi) == target

    lo_n = max(math.floor(current), 1)
    hi_n = lo_n * 2
    while not settled(hi_n):
        lo_n = hi_n
        hi_n *= 2
        if hi_n > _MAX_SIZE:
            return SettleSize(rule=name, outcome=target, unit=unit, current=current, needed=None,
                              more=None, events=None, confidence=conf, method=SETTLE_METHOD)
    if settled(lo_n):  # only when the current size is not whole (weighted counts)
        hi_n = lo_n
    while hi_n - lo_n > 1:
        mid = (lo_n + hi_n) // 2
        if settled(mid):
            hi_n = mid
        else:
            lo_n = mid
    events = hi_n * c.n1 / current if unit == "cases" else None
    return SettleSize(rule=name, outcome=target, unit=unit, current=current, needed=int(hi_n),
                      more=math.ceil(hi_n - current), events=events, confidence=conf,
                      method=SETTLE_METHOD)


def _reason(name, verdict, lim, value, lo, hi, conf, c: _Counts, capacity_note=None):
    what = RULE_NAMES[name]
    lower_rule = name.startswith("min_")
    dg = _digits(name)

    def _n(x):
        return _num(x, dg)

    cp = f"{100 * conf:g} %"
    if capacity_note is not None:
        side = "within" if verdict == "holds" else "above"
        return (f"{verdict}: the {capacity_note} is {_n(value)}, {side} the limit "
                f"{_n(lim)}; this rule has no sampling bound (judged on the empirical "
                "quantile, as at approval).")
    if math.isnan(value):
        why = {"min_recall": "the new data hold no events",
               "min_specificity": "the new data hold no non-events",
               "min_precision": "no case is flagged at the threshold (or the data lack a class)"}
        return (f"unclear: {what} is undefined here ({why.get(name, 'the data lack a class')}), "
                "so the rule cannot be judged.")
    if verdict == "holds":
        b, side = (lo, "lower") if lower_rule else (hi, "upper")
        return (f"holds: the one-sided {cp} {side} bound {_n(b)} clears the limit {_n(lim)} "
                f"(observed {_n(value)}).")
    if verdict == "fails":
        b, side, where = (hi, "upper", "below") if lower_rule else (lo, "lower", "above")
        return (f"fails: even the one-sided {cp} {side} bound {_n(b)} lies {where} the limit "
                f"{_n(lim)} (observed {_n(value)}).")
    size = {"min_recall": f"{c.n1:,.0f} events", "min_specificity": f"{c.n0:,.0f} non-events"}.get(
        name, f"{c.n1 + c.n0:,.0f} cases")
    return (f"unclear: the limit {_n(lim)} lies between the one-sided {cp} bounds {_n(lo)} "
            f"(lower) and {_n(hi)} (upper) of the observed {what} {_n(value)}: these {size} "
            "can show neither that the rule holds nor that it fails.")


# --------------------------------------------------------------------------- public

def judge_rule(name: str, limit: float, tp, fp, fn, tn, *, confidence=None, prevalence=None,
               cases_per_period=None, period: str = "day", capacity_quantile=None,
               period_counts=None, n_events=None, n_nonevents=None,
               approval_margin=None) -> RuleVerdict:
    """Judge one rule on the new data's counts at the approved threshold.

    Parameters
    ----------
    name, limit
        A rule of :data:`core.policy.RULES` and its limit.
    tp, fp, fn, tn
        Counts at the approved threshold on the new data (weighted counts
        allowed; then pass the effective sizes as ``n_events`` /
        ``n_nonevents``, as the approval did for sampling weights).
    confidence
        The approved policy's confidence; None means 0.95 (said in ``method``).
    prevalence
        The prevalence precision, flag rate and expected flagged cases are
        judged at -- the record's resolved deployment prevalence, to judge as
        the approval did. None: the new data's own prevalence (said in
        ``method``).
    cases_per_period, period
        For ``max_flagged_per_period`` without a quantile (the record's values).
    capacity_quantile, period_counts
        For ``max_flagged_per_period`` with a quantile: the flagged cases in
        every period of the new data at the threshold (e.g.
        :meth:`core.capacity.PeriodFlags.counts_at`); judged on their
        empirical quantile, no sampling bound.
    approval_margin
        The rule's margin at approval (``RuleCheck.margin``), to say when a
        tight approval explains an unclear verdict.

    Edge cases: an undefined metric (no events for recall, nothing flagged
    for precision) is "unclear" with the reason.
    """
    if name not in RULES:
        raise InputError("rules", f"unknown rule {name!r}; known rules are {', '.join(RULES)}")
    lim = float(limit)
    if not np.isfinite(lim):
        raise InputError(name, f"limit must be a finite number, got {limit!r}")
    conf, conf_note = _check_confidence(confidence)
    c = _Counts(tp, fp, fn, tn, n_events, n_nonevents)
    lower_rule = name.startswith("min_")
    total = c.P + c.N
    if prevalence is None:
        pi = c.P / total if total > 0 else math.nan
        pi_note = " (the new data's own prevalence)"
    else:
        pi = float(prevalence)
        if not (0.0 < pi < 1.0):
            raise InputError("prevalence", f"must lie strictly between 0 and 1, got {prevalence!r}")
        pi_note = ""
    pi_used = None if math.isnan(pi) else pi
    common = {"name": name, "label": RULE_LABELS[name], "limit": lim, "confidence": conf,
                  "n_events": c.P, "n_nonevents": c.N,
                  "prevalence": None if name in ("min_recall", "min_specificity") else pi_used}

    if name == "max_flagged_per_period" and capacity_quantile is not None:
        q = float(capacity_quantile)
        if not (0.0 < q <= 1.0):
            raise InputError("capacity_quantile", f"must lie in (0, 1], got {capacity_quantile!r}")
        if period_counts is None:
            raise InputError("max_flagged_per_period", "with a capacity quantile the rule needs "
                             "the flagged cases per period of the new data (a score-time column)")
        counts = np.asarray(period_counts, dtype=np.float64).ravel()
        if counts.size == 0 or not np.all(np.isfinite(counts)) or np.any(counts < 0):
            raise InputError("period_counts", "must be finite, non-negative counts, one per period")
        value = float(np.quantile(counts, q, method="inverted_cdf"))
        verdict = "holds" if value <= lim + TIE_RTOL * abs(lim) else "fails"
        note = f"empirical {q:g}-quantile of flagged cases per {period}"
        method = f"{note} over {counts.size:,} {period}s (no sampling bound)"
        return RuleVerdict(**common, value=value, lower=None, upper=None, method=method,
                           verdict=verdict, reason=_reason(name, verdict, lim, value, None, None,
                                                           conf, c, capacity_note=note),
                           approval_margin=None if approval_margin is None
                           else float(approval_margin))
    if name == "max_flagged_per_period":
        if cases_per_period is None:
            raise InputError("max_flagged_per_period", "needs the cases per period (the record's "
                             "deployment.cases_per_period) to judge expected flagged cases")
        cpp = float(cases_per_period)
        if not (np.isfinite(cpp) and cpp > 0):
            raise InputError("cases_per_period",
                             f"must be a positive number, got {cases_per_period!r}")
    else:
        cpp = None

    value, lo, hi = _bounds(name, c, pi_used, conf, cpp)
    verdict = _decide(lower_rule, lim, value, lo, hi)
    method = _method(name, conf, pi if pi_used is not None else math.nan, c.weighted, period,
                     pi_note) + conf_note
    reason = _reason(name, verdict, lim, value, lo, hi, conf, c)
    settle = None
    tight = False
    margin = None if approval_margin is None else float(approval_margin)
    if verdict == "unclear" and np.isfinite(value):
        settle = _settle(name, c, lim, value, pi_used, conf, cpp)
        if settle is not None:
            reason += " " + settle.statement()
        elif abs(value - lim) <= TIE_RTOL * abs(lim):
            reason += (" The observed value equals the limit: at this rate no sample size would "
                       "settle it.")
        half = (value - lo) if lower_rule else (hi - value)
        if margin is not None and np.isfinite(half) and margin < half:
            tight = True
            dg = _digits(name)
            reason += (f" At approval the bound cleared the limit by only {_num(margin, dg)}, less "
                       f"than the {_num(half, dg)} between the new point value and its bound: a "
                       "rule approved this tightly can stay unclear on a new sample of this "
                       "size even when nothing has changed.")
    return RuleVerdict(**common, value=float(value), lower=float(lo), upper=float(hi),
                       method=method, verdict=verdict, reason=reason, settle=settle,
                       approval_margin=margin, tight=tight)


def judge_rules(tp, fp, fn, tn, rules: Mapping[str, float], *, confidence=None, prevalence=None,
                cases_per_period=None, period: str = "day", capacity_quantile=None,
                period_counts=None, n_events=None, n_nonevents=None,
                approval_margins: Mapping[str, float] | None = None) -> tuple[RuleVerdict, ...]:
    """Judge every rule (``{name: limit}``, e.g. a resolved policy's ``rules``) in rule order.

    See :func:`judge_rule` for the arguments; ``approval_margins`` maps rule
    names to their margins at approval.
    """
    unknown = [r for r in rules if r not in RULES]
    if unknown:
        raise InputError("rules", f"unknown rule(s) {', '.join(map(repr, unknown))}; known rules "
                                  f"are {', '.join(RULES)}")
    margins = dict(approval_margins or {})
    return tuple(
        judge_rule(name, rules[name], tp, fp, fn, tn, confidence=confidence, prevalence=prevalence,
                   cases_per_period=cases_per_period, period=period,
                   capacity_quantile=capacity_quantile, period_counts=period_counts,
                   n_events=n_events, n_nonevents=n_nonevents,
                   approval_margin=margins.get(name))
        for name in RULES if name in rules)


def _group_label(key) -> str:
    if isinstance(key, tuple) and len(key) == 2:
        return f"{key[0]} {key[1]}"
    return str(key)


def overall_verdict(verdicts: Sequence[RuleVerdict], groups=None) -> str:
    """``"fails"`` if any verdict fails, else ``"unclear"`` if any is unclear, else ``"holds"``.

    ``groups`` (optional) maps a group label -- a string or a ``(column,
    value)`` pair -- to that group's verdicts; they count like the overall
    ones. No rules at all: ``"holds"`` (nothing to break).
    """
    every = list(verdicts)
    for vs in (groups or {}).values():
        every.extend(vs)
    words = {v.verdict for v in every}
    if "fails" in words:
        return "fails"
    if "unclear" in words:
        return "unclear"
    return "holds"


def verdict_summary(verdicts: Sequence[RuleVerdict], groups=None, *, show: int = 6) -> str:
    """The plain-words line: ``"2 of 3 rules hold; recall at site Wendlecombe fails"``.

    A rule counts as holding when it holds overall and in every group given
    (``groups`` maps a label or ``(column, value)`` to that group's
    verdicts). Then every failing place is named, before every unclear one
    ("recall fails" overall, "recall at site X fails" in a group), up to
    ``show`` of them ("and 3 more").
    """
    verdicts = list(verdicts)
    groups = dict(groups or {})
    if not verdicts:
        return "No rules to check."
    names = [v.name for v in verdicts]
    held = {n: True for n in names}
    fails, unclear = [], []
    for v in verdicts:
        if v.verdict != "holds":
            held[v.name] = False
            (fails if v.verdict == "fails" else unclear).append(f"{v.short} {v.verdict}")
    for key, vs in groups.items():
        where = _group_label(key)
        for v in vs:
            if v.verdict == "holds":
                continue
            if v.name in held:
                held[v.name] = False
            (fails if v.verdict == "fails" else unclear).append(f"{v.short} at {where} {v.verdict}")
    k, m = sum(held.values()), len(names)
    if k == m:
        head = f"All {m} rules hold" if m > 1 else "The rule holds"
        return head + (" overall and in every subgroup." if groups else ".")
    head = f"{k} of {m} rule{'s' if m != 1 else ''} hold{'s' if m == 1 else ''}"
    items = fails + unclear
    tail = items[:show]
    if len(items) > show:
        tail.append(f"and {len(items) - show} more")
    return "; ".join([head] + tail)
