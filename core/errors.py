"""The one error type for bad input, and how row positions are written in it.

Every check in Fulcrum that rejects what the user gave raises
:class:`InputError` (a :class:`ValueError`), whose message names the column,
the problem, how many rows and which ones (1-based positions), so the app, the
command line and a notebook all show the same sentence.
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np

__all__ = ["InputError", "format_rows"]

_SHOW_ROWS = 5


def format_rows(positions: Sequence[int] | np.ndarray, *, base: int = 1, show: int = _SHOW_ROWS) -> str:
    """Write row positions as ``"rows 3, 8, 11 and 2 more"``.

    ``positions`` are 0-based indices; ``base`` is added so the text is 1-based
    (the first data row is row 1, the header excluded).
    """
    pos = np.asarray(positions, dtype=np.int64).ravel()
    n = pos.size
    if n == 0:
        return "no rows"
    first = ", ".join(str(int(p) + base) for p in pos[:show])
    word = "row" if n == 1 else "rows"
    more = f" and {n - show:,} more" if n > show else ""
    return f"{word} {first}{more}"


class InputError(ValueError):
    """Bad input: says which column, what is wrong, how many rows and which.

    Attributes
    ----------
    column : str or None
        The column (or argument) at fault.
    problem : str
        What is wrong, in words.
    n_rows : int
        How many rows have the problem (0 when it is not about rows).
    rows : tuple of int
        The first few 1-based row positions.
    """

    def __init__(self, column: str | None, problem: str, positions=None, *, hint: str = "",
                 base: int = 1):
        self.column = column
        self.problem = problem
        pos = np.asarray([] if positions is None else positions, dtype=np.int64).ravel()
        self.n_rows = int(pos.size)
        self.rows = tuple(int(p) + base for p in pos[:_SHOW_ROWS])
        self.hint = hint
        parts = []
        if column is not None:
            parts.append(f"{column}: ")
        parts.append(problem)
        if pos.size:
            count = f"{pos.size:,} row" + ("" if pos.size == 1 else "s")
            parts.append(f" ({count}: {format_rows(pos, base=base)})")
        if hint:
            parts.append(f". {hint}")
        super().__init__("".join(parts))
