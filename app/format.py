"""How numbers are written on screen: thousands separators, sensible decimals, "—" for undefined."""

from __future__ import annotations

import math

DASH = "—"


def _bad(x) -> bool:
    return x is None or (isinstance(x, float) and math.isnan(x))


def count(x) -> str:
    """1,234 for whole counts; 1,234.5 for weighted ones."""
    if _bad(x):
        return DASH
    x = float(x)
    if math.isinf(x):
        return "∞" if x > 0 else "−∞"
    if abs(x - round(x)) < 1e-9:
        return f"{int(round(x)):,}"
    return f"{x:,.1f}"


def pct(x, digits: int = 1) -> str:
    """A proportion as a percentage: 0.1234 -> "12.3 %"."""
    if _bad(x):
        return DASH
    return f"{100.0 * float(x):,.{digits}f} %"


def num(x, digits: int = 3) -> str:
    """A plain number with thousands separators."""
    if _bad(x):
        return DASH
    x = float(x)
    if math.isinf(x):
        return "∞" if x > 0 else "−∞"
    return f"{x:,.{digits}f}"


def threshold(t) -> str:
    """A threshold in the user's units, shortest exact form; infinities spelled out."""
    if _bad(t):
        return DASH
    t = float(t)
    if math.isinf(t):
        return "+∞ (flag none)" if t > 0 else "−∞ (flag none)"
    return repr(t)


def interval(low, high, closed: str) -> str:
    """(low, high] or [low, high) with infinities."""
    lo = "−∞" if math.isinf(low) and low < 0 else ("+∞" if math.isinf(low) else repr(float(low)))
    hi = "+∞" if math.isinf(high) and high > 0 else ("−∞" if math.isinf(high) else repr(float(high)))
    return f"({lo}, {hi}]" if closed == "high" else f"[{lo}, {hi})"
