"""Rule verdicts on new data: holds / fails / unclear from one-sided bounds, never a point alone."""

import json
import math

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from statsmodels.stats.proportion import confint_proportions_2indep, proportion_confint

from core.choose import choose
from core.dataset import Dataset
from core.errors import InputError
from core.groups import newcombe_interval
from core.intervals import flag_rate_interval, ppv_logit_interval
from core.policy import Deployment, Objective, Policy, Rules
from core.verdicts import (
    DEFAULT_CONFIDENCE,
    judge_rule,
    judge_rules,
    overall_verdict,
    verdict_summary,
)


def _population(rng, n, prevalence=0.03, separation=2.0):
    y = rng.random(n) < prevalence
    s = np.round(rng.normal(separation * y, 1.0), 3)
    return y, s


def _counts(y, s, t):
    f = s >= t
    return (float(np.sum(f & y)), float(np.sum(f & ~y)), float(np.sum(~f & y)),
            float(np.sum(~f & ~y)))


# ------------------------------------------------------------------ Newcombe

def test_newcombe_equals_statsmodels_vectorised():
    # Reference: statsmodels confint_proportions_2indep(method="newcomb") (Newcombe 1998,
    # method 10).
    x1 = np.array([56, 9, 6, 5, 0, 10, 30, 120.5])
    n1 = np.array([70, 10, 7, 56, 10, 10, 30, 3000.0])
    x2 = np.array([48, 3, 2, 0, 0, 0, 1, 100.0])
    n2 = np.array([80, 10, 7, 29, 20, 10, 400, 2500.0])
    for conf in (0.9, 0.95, 0.99):
        lo, hi = newcombe_interval(x1, n1, x2, n2, conf)
        for i in range(x1.size):
            rlo, rhi = confint_proportions_2indep(x1[i], n1[i], x2[i], n2[i], method="newcomb",
                                                  compare="diff", alpha=1 - conf)
            assert lo[i] == pytest.approx(rlo, abs=1e-12)
            assert hi[i] == pytest.approx(rhi, abs=1e-12)


def test_newcombe_worked_example_from_newcombe_1998():
    # Newcombe, Stat Med 1998, Table II example (a): 56/70 - 48/80, method 10 gives
    # 0.0524 to 0.3339 (from memory).
    lo, hi = newcombe_interval(56, 70, 48, 80)
    assert lo == pytest.approx(0.0524, abs=5e-5) and hi == pytest.approx(0.3339, abs=5e-5)


# ------------------------------------------------------------------ bounds as at approval

def test_bounds_are_the_approvals_bounds_and_the_approval_data_hold():
    # The same one-sided bounds core.choose uses: re-judging the approval's own data at the
    # approved threshold gives its bounds and "holds" for every rule it met.
    rng = np.random.default_rng(0)
    y, s = _population(rng, 40000)
    ds = Dataset.from_arrays(y, s)
    policy = Policy(objective=Objective("max_youden"),
                    rules=Rules(min_recall=0.7, min_precision=0.08, min_specificity=0.6,
                                max_flag_rate=0.4, confidence=0.95),
                    deployment=Deployment(prevalence=0.02))
    point = choose(ds, policy).point
    tp, fp, fn, tn = (point.counts[k] for k in ("tp", "fp", "fn", "tn"))
    vs = judge_rules(tp, fp, fn, tn, policy.rules.active(), confidence=0.95, prevalence=0.02)
    assert [v.name for v in vs] == ["min_recall", "min_precision", "min_specificity",
                                    "max_flag_rate"]
    for v in vs:
        rc = point.rule(v.name)
        assert v.value == pytest.approx(rc.value, rel=1e-12)
        approval_side = v.lower if v.name.startswith("min_") else v.upper
        assert approval_side == pytest.approx(rc.bound, rel=1e-12)
        assert rc.met and v.verdict == "holds"


def test_bounds_match_outside_references():
    # Reference: statsmodels proportion_confint(method="wilson") at alpha = 2 (1 - c) gives the
    # one-sided Wilson bounds; precision and flag rate use core.intervals' MLZ and Wald bounds.
    tp, fp, fn, tn = 170.0, 900.0, 30.0, 20000.0
    v = judge_rule("min_recall", 0.8, tp, fp, fn, tn, confidence=0.9)
    lo, hi = proportion_confint(170, 200, alpha=0.2, method="wilson")
    assert (v.lower, v.upper) == (pytest.approx(lo, rel=1e-12), pytest.approx(hi, rel=1e-12))
    v = judge_rule("min_specificity", 0.95, tp, fp, fn, tn, confidence=0.9)
    lo, hi = proportion_confint(20000, 20900, alpha=0.2, method="wilson")
    assert (v.lower, v.upper) == (pytest.approx(lo, rel=1e-12), pytest.approx(hi, rel=1e-12))
    v = judge_rule("min_precision", 0.1, tp, fp, fn, tn, confidence=0.9, prevalence=0.01)
    assert v.lower == ppv_logit_interval(tp, fn, fp, tn, 0.01, 0.9, sided="lower")[0]
    assert v.upper == ppv_logit_interval(tp, fn, fp, tn, 0.01, 0.9, sided="upper")[1]
    assert "Mercaldo" in v.method
    v = judge_rule("max_flagged_per_period", 80, tp, fp, fn, tn, prevalence=0.01,
                   cases_per_period=1500)
    f_lo = flag_rate_interval(tp, fn, fp, tn, 0.01, 0.95, sided="lower")[0]
    f_hi = flag_rate_interval(tp, fn, fp, tn, 0.01, 0.95, sided="upper")[1]
    assert v.lower == pytest.approx(1500 * f_lo) and v.upper == pytest.approx(1500 * f_hi)
    assert v.confidence == DEFAULT_CONFIDENCE and "set no confidence" in v.method


# ------------------------------------------------------------------ the constructed cases

def _approve(rng, n=30000, recall_rule=0.75):
    y, s = _population(rng, n)
    ds = Dataset.from_arrays(y, s)
    policy = Policy(objective=Objective("max_precision"),
                    rules=Rules(min_recall=recall_rule, confidence=0.95))
    ch = choose(ds, policy)
    return ch.point.threshold, ch.point.rule("min_recall")


def test_same_population_holds_for_a_rule_approved_with_margin():
    # New data from the same population, rule 0.60 while the approved recall is about 0.75.
    rng = np.random.default_rng(1)
    t, _ = _approve(rng, recall_rule=0.75)
    held = 0
    for seed in range(20):
        y, s = _population(np.random.default_rng(100 + seed), 30000)
        v = judge_rule("min_recall", 0.60, *_counts(y, s, t))
        held += v.verdict == "holds"
    assert held == 20


def test_a_rule_that_bound_tightly_may_be_unclear_and_says_why():
    # Approved with its bound just clearing the limit (the rule binds). New samples of the same
    # size whose true recall is the approved value: about half come out unclear although nothing
    # changed, and each such verdict says the approval was tight.
    rng = np.random.default_rng(2)
    y, s = _population(rng, 30000)
    policy = Policy(objective=Objective("max_precision"),
                    rules=Rules(min_recall=0.75, confidence=0.95))
    point = choose(Dataset.from_arrays(y, s), policy).point
    rc = point.rule("min_recall")
    assert 0 <= rc.margin < 0.005
    n_events = int(point.counts["tp"] + point.counts["fn"])
    draws = np.random.default_rng(22).binomial(n_events, rc.value, size=200)
    words = []
    for tp in draws:
        v = judge_rule("min_recall", 0.75, tp, 500, n_events - tp, 29000, approval_margin=rc.margin)
        words.append(v.verdict)
        if v.verdict == "unclear":
            assert v.tight and "approved this tightly" in v.reason
            assert v.settle is not None and v.settle.statement() in v.reason
    share = words.count("unclear") / len(words)
    assert 0.3 < share < 0.7
    assert words.count("fails") <= 10  # a fail needs the upper bound below the limit: rare here


def test_strong_recall_drop_fails():
    # The new site's scores separate less: recall at the approved threshold falls far.
    rng = np.random.default_rng(3)
    t, _ = _approve(rng, recall_rule=0.75)
    y, s = _population(np.random.default_rng(33), 30000, separation=0.8)
    v = judge_rule("min_recall", 0.75, *_counts(y, s, t))
    assert v.verdict == "fails"
    assert v.upper < 0.75 and "even the one-sided 95 % upper bound" in v.reason


def test_small_new_sample_is_unclear_and_events_needed_settles_it():
    rng = np.random.default_rng(4)
    t, _ = _approve(rng, recall_rule=0.75)
    y, s = _population(np.random.default_rng(44), 800)
    tp, fp, fn, tn = _counts(y, s, t)
    v = judge_rule("min_recall", 0.75, tp, fp, fn, tn)
    assert v.verdict == "unclear" and v.settle is not None
    n = v.settle.needed
    r = tp / (tp + fn)
    target = v.settle.outcome
    assert target == ("holds" if r > 0.75 else "fails")
    assert v.settle.more == n - int(tp + fn)
    # at the needed size with the observed recall the bound clears; one fewer it does not
    at = judge_rule("min_recall", 0.75, r * n, 0.0, (1 - r) * n, 100.0)
    before = judge_rule("min_recall", 0.75, r * (n - 1), 0.0, (1 - r) * (n - 1), 100.0)
    assert at.verdict == target and before.verdict == "unclear"
    assert f"{n:,} events in all" in v.reason


def test_events_needed_resimulated_at_that_size():
    # Re-simulating new samples of the needed size with the true recall at the observed value:
    # about half settle the verdict (the observed rate sits on the edge; more is needed if the
    # true value lies nearer the limit, as the statement says).
    v = judge_rule("min_recall", 0.8, 43, 0, 7, 1000)  # 0.86 on 50 events: unclear
    assert v.verdict == "unclear"
    n = v.settle.needed
    rng = np.random.default_rng(9)
    x = rng.binomial(n, 0.86, size=2000)
    lo = np.array([judge_rule("min_recall", 0.8, k, 0, n - k, 1000).verdict for k in np.unique(x)])
    settled = dict(zip(np.unique(x), lo == "holds"))
    share = np.mean([settled[k] for k in x])
    assert 0.4 < share < 0.65
    # four times that size settles almost always
    x4 = rng.binomial(4 * n, 0.86, size=500)
    share4 = np.mean([judge_rule("min_recall", 0.8, k, 0, 4 * n - k, 1000).verdict == "holds"
                      for k in x4])
    assert share4 > 0.9


@pytest.mark.parametrize("name,limit", [("min_precision", 0.2), ("max_flag_rate", 0.035),
                                        ("min_specificity", 0.973),
                                        ("max_flagged_per_period", 52.5)])
def test_cases_needed_for_other_rules_settle_them(name, limit):
    tp, fp, fn, tn = 40.0, 150.0, 10.0, 5000.0
    kw = {"prevalence": 0.01, "cases_per_period": 1500}
    v = judge_rule(name, limit, tp, fp, fn, tn, **kw)
    assert v.verdict == "unclear", v.reason
    st_ = v.settle
    unit_size = {"min_specificity": fp + tn}.get(name, tp + fp + fn + tn)
    k = st_.needed / unit_size
    at = judge_rule(name, limit, tp * k, fp * k, fn * k, tn * k, **kw)
    k1 = (st_.needed - 1) / unit_size
    before = judge_rule(name, limit, tp * k1, fp * k1, fn * k1, tn * k1, **kw)
    assert at.verdict == st_.outcome and before.verdict == "unclear"
    assert st_.unit == ("non-events" if name == "min_specificity" else "cases")
    if st_.unit == "cases":
        assert st_.events == pytest.approx(st_.needed * 50 / 5200)


def test_capacity_quantile_has_no_sampling_bound():
    counts = np.array([40, 52, 58, 61, 49, 45, 70, 50, 55, 47.0])
    v = judge_rule("max_flagged_per_period", 60, 30, 150, 10, 5000, capacity_quantile=0.9,
                   period_counts=counts)
    # inverted-CDF 0.9-quantile of 10 periods: the 9th smallest
    assert v.value == 61 and v.verdict == "fails" and v.lower is None and v.upper is None
    assert "no sampling bound" in v.method and "no sampling bound" in v.reason
    v = judge_rule("max_flagged_per_period", 61, 30, 150, 10, 5000, capacity_quantile=0.9,
                   period_counts=counts)
    assert v.verdict == "holds"
    with pytest.raises(InputError, match="per period"):
        judge_rule("max_flagged_per_period", 61, 30, 150, 10, 5000, capacity_quantile=0.9)


@settings(derandomize=True, deadline=None, max_examples=200)
@given(tp=st.integers(0, 300), fn=st.integers(0, 300), fp=st.integers(0, 3000),
       tn=st.integers(0, 3000), lim=st.floats(0.05, 0.95),
       name=st.sampled_from(["min_recall", "min_specificity", "min_precision", "max_flag_rate"]),
       conf=st.sampled_from([0.8, 0.9, 0.95, 0.99]))
def test_never_a_verdict_from_the_point_value_alone(tp, fn, fp, tn, lim, name, conf):
    v = judge_rule(name, lim, tp, fp, fn, tn, confidence=conf, prevalence=0.05)
    assert v.verdict in ("holds", "fails", "unclear")
    lower_rule = name.startswith("min_")
    if v.verdict == "holds":
        assert (v.lower >= lim * (1 - 1e-12)) if lower_rule else (v.upper <= lim * (1 + 1e-12))
    if v.verdict == "fails":
        assert (v.upper < lim) if lower_rule else (v.lower > lim)
    if math.isnan(v.value):
        assert v.verdict == "unclear" and "undefined" in v.reason
    elif v.verdict == "unclear" and lower_rule:
        # neither bound settles it: the upper bound reaches the limit, the lower (or the point) not
        assert v.upper >= lim * (1 - 1e-12)
        assert v.lower < lim * (1 - 1e-12) or v.value < lim * (1 - 1e-12)
    elif v.verdict == "unclear":
        assert v.lower <= lim * (1 + 1e-12)
        assert v.upper > lim * (1 + 1e-12) or v.value > lim * (1 + 1e-12)


def test_undefined_metrics_and_bad_input():
    v = judge_rule("min_recall", 0.8, 0, 10, 0, 100)
    assert v.verdict == "unclear" and "no events" in v.reason and v.settle is None
    v = judge_rule("min_precision", 0.2, 0, 0, 10, 100, prevalence=0.05)
    assert v.verdict == "unclear" and "undefined" in v.reason
    with pytest.raises(InputError, match="unknown rule"):
        judge_rules(1, 1, 1, 1, {"min_accuracy": 0.9})
    with pytest.raises(InputError, match="confidence"):
        judge_rule("min_recall", 0.8, 1, 1, 1, 1, confidence=0.4)
    with pytest.raises(InputError, match="cases per period"):
        judge_rule("max_flagged_per_period", 10, 1, 1, 1, 1)
    with pytest.raises(InputError, match="non-negative"):
        judge_rule("min_recall", 0.8, -1, 1, 1, 1)


def test_kish_sizes_widen_the_bounds():
    # Sampling weights: the approval passed Kish's effective sizes; so does the recheck.
    a = judge_rule("min_recall", 0.8, 170, 900, 30, 20000)
    b = judge_rule("min_recall", 0.8, 170, 900, 30, 20000, n_events=80, n_nonevents=9000)
    assert b.value == a.value and b.lower < a.lower and "Kish" in b.method


# ------------------------------------------------------------------ summaries

def test_verdict_summary_in_plain_words():
    overall = judge_rules(170, 900, 30, 20000, {"min_recall": 0.8, "min_precision": 0.1,
                                                "max_flag_rate": 0.06}, prevalence=0.01)
    assert [v.verdict for v in overall] == ["holds", "holds", "holds"]
    site = judge_rules(20, 60, 40, 3000, {"min_recall": 0.8, "min_precision": 0.1,
                                          "max_flag_rate": 0.06}, prevalence=0.01)
    assert site[0].verdict == "fails"
    groups = {("site", "Wendlecombe"): site,
              ("site", "Ashgrove"): overall}
    text = verdict_summary(overall, groups)
    assert text.startswith("2 of 3 rules hold; recall at site Wendlecombe fails")
    assert overall_verdict(overall, groups) == "fails"
    assert verdict_summary(overall) == "All 3 rules hold."
    assert verdict_summary(overall, {("site", "Ashgrove"): overall}) == \
        "All 3 rules hold overall and in every subgroup."
    small = judge_rules(8, 1, 2, 50, {"min_recall": 0.8})
    assert verdict_summary(small) == "0 of 1 rule holds; recall unclear"
    assert overall_verdict(small) == "unclear" and overall_verdict(overall) == "holds"
    assert verdict_summary([]) == "No rules to check."


def test_verdicts_are_json_safe():
    vs = judge_rules(8, 1, 2, 50, {"min_recall": 0.75, "min_precision": 0.5}, prevalence=0.05)
    json.dumps([v.to_dict() for v in vs], allow_nan=False)
    d = vs[0].to_dict()
    assert d["verdict"] == "unclear" and d["settle"]["unit"] == "events"
