"""Scores: choose the demo or upload a file, map its columns, see the intake's checks."""

from __future__ import annotations

import streamlit as st

from app import charts, state
from app import format as fmt
from app.widgets import caution_line, few_events_note
from core.errors import InputError
from core.summaries import class_histogram

UPLOAD = "upload"
LOCAL = "local"  # a large file on this machine, read in place by the reduction
NONE = "(none)"
APPLIED = "scores_applied"  # token of the upload or local file whose data are in use
DECIMAL_CHOICES = (None, 1, 2, 3, 4, 5, 6)


def _demo_options() -> dict[str, str]:
    from core.intake import DEMOS

    return {name: demo.title for name, demo in DEMOS.items()}


@st.cache_resource(max_entries=8)
def _histogram(fingerprint: str, _dataset):
    return class_histogram(_dataset, bins=60)


def _read_upload(upload, options: dict):
    """Read the uploaded bytes (in memory) once per file and read options."""
    from core.intake import read_table

    key = (upload.file_id, tuple(sorted(options.items())))
    cached = st.session_state.get("scores_raw")
    if cached is not None and cached[0] == key:
        return cached[1]
    raw = read_table(upload.getvalue(), file_name=upload.name, **options)
    st.session_state["scores_raw"] = (key, raw)
    return raw


def _optional(label: str, columns: list[str], key: str, default=None, help=None):
    opts = [NONE] + columns
    index = opts.index(default) if default in opts else 0
    value = st.selectbox(label, opts, index=index, key=key, help=help)
    return None if value == NONE else value


def _extra_scores_form(cols: list[str]) -> tuple[tuple, tuple]:
    """Other score columns of the same rows (compared with the score on the Compare page)."""
    with st.expander("Other score columns to compare (e.g. a retrained model on the same cases)"):
        extra = st.multiselect("Other score columns to compare", cols, key="map_extra_scores",
                               help="Each is checked like the score and compared with it on the "
                                    "Compare page; the score above is the reference (current model).")
        lower = st.multiselect("Of these, lower score = higher risk", cols, key="map_extra_lower",
                               help="Flag when score ≤ threshold for these columns.")
    return tuple(extra), tuple(lower)


def _mapping_form(raw):
    """Every mapping field the intake offers; returns a core Mapping or None."""
    from core.dataset import Mapping
    from core.intake import label_values, suggest_mapping

    cols = raw.columns
    guess = suggest_mapping(raw)
    kind = st.radio("What is in the file?", ["rows", "counts"], horizontal=True, key="map_kind",
                    format_func=lambda k: "One row per case" if k == "rows" else
                    "A count table (score, events, non-events)")
    c1, c2, c3 = st.columns(3)
    score = c1.selectbox("Score column", cols, index=cols.index(guess.score) if guess.score in cols else 0,
                         key="map_score")
    lower = c1.checkbox("Lower score = higher risk", key="map_lower", value=not guess.higher_is_riskier)
    if kind == "counts":
        events = c2.selectbox("Events column", cols, key="map_events")
        non_events = c3.selectbox("Non-events column", cols, key="map_non_events")
        event_cost = _optional("Summed miss cost of the events (optional)", cols, "map_event_cost")
        return Mapping(score=score, kind="counts", events=events, non_events=non_events,
                       event_cost=event_cost, higher_is_riskier=not lower)
    label_default = guess.label if guess.label in cols else cols[min(1, len(cols) - 1)]
    label = c2.selectbox("Label column (the outcome)", cols, index=cols.index(label_default), key="map_label")
    values = label_values(raw, label)
    present = values[~values["missing"]]
    value_names = [str(v) for v in present["text"].tolist()]
    counts = dict(zip(value_names, present["rows"].tolist()))
    pos_default = str(guess.positive_label) if guess.label == label and guess.positive_label is not None else None
    pos_index = value_names.index(pos_default) if pos_default in value_names else max(len(value_names) - 1, 0)
    positive = c3.selectbox("Which value is the event?", value_names, index=pos_index, key="map_positive",
                            format_func=lambda v: f"{v} ({counts[v]:,} rows)",
                            help="The rare outcome the score should flag.") if value_names else None
    if values["missing"].any():
        c3.caption(f"{int(values.loc[values['missing'], 'rows'].sum()):,} rows have no label: loading "
                   "will name them.")
    extra, extra_lower = _extra_scores_form(cols)
    with st.expander("Optional columns: weights, groups, repeated cases, times, costs"):
        o1, o2 = st.columns(2)
        weight = _optional("Weight column", cols, "map_weight", guess.weight)
        weight_kind = None
        if weight:
            weight_kind = o1.radio("Weight kind", ["frequency", "sampling"], key="map_weight_kind",
                                   help="frequency: a row stands for w identical cases; sampling: "
                                        "inverse selection probability.")
        groups = st.multiselect("Group columns (subgroup checks)", cols, default=[g for g in guess.groups if g in cols],
                                key="map_groups")
        cluster = _optional("Cluster column (patient or customer id)", cols, "map_cluster", guess.cluster)
        score_time = _optional("Score-time column", cols, "map_score_time", guess.score_time)
        outcome_time = _optional("Outcome-time column", cols, "map_outcome_time", guess.outcome_time)
        horizon = None
        if outcome_time or score_time:
            horizon = o2.number_input("Outcome horizon (days)", min_value=0.0, value=float(
                guess.outcome_horizon_days or 30.0), key="map_horizon")
        case_cost = _optional("Case-cost column (what a missed event costs)", cols, "map_case_cost",
                              guess.case_cost)
        drop_missing = st.checkbox("Drop rows with a missing score (the count is reported and goes into "
                                   "the memo)", key="map_drop_missing")
    return Mapping(score=score, label=label, positive_label=positive, weight=weight, weight_kind=weight_kind,
                   groups=tuple(groups), cluster=cluster, score_time=score_time, outcome_time=outcome_time,
                   outcome_horizon_days=horizon, case_cost=case_cost, higher_is_riskier=not lower,
                   drop_missing_scores=drop_missing, extra_scores=extra,
                   extra_lower_is_riskier=extra_lower)


def _upload_section() -> tuple | None:
    """The uploaded file's form; returns the upload's token (None before a file is read)."""
    from core.intake import load_dataset

    upload = st.file_uploader("Validation scores: CSV, TSV, Parquet or Excel (kept in memory only)",
                              type=["csv", "tsv", "txt", "gz", "parquet", "pq", "xlsx", "xlsm"],
                              key="scores_upload")
    if upload is None:
        st.info("Upload a file to map its columns. Nothing you upload is written to disk.")
        return None
    with st.expander("Read options (detected automatically; override if the file needs it)"):
        r1, r2, r3 = st.columns(3)
        delim = r1.selectbox("Delimiter", ["detect", ",", ";", "tab", "|"], key="read_delim")
        dec = r2.selectbox("Decimal mark", ["detect", ".", ","], key="read_decimal")
        sheet = r3.text_input("Excel sheet (empty: the first)", key="read_sheet")
    options = {}
    if delim != "detect":
        options["delimiter"] = "\t" if delim == "tab" else delim
    if dec != "detect":
        options["decimal"] = dec
    if sheet.strip():
        options["sheet"] = sheet.strip()
    try:
        raw = _read_upload(upload, options)
    except InputError as exc:
        st.error(str(exc))
        return None
    token = (UPLOAD, getattr(upload, "file_id", None) or upload.name)
    info = raw.info
    st.caption(f"Read {fmt.count(raw.n_rows)} rows × {len(raw.columns)} columns as {info.format}"
               + (f", delimiter {info.delimiter!r}, decimal {info.decimal!r}" if info.delimiter else "")
               + (f", sheet {info.sheet!r}" if info.sheet else "") + ".")
    for note in info.notes:
        st.caption(note)
    try:
        mapping = _mapping_form(raw)
    except InputError as exc:
        st.error(str(exc))
        return token
    if st.button("Use this mapping", type="primary", key="map_apply"):
        try:
            ds = load_dataset(raw, mapping)
        except InputError as exc:
            st.error(str(exc))
            return token
        st.session_state[state.SOURCE] = UPLOAD
        st.session_state[APPLIED] = token
        state.set_dataset(ds, label=upload.name)
        st.success(f"Loaded {upload.name}: {fmt.count(ds.n_rows)} cases, {fmt.count(ds.n_events)} events.")
    return token


def _local_section() -> tuple | None:
    """A large Parquet / CSV file on this machine: counted in place by DuckDB, never copied.

    Returns the file's token (None before a path is given).
    """
    from core.dataset import Mapping
    from core.reduce import file_columns, reduce_file

    st.caption("For files too large to upload: type the path of a Parquet or CSV file on this "
               "machine (the app runs on 127.0.0.1). DuckDB reads it where it is, within a memory "
               "limit (spilling, if at all, into a private temporary folder it deletes), and counts it "
               "into a count table; no row is copied or kept.")
    path = st.text_input("Path of the file on this machine", key="local_path",
                         placeholder="/data/validation_scores.parquet").strip()
    if not path:
        return None
    from pathlib import Path

    p = Path(path).expanduser()
    token = (LOCAL, str(p))
    try:
        cols = file_columns(p)
    except InputError as exc:
        st.error(str(exc))
        return token
    c1, c2, c3 = st.columns(3)
    score = c1.selectbox("Score column", cols, key="local_score")
    label = c2.selectbox("Label column", cols, index=min(1, len(cols) - 1), key="local_label")
    positive = c3.text_input("Event value (empty: 1 for 0/1 labels, true for true/false)",
                             key="local_positive").strip() or None
    c4, c5, c6 = st.columns(3)
    weight = c4.selectbox("Weight column", [NONE] + cols, key="local_weight")
    weight = None if weight == NONE else weight
    weight_kind = c5.selectbox("Weight kind", ["frequency", "sampling"], key="local_weight_kind",
                               disabled=weight is None)
    case_cost = c6.selectbox("Case cost column", [NONE] + cols, key="local_case_cost")
    groups = st.multiselect("Group columns", cols, key="local_groups")
    d1, d2 = st.columns(2)
    decimals = d1.selectbox("Scores kept", DECIMAL_CHOICES, key="local_decimals",
                            format_func=lambda d: "every distinct score (exact)" if d is None
                            else f"rounded to {d} decimal{'s' if d > 1 else ''} toward "
                                 "not flagged (exact on that grid)")
    lower = d2.checkbox("Lower score = higher risk", key="local_lower")
    if not st.button("Count this file", type="primary", key="local_apply"):
        return token
    bar = st.progress(0.0, text="Starting the reduction…")

    def progress(fraction, stage):
        bar.progress(min(max(float(fraction), 0.0), 1.0), text=f"{stage.capitalize()}… "
                                                                f"{float(fraction):.0%}")

    try:
        m = Mapping(score=score, label=label, positive_label=positive, weight=weight,
                    weight_kind=weight_kind if weight else None, groups=tuple(groups),
                    case_cost=None if case_cost == NONE else case_cost,
                    higher_is_riskier=not lower)
        ds = reduce_file(p, score=m.score, label=m.label, positive=m.positive_label,
                         weight=m.weight, weight_kind=m.weight_kind, case_cost=m.case_cost,
                         groups=m.groups, higher_is_riskier=m.higher_is_riskier,
                         decimals=decimals, progress=progress, default_positive=True)
    except InputError as exc:
        bar.empty()
        st.error(str(exc))
        return token
    bar.progress(1.0, text="Counted.")
    st.session_state[state.SOURCE] = LOCAL
    st.session_state[APPLIED] = token
    state.set_dataset(ds, label=p.name)
    st.success(f"Counted {p.name}: {fmt.count(ds.reduction.rows_read)} rows into "
               f"{fmt.count(ds.reduction.table_rows)} count-table rows.")
    st.caption(ds.reduction.statement())
    return token


def _summary(pending: bool = False) -> None:
    act = state.active()
    ds = act.dataset
    if pending:
        st.subheader(f"Summary of the data still in use: {act.label}")
        st.info("The file above is not in use yet: the summary below and every other page still show "
                f"{act.label}. Apply the mapping to switch.")
    else:
        st.subheader(f"Summary: {act.label}")
    lo, hi = ds.score_range
    c = st.columns(6)
    c[0].metric("Cases", fmt.count(ds.n_rows))
    c[1].metric("Events", fmt.count(ds.n_events))
    c[2].metric("Prevalence", fmt.pct(ds.prevalence, 2))
    c[3].metric("Lowest score", f"{lo:.4g}")
    c[4].metric("Highest score", f"{hi:.4g}")
    c[5].metric("Distinct scores", fmt.count(ds.curve().n_points - 1))
    st.caption(f"Fingerprint (SHA-256 of the mapped data and mapping): `{ds.fingerprint}`")
    if ds.extra_scores:
        dirs = ds.extra_higher_is_riskier
        st.caption(f"Reference score `{ds.mapping.score}`; also mapped for the Compare page: "
                   + ", ".join(f"`{c}` ({'higher' if dirs[c] else 'lower'} is riskier)"
                               for c in ds.extra_scores) + ".")
    if ds.dropped_rows:
        st.warning(f"{fmt.count(ds.dropped_rows)} rows with a missing score were dropped at your request; "
                   "the memo reports them.")
    for w in ds.warnings:
        st.warning(str(w))
    few_events_note(ds)
    log_counts = st.toggle("Log scale for counts (events are rare)", value=True, key="scores_log")
    st.plotly_chart(charts.distribution_figure(_histogram(ds.fingerprint, ds), None, log_counts=log_counts,
                                               score_label=ds.mapping.score),
                    key="scores_dist", config={"displaylogo": False})


def render() -> None:
    st.title("Scores")
    caution_line()
    demos = _demo_options()
    choices = list(demos) + [UPLOAD, LOCAL]
    current = st.session_state.get(state.SOURCE, state.DEMO_DEFAULT)
    source = st.radio("Data", choices, index=choices.index(current) if current in choices else 0,
                      format_func=lambda c: demos.get(c, "A large file on this machine" if c == LOCAL
                                                      else "Upload my own file"), key="scores_source",
                      horizontal=True)
    if source not in (UPLOAD, LOCAL) and source != current:
        st.session_state[state.SOURCE] = source
        state.set_dataset(state.demo_dataset(source), label=demos[source])
    token = None
    if source == UPLOAD:
        token = _upload_section()
    elif source == LOCAL:
        token = _local_section()
    _summary(pending=token is not None and st.session_state.get(APPLIED) != token)


render()
