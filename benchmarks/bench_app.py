"""Server time of one app rerun when the operating point moves, at 1M rows.

Runs the real Trade-offs page in Streamlit's AppTest (in-process: the time is
the script run plus Streamlit's own serialisation, i.e. server time, without
the browser's drawing) on a generated 1M-row dataset, moves the slider
``moves`` times and reports the median and the worst rerun.
"""

from __future__ import annotations

import time
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[1]


def make_dataset(n_rows: int, seed: int = 0):
    from core.dataset import Dataset

    rng = np.random.default_rng(seed)
    y = rng.random(n_rows) < 0.02
    s = 1.0 / (1.0 + np.exp(-rng.normal(loc=-4.0 + 1.6 * y, scale=1.0)))
    return Dataset.from_arrays(y, s, file_name=f"generated-{n_rows}.csv")


def bench_point_move(n_rows: int = 1_000_000, moves: int = 10, page: str = "views/tradeoffs.py") -> dict:
    from streamlit.testing.v1 import AppTest

    ds = make_dataset(n_rows)
    ds.curve()
    at = AppTest.from_file(str(ROOT / "app" / "main.py"), default_timeout=300)
    at.session_state["fulcrum_dataset"] = ds
    at.session_state["fulcrum_dataset_label"] = ds.file_name
    at.session_state["fulcrum_point"] = 1
    at.session_state["fulcrum_point_fp"] = ds.fingerprint
    at.run()
    at.switch_page(page).run()
    assert not at.exception, at.exception
    n = ds.curve().n_points
    rng = np.random.default_rng(1)
    times = []
    for k in rng.integers(1, n - 1, moves):
        t0 = time.perf_counter()
        at.slider(key="tradeoffs_slider").set_value(int(k)).run()
        times.append(time.perf_counter() - t0)
        assert not at.exception, at.exception
    times = np.array(times)
    return {"name": f"app: move the point, {n_rows / 1e6:g}M rows ({page.split('/')[-1]})",
            "fulcrum_s": float(np.median(times)), "worst_s": float(times.max()),
            "note": f"median of {moves} reruns in AppTest; worst {times.max():.3f} s",
            "goal": "< 0.1 s server time", "met": bool(np.median(times) < 0.1)}


if __name__ == "__main__":
    print(bench_point_move())
