"""``fulcrum recheck``: does an approved threshold still hold on new validation scores?

The same computation as the app's Recheck page (:func:`core.recheck.recheck`
then :func:`core.recheck.build_recheck_record`), so their recheck records
agree but for the time. Prints the verdict summary first, then the rules,
groups, drift, calibration and what the same policy would choose now.

Exit codes: 0 every rule holds (overall and in every group), 1 any rule fails
or is unclear, 2 bad input or a decision record that fails its integrity
check (one line on stderr, see :mod:`core.cli`).
"""

from __future__ import annotations

import argparse
from pathlib import Path

from core.cli_columns import (
    add_counts_arguments,
    add_reduce_arguments,
    check_counts_exclusive,
    check_reduce_options,
    reduce_from_args,
    reduce_progress_printer,
)
from core.cli_sign import add_signature_arguments, signature_from_args
from core.errors import InputError

__all__ = ["add_recheck", "override_from_args", "recheck_summary_lines", "run_recheck"]

_DESCRIPTION = """\
Recheck an approved threshold on new labelled scores. The decision record's integrity is checked
first; the new data are read with the record's column mapping and event value (give --score,
--label, --positive ... only for what changed, e.g. renamed columns). Cases whose outcome window
is still open at --as-of (default: today, always printed) are left out. Every rule of the record's
policy is judged as at approval (one-sided bounds at the record's confidence): holds, fails or
unclear, overall and per subgroup; the scores' drift, calibration drift and what the same policy
would choose now are reported. --policy FILE changes the policy for that last part only (what
changed is listed); the verdicts stay judged against the record's policy (the approval).

Exit status: 0 every rule holds, 1 any rule fails or is unclear, 2 bad input or a record that
fails its integrity check."""

#: option dest -> Mapping field
_OVERRIDES = {"score": "score", "label": "label", "positive": "positive_label",
              "weight": "weight", "weight_kind": "weight_kind", "cluster": "cluster",
              "score_time": "score_time", "outcome_time": "outcome_time", "case_cost": "case_cost"}


def add_recheck(sub) -> None:
    """Register ``recheck`` on an argparse subparsers object."""
    p = sub.add_parser("recheck", help="recheck an approved threshold on new scores",
                       description=_DESCRIPTION,
                       formatter_class=argparse.RawDescriptionHelpFormatter)
    p.add_argument("data", metavar="NEW_DATA", help="new labelled scores: CSV, TSV, Parquet or Excel")
    p.add_argument("--record", required=True, metavar="DECISION.json",
                   help="the decision record (fulcrum.decision/1) whose threshold is rechecked")
    g = p.add_argument_group("columns (only what differs from the record's mapping)")
    g.add_argument("--score", metavar="COL", help="the score column")
    g.add_argument("--label", metavar="COL", help="the outcome (label) column")
    g.add_argument("--positive", metavar="VALUE", help="the label value that marks the event")
    g.add_argument("--sheet", metavar="NAME", help="Excel: the sheet to read (default: the first)")
    g.add_argument("--weight", metavar="COL", help="a weight column")
    g.add_argument("--weight-kind", choices=("frequency", "sampling"), help="with --weight")
    g.add_argument("--group", metavar="COL", nargs="+", action="extend", default=None,
                   help="group columns (replace the record's)")
    g.add_argument("--cluster", metavar="COL", help="cluster id (e.g. patient id)")
    g.add_argument("--score-time", metavar="COL", help="when each score was made")
    g.add_argument("--outcome-time", metavar="COL", help="when each event happened")
    g.add_argument("--case-cost", metavar="COL", help="what each missed event costs (a column)")
    add_counts_arguments(p.add_argument_group(
        "count table (instead of one row per case; --events and --non-events are required unless "
        "the record's data were a count table)"))
    add_reduce_arguments(p.add_argument_group("files larger than memory"))
    a = p.add_argument_group("recheck")
    a.add_argument("--as-of", metavar="DATE",
                   help="label maturity as of this date (ISO 8601; default: today)")
    a.add_argument("--live", action="store_true",
                   help="the new data were collected while the approved threshold was live")
    a.add_argument("--policy", metavar="FILE",
                   help="policy file (TOML, as for pick) for what would be chosen now; default: "
                        "the record's resolved policy. The verdicts keep the record's policy")
    a.add_argument("--seed", metavar="N", type=int, default=None,
                   help="seed of the subgroup bootstrap (default: the record's)")
    a.add_argument("--replicates", metavar="N", type=int, default=None,
                   help="bootstrap replicates of the subgroup table (default: the record's)")
    add_signature_arguments(p.add_argument_group("signature of the decision record"))
    o = p.add_argument_group("outputs")
    o.add_argument("--out", metavar="RECHECK.json", help="write the recheck record here")
    o.add_argument("--memo", metavar="OUT.pdf", help="write the recheck memo (PDF) here")
    o.add_argument("--markdown", metavar="OUT.md", help="write the recheck memo as Markdown here")
    p.set_defaults(func=run_recheck)


def override_from_args(args, record: dict | None = None) -> dict:
    """The mapping fields the options change (None: keep the record's).

    With ``--counts`` the new data are a count table: the mapping becomes
    ``kind="counts"`` and the record's per-case columns (label, event value,
    weight, case cost, cluster, times) are cleared. ``--events`` and
    ``--non-events`` may be left out only when the record's own data were a
    count table (``record`` given), whose columns are then kept.
    """
    base = ((record or {}).get("data") or {}).get("mapping") or {}
    was_counts = base.get("kind") == "counts"
    check_counts_exclusive(args, need_columns=not was_counts)
    over = {field: getattr(args, dest) for dest, field in _OVERRIDES.items()
            if getattr(args, dest) is not None}
    if args.group is not None:
        over["groups"] = tuple(args.group)
    if getattr(args, "counts", False):
        over.update({"kind": "counts", "label": None, "positive_label": None, "weight": None,
                     "weight_kind": None, "case_cost": None, "cluster": None, "score_time": None,
                     "outcome_time": None, "outcome_horizon_days": None})
        for dest, field in (("events", "events"), ("non_events", "non_events"),
                            ("event_cost", "event_cost"), ("events_sq", "events_sq"),
                            ("non_events_sq", "non_events_sq")):
            if getattr(args, dest, None) is not None:
                over[field] = getattr(args, dest)
        if not was_counts:
            for field in ("event_cost", "events_sq", "non_events_sq"):
                over.setdefault(field, None)
    return over


def reduced_source(args, record: dict):
    """With ``--reduce``: the new file counted by DuckDB into a count-table Dataset, else None.

    The rows are read with the record's row mapping updated by the options
    (renamed columns, a new event value). A record made on a table that
    ``--reduce`` counted names its source columns in ``data.reduction``; a
    record made on another count table names none, so ``--label`` (and
    ``--positive`` unless the labels are 0/1) must be given.
    """
    from core.dataset import Mapping

    check_reduce_options(args)
    if not args.reduce:
        return None
    data = record.get("data") or {}
    base = dict(data.get("mapping") or {})
    red = data.get("reduction")
    if base.get("kind") == "counts":
        for k in ("events", "non_events", "event_cost", "events_sq", "non_events_sq"):
            base[k] = None
        base["kind"] = "rows"
        if red:
            base.update(label=red.get("label"), positive_label=red.get("positive_label"),
                        weight=red.get("weight"), weight_kind=red.get("weight_kind"),
                        case_cost=red.get("case_cost"))
        elif args.label is None:
            raise InputError("--label", "is required with --reduce here: the decision record was "
                                        "made on a count table and names no label column to count")
    over = override_from_args(args, record)
    mapping = Mapping.from_dict(base | over)
    if mapping.label is None:
        raise InputError("--label", "is required with --reduce: the label column to count")
    return reduce_from_args(args, mapping, progress=reduce_progress_printer(Path(args.data).name))


def run_recheck(args) -> int:
    """Run ``fulcrum recheck`` (see the module docstring)."""
    from core.recheck import build_recheck_record, exit_code, recheck, write_recheck
    from core.record import load_record

    for opt, path in (("--out", args.out), ("--memo", args.memo), ("--markdown", args.markdown)):
        if path and not Path(path).resolve().parent.is_dir():
            raise InputError(opt, f"the folder of {path} does not exist")
    verification = signature_from_args(args, args.record)  # exit 2 when not valid
    record = load_record(args.record)
    policy = None
    if args.policy:
        from core.policy import load_policy

        policy = load_policy(args.policy)
    an = record.get("analysis") or {}
    seed = args.seed if args.seed is not None else int(an.get("seed", 0))
    reps = args.replicates if args.replicates is not None else int(an.get("n_replicates", 2000))
    source = args.data
    if args.sheet is not None:
        from core.reading import read_table

        source = read_table(args.data, sheet=args.sheet)
    source = reduced_source(args, record) or source
    result = recheck(record, source, as_of=args.as_of, live=args.live,
                     mapping_override=override_from_args(args, record), policy=policy,
                     n_replicates=reps, seed=seed)
    rec = build_recheck_record(result, signature=None if verification is None
                               else verification.to_dict())
    written = []
    if args.out:
        write_recheck(rec, args.out)
        written.append(("recheck record", args.out))
    if args.memo:
        from core.recheck_memo import write_recheck_pdf

        write_recheck_pdf(rec, args.memo)
        written.append(("recheck memo", args.memo))
    if args.markdown:
        from core.recheck_memo import write_recheck_markdown

        write_recheck_markdown(rec, args.markdown)
        written.append(("markdown", args.markdown))
    if verification is not None:
        print(verification.line())
    print("\n".join(recheck_summary_lines(rec, written)))
    return exit_code(result)


def recheck_summary_lines(rec: dict, written=()) -> list[str]:
    """The summary ``fulcrum recheck`` prints, verdict summary first."""
    from core import cautions
    from core.recheck_memo import rule_line

    d = rec["data"]
    out = [f"Recheck: {rec['summary']}  [{rec['overall_verdict'].upper()}]", "",
           (f"Decision record {rec['decision_record']['sha256'][:16]} (threshold "
            f"{rec['threshold']}, {'>=' if rec['higher_is_riskier'] else '<='}); new data "
            f"{d.get('file_name') or 'data'}: {d['rows']:,} cases, {d['mature_rows']:,} mature, "
            f"{d['events']:,.0f} events"),
           rec["maturity"]["statement"]]
    if rec.get("model_effect"):
        out.append("LIVE: " + rec["model_effect"])
    out.append("")
    for v in rec["rules"]:
        out.append("Rule " + rule_line(v))
    for g in rec["groups"]["compared"]:
        for v in g["verdicts"]:
            if v["verdict"] != "holds":
                out.append(f"  {g['column']} = {g['group']}: " + rule_line(v))
    if rec["groups"].get("overlaps"):
        out.append("  " + rec["groups"]["overlaps"]["statement"])
    if rec["groups"]["new"]:
        out.append("New groups: " + ", ".join(rec["groups"]["new"]))
    if rec["groups"]["vanished"]:
        out.append("Vanished groups: " + ", ".join(rec["groups"]["vanished"]))
    dr = rec["drift"]
    out.append("")
    out.append(f"Drift: PSI {dr['psi']['value']:.3f} ({dr['psi']['band']}), events "
               f"{dr['psi_events']['value']:.3f} ({dr['psi_events']['band']}), non-events "
               f"{dr['psi_non_events']['value']:.3f} ({dr['psi_non_events']['band']}); KS "
               f"{dr['ks']['statistic']:.3f} (exact at most {dr['ks']['upper_bound']:.3f})")
    out.append(dr["prevalence"]["statement"])
    cal = rec["calibration_drift"]
    out.append(f"Calibration: {cal['verdict']}" + ("; changed since approval" if cal["drifted"]
                                                    else ""))
    now = rec["policy_now"]
    if now.get("policy_source") == "changed":
        from core.recheck_memo import policy_value

        out.append("Changed policy now (" + "; ".join(
            f"{c['key']} {policy_value(c['old'])} -> {policy_value(c['new'])}"
            for c in now["changes"]) + "): " + now["statement"])
        out.append("  " + now["verdict_basis"])
    else:
        out.append("Same policy now: " + now["statement"])
    fpp = now.get("flags_per_period")
    if fpp:
        for r in fpp["rows"]:
            if r.get("median") is not None:
                out.append(f"  Flagged per {r['period']}, {r['point']}: median {r['median']:,.1f}, "
                           f"{r['quantile_level']:g}-quantile {r['quantile']:,.1f}, maximum "
                           f"{r['max']:,.1f} over {r['n_periods']:,} {r['period']}s")
    out.append("")
    out.append("Note: " + cautions.SHORT)
    out.append(f"Recheck record sha256 {rec['integrity']['sha256']}")
    for what, path in written:
        out.append(f"Wrote the {what}: {path}")
    return out
