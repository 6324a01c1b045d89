"""Overlaid comparison figures: valid Plotly, thinned, one trace per score from its exact curve,
each score's point marked where its exact curve has it.

Data: the Wisconsin Diagnostic Breast Cancer set shipped with scikit-learn
(malignant, coded 0 there, is the event), two measurements as two scores;
the PR baseline is the prevalence (Saito & Rehmsmeier, PLoS One 2015, from
memory).
"""

from __future__ import annotations

import numpy as np
import plotly.graph_objects as go
import pytest
from sklearn.datasets import load_breast_cancer

from app import charts
from core import sweep


@pytest.fixture(scope="module")
def curves():
    bc = load_breast_cancer(as_frame=True)
    y = (bc.target == 0).to_numpy()
    return {"mean radius": sweep(y, bc.frame["mean radius"]),
            "worst concave points": sweep(y, bc.frame["worst concave points"])}


@pytest.mark.parametrize("build, space", [(charts.compare_roc_figure, "roc"),
                                          (charts.compare_pr_figure, "pr")])
def test_overlay_traces_come_from_the_exact_curves(curves, build, space):
    points = {"mean radius": 40, "worst concave points": 55}
    fig = build(curves, points, point_label="the same workload", max_points=100)
    d = fig.to_dict()
    go.Figure(d)  # Plotly's full validation of every property the builder set
    assert d["layout"]["title"]["text"] and d["layout"]["xaxis"]["title"]["text"]
    assert all(t.type == "scatter" for t in fig.data)  # SVG only
    for i, (name, c) in enumerate(curves.items()):
        xs, ys = (c.fpr, c.recall) if space == "roc" else (c.recall, c.precision)
        line = next(t for t in fig.data if t.name.startswith(f"{name} ("))
        assert ("reference" in line.name) == (i == 0)
        idx = np.asarray(line.customdata).astype(np.int64)
        assert len(idx) <= 100
        np.testing.assert_array_equal(np.asarray(line.x), xs[idx])
        np.testing.assert_array_equal(np.asarray(line.y), ys[idx])
        mark = next(t for t in fig.data if t.name == f"{name}: the same workload")
        k = points[name]
        assert tuple(mark.x) == (xs[k],) and tuple(mark.y) == (ys[k],)
    lines = [t for t in fig.data if any(t.name.startswith(f"{n} (") for n in curves)]
    assert len({t.line.color for t in lines}) == len({t.line.dash for t in lines}) == len(curves)


def test_pr_overlay_baseline_is_the_prevalence(curves):
    fig = charts.compare_pr_figure(curves)
    base = next(t for t in fig.data if t.name.startswith("Baseline"))
    prev = next(iter(curves.values())).prevalence
    assert tuple(base.y) == (prev, prev)
    # "flag none" (index 0) has no precision and is not drawn
    for t in fig.data:
        if t.customdata is not None:
            assert 0 not in set(np.asarray(t.customdata).astype(np.int64))
