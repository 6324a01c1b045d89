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


def _layout(fig: go.Figure, title: str, x: str, y: str, *, height: int = 420, **kw) -> go.Figure:
    fig.update_layout(
        title=dict(text=title, x=0.0, xanchor="left"), height=height,
        margin=dict(l=60, r=20, t=60, b=55), legend=dict(orientation="h", y=-0.2),
        hovermode="closest", template="plotly_white", **kw)
    fig.update_xaxes(title_text=x)
    fig.update_yaxes(title_text=y)
    return fig


def _marker_trace(x, y, name, style, text):
    return go.Scatter(x=[x], y=[y], mode="markers", name=name, marker=style, hovertext=[text],
                      hoverinfo="text", showlegend=True)


def pr_figure(curve: Curve, point: int, *, pinned: int | None = None,
              max_points: int = MAX_POINTS) -> go.Figure:
    """Precision against recall, with the prevalence baseline (Saito & Rehmsmeier 2015)."""
    keep = [point] + ([pinned] if pinned is not None else [])
    idx = curve.downsample(max_points, keep=keep, space="pr")
    idx = idx[idx > 0]  # "flag none" has no precision (0/0)
    rec, prec = curve.recall[idx], curve.precision[idx]
    fig = go.Figure()
    fig.add_trace(go.Scatter(
        x=rec, y=prec, mode="lines+markers", name="Model", customdata=idx,
        line=dict(color=PALETTE["blue"], width=2), marker=dict(size=4, color=PALETTE["blue"]),
        hovertemplate="point %{customdata:,}<br>recall %{x:.3f}<br>precision %{y:.3f}<extra></extra>"))
    fig.add_trace(go.Scatter(
        x=[0, 1], y=[curve.prevalence] * 2, mode="lines", name=f"Baseline: prevalence {curve.prevalence:.2%}",
        line=dict(color=PALETTE["grey"], dash="dash"), hoverinfo="skip"))
    if point > 0:
        fig.add_trace(_marker_trace(curve.recall[point], curve.precision[point], "Operating point",
                                    _POINT, "operating point"))
    if pinned is not None and pinned > 0:
        fig.add_trace(_marker_trace(curve.recall[pinned], curve.precision[pinned], "Pinned point A",
                                    _PINNED, "pinned A"))
    _layout(fig, f"Precision–recall curve (average precision {curve.average_precision:.3f})",
            "Recall (share of events flagged)", "Precision (share of flags that are events)")
    fig.update_xaxes(range=[-0.02, 1.02])
    fig.update_yaxes(range=[-0.02, 1.02])
    return fig


def roc_figure(curve: Curve, point: int, *, pinned: int | None = None,
               max_points: int = MAX_POINTS) -> go.Figure:
    """True-positive rate against false-positive rate, with the chance line."""
    keep = [point] + ([pinned] if pinned is not None else [])
    idx = curve.downsample(max_points, keep=keep, space="roc")
    fig = go.Figure()
    fig.add_trace(go.Scatter(
        x=curve.fpr[idx], y=curve.recall[idx], mode="lines+markers", name="Model", customdata=idx,
        line=dict(color=PALETTE["blue"], width=2), marker=dict(size=4, color=PALETTE["blue"]),
        hovertemplate="point %{customdata:,}<br>FPR %{x:.4f}<br>recall %{y:.3f}<extra></extra>"))
    fig.add_trace(go.Scatter(x=[0, 1], y=[0, 1], mode="lines", name="Chance (AUC 0.5)",
                             line=dict(color=PALETTE["grey"], dash="dash"), hoverinfo="skip"))
    fig.add_trace(_marker_trace(curve.fpr[point], curve.recall[point], "Operating point", _POINT,
                                "operating point"))
    if pinned is not None:
        fig.add_trace(_marker_trace(curve.fpr[pinned], curve.recall[pinned], "Pinned point A",
                                    _PINNED, "pinned A"))
    _layout(fig, f"ROC curve (AUC {curve.roc_auc:.3f})", "False-positive rate (1 − specificity)",
            "Recall (true-positive rate)")
    fig.update_xaxes(range=[-0.02, 1.02])
    fig.update_yaxes(range=[-0.02, 1.02])
    return fig


def metrics_figure(curve: Curve, point: int, *, score_label: str = "score",
                   max_points: int = MAX_POINTS) -> go.Figure:
    """Precision, recall, specificity and flag rate against the threshold."""
    idx = curve.downsample(max_points, keep=[point], space="roc")
    idx = idx[idx > 0]
    th = curve.thresholds[idx]
    series = [
        ("Precision", curve.precision, PALETTE["blue"], "solid"),
        ("Recall", curve.recall, PALETTE["vermillion"], "dash"),
        ("Specificity", curve.specificity, PALETTE["green"], "dot"),
        ("Flag rate", curve.flag_rate, PALETTE["purple"], "dashdot"),
    ]
    fig = go.Figure()
    for name, values, color, dash in series:
        fig.add_trace(go.Scatter(x=th, y=values[idx], mode="lines", name=name, customdata=idx,
                                 line=dict(color=color, dash=dash, width=2),
                                 hovertemplate=f"{name} %{{y:.3f}} at threshold %{{x}}<extra></extra>"))
    if point > 0:
        fig.add_vline(x=float(curve.thresholds[point]), line=dict(color=PALETTE["black"], width=2),
                      annotation_text="threshold", annotation_position="top")
    direction = "flagged when score ≥ threshold" if curve.higher_is_riskier else \
        "flagged when score ≤ threshold"
    _layout(fig, "Metrics against the threshold", f"Threshold ({score_label}; {direction})",
            "Share (0–1)")
    fig.update_yaxes(range=[-0.02, 1.02])
    return fig


def distribution_figure(hist, threshold: float | None, *, log_counts: bool = False,
                        score_label: str = "score") -> go.Figure:
    """Score distributions of events and non-events (a ``core.summaries.ClassHistogram``)."""
    fig = go.Figure()
    fig.add_trace(go.Bar(x=hist.centers, y=hist.non_events, width=hist.widths, name="Non-events",
                         marker=dict(color=PALETTE["sky"], line=dict(width=0)), opacity=0.75,
                         hovertemplate="score %{x:.3f}: %{y:,.0f} non-events<extra></extra>"))
    fig.add_trace(go.Bar(x=hist.centers, y=hist.events, width=hist.widths, name="Events",
                         marker=dict(color=PALETTE["vermillion"], pattern=dict(shape="/"),
                                     line=dict(width=0)), opacity=0.9,
                         hovertemplate="score %{x:.3f}: %{y:,.0f} events<extra></extra>"))
    if threshold is not None and np.isfinite(threshold):
        fig.add_vline(x=float(threshold), line=dict(color=PALETTE["black"], width=2),
                      annotation_text="threshold", annotation_position="top")
    _layout(fig, "Score distribution by class", f"Score ({score_label})",
            "Cases per bin" + (" (log scale)" if log_counts else ""), barmode="overlay", height=360)
    if log_counts:
        fig.update_yaxes(type="log")
    return fig


def cost_figure(thresholds, cost, *, point_threshold=None, optimum_threshold=None, unit: str = "",
                per: str = "case", score_label: str = "score") -> go.Figure:
    """Expected cost against threshold, with the optimum and the current point."""
    th = np.asarray(thresholds, dtype=float)
    c = np.asarray(cost, dtype=float)
    finite = np.isfinite(th)
    fig = go.Figure()
    fig.add_trace(go.Scatter(x=th[finite], y=c[finite], mode="lines", name="Expected cost",
                             line=dict(color=PALETTE["blue"], width=2),
                             hovertemplate="threshold %{x}<br>cost %{y:,.4f}<extra></extra>"))
    if optimum_threshold is not None and np.isfinite(optimum_threshold):
        fig.add_vline(x=float(optimum_threshold), line=dict(color=PALETTE["green"], dash="dash", width=2),
                      annotation_text="lowest cost", annotation_position="top left")
    if point_threshold is not None and np.isfinite(point_threshold):
        fig.add_vline(x=float(point_threshold), line=dict(color=PALETTE["black"], width=2),
                      annotation_text="current point", annotation_position="top right")
    u = f" ({unit} per {per})" if unit else f" (per {per})"
    _layout(fig, "Expected cost against the threshold", f"Threshold ({score_label})", "Expected cost" + u)
    return fig


def cost_ratio_figure(ratios, thresholds, *, chosen_range=None, implied_range=None,
                      score_label: str = "score") -> go.Figure:
    """Cost-optimal threshold as the miss/false-alarm cost ratio runs from 1 to 1,000."""
    fig = go.Figure()
    th = np.asarray(thresholds, dtype=float)
    fig.add_trace(go.Scatter(x=ratios, y=np.where(np.isfinite(th), th, np.nan), mode="lines",
                             line=dict(color=PALETTE["blue"], width=2, shape="hv"),
                             name="Cost-optimal threshold",
                             hovertemplate="ratio %{x:,.1f}: threshold %{y}<extra></extra>"))
    for rng, name, color in ((chosen_range, "Chosen point optimal", PALETTE["green"]),
                             (implied_range, "Current point optimal", PALETTE["orange"])):
        if rng is not None and rng[0] is not None and np.isfinite(rng[0]):
            hi = rng[1] if rng[1] is not None and np.isfinite(rng[1]) else max(ratios)
            fig.add_vrect(x0=rng[0], x1=hi, fillcolor=color, opacity=0.18, line_width=0,
                          annotation_text=name, annotation_position="top left")
    _layout(fig, "Which threshold each cost ratio favours", "Cost of a miss ÷ cost of a false alarm (log scale)",
            f"Cost-optimal threshold ({score_label})")
    fig.update_xaxes(type="log")
    return fig


def decision_curve_figure(p_t, model, treat_all, *, current=None) -> go.Figure:
    """Net benefit against threshold probability (Vickers & Elkin 2006)."""
    fig = go.Figure()
    fig.add_trace(go.Scatter(x=p_t, y=model, mode="lines", name="Model", line=dict(color=PALETTE["blue"], width=2)))
    fig.add_trace(go.Scatter(x=p_t, y=treat_all, mode="lines", name="Treat all",
                             line=dict(color=PALETTE["vermillion"], dash="dash")))
    fig.add_trace(go.Scatter(x=[min(p_t), max(p_t)], y=[0, 0], mode="lines", name="Treat none",
                             line=dict(color=PALETTE["grey"], dash="dot")))
    if current is not None:
        fig.add_vline(x=float(current), line=dict(color=PALETTE["black"], width=2))
    ymax = float(np.nanmax(model)) if np.size(model) else 0.0
    _layout(fig, "Decision curve", "Threshold probability", "Net benefit (true positives per case, net)")
    fig.update_yaxes(range=[-0.1 * max(ymax, 1e-3), 1.15 * max(ymax, 1e-3)])
    return fig


def flags_per_period_figure(periods, flagged, *, capacity=None, period: str = "day") -> go.Figure:
    """Flagged cases in each period at the current threshold, with the capacity line."""
    fig = go.Figure()
    fig.add_trace(go.Bar(x=periods, y=flagged, name=f"Flagged per {period}",
                         marker=dict(color=PALETTE["blue"])))
    if capacity is not None:
        fig.add_hline(y=float(capacity), line=dict(color=PALETTE["vermillion"], dash="dash", width=2),
                      annotation_text=f"capacity {capacity:,.0f}", annotation_position="top left")
    _layout(fig, f"Flagged cases per {period}", period.capitalize(), f"Flagged cases per {period}",
            height=340)
    return fig
