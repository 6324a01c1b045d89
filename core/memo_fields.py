"""The analyst's memo fields: what only people can say about a threshold decision.

The decision record's ``memo`` object and the memo-fields file (TOML) share
one set of keys, so a file saved from the app's Memo page feeds
``fulcrum pick --memo-fields`` and the other way round::

    title = "Deterioration alert threshold, first quarter review"
    model_name = "..."
    model_version = "2.1"
    model_artefact_hash = "sha256:..."
    training_window = "..."
    validation_independence = "temporal"   # temporal, external or same period
    outcome_definition = "..."
    outcome_horizon = "..."
    population = "..."
    exclusions = "..."
    intended_use = "..."
    out_of_scope_use = "..."
    limitations = "..."
    regulatory_status = "..."
    author = "..."
    independent_reviewer = "..."
    rationale = "..."

    [monitoring]
    cadence = "..."
    triggers = "..."
    owner = "..."
    rollback = "..."

    [sign_off]
    name = "..."
    role = "..."
    date = 2025-07-01                      # a TOML date or "YYYY-MM-DD"
    decision = "approved with conditions"  # approved, approved with conditions, not approved, deferred
    conditions = "..."

Every field is text and may be left empty (the memo then says "not stated";
an empty regulatory status is printed as a question to answer, never
assumed). :func:`check_memo_fields` fills the missing keys with "" and
raises one :class:`MemoFieldsError` listing every problem: an unknown key, a
value that is not text, a validation-independence or sign-off decision
outside its list, a date that is not a calendar date.
"""

from __future__ import annotations

import datetime as _dt
import tomllib
from pathlib import Path

from core.errors import InputError

__all__ = [
    "FIELDS",
    "NESTED",
    "LABELS",
    "INDEPENDENCE",
    "DECISIONS",
    "MemoFieldsError",
    "default_memo_fields",
    "check_memo_fields",
    "loads_memo_fields",
    "load_memo_fields",
    "dumps_memo_fields",
    "save_memo_fields",
]

#: Top-level text fields, in the memo's order.
FIELDS = (
    "title", "model_name", "model_version", "model_artefact_hash", "training_window",
    "validation_independence", "outcome_definition", "outcome_horizon", "population", "exclusions",
    "intended_use", "out_of_scope_use", "limitations", "regulatory_status", "author",
    "independent_reviewer", "rationale",
)

#: Nested tables and their text fields.
NESTED = {
    "monitoring": ("cadence", "triggers", "owner", "rollback"),
    "sign_off": ("name", "role", "date", "decision", "conditions"),
}

#: Allowed values of ``validation_independence`` (empty: not stated).
INDEPENDENCE = ("temporal", "external", "same period")

#: Allowed values of ``sign_off.decision`` (empty: not yet decided).
DECISIONS = ("approved", "approved with conditions", "not approved", "deferred")

#: Label and one-line help of every field ("section.key" for nested ones).
LABELS = {
    "title": ("Title", "The memo's title; empty: 'Threshold memo' and the model name."),
    "model_name": ("Model name", "The score's name as the organisation knows it."),
    "model_version": ("Model version", "The version that produced these scores."),
    "model_artefact_hash": ("Model artefact hash", "A hash of the model file, e.g. sha256:…"),
    "training_window": ("Training window", "The period (or data set) the model was trained on."),
    "validation_independence": (
        "Validation data independence",
        "temporal (a later period), external (another site or population) or same period."),
    "outcome_definition": ("Outcome definition", "What counts as an event."),
    "outcome_horizon": ("Outcome horizon", "Within how long after the score an event counts."),
    "population": ("Population", "Who is scored."),
    "exclusions": ("Exclusions", "Who is not scored, or was left out of the validation."),
    "intended_use": ("Intended use", "What a flag triggers, and for whom."),
    "out_of_scope_use": ("Out-of-scope use", "Uses this threshold was not validated for."),
    "limitations": ("Limitations", "Known weaknesses of the score or the validation."),
    "regulatory_status": (
        "Regulatory status",
        "As stated by the responsible person (e.g. whether this is a regulated device function or "
        "a high-risk use); Fulcrum does not assume it."),
    "author": ("Author", "Who prepared this analysis."),
    "independent_reviewer": ("Independent reviewer", "Who checked it, not involved in the work."),
    "rationale": ("Rationale", "Why this threshold, in the analyst's words."),
    "monitoring.cadence": ("Monitoring cadence", "How often the threshold is rechecked."),
    "monitoring.triggers": ("Monitoring triggers", "What result starts a review."),
    "monitoring.owner": ("Monitoring owner", "Who runs the recheck and acts on it."),
    "monitoring.rollback": ("Rollback", "What happens if the threshold must be withdrawn."),
    "sign_off.name": ("Signed off by", "Name of the accountable person."),
    "sign_off.role": ("Role", "Their role (e.g. clinical lead, model-risk officer)."),
    "sign_off.date": ("Date", "YYYY-MM-DD."),
    "sign_off.decision": ("Decision", "approved, approved with conditions, not approved or deferred."),
    "sign_off.conditions": ("Conditions", "Conditions attached to the decision."),
}


class MemoFieldsError(InputError):
    """Memo fields with one or more problems; ``problems`` lists each as one line."""

    def __init__(self, problems, *, source: str | None = None):
        self.problems = tuple(problems)
        where = f"memo fields file {source}" if source else "memo fields"
        n = len(self.problems)
        super().__init__(where, f"{n} problem{'s' if n != 1 else ''}: " + "; ".join(self.problems))


def default_memo_fields() -> dict:
    """Every memo field, empty."""
    d: dict = {k: "" for k in FIELDS}
    for section, keys in NESTED.items():
        d[section] = {k: "" for k in keys}
    return d


def _text(value, name: str, problems: list) -> str:
    if value is None:
        return ""
    if isinstance(value, (_dt.date, _dt.datetime)) and name == "sign_off.date":
        return value.isoformat()[:10]
    if not isinstance(value, str):
        problems.append(f"{name}: must be text, got {type(value).__name__}")
        return ""
    return value


def check_memo_fields(fields, *, source: str | None = None) -> dict:
    """Validate memo fields (a dict) and return them complete (missing keys as "").

    Raises
    ------
    MemoFieldsError
        Listing every unknown key, non-text value, value outside its list and
        malformed date, each named ``key`` or ``section.key``.
    """
    if fields is None:
        return default_memo_fields()
    if not isinstance(fields, dict):
        raise MemoFieldsError([f"must be a table of fields, got {type(fields).__name__}"],
                              source=source)
    problems: list[str] = []
    out = default_memo_fields()
    known = set(FIELDS) | set(NESTED)
    for key in sorted(set(fields) - known):
        problems.append(f"{key}: unknown field; the fields are {', '.join(FIELDS + tuple(NESTED))}")
    for key in FIELDS:
        if key in fields:
            out[key] = _text(fields[key], key, problems).strip()
    for section, keys in NESTED.items():
        sub = fields.get(section)
        if sub is None:
            continue
        if not isinstance(sub, dict):
            problems.append(f"{section}: must be a table with {', '.join(keys)}")
            continue
        for key in sorted(set(sub) - set(keys)):
            problems.append(f"{section}.{key}: unknown field; [{section}] has {', '.join(keys)}")
        for key in keys:
            if key in sub:
                out[section][key] = _text(sub[key], f"{section}.{key}", problems).strip()
    ind = out["validation_independence"]
    if ind and ind not in INDEPENDENCE:
        problems.append(f"validation_independence: {ind!r} is not one of {', '.join(INDEPENDENCE)}")
    dec = out["sign_off"]["decision"]
    if dec and dec not in DECISIONS:
        problems.append(f"sign_off.decision: {dec!r} is not one of {', '.join(DECISIONS)}")
    date = out["sign_off"]["date"]
    if date:
        try:
            _dt.date.fromisoformat(date)
        except ValueError:
            problems.append(f"sign_off.date: {date!r} is not a date written YYYY-MM-DD")
    if problems:
        raise MemoFieldsError(problems, source=source)
    return out


def loads_memo_fields(text: str, *, source: str | None = None) -> dict:
    """Memo fields from TOML text (see the module docstring for the keys)."""
    try:
        data = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise MemoFieldsError([f"not valid TOML: {exc}"], source=source) from None
    return check_memo_fields(data, source=source)


def load_memo_fields(path) -> dict:
    """Read a memo-fields file (TOML, UTF-8)."""
    p = Path(path)
    try:
        text = p.read_text(encoding="utf-8-sig")
    except UnicodeDecodeError:
        raise MemoFieldsError(["not UTF-8 text"], source=p.name) from None
    return loads_memo_fields(text, source=p.name)


def dumps_memo_fields(fields: dict) -> str:
    """The memo fields as TOML; ``loads_memo_fields(dumps_memo_fields(f)) == check_memo_fields(f)``."""
    import tomli_w

    d = check_memo_fields(fields)
    top = {k: d[k] for k in FIELDS}
    for section in NESTED:
        top[section] = dict(d[section])
    return tomli_w.dumps(top)


def save_memo_fields(fields: dict, path) -> None:
    """Write a memo-fields file (TOML, UTF-8)."""
    Path(path).write_text(dumps_memo_fields(fields), encoding="utf-8")
