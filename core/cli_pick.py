"""``fulcrum pick``: choose (or evaluate) a threshold and write the record, memo and Markdown.

The same computation as the app's Memo page (:func:`core.decision.analyse`
then :func:`core.record.build_record`), so the records agree to the digit.
Prints a one-screen summary on stdout; progress goes to stderr when stderr is
a terminal. Bad input ends with exit code 2 and one line on stderr (see
:mod:`core.cli`).
"""

from __future__ import annotations

import argparse
import sys
from pathlib import Path

from core.bootstrap import DEFAULT_REPLICATES
from core.cli_columns import (
    add_counts_arguments,
    add_reduce_arguments,
    check_counts_exclusive,
    check_reduce_options,
    counts_mapping_from_args,
    reduce_from_args,
    reduce_progress_printer,
)
from core.decision import DEFAULT_POLICY, ORIGINS
from core.errors import InputError

__all__ = ["add_pick", "run_pick", "summary_lines", "mapping_from_args"]

_DESCRIPTION = """\
Choose the operating point of a rare-event score by a policy (or evaluate a threshold you set),
with intervals, stability and out-of-sample estimates, and write the decision record (JSON),
the threshold memo (PDF) and its Markdown. A one-screen summary goes to stdout.

Without --policy the objective is the highest Youden's J with no costs and no rules (the app's
start for an upload). Without --threshold Fulcrum chooses the point from these data
(data-derived); with --threshold you must say with --origin whether you fixed it before
seeing these data (pre-specified) or picked it on them (data-derived)."""


def add_pick(sub) -> None:
    """Register ``pick`` on an argparse subparsers object."""
    p = sub.add_parser("pick", help="choose a threshold and write the decision record and memo",
                       description=_DESCRIPTION, formatter_class=argparse.RawDescriptionHelpFormatter)
    p.add_argument("data", metavar="DATA", help="validation scores: CSV, TSV, Parquet or Excel")
    g = p.add_argument_group("columns")
    g.add_argument("--score", required=True, metavar="COL", help="the score column")
    g.add_argument("--label", metavar="COL",
                   help="the outcome (label) column (required unless --counts)")
    g.add_argument("--positive", metavar="VALUE",
                   help="the label value that marks the event (default: 1 when the labels are 0/1, "
                        "true when they are true/false)")
    g.add_argument("--sheet", metavar="NAME", help="Excel: the sheet to read (default: the first)")
    g.add_argument("--drop-missing-scores", action="store_true",
                   help="drop rows without a score (their count goes into the record and memo)")
    g.add_argument("--weight", metavar="COL", help="a weight column")
    g.add_argument("--weight-kind", choices=("frequency", "sampling"),
                   help="frequency (a row stands for w cases) or sampling (inverse selection "
                        "probability); required with --weight")
    g.add_argument("--group", metavar="COL", nargs="+", action="extend", default=[],
                   help="group columns for the subgroup checks (repeat or list several)")
    g.add_argument("--cluster", metavar="COL", help="cluster id (e.g. patient id)")
    g.add_argument("--score-time", metavar="COL", help="when each score was made")
    g.add_argument("--outcome-time", metavar="COL", help="when each event happened")
    g.add_argument("--outcome-horizon-days", metavar="N", type=float,
                   help="events count within N days of the score time")
    g.add_argument("--case-cost", metavar="COL", help="what each missed event costs (a column)")
    g.add_argument("--lower-is-riskier", action="store_true",
                   help="a lower score means higher risk (flag when score <= threshold)")
    add_counts_arguments(p.add_argument_group("count table (instead of one row per case)"))
    add_reduce_arguments(p.add_argument_group("files larger than memory"))
    a = p.add_argument_group("analysis")
    a.add_argument("--design", choices=("cohort", "case-control"), default="cohort",
                   help="how the validation cases were sampled (default: cohort)")
    a.add_argument("--policy", metavar="FILE", help="policy file (TOML): costs, rules, objective")
    a.add_argument("--threshold", metavar="T", type=float,
                   help="evaluate this threshold (score units) instead of choosing one")
    a.add_argument("--origin", choices=ORIGINS,
                   help="with --threshold: pre-specified (fixed before seeing these data) or "
                        "data-derived (picked on them)")
    a.add_argument("--calibrated", action="store_true",
                   help="state that the scores are calibrated probabilities (adds the "
                        "cost-derived threshold)")
    a.add_argument("--seed", metavar="N", type=int, default=0,
                   help="seed of the bootstrap and the cross-fitting folds (default: 0)")
    a.add_argument("--replicates", metavar="N", type=int, default=DEFAULT_REPLICATES,
                   help=f"bootstrap replicates (default: {DEFAULT_REPLICATES:,})")
    o = p.add_argument_group("outputs")
    o.add_argument("--production-decimals", metavar="N", type=int,
                   help="decimals the live system keeps of each score (for the test vectors)")
    o.add_argument("--memo-fields", metavar="FILE.toml",
                   help="the analyst's memo fields (TOML; the keys of the record's memo object)")
    o.add_argument("--supersedes", metavar="SHA256",
                   help="integrity.sha256 of the earlier record this one replaces")
    o.add_argument("--record", metavar="OUT.json", help="write the decision record here")
    o.add_argument("--memo", metavar="OUT.pdf", help="write the threshold memo (PDF) here")
    o.add_argument("--markdown", metavar="OUT.md", help="write the memo as Markdown here")
    p.set_defaults(func=run_pick)


def mapping_from_args(args, raw=None):
    """The :class:`~core.dataset.Mapping` the options describe.

    Without ``--positive``, a table already read (``raw``) whose labels are 0/1
    (or true/false) gets the event value 1 (true); otherwise the intake asks
    which value marks the event.
    """
    from core.dataset import Mapping
    from core.intake import label_values

    if getattr(args, "counts", False):
        return counts_mapping_from_args(args)
    check_counts_exclusive(args)
    if not args.label:
        raise InputError("--label", "is required: the outcome (label) column of one row per case "
                                    "(or give --counts with --events and --non-events for a count "
                                    "table)")
    positive = args.positive
    if positive is None and raw is not None and args.label in raw.frame.columns:
        vals = label_values(raw, args.label)
        texts = {str(t).strip().casefold() for t in vals.loc[~vals["missing"], "text"]}
        if texts and texts <= {"0", "1"}:
            positive = "1"
        elif texts and texts <= {"true", "false"}:
            positive = "true"
    if args.weight is not None and args.weight_kind is None:
        raise InputError("--weight-kind", "is required with --weight: frequency (a row stands for "
                         "w identical cases) or sampling (inverse selection probability)")
    if args.weight is None and args.weight_kind is not None:
        raise InputError("--weight-kind", "needs --weight (the weight column)")
    if args.outcome_horizon_days is not None and args.outcome_time is None:
        raise InputError("--outcome-horizon-days", "needs --outcome-time (the outcome-time column)")
    return Mapping(score=args.score, label=args.label, positive_label=positive,
                   weight=args.weight, weight_kind=args.weight_kind, groups=tuple(args.group),
                   cluster=args.cluster, score_time=args.score_time, outcome_time=args.outcome_time,
                   outcome_horizon_days=args.outcome_horizon_days, case_cost=args.case_cost,
                   higher_is_riskier=not args.lower_is_riskier,
                   drop_missing_scores=bool(args.drop_missing_scores))


def _load(args):
    """Read and check the data exactly as the app does (same messages)."""
    from core.intake import load_dataset, mapped_columns, read_table

    check_reduce_options(args)
    mapping = mapping_from_args(args)
    if args.reduce:
        return reduce_from_args(args, mapping,
                                progress=reduce_progress_printer(Path(args.data).name))
    if mapping.kind == "counts":
        from core.intake import load_count_table

        try:
            return load_count_table(args.data, mapping, sheet=args.sheet)
        except InputError as exc:
            if exc.column in mapping.groups and not exc.n_rows:
                raise InputError(exc.column, f"{exc.problem}. A count table can only be split by "
                                 "the group columns it was counted by; count the rows again with "
                                 "this column among the groups (fulcrum sql --group, or --reduce "
                                 "on the row file), or give the rows") from None
            raise
    if mapping.positive_label is not None:
        return load_dataset(args.data, mapping, sheet=args.sheet)
    raw = read_table(args.data, sheet=args.sheet, columns=mapped_columns(mapping))
    return load_dataset(raw, mapping_from_args(args, raw))


def _progress_printer():
    if not sys.stderr.isatty():
        return None, lambda msg: None
    state = {"last": -1}

    def say(msg):
        print(f"fulcrum: {msg}", file=sys.stderr, flush=True)

    def progress(done, total):
        pct = int(100 * done / max(total, 1))
        if pct // 10 != state["last"] // 10 or done == total:
            state["last"] = pct
            print(f"\rfulcrum: bootstrap {done:,} of {total:,} replicates", end="" if done < total
                  else "\n", file=sys.stderr, flush=True)

    return progress, say


def run_pick(args) -> int:
    """Run ``fulcrum pick`` (see the module docstring)."""
    from core.decision import analyse
    from core.memo_fields import load_memo_fields
    from core.policy import Policy, load_policy
    from core.record import build_record, write_record

    progress, say = _progress_printer()
    if args.origin is not None and args.threshold is None:
        raise InputError("--origin", "needs --threshold: the origin is that of a threshold you set")
    if args.threshold is not None and args.origin is None:
        raise InputError("--origin", "is required with --threshold: pre-specified (fixed before "
                         "these data were seen) or data-derived (picked on them)")
    policy = load_policy(args.policy) if args.policy else Policy.from_dict(DEFAULT_POLICY)
    memo_fields = load_memo_fields(args.memo_fields) if args.memo_fields else None
    for opt, path in (("--record", args.record), ("--memo", args.memo), ("--markdown", args.markdown)):
        if path and not Path(path).resolve().parent.is_dir():
            raise InputError(opt, f"the folder of {path} does not exist")
    say(f"reading {args.data}")
    dataset = _load(args)
    say(f"{dataset.n_rows:,} cases, {dataset.n_events:,.0f} events; choosing and resampling")
    analysis = analyse(dataset, policy, threshold=args.threshold, origin=args.origin,
                       design=args.design, seed=args.seed, n_replicates=args.replicates,
                       calibrated=args.calibrated, production_decimals=args.production_decimals,
                       sheet=args.sheet, progress=progress)
    record = build_record(analysis, memo_fields=memo_fields, supersedes=args.supersedes)
    written = []
    if args.record:
        write_record(record, args.record)
        written.append(("record", args.record))
    if args.memo:
        from core.memo_pdf import write_memo_pdf

        say("drawing the memo")
        write_memo_pdf(record, args.memo)
        written.append(("memo", args.memo))
    if args.markdown:
        from core.memo_markdown import write_memo_markdown

        write_memo_markdown(record, args.markdown)
        written.append(("markdown", args.markdown))
    print("\n".join(summary_lines(record, written)))
    return 0


def summary_lines(record: dict, written=()) -> list[str]:
    """The one-screen summary ``fulcrum pick`` prints (plain ASCII apart from the data's names)."""
    from core import cautions
    from core.memo_content import fmt_ci, fmt_count, fmt_interval, fmt_num, fmt_pct, fmt_threshold

    def pct(x):
        return fmt_pct(x, 2 if x is not None and abs(x) < 0.1 else 1)

    d = record["data"]
    m = record["metrics"]
    ch = record.get("choice", {})
    op = ">=" if record["higher_is_riskier"] else "<="
    opt = m["optimism"]
    pi = m["deployment_prevalence"]
    out = [f"Fulcrum {record['software_version']}: {d.get('file_name') or 'data'} "
           f"({fmt_count(d['rows'])} cases, {fmt_count(d['events'])} events, prevalence "
           f"{pct(d['prevalence'])}); fingerprint {d['sha256'][:16]}",
           ""]
    red = d.get("reduction")
    if red:
        rnd = red.get("rounding")
        line = (f"Counted by {red['engine']}: {fmt_count(red['rows_read'])} rows into "
                f"{fmt_count(red['table_rows'])} count-table rows")
        if rnd:
            def n(v):
                return fmt_num(v, 0 if float(v).is_integer() else 2)
            line += (f"; scores rounded {'down' if rnd['direction'] == 'floor' else 'up'} to "
                     f"{rnd['decimals']} decimal{'' if rnd['decimals'] == 1 else 's'} (exact on "
                     f"that grid; between grid values up to {n(rnd['max_events_off_grid'])} "
                     f"events and {n(rnd['max_non_events_off_grid'])} non-events fewer flagged)")
        out[-1:-1] = [line]
    t = record["threshold"]
    if t in ("inf", "-inf"):
        out.append(f"Threshold: {fmt_threshold(t)}  [{record['threshold_origin']}]")
    else:
        out.append(f"Threshold: flag when {d['score_column']} {op} {fmt_threshold(t)}  "
                   f"[{record['threshold_origin']}, {ch.get('method', '')}]")
    out.append(f"  same decisions for every threshold in {fmt_interval(record['threshold_interval'])}; "
               f"objective: {ch.get('objective_label', '')} at pi = {pct(pi)} "
               f"({m.get('deployment_prevalence_source') or 'default'})")
    out.append("")
    out.append(f"  {'at pi':<24}{'apparent (95 % CI)':<36}{'cross-fitted':<14}corrected")
    for q, label in (("recall", "recall"), ("precision", "precision"), ("flag_rate", "flag rate")):
        out.append(f"  {label:<24}{fmt_ci(m['deployment'][q], pct):<36}"
                   f"{pct(opt['cross_fitted'].get(q)):<14}{pct(opt['corrected'].get(q))}")
    c = m["expected_cost"]
    if c.get("per_case") is not None:
        def w(v):
            return fmt_num(v, 4)
        out.append(f"  {'cost per case':<24}"
                   f"{fmt_ci({'value': c['per_case'], 'ci_low': c.get('ci_low'), 'ci_high': c.get('ci_high')}, w):<36}"
                   f"{w(opt['cross_fitted'].get('cost')):<14}{w(opt['corrected'].get('cost'))} "
                   f"{c.get('unit') or ''}")
    p = m["workload"]["per_1000"]
    out.append("")
    out.append(f"Per 1,000 cases: {fmt_num(p['flagged'], 1)} flagged ({fmt_num(p['true_alerts'], 1)} "
               f"events, {fmt_num(p['false_alerts'], 1)} false alarms), "
               f"{fmt_num(p['missed_events'], 1)} events missed")
    pp = m["workload"].get("per_period")
    if pp:
        out.append(f"Per {m['workload']['period']} ({fmt_num(pp['cases'], 0)} cases): "
                   f"{fmt_num(pp['flagged'], 1)} flagged, {fmt_num(pp['missed_events'], 1)} events missed")
    for r in ch.get("rules", []):
        lim = fmt_num(r["limit"], 0) if r["name"] == "max_flagged_per_period" else pct(r["limit"])
        val = fmt_num(r["value"], 1) if r["name"] == "max_flagged_per_period" else pct(r["value"])
        bound = "" if r.get("bound") is None else (
            f" (bound {fmt_num(r['bound'], 1) if r['name'] == 'max_flagged_per_period' else pct(r['bound'])})")
        out.append(f"Rule {r['label']} {lim}: {val}{bound}, {'met' if r['met'] else 'NOT MET'}"
                   + (", binds" if r.get("binding") else ""))
    st = record["stability"]
    if "threshold_range_95" in st:
        lo, hi = st["threshold_range_95"]
        out.append(f"Stability: 95 % of bootstrap choices from {fmt_threshold(lo)} to "
                   f"{fmt_threshold(hi)}; {fmt_pct(st['share_same_point'])} pick the same point")
    out.append("")
    if record["cautions"].get("few_events"):
        out.append("CAUTION: " + record["cautions"]["few_events"])
    out.append("Note: " + cautions.SHORT)
    out.append(f"Record sha256 {record['integrity']['sha256']}")
    for what, path in written:
        out.append(f"Wrote the {what}: {path}")
    return out
