"""Shared session state: the active dataset, the operating point, the pinned point, the policy.

Streamlit drops a widget's own state when its page is not drawn, so the
values that travel between pages live in plain session-state keys set up by
:func:`init`; widgets are synced from them before they are drawn and write
back through callbacks. Uploaded data stay in this session's memory only.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import streamlit as st

from core.dataset import Dataset

DATASET = "fulcrum_dataset"          # the active core.dataset.Dataset
DATASET_LABEL = "fulcrum_dataset_label"
POINT = "fulcrum_point"              # curve index of the operating point
POINT_FP = "fulcrum_point_fp"        # fingerprint the point index belongs to
PINNED = "fulcrum_pinned"            # curve index of pinned point A, or None
POLICY = "fulcrum_policy"            # core.policy.Policy (as the user edits it)
POLICY_FP = "fulcrum_policy_fp"
SOURCE = "fulcrum_source"            # which demo, or "upload"
LAST_SELECTION = "fulcrum_last_selection"

DEMO_DEFAULT = "hospital_q1"


@st.cache_resource(max_entries=4, show_spinner="Loading the demo data…")
def demo_dataset(name: str) -> Dataset:
    """The demo datasets are shared read-only across sessions (invented data)."""
    from core.intake import load_demo

    return load_demo(name)


def default_point(dataset: Dataset) -> int:
    """The first point at which recall reaches 0.80: a visible, sensible start."""
    curve = dataset.curve()
    k = int(np.searchsorted(curve.recall, 0.80, side="left"))
    return min(max(k, 1), curve.n_points - 1)


def init() -> None:
    """Set up every shared key once per session; open on the demo with no upload."""
    ss = st.session_state
    if DATASET not in ss:
        ss[SOURCE] = DEMO_DEFAULT
        set_dataset(demo_dataset(DEMO_DEFAULT), label=demo_label(DEMO_DEFAULT))
    ss.setdefault(PINNED, None)
    ss.setdefault(POLICY, None)
    ss.setdefault(LAST_SELECTION, None)


def demo_label(name: str) -> str:
    from core.intake import DEMOS

    return DEMOS[name].title


def set_dataset(dataset: Dataset, *, label: str) -> None:
    ss = st.session_state
    ss[DATASET] = dataset
    ss[DATASET_LABEL] = label
    if ss.get(POINT_FP) != dataset.fingerprint:
        ss[POINT] = default_point(dataset)
        ss[POINT_FP] = dataset.fingerprint
        ss[PINNED] = None
        ss[LAST_SELECTION] = None


def dataset() -> Dataset:
    return st.session_state[DATASET]


def point() -> int:
    ds = dataset()
    k = int(st.session_state.get(POINT, 0))
    return min(max(k, 0), ds.curve().n_points - 1)


def set_point(index: int) -> None:
    n = dataset().curve().n_points
    st.session_state[POINT] = int(min(max(int(index), 0), n - 1))


@dataclass(frozen=True)
class Active:
    """What every page needs, read once per rerun."""

    dataset: Dataset
    label: str
    point: int


def active() -> Active:
    return Active(dataset=dataset(), label=st.session_state.get(DATASET_LABEL, ""), point=point())
