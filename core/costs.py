"""What errors cost: expected cost, cost-ratio sensitivity, net benefit.

Expected cost per case at deployment prevalence pi, with the costs of a
false positive C_FP, a false negative C_FN and of correct decisions C_TP,
C_TN (label shift: TPR and FPR carry over from the validation data)::

    cost = C_FN pi (1 - TPR) + C_FP (1 - pi) FPR + C_TP pi TPR + C_TN (1 - pi) (1 - FPR)

With case-dependent miss costs a_i (e.g. an invoice amount), C_FN (1 - TPR)
becomes the (weighted) sum of the *missed* events' a_i over the (weighted)
event total -- a cumulative sum over the sorted scores kept by the curve
(``event_cost_flagged`` / ``event_cost_total``), no loop. Per period = per
case x cases per period.

Only differences of costs move the optimum: up to a constant,
cost / (C_FP - C_TN) = (1 - pi) FPR - r pi TPR with the *cost ratio*
r = (C_FN - C_TP) / (C_FP - C_TN), so every point's cost is a line in r.
With case-dependent costs the ratio is the mean miss cost over
(C_FP - C_TN), the amounts scaled together, and pi TPR is replaced by pi
times the share of the miss cost caught. The range of ratios over which a
point is cost-optimal (its *implied cost ratio*) is where its line lies on
the lower envelope of all lines.

References: Elkan, "The foundations of cost-sensitive learning", IJCAI 2001
(the cost-derived threshold and its prior-shift correction; from memory);
Vickers & Elkin, "Decision curve analysis", Med Decis Making 2006 (net
benefit; from memory).
"""

from __future__ import annotations

import numpy as np
import pandas as pd

__all__ = [
    "expected_cost",
    "cost_lines",
    "cost_ratio_grid",
    "cost_ratio_sensitivity",
    "implied_cost_ratio",
    "net_benefit",
    "treat_all_net_benefit",
    "decision_curve",
    "cost_derived_threshold",
    "prior_shift_probability",
    "prior_shift_threshold",
    "TIE_RTOL",
]

#: Relative tolerance below which two objective values count as tied.
TIE_RTOL = 1e-12


def _rates(curve):
    with np.errstate(invalid="ignore", divide="ignore"):
        return curve.tp / curve.n_events, curve.fp / curve.n_nonevents


def _pi(curve, prevalence):
    pi = curve.prevalence if prevalence is None else float(prevalence)
    if not 0.0 <= pi <= 1.0 or not np.isfinite(pi):
        raise ValueError(f"prevalence: must lie in [0, 1], got {prevalence!r}")
    return pi


def _caught_cost_share(curve) -> np.ndarray:
    """Share of the events' total miss cost that is flagged, at every point."""
    if curve.event_cost_flagged is None:
        raise ValueError("this curve has no per-case miss costs (sweep(..., event_cost=...))")
    total = curve.event_cost_total
    with np.errstate(invalid="ignore", divide="ignore"):
        return curve.event_cost_flagged / total


def expected_cost(curve, *, false_positive: float, false_negative: float | None = None,
                  true_positive: float = 0.0, true_negative: float = 0.0,
                  prevalence: float | None = None) -> np.ndarray:
    """Expected cost per case at every point of ``curve`` (see the module docstring).

    ``false_negative=None`` uses the curve's per-case miss costs: the missed
    events' summed cost over the event total, i.e. the mean miss cost of an
    event times the share of miss cost not caught. ``prevalence`` defaults to
    the validation prevalence, where the result equals the plain average
    ``(C_FN FN + C_FP FP + C_TP TP + C_TN TN) / n``.
    """
    pi = _pi(curve, prevalence)
    tpr, fpr = _rates(curve)
    if false_negative is None:
        miss = (curve.event_cost_total - curve.event_cost_flagged) / curve.n_events
    else:
        miss = float(false_negative) * (1.0 - tpr)
    return (pi * miss + float(false_positive) * (1.0 - pi) * fpr
            + float(true_positive) * pi * tpr + float(true_negative) * (1.0 - pi) * (1.0 - fpr))


def cost_lines(curve, *, prevalence=None, false_positive=1.0, true_positive=0.0, true_negative=0.0,
               case_dependent=False):
    """Each point's cost as a line in the cost ratio r: ``(a, b)`` with cost ~ a + r b.

    ``cost / (C_FP - C_TN) = const + a + r b`` where ``a = (1 - pi) FPR``
    (+ ``pi TPR C_TP / (C_FP - C_TN)`` with case-dependent costs) and
    ``b = -pi TPR`` (``-pi x caught cost share`` with case-dependent costs).
    """
    pi = _pi(curve, prevalence)
    d = float(false_positive) - float(true_negative)
    if not d > 0:
        raise ValueError("false_positive must exceed true_negative for a cost ratio to exist")
    tpr, fpr = _rates(curve)
    a = (1.0 - pi) * fpr
    if case_dependent:
        a = a + pi * tpr * float(true_positive) / d
        b = -pi * _caught_cost_share(curve)
    else:
        b = -pi * tpr
    return a, b


def _best_index(values, candidates):
    """Index (among ``candidates``, ascending) of the least value; ties to the first."""
    v = values[candidates]
    best = np.min(v)
    tol = TIE_RTOL * max(abs(best), 0.0)
    return int(candidates[np.flatnonzero(v <= best + tol)[0]])


def cost_ratio_grid(low: float = 1.0, high: float = 1000.0, per_decade: int = 10) -> np.ndarray:
    """Log-spaced cost ratios from ``low`` to ``high`` (both included)."""
    n = int(round(np.log10(high / low) * per_decade)) + 1
    return np.geomspace(low, high, max(n, 2))


def cost_ratio_sensitivity(curve, *, prevalence=None, ratios=None, candidates=None,
                           false_positive=1.0, true_positive=0.0, true_negative=0.0,
                           case_dependent=False) -> pd.DataFrame:
    """The cost-optimal point at each cost ratio r = C_FN / C_FP (net of correct decisions).

    ``ratios`` defaults to 31 log-spaced values from 1 to 1,000. Only
    ``candidates`` (point indices, default the curve's event points and "flag
    none") are searched; objective ties go to fewer flags. One vectorised
    pass over the points per ratio.

    Returns
    -------
    DataFrame with ``ratio``, ``index``, ``threshold``, ``recall``, ``fpr``.
    """
    r = cost_ratio_grid() if ratios is None else np.asarray(ratios, dtype=np.float64)
    a, b = cost_lines(curve, prevalence=prevalence, false_positive=false_positive,
                      true_positive=true_positive, true_negative=true_negative,
                      case_dependent=case_dependent)
    cand = np.flatnonzero(curve.event_point_mask) if candidates is None else np.asarray(candidates)
    idx = np.array([_best_index(a + ri * b, cand) for ri in r], dtype=np.int64)  # loop over ratios
    tpr, fpr = _rates(curve)
    return pd.DataFrame({"ratio": r, "index": idx, "threshold": curve.thresholds[idx],
                         "recall": tpr[idx], "fpr": fpr[idx]})


def implied_cost_ratio(curve, index: int, *, prevalence=None, candidates=None, false_positive=1.0,
                       true_positive=0.0, true_negative=0.0, case_dependent=False):
    """Cost ratios r >= 0 at which point ``index`` is cost-optimal: ``(low, high)`` or None.

    Point k is optimal at r when a_k + r b_k <= a_j + r b_j for every other
    candidate j (see :func:`cost_lines`): points catching less (b_j > b_k)
    give ``r >= (a_k - a_j) / (b_j - b_k)``, points catching more give
    ``r <= (a_j - a_k) / (b_k - b_j)``, points catching the same must not be
    cheaper (at equal cost the one with fewer flags wins). Returns None when
    no ratio makes the point optimal (e.g. a point off the ROC convex hull,
    or a non-event point), and ``high = inf`` when every larger ratio keeps it.
    Ends are closed; at an end the point ties with a neighbour.
    """
    k = int(index)
    a, b = cost_lines(curve, prevalence=prevalence, false_positive=false_positive,
                      true_positive=true_positive, true_negative=true_negative,
                      case_dependent=case_dependent)
    cand = np.arange(curve.n_points) if candidates is None else np.asarray(candidates, dtype=np.int64)
    cand = cand[cand != k]
    ak, bk = a[k], b[k]
    aj, bj = a[cand], b[cand]
    scale = max(np.max(np.abs(a)), np.max(np.abs(b)), 1e-300)
    tol = TIE_RTOL * scale
    same = np.abs(bj - bk) <= tol
    if np.any(same & ((aj < ak - tol) | ((np.abs(aj - ak) <= tol) & (cand < k)))):
        return None
    less = (bj > bk) & ~same
    more = (bj < bk) & ~same
    with np.errstate(divide="ignore", invalid="ignore"):
        low = np.max((ak - aj[less]) / (bj[less] - bk)) if less.any() else 0.0
        high = np.min((aj[more] - ak) / (bk - bj[more])) if more.any() else np.inf
    low = max(float(low), 0.0)
    high = float(high)
    if high < 0 or low > high * (1 + 1e-9) + 1e-300:
        return None
    return low, high


def net_benefit(tp, fp, n, threshold_probability):
    """Net benefit = TP / n - FP / n x p_t / (1 - p_t) (Vickers & Elkin 2006).

    The true positives per case, less the false positives per case weighted
    by the odds of the threshold probability p_t (the exchange rate at which
    a clinician is indifferent between flagging and not). Vectorised over
    any argument; at a deployment prevalence pass the normalised cells
    (``tp = pi TPR``, ``fp = (1 - pi) FPR``, ``n = 1``).
    """
    pt = np.asarray(threshold_probability, dtype=np.float64)
    if np.any((pt <= 0) | (pt >= 1)):
        raise ValueError("threshold_probability: must lie strictly between 0 and 1")
    tp, fp, n = (np.asarray(x, dtype=np.float64) for x in (tp, fp, n))
    return tp / n - fp / n * pt / (1.0 - pt)


def treat_all_net_benefit(prevalence, threshold_probability):
    """Net benefit of flagging everyone: pi - (1 - pi) p_t / (1 - p_t) (Vickers & Elkin 2006)."""
    return net_benefit(prevalence, 1.0 - np.asarray(prevalence, dtype=np.float64), 1.0,
                       threshold_probability)


def decision_curve(curve, threshold_probabilities=None, *, prevalence=None) -> pd.DataFrame:
    """Net benefit against threshold probability: the model, "treat all", "treat none".

    For each p_t the model flags cases with probability >= p_t; "treat all"
    flags everyone, "treat none" nobody (net benefit 0). Needs a curve of
    probability scores (all in [0, 1], higher = riskier). ``prevalence``
    judges it at a deployment prevalence (normalised cells). Default grid:
    p_t = 0.01, 0.02, ..., 0.99.
    """
    if not curve.higher_is_riskier:
        raise ValueError("a decision curve needs probability scores where higher means riskier")
    asc = curve.distinct_scores
    if asc[0] < 0 or asc[-1] > 1:
        raise ValueError("a decision curve needs probability scores in [0, 1]")
    pt = (np.arange(1, 100) / 100.0 if threshold_probabilities is None
          else np.asarray(threshold_probabilities, dtype=np.float64))
    pi = _pi(curve, prevalence)
    d = asc.shape[0]
    idx = d - np.searchsorted(asc, pt, side="left")  # points flagging score >= p_t
    tpr, fpr = _rates(curve)
    model = net_benefit(pi * tpr[idx], (1.0 - pi) * fpr[idx], 1.0, pt)
    return pd.DataFrame({
        "threshold_probability": pt,
        "model": model,
        "treat_all": treat_all_net_benefit(pi, pt),
        "treat_none": np.zeros_like(pt),
        "index": idx,
    })


def cost_derived_threshold(false_positive: float, false_negative: float, true_positive: float = 0.0,
                           true_negative: float = 0.0) -> float:
    """Cost-optimal threshold for calibrated probabilities (Elkan, IJCAI 2001).

    Flag when p >= p* with::

        p* = (C_FP - C_TN) / ((C_FP - C_TN) + (C_FN - C_TP))

    which is C_FP / (C_FP + C_FN) when correct decisions cost nothing. At
    p = p* flagging and not flagging have equal expected cost:
    p C_TP + (1 - p) C_FP = p C_FN + (1 - p) C_TN. Holds only for calibrated
    probabilities.
    """
    d_fp = float(false_positive) - float(true_negative)
    d_fn = float(false_negative) - float(true_positive)
    if not (d_fp > 0 and d_fn > 0):
        raise ValueError("need C_FP > C_TN and C_FN > C_TP for a cost-derived threshold")
    return d_fp / (d_fp + d_fn)


def prior_shift_probability(p, from_prevalence: float, to_prevalence: float):
    """A calibrated probability moved to another prevalence (Elkan 2001, Theorem 2).

    With base rates b (calibration data) and b' (deployment), the odds scale
    by the ratio of prior odds::

        p' = b' (p - p b) / (b - p b + b' p - b b')

    equivalently odds(p') = odds(p) x odds(b') / odds(b).
    """
    p = np.asarray(p, dtype=np.float64)
    b, b2 = float(from_prevalence), float(to_prevalence)
    with np.errstate(invalid="ignore", divide="ignore"):
        out = b2 * (p - p * b) / (b - p * b + b2 * p - b * b2)
    return float(out) if out.ndim == 0 else out


def prior_shift_threshold(threshold: float, from_prevalence: float, to_prevalence: float) -> float:
    """The score threshold (on the calibration data's scale) matching ``threshold`` at deployment.

    Scores calibrated at prevalence ``from_prevalence`` are flagged when
    their deployment probability (:func:`prior_shift_probability`) reaches
    ``threshold``; the matching cut on the original scale is the inverse
    shift, i.e. :func:`prior_shift_probability` from deployment back to the
    calibration prevalence.
    """
    return float(prior_shift_probability(threshold, to_prevalence, from_prevalence))
