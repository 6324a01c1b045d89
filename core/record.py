"""The decision record: schema ``fulcrum.decision/1``, its integrity, loading and checks.

A decision record is the machine-readable half of a threshold decision (the
memo is the human half, rendered from the record by :mod:`core.memo_pdf` and
:mod:`core.memo_markdown`). It is built by :func:`build_record` from an
:class:`core.decision.Analysis` and holds summaries only -- counts, rates,
intervals, binned score counts -- never a data row.

Top-level keys (the contract; more keys may follow them)::

    schema, created_utc, software_version, supersedes,
    threshold, threshold_interval, higher_is_riskier, threshold_origin,
    data, policy, counts, metrics, alternatives, stability, groups, fairness,
    calibration, reference, test_vectors, memo, integrity

and, beside them, ``threshold_entered`` (the number the user typed, when it
is not the distinct score itself), ``choice`` (how the point was chosen:
rules, binding rules, explanation), ``analysis`` (seed, replicates,
confidence, statements), ``curves`` (downsampled curve, bands and flags per
period for the figures) and ``cautions`` (the wording printed in the memo).

Encoding. JSON with NaN and infinities disallowed: an undefined number
(0/0) is ``null``; an infinite threshold or interval end is the string
``"inf"`` or ``"-inf"``; floats are written in their shortest exact form
(float64 ``repr``), so a record read back gives the same numbers.

Integrity. ``integrity.sha256`` is the SHA-256 of the *canonical JSON* of
every other top-level key: ``json.dumps(obj, sort_keys=True,
separators=(",", ":"), ensure_ascii=False, allow_nan=False)`` encoded as
UTF-8. ``integrity.sections`` holds the same digest of each top-level
key's value on its own, so an edited record is refused with the edited
section named. The digest detects edits; it does not prove who approved the
decision (signing is a separate, detached file).

Loading (:func:`loads_record`, :func:`load_record`) checks, in this order:
valid JSON without NaN/Infinity, the schema version, every required field
and its type (a :class:`RecordError` names the field as ``data.sha256``),
then the integrity digests (naming the changed sections).
:func:`restore_decision` turns a record back into the mapping, policy and
point it was made with; :func:`fingerprint_note` says plainly when the data
at hand differ from the record's.

Test vectors (:func:`threshold_test_vectors`): scores just either side of the
threshold, written at the production rounding the user states, each with
the decision the live system must make, so whoever implements ``score >=
threshold`` (or ``<=``) can check the rounding and the comparison.
"""

from __future__ import annotations

import dataclasses
import datetime as _dt
import hashlib
import json
import math
import re
from dataclasses import dataclass
from decimal import ROUND_CEILING, ROUND_FLOOR, Decimal
from pathlib import Path

import numpy as np

from core.choose import json_safe
from core.errors import InputError

__all__ = [
    "SCHEMA",
    "CONTRACT_KEYS",
    "DATA_KEYS",
    "REQUIRED_METRICS",
    "INTEGRITY_NOTE",
    "RecordError",
    "canonical_json",
    "digest",
    "seal",
    "dumps_record",
    "write_record",
    "loads_record",
    "load_record",
    "check_record",
    "without_timestamps",
    "threshold_test_vectors",
    "reference_summary",
    "build_record",
    "RestoredDecision",
    "restore_decision",
    "fingerprint_note",
]

SCHEMA = "fulcrum.decision/1"

#: Top-level keys every record holds, in the order they are written.
CONTRACT_KEYS = (
    "schema", "created_utc", "software_version", "supersedes",
    "threshold", "threshold_interval", "higher_is_riskier", "threshold_origin",
    "data", "policy", "counts", "metrics", "alternatives", "stability", "groups", "fairness",
    "calibration", "reference", "test_vectors", "memo", "integrity",
)

#: Keys of the ``data`` object.
DATA_KEYS = (
    "kind", "rows", "events", "prevalence", "sha256", "file_name", "score_column", "label_column",
    "positive_label", "weight_column", "weight_kind", "group_columns", "cluster_column",
    "score_time_column", "outcome_time_column", "outcome_horizon_days", "case_cost_column",
    "dropped_rows", "design", "production_decimals",
)

#: Metrics every record gives with an interval at validation and at deployment prevalence.
REQUIRED_METRICS = ("precision", "recall", "specificity", "npv", "flag_rate")

ORIGINS = ("data-derived", "pre-specified")

INTEGRITY_NOTE = (
    "The record's integrity digest (SHA-256 of its canonical JSON, and of each section) detects "
    "any edit made after it was written; it does not prove who approved the decision.")

_HEX64 = re.compile(r"^[0-9a-f]{64}$")
_REFERENCE_BINS = 20
_CURVE_POINTS = 300
_MAX_PERIODS = 750


class RecordError(InputError):
    """A decision record that cannot be read: ``field`` names the part at fault."""

    def __init__(self, field: str | None, problem: str, *, source: str | None = None):
        self.field = field
        where = "decision record" + (f" {source}" if source else "")
        what = f"field {field}: " if field else ""
        super().__init__(where, what + problem)


# =========================================================================== canonical JSON

def canonical_json(obj) -> bytes:
    """The canonical JSON bytes the digests are taken over (see the module docstring)."""
    return json.dumps(obj, sort_keys=True, separators=(",", ":"), ensure_ascii=False,
                      allow_nan=False).encode("utf-8")


def digest(obj) -> str:
    """SHA-256 (hex) of the canonical JSON of ``obj``."""
    return hashlib.sha256(canonical_json(obj)).hexdigest()


def _body(record: dict) -> dict:
    return {k: v for k, v in record.items() if k != "integrity"}


def seal(record: dict) -> dict:
    """The record with its ``integrity`` block (re)computed; other keys unchanged."""
    body = _body(record)
    out = dict(body)
    out["integrity"] = {
        "sha256": digest(body),
        "sections": {k: digest(v) for k, v in body.items()},
        "canonical_form": "JSON, keys sorted, separators ',' and ':', UTF-8, no NaN or Infinity",
        "note": INTEGRITY_NOTE,
    }
    return out


def dumps_record(record: dict) -> str:
    """The record as indented JSON text (NaN and infinities refused)."""
    try:
        return json.dumps(record, indent=2, ensure_ascii=False, allow_nan=False) + "\n"
    except ValueError as exc:  # a NaN or infinity slipped through: a bug, say where
        raise RecordError(None, f"cannot be written: {exc}") from None


def write_record(record: dict, path) -> None:
    """Write the record (UTF-8 JSON)."""
    Path(path).write_text(dumps_record(record), encoding="utf-8")


def without_timestamps(record: dict) -> dict:
    """The record without ``created_utc`` and ``integrity`` (which depends on it), to compare two."""
    return {k: v for k, v in record.items() if k not in ("created_utc", "integrity")}


# =========================================================================== checks

def _is_num(v) -> bool:
    return isinstance(v, (int, float)) and not isinstance(v, bool)


def _num_or_inf(v) -> bool:
    return _is_num(v) or v in ("inf", "-inf")


def _num_or_null(v) -> bool:
    return v is None or _is_num(v)


def _text_or_null(v) -> bool:
    return v is None or isinstance(v, str)


def _as_float(v) -> float:
    if v == "inf":
        return math.inf
    if v == "-inf":
        return -math.inf
    return float(v)


_CHECKS = {
    "number": (_is_num, "a number"),
    "number_or_inf": (_num_or_inf, 'a number, "inf" or "-inf"'),
    "number_or_null": (_num_or_null, "a number or null"),
    "text": (lambda v: isinstance(v, str), "text"),
    "text_or_null": (_text_or_null, "text or null"),
    "bool": (lambda v: isinstance(v, bool), "true or false"),
    "object": (lambda v: isinstance(v, dict), "an object"),
    "list": (lambda v: isinstance(v, list), "a list"),
    "any": (lambda v: True, "any value"),
    "int_or_null": (lambda v: v is None or (isinstance(v, int) and not isinstance(v, bool)),
                    "a whole number or null"),
    "text_list": (lambda v: isinstance(v, list) and all(isinstance(x, str) for x in v),
                  "a list of text"),
}

_METRIC_ENTRY = {"value": "number_or_null", "ci_low": "number_or_null",
                 "ci_high": "number_or_null", "method": "text"}

_SPEC = {
    "schema": "text",
    "created_utc": "text",
    "software_version": "text",
    "supersedes": "text_or_null",
    "threshold": "number_or_inf",
    "threshold_interval": {"low": "number_or_inf", "high": "number_or_inf", "closed": "text"},
    "higher_is_riskier": "bool",
    "threshold_origin": "text",
    "data": {
        "kind": "text", "rows": "number", "events": "number", "prevalence": "number",
        "sha256": "text", "file_name": "text_or_null", "score_column": "text",
        "label_column": "text_or_null", "positive_label": "any", "weight_column": "text_or_null",
        "weight_kind": "text_or_null", "group_columns": "text_list",
        "cluster_column": "text_or_null", "score_time_column": "text_or_null",
        "outcome_time_column": "text_or_null", "outcome_horizon_days": "number_or_null",
        "case_cost_column": "text_or_null", "dropped_rows": "number", "design": "text",
        "production_decimals": "int_or_null", "mapping": "object",
    },
    "policy": {"as_written": "object", "resolved": "object"},
    "counts": {"tp": "number", "fp": "number", "fn": "number", "tn": "number"},
    "metrics": {
        "validation": {m: _METRIC_ENTRY for m in REQUIRED_METRICS},
        "deployment": {m: _METRIC_ENTRY for m in REQUIRED_METRICS},
        "expected_cost": {"per_case": "number_or_null", "per_period": "number_or_null",
                          "unit": "text_or_null"},
        "optimism": {"apparent": "object", "cross_fitted": "object", "corrected": "object"},
    },
    "alternatives": "list",
    "stability": "object",
    "groups": "object",
    "fairness": "object",
    "calibration": "object",
    "reference": {"score_bins": {"edges": "list", "events": "list", "non_events": "list"}},
    "test_vectors": {"vectors": "list", "production_decimals": "int_or_null", "rule": "text"},
    "memo": "object",
    "integrity": {"sha256": "text", "sections": "object"},
}


def _walk(obj, spec, path: str, source):
    if isinstance(spec, dict):
        if not isinstance(obj, dict):
            raise RecordError(path, f"must be an object, got {_kind(obj)}", source=source)
        for key, sub in spec.items():
            p = f"{path}.{key}" if path else key
            if key not in obj:
                raise RecordError(p, "is missing", source=source)
            _walk(obj[key], sub, p, source)
        return
    ok, what = _CHECKS[spec]
    if not ok(obj):
        raise RecordError(path, f"must be {what}, got {_kind(obj)}", source=source)


def _count_ok(v) -> bool:
    return _is_num(v) and math.isfinite(v) and v >= 0


def _check_parts(record: dict, source) -> None:
    """The nested parts a recheck reads: counts, resolved policy, rules, groups, score bins.

    A record written by Fulcrum always passes; one whose content was rebuilt
    by hand (and resealed) is refused here, naming the field, rather than
    failing later inside the recheck.
    """
    def bad(path, what, v):
        raise RecordError(path, f"must be {what}, got {_kind(v)}", source=source)

    for k in ("tp", "fp", "fn", "tn"):
        if not _count_ok(record["counts"][k]):
            bad(f"counts.{k}", "a number >= 0", record["counts"][k])
    resolved = record["policy"]["resolved"]
    for section, entries in resolved.items():
        if not isinstance(entries, dict):
            bad(f"policy.resolved.{section}", "an object", entries)
        for key, e in entries.items():
            path = f"policy.resolved.{section}.{key}"
            if not isinstance(e, dict) or "value" not in e:
                bad(path, 'an object with a "value"', e)
            if section == "rules" and not _is_num(e["value"]):
                bad(path + ".value", "a number", e["value"])
    choice = record.get("choice")
    if choice is not None:
        if not isinstance(choice, dict):
            bad("choice", "an object", choice)
        rules = choice.get("rules", [])
        if not isinstance(rules, list):
            bad("choice.rules", "a list", rules)
        for i, r in enumerate(rules):
            if not isinstance(r, dict) or not isinstance(r.get("name"), str):
                bad(f"choice.rules[{i}]", 'an object with a text "name"', r)
            if not _num_or_null(r.get("margin")):
                bad(f"choice.rules[{i}].margin", "a number or null", r.get("margin"))
    rows = record["groups"].get("rows", [])
    if not isinstance(rows, list):
        bad("groups.rows", "a list", rows)
    for i, r in enumerate(rows):
        path = f"groups.rows[{i}]"
        if not isinstance(r, dict) or not isinstance(r.get("column"), str) or "group" not in r:
            bad(path, 'an object with a text "column" and a "group"', r)
        if "columns" in r and not _CHECKS["text_list"][0](r["columns"]):
            bad(path + ".columns", "a list of text", r["columns"])
        for k in ("tp", "fp", "fn", "tn"):
            if not _count_ok(r.get(k)):
                bad(f"{path}.{k}", "a number >= 0", r.get(k))
        values = r.get("values") or {}
        if not isinstance(values, dict) or not all(isinstance(v, dict) or v is None
                                                   for v in values.values()):
            bad(path + ".values", "an object of objects", values)
    bins = record["reference"]["score_bins"]
    for k in ("events", "non_events"):
        if not all(_count_ok(v) for v in bins[k]):
            bad(f"reference.score_bins.{k}", "a list of numbers >= 0", bins[k])
    if not all(_num_or_inf(v) for v in bins["edges"]):
        bad("reference.score_bins.edges", 'a list of numbers ("inf" / "-inf" at the ends)',
            bins["edges"])
    cal = record["reference"].get("calibration")
    if cal is not None and not isinstance(cal, dict):
        bad("reference.calibration", "an object", cal)
    overall = record["calibration"].get("overall")
    if overall is not None and not isinstance(overall, dict):
        bad("calibration.overall", "an object or null", overall)
    an = record.get("analysis")
    if an is not None:
        if not isinstance(an, dict):
            bad("analysis", "an object", an)
        for key, (check, what) in _ANALYSIS_SETTINGS.items():
            if key in an and not check(an[key]):
                bad(f"analysis.{key}", what, an[key])


def _kind(v) -> str:
    if v is None:
        return "null"
    if isinstance(v, bool):
        return "true/false"
    if isinstance(v, str):
        return f"text {v[:40]!r}"
    if _is_num(v):
        return f"the number {v!r}"
    if isinstance(v, list):
        return "a list"
    if isinstance(v, dict):
        return "an object"
    return type(v).__name__


def check_record(record, *, source: str | None = None, verify: bool = True) -> dict:
    """Check a parsed record (a dict); return it. Raises :class:`RecordError` naming the field.

    Checks the schema version, every required field and its type, the values
    with a fixed list (``threshold_origin``, ``threshold_interval.closed``,
    ``data.kind``, ``data.design``), the memo fields, and then (``verify``)
    the integrity digests.
    """
    from core.memo_fields import MemoFieldsError, check_memo_fields

    if not isinstance(record, dict):
        raise RecordError(None, f"must be a JSON object, got {_kind(record)}", source=source)
    if "schema" not in record:
        raise RecordError("schema", f"is missing (expected {SCHEMA!r}); this is not a Fulcrum "
                          "decision record", source=source)
    if record["schema"] != SCHEMA:
        raise RecordError("schema", f"is {record['schema']!r}; this version of Fulcrum reads "
                          f"{SCHEMA!r}", source=source)
    for key in CONTRACT_KEYS:
        if key not in record:
            raise RecordError(key, "is missing", source=source)
    _walk(record, _SPEC, "", source)
    _check_parts(record, source)
    if record["threshold_origin"] not in ORIGINS:
        raise RecordError("threshold_origin", f"is {record['threshold_origin']!r}; must be one of "
                          f"{', '.join(ORIGINS)}", source=source)
    if record["threshold_interval"]["closed"] not in ("low", "high"):
        raise RecordError("threshold_interval.closed", "must be 'low' or 'high'", source=source)
    if record["data"]["kind"] not in ("rows", "counts"):
        raise RecordError("data.kind", "must be 'rows' or 'counts'", source=source)
    if record["data"]["design"] not in ("cohort", "case-control"):
        raise RecordError("data.design", "must be 'cohort' or 'case-control'", source=source)
    if not _HEX64.match(record["data"]["sha256"]):
        raise RecordError("data.sha256", "must be 64 lowercase hexadecimal digits", source=source)
    sup = record["supersedes"]
    if sup is not None and not _HEX64.match(sup):
        raise RecordError("supersedes", "must be the 64-digit sha256 of an earlier record, or null",
                          source=source)
    try:
        check_memo_fields(record["memo"])
    except MemoFieldsError as exc:
        raise RecordError("memo", "; ".join(exc.problems), source=source) from None
    if verify:
        _verify(record, source)
    return record


def _verify(record: dict, source) -> None:
    integ = record["integrity"]
    sections = integ["sections"]
    body = _body(record)
    added = sorted(k for k in body if k not in sections)
    if added:
        raise RecordError(added[0], "was added after the record was written (it is not covered by "
                          "integrity.sections); the record is refused", source=source)
    changed = sorted(k for k in body if sections.get(k) != digest(body[k]))
    if changed:
        names = ", ".join(changed)
        raise RecordError(changed[0], f"was changed after the record was written: the sha256 of "
                          f"{'section' if len(changed) == 1 else 'sections'} {names} no longer "
                          "matches integrity.sections; the record is refused", source=source)
    removed = sorted(k for k in sections if k not in body)
    if removed:
        raise RecordError(removed[0], "was removed after the record was written; the record is "
                          "refused", source=source)
    if integ["sha256"] != digest(body):
        raise RecordError("integrity.sha256", "does not match the record's content; the record is "
                          "refused", source=source)


def _no_constants(name):
    raise ValueError(f"{name} is not allowed in a decision record (undefined numbers are null)")


def loads_record(text, *, source: str | None = None, verify: bool = True) -> dict:
    """Parse and check a record from JSON text or bytes (see :func:`check_record`)."""
    if isinstance(text, (bytes, bytearray)):
        try:
            text = bytes(text).decode("utf-8-sig")
        except UnicodeDecodeError:
            raise RecordError(None, "is not UTF-8 text", source=source) from None
    try:
        data = json.loads(text, parse_constant=_no_constants)
    except ValueError as exc:
        raise RecordError(None, f"is not valid JSON: {exc}", source=source) from None
    return check_record(data, source=source, verify=verify)


def load_record(path, *, verify: bool = True) -> dict:
    """Read and check a record file."""
    p = Path(path)
    return loads_record(p.read_bytes(), source=p.name, verify=verify)


# =========================================================================== test vectors

def _decide(score: float, threshold: float, higher_is_riskier: bool) -> bool:
    return score >= threshold if higher_is_riskier else score <= threshold


def threshold_test_vectors(threshold: float, *, higher_is_riskier: bool = True,
                 production_decimals: int | None = None, each_side: int = 2) -> dict:
    """Scores either side of ``threshold`` with the decision the live system must make.

    With ``production_decimals`` d the scores are the values at d decimals
    nearest the threshold: the threshold itself when it is such a value, and
    ``each_side`` grid steps below and above it. Without it they are the
    adjacent float64 values (``numpy.nextafter``). A case is flagged when
    ``score >= threshold`` (``<=`` when lower is riskier). An infinite
    threshold ("flag none") flags nothing; its vectors are three finite
    scores, none flagged.

    Returns ``{"rule", "production_decimals", "note", "vectors": [{"score",
    "text", "position", "flagged"}]}`` (``text`` is the score as the live
    system writes it).
    """
    t = float(threshold)
    if math.isnan(t):
        raise InputError("threshold", "is NaN")
    d = production_decimals
    if d is not None:
        if isinstance(d, bool) or not isinstance(d, (int, np.integer)) or not 0 <= int(d) <= 15:
            raise InputError("production_decimals", f"must be a whole number from 0 to 15, got {d!r}")
        d = int(d)
    op = ">=" if higher_is_riskier else "<="
    out = {"production_decimals": d, "vectors": []}
    if math.isinf(t):
        out["rule"] = "flag no case (the threshold is " + ("+inf" if t > 0 else "-inf") + ")"
        out["note"] = "Flag none: no finite score is flagged."
        scores = [-1.0, 0.0, 1.0] if d is None else [float(Decimal(x).quantize(Decimal(1).scaleb(-d)))
                                                     for x in ("-1", "0", "1")]
        for s in scores:
            text = repr(s) if d is None else f"{s:.{d}f}"
            out["vectors"].append({"score": s, "text": text, "position": "any",
                                   "flagged": _decide(s, t, higher_is_riskier)})
        return out
    out["rule"] = f"flag a case when its score {op} {t!r}"
    rows = []
    if d is None:
        below, above = [], []
        x = t
        for _ in range(each_side):
            x = float(np.nextafter(x, -np.inf))
            below.append(x)
        x = t
        for _ in range(each_side):
            x = float(np.nextafter(x, np.inf))
            above.append(x)
        for s in reversed(below):
            rows.append((s, repr(s), "below"))
        rows.append((t, repr(t), "at"))
        for s in above:
            rows.append((s, repr(s), "above"))
        out["note"] = ("No production rounding was stated: these are the float64 values adjacent to "
                       "the threshold. State the decimals the live system keeps for vectors it can "
                       "actually produce.")
    else:
        step = Decimal(1).scaleb(-d)
        dt = Decimal(repr(t))
        lo = dt.quantize(step, rounding=ROUND_FLOOR)
        hi = dt.quantize(step, rounding=ROUND_CEILING)
        on_grid = lo == dt
        grid_below = [lo - step * i for i in range(each_side, 0, -1)] if on_grid else \
            [lo - step * i for i in range(each_side - 1, -1, -1)]
        grid_above = [hi + step * i for i in range(1, each_side + 1)] if on_grid else \
            [hi + step * i for i in range(each_side)]
        for g in grid_below:
            rows.append((float(g), f"{g:.{d}f}", "below"))
        if on_grid:
            rows.append((t, f"{dt.quantize(step):.{d}f}", "at"))
        for g in grid_above:
            rows.append((float(g), f"{g:.{d}f}", "above"))
        if on_grid:
            out["note"] = (f"Scores at {d} decimal{'s' if d != 1 else ''}, as the live system keeps "
                           "them; the threshold is one of these values.")
        else:
            first = f"{hi:.{d}f}" if higher_is_riskier else f"{lo:.{d}f}"
            out["note"] = (f"The threshold {t!r} has more decimals than the {d} the live system keeps: "
                           f"the first flagged production value is {first}.")
    for s, text, pos in rows:
        out["vectors"].append({"score": s, "text": text, "position": pos,
                               "flagged": _decide(s, t, higher_is_riskier)})
    return out


# =========================================================================== reference

def reference_summary(dataset, *, n_bins: int = _REFERENCE_BINS) -> dict:
    """What a later drift check needs of the validation scores: binned counts, no rows.

    Bins: interior edges at the 1/n_bins ... (n_bins-1)/n_bins quantiles of
    the validation cases' scores (weighted inverted CDF: the smallest score
    whose cumulative weight reaches the level; with unit weights this is
    ``numpy.quantile(method="inverted_cdf")``), repeated edges merged, outer
    edges open (``"-inf"``, ``"inf"``); a score s falls
    in bin i when ``edges[i] <= s < edges[i+1]``. Per bin: weighted events,
    non-events and the weighted sum of scores (so mean score and event rate
    per bin give a reliability summary). Calibration summary (scores in
    [0, 1] only): mean score, event rate and Brier score (weighted mean of
    (s - y)^2) of the validation data.
    """
    s = np.asarray(dataset.y_score, dtype=np.float64)
    if dataset.kind == "counts":
        w_pos = np.asarray(dataset.events, dtype=np.float64)
        w_neg = np.asarray(dataset.non_events, dtype=np.float64)
    else:
        w = np.ones_like(s) if dataset.sample_weight is None else np.asarray(dataset.sample_weight)
        y = np.asarray(dataset.y_true, dtype=bool)
        w_pos = np.where(y, w, 0.0)
        w_neg = w - w_pos
    # weighted inverted-CDF quantiles: the smallest score whose cumulative mass reaches p
    order = np.argsort(s, kind="stable")
    cum = np.cumsum((w_pos + w_neg)[order])
    pos = np.searchsorted(cum, np.arange(1, n_bins) / n_bins * cum[-1], side="left")
    inner = np.unique(s[order][np.minimum(pos, s.size - 1)])
    lo_s, hi_s = float(s.min()), float(s.max())
    inner = inner[(inner > lo_s)]  # an edge at the minimum would leave the first bin empty
    b = np.searchsorted(inner, s, side="right")
    k = inner.size + 1
    ev = np.bincount(b, weights=w_pos, minlength=k)
    ne = np.bincount(b, weights=w_neg, minlength=k)
    ssum = np.bincount(b, weights=s * (w_pos + w_neg), minlength=k)
    edges = [-math.inf] + [float(x) for x in inner] + [math.inf]
    total = float(w_pos.sum() + w_neg.sum())
    in_unit = lo_s >= 0.0 and hi_s <= 1.0
    calib: dict = {"scores_in_unit_interval": bool(in_unit)}
    if in_unit:
        mean_s = float((s * (w_pos + w_neg)).sum() / total)
        brier = float((w_pos * (s - 1.0) ** 2 + w_neg * s ** 2).sum() / total)
        calib.update({"mean_score": mean_s, "event_rate": float(w_pos.sum() / total),
                      "brier": brier,
                      "method": "weighted means over the validation cases; Brier = mean (s - y)^2"})
    else:
        calib["note"] = "the scores are not probabilities (outside [0, 1]): no calibration summary"
    sizes = {}
    if dataset.kind == "rows" and dataset.sample_weight is not None and dataset.weight_kind == "sampling":
        w2 = np.asarray(dataset.sample_weight, dtype=np.float64) ** 2
        y = np.asarray(dataset.y_true, dtype=bool)
        sizes = {"effective_events": float(w_pos.sum() ** 2 / w2[y].sum()) if y.any() else None,
                 "effective_non_events": float(w_neg.sum() ** 2 / w2[~y].sum()) if (~y).any()
                 else None,
                 "effective_note": "Kish's effective sizes (sum w)^2 / sum w^2 of each class"}
    return json_safe({
        "score_bins": {
            "edges": edges, "events": ev, "non_events": ne, "score_sum": ssum,
            "rule": "bin i holds edges[i] <= score < edges[i+1]",
            "basis": (f"{k} bins at quantiles of the validation scores (inverted CDF), repeated "
                      "edges merged, outer bins open"),
        },
        "cases": total, "events": float(w_pos.sum()), "prevalence": float(w_pos.sum() / total),
        **sizes,
        "calibration": calib,
    })


# =========================================================================== building

def _iv_entry(iv, *, basis=None, method=None) -> dict:
    return json_safe({
        "value": iv.estimate, "ci_low": iv.low, "ci_high": iv.high,
        "method": method or iv.method_name, "confidence": iv.confidence,
        "basis": basis or iv.basis, "note": iv.note,
    })


def _point_entry(value, basis) -> dict:
    return json_safe({"value": value, "ci_low": None, "ci_high": None, "method": "point value",
                      "confidence": None, "basis": basis, "note": None})


def _scaled(entry: dict, factor: float, method_suffix: str) -> dict:
    e = dict(entry)
    for k in ("value", "ci_low", "ci_high"):
        if e[k] is not None:
            e[k] = e[k] * factor
    e["method"] = e["method"] + method_suffix
    if "bootstrap" in e and e["bootstrap"] is not None:
        b = dict(e["bootstrap"])
        for k in ("ci_low", "ci_high"):
            if b[k] is not None:
                b[k] = b[k] * factor
        e["bootstrap"] = b
    return e


def _complement(entry: dict, method_suffix: str) -> dict:
    e = dict(entry)
    v, lo, hi = e["value"], e["ci_low"], e["ci_high"]
    e["value"] = None if v is None else 1.0 - v
    e["ci_low"] = None if hi is None else 1.0 - hi
    e["ci_high"] = None if lo is None else 1.0 - lo
    e["method"] = e["method"] + method_suffix
    if e.get("bootstrap") is not None:
        b = dict(e["bootstrap"])
        b["ci_low"], b["ci_high"] = (None if b["ci_high"] is None else 1.0 - b["ci_high"],
                                     None if b["ci_low"] is None else 1.0 - b["ci_low"])
        e["bootstrap"] = b
    return e


def _boot(iv) -> dict:
    return json_safe({"ci_low": iv.low, "ci_high": iv.high, "method": iv.method_name,
                      "basis": iv.basis})


_OTHER_METRICS = ("accuracy", "balanced_accuracy", "f1", "fbeta", "mcc", "youden_j", "nne", "lift")


def _metrics(a) -> dict:
    """The ``metrics`` object from an Analysis."""
    rp = a.resolved
    p = a.choice.point
    ev = a.evidence
    boot_val = {iv.metric: iv for iv in ev.bootstrap if iv.basis == "validation"}
    boot_dep = {iv.metric: iv for iv in ev.bootstrap if iv.basis != "validation"}
    if not boot_dep and rp.sources.get("deployment.prevalence") == "data" and a.design == "cohort":
        # judged at the validation prevalence itself: the validation-mix replicates apply
        boot_dep = {m: iv for m, iv in boot_val.items() if m in ("precision", "npv", "flag_rate")}
    val: dict = {}
    for iv in a.validation_intervals:
        e = _iv_entry(iv)
        e["bootstrap"] = _boot(boot_val[iv.metric]) if iv.metric in boot_val else None
        val[iv.metric] = e
    val["fpr"] = _complement(val["specificity"], " (1 - specificity)")
    val["flagged_per_1000"] = _scaled(val["flag_rate"], 1000.0, " x 1,000")
    for m in _OTHER_METRICS:
        val[m] = _point_entry(p.validation[m], "validation")
    dep: dict = {}
    carried = "carried over from validation (label shift)"
    for m in ("recall", "specificity", "fpr"):
        e = dict(val[m])
        e["basis"] = carried
        dep[m] = e
    pi_basis = f"prevalence {rp.prevalence:.6g}"
    for iv in a.deployment_intervals:
        e = _iv_entry(iv)
        e["bootstrap"] = _boot(boot_dep[iv.metric]) if iv.metric in boot_dep else None
        dep[iv.metric] = e
    dep["flagged_per_1000"] = _scaled(dep["flag_rate"], 1000.0, " x 1,000")
    for m in _OTHER_METRICS:
        dep[m] = _point_entry(p.deployment[m], pi_basis)
    cost_boot = boot_dep.get("cost") or next((iv for iv in ev.bootstrap if iv.metric == "cost"), None)
    cost = {
        "per_case": p.cost_per_case, "per_period": p.cost_per_period,
        "unit": rp.unit if rp.costs_given else None,
        "period": rp.period,
        "per_1000": None if p.cost_per_case is None else p.cost_per_case * 1000.0,
        "ci_low": None, "ci_high": None, "method": None,
        "missed_event_cost": p.missed_cost,
        "formula": ("C_FN pi (1 - TPR) + C_FP (1 - pi) FPR + C_TP pi TPR + C_TN (1 - pi) (1 - FPR)"
                    if not rp.case_dependent_costs else
                    "pi x (missed events' miss costs / event total) + C_FP (1 - pi) FPR + ..."),
        "note": None if rp.costs_given else "the policy prices no errors: no expected cost",
    }
    if cost_boot is not None and p.cost_per_case is not None:
        cost.update(ci_low=cost_boot.low, ci_high=cost_boot.high, method=cost_boot.method_name)
    curve_m = {iv.metric: _iv_entry(iv) for iv in ev.curve}
    pi = rp.prevalence
    d = p.deployment
    tpr, fpr = p.validation["recall"], p.validation["fpr"]
    per1000 = {
        "cases": 1000.0, "events": 1000.0 * pi, "flagged": 1000.0 * d["flag_rate"],
        "true_alerts": 1000.0 * pi * tpr, "false_alerts": 1000.0 * (1 - pi) * fpr,
        "missed_events": 1000.0 * pi * (1 - tpr),
    }
    workload = {"prevalence": pi, "per_1000": per1000, "period": rp.period,
                "cases_per_period": rp.cases_per_period, "per_period": None,
                "cases_per_period_source": rp.sources.get("deployment.cases_per_period"),
                "capacity": p.capacity}
    if rp.cases_per_period is not None:
        f = rp.cases_per_period / 1000.0
        workload["per_period"] = {k: v * f for k, v in per1000.items() if k != "cases"} | {
            "cases": rp.cases_per_period}
    return json_safe({
        "validation_prevalence": rp.validation_prevalence, "deployment_prevalence": pi,
        "deployment_prevalence_source": rp.sources.get("deployment.prevalence"),
        "prevalence_range": None if rp.prevalence_low is None else
        {"low": rp.prevalence_low, "high": rp.prevalence_high, "source": rp.prevalence_source},
        "validation": val, "deployment": dep, "curve": curve_m, "expected_cost": cost,
        "workload": workload, "scenarios": list(p.scenarios), "optimism": _optimism(a),
    })


def _optimism(a) -> dict:
    opt = a.evidence.optimism
    table = {row["quantity"]: row for row in opt.table()}
    out = {
        "apparent": {q: table[q]["apparent"] for q in table},
        "cross_fitted": {q: table[q]["cross_fitted"] for q in table},
        "corrected": {q: table[q]["corrected"] for q in table},
        "statement": opt.statement,
        "cross_fit_method": None if opt.cross_fit is None else opt.cross_fit.method,
        "cross_fit_thresholds": None if opt.cross_fit is None else list(opt.cross_fit.thresholds),
        "correction_method": None if opt.harrell is None else opt.harrell.method,
        "policy_rule_reference": None,
    }
    if _hand_picked(a):
        # a threshold set by hand on these data: its selection cannot be re-run
        nan = {q: None for q in table}
        out["cross_fitted"] = dict(nan)
        out["corrected"] = dict(nan)
        ref = a.policy_rule_optimism
        out["statement"] = HAND_PICKED
        if ref is not None:
            cf, hc = ref
            out["policy_rule_reference"] = {
                "threshold": a.choice_policy_threshold, "apparent": hc.apparent,
                "cross_fitted": cf.values, "corrected": hc.corrected,
                "cross_fit_method": cf.method, "correction_method": hc.method}
    return out


def _point_summary(p) -> dict:
    d = p.deployment
    return json_safe({
        "label": p.label, "role": p.role, "threshold": p.threshold,
        "threshold_interval": {"low": p.interval_low, "high": p.interval_high, "closed": p.closed},
        "counts": p.counts, "recall": d["recall"], "precision": d["precision"],
        "specificity": d["specificity"], "flag_rate": d["flag_rate"],
        "flagged_per_1000": d["flagged_per_1000"], "flagged_per_period": p.flagged_per_period,
        "cost_per_case": p.cost_per_case, "cost_per_period": p.cost_per_period,
        "meets_rules": p.meets_rules,
        "rules_met": {r.name: r.met for r in p.rules},
    })


def _choice(a) -> dict:
    ch = a.choice
    p = ch.point
    sens = ch.sensitivity
    out = {
        "method": ("recommended by the policy" if ch.origin == "recommended"
                   else "set by the user"),
        "objective": ch.objective, "objective_label": ch.objective_label,
        "objective_value": p.objective_value,
        "meets_rules": p.meets_rules,
        "rules": [r.to_dict() for r in p.rules],
        "binding_rules": [r.name for r in p.rules if r.binding],
        "explanation": ch.explanation,
        "unconstrained_threshold": None if ch.unconstrained is None else ch.unconstrained.threshold,
        "policy_threshold": a.choice_policy_threshold,
        "cost_ratio": {"definition": sens.get("ratio_definition"),
                       "policy_ratio": sens.get("policy_ratio"),
                       "optimal_range": sens.get("optimal_range"),
                       "optimal_range_with_rules": sens.get("optimal_range_with_rules")},
        "cost_derived": ch.cost_derived,
        "warnings": list(ch.warnings),
        "infeasible": list(ch.infeasible),
        "flag_none": _point_summary(ch.baselines["flag_none"]),
        "flag_all": _point_summary(ch.baselines["flag_all"]),
    }
    return json_safe(out)


def _decided_only(ds):
    """The dataset as the decision sees it: its own score, without extra score columns (those go
    to the optional ``comparison`` key), so the record's mapping and fingerprint are those of
    the decided score alone and a recheck needs no other score column."""
    if ds.kind != "rows" or not ds.extra_scores:
        return ds
    m = dataclasses.replace(ds.mapping, extra_scores=(), extra_lower_is_riskier=())
    return dataclasses.replace(ds, mapping=m, extra_scores={}).with_fingerprint()


def _data(a) -> dict:
    ds = _decided_only(a.dataset)
    m = ds.mapping
    window = None
    if ds.kind == "rows" and ds.score_time is not None:
        st = ds.score_time[~np.isnat(ds.score_time)]
        if st.size:
            window = {"first_day": str(st.min().astype("datetime64[D]")),
                      "last_day": str(st.max().astype("datetime64[D]"))}
    c = ds.curve()
    out = {
        "kind": ds.kind, "rows": ds.n_rows, "events": c.n_events, "prevalence": c.prevalence,
        "sha256": ds.fingerprint, "file_name": ds.file_name, "sheet": a.sheet,
        "score_column": m.score, "label_column": m.label, "positive_label": m.positive_label,
        "weight_column": m.weight, "weight_kind": ds.weight_kind,
        "group_columns": list(m.groups), "cluster_column": m.cluster,
        "score_time_column": m.score_time, "outcome_time_column": m.outcome_time,
        "outcome_horizon_days": m.outcome_horizon_days, "case_cost_column": m.case_cost,
        "dropped_rows": int(ds.dropped_rows), "design": a.design,
        "production_decimals": a.production_decimals,
        "cases": c.n_total, "non_events": c.n_nonevents, "event_rows": ds.n_event_rows,
        "distinct_scores": int(c.n_points - 1), "score_time_window": window,
        "scores_were_float32": bool(ds.source_float32),
        "warnings": [{"code": w.code, "message": w.message, "column": w.column} for w in ds.warnings],
        "read_notes": list(ds.read_notes),
        "mapping": m.to_dict(),
        "reduction": _reduction(ds),
    }
    return json_safe(out)


def _reduction(ds) -> dict | None:
    """How a file was reduced to the count table (``Dataset.reduction``), or None.

    The source columns, the engine and its limits, the rows read and counted
    and the rounding with its largest effect; not the statement's FROM item
    (it names the file's full path) nor the seconds taken (the record must
    not depend on the machine's speed).
    """
    red = getattr(ds, "reduction", None)
    if red is None:
        return None
    d = red.to_dict()
    for k in ("sql", "seconds", "notes"):
        d.pop(k, None)
    if d.get("rounding") is not None:
        d["rounding"].pop("sql", None)
    d["statement"] = red.statement()
    return d


def _curves(a) -> dict:
    ds = a.dataset
    c = ds.curve()
    rp = a.resolved
    k = a.choice.point.index
    keep = [k] + [alt.index for alt in a.choice.alternatives]
    idx = np.unique(np.concatenate([c.downsample(_CURVE_POINTS, keep=keep, space="roc"),
                                    c.downsample(_CURVE_POINTS // 2, keep=keep, space="pr")]))
    mv = c.metrics()
    md = c.metrics(prevalence=rp.prevalence)
    pts = {
        "threshold": c.thresholds[idx], "tpr": mv["recall"][idx], "fpr": mv["fpr"][idx],
        "precision_validation": mv["precision"][idx], "precision_deployment": md["precision"][idx],
        "flag_rate_deployment": md["flag_rate"][idx],
        "cost_per_case": None if a.cost_table is None else
        a.cost_table["cost_per_case"].to_numpy()[idx],
    }
    bands = {}
    for which, b in a.evidence.bands.items():
        bands[which] = {"grid": b["grid"], "low": b["low"], "high": b["high"], "x": b["x"],
                        "y": b["y"], "confidence": a.confidence}
    per = None
    if a.period_flags is not None:
        df = a.period_flags
        vals = df.iloc[:, 0].to_numpy()
        per = {"period": rp.period, "n_periods": int(vals.size),
               "capacity": rp.rules.get("max_flagged_per_period"),
               "scaled_to": {"prevalence": rp.prevalence, "cases_per_period": rp.cases_per_period}}
        if vals.size <= _MAX_PERIODS:
            per["starts"] = [str(x) for x in df.index.to_numpy().astype("datetime64[s]")]
            per["flagged"] = vals
        else:
            per["starts"] = None
            per["flagged"] = None
            per["note"] = f"more than {_MAX_PERIODS} periods: the series is not stored"
    return json_safe({"points": pts, "point_index_note": "downsampled curve points, flag none first",
                      "bands": bands, "flags_per_period": per,
                      "roc_auc": c.roc_auc, "average_precision": c.average_precision})


HAND_PICKED = (
    "The threshold was set by hand after seeing these data, so its apparent values are "
    "optimistic by an amount no resampling can estimate (a hand choice cannot be re-run). "
    "For comparison, the policy's own rule on these data is given apparent, cross-fitted "
    "and corrected.")


def _hand_picked(a) -> bool:
    return a.threshold_origin == "data-derived" and a.threshold_entered is not None


def _optimism_statement(a) -> str:
    return HAND_PICKED if _hand_picked(a) else a.evidence.optimism.statement


def _statements(a) -> list:
    ev = a.evidence
    return [_optimism_statement(a) if s == ev.optimism.statement else s for s in ev.statements]


def _cautions(a) -> dict:
    from core import cautions

    return {"full": cautions.FULL, "label_shift": cautions.LABEL_SHIFT,
            "few_events": a.evidence.few_events, "accuracy_trap": cautions.ACCURACY_TRAP,
            "optimism": _optimism_statement(a), "integrity": INTEGRITY_NOTE}


def _utc_now() -> str:
    return _dt.datetime.now(_dt.timezone.utc).replace(microsecond=0).strftime("%Y-%m-%dT%H:%M:%SZ")


def build_record(analysis, *, memo_fields=None, supersedes: str | None = None,
                 created_utc: str | None = None, comparison=None) -> dict:
    """The sealed decision record of an :class:`core.decision.Analysis`.

    ``memo_fields`` (see :mod:`core.memo_fields`) become the ``memo`` object;
    ``supersedes`` is the ``integrity.sha256`` of the record this one
    replaces; ``created_utc`` defaults to now (ISO 8601, seconds, "Z").
    ``comparison`` (optional) is a :class:`core.compare.Comparison` of the
    dataset's score with its extra score columns (computed on the same
    dataset); it becomes the optional ``comparison`` key (covered by its own
    digest in ``integrity.sections``) and the memo's comparison section. The
    record's ``data`` (mapping, fingerprint) describe the decided score alone,
    extra score columns left out.
    """
    from core import __version__
    from core.memo_fields import check_memo_fields

    a = analysis
    if supersedes is not None:
        supersedes = str(supersedes).strip().lower()
        if not _HEX64.match(supersedes):
            raise InputError("supersedes", "must be the 64-digit sha256 (integrity.sha256) of the "
                             "earlier record")
    memo = check_memo_fields(memo_fields)
    c = a.dataset.curve()
    p = a.choice.point
    k = p.index
    s_k = float(c.thresholds[k])
    low, high, closed = c.interval(k)
    entered = a.threshold_entered
    rec = {
        "schema": SCHEMA,
        "created_utc": created_utc or _utc_now(),
        "software_version": __version__,
        "supersedes": supersedes,
        "threshold": s_k,
        "threshold_interval": {"low": low, "high": high, "closed": closed},
        "higher_is_riskier": bool(c.higher_is_riskier),
        "threshold_origin": a.threshold_origin,
        "data": _data(a),
        "policy": {"as_written": a.policy.to_dict(), "resolved": a.resolved.to_dict()},
        "counts": dict(p.counts),
        "metrics": _metrics(a),
        "alternatives": [_point_summary(x) for x in a.choice.alternatives],
        "stability": a.evidence.stability.to_dict() if a.evidence.stability is not None else
        {"status": "not computed", "reason": "no bootstrap replicates"},
        "groups": a.groups,
        "fairness": a.fairness,
        "calibration": a.calibration,
        "reference": reference_summary(a.dataset),
        "test_vectors": threshold_test_vectors(s_k, higher_is_riskier=c.higher_is_riskier,
                                     production_decimals=a.production_decimals),
        "memo": memo,
        "threshold_entered": None if entered is None or entered == s_k else entered,
        "choice": _choice(a),
        "analysis": {
            "seed": a.seed, "n_replicates": a.n_replicates, "confidence": a.confidence,
            "interval_method": a.interval_method, "folds": a.folds, "design": a.design,
            "calibrated": a.calibrated,
            "statements": _statements(a),
            "events_for_recall_half_width_0_05": a.evidence.events_for_recall_0_05,
        },
        "curves": _curves(a),
        "cautions": _cautions(a),
    }
    if comparison is not None:
        if comparison.data.get("fingerprint") != a.dataset.fingerprint:
            raise InputError("comparison", "was computed on other data than this decision's")
        rec["comparison"] = comparison.to_dict()
    rec = json_safe(rec)
    rec["threshold"] = json_safe(s_k)
    return seal(rec)


# =========================================================================== restoring

@dataclass(frozen=True)
class RestoredDecision:
    """What a record says was decided, ready to load back into the app or the CLI."""

    mapping: object
    policy: object
    threshold: float
    threshold_entered: float | None
    threshold_origin: str
    design: str
    production_decimals: int | None
    seed: int
    n_replicates: int
    confidence: float
    interval_method: str
    folds: int
    calibrated: bool
    memo_fields: dict
    data_sha256: str
    file_name: str | None
    sheet: str | None
    record_sha256: str


def _whole(v) -> bool:
    return isinstance(v, int) and not isinstance(v, bool)


#: The optional ``analysis`` settings a record may carry, with their checks.
_ANALYSIS_SETTINGS = {
    "seed": (lambda v: _whole(v) and v >= 0, "a whole number >= 0"),
    "n_replicates": (lambda v: _whole(v) and v >= 0, "a whole number >= 0"),
    "confidence": (lambda v: _is_num(v) and 0 < v < 1, "a number between 0 and 1"),
    "interval_method": (lambda v: isinstance(v, str), "text"),
    "folds": (lambda v: _whole(v) and v >= 2, "a whole number >= 2"),
    "calibrated": (lambda v: isinstance(v, bool), "true or false"),
}


def restore_decision(record: dict) -> RestoredDecision:
    """Mapping, policy, point and settings of a checked record (see :func:`check_record`).

    Raises :class:`RecordError` naming the field when the stored mapping or
    policy cannot be rebuilt.
    """
    from core.dataset import Mapping
    from core.memo_fields import check_memo_fields
    from core.policy import Policy

    try:
        mapping = Mapping.from_dict(record["data"]["mapping"])
    except (InputError, TypeError) as exc:
        raise RecordError("data.mapping", str(exc)) from None
    try:
        policy = Policy.from_dict(record["policy"]["as_written"])
    except InputError as exc:
        raise RecordError("policy.as_written", str(exc)) from None
    an = record.get("analysis") or {}
    if not isinstance(an, dict):
        raise RecordError("analysis", f"must be an object, got {_kind(an)}")
    for key, (check, what) in _ANALYSIS_SETTINGS.items():
        if key in an and not check(an[key]):
            raise RecordError(f"analysis.{key}", f"must be {what}, got {_kind(an[key])}")
    entered = record.get("threshold_entered")
    if entered is not None and not _num_or_inf(entered):
        raise RecordError("threshold_entered", f"must be a number or null, got {_kind(entered)}")
    sheet = record["data"].get("sheet")
    if not _text_or_null(sheet):
        raise RecordError("data.sheet", f"must be text or null, got {_kind(sheet)}")
    return RestoredDecision(
        mapping=mapping, policy=policy, threshold=_as_float(record["threshold"]),
        threshold_entered=None if entered is None else _as_float(entered),
        threshold_origin=record["threshold_origin"], design=record["data"]["design"],
        production_decimals=record["data"]["production_decimals"],
        seed=int(an.get("seed", 0)), n_replicates=int(an.get("n_replicates", 2000)),
        confidence=float(an.get("confidence", 0.95)),
        interval_method=str(an.get("interval_method", "wilson")), folds=int(an.get("folds", 5)),
        calibrated=bool(an.get("calibrated", False)),
        memo_fields=check_memo_fields(record["memo"]), data_sha256=record["data"]["sha256"],
        file_name=record["data"].get("file_name"), sheet=record["data"].get("sheet"),
        record_sha256=record["integrity"]["sha256"])


def fingerprint_note(record: dict, dataset) -> str | None:
    """None when ``dataset`` is the record's data; otherwise one plain sentence saying it is not."""
    want = record["data"]["sha256"]
    if dataset.fingerprint == want:
        return None
    name = record["data"].get("file_name") or "its data"
    return (f"These are not the data the record was made on: the record's data ({name}) have "
            f"fingerprint {want[:12]}…, the data loaded now have {dataset.fingerprint[:12]}… "
            "(different rows, values or column mapping). The record's numbers describe its own "
            "data, not these.")
