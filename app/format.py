"""How numbers are written on screen: the shared wording of :mod:`core.formatting`."""

from core.formatting import DASH, count, interval, num, pct, threshold  # noqa: F401
