"""The Scores page's large local file in real Chromium: type a path, count it, see the summary.

Screenshots land in ``artifacts/`` (look at them).
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from core import sweep
from tests.browser import browser, require_browser, running_app, screenshot, wait_idle, wait_text

pytestmark = pytest.mark.browser


def test_large_local_file_counted_in_the_browser(tmp_path):
    require_browser()
    rng = np.random.default_rng(21)
    n = 200_000
    y = rng.random(n) < 0.02
    df = pd.DataFrame({"risk": np.round(rng.normal(y * 1.5, 1.0), 4), "event": y.astype(int),
                       "site": rng.choice(["Arnholt", "Belsey", "Carrow"], n)})
    path = tmp_path / "validation_scores.parquet"
    df.to_parquet(path)
    # Reference: the exact sweep of the same rows (tested against scikit-learn in test_curve.py)
    n_points = sweep(y, df["risk"].to_numpy()).n_points
    with running_app() as (url, _proc), browser() as b:
        page = b.new_page(viewport={"width": 1400, "height": 1000})
        page.goto(url)
        wait_text(page, "Summary")
        page.get_by_text("A large file on this machine").click()
        wait_text(page, "Path of the file on this machine")
        box = page.get_by_label("Path of the file on this machine")
        box.fill(str(path))
        box.press("Enter")
        wait_text(page, "Count this file")
        screenshot(page, "reduce_local_form")
        page.get_by_role("button", name="Count this file").click()
        wait_text(page, "Counted validation_scores.parquet")
        wait_idle(page)
        main = page.locator('[data-testid="stMain"]').inner_text()
        assert "200,000 rows into" in main
        assert "Every distinct score was kept" in main
        assert f"{n_points - 1:,}" in main  # distinct scores in the summary
        screenshot(page, "reduce_local_done")
        side = page.locator('[data-testid="stSidebar"]').inner_text()
        assert "200,000" in side
