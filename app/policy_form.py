"""The policy editor: every field of the policy file, loaded, edited and saved.

The policy being edited lives in session state as a plain nested dict (the
policy file's content), so it survives page switches; widgets are seeded from
it before they are drawn and the dict is rebuilt from them on every run.
"""

from __future__ import annotations

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


def _seed(d: dict, dataset, *, only_missing: bool = False) -> None:
    """Write widget keys from the policy dict (only before the widgets are drawn).

    With ``only_missing`` just the keys Streamlit dropped (a widget that was
    hidden in the last run) are restored, so a field shown again keeps its value.
    """
    ss = {} if only_missing else st.session_state
    obj, costs = d.get("objective", {}), d.get("costs")
    dep, rules = d.get("deployment", {}), d.get("rules", {})
    ss[K + "kind"] = obj.get("kind", "max_youden")
    ss[K + "beta"] = float(obj.get("beta", 2.0))
    ss[K + "p_t"] = float(obj.get("threshold_probability", 0.1))
    ss[K + "has_costs"] = costs is not None
    costs = costs or {}
    ss[K + "fp"] = float(costs.get("false_positive", 1.0))
    ss[K + "fn_mode"] = "column" if costs.get("false_negative_column") else "amount"
    ss[K + "fn"] = float(costs.get("false_negative", 10.0))
    ss[K + "fn_col"] = costs.get("false_negative_column") or ""
    ss[K + "tp"] = float(costs.get("true_positive", 0.0))
    ss[K + "tn"] = float(costs.get("true_negative", 0.0))
    ss[K + "unit"] = costs.get("unit", "")
    ss[K + "has_prev"] = "prevalence" in dep
    ss[K + "prev"] = float(dep.get("prevalence", round(dataset.prevalence, 6)))
    ss[K + "has_range"] = "prevalence_low" in dep
    ss[K + "prev_low"] = float(dep.get("prevalence_low", round(dataset.prevalence * 0.75, 6)))
    ss[K + "prev_high"] = float(dep.get("prevalence_high", round(dataset.prevalence * 1.5, 6)))
    ss[K + "prev_src"] = dep.get("prevalence_source", "")
    ss[K + "has_volume"] = "cases_per_period" in dep
    ss[K + "volume"] = float(dep.get("cases_per_period", 1000.0))
    ss[K + "period"] = dep.get("period", "day")
    for name, (_, default) in RATE_RULES.items():
        ss[K + "use_" + name] = name in rules
        ss[K + name] = float(rules.get(name, default))
    ss[K + "use_cap"] = "max_flagged_per_period" in rules
    ss[K + "cap"] = float(rules.get("max_flagged_per_period", 50.0))
    ss[K + "use_capq"] = "capacity_quantile" in rules
    ss[K + "capq"] = float(rules.get("capacity_quantile", 0.9))
    ss[K + "use_conf"] = "confidence" in rules
    ss[K + "conf"] = float(rules.get("confidence", 0.95))
    ss[K + "fairness"] = d.get("fairness")
    if only_missing:
        for key, value in ss.items():
            if key not in st.session_state:
                st.session_state[key] = value


def _ensure(dataset) -> dict:
    ss = st.session_state
    if ss.get(state.POLICY_FP) != dataset.fingerprint or ss.get(state.POLICY) is None:
        ss[state.POLICY] = default_policy_dict(dataset)
        ss[state.POLICY_FP] = dataset.fingerprint
        _seed(ss[state.POLICY], dataset)
    else:  # widgets dropped while hidden or while another page was shown
        _seed(ss[state.POLICY], dataset, only_missing=True)
    return ss[state.POLICY]


def _on_upload() -> None:
    up = st.session_state.get(K + "file")
    if up is None:
        return
    try:
        pol = loads_policy(up.getvalue().decode("utf-8-sig"), source=up.name)
    except (PolicyError, UnicodeDecodeError) as exc:
        st.session_state[K + "load_error"] = str(exc)
        return
    st.session_state[K + "load_error"] = None
    st.session_state[state.POLICY] = pol.to_dict()
    _seed(st.session_state[state.POLICY], state.dataset())


def _collect(dataset) -> dict:
    ss = st.session_state
    d: dict = {"objective": {"kind": ss[K + "kind"]}}
    if ss[K + "kind"] == "max_fbeta":
        d["objective"]["beta"] = ss[K + "beta"]
    if ss[K + "kind"] == "max_net_benefit":
        d["objective"]["threshold_probability"] = ss[K + "p_t"]
    if ss[K + "has_costs"]:
        c = {"false_positive": ss[K + "fp"]}
        if ss[K + "fn_mode"] == "column" and ss[K + "fn_col"]:
            c["false_negative_column"] = ss[K + "fn_col"]
        else:
            c["false_negative"] = ss[K + "fn"]
        if ss[K + "tp"]:
            c["true_positive"] = ss[K + "tp"]
        if ss[K + "tn"]:
            c["true_negative"] = ss[K + "tn"]
        if ss[K + "unit"].strip():
            c["unit"] = ss[K + "unit"].strip()
        d["costs"] = c
    dep = {}
    if ss[K + "has_prev"]:
        dep["prevalence"] = ss[K + "prev"]
    if ss[K + "has_range"]:
        dep["prevalence_low"] = ss[K + "prev_low"]
        dep["prevalence_high"] = ss[K + "prev_high"]
        if ss[K + "prev_src"].strip():
            dep["prevalence_source"] = ss[K + "prev_src"].strip()
    if ss[K + "has_volume"]:
        dep["cases_per_period"] = ss[K + "volume"]
    dep["period"] = ss[K + "period"]
    d["deployment"] = dep
    rules = {}
    for name in RATE_RULES:
        if ss[K + "use_" + name]:
            rules[name] = ss[K + name]
    if ss[K + "use_cap"]:
        rules["max_flagged_per_period"] = ss[K + "cap"]
        if ss[K + "use_capq"] and dataset.score_time is not None:
            rules["capacity_quantile"] = ss[K + "capq"]
    if ss[K + "use_conf"]:
        rules["confidence"] = ss[K + "conf"]
    if rules:
        d["rules"] = rules
    if ss.get(K + "fairness"):
        d["fairness"] = ss[K + "fairness"]
    return d


def render(dataset) -> Policy | None:
    """Draw the editor; return the valid Policy, or None after showing its problems."""
    _ensure(dataset)
    st.header("Policy")
    l1, l2 = st.columns(2)
    l1.file_uploader("Load a policy file (TOML)", type=["toml"], key=K + "file", on_change=_on_upload)
    if st.session_state.get(K + "load_error"):
        st.error(st.session_state[K + "load_error"])

    st.subheader("Objective")
    o1, o2 = st.columns(2)
    o1.selectbox("Optimise", OBJECTIVES, key=K + "kind", format_func=lambda k: OBJECTIVE_LABELS[k].capitalize())
    kind = st.session_state[K + "kind"]
    if kind == "max_fbeta":
        o2.number_input("beta (above 1 favours recall)", min_value=0.01, key=K + "beta")
    if kind == "max_net_benefit":
        o2.number_input("Threshold probability p_t", min_value=0.001, max_value=0.999, key=K + "p_t",
                        format="%.3f")

    st.subheader("Costs")
    st.toggle("Price the errors", key=K + "has_costs",
              help="Needed for the lowest-cost objective; reported for every objective when given.")
    if st.session_state[K + "has_costs"]:
        c1, c2, c3 = st.columns(3)
        c1.number_input("Cost of a false alarm (C_FP)", min_value=0.0, key=K + "fp")
        case_cols = [c for c in (dataset.mapping.case_cost, dataset.mapping.event_cost) if c]
        modes = ["amount", "column"] if case_cols else ["amount"]
        if st.session_state[K + "fn_mode"] not in modes:
            st.session_state[K + "fn_mode"] = "amount"
        c2.radio("A miss costs", modes, key=K + "fn_mode", horizontal=True,
                 format_func=lambda m: "one amount" if m == "amount" else "its own amount (a column)")
        if st.session_state[K + "fn_mode"] == "column":
            if st.session_state[K + "fn_col"] not in case_cols:
                st.session_state[K + "fn_col"] = case_cols[0]
            c2.selectbox("Miss-cost column", case_cols, key=K + "fn_col")
        else:
            c2.number_input("Cost of a missed event (C_FN)", min_value=0.0, key=K + "fn")
        c3.text_input("Unit", key=K + "unit", placeholder="harm points, currency…")
        c4, c5 = st.columns(2)
        c4.number_input("Cost of a true positive (negative = benefit)", key=K + "tp")
        c5.number_input("Cost of a true negative (negative = benefit)", key=K + "tn")

    st.subheader("Deployment")
    d1, d2, d3 = st.columns(3)
    d1.toggle("Deployment prevalence differs", key=K + "has_prev",
              help=f"Default: the validation prevalence ({dataset.prevalence:.4%}).")
    if st.session_state[K + "has_prev"]:
        d1.number_input("Deployment prevalence", min_value=1e-6, max_value=0.999999, format="%.5f",
                        key=K + "prev")
    d2.toggle("A low / high range", key=K + "has_range")
    if st.session_state[K + "has_range"]:
        d2.number_input("Low", min_value=1e-6, max_value=0.999999, format="%.5f", key=K + "prev_low")
        d2.number_input("High", min_value=1e-6, max_value=0.999999, format="%.5f", key=K + "prev_high")
        d2.text_input("Source of the range", key=K + "prev_src")
    d3.toggle("Cases per period", key=K + "has_volume")
    if st.session_state[K + "has_volume"]:
        d3.number_input("Cases per period", min_value=1.0, key=K + "volume")
    d3.selectbox("Period", list(PERIODS), key=K + "period")

    st.subheader("Rules")
    r = st.columns(4)
    for col, (name, (label, _)) in zip(r, RATE_RULES.items()):
        col.checkbox(label, key=K + "use_" + name)
        if st.session_state[K + "use_" + name]:
            col.number_input(label, min_value=0.0, max_value=1.0, format="%.3f", key=K + name,
                             label_visibility="collapsed")
    q1, q2, q3 = st.columns(3)
    q1.checkbox("Flagged per period at most", key=K + "use_cap")
    if st.session_state[K + "use_cap"]:
        q1.number_input("Capacity per period", min_value=0.0, key=K + "cap", label_visibility="collapsed")
        if dataset.score_time is not None:
            q2.checkbox("Judge on a quantile of periods", key=K + "use_capq")
            if st.session_state[K + "use_capq"]:
                q2.number_input("Quantile", min_value=0.01, max_value=1.0, format="%.2f", key=K + "capq",
                                label_visibility="collapsed")
    q3.checkbox("Rules must hold with confidence", key=K + "use_conf",
                help="A rule counts as met only when its one-sided bound clears it.")
    if st.session_state[K + "use_conf"]:
        q3.number_input("Confidence", min_value=0.51, max_value=0.999, format="%.3f", key=K + "conf",
                        label_visibility="collapsed")

    d = _collect(dataset)
    st.session_state[state.POLICY] = d
    try:
        policy = Policy.from_dict(d)
    except PolicyError as exc:
        st.error(str(exc))
        return None
    l2.download_button("Save this policy (TOML)", dumps_policy(policy), file_name="policy.toml",
                       mime="application/toml", key=K + "save")
    return policy
