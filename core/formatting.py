"""How numbers are written for people: one wording for the app, the CLI and the memo.

Thousands separators, sensible decimals, "—" for undefined (0/0 is NaN in the
core, ``null`` in JSON), infinities spelled out. Accepts the record's JSON
forms too ("inf" / "-inf" strings, ``None``).
"""

from __future__ import annotations

import math

__all__ = ["DASH", "is_undefined", "as_float", "count", "pct", "num", "threshold", "interval",
           "sentence_pct", "sentence_num"]

DASH = "—"


def is_undefined(x) -> bool:
    """None or NaN."""
    return x is None or (isinstance(x, float) and math.isnan(x))


def as_float(x) -> float:
    """A float from a number or the record's "inf" / "-inf" strings."""
    if x == "inf":
        return math.inf
    if x == "-inf":
        return -math.inf
    return float(x)


def _inf(x: float, symbol: str) -> str:
    return f"+{symbol}" if x > 0 else f"−{symbol}" if symbol == "∞" else f"-{symbol}"


def count(x) -> str:
    """1,234 for whole counts; 1,234.5 for weighted ones."""
    if is_undefined(x):
        return DASH
    x = as_float(x)
    if math.isinf(x):
        return "∞" if x > 0 else "−∞"
    if abs(x - round(x)) < 1e-9:
        return f"{int(round(x)):,}"
    return f"{x:,.1f}"


def pct(x, digits: int = 1) -> str:
    """A proportion as a percentage: 0.1234 -> "12.3 %"."""
    if is_undefined(x):
        return DASH
    return f"{100.0 * as_float(x):,.{digits}f} %"


def num(x, digits: int = 3) -> str:
    """A plain number with thousands separators; infinities as ∞."""
    if is_undefined(x):
        return DASH
    x = as_float(x)
    if math.isinf(x):
        return "∞" if x > 0 else "−∞"
    return f"{x:,.{digits}f}"


def threshold(t, *, infinity: str = "∞") -> str:
    """A threshold exactly as stored (shortest float64 form); "flag none" spelled out."""
    if is_undefined(t):
        return DASH
    t = as_float(t)
    if math.isinf(t):
        return f"{_inf(t, infinity)} (flag none)"
    return repr(t)


def interval(low, high, closed: str, *, infinity: str = "∞") -> str:
    """(low, high] when the high end is included, [low, high) otherwise."""
    def end(v):
        v = as_float(v)
        return _inf(v, infinity) if math.isinf(v) else repr(v)

    lo, hi = end(low), end(high)
    return f"({lo}, {hi}]" if closed == "high" else f"[{lo}, {hi})"


# ----------------------------------------------------------------- in running text (explanations)

def sentence_pct(x, digits: int = 1) -> str:
    """A proportion inside a sentence: "12.3 %", or the word "undefined"."""
    if x is None or not math.isfinite(x):
        return "undefined"
    return f"{100 * x:.{digits}f} %"


def sentence_num(x, sig: int = 4) -> str:
    """A number inside a sentence: 4 significant digits, whole above 1,000; "undefined" for NaN."""
    if x is None:
        return DASH
    if not math.isfinite(x):
        return "undefined" if math.isnan(x) else ("inf" if x > 0 else "-inf")
    if abs(x) >= 1000:
        return f"{x:,.0f}"
    return f"{x:.{sig}g}"
