"""The comparison document: schema ``fulcrum.compare/1``, written by ``fulcrum compare``.

:func:`build_compare_document` turns a :class:`core.compare.Comparison` and
the dataset it was computed on into a plain JSON-ready dict -- summaries
only (curves summarised as AUC and average precision, counts at operating
points, disagreement tables, tests, the verdict), never a data row -- sealed
with the decision record's integrity block (:func:`core.record.seal`: the
SHA-256 of the canonical JSON of every other key, and of each key on its
own). :func:`check_compare_document` checks a parsed one (schema, keys,
digests) and raises :class:`core.record.RecordError` naming the field.

Top-level keys::

    schema, created_utc, software_version, data, policy, settings,
    comparison, cautions, integrity

``data`` holds the dataset's fingerprint (``sha256``), the reference and
candidate columns with their directions, the other mapped columns and the
intake's warnings; ``policy`` the policy file as written and as resolved
(null without a policy); ``settings`` the bootstrap seed and replicates,
the confidence and the targets given; ``comparison`` is
:meth:`core.compare.Comparison.to_dict` exactly (NaN as null, infinite
thresholds as "inf" / "-inf").
"""

from __future__ import annotations

import datetime as _dt
import json

from core import cautions as _cautions
from core.choose import json_safe
from core.record import RecordError, digest, seal

__all__ = [
    "COMPARE_KEYS",
    "SCHEMA",
    "build_compare_document",
    "check_compare_document",
    "dumps_compare_document",
]

SCHEMA = "fulcrum.compare/1"

#: Top-level keys of every comparison document, in the order they are written.
COMPARE_KEYS = ("schema", "created_utc", "software_version", "data", "policy", "settings",
                "comparison", "cautions", "integrity")


def _utc_now() -> str:
    return _dt.datetime.now(_dt.UTC).replace(microsecond=0).strftime("%Y-%m-%dT%H:%M:%SZ")


def _data(comparison, dataset, sheet) -> dict:
    m = dataset.mapping
    dirs = {comparison.reference: dataset.higher_is_riskier, **dataset.extra_higher_is_riskier}
    c = dataset.curve()
    return {
        "kind": dataset.kind, "rows": dataset.n_rows, "events": c.n_events,
        "prevalence": c.prevalence, "sha256": dataset.fingerprint,
        "file_name": dataset.file_name, "sheet": sheet,
        "reference": comparison.reference,
        "candidates": [x for x in comparison.models if x != comparison.reference],
        "directions": {k: "higher is riskier" if dirs.get(k, True) else "lower is riskier"
                       for k in comparison.models},
        "label_column": m.label, "positive_label": m.positive_label,
        "weight_column": m.weight, "weight_kind": dataset.weight_kind,
        "group_columns": list(m.groups), "cluster_column": m.cluster,
        "score_time_column": m.score_time, "case_cost_column": m.case_cost,
        "dropped_rows": int(dataset.dropped_rows),
        "warnings": [{"code": w.code, "message": w.message, "column": w.column}
                     for w in dataset.warnings],
        "mapping": m.to_dict(),
    }


def build_compare_document(comparison, dataset, *, policy=None, settings: dict | None = None,
                           sheet: str | None = None, created_utc: str | None = None) -> dict:
    """The sealed ``fulcrum.compare/1`` document of a comparison (see the module docstring).

    ``comparison`` is what :func:`core.compare.compare_mapped` (or
    :func:`~core.compare.compare_dataset`) returned for ``dataset``;
    ``policy`` the :class:`core.policy.Policy` it was run with (or None);
    ``settings`` the run's settings (seed, replicates, targets), stored as
    given.
    """
    from core import __version__

    if comparison.data.get("fingerprint") != dataset.fingerprint:
        raise ValueError("the comparison was not computed on this dataset")
    few = dataset.n_events < 100
    doc = {
        "schema": SCHEMA,
        "created_utc": created_utc or _utc_now(),
        "software_version": __version__,
        "data": _data(comparison, dataset, sheet),
        "policy": None if policy is None else {"as_written": policy.to_dict(),
                                               "resolved": comparison.data.get("policy")},
        "settings": dict(settings or {}),
        "comparison": comparison.to_dict(),
        "cautions": {"full": _cautions.FULL, "short": _cautions.SHORT,
                     "accuracy": _cautions.ACCURACY_TRAP,
                     "few_events": _cautions.FEW_EVENTS if few else None,
                     "label_shift": None if policy is None else _cautions.LABEL_SHIFT},
    }
    return seal(json_safe(doc))


def dumps_compare_document(doc: dict) -> str:
    """The document as indented JSON text (NaN and infinities refused)."""
    return json.dumps(doc, indent=2, ensure_ascii=False, allow_nan=False) + "\n"


def check_compare_document(doc, *, source: str | None = None) -> dict:
    """Check a parsed comparison document; return it. Raises RecordError naming the field."""
    if not isinstance(doc, dict):
        raise RecordError(None, "must be a JSON object", source=source)
    if doc.get("schema") != SCHEMA:
        raise RecordError("schema", f"must be {SCHEMA!r}, got {doc.get('schema')!r}", source=source)
    for key in COMPARE_KEYS:
        if key not in doc:
            raise RecordError(key, "is missing", source=source)
    integ = doc["integrity"]
    body = {k: v for k, v in doc.items() if k != "integrity"}
    changed = sorted(k for k, v in body.items() if integ.get("sections", {}).get(k) != digest(v))
    if changed:
        raise RecordError(changed[0], "was changed after the document was written: its sha256 no "
                          "longer matches integrity.sections", source=source)
    if integ.get("sha256") != digest(body):
        raise RecordError("integrity.sha256", "does not match the document's content",
                          source=source)
    return doc
