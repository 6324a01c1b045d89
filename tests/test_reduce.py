"""Files larger than memory: the DuckDB reduction and the portable SQL statement.

Sources named beside each check:
* scikit-learn's ``roc_curve`` (reference library) for the counts at every
  threshold of the reduced table;
* Fulcrum's row-level intake and sweep (``core.intake.load_dataset``,
  ``core.curve.sweep``, themselves checked against scikit-learn in
  test_curve.py / test_intake.py) for the exact agreement of the three routes
  and for the bad-row messages;
* IEEE 754 double arithmetic (common practice, no source) for the float64
  trap ``floor(0.29 * 100) == 28`` and the grid rule;
* Spark SQL in local mode (pyspark, when it and Java are installed) for the
  statement's portability.

Data are generated with ties, groups and dyadic weights and costs (multiples
of 1/4 and 1/8, whose float sums do not depend on the order of addition), so
"exactly" means bit-for-bit equality.
"""

from __future__ import annotations

import json
import os
import shutil
import subprocess
import sys
import textwrap
from fractions import Fraction
from pathlib import Path

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.parquet as pq
import pytest
from sklearn import metrics as skm

import core.reduce as reduce_mod
from core.curve import Curve, sweep
from core.errors import InputError
from core.intake import load_count_table, load_dataset
from core.reduce import reduce_file, reduction_of
from core.sql import (
    MAX_GRID_INDEX,
    decimal_precision,
    quote_identifier,
    quote_literal,
    reduction_sql,
    rounding_check_sql,
)

ROOT = Path(__file__).resolve().parents[1]


# =========================================================================== data


def _frame(n: int = 6000, seed: int = 0) -> pd.DataFrame:
    """Cases with heavy ties, two group columns (one with spacing variants), dyadic weights."""
    rng = np.random.default_rng(seed)
    y = rng.random(n) < 0.08
    s = np.round(1 / (1 + np.exp(-rng.normal(1.3 * y, 1.0))), 3)  # ~1,000 distinct: ties
    s[:40] = 0.29  # the float64 trap value
    s[40:60] = 0.57
    return pd.DataFrame({
        "score": s,
        "label": np.where(y, "event", "none"),
        "site": rng.choice(np.array(["north", "south", " east", "east "]), n),
        "band": rng.choice(np.array([1, 2, 3]), n),
        "w": rng.choice(np.array([0.25, 0.5, 1.0, 2.0]), n),
        "amount": rng.choice(np.array([0.125, 1.5, 40.0, 255.75]), n),
    })


def _write(df: pd.DataFrame, path: Path) -> Path:
    if path.suffix == ".parquet":
        df.to_parquet(path, index=False)
    else:
        df.to_csv(path, index=False)
    return path


@pytest.fixture(scope="module")
def files(tmp_path_factory):
    d = tmp_path_factory.mktemp("reduce")
    df = _frame()
    return df, {"parquet": _write(df, d / "cases.parquet"), "csv": _write(df, d / "cases.csv")}


def _numpy_count_table(df: pd.DataFrame, *, weighted: bool, cost: bool, higher: bool = True):
    """The count table built in memory with pandas, by score."""
    w = df["w"] if weighted else pd.Series(1.0, index=df.index)
    ev = df["label"] == "event"
    t = pd.DataFrame({"score": df["score"], "e": np.where(ev, w, 0.0), "n": np.where(ev, 0.0, w),
                      "c": np.where(ev, w * df["amount"], 0.0),
                      "esq": np.where(ev, w * w, 0.0), "nsq": np.where(ev, 0.0, w * w)})
    g = t.groupby("score", sort=False).sum().reset_index()
    return Curve.from_counts(g["score"], g["e"], g["n"], event_cost=g["c"] if cost else None,
                             events_sq=g["esq"] if weighted else None,
                             non_events_sq=g["nsq"] if weighted else None,
                             higher_is_riskier=higher)


def _same_curve(a: Curve, b: Curve, *, sq: bool = False, cost: bool = False):
    np.testing.assert_array_equal(a.thresholds, b.thresholds)
    np.testing.assert_array_equal(a.tp, b.tp)
    np.testing.assert_array_equal(a.fp, b.fp)
    assert a.n_events == b.n_events and a.n_nonevents == b.n_nonevents
    if sq:
        np.testing.assert_array_equal(a.tp_sq, b.tp_sq)
        np.testing.assert_array_equal(a.fp_sq, b.fp_sq)
    if cost:
        np.testing.assert_array_equal(a.event_cost_flagged, b.event_cost_flagged)
        assert a.event_cost_total == b.event_cost_total


# =========================================================================== the three routes agree


@pytest.mark.parametrize("fmt", ["parquet", "csv"])
@pytest.mark.parametrize("weighted", [False, True])
@pytest.mark.parametrize("higher", [True, False])
def test_count_table_duckdb_and_rows_agree_exactly(files, fmt, weighted, higher):
    # Reference: Fulcrum's row-level sweep (checked against scikit-learn in test_curve.py).
    df, paths = files
    y = (df["label"] == "event").to_numpy()
    w = df["w"].to_numpy() if weighted else None
    rows = sweep(y, df["score"].to_numpy(), w, higher_is_riskier=higher,
                 event_cost=df["amount"].to_numpy())
    table = _numpy_count_table(df, weighted=weighted, cost=True, higher=higher)
    ds = reduce_file(paths[fmt], score="score", label="label", positive="event",
                     weight="w" if weighted else None,
                     weight_kind="sampling" if weighted else None, case_cost="amount",
                     higher_is_riskier=higher)
    assert ds.kind == "counts" and ds.mapping.kind == "counts"
    assert ds.source_rows == len(df) and reduction_of(ds).rows_read == len(df)
    for other in (table, ds.curve()):
        _same_curve(rows, other, sq=weighted, cost=True)


@pytest.mark.parametrize("fmt", ["parquet", "csv"])
def test_reduced_counts_match_sklearn_roc_curve(files, fmt):
    # Source: scikit-learn roc_curve(drop_intermediate=False) (reference library): its fps / tps
    # at every distinct threshold are the reduced table's cumulative non-events / events.
    df, paths = files
    ds = reduce_file(paths[fmt], score="score", label="label", positive="event", weight="w",
                     weight_kind="frequency")
    y = (df["label"] == "event").to_numpy()
    fpr, tpr, thr = skm.roc_curve(y, df["score"], sample_weight=df["w"], drop_intermediate=False)
    c = ds.curve()
    np.testing.assert_array_equal(c.thresholds[1:], thr[1:])
    np.testing.assert_array_equal(c.tp / c.n_events, tpr)
    np.testing.assert_array_equal(c.fp / c.n_nonevents, fpr)
    assert ds.events_sq is None  # frequency weights carry no squared sums


@pytest.mark.parametrize("fmt", ["parquet", "csv"])
def test_groups_join_the_grouping_and_match_the_row_intake(files, fmt):
    # Reference: the row-level intake's canonical group text and the per-group row sweep.
    _, paths = files
    mapping = {"score": "score", "label": "label", "positive_label": "event", "weight": "w",
               "weight_kind": "sampling", "groups": ["site", "band"]}
    rows = load_dataset(paths[fmt], mapping)
    ds = reduce_file(paths[fmt], score="score", label="label", positive="event", weight="w",
                     weight_kind="sampling", groups=("site", "band"))
    assert ds.mapping.groups == ("site", "band")
    assert set(ds.groups["site"]) == set(rows.groups["site"]) == {"north", "south", "east"}
    assert set(ds.groups["band"]) == set(rows.groups["band"]) == {"1", "2", "3"}
    # no (score, site, band) appears twice once the spacing variants are merged
    keys = list(zip(ds.y_score, ds.groups["site"], ds.groups["band"]))
    assert len(keys) == len(set(keys))
    _same_curve(rows.curve(), ds.curve(), sq=True)
    for site in ("north", "south", "east"):
        for band in ("1", "2", "3"):
            r = rows.groups["site"] == site
            r &= rows.groups["band"] == band
            t = (ds.groups["site"] == site) & (ds.groups["band"] == band)
            sub = Curve.from_counts(ds.y_score[t], ds.events[t], ds.non_events[t],
                                    events_sq=ds.events_sq[t], non_events_sq=ds.non_events_sq[t])
            _same_curve(sweep(rows.y_true[r], rows.y_score[r], rows.sample_weight[r]), sub, sq=True)
    assert reduction_of(ds).positive_label == "event"


def test_exported_count_table_loads_back_to_the_same_dataset(files, tmp_path):
    # The hand-off: run the printed statement elsewhere, export the table, load it here.
    import duckdb

    df, paths = files
    sql = reduction_sql(("cases",), score="score", label="label", positive="event",
                        case_cost="amount", groups=("site",), dialect="ansi")
    con = duckdb.connect()
    con.register("cases", df)
    out = tmp_path / "counts.csv"
    con.sql(sql).to_df().sort_values(["score", "site"]).to_csv(out, index=False)
    loaded = load_count_table(out, {"score": "score", "events": "events",
                                    "non_events": "non_events", "event_cost": "event_cost",
                                    "groups": ["site"]})
    y = (df["label"] == "event").to_numpy()
    _same_curve(sweep(y, df["score"].to_numpy(), event_cost=df["amount"].to_numpy()),
                loaded.curve(), cost=True)
    ds = reduce_file(paths["parquet"], score="score", label="label", positive="event",
                     case_cost="amount", groups=("site",))
    _same_curve(ds.curve(), loaded.curve(), cost=True)


# =========================================================================== coarsening


def _grid_reference(s: np.ndarray, d: int, higher: bool) -> np.ndarray:
    """The coarse score by the rule of core.sql, in Python's exact arithmetic (from its definition)."""
    out = np.empty_like(s)
    p = 10**d
    for i, v in enumerate(s.tolist()):
        k = int(Fraction(v) * p // 1) if higher else -int(-Fraction(v) * p // 1)
        # g(k) is the double nearest k / 10^d; move k until g(k) is on the right side of v
        while higher and k / p > v:
            k -= 1
        while higher and (k + 1) / p <= v:
            k += 1
        while not higher and k / p < v:
            k += 1
        while not higher and (k - 1) / p >= v:
            k -= 1
        out[i] = k / p
    return out


def _tricky_scores(rng, d: int, n: int = 4000) -> np.ndarray:
    """Grid values, their neighbouring doubles, the float64 traps and large magnitudes."""
    p = 10**d
    k = rng.integers(0, p + 1, n // 4)
    grid = k / p
    near = np.concatenate([grid, np.nextafter(grid, -np.inf), np.nextafter(grid, np.inf)])
    traps = np.array([0.29, 0.57, 1.15, 2.675, 1.005, 0.145, 123456.29, 8.675, 1e-9, 0.0, -0.29,
                      -1.005, 1 - 2**-53])
    big = rng.uniform(-1, 1, 200) * (MAX_GRID_INDEX / p) * 0.999
    return np.concatenate([near, traps, np.nextafter(traps, np.inf), np.nextafter(traps, -np.inf),
                           big, rng.random(n // 4)])


def test_the_float64_trap_is_real():
    # Source: IEEE 754 doubles (common practice, no source): scaling in float64 misplaces 0.29.
    assert np.floor(0.29 * 100) == 28
    assert np.floor(0.57 * 100) == 56
    assert 0.29 * 100 < 29


@pytest.mark.parametrize("d", [0, 2, 4, 7])
@pytest.mark.parametrize("higher", [True, False])
@pytest.mark.parametrize("bounded", [False, True])
def test_coarse_score_follows_the_grid_rule(tmp_path, d, higher, bounded):
    # Reference: the rule in core.sql's docstring computed in exact rational arithmetic.
    import duckdb

    rng = np.random.default_rng(d)
    s = _tricky_scores(rng, d)
    s = s[np.abs(s) * 10**d < MAX_GRID_INDEX]
    bound = None
    if bounded:  # scores known to lie in [-2, 2]: the 18-digit decimal step
        s = s[np.abs(s) <= 2]
        bound = 2.0
    y = np.zeros(s.shape[0], dtype=np.int64)
    con = duckdb.connect()
    con.register("t", pd.DataFrame({"s": s, "y": y, "i": np.arange(s.shape[0])}))
    sql = reduction_sql("t", score="s", label="y", positive=1, groups=("i",), decimals=d,
                        higher_is_riskier=higher, dialect="duckdb", score_bound=bound)
    assert f"DECIMAL({18 if bounded else 38}, {d + 3})" in sql
    got = con.sql(sql).to_df().sort_values("i")["s"].to_numpy()
    np.testing.assert_array_equal(got, _grid_reference(s, d, higher))
    if d == 2:
        # the trap values land on their own grid value, not one step below
        assert got[np.flatnonzero(s == 0.29)[0]] == 0.29
        if not bounded:
            assert got[np.flatnonzero(s == 123456.29)[0]] == 123456.29


def test_decimal_precision_follows_the_bound():
    # Worked by hand: 18 digits hold |s| * 10^(2d + 3) < 10^18.
    assert decimal_precision(4) == 38
    assert decimal_precision(4, 1.0) == 18
    assert decimal_precision(7, 1.0) == 18 and decimal_precision(8, 1.0) == 38
    assert decimal_precision(2, 9.99e10) == 18 and decimal_precision(2, 1e11) == 38
    assert decimal_precision(2, float("nan")) == 38


@pytest.mark.parametrize("higher", [True, False])
@pytest.mark.parametrize("weighted", [False, True])
def test_coarsened_counts_are_exact_at_every_grid_threshold(tmp_path, higher, weighted):
    # Reference: row-level counts at each threshold, flagged as score >= t (or <= t), in float64.
    d = 2
    rng = np.random.default_rng(7)
    n = 20000
    s = np.concatenate([_tricky_scores(rng, d, 4000)[:4000], rng.random(n - 4000)])
    s = s[(s >= -1) & (s <= 2)]
    y = rng.random(s.shape[0]) < 0.1
    w = rng.choice(np.array([0.25, 0.5, 1.0, 4.0]), s.shape[0])
    path = _write(pd.DataFrame({"score": s, "y": y.astype(np.int8), "w": w}),
                  tmp_path / "grid.parquet")
    ds = reduce_file(path, score="score", label="y", positive=1, decimals=d,
                     weight="w" if weighted else None,
                     weight_kind="frequency" if weighted else None, higher_is_riskier=higher)
    wt = w if weighted else np.ones_like(s)
    grid = np.arange(-100, 201) / 100  # every grid threshold over the range, as float64
    for t in grid:
        raw = s >= t if higher else s <= t
        coarse = ds.y_score >= t if higher else ds.y_score <= t
        assert ds.events[coarse].sum() == wt[raw & y].sum()
        assert ds.non_events[coarse].sum() == wt[raw & ~y].sum()
    # the largest effect: the brute-force largest shortfall over every threshold between grid
    # values (each distinct raw score and the double just past each grid value) equals the
    # figures of the exact second pass
    eff = reduction_of(ds).rounding
    assert eff is not None and eff.decimals == d
    assert eff.direction == ("floor" if higher else "ceil")
    probes = np.unique(np.concatenate([s, np.nextafter(grid, np.inf if higher else -np.inf)]))
    short_e = short_n = 0.0
    for t in probes:
        raw = s >= t if higher else s <= t
        coarse = ds.y_score >= t if higher else ds.y_score <= t
        de = wt[raw & y].sum() - ds.events[coarse].sum()
        dn = wt[raw & ~y].sum() - ds.non_events[coarse].sum()
        assert de >= 0 and dn >= 0  # coarsening never flags more than the rows
        short_e, short_n = max(short_e, de), max(short_n, dn)
    assert eff.max_events_off_grid == short_e
    assert eff.max_non_events_off_grid == short_n
    assert eff.raw_scores == np.unique(s).size
    assert eff.coarse_values == np.unique(ds.y_score).size
    assert eff.weighted is weighted
    text = reduction_of(ds).statement()
    assert f"{short_e:,.0f} fewer events" in text or f"{short_e:,.6g} fewer events" in text
    assert "0.01 grid" in text and ds.read_notes[-1] == text


def test_scores_too_large_for_an_exact_grid_are_refused(tmp_path):
    # Common practice, no source: beyond 10^15 grid steps float64 cannot hold the grid exactly.
    s = np.array([0.5, 2e13, 0.25, 3e13, 0.1])
    path = _write(pd.DataFrame({"score": s, "y": [1, 0, 1, 0, 0]}), tmp_path / "big.parquet")
    with pytest.raises(InputError) as e:
        reduce_file(path, score="score", label="y", positive=1, decimals=2)
    assert e.value.column == "score" and e.value.rows == (2, 4)
    assert "below 10^15" in str(e.value)
    ds = reduce_file(path, score="score", label="y", positive=1, decimals=1)  # 3e14 steps: fine
    assert ds.y_score.max() == 3e13
    with pytest.raises(InputError, match="decimals"):
        reduce_file(path, score="score", label="y", positive=1, decimals=15)


# =========================================================================== bad rows: same messages


def _base(n: int = 60) -> pd.DataFrame:
    rng = np.random.default_rng(1)
    return pd.DataFrame({
        "score": np.round(rng.random(n), 2).astype(object),
        "label": rng.choice(np.array(["yes", "no"]), n).astype(object),
        "w": rng.choice(np.array([0.5, 1.0]), n).astype(object),
        "cost": rng.choice(np.array([1.0, 2.5]), n).astype(object),
        "site": rng.choice(np.array(["a", "b"]), n).astype(object),
    })


def _case(name):
    d = _base()
    kw: dict = {}
    ev = d.index[d["label"] == "yes"]
    ne = d.index[d["label"] == "no"]
    if name == "score_text":
        d.loc[[3, 7, 8, 9, 20, 30, 41], "score"] = ["abc", "x", "abc", "0,5", "y", "z", "1_000"]
    elif name == "score_missing":
        d.loc[[2, 5, 6], "score"] = [None, "NA", " n/a "]
    elif name == "score_dropped":
        d.loc[[2, 5], "score"] = [None, "NA"]
        kw["drop_missing_scores"] = True
    elif name == "score_infinite":
        d.loc[[4, 9], "score"] = ["inf", "-Infinity"]
    elif name == "label_missing":
        d.loc[[1, 6], "label"] = [None, " NA "]
    elif name == "label_three":
        d.loc[[1, 6, 9], "label"] = ["maybe", "maybe", "perhaps"]
    elif name == "label_one":
        d["label"] = "yes"
    elif name == "label_no_match":
        kw["positive"] = "fraud"
    elif name == "label_spaces":
        d.loc[[ev[0], ev[1]], "label"] = [" yes", "yes "]
    elif name == "weight_negative":
        d.loc[[3, 12], "w"] = [-1.0, -0.5]
        kw.update(weight="w", weight_kind="sampling")
    elif name == "weight_missing":
        d.loc[[3], "w"] = [None]
        kw.update(weight="w", weight_kind="frequency")
    elif name == "weight_text":
        d.loc[[3], "w"] = ["heavy"]
        kw.update(weight="w", weight_kind="frequency")
    elif name == "weight_zero_events":
        d.loc[ev, "w"] = 0.0
        kw.update(weight="w", weight_kind="frequency")
    elif name == "cost_missing_for_events":
        d.loc[ev[:2], "cost"] = [None, None]
        d.loc[ne[:2], "cost"] = [None, -3.0]  # non-events' amounts are not used
        kw["case_cost"] = "cost"
    elif name == "cost_negative":
        d.loc[ev[:1], "cost"] = [-2.0]
        kw["case_cost"] = "cost"
    elif name == "group_missing":
        d.loc[[5, 6], "site"] = [None, "n/a"]
        kw["groups"] = ("site",)
    elif name == "scores_outside":
        d["score"] = d["score"].astype(float) * 10
    elif name == "missing_column":
        kw.update(weight="weight", weight_kind="sampling")
    elif name == "label_many_values":  # more distinct values than the check pass fetches
        rng = np.random.default_rng(2)
        d = pd.DataFrame({"score": rng.random(24000),
                          "label": np.round(rng.random(24000) * 16000).astype(int)})
        kw["positive"] = 1
    return d, kw


CASES = ["score_text", "score_missing", "score_dropped", "score_infinite", "label_missing",
         "label_three", "label_one", "label_no_match", "label_spaces", "weight_negative",
         "weight_missing", "weight_text", "weight_zero_events", "cost_missing_for_events",
         "cost_negative", "group_missing", "scores_outside", "missing_column",
         "label_many_values"]


def _as_parquet(d: pd.DataFrame) -> pd.DataFrame:
    out = d.copy()
    for c in out:
        try:
            out[c] = pd.to_numeric(out[c])
        except (ValueError, TypeError):
            out[c] = out[c].map(lambda v: None if v is None else str(v))
    return out


def _outcome(fn):
    try:
        ds = fn()
    except InputError as exc:
        return ("error", str(exc), exc.column, exc.n_rows, exc.rows)
    return ("ok", [(w.code, w.message) for w in ds.warnings], ds.dropped_rows,
            ds.dropped_positions)


@pytest.mark.parametrize("fmt", ["csv", "parquet"])
@pytest.mark.parametrize("name", CASES)
def test_bad_rows_get_the_row_intakes_messages(tmp_path, fmt, name):
    # Reference: core.intake.load_dataset on the same file (the row-level intake).
    d, kw = _case(name)
    path = tmp_path / f"{name}.{fmt}"
    if fmt == "csv":
        d.to_csv(path, index=False)
    else:
        _as_parquet(d).to_parquet(path, index=False)
    positive = kw.pop("positive", "yes")
    mapping = {"score": "score", "label": "label", "positive_label": positive, **kw}
    expected = _outcome(lambda: load_dataset(path, mapping))
    got = _outcome(lambda: reduce_file(path, score="score", label="label", positive=positive,
                                       **kw))
    assert got == expected
    if name in ("score_text", "score_missing", "label_three", "weight_negative",
                "cost_missing_for_events", "missing_column", "label_many_values"):
        assert got[0] == "error"  # the case does hit a problem
    if name in ("score_dropped", "group_missing", "label_spaces", "scores_outside"):
        assert got[0] == "ok" and got[1]


@pytest.mark.parametrize("fmt", ["csv", "parquet"])
def test_many_bad_rows_are_counted_without_listing_them(tmp_path, fmt):
    # Reference: the row-level intake; 300,000 bad rows are counted, five are named.
    n = 300_000
    d = pd.DataFrame({"score": ["oops"] * n + ["0.5"] * 10, "label": [1, 0] * ((n + 10) // 2)})
    path = tmp_path / f"many.{fmt}"
    d.to_csv(path, index=False) if fmt == "csv" else d.to_parquet(path, index=False)
    mapping = {"score": "score", "label": "label", "positive_label": 1}
    expected = _outcome(lambda: load_dataset(path, mapping))
    got = _outcome(lambda: reduce_file(path, score="score", label="label", positive=1))
    assert got == expected and got[3] == n and got[4] == (1, 2, 3, 4, 5)


def test_csv_dialects_read_as_the_row_intake_reads_them(tmp_path):
    # Reference: the row-level intake on the same bytes (delimiter, decimal comma, gzip, sep= line).
    import gzip

    rng = np.random.default_rng(3)
    s = np.round(rng.random(500), 4)
    y = (rng.random(500) < 0.2).astype(int)
    semi = "score;label\n" + "".join(f"{v:.4f}".replace(".", ",") + f";{k}\n" for v, k in zip(s, y))
    files = {"comma.csv": semi.encode(),
             "sep.csv": ("sep=|\n" + pd.DataFrame({"score": s, "label": y}).to_csv(
                 index=False, sep="|")).encode(),
             "tab.tsv": pd.DataFrame({"score": s, "label": y}).to_csv(index=False, sep="\t").encode(),
             "z.csv.gz": gzip.compress(pd.DataFrame({"score": s, "label": y}).to_csv(
                 index=False).encode()),
             "q.csv": (" score , label ,note\n" + "".join(
                 f'{v},{k},"two\nlines, and a comma"\n' for v, k in zip(s, y))).encode()}
    for name, data in files.items():
        path = tmp_path / name
        path.write_bytes(data)
        rows = load_dataset(path, {"score": "score", "label": "label", "positive_label": 1})
        ds = reduce_file(path, score="score", label="label", positive=1)
        _same_curve(rows.curve(), ds.curve())
        assert [w.message for w in ds.warnings] == [w.message for w in rows.warnings]


def test_label_values_are_matched_as_the_row_intake_matches_them(tmp_path):
    # Reference: the row-level intake's event-value matching ("1" for 1, "true" for True).
    rng = np.random.default_rng(4)
    s = rng.random(300)
    y = rng.random(300) < 0.3
    pd.DataFrame({"score": s, "label": y.astype(int)}).to_csv(tmp_path / "n.csv", index=False)
    pd.DataFrame({"score": s.astype(np.float32), "label": y}).to_parquet(tmp_path / "b.parquet")
    for name, positive in (("n.csv", "1"), ("n.csv", 1.0), ("b.parquet", "true"),
                           ("b.parquet", True)):
        path = tmp_path / name
        rows = load_dataset(path, {"score": "score", "label": "label", "positive_label": positive})
        ds = reduce_file(path, score="score", label="label", positive=positive)
        _same_curve(rows.curve(), ds.curve())
        assert reduction_of(ds).positive_label == rows.mapping.positive_label
        assert [w.code for w in ds.warnings] == [w.code for w in rows.warnings]
        assert ds.source_float32 == rows.source_float32


# =========================================================================== engine


def test_private_spill_directory_is_used_and_removed(files, tmp_path, monkeypatch):
    # Common practice, no source: DuckDB spills only into a directory of our own, mode 0700.
    _, paths = files
    made = []
    real = reduce_mod.tempfile.mkdtemp

    def spy(*a, **k):
        made.append(real(*a, **k))
        return made[-1]

    monkeypatch.setattr(reduce_mod.tempfile, "mkdtemp", spy)
    seen = []

    def progress(fraction, stage):
        seen.append((fraction, stage))
        assert os.stat(made[-1]).st_mode & 0o777 == 0o700

    ds = reduce_file(paths["parquet"], score="score", label="label", positive="event",
                     decimals=2, memory_limit="300MB", threads=1, temp_dir=str(tmp_path),
                     progress=progress)
    assert len(made) == 1 and Path(made[0]).parent == tmp_path and not Path(made[0]).exists()
    assert seen and seen[-1][0] == 1.0
    assert [f for f, _ in seen] == sorted(f for f, _ in seen)
    assert {st for _, st in seen} <= {"checking", "counting", "measuring the rounding"}
    red = reduction_of(ds)
    assert red.memory_limit == "300MB" and red.threads == 1
    with pytest.raises(InputError):  # removed on error too
        reduce_file(paths["parquet"], score="label", label="score", positive=1,
                    temp_dir=str(tmp_path))
    assert len(made) == 2 and not Path(made[1]).exists()
    assert list(tmp_path.iterdir()) == []


def test_engine_settings_are_applied(tmp_path):
    # Common practice, no source: memory limit, threads and spill directory as asked.
    with reduce_mod._Engine("256MB", 1, str(tmp_path), None) as eng:
        got = _settings(eng)
        assert got["threads"] == "1"
        assert got["temp_directory"].startswith(eng.tmp)
        assert got["memory_limit"].replace(" ", "").upper() in ("256.0MB", "244.1MIB", "256MB")
        assert got["autoinstall_known_extensions"] == "false"
    assert not Path(eng.tmp).exists()


def _settings(eng) -> dict:
    tab = eng.query("SELECT name, value FROM duckdb_settings() WHERE name IN ('threads', "
                    "'temp_directory', 'memory_limit', 'autoinstall_known_extensions')")
    return {r["name"]: str(r["value"]) for r in tab.to_pylist()}


def test_reduction_description(files):
    df, paths = files
    ds = reduce_file(paths["csv"], score="score", label="label", positive="event")
    red = reduction_of(ds)
    assert red.source_format == "csv" and red.decimals is None and red.rounding is None
    assert red.rows_read == red.rows_used == len(df)
    assert red.table_rows == ds.y_score.shape[0] == np.unique(df["score"]).size
    assert red.sql.startswith("SELECT ") and "read_csv(" in red.sql and "GROUP BY" in red.sql
    assert "Every distinct score was kept" in red.statement()
    json.dumps(red.to_dict(), allow_nan=False)
    assert reduction_of(load_dataset(paths["csv"], {"score": "score", "label": "label",
                                                    "positive_label": "event"})) is None


# =========================================================================== SQL text


def test_identifiers_and_literals_are_quoted_safely():
    # Common practice, no source: a name or value cannot close its quotes.
    assert quote_identifier('a"b', "ansi") == '"a""b"'
    assert quote_identifier("a`b", "spark") == "`a``b`"
    assert quote_literal("it's", "ansi") == "'it''s'"
    assert quote_literal("it's \\", "spark") == "'it\\'s \\\\'"
    assert quote_literal(True) == "TRUE" and quote_literal(3) == "3" and quote_literal(0.1) == "0.1"
    for bad in (float("nan"), float("inf")):
        with pytest.raises(InputError):
            quote_literal(bad)
    with pytest.raises(InputError):
        quote_identifier("", "ansi")
    with pytest.raises(InputError):
        quote_identifier("a\x00b", "spark")
    with pytest.raises(InputError, match="dialect"):
        reduction_sql("t", score="s", label="y", positive=1, dialect="mysql")
    sql = reduction_sql("db.sch.t", score="s", label="y", positive=1, dialect="spark")
    assert "FROM `db`.`sch`.`t`" in sql


def test_hostile_column_names_and_values_run_as_names_and_values():
    # Common practice, no source: DuckDB runs the statement on columns named like SQL.
    import duckdb

    names = {"score": 'score"; DROP TABLE t; --', "label": "it's the label",
             "site": "site -- /* */", "w": "weight`x"}
    rng = np.random.default_rng(5)
    n = 2000
    y = rng.random(n) < 0.2
    df = pd.DataFrame({names["score"]: np.round(rng.random(n), 2),
                       names["label"]: np.where(y, "o'clock \\ event", "none"),
                       names["site"]: rng.choice(np.array(['a"', "b'"]), n),
                       names["w"]: rng.choice(np.array([0.5, 1.0]), n)})
    con = duckdb.connect()
    con.register("t t", df)
    for dialect in ("ansi", "duckdb"):
        sql = reduction_sql(("t t",), score=names["score"], label=names["label"],
                            positive="o'clock \\ event", weight=names["w"],
                            groups=(names["site"],), decimals=1, dialect=dialect)
        out = con.sql(sql).to_df()
        assert set(out.columns) == {names["score"], names["site"], "events", "non_events",
                                    "events_sq", "non_events_sq"}
        w = df[names["w"]].to_numpy()
        assert out["events"].sum() == w[y].sum() and out["non_events"].sum() == w[~y].sum()
        assert set(out[names["site"]]) == {'a"', "b'"}
    assert con.execute("SELECT count(*) FROM \"t t\"").fetchall()[0][0] == n  # still there


def test_names_that_clash_with_the_output_are_refused():
    with pytest.raises(InputError, match="count-table column"):
        reduction_sql("t", score="events", label="y", positive=1)
    with pytest.raises(InputError, match="count-table column"):
        reduction_sql("t", score="s", label="y", positive=1, groups=("NON_EVENTS",))
    with pytest.raises(InputError, match="statement uses for itself"):
        reduction_sql("t", score="s", label="fulcrum_event", positive=1)
    with pytest.raises(InputError, match="both"):
        reduction_sql("t", score="s", label="s", positive=1)


def test_rows_the_statement_cannot_count_become_a_missing_score(tmp_path):
    # The printed statement does not miscount a missing label: that row gets a missing score,
    # which loading the exported table reports (core.intake: "has missing values").
    import duckdb

    df = pd.DataFrame({"s": [0.1, 0.2, 0.3, 0.4], "y": [1, 0, None, 0]})
    con = duckdb.connect()
    con.register("t", df)
    out = con.sql(reduction_sql("t", score="s", label="y", positive=1)).to_df()
    assert out["s"].isna().sum() == 1
    path = tmp_path / "c.csv"
    out.to_csv(path, index=False)
    with pytest.raises(InputError, match="^s: has missing values"):
        load_count_table(path, {"score": "s", "events": "events", "non_events": "non_events"})


def test_rounding_check_statement_on_a_small_table():
    # Worked by hand (from the definitions): scores 0.11, 0.15, 0.15, 0.2, 0.29 at 1 decimal, floor.
    import duckdb

    df = pd.DataFrame({"s": [0.11, 0.15, 0.15, 0.2, 0.29, 0.3], "y": [1, 0, 1, 1, 0, 0]})
    con = duckdb.connect()
    con.register("t", df)
    r = con.sql(rounding_check_sql("t", score="s", label="y", positive=1, decimals=1,
                                   dialect="duckdb")).to_df().iloc[0]
    # cells: 0.1 <- {0.11, 0.15}: off-grid events 2 (0.11, 0.15), non-events 1 (0.15);
    #        0.2 <- {0.2, 0.29}: off-grid non-events 1 (0.29); 0.3 <- {0.3}: none off grid
    assert r["coarse_values"] == 3 and r["raw_scores"] == 5 and r["max_raw_per_coarse"] == 2
    assert r["max_events_off_grid"] == 2 and r["max_non_events_off_grid"] == 1
    assert r["max_rows_off_grid"] == 3 and r["rows_off_grid"] == 4


# =========================================================================== Spark


def _spark_available() -> str | None:
    try:
        import pyspark  # noqa: F401
    except ImportError:
        return "pyspark is not installed"
    if shutil.which("java") is None and not os.environ.get("JAVA_HOME"):
        return "no Java runtime (java not on PATH, JAVA_HOME unset)"
    return None


@pytest.mark.skipif(_spark_available() is not None, reason=str(_spark_available()))
@pytest.mark.filterwarnings("ignore::FutureWarning", "ignore::DeprecationWarning",
                            "ignore:The copy keyword:Warning")
def test_the_statement_runs_on_spark_and_gives_duckdbs_counts(tmp_path):
    # Reference: Spark SQL in local mode runs the spark dialect; DuckDB runs the ansi one.
    import duckdb
    from pyspark.sql import SparkSession

    rng = np.random.default_rng(6)
    d = 2
    s = _tricky_scores(rng, d, 2000)
    s = s[np.abs(s) < 1e6]
    n = s.shape[0]
    df = pd.DataFrame({"score": s, "label": np.where(rng.random(n) < 0.2, "it's", "no"),
                       "w": rng.choice(np.array([0.5, 2.0]), n), "cost": rng.choice(
                           np.array([1.25, 8.0]), n), "grp": rng.choice(np.array(["a", "b"]), n)})
    path = tmp_path / "cases.parquet"
    df.to_parquet(path, index=False)
    spark = (SparkSession.builder.master("local[1]").appName("fulcrum-test")
             .config("spark.ui.enabled", "false").config("spark.sql.shuffle.partitions", "2")
             .getOrCreate())
    try:
        con = duckdb.connect()
        con.register("cases", df)
        for decimals in (None, d):
            kw = {"score": "score", "label": "label", "positive": "it's", "weight": "w",
                  "case_cost": "cost", "groups": ("grp",), "decimals": decimals}
            got = spark.sql(reduction_sql(("parquet", str(path)), dialect="spark", **kw)).toPandas()
            ref = con.sql(reduction_sql("cases", dialect="ansi", **kw)).to_df()
            got = got.sort_values(["score", "grp"]).reset_index(drop=True)
            ref = ref.sort_values(["score", "grp"]).reset_index(drop=True)
            pd.testing.assert_frame_equal(got, ref, check_dtype=False, check_exact=True)
            if decimals is not None:
                np.testing.assert_array_equal(np.unique(got["score"]),
                                              np.unique(_grid_reference(s, d, True)))
                chk = rounding_check_sql(("parquet", str(path)), dialect="spark", score="score",
                                         label="label", positive="it's", weight="w",
                                         decimals=decimals)
                a = spark.sql(chk).toPandas().iloc[0].astype(float)
                b = con.sql(rounding_check_sql("cases", dialect="ansi", score="score",
                                               label="label", positive="it's", weight="w",
                                               decimals=decimals)).to_df().iloc[0].astype(float)
                pd.testing.assert_series_equal(a, b, check_exact=True)
    finally:
        spark.stop()


# =========================================================================== memory


_CHILD = textwrap.dedent("""
    import json, resource, sys, time
    from core.reduce import reduce_file, reduction_of
    path, check = sys.argv[1], sys.argv[2] == "1"
    t0 = time.perf_counter()
    ds = reduce_file(path, score="score", label="label", positive=1, groups=("site",),
                     decimals=4, check_rounding=check, memory_limit="1GB", threads=2)
    red = reduction_of(ds)
    print(json.dumps({"seconds": time.perf_counter() - t0, "rows": red.rows_read,
                      "table_rows": red.table_rows,
                      "maxrss_bytes": resource.getrusage(resource.RUSAGE_SELF).ru_maxrss * 1024,
                      "hwm_bytes": int([ln for ln in open("/proc/self/status")
                                        if ln.startswith("VmHWM:")][0].split()[1]) * 1024}))
""")

# Linux carries a process's peak (ru_maxrss) from the forking parent through exec, so a child
# forked straight from this (large) test process would start at the test process's size. The
# reduction runs in a grandchild forked by a small launcher instead: its ru_maxrss is its own.
_LAUNCHER = "import subprocess, sys; sys.exit(subprocess.run(sys.argv[1:]).returncode)"


def write_parquet_in_chunks(path: Path, n_rows: int, chunk: int = 1_000_000, seed: int = 0) -> None:
    """An invented validation log (score, 0/1 label at ~2 %, site), written chunk by chunk."""
    rng = np.random.default_rng(seed)
    schema = pa.schema([("score", pa.float64()), ("label", pa.int8()), ("site", pa.string())])
    sites = np.array(["north", "south", "east"])
    with pq.ParquetWriter(path, schema) as w:
        done = 0
        while done < n_rows:
            k = min(chunk, n_rows - done)
            y = rng.random(k) < 0.02
            s = 1 / (1 + np.exp(-rng.normal(1.0 * y, 1.0)))
            w.write_table(pa.table({"score": s, "label": y.astype(np.int8),
                                    "site": sites[rng.integers(0, 3, k)]}, schema=schema))
            done += k


@pytest.mark.slow
def test_a_5m_row_rounded_parquet_reduction_stays_under_1gb(tmp_path):
    # Common practice, no source: peak resident memory of the child process (ru_maxrss).
    path = tmp_path / "log.parquet"
    write_parquet_in_chunks(path, 5_000_000)
    for check in ("0", "1"):
        out = subprocess.run([sys.executable, "-c", _LAUNCHER, sys.executable, "-c", _CHILD,
                              str(path), check], cwd=ROOT, capture_output=True, text=True,
                             check=True, timeout=600)
        r = json.loads(out.stdout.strip().splitlines()[-1])
        print(f"\n5M-row Parquet, 4 decimals, rounding check {'on' if check == '1' else 'off'}: "
              f"peak {r['maxrss_bytes'] / 2**20:,.0f} MiB, {r['seconds']:.1f} s, "
              f"{r['table_rows']:,} table rows")
        assert r["rows"] == 5_000_000 and r["table_rows"] <= 3 * 10_001
        assert r["maxrss_bytes"] < 2**30
        assert r["hwm_bytes"] <= r["maxrss_bytes"] + 2**20  # its own peak, nothing inherited
