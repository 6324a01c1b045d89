"""The recommended operating point against an exhaustive search written here, independently."""

import json

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from statsmodels.stats.proportion import proportion_confint

from core.choose import choose, cost_by_threshold, evaluate
from core.dataset import Dataset
from core.policy import Costs, Deployment, Objective, Policy, PolicyError, Rules, loads_policy

TIE = 1e-12  # the brief's tie tolerance, also used for rule comparisons
Z = {0.8: 0.8416212335729143, 0.95: 1.6448536269514722}  # one-sided normal quantiles


# ------------------------------------------------------------------ the independent reference

def _mlz_ppv_lower(tp, fn, fp, tn, pi, conf, n1, n0):
    """Adjusted logit lower bound of PPV at prevalence pi (Mercaldo, Lau & Zhou 2007, from memory)."""
    z = Z[conf]
    se = (tp / (tp + fn) * n1 + z * z / 2) / (n1 + z * z)
    sp = (tn / (tn + fp) * n0 + z * z / 2) / (n0 + z * z)
    logit = np.log(pi * se / ((1 - pi) * (1 - sp)))
    sd = np.sqrt((1 - se) / (se * (n1 + z * z)) + sp / ((1 - sp) * (n0 + z * z)))
    return 1 / (1 + np.exp(-(logit - z * sd)))


def _flag_rate_upper(tp, fn, fp, tn, pi, conf, n1, n0):
    """Wald upper bound of pi TPR + (1 - pi) FPR on adjusted rates (delta method)."""
    z = Z[conf]
    tpr = (tp / (tp + fn) * n1 + z * z / 2) / (n1 + z * z)
    fpr = 1 - (tn / (tn + fp) * n0 + z * z / 2) / (n0 + z * z)
    f = pi * tpr + (1 - pi) * fpr
    sd = np.sqrt(pi ** 2 * tpr * (1 - tpr) / (n1 + z * z) + (1 - pi) ** 2 * fpr * (1 - fpr) / (n0 + z * z))
    return min(max(f + z * sd, 0.0), 1.0)


def _wilson_lower(p, n, conf):
    # Reference: statsmodels Wilson interval; its two-sided end at alpha = 2(1 - c) is the one-sided bound.
    return proportion_confint(p * n, n, alpha=2 * (1 - conf), method="wilson")[0]


def _period_quantile(y, s, w, t, threshold, higher, pi, cases, q):
    """q-quantile (inverted CDF) over days of flagged cases, rescaled; reference: pandas groupby."""
    pv = (w * y).sum() / w.sum()
    rw = w * np.where(y, pi / pv, (1 - pi) / (1 - pv))
    df = pd.DataFrame({"t": pd.to_datetime(t), "w": rw})
    key = df["t"].dt.floor("D")
    days = pd.date_range(key.min(), key.max(), freq="D")
    flagged = (s >= threshold) if higher else (s <= threshold)
    per = (df["w"] * flagged).groupby(key).sum().reindex(days, fill_value=0.0).to_numpy()
    per = per * cases / (w.sum() / len(days))
    srt = np.sort(per)
    return srt[int(np.ceil(q * len(srt))) - 1]


def reference(y, s, w, *, higher, kind, beta=1.0, pt=None, fp_cost=1.0, fn_cost=None, amounts=None,
              tp_cost=0.0, tn_cost=0.0, pi=None, rules=(), conf=None, sampling=False, times=None,
              cases=None, q=None, drop=None):
    """Exhaustive search over EVERY threshold (all distinct scores and flag none)."""
    distinct = np.unique(s)
    order = distinct[::-1] if higher else distinct
    thresholds = np.r_[np.inf if higher else -np.inf, order]
    P, N = (w * y).sum(), (w * ~y).sum()
    pi = P / (P + N) if pi is None else pi
    if sampling:
        n1 = P ** 2 / (w[y] ** 2).sum()
        n0 = N ** 2 / (w[~y] ** 2).sum()
    else:
        n1, n0 = P, N
    if cases is None and times is not None:
        days = pd.to_datetime(times).floor("D")
        cases = w.sum() / len(pd.date_range(days.min(), days.max(), freq="D"))
    rules = {k: v for k, v in dict(rules).items() if k != drop}
    best, best_t = None, None
    for t in thresholds:
        flagged = (s >= t) if higher else (s <= t)
        tp, fp = (w * (y & flagged)).sum(), (w * (~y & flagged)).sum()
        fn, tn = P - tp, N - fp
        tpr, fpr = tp / P, fp / N
        a, b = pi * tpr, (1 - pi) * fpr
        c, d = pi - a, (1 - pi) - b
        if kind == "min_cost":
            miss = fn_cost * c if amounts is None else pi * (w * amounts * (y & ~flagged)).sum() / P
            v = -(miss + fp_cost * b + tp_cost * a + tn_cost * d)
        elif kind == "max_fbeta":
            v = (1 + beta ** 2) * a / ((1 + beta ** 2) * a + beta ** 2 * c + b)
        elif kind == "max_net_benefit":
            v = a - b * pt / (1 - pt)
        elif kind == "max_youden":
            v = tpr - fpr
        elif kind == "max_recall":
            v = tpr
        else:
            v = a / (a + b) if a + b > 0 else 0.0
        ok = True
        for name, lim in rules.items():
            sl = TIE * abs(lim)
            if name == "min_recall":
                ok &= tpr >= lim - sl and (conf is None or _wilson_lower(tpr, n1, conf) >= lim - sl)
            elif name == "min_specificity":
                ok &= 1 - fpr >= lim - sl and (conf is None or _wilson_lower(1 - fpr, n0, conf) >= lim - sl)
            elif name == "min_precision":
                ok &= a + b > 0 and a / (a + b) >= lim - sl and (
                    conf is None or _mlz_ppv_lower(tp, fn, fp, tn, pi, conf, n1, n0) >= lim - sl)
            elif name == "max_flag_rate":
                ok &= a + b <= lim + sl and (
                    conf is None or _flag_rate_upper(tp, fn, fp, tn, pi, conf, n1, n0) <= lim + sl)
            elif name == "max_flagged_per_period":
                if q is not None:
                    ok &= _period_quantile(y, s, w, times, t, higher, pi, cases, q) <= lim * (1 + TIE)
                else:
                    ok &= (a + b) * cases <= lim + sl and (
                        conf is None or _flag_rate_upper(tp, fn, fp, tn, pi, conf, n1, n0) * cases <= lim + sl)
        if not ok:
            continue
        if best is None or v > best + TIE * abs(best):  # strictly better; ties keep the stricter point
            best, best_t = v, t
    return best_t


# ------------------------------------------------------------------ the hypothesis test

def _limit(lo, hi):
    # rule limits off simple fractions, so no limit sits exactly on a value of small counts
    return st.integers(lo, hi).map(lambda i: i / 1000 + 1.234e-5)


@st.composite
def scenario(draw):
    n = draw(st.integers(4, 40))
    y = np.array(draw(st.lists(st.booleans(), min_size=n, max_size=n)))
    y[0], y[1] = True, False
    levels = draw(st.integers(2, 12))
    s = np.array(draw(st.lists(st.integers(0, levels), min_size=n, max_size=n))) / levels
    wmode = draw(st.sampled_from(["none", "frequency", "sampling"]))
    if wmode == "none":
        w = None
    elif wmode == "frequency":
        w = np.array(draw(st.lists(st.integers(1, 4), min_size=n, max_size=n)), dtype=float)
    else:
        w = np.array(draw(st.lists(st.floats(0.2, 3.0), min_size=n, max_size=n)))
    higher = draw(st.booleans())
    kind = draw(st.sampled_from(["min_cost", "max_fbeta", "max_net_benefit", "max_youden",
                                 "max_recall", "max_precision"]))
    use_amounts = kind == "min_cost" and draw(st.booleans())
    amounts = np.array(draw(st.lists(st.integers(1, 500), min_size=n, max_size=n)), float) \
        if use_amounts else None
    costs = None
    if kind == "min_cost" or draw(st.booleans()):
        fp = draw(st.floats(0.5, 5))
        costs = dict(false_positive=fp, true_negative=draw(st.sampled_from([0.0, -0.2])),
                     true_positive=draw(st.sampled_from([0.0, 0.3])))
        if use_amounts:
            costs["false_negative_column"] = "case_cost"
        else:
            costs["false_negative"] = draw(st.floats(1.0, 100))
    pi = draw(st.one_of(st.none(), st.floats(0.01, 0.6)))
    names = draw(st.lists(st.sampled_from(["min_recall", "min_precision", "min_specificity",
                                           "max_flag_rate", "max_flagged_per_period"]),
                          unique=True, max_size=3))
    if kind == "max_recall" and not set(names) & {"min_precision", "min_specificity", "max_flag_rate",
                                                  "max_flagged_per_period"}:
        names.append("max_flag_rate")
    if kind == "max_precision" and "min_recall" not in names:
        names.append("min_recall")
    limits = {"min_recall": _limit(50, 990), "min_precision": _limit(10, 900),
              "min_specificity": _limit(10, 990), "max_flag_rate": _limit(20, 900),
              "max_flagged_per_period": _limit(1000, 20000)}
    rules = {nm: draw(limits[nm]) for nm in names}
    conf = draw(st.sampled_from([None, 0.8, 0.95]))
    times = cases = q = None
    if "max_flagged_per_period" in rules:
        mode = draw(st.sampled_from(["cases", "times", "quantile"]))
        if mode in ("times", "quantile"):
            hours = np.array(draw(st.lists(st.integers(0, 24 * 6), min_size=n, max_size=n)))
            times = np.datetime64("2025-02-03T00:00", "h") + hours.astype("timedelta64[h]")
        if mode != "times" or draw(st.booleans()):
            cases = float(draw(st.integers(5, 80)))
        if mode == "quantile":
            q = draw(st.sampled_from([0.5, 0.75, 0.9, 1.0]))
    return dict(y=y, s=s, w=w, wmode=wmode, higher=higher, kind=kind, amounts=amounts, costs=costs, pi=pi,
                rules=rules, conf=conf, times=times, cases=cases, q=q,
                beta=draw(st.sampled_from([0.5, 1.0, 2.0])), pt=draw(st.sampled_from([0.05, 0.2, 0.5])))


def _build(sc):
    ds = Dataset.from_arrays(sc["y"], sc["s"], sc["w"], weight_kind=None if sc["w"] is None else
                             sc["wmode"], higher_is_riskier=sc["higher"], case_cost=sc["amounts"],
                             score_time=sc["times"])
    kind = sc["kind"]
    obj = Objective(kind, beta=sc["beta"] if kind == "max_fbeta" else None,
                    threshold_probability=sc["pt"] if kind == "max_net_benefit" else None)
    rules = dict(sc["rules"])
    if sc["q"] is not None:
        rules["capacity_quantile"] = sc["q"]
    policy = Policy(objective=obj, costs=None if sc["costs"] is None else Costs(**sc["costs"]),
                    deployment=Deployment(prevalence=sc["pi"], cases_per_period=sc["cases"]),
                    rules=Rules(confidence=sc["conf"], **rules))
    return ds, policy


def _reference(sc, drop=None):
    w = np.ones(len(sc["y"])) if sc["w"] is None else sc["w"]
    c = sc["costs"] or {}
    return reference(sc["y"], sc["s"], w, higher=sc["higher"], kind=sc["kind"], beta=sc["beta"], pt=sc["pt"],
                     fp_cost=c.get("false_positive", 1.0), fn_cost=c.get("false_negative"),
                     amounts=sc["amounts"], tp_cost=c.get("true_positive", 0.0),
                     tn_cost=c.get("true_negative", 0.0), pi=sc["pi"], rules=sc["rules"], conf=sc["conf"],
                     sampling=sc["wmode"] == "sampling", times=sc["times"], cases=sc["cases"], q=sc["q"],
                     drop=drop)


@settings(derandomize=True, deadline=None, max_examples=400)
@given(scenario())
def test_chosen_point_equals_an_exhaustive_search(sc):
    # Exhaustive search over every threshold, written independently above (no outside source
    # for the search itself; bounds: statsmodels Wilson, Mercaldo-Lau-Zhou from memory).
    ds, policy = _build(sc)
    choice = choose(ds, policy)
    expected = _reference(sc)
    if expected is None:
        assert choice.point is None and not choice.feasible and choice.infeasible
        return
    assert choice.point is not None and choice.feasible
    assert choice.point.threshold == expected
    assert all(r.met for r in choice.point.rules)
    k = choice.point.index
    assert ds.curve().event_point_mask[k]  # an event point or "flag none"
    for r in choice.point.rules:
        assert r.binding == (_reference(sc, drop=r.name) != expected)


@st.composite
def larger_scenario(draw):
    """Hundreds of cases and rule limits near values the data reach, so the bounds decide."""
    n = draw(st.integers(300, 2500))
    seed = draw(st.integers(0, 2 ** 31 - 1))
    rng = np.random.default_rng(seed)
    y = rng.random(n) < draw(st.floats(0.03, 0.3))
    y[0], y[1] = True, False
    levels = draw(st.integers(10, 40))
    s = np.round(np.clip(rng.normal(0.4 + 0.25 * y, 0.2), 0, 1) * levels) / levels
    wmode = draw(st.sampled_from(["none", "sampling"]))
    w = None if wmode == "none" else rng.uniform(0.3, 3.0, n)
    ww = np.ones(n) if w is None else w
    pi = draw(st.one_of(st.none(), st.floats(0.02, 0.5)))
    P, N = (ww * y).sum(), (ww * ~y).sum()
    p = P / (P + N) if pi is None else pi
    # the values at a random threshold, from which the limits are drawn
    t = draw(st.sampled_from(sorted(set(s.tolist()))))
    flagged = s >= t
    tpr, fpr = (ww * (y & flagged)).sum() / P, (ww * (~y & flagged)).sum() / N
    prec = p * tpr / (p * tpr + (1 - p) * fpr) if p * tpr + (1 - p) * fpr > 0 else 0.5
    near = {"min_recall": tpr, "min_precision": prec, "min_specificity": 1 - fpr,
            "max_flag_rate": p * tpr + (1 - p) * fpr}
    names = draw(st.lists(st.sampled_from(sorted(near)), unique=True, min_size=1, max_size=2))
    rules = {}
    for nm in names:
        f = draw(st.floats(0.85, 1.1))
        rules[nm] = float(np.clip(near[nm] * f, 0.01, 0.99)) + 1.234e-7
    kind = draw(st.sampled_from(["min_cost", "max_fbeta", "max_youden"]))
    costs = dict(false_positive=1.0, false_negative=draw(st.floats(2, 60))) if kind == "min_cost" else None
    return dict(y=y, s=s, w=w, wmode=wmode, higher=True, kind=kind, amounts=None, costs=costs, pi=pi,
                rules=rules, conf=draw(st.sampled_from([0.8, 0.95])), times=None, cases=None, q=None,
                beta=2.0, pt=0.1)


@settings(derandomize=True, deadline=None, max_examples=60)
@given(larger_scenario())
def test_chosen_point_equals_an_exhaustive_search_on_larger_samples(sc):
    # Same independent reference; samples large enough that the one-sided bounds decide.
    ds, policy = _build(sc)
    choice = choose(ds, policy)
    expected = _reference(sc)
    if expected is None:
        assert choice.point is None
    else:
        assert choice.point is not None and choice.point.threshold == expected


# ------------------------------------------------------------------ scenarios by hand

def _hospital(n=30_000, seed=7, with_time=True):
    rng = np.random.default_rng(seed)
    y = rng.random(n) < 0.02
    s = np.round(np.clip(rng.normal(0.25 + 0.3 * y, 0.13), 0, 1), 4)
    t = np.datetime64("2025-01-06") + (rng.random(n) * 91 * 86400).astype("timedelta64[s]")
    site = rng.choice(["North", "River", "Hill"], n)
    return Dataset.from_arrays(y, s, score_time=t if with_time else None, groups={"site": site})


HOSPITAL = """
[objective]
kind = "min_cost"
[costs]
false_positive = 1.0
false_negative = 25.0
unit = "harm points"
[deployment]
prevalence = 0.02
prevalence_low = 0.015
prevalence_high = 0.03
prevalence_source = "ward review (invented)"
cases_per_period = 1200
[rules]
min_recall = 0.80
max_flagged_per_period = 300
capacity_quantile = 0.9
confidence = 0.95
"""


def test_hospital_scenario_report():
    ds = _hospital()
    choice = choose(ds, loads_policy(HOSPITAL))
    p = choice.point
    assert choice.origin == "recommended" and choice.feasible
    rec = p.rule("min_recall")
    assert rec.bound is not None and rec.bound >= 0.8 and rec.value >= rec.bound
    assert "Wilson" in rec.method
    cap = p.rule("max_flagged_per_period")
    assert "0.9-quantile" in cap.method and cap.bound is None
    assert p.capacity["quantile"] == pytest.approx(cap.value) and p.capacity["n_periods"] == 91
    assert p.capacity["median"] <= p.capacity["p90"] <= p.capacity["max"]
    # expected cost per case and per period at pi = 0.02, by hand from the counts
    c = p.counts
    tpr, fpr = c["tp"] / (c["tp"] + c["fn"]), c["fp"] / (c["fp"] + c["tn"])
    assert p.cost_per_case == pytest.approx(25 * 0.02 * (1 - tpr) + 0.98 * fpr)
    assert p.cost_per_period == pytest.approx(1200 * p.cost_per_case)
    assert p.flagged_per_period == pytest.approx(1200 * (0.02 * tpr + 0.98 * fpr))
    # baselines side by side: flag none costs C_FN pi, flag all C_FP (1 - pi)
    assert choice.baselines["flag_none"].cost_per_case == pytest.approx(25 * 0.02)
    assert choice.baselines["flag_all"].cost_per_case == pytest.approx(0.98)
    assert choice.baselines["flag_none"].threshold == np.inf
    # the low / high prevalence scenarios: precision rises with prevalence, recall does not move
    low, high = p.scenarios
    assert (low["name"], high["name"]) == ("low", "high")
    assert low["metrics"]["precision"] < p.deployment["precision"] < high["metrics"]["precision"]
    assert low["metrics"]["recall"] == pytest.approx(high["metrics"]["recall"])
    assert high["cost_per_case"] > low["cost_per_case"]
    # explanation in plain words
    text = choice.explanation
    assert "Fulcrum recommends flagging cases with score >=" in text
    assert "lowest expected cost" in text and "ward review (invented)" in text
    assert "recall at least 80.0 %" in text


def test_alternatives_rule_edges_workload_and_neighbours():
    ds = _hospital(with_time=False)
    policy = loads_policy(HOSPITAL.replace("capacity_quantile = 0.9\n", ""))
    choice = choose(ds, policy)
    curve = ds.curve()
    k = choice.point.index
    ev = np.flatnonzero(curve.event_point_mask)
    alts = {a.label: a for a in choice.alternatives}
    # the recall rule's edge: the strictest event point whose recall bound still clears 0.80
    edge = alts["edge of rule: recall at least 80.0 %"]
    assert edge.rule("min_recall").met
    before = ev[ev < edge.index].max()
    assert not evaluate(ds, policy, curve.thresholds[before]).point.rule("min_recall").met
    # the capacity edge: the loosest event point within 300 expected flags a day
    cap = alts["edge of rule: flagged cases per period at most 300"]
    after = ev[ev > cap.index].min()
    assert cap.rule("max_flagged_per_period").met
    assert not evaluate(ds, policy, curve.thresholds[after]).point.rule("max_flagged_per_period").met
    # workload alternatives: the event point with the flag rate nearest to +/-10 % and +/-25 %
    fr = curve.metrics(prevalence=0.02)["flag_rate"]
    for delta in (-0.25, -0.10, 0.10, 0.25):
        a = alts[f"{delta:+.0%} workload"]
        target = fr[k] * (1 + delta)
        assert abs(fr[a.index] - target) == pytest.approx(np.min(np.abs(fr[ev] - target)))
    # the neighbours are the adjacent event points
    pos = np.searchsorted(ev, k)
    assert alts["stricter neighbour"].index == ev[pos - 1]
    assert alts["looser neighbour"].index == ev[pos + 1]
    for a in choice.alternatives:
        assert a.cost_per_case is not None and set(a.deployment) >= {"precision", "recall"}


def test_infeasible_single_rule_says_the_best_value_reached():
    ds = _hospital(5000, with_time=False)
    policy = Policy(objective=Objective("max_youden"), rules=Rules(min_precision=0.95, confidence=0.95),
                    deployment=Deployment(prevalence=0.005))
    curve = ds.curve()
    ev = curve.event_point_mask
    prec = curve.metrics(prevalence=0.005)["precision"]
    lower = np.array([_mlz_ppv_lower(tp, curve.n_events - tp, fp, curve.n_nonevents - fp, 0.005, 0.95,
                                     curve.n_events, curve.n_nonevents) if tp + fp > 0 else np.nan
                      for tp, fp in zip(curve.tp, curve.fp)])
    judged = np.where(ev, np.fmin(prec, lower), np.nan)
    assert np.nanmax(judged) < 0.95  # precondition of the scenario
    choice = choose(ds, policy)
    assert choice.point is None and not choice.feasible
    best = choice.best_reachable["min_precision"]
    assert best["value"] == pytest.approx(np.nanmax(judged), rel=1e-9)
    assert best["threshold"] == curve.thresholds[np.nanargmax(judged)]
    assert "precision at least 95.0 %' cannot be met" in choice.infeasible[0]
    assert "highest value any point reaches" in choice.infeasible[0]
    assert "No threshold meets every rule" in choice.explanation
    # the baselines and alternatives are still there
    assert set(choice.baselines) == {"flag_none", "flag_all"}
    json.dumps(choice.to_dict(), allow_nan=False)


def test_infeasible_pair_of_rules_is_named():
    ds = _hospital(5000, with_time=False)
    policy = Policy(objective=Objective("max_youden"), rules=Rules(min_recall=0.95, max_flag_rate=0.05))
    choice = choose(ds, policy)
    assert choice.point is None
    assert len(choice.infeasible) == 1
    msg = choice.infeasible[0]
    assert "recall at least 95.0 %" in msg and "flag rate at most 5.0 %" in msg and "cannot both" in msg


def test_confidence_makes_rules_stricter_and_kish_widens_them():
    rng = np.random.default_rng(3)
    n = 4000
    y = rng.random(n) < 0.05
    s = np.round(np.clip(rng.normal(0.3 + 0.3 * y, 0.15), 0, 1), 3)
    w = rng.uniform(0.2, 5, n)
    base = Policy(objective=Objective("max_youden"), rules=Rules(min_recall=0.9, max_flag_rate=0.5))
    conf = base.replace(rules=Rules(min_recall=0.9, max_flag_rate=0.5, confidence=0.95))
    freq = Dataset.from_arrays(y, s, w, weight_kind="frequency")
    samp = Dataset.from_arrays(y, s, w, weight_kind="sampling")
    t_point = choose(freq, base).point.threshold
    t_freq = choose(freq, conf).point.threshold
    t_samp = choose(samp, conf).point.threshold
    assert t_samp <= t_freq <= t_point  # more uncertainty asks for a looser threshold
    r = choose(samp, conf).point.rule("min_recall")
    assert "Kish's effective sizes" in r.method
    assert r.bound < r.value


def test_evaluate_a_user_threshold():
    ds = _hospital(with_time=False)
    policy = loads_policy(HOSPITAL.replace("capacity_quantile = 0.9\n", ""))
    user = evaluate(ds, policy, 0.5)
    assert user.origin == "user" and user.point.threshold == 0.5
    lo, hi = user.point.interval_low, user.point.interval_high
    assert lo < 0.5 <= hi and user.point.closed == "high"
    assert user.point.rule("min_recall").met is False and not user.feasible
    assert "At the threshold you set" in user.explanation and "NOT met" in user.explanation
    assert user.point.rule("min_recall").binding is None
    # the recommended threshold evaluated gives the same numbers
    rec = choose(ds, policy)
    again = evaluate(ds, policy, rec.point.threshold)
    assert again.point.index == rec.point.index and again.feasible
    assert again.point.cost_per_case == rec.point.cost_per_case


def test_to_dict_is_json_safe():
    ds = _hospital(3000)
    choice = choose(ds, loads_policy(HOSPITAL), calibrated=True)
    d = choice.to_dict()
    text = json.dumps(d, allow_nan=False)
    assert '"inf"' in text  # flag none's threshold, an open end of an interval
    assert d["baselines"]["flag_none"]["threshold"] == "inf"
    assert d["baselines"]["flag_none"]["deployment"]["precision"] is None  # 0/0
    assert d["resolved"]["deployment"]["prevalence"] == {"value": 0.02, "source": "file"}
    assert d["resolved"]["deployment"]["cases_per_period"]["source"] == "file"
    assert d["resolved"]["deployment"]["period"] == {"value": "day", "source": "default"}
    assert isinstance(d["decision_curve"]["model"], list)


def test_lower_is_riskier_and_count_tables_and_bare_curves_agree():
    ds = _hospital(8000, with_time=False)
    policy = Policy(objective=Objective("min_cost"), costs=Costs(1.0, 30.0),
                    rules=Rules(min_recall=0.7))
    a = choose(ds, policy)
    flipped = Dataset.from_arrays(ds.y_true, -ds.y_score, higher_is_riskier=False)
    b = choose(flipped, policy)
    assert b.point.threshold == -a.point.threshold and b.point.closed == "low"
    assert "score <=" in b.explanation
    table = pd.DataFrame({"s": ds.y_score, "e": ds.y_true.astype(float), "n": (~ds.y_true).astype(float)})
    g = table.groupby("s", as_index=False).sum()
    c = choose(Dataset.from_count_table(g["s"], g["e"], g["n"]), policy)
    d = choose(ds.curve(), policy)
    assert c.point.threshold == a.point.threshold == d.point.threshold
    assert c.point.cost_per_case == pytest.approx(a.point.cost_per_case)


def test_case_dependent_costs_use_each_amount():
    rng = np.random.default_rng(21)
    n = 20_000
    y = rng.random(n) < 0.004
    y[:5] = True
    amount = np.round(rng.lognormal(6, 1, n), 2)
    s = np.round(np.clip(rng.normal(0.2 + 0.4 * y, 0.12), 0, 1), 4)
    ds = Dataset.from_arrays(y, s, case_cost=amount)
    policy = loads_policy("[objective]\nkind = 'min_cost'\n[costs]\nfalse_positive = 15\n"
                          "false_negative_column = 'invoice_amount'\nunit = 'credits'\n")
    choice = choose(ds, policy, calibrated=True)
    p = choice.point
    flagged = s >= p.threshold
    ref = ((amount * (y & ~flagged)).sum() + 15 * (~y & flagged).sum()) / n
    assert p.cost_per_case == pytest.approx(ref)
    assert p.missed_cost == pytest.approx((amount * (y & ~flagged)).sum())
    assert choice.cost_derived["available"] is False and "own amount" in choice.cost_derived["reason"]
    assert "credits" in choice.explanation
    sens = choice.sensitivity
    assert sens["policy_ratio"] == pytest.approx(amount[y].mean() / 15)
    lo, hi = sens["optimal_range"]
    assert lo <= sens["policy_ratio"] <= hi


def test_cost_sensitivity_contains_the_policy_ratio_when_cost_alone_decides():
    ds = _hospital(20_000, with_time=False)
    policy = Policy(objective=Objective("min_cost"), costs=Costs(2.0, 50.0, true_negative=0.0))
    choice = choose(ds, policy)
    sens = choice.sensitivity
    assert sens["policy_ratio"] == 25.0
    lo, hi = sens["optimal_range"]
    assert lo <= 25.0 <= hi
    assert len(sens["ratios"]) == 31 and np.all(np.diff(sens["thresholds"]) <= 0)
    assert "cost-optimal for cost ratios" in choice.explanation


def test_cost_derived_threshold_for_calibrated_scores_with_prior_shift():
    # Elkan, IJCAI 2001 (from memory): p* = C_FP / (C_FP + C_FN), prior-shift corrected when the
    # deployment prevalence differs; the empirical optimum sits beside it.
    rng = np.random.default_rng(8)
    n = 300_000
    p = rng.beta(1, 6, n)
    y = rng.random(n) < p
    ds = Dataset.from_arrays(y, np.round(p, 4))
    policy = Policy(objective=Objective("min_cost"), costs=Costs(1.0, 9.0),
                    deployment=Deployment(prevalence=0.05))
    assert choose(ds, policy).cost_derived is None  # not declared calibrated
    cd = choose(ds, policy, calibrated=True).cost_derived
    assert cd["cost_derived"] == pytest.approx(0.1) and cd["corrected"]
    b = y.mean()
    odds = 0.1 / 0.9 * (b / (1 - b)) / (0.05 / 0.95)
    assert cd["prior_shift_corrected"] == pytest.approx(odds / (1 + odds))
    assert abs(cd["empirical_threshold"] - cd["prior_shift_corrected"]) < 0.05
    assert "calibrated probabilities" in cd["warning"]
    # scores outside [0, 1] are never treated as probabilities
    ds2 = Dataset.from_arrays(y, np.round(p, 4) * 10)
    c2 = choose(ds2, policy, calibrated=True)
    assert c2.cost_derived is None and c2.decision_curve is None
    assert any("not all in [0, 1]" in w for w in c2.warnings)


def test_net_benefit_objective_and_decision_curve():
    ds = _hospital(10_000, with_time=False)
    policy = Policy(objective=Objective("max_net_benefit", threshold_probability=0.1))
    choice = choose(ds, policy)
    dc = choice.decision_curve
    assert list(dc.columns[:4]) == ["threshold_probability", "model", "treat_all", "treat_none"]
    # the chosen point's net benefit is at least the model's at any threshold probability cut of 0.1
    nb = dc.loc[np.isclose(dc["threshold_probability"], 0.1), "model"].iloc[0]
    assert choice.point.objective_value >= nb - 1e-15
    assert any("decision curve reads the scores as probabilities" in w for w in choice.warnings)


def test_few_events_and_label_shift_warnings():
    rng = np.random.default_rng(2)
    y = rng.random(2000) < 0.02
    ds = Dataset.from_arrays(y, rng.random(2000))
    choice = choose(ds, Policy(objective=Objective("max_youden"), deployment=Deployment(prevalence=0.05)))
    assert any("every number here is shaky" in w for w in choice.warnings)
    assert any("label shift" in w for w in choice.warnings)
    assert any("optimism" in w for w in choice.warnings)


def test_policy_that_does_not_fit_the_data_is_an_error():
    ds = _hospital(2000, with_time=False)
    with pytest.raises(PolicyError, match="capacity_quantile: needs a score-time column"):
        choose(ds, loads_policy(HOSPITAL))


def test_cost_by_threshold_matches_the_reported_points():
    ds = _hospital(5000, with_time=False)
    policy = loads_policy(HOSPITAL.replace("capacity_quantile = 0.9\n", ""))
    df = cost_by_threshold(ds, policy)
    choice = choose(ds, policy)
    assert len(df) == ds.curve().n_points and df["threshold"].iloc[0] == np.inf
    k = choice.point.index
    assert df["cost_per_case"].iloc[k] == pytest.approx(choice.point.cost_per_case)
    assert df["cost_per_period"].iloc[k] == pytest.approx(choice.point.cost_per_period)
    assert df["cost_per_case"].iloc[0] == pytest.approx(25 * 0.02)
    with pytest.raises(PolicyError, match="needed for the cost chart"):
        cost_by_threshold(ds, Policy(objective=Objective("max_youden")))
