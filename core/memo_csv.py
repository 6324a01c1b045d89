"""CSV tables of a decision record, guarded against spreadsheet formula injection.

:func:`threshold_vectors_csv` (the scores either side of the threshold with their
expected decisions, for whoever implements the threshold in the live
system) and :func:`metrics_csv` (every metric with its intervals at
validation and deployment prevalence). A spreadsheet runs a text cell that
begins with ``=``, ``+``, ``-``, ``@``, a tab or a carriage return as a
formula, so :func:`csv_cell` prefixes such text with an apostrophe; numbers
are written as numbers and left alone (a negative score stays ``-0.5``).
"""

from __future__ import annotations

import csv
import io
import math
import numbers

import numpy as np

__all__ = ["FORMULA_STARTS", "csv_cell", "threshold_vectors_csv", "metrics_csv"]

FORMULA_STARTS = ("=", "+", "-", "@", "\t", "\r")


def csv_cell(value):
    """A cell value safe to open in a spreadsheet: risky text gets a leading apostrophe."""
    if value is None:
        return ""
    if isinstance(value, (bool, np.bool_)):
        return "true" if value else "false"
    if isinstance(value, numbers.Real) and not isinstance(value, np.bool_):  # numpy numbers too
        if isinstance(value, (float, np.floating)):
            if math.isnan(value):
                return ""
            if math.isinf(value):  # a spreadsheet reads -inf as a formula
                return "'-inf" if value < 0 else "inf"
            return repr(float(value))
        return str(int(value))
    text = str(value)
    if text.startswith(FORMULA_STARTS):
        return "'" + text
    return text


def _write(header, rows) -> str:
    buf = io.StringIO()
    # CRLF rows (RFC 4180): the writer then quotes a cell holding a carriage return or line feed
    w = csv.writer(buf, lineterminator="\r\n")
    w.writerow([csv_cell(h) for h in header])
    for r in rows:
        w.writerow([csv_cell(c) for c in r])
    return buf.getvalue()


def threshold_vectors_csv(record: dict) -> str:
    """The record's test vectors as CSV: score (number), text, position, expected decision."""
    tv = record["test_vectors"]
    rows = [(v["score"], v["text"], v["position"], "flag" if v["flagged"] else "no flag")
            for v in tv["vectors"]]
    return _write(("score", "score_as_written", "position", "expected_decision"), rows)


def metrics_csv(record: dict) -> str:
    """Every metric of the record at validation and at deployment prevalence, with intervals."""
    rows = []
    for where in ("validation", "deployment"):
        for name, e in record["metrics"][where].items():
            b = e.get("bootstrap") or {}
            rows.append((where, name, e.get("value"), e.get("ci_low"), e.get("ci_high"),
                         e.get("method"), e.get("basis"), b.get("ci_low"), b.get("ci_high")))
    return _write(("where", "metric", "value", "ci_low", "ci_high", "method", "basis",
                   "bootstrap_low", "bootstrap_high"), rows)
