"""Metrics over confusion counts, vectorised, with 0/0 as NaN.

Every function takes the four (weighted) cells of the confusion matrix as
arrays or scalars -- ``tp``, ``fp``, ``fn``, ``tn`` -- and returns an array of
the same shape. A ratio whose denominator is zero is undefined and returned as
NaN, never silently 0 or 1 (scikit-learn returns 0 for F1 and MCC there; the
tests state that mapping).

Deployment prevalence
---------------------
Sensitivity (TPR) and the false-positive rate carry over to a population
whose prevalence ``pi`` differs from the validation set (the label-shift
assumption). Every prevalence-dependent metric is then recomputed by Bayes'
rule from the *normalised* cells

    tp' = pi * TPR,        fn' = pi * (1 - TPR),
    fp' = (1 - pi) * FPR,  tn' = (1 - pi) * (1 - FPR),

which :func:`cells_at_prevalence` returns; feeding them to the same formulas
gives precision (PPV), NPV, flag rate, accuracy, F-beta, MCC, lift and the
number needed to evaluate at ``pi``.
"""

from __future__ import annotations

import numpy as np

__all__ = [
    "METRIC_NAMES",
    "METRIC_LABELS",
    "precision",
    "recall",
    "specificity",
    "false_positive_rate",
    "negative_predictive_value",
    "accuracy",
    "balanced_accuracy",
    "fbeta",
    "matthews_corrcoef",
    "youden_j",
    "flag_rate",
    "number_needed_to_evaluate",
    "lift",
    "cells_at_prevalence",
    "confusion_metrics",
]

#: Canonical metric keys, in display order.
METRIC_NAMES = (
    "precision", "recall", "specificity", "fpr", "npv", "accuracy", "balanced_accuracy",
    "f1", "fbeta", "mcc", "youden_j", "flag_rate", "flagged_per_1000", "nne", "lift",
)

#: Label and one-line formula of each metric, for tiles and tables.
METRIC_LABELS = {
    "precision": ("Precision (PPV)", "TP / (TP + FP): share of flagged cases that are events"),
    "recall": ("Recall (sensitivity)", "TP / (TP + FN): share of events that are flagged"),
    "specificity": ("Specificity", "TN / (TN + FP): share of non-events left unflagged"),
    "fpr": ("False-positive rate", "FP / (FP + TN) = 1 - specificity"),
    "npv": ("NPV", "TN / (TN + FN): share of unflagged cases that are non-events"),
    "accuracy": ("Accuracy", "(TP + TN) / all cases: misleading when events are rare"),
    "balanced_accuracy": ("Balanced accuracy", "(recall + specificity) / 2"),
    "f1": ("F1", "2 TP / (2 TP + FP + FN)"),
    "fbeta": ("F-beta", "(1 + b^2) TP / ((1 + b^2) TP + b^2 FN + FP)"),
    "mcc": ("MCC", "(TP TN - FP FN) / sqrt((TP+FP)(TP+FN)(TN+FP)(TN+FN))"),
    "youden_j": ("Youden's J", "recall + specificity - 1"),
    "flag_rate": ("Flag rate", "(TP + FP) / all cases"),
    "flagged_per_1000": ("Flagged per 1,000", "1,000 x flag rate"),
    "nne": ("Number needed to evaluate", "1 / precision (number needed to evaluate): flagged cases reviewed per event found"),
    "lift": ("Lift", "precision / prevalence"),
}


def _ratio(num, den):
    """num / den elementwise with 0/0 -> NaN (and x/0 -> inf for x > 0)."""
    num = np.asarray(num, dtype=np.float64)
    den = np.asarray(den, dtype=np.float64)
    with np.errstate(divide="ignore", invalid="ignore"):
        return np.divide(num, den)


def precision(tp, fp):
    """Precision (PPV) = TP / (TP + FP); NaN when nothing is flagged."""
    return _ratio(tp, np.add(tp, fp))


def recall(tp, fn):
    """Recall (sensitivity, TPR) = TP / (TP + FN); NaN without events."""
    return _ratio(tp, np.add(tp, fn))


def specificity(fp, tn):
    """Specificity (TNR) = TN / (TN + FP); NaN without non-events."""
    return _ratio(tn, np.add(tn, fp))


def false_positive_rate(fp, tn):
    """FPR = FP / (FP + TN) = 1 - specificity."""
    return _ratio(fp, np.add(fp, tn))


def negative_predictive_value(fn, tn):
    """NPV = TN / (TN + FN); NaN when every case is flagged."""
    return _ratio(tn, np.add(tn, fn))


def accuracy(tp, fp, fn, tn):
    """Accuracy = (TP + TN) / (TP + FP + FN + TN)."""
    return _ratio(np.add(tp, tn), np.add(np.add(tp, fp), np.add(fn, tn)))


def balanced_accuracy(tp, fp, fn, tn):
    """Balanced accuracy = (recall + specificity) / 2."""
    return (recall(tp, fn) + specificity(fp, tn)) / 2.0


def fbeta(tp, fp, fn, beta=1.0):
    """F-beta = (1 + b^2) TP / ((1 + b^2) TP + b^2 FN + FP); NaN when TP = FP = FN = 0.

    Equals the weighted harmonic mean of precision and recall; beta > 1 favours
    recall. scikit-learn's ``fbeta_score`` gives 0 where this gives NaN.
    """
    b2 = float(beta) ** 2
    tp = np.asarray(tp, dtype=np.float64)
    return _ratio((1.0 + b2) * tp, (1.0 + b2) * tp + b2 * np.asarray(fn, dtype=np.float64)
                  + np.asarray(fp, dtype=np.float64))


def matthews_corrcoef(tp, fp, fn, tn):
    """MCC = (TP TN - FP FN) / sqrt((TP+FP)(TP+FN)(TN+FP)(TN+FN)).

    NaN when any margin is zero (flag none, flag all); scikit-learn gives 0.
    """
    tp, fp, fn, tn = (np.asarray(a, dtype=np.float64) for a in (tp, fp, fn, tn))
    den = np.sqrt((tp + fp) * (tp + fn) * (tn + fp) * (tn + fn))
    return _ratio(tp * tn - fp * fn, den)


def youden_j(tp, fp, fn, tn):
    """Youden's J = sensitivity + specificity - 1 (Youden, Cancer 1950)."""
    return recall(tp, fn) + specificity(fp, tn) - 1.0


def flag_rate(tp, fp, fn, tn):
    """Share of all cases flagged: (TP + FP) / n."""
    return _ratio(np.add(tp, fp), np.add(np.add(tp, fp), np.add(fn, tn)))


def number_needed_to_evaluate(tp, fp):
    """NNE = 1 / precision: flagged cases reviewed per event found.

    NaN when nothing is flagged; +inf when flagged cases hold no event.
    """
    return _ratio(np.add(tp, fp), tp)


def lift(tp, fp, fn, tn):
    """Lift = precision / prevalence."""
    return _ratio(precision(tp, fp), _ratio(np.add(tp, fn), np.add(np.add(tp, fp), np.add(fn, tn))))


def cells_at_prevalence(tp, fp, fn, tn, prevalence):
    """Normalised confusion cells at deployment prevalence ``pi`` (label shift).

    Returns ``(tp', fp', fn', tn')`` summing to one, with TPR and FPR of the
    validation counts kept: ``tp' = pi TPR``, ``fp' = (1 - pi) FPR`` and so on.
    """
    pi = float(prevalence)
    if not 0.0 <= pi <= 1.0 or not np.isfinite(pi):
        raise ValueError(f"prevalence: must lie in [0, 1], got {prevalence!r}")
    tpr = recall(tp, fn)
    fpr = false_positive_rate(fp, tn)
    return pi * tpr, (1.0 - pi) * fpr, pi * (1.0 - tpr), (1.0 - pi) * (1.0 - fpr)


def confusion_metrics(tp, fp, fn, tn, *, prevalence=None, beta=1.0) -> dict[str, np.ndarray]:
    """Every metric of :data:`METRIC_NAMES` from the four cells.

    With ``prevalence`` the prevalence-dependent metrics are judged at that
    deployment prevalence (see the module docstring); recall, specificity,
    FPR, balanced accuracy and Youden's J do not depend on it.
    """
    if prevalence is not None:
        tp, fp, fn, tn = cells_at_prevalence(tp, fp, fn, tn, prevalence)
    out = {
        "precision": precision(tp, fp),
        "recall": recall(tp, fn),
        "specificity": specificity(fp, tn),
        "fpr": false_positive_rate(fp, tn),
        "npv": negative_predictive_value(fn, tn),
        "accuracy": accuracy(tp, fp, fn, tn),
        "balanced_accuracy": balanced_accuracy(tp, fp, fn, tn),
        "f1": fbeta(tp, fp, fn, 1.0),
        "fbeta": fbeta(tp, fp, fn, beta),
        "mcc": matthews_corrcoef(tp, fp, fn, tn),
        "youden_j": youden_j(tp, fp, fn, tn),
        "flag_rate": flag_rate(tp, fp, fn, tn),
        "nne": number_needed_to_evaluate(tp, fp),
        "lift": lift(tp, fp, fn, tn),
    }
    out["flagged_per_1000"] = 1000.0 * out["flag_rate"]
    return {k: out[k] for k in METRIC_NAMES}
