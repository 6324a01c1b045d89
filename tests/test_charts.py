"""Figure builders: valid Plotly figures, titled, labelled, thinned, SVG only, markers at the exact point."""

from __future__ import annotations

import numpy as np
import plotly.graph_objects as go
import pytest

from app import charts
from core import sweep
from core.dataset import Dataset
from core.summaries import class_histogram


@pytest.fixture(scope="module")
def data():
    rng = np.random.default_rng(2)
    y = rng.random(200_000) < 0.02
    s = 1 / (1 + np.exp(-rng.normal(-4 + 1.5 * y, 1)))
    return Dataset.from_arrays(y, s)


def _check(fig: go.Figure, *, max_points: int = charts.MAX_POINTS) -> dict:
    d = fig.to_dict()
    go.Figure(d)  # Plotly's full validation: every property the builder set is a real one
    lay = d["layout"]
    assert lay["title"]["text"]
    assert lay["xaxis"]["title"]["text"] and lay["yaxis"]["title"]["text"]
    for tr in fig.data:
        assert tr.type in ("scatter", "bar")  # SVG traces only: headless browsers may draw WebGL blank
        if tr.x is not None:
            assert len(tr.x) <= max_points
    return fig


def test_pr_and_roc_carry_the_exact_point_and_curve_indices(data):
    c = data.curve()
    k = 12345
    for build, xs, ys in ((charts.pr_figure, c.recall, c.precision), (charts.roc_figure, c.fpr, c.recall)):
        fig = _check(build(c, k, pinned=99))
        model = fig.data[0]
        idx = np.asarray(model.customdata).astype(np.int64)
        np.testing.assert_array_equal(np.asarray(model.x), xs[idx])
        np.testing.assert_array_equal(np.asarray(model.y), ys[idx])
        point = next(t for t in fig.data if t.name == "Operating point")
        assert tuple(point.x) == (xs[k],) and tuple(point.y) == (ys[k],)
        assert any(t.name == "Pinned point A" for t in fig.data)


def test_pr_baseline_is_the_prevalence(data):
    # Saito & Rehmsmeier (PLoS One 2015, from memory): the PR baseline equals the prevalence.
    c = data.curve()
    base = _check(charts.pr_figure(c, 10)).data[1]
    assert tuple(base.y) == (c.prevalence, c.prevalence)


def test_other_builders_are_valid(data):
    c = data.curve()
    _check(charts.metrics_figure(c, 500))
    _check(charts.distribution_figure(class_histogram(data), 0.1, log_counts=True))
    _check(charts.cost_figure(c.thresholds[:100], np.linspace(1, 0, 100), point_threshold=0.2,
                              optimum_threshold=0.1, unit="harm points"))
    _check(charts.cost_ratio_figure(np.geomspace(1, 1000, 31), np.linspace(0.5, 0.01, 31),
                                    chosen_range=[3.0, 40.0], implied_range=[10.0, None]))
    _check(charts.decision_curve_figure(np.arange(1, 100) / 100, np.linspace(0.02, -0.1, 99),
                                        0.02 - 0.98 * (np.arange(1, 100) / 100) / (1 - np.arange(1, 100) / 100),
                                        current=0.05))
    _check(charts.flags_per_period_figure(["2026-01-01", "2026-01-02"], [30, 41], capacity=40))


def test_flag_none_has_no_pr_marker():
    c = sweep([0, 1, 0, 1], [0.1, 0.4, 0.35, 0.8])
    fig = _check(charts.pr_figure(c, 0))
    assert not any(t.name == "Operating point" for t in fig.data)  # precision 0/0 is not drawn


def test_subgroup_and_reliability_figures():
    from core.calibration import calibration_report
    from core.groups import subgroup_report
    from core.intake import load_demo

    ds = load_demo("hospital_q1")
    table = subgroup_report(ds, 0.0182, interval="analytic").table()
    fig = _check(charts.subgroup_figure(table, "recall", overall=0.82))
    assert len(fig.data[0].x) == int((~table["one_class"]).sum())
    rel = calibration_report(ds).to_dict()["overall"]["reliability"]
    fig = _check(charts.reliability_figure(rel))
    assert tuple(fig.data[1].y) == tuple(rel["observed"])
