"""Intervals at the operating point and the Evidence, checked against the outside.

Sources named beside each check:
* statsmodels ``proportion_confint`` (reference library): ``wilson`` and
  ``beta`` (Clopper-Pearson);
* Altman & Bland, BMJ 1994 (Diagnostic tests 1 and 2, from memory): liver
  scan vs pathology, TP 231, FP 32, FN 27, TN 54;
* Kish, *Survey Sampling* 1965 (from memory): effective size (sum w)^2 / sum w^2;
* Mercaldo, Lau & Zhou, Stat Med 2007 (from memory): PPV at a prevalence
  by Bayes' rule, interval on the logit scale;
* coverage by simulation from a known binormal population (common practice,
  no source): events N(2, 1), non-events N(0, 1), fixed threshold 2, so the
  true recall is 0.5 and the true precision pi 0.5 / (pi 0.5 + (1 - pi)(1 - Phi(2))).
"""

from __future__ import annotations

import json

import numpy as np
import pytest
from scipy import stats
from statsmodels.stats.proportion import proportion_confint

from core import InputError, sweep
from core.bootstrap import percentile_interval
from core.cautions import FEW_EVENTS
from core.dataset import Dataset
from core.intervals import ppv_logit_interval, wilson_interval
from core.policy import Costs, Deployment, Objective, Policy, Rules
from core.uncertainty import (
    events_for_recall_half_width,
    evidence,
    few_events_statement,
    point_intervals,
    wilson_half_width,
)


def _altman_bland():
    # one score per cell: flagged cases score 1, the others 0
    return Dataset.from_count_table([1.0, 0.0], [231, 27], [32, 54])


def _by(ivs, metric, basis="validation"):
    for i in ivs:
        if i.metric == metric and i.basis == basis:
            return i
    raise KeyError((metric, basis))


@pytest.mark.parametrize("method,sm", [("wilson", "wilson"), ("clopper_pearson", "beta")])
def test_point_intervals_equal_statsmodels(method, sm):
    # Source: statsmodels proportion_confint; counts from Altman & Bland, BMJ 1994 (from memory).
    ivs = point_intervals(_altman_bland(), 1.0, method=method)
    want = {"recall": (231, 258), "specificity": (54, 86), "precision": (231, 263),
            "npv": (54, 81), "flag_rate": (263, 344)}
    for metric, (x, n) in want.items():
        iv = _by(ivs, metric)
        assert iv.estimate == pytest.approx(x / n, rel=1e-15)
        lo, hi = proportion_confint(x, n, alpha=0.05, method=sm)
        assert (iv.low, iv.high) == pytest.approx((lo, hi), rel=1e-12), metric
        assert iv.method == method and iv.method_name
    ivs90 = point_intervals(_altman_bland(), 1.0, method=method, confidence=0.9)
    lo, hi = proportion_confint(231, 258, alpha=0.1, method=sm)
    assert (_by(ivs90, "recall").low, _by(ivs90, "recall").high) == pytest.approx((lo, hi), rel=1e-12)


def test_sampling_weights_use_kish_effective_size_per_denominator():
    # Source: Kish 1965 (from memory) + statsmodels proportion_confint on the effective counts.
    rng = np.random.default_rng(0)
    y = rng.random(3000) < 0.1
    s = rng.normal(1.0 * y, 1.0)
    w = rng.uniform(0.2, 5.0, y.size)
    ds = Dataset.from_arrays(y, s, w, weight_kind="sampling")
    t = 0.8
    flagged = s >= t
    ivs = point_intervals(ds, t)
    for metric, num, den in (("recall", y & flagged, y), ("precision", y & flagged, flagged),
                             ("specificity", ~y & ~flagged, ~y), ("npv", ~y & ~flagged, ~flagged),
                             ("flag_rate", flagged, np.ones_like(y))):
        p = w[num].sum() / w[den].sum()
        neff = w[den].sum() ** 2 / (w[den] ** 2).sum()
        iv = _by(ivs, metric)
        assert iv.estimate == pytest.approx(p, rel=1e-12)
        assert iv.trials == pytest.approx(neff, rel=1e-12)
        lo, hi = proportion_confint(p * neff, neff, method="wilson")
        assert (iv.low, iv.high) == pytest.approx((lo, hi), rel=1e-10), metric
        assert "Kish" in iv.note
    # frequency weights: the weighted counts as they are
    wf = rng.integers(1, 4, y.size)
    iv = _by(point_intervals(Dataset.from_arrays(y, s, wf, weight_kind="frequency"), t), "recall")
    lo, hi = proportion_confint(wf[y & flagged].sum(), wf[y].sum(), method="wilson")
    assert (iv.low, iv.high) == pytest.approx((lo, hi), rel=1e-12)


def test_deployment_prevalence_and_case_control_design():
    # Source: Mercaldo, Lau & Zhou 2007 (from memory): PPV at pi by Bayes' rule.
    ds = _altman_bland()
    se, sp = 231 / 258, 54 / 86
    ivs = point_intervals(ds, 1.0, prevalence=0.05, cases_per_period=200)
    ppv = _by(ivs, "precision", "prevalence 0.05")
    assert ppv.estimate == pytest.approx(0.05 * se / (0.05 * se + 0.95 * (1 - sp)), rel=1e-12)
    assert (ppv.low, ppv.high) == pytest.approx(ppv_logit_interval(231, 27, 32, 54, 0.05), rel=1e-12)
    assert ppv.method == "ppv_logit" and "Mercaldo" in ppv.method_name
    per = _by(ivs, "flagged_per_period", "prevalence 0.05")
    fr = _by(ivs, "flag_rate", "prevalence 0.05")
    assert per.estimate == pytest.approx(200 * fr.estimate) and per.high == pytest.approx(200 * fr.high)
    # case-control: no binomial precision at the sample mix; at a known prevalence instead
    cc = point_intervals(ds, 1.0, design="case-control")
    assert [i.metric for i in cc if i.basis == "validation"] == ["recall", "specificity"]
    pv = 258 / 344
    p = _by(cc, "precision", f"prevalence {pv:.4g}")
    assert (p.low, p.high) == pytest.approx(ppv_logit_interval(231, 27, 32, 54, pv), rel=1e-12)
    assert "case-control" in p.note
    with pytest.raises(InputError, match="design"):
        point_intervals(ds, 1.0, design="cross-sectional")
    with pytest.raises(InputError, match="method"):
        point_intervals(ds, 1.0, method="wald")


# --------------------------------------------------------------------------- coverage

def _simulate_sets(rng, n_sets, n, prevalence, chunk=250):
    """Counts at threshold 2 of ``n_sets`` validation sets of ``n`` cases (vectorised)."""
    out = []
    for lo in range(0, n_sets, chunk):
        m = min(chunk, n_sets - lo)
        y = rng.random((m, n)) < prevalence
        s = rng.normal(2.0 * y, 1.0)
        flagged = s >= 2.0
        out.append(np.column_stack([(flagged & y).sum(1), (flagged & ~y).sum(1), y.sum(1)]))
    return np.vstack(out).astype(np.float64)


@pytest.mark.slow
@pytest.mark.parametrize("prevalence", [0.02, 0.005])
def test_wilson_recall_and_bootstrap_precision_cover(prevalence):
    # Source: simulation from a known binormal population (common practice, no source);
    # Wilson 1927 via core.intervals (equal to statsmodels, above); percentile bootstrap
    # (Efron & Tibshirani 1993). 2,000 validation sets of 20,000 cases; the cohort bootstrap
    # of one threshold's counts is a multinomial over (flagged events, flagged non-events,
    # the rest) -- exactly what the cell engine draws for them (test_bootstrap.py) --
    # drawn here vectorised over sets with 1,000 replicates each.
    rng = np.random.default_rng(2026 + int(prevalence * 1000))
    n_sets, n, B = 2000, 20000, 1000
    tp, fp, P = _simulate_sets(rng, n_sets, n, prevalence).T
    true_recall = 0.5
    fpr = stats.norm.sf(2.0)
    true_precision = prevalence * 0.5 / (prevalence * 0.5 + (1 - prevalence) * fpr)
    lo, hi = wilson_interval(tp, P)
    cover_recall = np.mean((lo <= true_recall) & (true_recall <= hi))
    assert 0.93 <= cover_recall <= 0.97, cover_recall
    a = rng.binomial(n, (tp / n)[:, None], size=(n_sets, B))
    b = rng.binomial(n - a, (fp / (n - tp))[:, None])
    with np.errstate(invalid="ignore"):
        prec = a / (a + b)
    plo, phi = percentile_interval(prec, 0.95, axis=1)
    cover_prec = np.mean((plo <= true_precision) & (true_precision <= phi))
    assert 0.91 <= cover_prec <= 0.97, cover_prec


# --------------------------------------------------------------------------- few events

def test_events_needed_for_a_recall_interval_of_five_points():
    # Source: Wilson width at p = 0.5: half = z / (2 sqrt(n + z^2)), so n = z^2/(4 h^2) - z^2
    # (algebra on Wilson 1927); other recalls against statsmodels proportion_confint.
    z = stats.norm.isf(0.025)
    assert events_for_recall_half_width(0.5) == int(np.ceil(z * z / (4 * 0.05 ** 2) - z * z))
    for r in (0.6, 0.8, 0.9, 0.95):
        n = events_for_recall_half_width(r)
        lo, hi = proportion_confint(r * n, n, method="wilson")
        lo1, hi1 = proportion_confint(r * (n - 1), n - 1, method="wilson")
        assert (hi - lo) / 2 <= 0.05 < (hi1 - lo1) / 2
        assert wilson_half_width(r, n) == pytest.approx((hi - lo) / 2, rel=1e-12)
    assert events_for_recall_half_width(0.8, 0.1) < events_for_recall_half_width(0.8, 0.05)


def test_few_events_statement():
    # Source: Collins et al., Stat Med 2016 (from memory): at least 100 events.
    assert few_events_statement(100, 0.8) is None
    text = few_events_statement(60, 0.8)
    assert text.startswith(FEW_EVENTS)
    assert f"{events_for_recall_half_width(0.8):,} events" in text and "60 events" in text


# --------------------------------------------------------------------------- evidence

def _hospital_like(seed=0, n=20000, prev=0.02):
    rng = np.random.default_rng(seed)
    y = rng.random(n) < prev
    s = np.round(1 / (1 + np.exp(-rng.normal(-4 + 2.0 * y, 1.0))), 4)
    return Dataset.from_arrays(y, s)


POLICY = Policy(objective=Objective("max_precision"), rules=Rules(min_recall=0.7, confidence=0.9),
                costs=Costs(false_positive=1.0, false_negative=20.0),
                deployment=Deployment(prevalence=0.01, cases_per_period=800.0))


def test_evidence_record_is_json_safe_and_independent_of_chunking():
    ds = _hospital_like()
    a = evidence(ds, POLICY, n_replicates=150, seed=3)
    b = evidence(ds, POLICY, n_replicates=150, seed=3, chunk=11)
    da, db = a.to_dict(), b.to_dict()
    assert da == db
    json.dumps(da, allow_nan=False)
    assert da["threshold_origin"] == "derived" and da["design"] == "cohort"
    assert any(s.startswith("Design: cohort") for s in da["statements"])
    metrics = {(i["metric"], i["basis"]) for i in da["bootstrap"]}
    assert {("cost", "prevalence 0.01"), ("flagged_per_period", "prevalence 0.01"),
            ("recall", "validation")} <= metrics
    assert {i["metric"] for i in da["curve"]} == {"roc_auc", "average_precision"}
    for block in ("analytic", "bootstrap", "curve"):
        for i in da[block]:
            assert i["method"] and i["method_name"]
            assert i["low"] <= i["estimate"] <= i["high"]
    assert [r["quantity"] for r in da["optimism"]["table"]] == ["recall", "precision", "flag_rate",
                                                                "cost"]
    assert da["few_events"] is None and a.n_events > 100
    assert len(da["bands"]["pr"]["low"]) == len(da["bands"]["pr"]["grid"])


def test_evidence_pre_specified_case_control_and_few_events():
    ds = _hospital_like(1, n=3000)
    ev = evidence(ds, POLICY, threshold=0.05, n_replicates=80, design="case-control")
    d = ev.to_dict()
    assert d["threshold_origin"] == "pre-specified" and d["threshold"] == 0.05
    assert d["optimism"]["cross_fit"] is None
    assert any("case-control" in s for s in d["statements"])
    assert ev.n_events < 100 and d["few_events"].startswith(FEW_EVENTS)
    # case-control resampling keeps the number of events in every replicate
    assert np.all(ev.result.events == ds.curve().n_events)
    with pytest.raises(InputError, match="design"):
        evidence(ds, POLICY, n_replicates=10, design="panel")


def test_bootstrap_intervals_agree_with_wilson_on_large_data():
    # With ~1,000 events the bootstrap percentile and Wilson intervals of recall nearly
    # coincide (both approximate the same binomial; common practice, no source).
    ds = _hospital_like(2, n=50000)
    ev = evidence(ds, POLICY, n_replicates=400, seed=0)
    w = _by(ev.analytic, "recall")
    b = _by(ev.bootstrap, "recall")
    assert b.low == pytest.approx(w.low, abs=0.01) and b.high == pytest.approx(w.high, abs=0.01)
    assert sweep(ds.y_true, ds.y_score).roc_auc == pytest.approx(_by(ev.curve, "roc_auc").estimate)
