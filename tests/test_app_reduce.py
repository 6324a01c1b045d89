"""The Scores page's "large file on this machine": counted in place by DuckDB, through AppTest."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd
from streamlit.testing.v1 import AppTest

from core import sweep

ROOT = Path(__file__).resolve().parents[1]
MEMO_RECORD = "fulcrum_memo_record"  # app/views/memo.py RECORD
APP = str(ROOT / "app" / "main.py")


def _cases(n=8000, seed=3):
    rng = np.random.default_rng(seed)
    y = rng.random(n) < 0.04
    return pd.DataFrame({"s": np.round(rng.normal(y * 1.2, 1.0), 3), "y": y.astype(int),
                         "site": rng.choice(["a", "b"], n)})


def _local(at, path):
    at.radio(key="scores_source").set_value("local").run()
    at.text_input(key="local_path").set_value(str(path)).run()
    return at


def test_large_local_file_is_counted_and_becomes_the_active_dataset(tmp_path):
    # Reference: the exact sweep of the same rows (tested against scikit-learn in test_curve.py).
    df = _cases()
    path = tmp_path / "big.parquet"
    df.to_parquet(path)
    before = sorted(p.name for p in tmp_path.iterdir())
    at = AppTest.from_file(APP, default_timeout=120)
    at.run()
    _local(at, path)
    assert not at.exception and not at.error, [e.value for e in at.error]
    at.selectbox(key="local_score").set_value("s").run()
    at.selectbox(key="local_label").set_value("y").run()
    at.multiselect(key="local_groups").set_value(["site"]).run()
    at.button(key="local_apply").click().run()
    assert not at.exception and not at.error, [e.value for e in at.error]
    ds = at.session_state["fulcrum_dataset"]
    assert ds.kind == "counts" and ds.reduction is not None and ds.reduction.rows_read == len(df)
    rows = sweep(df["y"].to_numpy() == 1, df["s"].to_numpy())
    np.testing.assert_array_equal(ds.curve().tp, rows.tp)
    np.testing.assert_array_equal(ds.curve().fp, rows.fp)
    assert at.session_state["fulcrum_dataset_label"] == "big.parquet"
    assert any("Counted big.parquet" in s.value for s in at.success)
    assert sorted(p.name for p in tmp_path.iterdir()) == before  # read in place, nothing written
    for page in ("views/tradeoffs.py", "views/decide.py", "views/evidence.py"):
        at.switch_page(page).run()
        assert not at.exception, page
    # the Memo page's record says how the table was counted
    at.switch_page("views/memo.py").run()
    assert not at.exception
    rec = at.session_state[MEMO_RECORD]
    assert rec["data"]["kind"] == "counts" and rec["data"]["group_columns"] == ["site"]
    assert rec["data"]["reduction"]["rows_read"] == len(df)
    assert "Every distinct score was kept" in rec["data"]["reduction"]["statement"]


def test_rounded_reduction_states_its_effect_and_bad_input_shows_the_message(tmp_path):
    df = _cases(n=4000, seed=8)
    df.to_parquet(tmp_path / "big.parquet")
    at = AppTest.from_file(APP, default_timeout=120)
    at.run()
    _local(at, tmp_path / "missing.parquet")
    assert any("no such file" in e.value for e in at.error)
    _local(at, tmp_path / "big.parquet")
    at.selectbox(key="local_score").set_value("s").run()
    at.selectbox(key="local_label").set_value("site").run()  # two values, neither 0/1
    at.button(key="local_apply").click().run()
    assert not at.exception
    assert any("needs an event value" in e.value for e in at.error), [e.value for e in at.error]
    assert at.session_state["fulcrum_dataset_label"].startswith("Corvane")  # the demo stays
    at.selectbox(key="local_label").set_value("y").run()
    at.selectbox(key="local_decimals").set_value(1).run()
    at.button(key="local_apply").click().run()
    assert not at.exception and not at.error
    ds = at.session_state["fulcrum_dataset"]
    assert ds.reduction.decimals == 1
    assert np.all(np.round(ds.y_score * 10) == ds.y_score * 10)
    assert any("Scores were rounded down to 1 decimal" in c.value for c in at.caption)
