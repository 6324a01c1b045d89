"""``fulcrum compare``: two or more score columns on the same cases, the reference first.

The same computation as the app's Compare page (:func:`core.compare.compare_mapped`
on the dataset the intake builds with extra score columns), written as the
comparison document (``fulcrum.compare/1``, :mod:`core.compare_record`), a
comparison memo (PDF and Markdown, :mod:`core.compare_memo`) and a one-screen
summary on stdout. The paired bootstrap reports its progress on stderr when
stderr is a terminal. Bad input ends with exit code 2 and one line on stderr
(see :mod:`core.cli`).
"""

from __future__ import annotations

import argparse
import math
from pathlib import Path

from core.bootstrap import DEFAULT_REPLICATES
from core.errors import InputError

__all__ = ["add_compare", "compare_mapping_from_args", "run_compare", "summary_lines"]

_DESCRIPTION = """\
Compare versions of a rare-event score on the same cases: did the change help, or does it just
flag less? The first --score is the reference (the current model), every further --score a
candidate. Each gets its own exact curve; the comparison gives the ROC AUC difference with
DeLong's interval for correlated curves, the average-precision difference with a paired
bootstrap, recall at the same workload, precision at the same recall, each score under the same
policy at its own threshold, the cases only one model catches (McNemar's test), accuracy beside
flag rate and recall, and a plain-words verdict with intervals.

A count table holds one score only, so --counts is refused: give one row per case."""


def add_compare(sub) -> None:
    """Register ``compare`` on an argparse subparsers object."""
    p = sub.add_parser("compare", help="compare two or more scores on the same cases",
                       description=_DESCRIPTION,
                       formatter_class=argparse.RawDescriptionHelpFormatter)
    p.add_argument("data", metavar="DATA", help="validation scores: CSV, TSV, Parquet or Excel")
    g = p.add_argument_group("columns")
    g.add_argument("--score", action="append", default=[], metavar="COL",
                   help="a score column; give it two or more times: the first is the reference "
                        "(current model), the others are candidates")
    g.add_argument("--label", metavar="COL", help="the outcome (label) column")
    g.add_argument("--positive", metavar="VALUE",
                   help="the label value that marks the event (default: 1 when the labels are 0/1, "
                        "true when they are true/false)")
    g.add_argument("--lower-is-riskier", action="append", default=[], metavar="COL",
                   help="this score column is flagged when score <= threshold (lower means "
                        "riskier); repeat for each such column")
    g.add_argument("--sheet", metavar="NAME", help="Excel: the sheet to read (default: the first)")
    g.add_argument("--drop-missing-scores", action="store_true",
                   help="drop rows missing any of the scores (their count is reported)")
    g.add_argument("--weight", metavar="COL", help="a weight column")
    g.add_argument("--weight-kind", choices=("frequency", "sampling"),
                   help="frequency (a row stands for w cases) or sampling (inverse selection "
                        "probability); required with --weight")
    g.add_argument("--group", metavar="COL", nargs="+", action="extend", default=[],
                   help="group columns (kept in the mapping and the fingerprint)")
    g.add_argument("--cluster", metavar="COL", help="cluster id (e.g. patient id)")
    g.add_argument("--score-time", metavar="COL",
                   help="when each score was made (for a policy's capacity rule)")
    g.add_argument("--case-cost", metavar="COL",
                   help="what each missed event costs (for a policy's false_negative_column)")
    g.add_argument("--counts", action="store_true",
                   help="refused: a count table holds one score, so two scores cannot be compared "
                        "on it")
    a = p.add_argument_group("analysis")
    a.add_argument("--policy", metavar="FILE",
                   help="policy file (TOML): each score at its own threshold under it")
    a.add_argument("--threshold", action="append", default=[], metavar="COL=T",
                   help="a score's given threshold, e.g. the one in production (repeatable)")
    a.add_argument("--flag-rate", metavar="Q", type=float,
                   help="the common workload as a share of cases (default: the reference's flag "
                        "rate at its own point, else the prevalence)")
    a.add_argument("--recall", metavar="R", type=float,
                   help="the common recall (default: the reference's recall at the workload)")
    a.add_argument("--calibrated", action="store_true",
                   help="state that the scores are calibrated probabilities (for the policy)")
    a.add_argument("--seed", metavar="N", type=int, default=0,
                   help="seed of the paired bootstrap (default: 0)")
    a.add_argument("--replicates", metavar="N", type=int, default=DEFAULT_REPLICATES,
                   help=f"paired bootstrap replicates (default: {DEFAULT_REPLICATES:,}; 0: none)")
    o = p.add_argument_group("outputs")
    o.add_argument("--out", metavar="COMPARE.json", help="write the comparison document here")
    o.add_argument("--memo", metavar="OUT.pdf", help="write the comparison memo (PDF) here")
    o.add_argument("--markdown", metavar="OUT.md", help="write the memo as Markdown here")
    p.set_defaults(func=run_compare)


def _check_scores(args) -> tuple[str, list[str]]:
    if args.counts:
        raise InputError("--counts", "compare needs one row per case: a count table holds one "
                         "score only, so two scores cannot be compared on it")
    if len(args.score) < 2:
        raise InputError("--score", "give at least two score columns: the first is the reference "
                         "(current model), the others are candidates"
                         + (f" (got only {args.score[0]!r})" if args.score else ""))
    seen = set()
    for col in args.score:
        if col in seen:
            raise InputError("--score", f"{col!r} is given twice; each --score names a different "
                             "column")
        seen.add(col)
    for col in args.lower_is_riskier:
        if col not in seen:
            raise InputError("--lower-is-riskier", f"names {col!r}, which is not among the --score "
                             f"columns ({', '.join(map(repr, args.score))})")
    if args.label is None:
        raise InputError("--label", "is required: the outcome (label) column")
    return args.score[0], args.score[1:]


def compare_mapping_from_args(args, raw=None):
    """The :class:`~core.dataset.Mapping` the options describe: the first ``--score`` as the
    score, the others as extra scores (the event value inferred as ``fulcrum pick`` does)."""
    import dataclasses

    from core.cli_pick import mapping_from_args

    ref, others = _check_scores(args)
    lower = set(args.lower_is_riskier)
    one = argparse.Namespace(**{**vars(args), "score": ref, "lower_is_riskier": ref in lower,
                                "outcome_time": None, "outcome_horizon_days": None})
    m = mapping_from_args(one, raw)
    return dataclasses.replace(m, extra_scores=tuple(others),
                               extra_lower_is_riskier=tuple(c for c in others if c in lower))


def _load(args):
    """Read and check the data exactly as the app does (same messages)."""
    from core.intake import load_dataset, mapped_columns, read_table

    mapping = compare_mapping_from_args(args)
    if mapping.positive_label is not None:
        return load_dataset(args.data, mapping, sheet=args.sheet)
    raw = read_table(args.data, sheet=args.sheet, columns=mapped_columns(mapping))
    return load_dataset(raw, compare_mapping_from_args(args, raw))


def _thresholds(args) -> dict | None:
    out = {}
    for item in args.threshold:
        col, sep, value = item.partition("=")
        col = col.strip()
        if not sep or not col:
            raise InputError("--threshold", f"expects COL=T (a score column and its threshold), "
                             f"got {item!r}")
        if col not in args.score:
            raise InputError("--threshold", f"names {col!r}, which is not among the --score "
                             f"columns ({', '.join(map(repr, args.score))})")
        if col in out:
            raise InputError("--threshold", f"gives {col!r} two thresholds")
        try:
            t = float(value)
        except ValueError:
            raise InputError("--threshold", f"the threshold of {col!r} is not a number: "
                             f"{value.strip()!r}") from None
        if math.isnan(t):
            raise InputError("--threshold", f"the threshold of {col!r} is not a number")
        out[col] = t
    return out or None


def run_compare(args) -> int:
    """Run ``fulcrum compare`` (see the module docstring)."""
    from core.cli_pick import _progress_printer
    from core.compare import compare_mapped
    from core.compare_record import build_compare_document, dumps_compare_document
    from core.policy import load_policy

    progress, say = _progress_printer()
    _check_scores(args)
    thresholds = _thresholds(args)
    if args.replicates < 0:
        raise InputError("--replicates", f"must be 0 (no paired bootstrap) or more, got "
                         f"{args.replicates}")
    for opt, path in (("--out", args.out), ("--memo", args.memo), ("--markdown", args.markdown)):
        if path and not Path(path).resolve().parent.is_dir():
            raise InputError(opt, f"the folder of {path} does not exist")
    policy = load_policy(args.policy) if args.policy else None
    say(f"reading {args.data}")
    dataset = _load(args)
    n_rep = int(args.replicates)
    say(f"{dataset.n_rows:,} cases, {dataset.n_events:,.0f} events; comparing "
        f"{len(args.score)} scores" + (f", {n_rep:,} paired replicates" if n_rep else ""))
    comparison = compare_mapped(dataset, policy=policy, thresholds=thresholds,
                                flag_rate=args.flag_rate, recall=args.recall,
                                calibrated=args.calibrated, n_replicates=max(n_rep, 1),
                                seed=args.seed, bootstrap=n_rep > 0, progress=progress)
    settings = {"seed": int(args.seed), "replicates": n_rep, "confidence": comparison.confidence,
                "flag_rate": args.flag_rate, "recall": args.recall, "thresholds": thresholds,
                "calibrated": bool(args.calibrated)}
    doc = build_compare_document(comparison, dataset, policy=policy, settings=settings,
                                 sheet=args.sheet)
    written = []
    if args.out:
        Path(args.out).write_text(dumps_compare_document(doc), encoding="utf-8")
        written.append(("comparison", args.out))
    if args.memo:
        from core.compare_memo import write_compare_pdf

        say("drawing the memo")
        write_compare_pdf(doc, args.memo)
        written.append(("memo", args.memo))
    if args.markdown:
        from core.compare_memo import write_compare_markdown

        write_compare_markdown(doc, args.markdown)
        written.append(("markdown", args.markdown))
    print("\n".join(summary_lines(doc, written)))
    return 0


def summary_lines(doc: dict, written=()) -> list[str]:
    """The one-screen summary ``fulcrum compare`` prints."""
    from core import cautions
    from core.memo_content import fmt_count, fmt_pct

    d = doc["data"]
    c = doc["comparison"]
    out = [(f"Fulcrum {doc['software_version']}: {d.get('file_name') or 'data'} "
            f"({fmt_count(d['rows'])} cases, {fmt_count(d['events'])} events, prevalence "
            f"{fmt_pct(d['prevalence'], 2)}); fingerprint {d['sha256'][:16]}"),
           f"Reference: {d['reference']}; candidate(s): {', '.join(d['candidates'])}", ""]
    out.append(f"  {'score':<24}{'direction':<20}{'ROC AUC (DeLong 95 % CI)':<30}avg precision")
    for name in c["models"]:
        s = c["summaries"][name]
        lo, hi = s["roc_auc_low"], s["roc_auc_high"]
        ci = "" if lo is None or hi is None else f" ({lo:.3f} to {hi:.3f})"
        out.append(f"  {name:<24}{d['directions'][name]:<20}{s['roc_auc']:.3f}{ci:<24}"
                   f"{s['average_precision']:.3f}")
    out.append("")
    own = {"workload": "the same workload", "policy": "each score's own point under the policy",
           "thresholds": "each score's given threshold"}.get(c["own_points"], c["own_points"])
    out.append(f"Accuracy beside flag rate and recall, at {own}:")
    out.append(f"  {'score':<24}{'threshold':<12}{'accuracy':<12}{'flag rate':<12}{'recall':<10}"
               "precision")
    for r in c["accuracy_table"]:
        t = r["threshold"]
        out.append(f"  {r['model']:<24}{'' if t is None else f'{t:g}':<12}"
                   f"{fmt_pct(r['accuracy'], 2):<12}{fmt_pct(r['flag_rate'], 2):<12}"
                   f"{fmt_pct(r['recall']):<10}{fmt_pct(r['precision'])}")
    for p in c["pairs"]:
        out.append("")
        out.append(p["verdict_text"])
    notes = list(c["warnings"])
    if notes:
        out.append("")
        out += ["Note: " + w for w in notes]
    out.append("")
    out.append("Note: " + cautions.SHORT)
    out.append(f"Comparison sha256 {doc['integrity']['sha256']}")
    for what, path in written:
        out.append(f"Wrote the {what}: {path}")
    return out
