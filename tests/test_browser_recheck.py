"""The Recheck page in real Chromium: upload a decision record, recheck the demo's second quarter.

A decision record is made on the demo's first quarter through the core (the same
:func:`core.decision.decide` that ``fulcrum pick --record`` calls), uploaded on the Recheck page
with the page's own shortcut to the second quarter; the verdict summary must name the failing
site, a change in the page's policy editor must change only "what would be chosen now", and the
downloaded recheck record (schema and integrity checked) and memos (PDF read with pypdf) must say
the same. Screenshots land in ``artifacts/``.
"""

from __future__ import annotations

import json

import pytest
from pypdf import PdfReader

from app.policy_form import POLICY_DIR
from core.decision import decide
from core.intake import load_demo
from core.policy import load_policy
from core.recheck import SCHEMA, loads_recheck
from core.record import dumps_record
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

REPS = 200  # the record's replicates, which the page takes over; the product default is 2,000


def main_text(page) -> str:
    return page.locator('[data-testid="stMain"]').inner_text()


def test_recheck_page_upload_verdicts_policy_change_and_exports(tmp_path):
    require_browser()
    record = decide(load_demo("hospital_q1"), load_policy(POLICY_DIR / "hospital.toml"),
                    n_replicates=REPS, production_decimals=4)
    src = tmp_path / "decision.json"
    src.write_text(dumps_record(record), encoding="utf-8")
    with running_app() as (url, _proc), browser() as b:
        page = b.new_page(viewport={"width": 1400, "height": 5200}, accept_downloads=True)
        page.goto(url)
        wait_idle(page)
        open_page(page, "Recheck", "Upload the decision record")
        page.locator('[data-testid="stFileUploader"] input[type="file"]').first.set_input_files(
            str(src))
        # the page's shortcut to the demo's second quarter is the default choice of new scores
        wait_text(page, "Rules at the approved threshold", timeout=300_000)
        wait_text(page, "Exports", timeout=300_000)
        summary = page.locator('[data-testid="stAlert"]').filter(has_text="overall:").first
        text = summary.inner_text()
        assert text.startswith("1 of 2 rules hold") and "recall at site Wendlecombe fails" in text
        assert "overall: fails" in text
        main = main_text(page)
        assert "The leading subgroup finding is site Wendlecombe" in main
        assert "not itself a medical device" in main
        assert "The record's resolved policy" in main
        assert "no threshold meets every rule" in main
        screenshot(page, "recheck-01-verdicts")

        # the policy editor: a wider capacity changes only what would be chosen now
        page.get_by_text("Change the policy for what would be chosen now").click()
        cap = page.get_by_label("Capacity per period")
        cap.wait_for(timeout=30_000)
        assert float(cap.input_value()) == 320.0  # pre-filled with the record's policy
        cap.fill("400")
        cap.press("Enter")
        wait_text(page, "the changed policy would choose threshold")
        main = main_text(page)
        assert "rules.max_flagged_per_period 320 → 400" in main  # Streamlit draws -> as an arrow
        assert "judged against the decision record's policy" in main
        after = page.locator('[data-testid="stAlert"]').filter(has_text="overall:").first.inner_text()
        assert after == text  # the verdicts did not move
        screenshot(page, "recheck-02-policy-changed")

        with page.expect_download() as rec_dl:
            page.get_by_role("button", name="Recheck record (JSON)").click()
        rec_dl.value.save_as(tmp_path / "recheck.json")
        with page.expect_download() as md_dl:
            page.get_by_role("button", name="Recheck memo (Markdown)").click()
        md_dl.value.save_as(tmp_path / "recheck.md")
        wait_idle(page)  # downloads do not rerun the page (on_click="ignore"): nothing to wait for
        page.get_by_role("button", name="Build the PDF memo").click()
        page.wait_for_selector('button:has-text("Recheck memo (PDF)")', timeout=120_000)
        wait_idle(page)
        with page.expect_download() as pdf_dl:
            page.get_by_role("button", name="Recheck memo (PDF)").click()
        pdf_dl.value.save_as(tmp_path / "recheck.pdf")
        screenshot(page, "recheck-03-exports")

    text_json = (tmp_path / "recheck.json").read_text(encoding="utf-8")
    rec = loads_recheck(text_json)  # schema and integrity digests checked
    assert rec["schema"] == SCHEMA
    assert rec["decision_record"]["sha256"] == record["integrity"]["sha256"]
    assert rec["overall_verdict"] == "fails"
    wend = next(g for g in rec["groups"]["compared"] if g["group"] == "Wendlecombe")
    assert wend["verdicts"][0]["verdict"] == "fails"
    now = rec["policy_now"]
    assert now["policy_source"] == "changed"
    assert now["changes"] == [{"key": "rules.max_flagged_per_period", "old": 320.0,
                               "new": 400.0, "source": "file"}]
    assert now["chosen_now"] is not None
    edited = json.loads(text_json)
    edited["policy_now"]["changes"] = []
    with pytest.raises(Exception, match="policy_now"):
        loads_recheck(json.dumps(edited))
    md = (tmp_path / "recheck.md").read_text(encoding="utf-8")
    assert "What a changed policy would choose now" in md and rec["integrity"]["sha256"] in md
    pdf = PdfReader(tmp_path / "recheck.pdf")
    words = " ".join(p.extract_text() for p in pdf.pages)
    assert "Wendlecombe" in words and "changed policy" in words
    assert rec["integrity"]["sha256"][:16] in words
    assert "not itself a medical device" in " ".join(words.split())
