"""The Compare page in real Chromium: the two-model example on one click, overlaid curves,
the paired bootstrap with its progress, numbers equal to the core's.

Data: the invented two-model example (sample_data/model_versions.csv.gz); the
numbers are checked against :func:`core.compare.compare_mapped` on the same
file. Screenshots land in ``artifacts/``.
"""

from __future__ import annotations

import re

import pytest

from app.comparison import EXAMPLE_FILE, EXAMPLE_MAPPING
from core.compare import compare_mapped
from core.intake import load_dataset
from tests.browser import browser, open_page, require_browser, running_app, screenshot, wait_text

pytestmark = pytest.mark.browser
REPS = 200


def tile(page, label: str) -> str:
    m = page.locator('[data-testid="stMain"] [data-testid="stMetric"]').filter(
        has=page.locator('[data-testid="stMetricLabel"]', has_text=re.compile(f"^{re.escape(label)}$")))
    return m.first.locator('[data-testid="stMetricValue"]').inner_text().strip()


def test_compare_page_with_the_example_and_the_paired_bootstrap():
    require_browser()
    ds = load_dataset(EXAMPLE_FILE, EXAMPLE_MAPPING)
    fast = compare_mapped(ds, bootstrap=False).pair("retrained_score")
    boot = compare_mapped(ds, bootstrap=True, n_replicates=REPS, seed=0).pair("retrained_score")
    with running_app() as (url, _proc), browser() as b:
        page = b.new_page(viewport={"width": 1400, "height": 2400})
        page.goto(url)
        wait_text(page, "Summary")
        open_page(page, "Compare", "Only one score is mapped")
        page.get_by_role("button", name="Load the two-model example (invented data)").click()
        wait_text(page, "Verdict:")
        assert tile(page, "ROC AUC difference") == f"{fast.roc_auc_difference.difference:+.3f}"
        w = fast.at["workload"]["events_per_1000_flagged"]
        assert tile(page, "Events per 1,000 flagged, same workload") == f"{w.difference:+,.1f}"
        main = page.locator('[data-testid="stMain"]')
        assert "No interval yet: run the paired bootstrap below." in main.inner_text()
        # two overlaid figures, each with one drawn line per score (SVG, thinned exact curves)
        charts = page.locator('[data-testid="stPlotlyChart"]')
        assert charts.count() == 2
        for i in range(2):
            charts.nth(i).locator(".legendtext").first.wait_for(state="attached", timeout=30_000)
            names = charts.nth(i).locator(".legendtext").evaluate_all(
                "els => els.map(e => e.textContent)")
            assert any(n.startswith("current_score (reference") for n in names), names
            assert any(n.startswith("retrained_score (candidate") for n in names), names
        screenshot(page, "compare-01-example")

        reps = page.get_by_label("Replicates")
        reps.fill(str(REPS))
        reps.press("Enter")
        wait_text(page, "Run the paired bootstrap")
        page.get_by_role("button", name="Run the paired bootstrap").click()
        wait_text(page, f"Intervals from {REPS:,} paired replicates", timeout=300_000)
        ap = boot.average_precision
        assert f"95 % interval {ap.low:+.3f} to {ap.high:+.3f} (paired bootstrap)" in main.inner_text()
        assert boot.verdict_text in main.inner_text()
        assert "not itself a medical device" in main.inner_text()
        screenshot(page, "compare-02-bootstrap")
