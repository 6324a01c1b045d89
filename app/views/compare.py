"""Compare: two model versions on the same cases -- did the change help, or does it just flag less?"""

from __future__ import annotations

import numpy as np
import pandas as pd
import streamlit as st

from app import charts, comparison, state
from app import format as fmt
from app.widgets import caution_line, few_events_note
from core import cautions
from core.bootstrap import DEFAULT_REPLICATES
from core.compare import POINT_SETS
from core.compare_memo import (
    DIFFERENCE_HEADER,
    DISAGREEMENT_HEADER,
    compare_markdown,
    difference_rows,
    disagreement_rows,
)
from core.compare_record import build_compare_document, dumps_compare_document
from core.errors import InputError
from core.policy import Policy, PolicyError

K = "compare_"
PDF = K + "pdf"  # (document sha256, PDF bytes) of the last comparison memo built


def _build_pdf(doc: dict) -> None:
    from core.compare_memo import compare_pdf

    st.session_state[PDF] = (doc["integrity"]["sha256"], compare_pdf(doc))


def _policy(ds) -> Policy | None:
    """The Decide page's policy for these data, or None (then no same-policy comparison)."""
    ss = st.session_state
    d = ss.get(state.POLICY)
    if d is None or ss.get(state.POLICY_FP) != ds.fingerprint:
        return None
    try:
        return Policy.from_dict(d)
    except PolicyError as exc:
        st.error(f"The policy has problems (fix them on the Decide page): {exc}")
        return None


def _load_example() -> None:
    st.session_state[state.SOURCE] = "upload"  # not one of the Scores page's demos
    state.set_dataset(comparison.example_dataset(), label=comparison.EXAMPLE_LABEL)


def _one_score(ds) -> None:
    if ds.kind != "rows":
        st.info("These data are a count table, which holds one score only: two model versions can "
                "only be compared on one row per case.")
    else:
        st.info(f"Only one score is mapped ('{ds.mapping.score}'). To compare model versions, map "
                "a second score column of the same rows: on the Scores page upload the file and "
                "choose it under **Other score columns to compare** (with its direction), or on "
                "the command line give `--score` twice to `fulcrum compare`.")
    st.button("Load the two-model example (invented data)", key=K + "example", on_click=_load_example,
              help="Corvane Health's current and retrained deterioration score on the same 40,000 "
                   "invented encounters (sample_data/model_versions.csv.gz).")


def _interval_caption(col, d, conf: float) -> None:
    if d.low is None or d.high is None:
        col.caption("No interval yet: run the paired bootstrap below.")
    else:
        col.caption(f"{100 * conf:g} % interval {_signed(d, d.low)} to {_signed(d, d.high)} "
                    f"({d.method.split(',')[0]})")


def _signed(d, x) -> str:
    if d.unit == "proportion" and d.metric not in ("average_precision",):
        return f"{100 * x:+.1f} points"
    if d.unit == "per 1,000 flagged":
        return f"{x:+,.1f}"
    if d.metric in ("roc_auc", "average_precision"):
        return f"{x:+.3f}"
    return f"{x:+.4g}"


def _thresholds_form(ds) -> dict | None:
    """Each score's given threshold (e.g. the one in production), when the user asks for it."""
    if not st.checkbox("Also compare at each score's given threshold (e.g. the one in production)",
                       key=K + "use_thresholds"):
        return None
    names = [ds.mapping.score, *ds.extra_scores]
    arrays = {ds.mapping.score: ds.y_score, **ds.extra_scores}
    hir = {ds.mapping.score: ds.higher_is_riskier, **ds.extra_higher_is_riskier}
    out = {}
    for col, name in zip(st.columns(len(names)), names):
        # a start that flags about as many cases as there are events
        q = 1.0 - ds.prevalence if hir[name] else ds.prevalence
        start = float(f"{float(np.quantile(arrays[name], q)):.4g}")
        op = "≥" if hir[name] else "≤"
        out[name] = float(col.number_input(f"Flag '{name}' when score {op}", value=start,
                                           format="%.6g", key=K + "t_" + name))
    return out


def _tiles(comp, pair) -> None:
    items = [("ROC AUC difference", pair.roc_auc_difference),
             ("Average precision difference", pair.average_precision),
             ("Events per 1,000 flagged, same workload", pair.at["workload"]["events_per_1000_flagged"]),
             ("Recall difference, same workload", pair.at["workload"]["recall"])]
    if "recall" in pair.at:
        items.append(("Precision difference, same recall", pair.at["recall"]["precision"]))
    if "cost_per_case" in pair.at.get("policy", {}):
        items.append(("Expected cost per case, same policy", pair.at["policy"]["cost_per_case"]))
    cols = [c for _ in range(0, len(items), 3) for c in st.columns(3)]  # rows of three: room to read
    for col, (label, d) in zip(cols, items):
        col.metric(label, _signed(d, d.difference), border=True,
                   help=f"{d.label}: '{pair.candidate}' {_plain(d, d.candidate)} against "
                        f"'{pair.reference}' {_plain(d, d.reference)} (candidate minus reference).")
        _interval_caption(col, d, comp.confidence)


def _plain(d, x) -> str:
    if x is None:
        return fmt.DASH
    if d.metric in ("roc_auc", "average_precision"):
        return f"{x:.3f}"
    if d.unit == "proportion":
        return fmt.pct(x)
    return fmt.num(x, 1) if d.unit == "per 1,000 flagged" else f"{x:.4g}"


def _points_table(comp) -> pd.DataFrame:
    rows = []
    for kind, ps in comp.point_sets.items():
        target = "" if ps.target is None else (f": {fmt.pct(ps.target, 2)} flagged" if kind == "workload"
                                              else f": recall {fmt.pct(ps.target)}")
        for name, p in ps.points.items():
            if p is None:
                rows.append({"Comparison": ps.label + target, "Score": name, "Threshold": "no point meets "
                             "every rule", "Flag rate": fmt.DASH, "Recall": fmt.DASH,
                             "Precision": fmt.DASH, "Accuracy": fmt.DASH, "Cost per case": fmt.DASH})
                continue
            op = "≥" if p.higher_is_riskier else "≤"
            rows.append({"Comparison": ps.label + target, "Score": name,
                         "Threshold": f"{op} {fmt.threshold(p.threshold)}",
                         "Flag rate": fmt.pct(p.flag_rate, 2), "Recall": fmt.pct(p.recall),
                         "Precision": fmt.pct(p.precision), "Accuracy": fmt.pct(p.accuracy, 2),
                         "Cost per case": fmt.DASH if p.cost_per_case is None
                         else fmt.num(p.cost_per_case, 4)})
    return pd.DataFrame(rows)


def _accuracy_table(comp) -> pd.DataFrame:
    return pd.DataFrame([{"Score": r["model"],
                          "Threshold": fmt.DASH if r["threshold"] is None else fmt.threshold(r["threshold"]),
                          "Accuracy": fmt.pct(r["accuracy"], 2), "Flag rate": fmt.pct(r["flag_rate"], 2),
                          "Recall": fmt.pct(r["recall"]), "Precision": fmt.pct(r["precision"])}
                         for r in comp.accuracy_table])


def _bootstrap_section(ds, policy, opts: dict) -> None:
    st.subheader("Paired bootstrap")
    st.caption("Cases are resampled jointly for every score (events and non-events separately), so "
               "the intervals of average precision and of the operating-point differences account "
               "for the two scores being measured on the same cases.")
    c1, c2, c3 = st.columns([1, 1, 2])
    n = int(c1.number_input("Replicates", min_value=50, max_value=20000, value=DEFAULT_REPLICATES,
                            step=100, key=K + "reps"))
    seed = int(c2.number_input("Seed", min_value=0, value=0, step=1, key=K + "seed"))
    if comparison.cached(ds, policy, n_replicates=n, seed=seed, **opts) is not None:
        c3.success(f"Intervals from {n:,} paired replicates (seed {seed}) are shown above.")
        return
    if c3.button("Run the paired bootstrap", key=K + "run_boot", type="primary"):
        bar = st.progress(0.0, text="Paired bootstrap…")

        def progress(done, total):
            bar.progress(min(done / max(total, 1), 1.0),
                         text=f"Paired bootstrap: {done:,} of {total:,} replicates")

        try:
            comparison.comparison(ds, policy, bootstrap=True, n_replicates=n, seed=seed,
                                  progress=progress, **opts)
        except InputError as exc:
            st.error(str(exc))
            return
        bar.empty()
        st.rerun()


def render() -> None:
    ss = st.session_state
    st.title("Compare")
    caution_line()
    ds = state.dataset()
    if ds.kind != "rows" or not ds.extra_scores:
        _one_score(ds)
        return
    policy = _policy(ds)
    few_events_note(ds)
    with st.expander("Settings: policy and workload"):
        if policy is None:
            st.caption("No policy is set for these data on the Decide page: the scores are compared "
                       "at the same workload and the same recall. Set one there to compare each "
                       "score at its own threshold under it, with the expected-cost difference.")
        else:
            st.caption("The Decide page's policy is used: each score at its own threshold under it.")
        q_pct = st.number_input("Common workload: share of cases flagged, % (0: the reference's flag "
                                "rate at its own point, else the prevalence)", min_value=0.0,
                                max_value=100.0, value=0.0, step=0.1, key=K + "flag_rate")
        thresholds = _thresholds_form(ds)
    flag_rate = None if q_pct <= 0 else q_pct / 100.0
    n = int(ss.get(K + "reps", DEFAULT_REPLICATES))
    seed = int(ss.get(K + "seed", 0))
    opts = {"flag_rate": flag_rate, "thresholds": thresholds}
    try:
        comp = comparison.cached(ds, policy, n_replicates=n, seed=seed, **opts)
        if comp is None:
            comp = comparison.comparison(ds, policy, bootstrap=False, **opts)
    except InputError as exc:
        st.error(str(exc))
        st.caption("Set each score's direction on the Scores page (lower score = higher risk).")
        return
    candidates = [m for m in comp.models if m != comp.reference]
    cand = candidates[0]
    if len(candidates) > 1:
        cand = st.selectbox("Candidate", candidates, key=K + "candidate")
    pair = comp.pair(cand)
    dirs = {m: ("higher is riskier" if comp.summaries[m].higher_is_riskier else "lower is riskier")
            for m in comp.models}
    st.markdown(f"**Reference (current):** `{comp.reference}` ({dirs[comp.reference]}) · "
                f"**Candidate:** `{cand}` ({dirs[cand]}) · {fmt.count(comp.data['n_rows'])} cases, "
                f"{fmt.count(comp.data['n_events'])} events")
    for w in comp.warnings:
        if "paired bootstrap was not run" not in w:
            st.warning(w)
    st.info(pair.verdict_text, icon="⚖")
    _tiles(comp, pair)

    kinds = [k for k in POINT_SETS if k in comp.point_sets]
    shown = st.radio("Mark each score's point at", kinds, index=kinds.index(comp.own_points),
                     format_func=lambda k: POINT_SETS[k], horizontal=True, key=K + "points")
    ps = comp.point_sets[shown]
    pts = {m: (None if p is None else p.index) for m, p in ps.points.items()}
    curves = {m: comp.curves[m] for m in (comp.reference, cand)}
    c1, c2 = st.columns(2)
    c1.plotly_chart(charts.compare_roc_figure(curves, pts, point_label=POINT_SETS[shown]),
                    key=K + "roc", config={"displaylogo": False})
    c2.plotly_chart(charts.compare_pr_figure(curves, pts, point_label=POINT_SETS[shown]),
                    key=K + "pr", config={"displaylogo": False})
    st.caption("Curves are drawn from at most 2,000 points each; every number on this page comes "
               "from the exact curves.")

    st.subheader("The fair comparisons at an operating point")
    st.dataframe(_points_table(comp), hide_index=True, key=K + "points_table")
    st.subheader("Differences with their intervals")
    d = pair.to_dict()
    st.dataframe(pd.DataFrame(difference_rows(d), columns=DIFFERENCE_HEADER), hide_index=True,
                 key=K + "diff_table")
    st.subheader("Case by case: who catches what")
    dis_kinds = [k for k in POINT_SETS if k in pair.disagreement]
    dk = st.radio("At", dis_kinds, index=dis_kinds.index(comp.own_points),
                  format_func=lambda k: POINT_SETS[k], horizontal=True, key=K + "dis_kind")
    st.caption(pair.disagreement[dk].text)
    st.dataframe(pd.DataFrame(disagreement_rows(d["disagreement"][dk]), columns=DISAGREEMENT_HEADER),
                 hide_index=True, key=K + "dis_table")
    st.subheader("The accuracy trap")
    st.caption(f"Accuracy beside flag rate and recall, at {POINT_SETS[comp.own_points]}.")
    st.dataframe(_accuracy_table(comp), hide_index=True, key=K + "acc_table")
    if pair.accuracy_trap_text:
        st.warning(pair.accuracy_trap_text)
    st.caption(cautions.ACCURACY_TRAP)

    _bootstrap_section(ds, policy, opts)

    st.subheader("Export")
    created = ss.setdefault(K + "created", {})
    ck = comparison.key(ds, policy, bootstrap=comp.bootstrap is not None,
                        n_replicates=n, seed=seed, **opts)
    doc = build_compare_document(
        comp, ds, policy=policy, created_utc=created.get(ck),
        settings={"seed": seed if comp.bootstrap else None,
                  "replicates": n if comp.bootstrap else 0, "confidence": comp.confidence,
                  "flag_rate": flag_rate, "recall": None, "thresholds": thresholds,
                  "calibrated": False})
    created[ck] = doc["created_utc"]
    e1, e2, e3 = st.columns(3)
    e1.download_button("Comparison (JSON)", dumps_compare_document(doc), file_name="comparison.json",
                       mime="application/json", key=K + "dl_json", on_click="ignore")
    e2.download_button("Comparison memo (Markdown)", compare_markdown(doc),
                       file_name="comparison_memo.md", mime="text/markdown", key=K + "dl_md", on_click="ignore")
    sha = doc["integrity"]["sha256"]
    built = ss.get(PDF)
    if built is not None and built[0] == sha:
        e3.download_button("Comparison memo (PDF)", built[1], file_name="comparison_memo.pdf",
                           mime="application/pdf", key=K + "dl_pdf", type="primary", on_click="ignore")
    else:
        e3.button("Build the PDF memo", key=K + "build_pdf", on_click=_build_pdf, args=(doc,),
                  help="Lays out the comparison memo (a second or so).")
    st.caption("The Memo page adds this comparison to the threshold memo while these data are "
               "active.")
    st.info(cautions.FULL, icon="⚠")
    if policy is not None:
        st.caption(cautions.LABEL_SHIFT)


render()
