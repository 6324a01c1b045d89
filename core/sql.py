"""The one SQL statement that reduces a validation table to a count table.

:func:`reduction_sql` writes a single ``SELECT ... GROUP BY`` that turns a
table of scored cases (one row per case: score, label, optional weight, case
cost and group columns) into the count table Fulcrum reads directly (one row
per distinct score -- or per coarsened score -- and group: ``events``,
``non_events`` and, when asked for, ``event_cost``, ``events_sq``,
``non_events_sq``). Run it where the data lives (a warehouse, Spark), export
the result, and load it with ``kind="counts"``. :func:`core.reduce.reduce_file`
runs the very same statement on DuckDB, so there is one source of truth.

Portability: the statement uses only CAST (to DOUBLE and DECIMAL), FLOOR /
CEIL, CASE WHEN, IN, SUM, COUNT, MAX, nested subqueries with aliases and
GROUP BY on plain column names (no GROUP BY on an alias or an expression,
which some engines refuse). Dialects differ only in how names and text are
quoted and in the name of the double type:

* ``"ansi"`` -- identifiers in double quotes (an embedded double quote
  doubled), text in single quotes with ``''`` for a quote, ``DOUBLE PRECISION``. PostgreSQL,
  Snowflake, Redshift, DuckDB, Trino / Presto and most warehouses accept it.
* ``"duckdb"`` -- as ``"ansi"`` with ``DOUBLE``.
* ``"spark"`` -- identifiers in backticks (an embedded backtick doubled), text in single
  quotes with backslash escapes (Spark reads ``\\`` in a literal as an
  escape, and ``'a''b'`` as two literals run together), ``DOUBLE``. Also
  Databricks and Hive. A file is a table too: the table
  ``("parquet", "/path/x.parquet")`` is written as Spark's file-as-table
  name, parquet followed by the path in backticks.

BigQuery: quote names in backticks (its NUMERIC takes at most 9 decimals,
so ``decimals`` up to 6 there).

Coarsened scores (``decimals=d``)
---------------------------------
With ``decimals`` the score is moved to the grid of multiples of 10^-d toward
the *non-flagged* side: down (floor) when higher scores are riskier, up
(ceil) when lower scores are. Written g(k) for the float64 nearest to
k * 10^-d (what the text ``"0.29"`` parses to, and what IEEE division
``k / 10^d`` gives, since both integers are exact), the coarse score of a raw
score s is

* higher is riskier: g(k) with k the largest integer such that g(k) <= s;
* lower is riskier: g(k) with k the smallest integer such that g(k) >= s.

So at every grid threshold t = g(j) a coarse score is flagged exactly when
its raw score is (``s >= t`` iff ``g(k) >= t``, compared in float64 as the
row-level sweep compares), and the coarse count table gives the row-level
counts at every grid threshold, exactly.

The statement computes k in two steps. First in exact decimal arithmetic,
casting before scaling -- ``FLOOR(CAST(s AS DECIMAL(38, d + 3)) * 10^d)`` --
not in float64, where ``0.29 * 100`` is 28.999999999999996 and its floor 28.
That first k can still be one off, because an engine's cast of a double to
a decimal rounds (to d + 3 decimals here; DuckDB casts the double nearest
123456.29 even to DECIMAL(38, 18) as 123456.289999999985516544, whose floor
at 2 decimals is 123456.28; Spark rounds wide decimal products to fewer
digits). So, second, one comparison in float64 moves k by one where g(k)
lies on the wrong side of s. The result no longer depends on the engine's
decimal rules. Three decimals beyond d keep the first step within one of
the answer; more would only cost time (DuckDB casts a double to 18 decimals
about three times slower than to 7). The decimal has 38 digits, or 18 when
a known bound on the scores lets it (``score_bound``; a 64-bit integer
instead of a 128-bit one, about ten times faster in DuckDB).

Precision limits: |s| * 10^d must stay below 10^15, so that the grid index
is an exact integer in float64 and neighbouring grid values are distinct
doubles (scores in [0, 1] may keep up to 14 decimals, scores up to a
million 9); ``decimals`` is 0 to 14. :func:`core.reduce.reduce_file` rejects
larger scores with a message; an engine running the printed statement on
them gives misplaced grid values, so check the score range first.

Rows the statement cannot count (a missing label, weight, or an event's
missing case cost) get a missing score, so the exported count table holds a
row with an empty score and loading it names that row instead of miscounting.
A missing score stays missing the same way. Negative weights and a label
with more than two values are not caught by the statement; check them where
the data lives (:func:`core.reduce.reduce_file` checks everything before it
counts).
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass
from decimal import Decimal

import numpy as np

from core.errors import InputError

__all__ = [
    "COUNT_COLUMNS",
    "DIALECTS",
    "MAX_DECIMALS",
    "MAX_GRID_INDEX",
    "Relation",
    "coarse_score_sql",
    "decimal_precision",
    "quote_identifier",
    "quote_literal",
    "reduction_sql",
    "rounding_check_sql",
]

DIALECTS = ("ansi", "duckdb", "spark")
#: The count table's columns besides the score and the groups, in order.
COUNT_COLUMNS = ("events", "non_events", "event_cost", "events_sq", "non_events_sq")
#: Largest number of decimals a score can be coarsened to.
MAX_DECIMALS = 14
#: |score| * 10**decimals must stay below this for the grid to be exact (see the module docstring).
MAX_GRID_INDEX = 10**15

_DOUBLE = {"ansi": "DOUBLE PRECISION", "duckdb": "DOUBLE", "spark": "DOUBLE"}
# names used inside the statement; a user column may not take them (any case)
_RAW, _EVENT, _WEIGHT, _COST, _K = ("fulcrum_raw", "fulcrum_event", "fulcrum_weight",
                                    "fulcrum_cost", "fulcrum_k")
_INTERNAL = (_RAW, _EVENT, _WEIGHT, _COST, _K, "raw_scores", "events_off_grid",
             "non_events_off_grid")


@dataclass(frozen=True)
class Relation:
    """SQL text used verbatim as the FROM item (a table function or an aliased subquery).

    For trusted text built by the program itself, e.g.
    ``Relation("read_parquet('/data/scores.parquet')")``; a table name given by
    a user goes to :func:`reduction_sql` as a string or tuple and is quoted.
    """

    sql: str


# --------------------------------------------------------------------------- quoting


def _check_dialect(dialect: str) -> str:
    if dialect not in DIALECTS:
        raise InputError("dialect", f"must be one of {', '.join(DIALECTS)}, got {dialect!r}")
    return dialect


def quote_identifier(name: str, dialect: str = "ansi") -> str:
    """A column or table name quoted so that any text is read as that name, and only that.

    ANSI and DuckDB: ``"name"`` with each ``"`` doubled; Spark: ```name```
    with each backtick doubled. Quotes, spaces, semicolons and comment marks
    inside the name stay inside the quotes, so a name cannot end the
    statement or add to it. An empty name or one holding a NUL character is
    refused (no engine accepts it).
    """
    _check_dialect(dialect)
    if not isinstance(name, str):
        raise InputError("column", f"a column or table name must be text, got {type(name).__name__}")
    if not name or "\x00" in name:
        raise InputError(repr(name), "is not a usable column or table name (empty or holding NUL)")
    if dialect == "spark":
        return "`" + name.replace("`", "``") + "`"
    return '"' + name.replace('"', '""') + '"'


def quote_literal(value, dialect: str = "ansi") -> str:
    """A constant as SQL: text quoted, numbers written exactly, booleans TRUE / FALSE.

    Text: single quotes; ANSI / DuckDB double an embedded quote, Spark
    escapes quotes and backslashes with a backslash. Floats are written by
    their shortest round-trip form (``0.1`` stays ``0.1``); NaN and infinities
    have no literal and are refused.
    """
    _check_dialect(dialect)
    if isinstance(value, (bool, np.bool_)):
        return "TRUE" if value else "FALSE"
    if isinstance(value, (int, np.integer)):
        return str(int(value))
    if isinstance(value, (float, np.floating)):
        v = float(value)
        if not math.isfinite(v):
            raise InputError("value", f"{v!r} has no SQL literal")
        return repr(v)
    if isinstance(value, Decimal):
        if not value.is_finite():
            raise InputError("value", f"{value!r} has no SQL literal")
        return str(value)
    if isinstance(value, str):
        if "\x00" in value:
            raise InputError("value", "text holding a NUL character has no SQL literal")
        if dialect == "spark":
            return "'" + value.replace("\\", "\\\\").replace("'", "\\'") + "'"
        return "'" + value.replace("'", "''") + "'"
    raise InputError("value", f"a {type(value).__name__} value has no SQL literal here; "
                              f"use text, a number or a boolean")


def _quoter(dialect: str):
    def q(name: str) -> str:
        return quote_identifier(name, dialect)

    return q


def _table_sql(table, dialect: str) -> str:
    if isinstance(table, Relation):
        return table.sql
    if isinstance(table, str):
        parts = table.split(".")
    elif isinstance(table, Sequence) and all(isinstance(p, str) for p in table):
        parts = list(table)
    else:
        raise InputError("table", "must be a name (dotted text such as 'db.scores', or a tuple of "
                                  "name parts) or a Relation")
    if not parts:
        raise InputError("table", "is empty")
    return ".".join(quote_identifier(p, dialect) for p in parts)


# --------------------------------------------------------------------------- pieces


def _check_decimals(decimals) -> int | None:
    if decimals is None:
        return None
    if isinstance(decimals, bool) or not isinstance(decimals, (int, np.integer)):
        raise InputError("decimals", f"must be a whole number from 0 to {MAX_DECIMALS}, got {decimals!r}")
    d = int(decimals)
    if not 0 <= d <= MAX_DECIMALS:
        raise InputError("decimals", f"must be from 0 to {MAX_DECIMALS}, got {d}")
    return d


def _positives(positive) -> list:
    if positive is None:
        raise InputError("positive", "no event value is given: which label value marks the event?")
    if isinstance(positive, (list, tuple, set, frozenset, np.ndarray)):
        values = list(positive)
        if not values:
            raise InputError("positive", "no event value is given: which label value marks the event?")
        return values
    return [positive]


def decimal_precision(decimals: int, score_bound: float | None = None) -> int:
    """Digits of the decimal the first step casts to: 18 when ``score_bound`` allows, else 38.

    The decimal keeps ``decimals + 3`` decimals; times 10^decimals it needs
    fewer than 18 digits when ``score_bound * 10**(2 * decimals + 3) < 10**18``
    -- then it is a 64-bit integer in DuckDB and Spark, and the cast costs a
    tenth of the 128-bit one (DuckDB keeps the product of two 18-digit
    decimals at 18 digits and refuses one that does not fit, so the bound
    must hold).
    """
    d = _check_decimals(decimals)
    if score_bound is not None:
        b = float(score_bound)
        if math.isfinite(b) and b >= 0 and b * 10.0 ** (2 * d + 3) < 1e18:
            return 18
    return 38


def coarse_score_sql(raw: str, decimals: int, *, higher_is_riskier: bool = True,
                     dialect: str = "ansi", score_bound: float | None = None) -> tuple[str, str]:
    """The two expressions that coarsen a float64 score to ``decimals`` decimals.

    Returns ``(k_expr, score_expr)``: ``k_expr`` (of ``raw``, an expression
    giving the score as a double) is the first, exact-decimal grid index as a
    double (an integer below 10^15, so exact); ``score_expr`` (of a column
    named ``fulcrum_k`` holding it, and of ``raw``) is the coarse score as a
    double after the float64 correction (see the module docstring for the
    rule and its precision limits). ``score_bound``: see
    :func:`decimal_precision`.
    """
    d = _check_decimals(decimals)
    dbl = _DOUBLE[_check_dialect(dialect)]
    scale = 10**d
    fn = "FLOOR" if higher_is_riskier else "CEIL"
    p = decimal_precision(d, score_bound)
    k_expr = f"CAST({fn}(CAST({raw} AS DECIMAL({p}, {d + 3})) * {scale}) AS {dbl})"
    k = quote_identifier(_K, dialect)

    def g(offset: str) -> str:
        return f"({k}{offset}) / CAST({scale} AS {dbl})"

    if higher_is_riskier:  # largest k with g(k) <= raw
        score_expr = (f"CASE WHEN {g('')} > {raw} THEN {g(' - 1')} "
                      f"WHEN {g(' + 1')} <= {raw} THEN {g(' + 1')} ELSE {g('')} END")
    else:  # smallest k with g(k) >= raw
        score_expr = (f"CASE WHEN {g('')} < {raw} THEN {g(' + 1')} "
                      f"WHEN {g(' - 1')} >= {raw} THEN {g(' - 1')} ELSE {g('')} END")
    return k_expr, score_expr


def _check_names(score, label, weight, case_cost, groups, outputs) -> tuple[str, ...]:
    if isinstance(groups, str):
        groups = (groups,)
    groups = tuple(groups or ())
    named = [("score", score), ("label", label)]
    if weight is not None:
        named.append(("weight", weight))
    if case_cost is not None:
        named.append(("case cost", case_cost))
    named += [("group column", g) for g in groups]
    seen: dict[str, str] = {}
    for role, col in named:
        if not isinstance(col, str) or not col:
            raise InputError(role, f"needs a column name, got {col!r}")
        key = col.casefold()
        if key in seen and not (role == "group column" and seen[key] in ("weight", "case cost")):
            raise InputError(col, f"is used as both the {seen[key]} and the {role}; each needs its "
                                  f"own column")
        if key in (n.casefold() for n in _INTERNAL):
            raise InputError(col, "has a name the statement uses for itself; rename the column")
        if role in ("score", "group column") and key in (n.casefold() for n in outputs):
            raise InputError(col, f"has the name of a count-table column ({', '.join(outputs)}); "
                                  f"rename it in a view first")
        seen.setdefault(key, role)
    return groups


def _event_expr(label_q: str, positives: list, dialect: str) -> str:
    """1.0 for an event, 0.0 otherwise, as a double: sums of doubles are exact for whole counts
    below 2^53 in any order, and cheaper than the 128-bit integer sums some engines use."""
    lits = ", ".join(quote_literal(v, dialect) for v in positives)
    return f"CAST(CASE WHEN {label_q} IN ({lits}) THEN 1 ELSE 0 END AS {_DOUBLE[dialect]})"


def _inner_select(table, *, score, label, positive, weight, case_cost, groups, dialect,
                  carry_groups=True) -> tuple[str, list[str]]:
    """Innermost level: raw score (missing where the row cannot be counted), event, weight, cost."""
    q = _quoter(dialect)
    dbl = _DOUBLE[dialect]
    pos = _positives(positive)
    lab = q(label)
    valid = [f"{lab} IS NOT NULL"]
    if weight is not None:
        valid.append(f"{q(weight)} IS NOT NULL")
    if case_cost is not None:
        valid.append(f"({lab} NOT IN ({', '.join(quote_literal(v, dialect) for v in pos)}) "
                     f"OR {q(case_cost)} IS NOT NULL)")
    cols = [f"CASE WHEN {' AND '.join(valid)} THEN CAST({q(score)} AS {dbl}) END AS {q(_RAW)}",
            f"{_event_expr(lab, pos, dialect)} AS {q(_EVENT)}"]
    if weight is not None:
        cols.append(f"CAST({q(weight)} AS {dbl}) AS {q(_WEIGHT)}")
    if case_cost is not None:
        cols.append(f"CAST({q(case_cost)} AS {dbl}) AS {q(_COST)}")
    if carry_groups:
        cols += [q(g) for g in groups]
    return (f"SELECT {', '.join(cols)} FROM {_table_sql(table, dialect)}", cols)


def _sums(weight, case_cost, dialect) -> list[str]:
    q = _quoter(dialect)
    ev, w, c = q(_EVENT), q(_WEIGHT), q(_COST)
    if weight is None:
        out = [f"SUM({ev}) AS {q('events')}", f"SUM(1 - {ev}) AS {q('non_events')}"]
        if case_cost is not None:
            out.append(f"SUM(CASE WHEN {ev} = 1 THEN {c} ELSE 0 END) AS {q('event_cost')}")
        return out
    out = [f"SUM(CASE WHEN {ev} = 1 THEN {w} ELSE 0 END) AS {q('events')}",
           f"SUM(CASE WHEN {ev} = 1 THEN 0 ELSE {w} END) AS {q('non_events')}"]
    if case_cost is not None:
        out.append(f"SUM(CASE WHEN {ev} = 1 THEN {w} * {c} ELSE 0 END) AS {q('event_cost')}")
    out += [f"SUM(CASE WHEN {ev} = 1 THEN {w} * {w} ELSE 0 END) AS {q('events_sq')}",
            f"SUM(CASE WHEN {ev} = 1 THEN 0 ELSE {w} * {w} END) AS {q('non_events_sq')}"]
    return out


# --------------------------------------------------------------------------- statements


def reduction_sql(table, *, score: str, label: str, positive, weight: str | None = None,
                  case_cost: str | None = None, groups: Sequence[str] = (),
                  decimals: int | None = None, higher_is_riskier: bool = True,
                  dialect: str = "ansi", score_bound: float | None = None) -> str:
    """The statement that reduces a case table to a count table.

    Parameters
    ----------
    table : str, tuple of str or Relation
        The table: a dotted name (``"warehouse.scores"``; every part is
        quoted), a tuple of name parts (for a part holding a dot, or Spark's
        ``("parquet", "/path/file.parquet")``), or a :class:`Relation`.
    score, label : str
        Column names. The score is cast to DOUBLE (float64).
    positive : value or sequence of values
        The label value(s) that mark the event; every other (non-missing)
        label value is a non-event.
    weight : str, optional
        A weight column (frequency or sampling weights): the counts become
        weight sums and the squared-weight sums ``events_sq`` /
        ``non_events_sq`` are added (Kish's effective size needs them for
        sampling weights; ignore them for frequency weights).
    case_cost : str, optional
        A per-case miss cost; ``event_cost`` sums it over the events (times
        the weight when there is one). Non-events' values are not used.
    groups : sequence of str
        Group columns; they join the grouping and appear in the output.
    decimals : int, optional
        Coarsen the score to this many decimals toward the non-flagged side
        (see the module docstring); None keeps every distinct score.
    higher_is_riskier : bool
        The direction; it decides floor (True) or ceil (False).
    dialect : {"ansi", "duckdb", "spark"}
    score_bound : float, optional
        A bound known to hold for every |score| (e.g. 1 for probabilities);
        with ``decimals``, a small enough bound lets the decimal step use 18
        digits instead of 38 (see :func:`decimal_precision`). The statement
        gives the same result either way.

    Returns
    -------
    str
        One ``SELECT`` whose result has the columns: the score (under its own
        name), the groups, ``events``, ``non_events`` and, as applicable,
        ``event_cost``, ``events_sq``, ``non_events_sq``. Rows come in no
        particular order.

    Raises
    ------
    InputError
        An unknown dialect, a bad ``decimals``, a column used twice, a
        column named like an output column, a name or value without a safe
        SQL form.
    """
    _check_dialect(dialect)
    d = _check_decimals(decimals)
    outputs = [c for c in COUNT_COLUMNS
               if c in ("events", "non_events")
               or (c == "event_cost" and case_cost is not None)
               or (c in ("events_sq", "non_events_sq") and weight is not None)]
    groups = _check_names(score, label, weight, case_cost, groups, outputs)
    q = _quoter(dialect)
    inner, _ = _inner_select(table, score=score, label=label, positive=positive, weight=weight,
                             case_cost=case_cost, groups=groups, dialect=dialect)
    carried = [q(_EVENT)] + ([q(_WEIGHT)] if weight is not None else []) + (
        [q(_COST)] if case_cost is not None else []) + [q(g) for g in groups]
    if d is None:
        level = f"SELECT {q(_RAW)} AS {q(score)}, {', '.join(carried)} FROM ({inner}) AS t0"
    else:
        k_expr, score_expr = coarse_score_sql(q(_RAW), d, higher_is_riskier=higher_is_riskier,
                                              dialect=dialect, score_bound=score_bound)
        level_k = (f"SELECT {q(_RAW)}, {k_expr} AS {q(_K)}, {', '.join(carried)} "
                   f"FROM ({inner}) AS t0")
        level = f"SELECT {score_expr} AS {q(score)}, {', '.join(carried)} FROM ({level_k}) AS t1"
    keys = [q(score)] + [q(g) for g in groups]
    return (f"SELECT {', '.join(keys)}, {', '.join(_sums(weight, case_cost, dialect))} "
            f"FROM ({level}) AS t2 GROUP BY {', '.join(keys)}")


def rounding_check_sql(table, *, score: str, label: str, positive, weight: str | None = None,
                       decimals: int, higher_is_riskier: bool = True,
                       dialect: str = "ansi", score_bound: float | None = None) -> str:
    """The exact second pass that measures what coarsening to ``decimals`` merges.

    Groups the rows by their exact score, coarsens each distinct score as
    :func:`reduction_sql` does, and returns one row:

    * ``coarse_values`` -- distinct coarse scores;
    * ``raw_scores`` -- distinct raw scores (points of the exact curve);
    * ``max_raw_per_coarse`` -- the most raw scores merged into one coarse score;
    * ``max_events_off_grid`` / ``max_non_events_off_grid`` /
      ``max_rows_off_grid`` -- over the grid cells, the largest (weighted)
      number of events / non-events / both whose raw score differs from its
      coarse score;
    * ``rows_off_grid`` -- the (weighted) rows whose raw score is off the grid.

    The ``max_*_off_grid`` figures are the largest effect of the rounding on
    the counts: at a grid threshold the coarse and exact counts agree; at a
    threshold t strictly between grid values g(k) and g(k + 1) (higher is
    riskier) the coarse table flags only the rows at or above g(k + 1), so it
    misses the rows with raw score in [t, g(k + 1)) -- at most the off-grid
    rows of that cell, approached as t comes down to g(k). The flagged
    events (true positives) can fall short by at most ``max_events_off_grid``,
    the flagged non-events by at most ``max_non_events_off_grid``, the
    flagged total by at most ``max_rows_off_grid``; the coarse table never
    flags more than the exact one (mirrored when lower is riskier).
    The arguments are those of :func:`reduction_sql`.
    """
    _check_dialect(dialect)
    d = _check_decimals(decimals)
    if d is None:
        raise InputError("decimals", "the rounding check needs the number of decimals")
    _check_names(score, label, weight, None, (), ["events", "non_events"])
    q = _quoter(dialect)
    inner, _ = _inner_select(table, score=score, label=label, positive=positive, weight=weight,
                             case_cost=None, groups=(), dialect=dialect, carry_groups=False)
    sums = _sums(weight, None, dialect)[:2]
    by_raw = f"SELECT {q(_RAW)}, {', '.join(sums)} FROM ({inner}) AS t0 GROUP BY {q(_RAW)}"
    k_expr, score_expr = coarse_score_sql(q(_RAW), d, higher_is_riskier=higher_is_riskier,
                                          dialect=dialect, score_bound=score_bound)
    with_k = (f"SELECT {q(_RAW)}, {k_expr} AS {q(_K)}, {q('events')}, {q('non_events')} "
              f"FROM ({by_raw}) AS t1")
    coarse = (f"SELECT {score_expr} AS {q(score)}, {q(_RAW)}, {q('events')}, {q('non_events')} "
              f"FROM ({with_k}) AS t2")
    off = f"{q(_RAW)} <> {q(score)}"
    cells = (f"SELECT {q(score)}, COUNT(*) AS {q('raw_scores')}, "
             f"SUM(CASE WHEN {off} THEN {q('events')} ELSE 0 END) AS {q('events_off_grid')}, "
             f"SUM(CASE WHEN {off} THEN {q('non_events')} ELSE 0 END) AS {q('non_events_off_grid')} "
             f"FROM ({coarse}) AS t3 WHERE {q(_RAW)} IS NOT NULL GROUP BY {q(score)}")
    eo, no = q("events_off_grid"), q("non_events_off_grid")
    return (f"SELECT COUNT(*) AS {q('coarse_values')}, SUM({q('raw_scores')}) AS {q('raw_scores')}, "
            f"MAX({q('raw_scores')}) AS {q('max_raw_per_coarse')}, "
            f"MAX({eo}) AS {q('max_events_off_grid')}, MAX({no}) AS {q('max_non_events_off_grid')}, "
            f"MAX({eo} + {no}) AS {q('max_rows_off_grid')}, "
            f"SUM({eo} + {no}) AS {q('rows_off_grid')} FROM ({cells}) AS t4")
