"""Decide: costs, rules and the recommended operating point, with its evidence."""

from __future__ import annotations

import numpy as np
import pandas as pd
import streamlit as st

from app import charts, policy_form, state
from app import format as fmt
from app.widgets import few_events_note, metric_tiles
from core import cautions
from core.choose import choose, cost_by_threshold, evaluate
from core.policy import RULE_LABELS, PolicyError, dumps_policy


@st.cache_resource(max_entries=16, show_spinner="Searching every point of the curve…")
def _choice(fingerprint: str, policy_text: str, calibrated: bool, _dataset, _policy):
    return choose(_dataset, _policy, calibrated=calibrated)


@st.cache_resource(max_entries=32, show_spinner=False)
def _evaluation(fingerprint: str, policy_text: str, calibrated: bool, threshold: float, _dataset, _policy):
    return evaluate(_dataset, _policy, threshold, calibrated=calibrated)


@st.cache_resource(max_entries=8, show_spinner=False)
def _cost_table(fingerprint: str, policy_text: str, _dataset, _policy):
    return cost_by_threshold(_dataset, _policy)


@st.cache_resource(max_entries=8, show_spinner=False)
def _looks_calibrated(fingerprint: str, _dataset) -> bool:
    """The calibration criterion of ``core.calibration`` decides whether the cost-derived threshold shows."""
    from core.calibration import calibration_report

    return bool(calibration_report(_dataset, groups=False).looks_calibrated)


@st.cache_resource(max_entries=16, show_spinner=False)
def _thin(fingerprint: str, _curve):
    idx = charts.thin(_curve, "roc")
    idx.setflags(write=False)
    return idx


@st.cache_resource(max_entries=16, show_spinner=False)
def _period_flags(fingerprint: str, policy_text: str, threshold: float, _dataset, _rp):
    from core.capacity import flags_per_period

    return flags_per_period(_dataset.curve(), _dataset.y_score, _dataset.score_time, [threshold],
                            period=_rp.period, sample_weight=_dataset.sample_weight, y_true=_dataset.y_true,
                            prevalence=_rp.prevalence, cases_per_period=_rp.cases_per_period)


def _rule_table(point) -> pd.DataFrame:
    rows = []
    for r in point.rules:
        is_rate = r.name != "max_flagged_per_period"
        w = fmt.pct if is_rate else (lambda v: fmt.num(v, 1))
        rows.append({
            "Rule": f"{RULE_LABELS[r.name]} {w(r.limit)}",
            "Value at deployment": w(r.value),
            "One-sided bound": w(r.bound) if r.bound is not None else "—",
            "Method": r.method,
            "Met": "yes" if r.met else "NO",
            "Binds": "yes" if r.binding else ("no" if r.binding is not None else "—"),
        })
    return pd.DataFrame(rows)


def _points_table(reports, unit: str) -> pd.DataFrame:
    rows = []
    for p in reports:
        d = p.deployment
        rows.append({
            "Point": p.label, "Threshold": fmt.threshold(p.threshold),
            "Recall": fmt.pct(d["recall"]), "Precision": fmt.pct(d["precision"]),
            "Flagged per 1,000": fmt.num(d["flagged_per_1000"], 1),
            "Flagged per period": fmt.num(p.flagged_per_period, 1) if p.flagged_per_period is not None else "—",
            f"Cost per case ({unit})": fmt.num(p.cost_per_case, 4) if p.cost_per_case is not None else "—",
            "Meets every rule": "yes" if p.meets_rules else "no",
        })
    return pd.DataFrame(rows)


def _move_to(index: int) -> None:
    state.set_point(index)


def render() -> None:
    act = state.active()
    ds = act.dataset
    st.title("Decide")
    st.info(cautions.FULL, icon="⚠")
    few_events_note(ds)

    results = st.container()
    with st.expander("Policy: objective, costs, deployment and rules (edit, load or save)",
                     expanded=False):
        policy = policy_form.render(ds)
    if policy is None:
        results.error("The policy has problems (open the policy editor below to fix them).")
        return
    with results:
        _results(ds, act, policy)


def _policy_line(rp) -> str:
    parts = [f"objective: {rp.objective.replace('_', ' ')}"]
    if rp.costs_given:
        fn = (f"each miss costs its own {rp.false_negative_column}" if rp.case_dependent_costs
              else f"a miss costs {fmt.num(rp.false_negative, 2)}")
        parts.append(f"a false alarm costs {fmt.num(rp.false_positive, 2)}, {fn} {rp.unit}")
    parts.append(f"deployment prevalence {fmt.pct(rp.prevalence, 2)}")
    for name, lim in rp.rules.items():
        w = fmt.pct(lim) if name != "max_flagged_per_period" else fmt.num(lim, 0)
        parts.append(f"{RULE_LABELS[name]} {w}")
    if rp.confidence:
        parts.append(f"rules judged at {fmt.pct(rp.confidence, 0)} confidence")
    return "Policy in force — " + "; ".join(parts) + "."


def _results(ds, act, policy) -> None:
    curve = ds.curve()
    text = dumps_policy(policy)
    calibrated = _looks_calibrated(ds.fingerprint, ds) if ds.scores_in_unit_interval else False
    st.caption(("The scores look calibrated by the stated criterion (Evidence page), so the cost-derived "
                "threshold is shown." if calibrated else
                "The scores are not shown to be calibrated probabilities (Evidence page), so no "
                "cost-derived threshold is offered: only the empirical search counts."))
    try:
        choice = _choice(ds.fingerprint, text, calibrated, ds, policy)
    except PolicyError as exc:
        st.error(str(exc))
        return
    rp = choice.resolved
    unit = rp.unit
    st.caption(_policy_line(rp))

    st.header("Recommended operating point")
    if choice.point is None:
        st.error("No point meets every rule. " + " ".join(choice.infeasible))
    else:
        pt = choice.point
        c1, c2 = st.columns([2, 1])
        c1.markdown(f"### Threshold {fmt.threshold(pt.threshold)}")
        c1.caption(f"Every threshold in {fmt.interval(pt.interval_low, pt.interval_high, pt.closed)} "
                   f"gives the same decisions. Judged at deployment prevalence {fmt.pct(rp.prevalence, 2)} "
                   f"({rp.sources.get('deployment.prevalence', 'default')}).")
        c2.button("Move the operating point here", type="primary", key="decide_move",
                  on_click=_move_to, args=(pt.index,))
        st.markdown(choice.explanation)
        dep = curve.point(pt.index, prevalence=rp.prevalence)
        metric_tiles(dep, deployment=True)
        k1, k2, k3 = st.columns(3)
        k1.metric(f"Expected cost per case ({unit})", fmt.num(pt.cost_per_case, 4)
                  if pt.cost_per_case is not None else "—")
        k2.metric(f"Expected cost per {rp.period} ({unit})", fmt.num(pt.cost_per_period, 1)
                  if pt.cost_per_period is not None else "—")
        k3.metric(f"Flagged per {rp.period}", fmt.num(pt.flagged_per_period, 1)
                  if pt.flagged_per_period is not None else "—")
        if pt.rules:
            st.subheader("Rules at the recommended point")
            st.dataframe(_rule_table(pt), hide_index=True)
        st.caption(cautions.LABEL_SHIFT)
    for w in choice.warnings:
        st.warning(w)

    st.subheader("Alternatives and baselines")
    reports = list(choice.alternatives) + [choice.baselines["flag_none"], choice.baselines["flag_all"]]
    if choice.point is not None:
        reports.insert(0, choice.point)
    st.dataframe(_points_table(reports, unit), hide_index=True)

    # the current (live) operating point under the same policy
    k = act.point
    t_now = float(curve.thresholds[k])
    current = _evaluation(ds.fingerprint, text, calibrated, t_now, ds, policy)
    st.subheader("Your current operating point under this policy")
    cp = current.point
    st.markdown(f"Threshold {fmt.threshold(t_now)}: "
                + ("meets every rule." if cp.meets_rules else "**breaks at least one rule.**"))
    if cp.rules:
        st.dataframe(_rule_table(cp), hide_index=True)

    if rp.costs_given:
        ct = _cost_table(ds.fingerprint, text, ds, policy)
        per_period = "cost_per_period" in ct.columns and st.toggle(
            f"Show cost per {rp.period}", key="decide_cost_period")
        column = "cost_per_period" if per_period else "cost_per_case"
        idx = _thin(ds.fingerprint, curve)
        st.plotly_chart(charts.cost_figure(
            ct["threshold"].to_numpy()[idx], ct[column].to_numpy()[idx],
            point_threshold=t_now, optimum_threshold=choice.point.threshold if choice.point else None,
            unit=unit, per=rp.period if per_period else "case", score_label=ds.mapping.score),
            key="decide_cost_chart", config={"displaylogo": False})

    sens = choice.sensitivity
    implied = current.sensitivity.get("optimal_range")
    st.plotly_chart(charts.cost_ratio_figure(
        sens["ratios"], sens["thresholds"], chosen_range=sens.get("optimal_range"), implied_range=implied,
        score_label=ds.mapping.score), key="decide_ratio_chart", config={"displaylogo": False})
    if implied is None:
        st.caption("No cost ratio between 1 and 1,000 makes the current point the cost-optimal one.")
    else:
        hi = "and above" if implied[1] is None or not np.isfinite(implied[1]) else f"to {fmt.num(implied[1], 1)}"
        st.caption(f"The current point is cost-optimal for a miss/false-alarm cost ratio from "
                   f"{fmt.num(implied[0], 1)} {hi} ({sens['ratio_definition']}).")

    if cp.capacity:
        cap = cp.capacity
        st.subheader(f"Flagged cases per {rp.period} at the current point")
        per = _period_flags(ds.fingerprint, text, t_now, ds, rp)
        st.plotly_chart(charts.flags_per_period_figure(
            per.index, per.iloc[:, 0].to_numpy(), capacity=rp.rules.get("max_flagged_per_period"),
            period=rp.period), key="decide_period_chart", config={"displaylogo": False})
        st.markdown(" · ".join(f"{name} {fmt.num(cap[key], 1)}" for name, key in
                               (("median", "median"), ("90th percentile", "p90"), ("maximum", "max"))
                               if key in cap)
                    + (f" · share of periods over capacity {fmt.pct(cap['share_over'])}"
                       if cap.get("share_over") is not None else ""))
    if choice.decision_curve is not None:
        dc = choice.decision_curve
        st.plotly_chart(charts.decision_curve_figure(
            dc["threshold_probability"].to_numpy(), dc["model"].to_numpy(), dc["treat_all"].to_numpy(),
            current=t_now if 0 < t_now < 1 else None), key="decide_dca_chart", config={"displaylogo": False})
    if choice.cost_derived is not None:
        cd = choice.cost_derived
        st.subheader("Cost-derived threshold for calibrated probabilities")
        if not cd.get("available"):
            st.markdown(cd["reason"])
        else:
            shifted = (f", corrected for the prior shift to {fmt.pct(rp.prevalence, 2)}: "
                       f"**{fmt.num(cd['prior_shift_corrected'], 4)}**" if cd["corrected"] else "")
            st.markdown(
                f"{cd['formula']} = **{fmt.num(cd['cost_derived'], 4)}**{shifted} (Elkan 2001). "
                f"Expected cost per case there: {fmt.num(cd['cost_derived_cost_per_case'], 4)} {unit}; the "
                f"empirical optimum without rules is threshold {fmt.threshold(cd['empirical_threshold'])} at "
                f"{fmt.num(cd['empirical_cost_per_case'], 4)} {unit}.")
        st.warning(cd["warning"])

render()
