"""Memo: the analyst's fields, the decision record and the threshold memo (PDF, Markdown).

The record is built by the same core functions as ``fulcrum pick``
(:func:`core.decision.analyse`, :func:`core.record.build_record`), so the two
agree to the digit for the same inputs. A record loaded here restores the
column mapping (re-applied to the demo file or to the uploaded table), the
policy, the operating point, the settings and the memo fields; when the
data differ from the record's, the page says so plainly.
"""

from __future__ import annotations

import hashlib
import json
from pathlib import Path

import streamlit as st

from app import format as fmt
from app import policy_form, state
from app.widgets import few_events_note
from core import cautions
from core.bootstrap import DEFAULT_REPLICATES
from core.decision import MIN_REPLICATES, ORIGINS, analyse
from core.errors import InputError
from core.memo_csv import threshold_vectors_csv
from core.memo_fields import (
    DECISIONS,
    FIELDS,
    INDEPENDENCE,
    LABELS,
    NESTED,
    check_memo_fields,
    dumps_memo_fields,
    loads_memo_fields,
)
from core.memo_markdown import memo_markdown
from core.policy import Policy, PolicyError, dumps_policy
from core.record import build_record, dumps_record, fingerprint_note, loads_record, restore_decision

MEMO_FIELDS_DIR = Path(__file__).resolve().parents[2] / "sample_data" / "memo_fields"
K = "memo_"                              # widget-key prefix
SHADOW = "fulcrum_memo_widgets"          # widget values kept across page switches
RECORD = "fulcrum_memo_record"           # the last record built on this page (JSON-safe dict)
CREATED = "fulcrum_memo_created"         # content key -> created_utc, so a rerun keeps the time
MESSAGES = "fulcrum_memo_messages"       # what the last record load said
PDF = "fulcrum_memo_pdf"                 # (record sha256, PDF bytes) of the last PDF built
RECOMMENDED, CURRENT = "recommended", "current"
_LONG = {"outcome_definition", "population", "exclusions", "intended_use", "out_of_scope_use",
         "limitations", "regulatory_status", "rationale", "monitoring.triggers",
         "monitoring.rollback", "sign_off.conditions"}
_SETTINGS = {"mode": RECOMMENDED, "origin": "data-derived", "design": "cohort", "seed": 0,
             "reps": DEFAULT_REPLICATES, "use_decimals": False, "decimals": 4, "calibrated": False,
             "supersedes": ""}


def _field_key(name: str) -> str:
    return K + "f_" + name.replace(".", "__")


def _all_field_names() -> list[str]:
    return list(FIELDS) + [f"{s}.{k}" for s, keys in NESTED.items() for k in keys]


def _widget_keys() -> list[str]:
    return [K + s for s in _SETTINGS] + [_field_key(n) for n in _all_field_names()]


def _defaults() -> dict:
    d = {K + s: v for s, v in _SETTINGS.items()}
    d.update({_field_key(n): "" for n in _all_field_names()})
    return d


def _restore_widgets() -> None:
    """Give every widget its last value (Streamlit drops them while another page shows)."""
    ss = st.session_state
    shadow = ss.setdefault(SHADOW, _defaults())
    for key in _widget_keys():
        if key not in ss:
            ss[key] = shadow.get(key, _defaults()[key])


def _remember_widgets() -> None:
    ss = st.session_state
    ss[SHADOW] = {key: ss[key] for key in _widget_keys() if key in ss}


def _set_fields(fields: dict) -> None:
    """Write memo fields into the widgets (from a callback, before they are drawn)."""
    ss = st.session_state
    f = check_memo_fields(fields)
    for name in FIELDS:
        ss[_field_key(name)] = f[name]
    for section, keys in NESTED.items():
        for k in keys:
            ss[_field_key(f"{section}.{k}")] = f[section][k]
    _remember_widgets()


def _fields_from_widgets() -> dict:
    ss = st.session_state
    d = {name: ss[_field_key(name)] for name in FIELDS}
    for section, keys in NESTED.items():
        d[section] = {k: ss[_field_key(f"{section}.{k}")] for k in keys}
    return d


# --------------------------------------------------------------------------- callbacks

def _on_fields_upload() -> None:
    up = st.session_state.get(K + "fields_file")
    if up is None:
        return
    try:
        _set_fields(loads_memo_fields(up.getvalue().decode("utf-8-sig"), source=up.name))
        st.session_state[K + "fields_error"] = None
    except (InputError, UnicodeDecodeError) as exc:
        st.session_state[K + "fields_error"] = str(exc)


def _on_sample() -> None:
    name = st.session_state.get(K + "sample")
    if not name:
        return
    path = MEMO_FIELDS_DIR / name
    try:
        _set_fields(loads_memo_fields(path.read_text(encoding="utf-8"), source=name))
        st.session_state[K + "fields_error"] = None
    except InputError as exc:
        st.session_state[K + "fields_error"] = str(exc)


def _find_dataset(restored, messages: list):
    """The data the record was made on, mapped as the record says, if they are at hand."""
    from core.intake import DEMOS, demo_path, load_dataset

    ds = state.dataset()
    if ds.fingerprint == restored.data_sha256:
        return ds, None
    demo = next((name for name, d in DEMOS.items() if d.file == restored.file_name), None)
    try:
        if demo is not None:
            if restored.mapping == DEMOS[demo].mapping:
                return state.demo_dataset(demo), (demo, DEMOS[demo].title)
            return load_dataset(demo_path(demo), restored.mapping), (demo, DEMOS[demo].title)
        cached = st.session_state.get("scores_raw")  # the table read on the Scores page
        if cached is not None:
            raw = cached[1]
            return load_dataset(raw, restored.mapping), ("upload", raw.info.file_name or "upload")
    except InputError as exc:
        messages.append(("error", f"The record's column mapping does not fit the data at hand: {exc}"))
        return ds, None
    messages.append(("warning", f"The record was made on {restored.file_name or 'other data'}, which "
                                "is not loaded: upload it on the Scores page, then load the record "
                                "again to apply its column mapping."))
    return ds, None


def _restore(text, source: str) -> None:
    """Load a record: mapping, policy, point, settings and memo fields."""
    ss = st.session_state
    messages: list = []
    try:
        rec = loads_record(text, source=source)
        restored = restore_decision(rec)
    except InputError as exc:
        ss[MESSAGES] = [("error", str(exc))]
        return
    ds, switch = _find_dataset(restored, messages)
    if switch is not None:
        source_key, label = switch
        ss[state.SOURCE] = source_key
        ss.pop("scores_source", None)
        state.set_dataset(ds, label=label)
    note = fingerprint_note(rec, ds)
    if note:
        messages.append(("warning", note))
    else:
        messages.append(("success", f"Same data as the record (fingerprint {ds.fingerprint[:16]}…): "
                                    "mapping, policy, point, settings and memo fields restored."))
    ss[state.POLICY] = restored.policy.to_dict()
    ss[state.POLICY_FP] = ds.fingerprint
    for key in [k for k in ss if isinstance(k, str) and k.startswith(policy_form.K)
                and k != policy_form.K + "file"]:
        del ss[key]  # the policy editor reseeds its widgets from the restored policy
    state.set_point(ds.curve().index_at(restored.threshold))
    by_policy = rec.get("choice", {}).get("method") == "recommended by the policy"
    ss[K + "mode"] = RECOMMENDED if by_policy else CURRENT
    ss[K + "origin"] = restored.threshold_origin
    ss[K + "design"] = restored.design
    ss[K + "seed"] = restored.seed
    ss[K + "reps"] = restored.n_replicates
    ss[K + "use_decimals"] = restored.production_decimals is not None
    ss[K + "decimals"] = restored.production_decimals if restored.production_decimals is not None else 4
    ss[K + "calibrated"] = restored.calibrated
    ss[K + "supersedes"] = rec.get("supersedes") or ""
    _set_fields(restored.memo_fields)
    messages.append(("info", f"Loaded record {restored.record_sha256[:16]}… To replace it, put that "
                             "digest under 'Supersedes'."))
    ss[MESSAGES] = messages


def _on_record_upload() -> None:
    up = st.session_state.get(K + "record_file")
    if up is not None:
        _restore(up.getvalue(), up.name)


def _on_record_paste() -> None:
    text = st.session_state.get(K + "record_text", "")
    if text.strip():
        _restore(text, "pasted")


# --------------------------------------------------------------------------- computing

@st.cache_resource(max_entries=8, show_spinner="Choosing the point and resampling the data…")
def _analysis(fingerprint: str, policy_text: str, threshold, origin, design, seed, reps, decimals,
              calibrated, _dataset, _policy):
    return analyse(_dataset, _policy, threshold=threshold, origin=origin, design=design, seed=seed,
                   n_replicates=reps, calibrated=calibrated, production_decimals=decimals)


def _comparison(ds, policy, seed: int, reps: int):
    """With extra score columns mapped: the comparison for the memo's section (the paired
    bootstrap with the record's seed and replicates, shared with the Compare page's cache)."""
    if ds.kind != "rows" or not ds.extra_scores:
        return None
    from app import comparison

    done = comparison.cached(ds, policy, n_replicates=reps, seed=seed)
    if done is not None:
        return done
    bar = st.progress(0.0, text="Comparing the score versions…")
    comp = comparison.comparison(
        ds, policy, bootstrap=True, n_replicates=reps, seed=seed,
        progress=lambda d_, t_: bar.progress(min(d_ / max(t_, 1), 1.0),
                                             text=f"Paired bootstrap: {d_:,} of {t_:,} replicates"))
    bar.empty()
    return comp


def _build_pdf(sha: str) -> None:
    """Build the PDF of the record on the page (kept for that record only)."""
    from core.memo_pdf import memo_pdf

    record = st.session_state.get(RECORD)
    if record is not None and record["integrity"]["sha256"] == sha:
        st.session_state[PDF] = (sha, memo_pdf(record))


def _created(content: dict) -> str:
    """The same created_utc for the same content, so reruns do not change the record."""
    from core.record import _utc_now

    key = hashlib.sha256(json.dumps(content, sort_keys=True, default=str).encode()).hexdigest()
    times = st.session_state.setdefault(CREATED, {})
    if key not in times:
        times.clear()
        times[key] = _utc_now()
    return times[key]


def _policy_for(ds) -> Policy | None:
    ss = st.session_state
    d = ss.get(state.POLICY)
    if d is None or ss.get(state.POLICY_FP) != ds.fingerprint:
        d = policy_form.default_policy_dict(ds)
    try:
        return Policy.from_dict(d)
    except PolicyError as exc:
        st.error(f"The policy has problems (fix them on the Decide page): {exc}")
        return None


# --------------------------------------------------------------------------- drawing

def _load_section() -> None:
    with st.expander("Load a decision record (restores mapping, policy, point and memo fields)"):
        st.file_uploader("Decision record (JSON)", type=["json"], key=K + "record_file",
                         on_change=_on_record_upload)
        st.text_area("…or paste a record's JSON", key=K + "record_text", height=80)
        st.button("Load the pasted record", key=K + "record_paste", on_click=_on_record_paste)
    for level, text in st.session_state.get(MESSAGES) or []:
        getattr(st, level)(text)


def _settings_section(ds) -> tuple:
    ss = st.session_state
    curve = ds.curve()
    k = state.point()
    t_now = float(curve.thresholds[k])
    st.subheader("What the record decides")
    c1, c2 = st.columns(2)
    c1.radio("Threshold", [RECOMMENDED, CURRENT], key=K + "mode",
             format_func=lambda m: "the policy's recommended point" if m == RECOMMENDED else
             f"the current operating point ({fmt.threshold(t_now)})")
    threshold = origin = None
    if ss[K + "mode"] == CURRENT:
        c2.radio("Origin of this threshold", ORIGINS, key=K + "origin",
                 format_func=lambda o: "picked on these data (data-derived)" if o == "data-derived"
                 else "fixed before these data were seen (pre-specified)")
        threshold, origin = t_now, ss[K + "origin"]
    else:
        c2.caption("Chosen by the policy on these data (data-derived); the out-of-sample estimates "
                   "correct for the selection.")
    s1, s2, s3, s4 = st.columns(4)
    s1.selectbox("Sampling design", ["cohort", "case-control"], key=K + "design")
    s2.number_input("Seed", min_value=0, step=1, key=K + "seed")
    s3.number_input("Bootstrap replicates", min_value=MIN_REPLICATES, step=100, key=K + "reps")
    s4.checkbox("State the production rounding", key=K + "use_decimals",
                help="Decimals the live system keeps of each score (for the test vectors).")
    decimals = None
    if ss[K + "use_decimals"]:
        s4.number_input("Decimals", min_value=0, max_value=15, step=1, key=K + "decimals")
        decimals = int(ss[K + "decimals"])
    calibrated = False
    if ds.scores_in_unit_interval:
        st.checkbox("These scores are calibrated probabilities", key=K + "calibrated")
        calibrated = bool(ss[K + "calibrated"])
    st.text_input("Supersedes (integrity sha256 of the earlier record this one replaces)",
                  key=K + "supersedes")
    return (threshold, origin, ss[K + "design"], int(ss[K + "seed"]), int(ss[K + "reps"]), decimals,
            calibrated)


def _fields_section() -> None:
    st.subheader("The analyst's fields")
    l1, l2 = st.columns(2)
    l1.file_uploader("Load memo fields (TOML)", type=["toml"], key=K + "fields_file",
                     on_change=_on_fields_upload)
    samples = sorted(p.name for p in MEMO_FIELDS_DIR.glob("*.toml")) if MEMO_FIELDS_DIR.exists() else []
    l2.selectbox("…or start from a sample (invented)", [""] + samples, key=K + "sample",
                 on_change=_on_sample, format_func=lambda s: s or "(choose)")
    if st.session_state.get(K + "fields_error"):
        st.error(st.session_state[K + "fields_error"])
    names = _all_field_names()
    study = [n for n in names if not n.startswith("sign_off.")]
    sign_off = [n for n in names if n.startswith("sign_off.")]
    cols = st.columns(2)
    boxes = [cols[i % 2] for i in range(len(study))]
    if sign_off:
        st.markdown("**Sign-off**")
        short = [n for n in sign_off if n not in _LONG]
        sign_off = short + [n for n in sign_off if n in _LONG]
        boxes += list(st.columns(len(short))) if short else []
        boxes += [st.container() for n in sign_off if n in _LONG]
    for name, box in zip(study + sign_off, boxes):
        label, help_text = LABELS[name]
        key = _field_key(name)
        if name == "validation_independence":
            box.selectbox(label, [""] + list(INDEPENDENCE), key=key, help=help_text,
                          format_func=lambda v: v or "not stated")
        elif name == "sign_off.decision":
            box.selectbox(label, [""] + list(DECISIONS), key=key, help=help_text,
                          format_func=lambda v: v or "not yet decided")
        elif name in _LONG:
            box.text_area(label, key=key, help=help_text, height=80)
        else:
            box.text_input(label, key=key, help=help_text)


def _summary(record: dict) -> None:
    m = record["metrics"]
    d = m["deployment"]
    op = "≥" if record["higher_is_riskier"] else "≤"
    st.markdown(f"### Threshold: flag when {record['data']['score_column']} {op} "
                f"{fmt.threshold(record['threshold'] if record['threshold'] not in ('inf', '-inf') else float(record['threshold']))}")
    st.caption(f"Origin: {record['threshold_origin']} ({record['choice']['method']}). Record sha256 "
               f"`{record['integrity']['sha256']}`; data fingerprint `{record['data']['sha256']}`.")
    c = st.columns(4)
    c[0].metric("Recall", fmt.pct(d["recall"]["value"]),
                help=f"95 % interval {fmt.pct(d['recall']['ci_low'])} to {fmt.pct(d['recall']['ci_high'])}")
    c[1].metric("Precision (at deployment)", fmt.pct(d["precision"]["value"], 2),
                help=f"95 % interval {fmt.pct(d['precision']['ci_low'], 2)} to "
                     f"{fmt.pct(d['precision']['ci_high'], 2)}")
    c[2].metric("Flagged per 1,000", fmt.num(m["workload"]["per_1000"]["flagged"], 1))
    cost = m["expected_cost"]
    c[3].metric(f"Expected cost per case ({cost.get('unit') or '—'})",
                fmt.num(cost["per_case"], 4) if cost.get("per_case") is not None else "—")
    st.markdown("**Out of sample**: recall " + fmt.pct(m["optimism"]["cross_fitted"].get("recall"))
                + " cross-fitted, " + fmt.pct(m["optimism"]["corrected"].get("recall"))
                + " optimism-corrected. " + m["optimism"]["statement"])


def render() -> None:
    ss = st.session_state
    act = state.active()
    ds = act.dataset
    st.title("Memo")
    st.info(cautions.FULL, icon="⚠")
    few_events_note(ds)
    _restore_widgets()
    _load_section()
    policy = _policy_for(ds)
    settings = _settings_section(ds)
    _fields_section()
    _remember_widgets()
    fields_raw = _fields_from_widgets()
    try:
        fields = check_memo_fields(fields_raw)
    except InputError as exc:
        st.error(str(exc))
        return
    st.download_button("Save the memo fields (TOML)", dumps_memo_fields(fields),
                       file_name="memo_fields.toml", mime="application/toml", key=K + "save_fields",
                       on_click="ignore")
    if policy is None:
        return
    st.divider()
    st.header("Decision record and memo")
    threshold, origin, design, seed, reps, decimals, calibrated = settings
    text = dumps_policy(policy)
    try:
        analysis = _analysis(ds.fingerprint, text, threshold, origin, design, seed, reps, decimals,
                             calibrated, ds, policy)
        supersedes = ss[K + "supersedes"].strip() or None
        created = _created({"fp": ds.fingerprint, "policy": text, "settings": list(settings),
                            "fields": fields, "supersedes": supersedes})
        record = build_record(analysis, memo_fields=fields, supersedes=supersedes, created_utc=created,
                              comparison=_comparison(ds, policy, seed, reps))
    except InputError as exc:
        st.error(str(exc))
        return
    ss[RECORD] = record
    _summary(record)
    for w in record["choice"]["warnings"]:
        st.warning(w)
    st.caption(cautions.LABEL_SHIFT)
    sha = record["integrity"]["sha256"]
    stem = "threshold_memo"
    d1, d2, d3, d4 = st.columns(4)
    built = ss.get(PDF)
    if built is not None and built[0] == sha:
        d1.download_button("Memo (PDF)", built[1], file_name=f"{stem}.pdf", mime="application/pdf",
                           key=K + "dl_pdf", type="primary", on_click="ignore")
    else:
        d1.button("Build the PDF memo", key=K + "build_pdf", type="primary", on_click=_build_pdf,
                  args=(sha,), help="Draws the figures and lays out the memo (a second or so).")
    d2.download_button("Memo (Markdown)", memo_markdown(record), file_name=f"{stem}.md",
                       mime="text/markdown", key=K + "dl_md", on_click="ignore")
    d3.download_button("Decision record (JSON)", dumps_record(record), file_name="decision_record.json",
                       mime="application/json", key=K + "dl_record", on_click="ignore")
    d4.download_button("Test vectors (CSV)", threshold_vectors_csv(record), file_name="test_vectors.csv",
                       mime="text/csv", key=K + "dl_vectors", on_click="ignore")
    with st.expander("Preview the memo (Markdown)"):
        st.markdown(memo_markdown(record))


render()
