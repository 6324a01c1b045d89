"""Calibration of probability scores: does a score of 0.2 mean a 20 % chance?

A cost-derived threshold ``C_FP / (C_FP + C_FN)`` is right only when the
scores are calibrated probabilities; a score whose probabilities drift makes
it wrong. For scores in [0, 1] with higher meaning riskier,
:func:`calibration_report` gives, overall and for every group:

* **Reliability curve** (:func:`reliability_curve`): the scores cut into
  bins -- ``"quantile"`` (equal counts: edges at the 0, 1/B, ..., 1 quantiles
  of the scores, ``numpy.percentile`` with linear interpolation as
  scikit-learn's ``calibration_curve``; whole-number frequency weights and
  count tables count each unit as that many cases, so their edges are those
  of the cases themselves; other weights take the weighted inverted-CDF
  quantiles) or ``"uniform"`` (B equal widths on
  [0, 1]). A score on an inner edge belongs to the lower bin (ties stay
  together); empty bins are left out. Each bin has its rows, (weighted)
  cases and events, the mean score, the observed event rate and the Wilson
  interval of that rate (Kish's effective size with sampling weights; with
  clusters the bin's own design effect, never below 1, shrinks the size).
* **Brier score** (:func:`brier_score`): ``sum w (p - y)^2 / sum w``, beside
  the Brier score of always predicting the prevalence, ``pi (1 - pi)``.
* **Expected calibration error**: ``sum_b (cases_b / cases) |observed_b -
  mean score_b|`` over the reliability bins.
* **Calibration intercept and slope** (:func:`calibration_intercept_slope`;
  logistic recalibration, Cox, Biometrika 1958): the logistic regression of
  the outcome on ``L = logit(p)`` (scores clipped to ``[eps, 1 - eps]``,
  ``eps = 1e-6`` by default, so 0 and 1 have a finite logit). The *slope*
  ``b`` is that of ``logit P(y) = a + b L``; the *intercept* reported is
  **calibration-in-the-large**: ``a`` in ``logit P(y) = a + L`` (slope fixed
  at 1 by an offset), the usual definition; the two-parameter ``a`` is kept
  as ``intercept_with_slope``. Calibrated scores have slope 1 and intercept
  0; a slope below 1 means the scores are too extreme, above 1 too modest; an
  intercept above 0 means risk is underestimated on average. Fitted by
  Newton's method with step halving on the distinct scores; Wald intervals
  ``estimate -/+ z se`` with the model-based (Fisher information) standard
  errors, or with a cluster column the cluster-robust sandwich with the
  small-sample factor ``K/(K-1) (n-1)/(n-p)`` (with sampling weights and no
  clusters, each row is its own cluster; a count table with squared-weight
  sums gives the same sandwich per line, its factor taking the weighted cases
  for the row count it does not know). Reference: a logistic GLM of y on
  logit(p) (statsmodels ``GLM``, ``offset`` for the intercept).
* **Observed / expected** (:func:`observed_expected_ratio`): events over the
  sum of the scores, ``O / E``; interval: the Wilson interval of the observed
  event rate ``O / n`` divided by the mean score ``E / n`` (the scores are
  given, E is fixed), on the effective size with weights or clusters.

The criterion (:data:`CRITERION`): the scores **look calibrated** when the
``confidence`` interval of the slope contains 1 and that of the intercept
(calibration-in-the-large) contains 0, with at least 100 events (Collins et
al., Stat Med 2016: fewer cannot show miscalibration). Per group (within-group
calibration) the same rule is applied to Holm-adjusted Wald p-values of
slope = 1 and intercept = 0, two tests per group (``adjust="holm"``, Holm
1979), so that many groups do not throw up miscalibration by chance; a group
with one class only, or whose scores separate its classes, has no fit and is
reported as "cannot fit". It decides whether the
Decide page shows the cost-derived threshold as meaningful: pass
``calibrated=report.looks_calibrated`` to :func:`core.choose.choose`.
Calibration is judged on the validation cases; with a deployment prevalence
that differs, calibrated scores need the prior-shift correction that the
Decide page applies to the cost-derived threshold.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, fields

import numpy as np
from scipy.special import expit, logit

from core import intervals as _iv
from core.errors import InputError

__all__ = [
    "CRITERION",
    "DEFAULT_EPS",
    "MIN_EVENTS",
    "STRATEGIES",
    "Calibration",
    "CalibrationReport",
    "RecalibrationFit",
    "ReliabilityCurve",
    "brier_score",
    "calibration_intercept_slope",
    "calibration_report",
    "expected_calibration_error",
    "observed_expected_ratio",
    "reliability_curve",
]

STRATEGIES = ("quantile", "uniform")
DEFAULT_EPS = 1e-6
#: At least this many events to call scores calibrated (Collins et al., Stat Med 2016).
MIN_EVENTS = 100

CRITERION = (
    "The scores look calibrated when the {conf} interval of the calibration slope contains 1 "
    "and that of the calibration intercept (calibration-in-the-large, slope fixed at 1) "
    "contains 0, with at least {min_events} events (logistic recalibration, Cox 1958).")

FIT_METHOD = "logistic recalibration on logit(score) (Cox 1958), Wald interval"
_MAX_ITER = 100


def _json(obj):
    from core.choose import json_safe

    return json_safe(obj)


# --------------------------------------------------------------------------- data

class _Binomial:
    """Scores with their (weighted) events and non-events per unit (a row or a table line),
    squared weights for sampling weights, and cluster codes."""

    def __init__(self, p, e, n, *, sq=None, codes=None, n_clusters=0, rows_unweighted=False,
                 row_counts=None, is_rows=True, e_sq=None, n_sq=None):
        self.is_rows = bool(is_rows)
        self.p = np.asarray(p, dtype=np.float64)
        self.e = np.asarray(e, dtype=np.float64)
        self.n = np.asarray(n, dtype=np.float64)
        self.sq = sq  # per-unit sum of squared weights, or None
        # a count table's squared-weight sums per class (sampling weights), or None
        self.e_sq = None if e_sq is None else np.asarray(e_sq, dtype=np.float64)
        self.n_sq = None if n_sq is None else np.asarray(n_sq, dtype=np.float64)
        self.codes = codes
        self.K = int(n_clusters)
        self.rows_unweighted = bool(rows_unweighted)
        self.row_counts = (np.ones(self.p.shape[0]) if row_counts is None
                           else np.asarray(row_counts, dtype=np.float64))

    @property
    def w(self):
        return self.e + self.n

    def subset(self, mask):
        return _Binomial(self.p[mask], self.e[mask], self.n[mask],
                         sq=None if self.sq is None else self.sq[mask],
                         codes=None if self.codes is None else self.codes[mask],
                         n_clusters=self.K, rows_unweighted=self.rows_unweighted,
                         row_counts=self.row_counts[mask], is_rows=self.is_rows,
                         e_sq=None if self.e_sq is None else self.e_sq[mask],
                         n_sq=None if self.n_sq is None else self.n_sq[mask])


def _from_arrays(y_true, y_prob, sample_weight, cluster, weight_kind):
    from core.clusters import cluster_codes
    from core.curve import _check_finite, _check_labels

    y = _check_labels(y_true)
    k = y.shape[0]
    p = _check_finite("y_prob", y_prob, k)
    _check_unit("y_prob", p)
    w = None
    if sample_weight is not None:
        w = _check_finite("sample_weight", sample_weight, k, allow_negative=False)
    ww = np.ones(k) if w is None else w
    codes, K = (None, 0)
    if cluster is not None:
        codes, K = cluster_codes(cluster)
        if codes.shape[0] != k:
            raise InputError("cluster", f"has {codes.shape[0]:,} values, expected {k:,}")
    sq = ww * ww if (w is not None and weight_kind == "sampling") else None
    return _Binomial(p, np.where(y, ww, 0.0), np.where(y, 0.0, ww), sq=sq, codes=codes,
                     n_clusters=K, rows_unweighted=w is None)


def _check_unit(name, p):
    bad = (p < 0) | (p > 1)
    if bad.any():
        raise InputError(name, "holds values outside [0, 1]; calibration needs probabilities",
                         np.flatnonzero(bad))


def _from_dataset(ds):
    from core.clusters import cluster_codes

    if ds.kind == "rows":
        y = ds.y_true
        w = np.ones(y.shape[0]) if ds.sample_weight is None else ds.sample_weight
        codes, K = (None, 0)
        if ds.cluster is not None:
            codes, K = cluster_codes(ds)
        sq = w * w if (ds.sample_weight is not None and ds.weight_kind == "sampling") else None
        return _Binomial(ds.y_score, np.where(y, w, 0.0), np.where(y, 0.0, w), sq=sq,
                         codes=codes, n_clusters=K, rows_unweighted=ds.sample_weight is None)
    sq = None
    if ds.events_sq is not None:
        sq = ds.events_sq + ds.non_events_sq
    return _Binomial(ds.y_score, ds.events, ds.non_events, sq=sq,
                     row_counts=ds.events + ds.non_events, is_rows=False,
                     e_sq=ds.events_sq, n_sq=ds.non_events_sq)


def _check_confidence(confidence):
    c = float(confidence)
    if not 0.0 < c < 1.0:
        raise InputError("confidence", f"must lie strictly between 0 and 1, got {confidence!r}")
    return c


def _effective_trials(b: _Binomial, strata=None, n_strata=1):
    """(trials, design effect) per stratum: weighted cases (frequency), Kish's effective size
    (sampling), divided by the clusters' design effect floored at 1."""
    if strata is None:
        strata = np.zeros(b.p.shape[0], dtype=np.int64)
    w = b.w
    tot = np.bincount(strata, weights=w, minlength=n_strata)
    if b.sq is not None:
        trials = np.asarray(_iv.effective_size_from_sums(
            tot, np.bincount(strata, weights=b.sq, minlength=n_strata)), dtype=np.float64)
    else:
        trials = tot.astype(np.float64)
    deff = np.ones(n_strata)
    if b.codes is not None:
        from core.clusters import ratio_design_effect

        de = ratio_design_effect(b.e, w, b.codes, b.K, naive_trials=trials, strata=strata,
                                 n_strata=n_strata)
        d = de["design_effect"]
        deff = np.where(np.isfinite(d), np.maximum(d, 1.0), 1.0)
        trials = trials / deff
    return trials, deff


# --------------------------------------------------------------------------- reliability

@dataclass(frozen=True)
class ReliabilityCurve:
    """Reliability bins (non-empty only), arrays of one entry per bin.

    ``edges`` are all B + 1 bin edges; ``bin`` the index of each kept bin;
    ``low_edge`` / ``high_edge`` its edges; ``rows`` its rows (count table:
    cases); ``cases`` and ``events`` weighted; ``mean_predicted`` the mean score;
    ``observed`` the event rate with its Wilson interval ``low`` / ``high`` on
    ``trials`` (effective) cases.
    """

    strategy: str
    n_bins: int
    edges: np.ndarray
    bin: np.ndarray
    low_edge: np.ndarray
    high_edge: np.ndarray
    rows: np.ndarray
    cases: np.ndarray
    events: np.ndarray
    mean_predicted: np.ndarray
    observed: np.ndarray
    low: np.ndarray
    high: np.ndarray
    trials: np.ndarray
    confidence: float
    edge_method: str

    @property
    def ece(self) -> float:
        """Expected calibration error over these bins."""
        tot = self.cases.sum()
        if not tot > 0:
            return math.nan
        return float(np.sum(self.cases / tot * np.abs(self.observed - self.mean_predicted)))

    def to_dict(self) -> dict:
        return _json({f.name: getattr(self, f.name) for f in fields(self)})


def _expanded_percentile(p, counts, q):
    """``numpy.percentile(numpy.repeat(p, counts), q)`` (method "linear"), bit for bit, without
    the repeat: each score counted as many times as its whole-number count.

    numpy's rule (Hyndman & Fan's 7th): virtual index ``(n - 1) * q / 100`` in the sorted
    cases, its two neighbours a, b and fraction g; ``a + (b - a) g``, or ``b - (b - a)(1 - g)``
    when g >= 0.5. The order statistic j is the score whose running count first exceeds j.
    """
    order = np.argsort(p, kind="stable")
    ps, cs = p[order], counts[order]
    keep = cs > 0
    ps, cs = ps[keep], cs[keep]
    cum = np.cumsum(cs)  # whole numbers: exact below 2^53 in any order
    n = int(cum[-1])
    virt = (n - 1) * np.true_divide(q, 100)
    prev = np.floor(virt)
    nxt = prev + 1
    above = virt >= n - 1
    prev[above] = -1
    nxt[above] = -1
    below = virt < 0
    prev[below] = 0
    nxt[below] = 0
    gamma = virt - prev

    def at(j):
        j = np.where(j < 0, n - 1, j)
        return ps[np.minimum(np.searchsorted(cum, j, side="right"), ps.shape[0] - 1)]

    a, b = at(prev), at(nxt)
    diff = b - a
    return np.where(gamma >= 0.5, b - diff * (1 - gamma), a + diff * gamma)


def _edges(b: _Binomial, n_bins, strategy):
    if strategy == "uniform":
        return np.linspace(0.0, 1.0, n_bins + 1), "uniform: equal widths on [0, 1]"
    q = np.linspace(0.0, 1.0, n_bins + 1) * 100.0  # as scikit-learn forms them, bit for bit
    if b.rows_unweighted:
        return np.percentile(b.p, q), "quantile: numpy.percentile (linear) of the scores"
    w = b.w
    if b.sq is None and b.e_sq is None and np.all(w == np.round(w)) and 0 < w.sum() < 2.0**53:
        # frequency weights or a count table in whole numbers: each unit stands for that many
        # cases, so the edges are those of the cases themselves
        return (_expanded_percentile(b.p, w, q),
                "quantile: numpy.percentile (linear) of the scores, each line or weight counted "
                "as that many cases")
    keep = w > 0
    return (np.percentile(b.p[keep], q, weights=w[keep], method="inverted_cdf"),
            "quantile: weighted inverted-CDF quantiles of the scores")


def _reliability(b: _Binomial, n_bins, strategy, conf) -> ReliabilityCurve:
    n_bins = int(n_bins)
    if n_bins < 1:
        raise InputError("bins", f"must be at least 1, got {n_bins!r}")
    if strategy not in STRATEGIES:
        raise InputError("strategy", f"must be one of {', '.join(STRATEGIES)}, got {strategy!r}")
    edges, how = _edges(b, n_bins, strategy)
    ids = np.searchsorted(edges[1:-1], b.p).astype(np.int64)
    w = b.w
    cases = np.bincount(ids, weights=w, minlength=n_bins)
    rows = np.bincount(ids, weights=b.row_counts, minlength=n_bins)
    events = np.bincount(ids, weights=b.e, minlength=n_bins)
    psum = np.bincount(ids, weights=w * b.p, minlength=n_bins)
    count = np.bincount(ids, minlength=n_bins)
    trials, _ = _effective_trials(b, ids, n_bins)
    keep = (count > 0) & (cases > 0)
    with np.errstate(invalid="ignore", divide="ignore"):
        obs = events / cases
        mean = psum / cases
    tr = np.where(keep, trials, 0.0)
    lo, hi = _iv.wilson_interval(np.where(keep, obs * tr, 0.0), tr, conf)
    idx = np.flatnonzero(keep)
    return ReliabilityCurve(
        strategy=strategy, n_bins=n_bins, edges=edges, bin=idx, low_edge=edges[idx],
        high_edge=edges[idx + 1], rows=rows[idx], cases=cases[idx], events=events[idx],
        mean_predicted=mean[idx], observed=obs[idx], low=np.asarray(lo)[idx],
        high=np.asarray(hi)[idx], trials=tr[idx], confidence=conf, edge_method=how)


def reliability_curve(y_true, y_prob, sample_weight=None, *, n_bins: int = 10,
                      strategy: str = "quantile", confidence: float = 0.95, cluster=None,
                      weight_kind: str | None = None) -> ReliabilityCurve:
    """Reliability bins with counts and Wilson intervals (see the module docstring).

    Unweighted, ``observed`` and ``mean_predicted`` equal scikit-learn's
    ``calibration_curve(y_true, y_prob, n_bins=n_bins, strategy=strategy)``
    (``prob_true``, ``prob_pred``) bin for bin.
    """
    conf = _check_confidence(confidence)
    return _reliability(_from_arrays(y_true, y_prob, sample_weight, cluster, weight_kind),
                        n_bins, strategy, conf)


def _brier(b: _Binomial):
    w = b.w
    tot = w.sum()
    return float(np.sum(b.e * (1.0 - b.p) ** 2 + b.n * b.p ** 2) / tot) if tot > 0 else math.nan


def brier_score(y_true, y_prob, sample_weight=None) -> float:
    """Brier score ``sum w (p - y)^2 / sum w`` (equals scikit-learn's ``brier_score_loss``)."""
    return _brier(_from_arrays(y_true, y_prob, sample_weight, None, None))


def expected_calibration_error(y_true, y_prob, sample_weight=None, *, n_bins: int = 10,
                               strategy: str = "quantile") -> float:
    """``sum_b (cases_b / cases) |observed_b - mean score_b|`` over the reliability bins."""
    return reliability_curve(y_true, y_prob, sample_weight, n_bins=n_bins,
                             strategy=strategy).ece


# --------------------------------------------------------------------------- recalibration

@dataclass(frozen=True)
class RecalibrationFit:
    """Logistic recalibration: calibration intercept (in the large) and slope.

    ``intercept`` / ``intercept_se``: ``a`` of ``logit P(y) = a + logit(p)``;
    ``slope`` / ``slope_se`` and ``intercept_with_slope``: ``b`` and ``a`` of
    ``logit P(y) = a + b logit(p)``; ``*_low`` / ``*_high`` Wald intervals;
    ``covariance``: ``"model"`` (Fisher information) or ``"cluster-robust"``;
    ``converged`` False (and NaN values) when a fit has no finite optimum
    (one class only, or the scores separate the classes).
    """

    intercept: float
    intercept_se: float
    intercept_low: float
    intercept_high: float
    slope: float
    slope_se: float
    slope_low: float
    slope_high: float
    intercept_with_slope: float
    intercept_with_slope_se: float
    confidence: float
    eps: float
    covariance: str
    converged: bool
    method: str
    note: str | None = None

    @property
    def p_slope(self) -> float:
        """Two-sided Wald p-value of slope = 1 (NaN without a fit)."""
        return _wald_p(self.slope - 1.0, self.slope_se)

    @property
    def p_intercept(self) -> float:
        """Two-sided Wald p-value of intercept (in the large) = 0."""
        return _wald_p(self.intercept, self.intercept_se)

    def to_dict(self) -> dict:
        d = {f.name: getattr(self, f.name) for f in fields(self)}
        d["p_slope"], d["p_intercept"] = self.p_slope, self.p_intercept
        return _json(d)


def _wald_p(diff, se):
    if not (np.isfinite(diff) and np.isfinite(se) and se > 0):
        return math.nan
    from scipy import stats

    return float(2.0 * stats.norm.sf(abs(diff) / se))


def _loglik(eta, e, n):
    # e log mu + n log(1 - mu), stably
    return float(np.sum(-e * np.logaddexp(0.0, -eta) - n * np.logaddexp(0.0, eta)))


def _newton(X, offset, e, n):
    """Maximise the binomial log-likelihood of (e, n) with linear predictor offset + X beta.

    Returns (beta, information matrix) or (None, None) when there is no finite optimum.
    """
    k = X.shape[1]
    beta = np.zeros(k)
    if k == 2:
        beta[1] = 1.0  # start from the identity recalibration
    eta = offset + X @ beta
    ll = _loglik(eta, e, n)
    t = e + n
    for _ in range(_MAX_ITER):
        mu = expit(eta)
        g = X.T @ (e - t * mu)
        W = t * mu * (1.0 - mu)
        info = X.T @ (X * W[:, None])
        try:
            step = np.linalg.solve(info, g)
        except np.linalg.LinAlgError:
            return None, None
        if not np.all(np.isfinite(step)):
            return None, None
        s = 1.0
        for _ in range(60):
            nb = beta + s * step
            eta_n = offset + X @ nb
            ll_n = _loglik(eta_n, e, n)
            if ll_n >= ll - 1e-12 * abs(ll):
                break
            s *= 0.5
        else:
            return None, None
        beta, eta, ll_old, ll = nb, eta_n, ll, ll_n
        if np.max(np.abs(s * step)) < 1e-10 or abs(ll - ll_old) < 1e-14 * max(abs(ll), 1.0):
            mu = expit(eta)
            W = t * mu * (1.0 - mu)
            info = X.T @ (X * W[:, None])
            if np.max(np.abs(beta)) > 1e6:
                return None, None
            return beta, info
    return None, None


def _fit(b: _Binomial, conf, eps) -> RecalibrationFit:
    z = _iv.normal_quantile(conf)
    nanfit = dict(intercept=math.nan, intercept_se=math.nan, intercept_low=math.nan,
                  intercept_high=math.nan, slope=math.nan, slope_se=math.nan, slope_low=math.nan,
                  slope_high=math.nan, intercept_with_slope=math.nan,
                  intercept_with_slope_se=math.nan, confidence=conf, eps=float(eps),
                  method=FIT_METHOD)
    # a count table's lines pool many cases: model-based errors, unless its squared-weight sums
    # (sampling weights) give the rows' robust sandwich per line
    robust = (b.is_rows and (b.codes is not None or b.sq is not None)) or b.e_sq is not None
    cov_name = ("cluster-robust" if b.codes is not None and robust else
                "robust (each row its own cluster)" if robust else "model")
    E, N = float(b.e.sum()), float(b.n.sum())
    if not (E > 0 and N > 0):
        return RecalibrationFit(**nanfit, covariance=cov_name, converged=False,
                                note="one class only: no recalibration fit")
    L = logit(np.clip(b.p, eps, 1.0 - eps))
    # fit on the distinct scores (sufficient: the likelihood depends on the score only)
    u, inv = np.unique(L, return_inverse=True)
    ue = np.bincount(inv, weights=b.e, minlength=u.shape[0])
    un = np.bincount(inv, weights=b.n, minlength=u.shape[0])
    # two-parameter fit: no finite optimum when the scores separate the classes (1-d: every
    # event's score on one side of every non-event's, ties allowed)
    xe, xn = u[ue > 0], u[un > 0]
    if xe.max() <= xn.min() or xe.min() >= xn.max():
        return RecalibrationFit(**nanfit, covariance=cov_name, converged=False,
                                note="no finite optimum (the scores separate the classes)")
    X1 = np.ones((u.shape[0], 1))
    X2 = np.column_stack([np.ones(u.shape[0]), u])
    a1, info1 = _newton(X1, u, ue, un)
    b2, info2 = _newton(X2, np.zeros(u.shape[0]), ue, un)
    if a1 is None or b2 is None:
        return RecalibrationFit(**nanfit, covariance=cov_name, converged=False,
                                note="no finite optimum (the scores separate the classes)")
    try:
        V1 = np.linalg.inv(info1)
        V2 = np.linalg.inv(info2)
    except np.linalg.LinAlgError:
        return RecalibrationFit(**nanfit, covariance=cov_name, converged=False,
                                note="singular information matrix")
    if robust:
        V1 = _sandwich(b, L, V1, np.array([a1[0], 1.0]), slope_free=False)
        V2 = _sandwich(b, L, V2, b2, slope_free=True)
    se1 = math.sqrt(V1[0, 0])
    se_a2, se_b = math.sqrt(V2[0, 0]), math.sqrt(V2[1, 1])
    return RecalibrationFit(
        intercept=float(a1[0]), intercept_se=se1, intercept_low=float(a1[0] - z * se1),
        intercept_high=float(a1[0] + z * se1), slope=float(b2[1]), slope_se=se_b,
        slope_low=float(b2[1] - z * se_b), slope_high=float(b2[1] + z * se_b),
        intercept_with_slope=float(b2[0]), intercept_with_slope_se=se_a2, confidence=conf,
        eps=float(eps), covariance=cov_name, converged=True, method=FIT_METHOD)


def _sandwich(b: _Binomial, L, bread, coef, *, slope_free):
    """Cluster-robust covariance ``bread @ meat @ bread`` with the CR1 factor
    ``K/(K-1) (n-1)/(n-p)``; without clusters every unit is its own cluster."""
    a, s = coef
    mu = expit(a + s * L)
    if b.e_sq is not None:
        # a count table with squared-weight sums: the rows' meat sum_i w_i^2 (y_i - mu)^2 x x'
        # is, per line, (events_sq (1 - mu)^2 + non_events_sq mu^2) x x'; the CR1 factor takes
        # the weighted cases for the unknown row count (it differs from 1 by O(1/n))
        r2 = b.e_sq * (1.0 - mu) ** 2 + b.n_sq * mu ** 2
        X = np.column_stack([np.ones_like(L), L]) if slope_free else np.ones((L.shape[0], 1))
        meat = X.T @ (X * r2[:, None])
        nobs, k = float(b.row_counts.sum()), X.shape[1]
        if nobs > k:
            meat = meat * (nobs / (nobs - k))
        return bread @ meat @ bread
    resid = b.e - (b.e + b.n) * mu
    if slope_free:
        U = np.column_stack([resid, resid * L])
    else:
        U = resid[:, None]
    if b.codes is not None:
        codes, K = b.codes, b.K
    else:
        codes, K = np.arange(U.shape[0]), U.shape[0]
    Uc = np.column_stack([np.bincount(codes, weights=U[:, j], minlength=K)
                          for j in range(U.shape[1])])
    Kc = int(np.count_nonzero(np.bincount(codes, minlength=K)))
    nobs = float(b.row_counts.sum())
    k = U.shape[1]
    meat = Uc.T @ Uc
    if Kc > 1 and nobs > k:
        meat = meat * (Kc / (Kc - 1.0)) * ((nobs - 1.0) / (nobs - k))
    return bread @ meat @ bread


def calibration_intercept_slope(y_true, y_prob, sample_weight=None, *, confidence: float = 0.95,
                                eps: float = DEFAULT_EPS, cluster=None,
                                weight_kind: str | None = None) -> RecalibrationFit:
    """Calibration intercept (in the large) and slope by logistic recalibration.

    See the module docstring. Unweighted, the slope and the two-parameter
    intercept equal the coefficients of a logistic regression of ``y_true`` on
    ``logit(clip(y_prob, eps, 1 - eps))`` and the intercept that of the same
    regression with the logit as an offset and no slope; the standard errors
    are the model-based ones (cluster-robust with ``cluster``).
    """
    conf = _check_confidence(confidence)
    return _fit(_from_arrays(y_true, y_prob, sample_weight, cluster, weight_kind), conf,
                float(eps))


def _oe(b: _Binomial, conf):
    O = float(b.e.sum())
    w = b.w
    tot = float(w.sum())
    E = float(np.sum(w * b.p))
    trials, _ = _effective_trials(b)
    tr = float(trials[0])
    if not (E > 0 and tot > 0):
        return math.nan, math.nan, math.nan
    lo, hi = _iv.wilson_interval(O / tot * tr, tr, conf)
    scale = tot / E
    return O / E, lo * scale, hi * scale


def observed_expected_ratio(y_true, y_prob, sample_weight=None, *, confidence: float = 0.95,
                            cluster=None, weight_kind: str | None = None):
    """``(O / E, low, high)``: events over the summed scores, with the Wilson interval of
    the event rate divided by the mean score (see the module docstring)."""
    conf = _check_confidence(confidence)
    return _oe(_from_arrays(y_true, y_prob, sample_weight, cluster, weight_kind), conf)


# --------------------------------------------------------------------------- the report

@dataclass(frozen=True, eq=False)
class Calibration:
    """The calibration numbers of one set of cases (all, or one group).

    ``looks_calibrated`` follows :data:`CRITERION`; ``verdict`` says why in
    words: "calibrated", "miscalibrated", "too few events" or "cannot fit".
    """

    column: str | None
    group: str | None
    rows: int
    cases: float
    events: float
    expected: float
    prevalence: float
    mean_score: float
    reliability: ReliabilityCurve
    brier: float
    brier_prevalence: float
    scaled_brier: float
    ece: float
    fit: RecalibrationFit
    oe_ratio: float
    oe_low: float
    oe_high: float
    looks_calibrated: bool
    verdict: str
    statement: str
    p_slope_adjusted: float = math.nan
    p_intercept_adjusted: float = math.nan

    @property
    def name(self) -> str:
        return "all cases" if self.column is None else f"{self.column} = {self.group}"

    def to_dict(self) -> dict:
        d = {f.name: getattr(self, f.name) for f in fields(self)
             if f.name not in ("reliability", "fit")}
        d["reliability"] = self.reliability.to_dict()
        d["fit"] = self.fit.to_dict()
        return _json(d)


@dataclass(frozen=True, eq=False)
class CalibrationReport:
    """Calibration overall and per group, with the stated criterion.

    ``available`` is False (and ``reason`` says why) when the scores are not
    probabilities in [0, 1] with higher meaning riskier; then ``overall`` is
    None and ``looks_calibrated`` False.
    """

    available: bool
    reason: str | None
    strategy: str
    n_bins: int
    confidence: float
    eps: float
    min_events: int
    criterion: str
    overall: Calibration | None
    groups: tuple[Calibration, ...]
    looks_calibrated: bool
    statements: tuple[str, ...]

    def group(self, column: str, group: str) -> Calibration:
        for g in self.groups:
            if g.column == column and g.group == group:
                return g
        raise KeyError((column, group))

    def to_dict(self) -> dict:
        d = {f.name: getattr(self, f.name) for f in fields(self)
             if f.name not in ("overall", "groups")}
        d["overall"] = None if self.overall is None else self.overall.to_dict()
        d["groups"] = [g.to_dict() for g in self.groups]
        return _json(d)


def _judge(fit: RecalibrationFit, events: float, min_events: int, conf: float, adjusted=None):
    """Verdict by :data:`CRITERION`; ``adjusted=(p_slope, p_intercept)`` judges with
    Holm-adjusted p-values instead of the plain intervals (the groups)."""
    if not fit.converged:
        return False, "cannot fit", f"no recalibration fit ({fit.note})"
    if events < min_events:
        return False, "too few events", (f"{events:,.0f} events: fewer than {min_events} cannot "
                                         "show whether the scores are calibrated")
    if adjusted is None:
        slope_ok = fit.slope_low <= 1.0 <= fit.slope_high
        int_ok = fit.intercept_low <= 0.0 <= fit.intercept_high
    else:
        alpha = 1.0 - conf
        slope_ok = not adjusted[0] < alpha
        int_ok = not adjusted[1] < alpha
    s = (f"slope {fit.slope:.2f} ({conf:.0%} interval {fit.slope_low:.2f} to {fit.slope_high:.2f})"
         f", intercept {fit.intercept:+.2f} ({fit.intercept_low:+.2f} to "
         f"{fit.intercept_high:+.2f})")
    if adjusted is not None:
        s += f"; Holm-adjusted p {adjusted[0]:.3f} (slope), {adjusted[1]:.3f} (intercept)"
    if slope_ok and int_ok:
        if adjusted is None:
            return True, "calibrated", s + ": the slope's interval contains 1 and the intercept's 0"
        return True, "calibrated", s + ": neither differs after the adjustment"
    why = []
    if not slope_ok:
        why.append("the scores are too extreme (slope below 1)" if fit.slope < 1.0
                   else "the scores are too modest (slope above 1)")
    if not int_ok:
        why.append("risk is underestimated on average (intercept above 0)"
                   if fit.intercept > 0.0 else
                   "risk is overestimated on average (intercept below 0)")
    return False, "miscalibrated", s + ": " + "; ".join(why)


def _one(b: _Binomial, column, group, n_bins, strategy, conf, eps, min_events) -> Calibration:
    """One set's numbers, judged by the plain criterion (groups are re-judged after Holm)."""
    rel = _reliability(b, n_bins, strategy, conf)
    w = b.w
    cases = float(w.sum())
    events = float(b.e.sum())
    prev = events / cases if cases > 0 else math.nan
    br = _brier(b)
    bp = prev * (1.0 - prev)
    fit = _fit(b, conf, eps)
    oe, olo, ohi = _oe(b, conf)
    ok, verdict, why = _judge(fit, events, min_events, conf)
    return Calibration(
        column=column, group=group, rows=int(round(float(b.row_counts.sum()))), cases=cases,
        events=events, expected=float(np.sum(w * b.p)), prevalence=prev,
        mean_score=float(np.sum(w * b.p) / cases) if cases > 0 else math.nan, reliability=rel,
        brier=br, brier_prevalence=bp,
        scaled_brier=1.0 - br / bp if bp > 0 else math.nan, ece=rel.ece, fit=fit,
        oe_ratio=oe, oe_low=olo, oe_high=ohi, looks_calibrated=ok, verdict=verdict,
        statement=_statement(column, group, verdict, why, br, bp, rel.ece, oe, olo, ohi),
        p_slope_adjusted=math.nan, p_intercept_adjusted=math.nan)


def _statement(column, group, verdict, why, br, bp, ece, oe, olo, ohi):
    name = "all cases" if column is None else f"{column} = {group}"
    return (f"{name}: {verdict} -- {why}. Brier {br:.4f} (predicting the prevalence: {bp:.4f}); "
            f"expected calibration error {ece:.4f}; observed / expected {oe:.2f} "
            f"({olo:.2f} to {ohi:.2f}).")


def _rejudge(groups, conf, min_events, adjust):
    """Per-group verdicts with Holm's step-down over the groups' slope and intercept tests."""
    from dataclasses import replace

    from core.groups import holm_adjust

    if adjust != "holm" or not groups:
        return list(groups)
    p = np.array([[g.fit.p_slope, g.fit.p_intercept] for g in groups], dtype=np.float64)
    adj = holm_adjust(p)
    out = []
    for g, (a_s, a_i) in zip(groups, adj):
        ok, verdict, why = _judge(g.fit, g.events, min_events, conf,
                                  adjusted=(a_s, a_i) if np.isfinite(a_s) and np.isfinite(a_i)
                                  else None)
        out.append(replace(g, looks_calibrated=ok, verdict=verdict,
                           statement=_statement(g.column, g.group, verdict, why, g.brier,
                                                g.brier_prevalence, g.ece, g.oe_ratio, g.oe_low,
                                                g.oe_high),
                           p_slope_adjusted=float(a_s), p_intercept_adjusted=float(a_i)))
    return out


def calibration_report(dataset, *, bins: int = 10, strategy: str = "quantile",
                       groups=True, confidence: float = 0.95, eps: float = DEFAULT_EPS,
                       min_events: int = MIN_EVENTS, adjust: str = "holm") -> CalibrationReport:
    """Reliability, Brier, ECE, intercept and slope, O/E -- overall and per group.

    Parameters
    ----------
    dataset : Dataset
        Rows (with cluster-aware intervals when a cluster column is mapped) or
        a count table (its lines are binomial counts at each score).
    bins, strategy
        Reliability bins: ``"quantile"`` (equal counts) or ``"uniform"``.
    groups : bool or sequence of str
        True: every mapped group column; False: none; or the columns to use.
    confidence, eps, min_events
        Interval confidence; logit clipping; events needed to call scores
        calibrated (see :data:`CRITERION`).
    adjust : {"holm", "none"}
        Per-group verdicts: Holm's step-down over the groups' Wald tests of
        slope = 1 and intercept = 0 (2 per group), or the plain criterion per
        group ("exploratory"). The overall verdict always uses the criterion.

    Returns
    -------
    CalibrationReport
    """
    from core.dataset import Dataset
    from core.groups import _text_codes

    if not isinstance(dataset, Dataset):
        raise TypeError(f"dataset must be a Dataset, got {type(dataset).__name__}")
    conf = _check_confidence(confidence)
    if adjust not in ("holm", "none"):
        raise InputError("adjust", f"must be 'holm' or 'none', got {adjust!r}")
    if strategy not in STRATEGIES:
        raise InputError("strategy", f"must be one of {', '.join(STRATEGIES)}, got {strategy!r}")
    if int(bins) < 1:
        raise InputError("bins", f"must be at least 1, got {bins!r}")
    eps = float(eps)
    if not 0.0 < eps < 0.5:
        raise InputError("eps", f"must lie strictly between 0 and 0.5, got {eps!r}")
    crit = CRITERION.format(conf=f"{conf:.0%}", min_events=int(min_events))
    if groups is True:
        cols = tuple(dataset.groups)
    elif groups is False or groups is None:
        cols = ()
    else:
        cols = tuple(groups)
        for c in cols:
            if c not in dataset.groups:
                raise InputError(c, "is not a mapped group column (mapped: "
                                 f"{', '.join(dataset.groups) or 'none'})")
    reason = None
    if not dataset.higher_is_riskier:
        reason = ("lower scores mean higher risk, so the scores are not probabilities of the "
                  "event: calibration does not apply")
    elif not dataset.scores_in_unit_interval:
        lo, hi = dataset.score_range
        reason = (f"the scores run from {lo:g} to {hi:g}, outside [0, 1], so they are not "
                  "probabilities: calibration does not apply and the cost-derived threshold is "
                  "not meaningful")
    if reason is not None:
        return CalibrationReport(available=False, reason=reason, strategy=strategy,
                                 n_bins=int(bins), confidence=conf, eps=eps,
                                 min_events=int(min_events), criterion=crit, overall=None,
                                 groups=(), looks_calibrated=False,
                                 statements=(f"Calibration: {reason}.",))
    b = _from_dataset(dataset)
    overall = _one(b, None, None, bins, strategy, conf, eps, min_events)
    out = []
    for c in cols:
        codes, labels = _text_codes(dataset.groups[c])
        for j, lab in enumerate(labels):
            out.append(_one(b.subset(codes == j), c, str(lab), bins, strategy, conf, eps,
                            min_events))
    out = _rejudge(out, conf, min_events, adjust)
    st = [crit, overall.statement]
    if out:
        st.append(f"Per-group verdicts: {len(out)} groups, " + (
            f"Holm-adjusted over the {2 * len(out)} Wald tests of slope = 1 and intercept = 0."
            if adjust == "holm" else "exploratory (not adjusted for multiplicity)."))
    if b.codes is not None:
        st.append(f"Repeated cases ({dataset.mapping.cluster or 'cluster'}): the intercept and "
                  "slope use cluster-robust standard errors; bin and O/E intervals use the "
                  "effective size after each set's design effect (never below 1).")
    if dataset.kind == "counts":
        st.append("Count table: each line's events and non-events are binomial counts at its "
                  "score; quantile bins " + (
                      "count each line as its cases (the rows' edges)"
                      if np.all(dataset.events == np.round(dataset.events))
                      and np.all(dataset.non_events == np.round(dataset.non_events))
                      and dataset.events_sq is None else "use weighted quantiles") + ".")
    st.append("The cost-derived threshold on the Decide page is shown as meaningful only when "
              "the scores look calibrated" + (" -- they do." if overall.looks_calibrated else
                                               " -- they do not, so use the empirical optimum."))
    st.extend(g.statement for g in out if g.verdict != "calibrated")
    return CalibrationReport(available=True, reason=None, strategy=strategy, n_bins=int(bins),
                             confidence=conf, eps=eps, min_events=int(min_events),
                             criterion=crit, overall=overall, groups=tuple(out),
                             looks_calibrated=bool(overall.looks_calibrated),
                             statements=tuple(st))
