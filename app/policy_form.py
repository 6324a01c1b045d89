"""The policy editor: every field of the policy file, loaded, edited and saved.

The policy being edited lives in session state as a plain nested dict (the
policy file's content), so it survives page switches; widgets are seeded from
it before they are drawn and the dict is rebuilt from them on every run.
"""

from __future__ import annotations

import copy
from pathlib import Path

import streamlit as st

from app import state
from core.policy import (
    OBJECTIVE_LABELS,
    OBJECTIVES,
    PERIODS,
    Policy,
    PolicyError,
    dumps_policy,
    loads_policy,
)

POLICY_DIR = Path(__file__).resolve().parents[1] / "sample_data" / "policies"
RATE_RULES = {
    "min_recall": ("Recall at least", 0.80),
    "min_precision": ("Precision at least", 0.10),
    "min_specificity": ("Specificity at least", 0.50),
    "max_flag_rate": ("Flag rate at most", 0.10),
}
K = "policy_"  # widget-key prefix


def default_policy_dict(dataset) -> dict:
    """The demo's own policy file, or a neutral start for an upload (no costs assumed)."""
    name = (dataset.file_name or "").lower()
    for stem, file in (("hospital", "hospital.toml"), ("invoice", "invoices.toml")):
        if stem in name and (POLICY_DIR / file).exists():
            return loads_policy((POLICY_DIR / file).read_text()).to_dict()
    return {"objective": {"kind": "max_youden"}}


def _seed(d: dict, dataset, *, only_missing: bool = False, pre: str = K) -> None:
    """Write widget keys from the policy dict (only before the widgets are drawn).

    With ``only_missing`` just the keys Streamlit dropped (a widget that was
    hidden in the last run) are restored, so a field shown again keeps its value.
    """
    ss = {} if only_missing else st.session_state
    obj, costs = d.get("objective", {}), d.get("costs")
    dep, rules = d.get("deployment", {}), d.get("rules", {})
    ss[pre + "kind"] = obj.get("kind", "max_youden")
    ss[pre + "beta"] = float(obj.get("beta", 2.0))
    ss[pre + "p_t"] = float(obj.get("threshold_probability", 0.1))
    ss[pre + "has_costs"] = costs is not None
    costs = costs or {}
    ss[pre + "fp"] = float(costs.get("false_positive", 1.0))
    ss[pre + "fn_mode"] = "column" if costs.get("false_negative_column") else "amount"
    ss[pre + "fn"] = float(costs.get("false_negative", 10.0))
    ss[pre + "fn_col"] = costs.get("false_negative_column") or ""
    ss[pre + "tp"] = float(costs.get("true_positive", 0.0))
    ss[pre + "tn"] = float(costs.get("true_negative", 0.0))
    ss[pre + "unit"] = costs.get("unit", "")
    ss[pre + "has_prev"] = "prevalence" in dep
    ss[pre + "prev"] = float(dep.get("prevalence", round(dataset.prevalence, 6)))
    ss[pre + "has_range"] = "prevalence_low" in dep
    ss[pre + "prev_low"] = float(dep.get("prevalence_low", round(dataset.prevalence * 0.75, 6)))
    ss[pre + "prev_high"] = float(dep.get("prevalence_high", round(dataset.prevalence * 1.5, 6)))
    ss[pre + "prev_src"] = dep.get("prevalence_source", "")
    ss[pre + "has_volume"] = "cases_per_period" in dep
    ss[pre + "volume"] = float(dep.get("cases_per_period", 1000.0))
    ss[pre + "period"] = dep.get("period", "day")
    for name, (_, default) in RATE_RULES.items():
        ss[pre + "use_" + name] = name in rules
        ss[pre + name] = float(rules.get(name, default))
    ss[pre + "use_cap"] = "max_flagged_per_period" in rules
    ss[pre + "cap"] = float(rules.get("max_flagged_per_period", 50.0))
    ss[pre + "use_capq"] = "capacity_quantile" in rules
    ss[pre + "capq"] = float(rules.get("capacity_quantile", 0.9))
    ss[pre + "use_conf"] = "confidence" in rules
    ss[pre + "conf"] = float(rules.get("confidence", 0.95))
    ss[pre + "fairness"] = d.get("fairness")
    if only_missing:
        for key, value in ss.items():
            if key not in st.session_state:
                st.session_state[key] = value


def _ensure(dataset, pre: str = K, store: str = state.POLICY, store_fp: str = state.POLICY_FP,
            start: dict | None = None) -> dict:
    ss = st.session_state
    ident = dataset.fingerprint if start is None else (dataset.fingerprint, repr(start))
    if ss.get(store_fp) != ident or ss.get(store) is None:
        ss[store] = default_policy_dict(dataset) if start is None else copy.deepcopy(start)
        ss[store_fp] = ident
        _seed(ss[store], dataset, pre=pre)
    else:  # widgets dropped while hidden or while another page was shown
        _seed(ss[store], dataset, only_missing=True, pre=pre)
    return ss[store]


def _forget_hidden(dataset, pre: str = K) -> None:
    """Delete the keys of the fields not drawn in this run (after the policy is collected).

    A key written before its widget is first drawn outlives the widget: when the page is left,
    Streamlit drops the widget's value and the key falls back to that first write, so a field
    shown later (a cost unit, a rule's bound) came back blank on return. Deleted here, such a
    key is missing next time and :func:`_ensure` seeds it from the policy.
    """
    ss = st.session_state
    hidden = []
    if ss[pre + "kind"] != "max_fbeta":
        hidden.append("beta")
    if ss[pre + "kind"] != "max_net_benefit":
        hidden.append("p_t")
    if not ss[pre + "has_costs"]:
        hidden += ["fp", "fn_mode", "fn", "fn_col", "unit", "tp", "tn"]
    else:
        hidden.append("fn" if ss[pre + "fn_mode"] == "column" else "fn_col")
    if not ss[pre + "has_prev"]:
        hidden.append("prev")
    if not ss[pre + "has_range"]:
        hidden += ["prev_low", "prev_high", "prev_src"]
    if not ss[pre + "has_volume"]:
        hidden.append("volume")
    hidden += [name for name in RATE_RULES if not ss[pre + "use_" + name]]
    if not ss[pre + "use_cap"]:
        hidden += ["cap", "use_capq", "capq"]
    elif dataset.score_time is None:
        hidden += ["use_capq", "capq"]
    elif not ss[pre + "use_capq"]:
        hidden.append("capq")
    if not ss[pre + "use_conf"]:
        hidden.append("conf")
    for name in hidden:
        ss.pop(pre + name, None)


def _on_upload(pre: str = K, store: str = state.POLICY, dataset=None) -> None:
    up = st.session_state.get(pre + "file")
    if up is None:
        return
    try:
        pol = loads_policy(up.getvalue().decode("utf-8-sig"), source=up.name)
    except (PolicyError, UnicodeDecodeError) as exc:
        st.session_state[pre + "load_error"] = str(exc)
        return
    st.session_state[pre + "load_error"] = None
    st.session_state[store] = pol.to_dict()
    _seed(st.session_state[store], state.dataset() if dataset is None else dataset, pre=pre)


def _collect(dataset, pre: str = K) -> dict:
    ss = st.session_state
    d: dict = {"objective": {"kind": ss[pre + "kind"]}}
    if ss[pre + "kind"] == "max_fbeta":
        d["objective"]["beta"] = ss[pre + "beta"]
    if ss[pre + "kind"] == "max_net_benefit":
        d["objective"]["threshold_probability"] = ss[pre + "p_t"]
    if ss[pre + "has_costs"]:
        c = {"false_positive": ss[pre + "fp"]}
        if ss[pre + "fn_mode"] == "column" and ss[pre + "fn_col"]:
            c["false_negative_column"] = ss[pre + "fn_col"]
        else:
            c["false_negative"] = ss[pre + "fn"]
        if ss[pre + "tp"]:
            c["true_positive"] = ss[pre + "tp"]
        if ss[pre + "tn"]:
            c["true_negative"] = ss[pre + "tn"]
        if ss[pre + "unit"].strip():
            c["unit"] = ss[pre + "unit"].strip()
        d["costs"] = c
    dep = {}
    if ss[pre + "has_prev"]:
        dep["prevalence"] = ss[pre + "prev"]
    if ss[pre + "has_range"]:
        dep["prevalence_low"] = ss[pre + "prev_low"]
        dep["prevalence_high"] = ss[pre + "prev_high"]
        if ss[pre + "prev_src"].strip():
            dep["prevalence_source"] = ss[pre + "prev_src"].strip()
    if ss[pre + "has_volume"]:
        dep["cases_per_period"] = ss[pre + "volume"]
    dep["period"] = ss[pre + "period"]
    d["deployment"] = dep
    rules = {}
    for name in RATE_RULES:
        if ss[pre + "use_" + name]:
            rules[name] = ss[pre + name]
    if ss[pre + "use_cap"]:
        rules["max_flagged_per_period"] = ss[pre + "cap"]
        if ss[pre + "use_capq"] and dataset.score_time is not None:
            rules["capacity_quantile"] = ss[pre + "capq"]
    if ss[pre + "use_conf"]:
        rules["confidence"] = ss[pre + "conf"]
    if rules:
        d["rules"] = rules
    if ss.get(pre + "fairness"):
        d["fairness"] = ss[pre + "fairness"]
    return d


def render(dataset, *, pre: str = K, store: str = state.POLICY, store_fp: str = state.POLICY_FP,
           start: dict | None = None, title: str | None = "Policy") -> Policy | None:
    """Draw the editor; return the valid Policy, or None after showing its problems.

    The defaults edit the shared policy of the Decide page (starting from the
    demo's policy file or a neutral one). Another page gives its own widget-key
    prefix ``pre``, session-state keys ``store`` / ``store_fp`` and the policy
    dict to ``start`` from (the editor starts again when it changes).
    """
    _ensure(dataset, pre, store, store_fp, start)
    if title:
        st.header(title)
    l1, l2 = st.columns(2)
    l1.file_uploader("Load a policy file (TOML)", type=["toml"], key=pre + "file",
                     on_change=_on_upload, args=(pre, store, dataset))
    if st.session_state.get(pre + "load_error"):
        st.error(st.session_state[pre + "load_error"])

    st.subheader("Objective")
    o1, o2 = st.columns(2)
    o1.selectbox("Optimise", OBJECTIVES, key=pre + "kind", format_func=lambda k: OBJECTIVE_LABELS[k].capitalize())
    kind = st.session_state[pre + "kind"]
    if kind == "max_fbeta":
        o2.number_input("beta (above 1 favours recall)", min_value=0.01, key=pre + "beta")
    if kind == "max_net_benefit":
        o2.number_input("Threshold probability p_t", min_value=0.001, max_value=0.999, key=pre + "p_t",
                        format="%.3f")

    st.subheader("Costs")
    st.toggle("Price the errors", key=pre + "has_costs",
              help="Needed for the lowest-cost objective; reported for every objective when given.")
    if st.session_state[pre + "has_costs"]:
        c1, c2, c3 = st.columns(3)
        c1.number_input("Cost of a false alarm (C_FP)", min_value=0.0, key=pre + "fp")
        case_cols = [c for c in (dataset.mapping.case_cost, dataset.mapping.event_cost) if c]
        modes = ["amount", "column"] if case_cols else ["amount"]
        if st.session_state[pre + "fn_mode"] not in modes:
            st.session_state[pre + "fn_mode"] = "amount"
        c2.radio("A miss costs", modes, key=pre + "fn_mode", horizontal=True,
                 format_func=lambda m: "one amount" if m == "amount" else "its own amount (a column)")
        if st.session_state[pre + "fn_mode"] == "column":
            if st.session_state[pre + "fn_col"] not in case_cols:
                st.session_state[pre + "fn_col"] = case_cols[0]
            c2.selectbox("Miss-cost column", case_cols, key=pre + "fn_col")
        else:
            c2.number_input("Cost of a missed event (C_FN)", min_value=0.0, key=pre + "fn")
        c3.text_input("Unit", key=pre + "unit", placeholder="harm points, currency…")
        c4, c5 = st.columns(2)
        c4.number_input("Cost of a true positive (negative = benefit)", key=pre + "tp")
        c5.number_input("Cost of a true negative (negative = benefit)", key=pre + "tn")

    st.subheader("Deployment")
    d1, d2, d3 = st.columns(3)
    d1.toggle("Deployment prevalence differs", key=pre + "has_prev",
              help=f"Default: the validation prevalence ({dataset.prevalence:.4%}).")
    if st.session_state[pre + "has_prev"]:
        d1.number_input("Deployment prevalence", min_value=1e-6, max_value=0.999999, format="%.5f",
                        key=pre + "prev")
    d2.toggle("A low / high range", key=pre + "has_range")
    if st.session_state[pre + "has_range"]:
        d2.number_input("Low", min_value=1e-6, max_value=0.999999, format="%.5f", key=pre + "prev_low")
        d2.number_input("High", min_value=1e-6, max_value=0.999999, format="%.5f", key=pre + "prev_high")
        d2.text_input("Source of the range", key=pre + "prev_src")
    d3.toggle("Cases per period", key=pre + "has_volume")
    if st.session_state[pre + "has_volume"]:
        d3.number_input("Cases per period", min_value=1.0, key=pre + "volume")
    d3.selectbox("Period", list(PERIODS), key=pre + "period")

    st.subheader("Rules")
    r = st.columns(4)
    for col, (name, (label, _)) in zip(r, RATE_RULES.items()):
        col.checkbox(label, key=pre + "use_" + name)
        if st.session_state[pre + "use_" + name]:
            col.number_input(label, min_value=0.0, max_value=1.0, format="%.3f", key=pre + name,
                             label_visibility="collapsed")
    q1, q2, q3 = st.columns(3)
    q1.checkbox("Flagged per period at most", key=pre + "use_cap")
    if st.session_state[pre + "use_cap"]:
        q1.number_input("Capacity per period", min_value=0.0, key=pre + "cap", label_visibility="collapsed")
        if dataset.score_time is not None:
            q2.checkbox("Judge on a quantile of periods", key=pre + "use_capq")
            if st.session_state[pre + "use_capq"]:
                q2.number_input("Quantile", min_value=0.01, max_value=1.0, format="%.2f", key=pre + "capq",
                                label_visibility="collapsed")
    q3.checkbox("Rules must hold with confidence", key=pre + "use_conf",
                help="A rule counts as met only when its one-sided bound clears it.")
    if st.session_state[pre + "use_conf"]:
        q3.number_input("Confidence", min_value=0.51, max_value=0.999, format="%.3f", key=pre + "conf",
                        label_visibility="collapsed")

    d = _collect(dataset, pre)
    st.session_state[store] = d
    _forget_hidden(dataset, pre)
    try:
        policy = Policy.from_dict(d)
    except PolicyError as exc:
        st.error(str(exc))
        return None
    l2.download_button("Save this policy (TOML)", dumps_policy(policy), file_name="policy.toml",
                       mime="application/toml", key=pre + "save", on_click="ignore")
    return policy
