"""Small display pieces shared by the pages (tiles, cautions, notes)."""

from __future__ import annotations

import streamlit as st

from app import format as fmt
from core import cautions
from core.metrics import METRIC_LABELS

#: The tiles every operating point shows, with how each value is written.
TILES = (
    ("precision", "Precision", fmt.pct),
    ("recall", "Recall", fmt.pct),
    ("specificity", "Specificity", fmt.pct),
    ("flagged_per_1000", "Flagged per 1,000", lambda v: fmt.num(v, 1)),
    ("nne", "Flags per event", lambda v: fmt.num(v, 1)),
)


def caution_line() -> None:
    st.caption(f"⚠ {cautions.SHORT}")


def few_events_note(dataset) -> None:
    if dataset.n_events < 100:
        st.warning(f"{fmt.count(dataset.n_events)} events. {cautions.FEW_EVENTS}")


def metric_tiles(point, *, deployment: bool = False, key_prefix: str = "tile") -> None:
    values = point.deployment if deployment and point.deployment else point.metrics
    cols = st.columns(len(TILES))
    for col, (name, label, writer) in zip(cols, TILES):
        col.metric(label, writer(values[name]), help=METRIC_LABELS[name][1], border=True)
