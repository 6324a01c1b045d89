"""Tests for two scores on the same cases: DeLong's correlated AUCs and McNemar.

DeLong's variance of correlated ROC AUCs
----------------------------------------
For score r, an event i with score x_i and a non-event j with score y_j, the
*placement values* (DeLong's structural components) are::

    V10_r(i) = share of non-events ranked below x_i, ties counted 1/2
    V01_r(j) = share of events ranked above y_j, ties counted 1/2

Their means over events (or over non-events) are both the Mann-Whitney AUC
theta_r, which equals the trapezoidal ROC AUC and scikit-learn's
``roc_auc_score``. With m events and n non-events::

    S10[r, s] = sum_i (V10_r(i) - theta_r)(V10_s(i) - theta_s) / (m - 1)
    S01[r, s] = sum_j (V01_r(j) - theta_r)(V01_s(j) - theta_s) / (n - 1)
    Cov(theta) = S10 / m + S01 / n
    Var(theta_b - theta_a) = C[a, a] + C[b, b] - 2 C[a, b]

and the 95 % interval of the difference is ``d +/- z se`` with the normal
critical value (DeLong, DeLong & Clarke-Pearson, "Comparing the areas under
two or more correlated receiver operating characteristic curves: a
nonparametric approach", Biometrics 1988; from memory).

Fast form (Sun & Xu, "Fast implementation of DeLong's algorithm for
comparing the areas under correlated receiver operating characteristic
curves", IEEE Signal Processing Letters 2014; from memory): with T_z the
midrank of a case among all cases, T_x its midrank among the events and T_y
among the non-events, ``V10(i) = (T_z(i) - T_x(i)) / n`` and
``V01(j) = 1 - (T_z(j) - T_y(j)) / m``. Here one ``argsort`` of each score
gives the runs of tied scores; cumulative event and non-event weights along
the runs give every run's placement values at once (the same midrank
arithmetic, run by run), so each score costs O(n log n) -- no pairwise loop.

Weights: frequency weights (a row stands for w identical cases) enter as
case counts -- the weighted means and ``sum w (V - theta)^2 / (W - 1)`` are
exactly DeLong's estimator on the expanded data. DeLong's variance does not
hold for sampling weights; :func:`delong_covariance` refuses them.

McNemar's test
--------------
For paired yes/no decisions, with ``b`` the cases where only the first
decision is "yes" and ``c`` those where only the second is: the exact test
is two-sided binomial, ``p = min(1, 2 P(X <= min(b, c)))`` for
X ~ Binomial(b + c, 1/2), statistic ``min(b, c)``; the chi-square test with
continuity correction has statistic ``(|b - c| - 1)^2 / (b + c)`` on one
degree of freedom. Fulcrum uses the exact test when ``b + c < 25`` and the
corrected chi-square otherwise, and matches statsmodels'
``statsmodels.stats.contingency_tables.mcnemar(table, exact=..., correction=True)``
to the digit (including its statistic when ``b == c``).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy import stats

from core import intervals as _iv
from core.errors import InputError

__all__ = [
    "EXACT_BELOW",
    "AucDifference",
    "DeLongResult",
    "McNemarResult",
    "auc_difference",
    "delong_covariance",
    "mcnemar_test",
]

#: McNemar: the exact binomial test is used when fewer discordant cases than this.
EXACT_BELOW = 25

#: Relative size below which a variance of a difference counts as exactly zero.
_ZERO_VAR_RTOL = 1e-12


# --------------------------------------------------------------------------- ranking

@dataclass(frozen=True, eq=False)
class _Ranking:
    """One score's runs of tied values, in ascending order of risk.

    ``inv[i]`` is row i's run (0 = least risky); ``events`` / ``non_events``
    the (weighted) class totals of each run; ``v10`` / ``v01`` each run's
    placement values (see the module docstring).
    """

    inv: np.ndarray
    events: np.ndarray
    non_events: np.ndarray
    v10: np.ndarray
    v01: np.ndarray
    auc: float

    @property
    def n_runs(self) -> int:
        return int(self.events.shape[0])


def _rank(y: np.ndarray, score: np.ndarray, w: np.ndarray | None, higher_is_riskier: bool) -> _Ranking:
    """Runs of tied scores by one argsort (no loop over rows)."""
    o = score if higher_is_riskier else -score
    n = o.shape[0]
    order = np.argsort(o)
    os_ = np.sort(o)  # the same sequence as o[order], without a gather
    new = np.empty(n, dtype=bool)
    new[0] = True
    np.not_equal(os_[1:], os_[:-1], out=new[1:])
    itype = np.int32 if n < 2**31 else np.int64
    run = np.cumsum(new, dtype=itype)
    run -= 1
    d = int(run[-1]) + 1
    inv = np.empty(n, dtype=itype)
    inv[order] = run
    ends = np.empty(d, dtype=np.int64)  # last sorted position of each run
    ends[:-1] = np.flatnonzero(new[1:])
    ends[-1] = n - 1
    ev_rows = np.flatnonzero(y)
    if w is None:
        ev = np.bincount(inv[ev_rows], minlength=d).astype(np.float64)
        tot = np.diff(ends, prepend=-1).astype(np.float64)
    else:
        ev = np.bincount(inv[ev_rows], weights=w[ev_rows], minlength=d)
        starts = np.empty(d, dtype=np.int64)
        starts[0] = 0
        starts[1:] = ends[:-1] + 1
        tot = np.add.reduceat(w[order], starts)
    ne = tot - ev
    P, N = float(ev.sum()), float(ne.sum())
    ne_below = np.cumsum(ne) - ne
    ev_below = np.cumsum(ev) - ev
    with np.errstate(invalid="ignore", divide="ignore"):
        v10 = (ne_below + 0.5 * ne) / N
        v01 = (P - ev_below - 0.5 * ev) / P
        auc = float(np.dot(ev, v10) / P)
    return _Ranking(inv=inv, events=ev, non_events=ne, v10=v10, v01=v01, auc=auc)


def _weighted_cov(V: np.ndarray, w: np.ndarray | None):
    """Means (k,) and covariance (k, k) of the rows of V with divisor W - 1."""
    if w is None:
        W = float(V.shape[1])
        mean = V.mean(axis=1)
        D = V - mean[:, None]
        with np.errstate(invalid="ignore", divide="ignore"):
            return mean, (D @ D.T) / (W - 1.0), W
    W = float(w.sum())
    mean = (V @ w) / W
    D = V - mean[:, None]
    with np.errstate(invalid="ignore", divide="ignore"):
        return mean, ((D * w) @ D.T) / (W - 1.0), W


# --------------------------------------------------------------------------- DeLong

@dataclass(frozen=True, eq=False)
class DeLongResult:
    """ROC AUCs of k scores on the same cases and DeLong's covariance matrix.

    ``aucs`` (k,); ``covariance`` (k, k) = S10 / m + S01 / n; ``s10``,
    ``s01`` the two structural covariance matrices; ``n_events`` /
    ``n_nonevents`` the (frequency-weighted) class sizes m and n.
    """

    aucs: np.ndarray
    covariance: np.ndarray
    s10: np.ndarray
    s01: np.ndarray
    n_events: float
    n_nonevents: float

    def se(self, r: int) -> float:
        """DeLong's standard error of AUC r."""
        return float(np.sqrt(max(self.covariance[r, r], 0.0)))

    def difference(self, a: int, b: int, confidence: float = 0.95) -> AucDifference:
        """AUC_b - AUC_a with DeLong's variance, normal interval and two-sided p-value."""
        return _difference(self, a, b, confidence)


def _check_inputs(y_true, scores, higher_is_riskier, sample_weight, weight_kind):
    from core.curve import _check_finite, _check_labels

    y = _check_labels(y_true)
    n = y.shape[0]
    if isinstance(scores, np.ndarray) and scores.ndim == 2:
        cols = [scores[r] for r in range(scores.shape[0])]
    else:
        cols = list(scores)
    if not cols:
        raise InputError("scores", "holds no score")
    arrs = [_check_finite(f"score {r + 1}", c, n) for r, c in enumerate(cols)]
    if isinstance(higher_is_riskier, (bool, np.bool_)):
        dirs = [bool(higher_is_riskier)] * len(arrs)
    else:
        dirs = [bool(v) for v in higher_is_riskier]
        if len(dirs) != len(arrs):
            raise InputError("higher_is_riskier", f"has {len(dirs)} entries for {len(arrs)} scores")
    w = None
    if sample_weight is not None:
        if weight_kind == "sampling":
            raise InputError("sample_weight", "are sampling weights: DeLong's variance holds for "
                             "frequency weights (case counts) only; use the paired bootstrap")
        w = _check_finite("sample_weight", sample_weight, n, allow_negative=False)
    if n == 0:
        raise InputError("y_true", "is empty")
    P = float(np.count_nonzero(y)) if w is None else float(w[y].sum())
    N = float(n - np.count_nonzero(y)) if w is None else float(w[~y].sum())
    if not P > 0 or not N > 0:
        raise InputError("y_true", "needs both events and non-events (with positive weight)")
    return y, arrs, dirs, w


def delong_covariance(y_true, scores, *, higher_is_riskier=True, sample_weight=None,
                      weight_kind: str | None = None) -> DeLongResult:
    """ROC AUCs of several scores on the same cases and DeLong's covariance (fast form).

    Parameters
    ----------
    y_true : array-like (n,)
        1 / True for the event.
    scores : sequence of k array-likes (n,) or an array (k, n)
        The scores, each on the same rows.
    higher_is_riskier : bool or sequence of k bools
        Each score's direction (lower-is-riskier scores are ranked by -score).
    sample_weight : array-like (n,), optional
        Frequency weights (case counts).
    weight_kind : {"frequency", "sampling"}, optional
        ``"sampling"`` raises: DeLong's variance does not hold for them.

    Returns
    -------
    DeLongResult

    See the module docstring for the formulas and references. With one event
    (or one non-event) the covariance is NaN (0/0 in its divisor).
    """
    y, arrs, dirs, w = _check_inputs(y_true, scores, higher_is_riskier, sample_weight, weight_kind)
    return _delong_from_rankings(y, [_rank(y, s, w, d) for s, d in zip(arrs, dirs)], w)


def _delong_from_rankings(y: np.ndarray, rankings: list[_Ranking], w: np.ndarray | None) -> DeLongResult:
    ev_rows = np.flatnonzero(y)
    ne_rows = np.flatnonzero(~y)
    V10 = np.stack([rk.v10[rk.inv[ev_rows]] for rk in rankings])
    V01 = np.stack([rk.v01[rk.inv[ne_rows]] for rk in rankings])
    we = None if w is None else w[ev_rows]
    wn = None if w is None else w[ne_rows]
    theta, s10, m = _weighted_cov(V10, we)
    _, s01, n = _weighted_cov(V01, wn)
    with np.errstate(invalid="ignore", divide="ignore"):
        cov = s10 / m + s01 / n
    return DeLongResult(aucs=theta, covariance=cov, s10=s10, s01=s01, n_events=m, n_nonevents=n)


@dataclass(frozen=True)
class AucDifference:
    """AUC_b - AUC_a with DeLong's variance.

    ``low`` / ``high``: the normal interval ``d -/+ z se``. When the variance
    is zero (two scores that rank every event-non-event pair alike, e.g. a
    score and a monotone transform of it) the interval is the degenerate
    ``[d, d]`` (``degenerate`` True) and ``z`` and ``p_value`` are NaN when
    ``d == 0`` (0/0); NaN throughout when the variance is undefined.
    """

    auc_a: float
    auc_b: float
    difference: float
    variance: float
    se: float
    low: float
    high: float
    z: float
    p_value: float
    confidence: float
    degenerate: bool
    method: str = "DeLong, DeLong & Clarke-Pearson (1988) variance for correlated AUCs, normal interval"


def _difference(res: DeLongResult, a: int, b: int, confidence: float) -> AucDifference:
    C = res.covariance
    d = float(res.aucs[b] - res.aucs[a])
    var = float(C[a, a] + C[b, b] - 2.0 * C[a, b])
    scale = float(abs(C[a, a]) + abs(C[b, b]))
    z_crit = _iv.normal_quantile(confidence)
    degenerate = False
    if np.isnan(var):
        se = low = high = z = p = np.nan
    else:
        if var <= _ZERO_VAR_RTOL * scale or var <= 0.0:
            var = 0.0
        se = float(np.sqrt(var))
        if se == 0.0:
            degenerate = True
            low = high = d
            if d == 0.0:
                z = p = np.nan
            else:
                z = np.inf if d > 0 else -np.inf
                p = 0.0
        else:
            low, high = d - z_crit * se, d + z_crit * se
            z = d / se
            p = float(2.0 * stats.norm.sf(abs(z)))
    return AucDifference(auc_a=float(res.aucs[a]), auc_b=float(res.aucs[b]), difference=d,
                         variance=var, se=se, low=float(low), high=float(high), z=float(z),
                         p_value=float(p), confidence=float(confidence), degenerate=degenerate)


def auc_difference(y_true, score_a, score_b, *, higher_is_riskier=True, sample_weight=None,
                   weight_kind: str | None = None, confidence: float = 0.95) -> AucDifference:
    """ROC AUC of ``score_b`` minus that of ``score_a`` on the same cases, with DeLong's interval.

    ``higher_is_riskier``: one bool, or a pair (a, b). See :func:`delong_covariance`
    and the module docstring for the formula and the degenerate case.
    """
    res = delong_covariance(y_true, [score_a, score_b], higher_is_riskier=higher_is_riskier,
                            sample_weight=sample_weight, weight_kind=weight_kind)
    return res.difference(0, 1, confidence)


# --------------------------------------------------------------------------- McNemar

@dataclass(frozen=True)
class McNemarResult:
    """McNemar's test on paired decisions.

    ``only_a`` (b) and ``only_b`` (c) are the discordant counts; ``both`` and
    ``neither`` the concordant ones (they do not enter the test).
    ``method`` is ``"exact binomial"`` or ``"chi-square with continuity
    correction"``.
    """

    only_a: float
    only_b: float
    both: float
    neither: float
    statistic: float
    p_value: float
    exact: bool
    method: str

    @property
    def discordant(self) -> float:
        return self.only_a + self.only_b


def mcnemar_test(only_a, only_b, *, both=0.0, neither=0.0, exact: bool | None = None) -> McNemarResult:
    """McNemar's test from the discordant counts b = ``only_a`` and c = ``only_b``.

    ``exact=None`` picks the exact binomial test when ``b + c <`` :data:`EXACT_BELOW`
    and the chi-square with continuity correction otherwise. Formulas in the
    module docstring; reference: statsmodels ``mcnemar(table, exact,
    correction=True)`` with ``table = [[both, b], [c, neither]]``.

    Raises InputError for negative or non-finite counts, and for non-integer
    counts with the exact test.
    """
    b, c = float(only_a), float(only_b)
    for name, v in (("only_a", b), ("only_b", c), ("both", float(both)), ("neither", float(neither))):
        if not np.isfinite(v) or v < 0:
            raise InputError(name, f"must be a finite count >= 0, got {v!r}")
    total = b + c
    use_exact = (total < EXACT_BELOW) if exact is None else bool(exact)
    if use_exact:
        if b != round(b) or c != round(c):
            raise InputError("only_a / only_b", "the exact test needs whole counts, got "
                             f"{b!r} and {c!r}")
        stat = min(b, c)
        p = min(float(stats.binom.cdf(stat, round(total), 0.5)) * 2.0, 1.0)
        method = "exact binomial"
    else:
        with np.errstate(invalid="ignore", divide="ignore"):
            stat = float((abs(b - c) - 1.0) ** 2 / total) if total > 0 else np.nan
        p = float(stats.chi2.sf(stat, 1)) if np.isfinite(stat) else np.nan
        method = "chi-square with continuity correction"
    return McNemarResult(only_a=b, only_b=c, both=float(both), neither=float(neither),
                         statistic=float(stat), p_value=float(p), exact=use_exact, method=method)
