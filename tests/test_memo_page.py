"""The app's Memo page through AppTest: the same record as ``fulcrum pick``, and records loaded back."""

from __future__ import annotations

import json
import subprocess
from pathlib import Path

import pytest
from streamlit.testing.v1 import AppTest

from app.policy_form import POLICY_DIR
from core.dataset import Dataset
from core.decision import decide
from core.intake import demo_path, load_demo
from core.policy import Policy, load_policy
from core.record import dumps_record, loads_record, without_timestamps

ROOT = Path(__file__).resolve().parents[1]
APP = str(ROOT / "app" / "main.py")
REPS = 200  # the exact number does not matter here; the product default is 2,000
RECORD = "fulcrum_memo_record"


def memo_page() -> AppTest:
    at = AppTest.from_file(APP, default_timeout=300)
    at.run()
    at.switch_page("views/memo.py").run()
    assert not at.exception, at.exception
    at.number_input(key="memo_reps").set_value(REPS).run()
    assert not at.exception, at.exception
    return at


@pytest.fixture(scope="module")
def cli_record(tmp_path_factory):
    out = tmp_path_factory.mktemp("cli") / "r.json"
    res = subprocess.run(
        ["fulcrum", "pick", str(demo_path("hospital_q1")), "--score", "risk_score", "--label",
         "deteriorated", "--positive", "yes", "--group", "site", "age_band", "--cluster",
         "patient_id", "--score-time", "score_time", "--outcome-time", "outcome_time",
         "--outcome-horizon-days", "2", "--policy", str(POLICY_DIR / "hospital.toml"),
         "--memo-fields", str(ROOT / "sample_data" / "memo_fields" / "hospital.toml"),
         "--production-decimals", "4", "--replicates", str(REPS), "--record", str(out)],
        capture_output=True, text=True, timeout=600, cwd=ROOT)
    assert res.returncode == 0, res.stderr
    return json.loads(out.read_text(encoding="utf-8"))


def test_memo_page_record_equals_the_cli_record(cli_record):
    at = memo_page()
    at.selectbox(key="memo_sample").set_value("hospital.toml").run()
    at.checkbox(key="memo_use_decimals").check().run()
    at.number_input(key="memo_decimals").set_value(4).run()
    assert not at.exception, at.exception
    app_record = at.session_state[RECORD]
    assert app_record["memo"]["model_name"] == "Corvane early-warning score"
    assert without_timestamps(app_record) == without_timestamps(cli_record)
    # the page shows the record's numbers and offers every export
    tiles = {m.label: m.value for m in at.main.metric}
    assert tiles["Recall"] == "82.3 %"
    labels = [b.label for b in at.get("download_button")]
    for want in ("Memo (Markdown)", "Decision record (JSON)", "Test vectors (CSV)",
                 "Save the memo fields (TOML)"):
        assert want in labels
    # the PDF is built on request, for the record on the page
    assert "Memo (PDF)" not in labels
    at.button(key="memo_build_pdf").click().run()
    assert not at.exception, at.exception
    sha, pdf = at.session_state["fulcrum_memo_pdf"]
    assert sha == app_record["integrity"]["sha256"] and pdf[:5] == b"%PDF-"
    assert "Memo (PDF)" in [b.label for b in at.get("download_button")]
    # editing a field makes a new record; the old PDF is not offered for it
    at.text_input(key="memo_f_author").input("Someone Else (invented)").run()
    assert at.session_state[RECORD]["memo"]["author"] == "Someone Else (invented)"
    assert "Memo (PDF)" not in [b.label for b in at.get("download_button")]


def test_loading_a_record_restores_mapping_policy_and_point(cli_record):
    at = memo_page()
    # move away from the record's point and policy first
    at.session_state["fulcrum_point"] = 5
    at.session_state["fulcrum_policy"] = {"objective": {"kind": "max_youden"}}
    at.run()
    at.text_area(key="memo_record_text").input(json.dumps(cli_record))
    at.button(key="memo_record_paste").click().run()
    assert not at.exception, at.exception
    ds = load_demo("hospital_q1")
    assert at.session_state["fulcrum_point"] == ds.curve().index_at(cli_record["threshold"])
    assert at.session_state["fulcrum_policy"] == cli_record["policy"]["as_written"]
    assert at.session_state["memo_f_model_name"] == "Corvane early-warning score"
    assert at.session_state["memo_decimals"] == 4 and at.session_state["memo_use_decimals"]
    assert any("Same data as the record" in s.value for s in at.success)
    # rebuilt from the restored state, the record is the loaded one again (but for the time)
    assert without_timestamps(at.session_state[RECORD]) == without_timestamps(cli_record)


def test_loading_a_record_of_the_other_demo_switches_the_data():
    q2 = load_demo("hospital_q2")
    # the approved threshold, evaluated on the next quarter (the policy's rules fail there)
    rec = decide(q2, load_policy(POLICY_DIR / "hospital.toml"), threshold=0.0182,
                 origin="pre-specified", n_replicates=REPS)
    at = memo_page()
    at.text_area(key="memo_record_text").input(dumps_record(rec))
    at.button(key="memo_record_paste").click().run()
    assert not at.exception, at.exception
    assert at.session_state["fulcrum_dataset"].fingerprint == q2.fingerprint
    assert at.session_state["fulcrum_source"] == "hospital_q2"
    assert any("Same data as the record" in s.value for s in at.success)
    assert at.session_state["memo_mode"] == "current"
    assert at.session_state["memo_origin"] == "pre-specified"
    assert without_timestamps(at.session_state[RECORD]) == without_timestamps(rec)


def test_a_record_of_other_data_is_said_plainly():
    import numpy as np

    rng = np.random.default_rng(0)
    y = rng.random(400) < 0.3
    ds = Dataset.from_arrays(y, rng.random(400) + y)
    rec = decide(ds, Policy.from_dict({"objective": {"kind": "max_youden"}}), n_replicates=60)
    at = memo_page()
    at.text_area(key="memo_record_text").input(dumps_record(rec))
    at.button(key="memo_record_paste").click().run()
    assert not at.exception, at.exception
    warnings = " ".join(w.value for w in at.warning)
    assert "These are not the data the record was made on" in warnings


def test_an_edited_record_is_refused_with_the_field_named(cli_record):
    rec = json.loads(json.dumps(cli_record))
    rec["metrics"]["validation"]["recall"]["value"] = 0.99
    at = memo_page()
    before = at.session_state["fulcrum_point"]
    at.text_area(key="memo_record_text").input(json.dumps(rec))
    at.button(key="memo_record_paste").click().run()
    errors = " ".join(e.value for e in at.error)
    assert "field metrics" in errors and "changed" in errors
    assert at.session_state["fulcrum_point"] == before
    rec = json.loads(json.dumps(cli_record))
    rec["schema"] = "fulcrum.decision/9"
    at.text_area(key="memo_record_text").input(json.dumps(rec))
    at.button(key="memo_record_paste").click().run()
    assert "field schema" in " ".join(e.value for e in at.error)
    assert loads_record(json.dumps(cli_record))  # the original still loads
