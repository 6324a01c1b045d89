"""The comparison memo and the threshold memo's comparison section, as blocks, PDF and Markdown.

:func:`comparison_blocks` turns a comparison (:meth:`core.compare.Comparison.to_dict`,
as stored in a ``fulcrum.compare/1`` document or in a decision record's
optional ``comparison`` key) into :class:`core.memo_content.Block` s: each
score's direction, ROC AUC with DeLong's interval and average precision; for
each candidate its verdict in plain words, the differences with their
intervals (ROC AUC, average precision, recall at the same workload, precision
at the same recall, expected cost under the same policy), the cases only one
model catches with McNemar's test, and the accuracy table with the trap named.
:func:`compare_memo_blocks` wraps them into the comparison memo that
``fulcrum compare --memo`` writes (summary, cautions, data, settings,
integrity); :func:`compare_pdf` and :func:`compare_markdown` lay the blocks
out with the threshold memo's PDF styles and Markdown escaping. No data row
is ever written.
"""

from __future__ import annotations

from pathlib import Path

from core import cautions
from core.memo_content import DASH, Block, fmt_count, fmt_num, fmt_pct, fmt_threshold

__all__ = [
    "DIFFERENCE_HEADER",
    "DISAGREEMENT_HEADER",
    "compare_markdown",
    "compare_memo_blocks",
    "compare_pdf",
    "compare_title",
    "comparison_blocks",
    "comparison_summary_line",
    "difference_rows",
    "disagreement_rows",
    "write_compare_markdown",
    "write_compare_pdf",
]

#: Columns of :func:`difference_rows` and :func:`disagreement_rows` (the interval column's
#: header names the confidence level where it is shown).
DIFFERENCE_HEADER = ("Comparison", "Reference", "Candidate", "Difference", "Interval", "Settled",
                     "Method")
DISAGREEMENT_HEADER = ("Cases", "Count", "Test")

_POINT_WORDS = {"workload": "the same workload (flag rate)", "recall": "the same recall",
                "policy": "the same policy, each at its own threshold",
                "thresholds": "each score's given threshold"}


def _undef(x) -> bool:
    return x is None or isinstance(x, str)


def _p(x) -> str:
    """A proportion as a percentage, two decimals below 10 %."""
    if _undef(x):
        return DASH
    return fmt_pct(x, 2 if abs(float(x)) < 0.1 else 1)


def _unit(d: dict) -> str | None:
    # curve summaries are written as 0.123, like the summary table, whatever the stored unit
    return "AUC" if d.get("metric") in ("roc_auc", "average_precision") else d.get("unit")


def _value(d: dict, x) -> str:
    if _undef(x):
        return DASH
    unit = _unit(d)
    if unit == "proportion":
        return _p(x)
    if unit == "AUC":
        return f"{x:.3f}"
    if unit == "per 1,000 flagged":
        return fmt_num(x, 1)
    return f"{x:.4g}"


def _diff(d: dict, x) -> str:
    if _undef(x):
        return DASH
    unit = _unit(d)
    if unit == "proportion":
        return f"{100 * x:+.1f} points"
    if unit == "AUC":
        return f"{x:+.3f}"
    if unit == "per 1,000 flagged":
        return f"{x:+,.1f}"
    return f"{x:+.4g}"


def _interval(d: dict) -> str:
    lo, hi = d.get("low"), d.get("high")
    if _undef(lo) or _undef(hi):
        return "not computed"
    return f"{_diff(d, lo)} to {_diff(d, hi)}"


_SETTLED = {"candidate": "favours the candidate", "reference": "favours the reference",
            "unclear": "unclear (interval holds 0)", "no interval": DASH}


def difference_rows(pair: dict) -> list[tuple]:
    """One row per difference of a pair (candidate minus reference) in DIFFERENCE_HEADER order."""
    rows = []
    diffs = [pair["roc_auc_difference"], pair["average_precision"]]
    for kind in ("workload", "recall", "policy", "thresholds"):
        for d in pair["at"].get(kind, {}).values():
            if d.get("better") == "none":
                continue
            diffs.append(d)
    for d in diffs:
        unit = d.get("unit")
        label = d["label"] + ("" if unit in ("proportion", "AUC", "per 1,000 flagged", None)
                              else f" ({unit})")
        rows.append((label, _value(d, d["reference"]), _value(d, d["candidate"]),
                     _diff(d, d["difference"]), _interval(d), _SETTLED.get(d.get("settled"), DASH),
                     d.get("method") or DASH))
    return rows


def _mcnemar_text(res) -> str:
    if not res:
        return "not reported"
    pv = res["p_value"]
    if _undef(pv):
        return "p undefined"
    text = fmt_num(pv, 4) if pv >= 1e-4 else f"{pv:.2g}"
    return f"p = {text} ({res['method']})"


def disagreement_rows(dis: dict) -> list[tuple]:
    """The case-level disagreement of a pair at one point set, in DISAGREEMENT_HEADER order."""
    return [
        ("Events caught by both", fmt_num(dis["events_both"], 0), DASH),
        ("Events caught by the reference only", fmt_num(dis["events_only_reference"], 0), DASH),
        ("Events caught by the candidate only", fmt_num(dis["events_only_candidate"], 0),
         "McNemar, events caught: " + _mcnemar_text(dis.get("mcnemar_events"))),
        ("Events caught by neither", fmt_num(dis["events_neither"], 0), DASH),
        ("False alarms raised by the reference only",
         fmt_num(dis["false_alarms_only_reference"], 0), DASH),
        ("False alarms raised by the candidate only",
         fmt_num(dis["false_alarms_only_candidate"], 0),
         "McNemar, false alarms: " + _mcnemar_text(dis.get("mcnemar_false_alarms"))),
        ("Correct decisions by the reference only", fmt_num(dis["correct_only_reference"], 0),
         DASH),
        ("Correct decisions by the candidate only", fmt_num(dis["correct_only_candidate"], 0),
         "McNemar, correct decisions: " + _mcnemar_text(dis.get("mcnemar_correct"))),
    ]


def comparison_summary_line(comp: dict) -> str:
    """One sentence per candidate: its verdict against the reference (for a memo's first page)."""
    words = {"better": "does better than", "worse": "does worse than",
             "no clear difference": "shows no clear difference from",
             "mixed": "gives mixed evidence against"}
    parts = [f"'{p['candidate']}' {words.get(p['verdict'], p['verdict'])} '{p['reference']}'"
             for p in comp["pairs"]]
    return "Compared on the same cases: " + "; ".join(parts) + "."


def comparison_blocks(comp: dict, *, heading: str = "Comparison of score versions") -> list[Block]:
    """The comparison as memo blocks (see the module docstring)."""
    b: list[Block] = []
    add = b.append
    conf = comp.get("confidence") or 0.95
    level = f"{100 * conf:g} %"
    add(Block("h1", heading))
    ref = comp["reference"]
    others = [m for m in comp["models"] if m != ref]
    add(Block("p", f"The reference (current model) is '{ref}'; compared with it on the same "
                   f"{fmt_count(comp['data']['n_rows'])} cases ({fmt_num(comp['data']['n_events'], 0)} "
                   f"events): " + ", ".join(f"'{m}'" for m in others) + ". Differences are "
                   "candidate minus reference."))
    rows = []
    for m in comp["models"]:
        s = comp["summaries"][m]
        ci = DASH if _undef(s["roc_auc_low"]) else f"{s['roc_auc_low']:.3f} to {s['roc_auc_high']:.3f}"
        rows.append((m, "higher is riskier" if s["higher_is_riskier"] else "lower is riskier",
                     f"{s['roc_auc']:.3f}", ci, f"{s['average_precision']:.3f}"))
    add(Block("table", header=("Score", "Direction", "ROC AUC", f"DeLong {level} interval",
                               "Average precision"), rows=tuple(rows),
              widths=(0.28, 0.2, 0.14, 0.22, 0.16)))
    for rel_text in comp["warnings"]:
        add(Block("p", rel_text))
    for pair in comp["pairs"]:
        add(Block("h2", f"'{pair['candidate']}' against '{pair['reference']}'"))
        add(Block("p", pair["verdict_text"]))
        add(Block("table", header=("Comparison", "Reference", "Candidate", "Difference",
                                   f"{level} interval", "Settled", "Method"),
                  rows=tuple(difference_rows(pair)),
                  widths=(0.2, 0.115, 0.115, 0.11, 0.16, 0.12, 0.18)))
        own = comp["own_points"]
        dis = pair["disagreement"].get(own)
        if dis:
            add(Block("p", f"Case by case at {_POINT_WORDS.get(own, own)}:"))
            add(Block("table", header=("Cases", "Count", "Test"), rows=tuple(disagreement_rows(dis)),
                      widths=(0.45, 0.15, 0.4)))
        if pair.get("accuracy_trap_text"):
            add(Block("caution", pair["accuracy_trap_text"]))
    own = comp["own_points"]
    add(Block("h2", f"Accuracy beside flag rate and recall, at {_POINT_WORDS.get(own, own)}"))
    rows = [(r["model"], DASH if r["threshold"] is None else fmt_threshold(r["threshold"]),
             _p(r["accuracy"]), _p(r["flag_rate"]), _p(r["recall"]), _p(r["precision"]))
            for r in comp["accuracy_table"]]
    add(Block("table", header=("Score", "Threshold", "Accuracy", "Flag rate", "Recall", "Precision"),
              rows=tuple(rows), widths=(0.3, 0.14, 0.14, 0.14, 0.14, 0.14)))
    add(Block("caution", cautions.ACCURACY_TRAP))
    boot = comp.get("bootstrap")
    if boot:
        add(Block("p", f"Paired bootstrap: {fmt_count(boot['n_replicates'])} replicates, seed "
                       f"{boot['seed']}; {boot['design']}; {boot['interval']}; {boot['fixed']}."))
    else:
        add(Block("p", "The paired bootstrap was not run: average precision and the operating-"
                       "point differences carry no interval."))
    return b


def compare_title(doc: dict) -> str:
    return f"Comparison of score versions: {doc['data'].get('file_name') or 'data in memory'}"


def compare_memo_blocks(doc: dict) -> list[Block]:
    """The comparison memo of a ``fulcrum.compare/1`` document, as blocks."""
    d = doc["data"]
    comp = doc["comparison"]
    b: list[Block] = [
        Block("title", compare_title(doc)),
        Block("subtitle", f"created {doc['created_utc']} · data fingerprint {d['sha256'][:16]}… · "
                          f"document sha256 {doc['integrity']['sha256'][:16]}…"),
        Block("strong", comparison_summary_line(comp)),
    ]
    b += [Block("p", p["verdict_text"]) for p in comp["pairs"]]
    b.append(Block("caution", doc["cautions"]["full"]))
    for extra in ("few_events", "label_shift"):
        if doc["cautions"].get(extra):
            b.append(Block("caution", doc["cautions"][extra]))
    b.append(Block("pagebreak"))
    b += comparison_blocks(comp, heading="1. The comparison")
    b.append(Block("h1", "2. Data, policy and settings"))
    rows = [("File", d.get("file_name") or "in memory"), ("Cases", fmt_count(d["rows"])),
            ("Events", fmt_num(d["events"], 0)), ("Prevalence", _p(d["prevalence"])),
            ("Label", f"{d['label_column']} (event: {d['positive_label']})"),
            ("Reference score", f"{d['reference']} ({d['directions'][d['reference']]})")]
    rows += [("Candidate score", f"{c} ({d['directions'][c]})") for c in d["candidates"]]
    rows += [("Weights", f"{d['weight_column']} ({d['weight_kind']})" if d["weight_column"]
              else "none"),
             ("Rows dropped (missing scores)", fmt_count(d["dropped_rows"])),
             ("Data fingerprint (sha256)", d["sha256"])]
    b.append(Block("kv", rows=tuple(rows)))
    for w in d.get("warnings", []):
        b.append(Block("p", w["message"]))
    pol = doc.get("policy")
    if pol:
        res = pol.get("resolved") or {}
        rows = [(f"{section}.{key}", f"{v.get('value')} ({v.get('source')})")
                for section, entries in res.items() if isinstance(entries, dict)
                for key, v in entries.items() if isinstance(v, dict) and "value" in v]
        b.append(Block("p", "Policy: each score at its own threshold under the same policy, "
                            "resolved as follows (value and its source)."))
        b.append(Block("kv", rows=tuple(rows)))
    else:
        b.append(Block("p", "No policy was given: the scores are compared at the same workload and "
                            "the same recall (and at given thresholds, if any)."))
    s = doc["settings"]
    b.append(Block("kv", rows=tuple((k.replace("_", " ").capitalize(),
                                     DASH if v is None else str(v)) for k, v in s.items())))
    b.append(Block("h1", "3. Software and integrity"))
    b.append(Block("kv", rows=(("Software", f"Fulcrum {doc['software_version']}"),
                               ("Schema", doc["schema"]),
                               ("Document sha256", doc["integrity"]["sha256"]),
                               ("Method", doc["integrity"]["canonical_form"]),
                               ("Note", doc["integrity"]["note"]))))
    return b


# --------------------------------------------------------------------------- PDF

def compare_pdf(doc: dict) -> bytes:
    """The comparison memo as PDF bytes (the threshold memo's styles and table helpers)."""
    from core.memo_pdf import render_pdf

    short = doc["integrity"]["sha256"][:16]
    return render_pdf(compare_memo_blocks(doc), title=compare_title(doc), subject="Comparison memo",
                      footer=f"Fulcrum comparison memo · document {short}…", software_version=doc["software_version"])


def write_compare_pdf(doc: dict, path) -> None:
    Path(path).write_bytes(compare_pdf(doc))


# --------------------------------------------------------------------------- Markdown

def blocks_markdown(blocks) -> list[str]:
    """Markdown lines of memo blocks (the threshold memo's escaping and tables)."""
    from core.memo_markdown import _table, md_escape

    lines: list[str] = []
    for blk in blocks:
        k = blk.kind
        if k == "title":
            lines += ["# " + md_escape(blk.text), ""]
        elif k == "subtitle":
            lines += ["*" + md_escape(blk.text) + "*", ""]
        elif k == "h1":
            lines += ["## " + md_escape(blk.text), ""]
        elif k == "h2":
            lines += ["### " + md_escape(blk.text), ""]
        elif k == "p":
            lines += [md_escape(blk.text), ""]
        elif k == "strong":
            lines += ["**" + md_escape(blk.text) + "**", ""]
        elif k == "caution":
            lines += ["> ⚠ " + md_escape(blk.text), ""]
        elif k == "table":
            lines += _table(blk.header, blk.rows) + [""]
        elif k == "kv":
            lines += _table(("Item", "Value"), blk.rows) + [""]
        elif k == "pagebreak":
            lines += ["---", ""]
        else:  # pragma: no cover
            raise AssertionError(k)
    return lines


def compare_markdown(doc: dict) -> str:
    """The comparison memo as Markdown."""
    return "\n".join(blocks_markdown(compare_memo_blocks(doc))).rstrip() + "\n"


def write_compare_markdown(doc: dict, path) -> None:
    Path(path).write_text(compare_markdown(doc), encoding="utf-8")
