"""Pure Plotly figure builders: numbers in, ``go.Figure`` out, no Streamlit.

Every chart is titled, has labelled axes with units, and uses a palette that
stays distinguishable for colour-blind readers (Okabe & Ito's published
palette), with marker shapes and dash styles so no meaning rests on colour
alone. Curves are thinned for drawing with :meth:`core.curve.Curve.downsample`
(at most about 2,000 points per trace, SVG traces only: headless browsers may
draw WebGL blank); every number shown elsewhere comes from the exact curve.
Each curve point carries its curve index in ``customdata`` so a click can move
the operating point.
"""

from __future__ import annotations

import numpy as np
import plotly.graph_objects as go

from core.curve import Curve

__all__ = [
    "PALETTE", "MAX_POINTS", "pr_figure", "roc_figure", "metrics_figure", "distribution_figure",
    "cost_figure", "cost_ratio_figure", "decision_curve_figure", "flags_per_period_figure",
    "compare_roc_figure", "compare_pr_figure",
]

#: Okabe & Ito colour-blind-safe palette.
PALETTE = {
    "blue": "#0072B2", "orange": "#E69F00", "vermillion": "#D55E00", "green": "#009E73",
    "sky": "#56B4E9", "purple": "#CC79A7", "yellow": "#F0E442", "black": "#000000",
    "grey": "#7F7F7F",
}
MAX_POINTS = 2000

_POINT = dict(symbol="diamond", size=14, color=PALETTE["black"], line=dict(width=2, color="white"))
_PINNED = dict(symbol="circle-open", size=16, color=PALETTE["vermillion"], line=dict(width=3))


def _figure(traces: list[dict], title: str, x: str, y: str, *, height: int = 420, xaxis=None, yaxis=None,
            shapes=(), annotations=(), **layout) -> go.Figure:
    """Assemble a figure from plain trace dicts without Plotly's per-property validation.

    Validation costs tens of milliseconds per figure and the point moves on
    every rerun; the tests validate every builder's output instead.
    """
    lay = dict(
        title=dict(text=title, x=0.0, xanchor="left"), height=height,
        margin=dict(l=60, r=20, t=60, b=55), legend=dict(orientation="h", y=-0.2),
        hovermode="closest",
        xaxis=dict(title=dict(text=x), **(xaxis or {})), yaxis=dict(title=dict(text=y), **(yaxis or {})),
        shapes=list(shapes), annotations=list(annotations), **layout)
    return go.Figure(data=traces, layout=lay, _validate=False)


def _vline(x: float, color: str, *, dash: str = "solid", label: str = "", where: str = "right"):
    shape = dict(type="line", xref="x", yref="paper", x0=x, x1=x, y0=0, y1=1,
                 line=dict(color=color, width=2, dash=dash))
    ann = dict(x=x, y=1.0, xref="x", yref="paper", text=label, showarrow=False, yanchor="bottom",
               xanchor="left" if where == "right" else "right", font=dict(size=11))
    return shape, ann


def _hline(y: float, color: str, *, dash: str = "dash", label: str = ""):
    shape = dict(type="line", xref="paper", yref="y", x0=0, x1=1, y0=y, y1=y,
                 line=dict(color=color, width=2, dash=dash))
    ann = dict(x=0, y=y, xref="paper", yref="y", text=label, showarrow=False, yanchor="bottom",
               xanchor="left", font=dict(size=11))
    return shape, ann


def _marker_trace(x, y, name, style, text):
    return dict(type="scatter", x=[float(x)], y=[float(y)], mode="markers", name=name, marker=style,
                hovertext=[text], hoverinfo="text", showlegend=True)


def thin(curve: Curve, space: str, max_points: int = MAX_POINTS) -> np.ndarray:
    """The points drawn for a curve (markers for the operating point are separate traces)."""
    return curve.downsample(max_points, space=space)


def _keep_marker(x, y) -> bool:
    return np.isfinite(x) and np.isfinite(y)


def pr_figure(curve: Curve, point: int, *, pinned: int | None = None, idx=None,
              max_points: int = MAX_POINTS) -> go.Figure:
    """Precision against recall, with the prevalence baseline (Saito & Rehmsmeier 2015)."""
    idx = thin(curve, "pr", max_points) if idx is None else idx
    idx = idx[idx > 0]  # "flag none" has no precision (0/0)
    traces = [
        dict(type="scatter", x=curve.recall[idx], y=curve.precision[idx], mode="lines+markers", name="Model",
             customdata=idx, line=dict(color=PALETTE["blue"], width=2), marker=dict(size=4, color=PALETTE["blue"]),
             hovertemplate="point %{customdata:,}<br>recall %{x:.3f}<br>precision %{y:.3f}<extra></extra>"),
        dict(type="scatter", x=[0, 1], y=[curve.prevalence] * 2, mode="lines",
             name=f"Baseline: prevalence {curve.prevalence:.2%}", line=dict(color=PALETTE["grey"], dash="dash"),
             hoverinfo="skip"),
    ]
    for k, name, style in ((point, "Operating point", _POINT), (pinned, "Pinned point A", _PINNED)):
        if k is not None and k > 0 and _keep_marker(curve.recall[k], curve.precision[k]):
            traces.append(_marker_trace(curve.recall[k], curve.precision[k], name, style, name.lower()))
    return _figure(traces, f"Precision–recall curve (average precision {curve.average_precision:.3f})",
                   "Recall (share of events flagged)", "Precision (share of flags that are events)",
                   xaxis=dict(range=[-0.02, 1.02]), yaxis=dict(range=[-0.02, 1.02]))


def roc_figure(curve: Curve, point: int, *, pinned: int | None = None, idx=None,
               max_points: int = MAX_POINTS) -> go.Figure:
    """True-positive rate against false-positive rate, with the chance line."""
    idx = thin(curve, "roc", max_points) if idx is None else idx
    traces = [
        dict(type="scatter", x=curve.fpr[idx], y=curve.recall[idx], mode="lines+markers", name="Model",
             customdata=idx, line=dict(color=PALETTE["blue"], width=2), marker=dict(size=4, color=PALETTE["blue"]),
             hovertemplate="point %{customdata:,}<br>FPR %{x:.4f}<br>recall %{y:.3f}<extra></extra>"),
        dict(type="scatter", x=[0, 1], y=[0, 1], mode="lines", name="Chance (AUC 0.5)",
             line=dict(color=PALETTE["grey"], dash="dash"), hoverinfo="skip"),
    ]
    for k, name, style in ((point, "Operating point", _POINT), (pinned, "Pinned point A", _PINNED)):
        if k is not None:
            traces.append(_marker_trace(curve.fpr[k], curve.recall[k], name, style, name.lower()))
    return _figure(traces, f"ROC curve (AUC {curve.roc_auc:.3f})", "False-positive rate (1 − specificity)",
                   "Recall (true-positive rate)", xaxis=dict(range=[-0.02, 1.02]),
                   yaxis=dict(range=[-0.02, 1.02]))


def metrics_figure(curve: Curve, point: int, *, score_label: str = "score", idx=None,
                   max_points: int = MAX_POINTS) -> go.Figure:
    """Precision, recall, specificity and flag rate against the threshold."""
    idx = thin(curve, "roc", max_points) if idx is None else idx
    idx = idx[idx > 0]
    th = curve.thresholds[idx]
    series = [
        ("Precision", curve.precision, PALETTE["blue"], "solid"),
        ("Recall", curve.recall, PALETTE["vermillion"], "dash"),
        ("Specificity", curve.specificity, PALETTE["green"], "dot"),
        ("Flag rate", curve.flag_rate, PALETTE["purple"], "dashdot"),
    ]
    traces = [dict(type="scatter", x=th, y=values[idx], mode="lines", name=name, customdata=idx,
                   line=dict(color=color, dash=dash, width=2),
                   hovertemplate=f"{name} %{{y:.3f}} at threshold %{{x}}<extra></extra>")
              for name, values, color, dash in series]
    shapes, anns = [], []
    if point > 0:
        sh, an = _vline(float(curve.thresholds[point]), PALETTE["black"], label="threshold")
        shapes.append(sh)
        anns.append(an)
    direction = "flagged when score ≥ threshold" if curve.higher_is_riskier else "flagged when score ≤ threshold"
    return _figure(traces, "Metrics against the threshold", f"Threshold ({score_label}; {direction})",
                   "Share (0–1)", yaxis=dict(range=[-0.02, 1.02]), shapes=shapes, annotations=anns)


def distribution_figure(hist, threshold: float | None, *, log_counts: bool = False,
                        score_label: str = "score") -> go.Figure:
    """Score distributions of events and non-events (a ``core.summaries.ClassHistogram``)."""
    traces = [
        dict(type="bar", x=hist.centers, y=hist.non_events, width=hist.widths, name="Non-events",
             marker=dict(color=PALETTE["sky"], line=dict(width=0)), opacity=0.75,
             hovertemplate="score %{x:.3f}: %{y:,.0f} non-events<extra></extra>"),
        dict(type="bar", x=hist.centers, y=hist.events, width=hist.widths, name="Events",
             marker=dict(color=PALETTE["vermillion"], pattern=dict(shape="/"), line=dict(width=0)),
             opacity=0.9, hovertemplate="score %{x:.3f}: %{y:,.0f} events<extra></extra>"),
    ]
    shapes, anns = [], []
    if threshold is not None and np.isfinite(threshold):
        sh, an = _vline(float(threshold), PALETTE["black"], label="threshold")
        shapes.append(sh)
        anns.append(an)
    return _figure(traces, "Score distribution by class", f"Score ({score_label})",
                   "Cases per bin" + (" (log scale)" if log_counts else ""), height=360, barmode="overlay",
                   yaxis=dict(type="log") if log_counts else None, shapes=shapes, annotations=anns)


def cost_figure(thresholds, cost, *, point_threshold=None, optimum_threshold=None, unit: str = "",
                per: str = "case", score_label: str = "score") -> go.Figure:
    """Expected cost against threshold, with the optimum and the current point."""
    th = np.asarray(thresholds, dtype=float)
    c = np.asarray(cost, dtype=float)
    finite = np.isfinite(th)
    traces = [dict(type="scatter", x=th[finite], y=c[finite], mode="lines", name="Expected cost",
                   line=dict(color=PALETTE["blue"], width=2),
                   hovertemplate="threshold %{x}<br>cost %{y:,.4f}<extra></extra>")]
    shapes, anns = [], []
    for t, color, dash, label, where in ((optimum_threshold, PALETTE["green"], "dash", "recommended", "left"),
                                         (point_threshold, PALETTE["black"], "solid", "current point", "right")):
        if t is not None and np.isfinite(t):
            sh, an = _vline(float(t), color, dash=dash, label=label, where=where)
            shapes.append(sh)
            anns.append(an)
    u = f" ({unit} per {per})" if unit else f" (per {per})"
    return _figure(traces, "Expected cost against the threshold", f"Threshold ({score_label})",
                   "Expected cost" + u, shapes=shapes, annotations=anns)


def cost_ratio_figure(ratios, thresholds, *, chosen_range=None, implied_range=None,
                      score_label: str = "score") -> go.Figure:
    """Cost-optimal threshold as the miss/false-alarm cost ratio runs from 1 to 1,000."""
    th = np.asarray(thresholds, dtype=float)
    traces = [dict(type="scatter", x=np.asarray(ratios, dtype=float), y=np.where(np.isfinite(th), th, np.nan),
                   mode="lines", line=dict(color=PALETTE["blue"], width=2, shape="hv"),
                   name="Cost-optimal threshold", hovertemplate="ratio %{x:,.1f}: threshold %{y}<extra></extra>")]
    shapes, anns = [], []
    top = float(np.max(ratios))
    for rng, name, color in ((chosen_range, "recommended point optimal", PALETTE["green"]),
                             (implied_range, "current point optimal", PALETTE["orange"])):
        if rng is not None and rng[0] is not None and np.isfinite(rng[0]):
            hi = rng[1] if rng[1] is not None and np.isfinite(rng[1]) else top
            lo = max(float(rng[0]), float(np.min(ratios)))
            shapes.append(dict(type="rect", xref="x", yref="paper", x0=lo, x1=min(hi, top), y0=0, y1=1,
                               fillcolor=color, opacity=0.18, line=dict(width=0)))
            anns.append(dict(x=np.log10(lo) if lo > 0 else 0, y=1.0, xref="x", yref="paper", text=name,
                             showarrow=False, xanchor="left", yanchor="bottom", font=dict(size=11)))
    return _figure(traces, "Which threshold each cost ratio favours",
                   "Cost of a miss ÷ cost of a false alarm (log scale)", f"Cost-optimal threshold ({score_label})",
                   xaxis=dict(type="log"), shapes=shapes, annotations=anns)


def decision_curve_figure(p_t, model, treat_all, *, current=None) -> go.Figure:
    """Net benefit against threshold probability (Vickers & Elkin 2006)."""
    p_t = np.asarray(p_t, dtype=float)
    traces = [
        dict(type="scatter", x=p_t, y=np.asarray(model, dtype=float), mode="lines", name="Model",
             line=dict(color=PALETTE["blue"], width=2)),
        dict(type="scatter", x=p_t, y=np.asarray(treat_all, dtype=float), mode="lines", name="Treat all",
             line=dict(color=PALETTE["vermillion"], dash="dash")),
        dict(type="scatter", x=[float(p_t.min()), float(p_t.max())], y=[0, 0], mode="lines", name="Treat none",
             line=dict(color=PALETTE["grey"], dash="dot")),
    ]
    shapes, anns = [], []
    if current is not None:
        sh, an = _vline(float(current), PALETTE["black"], label="current point")
        shapes.append(sh)
        anns.append(an)
    ymax = max(float(np.nanmax(model)) if np.size(model) else 0.0, 1e-3)
    return _figure(traces, "Decision curve", "Threshold probability", "Net benefit (true positives per case, net)",
                   yaxis=dict(range=[-0.1 * ymax, 1.15 * ymax]), shapes=shapes, annotations=anns)


def flags_per_period_figure(periods, flagged, *, capacity=None, period: str = "day") -> go.Figure:
    """Flagged cases in each period at the current threshold, with the capacity line."""
    traces = [dict(type="bar", x=list(periods), y=np.asarray(flagged, dtype=float), name=f"Flagged per {period}",
                   marker=dict(color=PALETTE["blue"]))]
    shapes, anns = [], []
    if capacity is not None:
        sh, an = _hline(float(capacity), PALETTE["vermillion"], label=f"capacity {capacity:,.0f}")
        shapes.append(sh)
        anns.append(an)
    return _figure(traces, f"Flagged cases per {period}", period.capitalize(), f"Flagged cases per {period}",
                   height=340, shapes=shapes, annotations=anns)


def band_figure(curve: Curve, band: dict, point: int | None, *, which: str = "pr", idx=None,
                confidence: float = 0.95) -> go.Figure:
    """The exact curve inside its bootstrap percentile band (``core.uncertainty`` bands)."""
    grid = np.asarray(band["grid"], dtype=float)
    lo = np.asarray([np.nan if v is None else v for v in band["low"]], dtype=float)
    hi = np.asarray([np.nan if v is None else v for v in band["high"]], dtype=float)
    space = "pr" if which == "pr" else "roc"
    idx = thin(curve, space) if idx is None else idx
    if which == "pr":
        idx = idx[idx > 0]
        x, y = curve.recall[idx], curve.precision[idx]
        title, xl, yl = "Precision–recall curve with its bootstrap band", "Recall", "Precision"
        px, py = (curve.recall[point], curve.precision[point]) if point else (None, None)
    else:
        x, y = curve.fpr[idx], curve.recall[idx]
        title, xl, yl = "ROC curve with its bootstrap band", "False-positive rate", "Recall (true-positive rate)"
        px, py = (curve.fpr[point], curve.recall[point]) if point is not None else (None, None)
    traces = [
        dict(type="scatter", x=grid, y=hi, mode="lines", line=dict(width=0, color=PALETTE["sky"]),
             showlegend=False, hoverinfo="skip"),
        dict(type="scatter", x=grid, y=lo, mode="lines", line=dict(width=0, color=PALETTE["sky"]),
             fill="tonexty", fillcolor="rgba(86,180,233,0.30)", name=f"{confidence:.0%} bootstrap band",
             hoverinfo="skip"),
        dict(type="scatter", x=x, y=y, mode="lines", name="Exact curve", line=dict(color=PALETTE["blue"], width=2)),
    ]
    if px is not None and np.isfinite(px) and np.isfinite(py):
        traces.append(_marker_trace(px, py, "Operating point", _POINT, "operating point"))
    return _figure(traces, title, xl, yl, xaxis=dict(range=[-0.02, 1.02]), yaxis=dict(range=[-0.02, 1.02]),
                   height=380)


def subgroup_figure(table, metric: str = "recall", *, overall: float | None = None,
                    label: str = "Recall") -> go.Figure:
    """One metric per subgroup with its interval (a ``SubgroupReport.table()``), overall line."""
    t = table[~table["one_class"]] if "one_class" in table else table
    names = [f"{c}: {g}" for c, g in zip(t["column"], t["group"])]
    v = t[metric].to_numpy(dtype=float)
    lo = t[f"{metric}_low"].to_numpy(dtype=float)
    hi = t[f"{metric}_high"].to_numpy(dtype=float)
    verdict = t.get(f"{metric}_verdict")
    symbols = ["diamond" if (verdict is not None and str(x) == "differs") else "circle"
               for x in (verdict if verdict is not None else [None] * len(v))]
    traces = [dict(type="scatter", x=v, y=names, mode="markers", name=label,
                   marker=dict(color=PALETTE["blue"], size=10, symbol=symbols),
                   error_x=dict(type="data", symmetric=False, array=hi - v, arrayminus=v - lo,
                                color=PALETTE["blue"], thickness=1.5),
                   hovertemplate="%{y}: %{x:.3f}<extra></extra>")]
    shapes, anns = [], []
    if overall is not None and np.isfinite(overall):
        sh, an = _vline(float(overall), PALETTE["vermillion"], dash="dash", label="all cases")
        shapes.append(sh)
        anns.append(an)
    return _figure(traces, f"{label} by subgroup at the threshold (◆ differs from the rest, Holm-adjusted)",
                   f"{label} with its interval", "Subgroup", height=max(300, 40 * len(names) + 120),
                   yaxis=dict(autorange="reversed"), shapes=shapes, annotations=anns, showlegend=False)


def reliability_figure(reliability: dict, *, title: str = "Reliability: observed against predicted") -> go.Figure:
    """Observed event rate per bin against the mean predicted probability, with intervals."""
    x = np.asarray(reliability["mean_predicted"], dtype=float)
    y = np.asarray(reliability["observed"], dtype=float)
    lo = np.asarray([np.nan if v is None else v for v in reliability["low"]], dtype=float)
    hi = np.asarray([np.nan if v is None else v for v in reliability["high"]], dtype=float)
    top = float(np.nanmax(np.r_[x, hi, 0.01]))
    traces = [
        dict(type="scatter", x=[0, top], y=[0, top], mode="lines", name="Perfect calibration",
             line=dict(color=PALETTE["grey"], dash="dash"), hoverinfo="skip"),
        dict(type="scatter", x=x, y=y, mode="lines+markers", name="Observed (95 % interval)",
             marker=dict(color=PALETTE["blue"], size=8), line=dict(color=PALETTE["blue"]),
             error_y=dict(type="data", symmetric=False, array=hi - y, arrayminus=y - lo,
                          color=PALETTE["blue"], thickness=1.5),
             customdata=np.asarray(reliability["cases"], dtype=float),
             hovertemplate="predicted %{x:.4f}<br>observed %{y:.4f}<br>%{customdata:,.0f} cases<extra></extra>"),
    ]
    return _figure(traces, title, "Mean predicted probability in the bin", "Observed event rate in the bin",
                   xaxis=dict(range=[0, top * 1.05]), yaxis=dict(range=[0, top * 1.05]), height=400)


# --------------------------------------------------------------------------- comparison

#: Line colour, dash and marker symbol of each compared score, the reference first.
_MODEL_STYLES = (
    (PALETTE["blue"], "solid", "diamond"), (PALETTE["vermillion"], "dash", "square"),
    (PALETTE["green"], "dot", "triangle-up"), (PALETTE["purple"], "dashdot", "circle"),
    (PALETTE["orange"], "longdash", "x"),
)


def _model_style(i: int):
    return _MODEL_STYLES[i % len(_MODEL_STYLES)]


def _overlay(curves: dict, points: dict | None, space: str, max_points: int, point_label: str):
    """Traces of several exact curves (thinned for drawing) and each one's point as a marker."""
    traces = []
    for i, (name, curve) in enumerate(curves.items()):
        color, dash, symbol = _model_style(i)
        idx = thin(curve, space, max_points)
        if space == "pr":
            idx = idx[idx > 0]  # "flag none" has no precision (0/0)
            x, y = curve.recall, curve.precision
            auc = f"AP {curve.average_precision:.3f}"
            tmpl = "recall %{x:.3f}<br>precision %{y:.3f}"
        else:
            x, y = curve.fpr, curve.recall
            auc = f"AUC {curve.roc_auc:.3f}"
            tmpl = "FPR %{x:.4f}<br>recall %{y:.3f}"
        role = "reference" if i == 0 else "candidate"
        traces.append(dict(
            type="scatter", x=x[idx], y=y[idx], mode="lines", name=f"{name} ({role}, {auc})",
            customdata=idx, line=dict(color=color, width=2, dash=dash),
            hovertemplate=f"{name}<br>point %{{customdata:,}}<br>{tmpl}<extra></extra>"))
        k = None if points is None else points.get(name)
        if k is not None and (space != "pr" or k > 0) and _keep_marker(x[k], y[k]):
            traces.append(_marker_trace(x[k], y[k], f"{name}: {point_label}",
                                        dict(symbol=symbol, size=13, color=color,
                                             line=dict(width=2, color="white")),
                                        f"{name} at {point_label}"))
    return traces


def compare_roc_figure(curves: dict, points: dict | None = None, *, point_label: str = "its point",
                       max_points: int = MAX_POINTS) -> go.Figure:
    """Overlaid ROC curves of scores on the same cases (name -> exact Curve, the reference first),
    each score's operating point (name -> curve index) marked in its own colour and shape."""
    traces = _overlay(curves, points, "roc", max_points, point_label)
    traces.append(dict(type="scatter", x=[0, 1], y=[0, 1], mode="lines", name="Chance (AUC 0.5)",
                       line=dict(color=PALETTE["grey"], dash="dash"), hoverinfo="skip"))
    return _figure(traces, "ROC curves on the same cases", "False-positive rate (1 − specificity)",
                   "Recall (true-positive rate)", height=460, xaxis=dict(range=[-0.02, 1.02]),
                   yaxis=dict(range=[-0.02, 1.02]))


def compare_pr_figure(curves: dict, points: dict | None = None, *, point_label: str = "its point",
                      max_points: int = MAX_POINTS) -> go.Figure:
    """Overlaid precision–recall curves (see :func:`compare_roc_figure`) with the prevalence
    baseline, which is the same for every score (Saito & Rehmsmeier 2015)."""
    traces = _overlay(curves, points, "pr", max_points, point_label)
    prev = next(iter(curves.values())).prevalence
    traces.append(dict(type="scatter", x=[0, 1], y=[prev] * 2, mode="lines",
                       name=f"Baseline: prevalence {prev:.2%}",
                       line=dict(color=PALETTE["grey"], dash="dash"), hoverinfo="skip"))
    return _figure(traces, "Precision–recall curves on the same cases",
                   "Recall (share of events flagged)", "Precision (share of flags that are events)",
                   height=460, xaxis=dict(range=[-0.02, 1.02]), yaxis=dict(range=[-0.02, 1.02]))
