"""Subgroups and fairness, against pandas by hand and statsmodels."""

import json

import numpy as np
import pandas as pd
import pytest
from statsmodels.stats.multitest import multipletests
from statsmodels.stats.proportion import confint_proportions_2indep, proportion_confint

from core.dataset import Dataset
from core.errors import InputError
from core.groups import (
    MISSING_GROUP,
    PER_GROUP_THRESHOLDS,
    TABLE_METRICS,
    TRADEOFF_STATEMENT,
    holm_adjust,
    newcombe_interval,
    newcombe_p_value,
    subgroup_report,
)
from core.policy import Fairness, Objective, Policy

X1 = np.array([56, 9, 0, 0, 10, 3, 40, 1, 25, 7.0])
N1 = np.array([70, 10, 10, 10, 10, 50, 400, 3, 25, 7.0])
X2 = np.array([48, 3, 0, 4, 0, 9, 51, 0, 20, 0.0])
N2 = np.array([80, 10, 20, 10, 10, 60, 410, 5, 30, 4.0])


# ------------------------------------------------------------------ Newcombe, Holm

@pytest.mark.parametrize("confidence", [0.8, 0.9, 0.95, 0.99])
def test_newcombe_matches_statsmodels(confidence):
    # Reference: statsmodels confint_proportions_2indep(method="newcomb", compare="diff").
    lo, hi = newcombe_interval(X1, N1, X2, N2, confidence)
    for i in range(X1.shape[0]):
        rlo, rhi = confint_proportions_2indep(X1[i], N1[i], X2[i], N2[i], method="newcomb",
                                              compare="diff", alpha=1 - confidence)
        assert lo[i] == pytest.approx(rlo, abs=1e-12)
        assert hi[i] == pytest.approx(rhi, abs=1e-12)


def test_newcombe_worked_examples():
    # Newcombe, Stat Med 1998, Table II, method 10 (from memory): 56/70 - 48/80 and 9/10 - 3/10.
    assert newcombe_interval(56, 70, 48, 80) == pytest.approx((0.0524, 0.3339), abs=5e-5)
    assert newcombe_interval(9, 10, 3, 10) == pytest.approx((0.1705, 0.8090), abs=5e-5)


def test_newcombe_p_value_inverts_the_interval():
    # The p-value is the alpha at which an end of the interval reaches the value (definition
    # of interval inversion; common practice, no source).
    p = newcombe_p_value(X1, N1, X2, N2)
    for i in range(X1.shape[0]):
        d = X1[i] / N1[i] - X2[i] / N2[i]
        if d == 0:
            assert p[i] == 1.0
            continue
        if p[i] < 1e-12:
            continue
        lo, hi = newcombe_interval(X1[i], N1[i], X2[i], N2[i], 1 - p[i])
        end = lo if d > 0 else hi
        assert end == pytest.approx(0.0, abs=1e-9)
        lo, hi = newcombe_interval(X1[i], N1[i], X2[i], N2[i], 0.95)
        assert (p[i] < 0.05) == (lo > 0 or hi < 0)


def test_holm_matches_statsmodels():
    # Reference: statsmodels multipletests(method="holm"), with ties and NaN left out of m.
    g = np.random.default_rng(4)
    p = np.concatenate([g.uniform(0, 0.1, 15), [0.01, 0.01, 0.5, 1.0]])
    np.testing.assert_allclose(holm_adjust(p), multipletests(p, method="holm")[1], rtol=1e-14)
    q = p.copy()
    q[[2, 7]] = np.nan
    got = holm_adjust(q)
    ok = ~np.isnan(q)
    assert np.isnan(got[~ok]).all()
    np.testing.assert_allclose(got[ok], multipletests(q[ok], method="holm")[1], rtol=1e-14)


# ------------------------------------------------------------------ data

def _data(n=12000, seed=0, weak_site="C", drop=1.0):
    """Three sites and two age bands; site ``weak_site`` has a less separating score."""
    g = np.random.default_rng(seed)
    site = np.array(list("ABC"))[g.integers(0, 3, n)]
    age = np.where(g.random(n) < 0.4, "old", "young")
    y = g.random(n) < np.where(age == "old", 0.08, 0.04)
    sep = np.where(site == weak_site, drop, 1.6)
    s = 1 / (1 + np.exp(-(g.normal(0, 1, n) + sep * y - 2.5)))
    return y, np.round(s, 4), site, age


def _by_hand(y, s, groups, t, w=None):
    df = pd.DataFrame({"y": y, "f": s >= t, "g": groups, "w": 1.0 if w is None else w})
    df["tp"] = df.w * (df.y & df.f)
    df["fp"] = df.w * (~df.y & df.f)
    df["fn"] = df.w * (df.y & ~df.f)
    df["tn"] = df.w * (~df.y & ~df.f)
    a = df.groupby("g").agg(rows=("y", "size"), tp=("tp", "sum"), fp=("fp", "sum"),
                            fn=("fn", "sum"), tn=("tn", "sum"))
    tot = a[["tp", "fp", "fn", "tn"]].sum()
    return a, tot


_NUM_DEN = {
    "prevalence": (["tp", "fn"], ["tp", "fp", "fn", "tn"]),
    "precision": (["tp"], ["tp", "fp"]),
    "recall": (["tp"], ["tp", "fn"]),
    "specificity": (["tn"], ["fp", "tn"]),
    "flag_rate": (["tp", "fp"], ["tp", "fp", "fn", "tn"]),
}


def test_subgroup_table_recomputed_by_hand():
    # Counts, metrics and Wilson intervals recomputed with pandas (common practice), Wilson
    # against statsmodels proportion_confint, group-vs-rest against statsmodels
    # confint_proportions_2indep(method="newcomb"), Holm against multipletests(method="holm").
    y, s, site, age = _data()
    ds = Dataset.from_arrays(y, s, groups={"site": site, "age": age})
    t = 0.2
    rep = subgroup_report(ds, t, confidence=0.9)
    assert rep.interval == "analytic"
    raw_p = []
    for col, vals in (("site", site), ("age", age)):
        a, tot = _by_hand(y, s, vals, t)
        for gname, row in a.iterrows():
            r = rep.group(col, gname)
            assert r.rows == row["rows"]
            assert r.events == row.tp + row.fn
            assert r.flagged == row.tp + row.fp
            for m, (num, den) in _NUM_DEN.items():
                x, n = row[num].sum(), row[den].sum()
                v = r.values[m]
                assert v.estimate == pytest.approx(x / n, rel=1e-12)
                lo, hi = proportion_confint(x, n, alpha=0.1, method="wilson")
                assert (v.low, v.high) == pytest.approx((lo, hi), rel=1e-10, abs=1e-14)
                rx = tot[num].sum() - x
                rn = tot[den].sum() - n
                dlo, dhi = confint_proportions_2indep(x, n, rx, rn, method="newcomb",
                                                      compare="diff", alpha=0.1)
                dd = r.differences[m]
                assert dd.difference == pytest.approx(x / n - rx / rn, abs=1e-12)
                assert (dd.low, dd.high) == pytest.approx((dlo, dhi), abs=1e-10)
                raw_p.append(((col, gname, m), dd.p_value, dd.p_adjusted))
    order = {(c, g, m): i for i, (c, g, m) in enumerate(
        (r.column, r.group, m) for r in rep.rows for m in TABLE_METRICS)}
    raw_p.sort(key=lambda e: order[e[0]])
    p = np.array([e[1] for e in raw_p])
    np.testing.assert_allclose([e[2] for e in raw_p], multipletests(p, method="holm")[1],
                               rtol=1e-10)
    assert rep.n_comparisons == len(raw_p)
    for e in raw_p:
        r = rep.group(e[0][0], e[0][1])
        dd = r.differences[e[0][2]]
        assert dd.verdict == ("differs" if dd.p_adjusted < 0.1 else "no clear difference")
        assert dd.largest_gap == pytest.approx(max(abs(dd.low), abs(dd.high)))


def test_exploratory_when_not_adjusted():
    # The multiplicity statement and the label "exploratory" (issue text).
    y, s, site, _ = _data(seed=1)
    ds = Dataset.from_arrays(y, s, groups={"site": site})
    rep = subgroup_report(ds, 0.2, adjust="none")
    for r in rep.rows:
        for d in r.differences.values():
            assert d.p_adjusted == d.p_value and d.verdict.endswith("(exploratory)")
    assert any(st.startswith("Exploratory") for st in rep.statements)
    assert PER_GROUP_THRESHOLDS in rep.statements
    held = subgroup_report(ds, 0.2)
    assert any("Holm" in st for st in held.statements)


def test_sampling_weights_use_kish_effective_size():
    # Kish's effective size (Kish 1965) of each group's denominator as the Wilson trials;
    # reference statsmodels proportion_confint on the effective counts.
    y, s, site, _ = _data(n=4000, seed=2)
    w = np.random.default_rng(3).uniform(0.5, 3.0, y.shape[0])
    ds = Dataset.from_arrays(y, s, w, weight_kind="sampling", groups={"site": site})
    rep = subgroup_report(ds, 0.2)
    m = (site == "A") & y
    f = s >= 0.2
    rec = w[m & f].sum() / w[m].sum()
    neff = w[m].sum() ** 2 / (w[m] ** 2).sum()
    v = rep.group("site", "A").values["recall"]
    assert v.estimate == pytest.approx(rec, rel=1e-12)
    assert v.trials == pytest.approx(neff, rel=1e-12)
    lo, hi = proportion_confint(rec * neff, neff, method="wilson")
    assert (v.low, v.high) == pytest.approx((lo, hi), rel=1e-10)


# ------------------------------------------------------------------ fairness

def _policy(metric="recall", groups=("site",), tol=0.05, ref=None):
    return Policy(objective=Objective(kind="max_youden"),
                  fairness=Fairness(metric=metric, groups=groups, tolerance=tol, reference=ref))


def test_fairness_fails_for_a_clearly_worse_site():
    # A site whose score barely separates must fail recall parity (simulation, common practice).
    y, s, site, age = _data(n=60000, seed=5, drop=0.2)
    ds = Dataset.from_arrays(y, s, groups={"site": site, "age": age})
    rep = subgroup_report(ds, 0.2, policy=_policy())
    f = rep.fairness
    assert f.verdict == "fails"
    c = next(c for c in f.comparisons if c.group == "C")
    assert c.verdict == "fails" and c.high < -0.05
    assert TRADEOFF_STATEMENT in f.statements[1]
    assert "targets recall parity" in f.statements[1]
    json.dumps(rep.to_dict(), allow_nan=False)


def test_fairness_holds_when_sites_are_alike_and_large():
    # Identical sites, many cases: every gap interval lies within the tolerance.
    g = np.random.default_rng(6)
    n = 400000
    site = np.array(list("AB"))[g.integers(0, 2, n)]
    y = g.random(n) < 0.2
    s = np.round(1 / (1 + np.exp(-(g.normal(0, 1, n) + 1.5 * y - 1.5))), 4)
    ds = Dataset.from_arrays(y, s, groups={"site": site})
    f = subgroup_report(ds, 0.3, policy=_policy(tol=0.05)).fairness
    assert f.verdict == "holds"
    assert all(-0.05 <= c.low and c.high <= 0.05 for c in f.comparisons)


def test_fairness_verdicts_equal_interval_rule_and_holm():
    # Unadjusted, each verdict is the interval rule itself; Holm-adjusted, the p-values of
    # "outside" and "within" equal statsmodels multipletests(method="holm") of the raw ones.
    y, s, site, age = _data(n=9000, seed=7, drop=0.9)
    ds = Dataset.from_arrays(y, s, groups={"site": site, "age": age})
    pol = _policy(metric="recall", groups=("site", "age"), tol=0.04)
    un = subgroup_report(ds, 0.2, policy=pol, adjust="none").fairness
    assert len(un.comparisons) == 5
    for c in un.comparisons:
        want = ("holds" if -0.04 <= c.low and c.high <= 0.04 else
                "fails" if c.low > 0.04 or c.high < -0.04 else "unclear")
        assert c.verdict == want
        if want == "unclear":
            assert f"cannot exclude a recall gap of {c.largest_gap:.2f}" in c.statement
    ho = subgroup_report(ds, 0.2, policy=pol).fairness
    po = np.array([c.p_outside for c in ho.comparisons])
    pw = np.array([c.p_within for c in ho.comparisons])
    np.testing.assert_allclose([c.p_outside_adjusted for c in ho.comparisons],
                               multipletests(po, method="holm")[1], rtol=1e-12)
    np.testing.assert_allclose([c.p_within_adjusted for c in ho.comparisons],
                               multipletests(pw, method="holm")[1], rtol=1e-12)
    assert "Holm-adjusted across the 5 groups" in ho.method


def test_fairness_against_a_reference_group():
    # Reference "A": each other site against site A, Newcombe of the two groups (statsmodels).
    y, s, site, _ = _data(n=8000, seed=8)
    ds = Dataset.from_arrays(y, s, groups={"site": site})
    f = subgroup_report(ds, 0.2, policy=_policy(metric="fpr", ref="A")).fairness
    assert [c.group for c in f.comparisons] == ["B", "C"]
    a, _ = _by_hand(y, s, site, 0.2)
    for c in f.comparisons:
        x1, n1 = a.loc[c.group, "fp"], a.loc[c.group, ["fp", "tn"]].sum()
        x2, n2 = a.loc["A", "fp"], a.loc["A", ["fp", "tn"]].sum()
        lo, hi = confint_proportions_2indep(x1, n1, x2, n2, method="newcomb", compare="diff")
        assert (c.low, c.high) == pytest.approx((lo, hi), abs=1e-10)
        assert c.against == "site = A"


def test_precision_fairness_says_it_is_judged_at_validation_counts():
    y, s, site, _ = _data(seed=9)
    ds = Dataset.from_arrays(y, s, groups={"site": site})
    f = subgroup_report(ds, 0.2, policy=_policy(metric="precision")).fairness
    assert any("each group at its own prevalence" in st for st in f.statements)


def test_no_fairness_criterion_is_stated():
    y, s, site, _ = _data(n=3000, seed=10)
    rep = subgroup_report(Dataset.from_arrays(y, s, groups={"site": site}), 0.2,
                          policy=Policy(objective=Objective(kind="max_youden")))
    assert rep.fairness is None
    assert any("declares no fairness criterion" in st for st in rep.statements)


def test_fairness_column_must_be_mapped():
    y, s, site, _ = _data(n=3000, seed=10)
    ds = Dataset.from_arrays(y, s, groups={"site": site})
    with pytest.raises(InputError, match="not among the data's group columns"):
        subgroup_report(ds, 0.2, policy=_policy(groups=("ward",)))


# ------------------------------------------------------------------ small, one-class, missing

def test_small_group_reports_the_gap_it_cannot_exclude():
    # A group of 30 events is never waved through: its statement names the largest gap.
    y, s, site, _ = _data(n=20000, seed=11)
    site = site.copy()
    small = np.flatnonzero(y)[:30]
    site[small] = "D"
    site[np.flatnonzero(~y)[:400]] = "D"
    rep = subgroup_report(Dataset.from_arrays(y, s, groups={"site": site}), 0.2,
                          policy=_policy())
    r = rep.group("site", "D")
    assert r.events == 30
    gap = r.differences["recall"].largest_gap
    assert any(f"cannot exclude a recall gap of {gap:.2f}" in n for n in r.notes)
    c = next(c for c in rep.fairness.comparisons if c.group == "D")
    assert c.verdict == "unclear" and c.largest_gap > 0.1


def test_one_class_group_is_reported_not_passed_to_the_curve():
    y, s, site, _ = _data(n=6000, seed=12)
    site = site.copy()
    site[np.flatnonzero(~y)[:200]] = "E"  # non-events only
    rep = subgroup_report(Dataset.from_arrays(y, s, groups={"site": site}), 0.2)
    r = rep.group("site", "E")
    assert r.one_class and r.events == 0 and r.rows == 200
    assert np.isnan(r.values["recall"].estimate) and np.isnan(r.roc_auc)
    assert r.differences["recall"].verdict == "undefined"
    assert "no events" in r.notes[0]
    ok = rep.group("site", "A")
    from sklearn.metrics import roc_auc_score

    m = site == "A"
    # Reference: scikit-learn roc_auc_score on the group's own rows.
    assert ok.roc_auc == pytest.approx(roc_auc_score(y[m], s[m]), rel=1e-12)
    json.dumps(rep.to_dict(), allow_nan=False)


def test_missing_group_values_form_their_own_group():
    y, s, site, _ = _data(n=3000, seed=13)
    site = site.astype(object)
    site[:50] = None
    rep = subgroup_report(Dataset.from_arrays(y, s, groups={"site": site}), 0.2)
    assert rep.group("site", MISSING_GROUP).rows == 50
    assert sum(r.rows for r in rep.rows) == 3000


def test_intersections_match_pandas_groupby():
    y, s, site, age = _data(n=8000, seed=14)
    ds = Dataset.from_arrays(y, s, groups={"site": site, "age": age})
    rep = subgroup_report(ds, 0.2, intersections=[("site", "age")])
    a, _ = _by_hand(y, s, pd.Series(site) + " & " + pd.Series(age), 0.2)
    inter = [r for r in rep.rows if r.column == "site & age"]
    assert sorted(r.group for r in inter) == sorted(a.index)
    for r in inter:
        assert r.rows == a.loc[r.group, "rows"]
        assert r.tp == a.loc[r.group, "tp"] and r.fp == a.loc[r.group, "fp"]
    with pytest.raises(InputError, match="two or more"):
        subgroup_report(ds, 0.2, intersections=[("site",)])


def test_count_table_gives_the_row_table():
    # A count table with a group column is the rows grouped by (score, group) (brief).
    y, s, site, _ = _data(n=5000, seed=15)
    rows = subgroup_report(Dataset.from_arrays(y, s, groups={"site": site}), 0.2)
    df = pd.DataFrame({"s": s, "g": site, "y": y}).groupby(["s", "g"])["y"].agg(["sum", "count"])
    df = df.reset_index()
    ct = Dataset.from_count_table(df["s"], df["sum"], df["count"] - df["sum"],
                                  groups={"site": df["g"]})
    cnt = subgroup_report(ct, 0.2)
    for r in rows.rows:
        c = cnt.group(r.column, r.group)
        assert (c.tp, c.fp, c.fn, c.tn) == (r.tp, r.fp, r.fn, r.tn)
        for m in TABLE_METRICS:
            assert c.differences[m].low == pytest.approx(r.differences[m].low, abs=1e-12)
        assert c.roc_auc == pytest.approx(r.roc_auc, rel=1e-12)
    assert any("Count table" in st for st in cnt.statements)
    with pytest.raises(InputError, match="count table"):
        subgroup_report(ct, 0.2, interval="cluster_bootstrap")


def test_ties_move_together_at_the_threshold():
    # A threshold between scores gives the counts of the curve point (brief).
    y, s, site, _ = _data(n=3000, seed=16)
    ds = Dataset.from_arrays(y, s, groups={"site": site})
    t = float(np.unique(s)[-40])
    a = subgroup_report(ds, t)
    b = subgroup_report(ds, t - 1e-9)  # same curve point when no score lies between
    lower = np.unique(s)[-41]
    assert t - 1e-9 > lower
    assert [r.tp for r in a.rows] == [r.tp for r in b.rows]
    assert a.point_threshold == t


# ------------------------------------------------------------------ clusters

def _clustered(k=400, m=8, seed=17):
    g = np.random.default_rng(seed)
    cl = np.repeat(np.arange(k), m)
    u = np.repeat(g.normal(0, 1.0, k), m)
    site = np.repeat(np.array(list("AB"))[g.integers(0, 2, k)], m)
    y = g.random(k * m) < 0.25
    s = np.round(1 / (1 + np.exp(-(u + g.normal(0, 0.7, k * m) + 1.2 * y - 1.0))), 3)
    return y, s, site, cl.astype(str)


def test_cluster_bootstrap_is_the_default_with_a_cluster_column():
    # Resampling whole clusters widens intervals when rows of a cluster move together
    # (cluster bootstrap; Davison & Hinkley 1997, from memory).
    y, s, site, cl = _clustered()
    ds = Dataset.from_arrays(y, s, groups={"site": site}, cluster=cl)
    rep = subgroup_report(ds, 0.5, n_replicates=600, seed=3, policy=_policy(tol=0.1))
    assert rep.interval == "cluster_bootstrap" and rep.n_replicates == 600
    an = subgroup_report(ds, 0.5, interval="analytic")
    for r in rep.rows:
        a = an.group(r.column, r.group)
        assert r.values["flag_rate"].estimate == a.values["flag_rate"].estimate
        wb = r.values["flag_rate"].high - r.values["flag_rate"].low
        wa = a.values["flag_rate"].high - a.values["flag_rate"].low
        assert wb > 1.3 * wa
        assert r.values["flag_rate"].wilson_low == a.values["flag_rate"].low
    assert "cluster bootstrap" in rep.fairness.method
    assert any("resample whole clusters" in st for st in rep.statements)
    again = subgroup_report(ds, 0.5, n_replicates=600, seed=3, chunk=37)
    assert again.to_dict()["rows"] == rep.to_dict()["rows"]  # chunking never changes replicates


def test_bad_arguments_raise_input_error():
    y, s, site, _ = _data(n=1000, seed=18)
    ds = Dataset.from_arrays(y, s, groups={"site": site})
    with pytest.raises(InputError, match="adjust"):
        subgroup_report(ds, 0.2, adjust="bonferroni")
    with pytest.raises(InputError, match="interval"):
        subgroup_report(ds, 0.2, interval="jackknife")
    with pytest.raises(InputError, match="not a mapped group"):
        subgroup_report(ds, 0.2, columns=["ward"])
    with pytest.raises(InputError, match="no group column"):
        subgroup_report(Dataset.from_arrays(y, s), 0.2)
    with pytest.raises(InputError, match="no cluster column"):
        subgroup_report(ds, 0.2, interval="cluster_bootstrap")
