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
