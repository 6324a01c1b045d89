"""Injection: user text renders literally in the PDF and Markdown memos; CSV cells are guarded.

Memo fields, column names and group values carry Markdown, HTML, script tags,
reportlab paragraph markup, a 2,000-character word, right-to-left text and
PDF-special characters. The PDF is read back with pypdf and must hold each
text as written; the Markdown is rendered with markdown-it-py (a CommonMark
parser) and must show each text as written, with no element the text asked
for. CSV exports follow the OWASP rule for formula injection (from memory:
OWASP "CSV Injection": prefix a text cell that starts with =, +, -, @, tab or
carriage return with an apostrophe), and leave numbers alone.
"""

from __future__ import annotations

import csv
import io
import re
from html.parser import HTMLParser

import numpy as np
import pytest

from core.decision import decide
from core.memo_csv import FORMULA_STARTS, _write, csv_cell, metrics_csv, threshold_vectors_csv
from core.memo_markdown import memo_markdown
from core.memo_pdf import memo_pdf
from core.policy import Policy
from tests.reliability import report

LONG_WORD = "Ab3" * 666 + "Zz"  # 2,000 characters, no space

PAYLOADS = {
    "markdown": "# Heading **bold** _it_ [link](https://example.invalid/x) ![img](x.png) `code` "
                "> quote ~~gone~~ | a | b |",
    "html": '<div onclick="steal()">hi</div> <img src=x onerror=alert(1)> <a href="x">l</a>',
    "script": "<script>alert('memo')</script>",
    "reportlab": "<b>bold</b> <font color='red' size=40>big</font> <para align=center>p</para> "
                 "<br/> <strike>s</strike> <super>2</super> <img src='x.png'/>",
    "entities": "&amp; &lt;b&gt; &#60;script&#62; &nbsp; & < >",
    "long_word": LONG_WORD,
    "right_to_left": "שלום עולם مرحبا بالعالم",
    "pdf_special": r"( ) \ \\ (unbalanced ( \) endobj stream %%EOF /Type /Page [ ] { }",
    "formula": "=HYPERLINK(\"https://example.invalid\",\"click\") +1 -1 @SUM(A1)",
}

#: memo field -> payload it carries (every payload at least once, some twice)
FIELD_PAYLOADS = {
    "title": "markdown", "model_name": "script", "model_version": "pdf_special",
    "rationale": "reportlab", "limitations": "long_word", "intended_use": "html",
    "population": "right_to_left", "exclusions": "entities", "out_of_scope_use": "formula",
    "author": "reportlab", "independent_reviewer": "html",
}
NESTED_PAYLOADS = {("monitoring", "owner"): "script", ("monitoring", "triggers"): "markdown",
                   ("sign_off", "name"): "right_to_left", ("sign_off", "conditions"): "pdf_special"}

SCORE_COLUMN = "<b>risk</b> (v2) \\ *score*"
GROUP_VALUES = ("<script>x</script>", "=cmd|'/c calc'!A1", "north (main) \\ site")


FILE_NAME = "<script>f</script> (q1).csv"
GROUP_COLUMN = "site <i>x</i>"


@pytest.fixture(scope="module")
def record():
    import pandas as pd

    from core.dataset import Mapping
    from core.intake import load_dataset

    rng = np.random.default_rng(3)
    n = 900
    y = rng.random(n) < 0.1
    s = np.round(rng.normal(y * 1.5, 1.0), 3)
    groups = np.array(GROUP_VALUES)[rng.integers(0, len(GROUP_VALUES), n)]
    frame = pd.DataFrame({SCORE_COLUMN: s, "outcome": y.astype(int), GROUP_COLUMN: groups})
    ds = load_dataset(frame.to_csv(index=False).encode(), Mapping(
        score=SCORE_COLUMN, label="outcome", positive_label="1", groups=(GROUP_COLUMN,)),
        file_name=FILE_NAME)
    fields = {k: PAYLOADS[v] for k, v in FIELD_PAYLOADS.items()}
    for (section, key), v in NESTED_PAYLOADS.items():
        fields.setdefault(section, {})[key] = PAYLOADS[v]
    policy = Policy.from_dict({"objective": {"kind": "max_youden"}, "rules": {"min_recall": 0.3},
                               "costs": {"false_positive": 1.0, "false_negative": 9.0,
                                         "unit": "<b>EUR</b> (net)"}})
    return decide(ds, policy, memo_fields=fields, n_replicates=60, folds=2)


@pytest.fixture(scope="module")
def recheck_record(record):
    """A recheck of the hostile record on new data whose group values are hostile too."""
    import pandas as pd

    from core.recheck import build_recheck_record, recheck

    rng = np.random.default_rng(4)
    n = 900
    y = rng.random(n) < 0.1
    frame = pd.DataFrame({SCORE_COLUMN: np.round(rng.normal(y * 1.5, 1.0), 3),
                          "outcome": y.astype(int),
                          GROUP_COLUMN: np.array(GROUP_VALUES)[rng.integers(0, 3, n)]})
    result = recheck(record, frame.to_csv(index=False).encode(), n_replicates=60)
    return build_recheck_record(result)


def test_recheck_memo_renders_hostile_text_literally(recheck_record):
    from pypdf import PdfReader

    from core.recheck_memo import recheck_markdown, recheck_pdf

    title = PAYLOADS[FIELD_PAYLOADS["title"]]
    p = _render(recheck_markdown(recheck_record))
    assert not {"script", "img", "div", "a", "font", "para"} & set(p.tags), sorted(set(p.tags))
    shown = _squash("".join(p.text))
    for text in (title, *GROUP_VALUES):  # the subgroup verdicts name the hostile groups
        assert _squash(text) in shown, text
    reader = PdfReader(io.BytesIO(recheck_pdf(recheck_record)))
    pdf = _squash("".join(page.extract_text() or "" for page in reader.pages))
    for text in (title, *GROUP_VALUES):
        assert _in_pdf(text, pdf), text


def _squash(text: str) -> str:
    return re.sub(r"\s+", "", text)


@pytest.fixture(scope="module")
def pdf_text(record):
    from pypdf import PdfReader

    reader = PdfReader(io.BytesIO(memo_pdf(record)))
    return "\n".join(page.extract_text() or "" for page in reader.pages)


def _in_pdf(payload: str, text: str) -> bool:
    # pypdf gives a right-to-left line in visual order (the characters reversed)
    return _squash(payload) in text or _squash(payload)[::-1] in text


def test_memo_fields_render_literally_in_the_pdf(record, pdf_text, capsys):
    text = _squash(pdf_text)
    missing = [name for name in PAYLOADS if not _in_pdf(PAYLOADS[name], text)]
    assert not missing, missing
    assert _squash(SCORE_COLUMN) in text and _squash(GROUP_COLUMN) in text
    assert "(unbalanced(\\)endobj" in text  # PDF string delimiters survived as text
    # markup was not obeyed: the tags are on the page as characters
    for tag in ("<b>bold</b>", "<font", "<para", "<script>", "<br/>"):
        assert tag in pdf_text.replace("\n", "")
    shown = sum(_in_pdf(PAYLOADS[p], text) for p in PAYLOADS)
    report(capsys, "injection_pdf",
           f"injection (PDF memo, read back with pypdf): {len(PAYLOADS)} hostile texts in "
           f"{len(FIELD_PAYLOADS) + len(NESTED_PAYLOADS)} memo fields, the score column's name "
           f"and the cost unit; {shown} of {len(PAYLOADS)} shown literally, no markup obeyed",
           tried=len(PAYLOADS), literal=shown)


class _Elements(HTMLParser):
    def __init__(self):
        super().__init__()
        self.tags: list[str] = []
        self.attrs: list[tuple[str, str | None]] = []
        self.text: list[str] = []

    def handle_starttag(self, tag, attrs):
        self.tags.append(tag)
        self.attrs.extend(attrs)

    def handle_data(self, data):
        self.text.append(data)


def _render(markdown: str) -> _Elements:
    from markdown_it import MarkdownIt

    rendered = MarkdownIt("commonmark").enable("table").enable("strikethrough").render(markdown)
    p = _Elements()
    p.feed(rendered)
    p.close()
    return p


def test_memo_fields_render_as_text_in_the_markdown(record, capsys):
    md = memo_markdown(record)
    p = _render(md)
    # no element or attribute the user's text asked for
    assert not {"script", "img", "div", "a", "font", "para", "b", "del", "s", "super",
                "strike", "h1"} & set(p.tags) - _MEMO_OWN_TAGS, sorted(set(p.tags))
    assert not [a for a in p.attrs if a[0] in ("onclick", "onerror", "href", "src")], p.attrs
    shown = _squash("".join(p.text))  # HTMLParser has turned entities into characters
    missing = [name for name in PAYLOADS if _squash(PAYLOADS[name]) not in shown]
    assert not missing, missing
    assert _squash(SCORE_COLUMN) in shown
    for value in GROUP_VALUES:
        assert _squash(value) in shown, value
    report(capsys, "injection_markdown",
           f"injection (Markdown memo, rendered with markdown-it-py): {len(PAYLOADS)} hostile texts, "
           f"{len(PAYLOADS)} shown as written, 0 elements or attributes from user text "
           f"(tags rendered: {', '.join(sorted(set(p.tags)))})", tried=len(PAYLOADS),
           literal=len(PAYLOADS) - len(missing))


#: Elements the memo's own layout uses (headings, emphasis of its own labels, tables, quotes).
_MEMO_OWN_TAGS = {"h1"}


def test_markdown_headings_come_only_from_the_memo(record):
    """The only h1 is the memo's title line, and it holds the escaped title text."""
    p = _render(memo_markdown(record))
    assert p.tags.count("h1") <= 1


def test_csv_cells_follow_the_formula_rule(capsys):
    risky = [start + rest for start in FORMULA_STARTS
             for rest in ("1+1", "cmd|' /c calc'!A1", "SUM(A1:A9)", "HYPERLINK(\"x\")", "", "-3")]
    safe_text = ["safe", " =1+1", "a=b", "0.5", "x-1", "ab@c", "(1)", "'already"]
    numbers = [-0.5, -3, 0, 1e308, -1e-300, 7, np.float64(-2.5), np.int64(-4), np.float32(-0.25),
               np.int32(12), -0.0]
    rows = [[c] for c in risky + safe_text] + [[x] for x in numbers]
    text = _write(("cell",), rows)  # the writer every CSV export uses
    back = [r[0] for r in csv.reader(io.StringIO(text, newline=""))][1:]
    assert len(back) == len(rows)
    for text, cell in zip(risky, back[: len(risky)]):
        assert cell == "'" + text, (text, cell)
    for text, cell in zip(safe_text, back[len(risky): len(risky) + len(safe_text)]):
        assert cell == text
    for x, cell in zip(numbers, back[len(risky) + len(safe_text):]):
        assert not cell.startswith("'") and float(cell) == float(x), (x, cell)
    assert csv_cell(float("-inf")) == "'-inf" and csv_cell(np.float64("inf")) == "inf"
    assert csv_cell(float("nan")) == "" and csv_cell(np.bool_(True)) == "true"
    report(capsys, "injection_csv",
           f"CSV formula guard (OWASP rule): {len(risky)} risky text cells all prefixed, "
           f"{len(safe_text)} safe texts and {len(numbers)} numbers (negatives, numpy types) "
           f"left as they were", risky=len(risky), safe=len(safe_text), numbers=len(numbers))


def test_csv_exports_of_a_hostile_record(record):
    for text in (threshold_vectors_csv(record), metrics_csv(record)):
        for row in csv.reader(io.StringIO(text)):
            for cell in row:
                if cell.startswith(FORMULA_STARTS):
                    try:
                        float(cell)
                    except ValueError:
                        pytest.fail(f"unguarded text cell {cell!r}")
