"""``fulcrum compare``: exit codes, the comparison document, the memo.

Data: the Wisconsin Diagnostic Breast Cancer set shipped with scikit-learn
(569 cases, 212 malignant; it codes malignant as 0, so the event value is
mapped), two of its measurements used as two "scores" of the same cases.
Outside references: scikit-learn's ``roc_auc_score`` for the AUCs,
statsmodels' ``mcnemar`` for the paired test, numpy by hand for recall at
the same workload. The document itself must equal what the core's
:func:`core.compare.compare_dataset` returns, to the digit.
"""

from __future__ import annotations

import gzip
import importlib.util
import json
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest
from sklearn.datasets import load_breast_cancer
from sklearn.metrics import roc_auc_score
from statsmodels.stats.contingency_tables import mcnemar

from core.cli import main
from core.compare import compare_dataset
from core.compare_record import SCHEMA, check_compare_document
from core.dataset import Mapping
from core.intake import load_dataset
from core.record import RecordError

ROOT = Path(__file__).resolve().parents[1]
A, B = "mean radius", "worst concave points"


@pytest.fixture(scope="module")
def wdbc(tmp_path_factory):
    bc = load_breast_cancer(as_frame=True)
    df = bc.frame[[A, B, "mean texture"]].copy()
    df["diagnosis"] = np.where(bc.target == 0, "malignant", "benign")
    df["minus radius"] = -df[A]
    df["radius again"] = df[A]
    df["case_id"] = [f"ZQX{i:05d}MARK" for i in range(len(df))]  # never mapped, never written
    path = tmp_path_factory.mktemp("wdbc") / "wdbc.csv"
    df.to_csv(path, index=False)
    return path, df


def _args(path, *extra):
    return ["compare", str(path), "--score", A, "--score", B, "--label", "diagnosis",
            "--positive", "malignant", *extra]


def _core(path, seed=5, replicates=200, **kw):
    m = Mapping(score=A, label="diagnosis", positive_label="malignant", extra_scores=(B,))
    ds = load_dataset(path, m)
    c = compare_dataset(ds, ds.extra_scores, seed=seed, n_replicates=replicates,
                        bootstrap=replicates > 0, **kw)
    return ds, json.loads(json.dumps(c.to_dict(), allow_nan=False))


def test_subprocess_writes_the_core_comparison_to_the_digit(wdbc, tmp_path):
    path, df = wdbc
    out = tmp_path / "cmp.json"
    res = subprocess.run([sys.executable, "-m", "core", *_args(path, "--replicates", "200",
                                                               "--seed", "5", "--out", str(out))],
                         capture_output=True, text=True, cwd=ROOT, timeout=600, check=False)
    assert res.returncode == 0, res.stderr
    assert res.stderr == ""  # stderr is not a terminal: no progress lines
    assert "Verdict:" in res.stdout and "Wrote the comparison" in res.stdout
    text = out.read_text(encoding="utf-8")
    doc = check_compare_document(json.loads(text))
    assert doc["schema"] == SCHEMA == "fulcrum.compare/1"
    ds, expected = _core(path)
    assert doc["comparison"] == expected
    assert doc["data"]["sha256"] == ds.fingerprint == doc["comparison"]["data"]["fingerprint"]
    assert doc["data"]["reference"] == A and doc["data"]["candidates"] == [B]
    assert doc["policy"] is None and doc["settings"]["replicates"] == 200
    # no data row: the unmapped id column never appears
    assert "MARK" not in text
    y = (df["diagnosis"] == "malignant").to_numpy()
    # reference: scikit-learn's roc_auc_score (malignant, coded 0 there, is the event here)
    for col in (A, B):
        assert doc["comparison"]["summaries"][col]["roc_auc"] == pytest.approx(
            roc_auc_score(y, df[col]), abs=1e-12)


def test_workload_recall_and_mcnemar_against_numpy_and_statsmodels(wdbc):
    path, df = wdbc
    _, comp = _core(path, replicates=0)
    y = (df["diagnosis"] == "malignant").to_numpy()
    pts = comp["point_sets"]["workload"]["points"]
    flags = {}
    for col in (A, B):
        t = pts[col]["threshold"]
        flags[col] = df[col].to_numpy() >= t
        # by hand with numpy: recall is the share of events at or above the threshold
        assert pts[col]["recall"] == pytest.approx(flags[col][y].mean(), abs=1e-15)
        assert pts[col]["flagged"] == flags[col].sum()
    # the default workload flags as many cases as there are events (or the tied block reaching it)
    assert pts[A]["flagged"] >= y.sum() and pts[B]["flagged"] >= y.sum()
    a, b = flags[A][y], flags[B][y]
    table = [[np.sum(a & b), np.sum(a & ~b)], [np.sum(~a & b), np.sum(~a & ~b)]]
    dis = comp["pairs"][0]["disagreement"]["workload"]
    mc = dis["mcnemar_events"]
    assert (mc["only_a"], mc["only_b"]) == (table[0][1], table[1][0])
    # reference: statsmodels' mcnemar (exact binomial below 25 discordant pairs, else chi-square
    # with continuity correction)
    exact = table[0][1] + table[1][0] < 25
    ref = mcnemar(np.array(table), exact=exact, correction=True)
    assert mc["p_value"] == pytest.approx(ref.pvalue, rel=1e-10)


def test_in_process_memo_markdown_and_policy(wdbc, tmp_path, capsys):
    path, _ = wdbc
    policy = tmp_path / "p.toml"
    policy.write_text('[objective]\nkind = "min_cost"\n[costs]\nfalse_positive = 1.0\n'
                      'false_negative = 10.0\nunit = "points"\n[rules]\nmin_recall = 0.8\n')
    out, pdf, md = tmp_path / "c.json", tmp_path / "c.pdf", tmp_path / "c.md"
    rc = main(_args(path, "--replicates", "100", "--policy", str(policy), "--out", str(out),
                    "--memo", str(pdf), "--markdown", str(md)))
    assert rc == 0
    doc = check_compare_document(json.loads(out.read_text()))
    assert doc["comparison"]["own_points"] == "policy"
    assert doc["policy"]["as_written"]["costs"]["false_negative"] == 10.0
    assert pdf.read_bytes()[:5] == b"%PDF-"
    text = md.read_text(encoding="utf-8")
    assert "Fulcrum is decision support for qualified reviewers" in text  # the brief's cautions
    assert "Accuracy misleads when events are rare" in text
    assert "Deployment figures assume label shift" in text  # a policy judges cost at its prevalence
    assert "McNemar" in text and "DeLong" in text
    assert "MARK" not in text and "MARK" not in out.read_text()
    assert "Wrote the memo" in capsys.readouterr().out


def test_tampered_document_is_refused_naming_the_section(wdbc, tmp_path):
    path, _ = wdbc
    out = tmp_path / "c.json"
    assert main(_args(path, "--replicates", "0", "--out", str(out))) == 0
    doc = json.loads(out.read_text())
    assert doc["comparison"]["bootstrap"] is None
    assert any("paired bootstrap was not run" in w for w in doc["comparison"]["warnings"])
    doc["comparison"]["pairs"][0]["verdict"] = "worse"  # it says "better"
    with pytest.raises(RecordError, match="comparison"):
        check_compare_document(doc)


def test_a_negation_is_refused_as_declared_and_compared_when_its_direction_is_given(wdbc, capsys):
    path, _ = wdbc
    base = ["compare", str(path), "--score", A, "--score", "minus radius", "--label", "diagnosis",
            "--positive", "malignant", "--replicates", "0"]
    assert main(base) == 2
    err = capsys.readouterr().err.strip()
    assert err.startswith("fulcrum: minus radius: ROC AUC") and "\n" not in err
    assert "negation of 'mean radius'" in err and "--lower-is-riskier minus radius" in err
    assert main(base + ["--lower-is-riskier", "minus radius"]) == 0
    out = capsys.readouterr().out
    assert "negation of 'mean radius'" in out and "one model, not two" in out
    assert "lower is riskier" in out


@pytest.mark.parametrize("extra, words", [
    (["--counts"], "--counts: compare needs one row per case: a count table holds one score"),
    (["--lower-is-riskier", "nope"], "--lower-is-riskier: names 'nope', which is not among"),
    (["--score", A], f"--score: '{A}' is given twice"),
    (["--threshold", "nope=0.5"], "--threshold: names 'nope'"),
    (["--threshold", f"{A}:12"], "--threshold: expects COL=T"),
    (["--threshold", f"{A}=high"], "is not a number"),
    (["--replicates", "-1"], "--replicates: must be 0"),
    (["--flag-rate", "1.5", "--replicates", "0"], "flag_rate: must lie in (0, 1]"),
    (["--out", "/nonexistent-folder-h1/x.json"], "--out: the folder of"),
])
def test_bad_input_exits_2_with_one_line(wdbc, capsys, extra, words):
    path, _ = wdbc
    assert main(_args(path, *extra)) == 2
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and err.startswith("fulcrum: ")
    assert words in err


def test_one_score_missing_columns_and_bad_values_exit_2(wdbc, tmp_path, capsys):
    path, df = wdbc
    assert main(["compare", str(path), "--score", A, "--label", "diagnosis"]) == 2
    assert "give at least two score columns" in capsys.readouterr().err
    assert main(["compare", str(path), "--score", A, "--score", "nope", "--label", "diagnosis",
                 "--positive", "malignant"]) == 2
    assert "nope" in capsys.readouterr().err
    bad = df.copy().astype({B: object})
    bad.loc[[3, 10], B] = "n/a?"
    p = tmp_path / "bad.csv"
    bad.to_csv(p, index=False)
    assert main(_args(p, "--replicates", "0")) == 2
    err = capsys.readouterr().err
    assert err.startswith(f"fulcrum: {B}: ") and "rows 4, 11" in err


def test_the_committed_example_equals_its_generator():
    path = ROOT / "sample_data" / "generate_compare.py"
    spec = importlib.util.spec_from_file_location("fulcrum_generate_compare", path)
    mod = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(mod)
    committed = gzip.decompress((ROOT / "sample_data" / mod.FILE).read_bytes())
    assert committed == mod.render(), "sample_data/model_versions.csv.gz differs; rerun the script"


def test_identical_columns_give_zero_differences_with_intervals_around_zero(wdbc, tmp_path):
    # common practice, no source: a score compared with itself differs by exactly nothing
    path, _ = wdbc
    out = tmp_path / "same.json"
    assert main(["compare", str(path), "--score", A, "--score", "radius again", "--label",
                 "diagnosis", "--positive", "malignant", "--replicates", "100",
                 "--out", str(out)]) == 0
    comp = json.loads(out.read_text())["comparison"]
    assert comp["relations"][0]["kind"] == "identical"
    assert any("exactly the same values" in w for w in comp["warnings"])
    pair = comp["pairs"][0]
    for d in (pair["roc_auc_difference"], pair["average_precision"],
              pair["at"]["workload"]["recall"]):
        assert d["difference"] == 0.0
        assert d["low"] is None or d["low"] <= 0.0 <= d["high"]
    assert pair["verdict"] == "no clear difference"
