"""The Compare page (and the memo's comparison section) through Streamlit's AppTest.

Every number the page shows must be what :func:`core.compare.compare_mapped`
computes for the active dataset. Data: the invented two-model example
(sample_data/model_versions.csv.gz, the page's own example) and, for an
upload, two measurements of the Wisconsin Diagnostic Breast Cancer set
shipped with scikit-learn (malignant, coded 0 there, is the event), with the
AUC difference checked against scikit-learn's ``roc_auc_score``.
"""

from __future__ import annotations

import io
import json
from pathlib import Path

import pytest
from sklearn.datasets import load_breast_cancer
from sklearn.metrics import roc_auc_score
from streamlit.testing.v1 import AppTest

from app import format as fmt
from app.comparison import EXAMPLE_FILE, EXAMPLE_MAPPING
from app.policy_form import default_policy_dict
from core.compare import compare_mapped
from core.intake import load_dataset
from core.policy import Policy

ROOT = Path(__file__).resolve().parents[1]
APP = str(ROOT / "app" / "main.py")
REPS = 200


@pytest.fixture(scope="module")
def example():
    return load_dataset(EXAMPLE_FILE, EXAMPLE_MAPPING)


def compare_page() -> AppTest:
    at = AppTest.from_file(APP, default_timeout=300)
    at.run()
    at.switch_page("views/compare.py").run()
    assert not at.exception, at.exception
    return at


def tiles(at) -> dict[str, str]:
    return {m.label: m.value for m in at.main.metric}


def test_one_score_says_how_to_map_a_second_and_offers_the_example(example):
    at = compare_page()
    text = " ".join(i.value for i in at.info)
    assert "Only one score is mapped ('risk_score')" in text
    assert "Other score columns to compare" in text and "--score" in text
    at.button(key="compare_example").click().run()
    assert not at.exception, at.exception
    ds = at.session_state["fulcrum_dataset"]
    assert ds.fingerprint == example.fingerprint
    comp = compare_mapped(example, bootstrap=False)
    pair = comp.pair("retrained_score")
    got = tiles(at)
    assert got["ROC AUC difference"] == f"{pair.roc_auc_difference.difference:+.3f}"
    assert got["Average precision difference"] == f"{pair.average_precision.difference:+.3f}"
    w = pair.at["workload"]
    assert got["Events per 1,000 flagged, same workload"] == \
        f"{w['events_per_1000_flagged'].difference:+,.1f}"
    assert got["Recall difference, same workload"] == f"{100 * w['recall'].difference:+.1f} points"
    assert got["Precision difference, same recall"] == \
        f"{100 * pair.at['recall']['precision'].difference:+.1f} points"
    d = pair.roc_auc_difference
    assert f"95 % interval {d.low:+.3f} to {d.high:+.3f} (DeLong)" in [c.value for c in at.caption]
    assert any(pair.verdict_text == i.value for i in at.info)
    # the brief's cautions and the accuracy trap
    assert any("not itself a medical device" in i.value for i in at.info)
    assert any("Accuracy misleads when events are rare" in c.value for c in at.caption)
    acc = at.dataframe[-1].value  # the accuracy table is the last one
    assert list(acc["Accuracy"]) == [fmt.pct(r["accuracy"], 2) for r in comp.accuracy_table]
    # an unset bootstrap leaves the intervals for later, said plainly
    assert "No interval yet: run the paired bootstrap below." in [c.value for c in at.caption]


def test_paired_bootstrap_on_the_button_gives_the_core_intervals(example):
    at = compare_page()
    at.button(key="compare_example").click().run()
    at.number_input(key="compare_reps").set_value(REPS).run()
    at.button(key="compare_run_boot").click().run()
    assert not at.exception, at.exception
    comp = compare_mapped(example, bootstrap=True, n_replicates=REPS, seed=0)
    ap = comp.pair("retrained_score").average_precision
    caps = [c.value for c in at.caption]
    assert f"95 % interval {ap.low:+.3f} to {ap.high:+.3f} (paired bootstrap)" in caps
    assert any(f"Intervals from {REPS:,} paired replicates" in s.value for s in at.success)
    assert any(comp.pair("retrained_score").verdict_text == i.value for i in at.info)


def _upload_two_scores(at, lower=()):
    bc = load_breast_cancer(as_frame=True)
    df = bc.frame[["mean radius", "worst concave points"]].copy()
    df["minus radius"] = -df["mean radius"]
    df["diagnosis"] = ["malignant" if t == 0 else "benign" for t in bc.target]
    buf = io.StringIO()
    df.to_csv(buf, index=False)
    at.switch_page("views/scores.py").run()
    at.radio(key="scores_source").set_value("upload").run()
    at.file_uploader(key="scores_upload").set_value(("wdbc.csv", buf.getvalue().encode(),
                                                     "text/csv")).run()
    at.selectbox(key="map_score").set_value("mean radius").run()
    at.selectbox(key="map_label").set_value("diagnosis").run()
    at.selectbox(key="map_positive").set_value("malignant").run()
    return df, (bc.target == 0).to_numpy()


def test_scores_page_maps_extra_scores_and_their_direction():
    at = compare_page()
    df, y = _upload_two_scores(at)
    at.multiselect(key="map_extra_scores").set_value(["worst concave points", "minus radius"]).run()
    at.button(key="map_apply").click().run()
    assert not at.exception and not at.error, [e.value for e in at.error]
    ds = at.session_state["fulcrum_dataset"]
    assert ds.mapping.extra_scores == ("worst concave points", "minus radius")
    assert any("also mapped for the Compare page" in c.value for c in at.caption)
    # the negation declared higher-is-riskier is refused with the fix named
    at.switch_page("views/compare.py").run()
    assert not at.exception
    err = " ".join(e.value for e in at.error)
    assert "minus radius" in err and "below 0.5" in err and "negation of 'mean radius'" in err
    # with its direction mapped, the page compares and says they are one model
    _upload_two_scores(at)  # the upload widget is cleared when its page is left: upload again
    at.multiselect(key="map_extra_scores").set_value(["worst concave points", "minus radius"]).run()
    at.multiselect(key="map_extra_lower").set_value(["minus radius"]).run()
    at.button(key="map_apply").click().run()
    assert not at.exception and not at.error
    at.switch_page("views/compare.py").run()
    assert not at.exception and not at.error
    assert any("one model, not two" in w.value for w in at.warning)
    # reference: scikit-learn's roc_auc_score of each measurement
    want = roc_auc_score(y, df["worst concave points"]) - roc_auc_score(y, df["mean radius"])
    assert tiles(at)["ROC AUC difference"] == f"{want:+.3f}"
    at.selectbox(key="compare_candidate").set_value("minus radius").run()
    assert tiles(at)["ROC AUC difference"] in ("+0.000", "-0.000")


def test_extra_score_clash_gets_the_intake_message():
    at = compare_page()
    _upload_two_scores(at)
    at.multiselect(key="map_extra_scores").set_value(["mean radius"]).run()
    at.button(key="map_apply").click().run()
    assert not at.exception
    assert any("is the score (the reference model)" in e.value for e in at.error)


def test_memo_page_adds_the_comparison_section(example):
    at = compare_page()
    at.button(key="compare_example").click().run()
    at.switch_page("views/memo.py").run()
    at.number_input(key="memo_reps").set_value(REPS).run()
    assert not at.exception, at.exception
    record = at.session_state["fulcrum_memo_record"]
    policy = Policy.from_dict(default_policy_dict(example))
    want = compare_mapped(example, policy=policy, seed=0, n_replicates=REPS).to_dict()
    assert record["comparison"] == json.loads(json.dumps(want))
    assert "comparison" in record["integrity"]["sections"]


def test_given_thresholds_show_the_accuracy_trap(example):
    at = compare_page()
    at.button(key="compare_example").click().run()
    at.checkbox(key="compare_use_thresholds").check().run()
    at.number_input(key="compare_t_current_score").set_value(0.05).run()
    at.number_input(key="compare_t_retrained_score").set_value(0.05).run()
    assert not at.exception, at.exception
    t = {"current_score": 0.05, "retrained_score": 0.05}
    comp = compare_mapped(example, bootstrap=False, thresholds=t)
    assert comp.own_points == "thresholds"
    pair = comp.pair("retrained_score")
    assert pair.accuracy_trap and pair.accuracy_trap_text in [w.value for w in at.warning]
    acc = at.dataframe[-1].value
    assert list(acc["Accuracy"]) == [fmt.pct(r["accuracy"], 2) for r in comp.accuracy_table]
    assert list(acc["Recall"]) == [fmt.pct(r["recall"]) for r in comp.accuracy_table]
    # by hand with numpy (common practice, no source): accuracy and recall at score >= 0.05
    for name, row in zip(("current_score", "retrained_score"), comp.accuracy_table):
        s = example.y_score if name == "current_score" else example.extra_scores[name]
        flags = s >= 0.05
        assert row["accuracy"] == pytest.approx((flags == example.y_true).mean(), abs=1e-15)
        assert row["recall"] == pytest.approx(flags[example.y_true].mean(), abs=1e-15)


def test_exports_the_comparison_document_and_the_memo():
    at = compare_page()
    at.button(key="compare_example").click().run()
    labels = [b.label for b in at.get("download_button")]
    assert "Comparison (JSON)" in labels and "Comparison memo (Markdown)" in labels
    assert "Comparison memo (PDF)" not in labels
    at.button(key="compare_build_pdf").click().run()
    assert not at.exception, at.exception
    _, pdf = at.session_state["compare_pdf"]
    assert pdf[:5] == b"%PDF-"
    assert "Comparison memo (PDF)" in [b.label for b in at.get("download_button")]
