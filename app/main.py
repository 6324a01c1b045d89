"""Fulcrum's browser app: ``streamlit run app/main.py`` or ``fulcrum app``.

Navigation and shared state live here; each page is one module in
``app/views``. Uploaded data stay in this session's memory; nothing is
written to disk.
"""

from __future__ import annotations

import streamlit as st

from app import format as fmt
from app import state
from core import cautions

st.set_page_config(page_title="Fulcrum", layout="wide", initial_sidebar_state="expanded")
state.init()


def sidebar(box) -> None:
    act = state.active()
    ds = act.dataset
    with box:
        st.markdown("### Fulcrum")
        st.markdown(f"**Active data:** {act.label}")
        cases, events = fmt.count(ds.n_rows), fmt.count(ds.n_events)
        # side by side only while both numbers fit half the sidebar (six digits do not)
        c1, c2 = st.columns(2) if max(len(cases), len(events)) <= 6 else (st.container(),) * 2
        c1.metric("Cases", cases)
        c2.metric("Events", events)
        st.metric("Prevalence", fmt.pct(ds.prevalence, 2))
        curve = ds.curve()
        st.caption(f"Operating point: threshold {fmt.threshold(curve.thresholds[act.point])}")
        st.caption(cautions.SHORT)


PAGES = [
    st.Page("views/scores.py", title="Scores", icon=":material/table_view:", url_path="scores",
            default=True),
    st.Page("views/tradeoffs.py", title="Trade-offs", icon=":material/tune:", url_path="tradeoffs"),
    st.Page("views/decide.py", title="Decide", icon=":material/gavel:", url_path="decide"),
    st.Page("views/evidence.py", title="Evidence", icon=":material/verified:", url_path="evidence"),
    st.Page("views/compare.py", title="Compare", icon=":material/compare_arrows:", url_path="compare"),
    st.Page("views/memo.py", title="Memo", icon=":material/description:", url_path="memo"),
    st.Page("views/recheck.py", title="Recheck", icon=":material/update:", url_path="recheck"),
]

page = st.navigation(PAGES, position="sidebar")
box = st.sidebar.container()
page.run()
sidebar(box)  # after the page, so a dataset or point the page just changed is shown
