"""``fulcrum recheck`` as a subprocess: pick on the first demo quarter, recheck on the second."""

from __future__ import annotations

import json
import subprocess
import sys
from pathlib import Path

import pytest

from app.policy_form import POLICY_DIR
from core.cli import build_parser
from core.intake import demo_path
from core.recheck import build_recheck_record, load_recheck, recheck, recheck_without_timestamps
from core.recheck_memo import recheck_markdown
from core.record import load_record

REPS = "200"  # the exact number does not matter here; the product default is 2,000
ROOT = Path(__file__).resolve().parents[1]
AS_OF = "2025-09-30"
PICK = [str(demo_path("hospital_q1")), "--score", "risk_score", "--label", "deteriorated",
        "--positive", "yes", "--group", "site", "age_band", "--cluster", "patient_id",
        "--score-time", "score_time", "--outcome-time", "outcome_time",
        "--outcome-horizon-days", "2", "--policy", str(POLICY_DIR / "hospital.toml"),
        "--production-decimals", "4", "--memo-fields",
        str(ROOT / "sample_data" / "memo_fields" / "hospital.toml"), "--replicates", REPS]


def run(args):
    return subprocess.run(["fulcrum"] + list(args), capture_output=True, text=True, timeout=600,
                          cwd=ROOT, check=False)


@pytest.fixture(scope="module")
def decision(tmp_path_factory):
    out = tmp_path_factory.mktemp("recheck")
    res = run(["pick", *PICK, "--record", str(out / "decision.json")])
    assert res.returncode == 0, res.stderr
    return out


@pytest.fixture(scope="module")
def q2_run(decision):
    out = decision
    res = run(["recheck", str(demo_path("hospital_q2")), "--record", str(out / "decision.json"),
               "--as-of", AS_OF, "--out", str(out / "recheck.json"), "--memo",
               str(out / "recheck.pdf"), "--markdown", str(out / "recheck.md")])
    return res, out


def test_q2_recheck_fails_at_wendlecombe(q2_run):
    res, out = q2_run
    assert res.returncode == 1, res.stderr
    assert res.stderr == ""
    first = res.stdout.splitlines()[0]
    assert first.startswith("Recheck: ") and "recall at site Wendlecombe fails" in first
    assert "As of 2025-09-30 00:00" in res.stdout
    rec = load_recheck(out / "recheck.json")
    decision = load_record(out / "decision.json")
    assert rec["decision_record"]["sha256"] == decision["integrity"]["sha256"]
    g = {(x["column"], x["group"]): x for x in rec["groups"]["compared"]}
    wend = {v["name"]: v for v in g[("site", "Wendlecombe")]["verdicts"]}
    assert wend["min_recall"]["verdict"] == "fails"
    assert (out / "recheck.pdf").read_bytes()[:5] == b"%PDF-"
    md = (out / "recheck.md").read_text(encoding="utf-8")
    assert md == recheck_markdown(rec)
    assert rec["integrity"]["sha256"] in md and "not itself a medical device" in md


def test_cli_and_app_code_path_give_the_same_recheck_record(q2_run):
    # the app's Recheck page calls recheck() then build_recheck_record() on the loaded record
    _, out = q2_run
    cli = load_recheck(out / "recheck.json")
    decision = load_record(out / "decision.json")
    core = build_recheck_record(recheck(decision, demo_path("hospital_q2"), as_of=AS_OF,
                                        n_replicates=int(REPS), seed=0))
    assert recheck_without_timestamps(core) == recheck_without_timestamps(cli)


def test_recheck_on_its_own_data_exits_by_its_verdicts(decision):
    # the approval data themselves: the overall recall rule holds again
    res = run(["recheck", str(demo_path("hospital_q1")), "--record",
               str(decision / "decision.json"), "--as-of", AS_OF,
               "--out", str(decision / "same.json")])
    rec = json.loads((decision / "same.json").read_text(encoding="utf-8"))
    rules = {v["name"]: v["verdict"] for v in rec["rules"]}
    assert rules == {"min_recall": "holds", "max_flagged_per_period": "holds"}
    assert res.returncode == (0 if rec["overall_verdict"] == "holds" else 1)


def test_bad_input_and_edited_record_exit_2(decision, tmp_path):
    res = run(["recheck", str(demo_path("hospital_q2")), "--record",
               str(decision / "decision.json"), "--score", "no_such_column", "--as-of", AS_OF])
    assert res.returncode == 2 and "no_such_column" in res.stderr
    assert len(res.stderr.strip().splitlines()) == 1
    rec = json.loads((decision / "decision.json").read_text(encoding="utf-8"))
    rec["threshold"] = 0.5
    bad = tmp_path / "edited.json"
    bad.write_text(json.dumps(rec), encoding="utf-8")
    res = run(["recheck", str(demo_path("hospital_q2")), "--record", str(bad), "--as-of", AS_OF])
    assert res.returncode == 2 and "threshold" in res.stderr and "refused" in res.stderr


def test_parser_registers_recheck():
    args = build_parser().parse_args(["recheck", "new.csv", "--record", "d.json", "--live",
                                      "--as-of", "2025-01-01"])
    assert args.live and args.as_of == "2025-01-01" and args.func.__name__ == "run_recheck"


def test_module_entry_point(decision):
    res = subprocess.run([sys.executable, "-m", "core", "recheck", "--help"], capture_output=True,
                         text=True, timeout=120, cwd=ROOT, check=False)
    assert res.returncode == 0 and "--as-of" in res.stdout and "--live" in res.stdout


def test_recheck_page_gives_the_cli_recheck_record(q2_run):
    # the app's Recheck page on the record of `fulcrum pick` and the demo's second quarter
    import datetime as dt

    from streamlit.testing.v1 import AppTest

    _, out = q2_run
    cli = load_recheck(out / "recheck.json")
    at = AppTest.from_file(str(ROOT / "app" / "main.py"), default_timeout=300)
    at.session_state["fulcrum_memo_record"] = load_record(out / "decision.json")
    at.run()
    at.switch_page("views/recheck.py").run()
    assert not at.exception, at.exception
    at.date_input(key="recheck_as_of").set_value(dt.date(2025, 9, 30)).run()
    at.number_input(key="recheck_reps").set_value(int(REPS)).run()
    assert not at.exception, at.exception
    page = at.session_state["fulcrum_recheck_record"]
    assert recheck_without_timestamps(page) == recheck_without_timestamps(cli)
    shown = " ".join(e.value for e in at.error)
    assert "recall at site Wendlecombe fails" in shown
    assert any("not itself a medical device" in i.value for i in at.info)
    # a rerun keeps the record's time (no new record for the same inputs)
    at.run()
    assert at.session_state["fulcrum_recheck_record"] == page


def test_policy_option_changes_only_the_choice_now(q2_run, tmp_path):
    # --policy FILE: what would be chosen now under a changed capacity; verdicts unchanged
    _, out = q2_run
    text = (POLICY_DIR / "hospital.toml").read_text(encoding="utf-8").replace(
        "max_flagged_per_period = 320", "max_flagged_per_period = 400")
    assert "max_flagged_per_period = 400" in text
    pol = tmp_path / "wider.toml"
    pol.write_text(text, encoding="utf-8")
    res = run(["recheck", str(demo_path("hospital_q2")), "--record", str(out / "decision.json"),
               "--as-of", AS_OF, "--policy", str(pol), "--out", str(tmp_path / "changed.json")])
    assert res.returncode == 1, res.stderr  # the approved rules still fail as before
    rec = load_recheck(tmp_path / "changed.json")
    base = load_recheck(out / "recheck.json")
    assert rec["rules"] == base["rules"] and rec["summary"] == base["summary"]
    now = rec["policy_now"]
    assert now["policy_source"] == "changed"
    assert now["changes"] == [{"key": "rules.max_flagged_per_period", "old": 320.0, "new": 400.0,
                               "source": "file"}]
    assert now["chosen_now"] is not None and base["policy_now"]["chosen_now"] is None
    assert "Changed policy now (rules.max_flagged_per_period 320 -> 400)" in res.stdout
    assert "judged against the decision record's policy" in res.stdout
    assert "Flagged per day, approved threshold, new data" in res.stdout


def test_bad_policy_file_exits_2(decision, tmp_path):
    bad = tmp_path / "bad.toml"
    bad.write_text("[rules]\nmin_recall = 1.5\n", encoding="utf-8")
    res = run(["recheck", str(demo_path("hospital_q2")), "--record",
               str(decision / "decision.json"), "--as-of", AS_OF, "--policy", str(bad)])
    assert res.returncode == 2 and "min_recall" in res.stderr and "bad.toml" in res.stderr
    assert len(res.stderr.strip().splitlines()) == 1


def test_recheck_page_policy_editor_reruns_only_the_choice_now(q2_run):
    # the page's policy editor starts from the record's resolved policy; a wider capacity gives
    # the same record as `fulcrum recheck --policy` would: verdicts unchanged, a choice now
    import datetime as dt

    from streamlit.testing.v1 import AppTest

    from core.policy import Policy
    from core.recheck import rechoose, record_policy

    _, out = q2_run
    decision = load_record(out / "decision.json")
    at = AppTest.from_file(str(ROOT / "app" / "main.py"), default_timeout=300)
    at.session_state["fulcrum_memo_record"] = decision
    at.run()
    at.switch_page("views/recheck.py").run()
    at.date_input(key="recheck_as_of").set_value(dt.date(2025, 9, 30)).run()
    at.number_input(key="recheck_reps").set_value(int(REPS)).run()
    assert not at.exception, at.exception
    before = at.session_state["fulcrum_recheck_record"]
    assert before["policy_now"]["policy_source"] == "record"
    # pre-filled with the record's resolved policy
    assert at.number_input(key="recheck_policy_cap").value == 320.0
    assert at.number_input(key="recheck_policy_prev").value == 0.02
    at.number_input(key="recheck_policy_cap").set_value(400.0).run()
    assert not at.exception, at.exception
    after = at.session_state["fulcrum_recheck_record"]
    assert after["rules"] == before["rules"] and after["summary"] == before["summary"]
    assert after["policy_now"]["changes"] == [{"key": "rules.max_flagged_per_period",
                                               "old": 320.0, "new": 400.0, "source": "file"}]
    d = record_policy(decision).to_dict()
    d["rules"]["max_flagged_per_period"] = 400.0
    base = recheck(decision, demo_path("hospital_q2"), as_of=AS_OF, n_replicates=int(REPS))
    assert after["policy_now"] == build_recheck_record(rechoose(base, Policy.from_dict(d)))["policy_now"]
    shown = " ".join(w.value for w in at.warning).replace("\\", "")  # Markdown escapes off
    assert "judged against the decision record's policy" in shown
    assert "rules.max_flagged_per_period 320 -> 400" in shown
    # the Decide page's own policy is untouched
    assert "fulcrum_policy" not in at.session_state or at.session_state["fulcrum_policy"] is None
