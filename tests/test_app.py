"""The app's pages through Streamlit's AppTest: every number shown equals what core computes."""

from __future__ import annotations

import io
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from streamlit.testing.v1 import AppTest

from app import format as fmt
from app.policy_form import POLICY_DIR
from core import choose, loads_policy
from core.intake import load_demo

ROOT = Path(__file__).resolve().parents[1]
APP = str(ROOT / "app" / "main.py")


@pytest.fixture(scope="module")
def demo():
    return load_demo("hospital_q1")


def fresh() -> AppTest:
    at = AppTest.from_file(APP, default_timeout=120)
    at.run()
    assert not at.exception, at.exception
    return at


def tiles(at) -> dict[str, str]:
    return {m.label: m.value for m in at.main.metric}


def expected_tiles(point) -> dict[str, str]:
    m = point.metrics
    return {"Precision": fmt.pct(m["precision"]), "Recall": fmt.pct(m["recall"]),
            "Specificity": fmt.pct(m["specificity"]), "Flagged per 1,000": fmt.num(m["flagged_per_1000"], 1),
            "Flags per event": fmt.num(m["nne"], 1)}


def test_opens_on_the_demo_with_no_upload(demo):
    at = fresh()
    side = {m.label: m.value for m in at.sidebar.metric}
    assert side["Cases"] == fmt.count(demo.n_rows)
    assert side["Events"] == fmt.count(demo.n_events)
    assert side["Prevalence"] == fmt.pct(demo.prevalence, 2)
    assert at.title[0].value == "Scores"
    assert any("not a medical device" in c.value for c in at.caption)
    assert any(demo.fingerprint in c.value for c in at.caption)


def test_slider_and_entry_move_the_tiles_to_core_values(demo):
    at = fresh()
    at.switch_page("views/tradeoffs.py").run()
    assert not at.exception
    curve = demo.curve()
    slider = at.slider(key="tradeoffs_slider")
    for k in (1, 57, curve.n_points // 2, curve.n_points - 1):
        slider.set_value(k).run()
        assert not at.exception
        got = tiles(at)
        for label, value in expected_tiles(curve.point(k)).items():
            assert got[label] == value, (k, label)
        assert at.session_state["fulcrum_point"] == k
    # an exact number in score units, between two distinct scores
    t = float((curve.thresholds[300] + curve.thresholds[301]) / 2)
    at.number_input(key="tradeoffs_threshold").set_value(t).run()
    k = curve.index_at(t)
    assert at.session_state["fulcrum_point"] == k == 300
    got = tiles(at)
    for label, value in expected_tiles(curve.at(t)).items():
        assert got[label] == value
    # the accuracy trap is shown beside the point
    assert got["Accuracy of flagging none"] == fmt.pct(curve.point(0).metrics["accuracy"])


def test_point_survives_page_switches(demo):
    at = fresh()
    at.switch_page("views/tradeoffs.py").run()
    at.slider(key="tradeoffs_slider").set_value(123).run()
    at.switch_page("views/scores.py").run()
    at.switch_page("views/decide.py").run()
    at.switch_page("views/tradeoffs.py").run()
    assert at.slider(key="tradeoffs_slider").value == 123
    assert tiles(at)["Recall"] == fmt.pct(demo.curve().point(123).metrics["recall"])


def test_decide_button_moves_the_point_to_the_recommended_threshold(demo):
    at = fresh()
    at.switch_page("views/decide.py").run()
    assert not at.exception
    assert not at.error, [e.value for e in at.error]
    policy = loads_policy((POLICY_DIR / "hospital.toml").read_text())
    choice = choose(demo, policy)
    assert choice.point is not None
    assert any(f"Threshold {fmt.threshold(choice.point.threshold)}" in m.value for m in at.markdown)
    at.button(key="decide_move").click().run()
    assert at.session_state["fulcrum_point"] == choice.point.index
    at.switch_page("views/tradeoffs.py").run()
    assert tiles(at)["Recall"] == fmt.pct(demo.curve().point(choice.point.index).metrics["recall"])
    # the full cautions are on Decide
    at.switch_page("views/decide.py").run()
    assert any("licensed clinician" in i.value for i in at.info)


def test_editing_a_rule_changes_the_recommendation(demo):
    at = fresh()
    at.switch_page("views/decide.py").run()
    at.number_input(key="policy_min_recall").set_value(0.9).run()
    assert not at.exception
    policy = loads_policy((POLICY_DIR / "hospital.toml").read_text())
    from core.policy import Rules

    r = policy.rules
    stricter = policy.replace(rules=Rules(min_recall=0.9, max_flagged_per_period=r.max_flagged_per_period,
                                          capacity_quantile=r.capacity_quantile, confidence=r.confidence))
    choice = choose(demo, stricter)
    if choice.point is None:  # recall 0.90 and the capacity cannot both hold: said, no point given
        assert any("No point meets every rule" in e.value for e in at.error)
        assert not any(m.value.startswith("### Threshold") for m in at.markdown)
    else:
        assert any(f"Threshold {fmt.threshold(choice.point.threshold)}" in m.value for m in at.markdown)


def _upload(at, name: str, data: bytes):
    at.radio(key="scores_source").set_value("upload").run()
    at.file_uploader(key="scores_upload").set_value((name, data, "text/csv")).run()
    return at


def test_bad_upload_shows_the_intake_message_and_no_exception():
    at = fresh()
    _upload(at, "bad.csv", b"score,outcome\n0.1,0\nabc,1\n0.3,0\n,1\n")
    assert not at.exception
    at.selectbox(key="map_score").set_value("score").run()
    at.selectbox(key="map_label").set_value("outcome").run()
    at.button(key="map_apply").click().run()
    assert not at.exception
    errors = [e.value for e in at.error]
    assert errors and "score" in errors[0] and "row" in errors[0], errors
    # the demo stays active: nothing the user had is lost
    assert at.session_state["fulcrum_dataset_label"].startswith("Corvane")


def test_good_upload_becomes_the_active_dataset():
    rng = np.random.default_rng(4)
    n = 3000
    y = rng.random(n) < 0.05
    df = pd.DataFrame({"risk": np.round(rng.normal(y * 1.0, 1.0), 3), "event": np.where(y, "yes", "no")})
    buf = io.StringIO()
    df.to_csv(buf, index=False)
    at = fresh()
    _upload(at, "mine.csv", buf.getvalue().encode())
    at.selectbox(key="map_score").set_value("risk").run()
    at.selectbox(key="map_label").set_value("event").run()
    at.selectbox(key="map_positive").set_value("yes").run()
    # before the mapping is applied the summary says it is still of the demo
    heads = [h.value for h in at.subheader]
    assert any(h.startswith("Summary of the data still in use") for h in heads), heads
    assert any("not in use yet" in i.value for i in at.info)
    at.button(key="map_apply").click().run()
    assert not at.exception and not at.error
    heads = [h.value for h in at.subheader]
    assert "Summary: mine.csv" in heads and not any("still in use" in h for h in heads), heads
    assert not any("not in use yet" in i.value for i in at.info)
    side = {m.label: m.value for m in at.sidebar.metric}
    assert side["Cases"] == "3,000" and side["Events"] == fmt.count(int(y.sum()))
    at.switch_page("views/tradeoffs.py").run()
    assert not at.exception


def test_invoice_demo_with_case_costs_through_every_page():
    at = fresh()
    at.radio(key="scores_source").set_value("invoices").run()
    assert not at.exception
    inv = load_demo("invoices")
    side = {m.label: m.value for m in at.sidebar.metric}
    assert side["Cases"] == fmt.count(inv.n_rows) and side["Events"] == fmt.count(inv.n_events)
    at.switch_page("views/tradeoffs.py").run()
    assert not at.exception
    at.switch_page("views/decide.py").run()
    assert not at.exception and not at.error, [e.value for e in at.error]
    policy = loads_policy((POLICY_DIR / "invoices.toml").read_text())
    assert policy.costs.false_negative_column == "invoice_amount"
    choice = choose(inv, policy)
    assert any(f"Threshold {fmt.threshold(choice.point.threshold)}" in m.value for m in at.markdown)


def test_evidence_page_shows_core_intervals(demo):
    from core import evidence

    at = fresh()
    at.switch_page("views/evidence.py").run()
    assert not at.exception and not at.error, [e.value for e in at.error]
    policy = loads_policy((POLICY_DIR / "hospital.toml").read_text())
    ev = evidence(demo, policy, n_replicates=2000, seed=0)
    table = at.dataframe[0].value
    rec = next(i for i in ev.analytic if i.metric == "recall")
    row = table[(table["Metric"] == rec.label) & (table["Judged at"] == "validation")].iloc[0]
    assert row["Estimate"] == fmt.pct(rec.estimate)
    assert row["95% interval"] == f"{fmt.pct(rec.low)} to {fmt.pct(rec.high)}"
    boot = next(i for i in ev.bootstrap if i.metric == "recall" and i.basis == "validation")
    assert row["Bootstrap interval"] == f"{fmt.pct(boot.low)} to {fmt.pct(boot.high)}"
    same = next(m for m in at.main.metric if m.label == "Same point")
    assert same.value == fmt.pct(ev.stability.to_dict()["share_same_point"])


def test_count_table_upload_gives_the_row_level_curve():
    rng = np.random.default_rng(9)
    n = 20_000
    y = rng.random(n) < 0.03
    s = np.round(rng.normal(y * 1.0, 1.0), 2)
    df = pd.DataFrame({"s": s, "y": y.astype(int)})
    tab = df.groupby("s").agg(ev=("y", "sum"), tot=("y", "size")).reset_index()
    tab["nonev"] = tab["tot"] - tab["ev"]
    buf = io.StringIO()
    tab[["s", "ev", "nonev"]].sample(frac=1.0, random_state=2).to_csv(buf, index=False)
    at = fresh()
    _upload(at, "counts.csv", buf.getvalue().encode())
    at.radio(key="map_kind").set_value("counts").run()
    at.selectbox(key="map_score").set_value("s").run()
    at.selectbox(key="map_events").set_value("ev").run()
    at.selectbox(key="map_non_events").set_value("nonev").run()
    at.button(key="map_apply").click().run()
    assert not at.exception and not at.error, [e.value for e in at.error]
    ds = at.session_state["fulcrum_dataset"]
    assert ds.kind == "counts"
    from core import sweep

    rows = sweep(y, s)
    np.testing.assert_array_equal(ds.curve().tp, rows.tp)
    np.testing.assert_array_equal(ds.curve().fp, rows.fp)
    at.switch_page("views/tradeoffs.py").run()
    assert not at.exception
    at.switch_page("views/decide.py").run()
    assert not at.exception
