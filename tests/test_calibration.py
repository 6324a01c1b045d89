"""Calibration of probability scores, against scikit-learn and statsmodels."""

import json

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm
from scipy.special import expit, logit
from sklearn.calibration import calibration_curve
from sklearn.datasets import load_breast_cancer
from sklearn.linear_model import LogisticRegression
from sklearn.metrics import brier_score_loss
from statsmodels.stats.proportion import proportion_confint

from core.calibration import (
    CRITERION,
    DEFAULT_EPS,
    brier_score,
    calibration_intercept_slope,
    calibration_report,
    expected_calibration_error,
    observed_expected_ratio,
    reliability_curve,
)
from core.dataset import Dataset
from core.errors import InputError


def _simulated(n=4000, seed=3, slope=1.0, shift=0.0, rounding=None):
    """Scores p and outcomes drawn from expit(shift + slope * logit(p)) (common practice)."""
    g = np.random.default_rng(seed)
    p = expit(g.normal(-2.5, 1.2, n))
    if rounding is not None:
        p = np.round(p, rounding)
    y = g.random(n) < expit(shift + slope * logit(np.clip(p, DEFAULT_EPS, 1 - DEFAULT_EPS)))
    return y, p


def _breast_cancer_scores():
    # Open data shipped with scikit-learn: malignant is coded 0, so the event is target == 0.
    X, t = load_breast_cancer(return_X_y=True)
    y = t == 0
    Xs = (X - X.mean(axis=0)) / X.std(axis=0)
    model = LogisticRegression(C=0.05, max_iter=2000).fit(Xs[:, :10], y)
    return y, model.predict_proba(Xs[:, :10])[:, 1]


# ------------------------------------------------------------------ Brier, reliability bins

def test_brier_matches_scikit_learn():
    # Reference: scikit-learn brier_score_loss, unweighted and with sample weights.
    y, p = _breast_cancer_scores()
    assert brier_score(y, p) == pytest.approx(brier_score_loss(y, p), rel=1e-13)
    w = np.random.default_rng(0).integers(1, 5, y.shape[0]).astype(float)
    assert brier_score(y, p, w) == pytest.approx(brier_score_loss(y, p, sample_weight=w),
                                                 rel=1e-13)


@pytest.mark.parametrize("strategy", ["uniform", "quantile"])
@pytest.mark.parametrize("n_bins", [5, 10, 15])
@pytest.mark.parametrize("rounding", [None, 2])
def test_reliability_bins_match_calibration_curve(strategy, n_bins, rounding):
    # Reference: scikit-learn calibration_curve (prob_true, prob_pred), empty bins left out;
    # rounding to 2 decimals makes ties and empty quantile bins.
    y, p = _simulated(rounding=rounding)
    rc = reliability_curve(y, p, n_bins=n_bins, strategy=strategy)
    prob_true, prob_pred = calibration_curve(y, p, n_bins=n_bins, strategy=strategy)
    np.testing.assert_allclose(rc.observed, prob_true, rtol=1e-12, atol=0)
    np.testing.assert_allclose(rc.mean_predicted, prob_pred, rtol=1e-12, atol=0)
    assert rc.rows.sum() == y.shape[0]


def test_reliability_bins_on_open_data():
    # Reference: scikit-learn calibration_curve on the Wisconsin breast cancer set.
    y, p = _breast_cancer_scores()
    for strategy in ("uniform", "quantile"):
        rc = reliability_curve(y, p, n_bins=8, strategy=strategy)
        pt, pp = calibration_curve(y, p, n_bins=8, strategy=strategy)
        np.testing.assert_allclose(rc.observed, pt, rtol=1e-12)
        np.testing.assert_allclose(rc.mean_predicted, pp, rtol=1e-12)


def test_reliability_counts_intervals_and_ece_by_hand():
    # Recomputed by hand with pandas (common practice, no source); Wilson intervals against
    # statsmodels proportion_confint(method="wilson").
    y, p = _simulated(n=3000, seed=5)
    rc = reliability_curve(y, p, n_bins=10, strategy="quantile", confidence=0.9)
    edges = np.percentile(p, np.linspace(0, 100, 11))
    df = pd.DataFrame({"y": y.astype(float), "p": p,
                       "bin": np.searchsorted(edges[1:-1], p)})
    agg = df.groupby("bin").agg(n=("y", "size"), ev=("y", "sum"), mp=("p", "mean"))
    np.testing.assert_array_equal(rc.bin, agg.index.to_numpy())
    np.testing.assert_array_equal(rc.rows, agg["n"].to_numpy())
    np.testing.assert_array_equal(rc.events, agg["ev"].to_numpy())
    lo, hi = proportion_confint(agg["ev"], agg["n"], alpha=0.1, method="wilson")
    np.testing.assert_allclose(rc.low, lo, rtol=1e-12, atol=1e-15)
    np.testing.assert_allclose(rc.high, hi, rtol=1e-12, atol=1e-15)
    ece = float(np.sum(agg["n"] / len(df) * np.abs(agg["ev"] / agg["n"] - agg["mp"])))
    assert rc.ece == pytest.approx(ece, rel=1e-12)
    assert expected_calibration_error(y, p, n_bins=10) == pytest.approx(ece, rel=1e-12)


def test_frequency_weights_equal_repeated_rows():
    # A frequency weight w stands for w identical rows (common practice, no source).
    y, p = _simulated(n=800, seed=9)
    w = np.random.default_rng(1).integers(1, 4, y.shape[0])
    yr, pr = np.repeat(y, w), np.repeat(p, w)
    a = reliability_curve(y, p, w.astype(float), n_bins=6, strategy="uniform")
    b = reliability_curve(yr, pr, n_bins=6, strategy="uniform")
    np.testing.assert_allclose(a.observed, b.observed, rtol=1e-12)
    np.testing.assert_allclose(a.cases, b.rows)
    fa = calibration_intercept_slope(y, p, w.astype(float), weight_kind="frequency")
    fb = calibration_intercept_slope(yr, pr)
    assert fa.slope == pytest.approx(fb.slope, rel=1e-8)
    assert fa.slope_se == pytest.approx(fb.slope_se, rel=1e-8)
    assert fa.intercept == pytest.approx(fb.intercept, rel=1e-8, abs=1e-10)


# ------------------------------------------------------------------ intercept and slope

def _glm(y, L, offset=None, **fit):
    X = np.ones((y.shape[0], 1)) if offset is not None else sm.add_constant(L)
    model = sm.GLM(y.astype(float), X, family=sm.families.Binomial(), offset=offset)
    return model.fit(tol=1e-13, **fit)


@pytest.mark.parametrize("slope,shift", [(1.0, 0.0), (0.7, 0.3), (1.4, -0.5)])
def test_slope_and_intercept_match_statsmodels_logistic_regression(slope, shift):
    # Reference: statsmodels GLM(Binomial) of y on logit(score) (slope, two-parameter
    # intercept), and with logit(score) as an offset and no slope (calibration-in-the-large);
    # Wald intervals as conf_int(). Logistic recalibration after Cox, Biometrika 1958.
    y, p = _simulated(n=5000, seed=11, slope=slope, shift=shift)
    f = calibration_intercept_slope(y, p, confidence=0.9)
    L = logit(np.clip(p, DEFAULT_EPS, 1 - DEFAULT_EPS))
    two = _glm(y, L)
    off = _glm(y, L, offset=L)
    assert f.converged
    assert f.slope == pytest.approx(two.params[1], rel=1e-8)
    assert f.intercept_with_slope == pytest.approx(two.params[0], rel=1e-7, abs=1e-9)
    assert f.slope_se == pytest.approx(two.bse[1], rel=1e-7)
    assert f.intercept == pytest.approx(off.params[0], rel=1e-7, abs=1e-9)
    assert f.intercept_se == pytest.approx(off.bse[0], rel=1e-7)
    ci = two.conf_int(alpha=0.1)
    assert (f.slope_low, f.slope_high) == pytest.approx(tuple(ci[1]), rel=1e-7)
    ci = off.conf_int(alpha=0.1)
    assert (f.intercept_low, f.intercept_high) == pytest.approx(tuple(ci[0]), rel=1e-6, abs=1e-9)


def test_slope_on_open_data_matches_statsmodels_logit():
    # Reference: statsmodels Logit of the outcome on the logit of the score, breast cancer set.
    y, p = _breast_cancer_scores()
    f = calibration_intercept_slope(y, p)
    L = logit(np.clip(p, DEFAULT_EPS, 1 - DEFAULT_EPS))
    res = sm.Logit(y.astype(float), sm.add_constant(L)).fit(disp=0, tol=1e-12, maxiter=200)
    assert f.slope == pytest.approx(res.params[1], rel=1e-7)
    assert f.slope_se == pytest.approx(res.bse[1], rel=1e-6)


def test_cluster_robust_errors_match_statsmodels():
    # Reference: statsmodels GLM(Binomial).fit(cov_type="cluster") (CR1 small-sample factor).
    g = np.random.default_rng(21)
    k, m = 300, 6
    u = np.repeat(g.normal(0, 0.8, k), m)
    p = expit(-2.0 + u + g.normal(0, 0.7, k * m))
    y = g.random(k * m) < p
    cl = np.repeat(np.arange(k), m).astype(str)
    f = calibration_intercept_slope(y, p, cluster=cl)
    L = logit(p)
    groups = np.repeat(np.arange(k), m)
    two = _glm(y, L, cov_type="cluster", cov_kwds={"groups": groups})
    off = _glm(y, L, offset=L, cov_type="cluster", cov_kwds={"groups": groups})
    assert f.covariance == "cluster-robust"
    assert f.slope == pytest.approx(two.params[1], rel=1e-8)
    assert f.slope_se == pytest.approx(two.bse[1], rel=1e-6)
    assert f.intercept_with_slope_se == pytest.approx(two.bse[0], rel=1e-6)
    assert f.intercept_se == pytest.approx(off.bse[0], rel=1e-6)


def test_one_class_and_separation_give_no_fit():
    # Common practice, no source: the logistic likelihood has no finite optimum.
    p = np.linspace(0.01, 0.99, 50)
    f = calibration_intercept_slope(np.zeros(50, dtype=bool), p)
    assert not f.converged and np.isnan(f.slope) and "one class" in f.note
    f = calibration_intercept_slope(p > 0.5, p)
    assert not f.converged and np.isnan(f.slope_low)


# ------------------------------------------------------------------ observed / expected

def test_observed_expected_ratio_and_interval():
    # Reference: statsmodels proportion_confint(method="wilson") of the event rate, divided by
    # the mean score (E taken as fixed).
    y, p = _simulated(n=2500, seed=4, shift=0.2)
    oe, lo, hi = observed_expected_ratio(y, p)
    assert oe == pytest.approx(y.sum() / p.sum(), rel=1e-13)
    rlo, rhi = proportion_confint(y.sum(), y.shape[0], method="wilson")
    assert lo == pytest.approx(rlo / p.mean(), rel=1e-12)
    assert hi == pytest.approx(rhi / p.mean(), rel=1e-12)


# ------------------------------------------------------------------ the report

def test_report_calls_calibrated_scores_calibrated():
    # Outcomes drawn from the scores themselves (common practice, no source).
    y, p = _simulated(n=20000, seed=8)
    g = np.where(np.arange(y.shape[0]) % 2 == 0, "north", "south")
    ds = Dataset.from_arrays(y, p, groups={"region": g})
    r = calibration_report(ds)
    assert r.available and r.looks_calibrated and r.overall.verdict == "calibrated"
    assert r.overall.fit.slope_low <= 1 <= r.overall.fit.slope_high
    assert {(c.column, c.group) for c in r.groups} == {("region", "north"), ("region", "south")}
    assert r.criterion == CRITERION.format(conf="95%", min_events=100)
    assert any("Decide" in s and "they do." in s for s in r.statements)
    json.dumps(r.to_dict(), allow_nan=False)


def test_report_flags_miscalibration_and_says_why():
    # Scores too extreme: outcomes follow a slope of 0.6 on the logit (common practice).
    y, p = _simulated(n=20000, seed=12, slope=0.6)
    r = calibration_report(Dataset.from_arrays(y, p))
    assert not r.looks_calibrated
    assert r.overall.verdict == "miscalibrated"
    assert r.overall.fit.slope_high < 1
    assert "too extreme" in r.overall.statement
    assert any("they do not" in s for s in r.statements)


def test_too_few_events_is_never_called_calibrated():
    # Collins et al., Stat Med 2016 (from memory): at least 100 events for validation.
    y, p = _simulated(n=600, seed=2)
    assert y.sum() < 100
    r = calibration_report(Dataset.from_arrays(y, p))
    assert r.overall.verdict == "too few events" and not r.looks_calibrated
    assert r.overall.fit.slope_low <= 1 <= r.overall.fit.slope_high  # wide, not evidence


def test_group_verdicts_are_holm_adjusted():
    # Holm's step-down (Holm 1979) over 2 Wald tests per group; reference statsmodels
    # multipletests(method="holm").
    from statsmodels.stats.multitest import multipletests

    y, p = _simulated(n=30000, seed=13)
    g = np.array(list("abcdef"))[np.arange(y.shape[0]) % 6]
    r = calibration_report(Dataset.from_arrays(y, p, groups={"g": g}))
    raw = np.array([[c.fit.p_slope, c.fit.p_intercept] for c in r.groups]).ravel()
    ref = multipletests(raw, method="holm")[1].reshape(-1, 2)
    got = np.array([[c.p_slope_adjusted, c.p_intercept_adjusted] for c in r.groups])
    np.testing.assert_allclose(got, ref, rtol=1e-12)
    un = calibration_report(Dataset.from_arrays(y, p, groups={"g": g}), adjust="none")
    assert all(np.isnan(c.p_slope_adjusted) for c in un.groups)


def test_count_table_gives_the_row_numbers():
    # A count table (score, events, non-events) is the rows grouped by score (brief).
    y, p = _simulated(n=6000, seed=6, rounding=3)
    rows = calibration_report(Dataset.from_arrays(y, p), strategy="uniform")
    df = pd.DataFrame({"s": p, "y": y}).groupby("s")["y"].agg(["sum", "count"])
    ct = Dataset.from_count_table(df.index.to_numpy(), df["sum"].to_numpy(),
                                  (df["count"] - df["sum"]).to_numpy())
    cnt = calibration_report(ct, strategy="uniform")
    a, b = rows.overall, cnt.overall
    assert b.brier == pytest.approx(a.brier, rel=1e-12)
    assert b.fit.slope == pytest.approx(a.fit.slope, rel=1e-10)
    assert b.fit.slope_se == pytest.approx(a.fit.slope_se, rel=1e-8)
    assert b.oe_ratio == pytest.approx(a.oe_ratio, rel=1e-12)
    np.testing.assert_allclose(b.reliability.observed, a.reliability.observed, rtol=1e-12)
    np.testing.assert_allclose(b.reliability.rows, a.reliability.rows)


def test_not_available_for_non_probabilities():
    # Scores outside [0, 1] or lower-is-riskier are not probabilities (brief).
    y, p = _simulated(n=500, seed=1)
    r = calibration_report(Dataset.from_arrays(y, p * 10))
    assert not r.available and r.overall is None and not r.looks_calibrated
    assert "outside [0, 1]" in r.reason
    r = calibration_report(Dataset.from_arrays(y, p, higher_is_riskier=False))
    assert not r.available and "lower scores" in r.reason
    json.dumps(r.to_dict(), allow_nan=False)
    with pytest.raises(InputError, match="outside"):
        brier_score(y, p * 10)


def test_one_class_group_is_reported_not_fitted():
    # A group with no events gets its counts and Brier, no recalibration fit (issue text).
    y, p = _simulated(n=8000, seed=7)
    g = np.where(np.arange(y.shape[0]) < 7000, "big", "none")
    y = y.copy()
    y[7000:] = False
    r = calibration_report(Dataset.from_arrays(y, p, groups={"ward": g}))
    none = r.group("ward", "none")
    assert none.events == 0 and none.verdict == "cannot fit" and not none.looks_calibrated
    assert none.brier == pytest.approx(np.mean(p[7000:] ** 2), rel=1e-12)
    json.dumps(r.to_dict(), allow_nan=False)


def test_bad_arguments_raise_input_error():
    y, p = _simulated(n=300, seed=1)
    ds = Dataset.from_arrays(y, p)
    with pytest.raises(InputError, match="strategy"):
        calibration_report(ds, strategy="kmeans")
    with pytest.raises(InputError, match="bins"):
        calibration_report(ds, bins=0)
    with pytest.raises(InputError, match="not a mapped group"):
        calibration_report(ds, groups=["site"])


def test_demo_scores_look_calibrated_with_cluster_robust_errors():
    # The demo's deterioration score is generated as the true risk (sample_data/generate.py).
    from core.intake import load_demo

    ds = load_demo("hospital_q1")
    r = calibration_report(ds)
    assert r.looks_calibrated
    assert r.overall.fit.covariance == "cluster-robust"
    assert len(r.groups) == 7
    assert r.overall.reliability.rows.sum() == ds.n_rows
