"""``fulcrum pick``: the command line on the demos and the breast cancer set, as a subprocess."""

from __future__ import annotations

import subprocess
import sys
from pathlib import Path

import pandas as pd
import pytest

from app.policy_form import POLICY_DIR
from core.cli import build_parser, main
from core.decision import decide
from core.errors import InputError
from core.intake import demo_path, load_dataset, load_demo
from core.memo_fields import load_memo_fields
from core.policy import load_policy
from core.record import load_record, without_timestamps

REPS = "200"  # the exact number does not matter here; the product default is 2,000
ROOT = Path(__file__).resolve().parents[1]
MEMO_FIELDS = ROOT / "sample_data" / "memo_fields" / "hospital.toml"
HOSPITAL = [str(demo_path("hospital_q1")), "--score", "risk_score", "--label", "deteriorated",
            "--positive", "yes", "--group", "site", "age_band", "--cluster", "patient_id",
            "--score-time", "score_time", "--outcome-time", "outcome_time",
            "--outcome-horizon-days", "2", "--policy", str(POLICY_DIR / "hospital.toml"),
            "--production-decimals", "4", "--memo-fields", str(MEMO_FIELDS), "--replicates", REPS]


def run(args, *, module=False):
    cmd = [sys.executable, "-m", "core"] if module else ["fulcrum"]
    return subprocess.run(cmd + list(args), capture_output=True, text=True, timeout=600, cwd=ROOT)


@pytest.fixture(scope="module")
def hospital_run(tmp_path_factory):
    out = tmp_path_factory.mktemp("pick")
    res = run(["pick", *HOSPITAL, "--record", str(out / "r.json"), "--memo", str(out / "m.pdf"),
               "--markdown", str(out / "m.md")])
    return res, out


def test_hospital_demo(hospital_run):
    res, out = hospital_run
    assert res.returncode == 0, res.stderr
    rec = load_record(out / "r.json")
    assert rec["threshold"] == 0.0182 and rec["threshold_origin"] == "data-derived"
    assert (out / "m.pdf").read_bytes()[:5] == b"%PDF-"
    assert rec["integrity"]["sha256"] in (out / "m.md").read_text(encoding="utf-8")
    lines = res.stdout.splitlines()
    assert len(lines) <= 30  # one screen
    text = res.stdout
    assert "Threshold: flag when risk_score >= 0.0182" in text
    assert f"Record sha256 {rec['integrity']['sha256']}" in text
    assert "not a medical device" in text
    assert res.stderr == ""  # progress only goes to a terminal


def test_cli_and_core_give_the_same_record(hospital_run):
    res, out = hospital_run
    cli = load_record(out / "r.json")
    core_rec = decide(load_demo("hospital_q1"), load_policy(POLICY_DIR / "hospital.toml"),
                      n_replicates=int(REPS), production_decimals=4,
                      memo_fields=load_memo_fields(MEMO_FIELDS))
    assert without_timestamps(cli) == without_timestamps(core_rec)


def test_python_m_core_and_main_are_the_same(tmp_path, hospital_run):
    _, out = hospital_run
    res = run(["pick", *HOSPITAL, "--record", str(tmp_path / "m.json")], module=True)
    assert res.returncode == 0, res.stderr
    assert without_timestamps(load_record(tmp_path / "m.json")) == \
        without_timestamps(load_record(out / "r.json"))
    assert main(["pick", *HOSPITAL, "--record", str(tmp_path / "in.json")]) == 0
    assert without_timestamps(load_record(tmp_path / "in.json")) == \
        without_timestamps(load_record(out / "r.json"))


def test_invoice_demo(tmp_path):
    res = run(["pick", str(demo_path("invoices")), "--score", "fraud_score", "--label", "is_fraud",
               "--positive", "1", "--group", "customer_segment", "--score-time", "invoice_date",
               "--case-cost", "invoice_amount", "--policy", str(POLICY_DIR / "invoices.toml"),
               "--replicates", REPS, "--record", str(tmp_path / "r.json"),
               "--memo", str(tmp_path / "m.pdf")])
    assert res.returncode == 0, res.stderr
    rec = load_record(tmp_path / "r.json")
    assert rec["metrics"]["expected_cost"]["unit"] == "credits"
    assert rec["data"]["case_cost_column"] == "invoice_amount"
    assert rec["metrics"]["expected_cost"]["missed_event_cost"] > 0
    assert "credits" in res.stdout


def test_breast_cancer_set(tmp_path):
    """Wisconsin Diagnostic Breast Cancer (scikit-learn): 569 cases, 212 malignant (coded 0)."""
    from sklearn.datasets import load_breast_cancer

    bc = load_breast_cancer(as_frame=True)
    df = pd.DataFrame({"worst_radius": bc.frame["worst radius"],
                       "diagnosis": bc.frame["target"].map({0: "malignant", 1: "benign"})})
    path = tmp_path / "wdbc.csv"
    df.to_csv(path, index=False)
    res = run(["pick", str(path), "--score", "worst_radius", "--label", "diagnosis", "--positive",
               "malignant", "--replicates", REPS, "--record", str(tmp_path / "r.json"),
               "--markdown", str(tmp_path / "m.md")])
    assert res.returncode == 0, res.stderr
    rec = load_record(tmp_path / "r.json")
    assert rec["data"]["rows"] == 569 and rec["data"]["events"] == 212
    assert rec["policy"]["as_written"] == {"objective": {"kind": "max_youden"}}
    # Youden's J: the best sensitivity + specificity - 1 over the distinct scores (Youden 1950),
    # computed here by brute force with scikit-learn's roc_curve (reference library)
    from sklearn.metrics import roc_curve

    fpr, tpr, th = roc_curve(df["diagnosis"] == "malignant", df["worst_radius"])
    j = tpr - fpr
    best = th[j >= j.max() - 1e-12]
    assert rec["threshold"] == float(best.max())  # ties go to the stricter threshold
    # 0/1 labels need no --positive
    df01 = pd.DataFrame({"s": df["worst_radius"], "y": (df["diagnosis"] == "malignant").astype(int)})
    df01.to_csv(tmp_path / "w01.csv", index=False)
    res = run(["pick", str(tmp_path / "w01.csv"), "--score", "s", "--label", "y",
               "--replicates", REPS, "--record", str(tmp_path / "r01.json")])
    assert res.returncode == 0, res.stderr
    assert load_record(tmp_path / "r01.json")["threshold"] == rec["threshold"]


def test_pre_specified_threshold(tmp_path):
    res = run(["pick", *HOSPITAL, "--threshold", "0.02", "--origin", "pre-specified",
               "--record", str(tmp_path / "r.json")])
    assert res.returncode == 0, res.stderr
    rec = load_record(tmp_path / "r.json")
    assert rec["threshold"] == 0.02 and rec["threshold_origin"] == "pre-specified"
    assert "set by the user" in res.stdout


def _one_line_error(res):
    assert res.returncode == 2
    assert "Traceback" not in res.stderr
    lines = res.stderr.strip().splitlines()
    assert len(lines) == 1, res.stderr
    return lines[0]


def test_bad_input_is_one_line_and_the_apps_message(tmp_path):
    bad = list(HOSPITAL)
    bad[bad.index("risk_score")] = "risk"
    line = _one_line_error(run(["pick", *bad]))
    # the same message the app shows for the same mapping (core's InputError text)
    from core.intake import DEMOS

    m = DEMOS["hospital_q1"].mapping
    from dataclasses import replace

    with pytest.raises(InputError) as exc:
        load_dataset(demo_path("hospital_q1"), replace(m, score="risk"))
    assert line == f"fulcrum: {exc.value}"
    assert "risk" in line


@pytest.mark.parametrize("extra, words", [
    (["--threshold", "0.02"], "--origin"),
    (["--origin", "pre-specified"], "--origin"),
    (["--replicates", "3"], "n_replicates"),
    (["--production-decimals", "20"], "production_decimals"),
    (["--weight", "risk_score"], "--weight-kind"),
    (["--supersedes", "abc"], "supersedes"),
    (["--record", "/nonexistent-folder/r.json"], "--record"),
])
def test_bad_options_exit_2(extra, words):
    line = _one_line_error(run(["pick", *HOSPITAL, *extra]))
    assert words in line


def test_bad_files_exit_2(tmp_path):
    bad_policy = tmp_path / "p.toml"
    bad_policy.write_text('[objective]\nkind = "max_happiness"\n', encoding="utf-8")
    args = [a if a != str(POLICY_DIR / "hospital.toml") else str(bad_policy) for a in HOSPITAL]
    assert "objective.kind" in _one_line_error(run(["pick", *args]))
    bad_fields = tmp_path / "f.toml"
    bad_fields.write_text('author = "x"\nnickname = "y"\n', encoding="utf-8")
    args = [a if a != str(MEMO_FIELDS) else str(bad_fields) for a in HOSPITAL]
    assert "nickname" in _one_line_error(run(["pick", *args]))
    line = _one_line_error(run(["pick", str(tmp_path / "missing.csv"), "--score", "s",
                                "--label", "y"]))
    assert "missing.csv" in line
    infeasible = tmp_path / "strict.toml"
    infeasible.write_text('[objective]\nkind = "max_youden"\n[rules]\nmin_recall = 0.999\n'
                          'max_flag_rate = 0.01\n', encoding="utf-8")
    args = [a if a != str(POLICY_DIR / "hospital.toml") else str(infeasible) for a in HOSPITAL]
    assert "no threshold meets every rule" in _one_line_error(run(["pick", *args]))


def test_help_documents_every_option():
    parser = build_parser()
    sub = next(a for a in parser._actions if a.__class__.__name__ == "_SubParsersAction")
    pick = sub.choices["pick"]
    text = pick.format_help()
    for action in pick._actions:
        for opt in action.option_strings:
            assert opt in text
        if action.option_strings and action.dest != "help":
            assert action.help, action.dest
    for opt in ("--score", "--label", "--positive", "--sheet", "--drop-missing-scores", "--weight",
                "--weight-kind", "--group", "--cluster", "--score-time", "--outcome-time",
                "--outcome-horizon-days", "--case-cost", "--lower-is-riskier", "--design",
                "--policy", "--threshold", "--origin", "--production-decimals", "--memo-fields",
                "--record", "--memo", "--markdown", "--seed"):
        assert opt in text, opt
    res = run(["pick", "--help"])
    assert res.returncode == 0 and "--memo-fields" in res.stdout
    res = run(["app", "--help"])
    assert res.returncode == 0 and "--port" in res.stdout


def test_excel_sheet_weights_lower_is_riskier_and_dropped_rows(tmp_path):
    """Invented scores in the second sheet of a workbook; common practice, no source."""
    import numpy as np

    from core.dataset import Mapping
    from core.policy import Policy

    rng = np.random.default_rng(1)
    n = 3000
    y = rng.random(n) < 0.05
    df = pd.DataFrame({"score": np.round(-(rng.normal(size=n) + 1.5 * y), 3),
                       "outcome": np.where(y, "bad", "good"),
                       "w": rng.uniform(0.5, 2, n).round(2), "seg": rng.choice(["a", "b"], n)})
    df.loc[[3, 10], "score"] = np.nan
    path = tmp_path / "scores.xlsx"
    with pd.ExcelWriter(path) as xw:
        pd.DataFrame({"note": ["invented"]}).to_excel(xw, sheet_name="notes", index=False)
        df.to_excel(xw, sheet_name="scores", index=False)
    args = ["pick", str(path), "--sheet", "scores", "--score", "score", "--label", "outcome",
            "--positive", "bad", "--weight", "w", "--weight-kind", "sampling", "--group", "seg",
            "--lower-is-riskier", "--production-decimals", "3", "--replicates", REPS]
    # without --drop-missing-scores the missing scores are named, nothing is dropped silently
    res = run(args)
    line = _one_line_error(res)
    assert "missing" in line and "rows 4, 11" in line
    assert main([*args, "--drop-missing-scores", "--record", str(tmp_path / "r.json")]) == 0
    rec = load_record(tmp_path / "r.json")
    assert rec["data"]["dropped_rows"] == 2 and rec["data"]["sheet"] == "scores"
    assert rec["data"]["weight_kind"] == "sampling" and rec["higher_is_riskier"] is False
    assert rec["test_vectors"]["rule"].startswith("flag a case when its score <=")
    assert rec["threshold_interval"]["closed"] == "low"
    m = Mapping(score="score", label="outcome", positive_label="bad", weight="w",
                weight_kind="sampling", groups=("seg",), higher_is_riskier=False,
                drop_missing_scores=True)
    ds = load_dataset(path, m, sheet="scores")
    same = decide(ds, Policy.from_dict({"objective": {"kind": "max_youden"}}),
                  n_replicates=int(REPS), production_decimals=3, sheet="scores")
    assert without_timestamps(rec) == without_timestamps(same)
