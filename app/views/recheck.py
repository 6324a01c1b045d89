"""Recheck: does an approved threshold still hold on new validation scores?

The page reads a decision record (uploaded, pasted, or the one built on the
Memo page) and new labelled scores (the demo's second quarter, or an upload
kept in this session's memory), then calls the same core functions as
``fulcrum recheck`` (:func:`core.recheck.recheck`,
:func:`core.recheck.build_recheck_record`), so their recheck records agree
but for the time. An expander holds the policy editor (:mod:`app.policy_form`,
its own keys, started from the record's resolved policy): a change reruns only
"what would be chosen now" (:func:`core.recheck.rechoose`), like ``fulcrum
recheck --policy``. No statistics live here.
"""

from __future__ import annotations

import datetime as _dt

import pandas as pd
import streamlit as st

from app import format as fmt
from app import policy_form
from core import cautions
from core.errors import InputError
from core.intake import demo_path
from core.policy import dumps_policy
from core.recheck import (
    build_recheck_record,
    dumps_recheck,
    policy_changes,
    recheck,
    rechoose,
    record_policy,
)
from core.recheck_memo import (
    per_period_header,
    per_period_rows,
    policy_now_header,
    policy_now_rows,
    policy_value,
    recheck_markdown,
    rule_line,
    source_words,
)
from core.record import dumps_record, loads_record

K = "recheck_"
MEMO_RECORD = "fulcrum_memo_record"        # the record built on the Memo page
RESULT = "fulcrum_recheck_result"          # (inputs key, RecheckResult)
RECORD = "fulcrum_recheck_record"          # the sealed recheck record shown (JSON-safe dict)
CREATED = "fulcrum_recheck_created"        # inputs key -> created_utc, so a rerun keeps the time
PDF = "fulcrum_recheck_pdf"                # (recheck sha256, PDF bytes)
NOW = "fulcrum_recheck_now"                # ((inputs key, changed policy TOML), sealed record)
POLICY_DICT = "fulcrum_recheck_policy"     # the recheck's own policy editor (not the Decide page's)
POLICY_KEYS = K + "policy_"                # its widget-key prefix
SIGNATURE = "fulcrum_recheck_signature"    # the decision record's signature check (dict) or None
DEMO_Q2 = "Demo: hospital, second quarter"
MEMO_SOURCE = "The record built on the Memo page"
UPLOAD_SOURCE = "Upload a decision record (JSON)"


def _decision_record():
    """The chosen decision record (checked, integrity included) or None, with a message."""
    ss = st.session_state
    choices = [UPLOAD_SOURCE] + ([MEMO_SOURCE] if ss.get(MEMO_RECORD) else [])
    src = st.radio("Decision record", choices, key=K + "record_source", horizontal=True,
                   index=len(choices) - 1)
    if src == MEMO_SOURCE:
        try:
            return loads_record(dumps_record(ss[MEMO_RECORD]), source="from the Memo page")
        except InputError as exc:
            st.error(str(exc))
            return None
    up = st.file_uploader("Decision record (JSON)", type=["json"], key=K + "record_file")
    if up is None:
        st.info("Upload the decision record of the approved threshold, or build one on the Memo "
                "page.")
        return None
    try:
        return loads_record(up.getvalue(), source=up.name)
    except InputError as exc:
        st.error(str(exc))
        return None


def _signature_check(record) -> bool:
    """The optional check of the decision record's signature; False when it is not valid.

    The same check as ``fulcrum recheck --public-key`` (:func:`core.signing.verify_record`);
    its result goes into the recheck record. Keys are read from the upload, never stored.
    """
    from core.signing import load_public_key, loads_signature, verify_record

    ss = st.session_state
    ss[SIGNATURE] = None
    with st.expander("Signature (optional): check who signed this decision record"):
        c1, c2 = st.columns(2)
        pub = c1.file_uploader("Signer's public key (PEM)", type=["pem", "pub", "txt", "key"],
                               key=K + "public_key")
        sig = c2.file_uploader("Signature file (RECORD.sig)", type=["sig", "json", "txt"],
                               key=K + "signature")
    if pub is None and sig is None:
        return True
    if pub is None or sig is None:
        st.info("Upload both the signer's public key and the signature file to check the "
                "signature.")
        return True
    try:
        result = verify_record(record, loads_signature(sig.getvalue(), source=sig.name),
                               load_public_key(pub.getvalue()))
    except InputError as exc:
        st.error(str(exc))
        return False
    if not result.valid:
        st.error(result.line())
        return False
    st.success(result.line())
    ss[SIGNATURE] = result.to_dict()
    return True


def _new_data():
    """(source for core.recheck, label, identity) of the new scores."""
    from core.reading import read_table

    src = st.radio("New scores", [DEMO_Q2, "Upload a file"], key=K + "data_source",
                   horizontal=True)
    if src == DEMO_Q2:
        p = demo_path("hospital_q2")
        return str(p), p.name, ("demo", "hospital_q2")
    up = st.file_uploader("New labelled scores (CSV, TSV, Parquet, Excel)", key=K + "data_file")
    if up is None:
        return None, None, None
    data = up.getvalue()
    try:
        raw = read_table(data, file_name=up.name)  # in memory only, never written to disk
    except InputError as exc:
        st.error(str(exc))
        return None, None, None
    import hashlib

    return raw, up.name, ("upload", up.name, hashlib.sha256(data).hexdigest())


def _overrides(record) -> dict:
    m = record["data"]["mapping"]
    with st.expander("Columns renamed since approval? (blank keeps the record's mapping)"):
        c1, c2, c3 = st.columns(3)
        score = c1.text_input(f"Score column (record: {m['score']})", key=K + "score").strip()
        label = c2.text_input(f"Label column (record: {m['label']})", key=K + "label").strip()
        pos = c3.text_input(f"Event value (record: {m['positive_label']})",
                            key=K + "positive").strip()
    over = {}
    if score:
        over["score"] = score
    if label:
        over["label"] = label
    if pos:
        over["positive_label"] = pos
    return over


def _settings(record):
    an = record.get("analysis") or {}
    c1, c2, c3, c4 = st.columns([1, 1.5, 1, 0.8])
    as_of = c1.date_input("As of (label maturity)", value=_dt.date.today(), key=K + "as_of")
    live = c2.checkbox("Collected while the threshold was live", key=K + "live",
                       help="Flagged cases were acted on, which changes their outcomes.")
    reps = c3.number_input("Bootstrap replicates (subgroups)", min_value=50, step=100,
                           value=max(50, int(an.get("n_replicates", 2000))), key=K + "reps")
    seed = c4.number_input("Seed", min_value=0, step=1, value=int(an.get("seed", 0)),
                           key=K + "seed")
    return as_of, bool(live), int(reps), int(seed)


def _run(record, source, ident, as_of, live, over, reps, seed):
    """(inputs key, RecheckResult with the record's policy), computed once per inputs."""
    ss = st.session_state
    key = (record["integrity"]["sha256"], ident, str(as_of), live, tuple(sorted(over.items())),
           reps, seed)
    got = ss.get(RESULT)
    if got is not None and got[0] == key:
        return got
    with st.spinner("Rechecking…"):
        result = recheck(record, source, as_of=str(as_of), live=live, mapping_override=over,
                         n_replicates=reps, seed=seed)
    ss[RESULT] = (key, result)
    return ss[RESULT]


def _policy_editor(record, result):
    """The policy editor, started from the record's resolved policy; the changed Policy or None.

    None when the editor holds the record's policy (no key differs) or a
    policy with problems (shown by the editor).
    """
    start = record_policy(record, result.mature).to_dict()
    with st.expander("Change the policy for what would be chosen now (the verdicts above keep "
                     "the record's policy)"):
        st.caption("Starts from the decision record's resolved policy, its deployment prevalence "
                   "included. A change here reruns only this part; the rule verdicts, subgroups, "
                   "drift and calibration are judged against the record's policy (the approval).")
        policy = policy_form.render(result.mature, pre=POLICY_KEYS, store=POLICY_DICT,
                                    store_fp=POLICY_DICT + "_fp", start=start, title=None)
    if policy is None:
        return None
    try:
        changed = policy_changes(record, policy, result.mature)
    except InputError as exc:
        st.error(str(exc))
        return None
    return policy if changed else None


def _final_record(key, result, policy) -> dict:
    """The sealed recheck record shown and exported (the changed policy's choice now, if any)."""
    ss = st.session_state
    pkey = None if policy is None else dumps_policy(policy)
    signature = ss.get(SIGNATURE)
    full = (key, pkey, None if signature is None else signature["key_fingerprint"])
    got = ss.get(NOW)
    if got is not None and got[0] == full:
        return got[1]
    res = result if policy is None else rechoose(result, policy)
    created = ss.setdefault(CREATED, {})
    rec = build_recheck_record(res, created_utc=created.get(full), signature=signature)
    created[full] = rec["created_utc"]
    ss[NOW] = (full, rec)
    ss[RECORD] = rec
    return rec


def _build_pdf() -> None:
    from core.recheck_memo import recheck_pdf

    rec = st.session_state.get(RECORD)
    if rec is not None:
        st.session_state[PDF] = (rec["integrity"]["sha256"], recheck_pdf(rec))


def _show_top(rec: dict) -> None:
    """Everything judged against the record's policy: summary, rules, groups, drift, calibration."""
    word = rec["overall_verdict"]
    box = {"holds": st.success, "fails": st.error}.get(word, st.warning)
    box(f"**{_md(rec['summary'])}** — overall: {word}")
    ov = rec["groups"].get("overlaps")
    if ov:
        st.info(_md(ov["statement"]))
    st.caption(rec["maturity"]["statement"])
    if rec.get("model_effect"):
        st.warning(_md(rec["model_effect"]))
    for s in rec["statements"][1:]:
        if s != rec.get("model_effect"):
            st.warning(_md(s))
    st.subheader("Rules at the approved threshold")
    for v in rec["rules"]:
        st.markdown(f"- {_md(rule_line(v))}  \n  {_md(v['reason'])}")
    st.subheader("Subgroups")
    rows = []
    for g in rec["groups"]["compared"]:
        for v in g["verdicts"]:
            ref = (g.get("reference_values") or {}).get(v["name"].split("_", 1)[1]) or {}
            rows.append({"group": f"{g['column']} = {g['group']}", "rule": v["label"],
                         "at approval": fmt.pct(ref.get("value")), "now": fmt.pct(v["value"]),
                         "lower bound": fmt.pct(v["lower"]), "upper bound": fmt.pct(v["upper"]),
                         "verdict": v["verdict"]})
    if rows:
        st.dataframe(pd.DataFrame(rows), hide_index=True, width="stretch")
    if ov:
        st.caption("Overlapping groups: " + ov["method"] + ".")
    st.caption("New groups: " + (", ".join(rec["groups"]["new"]) or "none") + ". Vanished groups: "
               + (", ".join(rec["groups"]["vanished"]) or "none") + ".")
    for n in rec["groups"]["notes"]:
        st.caption(n)
    st.subheader("Old against new")
    st.dataframe(pd.DataFrame([{
        "metric": c["label"], "at approval": fmt.pct(c["reference"]),
        "now": fmt.pct(c["new"]),
        "difference": "—" if c["difference"] is None else f"{100 * c['difference']:+.2f} pts",
        "95 % interval": "—" if c["low"] is None else
        f"{100 * c['low']:+.2f} to {100 * c['high']:+.2f} pts",
        "changed": "yes" if c["changed"] else "no"} for c in rec["comparison"]["metrics"]]),
        hide_index=True, width="stretch")
    st.caption(rec["comparison"]["method"])
    st.subheader("Drift of the scores")
    for s in rec["drift"]["statements"]:
        st.markdown(f"- {_md(s)}")
    st.subheader("Calibration drift")
    st.markdown(_md(rec["calibration_drift"]["statement"]))


def _table(header, rows) -> pd.DataFrame:
    return pd.DataFrame([dict(zip(header, r)) for r in rows])


def _show_now(rec: dict) -> None:
    """What the policy (the record's, or the changed one) would choose on the new data."""
    now = rec["policy_now"]
    changed = now.get("policy_source") == "changed"
    box = st.warning if changed else st.markdown
    box(_md(now["policy_note"] + " " + now["statement"]))
    if changed:
        st.dataframe(_table(("policy key", "record's policy (approval)", "used now", "source now"),
                            [(c["key"], policy_value(c["old"]), policy_value(c["new"]),
                              source_words(c.get("source"))) for c in now["changes"]]),
                     hide_index=True, width="stretch")
    st.dataframe(_table(policy_now_header(now), policy_now_rows(now)), hide_index=True,
                 width="stretch")
    fpp = now.get("flags_per_period")
    if fpp:
        st.markdown("**Flagged cases per period**")
        st.dataframe(_table(per_period_header(fpp), per_period_rows(fpp)), hide_index=True,
                     width="stretch")
        st.caption(fpp["note"])


def _show_exports(rec: dict) -> None:
    st.subheader("Exports")
    stem = "recheck"
    d1, d2, d3 = st.columns(3)
    d1.download_button("Recheck record (JSON)", dumps_recheck(rec), file_name=f"{stem}.json",
                       mime="application/json", key=K + "dl_json", on_click="ignore")
    d2.download_button("Recheck memo (Markdown)", recheck_markdown(rec), file_name=f"{stem}.md",
                       mime="text/markdown", key=K + "dl_md", on_click="ignore")
    built = st.session_state.get(PDF)
    if built is not None and built[0] == rec["integrity"]["sha256"]:
        d3.download_button("Recheck memo (PDF)", built[1], file_name=f"{stem}.pdf",
                           mime="application/pdf", key=K + "dl_pdf", on_click="ignore")
    else:
        d3.button("Build the PDF memo", key=K + "build_pdf", on_click=_build_pdf)
    st.caption(f"Decision record {rec['decision_record']['sha256']}; recheck record "
               f"{rec['integrity']['sha256']}.")


def _md(text: str) -> str:
    """Plain text for st.markdown: characters Markdown would read as markup are escaped."""
    for ch in ("\\", "*", "_", "`", "[", "]", "<", ">", "#", "|", "~", "$"):
        text = text.replace(ch, "\\" + ch)
    return text


st.title("Recheck")
st.caption("Does the approved threshold still meet its rules on new labelled scores? What "
           "moved, and what would the same policy choose now?")
st.info(cautions.FULL)
record = _decision_record()
if record is not None and not _signature_check(record):
    record = None  # a signature that does not hold: no recheck
source, name, ident = _new_data() if record is not None else (None, None, None)
if record is not None and source is not None:
    over = _overrides(record)
    as_of, live, reps, seed = _settings(record)
    try:
        key, result = _run(record, source, ident, as_of, live, over, reps, seed)
        _show_top(_final_record(key, result, None))
        st.subheader("What the policy would choose now")
        changed = _policy_editor(record, result)
        rec = _final_record(key, result, changed)
        _show_now(rec)
        _show_exports(rec)
    except InputError as exc:
        st.error(str(exc))
