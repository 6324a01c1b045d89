"""The real app in real Chromium: open, move the point by keyboard, mouse and click, switch pages.

Streamlit 1.6x draws its slider as a native ``<input type="range">``: its
ARIA value (aria-valuenow in the accessibility tree) is the input's value,
which is what these tests read. Screenshots land in ``artifacts/``.
"""

from __future__ import annotations

import re

import pytest

from app import format as fmt
from core.intake import load_demo
from tests.browser import (
    browser,
    open_page,
    require_browser,
    running_app,
    screenshot,
    wait_idle,
    wait_text,
)

pytestmark = pytest.mark.browser


@pytest.fixture(scope="module")
def app_url():
    require_browser()
    with running_app() as (url, _proc):
        yield url


@pytest.fixture(scope="module")
def curve():
    return load_demo("hospital_q1").curve()


def slider_value(page) -> int:
    return int(page.locator('[data-testid="stSlider"] input[type="range"]').first.input_value())


def tile(page, label: str) -> str:
    m = page.locator('[data-testid="stMain"] [data-testid="stMetric"]').filter(
        has=page.locator('[data-testid="stMetricLabel"]', has_text=re.compile(f"^{re.escape(label)}$")))
    return m.first.locator('[data-testid="stMetricValue"]').inner_text().strip()


def wait_point(page, k: int) -> None:
    """Wait until the slider shows point k AND the server has drawn the page for it."""
    page.wait_for_function(
        """k => { const e = document.querySelector('[data-testid="stSlider"] input[type="range"]');
                  const main = document.querySelector('[data-testid="stMain"]');
                  return e && Number(e.value) === k && main
                         && main.innerText.includes('Point ' + k.toLocaleString('en-US') + ' of'); }""",
        arg=k, timeout=30_000)
    wait_idle(page)


def check_tiles(page, curve, k: int) -> None:
    m = curve.point(k).metrics
    assert tile(page, "Precision") == fmt.pct(m["precision"])
    assert tile(page, "Recall") == fmt.pct(m["recall"])
    assert tile(page, "Specificity") == fmt.pct(m["specificity"])


def test_point_moves_by_keyboard_mouse_and_click_and_survives_page_switches(app_url, curve):
    with browser() as b:
        page = b.new_page(viewport={"width": 1400, "height": 2600})
        page.goto(app_url)
        wait_idle(page)
        assert "Corvane Health" in page.locator('[data-testid="stSidebar"]').inner_text()
        screenshot(page, "01-scores-on-open")

        open_page(page, "Trade-offs", "Confusion matrix at this point")
        k0 = slider_value(page)
        check_tiles(page, curve, k0)
        screenshot(page, "02-tradeoffs")

        # keyboard: five steps to the right, one curve point each
        thumb = page.locator('[data-testid="stSlider"] input[type="range"]').first
        thumb.focus()
        for _ in range(5):
            page.keyboard.press("ArrowRight")
        wait_point(page, k0 + 5)
        check_tiles(page, curve, k0 + 5)

        # mouse: a click a quarter of the way along the track
        track = page.locator('[data-testid="stSlider"] [role="group"]').first
        box = track.bounding_box()
        page.mouse.click(box["x"] + 0.25 * box["width"], box["y"] + box["height"] / 2)
        page.wait_for_function(
            """k => Number(document.querySelector('[data-testid="stSlider"] input[type="range"]').value) !== k""",
            arg=k0 + 5, timeout=30_000)
        k1 = slider_value(page)
        wait_point(page, k1)
        assert abs(k1 / (curve.n_points - 1) - 0.25) < 0.05
        check_tiles(page, curve, k1)
        screenshot(page, "03-after-mouse")

        # a click on a point of the precision-recall curve moves the operating point to it:
        # hover shows "point N" (the curve index), the click must land the point on N
        pr = page.locator('[data-testid="stPlotlyChart"]').first
        pr.scroll_into_view_if_needed()
        idx = curve.downsample(2000, space="pr")  # the drawn points (markers are separate traces)
        points = pr.locator(".scatterlayer .trace").first.locator("path.point")
        assert points.count() == int((idx > 0).sum())  # the drawn trace is the thinned exact curve
        centres = points.evaluate_all(
            "els => els.map(e => { const r = e.getBoundingClientRect(); return [r.x + r.width / 2, r.y + r.height / 2]; })")
        x, y = centres[len(centres) // 3]
        page.mouse.move(x - 6, y - 6)
        page.mouse.move(x, y)  # Plotly picks the clicked point from its hover
        page.wait_for_selector(".hoverlayer .hovertext", state="attached", timeout=10_000)
        hover = page.locator(".hoverlayer .hovertext").first.text_content()
        target = int(re.search(r"point ([\d,]+)", hover).group(1).replace(",", ""))
        assert target != k1 and target in set(idx.tolist())
        page.mouse.down()
        page.mouse.up()
        wait_point(page, target)
        check_tiles(page, curve, target)
        screenshot(page, "04-after-pr-click")

        # the point is kept across pages
        open_page(page, "Decide", "Recommended operating point")
        wait_text(page, "Alternatives and baselines")
        screenshot(page, "05-decide")
        open_page(page, "Evidence", "Expected calibration error")
        main = page.locator('[data-testid="stMain"]').inner_text()
        assert "Every number at the point, with its interval" in main and "Subgroups and fairness" in main
        screenshot(page, "06-evidence")
        open_page(page, "Scores", "Summary:")
        open_page(page, "Trade-offs", "Confusion matrix at this point")
        assert slider_value(page) == target
        check_tiles(page, curve, target)
