"""Shared command-line options for a count table (``--counts`` and its columns).

A count table holds one row per distinct score (optionally per score and
group) with the events and non-events there -- the weight sums for weighted
data -- and optionally the events' summed miss cost and the squared-weight
sums (what :func:`core.intake.load_count_table` reads and ``fulcrum sql``
prints the statement for). Every command that reads validation scores adds
these options with :func:`add_counts_arguments`, checks them once with
:func:`check_counts_exclusive` and builds the mapping with
:func:`counts_mapping_from_args`.

``--counts`` is exclusive with the options of a row file: the label and its
event value, the weight and its kind, the per-case miss cost and the other
per-case columns (cluster, times). A count table carries none of these; its
``--event-cost`` column is the events' summed miss cost per table row, and a
policy's ``false_negative_column`` names that column.
"""

from __future__ import annotations

import sys

from core.errors import InputError

__all__ = [
    "COUNTS_CLASHES",
    "COUNTS_COLUMNS",
    "add_counts_arguments",
    "add_reduce_arguments",
    "check_counts_exclusive",
    "check_reduce_options",
    "counts_mapping_from_args",
    "reduce_from_args",
    "reduce_progress_printer",
]

#: option dest -> (option as typed, why a count table cannot take it)
COUNTS_CLASHES = {
    "label": ("--label", ("a count table has no label column; its --events and --non-events "
                         "columns hold the counts")),
    "positive": ("--positive", ("a count table has no label values; its --events column holds "
                               "the events")),
    "weight": ("--weight", ("a count table's --events and --non-events already hold the weight "
                           "sums; give the squared-weight sums with --events-sq / --non-events-sq "
                           "for sampling weights")),
    "weight_kind": ("--weight-kind", "a count table has no weight column"),
    "case_cost": ("--case-cost", ("a count table has no per-case miss costs; give the events' "
                                 "summed miss cost per table row with --event-cost")),
    "cluster": ("--cluster", "a count table has no case ids; clusters need the rows"),
    "score_time": ("--score-time", ("a count table has no score times; capacity over time needs "
                                   "the rows")),
    "outcome_time": ("--outcome-time", "a count table has no outcome times; they need the rows"),
    "outcome_horizon_days": ("--outcome-horizon-days", ("a count table has no outcome times; the "
                                                       "horizon needs the rows")),
}

#: option dest -> option as typed, for the count-table columns
COUNTS_COLUMNS = {"events": "--events", "non_events": "--non-events",
                  "event_cost": "--event-cost", "events_sq": "--events-sq",
                  "non_events_sq": "--non-events-sq"}


def add_counts_arguments(group) -> None:
    """Add ``--counts``, ``--events``, ``--non-events``, ``--event-cost`` (and the squared sums).

    ``group`` is an argparse parser or argument group; ``--score`` and
    ``--lower-is-riskier`` are the command's own.
    """
    group.add_argument("--counts", action="store_true",
                       help="DATA is a count table (one row per score, or per score and group, "
                            "with the events and non-events there) instead of one row per case; "
                            "needs --events and --non-events, excludes --label, --positive, "
                            "--weight and --case-cost")
    group.add_argument("--events", metavar="COL",
                       help="with --counts: the column of events (or their weight sum) per row")
    group.add_argument("--non-events", metavar="COL",
                       help="with --counts: the column of non-events (or their weight sum) per row")
    group.add_argument("--event-cost", metavar="COL",
                       help="with --counts: the events' summed miss cost per row (a policy's "
                            "false_negative_column names this column)")
    group.add_argument("--events-sq", metavar="COL",
                       help="with --counts: the events' sum of squared sampling weights per row")
    group.add_argument("--non-events-sq", metavar="COL",
                       help="with --counts: the non-events' sum of squared sampling weights per row")


def _given(args, dest) -> bool:
    v = getattr(args, dest, None)
    if isinstance(v, (list, tuple)):
        return False  # list options (groups) are allowed with both kinds
    return v is not None and v is not False


def check_counts_exclusive(args, *, need_columns: bool = True) -> None:
    """Check the count-table options once; raise :class:`InputError` (exit 2) naming the option.

    With ``--counts``: every row-file option given is a clash (the first one
    is named, with why), and ``--events`` / ``--non-events`` must be given
    (``need_columns=False`` lets a command take them from elsewhere, e.g. a
    decision record). Without ``--counts``: a count-table column option is
    named as needing ``--counts``.
    """
    if getattr(args, "counts", False):
        clashes = [opt for dest, (opt, _) in COUNTS_CLASHES.items() if _given(args, dest)]
        if clashes:
            dest = next(d for d, (o, _) in COUNTS_CLASHES.items() if o == clashes[0])
            also = f" (also given: {', '.join(clashes[1:])})" if len(clashes) > 1 else ""
            raise InputError(clashes[0], f"cannot be used with --counts: "
                                         f"{COUNTS_CLASHES[dest][1]}{also}")
        if need_columns:
            missing = [opt for dest, opt in (("events", "--events"), ("non_events", "--non-events"))
                       if not _given(args, dest)]
            if missing:
                raise InputError(missing[0], f"is required with --counts: the column of "
                                 f"{'events' if missing[0] == '--events' else 'non-events'} per "
                                 f"table row" + (" (and --non-events, the non-events)"
                                                 if len(missing) == 2 else ""))
        sq = [_given(args, "events_sq"), _given(args, "non_events_sq")]
        if sq[0] != sq[1]:
            opt = "--non-events-sq" if sq[0] else "--events-sq"
            raise InputError(opt, "is required with " + ("--events-sq" if sq[0] else "--non-events-sq")
                             + ": squared-weight sums come for both classes or neither")
        return
    given = [opt for dest, opt in COUNTS_COLUMNS.items() if _given(args, dest)]
    if given:
        raise InputError(given[0], "needs --counts: it names a count-table column (DATA is read "
                                   "as one row per case without --counts)")


def counts_mapping_from_args(args):
    """The count-table :class:`~core.dataset.Mapping` (``kind="counts"``) the options describe.

    Calls :func:`check_counts_exclusive` first. Group columns (``--group``)
    must be columns of the table.
    """
    from core.dataset import Mapping

    check_counts_exclusive(args)
    if not getattr(args, "score", None):
        raise InputError("--score", "is required: the count table's score column")
    return Mapping(score=args.score, kind="counts", events=args.events,
                   non_events=args.non_events, event_cost=getattr(args, "event_cost", None),
                   events_sq=getattr(args, "events_sq", None),
                   non_events_sq=getattr(args, "non_events_sq", None),
                   groups=tuple(getattr(args, "group", None) or ()),
                   higher_is_riskier=not getattr(args, "lower_is_riskier", False),
                   drop_missing_scores=bool(getattr(args, "drop_missing_scores", False)))


# =========================================================================== --reduce

#: per-case options a reduction cannot carry into its count table
_REDUCE_CLASHES = ("cluster", "score_time", "outcome_time", "outcome_horizon_days")


def add_reduce_arguments(group) -> None:
    """Add ``--reduce``, ``--decimals N`` and ``--memory-limit SIZE``.

    ``--reduce`` reads a Parquet or CSV file of one row per case with DuckDB
    (:func:`core.reduce.reduce_file`) without loading it into memory, and
    goes on with the count table it gives.
    """
    group.add_argument("--reduce", action="store_true",
                       help="DATA is a Parquet or CSV file too large to load: count it with DuckDB "
                            "(in-process, memory limit, 2 threads, a private temporary folder) into "
                            "a count table, then go on with that")
    group.add_argument("--decimals", metavar="N", type=int,
                       help="with --reduce: round the scores to N decimals toward the non-flagged "
                            "side first (exact at every threshold on that grid; the memo states "
                            "the largest effect elsewhere); default: keep every distinct score")
    group.add_argument("--memory-limit", metavar="SIZE", default="1GB",
                       help="with --reduce: DuckDB's memory limit (default: 1GB)")


def check_reduce_options(args) -> None:
    """The ``--reduce`` options once: exclusive with ``--counts`` and the per-case columns."""
    if not getattr(args, "reduce", False):
        for dest, opt in (("decimals", "--decimals"),):
            if getattr(args, dest, None) is not None:
                raise InputError(opt, "needs --reduce: only a reduction rounds the scores")
        return
    if getattr(args, "counts", False):
        raise InputError("--reduce", "cannot be used with --counts: DATA is already a count table")
    for dest in _REDUCE_CLASHES:
        if _given(args, dest):
            opt, why = COUNTS_CLASHES[dest]
            raise InputError(opt, f"cannot be used with --reduce: the reduction gives a count "
                                  f"table, and {why}")
    if getattr(args, "sheet", None) is not None:
        raise InputError("--sheet", "cannot be used with --reduce: it reads Parquet or CSV files, "
                                    "not Excel")


def reduce_progress_printer(label: str, stream=None):
    """``progress(fraction, stage)`` printing a line per stage and per 10 % on a terminal, else None.

    ``stream`` defaults to stderr; nothing is printed unless it is a
    terminal (``isatty()``), so pipes and logs stay clean.
    """
    out = sys.stderr if stream is None else stream
    if not out.isatty():
        return None
    state = {"stage": None, "tenth": -1}

    def progress(fraction, stage):
        tenth = int(10 * max(0.0, min(1.0, float(fraction))))
        if stage != state["stage"] or tenth > state["tenth"]:
            state["stage"], state["tenth"] = stage, tenth
            print(f"fulcrum: reducing {label}: {stage} ({10 * tenth} %)", file=out, flush=True)

    return progress


def reduce_from_args(args, mapping, *, progress=None):
    """Reduce ``args.data`` with the row ``mapping`` (:func:`core.reduce.reduce_file`).

    Without an event value, labels 0/1 (true/false) take 1 (true) as the
    event, as ``fulcrum pick`` reads a row file.
    """
    from core.reduce import reduce_file

    check_reduce_options(args)
    return reduce_file(args.data, score=mapping.score, label=mapping.label,
                       positive=mapping.positive_label, weight=mapping.weight,
                       weight_kind=mapping.weight_kind, case_cost=mapping.case_cost,
                       groups=mapping.groups, higher_is_riskier=mapping.higher_is_riskier,
                       drop_missing_scores=mapping.drop_missing_scores, decimals=args.decimals,
                       memory_limit=args.memory_limit, progress=progress, default_positive=True)
