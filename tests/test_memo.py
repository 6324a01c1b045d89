"""The threshold memo (PDF and Markdown), its figures, the memo fields and the CSV guard."""

from __future__ import annotations

import html
import io
import re
import subprocess
import sys

import pytest
from pypdf import PdfReader

from app.policy_form import POLICY_DIR
from core import cautions
from core.decision import decide
from core.intake import load_demo
from core.memo_content import fmt_ci, fmt_pct, fmt_threshold, memo_blocks
from core.memo_csv import csv_cell, metrics_csv, threshold_vectors_csv
from core.memo_fields import (
    MemoFieldsError,
    check_memo_fields,
    default_memo_fields,
    dumps_memo_fields,
    load_memo_fields,
    loads_memo_fields,
)
from core.memo_figures import FIGURES, available_figures, figure_png
from core.memo_markdown import md_escape, memo_markdown
from core.memo_pdf import memo_pdf, pdf_escape
from core.policy import Policy, load_policy

REPS = 200
MEMO_FIELDS = POLICY_DIR.parent / "memo_fields" / "hospital.toml"


@pytest.fixture(scope="module")
def record():
    return decide(load_demo("hospital_q1"), load_policy(POLICY_DIR / "hospital.toml"),
                  n_replicates=REPS, production_decimals=4,
                  memo_fields=load_memo_fields(MEMO_FIELDS))


@pytest.fixture(scope="module")
def pdf_bytes(record):
    return memo_pdf(record)


@pytest.fixture(scope="module")
def pdf_text(pdf_bytes):
    """The PDF's text without the page footers (so paragraphs run on across pages)."""
    reader = PdfReader(io.BytesIO(pdf_bytes))
    pages = []
    for i, p in enumerate(reader.pages, start=1):
        lines = p.extract_text().splitlines()
        footer = [ln for ln in lines if ln.strip() == cautions.SHORT
                  or ln.strip().startswith("Fulcrum threshold memo · record")]
        assert len(footer) == 2 and footer[1].strip().endswith(f"page {i}"), footer
        pages.append("\n".join(ln for ln in lines if ln not in footer))
    return "\n".join(pages)


def _flat(text: str) -> str:
    return re.sub(r"\s+", " ", text)


def _pct_for(x):
    return fmt_pct(x, 2 if abs(x) < 0.1 else 1)


# --------------------------------------------------------------------------- PDF

def test_pdf_shows_threshold_metrics_and_test_vectors(record, pdf_text):
    flat = _flat(pdf_text)
    t = fmt_threshold(record["threshold"])
    assert f"risk_score ≥ {t}" in flat
    dep = record["metrics"]["deployment"]
    for m in ("recall", "precision", "flag_rate"):
        assert fmt_ci(dep[m], _pct_for) in flat, m
    for m in ("recall", "specificity", "precision", "npv", "flag_rate"):
        assert _pct_for(record["metrics"]["validation"][m]["value"]) in flat, m
    for v in record["test_vectors"]["vectors"]:
        assert f"{v['text']} {v['position']} {'FLAG' if v['flagged'] else 'no flag'}" in flat
    assert record["test_vectors"]["rule"] in flat
    assert record["integrity"]["sha256"] in flat
    assert record["data"]["sha256"] in flat.replace(" ", "") or record["data"]["sha256"] in flat
    for key in ("tp", "fp", "fn", "tn"):
        assert f"{int(record['counts'][key]):,}" in flat


def test_pdf_prints_the_cautions_and_the_label_shift(record, pdf_text):
    flat = _flat(pdf_text)
    assert _flat(cautions.FULL) in flat
    assert _flat(cautions.LABEL_SHIFT) in flat
    assert "does not prove who approved" in flat
    assert "π = 2.00 %" in flat  # the embedded font carries π
    assert record["memo"]["sign_off"]["decision"].upper() in flat
    assert record["memo"]["model_name"] in flat


def test_pdf_embeds_dejavu(pdf_bytes):
    """Every glyph is drawn in the embedded DejaVu fonts (matplotlib's bundled copies)."""
    reader = PdfReader(io.BytesIO(pdf_bytes))
    used = set()
    embedded = set()

    def visit(txt, cm, tm, font, size):
        if txt.strip() and font is not None:
            used.add(str(font["/BaseFont"]))

    for page in reader.pages:
        page.extract_text(visitor_text=visit)
        for f in page["/Resources"]["/Font"].values():
            f = f.get_object()
            desc = f.get("/FontDescriptor")
            for d in f.get("/DescendantFonts", []):
                desc = d.get_object().get("/FontDescriptor")
            if desc is not None and "/FontFile2" in desc.get_object():
                embedded.add(str(f["/BaseFont"]))
    assert used and all("DejaVuSans" in name for name in used), used
    assert used <= embedded


def test_pdf_first_page_is_the_summary(pdf_bytes, record):
    first = _flat(PdfReader(io.BytesIO(pdf_bytes)).pages[0].extract_text())
    assert "Threshold: flag a case when" in first
    assert "Per 1,000 cases" in first and "Per day" in first
    assert "Key numbers: apparent and out of sample" in first
    assert "Binding rule: recall at least 80.0 %" in first
    assert "not itself a medical device" in first
    assert "Deployment figures assume label shift" in first


def test_user_text_is_escaped_and_long_words_wrap(record):
    bad = dict(record)
    fields = default_memo_fields()
    long_word = "x" * 400
    fields.update(author="<b>Bold</b> & <script>alert(1)</script>", rationale=long_word,
                  limitations="=HYPERLINK(\"http://example.invalid\")", model_name="A <font size=40>")
    bad["memo"] = check_memo_fields(fields)
    pdf = memo_pdf(bad)
    reader = PdfReader(io.BytesIO(pdf))
    text = "\n".join(p.extract_text() for p in reader.pages)
    assert "<b>Bold</b> & <script>alert(1)</script>" in text  # printed, not interpreted
    assert "A <font size=40>" in text
    # the 400-letter word is split over lines inside the page, none wider than the page
    assert long_word not in text.replace("\n", " ")
    assert long_word in text.replace("\n", "")
    width = float(reader.pages[0].mediabox.width)
    overflow = []

    def visit(txt, cm, tm, font, size):
        if txt.strip():
            x = tm[4] * cm[0] + cm[4]
            if x + 0.5 * size * len(txt.strip()) > width + 1:
                overflow.append(txt)

    for page in reader.pages:
        page.extract_text(visitor_text=visit)
    assert not [t for t in overflow if "x" * 60 in t]
    md = memo_markdown(bad)
    assert "<script>" not in md and "&lt;script&gt;" in md
    assert pdf_escape("a < b & c") == "a &lt; b &amp; c"


# --------------------------------------------------------------------------- Markdown

def test_markdown_matches_the_record(record):
    md = memo_markdown(record)
    plain = md.replace("\\", "")
    t = fmt_threshold(record["threshold"])
    assert f"risk_score ≥ {t}" in plain
    dep = record["metrics"]["deployment"]
    for m in ("recall", "precision", "flag_rate"):
        assert fmt_ci(dep[m], _pct_for) in plain, m
    for v in record["test_vectors"]["vectors"]:
        assert f"| {v['text']} | {v['position']} | {'FLAG' if v['flagged'] else 'no flag'} |" in plain
    assert _flat(cautions.FULL) in _flat(plain)
    assert _flat(cautions.LABEL_SHIFT) in _flat(plain)
    assert record["integrity"]["sha256"] in plain


def test_markdown_escaping():
    assert md_escape("*bold* _x_ [link](u) <b>") == r"\*bold\* \_x\_ \[link\]\(u\) &lt;b&gt;"
    assert md_escape("a | b\nc", cell=True) == r"a \| b c"
    assert md_escape("# heading") == r"\# heading"


def test_pdf_and_markdown_say_the_same(record, pdf_text):
    """Every paragraph of the memo's blocks appears in both renderings."""
    flat_pdf = _flat(pdf_text)
    flat_md = _flat(html.unescape(memo_markdown(record).replace("\\", "")))
    for b in memo_blocks(record):
        if b.kind in ("p", "strong", "caution") and b.text:
            txt = _flat(b.text)
            assert txt in flat_md, txt[:60]
            # pypdf may split a long hash across lines; compare without spaces then
            assert txt in flat_pdf or txt.replace(" ", "") in flat_pdf.replace(" ", ""), txt[:60]


# --------------------------------------------------------------------------- figures

def test_figures_are_png(record):
    assert set(available_figures(record)) == set(FIGURES)  # the demo has data for all four
    for name in FIGURES:
        png = figure_png(record, name)
        assert png[:8] == b"\x89PNG\r\n\x1a\n"
        assert len(png) > 5_000
    with pytest.raises(KeyError):
        figure_png(record, "nonsense")


def test_memo_uses_no_pyplot_state():
    code = ("import sys; from core.intake import load_demo; from core.policy import Policy; "
            "from core.decision import decide; from core.memo_pdf import memo_pdf; "
            "r = decide(load_demo('invoices'), Policy.from_dict({'objective': {'kind': 'max_youden'}}),"
            " n_replicates=60); memo_pdf(r); "
            "assert 'matplotlib.pyplot' not in sys.modules, 'pyplot imported'")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, timeout=300)
    assert out.returncode == 0, out.stderr


# --------------------------------------------------------------------------- CSV

def test_csv_guard_against_formula_injection():
    for risky in ("=1+1", "+cmd", "-2+3", "@SUM(A1)", "\tx", "\rx"):
        assert csv_cell(risky) == "'" + risky
    assert csv_cell(-0.5) == "-0.5" and csv_cell(3) == "3" and csv_cell(None) == ""
    assert csv_cell("safe") == "safe" and csv_cell(True) == "true"


def test_test_vectors_csv_leaves_numbers_alone():
    from core.dataset import Dataset

    ds = Dataset.from_arrays([1, 0, 1, 0, 0, 1, 0, 0], [-0.9, -0.1, -0.7, -0.2, -0.3, -0.8, -0.5, -0.4],
                             higher_is_riskier=False)
    rec = decide(ds, Policy.from_dict({"objective": {"kind": "max_youden"}}), n_replicates=60,
                 production_decimals=1, folds=2)
    lines = threshold_vectors_csv(rec).splitlines()
    assert lines[0] == "score,score_as_written,position,expected_decision"
    for line, v in zip(lines[1:], rec["test_vectors"]["vectors"]):
        score, written = line.split(",")[:2]
        assert score == repr(v["score"])          # a number, unescaped even when negative
        assert written == "'" + v["text"]          # text starting with "-" is escaped
    assert "recall" in metrics_csv(rec)


# --------------------------------------------------------------------------- memo fields

def test_memo_fields_round_trip_and_sample():
    f = load_memo_fields(MEMO_FIELDS)
    assert f["model_name"] == "Corvane early-warning score" and f["model_version"] == "2.1"
    assert f["sign_off"]["date"] == "2025-04-15"  # a TOML date becomes text
    assert loads_memo_fields(dumps_memo_fields(f)) == f
    assert check_memo_fields(None) == default_memo_fields()


def test_memo_fields_problems_are_named():
    with pytest.raises(MemoFieldsError) as exc:
        loads_memo_fields('author = 3\nnickname = "x"\nvalidation_independence = "maybe"\n'
                          '[sign_off]\ndate = "tomorrow"\ndecision = "yes"\nstamp = "x"\n')
    msg = str(exc.value)
    for name in ("author", "nickname", "validation_independence", "sign_off.date",
                 "sign_off.decision", "sign_off.stamp"):
        assert name in msg, name
    assert len(exc.value.problems) == 6
    with pytest.raises(MemoFieldsError, match="not valid TOML"):
        loads_memo_fields("title = ")
    with pytest.raises(MemoFieldsError, match="monitoring"):
        check_memo_fields({"monitoring": "weekly"})


def test_regulatory_status_is_asked_not_assumed(record):
    r = dict(record)
    fields = dict(record["memo"])
    fields["regulatory_status"] = ""
    r["memo"] = check_memo_fields(fields)
    md = _flat(memo_markdown(r).replace("\\", ""))
    assert "Regulatory status: NOT STATED" in md
    fields = default_memo_fields()
    r["memo"] = fields
    assert "NOT YET SIGNED OFF" in memo_markdown(r)
