"""Recheck: does an approved threshold still hold on new validation scores?

:func:`recheck` takes a checked decision record (:func:`core.record.load_record`)
and new labelled scores (a :class:`core.dataset.Dataset`, or a file read
through the same intake with the record's mapping and event value, optionally
overridden when columns were renamed) and answers, in this order:

1. **Fit.** The new data must fit the record: the record's columns (named in
   the message when one is missing), its event value, its score direction,
   and scores in [0, 1] when the record's were.
2. **Label maturity** (:func:`core.maturity.dataset_maturity`) at the as-of
   date with the record's outcome horizon: open outcome windows are left out
   and the mature share reported; without a score time or horizon the
   statement says recent cases may look like non-events. With ``live=True``
   (the data were collected while the threshold was live) the model-effect
   statement says recall and precision are biased.
3. **Rule verdicts** at the record's threshold and direction, judged as the
   approval judged them (:func:`core.verdicts.judge_rules`: one-sided bounds
   at the record's ``confidence``, 0.95 when it had none; the record's
   deployment prevalence and volume; the capacity quantile over the new
   data's periods), overall and in every subgroup present in both (the
   capacity rule is a whole-system rule and is judged overall only).
4. **Old against new** for recall, specificity, precision, NPV and flag rate
   at the data's own mix: both proportions with Wilson intervals and the
   difference with Newcombe's hybrid score interval (Newcombe, Stat Med 1998,
   method 10; :func:`core.groups.newcombe_interval`).
5. **Drift** of the scores from the record's stored bins
   (:func:`core.drift.score_drift`) and of calibration
   (:func:`core.drift.calibration_drift`).
6. **The same policy now**: :func:`core.choose.choose` on the new data with
   the record's resolved policy (its deployment prevalence included) or a
   changed policy the user gives (``policy=``; what changed is listed key by
   key, old -> new), beside the approved threshold on the new data
   (:func:`core.choose.evaluate`), with the difference in threshold, counts,
   cost and flagged cases per period (median, quantile, maximum and share
   over capacity over the periods of the score-time column, against the
   approval's). A changed policy touches only this part: the verdicts of
   steps 3-5 stay judged against the record's policy (the approval).

:func:`build_recheck_record` turns the :class:`RecheckResult` into the sealed
recheck record (schema ``fulcrum.recheck/1``), which names the decision
record by its ``integrity.sha256`` and carries its own digests (the same
canonical JSON and :func:`core.record.seal` as the decision record). It holds
summaries only, never a data row. :func:`exit_code` maps the overall verdict
to the command line's status (0 every rule holds, 1 any fails or unclear).
"""

from __future__ import annotations

import datetime as _dt
import json
import math
from dataclasses import dataclass, field, replace
from pathlib import Path

import numpy as np

from core import intervals as _iv
from core.choose import json_safe
from core.errors import InputError
from core.record import RecordError, canonical_json, digest, seal  # noqa: F401 (canonical_json re-exported)

__all__ = [
    "COMPARED_METRICS",
    "SCHEMA",
    "VERDICT_BASIS",
    "GroupRecheck",
    "MetricComparison",
    "RecheckResult",
    "build_recheck_record",
    "dumps_recheck",
    "exit_code",
    "load_recheck",
    "loads_recheck",
    "policy_changes",
    "recheck",
    "recheck_without_timestamps",
    "rechoose",
    "record_policy",
    "write_recheck",
]

SCHEMA = "fulcrum.recheck/1"

#: metric -> (label, successes, trials) in terms of tp, fp, fn, tn.
COMPARED_METRICS = {
    "recall": ("recall (sensitivity)", lambda c: (c["tp"], c["tp"] + c["fn"])),
    "specificity": ("specificity", lambda c: (c["tn"], c["tn"] + c["fp"])),
    "precision": ("precision (PPV) at the data's own prevalence",
                  lambda c: (c["tp"], c["tp"] + c["fp"])),
    "npv": ("NPV at the data's own prevalence", lambda c: (c["tn"], c["tn"] + c["fn"])),
    "flag_rate": ("flag rate", lambda c: (c["tp"] + c["fp"], c["tp"] + c["fp"] + c["fn"] + c["tn"])),
}

COMPARISON_METHOD = ("Each side: the proportion at the approved threshold with its Wilson interval; "
                     "difference new - approval with Newcombe's hybrid score interval for two "
                     "independent proportions (Newcombe 1998, method 10). Precision and NPV here "
                     "are at each data set's own prevalence (the rule verdicts use the record's "
                     "deployment prevalence).")

GROUP_RULES = ("min_recall", "min_precision", "min_specificity", "max_flag_rate")


def _f(v) -> float:
    if v is None:
        return math.nan
    if v == "inf":
        return math.inf
    if v == "-inf":
        return -math.inf
    return float(v)


# =========================================================================== results

@dataclass(frozen=True)
class MetricComparison:
    """One metric at approval and now, each with its interval, and the difference."""

    metric: str
    label: str
    reference: float
    reference_low: float
    reference_high: float
    new: float
    new_low: float
    new_high: float
    difference: float
    low: float
    high: float
    confidence: float
    changed: bool

    def to_dict(self) -> dict:
        return json_safe(dict(self.__dict__))


@dataclass(frozen=True)
class GroupRecheck:
    """The verdicts of one group present in both the record and the new data."""

    column: str
    group: str
    verdicts: tuple
    counts: dict
    reference_counts: dict | None
    values: dict = field(default_factory=dict)
    reference_values: dict = field(default_factory=dict)

    @property
    def key(self) -> tuple[str, str]:
        return (self.column, self.group)

    def to_dict(self) -> dict:
        return json_safe({"column": self.column, "group": self.group, "counts": self.counts,
                          "reference_counts": self.reference_counts, "values": self.values,
                          "reference_values": self.reference_values,
                          "verdicts": [v.to_dict() for v in self.verdicts]})


@dataclass(frozen=True, eq=False)
class RecheckResult:
    """Everything a recheck found (see :func:`recheck`)."""

    record: dict
    dataset: object
    mature: object
    maturity: object
    live: bool
    model_effect: str | None
    threshold: float
    higher_is_riskier: bool
    confidence: float
    confidence_note: str
    counts: dict
    verdicts: tuple
    groups: tuple[GroupRecheck, ...]
    new_groups: tuple[str, ...]
    vanished_groups: tuple[str, ...]
    group_notes: tuple[str, ...]
    fairness: dict | None
    comparisons: tuple[MetricComparison, ...]
    drift: object
    calibration: object
    now: dict
    overall: str
    summary: str
    statements: tuple[str, ...]
    mapping_override: dict = field(default_factory=dict)
    overlaps: dict | None = None

    @property
    def record_sha256(self) -> str:
        return self.record["integrity"]["sha256"]

    @property
    def group_verdicts(self) -> dict:
        return {g.key: g.verdicts for g in self.groups}

    def verdict(self, name: str, group: tuple[str, str] | None = None):
        vs = self.verdicts if group is None else self.group_verdicts[group]
        for v in vs:
            if v.name == name:
                return v
        raise KeyError(name)


# =========================================================================== input

def _mapping(record: dict, mapping_override):
    from core.dataset import Mapping

    base = Mapping.from_dict(record["data"]["mapping"])
    if not mapping_override:
        return base, {}
    over = dict(mapping_override)
    known = set(base.to_dict())
    bad = sorted(set(over) - known)
    if bad:
        raise InputError("mapping override", f"has unknown field(s) {', '.join(bad)}; known "
                         f"fields are {', '.join(sorted(known))}")
    if "higher_is_riskier" in over and bool(over["higher_is_riskier"]) != base.higher_is_riskier:
        raise InputError("mapping override", "cannot change the score direction: the approved "
                         "threshold was set for " + ("higher" if base.higher_is_riskier else "lower")
                         + " scores meaning higher risk")
    if "groups" in over and over["groups"] is not None and not isinstance(over["groups"], str):
        over["groups"] = tuple(over["groups"])
    d = base.to_dict() | over
    return Mapping.from_dict(d), over


def _load(record, source, mapping):
    from core.dataset import Dataset
    from core.intake import load_dataset

    if isinstance(source, Dataset):
        return source
    try:
        return load_dataset(source, mapping)
    except InputError as exc:
        cols = ", ".join(f"{role} {col!r}" for role, col in
                         (("score", mapping.score), ("label", mapping.label)) if col)
        raise InputError("new data", f"{exc} -- the decision record maps {cols} (event value "
                         f"{mapping.positive_label!r}); if columns were renamed or the event value "
                         "changed, give the new ones (a mapping override: --score, --label, "
                         "--positive on the command line)") from None


def _check_fit(record, ds) -> None:
    d = record["data"]
    if ds.higher_is_riskier != bool(record["higher_is_riskier"]):
        raise InputError("score direction", "the new data say "
                         + ("higher" if ds.higher_is_riskier else "lower")
                         + " scores mean higher risk; the decision record's threshold is for "
                         + ("higher" if record["higher_is_riskier"] else "lower"))
    cal = (record.get("reference") or {}).get("calibration") or {}
    if cal.get("scores_in_unit_interval") and not ds.scores_in_unit_interval:
        lo, hi = ds.score_range
        s = np.asarray(ds.y_score)
        out = np.flatnonzero((s < 0) | (s > 1))
        raise InputError(d.get("score_column") or "score",
                         f"the new scores run from {lo:.6g} to {hi:.6g}, but the decision record's "
                         "scores were probabilities in [0, 1]: a different score scale (or model "
                         f"version) cannot be judged against this threshold; {out.size:,} rows lie "
                         "outside [0, 1]", out if ds.kind == "rows" else None)
    want = set(record["data"].get("group_columns") or [])
    have = set(ds.groups)
    if want and not (want & have):
        raise InputError("groups", "the new data have none of the record's group columns ("
                         + ", ".join(sorted(want)) + "); map them (a mapping override) so the "
                         "subgroup rules can be rechecked")


# =========================================================================== numbers

def _resolved_value(rp: dict, section: str, key: str):
    e = (rp.get(section) or {}).get(key)
    return None if e is None else e.get("value")


def _own_volume(record: dict, ds) -> bool:
    """True when the record's volume was its own data's and the new data can give theirs.

    A volume the policy file did not state was the approval data's mean cases
    per period (source "data"): judged like the approval, the new data then
    count at their own volume (more cases a day means more flags a day), which
    needs their score-time column.
    """
    e = (record["policy"]["resolved"].get("deployment") or {}).get("cases_per_period") or {}
    return (e.get("source") == "data" and ds is not None and ds.kind == "rows"
            and ds.score_time is not None)


def _record_policy(record: dict, ds=None):
    """The record's policy with its resolved deployment prevalence and volume fixed in.

    The volume is not fixed in when it was the approval data's own and ``ds``
    (the new data) has a score-time column: then it is the new data's own
    (see :func:`_own_volume`).
    """
    from core.policy import Policy

    rp = record["policy"]["resolved"]
    d = json.loads(json.dumps(record["policy"]["as_written"]))
    dep = dict(d.get("deployment") or {})
    keys = ("prevalence", "period") if _own_volume(record, ds) else \
        ("prevalence", "cases_per_period", "period")
    for key in keys:
        v = _resolved_value(rp, "deployment", key)
        if v is not None and dep.get(key) is None:
            dep[key] = v
    if dep.get("prevalence") is not None and dep.get("prevalence_low") is not None:
        lo, hi = dep.get("prevalence_low"), dep.get("prevalence_high")
        if not (lo <= dep["prevalence"] <= hi):
            dep.pop("prevalence_low", None)
            dep.pop("prevalence_high", None)
    d["deployment"] = dep
    return Policy.from_dict(d)


def _volume(record: dict, ds, period: str):
    """(cases per period the verdicts use, a note or None) -- see :func:`_own_volume`."""
    cpp = _resolved_value(record["policy"]["resolved"], "deployment", "cases_per_period")
    if not _own_volume(record, ds):
        return cpp, None
    from core.capacity import period_index

    ids, starts = period_index(ds.score_time, period)
    total = float(ids.shape[0] if ds.sample_weight is None else np.sum(ds.sample_weight))
    own = total / len(starts)
    return own, (f"Cases per {period}: the policy file gave none, so the approval counted at its "
                 f"own data's volume ({cpp:,.1f} per {period}); the new data count at theirs "
                 f"({own:,.1f} per {period} over {len(starts):,} {period}s).")


def _subset(ds, mask):
    """The cases (rows, or count-table lines) where ``mask`` holds."""
    if ds.kind == "rows":
        return ds.subset(mask)
    from core.dataset import Dataset

    m = np.asarray(mask, dtype=bool)

    def take(a):
        return None if a is None else np.asarray(a)[m]

    return Dataset.from_count_table(
        ds.y_score[m], ds.events[m], ds.non_events[m], event_cost=take(ds.event_cost),
        events_sq=take(ds.events_sq), non_events_sq=take(ds.non_events_sq),
        higher_is_riskier=ds.higher_is_riskier, file_name=ds.file_name, mapping=ds.mapping,
        groups={k: v[m] for k, v in ds.groups.items()})


def _counts_at(ds, t: float) -> tuple[dict, float | None, float | None]:
    """Counts at threshold t and, with sampling weights, Kish's effective class sizes."""
    c = ds.curve()
    p = c.at(t)
    n1 = n0 = None
    if ds.kind == "counts" and ds.events_sq is not None and ds.non_events_sq is not None:
        e, ne = np.asarray(ds.events, dtype=np.float64), np.asarray(ds.non_events, dtype=np.float64)
        n1 = float(_iv.effective_size_from_sums(e.sum(), np.sum(ds.events_sq))) if e.sum() > 0 \
            else 0.0
        n0 = float(_iv.effective_size_from_sums(ne.sum(), np.sum(ds.non_events_sq))) \
            if ne.sum() > 0 else 0.0
    if ds.kind == "rows" and ds.weight_kind == "sampling" and ds.sample_weight is not None:
        w = np.asarray(ds.sample_weight, dtype=np.float64)
        y = np.asarray(ds.y_true, dtype=bool)
        n1 = float(_iv.effective_size_from_sums(w[y].sum(), (w[y] ** 2).sum())) if y.any() else 0.0
        n0 = float(_iv.effective_size_from_sums(w[~y].sum(), (w[~y] ** 2).sum())) if (~y).any() \
            else 0.0
    return {k: float(v) for k, v in p.counts.items()}, n1, n0


def _period_counts(ds, t, rp_period, prevalence, cpp):
    from core.capacity import flags_per_period

    df = flags_per_period(ds.curve(), ds.y_score, ds.score_time, [t], period=rp_period,
                          sample_weight=ds.sample_weight, y_true=ds.y_true, prevalence=prevalence,
                          cases_per_period=cpp)
    return df.iloc[:, 0].to_numpy()


def _judge(ds, t, rules, *, confidence, prevalence, cpp, period, quantile, margins, overall=True):
    from core.verdicts import judge_rules

    counts, n1, n0 = _counts_at(ds, t)
    if not overall:
        rules = {k: v for k, v in rules.items() if k in GROUP_RULES}
    period_counts = None
    q = quantile
    if "max_flagged_per_period" in rules and q is not None:
        if ds.kind != "rows" or ds.score_time is None:
            raise InputError("max_flagged_per_period", "the record judges capacity on the "
                             "flagged cases per period; the new data need the score-time column "
                             f"{ds.mapping.score_time or '(none mapped)'}")
        period_counts = _period_counts(ds, t, period, prevalence, cpp)
    vs = judge_rules(counts["tp"], counts["fp"], counts["fn"], counts["tn"], rules,
                     confidence=confidence, prevalence=prevalence, cases_per_period=cpp,
                     period=period, capacity_quantile=q if period_counts is not None else None,
                     period_counts=period_counts, n_events=n1, n_nonevents=n0,
                     approval_margins=margins)
    return vs, counts


def _compare(ref_counts: dict, new_counts: dict, confidence: float) -> tuple[MetricComparison, ...]:
    from core.groups import newcombe_interval

    out = []
    for m, (label, fn) in COMPARED_METRICS.items():
        x0, n0 = fn(ref_counts)
        x1, n1 = fn(new_counts)
        rlo, rhi = _iv.wilson_interval(x0, n0, confidence)
        nlo, nhi = _iv.wilson_interval(x1, n1, confidence)
        lo, hi = newcombe_interval(x1, n1, x0, n0, confidence)
        r = x0 / n0 if n0 > 0 else math.nan
        v = x1 / n1 if n1 > 0 else math.nan
        changed = bool(np.isfinite(lo) and np.isfinite(hi) and (lo > 0 or hi < 0))
        out.append(MetricComparison(metric=m, label=label, reference=r, reference_low=float(rlo),
                                    reference_high=float(rhi), new=v, new_low=float(nlo),
                                    new_high=float(nhi), difference=v - r, low=float(lo),
                                    high=float(hi), confidence=confidence, changed=changed))
    return tuple(out)


def _group_values(row) -> dict:
    if not row:
        return {}
    out = {}
    for m in ("recall", "precision", "specificity", "flag_rate"):
        v = (row.get("values") or {}).get(m)
        if v is not None:
            out[m] = {"value": v.get("estimate"), "low": v.get("low"), "high": v.get("high"),
                      "method": v.get("method")}
    return json_safe(out)


def _reference_bins(record):
    from core.drift import score_bins

    ref = record["reference"]
    b = ref["score_bins"]
    return score_bins(b["edges"], b["events"], b["non_events"],
                      events_size=ref.get("effective_events"),
                      non_events_size=ref.get("effective_non_events"))


def _point_now(p, rp_period) -> dict:
    return json_safe({
        "threshold": p.threshold,
        "threshold_interval": {"low": p.interval_low, "high": p.interval_high, "closed": p.closed},
        "counts": p.counts, "recall": p.deployment.get("recall"),
        "precision": p.deployment.get("precision"), "flag_rate": p.deployment.get("flag_rate"),
        "cost_per_case": p.cost_per_case, "cost_per_period": p.cost_per_period,
        "flagged_per_period": p.flagged_per_period, "period": rp_period,
        "per_period": None if p.capacity is None else dict(p.capacity),
        "meets_rules": p.meets_rules, "rules_met": {r.name: r.met for r in p.rules},
    })


# =========================================================================== a changed policy

#: The wording, in record, memo and page, of what a changed policy does and does not touch.
VERDICT_BASIS = ("The rule verdicts at the approved threshold are judged against the decision "
                 "record's policy (the approval); a changed policy only changes what would be "
                 "chosen now.")


def _flat_resolved(resolved: dict) -> dict:
    """``section.key -> value`` of a resolved policy's nested dict (its ``to_dict()``)."""
    return {f"{sec}.{key}": e.get("value") for sec, entries in (resolved or {}).items()
            for key, e in (entries or {}).items()}


def _same(a, b) -> bool:
    if isinstance(a, (int, float)) and isinstance(b, (int, float)) \
            and not isinstance(a, bool) and not isinstance(b, bool):
        return math.isclose(float(a), float(b), rel_tol=1e-12, abs_tol=0.0)
    if isinstance(a, (list, tuple)) and isinstance(b, (list, tuple)):
        return list(a) == list(b)
    return a == b


def policy_changes(record: dict, policy, dataset) -> list[dict]:
    """What a policy changes against the record's resolved policy, key by key.

    Both sides are compared as resolved values (``section.key``, defaults
    included): the record's as stored at approval, the given policy as
    resolved on ``dataset`` (the new data) -- so a policy file that leaves the
    deployment prevalence out shows the change to the new data's own
    prevalence. Returns ``[{"key", "old", "new", "source"}]`` in key order
    (``None`` where a side does not set the key; ``source`` is where the new
    value comes from). An empty list means the same policy.
    """
    from core.policy import resolve_policy

    old = _flat_resolved(record["policy"]["resolved"])
    rp = resolve_policy(policy, dataset)
    new = {k: (list(v) if isinstance(v, tuple) else v) for k, v in rp.values().items()}
    own = _own_volume(record, dataset) and \
        rp.sources.get("deployment.cases_per_period") == "data"
    out = []
    for key in sorted(set(old) | set(new)):
        a, b = old.get(key), new.get(key)
        if a is None and b is None:
            continue
        if key == "deployment.cases_per_period" and own:
            continue  # each side its own data's volume, as the approval did
        if a is not None and b is not None and _same(a, b):
            continue
        out.append({"key": key, "old": a, "new": b,
                    "source": None if b is None else rp.sources.get(key, "default")})
    return json_safe(out)


def _as_policy(policy):
    """A Policy from a Policy or a policy file's nested dict (validated, PolicyError names it)."""
    from core.policy import Policy

    if isinstance(policy, Policy):
        return policy
    if isinstance(policy, dict):
        return Policy.from_dict(policy, source="given for the recheck")
    raise InputError("policy", f"must be a Policy or a policy file's nested dict, got "
                     f"{type(policy).__name__}")


def record_policy(record: dict, dataset=None):
    """The record's policy with its resolved deployment prevalence and volume fixed in.

    This is the policy the recheck uses for "what the same policy would choose
    now" unless another is given, and the one a policy editor starts from.
    Give the new data as ``dataset`` to leave out a volume that was the
    approval data's own (the new data then count at theirs).
    """
    return _record_policy(record, dataset)


def _change_text(c: dict) -> str:
    def v(x):
        if x is None:
            return "not set"
        if isinstance(x, float):
            return f"{x:.6g}"
        if isinstance(x, list):
            return "[" + ", ".join(map(str, x)) + "]"
        return str(x)

    return f"{c['key']} {v(c['old'])} -> {v(c['new'])}"


_PER_PERIOD_KEYS = ("median", "quantile", "max", "mean", "share_over")


def _per_period(approval_cap, approved_cap, chosen_cap, basis: str) -> dict | None:
    """Flagged cases per period at approval, at the approved threshold now and at the choice now.

    Each side is the distribution over the periods of its own data (median,
    the policy's quantile, maximum, mean, share of periods over capacity), as
    :meth:`core.capacity.PeriodFlags.summary` gives it; the differences are
    new - approval at the approved threshold, and choice now - approved
    threshold now on the new data. Sides with another period length are not
    differenced.
    """
    if approval_cap is None and approved_cap is None:
        return None

    def diff(x, y):
        if not x or not y or x.get("period") != y.get("period"):
            return None
        return {k: (None if x.get(k) is None or y.get(k) is None else y[k] - x[k])
                for k in _PER_PERIOD_KEYS}

    rows = [{"point": "approved threshold, approval data", **(approval_cap or {})},
            {"point": "approved threshold, new data", **(approved_cap or {})}]
    if chosen_cap is not None:
        rows.append({"point": basis + ", new data", **chosen_cap})
    note = ("Flags per period from the score-time column: every period from the first to the "
            "last counts (periods without cases as 0), rescaled to the policy's deployment "
            "prevalence and volume as at approval; the quantile is empirical (no sampling "
            "bound); the share over capacity is against the capacity of the policy each row is "
            "judged with (the approval row: the record's).")
    if approval_cap and approved_cap and approval_cap.get("period") != approved_cap.get("period"):
        note += (f" The approval counted per {approval_cap.get('period')}, the policy used now per "
                 f"{approved_cap.get('period')}: those two are not differenced.")
    return json_safe({"rows": rows, "new_minus_approval": diff(approval_cap, approved_cap),
                      "chosen_minus_approved": diff(approved_cap, chosen_cap), "note": note})


def _choice_now(record, ds, policy=None, t=None, *, changes=None) -> dict:
    """What the policy (the record's unless ``policy`` is given) would choose on ``ds``."""
    from core.choose import choose, evaluate
    from core.policy import resolve_policy

    changed = policy is not None
    if policy is None:
        policy = _record_policy(record, ds)
    if t is None:
        t = _f(record["threshold"])
    if changes is None:
        changes = policy_changes(record, policy, ds) if changed else []
    changed = bool(changes)
    rp = resolve_policy(policy, ds)
    at_approved = evaluate(ds, policy, t).point
    ch = choose(ds, policy)
    m = record["metrics"]
    wl = m.get("workload") or {}
    per = wl.get("per_period") or {}
    approval = json_safe({
        "threshold": record["threshold"], "counts": record["counts"],
        "recall": m["deployment"]["recall"]["value"], "precision": m["deployment"]["precision"]["value"],
        "flag_rate": m["deployment"]["flag_rate"]["value"],
        "cost_per_case": m["expected_cost"].get("per_case"),
        "cost_per_period": m["expected_cost"].get("per_period"),
        "flagged_per_period": per.get("flagged"), "period": wl.get("period"),
        "per_period": wl.get("capacity"),
    })
    if changed:
        note = ("A changed policy applied to the new data (" + "; ".join(_change_text(c)
                for c in changes) + f"; deployment prevalence now {rp.prevalence:.4g}). "
                + VERDICT_BASIS)
    else:
        note = ("The record's resolved policy (its deployment prevalence "
                f"{rp.prevalence:.4g} included) applied to the new data.")
    out = {"policy_note": note, "policy_source": "changed" if changed else "record",
           "policy": policy.to_dict(), "changes": list(changes), "verdict_basis": VERDICT_BASIS,
           "approval": approval, "approved_threshold_now": _point_now(at_approved, rp.period),
           "chosen_now": None if ch.point is None else _point_now(ch.point, rp.period),
           "unconstrained_now": None if ch.unconstrained is None
           else _point_now(ch.unconstrained, rp.period),
           "explanation": ch.explanation, "infeasible": list(ch.infeasible)}
    n = ch.point if ch.point is not None else ch.unconstrained
    out["difference_basis"] = ("the policy's choice now" if ch.point is not None else
                               "the objective's best point now, ignoring the rules (none meets "
                               "them all)")
    basis = "chosen now" if ch.point is not None else "objective's best now (rules ignored)"
    out["flags_per_period"] = _per_period(approval.get("per_period"), at_approved.capacity,
                                          None if n is None else n.capacity, basis)
    if n is not None:
        a = at_approved

        def diff(x, y):
            return None if x is None or y is None else y - x

        out["difference"] = json_safe({
            "threshold": diff(t, float(n.threshold)),
            "flagged": diff(a.counts["tp"] + a.counts["fp"], n.counts["tp"] + n.counts["fp"]),
            "tp": diff(a.counts["tp"], n.counts["tp"]), "fp": diff(a.counts["fp"], n.counts["fp"]),
            "cost_per_case": diff(a.cost_per_case, n.cost_per_case),
            "cost_per_period": diff(a.cost_per_period, n.cost_per_period),
            "flagged_per_period": diff(a.flagged_per_period, n.flagged_per_period),
            "same_point": bool(a.index == n.index),
        })
    else:
        out["difference"] = None
    which = "The changed policy" if changed else "The same policy"
    if ch.point is not None and ch.point.index == at_approved.index:
        out["statement"] = f"{which} picks the approved point on the new data."
    elif ch.point is not None:
        out["statement"] = (f"On the new data {which[0].lower() + which[1:]} would choose "
                            f"threshold {float(ch.point.threshold)!r} instead of {t!r}.")
    else:
        out["statement"] = (f"On the new data no threshold meets every rule of "
                            f"{'the changed' if changed else 'the'} policy: "
                            + " ".join(ch.infeasible))
        if ch.unconstrained is not None:
            out["statement"] += (f" Ignoring the rules, its objective would pick threshold "
                                 f"{float(ch.unconstrained.threshold)!r} (approved: {t!r}).")
    return json_safe(out)


def rechoose(result: RecheckResult, policy=None) -> RecheckResult:
    """The same recheck with "what the policy would choose now" redone for ``policy``.

    ``policy`` (a :class:`core.policy.Policy` or a policy file's nested dict,
    validated) replaces the record's resolved policy for that part only; None
    goes back to the record's. The rule verdicts, subgroups, drift and
    calibration stay as they were: they are judged against the record's policy
    (the approval). Nothing is re-read or re-judged.
    """
    pol = None if policy is None else _as_policy(policy)
    now = _choice_now(result.record, result.mature, pol, result.threshold)
    return replace(result, now=now)


# =========================================================================== overlapping findings

def _shortfall(v) -> float:
    """How far a failing verdict's favourable bound lies on the wrong side of its limit."""
    if v.name.startswith("min_"):
        return v.limit - (v.upper if v.upper is not None else v.value)
    return (v.lower if v.lower is not None else v.value) - v.limit


def _where(key) -> str:
    return f"{key[0]} {key[1]}"


#: At most this many failing groups (the worst) are compared pairwise for overlaps.
_MAX_OVERLAP = 12


def _event_weights(ds) -> np.ndarray:
    """The (weighted) events of every row or count-table line."""
    if ds.kind == "counts":
        return np.asarray(ds.events, dtype=np.float64)
    y = np.asarray(ds.y_true, dtype=np.float64)
    return y if ds.sample_weight is None else y * np.asarray(ds.sample_weight, dtype=np.float64)


def _group_overlaps(mature, t, rules, kw, groups) -> dict | None:
    """Failing groups of different columns that share cases: which finding leads.

    Groups of two columns overlap (a site's cases fall into every age band),
    so one drifted site can make age bands fail too. For every failing group
    A and every failing group B of another column, B is judged again on its
    cases outside A (the same rules, bounds and confidence). The *lead* is the
    failing group whose removal clears the most failures elsewhere (ties: the
    larger shortfall below the limit); the others are reported with the share
    of their events that are the lead's and their verdicts without the lead's
    cases. None when fewer than two columns have a failing group or no
    removal clears any failure. With many failing groups the worst
    ``_MAX_OVERLAP`` (largest shortfall) are compared (pairs grow as its square).
    """
    failing = [g for g in groups if any(v.verdict == "fails" for v in g.verdicts)]
    if len({g.column for g in failing}) < 2:
        return None
    # the worst failures first; at most _MAX_OVERLAP of them are compared pairwise
    failing = sorted(failing, key=lambda g: -max(_shortfall(v) for v in g.verdicts
                                                 if v.verdict == "fails"))[:_MAX_OVERLAP]
    masks = {g.key: np.asarray(mature.groups[g.column], dtype=object) == g.group for g in failing}
    ev_w = _event_weights(mature)
    trials = {}
    for a in failing:
        for b in failing:
            if b.column == a.column:
                continue
            names = {v.name: rules[v.name] for v in b.verdicts if v.verdict == "fails"}
            inside = masks[b.key]
            both = inside & masks[a.key]
            outside = inside & ~masks[a.key]
            ev_b = float(ev_w[inside].sum())
            ev_ab = float(ev_w[both].sum())
            if outside.any():
                vs, _ = _judge(_subset(mature, outside), t, names, margins=None, overall=False, **kw)
            else:
                vs = ()
            cleared = bool(vs) and all(v.verdict != "fails" for v in vs)
            trials[(a.key, b.key)] = {
                "group": f"{b.column} = {b.group}", "column": b.column, "value": b.group,
                "share_of_events": ev_ab / ev_b if ev_b > 0 else math.nan,
                "share_of_cases": float(both.sum()) / float(inside.sum()) if mature.kind == "rows"
                else None,
                "verdicts_without_lead": [v.to_dict() for v in vs], "cleared": cleared,
                "at_approval": {v.name: (b.reference_values.get(v.name.split("_", 1)[1]) or {})
                                .get("value") for v in b.verdicts if v.verdict == "fails"}}
    best, best_key = None, None
    for a in failing:
        n_cleared = sum(1 for (ka, _), tr in trials.items() if ka == a.key and tr["cleared"])
        worst = max(_shortfall(v) for v in a.verdicts if v.verdict == "fails")
        key = (n_cleared, worst)
        if best_key is None or key > best_key:
            best, best_key = a, key
    if best is None or best_key[0] == 0:
        return None
    others = [tr for (ka, _), tr in trials.items() if ka == best.key]
    lead_fails = [v for v in best.verdicts if v.verdict == "fails"]
    lead = f"{best.column} {best.group}"
    head = "; ".join(f"{RULE_SHORT.get(v.name, v.name)} {_pct_text(v.name, v.value)}"
                     for v in lead_fails)
    cleared = [o for o in others if o["cleared"]]
    kept = [o for o in others if not o["cleared"]]

    def without(o, verdict=True):
        return ", ".join(f"{RULE_SHORT.get(v['name'], v['name'])} "
                         f"{_pct_text(v['name'], v['value'])}"
                         + (f" ({v['verdict']})" if verdict else "")
                         for v in o["verdicts_without_lead"])

    def name(o):
        return o["group"].replace(" = ", " ")

    text = (f"The leading subgroup finding is {lead} ({head}, fails). The failures at "
            + _and([name(o) for o in others])
            + f" overlap its cases ({_and([_share(o['share_of_events']) for o in others])} of "
            f"their events are {best.group}'s).")
    if cleared:
        text += (f" Without {best.group}'s cases: " + "; ".join(
            f"{name(o)} {without(o)}" for o in cleared)
            + (" -- it does not fail on its own." if len(cleared) == 1 else
               " -- they do not fail on their own."))
    for o in kept:
        then = [f"{RULE_SHORT.get(k, k)} {_pct_text(k, x)}" for k, x in o["at_approval"].items()
                if x is not None and k in RULE_SHORT]
        text += (f" {name(o)} still fails without {best.group}'s cases "
                 f"({without(o, False)}): a finding of its own"
                 + (f", there at approval already ({', '.join(then)} then)." if then else "."))
    one = len(cleared) == 1
    short = (f"the failure{'' if one else 's'} at {_and([name(o) for o in cleared])} overlap"
             f"{'s' if one else ''} {lead} (without its cases {'it does' if one else 'they do'} "
             "not fail)")
    return json_safe({"lead": f"{best.column} = {best.group}", "lead_column": best.column,
                      "lead_value": best.group, "others": others, "statement": text,
                      "short": short, "method": (
                          "each failing group of another column judged again on its cases "
                          "outside the lead group, with the same rules, bounds and confidence; "
                          "the lead is the failing group whose removal clears the most other "
                          "failures (ties: the larger shortfall)")})


RULE_SHORT = {"min_recall": "recall", "min_precision": "precision",
              "min_specificity": "specificity", "max_flag_rate": "flag rate"}


def _pct_text(name, x) -> str:
    if x is None or not np.isfinite(x):
        return "undefined"
    return f"{100 * x:.1f} %"


def _share(x) -> str:
    return "—" if x is None or not np.isfinite(x) else f"{100 * x:.0f} %"


def _and(items) -> str:
    items = list(items)
    if len(items) <= 1:
        return "".join(items)
    return ", ".join(items[:-1]) + " and " + items[-1]


# =========================================================================== the pipeline

def recheck(record: dict, new_dataset_or_source, *, as_of=None, live: bool = False,
            mapping_override: dict | None = None, policy=None, n_replicates: int = 2000,
            seed: int = 0, progress=None) -> RecheckResult:
    """Recheck a decision record's threshold on new labelled scores (see the module docstring).

    Parameters
    ----------
    record : dict
        A decision record, checked here again (:func:`core.record.check_record`,
        integrity included) -- a :class:`core.record.RecordError` when it fails.
    new_dataset_or_source : Dataset, path, bytes or RawTable
        A Dataset is used as it is (its direction must match the record's);
        anything else is read with the record's mapping (and event value),
        updated by ``mapping_override``.
    as_of : date, text or None
        The as-of date of label maturity (None: today).
    live : bool
        The user's declaration that the new data were collected while the
        approved threshold was live.
    mapping_override : dict, optional
        Mapping fields that differ from the record's (renamed columns).
    policy : Policy or dict, optional
        A changed policy for "what the policy would choose now" only (a
        :class:`core.policy.Policy` or a policy file's nested dict, validated
        by :mod:`core.policy`; a :class:`core.policy.PolicyError` lists its
        problems). None: the record's resolved policy. The rule verdicts stay
        judged against the record's policy (the approval); the record's
        ``policy_now`` says which policy was used and what changed
        (:func:`policy_changes`). :func:`rechoose` redoes that part alone.
    n_replicates, seed, progress
        For the subgroup table of the new data (:func:`core.groups.subgroup_report`:
        per-group recall, precision and specificity with intervals, cluster
        bootstrap when a cluster column is mapped, and the policy's fairness
        criterion); replicate r uses ``default_rng([seed, r])``.
    """
    from core.calibration import calibration_report
    from core.drift import bin_dataset, calibration_drift, score_drift
    from core.maturity import dataset_maturity, model_effect_statement
    from core.record import check_record
    from core.verdicts import DEFAULT_CONFIDENCE, overall_verdict, verdict_summary

    check_record(record)
    policy_now = None if policy is None else _as_policy(policy)
    mapping, over = _mapping(record, mapping_override)
    ds = _load(record, new_dataset_or_source, mapping)
    _check_fit(record, ds)
    horizon = record["data"].get("outcome_horizon_days")
    mat = dataset_maturity(ds, as_of, horizon_days=horizon)
    if mat.n_mature == 0:
        raise InputError("as_of", "no new case is mature: " + mat.statement)
    mature = ds if mat.n_mature == mat.n_cases else _subset(ds, mat.mask)
    t = _f(record["threshold"])
    rp = record["policy"]["resolved"]
    conf_v = _resolved_value(rp, "rules", "confidence")
    confidence = DEFAULT_CONFIDENCE if conf_v is None else float(conf_v)
    conf_note = ("the record's confidence" if conf_v is not None else
                 f"the record set no confidence: {DEFAULT_CONFIDENCE:g}")
    rules = {k: float(v["value"]) for k, v in (rp.get("rules") or {}).items()
             if k not in ("capacity_quantile", "confidence")}
    prevalence = _resolved_value(rp, "deployment", "prevalence")
    period = _resolved_value(rp, "deployment", "period") or "day"
    cpp, volume_note = _volume(record, mature, period)
    quantile = _resolved_value(rp, "rules", "capacity_quantile")
    margins = {r["name"]: r.get("margin") for r in (record.get("choice") or {}).get("rules", [])
               if r.get("margin") is not None}
    kw = {"confidence": confidence, "prevalence": prevalence, "cpp": cpp, "period": period,
          "quantile": quantile}
    verdicts, counts = _judge(mature, t, rules, margins=margins, **kw)
    if volume_note:
        verdicts = tuple(replace(v, reason=v.reason + " " + volume_note)
                         if v.name == "max_flagged_per_period" else v for v in verdicts)

    # subgroups present in both
    ref_rows = (record.get("groups") or {}).get("rows") or []
    ref_by = {(str(r["column"]), str(r["group"])): r for r in ref_rows
              if len(r.get("columns") or [r["column"]]) == 1}
    groups, new_only, notes = [], [], []
    for col, values in mature.groups.items():
        vals = np.asarray(values, dtype=object)
        present = sorted({v for v in vals.tolist() if v is not None})
        for g in present:
            key = (col, g)
            if key not in ref_by:
                new_only.append(f"{col} = {g}")
                continue
            sub = _subset(mature, vals == g)
            gv, gc = _judge(sub, t, rules, margins=None, overall=False, **kw)
            r = ref_by[key]
            groups.append(GroupRecheck(column=col, group=g, verdicts=gv, counts=gc,
                                       reference_counts={k: r[k] for k in ("tp", "fp", "fn", "tn")}))
    fairness = None
    if mature.groups:
        from core.groups import subgroup_report

        rep = subgroup_report(mature, t, policy=_record_policy(record, mature), confidence=confidence,
                              n_replicates=n_replicates, seed=seed, progress=progress).to_dict()
        fairness = rep.get("fairness")
        rows = {(str(x["column"]), str(x["group"])): x for x in rep["rows"]
                if len(x.get("columns") or [x["column"]]) == 1}
        groups = [replace(g, values=_group_values(rows.get(g.key)),
                          reference_values=_group_values(ref_by.get(g.key))) for g in groups]
    have = {g.key for g in groups}
    gone = tuple(f"{c} = {g}" for c, g in ref_by if (c, g) not in have
                 and f"{c} = {g}" not in new_only)
    if "max_flagged_per_period" in rules and groups:
        notes.append("Flagged cases per period is a whole-system rule: it is judged over all "
                     "cases, not per group.")

    # old against new
    ref_counts = {k: float(record["counts"][k]) for k in ("tp", "fp", "fn", "tn")}
    comparisons = _compare(ref_counts, counts, 0.95)

    drift = score_drift(_reference_bins(record), bin_dataset(mature, record["reference"]["score_bins"]
                                                             ["edges"]), confidence=0.95)
    cal_new = calibration_report(mature, confidence=float(record["calibration"].get("confidence")
                                                          or 0.95))
    cal = calibration_drift(record["calibration"], cal_new)
    now = _choice_now(record, mature, policy_now, t)

    for g in groups:  # a failure that was there at approval already is not a change
        for v in g.verdicts:
            ref = (g.reference_values.get(v.name.split("_", 1)[1]) or {}).get("value")
            if v.verdict == "fails" and v.name in ("min_recall", "min_specificity") \
                    and ref is not None and ref < v.limit:
                notes.append(f"{RULE_SHORT[v.name].capitalize()} at {g.column} {g.group} was "
                             f"below the limit {_pct_text(v.name, v.limit)} at approval already "
                             f"({_pct_text(v.name, ref)} on the approval data; the approval "
                             "judged the rule overall): this failure is not a change since "
                             "approval.")
    overlaps = _group_overlaps(mature, t, rules, kw, groups)
    if overlaps is not None:  # the leading finding first, in the summary and the tables
        lead = (overlaps["lead_column"], overlaps["lead_value"])
        groups = sorted(groups, key=lambda g: (g.column != lead[0], g.key != lead))
    gmap = {g.key: g.verdicts for g in groups}
    overall = overall_verdict(verdicts, gmap)
    summary = verdict_summary(verdicts, gmap)
    if overlaps is not None:
        summary += "; " + overlaps["short"]
    st = [mat.statement]
    eff = model_effect_statement(live)
    if eff:
        st.append(eff)
    if mature.n_events < 100:
        st.append(f"Only {mature.n_events:,.0f} mature events: every number here is shaky, and "
                  "verdicts may stay unclear (validation studies want at least 100 events).")
    return RecheckResult(
        record=record, dataset=ds, mature=mature, maturity=mat, live=bool(live),
        model_effect=eff, threshold=t, higher_is_riskier=bool(record["higher_is_riskier"]),
        confidence=confidence, confidence_note=conf_note, counts=counts, verdicts=tuple(verdicts),
        groups=tuple(groups), new_groups=tuple(new_only), vanished_groups=gone,
        group_notes=tuple(notes), fairness=fairness, comparisons=comparisons, drift=drift, calibration=cal, now=now,
        overall=overall, summary=summary, statements=tuple(st), mapping_override=over,
        overlaps=overlaps)


def exit_code(result: RecheckResult) -> int:
    """0 when every rule holds (overall and in every group), 1 when any fails or is unclear."""
    return 0 if result.overall == "holds" else 1


# =========================================================================== the recheck record

def _utc_now() -> str:
    return _dt.datetime.now(_dt.UTC).replace(microsecond=0).strftime("%Y-%m-%dT%H:%M:%SZ")


def _data_summary(r: RecheckResult) -> dict:
    ds, m = r.dataset, r.mature
    c = m.curve()
    window = None
    if ds.kind == "rows" and ds.score_time is not None:
        st = ds.score_time[~np.isnat(ds.score_time)]
        if st.size:
            window = {"first_day": str(st.min().astype("datetime64[D]")),
                      "last_day": str(st.max().astype("datetime64[D]"))}
    return json_safe({
        "file_name": ds.file_name, "sha256": ds.fingerprint, "kind": ds.kind, "rows": ds.n_rows,
        "mature_rows": m.n_rows, "mature_sha256": m.fingerprint, "events": c.n_events,
        "non_events": c.n_nonevents, "prevalence": c.prevalence,
        "score_time_window": window, "mapping": ds.mapping.to_dict(),
        "mapping_override": r.mapping_override,
        "warnings": [w.message for w in ds.warnings],
    })


def build_recheck_record(result: RecheckResult, *, created_utc: str | None = None,
                         signature: dict | None = None) -> dict:
    """The sealed recheck record (schema ``fulcrum.recheck/1``) of a :class:`RecheckResult`.

    ``signature``: the decision record's signature check
    (:meth:`core.signing.Verification.to_dict`), carried as the key
    ``signature`` when one was made.
    """
    from core import __version__, cautions

    r = result
    rec = r.record
    body = {
        "schema": SCHEMA,
        "created_utc": created_utc or _utc_now(),
        "software_version": __version__,
        "decision_record": {
            "sha256": r.record_sha256, "created_utc": rec["created_utc"],
            "data_sha256": rec["data"]["sha256"], "data_file_name": rec["data"].get("file_name"),
            "memo_title": (rec.get("memo") or {}).get("title"),
        },
        "threshold": rec["threshold"], "higher_is_riskier": r.higher_is_riskier,
        "confidence": r.confidence, "confidence_note": r.confidence_note,
        "data": _data_summary(r),
        "as_of": r.maturity.as_of_text,
        "maturity": r.maturity.to_dict(),
        "collected_while_live": r.live, "model_effect": r.model_effect,
        "overall_verdict": r.overall, "summary": r.summary,
        "counts": r.counts,
        "rules": [v.to_dict() for v in r.verdicts],
        "groups": {"compared": [g.to_dict() for g in r.groups], "new": list(r.new_groups),
                   "vanished": list(r.vanished_groups), "notes": list(r.group_notes),
                   "fairness": r.fairness, "overlaps": r.overlaps},
        "comparison": {"method": COMPARISON_METHOD,
                       "metrics": [c.to_dict() for c in r.comparisons]},
        "drift": r.drift.to_dict(),
        "calibration_drift": r.calibration.to_dict(),
        "policy_now": r.now,
        "statements": list(r.statements),
        "cautions": {"full": cautions.FULL, "label_shift": cautions.LABEL_SHIFT},
    }
    if signature is not None:
        body["signature"] = signature
    return seal(json_safe(body))


def recheck_without_timestamps(rec: dict) -> dict:
    """A recheck record without ``created_utc`` and ``integrity``, to compare two."""
    return {k: v for k, v in rec.items() if k not in ("created_utc", "integrity")}


def dumps_recheck(rec: dict) -> str:
    """Indented JSON text (NaN and infinities refused)."""
    return json.dumps(rec, indent=2, ensure_ascii=False, allow_nan=False) + "\n"


def write_recheck(rec: dict, path) -> None:
    Path(path).write_text(dumps_recheck(rec), encoding="utf-8")


def _no_constants(name):
    raise ValueError(f"{name} is not allowed in a recheck record")


def loads_recheck(text, *, source: str | None = None) -> dict:
    """Parse a recheck record and verify its schema and integrity (RecordError names the field)."""
    if isinstance(text, (bytes, bytearray)):
        try:
            text = bytes(text).decode("utf-8-sig")
        except UnicodeDecodeError:
            raise RecordError(None, "is not UTF-8 text", source=source) from None
    try:
        rec = json.loads(text, parse_constant=_no_constants)
    except ValueError as exc:
        raise RecordError(None, f"is not valid JSON: {exc}", source=source) from None
    if not isinstance(rec, dict) or rec.get("schema") != SCHEMA:
        got = rec.get("schema") if isinstance(rec, dict) else None
        raise RecordError("schema", f"is {got!r}; a recheck record has {SCHEMA!r}", source=source)
    integ = rec.get("integrity")
    if not isinstance(integ, dict) or "sha256" not in integ:
        raise RecordError("integrity", "is missing", source=source)
    fresh = seal(rec)["integrity"]
    sections = integ.get("sections") or {}
    changed = sorted(set(fresh["sections"]) ^ set(sections)) + sorted(
        k for k in fresh["sections"] if k in sections and sections[k] != fresh["sections"][k])
    if changed or fresh["sha256"] != integ["sha256"]:
        name = changed[0] if changed else "integrity.sha256"
        raise RecordError(name, "was changed after the recheck record was written; it is refused",
                          source=source)
    return rec


def load_recheck(path) -> dict:
    p = Path(path)
    return loads_recheck(p.read_bytes(), source=p.name)
