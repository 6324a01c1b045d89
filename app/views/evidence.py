"""Evidence: intervals at the point, bootstrap bands, threshold stability, optimism."""

from __future__ import annotations

import pandas as pd
import streamlit as st

from app import charts, state
from app import format as fmt
from app.cache import BoundedCache
from app.widgets import caution_line
from core.errors import InputError
from core.policy import Policy, PolicyError, dumps_policy
from core.uncertainty import DESIGNS, evidence

K = "evidence_"
RATES = {"recall", "specificity", "precision", "npv", "flag_rate"}


_CACHE = BoundedCache(max_entries=8)
_GROUPS = BoundedCache(max_entries=8)
_CALIBRATION = BoundedCache(max_entries=8)
_CLUSTERS = BoundedCache(max_entries=8)


def _evidence(key: tuple, dataset, policy, progress):
    """The evidence for ``key`` = (fingerprint, policy text, threshold, design, method, confidence,
    replicates, seed), computed once (the progress bar shows while it runs)."""
    _, _, threshold, design, method, confidence, n_replicates, seed = key
    return _CACHE.get_or_compute(key, lambda: evidence(
        dataset, policy, threshold=threshold, design=design, method=method, confidence=confidence,
        n_replicates=n_replicates, seed=seed, progress=progress))


def _value(metric: str, v) -> str:
    if v is None:
        return "—"
    if metric in RATES:
        return fmt.pct(v)
    return fmt.num(v, 1) if metric == "flagged_per_period" else fmt.num(v, 4)


def _interval_table(ev) -> pd.DataFrame:
    boot = {(i.metric, i.basis): i for i in ev.bootstrap}
    rows = []
    for a in ev.analytic:
        b = boot.get((a.metric, a.basis))
        rows.append({
            "Metric": a.label, "Judged at": a.basis, "Estimate": _value(a.metric, a.estimate),
            f"{ev.confidence:.0%} interval": f"{_value(a.metric, a.low)} to {_value(a.metric, a.high)}",
            "Method": a.method_name,
            "Bootstrap interval": f"{_value(b.metric, b.low)} to {_value(b.metric, b.high)}" if b else "—",
        })
    analytic_keys = {(a.metric, a.basis) for a in ev.analytic}
    for b in ev.bootstrap:
        if (b.metric, b.basis) not in analytic_keys:
            rows.append({"Metric": b.label, "Judged at": b.basis, "Estimate": _value(b.metric, b.estimate),
                         f"{ev.confidence:.0%} interval": "—", "Method": b.method_name,
                         "Bootstrap interval": f"{_value(b.metric, b.low)} to {_value(b.metric, b.high)}"})
    for c in ev.curve:
        rows.append({"Metric": c.label, "Judged at": "whole curve", "Estimate": _value(c.metric, c.estimate),
                     f"{ev.confidence:.0%} interval": "—", "Method": c.method_name,
                     "Bootstrap interval": f"{_value(c.metric, c.low)} to {_value(c.metric, c.high)}"})
    return pd.DataFrame(rows)


def _stability_block(stab: dict) -> None:
    st.subheader("Would the policy pick the same point on another sample?")
    if stab is None:
        st.info("No stability: the policy chose no point.")
        return
    lo, hi = stab["threshold_range_95"] or (None, None)
    c = st.columns(3)
    c[0].metric("95 % range of chosen thresholds", f"{fmt.threshold(lo)} to {fmt.threshold(hi)}"
                if lo is not None else "—")
    c[1].metric("Same point", fmt.pct(stab["share_same_point"]),
                help="Share of bootstrap replicates whose choice is exactly the recommended point.")
    c[2].metric("Within one event score", fmt.pct(stab["share_within_one_event_score"]),
                help="Share of replicates choosing the same point or the neighbouring event score.")
    spread = stab.get("spread") or {}
    if spread.get("apparent") and spread.get("on_data"):
        def cell(d):
            return f"{_value(q, d['median'])} ({_value(q, d['low'])} to {_value(q, d['high'])})"

        rows = []
        for q in spread["apparent"]:
            rows.append({"Quantity": q.replace("_", " "),
                         "Replicate's own view: median (95 % range)": cell(spread["apparent"][q]),
                         "Full data at the replicate's threshold": cell(spread["on_data"][q])})
        st.dataframe(pd.DataFrame(rows), hide_index=True)
        st.caption("How far the chosen point's performance moves when the sample changes: as each "
                   "resample sees it, and on the full data at the threshold that resample would have chosen.")
    for note in stab.get("notes", []):
        st.caption(note)


def _optimism_block(opt: dict) -> None:
    st.subheader("Apparent against out-of-sample performance")
    st.markdown(opt["statement"])
    rows = [{"Quantity": r["quantity"].replace("_", " "), "Apparent": _value(r["quantity"], r["apparent"]),
             "Cross-fitted": _value(r["quantity"], r.get("cross_fitted")),
             "Optimism-corrected": _value(r["quantity"], r.get("corrected"))} for r in opt.get("table", [])]
    if rows:
        st.dataframe(pd.DataFrame(rows), hide_index=True)
    if opt.get("cross_fit"):
        st.caption(opt["cross_fit"]["method"])
    if opt.get("harrell"):
        st.caption(opt["harrell"]["method"])


def render() -> None:
    act = state.active()
    ds = act.dataset
    curve = ds.curve()
    st.title("Evidence")
    caution_line()
    pol_dict = st.session_state.get(state.POLICY)
    if pol_dict is None or st.session_state.get(state.POLICY_FP) != ds.fingerprint:
        from app.policy_form import default_policy_dict

        pol_dict = default_policy_dict(ds)
    try:
        policy = Policy.from_dict(pol_dict)
    except PolicyError as exc:
        st.error(f"{exc} (fix it on the Decide page)")
        return

    c1, c2, c3, c4 = st.columns(4)
    which = c1.radio("Threshold", ["recommended", "current"], key=K + "which",
                     format_func=lambda w: "Recommended point (derived from these data)" if w == "recommended"
                     else "Current operating point (pre-specified)",
                     help="A pre-specified threshold was fixed before these data were seen: it needs no "
                          "optimism correction. A point picked by eye on these data is not pre-specified.")
    design = c2.radio("Study design", list(DESIGNS), key=K + "design",
                      help="cohort: cases sampled together; case-control: events and non-events sampled "
                           "separately (stratified resampling).")
    method = c3.radio("Interval", ["wilson", "clopper_pearson"], key=K + "method",
                      format_func=lambda m: "Wilson score" if m == "wilson" else "Clopper–Pearson")
    n_rep = c4.number_input("Bootstrap replicates", min_value=200, max_value=20_000, value=2000, step=200,
                            key=K + "reps")
    seed = c4.number_input("Seed", min_value=0, value=0, step=1, key=K + "seed")
    threshold = None if which == "recommended" else float(curve.thresholds[act.point])

    bar = st.progress(0.0, text="Exact bootstrap…")

    def progress(done, total):
        bar.progress(min(done / max(total, 1), 1.0), text=f"Exact bootstrap: {done:,} of {total:,} replicates")

    try:
        key = (ds.fingerprint, dumps_policy(policy), threshold, design, method, 0.95, int(n_rep), int(seed))
        ev = _evidence(key, ds, policy, progress)
    except (InputError, ValueError) as exc:
        bar.empty()
        st.error(str(exc))
        return
    bar.empty()
    d = ev.to_dict()

    if ev.threshold is None:
        st.error("The policy chooses no point on these data (see Decide); nothing to back with evidence.")
        return
    st.markdown(f"**Threshold {fmt.threshold(ev.threshold)}** ({'derived from these data by the policy' if ev.threshold_origin == 'derived' else 'pre-specified'}); "
                f"{fmt.count(ev.n_events)} events; {ev.n_replicates:,} bootstrap replicates, seed {ev.seed}, "
                f"design {ev.design}.")
    if ev.few_events:
        st.warning(ev.few_events)
    if ev.events_for_recall_0_05:
        st.caption(f"A recall interval of ±0.05 at this recall would need about "
                   f"{ev.events_for_recall_0_05:,} events (Wilson width).")

    st.subheader("Every number at the point, with its interval")
    st.dataframe(_interval_table(ev), hide_index=True)

    left, right = st.columns(2)
    k = curve.index_at(ev.threshold)
    with left:
        st.plotly_chart(charts.band_figure(curve, d["bands"]["pr"], k, which="pr"), key=K + "pr_band",
                        config={"displaylogo": False})
    with right:
        st.plotly_chart(charts.band_figure(curve, d["bands"]["roc"], k, which="roc"), key=K + "roc_band",
                        config={"displaylogo": False})

    _stability_block(d["stability"])
    _optimism_block(d["optimism"])
    with st.expander("How these numbers were computed"):
        for s in ev.statements:
            st.markdown(f"- {s}")

    _subgroups_block(ds, policy, ev, key)
    _clusters_block(ds, ev, key)
    _calibration_block(ds)


def _subgroups_block(ds, policy, ev, key) -> None:
    from core.groups import subgroup_report

    st.header("Subgroups and fairness")
    if ds.kind == "counts" and not ds.groups:
        st.info("This count table carries no group columns; add them to the GROUP BY to see subgroups.")
        return
    if not ds.groups:
        st.info("No group column is mapped (Scores page): map site, age band or segment to check subgroups.")
        return
    cols = list(ds.groups)
    inter = []
    if len(cols) >= 2:
        if st.checkbox(f"Also the intersection {cols[0]} × {cols[1]}", key=K + "inter"):
            inter = [(cols[0], cols[1])]
    adjust = st.radio("Multiplicity", ["holm", "none"], horizontal=True, key=K + "adjust",
                      format_func=lambda a: "Holm-adjusted verdicts" if a == "holm" else
                      "No adjustment (verdicts labelled exploratory)")
    bar = st.progress(0.0, text="Subgroups…")
    rep = _GROUPS.get_or_compute(
        key + ("groups", tuple(inter), adjust),
        lambda: subgroup_report(ds, ev.threshold, policy=policy, intersections=inter, adjust=adjust,
                                n_replicates=ev.n_replicates, seed=ev.seed,
                                progress=lambda d_, t_: bar.progress(min(d_ / max(t_, 1), 1.0),
                                                                      text=f"Subgroups: {d_:,} of {t_:,}")))
    bar.empty()
    t = rep.table()
    show = pd.DataFrame({
        "Group": [f"{c}: {g}" for c, g in zip(t["column"], t["group"])],
        "Cases": [fmt.count(v) for v in t["cases"]], "Events": [fmt.count(v) for v in t["events"]],
        "Prevalence": [fmt.pct(v, 2) for v in t["prevalence"]],
        **{name: [f"{fmt.pct(v)} ({fmt.pct(lo)}–{fmt.pct(hi)})" for v, lo, hi in
                  zip(t[m], t[f"{m}_low"], t[f"{m}_high"])]
           for m, name in (("precision", "Precision"), ("recall", "Recall"), ("specificity", "Specificity"),
                           ("flag_rate", "Flag rate"))},
        "Recall vs rest": list(t["recall_verdict"]),
    })
    st.dataframe(show, hide_index=True)
    overall = ds.curve().at(ev.threshold).metrics["recall"]
    st.plotly_chart(charts.subgroup_figure(t, "recall", overall=overall), key=K + "groups_chart",
                    config={"displaylogo": False})
    if rep.fairness is not None:
        f = rep.fairness
        st.subheader(f"Fairness criterion: {f.label} — {f.verdict}")
    for line in rep.statements:
        st.markdown(f"- {line}")


def _clusters_block(ds, ev, key) -> None:
    from core.clusters import cluster_summary

    if ds.kind != "rows" or ds.cluster is None:
        return
    st.header("Repeated cases")
    cs = _CLUSTERS.get_or_compute(key + ("clusters",), lambda: cluster_summary(
        ds, ev.threshold, n_replicates=ev.n_replicates, seed=ev.seed))
    d = cs.to_dict()
    c = st.columns(4)
    c[0].metric("Distinct clusters", fmt.count(d["n_clusters"]))
    c[1].metric("Clusters flagged", fmt.count(d["clusters_flagged"]))
    c[2].metric("Clusters with an event caught", f"{fmt.count(d['event_clusters_caught'])} of "
                f"{fmt.count(d['event_clusters'])}")
    c[3].metric("Design effect", fmt.num(d["design_effect"], 2) if d.get("design_effect") is not None else "—",
                help="Variance of the clustered estimate over that of independent cases (Kish).")
    for line in d["statements"]:
        st.markdown(f"- {line}")


def _calibration_block(ds) -> None:
    from core.calibration import calibration_report

    st.header("Calibration")
    rep = _CALIBRATION.get_or_compute((ds.fingerprint, "calibration"), lambda: calibration_report(ds))
    d = rep.to_dict()
    if not d["available"]:
        st.info(d["reason"])
        return
    o = d["overall"]
    fit = o["fit"]
    verdict = "look calibrated" if d["looks_calibrated"] else "do not look calibrated"
    st.markdown(f"**These scores {verdict}** by the stated criterion: {d['criterion']}")
    c = st.columns(5)
    c[0].metric("Calibration slope", f"{fmt.num(fit['slope'], 2)}",
                help=f"95 % interval {fmt.num(fit['slope_low'], 2)} to {fmt.num(fit['slope_high'], 2)}")
    c[1].metric("Intercept (in the large)", f"{fmt.num(fit['intercept'], 2)}",
                help=f"95 % interval {fmt.num(fit['intercept_low'], 2)} to {fmt.num(fit['intercept_high'], 2)}")
    c[2].metric("Observed / expected", fmt.num(o["oe_ratio"], 2),
                help=f"95 % interval {fmt.num(o['oe_low'], 2)} to {fmt.num(o['oe_high'], 2)}")
    c[3].metric("Brier score", fmt.num(o["brier"], 4), help=f"Predicting the prevalence: {fmt.num(o['brier_prevalence'], 4)}")
    c[4].metric("Expected calibration error", fmt.num(o["ece"], 4))
    st.plotly_chart(charts.reliability_figure(o["reliability"]), key=K + "reliability",
                    config={"displaylogo": False})
    if d["groups"]:
        st.dataframe(pd.DataFrame([{
            "Group": f"{g['column']}: {g['group']}", "Events": fmt.count(g["events"]),
            "Observed / expected": fmt.num(g["oe_ratio"], 2), "Slope": fmt.num(g["fit"]["slope"], 2),
            "Intercept": fmt.num(g["fit"]["intercept"], 2), "Verdict": g["verdict"]} for g in d["groups"]]),
            hide_index=True)
    for line in d["statements"][1:]:
        st.markdown(f"- {line}")


render()
