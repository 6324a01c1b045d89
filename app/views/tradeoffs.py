"""Trade-offs: the curves, and the operating point moved by slider, number or click."""

from __future__ import annotations

import pandas as pd
import streamlit as st

from app import charts, state
from app import format as fmt
from app.widgets import caution_line, few_events_note, metric_tiles
from core.metrics import METRIC_LABELS
from core.summaries import class_histogram

SLIDER = "tradeoffs_slider"
ENTRY = "tradeoffs_threshold"


def _on_slider() -> None:
    st.session_state["tradeoffs_last_entry"] = None
    state.set_point(st.session_state[SLIDER])


def _on_entry() -> None:
    """Go to the typed threshold, then clear the box (it is an entry, not a second display)."""
    value = st.session_state[ENTRY]
    if value is not None:
        state.set_point(state.dataset().curve().index_at(float(value)))
        st.session_state["tradeoffs_last_entry"] = float(value)
        st.session_state[ENTRY] = None


def _on_chart_select(key: str) -> None:
    """A click on a PR or ROC point moves the operating point (each selection handled once)."""
    sel = st.session_state.get(key)
    points = (sel or {}).get("selection", {}).get("points", []) if sel else []
    if not points:
        return
    signature = (key, tuple(sorted(int(p.get("customdata", p.get("point_index", -1)))
                                   if not isinstance(p.get("customdata"), list)
                                   else int(p["customdata"][0]) for p in points)))
    if signature == st.session_state.get(state.LAST_SELECTION):
        return
    st.session_state[state.LAST_SELECTION] = signature
    cd = points[0].get("customdata")
    if isinstance(cd, list):
        cd = cd[0]
    if cd is not None:
        st.session_state["tradeoffs_last_entry"] = None
        state.set_point(int(cd))


@st.cache_resource(max_entries=16)
def _thin(fingerprint: str, space: str, _curve):
    """The drawn points of a curve, computed once per dataset (markers are separate traces)."""
    idx = charts.thin(_curve, space)
    idx.setflags(write=False)
    return idx


@st.cache_resource(max_entries=8)
def _histogram(fingerprint: str, _dataset):
    return class_histogram(_dataset, bins=60)


def point_table(curve, k: int, prevalence=None) -> dict[str, float]:
    return curve.point(k, prevalence=prevalence).metrics


def render() -> None:
    act = state.active()
    ds, k = act.dataset, act.point
    curve = ds.curve()
    score_label = ds.mapping.score
    st.title("Trade-offs")
    caution_line()
    few_events_note(ds)

    # keep the widgets in step with the shared point before they are drawn; write a widget
    # only when the point was moved elsewhere, so fast keyboard input is never pushed back
    if st.session_state.get(SLIDER) != k:
        st.session_state[SLIDER] = k

    c1, c2 = st.columns([3, 1])
    with c1:
        st.slider("Operating point (curve point, strictest on the left)", 0, curve.n_points - 1,
                  key=SLIDER, on_change=_on_slider,
                  help="Each step is one distinct score: cases with tied scores move together.")
    with c2:
        st.number_input(f"Go to threshold ({score_label})", key=ENTRY, on_change=_on_entry, value=None,
                        format="%.10g", step=None, placeholder="e.g. 0.25, then Enter",
                        help="Any real value in score units: the point moves to the exact counts "
                             "at that threshold.")
    typed = st.session_state.get("tradeoffs_last_entry")
    p = curve.point(k, threshold=typed if typed is not None and curve.index_at(typed) == k else None)
    direction = "≥" if curve.higher_is_riskier else "≤"
    st.markdown(
        (f"You entered {fmt.threshold(p.threshold)}. " if p.threshold != p.point_threshold else "")
        + f"**Threshold {fmt.threshold(p.point_threshold)}** — a case is flagged when {score_label} "
        f"{direction} threshold. Every threshold in {fmt.interval(p.interval_low, p.interval_high, p.closed)} "
        f"gives these counts. Point {k:,} of {curve.n_points - 1:,}.")

    metric_tiles(p)
    none = curve.point(0)
    a1, a2 = st.columns(2)
    a1.metric("Accuracy at this point", fmt.pct(p.metrics["accuracy"]),
              help=METRIC_LABELS["accuracy"][1])
    a2.metric("Accuracy of flagging none", fmt.pct(none.metrics["accuracy"]),
              help="What flagging nobody scores: the accuracy trap when events are rare.")
    st.caption("Accuracy misleads when events are rare: flagging nobody catches no event yet scores "
               f"{fmt.pct(none.metrics['accuracy'])} here.")

    st.subheader("Confusion matrix at this point")
    cm = pd.DataFrame(
        {"Flagged": [fmt.count(p.tp), fmt.count(p.fp)], "Not flagged": [fmt.count(p.fn), fmt.count(p.tn)],
         "Rate if flagged": [f"recall {fmt.pct(p.metrics['recall'])}", f"FPR {fmt.pct(p.metrics['fpr'])}"],
         "Rate if not flagged": [f"miss rate {fmt.pct(1 - p.metrics['recall'])}",
                                 f"specificity {fmt.pct(p.metrics['specificity'])}"]},
        index=["Events", "Non-events"])
    st.table(cm)

    pinned = st.session_state.get(state.PINNED)
    b1, b2 = st.columns([1, 3])
    if b1.button("Pin this point as A", key="pin_a"):
        st.session_state[state.PINNED] = k
        pinned = k
    if pinned is not None and b2.button("Clear pinned point", key="unpin"):
        st.session_state[state.PINNED] = None
        pinned = None

    left, right = st.columns(2)
    with left:
        st.plotly_chart(charts.pr_figure(curve, k, pinned=pinned, idx=_thin(ds.fingerprint, "pr", curve)), key="pr_chart", on_select=_on_pr,
                        selection_mode="points", config={"displaylogo": False})
    with right:
        st.plotly_chart(charts.roc_figure(curve, k, pinned=pinned, idx=_thin(ds.fingerprint, "roc", curve)), key="roc_chart", on_select=_on_roc,
                        selection_mode="points", config={"displaylogo": False})
    st.plotly_chart(charts.metrics_figure(curve, k, score_label=score_label,
                                                       idx=_thin(ds.fingerprint, "roc", curve)), key="metrics_chart",
                    config={"displaylogo": False})
    log_counts = st.toggle("Log scale for counts (events are rare)", value=True, key="dist_log")
    st.plotly_chart(charts.distribution_figure(_histogram(ds.fingerprint, ds), p.point_threshold,
                                               log_counts=log_counts, score_label=score_label),
                    key="dist_chart", config={"displaylogo": False})

    if pinned is not None:
        st.subheader("Pinned point A against the live point B")
        a = curve.point(pinned)
        rows = ["threshold", "flagged", "tp", "fp", "fn", "precision", "recall", "specificity",
                "flagged_per_1000", "nne"]

        def col(q):
            return [fmt.threshold(q.point_threshold), fmt.count(q.tp + q.fp), fmt.count(q.tp), fmt.count(q.fp),
                    fmt.count(q.fn), fmt.pct(q.metrics["precision"]), fmt.pct(q.metrics["recall"]),
                    fmt.pct(q.metrics["specificity"]), fmt.num(q.metrics["flagged_per_1000"], 1),
                    fmt.num(q.metrics["nne"], 1)]

        st.table(pd.DataFrame({"A (pinned)": col(a), "B (live)": col(p)}, index=rows))


def _on_pr() -> None:
    _on_chart_select("pr_chart")


def _on_roc() -> None:
    _on_chart_select("roc_chart")


render()
