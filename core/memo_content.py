"""What the threshold memo says: its sections as plain blocks, built from a decision record.

The memo is a rendering of the record (see :mod:`core.record`), so a record
loaded months later gives the same memo. :func:`memo_blocks` turns a record
into a list of :class:`Block` s -- headings, paragraphs, cautions, tables,
key-value lists, figures, a sign-off block -- in the memo's order; the PDF
(:mod:`core.memo_pdf`) and the Markdown (:mod:`core.memo_markdown`)
renderers only lay them out (and escape the text for their format), so both
say the same thing in the same words.

The first page is the summary a board member reads in a minute: the
threshold and its origin, what it means per 1,000 cases and per period, the
key intervals (apparent and out of sample), the rules and which bind, the
cautions and the label-shift assumption, and the sign-off state. Then the
detail: data, how the threshold was chosen, metrics with intervals at
validation and deployment prevalence, confusion matrix and flags per period,
alternatives, stability and optimism, subgroups and fairness, calibration,
figures, test vectors, the analyst's fields, the sign-off block and the
software, settings and integrity digest.

Numbers are written as on screen: percentages with one decimal (two for
small rates), counts with thousands separators, thresholds in their exact
shortest form (``repr``), undefined values as "—".
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

from core import cautions as _cautions
from core import formatting as _fmt
from core.memo_fields import FIELDS, LABELS, NESTED
from core.metrics import METRIC_LABELS

__all__ = ["Block", "memo_blocks", "memo_title", "fmt_pct", "fmt_num", "fmt_count",
           "fmt_threshold", "fmt_interval", "fmt_ci", "NOT_STATED"]

DASH = _fmt.DASH
NOT_STATED = "not stated"


@dataclass(frozen=True)
class Block:
    """One piece of the memo.

    ``kind``: ``title``, ``subtitle``, ``h1``, ``h2``, ``p``, ``strong`` (a
    key sentence), ``caution``, ``kv`` (``rows`` of (label, value)),
    ``table`` (``header`` and ``rows``), ``figure`` (``name``, ``text`` its
    caption), ``signoff`` (``rows`` of (label, value)), ``pagebreak``.
    """

    kind: str
    text: str = ""
    header: tuple = ()
    rows: tuple = ()
    name: str = ""
    widths: tuple = field(default=())


# --------------------------------------------------------------------------- formatting

_bad = _fmt.is_undefined
_float = _fmt.as_float


def fmt_pct(x, digits: int = 1) -> str:
    """0.1234 -> "12.3 %"; undefined -> "—"."""
    return _fmt.pct(x, digits)


def fmt_num(x, digits: int = 2) -> str:
    """A plain number with thousands separators; infinities as ∞."""
    return _fmt.num(x, digits)


fmt_count = _fmt.count


def fmt_threshold(t) -> str:
    """A threshold exactly as stored (shortest float64 form); infinities spelled out."""
    return _fmt.threshold(t, infinity="inf")


def fmt_interval(iv: dict) -> str:
    """(low, high] or [low, high) of a threshold interval."""
    return _fmt.interval(iv["low"], iv["high"], iv["closed"], infinity="inf")


def fmt_ci(entry: dict, writer=fmt_pct) -> str:
    """ "12.3 % (95 % CI 11.0 % to 13.7 %)" from a metric entry of the record."""
    v = writer(entry.get("value"))
    lo, hi = entry.get("ci_low"), entry.get("ci_high")
    if _bad(lo) or _bad(hi):
        return v
    conf = entry.get("confidence") or 0.95
    return f"{v} ({100 * conf:.0f} % CI {writer(lo)} to {writer(hi)})"


def _range(entry: dict, writer=fmt_pct) -> str:
    lo, hi = entry.get("ci_low"), entry.get("ci_high")
    if _bad(lo) or _bad(hi):
        return DASH
    return f"{writer(lo)} to {writer(hi)}"


def _pct_for(x) -> str:
    """Percent with more decimals for small rates."""
    if _bad(x):
        return DASH
    return fmt_pct(x, 2 if abs(float(x)) < 0.1 else 1)


def _c(record) -> str:
    """The record's confidence level as written in headers, e.g. "95 %"."""
    conf = (record.get("analysis") or {}).get("confidence") or 0.95
    return f"{100 * conf:g} %"


def _sentence(s: str) -> str:
    s = str(s).strip()
    if not s:
        return s
    return s[0].upper() + s[1:] + ("" if s.endswith(".") else ".")


def _stated(v) -> str:
    return v if isinstance(v, str) and v.strip() else NOT_STATED


# --------------------------------------------------------------------------- pieces

def memo_title(record: dict) -> str:
    m = record["memo"]
    if m.get("title"):
        return m["title"]
    name = " ".join(x for x in (m.get("model_name"), m.get("model_version") and
                                f"v{m['model_version']}") if x)
    return f"Threshold memo: {name}" if name else "Threshold memo"


def _op(record) -> str:
    return "≥" if record["higher_is_riskier"] else "≤"


def _origin_words(record) -> str:
    if record["threshold_origin"] == "pre-specified":
        return "pre-specified (fixed before these validation data were seen)"
    if record.get("choice", {}).get("method") == "set by the user":
        return "data-derived (set by hand on these validation data)"
    return "data-derived (chosen by the policy on these validation data)"


def _rule_limit(name, v):
    return fmt_num(v, 0) if name == "max_flagged_per_period" else fmt_pct(v, 1)


def _rule_rows(record) -> list[tuple]:
    rows = []
    for r in record.get("choice", {}).get("rules", []):
        w = (lambda v: fmt_num(v, 1)) if r["name"] == "max_flagged_per_period" else _pct_for
        rows.append((f"{r['label']} {_rule_limit(r['name'], r['limit'])}", w(r["value"]),
                     DASH if r.get("bound") is None else w(r["bound"]),
                     "met" if r["met"] else "NOT MET",
                     "binds" if r.get("binding") else ("no" if r.get("binding") is False else DASH),
                     r["method"]))
    return rows


def _per_1000_text(record) -> list[str]:
    w = record["metrics"]["workload"]
    pi = w["prevalence"]
    p = w["per_1000"]
    out = [f"Per 1,000 cases at deployment prevalence π = {_pct_for(pi)}: "
           f"{fmt_num(p['flagged'], 1)} flagged, of whom {fmt_num(p['true_alerts'], 1)} are events "
           f"and {fmt_num(p['false_alerts'], 1)} false alarms; {fmt_num(p['missed_events'], 1)} of "
           f"{fmt_num(p['events'], 1)} events are missed."]
    pp = w.get("per_period")
    if pp:
        src = w.get("cases_per_period_source")
        where = " (mean of the validation data)" if src == "data" else ""
        out.append(f"Per {w['period']} ({fmt_num(pp['cases'], 0)} cases{where}): "
                   f"{fmt_num(pp['flagged'], 1)} flagged, {fmt_num(pp['true_alerts'], 1)} events "
                   f"caught, {fmt_num(pp['false_alerts'], 1)} false alarms, "
                   f"{fmt_num(pp['missed_events'], 1)} events missed.")
    cost = record["metrics"]["expected_cost"]
    if cost.get("per_case") is not None:
        unit = cost.get("unit") or ""
        txt = f"Expected cost: {fmt_num(cost['per_1000'], 1)} {unit} per 1,000 cases"
        if cost.get("per_period") is not None:
            txt += f", {fmt_num(cost['per_period'], 1)} {unit} per {cost['period']}"
        if cost.get("ci_low") is not None:
            txt += (f" (per case {fmt_num(cost['per_case'], 4)}, {_c(record)} bootstrap interval "
                    f"{fmt_num(cost['ci_low'], 4)} to {fmt_num(cost['ci_high'], 4)})")
        out.append(txt + ".")
    return out


_CURVE_LABELS = {"roc_auc": "ROC AUC", "average_precision": "Average precision"}

_KEY_QUANTITIES = (("recall", "Recall (sensitivity)"), ("precision", "Precision (PPV)"),
                   ("flag_rate", "Flag rate"), ("cost", "Expected cost per case"))


def _key_intervals(record) -> tuple[tuple, list[tuple]]:
    m = record["metrics"]
    opt = m["optimism"]
    dep = m["deployment"]
    header = ("Quantity (at π)", f"Apparent, with {_c(record)} interval", "Cross-fitted",
              "Optimism-corrected")
    rows = []
    for q, label in _KEY_QUANTITIES:
        if q == "cost":
            c = m["expected_cost"]
            if c.get("per_case") is None:
                continue
            w = (lambda v: fmt_num(v, 4))
            app = fmt_ci({"value": c["per_case"], "ci_low": c.get("ci_low"),
                          "ci_high": c.get("ci_high"),
                          "confidence": (record.get("analysis") or {}).get("confidence")}, w)
        else:
            w = _pct_for
            app = fmt_ci(dep[q], w)
        rows.append((label, app, w(opt["cross_fitted"].get(q)), w(opt["corrected"].get(q))))
    return header, rows


def _groups_summary(record) -> list[str]:
    """One or two page-1 sentences: the fairness verdict and the groups that differ."""
    out = []
    fair = record["fairness"]
    if fair.get("status") == "computed":
        out.append(f"Fairness criterion ({fair['label'].lower()} within ±{fmt_pct(fair['tolerance'])} "
                   f"across {', '.join(fair['columns'])}): {fair['verdict'].upper()}.")
    g = record["groups"]
    if g.get("status") == "computed":
        differ = []
        for r in g.get("rows", []):
            d = r.get("differences", {}).get("recall")
            if d and str(d.get("verdict", "")).startswith("differs"):
                differ.append(f"{r['column']}: {r['group']} ({_signed(d['difference'], _pct_for)})")
        if differ:
            out.append("Recall differs from the rest of the cases (Holm-adjusted) in: "
                       + "; ".join(differ) + ".")
        else:
            out.append("No subgroup's recall differs clearly from the rest of the cases "
                       "(Holm-adjusted).")
    return out


_INDEPENDENCE_WORDS = {
    "temporal": "temporal: a later period than the training data",
    "external": "external: another site or population than the training data",
    "same period": "same period as the training data (not independent)",
}


def _signoff_state(record) -> str:
    s = record["memo"]["sign_off"]
    if not s.get("decision"):
        return "Sign-off: NOT YET SIGNED OFF."
    who = ", ".join(x for x in (s.get("name"), s.get("role")) if x) or "name not stated"
    when = s.get("date") or "date not stated"
    return f"Sign-off: {s['decision'].upper()} by {who} on {when}."


def _regulatory(record) -> str:
    st = record["memo"].get("regulatory_status")
    if st:
        return f"Regulatory status (as stated by the user): {st}"
    return ("Regulatory status: NOT STATED. A score that drives a clinical alarm may itself be a "
            "regulated device function, and credit scoring a high-risk use: the responsible person "
            "must state this use's status before sign-off.")


# --------------------------------------------------------------------------- the memo

def memo_blocks(record: dict) -> list[Block]:
    """The memo of a decision record, as blocks (see :class:`Block`)."""
    b: list[Block] = []
    add = b.append
    memo = record["memo"]
    data = record["data"]
    m = record["metrics"]
    choice = record.get("choice", {})
    op = _op(record)
    score = data["score_column"]
    integ = record.get("integrity", {})
    t_text = fmt_threshold(record["threshold"])

    # ---------------------------------------------------------------- page 1: summary
    add(Block("title", memo_title(record)))
    model = " ".join(x for x in (memo.get("model_name"), memo.get("model_version") and
                                 f"version {memo['model_version']}") if x)
    add(Block("subtitle", " · ".join(x for x in (
        model or None, f"data {data.get('file_name') or 'in memory'}",
        f"created {record['created_utc']}",
        f"record sha256 {integ.get('sha256', DASH)[:16]}…") if x)))
    if math.isinf(_float(record["threshold"])):
        add(Block("strong", f"Threshold: {t_text}: no case is flagged."))
    else:
        add(Block("strong", f"Threshold: flag a case when {score} {op} {t_text}"))
    add(Block("p", f"Origin: {_origin_words(record)}. Every threshold in "
                   f"{fmt_interval(record['threshold_interval'])} gives the same decisions on these "
                   "data; the record stores the distinct score itself"
              + (f" (entered as {fmt_threshold(record['threshold_entered'])})."
                 if record.get("threshold_entered") is not None else ".")))
    for line in _per_1000_text(record):
        add(Block("p", line))
    about = [(label, _INDEPENDENCE_WORDS.get(memo.get(key), memo.get(key))) for key, label in (
        ("intended_use", "Intended use"), ("outcome_definition", "Outcome"),
        ("population", "Population"), ("validation_independence", "Validation data"))
        if memo.get(key)]
    if about:
        add(Block("kv", rows=tuple(about)))
    header, rows = _key_intervals(record)
    add(Block("h2", "Key numbers: apparent and out of sample"))
    add(Block("table", header=header, rows=tuple(rows), widths=(0.22, 0.38, 0.18, 0.22)))
    add(Block("p", m["optimism"]["statement"]))
    rr = _rule_rows(record)
    binding = choice.get("binding_rules") or []
    if rr:
        add(Block("h2", "Rules at this threshold"))
        add(Block("table", header=("Rule", "Value", "One-sided bound", "Verdict", "Binds", "Method"),
                  rows=tuple(rr), widths=(0.22, 0.1, 0.12, 0.1, 0.08, 0.38)))
        if binding:
            labels = [r["label"] + " " + _rule_limit(r["name"], r["limit"])
                      for r in choice["rules"] if r["name"] in binding]
            add(Block("p", "Binding rule: " + "; ".join(labels) + " (without it the point would "
                      "move)."))
        else:
            add(Block("p", "No rule binds: the objective alone picks this point."))
    for line in _groups_summary(record):
        add(Block("p", line))
    add(Block("caution", _cautions.FULL))
    add(Block("caution", record["cautions"]["label_shift"]))
    if record["cautions"].get("few_events"):
        add(Block("caution", record["cautions"]["few_events"]))
    add(Block("caution", _regulatory(record)))
    if record.get("comparison"):
        from core.compare_memo import comparison_summary_line

        add(Block("p", comparison_summary_line(record["comparison"]) + " See section 14."))
    add(Block("strong", _signoff_state(record)))
    if record["memo"]["sign_off"].get("decision") and record["memo"]["sign_off"].get("conditions"):
        add(Block("p", f"Conditions: {record['memo']['sign_off']['conditions']}"))
    add(Block("pagebreak"))

    # ---------------------------------------------------------------- data
    add(Block("h1", "1. Data"))
    kv = [
        ("File", data.get("file_name") or "in memory (no file name)"),
        ("Fingerprint (SHA-256 of the mapped data and mapping)", data["sha256"]),
        ("Kind", "one row per case" if data["kind"] == "rows" else "a count table"),
        ("Cases", fmt_count(data.get("cases", data["rows"]))),
        ("Events", fmt_count(data["events"])),
        ("Validation prevalence", _pct_for(data["prevalence"])),
        ("Score column", f"{score} ({'higher' if record['higher_is_riskier'] else 'lower'} "
                         "score = higher risk)"),
    ]
    if data["kind"] == "rows":
        kv.append(("Label column and event value", f"{data['label_column']} = "
                                                   f"{data['positive_label']!s}"))
    opt_cols = [("Weights", data.get("weight_column") and
                 f"{data['weight_column']} ({data.get('weight_kind')})"),
                ("Group columns", ", ".join(data.get("group_columns") or []) or None),
                ("Cluster column", data.get("cluster_column")),
                ("Score time", data.get("score_time_column")),
                ("Outcome time", data.get("outcome_time_column")),
                ("Outcome horizon", None if data.get("outcome_horizon_days") is None else
                 f"{fmt_num(data['outcome_horizon_days'], 1)} days"),
                ("Case cost column", data.get("case_cost_column"))]
    kv += [(k, v) for k, v in opt_cols if v]
    win = data.get("score_time_window")
    if win:
        kv.append(("Validation window", f"{win['first_day']} to {win['last_day']}"))
    kv.append(("Rows dropped (missing scores, at the user's request)", fmt_count(data["dropped_rows"])))
    kv.append(("Sampling design", data["design"]))
    for w in data.get("warnings") or []:
        kv.append(("Intake warning", w["message"]))
    add(Block("kv", rows=tuple(kv)))
    red = data.get("reduction")
    if red:
        # the count table was counted from a larger file: what was read, and the rounding
        add(Block("p", red["statement"]))
    for s in record.get("analysis", {}).get("statements", [])[:2]:
        add(Block("p", s))

    # ---------------------------------------------------------------- choice
    add(Block("h1", "2. How the threshold was chosen"))
    add(Block("p", choice.get("explanation", "")))
    pol = record["policy"]["resolved"]
    prow = []
    for section, keys in pol.items():
        for key, e in keys.items():
            v = e["value"]
            v = ", ".join(v) if isinstance(v, list) else (v if isinstance(v, str) else repr(v))
            prow.append((f"{section}.{key}", v, e["source"] + (f": {e['note']}" if e.get("note") else "")))
    add(Block("table", header=("Policy value", "Value", "Source"), rows=tuple(prow),
              widths=(0.35, 0.35, 0.30)))
    cr = choice.get("cost_ratio") or {}
    rng = cr.get("optimal_range_with_rules") or cr.get("optimal_range")
    if rng:
        add(Block("p", f"This point is cost-optimal for cost ratios ({cr.get('definition')}) from "
                       f"{fmt_num(rng[0], 3)} to {fmt_num(rng[1], 3)}"
                  + (f"; the policy's ratio is {fmt_num(cr['policy_ratio'], 3)}."
                     if cr.get("policy_ratio") is not None else ".")))
    if choice.get("unconstrained_threshold") is not None:
        add(Block("p", "Without the rules the objective alone would pick threshold "
                       f"{fmt_threshold(choice['unconstrained_threshold'])}."))
    if choice.get("method") == "set by the user" and choice.get("policy_threshold") is not None:
        add(Block("p", "The policy itself would recommend threshold "
                       f"{fmt_threshold(choice['policy_threshold'])}."))
    for w in choice.get("warnings", []):
        add(Block("p", w))

    # ---------------------------------------------------------------- metrics
    add(Block("h1", "3. Metrics with intervals"))
    add(Block("p", f"At validation (prevalence {_pct_for(m['validation_prevalence'])}) and at "
                   f"deployment (π = {_pct_for(m['deployment_prevalence'])}, "
                   f"{m.get('deployment_prevalence_source') or 'default'}). Recall and specificity "
                   "carry over (label shift); precision, NPV and flag rate are recomputed at π."))
    rows = []
    for name in ("recall", "specificity", "precision", "npv", "flag_rate", "flagged_per_1000"):
        writer = (lambda v: fmt_num(v, 1)) if name == "flagged_per_1000" else _pct_for
        v, d = m["validation"][name], m["deployment"][name]
        rows.append((METRIC_LABELS[name][0], writer(v["value"]), _range(v, writer),
                     writer(d["value"]), _range(d, writer), d["method"]))
    for name in ("accuracy", "f1", "mcc", "youden_j", "nne"):
        writer = (lambda v: fmt_num(v, 3)) if name in ("mcc", "youden_j", "nne") else _pct_for
        rows.append((METRIC_LABELS[name][0], writer(m["validation"][name]["value"]), DASH,
                     writer(m["deployment"][name]["value"]), DASH, "point value"))
    add(Block("table", header=("Metric", "Validation", f"{_c(record)} interval", "Deployment",
                               f"{_c(record)} interval",
                               "Method (deployment)"),
              rows=tuple(rows), widths=(0.17, 0.11, 0.17, 0.11, 0.17, 0.27)))
    boot_rows = []
    for name in ("recall", "specificity", "precision", "npv", "flag_rate"):
        bt = m["deployment"][name].get("bootstrap")
        if bt:
            boot_rows.append((METRIC_LABELS[name][0], f"{_pct_for(bt['ci_low'])} to "
                                                      f"{_pct_for(bt['ci_high'])}", bt["basis"]))
    for name, e in (m.get("curve") or {}).items():
        boot_rows.append((_CURVE_LABELS.get(name, name), fmt_ci(e, lambda v: fmt_num(v, 4)),
                          "validation, over all thresholds"))
    if boot_rows:
        methods = sorted({e["bootstrap"]["method"] for e in m["deployment"].values()
                          if isinstance(e, dict) and e.get("bootstrap")})
        add(Block("p", "Bootstrap intervals" + (f" ({'; '.join(methods)})" if methods else "")
                  + ":"))
        add(Block("table", header=("Quantity", f"{_c(record)} interval", "Basis"), rows=tuple(boot_rows),
                  widths=(0.3, 0.4, 0.3)))
    add(Block("p", _cautions.ACCURACY_TRAP + f" Here accuracy is "
                   f"{_pct_for(m['validation']['accuracy']['value'])}; flagging none would score "
                   f"{_pct_for(1 - data['prevalence'])}."))
    sc = m.get("scenarios") or []
    if sc:
        rows = []
        for s in sc:
            mm = s["metrics"]
            rows.append((f"{s['name']}: π = {_pct_for(s['prevalence'])}", _pct_for(mm["precision"]),
                         _pct_for(mm["npv"]), _pct_for(mm["flag_rate"]),
                         fmt_num(s.get("flagged_per_period"), 1),
                         fmt_num(s.get("cost_per_case"), 4),
                         "yes" if s["meets_rules"] else "NO"))
        add(Block("p", "Across the deployment prevalence range"
                  + (f" ({m['prevalence_range']['source']})" if m.get("prevalence_range") and
                     m["prevalence_range"].get("source") else "") + ":"))
        add(Block("table", header=("Scenario", "Precision", "NPV", "Flag rate", "Flagged per period",
                                   "Cost per case", "Meets rules"), rows=tuple(rows)))

    # ---------------------------------------------------------------- confusion matrix
    add(Block("h1", "4. Confusion matrix and flags per period"))
    c = record["counts"]
    add(Block("table", header=("Validation cases", "Event", "Non-event", "Total"), rows=(
        ("Flagged", fmt_count(c["tp"]), fmt_count(c["fp"]), fmt_count(c["tp"] + c["fp"])),
        ("Not flagged", fmt_count(c["fn"]), fmt_count(c["tn"]), fmt_count(c["fn"] + c["tn"])),
        ("Total", fmt_count(c["tp"] + c["fn"]), fmt_count(c["fp"] + c["tn"]),
         fmt_count(c["tp"] + c["fp"] + c["fn"] + c["tn"])))))
    cap = m["workload"].get("capacity")
    if cap:
        lim = record["policy"]["resolved"].get("rules", {}).get("max_flagged_per_period")
        add(Block("p", f"Flagged cases per {cap['period']} over {fmt_count(cap['n_periods'])} "
                       f"{cap['period']}s of the validation data, scaled to deployment: median "
                       f"{fmt_num(cap['median'], 1)}, 90th percentile {fmt_num(cap['p90'], 1)}, "
                       f"maximum {fmt_num(cap['max'], 1)}"
                  + (f"; capacity {fmt_num(lim['value'], 0)}, exceeded in "
                     f"{fmt_pct(cap['share_over'])} of {cap['period']}s." if lim else ".")))
        add(Block("figure", name="flags_per_period",
                  text=f"Flagged cases per {cap['period']} at the threshold."))

    # ---------------------------------------------------------------- alternatives
    add(Block("h1", "5. Alternatives"))
    rows = []
    for p in record["alternatives"] + [choice.get("flag_none"), choice.get("flag_all")]:
        if not p:
            continue
        rows.append((p["label"], fmt_threshold(p["threshold"]), _pct_for(p["recall"]),
                     _pct_for(p["precision"]), fmt_num(p["flagged_per_1000"], 1),
                     fmt_num(p.get("flagged_per_period"), 1), fmt_num(p.get("cost_per_case"), 4),
                     "yes" if p["meets_rules"] else "no"))
    add(Block("table", header=("Point", "Threshold", "Recall", "Precision", "Flagged per 1,000",
                               "Flagged per period", "Cost per case", "Meets rules"),
              rows=tuple(rows), widths=(0.25, 0.1, 0.09, 0.1, 0.12, 0.12, 0.12, 0.1)))

    # ---------------------------------------------------------------- stability and optimism
    add(Block("h1", "6. Stability and optimism"))
    st = record["stability"]
    if st.get("status") == "not computed":
        add(Block("p", f"Stability: not computed ({st.get('reason')})."))
    else:
        lo, hi = st["threshold_range_95"]
        add(Block("p", f"Re-running the policy's choice on {fmt_count(st['n_replicates'])} bootstrap "
                       f"replicates (seed {st['seed']}, design {st['design']}): 95 % of the chosen "
                       f"thresholds lie from {fmt_threshold(lo)} to {fmt_threshold(hi)}; "
                       f"{fmt_pct(st['share_same_point'])} choose the same point and "
                       f"{fmt_pct(st['share_within_one_event_score'])} the same or a neighbouring "
                       f"event score; {fmt_count(st['n_infeasible'])} replicates found no point "
                       "meeting every rule."))
        for note in st.get("notes", []):
            add(Block("p", _sentence(note)))
    opt = m["optimism"]
    rows = []
    for q, label in _KEY_QUANTITIES:
        w = (lambda v: fmt_num(v, 4)) if q == "cost" else _pct_for
        rows.append((label, w(opt["apparent"].get(q)), w(opt["cross_fitted"].get(q)),
                     w(opt["corrected"].get(q))))
    add(Block("table", header=("Quantity", "Apparent", "Cross-fitted", "Corrected"), rows=tuple(rows)))
    add(Block("p", opt["statement"]))
    for key in ("cross_fit_method", "correction_method"):
        if opt.get(key):
            add(Block("p", _sentence(opt[key])))
    ref = opt.get("policy_rule_reference")
    if ref:
        add(Block("p", f"The policy's own rule (threshold {fmt_threshold(ref['threshold'])}): recall "
                       f"apparent {_pct_for(ref['apparent'].get('recall'))}, cross-fitted "
                       f"{_pct_for(ref['cross_fitted'].get('recall'))}, corrected "
                       f"{_pct_for(ref['corrected'].get('recall'))}."))

    # ---------------------------------------------------------------- subgroups, calibration
    add(Block("h1", "7. Subgroups and fairness"))
    b.extend(_groups_blocks(record))
    add(Block("h1", "8. Calibration"))
    b.extend(_calibration_blocks(record))

    # ---------------------------------------------------------------- figures
    add(Block("h1", "9. Figures"))
    add(Block("figure", name="pr_roc", text="ROC and precision–recall curves with the operating "
                                            f"point and {_c(record)} bootstrap bands."))
    if record["curves"]["points"].get("cost_per_case") is not None:
        add(Block("figure", name="cost", text="Expected cost per case against the threshold, at π."))

    # ---------------------------------------------------------------- test vectors
    add(Block("h1", "10. Test vectors for the live system"))
    tv = record["test_vectors"]
    add(Block("p", f"Rule: {tv['rule']}. {tv['note']}"))
    add(Block("table", header=("Score as the live system writes it", "Position", "Expected decision"),
              rows=tuple((v["text"], v["position"], "FLAG" if v["flagged"] else "no flag")
                         for v in tv["vectors"]), widths=(0.4, 0.3, 0.3)))

    # ---------------------------------------------------------------- analyst's fields
    add(Block("h1", "11. The analyst's statements"))
    rows = []
    for key in FIELDS:
        if key in ("title",):
            continue
        rows.append((LABELS[key][0], _stated(memo.get(key))))
    for key in NESTED["monitoring"]:
        rows.append((LABELS[f"monitoring.{key}"][0], _stated(memo["monitoring"].get(key))))
    add(Block("kv", rows=tuple(rows)))

    # ---------------------------------------------------------------- sign-off
    add(Block("h1", "12. Sign-off"))
    s = memo["sign_off"]
    add(Block("signoff", rows=tuple((LABELS[f"sign_off.{k}"][0], s.get(k) or "")
                                    for k in NESTED["sign_off"])))
    add(Block("p", record["cautions"]["integrity"] + " Signing comes as a separate, detached file."))

    # ---------------------------------------------------------------- software
    add(Block("h1", "13. Software, settings and integrity"))
    an = record.get("analysis", {})
    kv = [("Software", f"Fulcrum {record['software_version']}"),
          ("Record schema", record["schema"]),
          ("Created (UTC)", record["created_utc"]),
          ("Bootstrap", f"{fmt_count(an.get('n_replicates'))} replicates, seed {an.get('seed')}, "
                        f"design {an.get('design')}"),
          ("Cross-fitting", f"{an.get('folds')} folds, seed {an.get('seed')}"),
          ("Confidence", fmt_pct(an.get("confidence"), 0)),
          ("Interval method", an.get("interval_method", DASH)),
          ("Record sha256", integ.get("sha256", DASH)),
          ("Supersedes", record.get("supersedes") or "none")]
    add(Block("kv", rows=tuple(kv)))
    for s in an.get("statements", [])[2:]:
        add(Block("p", _sentence(s)))
    if record.get("comparison"):
        from core.compare_memo import comparison_blocks

        b.extend(comparison_blocks(record["comparison"],
                                   heading="14. Comparison with other score versions"))
    return b


def _ci_text(v: dict, writer=None) -> str:
    writer = writer or _pct_for
    lo, hi = v.get("low"), v.get("high")
    if _bad(lo) or _bad(hi):
        return writer(v.get("estimate"))
    return f"{writer(v.get('estimate'))} ({writer(lo)} to {writer(hi)})"


def _signed(x, writer) -> str:
    if _bad(x):
        return DASH
    return ("+" if x >= 0 else "−") + writer(abs(x))


def _groups_blocks(record: dict) -> list[Block]:
    out = []
    g = record["groups"]
    fair = record["fairness"]
    if g.get("status") != "computed":
        out.append(Block("p", f"Subgroups: not computed ({g.get('reason')})."))
    else:
        rows = []
        for r in g.get("rows", []):
            v = r["values"]
            diff = r.get("differences", {}).get("recall")
            vs = DASH if not diff else (f"{_signed(diff['difference'], _pct_for)}: {diff['verdict']}")
            rows.append((f"{r['column']}: {r['group']}", fmt_count(r["cases"]), fmt_count(r["events"]),
                         _ci_text(v["recall"]) if "recall" in v else DASH,
                         _ci_text(v["precision"]) if "precision" in v else DASH,
                         _pct_for(v["flag_rate"]["estimate"]) if "flag_rate" in v else DASH, vs))
        out.append(Block("p", "At the threshold, each group at its own (validation) prevalence, "
                              f"with {_c(record)} intervals; each group against the rest of the "
                              "cases."))
        out.append(Block("table", header=("Group", "Cases", "Events", f"Recall ({_c(record)} interval)",
                                          f"Precision ({_c(record)} interval)", "Flag rate",
                                          "Recall vs rest (Holm)"),
                         rows=tuple(rows), widths=(0.17, 0.08, 0.07, 0.2, 0.2, 0.09, 0.19)))
        skip = set(fair.get("statements", [])) if fair.get("status") == "computed" else set()
        for line in g.get("statements", []):
            if line not in skip:
                out.append(Block("p", _sentence(line)))
        out.append(Block("figure", name="subgroups",
                         text=f"Recall by subgroup with {_c(record)} intervals."))
    if fair.get("status") != "computed":
        out.append(Block("p", f"Fairness criterion: not computed ({fair.get('reason')})."))
        return out
    out.append(Block("strong", f"Fairness criterion ({fair['label'].lower()} within "
                               f"±{fmt_pct(fair['tolerance'])}, {', '.join(fair['columns'])}): "
                               f"{fair['verdict'].upper()}"))
    rows = []
    for c in fair.get("comparisons", []):
        rows.append((f"{c['column']}: {c['group']}", _pct_for(c["value"]),
                     f"{_pct_for(c['other_value'])} ({c['against']})",
                     f"{_signed(c['gap'], _pct_for)} ({_signed(c['low'], _pct_for)} to "
                     f"{_signed(c['high'], _pct_for)})", c["verdict"], _pct_for(c["largest_gap"])))
    out.append(Block("table", header=("Group", "Value", "Compared with", f"Gap ({_c(record)} interval)",
                                      "Verdict", "Largest gap not excluded"),
                     rows=tuple(rows), widths=(0.18, 0.1, 0.18, 0.28, 0.1, 0.16)))
    for line in fair.get("statements", [])[:2]:
        out.append(Block("p", _sentence(line)))
    return out


def _calibration_blocks(record: dict) -> list[Block]:
    out = []
    cal = record["calibration"]
    ref = record["reference"].get("calibration", {})
    if cal.get("status") != "computed":
        reason = cal.get("reason") or "not computed"
        out.append(Block("p", f"Calibration: {cal.get('status', 'not computed')} ({reason})."))
        return out
    ov = cal["overall"]
    out.append(Block("p", _sentence(ov["statement"])))
    rows = []
    for c in [ov] + list(cal.get("groups", [])):
        f = c["fit"]
        name = "all cases" if c.get("column") is None else f"{c['column']}: {c['group']}"
        rows.append((name, c["verdict"],
                     f"{fmt_num(f['slope'], 2)} ({fmt_num(f['slope_low'], 2)} to "
                     f"{fmt_num(f['slope_high'], 2)})",
                     f"{fmt_num(f['intercept'], 2)} ({fmt_num(f['intercept_low'], 2)} to "
                     f"{fmt_num(f['intercept_high'], 2)})",
                     fmt_num(c["brier"], 4), fmt_num(c["ece"], 4),
                     f"{fmt_num(c['oe_ratio'], 2)} ({fmt_num(c['oe_low'], 2)} to "
                     f"{fmt_num(c['oe_high'], 2)})"))
    out.append(Block("table", header=("Cases", "Verdict", f"Slope ({_c(record)} CI)",
                                      f"Intercept ({_c(record)} CI)",
                                      "Brier", "ECE", "Observed / expected"),
                     rows=tuple(rows), widths=(0.16, 0.13, 0.17, 0.17, 0.09, 0.09, 0.19)))
    for line in cal.get("statements", []):
        if line != ov["statement"]:
            out.append(Block("p", _sentence(line)))
    if ref.get("scores_in_unit_interval"):
        out.append(Block("p", f"Reference for later rechecks: mean score {fmt_num(ref['mean_score'], 4)}"
                              f", event rate {fmt_num(ref['event_rate'], 4)}, Brier "
                              f"{fmt_num(ref['brier'], 4)}."))
    return out
