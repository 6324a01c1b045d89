"""Recheck pipeline: a decision record on the first demo quarter, rechecked on the second."""

from __future__ import annotations

import copy
import json

import numpy as np
import pandas as pd
import pytest

from app.policy_form import POLICY_DIR
from core.decision import decide
from core.errors import InputError
from core.intake import demo_path, load_dataset, load_demo
from core.maturity import LIVE_THRESHOLD_STATEMENT, NO_MATURITY_STATEMENT
from core.policy import load_policy
from core.recheck import (
    SCHEMA,
    build_recheck_record,
    dumps_recheck,
    exit_code,
    loads_recheck,
    recheck,
    recheck_without_timestamps,
)
from core.record import RecordError, restore_decision, seal
from core.verdicts import judge_rules

REPS = 200  # the exact number does not matter here; the product default is 2,000
AS_OF = "2025-09-30"


@pytest.fixture(scope="module")
def record():
    return decide(load_demo("hospital_q1"), load_policy(POLICY_DIR / "hospital.toml"),
                  n_replicates=REPS, production_decimals=4)


@pytest.fixture(scope="module")
def q2():
    return recheck_q2_frame()


def recheck_q2_frame():
    return pd.read_csv(demo_path("hospital_q2"))


def _bytes(df: pd.DataFrame) -> bytes:
    return df.to_csv(index=False).encode("utf-8")


@pytest.fixture(scope="module")
def result(record):
    return recheck(record, demo_path("hospital_q2"), as_of=AS_OF, n_replicates=REPS)


def test_q2_wendlecombe_recall_fails(result):
    # the demo's drifted site: its recall rule fails on the second quarter
    v = result.verdict("min_recall", ("site", "Wendlecombe"))
    assert v.verdict == "fails"
    assert v.upper < 0.80  # the one-sided upper bound itself lies below the limit
    assert "recall at site Wendlecombe fails" in result.summary
    assert result.overall == "fails" and exit_code(result) == 1
    # the two steady sites still hold
    for site in ("Orrinford", "Pellbrook"):
        assert result.verdict("min_recall", ("site", site)).verdict == "holds"
    # the capacity rule is judged overall only
    assert all(v.name != "max_flagged_per_period" for g in result.groups for v in g.verdicts)
    assert result.new_groups == () and result.vanished_groups == ()


def test_verdicts_are_judge_rules_on_the_confusion_matrix(result, record):
    # counts at the approved threshold against scikit-learn's confusion_matrix
    from sklearn.metrics import confusion_matrix

    ds = result.mature
    t = float(record["threshold"])
    pred = ds.y_score >= t
    tn, fp, fn, tp = confusion_matrix(ds.y_true, pred).ravel()
    assert result.counts == {"tp": tp, "fp": fp, "fn": fn, "tn": tn}
    direct = judge_rules(tp, fp, fn, tn, {"min_recall": 0.8}, confidence=0.95)
    assert direct[0].verdict == result.verdict("min_recall").verdict
    assert direct[0].lower == pytest.approx(result.verdict("min_recall").lower, rel=1e-12)
    # the Wendlecombe cases alone (common practice, no source: recall = tp / (tp + fn))
    m = np.asarray(ds.groups["site"], dtype=object) == "Wendlecombe"
    y, s = ds.y_true[m], ds.y_score[m]
    assert result.verdict("min_recall", ("site", "Wendlecombe")).value == pytest.approx(
        ((s >= t) & y).sum() / y.sum(), rel=1e-15)


def test_metric_differences_use_newcombe(result, record):
    # statsmodels confint_proportions_2indep(method="newcomb") is the reference
    from statsmodels.stats.proportion import confint_proportions_2indep

    c0, c1 = record["counts"], result.counts
    rec = next(c for c in result.comparisons if c.metric == "recall")
    lo, hi = confint_proportions_2indep(c1["tp"], c1["tp"] + c1["fn"], c0["tp"], c0["tp"] + c0["fn"],
                                        method="newcomb", compare="diff", alpha=0.05)
    assert (rec.low, rec.high) == pytest.approx((lo, hi), rel=1e-9)
    assert rec.difference == pytest.approx(rec.new - rec.reference)
    assert rec.changed == (hi < 0 or lo > 0)


def test_drift_low_psi_with_calibration_failing_is_caught(result):
    # scores barely moved (PSI stable) while outcomes did: calibration drift must fail
    assert result.drift.psi.band == "stable"
    assert result.calibration.verdict == "fails"
    assert result.calibration.measure("oe_ratio").new_low > 1.0


def test_same_data_shows_no_drift(record):
    r = recheck(record, demo_path("hospital_q1"), as_of=AS_OF, n_replicates=REPS)
    assert r.drift.psi.value == 0.0 and r.drift.ks.statistic == 0.0
    assert all(c.difference == 0.0 for c in r.comparisons)
    assert r.verdict("min_recall").verdict == "holds"  # as at approval
    assert r.now["difference"]["same_point"] is True


def test_maturity_excludes_open_windows(record, q2):
    # as of 2025-06-15 with a 2-day horizon: scored on or before 2025-06-13 00:00
    r = recheck(record, demo_path("hospital_q2"), as_of="2025-06-15", n_replicates=REPS)
    t = pd.to_datetime(q2["score_time"])
    want = int((t <= pd.Timestamp("2025-06-13")).sum())
    assert r.maturity.n_mature == want == r.mature.n_rows
    assert r.maturity.n_mature < len(q2)
    assert "2025-06-15 00:00" in r.statements[0]
    with pytest.raises(InputError, match="no new case is mature"):
        recheck(record, demo_path("hospital_q2"), as_of="2025-03-01", n_replicates=REPS)


def test_without_score_time_the_statement_says_so(record, q2):
    df = q2.drop(columns=["score_time"])
    # the record judges capacity per period: without score times that rule cannot be judged
    with pytest.raises(InputError, match="score_time|score-time"):
        recheck(record, _bytes(df), as_of=AS_OF, mapping_override={"score_time": None},
                n_replicates=REPS)
    rec = _without_capacity(record)
    r = recheck(rec, _bytes(df), as_of=AS_OF, mapping_override={"score_time": None},
                n_replicates=REPS)
    assert not r.maturity.available and NO_MATURITY_STATEMENT in r.statements[0]


def _without_capacity(record):
    rec = copy.deepcopy(record)
    for key in ("as_written", "resolved"):
        rules = rec["policy"][key]["rules"]
        rules.pop("max_flagged_per_period", None)
        rules.pop("capacity_quantile", None)
    rec["choice"]["rules"] = [r for r in rec["choice"]["rules"]
                              if r["name"] != "max_flagged_per_period"]
    return seal(rec)


def test_live_threshold_statement(record):
    r = recheck(record, demo_path("hospital_q2"), as_of=AS_OF, live=True, n_replicates=REPS)
    assert r.model_effect == LIVE_THRESHOLD_STATEMENT and LIVE_THRESHOLD_STATEMENT in r.statements
    assert build_recheck_record(r)["collected_while_live"] is True


def test_renamed_column_label_value_and_scale_are_named(record, q2):
    renamed = q2.rename(columns={"risk_score": "score_v2"})
    with pytest.raises(InputError, match="risk_score"):
        recheck(record, _bytes(renamed), as_of=AS_OF, n_replicates=REPS)
    r = recheck(record, _bytes(renamed), as_of=AS_OF, mapping_override={"score": "score_v2"},
                n_replicates=REPS)
    assert r.verdict("min_recall", ("site", "Wendlecombe")).verdict == "fails"
    relabelled = q2.assign(deteriorated=q2["deteriorated"].map({"yes": "Y", "no": "N"}))
    with pytest.raises(InputError, match="yes"):
        recheck(record, _bytes(relabelled), as_of=AS_OF, n_replicates=REPS)
    rescaled = q2.assign(risk_score=q2["risk_score"] * 100)
    with pytest.raises(InputError, match=r"\[0, 1\]"):
        recheck(record, _bytes(rescaled), as_of=AS_OF, n_replicates=REPS)
    with pytest.raises(InputError, match="direction"):
        recheck(record, _bytes(q2), as_of=AS_OF, mapping_override={"higher_is_riskier": False})


def test_edited_decision_record_is_refused(record):
    bad = copy.deepcopy(record)
    bad["threshold"] = 0.01
    with pytest.raises(RecordError) as e:
        recheck(bad, demo_path("hospital_q2"), as_of=AS_OF, n_replicates=REPS)
    assert e.value.field == "threshold"


def test_recheck_record(result, record, q2):
    rec = build_recheck_record(result)
    assert rec["schema"] == SCHEMA
    assert rec["decision_record"]["sha256"] == record["integrity"]["sha256"]
    assert rec["overall_verdict"] == "fails" and rec["summary"] == result.summary
    text = dumps_recheck(rec)
    assert loads_recheck(text) == rec
    # no data rows: no encounter or patient id appears
    for ident in list(q2["encounter_id"][:50]) + list(q2["patient_id"][:50]):
        assert ident not in text
    edited = json.loads(text)
    edited["summary"] = "All rules hold."
    with pytest.raises(RecordError) as e:
        loads_recheck(json.dumps(edited))
    assert e.value.field == "summary"
    # same inputs, same record but for the time
    again = build_recheck_record(recheck(record, demo_path("hospital_q2"), as_of=AS_OF,
                                         n_replicates=REPS))
    assert recheck_without_timestamps(again) == recheck_without_timestamps(rec)


def test_a_loaded_dataset_is_accepted(record, result):
    ds = load_dataset(demo_path("hospital_q2"), restore_decision(record).mapping)
    r = recheck(record, ds, as_of=AS_OF, n_replicates=REPS)
    assert recheck_without_timestamps(build_recheck_record(r)) == \
        recheck_without_timestamps(build_recheck_record(result))


def test_recheck_memo(result, q2):
    from core import cautions
    from core.recheck_memo import recheck_blocks, recheck_markdown, recheck_pdf

    rec = build_recheck_record(result)
    blocks = recheck_blocks(rec)
    strong = [b for b in blocks if b.kind == "strong"]
    assert strong and strong[0].text.startswith(result.summary)  # the summary comes first
    assert blocks.index(strong[0]) < min(i for i, b in enumerate(blocks) if b.kind == "h1")
    texts = [b.text for b in blocks if b.kind == "caution"]
    assert cautions.FULL in texts and cautions.LABEL_SHIFT in texts
    md = recheck_markdown(rec)
    assert "Wendlecombe" in md and rec["integrity"]["sha256"] in md
    assert rec["decision_record"]["sha256"] in md
    assert "<" not in md.replace("&lt;", "")  # no raw HTML gets through
    for ident in list(q2["encounter_id"][:50]) + list(q2["patient_id"][:50]):
        assert ident not in md
    pdf = recheck_pdf(rec)
    assert pdf[:5] == b"%PDF-" and len(pdf) > 5000


def test_policy_now_when_no_point_meets_every_rule(result):
    now = result.now
    # on Q2 recall 0.80 and at most 320 flags a day cannot both be met
    assert now["chosen_now"] is None and now["infeasible"]
    assert now["unconstrained_now"] is not None
    d = now["difference"]
    a, u = now["approved_threshold_now"], now["unconstrained_now"]
    assert d["threshold"] == pytest.approx(u["threshold"] - a["threshold"])
    assert d["flagged"] == (u["counts"]["tp"] + u["counts"]["fp"]) - (a["counts"]["tp"]
                                                                      + a["counts"]["fp"])


def test_new_and_vanished_groups_are_listed(record, q2):
    renamed = q2.assign(site=q2["site"].replace({"Wendlecombe": "Thornby"}))
    r = recheck(record, _bytes(renamed), as_of=AS_OF, n_replicates=REPS)
    assert r.new_groups == ("site = Thornby",)
    assert r.vanished_groups == ("site = Wendlecombe",)
    assert ("site", "Thornby") not in r.group_verdicts  # a new group has no approval to recheck
    assert {g.group for g in r.groups if g.column == "site"} == {"Orrinford", "Pellbrook"}
    rec = build_recheck_record(r)
    assert rec["groups"]["new"] == ["site = Thornby"]
    assert rec["groups"]["vanished"] == ["site = Wendlecombe"]


def _count_table(name):
    from core.dataset import Dataset

    d = pd.read_csv(demo_path(name))
    d["ev"] = (d["deteriorated"] == "yes").astype(float)
    g = d.groupby(["risk_score", "site"], as_index=False).agg(events=("ev", "sum"), n=("ev", "size"))
    return Dataset.from_count_table(g["risk_score"], g["events"], g["n"] - g["events"],
                                    groups={"site": g["site"]})


def test_count_tables_give_the_row_verdicts(result):
    # the same cases as a count table (one GROUP BY): same counts and verdicts per site;
    # no score times, so label maturity is reported as not checked
    import dataclasses

    pol = load_policy(POLICY_DIR / "hospital.toml")
    pol = pol.replace(rules=dataclasses.replace(pol.rules, max_flagged_per_period=None,
                                                capacity_quantile=None))
    rec = decide(_count_table("hospital_q1"), pol, n_replicates=REPS)
    r = recheck(rec, _count_table("hospital_q2"), as_of=AS_OF, n_replicates=REPS)
    assert not r.maturity.available
    assert r.counts == result.counts
    for site in ("Orrinford", "Pellbrook", "Wendlecombe"):
        a = r.verdict("min_recall", ("site", site))
        b = result.verdict("min_recall", ("site", site))
        assert (a.verdict, a.value, a.lower, a.upper) == (b.verdict, b.value, b.lower, b.upper)


# --------------------------------------------------------------------------- a changed policy

def _changed(record, **rules):
    from core.recheck import record_policy

    d = record_policy(record).to_dict()
    d["rules"] = {**d["rules"], **rules}
    return d


def test_changed_policy_touches_only_what_would_be_chosen_now(record, result):
    from core.choose import choose
    from core.recheck import VERDICT_BASIS, rechoose

    d = _changed(record, max_flagged_per_period=400.0)
    r = recheck(record, demo_path("hospital_q2"), as_of=AS_OF, n_replicates=REPS, policy=d)
    # the approved rules are still judged against the record's policy (the approval)
    assert r.verdicts == result.verdicts and r.summary == result.summary
    assert [g.verdicts for g in r.groups] == [g.verdicts for g in result.groups]
    assert r.drift.to_dict() == result.drift.to_dict()
    now = r.now
    assert now["policy_source"] == "changed" and now["verdict_basis"] == VERDICT_BASIS
    # exactly the key that was changed, old -> new
    assert now["changes"] == [{"key": "rules.max_flagged_per_period", "old": 320.0, "new": 400.0,
                               "source": "file"}]
    assert "320 -> 400" in now["policy_note"] and VERDICT_BASIS in now["policy_note"]
    # the choice now is core.choose.choose with that policy on the mature new data
    from core.policy import Policy

    ch = choose(result.mature, Policy.from_dict(d))
    assert ch.point is not None and now["chosen_now"]["threshold"] == float(ch.point.threshold)
    assert now["chosen_now"]["threshold"] != float(record["threshold"])
    # rechoose() redoes that part alone, from a Policy as well as from a dict
    again = rechoose(result, Policy.from_dict(d))
    assert again.now == now and again.verdicts == result.verdicts
    assert rechoose(again, None).now == result.now
    rec = build_recheck_record(again)
    assert rec["policy_now"]["changes"] == now["changes"]
    assert rec["rules"] == build_recheck_record(result)["rules"]


def test_the_records_own_policy_is_no_change(record, result):
    from core.recheck import policy_changes, record_policy

    assert result.now["policy_source"] == "record" and result.now["changes"] == []
    assert policy_changes(record, record_policy(record), result.mature) == []
    from core.recheck import rechoose

    assert rechoose(result, record_policy(record)).now == result.now


def test_a_policy_without_prevalence_shows_the_new_datas_own(record, result):
    # leaving the deployment prevalence out resolves it to the new data's own: a change listed
    from core.recheck import policy_changes, record_policy

    d = record_policy(record).to_dict()
    for k in ("prevalence", "prevalence_low", "prevalence_high", "prevalence_source"):
        d["deployment"].pop(k, None)
    from core.policy import Policy

    ch = {c["key"]: c for c in policy_changes(record, Policy.from_dict(d), result.mature)}
    c = ch["deployment.prevalence"]
    assert c["old"] == 0.02
    # common practice, no source: the prevalence is events / cases
    assert c["new"] == pytest.approx(result.mature.y_true.mean(), rel=1e-12)
    assert ch["deployment.prevalence_low"]["new"] is None


def test_a_bad_policy_is_refused_naming_the_key(record):
    from core.policy import PolicyError

    with pytest.raises(PolicyError) as e:
        recheck(record, demo_path("hospital_q2"), as_of=AS_OF, n_replicates=REPS,
                policy=_changed(record, min_recall=1.5))
    assert "min_recall" in str(e.value)
    assert isinstance(e.value, InputError)
    with pytest.raises(InputError):
        recheck(record, demo_path("hospital_q2"), as_of=AS_OF, policy="hospital.toml")


# --------------------------------------------------------------------------- capacity per period

def _days(n_days, per_day, rng, *, events_per_day, shift=0.0, start="2025-01-01"):
    """Invented rows: ``per_day[i]`` cases on day i, exactly ``events_per_day[i]`` events."""
    from scipy.special import expit

    per_day = np.asarray(per_day)
    ev = np.asarray(events_per_day)
    day = np.repeat(np.arange(n_days), per_day)
    y = np.concatenate([np.r_[np.ones(e, bool), np.zeros(n - e, bool)] for n, e in zip(per_day, ev)])
    z = rng.normal(size=y.size) + np.where(y, 1.6 + shift, 0.0)
    hours = rng.integers(0, 24, size=y.size)
    t = (np.datetime64(start) + day.astype("timedelta64[D]")
         + hours.astype("timedelta64[h]")).astype("datetime64[ns]")
    return y, np.round(expit(z - 3.0), 4), t


def _period_record(policy_dict, seed=11):
    from core.dataset import Dataset
    from core.policy import Policy

    rng = np.random.default_rng(seed)
    y, s, t = _days(60, [200] * 60, rng, events_per_day=[10] * 60)
    ds = Dataset.from_arrays(y, s, score_time=t, file_name="approval.csv")
    return decide(ds, Policy.from_dict(policy_dict), n_replicates=REPS), rng


def _flags_by_day(y, s, t, thr, weights=None):
    # pandas group-by of flagged cases per calendar day (common practice, no source)
    df = pd.DataFrame({"f": (s >= thr).astype(float) * (1.0 if weights is None else weights),
                       "d": pd.to_datetime(t).floor("D")})
    per = df.groupby("d")["f"].sum()
    full = pd.date_range(per.index.min(), per.index.max(), freq="D")
    return per.reindex(full, fill_value=0.0).to_numpy()


CAP_POLICY = {"objective": {"kind": "max_youden"}, "deployment": {"period": "day"},
              "rules": {"min_recall": 0.5, "max_flagged_per_period": 45.0,
                        "capacity_quantile": 0.9, "confidence": 0.95}}


def test_capacity_is_judged_per_period_on_the_new_data():
    from core.dataset import Dataset

    rec, rng = _period_record(CAP_POLICY)
    thr = float(rec["threshold"])
    # new quarter: the same case mix, but the last 20 of 60 days carry twice the volume
    per_day = np.r_[[200] * 40, [400] * 20]
    y, s, t = _days(60, per_day, rng, events_per_day=per_day // 20, start="2025-04-01")
    r = recheck(rec, Dataset.from_arrays(y, s, score_time=t, file_name="new.csv"),
                as_of="2025-12-31", n_replicates=REPS)
    flags = _flags_by_day(y, s, t, thr)  # prevalence 5 % in both: no reweighting
    q = np.quantile(flags, 0.9, method="inverted_cdf")  # numpy's empirical quantile
    v = r.verdict("max_flagged_per_period")
    assert v.value == pytest.approx(q, rel=1e-12)
    assert v.verdict == ("fails" if q > 45.0 else "holds") == "fails"
    assert v.lower is None and v.upper is None  # no sampling bound, as at approval
    fpp = r.now["flags_per_period"]
    old, new = fpp["rows"][0], fpp["rows"][1]
    # the approval's distribution comes from the record, the new one from the new data
    assert old == {"point": "approved threshold, approval data", **rec["metrics"]["workload"]["capacity"]}
    assert new["n_periods"] == 60 and new["period"] == "day"
    assert new["quantile"] == pytest.approx(q, rel=1e-12)
    assert new["median"] == pytest.approx(np.quantile(flags, 0.5, method="inverted_cdf"), rel=1e-12)
    assert new["max"] == pytest.approx(flags.max(), rel=1e-12)
    assert new["share_over"] == pytest.approx((flags > 45.0).mean(), rel=1e-12)
    d = fpp["new_minus_approval"]
    assert d["quantile"] == pytest.approx(new["quantile"] - old["quantile"], rel=1e-12)
    assert d["max"] > 0  # the busy days show
    rec2 = build_recheck_record(r)
    assert rec2["policy_now"]["flags_per_period"] == fpp


def test_capacity_rescaled_to_the_deployment_volume_like_the_approval():
    # with cases_per_period the flags per period are rescaled (core.capacity): a doubled raw
    # volume at the same mix is absorbed, as the approval's own rescaling would absorb it
    from core.dataset import Dataset

    pol = json.loads(json.dumps(CAP_POLICY))
    pol["deployment"] = {"period": "day", "cases_per_period": 200.0, "prevalence": 0.05}
    rec, rng = _period_record(pol)
    thr = float(rec["threshold"])
    per_day = np.full(60, 400)
    y, s, t = _days(60, per_day, rng, events_per_day=per_day // 20, start="2025-04-01")
    r = recheck(rec, Dataset.from_arrays(y, s, score_time=t, file_name="new.csv"),
                as_of="2025-12-31", n_replicates=REPS)
    flags = _flags_by_day(y, s, t, thr) * (200.0 / 400.0)  # 200 cases a day in deployment
    v = r.verdict("max_flagged_per_period")
    assert v.value == pytest.approx(np.quantile(flags, 0.9, method="inverted_cdf"), rel=1e-9)
    assert r.now["flags_per_period"]["rows"][1]["mean"] == pytest.approx(flags.mean(), rel=1e-9)


def test_without_score_time_no_per_period_table():
    import dataclasses

    from core.dataset import Dataset

    pol = load_policy(POLICY_DIR / "hospital.toml")
    pol = pol.replace(rules=dataclasses.replace(pol.rules, max_flagged_per_period=None,
                                                capacity_quantile=None), fairness=None)
    rng = np.random.default_rng(3)
    y = rng.random(4000) < 0.05
    s = np.round(np.clip(rng.normal(0.3 + 0.3 * y, 0.15), 0, 1), 3)
    rec = decide(Dataset.from_arrays(y, s), pol, n_replicates=REPS)
    r = recheck(rec, Dataset.from_arrays(y, s), n_replicates=REPS)
    assert r.now["flags_per_period"] is None
    assert r.now["approved_threshold_now"]["per_period"] is None


# --------------------------------------------------------------------------- overlapping groups

def test_q2_site_finding_leads_and_the_age_bands_overlap(result, q2):
    ov = result.overlaps
    assert ov["lead"] == "site = Wendlecombe"
    assert result.groups[0].key == ("site", "Wendlecombe")  # listed first
    others = {o["group"]: o for o in ov["others"]}
    assert set(others) == {"age_band = 18-44", "age_band = 45-64"}
    # direct pandas computation: recall within the age band outside Wendlecombe
    # (common practice, no source: recall = tp / (tp + fn))
    t = float(result.threshold)
    ev = q2[q2["deteriorated"] == "yes"]
    for band in ("18-44", "45-64"):
        o = others[f"age_band = {band}"]
        b = ev[ev["age_band"] == band]
        assert o["share_of_events"] == pytest.approx((b["site"] == "Wendlecombe").mean(), rel=1e-12)
        rest = b[b["site"] != "Wendlecombe"]
        v = o["verdicts_without_lead"][0]
        assert v["value"] == pytest.approx((rest["risk_score"] >= t).mean(), rel=1e-12)
    assert others["age_band = 45-64"]["cleared"] is True
    assert others["age_band = 18-44"]["cleared"] is False  # low recall there on its own
    assert "overlaps site Wendlecombe" in result.summary
    assert ov["statement"].startswith("The leading subgroup finding is site Wendlecombe")
    # the 18-44 band was below the limit at approval already: said so
    assert any("age_band 18-44 was below the limit" in n for n in result.group_notes)
    md = __import__("core.recheck_memo", fromlist=["x"]).recheck_markdown(build_recheck_record(result))
    assert md.index("The leading subgroup finding") < md.index("## Rules at the approved")


def test_overlap_on_constructed_groups():
    # site A's recall collapses in every band; band x is mostly site A's cases, band y is not
    from core.dataset import Dataset
    from core.policy import Policy

    rng = np.random.default_rng(5)

    def make(drift):
        n = 40000
        site = np.where(rng.random(n) < 0.3, "A", "B")
        band = np.where(rng.random(n) < np.where(site == "A", 0.8, 0.2), "x", "y")
        y = rng.random(n) < 0.04
        lift = np.where(y, np.where((site == "A") & drift, 0.3, 2.2), 0.0)
        s = np.round(rng.normal(size=n) + lift, 3)
        return Dataset.from_arrays(y, s, groups={"site": site, "band": band})

    pol = Policy.from_dict({"objective": {"kind": "max_youden"},
                            "rules": {"min_recall": 0.6, "confidence": 0.95}})
    rec = decide(make(False), pol, n_replicates=REPS)
    r = recheck(rec, make(True), n_replicates=REPS)
    assert r.verdict("min_recall", ("site", "A")).verdict == "fails"
    assert r.verdict("min_recall", ("band", "x")).verdict == "fails"
    assert r.verdict("min_recall", ("site", "B")).verdict == "holds"
    assert r.overlaps["lead"] == "site = A"
    (o,) = r.overlaps["others"]
    assert o["group"] == "band = x" and o["cleared"] is True
    assert o["verdicts_without_lead"][0]["verdict"] != "fails"


def test_memo_of_a_changed_policy_lists_the_changes(record, result):
    # the memo says which policy chose, what changed, and that the verdicts keep the approval's
    from core.recheck import VERDICT_BASIS, rechoose
    from core.recheck_memo import recheck_blocks, recheck_markdown

    rec = build_recheck_record(rechoose(result, _changed(record, max_flagged_per_period=400.0)))
    blocks = recheck_blocks(rec)
    heads = [b.text for b in blocks if b.kind == "h1"]
    assert "What a changed policy would choose now" in heads
    table = next(b for b in blocks if b.kind == "table" and b.header[0] == "Policy key")
    assert table.rows == (("rules.max_flagged_per_period", "320", "400", "set in the policy"),)
    md = recheck_markdown(rec)
    assert "are judged against the decision record" in md  # VERDICT_BASIS, Markdown-escaped
    assert VERDICT_BASIS in " ".join(b.text for b in blocks if b.kind == "p")
    same = recheck_markdown(build_recheck_record(result))
    assert "What the same policy would choose now" in same
    assert "The rule verdicts above and this choice use the same policy" in same
