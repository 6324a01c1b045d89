"""The policy: what errors cost, what the rules are and what to optimise.

A :class:`Policy` holds the misclassification costs and their unit, the
deployment prevalence (optionally a low / expected / high range with its
source), the case volume per period, the rules with an optional confidence,
the one objective, and an optional fairness criterion for the subgroup
checks. Everything -- objective and rules -- is judged at the deployment
prevalence (see :mod:`core.metrics`).

Policy file (TOML). These sections and keys are the contract::

    [objective]
    kind = "min_cost"            # or max_fbeta, max_net_benefit, max_youden, max_recall, max_precision
    beta = 2.0                   # max_fbeta only (default 1)
    threshold_probability = 0.1  # max_net_benefit only (required there)
    [costs]
    false_positive = 1.0
    false_negative = 25.0        # or: false_negative_column = "invoice_amount" (exactly one)
    true_positive = 0.0          # optional
    true_negative = 0.0          # optional
    unit = "harm points"         # optional
    [deployment]
    prevalence = 0.02            # optional (default: the validation prevalence)
    prevalence_low = 0.015       # optional range, with its source
    prevalence_high = 0.03
    prevalence_source = "admissions audit 2025"
    cases_per_period = 1200      # optional
    period = "day"               # optional: hour, shift (8 h), day, week or month
    [rules]
    min_recall = 0.80
    min_precision = 0.10
    min_specificity = 0.50
    max_flag_rate = 0.10
    max_flagged_per_period = 60
    capacity_quantile = 0.9      # judge max_flagged_per_period on this quantile of periods
    confidence = 0.95            # a rule is met only when its one-sided bound clears it
    [fairness]
    metric = "recall"
    groups = ["site"]
    tolerance = 0.05
    reference = ""

Every problem of a file -- an unknown section or key, a wrong type, both or
neither of the false-negative forms, a rate outside its range, a missing
value an objective needs -- is collected and raised at once as a
:class:`PolicyError` (an :class:`~core.errors.InputError`) whose message
lists what is allowed.

:func:`resolve_policy` fills in every default against a dataset (or curve)
and records where each value came from: ``"file"`` (set in the policy),
``"default"`` (a fixed default) or ``"data"`` (taken from the validation
data, e.g. the validation prevalence).
"""

from __future__ import annotations

import math
import tomllib
from dataclasses import dataclass, field, fields
from pathlib import Path
from typing import Any

import numpy as np

from core.errors import InputError

__all__ = [
    "OBJECTIVES",
    "OBJECTIVE_LABELS",
    "RULES",
    "RULE_LABELS",
    "PERIODS",
    "FAIRNESS_METRICS",
    "Objective",
    "Costs",
    "Deployment",
    "Rules",
    "Fairness",
    "Policy",
    "PolicyError",
    "ResolvedPolicy",
    "loads_policy",
    "load_policy",
    "dumps_policy",
    "save_policy",
    "resolve_policy",
]

OBJECTIVES = ("min_cost", "max_fbeta", "max_net_benefit", "max_youden", "max_recall", "max_precision")

OBJECTIVE_LABELS = {
    "min_cost": "lowest expected cost",
    "max_fbeta": "highest F-beta",
    "max_net_benefit": "highest net benefit",
    "max_youden": "highest Youden's J",
    "max_recall": "highest recall",
    "max_precision": "highest precision",
}

#: Rule names in display order; "min_*" rules are lower limits, "max_*" upper limits.
RULES = ("min_recall", "min_precision", "min_specificity", "max_flag_rate", "max_flagged_per_period")

RULE_LABELS = {
    "min_recall": "recall at least",
    "min_precision": "precision at least",
    "min_specificity": "specificity at least",
    "max_flag_rate": "flag rate at most",
    "max_flagged_per_period": "flagged cases per period at most",
}

#: Period names and their length in hours (a month is a calendar month).
PERIODS = {"hour": 1.0, "shift": 8.0, "day": 24.0, "week": 168.0, "month": None}

#: Metrics the fairness criterion may compare across groups.
FAIRNESS_METRICS = ("recall", "precision", "specificity", "fpr", "npv", "flag_rate")

_FLAG_LIMITING = ("min_precision", "min_specificity", "max_flag_rate", "max_flagged_per_period")

DEFAULT_UNIT = "cost units"
DEFAULT_PERIOD = "day"
DEFAULT_BETA = 1.0
DEFAULT_TOLERANCE = 0.05


# --------------------------------------------------------------------------- dataclasses

@dataclass(frozen=True)
class Objective:
    """What to optimise: ``kind`` (one of :data:`OBJECTIVES`) and its parameter."""

    kind: str
    beta: float | None = None
    threshold_probability: float | None = None


@dataclass(frozen=True)
class Costs:
    """Cost of each decision outcome, in ``unit``.

    Exactly one of ``false_negative`` (one amount per missed event) and
    ``false_negative_column`` (each missed event costs its own amount from
    that column) is set. Correct decisions cost ``true_positive`` /
    ``true_negative`` (default 0; a negative amount is a benefit).
    """

    false_positive: float
    false_negative: float | None = None
    false_negative_column: str | None = None
    true_positive: float | None = None
    true_negative: float | None = None
    unit: str | None = None

    @property
    def case_dependent(self) -> bool:
        return self.false_negative_column is not None


@dataclass(frozen=True)
class Deployment:
    """Where the score will run: prevalence (and range), volume per period."""

    prevalence: float | None = None
    prevalence_low: float | None = None
    prevalence_high: float | None = None
    prevalence_source: str | None = None
    cases_per_period: float | None = None
    period: str | None = None


@dataclass(frozen=True)
class Rules:
    """Hard requirements; each optional. See :data:`RULES`."""

    min_recall: float | None = None
    min_precision: float | None = None
    min_specificity: float | None = None
    max_flag_rate: float | None = None
    max_flagged_per_period: float | None = None
    capacity_quantile: float | None = None
    confidence: float | None = None

    def active(self) -> dict[str, float]:
        """The rules that are set, name -> limit, in :data:`RULES` order."""
        return {name: getattr(self, name) for name in RULES if getattr(self, name) is not None}


@dataclass(frozen=True)
class Fairness:
    """A metric that must be near-equal across the groups of some columns."""

    metric: str
    groups: tuple[str, ...]
    tolerance: float | None = None
    reference: str | None = None


@dataclass(frozen=True)
class Policy:
    """A whole policy; validated on construction (raises :class:`PolicyError`)."""

    objective: Objective
    costs: Costs | None = None
    deployment: Deployment = field(default_factory=Deployment)
    rules: Rules = field(default_factory=Rules)
    fairness: Fairness | None = None

    def __post_init__(self):
        if isinstance(self.fairness, Fairness) and not isinstance(self.fairness.groups, tuple):
            object.__setattr__(self, "fairness", Fairness(
                metric=self.fairness.metric, groups=tuple(self.fairness.groups),
                tolerance=self.fairness.tolerance, reference=self.fairness.reference))
        problems = _problems(self.to_dict())
        if problems:
            raise PolicyError(problems)

    def to_dict(self) -> dict[str, dict[str, Any]]:
        """Nested dict of the values that are set (the policy file's content)."""
        out: dict[str, dict[str, Any]] = {}
        for section in _SECTIONS:
            obj = getattr(self, section)
            if obj is None:
                continue
            if not hasattr(obj, "__dataclass_fields__"):
                out[section] = obj  # wrong type: reported by the validation
                continue
            d = {}
            for f in fields(obj):
                v = getattr(obj, f.name)
                if v is None:
                    continue
                d[f.name] = list(v) if isinstance(v, tuple) else v
            if d or section == "objective":
                out[section] = d
        return out

    @classmethod
    def from_dict(cls, data: dict, *, source: str | None = None) -> "Policy":
        """Build from the nested dict of a policy file; every problem raised at once."""
        problems = _problems(data)
        if problems:
            raise PolicyError(problems, source=source)
        d = {k: dict(v) for k, v in data.items()}
        kw: dict[str, Any] = {"objective": Objective(**_numbers(d["objective"]))}
        if "costs" in d:
            kw["costs"] = Costs(**_numbers(d["costs"]))
        if "deployment" in d:
            kw["deployment"] = Deployment(**_numbers(d["deployment"]))
        if "rules" in d:
            kw["rules"] = Rules(**_numbers(d["rules"]))
        if "fairness" in d:
            fd = _numbers(d["fairness"])
            fd["groups"] = tuple(fd["groups"])
            kw["fairness"] = Fairness(**fd)
        return cls(**kw)

    def replace(self, **sections) -> "Policy":
        """A copy with whole sections replaced (e.g. ``rules=Rules(...)``)."""
        kw = {s: getattr(self, s) for s in _SECTIONS}
        kw.update(sections)
        return Policy(**kw)


class PolicyError(InputError):
    """A policy with one or more problems; ``problems`` lists each as one line."""

    def __init__(self, problems, *, source: str | None = None):
        self.problems = tuple(problems)
        where = f"policy file {source}" if source else "policy"
        n = len(self.problems)
        head = f"{n} problem{'s' if n != 1 else ''}: "
        super().__init__(where, head + "; ".join(self.problems))


# --------------------------------------------------------------------------- validation

_SECTIONS = ("objective", "costs", "deployment", "rules", "fairness")

# key -> (kind, description of what is allowed)
_KEYS: dict[str, dict[str, tuple[str, str]]] = {
    "objective": {
        "kind": ("str", "one of " + ", ".join(OBJECTIVES)),
        "beta": ("num", "a number > 0 (max_fbeta only)"),
        "threshold_probability": ("num", "a number strictly between 0 and 1 (max_net_benefit only)"),
    },
    "costs": {
        "false_positive": ("num", "a number >= 0"),
        "false_negative": ("num", "a number >= 0"),
        "false_negative_column": ("str", "the name of a column of per-case miss costs"),
        "true_positive": ("num", "a number (negative for a benefit)"),
        "true_negative": ("num", "a number (negative for a benefit)"),
        "unit": ("str", "a text such as \"harm points\""),
    },
    "deployment": {
        "prevalence": ("num", "a rate strictly between 0 and 1"),
        "prevalence_low": ("num", "a rate strictly between 0 and 1"),
        "prevalence_high": ("num", "a rate strictly between 0 and 1"),
        "prevalence_source": ("str", "a text naming where the prevalence comes from"),
        "cases_per_period": ("num", "a number > 0"),
        "period": ("str", "one of " + ", ".join(PERIODS)),
    },
    "rules": {
        "min_recall": ("num", "a rate between 0 and 1"),
        "min_precision": ("num", "a rate above 0 and at most 1"),
        "min_specificity": ("num", "a rate between 0 and 1"),
        "max_flag_rate": ("num", "a rate between 0 and 1"),
        "max_flagged_per_period": ("num", "a number > 0"),
        "capacity_quantile": ("num", "a rate above 0 and at most 1"),
        "confidence": ("num", "a number above 0.5 and below 1, e.g. 0.95"),
    },
    "fairness": {
        "metric": ("str", "one of " + ", ".join(FAIRNESS_METRICS)),
        "groups": ("strlist", "a list of group column names, e.g. [\"site\"]"),
        "tolerance": ("num", "a rate between 0 and 1"),
        "reference": ("str", "a group value, or empty for each group against the rest"),
    },
}


def _is_num(v) -> bool:
    return isinstance(v, (int, float, np.integer, np.floating)) and not isinstance(v, (bool, np.bool_))


def _numbers(d: dict) -> dict:
    """Numbers as Python floats (so a file's ``1`` and ``1.0`` give equal policies)."""
    return {k: float(v) if _is_num(v) else v for k, v in d.items()}


def _type_ok(kind: str, v) -> bool:
    if kind == "num":
        try:  # a TOML integer may exceed every float (1e400 written out): not a usable number
            return _is_num(v) and math.isfinite(float(v))
        except OverflowError:
            return False
    if kind == "str":
        return isinstance(v, str)
    if kind == "strlist":
        return isinstance(v, (list, tuple)) and all(isinstance(x, str) for x in v)
    raise AssertionError(kind)


def _problems(data) -> list[str]:
    """Every problem of a policy dict, one line each (empty: the policy is valid)."""
    out: list[str] = []
    if not isinstance(data, dict):
        return [f"must be a table of sections ({', '.join(_SECTIONS)})"]
    for section, content in data.items():
        if section not in _KEYS:
            out.append(f"[{section}]: unknown section; allowed sections: {', '.join(_SECTIONS)}")
            continue
        if not isinstance(content, dict):
            out.append(f"[{section}]: must be a table of keys; allowed keys: {', '.join(_KEYS[section])}")
            continue
        for key, v in content.items():
            spec = _KEYS[section].get(key)
            if spec is None:
                out.append(f"{section}.{key}: unknown key; allowed keys in [{section}]: "
                           f"{', '.join(_KEYS[section])}")
            elif not _type_ok(spec[0], v):
                out.append(f"{section}.{key}: wrong type ({type(v).__name__} {v!r}); allowed: {spec[1]}")
    if out:
        return out  # semantic checks need well-typed values

    def get(section, key):
        return (data.get(section) or {}).get(key)

    def bad(section, key, what=None):
        out.append(f"{section}.{key}: {what or 'out of range'} (got {get(section, key)!r}); "
                   f"allowed: {_KEYS[section][key][1]}")

    # objective
    kind = get("objective", "kind")
    if "objective" not in data:
        out.append(f"[objective]: missing; add kind = one of {', '.join(OBJECTIVES)}")
    elif kind is None:
        out.append(f"objective.kind: missing; allowed: one of {', '.join(OBJECTIVES)}")
    elif kind not in OBJECTIVES:
        bad("objective", "kind", "unknown objective")
    beta = get("objective", "beta")
    if beta is not None:
        if kind != "max_fbeta":
            out.append(f"objective.beta: only used with kind = \"max_fbeta\" (kind is {kind!r}); remove it")
        elif not beta > 0:
            bad("objective", "beta")
    pt = get("objective", "threshold_probability")
    if pt is not None and kind != "max_net_benefit":
        out.append("objective.threshold_probability: only used with kind = \"max_net_benefit\" "
                   f"(kind is {kind!r}); remove it")
    elif pt is not None and not 0 < pt < 1:
        bad("objective", "threshold_probability")
    if kind == "max_net_benefit" and pt is None:
        out.append("objective.threshold_probability: required with kind = \"max_net_benefit\"; "
                   "allowed: a number strictly between 0 and 1 (the risk at which flagging and "
                   "not flagging are judged equal)")

    # costs
    costs = data.get("costs")
    if costs is not None:
        fp = costs.get("false_positive")
        fn = costs.get("false_negative")
        col = costs.get("false_negative_column")
        ctp = costs.get("true_positive", 0.0)
        ctn = costs.get("true_negative", 0.0)
        if fp is None:
            out.append("costs.false_positive: missing; allowed: a number >= 0 (the cost of one false alarm)")
        elif fp < 0:
            bad("costs", "false_positive")
        if fn is not None and col is not None:
            out.append("costs: both false_negative and false_negative_column are given; "
                       "allowed: exactly one of the two")
        elif fn is None and col is None:
            out.append("costs: neither false_negative nor false_negative_column is given; "
                       "allowed: exactly one of the two (an amount per missed event, or a column "
                       "of per-case miss costs)")
        if fn is not None and fn < 0:
            bad("costs", "false_negative")
        if col is not None and not col.strip():
            bad("costs", "false_negative_column", "empty column name")
        if fp is not None and fp >= 0 and not fp > ctn:
            out.append(f"costs: false_positive ({fp!r}) must exceed true_negative ({ctn!r}): "
                       "otherwise flagging a non-event is never worse than passing it")
        if fn is not None and fn >= 0 and not fn > ctp:
            out.append(f"costs: false_negative ({fn!r}) must exceed true_positive ({ctp!r}): "
                       "otherwise missing an event is never worse than catching it")
        unit = costs.get("unit")
        if unit is not None and not unit.strip():
            bad("costs", "unit", "empty text")
    if kind == "min_cost" and costs is None:
        out.append("[costs]: required with kind = \"min_cost\"; give false_positive and "
                   "false_negative (or false_negative_column)")

    # deployment
    dep = data.get("deployment") or {}
    for key in ("prevalence", "prevalence_low", "prevalence_high"):
        v = dep.get(key)
        if v is not None and not 0 < v < 1:
            bad("deployment", key)
    lo, hi, pi = dep.get("prevalence_low"), dep.get("prevalence_high"), dep.get("prevalence")
    if (lo is None) != (hi is None):
        out.append("deployment: prevalence_low and prevalence_high go together; give both or neither")
    if lo is not None and hi is not None and all(0 < v < 1 for v in (lo, hi)):
        if lo > hi:
            out.append(f"deployment: prevalence_low ({lo!r}) exceeds prevalence_high ({hi!r})")
        elif pi is not None and 0 < pi < 1 and not lo <= pi <= hi:
            out.append(f"deployment.prevalence: {pi!r} lies outside the range "
                       f"[{lo!r}, {hi!r}] given by prevalence_low and prevalence_high")
        if dep.get("prevalence_source") is None:
            out.append("deployment.prevalence_source: required with a prevalence range; "
                       "allowed: a text naming where the range comes from")
    v = dep.get("cases_per_period")
    if v is not None and not v > 0:
        bad("deployment", "cases_per_period")
    v = dep.get("period")
    if v is not None and v not in PERIODS:
        bad("deployment", "period", "unknown period")
    v = dep.get("prevalence_source")
    if v is not None and not v.strip():
        bad("deployment", "prevalence_source", "empty text")

    # rules
    rules = data.get("rules") or {}
    for key in ("min_recall", "min_specificity", "max_flag_rate"):
        v = rules.get(key)
        if v is not None and not 0 <= v <= 1:
            bad("rules", key)
    for key in ("min_precision", "capacity_quantile"):
        v = rules.get(key)
        if v is not None and not 0 < v <= 1:
            bad("rules", key)
    v = rules.get("max_flagged_per_period")
    if v is not None and not v > 0:
        bad("rules", "max_flagged_per_period")
    v = rules.get("confidence")
    if v is not None and not 0.5 < v < 1:
        bad("rules", "confidence")
    if rules.get("capacity_quantile") is not None and rules.get("max_flagged_per_period") is None:
        out.append("rules.capacity_quantile: only used with max_flagged_per_period; add that rule "
                   "or remove capacity_quantile")
    active = [r for r in RULES if rules.get(r) is not None]
    if kind == "max_recall" and not any(r in active for r in _FLAG_LIMITING):
        out.append("objective.kind = \"max_recall\" needs a rule that limits flagging, or it flags "
                   "everyone; add one of: " + ", ".join(_FLAG_LIMITING))
    if kind == "max_precision" and "min_recall" not in active:
        out.append("objective.kind = \"max_precision\" needs rules.min_recall, or it flags only "
                   "the single top-scored case")

    # fairness
    fair = data.get("fairness")
    if fair is not None:
        m = fair.get("metric")
        if m is None:
            out.append(f"fairness.metric: missing; allowed: one of {', '.join(FAIRNESS_METRICS)}")
        elif m not in FAIRNESS_METRICS:
            bad("fairness", "metric", "unknown metric")
        g = fair.get("groups")
        if g is None:
            out.append("fairness.groups: missing; allowed: a list of group column names, e.g. [\"site\"]")
        elif len(g) == 0 or any(not x.strip() for x in g):
            bad("fairness", "groups", "empty list or empty name")
        elif len(set(g)) != len(g):
            bad("fairness", "groups", "a column is listed twice")
        t = fair.get("tolerance")
        if t is not None and not 0 <= t <= 1:
            bad("fairness", "tolerance")
    return out


# --------------------------------------------------------------------------- files

def loads_policy(text: str, *, source: str | None = None) -> Policy:
    """Parse a policy from TOML text (see the module docstring for the keys)."""
    try:
        data = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise PolicyError([f"not valid TOML: {exc}"], source=source) from None
    return Policy.from_dict(data, source=source)


def load_policy(path) -> Policy:
    """Read a policy file (TOML)."""
    p = Path(path)
    try:
        text = p.read_text(encoding="utf-8-sig")  # a byte-order mark (Windows editors) is not TOML
    except UnicodeDecodeError:
        raise PolicyError(["not UTF-8 text"], source=p.name) from None
    return loads_policy(text, source=p.name)


def dumps_policy(policy: Policy) -> str:
    """The policy as TOML text; ``loads_policy(dumps_policy(p)) == p``."""
    import tomli_w

    return tomli_w.dumps(policy.to_dict())


def save_policy(policy: Policy, path) -> None:
    """Write the policy file (TOML, UTF-8)."""
    Path(path).write_text(dumps_policy(policy), encoding="utf-8")


# --------------------------------------------------------------------------- resolution

@dataclass(frozen=True)
class ResolvedPolicy:
    """A policy with every default filled in against one dataset.

    ``sources`` maps ``"section.key"`` to ``"file"``, ``"default"`` or
    ``"data"``; ``notes`` explains values that came from the data.
    ``costs_given`` is False when the policy has no ``[costs]``: expected cost
    is then not reported and the cost-ratio analysis uses a false-alarm cost
    of 1 with free correct decisions.
    """

    policy: Policy
    objective: str
    beta: float
    threshold_probability: float | None
    costs_given: bool
    false_positive: float
    false_negative: float | None
    false_negative_column: str | None
    true_positive: float
    true_negative: float
    unit: str
    prevalence: float
    prevalence_low: float | None
    prevalence_high: float | None
    prevalence_source: str | None
    validation_prevalence: float
    cases_per_period: float | None
    period: str
    rules: dict[str, float]
    capacity_quantile: float | None
    confidence: float | None
    fairness: Fairness | None
    has_score_time: bool
    sources: dict[str, str]
    notes: dict[str, str]

    @property
    def case_dependent_costs(self) -> bool:
        return self.false_negative_column is not None

    @property
    def prevalence_shifted(self) -> bool:
        return not math.isclose(self.prevalence, self.validation_prevalence, rel_tol=1e-12)

    def values(self) -> dict[str, Any]:
        """Every resolved value by ``"section.key"``."""
        v = {
            "objective.kind": self.objective,
            "objective.beta": self.beta if self.objective == "max_fbeta" else None,
            "objective.threshold_probability": self.threshold_probability,
        }
        if self.costs_given:
            v.update({
                "costs.false_positive": self.false_positive,
                "costs.false_negative": self.false_negative,
                "costs.false_negative_column": self.false_negative_column,
                "costs.true_positive": self.true_positive,
                "costs.true_negative": self.true_negative,
                "costs.unit": self.unit,
            })
        v.update({
            "deployment.prevalence": self.prevalence,
            "deployment.prevalence_low": self.prevalence_low,
            "deployment.prevalence_high": self.prevalence_high,
            "deployment.prevalence_source": self.prevalence_source,
            "deployment.cases_per_period": self.cases_per_period,
            "deployment.period": self.period,
        })
        for r in RULES:
            v[f"rules.{r}"] = self.rules.get(r)
        v["rules.capacity_quantile"] = self.capacity_quantile
        v["rules.confidence"] = self.confidence
        if self.fairness is not None:
            v["fairness.metric"] = self.fairness.metric
            v["fairness.groups"] = list(self.fairness.groups)
            v["fairness.tolerance"] = self.fairness.tolerance
            v["fairness.reference"] = self.fairness.reference
        return v

    def to_dict(self) -> dict[str, dict[str, dict[str, Any]]]:
        """Nested ``section -> key -> {"value", "source"[, "note"]}`` (JSON-safe).

        Keys that are not set and have no default are left out.
        """
        out: dict[str, dict[str, dict[str, Any]]] = {}
        for key, value in self.values().items():
            if value is None:
                continue
            section, name = key.split(".", 1)
            entry = {"value": value, "source": self.sources.get(key, "default")}
            if key in self.notes:
                entry["note"] = self.notes[key]
            out.setdefault(section, {})[name] = entry
        return out


def _set(obj, name):
    return obj is not None and getattr(obj, name) is not None


def resolve_policy(policy: Policy, data) -> ResolvedPolicy:
    """Fill every default of ``policy`` against a :class:`~core.dataset.Dataset` or a Curve.

    Checks what only the data can tell: a ``false_negative_column`` needs
    per-case miss costs in the data (and, for a dataset, the same column);
    ``capacity_quantile`` needs a score-time column; ``max_flagged_per_period``
    needs ``cases_per_period`` or a score-time column (then the mean number of
    cases per period in the data is used, source ``"data"``); a prevalence
    range without ``prevalence`` must contain the validation prevalence; the
    fairness groups must be columns of the dataset.

    Raises
    ------
    PolicyError
        Listing every mismatch between policy and data.
    """
    from core.capacity import period_index
    from core.dataset import Dataset

    if not isinstance(policy, Policy):
        raise TypeError(f"policy must be a Policy, got {type(policy).__name__}")
    ds = data if isinstance(data, Dataset) else None
    curve = data.curve() if ds is not None else data
    problems: list[str] = []
    src: dict[str, str] = {}
    notes: dict[str, str] = {}

    obj = policy.objective
    src["objective.kind"] = "file"
    beta = DEFAULT_BETA if obj.beta is None else float(obj.beta)
    src["objective.beta"] = "default" if obj.beta is None else "file"
    if obj.threshold_probability is not None:
        src["objective.threshold_probability"] = "file"

    c = policy.costs
    costs_given = c is not None
    fp_cost = float(c.false_positive) if costs_given else 1.0
    fn_cost = None if not costs_given or c.false_negative is None else float(c.false_negative)
    col = c.false_negative_column if costs_given else None
    ctp = float(c.true_positive) if _set(c, "true_positive") else 0.0
    ctn = float(c.true_negative) if _set(c, "true_negative") else 0.0
    unit = c.unit if _set(c, "unit") else DEFAULT_UNIT
    if costs_given:
        for k in ("false_positive", "false_negative", "false_negative_column", "true_positive",
                  "true_negative", "unit"):
            src[f"costs.{k}"] = "file" if getattr(c, k) is not None else "default"
    if col is not None:
        if curve.event_cost_flagged is None:
            problems.append(f"costs.false_negative_column: the data hold no per-case miss costs; "
                            f"map the column {col!r} as the case cost")
        elif ds is not None:
            mapped = ds.mapping.case_cost if ds.kind == "rows" else ds.mapping.event_cost
            red = getattr(ds, "reduction", None)
            if red is not None and red.case_cost == col:
                mapped = col  # a table reduced from rows: its event costs sum the rows' column
            # arrays given in a notebook (Dataset.from_arrays / from_count_table) carry no
            # source column names, only the generic ones
            generic = mapped in ("case_cost", "event_cost") and ds.file_name is None
            if mapped is not None and mapped != col and not generic:
                problems.append(f"costs.false_negative_column: the policy names {col!r} but the data's "
                                f"case cost is the column {mapped!r}")
        if curve.event_cost_flagged is not None and curve.event_cost_total is not None \
                and curve.event_cost_total <= 0:
            problems.append(f"costs.false_negative_column: the events' miss costs in {col!r} sum to 0")

    dep = policy.deployment
    val_prev = float(curve.prevalence)
    if dep.prevalence is not None:
        pi = float(dep.prevalence)
        src["deployment.prevalence"] = "file"
    else:
        pi = val_prev
        src["deployment.prevalence"] = "data"
        notes["deployment.prevalence"] = "the validation prevalence"
        if dep.prevalence_low is not None and not dep.prevalence_low <= pi <= dep.prevalence_high:
            problems.append(f"deployment.prevalence: not given, and the validation prevalence "
                            f"{pi:.4g} lies outside the range [{dep.prevalence_low!r}, "
                            f"{dep.prevalence_high!r}]; give the expected deployment prevalence")
    for k in ("prevalence_low", "prevalence_high", "prevalence_source"):
        if getattr(dep, k) is not None:
            src[f"deployment.{k}"] = "file"
    period = dep.period if dep.period is not None else DEFAULT_PERIOD
    src["deployment.period"] = "file" if dep.period is not None else "default"

    has_time = ds is not None and ds.kind == "rows" and ds.score_time is not None
    cases = None if dep.cases_per_period is None else float(dep.cases_per_period)
    if cases is not None:
        src["deployment.cases_per_period"] = "file"
    elif has_time:
        try:
            ids, starts = period_index(ds.score_time, period)
        except InputError as exc:
            problems.append(f"score time: {exc}")
        else:
            w = ds.sample_weight
            total = float(ids.shape[0] if w is None else w.sum())
            cases = total / len(starts)
            src["deployment.cases_per_period"] = "data"
            notes["deployment.cases_per_period"] = (
                f"mean cases per {period} in the validation data ({len(starts):,} {period}s)")

    rules = policy.rules.active()
    for r in rules:
        src[f"rules.{r}"] = "file"
    cq = policy.rules.capacity_quantile
    conf = policy.rules.confidence
    src["rules.capacity_quantile"] = "file" if cq is not None else "default"
    src["rules.confidence"] = "file" if conf is not None else "default"
    if cq is not None and not has_time:
        problems.append("rules.capacity_quantile: needs a score-time column in the data to count "
                        "flagged cases per period; map one or remove capacity_quantile")
    if "max_flagged_per_period" in rules and cases is None and not has_time:
        problems.append("rules.max_flagged_per_period: needs deployment.cases_per_period or a "
                        "score-time column to know the cases per period")

    fair = policy.fairness
    if fair is not None:
        tol = DEFAULT_TOLERANCE if fair.tolerance is None else float(fair.tolerance)
        fair = Fairness(metric=fair.metric, groups=tuple(fair.groups), tolerance=tol,
                        reference=fair.reference if fair.reference is not None else "")
        src["fairness.metric"] = src["fairness.groups"] = "file"
        src["fairness.tolerance"] = "file" if policy.fairness.tolerance is not None else "default"
        src["fairness.reference"] = "file" if policy.fairness.reference is not None else "default"
        if ds is not None:
            missing = [g for g in fair.groups if g not in ds.groups]
            if missing:
                have = ", ".join(ds.groups) or "none"
                problems.append(f"fairness.groups: {', '.join(missing)} not among the data's group "
                                f"columns (mapped: {have})")
            elif fair.reference:
                known = set()
                for g in fair.groups:
                    known.update(str(x) for x in np.unique(ds.groups[g].astype(str)))
                if fair.reference not in known:
                    problems.append(f"fairness.reference: {fair.reference!r} is not a value of "
                                    f"{', '.join(fair.groups)}")
    if problems:
        raise PolicyError(problems)
    return ResolvedPolicy(
        policy=policy, objective=obj.kind, beta=beta,
        threshold_probability=None if obj.threshold_probability is None else float(obj.threshold_probability),
        costs_given=costs_given, false_positive=fp_cost, false_negative=fn_cost,
        false_negative_column=col, true_positive=ctp, true_negative=ctn, unit=unit,
        prevalence=pi, prevalence_low=dep.prevalence_low, prevalence_high=dep.prevalence_high,
        prevalence_source=dep.prevalence_source, validation_prevalence=val_prev,
        cases_per_period=cases, period=period, rules=rules, capacity_quantile=cq, confidence=conf,
        fairness=fair, has_score_time=has_time, sources=src, notes=notes,
    )
