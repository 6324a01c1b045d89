"""Static figures of the threshold memo, drawn from a decision record (PNG bytes).

Drawn with matplotlib's object API only -- a :class:`matplotlib.figure.Figure`
on a :class:`~matplotlib.backends.backend_agg.FigureCanvasAgg` -- so no global
pyplot state is touched and the app's server can draw them from any thread.
Every figure reads the record's ``curves`` (downsampled curve points, the
bootstrap bands, flags per period), so a record loaded later draws the same
pictures. Text uses matplotlib's bundled DejaVu Sans (it has ≥, π and −).

:data:`FIGURES` maps each figure name used by :mod:`core.memo_content` to its
builder; :func:`figure_png` draws one.
"""

from __future__ import annotations

import io
import math

import numpy as np
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.figure import Figure

__all__ = ["FIGURES", "figure_png", "available_figures"]

_DPI = 150
_POINT = "#c0392b"
_LINE = "#1f4e79"
_BAND = "#9ab7d3"
_GREY = "#7f7f7f"


def _arr(values) -> np.ndarray:
    return np.array([np.nan if v is None else (math.inf if v == "inf" else
                                               (-math.inf if v == "-inf" else v))
                     for v in values], dtype=np.float64)


def _threshold(record) -> float:
    t = record["threshold"]
    return math.inf if t == "inf" else (-math.inf if t == "-inf" else float(t))


def _new(width_in: float, height_in: float):
    fig = Figure(figsize=(width_in, height_in), dpi=_DPI)
    FigureCanvasAgg(fig)
    fig.set_layout_engine("constrained")
    return fig


def _png(fig) -> bytes:
    buf = io.BytesIO()
    fig.savefig(buf, format="png", dpi=_DPI)
    return buf.getvalue()


def _pr_roc(record) -> bytes:
    pts = record["curves"]["points"]
    bands = record["curves"].get("bands") or {}
    tpr, fpr = _arr(pts["tpr"]), _arr(pts["fpr"])
    prec_v = _arr(pts["precision_validation"])
    prec_d = _arr(pts["precision_deployment"])
    m = record["metrics"]
    v = m["validation"]
    d = m["deployment"]
    fig = _new(7.2, 3.3)
    ax1, ax2 = fig.subplots(1, 2)
    if "roc" in bands:
        b = bands["roc"]
        ax1.fill_between(_arr(b["grid"]), _arr(b["low"]), _arr(b["high"]), color=_BAND, alpha=0.5,
                         linewidth=0, label="95 % bootstrap band")
    ax1.plot(fpr, tpr, color=_LINE, linewidth=1.4, label="ROC")
    ax1.plot([0, 1], [0, 1], color=_GREY, linewidth=0.8, linestyle=":")
    ax1.plot([v["fpr"]["value"]], [v["recall"]["value"]], "o", color=_POINT, markersize=6,
             label="operating point")
    auc = record["curves"].get("roc_auc")
    ax1.set_title(f"ROC (AUC {auc:.3f})" if auc is not None else "ROC", fontsize=9)
    ax1.set_xlabel("False-positive rate (1 − specificity)", fontsize=8)
    ax1.set_ylabel("Recall (sensitivity)", fontsize=8)
    ax1.set_xlim(0, 1)
    ax1.set_ylim(0, 1.01)
    ax1.legend(fontsize=7, loc="lower right", frameon=False)
    if "pr" in bands:
        b = bands["pr"]
        ax2.fill_between(_arr(b["grid"]), _arr(b["low"]), _arr(b["high"]), color=_BAND, alpha=0.5,
                         linewidth=0, label="95 % band (validation)")
    ok = ~np.isnan(prec_v)
    ax2.plot(tpr[ok], prec_v[ok], color=_LINE, linewidth=1.4, label="validation")
    pi = m["deployment_prevalence"]
    if abs(pi - m["validation_prevalence"]) > 1e-12 * max(pi, 1e-300):
        okd = ~np.isnan(prec_d)
        ax2.plot(tpr[okd], prec_d[okd], color="#e08e0b", linewidth=1.2, linestyle="--",
                 label=f"at π = {100 * pi:.2f} %")
    ax2.axhline(m["validation_prevalence"], color=_GREY, linewidth=0.8, linestyle=":",
                label="baseline (prevalence)")
    ax2.plot([d["recall"]["value"]], [d["precision"]["value"]], "o", color=_POINT, markersize=6,
             label="operating point (at π)")
    ax2.set_title("Precision–recall", fontsize=9)
    ax2.set_xlabel("Recall", fontsize=8)
    ax2.set_ylabel("Precision (PPV)", fontsize=8)
    ax2.set_xlim(0, 1)
    ax2.set_ylim(0, 1.01)
    ax2.legend(fontsize=7, loc="upper right", frameon=False)
    for ax in (ax1, ax2):
        ax.tick_params(labelsize=7)
        ax.grid(alpha=0.25, linewidth=0.5)
    return _png(fig)


def _cost(record) -> bytes:
    pts = record["curves"]["points"]
    th = _arr(pts["threshold"])
    cost = _arr(pts["cost_per_case"])
    ok = np.isfinite(th) & np.isfinite(cost)
    th, cost = th[ok], cost[ok]
    order = np.argsort(th)
    fig = _new(7.2, 2.8)
    ax = fig.subplots()
    ax.plot(th[order], cost[order], color=_LINE, linewidth=1.3, drawstyle="steps-post")
    t = _threshold(record)
    c = record["metrics"]["expected_cost"]
    op = "≥" if record["higher_is_riskier"] else "≤"
    if math.isfinite(t):
        ax.axvline(t, color=_POINT, linewidth=1.0, linestyle="--")
        ax.plot([t], [c["per_case"]], "o", color=_POINT, markersize=6,
                label=f"flag when score {op} {t!r}")
        ax.legend(fontsize=7, frameon=False)
    if th.size and th.min() > 0 and th.max() / max(th.min(), 1e-300) > 1e3:
        ax.set_xscale("log")
    unit = c.get("unit") or "cost units"
    ax.set_xlabel(f"Threshold ({record['data']['score_column']})", fontsize=8)
    ax.set_ylabel(f"Expected cost per case ({unit})", fontsize=8)
    ax.set_title("Expected cost against the threshold, at the deployment prevalence", fontsize=9)
    ax.tick_params(labelsize=7)
    ax.grid(alpha=0.25, linewidth=0.5)
    return _png(fig)


def _flags(record) -> bytes:
    per = record["curves"].get("flags_per_period") or {}
    fig = _new(7.2, 2.6)
    ax = fig.subplots()
    if per.get("flagged"):
        y = _arr(per["flagged"])
        x = np.arange(y.size)
        ax.bar(x, y, width=1.0, color=_BAND, edgecolor=_LINE, linewidth=0.3)
        if per.get("capacity") is not None:
            ax.axhline(per["capacity"], color=_POINT, linewidth=1.0, linestyle="--",
                       label=f"capacity {per['capacity']:,.0f}")
            ax.legend(fontsize=7, frameon=False, loc="lower right")
        starts = per.get("starts") or []
        if starts:
            ticks = np.linspace(0, y.size - 1, min(6, y.size)).round().astype(int)
            ax.set_xticks(ticks)
            ax.set_xticklabels([starts[i][:10] for i in ticks], fontsize=7)
        ax.set_xlim(-0.5, y.size - 0.5)
    else:
        ax.text(0.5, 0.5, per.get("note", "no per-period series"), ha="center", va="center",
                transform=ax.transAxes, fontsize=8)
    ax.set_ylabel(f"Flagged per {per.get('period', 'period')}", fontsize=8)
    ax.set_title(f"Flagged cases per {per.get('period', 'period')} at the threshold "
                 "(scaled to deployment volume and prevalence)", fontsize=9)
    ax.tick_params(labelsize=7)
    ax.grid(alpha=0.25, linewidth=0.5, axis="y")
    return _png(fig)


def _subgroups(record) -> bytes:
    """Recall by subgroup with its interval, from the record's ``groups`` section."""
    rows = [r for r in (record["groups"].get("rows") or [])
            if r.get("values", {}).get("recall", {}).get("estimate") is not None]
    fig = _new(7.2, max(1.8, 0.3 * len(rows) + 1.0))
    ax = fig.subplots()
    if rows:
        labels = [f"{r['column']}: {r['group']}" for r in rows]
        y = np.arange(len(rows))
        rec = _arr([r["values"]["recall"]["estimate"] for r in rows])
        lo = _arr([r["values"]["recall"]["low"] for r in rows])
        hi = _arr([r["values"]["recall"]["high"] for r in rows])
        err = np.vstack([np.nan_to_num(rec - lo), np.nan_to_num(hi - rec)])
        ax.errorbar(rec, y, xerr=err, fmt="o", color=_LINE, ecolor=_BAND, elinewidth=2.5,
                    capsize=2, markersize=4)
        overall = record["metrics"]["validation"]["recall"]["value"]
        ax.axvline(overall, color=_POINT, linewidth=1.0, linestyle="--",
                   label=f"all cases {100 * overall:.1f} %")
        tol = (record["fairness"] or {}).get("tolerance")
        if tol is not None and (record["fairness"] or {}).get("metric") == "recall":
            ax.axvspan(overall - tol, overall + tol, color=_POINT, alpha=0.07,
                       label=f"±{100 * tol:.1f} % of all cases")
        ax.set_yticks(y)
        ax.set_yticklabels(labels, fontsize=7)
        ax.invert_yaxis()
        lo_x = np.nanmin(np.concatenate([lo, [overall]]))
        ax.set_xlim(max(0.0, lo_x - 0.1), 1.0)
        ax.legend(fontsize=7, frameon=False, loc="lower left")
    ax.set_xlabel("Recall with 95 % interval", fontsize=8)
    ax.set_title("Recall by subgroup at the threshold", fontsize=9)
    ax.tick_params(labelsize=7)
    ax.grid(alpha=0.25, linewidth=0.5, axis="x")
    return _png(fig)


#: Figure name -> builder(record) -> PNG bytes.
FIGURES = {"pr_roc": _pr_roc, "cost": _cost, "flags_per_period": _flags, "subgroups": _subgroups}


def available_figures(record: dict) -> list[str]:
    """The figures this record has the data for."""
    out = ["pr_roc"]
    if record["curves"]["points"].get("cost_per_case") is not None:
        out.append("cost")
    if (record["curves"].get("flags_per_period") or {}).get("flagged"):
        out.append("flags_per_period")
    if record["groups"].get("status") == "computed" and record["groups"].get("rows"):
        out.append("subgroups")
    return out


def figure_png(record: dict, name: str) -> bytes:
    """PNG bytes of one figure of the memo (see :data:`FIGURES`)."""
    if name not in FIGURES:
        raise KeyError(f"unknown figure {name!r}; the figures are {', '.join(FIGURES)}")
    return FIGURES[name](record)
