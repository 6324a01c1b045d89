"""Comparing two scores on the same cases, checked against the outside.

Sources named beside each check:
* scikit-learn ``roc_auc_score`` / ``average_precision_score`` (reference
  library): every AUC and AP, including each paired-bootstrap replicate
  recomputed on the resampled rows;
* statsmodels ``mcnemar`` (reference library) for McNemar's test;
* DeLong, DeLong & Clarke-Pearson, Biometrics 1988 (from memory): the
  placement-value definition (checked by a pairwise numpy loop on small
  data), the variance against the paired bootstrap, and the 95 % coverage
  of its interval by simulation; Sun & Xu, IEEE SPL 2014 (from memory) for
  the fast midrank form being the same numbers;
* the bootstrap (Efron & Tibshirani 1993, from memory): "draw the rows with
  replacement, each class on its own" is what each replicate must equal;
* hand computation with numpy (common practice, no source): equal-workload
  recall and same-recall precision, flag decisions and their 2x2 tables;
* common practice, no source: flagging no one on a rare event has high
  accuracy and recall 0 (the accuracy trap).
"""

from __future__ import annotations

import itertools
import json

import numpy as np
import pytest
from scipy import stats
from sklearn.metrics import average_precision_score, roc_auc_score
from statsmodels.stats.contingency_tables import mcnemar

from core import InputError, sweep
from core.choose import choose
from core.compare import compare_dataset, compare_scores
from core.dataset import Dataset
from core.paired_tests import auc_difference, delong_covariance, mcnemar_test
from core.policy import loads_policy

POLICY = loads_policy('[objective]\nkind = "min_cost"\n[costs]\nfalse_positive = 1.0\n'
                      'false_negative = 20.0\n[rules]\nmin_recall = 0.4\n')


def _pair(seed=0, n=3000, prevalence=0.05, decimals=None, shift_a=1.0, shift_b=1.4, rho=0.6):
    """Two correlated binormal scores on the same cases."""
    rng = np.random.default_rng(seed)
    y = rng.random(n) < prevalence
    y[:2] = [True, False]
    za = rng.normal(size=n)
    zb = rho * za + np.sqrt(1 - rho ** 2) * rng.normal(size=n)
    a = shift_a * y + za
    b = shift_b * y + zb
    if decimals is not None:
        a, b = np.round(a, decimals), np.round(b, decimals)
    return y, a, b


# --------------------------------------------------------------------------- AUC and AP

@pytest.mark.parametrize("decimals", [None, 1])
@pytest.mark.parametrize("weighted", [False, True])
def test_auc_and_ap_equal_scikit_learn(decimals, weighted):
    # Source: scikit-learn roc_auc_score / average_precision_score (reference library),
    # with ties (decimals=1) and frequency weights; the second score is lower-is-riskier.
    y, a, b = _pair(seed=1, n=2000, decimals=decimals)
    w = np.random.default_rng(2).integers(1, 4, y.size).astype(float) if weighted else None
    c = compare_scores(y, {"cur": a, "cand": -b}, higher_is_riskier={"cand": False},
                       sample_weight=w, weight_kind="frequency" if weighted else None,
                       bootstrap=False)
    for name, s in (("cur", a), ("cand", b)):
        assert c.summaries[name].roc_auc == pytest.approx(roc_auc_score(y, s, sample_weight=w),
                                                          rel=1e-12)
        assert c.summaries[name].average_precision == pytest.approx(
            average_precision_score(y, s, sample_weight=w), rel=1e-12)
    d = c.pairs[0].roc_auc
    assert d.auc_a == pytest.approx(roc_auc_score(y, a, sample_weight=w), rel=1e-12)
    assert d.auc_b == pytest.approx(roc_auc_score(y, b, sample_weight=w), rel=1e-12)


def test_delong_equals_pairwise_definition_and_expanded_weights():
    # Source: DeLong, DeLong & Clarke-Pearson 1988 (from memory): V10(i) = mean_j psi(x_i, y_j),
    # V01(j) = mean_i psi(x_i, y_j), psi = 1 (x > y), 1/2 (tie), 0; S = S10/m + S01/n with
    # divisors m - 1 and n - 1. Computed here by the pairwise O(mn) loop the fast form avoids.
    y, a, b = _pair(seed=3, n=400, prevalence=0.2, decimals=1)
    res = delong_covariance(y, [a, b])
    V10, V01 = [], []
    for s in (a, b):
        psi = (s[y][:, None] > s[~y][None, :]) + 0.5 * (s[y][:, None] == s[~y][None, :])
        V10.append(psi.mean(axis=1))
        V01.append(psi.mean(axis=0))
    S = np.cov(np.array(V10)) / y.sum() + np.cov(np.array(V01)) / (~y).sum()
    np.testing.assert_allclose(res.covariance, S, rtol=1e-10)
    np.testing.assert_allclose(res.aucs, [roc_auc_score(y, a), roc_auc_score(y, b)], rtol=1e-12)
    # frequency weights are case counts: the same as the rows repeated (common practice)
    w = np.random.default_rng(4).integers(1, 5, y.size)
    rw = delong_covariance(y, [a, b], sample_weight=w)
    re = delong_covariance(np.repeat(y, w), [np.repeat(a, w), np.repeat(b, w)])
    np.testing.assert_allclose(rw.covariance, re.covariance, rtol=1e-9)
    np.testing.assert_allclose(rw.aucs, re.aucs, rtol=1e-12)
    with pytest.raises(InputError, match="sampling"):
        delong_covariance(y, [a, b], sample_weight=w, weight_kind="sampling")


def test_delong_variance_agrees_with_the_paired_bootstrap():
    # Source: DeLong et al. 1988 (from memory) against the paired bootstrap (Efron &
    # Tibshirani 1993): both estimate the sampling SE of AUC_b - AUC_a, the bootstrap with
    # the classes resampled separately as DeLong's variance treats them.
    # Tolerance: SE ratio within 10 % at n = 20,000 (1,000 events) with 2,000 replicates
    # (the bootstrap SE alone has a relative sampling error of about 1.6 %).
    y, a, b = _pair(seed=5, n=20_000, prevalence=0.05)
    c = compare_scores(y, {"a": a, "b": b}, n_replicates=2000, seed=11)
    p = c.pairs[0]
    se_boot = float(np.std(c.replicates["b"]["roc_auc"], ddof=1))
    assert p.roc_auc.se > 0
    assert 0.9 <= se_boot / p.roc_auc.se <= 1.1
    assert p.roc_auc_bootstrap.se == pytest.approx(se_boot)
    # the two intervals nearly coincide as well
    assert p.roc_auc_bootstrap.low == pytest.approx(p.roc_auc.low, abs=0.25 * p.roc_auc.se)
    assert p.roc_auc_bootstrap.high == pytest.approx(p.roc_auc.high, abs=0.25 * p.roc_auc.se)


def test_delong_interval_covers_the_true_difference_95_percent():
    # Source: DeLong et al. 1988 (from memory); binormal model (common practice): with
    # non-event scores N(0, 1) and event scores N(mu, 1), AUC = Phi(mu / sqrt(2)).
    # 3,000 seeded data sets of 100 events and 400 non-events, scores correlated (rho 0.6)
    # within each class, drawn in one vectorised call; the 95 % interval must cover the
    # true difference in 93-97 % of them (the simulation's own SE is about 0.4 points).
    sims, m, n, rho = 3000, 100, 400, 0.6
    mu_a, mu_b = 1.0, 1.3
    rng = np.random.default_rng(2024)
    za = rng.normal(size=(sims, m + n))
    zb = rho * za + np.sqrt(1 - rho ** 2) * rng.normal(size=(sims, m + n))
    y = np.r_[np.ones(m, bool), np.zeros(n, bool)]
    A = za + mu_a * y
    B = zb + mu_b * y
    true = stats.norm.cdf(mu_b / np.sqrt(2)) - stats.norm.cdf(mu_a / np.sqrt(2))
    covered = 0
    for i in range(sims):
        d = auc_difference(y, A[i], B[i])
        covered += d.low <= true <= d.high
    assert 0.93 <= covered / sims <= 0.97


# --------------------------------------------------------------------------- McNemar

@pytest.mark.parametrize("b,c", [(0, 0), (3, 10), (0, 7), (12, 12), (24, 0), (12, 13), (30, 20),
                                 (100, 130), (40, 40)])
def test_mcnemar_equals_statsmodels(b, c):
    # Source: statsmodels.stats.contingency_tables.mcnemar (reference library): exact
    # binomial below 25 discordant cases, chi-square with continuity correction from 25.
    exact = b + c < 25
    ours = mcnemar_test(b, c, both=50, neither=200)
    ref = mcnemar([[50, b], [c, 200]], exact=exact, correction=True)
    assert ours.exact == exact
    assert ours.method == ("exact binomial" if exact else "chi-square with continuity correction")
    assert ours.statistic == pytest.approx(float(ref.statistic), rel=1e-12)
    assert ours.p_value == pytest.approx(float(ref.pvalue), rel=1e-12)
    # forcing either form matches statsmodels too
    for ex in (True, False):
        if not ex and b + c == 0:
            continue
        r2 = mcnemar([[50, b], [c, 200]], exact=ex, correction=True)
        assert mcnemar_test(b, c, exact=ex).p_value == pytest.approx(float(r2.pvalue), rel=1e-12)


def test_disagreement_tables_and_mcnemar_by_hand():
    # Source: hand computation with numpy (common practice) and statsmodels mcnemar.
    y, a, b = _pair(seed=6, n=4000, decimals=2)
    c = compare_scores(y, {"a": a, "b": b}, bootstrap=False)
    ws = c.point_sets["workload"]
    fa = a >= ws.points["a"].threshold
    fb = b >= ws.points["b"].threshold
    dis = c.pairs[0].disagreement["workload"]
    assert dis.events_only_reference == np.sum(y & fa & ~fb)
    assert dis.events_only_candidate == np.sum(y & fb & ~fa)
    assert dis.events_both == np.sum(y & fa & fb)
    assert dis.false_alarms_only_candidate == np.sum(~y & fb & ~fa)
    assert dis.false_alarms_only_reference == np.sum(~y & fa & ~fb)
    table = [[np.sum(y & fa & fb), np.sum(y & fa & ~fb)], [np.sum(y & ~fa & fb), np.sum(y & ~fa & ~fb)]]
    disc = table[0][1] + table[1][0]
    ref = mcnemar(table, exact=disc < 25, correction=True)
    assert dis.mcnemar_events.p_value == pytest.approx(float(ref.pvalue), rel=1e-12)
    # correct decisions: reference right and candidate wrong, and the reverse
    ra, rb = fa == y, fb == y
    assert dis.correct_only_reference == np.sum(ra & ~rb)
    assert dis.correct_only_candidate == np.sum(rb & ~ra)


# --------------------------------------------------------------------------- operating points

def _by_hand_at_flag_rate(y, s, q, higher=True):
    """Strictest distinct threshold whose flag rate reaches q, by brute force."""
    ts = np.unique(s)[::-1] if higher else np.unique(s)
    for t in ts:
        flagged = s >= t if higher else s <= t
        if flagged.mean() >= q - 1e-12:
            return t, flagged.mean(), flagged[y].mean(), flagged
    raise AssertionError


def _by_hand_at_recall(y, s, r, higher=True):
    ts = np.unique(s)[::-1] if higher else np.unique(s)
    for t in ts:
        flagged = s >= t if higher else s <= t
        if flagged[y].mean() >= r - 1e-12:
            return t, flagged[y].mean(), y[flagged].mean()
    raise AssertionError


@pytest.mark.parametrize("q", [0.1, 0.25, 0.5])
def test_equal_workload_recall_by_hand(q):
    # Source: hand computation with numpy (common practice): each score at the strictest of
    # its own thresholds whose flag rate reaches q; ties make the actual flag rates differ.
    rng = np.random.default_rng(7)
    n = 60
    y = rng.random(n) < 0.3
    y[:2] = [True, False]
    a = np.round(rng.normal(y * 1.0, 1.0), 1)  # many ties
    b = np.round(rng.normal(y * 1.5, 1.0), 1)
    c = compare_scores(y, {"a": a, "b": -b}, higher_is_riskier={"b": False}, flag_rate=q,
                       bootstrap=False)
    ws = c.point_sets["workload"]
    assert ws.target == q
    for name, s, hi in (("a", a, True), ("b", -b, False)):
        t, fr, rec, _ = _by_hand_at_flag_rate(y, s, q, hi)
        p = ws.points[name]
        assert p.threshold == t
        assert p.flag_rate == pytest.approx(fr, rel=1e-12)
        assert p.recall == pytest.approx(rec, rel=1e-12)
    d = c.pairs[0].at["workload"]
    assert d["recall"].difference == pytest.approx(ws.points["b"].recall - ws.points["a"].recall)
    per = 1000.0 / (q * n)
    assert d["events_per_1000_flagged"].difference == pytest.approx(
        (ws.points["b"].tp - ws.points["a"].tp) * per)
    # same recall: the reference's recall at the workload by default
    rs = c.point_sets["recall"]
    for name, s, hi in (("a", a, True), ("b", -b, False)):
        t, rec, prec = _by_hand_at_recall(y, s, rs.target, hi)
        assert rs.points[name].threshold == t
        assert rs.points[name].precision == pytest.approx(prec, rel=1e-12)


def test_default_workload_is_the_reference_point_and_policy_matches_choose():
    # Source: core.choose.choose on each curve (the same policy, each its own threshold);
    # the expected-cost difference is the difference of choose's costs.
    y, a, b = _pair(seed=8, n=5000)
    c = compare_scores(y, {"a": a, "b": b}, policy=POLICY, n_replicates=300, seed=1)
    for name, s in (("a", a), ("b", b)):
        ch = choose(sweep(y, s), POLICY)
        p = c.point_sets["policy"].points[name]
        assert p.threshold == ch.point.threshold
        assert p.cost_per_case == pytest.approx(ch.point.cost_per_case, rel=1e-12)
    pa = c.point_sets["policy"].points["a"]
    assert c.point_sets["workload"].target == pa.flag_rate
    assert c.point_sets["workload"].points["a"].index == pa.index
    cd = c.pairs[0].at["policy"]["cost_per_case"]
    assert cd.difference == pytest.approx(c.point_sets["policy"].points["b"].cost_per_case
                                          - pa.cost_per_case, rel=1e-12)
    assert cd.better == "lower" and cd.low <= cd.high
    # b separates better (larger shift): lower cost, more events at the same workload
    assert c.pairs[0].verdict == "better"
    assert cd.settled == "candidate"
    assert "per 1,000 flagged" in c.pairs[0].verdict_text
    assert "interval" in c.pairs[0].verdict_text


def test_accuracy_trap_is_made_explicit():
    # Source: common practice, no source: on a rare event a threshold that flags fewer
    # cases scores a higher accuracy while catching fewer events.
    y, a, b = _pair(seed=9, n=20_000, prevalence=0.01, shift_a=2.0, shift_b=2.0, rho=0.9)
    ta = np.quantile(a, 0.95)  # flags 5 %: many false alarms, high recall
    tb = np.quantile(b, 0.995)  # flags 0.5 %: few flags, higher accuracy, lower recall
    c = compare_scores(y, {"a": a, "b": b}, thresholds={"a": ta, "b": tb}, bootstrap=False)
    assert c.own_points == "thresholds"
    pa, pb = (c.point_sets["thresholds"].points[k] for k in ("a", "b"))
    acc_a, acc_b = np.mean((a >= ta) == y), np.mean((b >= tb) == y)
    assert pa.accuracy == pytest.approx(acc_a) and pb.accuracy == pytest.approx(acc_b)
    assert acc_b > acc_a and pb.recall < pa.recall
    p = c.pairs[0]
    assert p.accuracy_trap
    assert "Accuracy trap" in p.accuracy_trap_text and "'b'" in p.accuracy_trap_text
    assert "Accuracy trap" in p.verdict_text
    base = next(r for r in c.accuracy_table if r["model"] == "flag none")
    assert base["accuracy"] == pytest.approx(1 - y.mean()) and base["recall"] == 0.0
    # at the same workload the trap disappears: recall is compared at equal flags
    assert c.point_sets["workload"].target == pytest.approx(np.mean(a >= ta))


# --------------------------------------------------------------------------- identical and negated

def test_identical_columns_give_zero_difference():
    # Source: definition (common practice): a score against itself differs by exactly 0.
    # DeLong's variance of the difference is 0: the interval is the degenerate [0, 0] and
    # z and the p-value are NaN (0/0); every bootstrap replicate differs by 0 too.
    y, a, _ = _pair(seed=10, n=3000, decimals=2)
    c = compare_scores(y, {"a": a, "copy": a.copy()}, n_replicates=200)
    p = c.pairs[0]
    assert p.roc_auc.difference == 0.0 and p.roc_auc.degenerate
    assert (p.roc_auc.low, p.roc_auc.high) == (0.0, 0.0)
    assert np.isnan(p.roc_auc.p_value) and np.isnan(p.roc_auc.z)
    for d in (p.average_precision, p.roc_auc_bootstrap, p.at["workload"]["recall"],
              p.at["workload"]["events_per_1000_flagged"], p.at["recall"]["precision"]):
        assert d.difference == 0.0
        assert d.low <= 0.0 <= d.high
        assert d.low == 0.0 and d.high == 0.0
        assert d.settled == "unclear"
    assert p.verdict == "no clear difference"
    assert [r["kind"] for r in c.relations] == ["identical"]
    assert any("same values" in w and "one model" in w for w in c.warnings)
    assert p.disagreement["workload"].events_only_candidate == 0
    assert p.disagreement["workload"].mcnemar_events.p_value == 1.0
    # a monotone transform ranks alike: the same zero difference, flagged as the same ranking
    c2 = compare_scores(y, {"a": a, "exp": np.exp(a)}, bootstrap=False)
    assert c2.pairs[0].roc_auc.difference == 0.0 and c2.pairs[0].roc_auc.degenerate
    assert c2.relations[0]["kind"] == "same ranking"


def test_a_column_and_its_negation():
    # Source: definition (common practice): -score ranks cases in reverse; with its direction
    # mapped (lower is riskier) it is the same model, and it must not be compared silently.
    y, a, _ = _pair(seed=12, n=3000)
    with pytest.raises(InputError) as err:
        compare_scores(y, {"a": a, "neg": -a}, bootstrap=False)
    msg = str(err.value)
    assert "neg" in msg and "below 0.5" in msg and "negation" in msg
    assert "lower-is-riskier" in msg
    c = compare_scores(y, {"a": a, "neg": -a}, higher_is_riskier={"neg": False}, n_replicates=100)
    assert c.summaries["neg"].roc_auc == pytest.approx(roc_auc_score(y, a), rel=1e-12)
    assert c.pairs[0].roc_auc.difference == pytest.approx(0.0, abs=1e-15)
    assert c.relations[0]["kind"] == "negation" and c.relations[0]["directions_agree"]
    assert any("negation" in w and "one model" in w for w in c.warnings)
    assert c.pairs[0].at["workload"]["recall"].difference == 0.0


def test_auc_below_half_asks_to_flip_the_direction():
    # Source: definition of ROC AUC (common practice): below 0.5 the score ranks non-events
    # above events.
    y, a, b = _pair(seed=13, n=2000)
    with pytest.raises(InputError) as err:
        compare_scores(y, {"a": a, "b": b}, higher_is_riskier={"b": False}, bootstrap=False)
    assert str(err.value).startswith("b: ROC AUC")
    assert "higher-is-riskier" in str(err.value)


# --------------------------------------------------------------------------- the paired bootstrap

def test_each_replicate_equals_scikit_learn_on_the_resampled_rows():
    # Source: the bootstrap definition (Efron & Tibshirani 1993, from memory) and
    # scikit-learn roc_auc_score / average_precision_score: replicate r draws, from
    # default_rng([seed, r]), the events' rows then the non-events' rows with replacement
    # (integers(0, n_c, n_c, int32)); both scores see the same rows.
    y, a, b = _pair(seed=14, n=500, prevalence=0.1, decimals=1)
    seed, R, q = 3, 25, 0.15
    c = compare_scores(y, {"a": a, "b": b}, flag_rate=q, recall=0.5, n_replicates=R, seed=seed)
    ev, ne = np.flatnonzero(y), np.flatnonzero(~y)
    rep = c.replicates["b"]
    for r in range(R):
        g = np.random.default_rng([seed, r])
        ie = g.integers(0, ev.size, size=ev.size, dtype=np.int32)
        ine = g.integers(0, ne.size, size=ne.size, dtype=np.int32)
        rows = np.r_[ev[ie], ne[ine]]
        yr, ar, br = y[rows], a[rows], b[rows]
        assert rep["roc_auc"][r] == pytest.approx(roc_auc_score(yr, br) - roc_auc_score(yr, ar),
                                                  abs=1e-12)
        assert rep["average_precision"][r] == pytest.approx(
            average_precision_score(yr, br) - average_precision_score(yr, ar), abs=1e-12)
        _, _, ra, _ = _by_hand_at_flag_rate(yr, ar, q)
        _, _, rb, _ = _by_hand_at_flag_rate(yr, br, q)
        assert rep["workload_recall"][r] == pytest.approx(rb - ra, abs=1e-12)
        _, _, pa = _by_hand_at_recall(yr, ar, 0.5)
        _, _, pb = _by_hand_at_recall(yr, br, 0.5)
        assert rep["recall_precision"][r] == pytest.approx(pb - pa, abs=1e-12)


@pytest.mark.parametrize("kind", ["frequency", "sampling"])
def test_weighted_replicates_equal_scikit_learn_on_the_drawn_cases(kind):
    # Source: scikit-learn roc_auc_score / average_precision_score with sample_weight
    # (reference library) on the documented draws: frequency weights draw round(W_c) cases
    # with probability proportional to the weights (u = random(M) * W_c placed in the
    # cumulative weights), each counting W_c / M; sampling weights draw n_c rows uniformly,
    # each carrying its own weight.
    y, a, b = _pair(seed=20, n=600, prevalence=0.1, decimals=1)
    rng = np.random.default_rng(21)
    w = rng.integers(1, 4, y.size).astype(float) if kind == "frequency" else rng.uniform(0.2, 3, y.size)
    seed, R = 4, 15
    c = compare_scores(y, {"a": a, "b": b}, sample_weight=w, weight_kind=kind, n_replicates=R,
                       seed=seed)
    ev, ne = np.flatnonzero(y), np.flatnonzero(~y)
    for r in range(R):
        g = np.random.default_rng([seed, r])
        mult = np.zeros(y.size)
        for rows in (ev, ne):
            if kind == "frequency":
                W = w[rows].sum()
                M = round(W)
                idx = np.searchsorted(np.cumsum(w[rows]), g.random(M) * W, side="right")
                np.add.at(mult, rows[idx], W / M)
            else:
                idx = g.integers(0, rows.size, size=rows.size, dtype=np.int32)
                np.add.at(mult, rows[idx], w[rows[idx]])
        keep = mult > 0
        yr, ar, br, wr = y[keep], a[keep], b[keep], mult[keep]
        want = roc_auc_score(yr, br, sample_weight=wr) - roc_auc_score(yr, ar, sample_weight=wr)
        assert c.replicates["b"]["roc_auc"][r] == pytest.approx(want, abs=1e-10)
        want = (average_precision_score(yr, br, sample_weight=wr)
                - average_precision_score(yr, ar, sample_weight=wr))
        assert c.replicates["b"]["average_precision"][r] == pytest.approx(want, abs=1e-10)


def test_bootstrap_reproducible_threads_and_progress():
    # Source: common practice, no source: per-replicate seeds make the results independent
    # of threads and chunking; progress reports reach the total.
    y, a, b = _pair(seed=15, n=3000)
    calls = []
    c1 = compare_scores(y, {"a": a, "b": b}, policy=POLICY, n_replicates=120, seed=5,
                        progress=lambda d, t: calls.append((d, t)))
    c2 = compare_scores(y, {"a": a, "b": b}, policy=POLICY, n_replicates=120, seed=5, n_jobs=2)
    for key, v in c1.replicates["b"].items():
        np.testing.assert_array_equal(v, c2.replicates["b"][key])
    assert calls[-1] == (120, 120) and all(x[0] <= y_[0] for x, y_ in itertools.pairwise(calls))
    c3 = compare_scores(y, {"a": a, "b": b}, policy=POLICY, n_replicates=120, seed=6)
    assert not np.array_equal(c1.replicates["b"]["roc_auc"], c3.replicates["b"]["roc_auc"])


def test_fixed_threshold_replicates_by_hand():
    # Source: hand computation with numpy on the resampled rows (common practice): at fixed
    # thresholds each replicate's recall and cost difference follow from the drawn rows.
    y, a, b = _pair(seed=16, n=800, prevalence=0.1)
    seed, R = 9, 10
    c = compare_scores(y, {"a": a, "b": b}, policy=POLICY, n_replicates=R, seed=seed)
    ta = c.point_sets["policy"].points["a"].threshold
    tb = c.point_sets["policy"].points["b"].threshold
    ev, ne = np.flatnonzero(y), np.flatnonzero(~y)
    pi = y.mean()
    for r in range(R):
        g = np.random.default_rng([seed, r])
        rows = np.r_[ev[g.integers(0, ev.size, size=ev.size, dtype=np.int32)],
                     ne[g.integers(0, ne.size, size=ne.size, dtype=np.int32)]]
        yr = y[rows]

        def cost(s, t, rows=rows, yr=yr):
            f = s[rows] >= t
            tpr, fpr = f[yr].mean(), f[~yr].mean()
            return 20.0 * pi * (1 - tpr) + 1.0 * (1 - pi) * fpr

        assert c.replicates["b"]["policy_cost_per_case"][r] == pytest.approx(
            cost(b, tb) - cost(a, ta), abs=1e-12)
        rec = (b[rows] >= tb)[yr].mean() - (a[rows] >= ta)[yr].mean()
        assert c.replicates["b"]["policy_recall"][r] == pytest.approx(rec, abs=1e-12)


# --------------------------------------------------------------------------- data paths

def test_compare_dataset_uses_its_columns_and_cached_curve():
    # Source: core.choose.choose on the dataset (score time, case costs) -- the same Fulcrum path.
    y, a, b = _pair(seed=17, n=3000)
    cost = np.random.default_rng(1).uniform(10, 100, y.size)
    ds = Dataset.from_arrays(y, a, case_cost=cost)
    pol = loads_policy('[objective]\nkind = "min_cost"\n[costs]\nfalse_positive = 1.0\n'
                       'false_negative_column = "case_cost"\n')
    c = compare_dataset(ds, {"new": b}, policy=pol, n_replicates=50)
    assert c.models == ("y_score", "new")
    assert c.curves["y_score"] is ds.curve()
    ch = choose(ds, pol)
    assert c.point_sets["policy"].points["y_score"].threshold == ch.point.threshold
    assert "cost_per_case" in c.pairs[0].at["policy"]
    with pytest.raises(InputError, match="dataset"):
        compare_dataset(ds, {"new": b}, sample_weight=np.ones(y.size))


def test_frequency_weights_equal_repeated_rows_and_sampling_weights():
    # Source: common practice, no source: integer frequency weights are case counts, so every
    # point value equals that of the rows repeated.
    y, a, b = _pair(seed=18, n=1500, decimals=2)
    w = np.random.default_rng(3).integers(1, 4, y.size).astype(float)
    cw = compare_scores(y, {"a": a, "b": b}, sample_weight=w, weight_kind="frequency",
                        n_replicates=50)
    ce = compare_scores(np.repeat(y, w.astype(int)), {"a": np.repeat(a, w.astype(int)),
                                                      "b": np.repeat(b, w.astype(int))},
                        bootstrap=False)
    pw, pe = cw.pairs[0], ce.pairs[0]
    assert pw.roc_auc.se == pytest.approx(pe.roc_auc.se, rel=1e-9)
    for k in ("recall", "events_per_1000_flagged"):
        assert pw.at["workload"][k].difference == pytest.approx(pe.at["workload"][k].difference)
    assert pw.disagreement["workload"].mcnemar_events.p_value == pytest.approx(
        pe.disagreement["workload"].mcnemar_events.p_value, rel=1e-12)
    # sampling weights: no DeLong, no McNemar; the AUC interval comes from the bootstrap
    cs = compare_scores(y, {"a": a, "b": b}, sample_weight=w, weight_kind="sampling",
                        n_replicates=100)
    ps = cs.pairs[0]
    assert ps.roc_auc is None and ps.roc_auc_difference.method.startswith("paired bootstrap")
    assert ps.roc_auc_difference.low <= ps.roc_auc_difference.high
    assert ps.disagreement["workload"].mcnemar_events is None
    assert ps.roc_auc_difference.candidate == pytest.approx(roc_auc_score(y, b, sample_weight=w))


def test_json_safe_and_bad_input():
    # Source: the house JSON rules (NaN and infinities disallowed).
    y, a, b = _pair(seed=19, n=1000)
    c = compare_scores(y, {"a": a, "b": b}, policy=POLICY, n_replicates=30)
    text = json.dumps(c.to_dict(), allow_nan=False)
    assert '"verdict_text"' in text
    with pytest.raises(InputError, match="at least two"):
        compare_scores(y, {"a": a})
    bad = b.copy()
    bad[[4, 9]] = np.nan
    with pytest.raises(InputError) as err:
        compare_scores(y, {"a": a, "b": bad})
    assert str(err.value).startswith("b:") and "2 rows: rows 5, 10" in str(err.value)
    with pytest.raises(InputError, match="^b:.*lengths must match"):
        compare_scores(y, {"a": a, "b": b[:-1]})
    with pytest.raises(InputError, match="weight_kind"):
        compare_scores(y, {"a": a, "b": b}, sample_weight=np.ones(y.size))
    with pytest.raises(InputError, match="higher_is_riskier"):
        compare_scores(y, {"a": a, "b": b}, higher_is_riskier={"c": False})


def test_case_dependent_costs_replicate_by_hand():
    # Source: hand computation with numpy on the drawn rows (common practice): with per-case
    # miss costs a_i, expected cost = pi * (missed events' summed a_i / events) + C_FP (1 - pi)
    # FPR (core.costs, from the brief), each threshold fixed at its policy point.
    y, a, b = _pair(seed=22, n=1500, prevalence=0.08)
    amount = np.random.default_rng(23).uniform(10, 100, y.size)
    pol = loads_policy('[objective]\nkind = "min_cost"\n[costs]\nfalse_positive = 2.0\n'
                       'false_negative_column = "case_cost"\n')
    seed, R = 8, 8
    c = compare_scores(y, {"a": a, "b": b}, event_cost=amount, policy=pol, n_replicates=R,
                       seed=seed)
    ta = c.point_sets["policy"].points["a"].threshold
    tb = c.point_sets["policy"].points["b"].threshold
    ev, ne = np.flatnonzero(y), np.flatnonzero(~y)
    pi = y.mean()
    for r in range(R):
        g = np.random.default_rng([seed, r])
        rows = np.r_[ev[g.integers(0, ev.size, size=ev.size, dtype=np.int32)],
                     ne[g.integers(0, ne.size, size=ne.size, dtype=np.int32)]]
        yr, cr = y[rows], amount[rows]

        def cost(s, t, rows=rows, yr=yr, cr=cr):
            f = s[rows] >= t
            missed = cr[yr & ~f].sum() / yr.sum()
            return pi * missed + 2.0 * (1 - pi) * f[~yr].mean()

        assert c.replicates["b"]["policy_cost_per_case"][r] == pytest.approx(
            cost(b, tb) - cost(a, ta), rel=1e-10)


def test_three_scores_each_against_the_reference():
    # Source: DeLong et al. 1988 (from memory) for k correlated AUCs: the k x k covariance.
    y, a, b = _pair(seed=24, n=3000)
    c3 = np.round(a + b, 3)
    comp = compare_scores(y, {"a": a, "b": b, "c": c3}, reference="b", bootstrap=False)
    assert comp.models == ("b", "a", "c") and comp.reference == "b"
    assert [p.candidate for p in comp.pairs] == ["a", "c"]
    res = delong_covariance(y, [b, a, c3])
    np.testing.assert_allclose(comp.auc_covariance, res.covariance, rtol=1e-12)
    assert comp.pair("c").roc_auc.difference == pytest.approx(res.aucs[2] - res.aucs[0])
    assert comp.pair("a").roc_auc.se == pytest.approx(res.difference(0, 1).se)


def test_policy_no_point_of_one_score_meets():
    # Source: core.choose.choose (the same policy on each curve): a rule the weaker score
    # cannot meet leaves it without a point, said in words, not compared silently.
    y, a, b = _pair(seed=25, n=4000, prevalence=0.05, shift_a=0.3, shift_b=2.5)
    pol = loads_policy('[objective]\nkind = "max_recall"\n[rules]\nmin_precision = 0.5\n')
    assert choose(sweep(y, a), pol).point is None and choose(sweep(y, b), pol).point is not None
    c = compare_scores(y, {"a": a, "b": b}, policy=pol, n_replicates=50)
    assert c.point_sets["policy"].points["a"] is None
    assert "policy" not in c.pairs[0].at
    assert "no threshold of 'a' meets every rule" in c.pairs[0].verdict_text
    assert c.point_sets["workload"].target_source.startswith("the validation prevalence")
    json.dumps(c.to_dict(), allow_nan=False)
