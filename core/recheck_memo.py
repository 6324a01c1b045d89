"""The recheck memo: what a recheck record says, as blocks, PDF and Markdown.

:func:`recheck_blocks` turns a recheck record (schema ``fulcrum.recheck/1``,
see :mod:`core.recheck`) into the same :class:`core.memo_content.Block` s the
threshold memo uses -- the verdict summary first, then the cautions, label
maturity and the model's own effect, the rule verdicts, subgroups, old
against new, score drift, calibration drift, what the same policy would
choose now, and the integrity digests. :func:`recheck_pdf` lays them out with
the threshold memo's PDF styles and table helpers (:mod:`core.memo_pdf`), and
:func:`recheck_markdown` with its Markdown escaping (:mod:`core.memo_markdown`),
so both say the same in the same words. No data row is ever written.
"""

from __future__ import annotations

from pathlib import Path

from core import cautions
from core.memo_content import Block, fmt_count, fmt_num, fmt_pct

__all__ = [
    "per_period_header",
    "per_period_rows",
    "policy_now_header",
    "policy_now_rows",
    "policy_value",
    "recheck_blocks",
    "recheck_markdown",
    "recheck_pdf",
    "recheck_title",
    "rule_line",
    "signature_line",
    "source_words",
    "write_recheck_markdown",
    "write_recheck_pdf",
]


def _is_count_rule(name: str) -> bool:
    return name == "max_flagged_per_period"


def _val(name, x) -> str:
    if _is_count_rule(name):
        return fmt_num(x, 1)
    return fmt_pct(x, 2 if x is not None and abs(x) < 0.1 else 1)


def _bounds(v: dict) -> str:
    if v.get("lower") is None and v.get("upper") is None:
        return "no sampling bound"
    c = 100 * v["confidence"]
    return (f"one-sided {c:g} % bounds {_val(v['name'], v['lower'])} (lower), "
            f"{_val(v['name'], v['upper'])} (upper)")


def rule_line(v: dict) -> str:
    """One rule verdict in one line: label, limit, observed, bounds, verdict."""
    return (f"{v['label']} {_val(v['name'], v['limit'])}: observed {_val(v['name'], v['value'])}, "
            f"{_bounds(v)} -- {v['verdict'].upper()}")


def policy_now_header(now: dict) -> tuple:
    """The header of the "chosen now" table (the period named)."""
    period = (now.get("approved_threshold_now") or {}).get("period") or "period"
    return ("Point", "Threshold", "Flagged cases", "Recall", f"Cost per {period}",
            f"Flagged per {period}")


def policy_now_rows(now: dict) -> list[tuple]:
    """Rows of that table: approval, approved threshold now, the choice now, the difference."""
    def row(name, p):
        if not p:
            return (name, "—", "—", "—", "—", "—")
        c = p.get("counts") or {}
        flagged = None if not c else c["tp"] + c["fp"]
        return (name, str(p["threshold"]), fmt_count(flagged), _pct(p.get("recall")),
                fmt_num(p.get("cost_per_period"), 1), fmt_num(p.get("flagged_per_period"), 1))

    rows = [row("At approval (approval data)", now["approval"]),
            row("Approved threshold, new data", now["approved_threshold_now"]),
            row("Chosen now, new data", now.get("chosen_now"))]
    if now.get("chosen_now") is None and now.get("unconstrained_now"):
        rows.append(row("Objective's best now, ignoring the rules", now["unconstrained_now"]))
    diff = now.get("difference")
    if diff:
        rows.append((f"Difference ({now.get('difference_basis')} - approved, new data)",
                     fmt_num(diff["threshold"], 4), fmt_count(diff["flagged"]), "",
                     fmt_num(diff["cost_per_period"], 1), fmt_num(diff["flagged_per_period"], 1)))
    return rows


_SOURCES = {"file": "set in the policy", "data": "from the new data", "default": "default"}


def source_words(source) -> str:
    """Where a resolved policy value comes from, in words."""
    return "—" if not source else _SOURCES.get(source, str(source))


def policy_value(x) -> str:
    """A policy value in a change table ("not set" when a side leaves it out)."""
    if x is None:
        return "not set"
    if isinstance(x, bool):
        return str(x).lower()
    if isinstance(x, float):
        return f"{x:.6g}"
    if isinstance(x, list):
        return ", ".join(map(str, x)) or "(none)"
    return str(x) if str(x) else "(empty)"


def per_period_header(fpp: dict) -> tuple:
    """The header of the flagged-cases-per-period table (the policy's quantile named)."""
    q = next((r.get("quantile_level") for r in fpp["rows"] if r.get("quantile_level")), 0.9)
    return ("Point", "Periods", "Median", f"{q:g}-quantile", "Maximum", "Mean",
            "Share over capacity")


def per_period_rows(fpp: dict) -> list[tuple]:
    """Rows of that table: each point's distribution, then the differences."""
    def share(x):
        return "—" if x is None else fmt_pct(x, 1)

    out = []
    for r in fpp["rows"]:
        per = r.get("period")
        out.append((r["point"] + (f" (per {per})" if per else ""), fmt_count(r.get("n_periods")),
                    fmt_num(r.get("median"), 1), fmt_num(r.get("quantile"), 1),
                    fmt_num(r.get("max"), 1), fmt_num(r.get("mean"), 1),
                    share(r.get("share_over"))))
    for label, key in (("Difference, approved threshold: new - approval", "new_minus_approval"),
                       ("Difference, new data: choice now - approved", "chosen_minus_approved")):
        d = fpp.get(key)
        if d:
            out.append((label, "", _signed_num(d.get("median")), _signed_num(d.get("quantile")),
                        _signed_num(d.get("max")), _signed_num(d.get("mean")),
                        _signed_pct(d.get("share_over"))))
    return out


def recheck_title(rec: dict) -> str:
    t = rec["decision_record"].get("memo_title")
    return "Recheck of an approved threshold" + (f": {t}" if t else "")


def _pct(x):
    return fmt_pct(x, 2 if x is not None and abs(x) < 0.1 else 1)


def _signed_num(x) -> str:
    if x is None:
        return "—"
    return f"{x:+,.1f}"


def _signed_pct(x) -> str:
    if x is None:
        return "—"
    return f"{100 * x:+.2f} pts"


def recheck_blocks(rec: dict) -> list[Block]:
    """The recheck memo's blocks, in order (see the module docstring)."""
    d = rec["data"]
    dr = rec["decision_record"]
    op = ">=" if rec["higher_is_riskier"] else "<="
    b: list[Block] = [
        Block("title", recheck_title(rec)),
        Block("subtitle", f"Recheck of decision record {dr['sha256']} (created {dr['created_utc']}) "
                          f"on {d.get('file_name') or 'new data'}; as of {rec['as_of']}; "
                          f"written {rec['created_utc']} by Fulcrum {rec['software_version']}."),
        Block("strong", f"{rec['summary'].rstrip('.')}. Overall: {rec['overall_verdict']}."),
    ]
    ov = (rec.get("groups") or {}).get("overlaps")
    if ov:
        b.append(Block("p", ov["statement"]))
    b += [
        Block("p", f"Approved threshold: flag when score {op} {rec['threshold']}. Rules judged as "
                   f"at approval: one-sided bounds at confidence {rec['confidence']:g} "
                   f"({rec['confidence_note']}); holds / fails / unclear, never from a point "
                   "estimate alone."),
        Block("caution", cautions.FULL),
        Block("caution", cautions.LABEL_SHIFT),
        Block("h1", "Data and label maturity"),
        Block("kv", rows=(
            ("New data", d.get("file_name") or "—"),
            ("Fingerprint", d["sha256"]),
            ("Cases / mature cases", f"{fmt_count(d['rows'])} / {fmt_count(d['mature_rows'])}"),
            ("Mature events / prevalence", f"{fmt_count(d['events'])} / {_pct(d['prevalence'])}"),
            ("Score times", "—" if not d.get("score_time_window") else
             f"{d['score_time_window']['first_day']} to {d['score_time_window']['last_day']}"),
            ("As of", rec["as_of"]),
        )),
        Block("p", rec["maturity"]["statement"]),
    ]
    if rec.get("model_effect"):
        b.append(Block("caution", rec["model_effect"]))
    else:
        b.append(Block("p", "The data were not declared as collected while the threshold was "
                            "live. If they were, recall and precision measured on them are biased "
                            "and an unactioned audit sample is the remedy."))
    for s in rec["statements"][1:]:
        if s != rec.get("model_effect"):
            b.append(Block("caution", s))
    b.append(Block("h1", "Rules at the approved threshold"))
    b.append(Block("table", header=("Rule", "Limit", "Observed", "One-sided bounds", "Verdict"),
                   rows=tuple((v["label"], _val(v["name"], v["limit"]), _val(v["name"], v["value"]),
                               _bounds(v), v["verdict"]) for v in rec["rules"]),
                   widths=(0.25, 0.1, 0.12, 0.4, 0.13)))
    for v in rec["rules"]:
        b.append(Block("p", f"{v['label']}: {v['reason']}"))
    g = rec["groups"]
    b.append(Block("h1", "Subgroups"))
    if g["compared"]:
        rows = []
        for grp in g["compared"]:
            for v in grp["verdicts"]:
                ref = (grp.get("reference_values") or {}).get(v["name"].split("_", 1)[1], {})
                rows.append((f"{grp['column']} = {grp['group']}", v["label"],
                             _val(v["name"], ref.get("value")), _val(v["name"], v["value"]),
                             _bounds(v), v["verdict"]))
        b.append(Block("table", header=("Group", "Rule", "At approval", "Now", "One-sided bounds",
                                        "Verdict"), rows=tuple(rows),
                       widths=(0.2, 0.17, 0.1, 0.1, 0.3, 0.13)))
    else:
        b.append(Block("p", "No group is present both in the record and in the new data."))
    b.append(Block("p", "New groups (not in the record): " + (", ".join(g["new"]) or "none") + ". "
                   "Vanished groups (in the record, not in the new data): "
                   + (", ".join(g["vanished"]) or "none") + "."))
    if ov:
        b.append(Block("p", ov["statement"] + " Method: " + ov["method"] + "."))
    for n in g.get("notes") or []:
        b.append(Block("p", n))
    fair = g.get("fairness")
    if fair:
        for s in fair.get("statements") or []:
            b.append(Block("p", s))
    b.append(Block("h1", "Old against new"))
    cmp = rec["comparison"]
    b.append(Block("table", header=("Metric", "At approval (95 % CI)", "Now (95 % CI)",
                                    "Difference (95 % CI)", "Changed"),
                   rows=tuple((c["label"],
                               (f"{_pct(c['reference'])} ({_pct(c['reference_low'])} to "
                                f"{_pct(c['reference_high'])})"),
                               f"{_pct(c['new'])} ({_pct(c['new_low'])} to {_pct(c['new_high'])})",
                               (f"{_signed_pct(c['difference'])} ({_signed_pct(c['low'])} to "
                                f"{_signed_pct(c['high'])})"), "yes" if c["changed"] else "no")
                              for c in cmp["metrics"]),
                   widths=(0.26, 0.2, 0.2, 0.22, 0.12)))
    b.append(Block("p", cmp["method"]))
    b.append(Block("h1", "Drift of the scores"))
    dr_ = rec["drift"]
    b.append(Block("table", header=("Cases", "PSI", "Band", "KS (binned)", "Exact KS at most"),
                   rows=tuple((what, fmt_num(dr_[p]["value"], 3), dr_[p]["band"],
                               fmt_num(dr_[k]["statistic"], 3), fmt_num(dr_[k]["upper_bound"], 3))
                              for what, p, k in (("all", "psi", "ks"),
                                                 ("events", "psi_events", "ks_events"),
                                                 ("non-events", "psi_non_events", "ks_non_events"))),
                   widths=(0.2, 0.15, 0.2, 0.2, 0.25)))
    for s in dr_["statements"]:
        b.append(Block("p", s))
    b.append(Block("h1", "Calibration drift"))
    cal = rec["calibration_drift"]
    if cal.get("measures"):
        b.append(Block("table", header=("Measure", "At approval", "Now (interval)", "Change",
                                        "Verdict"),
                       rows=tuple((m["label"], fmt_num(m["reference"], 2),
                                   (f"{fmt_num(m['new'], 2)} ({fmt_num(m['new_low'], 2)} to "
                                    f"{fmt_num(m['new_high'], 2)})"),
                                   (f"{fmt_num(m['change'], 2)} ({fmt_num(m['change_low'], 2)} "
                                    f"to {fmt_num(m['change_high'], 2)}, {m['change_kind']})"),
                                   m["verdict"]) for m in cal["measures"]),
                       widths=(0.28, 0.14, 0.22, 0.24, 0.12)))
    b.append(Block("p", cal["statement"]))
    bad = [x for x in cal.get("groups") or [] if x.get("verdict") != "holds"]
    for x in bad:
        b.append(Block("p", x["statement"]))
    now = rec["policy_now"]
    changed = now.get("policy_source") == "changed"
    b.append(Block("h1", "What a changed policy would choose now" if changed else
                   "What the same policy would choose now"))
    b.append(Block("p", now["policy_note"] + " " + now["statement"]))
    if changed:
        b.append(Block("table", header=("Policy key", "Record's policy (approval)", "Used now",
                                        "Source now"),
                       rows=tuple((c["key"], policy_value(c["old"]), policy_value(c["new"]),
                                   source_words(c.get("source"))) for c in now.get("changes") or []),
                       widths=(0.3, 0.25, 0.25, 0.2)))
    elif now.get("verdict_basis"):
        b.append(Block("p", "The rule verdicts above and this choice use the same policy: the "
                            "record's."))

    b.append(Block("table", header=policy_now_header(now), rows=tuple(policy_now_rows(now)),
                   widths=(0.3, 0.12, 0.14, 0.12, 0.16, 0.16)))
    fpp = now.get("flags_per_period")
    if fpp:
        b.append(Block("h2", "Flagged cases per period"))
        b.append(Block("table", header=per_period_header(fpp), rows=tuple(per_period_rows(fpp)),
                       widths=(0.3, 0.1, 0.12, 0.12, 0.12, 0.12, 0.12)))
        b.append(Block("p", fpp["note"]))
    b.append(Block("h1", "Integrity"))
    b.append(Block("kv", rows=(("Decision record sha256", dr["sha256"]),
                               ("Decision record signature", signature_line(rec.get("signature"))),
                               ("Recheck record sha256", rec["integrity"]["sha256"]),
                               ("Method", rec["integrity"]["canonical_form"]),
                               ("Note", rec["integrity"]["note"]))))
    return b


def signature_line(signature: dict | None) -> str:
    """The decision record's signature check in words, for the recheck memo (PDF and Markdown).

    ``signature`` is the recheck record's ``signature`` key
    (:meth:`core.signing.Verification.to_dict`), or None when no signature
    was checked.
    """
    if not signature:
        return ("not checked: no signature file and public key were given, so the record's "
                "integrity hash shows it is unaltered but not who approved it")
    if signature.get("valid"):
        return (f"valid, Ed25519 key {signature['key_fingerprint']}, signed "
                f"{signature.get('signed_utc') or 'at an unstated time'}")
    return f"NOT VALID: {signature.get('problem') or 'the signature does not verify'}"


# --------------------------------------------------------------------------- PDF

def recheck_pdf(rec: dict) -> bytes:
    """The recheck memo as PDF bytes (the threshold memo's styles and table helpers)."""
    from core.memo_pdf import render_pdf

    short = rec["integrity"]["sha256"][:16]
    return render_pdf(recheck_blocks(rec), title=recheck_title(rec), subject="Recheck memo",
                      footer=f"Fulcrum recheck memo · recheck {short}…", software_version=rec["software_version"])


def write_recheck_pdf(rec: dict, path) -> None:
    Path(path).write_bytes(recheck_pdf(rec))


# --------------------------------------------------------------------------- Markdown

def recheck_markdown(rec: dict) -> str:
    """The recheck memo as Markdown (the threshold memo's escaping and tables)."""
    from core.memo_markdown import _table, md_escape

    lines: list[str] = []
    for blk in recheck_blocks(rec):
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
    return "\n".join(lines).rstrip() + "\n"


def write_recheck_markdown(rec: dict, path) -> None:
    Path(path).write_text(recheck_markdown(rec), encoding="utf-8")
