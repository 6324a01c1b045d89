"""``fulcrum sql``: print the one statement that reduces a table of scored cases to a count table.

Run it where the data live (a warehouse, Spark, DuckDB), export its result
(one row per distinct score -- or coarsened score -- and group, with
``events``, ``non_events`` and, as they apply, ``event_cost``, ``events_sq``,
``non_events_sq``) and load that with ``fulcrum pick --counts``. The
statement is :func:`core.sql.reduction_sql`, the very one
:func:`core.reduce.reduce_file` runs on DuckDB. Only the statement goes to
stdout (so it can be piped); when stderr is a terminal a line there says how
to load the result. Bad input ends with exit code 2 (see :mod:`core.cli`).
"""

from __future__ import annotations

import argparse
import re
import sys

from core.errors import InputError

__all__ = ["add_sql", "load_hint", "positive_value", "run_sql", "sql_from_args"]

_DESCRIPTION = """\
Print the one SQL statement (SELECT ... GROUP BY) that reduces TABLE, a table of scored cases (one
row per case), to the count table Fulcrum reads with --counts. Run it where the data live, export
the result (CSV or Parquet) and load it here, e.g.

  fulcrum sql warehouse.scores --score risk --label outcome --positive 1 --decimals 4 --group site
  fulcrum pick counts.csv --counts --score risk --events events --non-events non_events --group site

Dialects: ansi (PostgreSQL, Snowflake, Redshift, Trino / Presto, DuckDB and most warehouses),
duckdb, spark (Spark SQL, Databricks, Hive). With --decimals the scores move to the grid of
10^-N toward the non-flagged side in exact decimal arithmetic, so the counts at every grid
threshold equal the row-level counts exactly."""

_NUMBER = re.compile(r"^[+-]?(\d+\.?\d*|\.\d+)([eE][+-]?\d+)?$")


def add_sql(sub) -> None:
    """Register ``sql`` on an argparse subparsers object."""
    from core.sql import DIALECTS, MAX_DECIMALS

    p = sub.add_parser("sql", help="print the SQL that reduces a table to a count table",
                       description=_DESCRIPTION,
                       formatter_class=argparse.RawDescriptionHelpFormatter)
    p.add_argument("table", metavar="TABLE",
                   help="the table's name (dotted parts are quoted one by one: db.schema.scores), "
                        "or with --file the path of a file the engine reads")
    g = p.add_argument_group("columns")
    g.add_argument("--score", required=True, metavar="COL", help="the score column")
    g.add_argument("--label", required=True, metavar="COL", help="the outcome (label) column")
    g.add_argument("--positive", required=True, metavar="VALUE", action="append",
                   help="the label value that marks the event (repeat for several); written as a "
                        "number when it reads as one, true / false as a boolean, otherwise as text")
    g.add_argument("--positive-as-text", action="store_true",
                   help="write every --positive value as text (for a text label column holding "
                        "digits, e.g. '1')")
    g.add_argument("--weight", metavar="COL", help="a weight column (counts become weight sums)")
    g.add_argument("--weight-kind", choices=("frequency", "sampling"),
                   help="frequency or sampling weights; required with --weight")
    g.add_argument("--case-cost", metavar="COL",
                   help="what each missed event costs (summed over the events as event_cost)")
    g.add_argument("--group", metavar="COL", nargs="+", action="extend", default=[],
                   help="group columns (they join the grouping)")
    g.add_argument("--lower-is-riskier", action="store_true",
                   help="a lower score means higher risk (coarsened scores move up, not down)")
    s = p.add_argument_group("statement")
    s.add_argument("--decimals", metavar="N", type=int,
                   help=f"coarsen the scores to N decimals (0 to {MAX_DECIMALS}) toward the "
                        "non-flagged side; default: keep every distinct score")
    s.add_argument("--dialect", choices=DIALECTS, default="ansi",
                   help="how names and text are quoted (default: ansi)")
    s.add_argument("--file", metavar="FORMAT", choices=("parquet", "csv"),
                   help="TABLE is a file of this format, read by the engine itself (spark: "
                        "parquet.`path`; duckdb: read_parquet / read_csv)")
    p.set_defaults(func=run_sql)


def positive_value(text: str, *, as_text: bool = False):
    """The SQL constant of one ``--positive`` value: a number, a boolean, or text."""
    if as_text:
        return text
    t = text.strip()
    if t.casefold() in ("true", "false"):
        return t.casefold() == "true"
    if _NUMBER.match(t):
        return int(t) if re.match(r"^[+-]?\d+$", t) else float(t)
    return text


def _table(args):
    from core.sql import Relation, quote_literal

    if args.file is None:
        return args.table
    if args.dialect == "spark":
        return (args.file, args.table)
    if args.dialect == "duckdb":
        fn = "read_parquet" if args.file == "parquet" else "read_csv"
        return Relation(f"{fn}({quote_literal(args.table, 'duckdb')})")
    raise InputError("--file", "needs --dialect spark or duckdb: ANSI SQL has no standard way to "
                               "read a file; load it into a table first, or name the table")


def sql_from_args(args) -> str:
    """The statement the options describe (:func:`core.sql.reduction_sql`)."""
    from core.sql import reduction_sql

    if args.weight is not None and args.weight_kind is None:
        raise InputError("--weight-kind", "is required with --weight: frequency (a row stands for "
                         "w identical cases) or sampling (inverse selection probability)")
    if args.weight is None and args.weight_kind is not None:
        raise InputError("--weight-kind", "needs --weight (the weight column)")
    if not args.table.strip():
        raise InputError("TABLE", "is empty")
    positives = [positive_value(v, as_text=args.positive_as_text) for v in args.positive]
    return reduction_sql(_table(args), score=args.score, label=args.label,
                         positive=positives[0] if len(positives) == 1 else positives,
                         weight=args.weight, case_cost=args.case_cost, groups=tuple(args.group),
                         decimals=args.decimals, higher_is_riskier=not args.lower_is_riskier,
                         dialect=args.dialect)


def load_hint(args) -> str:
    """The ``fulcrum pick --counts`` line that loads the statement's exported result."""
    from shlex import quote

    parts = ["fulcrum pick COUNTS_FILE --counts", f"--score {quote(args.score)}",
             "--events events --non-events non_events"]
    if args.case_cost:
        parts.append("--event-cost event_cost")
    if args.weight and args.weight_kind == "sampling":
        parts.append("--events-sq events_sq --non-events-sq non_events_sq")
    if args.group:
        parts.append("--group " + " ".join(quote(g) for g in args.group))
    if args.lower_is_riskier:
        parts.append("--lower-is-riskier")
    return " ".join(parts)


def run_sql(args) -> int:
    """Run ``fulcrum sql`` (see the module docstring)."""
    stmt = sql_from_args(args)
    print(stmt)
    if sys.stderr.isatty():
        print(f"fulcrum: export the result and load it with: {load_hint(args)}", file=sys.stderr)
    return 0
