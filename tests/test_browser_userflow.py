"""A user's whole path in real Chromium: upload a CSV, map it, move the point, export the memo.

The downloaded PDF is read back with pypdf and the record with the record loader; both must
state the threshold the app shows. Screenshots land in ``artifacts/``.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from pypdf import PdfReader

from core.record import loads_record
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


def test_upload_map_move_and_export(tmp_path):
    require_browser()
    rng = np.random.default_rng(1)
    n = 8000
    y = rng.random(n) < 0.03
    df = pd.DataFrame({"case": np.arange(n),
                       "risk": np.round(1 / (1 + np.exp(-rng.normal(-3.5 + 1.8 * y, 1))), 4),
                       "outcome": np.where(y, "event", "none")})
    src = tmp_path / "validation.csv"  # the test's own input file
    df.to_csv(src, index=False)
    with running_app() as (url, _proc), browser() as b:
        page = b.new_page(viewport={"width": 1400, "height": 2400}, accept_downloads=True)
        page.goto(url)
        wait_idle(page)
        page.get_by_text("Upload my own file").click()
        wait_idle(page)
        page.locator('[data-testid="stFileUploader"] input[type="file"]').first.set_input_files(str(src))
        wait_text(page, "Use this mapping")
        page.get_by_role("button", name="Use this mapping").click()
        wait_text(page, "Loaded validation.csv")
        side = page.locator('[data-testid="stSidebar"]').inner_text()
        assert "validation.csv" in side and f"{int(y.sum()):,}" in side
        screenshot(page, "user-01-uploaded")

        open_page(page, "Trade-offs", "Confusion matrix at this point")
        page.locator('[data-testid="stSlider"] input[type="range"]').first.focus()
        for _ in range(10):
            page.keyboard.press("ArrowLeft")
        wait_idle(page)

        open_page(page, "Memo", "Decision record and memo")
        page.get_by_role("button", name="Build the PDF memo").first.click()
        page.wait_for_selector('button:has-text("Memo (PDF)")', timeout=120_000)
        wait_idle(page)
        screenshot(page, "user-02-memo")
        with page.expect_download() as pdf_dl:
            page.get_by_role("button", name="Memo (PDF)").click()
        pdf_dl.value.save_as(tmp_path / "memo.pdf")
        with page.expect_download() as rec_dl:
            page.get_by_role("button", name="Decision record (JSON)").click()
        rec_dl.value.save_as(tmp_path / "record.json")
    record = loads_record((tmp_path / "record.json").read_text())  # integrity checked
    assert record["data"]["file_name"] == "validation.csv" and record["data"]["positive_label"] == "event"
    assert record["counts"]["tp"] + record["counts"]["fn"] == int(y.sum())
    text = PdfReader(tmp_path / "memo.pdf").pages[0].extract_text()
    assert f"risk ≥ {record['threshold']}" in text
    assert "not itself a medical device" in text or "not a medical device" in text
