"""The decision record: contract keys, numbers, encoding, integrity, loading, test vectors."""

from __future__ import annotations

import copy
import gzip
import hashlib
import json
import math

import numpy as np
import pandas as pd
import pytest

from app.policy_form import POLICY_DIR
from core.dataset import Dataset
from core.decision import analyse, decide
from core.errors import InputError
from core.intake import demo_path, load_demo
from core.memo_fields import load_memo_fields
from core.policy import Policy, load_policy
from core.record import (
    CONTRACT_KEYS,
    DATA_KEYS,
    REQUIRED_METRICS,
    SCHEMA,
    RecordError,
    build_record,
    canonical_json,
    digest,
    dumps_record,
    fingerprint_note,
    loads_record,
    reference_summary,
    restore_decision,
    seal,
    threshold_test_vectors,
    without_timestamps,
)

REPS = 200  # the exact number does not matter here; the product default is 2,000
MEMO_FIELDS = POLICY_DIR.parent / "memo_fields" / "hospital.toml"


@pytest.fixture(scope="module")
def hospital():
    return load_demo("hospital_q1")


@pytest.fixture(scope="module")
def hospital_policy():
    return load_policy(POLICY_DIR / "hospital.toml")


@pytest.fixture(scope="module")
def record(hospital, hospital_policy):
    return decide(hospital, hospital_policy, n_replicates=REPS, production_decimals=4,
                  memo_fields=load_memo_fields(MEMO_FIELDS))


@pytest.fixture(scope="module")
def breast_cancer():
    from sklearn.datasets import load_breast_cancer

    bc = load_breast_cancer()
    # scikit-learn codes malignant as 0: the event (malignant) is target == 0
    score = bc.data[:, list(bc.feature_names).index("worst radius")]
    return Dataset.from_arrays(bc.target == 0, score)


# --------------------------------------------------------------------------- contract

def test_record_has_every_contract_key(record):
    for key in CONTRACT_KEYS:
        assert key in record, key
    assert record["schema"] == SCHEMA == "fulcrum.decision/1"
    for key in DATA_KEYS:
        assert key in record["data"], key
    for where in ("validation", "deployment"):
        for m in REQUIRED_METRICS:
            e = record["metrics"][where][m]
            assert set(("value", "ci_low", "ci_high", "method")) <= set(e)
    assert set(record["metrics"]["expected_cost"]) >= {"per_case", "per_period", "unit"}
    assert set(record["metrics"]["optimism"]) >= {"apparent", "cross_fitted", "corrected"}
    assert set(record["threshold_interval"]) == {"low", "high", "closed"}
    assert set(record["counts"]) == {"tp", "fp", "fn", "tn"}
    assert set(record["integrity"]["sections"]) == set(record) - {"integrity"}
    for key in ("title", "model_name", "model_version", "model_artefact_hash", "training_window",
                "validation_independence", "outcome_definition", "outcome_horizon", "population",
                "exclusions", "intended_use", "out_of_scope_use", "limitations", "monitoring",
                "regulatory_status", "author", "independent_reviewer", "sign_off", "rationale"):
        assert key in record["memo"], key
    assert set(record["memo"]["monitoring"]) == {"cadence", "triggers", "owner", "rollback"}
    assert set(record["memo"]["sign_off"]) == {"name", "role", "date", "decision", "conditions"}
    assert record["policy"]["as_written"] == load_policy(POLICY_DIR / "hospital.toml").to_dict()
    # every resolved value carries its source
    for section in record["policy"]["resolved"].values():
        for entry in section.values():
            assert entry["source"] in ("file", "default", "data")


def test_numbers_are_those_of_the_curve(record, hospital, hospital_policy):
    from statsmodels.stats.proportion import proportion_confint

    curve = hospital.curve()
    t = record["threshold"]
    k = curve.index_at(t)
    assert t == float(curve.thresholds[k])  # the distinct score s_k itself
    low, high, closed = curve.interval(k)
    assert record["threshold_interval"] == {"low": low, "high": high, "closed": closed}
    tp, fp = float(curve.tp[k]), float(curve.fp[k])
    fn, tn = curve.n_events - tp, curve.n_nonevents - fp
    assert record["counts"] == {"tp": tp, "fp": fp, "fn": fn, "tn": tn}
    rec = record["metrics"]["validation"]["recall"]
    assert rec["value"] == tp / (tp + fn)
    # reference: statsmodels proportion_confint(method="wilson")
    lo, hi = proportion_confint(tp, tp + fn, alpha=0.05, method="wilson")
    assert rec["ci_low"] == pytest.approx(lo, rel=1e-12)
    assert rec["ci_high"] == pytest.approx(hi, rel=1e-12)
    spec = record["metrics"]["validation"]["specificity"]
    assert spec["value"] == tn / (tn + fp)
    # deployment precision by Bayes' rule at pi (label shift: TPR and FPR carry over; from memory)
    pi = hospital_policy.deployment.prevalence
    tpr, fpr = tp / (tp + fn), fp / (fp + tn)
    dep = record["metrics"]["deployment"]
    assert dep["precision"]["value"] == pytest.approx(pi * tpr / (pi * tpr + (1 - pi) * fpr), rel=1e-12)
    assert dep["recall"]["value"] == rec["value"]
    assert dep["flag_rate"]["value"] == pytest.approx(pi * tpr + (1 - pi) * fpr, rel=1e-12)
    # expected cost per case = C_FN pi (1 - TPR) + C_FP (1 - pi) FPR (the brief's formula)
    c = record["metrics"]["expected_cost"]
    assert c["per_case"] == pytest.approx(25.0 * pi * (1 - tpr) + 1.0 * (1 - pi) * fpr, rel=1e-12)
    assert c["per_period"] == pytest.approx(c["per_case"] * 1200, rel=1e-12)
    assert c["unit"] == "harm points"
    w = record["metrics"]["workload"]["per_1000"]
    assert w["flagged"] == pytest.approx(1000 * dep["flag_rate"]["value"], rel=1e-12)
    assert w["true_alerts"] + w["false_alerts"] == pytest.approx(w["flagged"], rel=1e-12)
    assert w["true_alerts"] + w["missed_events"] == pytest.approx(1000 * pi, rel=1e-12)
    assert record["data"]["rows"] == 49_000 and record["data"]["events"] == 975
    assert record["data"]["sha256"] == hospital.fingerprint


def test_same_inputs_same_record_but_for_the_time(hospital, hospital_policy, record):
    again = decide(hospital, hospital_policy, n_replicates=REPS, production_decimals=4,
                   memo_fields=load_memo_fields(MEMO_FIELDS), created_utc="2025-01-01T00:00:00Z")
    assert without_timestamps(again) == without_timestamps(record)
    assert again["integrity"]["sections"]["metrics"] == record["integrity"]["sections"]["metrics"]
    assert again["integrity"]["sha256"] != record["integrity"]["sha256"]


def test_no_rows_in_the_record(record, hospital):
    """Summaries only: no list as long as the data, no identifier from the file."""
    longest = 0

    def walk(x):
        nonlocal longest
        if isinstance(x, list):
            longest = max(longest, len(x))
            for v in x:
                walk(v)
        elif isinstance(x, dict):
            for v in x.values():
                walk(v)

    walk(record)
    assert longest < 1000 < hospital.n_rows / 10
    with gzip.open(demo_path("hospital_q1"), "rt") as fh:
        ids = pd.read_csv(fh, usecols=["patient_id"], dtype=str)["patient_id"]
    text = dumps_record(record)
    sample = ids.drop_duplicates().sample(50, random_state=0)
    assert not any(f'"{pid}"' in text for pid in sample)


# --------------------------------------------------------------------------- encoding and integrity

def test_canonical_json_and_digest():
    obj = {"b": 1.5, "a": [None, "inf", 0.1], "é": "π"}
    raw = canonical_json(obj)
    assert raw == '{"a":[null,"inf",0.1],"b":1.5,"é":"π"}'.encode()
    assert digest(obj) == hashlib.sha256(raw).hexdigest()  # common practice, no source
    with pytest.raises(ValueError):
        canonical_json({"x": math.nan})
    with pytest.raises(ValueError):
        canonical_json({"x": math.inf})


def test_round_trip_keeps_every_number(record):
    text = dumps_record(record)
    back = loads_record(text)
    assert back == record
    assert dumps_record(back) == text
    json.loads(text, parse_constant=lambda c: pytest.fail(f"{c} in the record"))


def test_infinite_thresholds_are_strings(record):
    none = record["choice"]["flag_none"]
    assert none["threshold"] == "inf"
    assert none["threshold_interval"]["high"] == "inf"
    assert record["choice"]["flag_all"]["threshold_interval"]["low"] == "-inf"
    text = dumps_record(record)
    assert loads_record(text)["choice"]["flag_none"]["threshold"] == "inf"


@pytest.mark.parametrize("end", ["flag none", "flag all"])
def test_threshold_at_either_end(hospital, hospital_policy, end):
    curve = hospital.curve()
    t = math.inf if end == "flag none" else float(curve.thresholds[-1])
    rec = decide(hospital, hospital_policy, threshold=t, origin="pre-specified", n_replicates=REPS)
    if end == "flag none":
        assert rec["threshold"] == "inf"
    else:
        assert rec["threshold_interval"]["low"] == "-inf"
    assert loads_record(dumps_record(rec)) == rec


def test_edited_record_is_refused_naming_the_section(record):
    text = dumps_record(record)
    for path, value, section in ((("metrics", "validation", "recall", "value"), 0.99, "metrics"),
                                 (("memo", "author"), "someone else", "memo"),
                                 (("threshold",), 0.5, "threshold"),
                                 (("counts", "fp"), 1.0, "counts")):
        rec = json.loads(text)
        obj = rec
        for key in path[:-1]:
            obj = obj[key]
        obj[path[-1]] = value
        with pytest.raises(RecordError) as exc:
            loads_record(json.dumps(rec))
        assert exc.value.field == section
        assert f"field {section}:" in str(exc.value) and "changed" in str(exc.value)
    rec = json.loads(text)
    rec["approved_by"] = "board"
    with pytest.raises(RecordError, match="approved_by") as exc:
        loads_record(json.dumps(rec))
    assert exc.value.field == "approved_by"
    rec = json.loads(text)
    rec["integrity"]["sha256"] = "0" * 64
    with pytest.raises(RecordError) as exc:
        loads_record(json.dumps(rec))
    assert exc.value.field == "integrity.sha256"
    # resealing after an edit is possible (integrity detects edits, it does not prove approval)
    rec = json.loads(text)
    rec["memo"]["author"] = "someone else"
    assert loads_record(json.dumps(seal(rec)))["memo"]["author"] == "someone else"


def test_wrong_schema_missing_field_and_bad_types_are_named(record):
    text = dumps_record(record)
    rec = json.loads(text)
    rec["schema"] = "fulcrum.decision/2"
    with pytest.raises(RecordError, match="schema") as exc:
        loads_record(json.dumps(rec))
    assert exc.value.field == "schema" and "fulcrum.decision/1" in str(exc.value)
    for path, name in ((("data", "sha256"), "data.sha256"), (("counts",), "counts"),
                       (("metrics", "deployment", "npv"), "metrics.deployment.npv"),
                       (("integrity",), "integrity"), (("memo",), "memo")):
        rec = json.loads(text)
        obj = rec
        for key in path[:-1]:
            obj = obj[key]
        del obj[path[-1]]
        with pytest.raises(RecordError) as exc:
            loads_record(json.dumps(rec))
        assert exc.value.field == name
        assert f"field {name}: is missing" in str(exc.value)
    rec = json.loads(text)
    rec["threshold"] = "high"
    with pytest.raises(RecordError) as exc:
        loads_record(json.dumps(rec))
    assert exc.value.field == "threshold"
    rec = json.loads(text)
    rec["threshold_origin"] = "guessed"
    with pytest.raises(RecordError) as exc:
        loads_record(json.dumps(rec))
    assert exc.value.field == "threshold_origin"
    rec = json.loads(text)
    rec["memo"]["sign_off"]["date"] = "next Tuesday"
    with pytest.raises(RecordError, match="sign_off.date"):
        loads_record(json.dumps(rec))
    with pytest.raises(RecordError, match="not valid JSON"):
        loads_record(text[:-20])
    with pytest.raises(RecordError, match="NaN"):
        loads_record('{"schema": NaN}')
    with pytest.raises(RecordError, match="must be a JSON object"):
        loads_record("[1, 2]")
    with pytest.raises(RecordError, match="schema"):
        loads_record('{"threshold": 1}')
    assert isinstance(RecordError("x", "y"), InputError)


def test_restore_and_fingerprint_note(record, hospital, hospital_policy):
    rd = restore_decision(loads_record(dumps_record(record)))
    assert rd.mapping == hospital.mapping
    assert rd.policy == hospital_policy
    assert rd.threshold == record["threshold"]
    assert rd.production_decimals == 4 and rd.seed == 0 and rd.n_replicates == REPS
    assert rd.memo_fields == load_memo_fields(MEMO_FIELDS)
    assert fingerprint_note(record, hospital) is None
    q2 = load_demo("hospital_q2")
    note = fingerprint_note(record, q2)
    assert "not the data the record was made on" in note
    assert record["data"]["sha256"][:12] in note and q2.fingerprint[:12] in note


def test_supersedes(hospital, hospital_policy, record):
    a = analyse(hospital, hospital_policy, n_replicates=REPS)
    later = build_record(a, supersedes=record["integrity"]["sha256"].upper())
    assert later["supersedes"] == record["integrity"]["sha256"]
    with pytest.raises(InputError, match="supersedes"):
        build_record(a, supersedes="abc")


# --------------------------------------------------------------------------- origins and designs

def test_origins(hospital, hospital_policy, record):
    assert record["threshold_origin"] == "data-derived"
    assert record["choice"]["method"] == "recommended by the policy"
    opt = record["metrics"]["optimism"]
    assert opt["cross_fitted"]["recall"] is not None and opt["corrected"]["recall"] is not None
    pre = decide(hospital, hospital_policy, threshold=0.02, origin="pre-specified", n_replicates=REPS)
    assert pre["threshold_origin"] == "pre-specified"
    assert pre["metrics"]["optimism"]["cross_fitted"] == pre["metrics"]["optimism"]["apparent"]
    assert "pre-specified" in pre["metrics"]["optimism"]["statement"]
    hand = decide(hospital, hospital_policy, threshold=0.02, origin="data-derived", n_replicates=REPS)
    assert hand["threshold_origin"] == "data-derived"
    assert hand["choice"]["method"] == "set by the user"
    assert hand["metrics"]["optimism"]["cross_fitted"]["recall"] is None
    ref = hand["metrics"]["optimism"]["policy_rule_reference"]
    assert ref["threshold"] == record["threshold"]
    assert "by hand" in hand["cautions"]["optimism"]
    assert not any("pre-specified" in s for s in hand["analysis"]["statements"])
    # a threshold between two distinct scores is stored as the distinct score it acts as
    curve = hospital.curve()
    t_mid = float((curve.thresholds[300] + curve.thresholds[301]) / 2)
    mid = decide(hospital, hospital_policy, threshold=t_mid, origin="pre-specified", n_replicates=REPS)
    assert mid["threshold"] == float(curve.thresholds[curve.index_at(t_mid)])
    assert mid["threshold_entered"] == t_mid
    with pytest.raises(InputError, match="origin"):
        decide(hospital, hospital_policy, threshold=0.02, n_replicates=REPS)
    with pytest.raises(InputError, match="origin"):
        decide(hospital, hospital_policy, origin="pre-specified", n_replicates=REPS)


def test_case_control_design_is_recorded(hospital, hospital_policy):
    rec = decide(hospital, hospital_policy, design="case-control", n_replicates=REPS)
    assert rec["data"]["design"] == "case-control"
    assert "case-control" in rec["analysis"]["statements"][0]


def test_infeasible_policy_is_an_input_error(hospital):
    pol = Policy.from_dict({"objective": {"kind": "max_youden"},
                            "rules": {"min_recall": 0.99, "max_flag_rate": 0.01}})
    with pytest.raises(InputError, match="no threshold meets every rule"):
        decide(hospital, pol, n_replicates=REPS)


def test_breast_cancer_set(breast_cancer):
    """Wisconsin Diagnostic Breast Cancer, shipped with scikit-learn: 569 cases, 212 malignant."""
    from sklearn.metrics import confusion_matrix

    rec = decide(breast_cancer, Policy.from_dict({"objective": {"kind": "max_youden"}}),
                 n_replicates=REPS)
    assert rec["data"]["rows"] == 569 and rec["data"]["events"] == 212
    flagged = breast_cancer.y_score >= rec["threshold"]
    tn, fp, fn, tp = confusion_matrix(breast_cancer.y_true, flagged).ravel()
    assert rec["counts"] == {"tp": tp, "fp": fp, "fn": fn, "tn": tn}
    assert rec["groups"]["status"] == "not computed"
    assert rec["calibration"]["status"] == "not applicable"  # radii are not probabilities


def test_sections_of_the_groups_and_calibration(record):
    assert record["groups"]["status"] == "computed"
    sites = {r["group"] for r in record["groups"]["rows"] if r["column"] == "site"}
    assert len(sites) == 3
    assert record["fairness"]["status"] == "computed"
    assert record["fairness"]["metric"] == "recall" and record["fairness"]["verdict"] in (
        "holds", "fails", "unclear", "undefined")
    assert record["calibration"]["status"] == "computed"
    assert record["calibration"]["overall"]["brier"] == pytest.approx(
        record["reference"]["calibration"]["brier"], rel=1e-12)


# --------------------------------------------------------------------------- reference

def test_reference_bins_hold_the_class_counts(hospital, record):
    from sklearn.metrics import brier_score_loss

    ref = record["reference"]
    bins = ref["score_bins"]
    edges = [-math.inf if e == "-inf" else math.inf if e == "inf" else e for e in bins["edges"]]
    assert edges[0] == -math.inf and edges[-1] == math.inf
    assert all(a < b for a, b in zip(edges, edges[1:]))
    s, y = hospital.y_score, hospital.y_true
    for i in range(len(edges) - 1):
        inside = (s >= edges[i]) & (s < edges[i + 1])
        assert bins["events"][i] == np.count_nonzero(inside & y)
        assert bins["non_events"][i] == np.count_nonzero(inside & ~y)
        assert bins["score_sum"][i] == pytest.approx(s[inside].sum(), rel=1e-9, abs=1e-12)
    inner = np.unique(np.quantile(s, np.arange(1, 20) / 20, method="inverted_cdf"))
    assert edges[1:-1] == [float(x) for x in inner if x > s.min()]
    # reference: scikit-learn brier_score_loss
    assert ref["calibration"]["brier"] == pytest.approx(brier_score_loss(y, s), rel=1e-12)


def test_reference_of_a_weighted_count_table():
    ds = Dataset.from_count_table([0.1, 0.2, 0.3, 0.4], [1, 2, 3, 10], [100, 50, 20, 5])
    ref = reference_summary(ds, n_bins=4)
    assert sum(ref["score_bins"]["events"]) == 16 and sum(ref["score_bins"]["non_events"]) == 175
    # weighted inverted-CDF quartiles of 191 cases (101 at 0.1, 52 at 0.2, 23 at 0.3, 15 at 0.4;
    # cumulative 101, 153, 176, 191): 0.1, 0.1, 0.2 at 47.75, 95.5, 143.25 cases; the edge at the
    # lowest score is dropped (it would leave the first bin empty)
    assert ref["score_bins"]["edges"] == ["-inf", 0.2, "inf"]
    assert ref["score_bins"]["events"] == [1.0, 15.0]
    w = Dataset.from_arrays([1, 0, 0, 1], [0.9, 0.1, 0.2, 0.7], [2.0, 1.0, 1.0, 2.0],
                            weight_kind="sampling")
    r = reference_summary(w, n_bins=2)
    assert r["effective_events"] == pytest.approx(4.0 ** 2 / 8.0)
    assert r["events"] == 4.0 and r["cases"] == 6.0


# --------------------------------------------------------------------------- test vectors

def test_vectors_on_the_production_grid():
    tv = threshold_test_vectors(0.0182, production_decimals=4)
    assert [v["text"] for v in tv["vectors"]] == ["0.0180", "0.0181", "0.0182", "0.0183", "0.0184"]
    assert [v["flagged"] for v in tv["vectors"]] == [False, False, True, True, True]
    assert tv["rule"] == "flag a case when its score >= 0.0182"


def test_vectors_between_production_values():
    tv = threshold_test_vectors(0.01825, production_decimals=4)
    assert [v["text"] for v in tv["vectors"]] == ["0.0181", "0.0182", "0.0183", "0.0184"]
    assert [v["flagged"] for v in tv["vectors"]] == [False, False, True, True]
    assert "0.0183" in tv["note"]
    low = threshold_test_vectors(-16.825, higher_is_riskier=False, production_decimals=2)
    assert [v["text"] for v in low["vectors"]] == ["-16.84", "-16.83", "-16.82", "-16.81"]
    assert [v["flagged"] for v in low["vectors"]] == [True, True, False, False]
    assert "-16.83" in low["note"]


def test_vectors_without_rounding_are_adjacent_floats():
    t = 0.1 + 0.2
    tv = threshold_test_vectors(t)
    s = [v["score"] for v in tv["vectors"]]
    assert s[2] == t and s[1] == np.nextafter(t, 0) and s[3] == np.nextafter(t, 1)
    assert [v["flagged"] for v in tv["vectors"]] == [False, False, True, True, True]
    for v in tv["vectors"]:
        assert float(v["text"]) == v["score"]


def test_vectors_of_flag_none_and_bad_decimals():
    tv = threshold_test_vectors(math.inf, production_decimals=2)
    assert not any(v["flagged"] for v in tv["vectors"])
    with pytest.raises(InputError, match="production_decimals"):
        threshold_test_vectors(0.5, production_decimals=16)
    with pytest.raises(InputError, match="production_decimals"):
        threshold_test_vectors(0.5, production_decimals=1.5)


def test_vectors_rule_reproduces_the_record_counts(hospital, record):
    """Applying the vectors' rule to the validation scores, rounded to the production decimals,
    gives the record's confusion counts (the demo's scores carry 4 decimals)."""
    tv = record["test_vectors"]
    t = record["threshold"]
    for v in tv["vectors"]:
        assert v["flagged"] == (v["score"] >= t)
        assert float(v["text"]) == v["score"]
    rounded = np.round(hospital.y_score, tv["production_decimals"])
    flagged = rounded >= t
    y = hospital.y_true
    assert np.count_nonzero(flagged & y) == record["counts"]["tp"]
    assert np.count_nonzero(flagged & ~y) == record["counts"]["fp"]


def test_record_is_a_copy_safe_plain_dict(record):
    c = copy.deepcopy(record)
    assert c == record
    assert loads_record(dumps_record(c), verify=True)["integrity"] == record["integrity"]
