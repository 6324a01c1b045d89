"""Confidence intervals and one-sided bounds for proportions and predictive values.

Small vectorised functions: every argument may be a scalar or an array and
the results broadcast. Counts may be weighted (non-integer); with sampling
weights pass the proportion times Kish's effective size as ``successes`` and
the effective size as ``trials`` (see :func:`kish_effective_size`).

``sided`` selects what is returned as ``(low, high)``:

* ``"two"`` -- a two-sided interval at ``confidence`` (each tail ``(1 - c) / 2``);
* ``"lower"`` -- a one-sided lower bound at ``confidence`` (``high`` is the
  top of the parameter's range, 1 for a proportion);
* ``"upper"`` -- a one-sided upper bound (``low`` is 0).

A one-sided bound at confidence ``c`` equals the matching end of the
two-sided interval at confidence ``2 c - 1``. Where a proportion has no
trials (0/0) both ends are NaN, never silently 0 or 1.

References: Wilson (JASA 1927); Clopper & Pearson (Biometrika 1934); both
compared in Newcombe (Stat Med 1998), reference implementation statsmodels
``proportion_confint``. Mercaldo, Lau & Zhou (Stat Med 2007) for PPV / NPV at
a given prevalence. Kish, *Survey Sampling* (1965) for the effective size.
"""

from __future__ import annotations

import numpy as np
from scipy import stats

__all__ = [
    "SIDES",
    "normal_quantile",
    "wilson_interval",
    "clopper_pearson_interval",
    "kish_effective_size",
    "effective_size_from_sums",
    "ppv_logit_interval",
    "npv_logit_interval",
    "flag_rate_interval",
    "METHOD_NAMES",
]

SIDES = ("two", "lower", "upper")

#: Short human-readable name of each method, for tables, memos and records.
METHOD_NAMES = {
    "wilson": "Wilson score interval",
    "clopper_pearson": "Clopper-Pearson exact interval",
    "ppv_logit": "adjusted logit interval for PPV at the deployment prevalence "
                 "(Mercaldo, Lau & Zhou 2007)",
    "npv_logit": "adjusted logit interval for NPV at the deployment prevalence "
                 "(Mercaldo, Lau & Zhou 2007)",
    "flag_rate": "Wald interval (delta method) for pi*TPR + (1-pi)*FPR on adjusted rates",
}


def _check_confidence(confidence) -> float:
    c = float(confidence)
    if not (0.0 < c < 1.0) or not np.isfinite(c):
        raise ValueError(f"confidence: must lie strictly between 0 and 1, got {confidence!r}")
    return c


def _check_sided(sided: str) -> str:
    if sided not in SIDES:
        raise ValueError(f"sided: must be one of {', '.join(SIDES)}, got {sided!r}")
    return sided


def normal_quantile(confidence: float, sided: str = "two") -> float:
    """The standard-normal critical value z for ``confidence``.

    ``z = Phi^-1(1 - (1 - c) / 2)`` for a two-sided interval and
    ``z = Phi^-1(c)`` for a one-sided bound (1.96 and 1.645 at c = 0.95).
    """
    c = _check_confidence(confidence)
    _check_sided(sided)
    tail = (1.0 - c) / 2.0 if sided == "two" else 1.0 - c
    return float(stats.norm.isf(tail))


def _tail(confidence: float, sided: str) -> float:
    c = _check_confidence(confidence)
    _check_sided(sided)
    return (1.0 - c) / 2.0 if sided == "two" else 1.0 - c


def _as_float(*arrays):
    return tuple(np.asarray(a, dtype=np.float64) for a in arrays)


def _finish(low, high, sided):
    low = np.asarray(low, dtype=np.float64)
    high = np.asarray(high, dtype=np.float64)
    nan = np.isnan(low) | np.isnan(high)
    if sided == "lower":
        high = np.where(nan, np.nan, 1.0)
    elif sided == "upper":
        low = np.where(nan, np.nan, 0.0)
    low = np.where(nan, np.nan, low)
    high = np.where(nan, np.nan, high)
    if low.ndim == 0:
        return float(low), float(high)
    return low, high


def _check_counts(successes, trials):
    x, n = _as_float(successes, trials)
    with np.errstate(invalid="ignore"):
        bad = (x < 0) | (n < 0) | (x > n * (1 + 1e-12) + 1e-12) | ~np.isfinite(x) | ~np.isfinite(n)
    if np.any(bad):
        raise ValueError("successes and trials: need 0 <= successes <= trials, both finite")
    return np.minimum(x, n), n


def wilson_interval(successes, trials, confidence: float = 0.95, *, sided: str = "two"):
    """Wilson score interval for a binomial proportion.

    With ``p = x / n`` and the critical value z (see :func:`normal_quantile`)::

        centre = (p + z^2 / (2 n)) / (1 + z^2 / n)
        half   = z / (1 + z^2 / n) * sqrt(p (1 - p) / n + z^2 / (4 n^2))
        (low, high) = (centre - half, centre + half)

    The interval always contains ``p`` and stays inside [0, 1] (clipped for
    float rounding); ``low = 0`` when ``x = 0`` and ``high = 1`` when
    ``x = n``. Weighted or effective counts may be non-integer. ``n = 0`` gives
    NaN. The lower bound increases with ``x`` at fixed ``n``.

    Reference: Wilson, JASA 1927; Newcombe, Stat Med 1998 (method 3);
    statsmodels ``proportion_confint(method="wilson")``.

    Returns
    -------
    (low, high) : floats or arrays
    """
    x, n = _check_counts(successes, trials)
    z = normal_quantile(confidence, sided)
    with np.errstate(divide="ignore", invalid="ignore"):
        p = x / n
        z2n = z * z / n
        centre = (p + z2n / 2.0) / (1.0 + z2n)
        half = z / (1.0 + z2n) * np.sqrt(np.maximum(p * (1.0 - p) / n + z2n / (4.0 * n), 0.0))
    low = np.clip(centre - half, 0.0, 1.0)
    high = np.clip(centre + half, 0.0, 1.0)
    low = np.where(x <= 0, 0.0, low)
    high = np.where(x >= n, 1.0, high)
    zero = n <= 0
    low = np.where(zero, np.nan, low)
    high = np.where(zero, np.nan, high)
    return _finish(low, high, sided)


def clopper_pearson_interval(successes, trials, confidence: float = 0.95, *, sided: str = "two"):
    """Clopper-Pearson ("exact") interval for a binomial proportion.

    With tail probability a (``(1 - c) / 2`` two-sided, ``1 - c`` one-sided)::

        low  = Beta^-1(a;     x,     n - x + 1)   (0 when x = 0)
        high = Beta^-1(1 - a; x + 1, n - x)       (1 when x = n)

    Guaranteed coverage at least ``confidence`` for integer counts; the
    beta quantiles accept non-integer (weighted) counts too. ``n = 0`` gives NaN.

    Reference: Clopper & Pearson, Biometrika 1934; Newcombe, Stat Med 1998
    (method 5); statsmodels ``proportion_confint(method="beta")``.
    """
    x, n = _check_counts(successes, trials)
    a = _tail(confidence, sided)
    with np.errstate(divide="ignore", invalid="ignore"):
        low = stats.beta.ppf(a, np.maximum(x, 1e-300), np.maximum(n - x + 1.0, 1e-300))
        high = stats.beta.isf(a, np.maximum(x + 1.0, 1e-300), np.maximum(n - x, 1e-300))
    low = np.where(x <= 0, 0.0, low)
    high = np.where(x >= n, 1.0, high)
    zero = n <= 0
    low = np.where(zero, np.nan, low)
    high = np.where(zero, np.nan, high)
    return _finish(low, high, sided)


def kish_effective_size(weights, axis=None):
    """Kish's effective sample size ``(sum w)^2 / sum w^2``.

    Equals the number of cases for equal weights and shrinks as weights get
    unequal; use it as the ``trials`` of a proportion's interval when the
    weights are sampling weights (inverse selection probabilities). Frequency
    weights (a row standing for w identical cases) need no correction: the
    summed weight is the size. All weights zero gives NaN.

    Reference: Kish, *Survey Sampling*, Wiley 1965.
    """
    w = np.asarray(weights, dtype=np.float64)
    return effective_size_from_sums(w.sum(axis=axis), (w * w).sum(axis=axis))


def effective_size_from_sums(sum_w, sum_w2):
    """Kish's effective size from the sums of weights and of squared weights.

    ``n_eff = sum_w^2 / sum_w2``; 0/0 is NaN. Vectorised, so cumulative sums
    (e.g. a curve's ``tp`` and ``tp_sq``) give the effective size at every point.
    """
    s, s2 = _as_float(sum_w, sum_w2)
    with np.errstate(divide="ignore", invalid="ignore"):
        out = np.where(s2 > 0, s * s / s2, np.nan)
    return float(out) if out.ndim == 0 else out


def _rates(tp, fn, fp, tn, n_events, n_nonevents, z, adjusted):
    """Sensitivity and specificity with their (effective) sizes, optionally adjusted.

    The adjustment adds z^2 / 2 successes and z^2 / 2 failures to each
    proportion: ``(x + z^2/2) / (n + z^2)``.
    """
    tp, fn, fp, tn = _as_float(tp, fn, fp, tn)
    with np.errstate(divide="ignore", invalid="ignore"):
        se = tp / (tp + fn)
        sp = tn / (tn + fp)
    n1 = tp + fn if n_events is None else np.asarray(n_events, dtype=np.float64)
    n0 = fp + tn if n_nonevents is None else np.asarray(n_nonevents, dtype=np.float64)
    if adjusted:
        c = z * z
        se = (se * n1 + c / 2.0) / (n1 + c)
        sp = (sp * n0 + c / 2.0) / (n0 + c)
        n1 = n1 + c
        n0 = n0 + c
    return se, sp, n1, n0


def _check_prevalence(prevalence):
    pi = np.asarray(prevalence, dtype=np.float64)
    if np.any(~np.isfinite(pi) | (pi <= 0) | (pi >= 1)):
        raise ValueError(f"prevalence: must lie strictly between 0 and 1, got {prevalence!r}")
    return pi


def _logit_interval(logit, var, z, sided):
    with np.errstate(invalid="ignore", over="ignore"):
        se = np.sqrt(var)
        lo = 1.0 / (1.0 + np.exp(-(logit - z * se)))
        hi = 1.0 / (1.0 + np.exp(-(logit + z * se)))
    bad = ~np.isfinite(logit) | ~np.isfinite(var)
    lo = np.where(bad, np.nan, lo)
    hi = np.where(bad, np.nan, hi)
    return _finish(lo, hi, sided)


def ppv_logit_interval(tp, fn, fp, tn, prevalence, confidence: float = 0.95, *, sided: str = "two",
                       adjusted: bool = True, n_events=None, n_nonevents=None):
    """Interval for PPV (precision) at a given prevalence, logit scale.

    With sensitivity Se = TP / (TP + FN) on n1 events, specificity
    Sp = TN / (TN + FP) on n0 non-events and the deployment prevalence pi
    (taken as known)::

        logit PPV     = log(pi Se / ((1 - pi) (1 - Sp)))
        Var(logit PPV) = (1 - Se) / (Se n1) + Sp / ((1 - Sp) n0)      (delta method)
        interval      = expit(logit PPV -/+ z sqrt(Var))

    ``adjusted=True`` (the default) first replaces each proportion by
    ``(x + z^2/2) / (n + z^2)`` and n by ``n + z^2``, so the interval exists
    when Se = 0 or Sp = 1 and its lower bound falls strictly as false
    positives grow at fixed true positives; ``adjusted=False`` is the standard
    logit interval (NaN where Se = 0 or Sp = 1). The unadjusted centre equals
    Bayes' rule ``pi Se / (pi Se + (1 - pi)(1 - Sp))``.

    ``n_events`` / ``n_nonevents`` override the sizes (Kish's effective size
    for sampling weights); the proportions still come from the counts.

    Reference: Mercaldo, Lau & Zhou, "Confidence intervals for predictive
    values with an emphasis to case-control studies", Stat Med 2007 (from
    memory: the logit transform with delta-method variance and the
    z^2 / 2 adjustment).
    """
    pi = _check_prevalence(prevalence)
    z = normal_quantile(confidence, sided)
    se, sp, n1, n0 = _rates(tp, fn, fp, tn, n_events, n_nonevents, z, adjusted)
    with np.errstate(divide="ignore", invalid="ignore"):
        logit = np.log(pi * se) - np.log((1.0 - pi) * (1.0 - sp))
        var = (1.0 - se) / (se * n1) + sp / ((1.0 - sp) * n0)
    return _logit_interval(logit, var, z, sided)


def npv_logit_interval(tp, fn, fp, tn, prevalence, confidence: float = 0.95, *, sided: str = "two",
                       adjusted: bool = True, n_events=None, n_nonevents=None):
    """Interval for NPV at a given prevalence, logit scale (see :func:`ppv_logit_interval`).

    ::

        logit NPV      = log((1 - pi) Sp / (pi (1 - Se)))
        Var(logit NPV) = Se / ((1 - Se) n1) + (1 - Sp) / (Sp n0)

    Reference: Mercaldo, Lau & Zhou, Stat Med 2007 (from memory).
    """
    pi = _check_prevalence(prevalence)
    z = normal_quantile(confidence, sided)
    se, sp, n1, n0 = _rates(tp, fn, fp, tn, n_events, n_nonevents, z, adjusted)
    with np.errstate(divide="ignore", invalid="ignore"):
        logit = np.log((1.0 - pi) * sp) - np.log(pi * (1.0 - se))
        var = se / ((1.0 - se) * n1) + (1.0 - sp) / (sp * n0)
    return _logit_interval(logit, var, z, sided)


def flag_rate_interval(tp, fn, fp, tn, prevalence, confidence: float = 0.95, *, sided: str = "two",
                       n_events=None, n_nonevents=None):
    """Interval for the flag rate at a given prevalence: ``f = pi TPR + (1 - pi) FPR``.

    TPR and FPR come from independent samples (events, non-events), so by
    the delta method (exact here: f is linear in them)::

        Var(f) = pi^2 TPR (1 - TPR) / n1 + (1 - pi)^2 FPR (1 - FPR) / n0
        interval = f -/+ z sqrt(Var(f)), clipped to [0, 1]

    computed on adjusted rates ``(x + z^2/2) / (n + z^2)`` with ``n + z^2``
    (the adjustment used for linear combinations of proportions), so a point
    that flags nothing still gets a positive upper bound, and the upper bound
    rises with every false positive at fixed true positives.

    Reference: delta method for a linear combination of two independent
    binomial proportions with the z^2/2 adjustment (common practice; the same
    adjustment as Mercaldo, Lau & Zhou, Stat Med 2007).
    """
    pi = _check_prevalence(prevalence)
    z = normal_quantile(confidence, sided)
    tpr, spec, n1, n0 = _rates(tp, fn, fp, tn, n_events, n_nonevents, z, True)
    fpr = 1.0 - spec
    f = pi * tpr + (1.0 - pi) * fpr
    with np.errstate(invalid="ignore"):
        var = pi ** 2 * tpr * (1.0 - tpr) / n1 + (1.0 - pi) ** 2 * fpr * (1.0 - fpr) / n0
        half = z * np.sqrt(var)
    lo = np.clip(f - half, 0.0, 1.0)
    hi = np.clip(f + half, 0.0, 1.0)
    bad = ~np.isfinite(f) | ~np.isfinite(var)
    lo = np.where(bad, np.nan, lo)
    hi = np.where(bad, np.nan, hi)
    return _finish(lo, hi, sided)
