"""The exact sweep checked against the outside.

Sources named beside each check: scikit-learn's metrics (reference library),
the Wisconsin Diagnostic Breast Cancer set shipped with scikit-learn (open
data), Altman & Bland (BMJ 1994, worked example, from memory), and common
practice for the majority-class trap.

Convention mapping (Fulcrum vs scikit-learn):
* Fulcrum's curve starts with "flag none" (threshold +inf, precision 0/0 =
  NaN); scikit-learn's ``roc_curve`` also starts at +inf with (0, 0), while
  ``precision_recall_curve`` lists thresholds ascending and appends an extra
  point (precision 1, recall 0) that stands for "flag none": we compare the
  remaining points in reverse order and map that extra point to our NaN.
* F1 / F-beta / MCC with a zero denominator: scikit-learn returns 0, Fulcrum NaN.
"""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from sklearn import metrics as skm

from core import Curve, InputError, sweep
from core.metrics import METRIC_NAMES, confusion_metrics

RTOL = 1e-12  # float sums in another order: agreement to ~12 significant digits


def _data(seed: int, n: int, prevalence: float, decimals: int | None, weighted: bool):
    rng = np.random.default_rng(seed)
    y = rng.random(n) < prevalence
    # guarantee both classes
    y[rng.integers(n)] = True
    y[rng.integers(n)] = False
    s = rng.normal(loc=1.2 * y, scale=1.0)
    if decimals is not None:
        s = np.round(s, decimals)
    w = rng.uniform(0.1, 3.0, n) if weighted else None
    return y.astype(int), s, w


data_params = st.tuples(
    st.integers(0, 2**31 - 1),
    st.sampled_from([0.001, 0.005, 0.02, 0.1, 0.5]),
    st.sampled_from([None, 1, 2, 4]),
    st.booleans(),
)


def _n_for(prev: float) -> int:
    return 3000 if prev <= 0.001 else 1200


@settings(max_examples=60, deadline=None, derandomize=True)
@given(data_params)
def test_counts_match_sklearn_confusion_matrix_at_thresholds(params):
    # Source: scikit-learn confusion_matrix_at_thresholds (reference library).
    seed, prev, dec, weighted = params
    y, s, w = _data(seed, _n_for(prev), prev, dec, weighted)
    c = sweep(y, s, w)
    tns, fps, fns, tps, th = skm.confusion_matrix_at_thresholds(y, s, sample_weight=w)
    np.testing.assert_array_equal(c.thresholds[1:], th)
    assert c.thresholds[0] == np.inf
    if w is None:
        np.testing.assert_array_equal(c.tp[1:], tps)
        np.testing.assert_array_equal(c.fp[1:], fps)
        np.testing.assert_array_equal(c.fn[1:], fns)
        np.testing.assert_array_equal(c.tn[1:], tns)
    else:
        np.testing.assert_allclose(c.tp[1:], tps, rtol=RTOL, atol=1e-9)
        np.testing.assert_allclose(c.fp[1:], fps, rtol=RTOL, atol=1e-9)


@settings(max_examples=60, deadline=None, derandomize=True)
@given(data_params)
def test_roc_pr_auc_ap_match_sklearn(params):
    # Source: scikit-learn roc_curve(drop_intermediate=False), precision_recall_curve,
    # roc_auc_score, average_precision_score (reference library).
    seed, prev, dec, weighted = params
    y, s, w = _data(seed, _n_for(prev), prev, dec, weighted)
    c = sweep(y, s, w)
    fpr, tpr, th = skm.roc_curve(y, s, sample_weight=w, drop_intermediate=False)
    np.testing.assert_array_equal(th, c.thresholds)
    np.testing.assert_allclose(c.fpr, fpr, rtol=RTOL, atol=1e-15)
    np.testing.assert_allclose(c.recall, tpr, rtol=RTOL, atol=1e-15)

    prec, rec, th_pr = skm.precision_recall_curve(y, s, sample_weight=w)
    np.testing.assert_array_equal(th_pr[::-1], c.thresholds[1:])
    np.testing.assert_allclose(prec[:-1][::-1], c.precision[1:], rtol=RTOL)
    np.testing.assert_allclose(rec[:-1][::-1], c.recall[1:], rtol=RTOL, atol=1e-15)
    # The extra (precision 1, recall 0) point is scikit-learn's "flag none": ours is 0/0 = NaN.
    assert prec[-1] == 1.0 and rec[-1] == 0.0
    assert np.isnan(c.precision[0]) and c.recall[0] == 0.0

    assert c.roc_auc == pytest.approx(skm.roc_auc_score(y, s, sample_weight=w), rel=RTOL)
    assert c.average_precision == pytest.approx(
        skm.average_precision_score(y, s, sample_weight=w), rel=RTOL)


@settings(max_examples=25, deadline=None, derandomize=True)
@given(data_params, st.floats(0.5, 4.0))
def test_metrics_at_points_match_sklearn_scores(params, beta):
    # Source: scikit-learn precision/recall/fbeta/MCC/balanced accuracy/accuracy on the
    # thresholded predictions (reference library). 0/0: scikit-learn 0, Fulcrum NaN.
    seed, prev, dec, weighted = params
    y, s, w = _data(seed, 400, max(prev, 0.02), dec, weighted)
    c = sweep(y, s, w)
    rng = np.random.default_rng(seed)
    m = c.metrics(beta=beta)
    for k in np.unique(np.r_[1, c.n_points - 1, rng.integers(1, c.n_points, 6)]):
        pred = (s >= c.thresholds[k]).astype(int)
        kw = dict(sample_weight=w)
        assert m["precision"][k] == pytest.approx(skm.precision_score(y, pred, zero_division=np.nan, **kw), rel=1e-10)
        assert m["recall"][k] == pytest.approx(skm.recall_score(y, pred, **kw), rel=1e-10)
        assert m["accuracy"][k] == pytest.approx(skm.accuracy_score(y, pred, **kw), rel=1e-10)
        assert m["balanced_accuracy"][k] == pytest.approx(skm.balanced_accuracy_score(y, pred, **kw), rel=1e-10)
        sk_f = skm.fbeta_score(y, pred, beta=beta, zero_division=0.0, **kw)
        sk_f1 = skm.f1_score(y, pred, zero_division=0.0, **kw)
        if c.tp[k] > 0:
            assert m["fbeta"][k] == pytest.approx(sk_f, rel=1e-10)
            assert m["f1"][k] == pytest.approx(sk_f1, rel=1e-10)
        sk_mcc = skm.matthews_corrcoef(y, pred, **kw)
        if np.isfinite(m["mcc"][k]):
            assert m["mcc"][k] == pytest.approx(sk_mcc, rel=1e-9, abs=1e-12)
        else:  # flag all: a zero margin -> scikit-learn 0, Fulcrum NaN
            assert sk_mcc == 0.0
        tn, fp, fn, tp = skm.confusion_matrix(y, pred, sample_weight=w).ravel()
        assert (c.tp[k], c.fp[k]) == (pytest.approx(tp, rel=1e-10), pytest.approx(fp, rel=1e-10))


def test_flag_none_conventions():
    # Common practice, no source: at flag none precision is 0/0 (NaN in Fulcrum; scikit-learn
    # reports 0 with zero_division=0), recall 0, specificity 1.
    y = np.array([0, 0, 1, 0, 1])
    s = np.array([0.1, 0.2, 0.8, 0.3, 0.6])
    c = sweep(y, s)
    p = c.point(0)
    assert np.isnan(p.metrics["precision"]) and np.isnan(p.metrics["mcc"]) and np.isnan(p.metrics["nne"])
    assert p.metrics["f1"] == 0.0  # 2TP / (2TP + FP + FN) = 0 / FN: defined
    f = confusion_metrics(0.0, 0.0, 0.0, 10.0)  # no events, nothing flagged: F1 is 0/0
    assert np.isnan(f["f1"]) and np.isnan(f["recall"])
    assert p.metrics["recall"] == 0.0 and p.metrics["specificity"] == 1.0
    assert skm.f1_score(y, np.zeros(5, int), zero_division=0.0) == 0.0  # the mapping stated above


def test_altman_bland_liver_scan():
    # Source: Altman & Bland, BMJ 1994, "Diagnostic tests 1 and 2" (worked example, from memory):
    # liver scan against pathology, TP 231, FP 32, FN 27, TN 54.
    y = np.r_[np.ones(231 + 27), np.zeros(32 + 54)]
    s = np.r_[np.ones(231), np.zeros(27), np.ones(32), np.zeros(54)]  # 1 = abnormal scan
    c = sweep(y, s)
    p = c.at(1.0)
    assert (p.tp, p.fp, p.fn, p.tn) == (231, 32, 27, 54)
    assert p.metrics["recall"] == pytest.approx(231 / 258, rel=1e-15)
    assert p.metrics["specificity"] == pytest.approx(54 / 86, rel=1e-15)
    assert p.metrics["precision"] == pytest.approx(231 / 263, rel=1e-15)
    assert p.metrics["npv"] == pytest.approx(54 / 81, rel=1e-15)
    assert round(p.metrics["recall"], 3) == 0.895 and round(p.metrics["specificity"], 3) == 0.628


def test_breast_cancer_end_to_end():
    # Source: Wisconsin Diagnostic Breast Cancer data shipped with scikit-learn (569 cases,
    # 212 malignant, coded 0 there, so the event is target == 0); scikit-learn reference metrics.
    from sklearn.datasets import load_breast_cancer
    from sklearn.linear_model import LogisticRegression
    from sklearn.model_selection import cross_val_predict
    from sklearn.pipeline import make_pipeline
    from sklearn.preprocessing import StandardScaler

    X, target = load_breast_cancer(return_X_y=True)
    y = (target == 0).astype(int)
    assert y.size == 569 and y.sum() == 212
    model = make_pipeline(StandardScaler(), LogisticRegression(max_iter=2000))
    p = cross_val_predict(model, X, y, cv=5, method="predict_proba")[:, 1]
    c = sweep(y, p)
    assert c.n_events == 212 and c.n_nonevents == 357
    assert c.roc_auc == pytest.approx(skm.roc_auc_score(y, p), rel=RTOL)
    assert c.average_precision == pytest.approx(skm.average_precision_score(y, p), rel=RTOL)
    assert c.roc_auc > 0.98
    pt = c.at(0.5)
    tn, fp, fn, tp = skm.confusion_matrix(y, (p >= 0.5).astype(int)).ravel()
    assert (pt.tp, pt.fp, pt.fn, pt.tn) == (tp, fp, fn, tn)


def test_majority_class_trap():
    # Common practice, no source: always predicting the majority class at 0.5 % prevalence
    # gives 99.5 % accuracy and recall 0.
    y = np.r_[np.ones(5), np.zeros(995)]
    s = np.linspace(0, 1, 1000)
    c = sweep(y, s)
    none = c.point(0)
    assert none.metrics["accuracy"] == pytest.approx(0.995, rel=1e-15)
    assert none.metrics["recall"] == 0.0
    assert none.metrics["flag_rate"] == 0.0


# --------------------------------------------------------------------------- exact points

@settings(max_examples=40, deadline=None, derandomize=True)
@given(st.integers(0, 2**31 - 1), st.booleans(), st.booleans())
def test_at_any_threshold_equals_brute_force(seed, higher, weighted):
    rng = np.random.default_rng(seed)
    n = 300
    y = (rng.random(n) < 0.1).astype(int)
    y[:2] = [0, 1]
    s = np.round(rng.normal(size=n), 1)
    w = rng.uniform(0, 2, n) if weighted else np.ones(n)
    c = sweep(y, s, w if weighted else None, higher_is_riskier=higher)
    probes = np.r_[np.unique(s), rng.normal(size=20) * 2, np.unique(s) + 1e-9, np.unique(s) - 1e-9,
                   np.inf, -np.inf]
    for t in probes:
        flagged = s >= t if higher else s <= t
        p = c.at(t)
        assert p.tp == pytest.approx(np.sum(w[flagged & (y == 1)]), rel=1e-12, abs=1e-12)
        assert p.fp == pytest.approx(np.sum(w[flagged & (y == 0)]), rel=1e-12, abs=1e-12)
        # every threshold inside the reported interval gives the same counts
        lo, hi = p.interval_low, p.interval_high
        inside = hi if p.closed == "high" else lo
        assert c.index_at(inside) == p.index
        if np.isfinite(lo) and np.isfinite(hi):
            assert c.index_at((lo + hi) / 2) == p.index
        outside = lo if p.closed == "high" else hi
        if np.isfinite(outside):
            assert c.index_at(outside) != p.index
        assert p.threshold == t
        assert (p.point_threshold in (np.inf, -np.inf)) or p.point_threshold in set(s)


def test_lower_is_riskier_equals_negated_score():
    rng = np.random.default_rng(7)
    y = (rng.random(2000) < 0.03).astype(int)
    s = np.round(rng.normal(-y, 1.0), 3)
    lo = sweep(y, s, higher_is_riskier=False)
    neg = sweep(y, -s)
    np.testing.assert_array_equal(lo.thresholds, -neg.thresholds)
    np.testing.assert_array_equal(lo.tp, neg.tp)
    np.testing.assert_array_equal(lo.fp, neg.fp)
    assert lo.thresholds[0] == -np.inf
    assert np.all(np.diff(lo.thresholds) > 0)
    assert lo.roc_auc == pytest.approx(skm.roc_auc_score(y, -s), rel=RTOL)
    assert lo.at(-0.5).tp == np.sum((s <= -0.5) & (y == 1))


def test_thresholds_strictly_decreasing_and_negative_zero():
    y = np.array([1, 0, 0, 1, 0])
    s = np.array([-0.0, 0.0, 0.5, 0.5, -1.0])
    c = sweep(y, s)
    assert np.all(np.diff(c.thresholds) < 0)
    np.testing.assert_array_equal(c.thresholds, [np.inf, 0.5, 0.0, -1.0])
    assert not np.signbit(c.thresholds[2])  # -0 is written as +0
    np.testing.assert_array_equal(c.tp, [0, 1, 2, 2])
    np.testing.assert_array_equal(c.fp, [0, 1, 2, 3])


def test_prevalence_adjusted_metrics_follow_bayes_rule():
    # Bayes' rule under label shift (sensitivity and specificity carry over).
    rng = np.random.default_rng(3)
    y = (rng.random(5000) < 0.2).astype(int)
    s = rng.normal(y, 1)
    c = sweep(y, s)
    pi = 0.02
    p = c.at(0.8, prevalence=pi)
    se, sp = p.metrics["recall"], p.metrics["specificity"]
    d = p.deployment
    assert d["recall"] == se and d["specificity"] == sp
    assert d["precision"] == pytest.approx(pi * se / (pi * se + (1 - pi) * (1 - sp)), rel=1e-14)
    assert d["npv"] == pytest.approx((1 - pi) * sp / ((1 - pi) * sp + pi * (1 - se)), rel=1e-14)
    assert d["flag_rate"] == pytest.approx(pi * se + (1 - pi) * (1 - sp), rel=1e-14)
    assert d["accuracy"] == pytest.approx(pi * se + (1 - pi) * sp, rel=1e-14)
    assert d["lift"] == pytest.approx(d["precision"] / pi, rel=1e-14)
    assert d["nne"] == pytest.approx(1 / d["precision"], rel=1e-14)
    # at the validation prevalence the adjusted metrics equal the plain ones
    q = c.at(0.8, prevalence=c.prevalence)
    for name in METRIC_NAMES:
        assert q.deployment[name] == pytest.approx(q.metrics[name], rel=1e-12)


def test_from_counts_equals_rows_in_any_order():
    rng = np.random.default_rng(11)
    n = 20000
    y = (rng.random(n) < 0.01).astype(int)
    s = np.round(rng.normal(y, 1), 2)
    cost = rng.uniform(10, 500, n)
    rows = sweep(y, s, event_cost=cost)
    import pandas as pd

    df = pd.DataFrame({"s": s, "y": y, "c": np.where(y == 1, cost, 0.0)})
    g = df.groupby("s").agg(events=("y", "sum"), total=("y", "size"), cost=("c", "sum")).reset_index()
    g = g.sample(frac=1.0, random_state=1)  # any row order, as a GROUP BY returns
    # split one score's row in two to check repeats are summed
    g2 = pd.concat([g, g.iloc[:1].assign(events=0, total=0, cost=0.0)])
    tab = Curve.from_counts(g2["s"], g2["events"], g2["total"] - g2["events"], event_cost=g2["cost"])
    np.testing.assert_array_equal(tab.thresholds, rows.thresholds)
    np.testing.assert_array_equal(tab.tp, rows.tp)
    np.testing.assert_array_equal(tab.fp, rows.fp)
    np.testing.assert_allclose(tab.event_cost_flagged, rows.event_cost_flagged, rtol=1e-12)
    assert tab.roc_auc == rows.roc_auc and tab.average_precision == rows.average_precision
    assert tab.n_rows == n and not tab.weighted


def test_event_cost_cumulative_sum():
    y = np.array([1, 0, 1, 1, 0])
    s = np.array([0.9, 0.8, 0.7, 0.7, 0.1])
    a = np.array([100.0, 5.0, 30.0, 20.0, 1e9])  # non-event amounts are ignored
    c = sweep(y, s, event_cost=a)
    np.testing.assert_array_equal(c.event_cost_flagged, [0, 100, 100, 150, 150])
    assert c.at(0.75).miss_cost == 50.0


def test_squared_weights_are_carried():
    y = np.array([1, 0, 1, 0])
    s = np.array([0.9, 0.9, 0.5, 0.1])
    w = np.array([2.0, 3.0, 0.5, 1.0])
    c = sweep(y, s, w)
    np.testing.assert_array_equal(c.tp_sq, [0, 4, 4.25, 4.25])
    np.testing.assert_array_equal(c.fp_sq, [0, 9, 9, 10])
    assert c.weighted


def test_table_and_downsample():
    rng = np.random.default_rng(5)
    y = (rng.random(100_000) < 0.02).astype(int)
    s = rng.normal(y, 1)
    c = sweep(y, s)
    t = c.table()
    assert list(t.columns[:5]) == ["threshold", "tp", "fp", "fn", "tn"]
    assert len(t) == c.n_points and set(METRIC_NAMES) <= set(t.columns)
    keep = [12345, 67890]
    for space in ("roc", "pr"):
        idx = c.downsample(2000, keep=keep, space=space)
        assert idx.size <= 2000 and idx[0] == 0 and idx[-1] == c.n_points - 1
        assert set(keep) <= set(idx.tolist()) and np.all(np.diff(idx) > 0)
        # shape kept: the drawn ROC's area is within 0.001 of the exact AUC
        fpr, tpr = c.fpr[idx], c.recall[idx]
        assert abs(np.sum(np.diff(fpr) * (tpr[1:] + tpr[:-1]) / 2) - c.roc_auc) < 1e-3
    small = sweep([0, 1, 0], [0.1, 0.2, 0.3])
    np.testing.assert_array_equal(small.downsample(2000), np.arange(small.n_points))


def test_confusion_metrics_vectorised_and_nan():
    m = confusion_metrics(np.array([0.0, 5]), np.array([0.0, 5]), np.array([10.0, 5]), np.array([90.0, 85]))
    assert np.isnan(m["precision"][0]) and m["precision"][1] == 0.5
    assert m["recall"][1] == 0.5 and m["flagged_per_1000"][1] == 100.0


def test_arrays_are_read_only():
    c = sweep([0, 1, 0, 1], [0.1, 0.4, 0.35, 0.8])
    with pytest.raises(ValueError):
        c.tp[0] = 1.0
    with pytest.raises(ValueError):
        c.thresholds[0] = 1.0


# --------------------------------------------------------------------------- bad input

@pytest.mark.parametrize("y, s, w, message", [
    ([0, 1, 2, 1, 3], [0.1, 0.2, 0.3, 0.4, 0.5], None,
     "y_true: must be 0/1 or bool; other values found [2, 3] (2 rows: rows 3, 5)"),
    (["0", "1", "1"], [0.1, 0.2, 0.3], None,
     "y_true: must be 0/1 or bool; other values found ['0', '1'] (3 rows: rows 1, 2, 3)"),
    ([0, 1, 1], [0.1, 0.2], None, "y_score: has 2 values but y_true has 3; lengths must match"),
    ([0, 1, 1, 0], [0.1, np.nan, np.inf, 0.3], None,
     "y_score: holds NaN or infinite values (2 rows: rows 2, 3)"),
    ([0, 1, 1, 0], [0.1, 0.2, 0.3, 0.4], [1.0, -2.0, 1.0, -0.5],
     "sample_weight: holds negative values (2 rows: rows 2, 4)"),
    ([0, 1, 1, 0], [0.1, 0.2, 0.3, 0.4], [1.0, np.nan, 1.0, 1.0],
     "sample_weight: holds NaN or infinite values (1 row: row 2)"),
    ([0, 0, 0], [0.1, 0.2, 0.3], None,
     "y_true: holds no events (y = 1) with positive rows: need both classes"),
    ([1, 1], [0.1, 0.2], None,
     "y_true: holds no non-events (y = 0) with positive rows: need both classes"),
    ([0, 1], [0.1, 0.2], [1.0, 0.0],
     "y_true: holds no events (y = 1) with positive weight: need both classes"),
    ([], [], None, "y_true: is empty: no cases to sweep"),
    ([0, 1, 0], ["0.1", "a", "0.3"], None, "y_score: holds values that are not numbers (1 row: row 2)"),
    ([[0, 1]], [[0.1, 0.2]], None, "y_true: must be one-dimensional, got shape (1, 2)"),
])
def test_bad_input_messages(y, s, w, message):
    with pytest.raises(InputError) as err:
        sweep(y, s, w)
    assert str(err.value) == message
    assert isinstance(err.value, ValueError)


def test_many_bad_rows_are_counted_and_first_shown():
    s = np.zeros(1000)
    s[::7] = np.nan
    y = np.r_[np.ones(500), np.zeros(500)]
    with pytest.raises(InputError) as err:
        sweep(y, s)
    e = err.value
    assert e.n_rows == 143 and e.rows == (1, 8, 15, 22, 29)
    assert str(e) == "y_score: holds NaN or infinite values (143 rows: rows 1, 8, 15, 22, 29 and 138 more)"


def test_nan_threshold_rejected():
    c = sweep([0, 1], [0.1, 0.2])
    with pytest.raises(InputError, match="threshold: is NaN"):
        c.at(float("nan"))


def test_bool_labels_and_float_labels_accepted():
    s = [0.3, 0.2, 0.9, 0.1]
    a = sweep(np.array([False, True, True, False]), s)
    b = sweep(np.array([0.0, 1.0, 1.0, 0.0]), s)
    c = sweep(np.array([0, 1, 1, 0], dtype=object), s)
    for other in (b, c):
        np.testing.assert_array_equal(a.tp, other.tp)
        np.testing.assert_array_equal(a.fp, other.fp)


@pytest.mark.parametrize("decimals", [None, 1])  # continuous: argsort path; coarse: hashed path
@pytest.mark.parametrize("higher", [True, False])
def test_weighted_event_cost_both_paths_equal_brute_force(decimals, higher):
    rng = np.random.default_rng(21)
    n = 4000
    y = (rng.random(n) < 0.05).astype(int)
    s = rng.normal(y, 1.0)
    if decimals is not None:
        s = np.round(s, decimals)
    s[:3] = [-0.0, 0.0, -0.0]
    w = rng.choice([0.25, 0.5, 1.0, 2.0], n)  # dyadic: sums exact in any order
    a = rng.uniform(1, 100, n)
    c = sweep(y, s, w, higher_is_riskier=higher, event_cost=a)
    for k in range(0, c.n_points, max(1, c.n_points // 50)):
        t = c.thresholds[k]
        flagged = (s >= t) if higher else (s <= t)
        assert c.tp[k] == np.sum(w[flagged & (y == 1)])
        assert c.fp[k] == np.sum(w[flagged & (y == 0)])
        assert c.event_cost_flagged[k] == pytest.approx(np.sum((w * a)[flagged & (y == 1)]), rel=1e-12, abs=1e-9)
        assert c.tp_sq[k] == np.sum((w * w)[flagged & (y == 1)])
    assert not np.signbit(c.thresholds).any() or np.all(c.thresholds[np.signbit(c.thresholds)] < 0)


@pytest.mark.parametrize("decimals", [None, 1])
def test_weighted_counts_are_monotone_and_within_totals(decimals):
    # Float sums must never let FP exceed N (1 - FPR < 0 broke an interval): FP is the running sum
    # of the non-events' own weights, so it is monotone and ends exactly at N.
    rng = np.random.default_rng(5)
    y = rng.random(3000) < 0.3
    s = rng.normal(size=3000)
    if decimals is not None:
        s = np.round(s, decimals)
    w = rng.uniform(0.1, 3.0, 3000) * 1.00001
    for higher in (True, False):
        c = sweep(y, s, w, higher_is_riskier=higher)
        assert np.all(np.diff(c.fp) >= 0) and np.all(np.diff(c.tp) >= 0)
        assert np.all(c.fp <= c.n_nonevents) and np.all(c.tp <= c.n_events)
        assert np.all(c.specificity >= 0) and np.all(c.fp_sq >= 0)


@pytest.mark.parametrize("decimals", [None, 5, 1])  # no ties, ties (argsort path), coarse (hashed)
@pytest.mark.parametrize("higher", [True, False])
def test_weighted_sweep_temporaries_stay_small(decimals, higher):
    # Issue 10's memory goal (peak extra memory of a weighted sweep under 4x its inputs), at a
    # size where numpy's allocations dominate: tracemalloc counts them exactly, so this is not a
    # timed test. The curve's own six arrays take 48 bytes per distinct score of the 17 bytes per
    # row of input (bool + two float64), ~2.8x; the rest is what the sweep may keep meanwhile.
    # Common practice, no source.
    import tracemalloc

    rng = np.random.default_rng(8)
    n = 400_000
    y = rng.random(n) < 0.02
    s = rng.normal(loc=1.0 * y)
    if decimals is not None:
        s = np.round(s, decimals)
    w = rng.uniform(0.5, 2.0, n)
    tracemalloc.start()
    try:
        tracemalloc.reset_peak()
        c = sweep(y, s, w, higher_is_riskier=higher)
        _, peak = tracemalloc.get_traced_memory()
    finally:
        tracemalloc.stop()
    assert peak < 4.0 * (y.nbytes + s.nbytes + w.nbytes)
    assert c.tp[-1] == pytest.approx(w[y].sum(), rel=1e-12)
