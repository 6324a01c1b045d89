"""Count tables on the command line: ``--counts``, ``--reduce`` and ``fulcrum sql``.

The same generated cases go three ways -- one row per case, a count table made
with pandas, and the DuckDB reduction of the row file -- through ``fulcrum
pick``; the decision records agree exactly where the counts are sufficient
statistics (the brief's numeric semantics: the cells between event scores
carry the choice, AUC, average precision and the exact bootstrap). Weights
are dyadic (0.25, 0.5, 1, 2, 4) so that sums do not depend on their order.
Invented data (the product's own consistency); the outside reference is
scikit-learn's ``confusion_matrix`` at the chosen threshold.
"""

from __future__ import annotations

import io
import json

import duckdb
import numpy as np
import pandas as pd
import pytest
from sklearn.metrics import confusion_matrix

from core.cli import build_parser, main
from core.cli_columns import (
    check_counts_exclusive,
    counts_mapping_from_args,
    reduce_progress_printer,
)
from core.dataset import Mapping
from core.errors import InputError
from core.intake import load_count_table, load_dataset
from core.record import load_record
from core.reduce import reduce_file, reduction_of

REPS = "200"  # the exact number does not matter here; the product default is 2,000

#: sections a count table gives exactly as the rows do (see the module docstring)
EXACT = ("threshold", "threshold_interval", "higher_is_riskier", "counts", "alternatives",
         "stability", "fairness")
#: record keys that describe the source, not the numbers
SOURCE_KEYS = ("kind", "sha256", "file_name", "label_column", "positive_label", "weight_column",
               "weight_kind", "mapping", "read_notes", "reduction", "event_rows", "rows",
               "case_cost_column")


def _cases(n=6000, seed=11, weighted=False, lower=False):
    rng = np.random.default_rng(seed)
    y = rng.random(n) < 0.06
    s = np.round(np.clip(rng.normal(0.3 + 0.25 * y, 0.15), 0, 1), 2)  # 2 decimals: many ties
    if lower:
        s = np.round(1.0 - s, 2)
    df = pd.DataFrame({"score": s, "outcome": y.astype(int),
                       "site": rng.choice(["north", "south", "east"], n),
                       "amount": np.where(y, rng.choice([64.0, 128.5, 32.25], n), 0.0)})
    if weighted:
        df["w"] = rng.choice([0.25, 0.5, 1.0, 2.0, 4.0], n)
    return df


def _count_table(df, weighted=False):
    w = df["w"] if weighted else 1.0
    ev = df["outcome"] * w
    ne = (1 - df["outcome"]) * w
    t = df.assign(events=ev, non_events=ne, event_cost=ev * df["amount"])
    return t.groupby(["score", "site"], as_index=False)[["events", "non_events",
                                                          "event_cost"]].sum()


def _pick(argv, tmp_path, name, capsys):
    rec = tmp_path / f"{name}.json"
    md = tmp_path / f"{name}.md"
    code = main(["pick", *argv, "--replicates", REPS, "--record", str(rec), "--markdown", str(md)])
    out = capsys.readouterr()
    assert code == 0, out.err
    return load_record(rec), md.read_text(encoding="utf-8"), out


def _strip(rec):
    d = dict(rec["data"])
    for k in SOURCE_KEYS:
        d.pop(k, None)
    return d


def _close(a, b, path=""):
    """Equal, floats to 1e-12 relative (sums in another order), text as text."""
    if isinstance(a, dict):
        assert set(a) == set(b), path
        for k in a:
            _close(a[k], b[k], f"{path}/{k}")
    elif isinstance(a, list):
        assert len(a) == len(b), path
        for i, (x, y) in enumerate(zip(a, b)):
            _close(x, y, f"{path}[{i}]")
    elif isinstance(a, float) and isinstance(b, float):
        assert a == pytest.approx(b, rel=1e-12, abs=1e-15), path
    else:
        assert a == b, path


@pytest.fixture(scope="module")
def three_ways(tmp_path_factory):
    """The same cases as rows (CSV), a pandas count table (CSV) and the DuckDB reduction."""
    tmp = tmp_path_factory.mktemp("counts")
    df = _cases()
    df.to_csv(tmp / "rows.csv", index=False)
    df.to_parquet(tmp / "rows.parquet")
    _count_table(df).to_csv(tmp / "counts.csv", index=False)
    return tmp, df


def _records(tmp, capsys, extra_rows=(), extra_counts=(), policy=None):
    pol = [] if policy is None else ["--policy", str(policy)]
    rows = _pick([str(tmp / "rows.csv"), "--score", "score", "--label", "outcome", "--group",
                  "site", *extra_rows, *pol], tmp, "rows", capsys)
    counts = _pick([str(tmp / "counts.csv"), "--counts", "--score", "score", "--events", "events",
                    "--non-events", "non_events", "--group", "site", *extra_counts, *pol],
                   tmp, "counts", capsys)
    red = _pick([str(tmp / "rows.parquet"), "--reduce", "--score", "score", "--label", "outcome",
                 "--group", "site", *extra_rows, *pol], tmp, "reduced", capsys)
    return rows, counts, red


def test_pick_on_rows_counts_and_reduction_agree_exactly(three_ways, capsys):
    tmp, df = three_ways
    (r, r_md, _), (c, c_md, _), (d, d_md, _) = _records(tmp, capsys)
    assert r["data"]["kind"] == "rows" and c["data"]["kind"] == d["data"]["kind"] == "counts"
    for key in EXACT:
        assert c[key] == r[key], key
        assert d[key] == r[key], key
    for which in ("validation", "deployment", "curve", "expected_cost", "workload"):
        assert c["metrics"][which] == r["metrics"][which], which
        assert d["metrics"][which] == r["metrics"][which], which
    # the bootstrap-corrected values re-run the choice in the same replicates
    assert c["metrics"]["optimism"]["corrected"] == r["metrics"]["optimism"]["corrected"]
    assert c["metrics"]["optimism"]["apparent"] == r["metrics"]["optimism"]["apparent"]
    # subgroups per table line give the rows' per-group table
    assert c["groups"]["rows"] == r["groups"]["rows"]
    assert _strip(c) == _strip(r)
    # the pandas table and the DuckDB reduction are the same count table
    assert c["data"]["sha256"] == d["data"]["sha256"]
    for key in ("metrics", "groups", "calibration", "reference", "curves"):
        assert c[key] == d[key], key
    # Reference: scikit-learn's confusion_matrix on the rows at the chosen threshold.
    t = r["threshold"]
    tn, fp, fn, tp = confusion_matrix(df["outcome"], (df["score"] >= t).astype(int)).ravel()
    assert c["counts"] == {"tp": tp, "fp": fp, "fn": fn, "tn": tn}
    # what a count table cannot carry is said, not guessed
    assert "cannot carry a cluster" in " ".join(c["analysis"]["statements"])
    assert "Kind | a count table" in c_md and "Kind | one row per case" in r_md
    assert "Reduced with DuckDB" in d_md and "Reduced with DuckDB" not in c_md
    assert d["data"]["reduction"]["rows_read"] == len(df)
    assert d["data"]["reduction"]["rounding"] is None


def test_calibration_on_a_count_table_matches_the_rows(three_ways, capsys):
    # Brier score, O/E and logistic recalibration are sums over cases, so they agree to rounding;
    # the quantile bins count each table line as its cases, so their edges are the rows'
    # numpy.percentile edges exactly (reference: numpy.percentile, as scikit-learn's
    # calibration_curve forms them).
    tmp, df = three_ways
    (r, _, _), (c, _, _), _ = _records(tmp, capsys)
    ro, co = r["calibration"]["overall"], c["calibration"]["overall"]
    for key in ("brier", "brier_prevalence", "scaled_brier", "mean_score", "expected", "ece",
                "oe_ratio"):
        _close(ro[key], co[key], key)
    # the logistic fit is iterative (Newton): the same optimum, to the solver's tolerance
    for key in ("intercept", "slope", "intercept_se", "slope_se"):
        assert co["fit"][key] == pytest.approx(ro["fit"][key], rel=1e-8), key
    assert co["looks_calibrated"] == ro["looks_calibrated"]
    rr, cr = ro["reliability"], co["reliability"]
    assert cr["edges"] == rr["edges"]
    assert cr["edges"] == list(np.percentile(df["score"], np.linspace(0, 1, 11) * 100.0))
    for key in ("rows", "cases", "events", "low", "high"):
        _close(rr[key], cr[key], key)
    for g_r, g_c in zip(r["calibration"]["groups"], c["calibration"]["groups"]):
        assert g_r["reliability"]["edges"] == g_c["reliability"]["edges"]
    assert "count each line as its cases" in " ".join(c["calibration"]["statements"])


def test_expanded_percentile_is_numpy_percentile_of_the_repeated_scores():
    # Reference: numpy.percentile (method "linear") of the scores repeated by their counts.
    from core.calibration import _expanded_percentile

    rng = np.random.default_rng(0)
    for _ in range(500):
        k = int(rng.integers(1, 40))
        p = np.round(rng.random(k), int(rng.integers(1, 5)))
        c = rng.integers(0, 7, k).astype(float)
        c[0] += 1
        q = np.linspace(0, 1, int(rng.integers(2, 15))) * 100.0
        want = np.percentile(np.repeat(p, c.astype(int)), q)
        assert np.array_equal(_expanded_percentile(p, c, q), want)


def test_event_cost_column_is_the_policys_false_negative_column(three_ways, tmp_path, capsys):
    # Elkan (IJCAI 2001), from memory: expected cost = C_FN * missed + C_FP * false alarms; the
    # count table's summed miss cost per line gives the rows' per-case sum exactly.
    tmp, df = three_ways
    pol_counts = tmp_path / "counts.toml"
    pol_counts.write_text('[objective]\nkind = "min_cost"\n[costs]\nfalse_positive = 10.0\n'
                          'false_negative_column = "event_cost"\n', encoding="utf-8")
    pol_rows = tmp_path / "rows.toml"
    pol_rows.write_text(pol_counts.read_text().replace('"event_cost"', '"amount"'),
                        encoding="utf-8")
    r, _, _ = _pick([str(tmp / "rows.csv"), "--score", "score", "--label", "outcome",
                     "--case-cost", "amount", "--policy", str(pol_rows)], tmp_path, "r", capsys)
    c, _, _ = _pick([str(tmp / "counts.csv"), "--counts", "--score", "score", "--events",
                     "events", "--non-events", "non_events", "--event-cost", "event_cost",
                     "--policy", str(pol_counts)], tmp_path, "c", capsys)
    d, _, _ = _pick([str(tmp / "rows.parquet"), "--reduce", "--score", "score", "--label",
                     "outcome", "--case-cost", "amount", "--policy", str(pol_rows)],
                    tmp_path, "d", capsys)
    assert c["threshold"] == r["threshold"] == d["threshold"]
    assert c["counts"] == r["counts"] == d["counts"]
    for rec in (c, d):
        assert rec["metrics"]["expected_cost"]["per_case"] == r["metrics"]["expected_cost"]["per_case"]
    t = r["threshold"]
    missed = df.loc[(df["outcome"] == 1) & (df["score"] < t), "amount"].sum()
    fa = ((df["outcome"] == 0) & (df["score"] >= t)).sum()
    assert r["metrics"]["expected_cost"]["per_case"] == pytest.approx((missed + 10.0 * fa) / len(df),
                                                                      rel=1e-12)
    # without --event-cost the policy's column is missing, and the message says what to map
    code = main(["pick", str(tmp / "counts.csv"), "--counts", "--score", "score", "--events",
                 "events", "--non-events", "non_events", "--policy", str(pol_counts)])
    assert code == 2 and "false_negative_column" in capsys.readouterr().err


@pytest.mark.parametrize("lower", [False, True])
def test_dyadic_weights_and_direction_agree_exactly(tmp_path, capsys, lower):
    df = _cases(n=5000, seed=5, weighted=True, lower=lower)
    df.to_parquet(tmp_path / "rows.parquet")
    _count_table(df, weighted=True).to_csv(tmp_path / "counts.csv", index=False)
    direction = ["--lower-is-riskier"] if lower else []
    r, _, _ = _pick([str(tmp_path / "rows.parquet"), "--score", "score", "--label", "outcome",
                     "--weight", "w", "--weight-kind", "frequency", "--group", "site",
                     *direction], tmp_path, "r", capsys)
    c, _, _ = _pick([str(tmp_path / "counts.csv"), "--counts", "--score", "score", "--events",
                     "events", "--non-events", "non_events", "--group", "site", *direction],
                    tmp_path, "c", capsys)
    d, md, _ = _pick([str(tmp_path / "rows.parquet"), "--reduce", "--score", "score", "--label",
                      "outcome", "--weight", "w", "--weight-kind", "frequency", "--group", "site",
                      *direction], tmp_path, "d", capsys)
    assert r["higher_is_riskier"] is (not lower)
    for key in ("threshold", "threshold_interval", "counts", "alternatives", "stability"):
        assert c[key] == r[key] == d[key], key
    for which in ("validation", "deployment", "curve"):
        assert c["metrics"][which] == r["metrics"][which] == d["metrics"][which], which
    assert c["groups"]["rows"] == d["groups"]["rows"]
    # Reference: scikit-learn's weighted confusion matrix at the chosen threshold.
    t = r["threshold"]
    flag = (df["score"] <= t) if lower else (df["score"] >= t)
    tn, fp, fn, tp = confusion_matrix(df["outcome"], flag.astype(int), sample_weight=df["w"]).ravel()
    assert c["counts"] == {"tp": tp, "fp": fp, "fn": fn, "tn": tn}
    # weight sums with quarter cases cannot be split into folds: said, and the rest goes on
    opt = c["metrics"]["optimism"]
    assert opt["cross_fitted"]["recall"] is None and "Cross-fitting was not run" in opt["statement"]
    assert opt["corrected"] == r["metrics"]["optimism"]["corrected"]
    assert "Cross-fitting was not run" in md.replace("\\", "")


def test_reduce_rounds_and_the_memo_states_its_largest_effect(three_ways, tmp_path, capsys):
    tmp, df = three_ways
    out_pdf = tmp_path / "m.pdf"
    rec, md, out = _pick([str(tmp / "rows.parquet"), "--reduce", "--decimals", "1", "--score",
                        "score", "--label", "outcome", "--memo", str(out_pdf)], tmp_path, "d1",
                       capsys)
    assert out_pdf.read_bytes()[:5] == b"%PDF-"
    rnd = rec["data"]["reduction"]["rounding"]
    assert rnd["decimals"] == 1 and rnd["direction"] == "floor"
    # the largest shortfall of flagged events: the most events strictly inside one 0.1 step
    # (Common practice, no source: the floor of an exact decimal grid.)
    cell = np.floor(np.round(df["score"] * 100).astype(int) / 10).astype(int)
    off = (np.round(df["score"] * 100).astype(int) % 10) != 0
    ev_off = df.loc[off & (df["outcome"] == 1)].groupby(cell[off & (df["outcome"] == 1)]).size()
    assert rnd["max_events_off_grid"] == ev_off.max()
    assert "Scores were rounded down to 1 decimal" in md.replace("\\", "")
    assert (f"6,000 rows into {rec['data']['reduction']['table_rows']} count-table rows; scores "
            f"rounded down to 1 decimal (exact on that grid; between grid values up to "
            f"{ev_off.max()} events") in out.out
    assert f"{ev_off.max():,} fewer events" in md.replace("\\", "")
    # at a grid threshold the rounded table gives the rows' counts exactly
    rows = load_dataset(tmp / "rows.csv", Mapping(score="score", label="outcome", positive_label=1))
    t = rec["threshold"]
    assert round(t * 10) == t * 10
    p = rows.curve().at(t)
    assert rec["counts"] == {"tp": p.tp, "fp": p.fp, "fn": p.fn, "tn": p.tn}


def test_bad_rows_get_the_same_message_through_reduce(tmp_path, capsys):
    df = _cases(n=300, seed=2)
    bad = df.astype({"score": object})
    bad.loc[[4, 9, 17], "score"] = "n/a?"
    bad.to_csv(tmp_path / "bad.csv", index=False)
    msgs = []
    for extra in ([], ["--reduce"]):
        code = main(["pick", str(tmp_path / "bad.csv"), "--score", "score", "--label",
                     "outcome", *extra])
        assert code == 2
        msgs.append(capsys.readouterr().err)
    assert msgs[0] == msgs[1]
    assert "score" in msgs[0] and "rows 5, 10, 18" in msgs[0]
    lab = df.astype({"outcome": object})
    lab.loc[[2, 3], "outcome"] = None
    lab.to_csv(tmp_path / "lab.csv", index=False)
    msgs = []
    for extra in ([], ["--reduce"]):
        assert main(["pick", str(tmp_path / "lab.csv"), "--score", "score", "--label", "outcome",
                     *extra]) == 2
        msgs.append(capsys.readouterr().err)
    assert msgs[0] == msgs[1] and "missing values" in msgs[0] and "rows 3, 4" in msgs[0]


@pytest.mark.parametrize("extra, opt", [
    (["--label", "outcome"], "--label"),
    (["--positive", "1"], "--positive"),
    (["--weight", "w", "--weight-kind", "frequency"], "--weight"),
    (["--case-cost", "amount"], "--case-cost"),
    (["--cluster", "pid"], "--cluster"),
    (["--score-time", "t"], "--score-time"),
])
def test_counts_is_exclusive_with_the_row_options(three_ways, capsys, extra, opt):
    tmp, _ = three_ways
    code = main(["pick", str(tmp / "counts.csv"), "--counts", "--score", "score", "--events",
                 "events", "--non-events", "non_events", *extra])
    err = capsys.readouterr().err
    assert code == 2 and err.startswith(f"fulcrum: {opt}: cannot be used with --counts")


def test_counts_options_name_what_is_missing(three_ways, capsys):
    tmp, _ = three_ways
    counts = str(tmp / "counts.csv")
    cases = [
        (["--counts", "--events", "events"], "fulcrum: --non-events: is required with --counts"),
        (["--counts"], "fulcrum: --events: is required with --counts"),
        (["--events", "events", "--label", "outcome"], "fulcrum: --events: needs --counts"),
        ([], "fulcrum: --label: is required"),
        (["--counts", "--events", "events", "--non-events", "non_events", "--events-sq", "e"],
         "fulcrum: --non-events-sq: is required with --events-sq"),
        (["--counts", "--events", "events", "--non-events", "non_events", "--reduce"],
         "fulcrum: --reduce: cannot be used with --counts"),
        (["--label", "outcome", "--decimals", "2"], "fulcrum: --decimals: needs --reduce"),
        (["--label", "outcome", "--reduce", "--cluster", "site"],
         "fulcrum: --cluster: cannot be used with --reduce"),
        (["--counts", "--events", "events", "--non-events", "non_events", "--group", "region"],
         "fulcrum: region: is mapped as the group column but is not a column of the file"),
    ]
    for extra, start in cases:
        assert main(["pick", counts, "--score", "score", *extra]) == 2, extra
        err = capsys.readouterr().err
        assert err.startswith(start), (extra, err)
    # a group column the table was not counted by: the fix is named
    main(["pick", counts, "--score", "score", "--counts", "--events", "events", "--non-events",
          "non_events", "--group", "region"])
    assert "fulcrum sql --group" in capsys.readouterr().err


def test_counts_mapping_from_args():
    ns = build_parser().parse_args(["pick", "x.csv", "--score", "s", "--counts", "--events", "e",
                                    "--non-events", "n", "--event-cost", "c", "--group", "g",
                                    "--lower-is-riskier"])
    m = counts_mapping_from_args(ns)
    assert m == Mapping(score="s", kind="counts", events="e", non_events="n", event_cost="c",
                        groups=("g",), higher_is_riskier=False)
    ns = build_parser().parse_args(["pick", "x.csv", "--score", "s", "--counts", "--label", "y",
                                    "--case-cost", "a"])
    with pytest.raises(InputError) as e:
        check_counts_exclusive(ns)
    assert e.value.column == "--label" and "(also given: --case-cost)" in str(e.value)


class _Tty(io.StringIO):
    def isatty(self):
        return True


def test_reduce_progress_goes_to_a_terminal_only(three_ways, capsys, monkeypatch):
    tmp, _ = three_ways
    assert reduce_progress_printer("x", stream=io.StringIO()) is None
    tty = _Tty()
    say = reduce_progress_printer("rows.parquet", stream=tty)
    ds = reduce_file(tmp / "rows.parquet", score="score", label="outcome", positive=1,
                     decimals=2, progress=say)
    lines = tty.getvalue().splitlines()
    assert lines[0].startswith("fulcrum: reducing rows.parquet: checking")
    assert any(": counting (" in ln for ln in lines)
    assert any(": measuring the rounding (" in ln for ln in lines)
    assert lines[-1].endswith("(100 %)")
    assert reduction_of(ds) is ds.reduction and ds.reduction.decimals == 2
    # through the command: the stage lines go to stderr when it is a terminal
    fake = _Tty()
    monkeypatch.setattr("sys.stderr", fake)
    code = main(["pick", str(tmp / "rows.parquet"), "--reduce", "--score", "score", "--label",
                 "outcome", "--replicates", REPS])
    assert code == 0
    assert "fulcrum: reducing rows.parquet: counting" in fake.getvalue()


def test_recheck_on_counts_and_reduction_gives_the_rows_verdicts(three_ways, tmp_path, capsys):
    tmp, _ = three_ways
    pol = tmp_path / "rule.toml"
    pol.write_text('[objective]\nkind = "max_youden"\n[rules]\nmin_recall = 0.6\n', encoding="utf-8")
    _pick([str(tmp / "rows.csv"), "--score", "score", "--label", "outcome", "--group",
                     "site", "--policy", str(pol)], tmp_path, "dec", capsys)
    rec_path = tmp_path / "dec.json"
    outs = {}
    for name, extra in (("rows", [str(tmp / "rows.csv")]),
                        ("counts", [str(tmp / "counts.csv"), "--counts", "--events", "events",
                                    "--non-events", "non_events"]),
                        ("reduced", [str(tmp / "rows.parquet"), "--reduce"])):
        out = tmp_path / f"re_{name}.json"
        code = main(["recheck", *extra, "--record", str(rec_path), "--as-of", "2027-01-01",
                     "--out", str(out), "--replicates", REPS])
        err = capsys.readouterr().err
        assert code in (0, 1), err
        outs[name] = json.loads(out.read_text(encoding="utf-8"))
    for name in ("counts", "reduced"):
        assert outs[name]["rules"] == outs["rows"]["rules"], name
        assert outs[name]["overall_verdict"] == outs["rows"]["overall_verdict"]
        assert outs[name]["groups"]["compared"] == outs["rows"]["groups"]["compared"], name
    assert outs["counts"]["data"]["kind"] == "counts"
    # a record made on a reduction rechecks a new row file with --reduce and no column options
    _pick([str(tmp / "rows.parquet"), "--reduce", "--score", "score", "--label",
                     "outcome", "--group", "site", "--policy", str(pol)], tmp_path, "decr", capsys)
    code = main(["recheck", str(tmp / "rows.parquet"), "--reduce", "--record",
                 str(tmp_path / "decr.json"), "--as-of", "2027-01-01", "--replicates", REPS])
    assert code in (0, 1), capsys.readouterr().err
    code = main(["recheck", str(tmp / "counts.csv"), "--counts", "--label", "outcome",
                 "--record", str(rec_path)])
    assert code == 2 and "--label: cannot be used with --counts" in capsys.readouterr().err


# --------------------------------------------------------------------------- fulcrum sql

def _sql(argv, capsys):
    code = main(["sql", *argv])
    out = capsys.readouterr()
    assert code == 0, out.err
    assert out.err == ""  # stderr is not a terminal here
    return out.out.strip()


def _sorted(frame, keys):
    return frame.sort_values(keys, kind="stable").reset_index(drop=True)


@pytest.mark.parametrize("decimals, lower, weighted", [
    (None, False, False), (1, False, True), (2, True, False), (1, True, True)])
def test_sql_statement_in_duckdb_gives_the_reduction_and_the_rows(tmp_path, capsys, decimals,
                                                                   lower, weighted):
    # Reference: DuckDB runs the printed statement on a table; the row intake's curve and
    # scikit-learn's confusion matrix give the counts at every grid threshold.
    df = _cases(n=3000, seed=9, weighted=weighted, lower=lower)
    df["score"] = df["score"] + np.where(np.arange(len(df)) % 3 == 0, 0.004, 0.0)  # off-grid
    df.to_parquet(tmp_path / "rows.parquet")
    argv = ["scores", "--score", "score", "--label", "outcome", "--positive", "1", "--group",
            "site", "--case-cost", "amount"]
    kw = {}
    if decimals is not None:
        argv += ["--decimals", str(decimals)]
    if lower:
        argv.append("--lower-is-riskier")
    if weighted:
        argv += ["--weight", "w", "--weight-kind", "sampling"]
        kw = {"weight": "w", "weight_kind": "sampling"}
    stmt = _sql(argv, capsys)
    assert stmt.startswith("SELECT ") and "\n" not in stmt
    con = duckdb.connect()
    con.register("scores", df)
    got = _sorted(con.execute(stmt).df(), ["score", "site"])
    ds = reduce_file(tmp_path / "rows.parquet", score="score", label="outcome", positive=1,
                     groups=["site"], case_cost="amount", decimals=decimals,
                     higher_is_riskier=not lower, **kw)
    want = _sorted(pd.DataFrame({"score": ds.y_score, "site": ds.groups["site"],
                                 "events": ds.events, "non_events": ds.non_events}),
                   ["score", "site"])
    assert np.array_equal(got["score"].to_numpy(), want["score"].to_numpy())
    assert list(got["site"]) == list(want["site"])
    assert np.array_equal(got["events"].to_numpy(float), want["events"].to_numpy())
    assert np.array_equal(got["non_events"].to_numpy(float), want["non_events"].to_numpy())
    if weighted:
        assert {"events_sq", "non_events_sq", "event_cost"} <= set(got.columns)
    # the exported table loads back; at every grid threshold it gives the rows' counts
    got.to_csv(tmp_path / "counts.csv", index=False)
    sq = {"events_sq": "events_sq", "non_events_sq": "non_events_sq"} if weighted else {}
    table = load_count_table(tmp_path / "counts.csv", Mapping(
        score="score", events="events", non_events="non_events", event_cost="event_cost",
        groups=("site",), higher_is_riskier=not lower, **sq))
    rows = load_dataset(tmp_path / "rows.parquet", Mapping(
        score="score", label="outcome", positive_label=1, higher_is_riskier=not lower,
        weight="w" if weighted else None, weight_kind="sampling" if weighted else None))
    for t in np.unique(table.y_score):
        a, b = table.curve().at(t), rows.curve().at(t)
        assert (a.tp, a.fp) == (b.tp, b.fp), t
    flag = (df["score"] <= t) if lower else (df["score"] >= t)
    _, fp, _, tp = confusion_matrix(df["outcome"], flag.astype(int),
                                    sample_weight=df["w"] if weighted else None).ravel()
    a = table.curve().at(t)
    assert (a.tp, a.fp) == (tp, fp)


def test_sql_dialects_files_and_bad_input(tmp_path, capsys):
    spark = _sql(["db.scores", "--score", "risk score", "--label", "y", "--positive", "yes",
                  "--dialect", "spark"], capsys)
    assert "FROM `db`.`scores`" in spark and "`risk score`" in spark and "IN ('yes')" in spark
    ansi = _sql(["scores", "--score", "s", "--label", "y", "--positive", "1",
                 "--positive-as-text", "--positive", "true"], capsys)
    assert "IN ('1', 'true')" in ansi and '"scores"' in ansi
    nums = _sql(["scores", "--score", "s", "--label", "y", "--positive", "1", "--positive",
                 "true"], capsys)
    assert "IN (1, TRUE)" in nums
    df = _cases(n=500, seed=1)
    df.to_parquet(tmp_path / "r.parquet")
    stmt = _sql([str(tmp_path / "r.parquet"), "--file", "parquet", "--dialect", "duckdb",
                 "--score", "score", "--label", "outcome", "--positive", "1"], capsys)
    got = duckdb.connect().execute(stmt).df()
    assert got["events"].sum() == df["outcome"].sum() and got.shape[0] == df["score"].nunique()
    for argv, start in (
        (["t", "--score", "s", "--label", "y", "--positive", "1", "--weight", "w"],
         "fulcrum: --weight-kind: is required with --weight"),
        (["t", "--score", "s", "--label", "y", "--positive", "1", "--decimals", "15"],
         "fulcrum: decimals: must be from 0 to 14"),
        (["t", "--score", "events", "--label", "y", "--positive", "1"],
         "fulcrum: events: has the name of a count-table column"),
        (["t", "--score", "s", "--label", "s", "--positive", "1"],
         "fulcrum: s: is used as both the score and the label"),
        (["x.parquet", "--file", "parquet", "--score", "s", "--label", "y", "--positive", "1"],
         "fulcrum: --file: needs --dialect spark or duckdb"),
    ):
        assert main(["sql", *argv]) == 2, argv
        assert capsys.readouterr().err.startswith(start), argv
    assert main(["sql", "t", "--score", "s", "--label", "y"]) == 2  # --positive is required
    capsys.readouterr()


def test_cli_statement_is_the_one_the_spark_test_runs(tmp_path, capsys):
    # test_reduce.py runs reduction_sql(("parquet", path), dialect="spark") in Spark local mode;
    # the command prints that very statement.
    from core.sql import reduction_sql

    path = str(tmp_path / "r.parquet")
    stmt = _sql([path, "--file", "parquet", "--dialect", "spark", "--score", "score", "--label",
                 "outcome", "--positive", "1", "--decimals", "2", "--group", "site"], capsys)
    assert stmt == reduction_sql(("parquet", path), dialect="spark", score="score",
                                 label="outcome", positive=1, decimals=2, groups=("site",))


def test_readme_sql_example_runs(capsys):
    import shlex
    from pathlib import Path

    text = (Path(__file__).resolve().parents[1] / "README.md").read_text(encoding="utf-8")
    block = text.split("## Large files and warehouses", 1)[1]
    lines = block.split("    fulcrum sql ", 1)[1].split("\n\n", 1)[0]
    argv = shlex.split(lines.replace("\\\n", " ").split(">", 1)[0])
    stmt = _sql(argv, capsys)
    assert stmt.startswith("SELECT `risk_score`, `site`") and "GROUP BY" in stmt


def test_sampling_weights_with_squared_sums(tmp_path, capsys):
    # Kish (1965): the effective size (sum w)^2 / sum w^2 needs the squared-weight sums, which
    # the count table carries per line; the Wilson intervals on it then equal the rows'.
    # The logistic recalibration's robust (sandwich) errors follow from the same sums (White
    # 1980, from memory); their small-sample factor takes the weighted cases for the row count.
    df = _cases(n=5000, seed=13, weighted=True)
    df.to_parquet(tmp_path / "rows.parquet")
    r, _, _ = _pick([str(tmp_path / "rows.parquet"), "--score", "score", "--label", "outcome",
                     "--weight", "w", "--weight-kind", "sampling"], tmp_path, "r", capsys)
    d, _, _ = _pick([str(tmp_path / "rows.parquet"), "--reduce", "--score", "score", "--label",
                     "outcome", "--weight", "w", "--weight-kind", "sampling"], tmp_path, "d",
                    capsys)
    assert d["data"]["mapping"]["events_sq"] == "events_sq"
    assert r["threshold"] == d["threshold"] and r["counts"] == d["counts"]
    for which in ("validation", "deployment"):
        for name, entry in r["metrics"][which].items():
            got = dict(d["metrics"][which][name])
            want = dict(entry)
            got.pop("bootstrap", None)  # rows resample cases, a count table its cells
            want.pop("bootstrap", None)
            _close(want, got, f"{which}/{name}")
    rf, df_ = r["calibration"]["overall"]["fit"], d["calibration"]["overall"]["fit"]
    assert df_["covariance"] == rf["covariance"] == "robust (each row its own cluster)"
    for key in ("intercept", "slope"):
        assert df_[key] == pytest.approx(rf[key], rel=1e-8)
    for key in ("intercept_se", "slope_se"):
        assert df_[key] == pytest.approx(rf[key], rel=1e-3)


def test_whole_frequency_weights_bin_like_the_repeated_rows():
    # Common practice, no source: a frequency weight w stands for w identical rows; reference:
    # the same reliability curve on the repeated rows (numpy.percentile edges).
    from core.calibration import reliability_curve

    rng = np.random.default_rng(4)
    n = 900
    p = np.round(rng.random(n), 2)
    y = rng.random(n) < p
    w = rng.integers(1, 5, n).astype(float)
    a = reliability_curve(y, p, w, n_bins=8, weight_kind="frequency")
    b = reliability_curve(np.repeat(y, w.astype(int)), np.repeat(p, w.astype(int)), n_bins=8)
    assert np.array_equal(a.edges, b.edges)
    np.testing.assert_array_equal(a.cases, b.rows)
    np.testing.assert_allclose(a.observed, b.observed, rtol=1e-12)
