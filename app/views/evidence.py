"""Evidence: intervals at the point, bootstrap bands, threshold stability, optimism."""

from __future__ import annotations

import pandas as pd
import streamlit as st

from app import charts, state
from app.cache import BoundedCache
from app import format as fmt
from app.widgets import caution_line
from core.errors import InputError
from core.policy import Policy, PolicyError, dumps_policy
from core.uncertainty import DESIGNS, evidence

K = "evidence_"
RATES = {"recall", "specificity", "precision", "npv", "flag_rate"}


_CACHE = BoundedCache(max_entries=8)


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


render()
