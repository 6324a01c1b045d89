"""The threshold memo as PDF, built without a browser (reportlab + static matplotlib figures).

:func:`memo_pdf` lays out the blocks of :func:`core.memo_content.memo_blocks`
on A4 pages. Fonts: matplotlib's bundled DejaVu Sans (regular, bold) and
DejaVu Sans Mono, embedded in the PDF, so ≥, π and − print everywhere.
Every piece of text is escaped for reportlab's paragraph markup (``&``,
``<``, ``>``), and long words (hashes, file names) are split to fit their
column. Figures come from :mod:`core.memo_figures` as PNG images. Every page
carries the short caution, the record's digest and the page number.
"""

from __future__ import annotations

import io
from pathlib import Path
from xml.sax.saxutils import escape

import matplotlib
from reportlab.lib import colors
from reportlab.lib.enums import TA_LEFT
from reportlab.lib.pagesizes import A4
from reportlab.lib.styles import ParagraphStyle
from reportlab.lib.units import mm
from reportlab.pdfbase import pdfmetrics
from reportlab.pdfbase.ttfonts import TTFont
from reportlab.platypus import (
    Image,
    KeepTogether,
    PageBreak,
    Paragraph,
    SimpleDocTemplate,
    Spacer,
    Table,
    TableStyle,
)

from core import cautions
from core.memo_content import Block, memo_blocks, memo_title
from core.memo_figures import available_figures, figure_png

__all__ = ["memo_pdf", "write_memo_pdf", "render_pdf", "pdf_escape", "FONT", "FONT_BOLD", "FONT_MONO"]

FONT, FONT_BOLD, FONT_MONO = "FulcrumSans", "FulcrumSans-Bold", "FulcrumMono"
_FONT_FILES = {FONT: "DejaVuSans.ttf", FONT_BOLD: "DejaVuSans-Bold.ttf", FONT_MONO: "DejaVuSansMono.ttf"}
_registered = False

_PAGE_W, _PAGE_H = A4
_MARGIN = 16 * mm
_FRAME_PADDING = 6  # platypus frames pad 6 pt on each side
_WIDTH = _PAGE_W - 2 * _MARGIN - 2 * _FRAME_PADDING

_INK = colors.HexColor("#1b1b1b")
_ACCENT = colors.HexColor("#1f4e79")
_CAUTION_BG = colors.HexColor("#fff4e0")
_CAUTION_EDGE = colors.HexColor("#d08a00")
_GRID = colors.HexColor("#b8c2cc")
_HEAD_BG = colors.HexColor("#e8eef4")


def _register_fonts() -> None:
    global _registered
    if _registered:
        return
    ttf = Path(matplotlib.get_data_path()) / "fonts" / "ttf"
    for name, file in _FONT_FILES.items():
        pdfmetrics.registerFont(TTFont(name, str(ttf / file)))
    pdfmetrics.registerFontFamily(FONT, normal=FONT, bold=FONT_BOLD, italic=FONT, boldItalic=FONT_BOLD)
    _registered = True


def pdf_escape(text) -> str:
    """Text made safe for reportlab's paragraph markup; line breaks kept."""
    return escape(str(text)).replace("\n", "<br/>")


def _styles() -> dict[str, ParagraphStyle]:
    base = dict(fontName=FONT, textColor=_INK, alignment=TA_LEFT, splitLongWords=1)
    return {
        "title": ParagraphStyle("title", fontName=FONT_BOLD, fontSize=17, leading=21,
                                textColor=_ACCENT, spaceAfter=3, splitLongWords=1),
        "subtitle": ParagraphStyle("subtitle", fontSize=8, leading=10.5, spaceAfter=8,
                                   textColor=colors.HexColor("#555555"), **{k: v for k, v in base.items()
                                                                           if k != "textColor"}),
        "h1": ParagraphStyle("h1", fontName=FONT_BOLD, fontSize=12.5, leading=16, spaceBefore=9,
                             spaceAfter=4, textColor=_ACCENT, splitLongWords=1),
        "h2": ParagraphStyle("h2", fontName=FONT_BOLD, fontSize=10.5, leading=13, spaceBefore=6,
                             spaceAfter=3, textColor=_ACCENT, splitLongWords=1),
        "p": ParagraphStyle("p", fontSize=9, leading=12, spaceAfter=4, **base),
        "strong": ParagraphStyle("strong", fontName=FONT_BOLD, fontSize=12, leading=15,
                                 spaceBefore=2, spaceAfter=5, textColor=_INK, splitLongWords=1),
        "caution": ParagraphStyle("caution", fontSize=8.3, leading=11, **base),
        "cell": ParagraphStyle("cell", fontSize=7.6, leading=9.4, **base),
        "head": ParagraphStyle("head", fontName=FONT_BOLD, fontSize=7.6, leading=9.4,
                               textColor=_INK, splitLongWords=1),
        "caption": ParagraphStyle("caption", fontSize=7.6, leading=9.5, spaceAfter=6,
                                  textColor=colors.HexColor("#555555"),
                                  **{k: v for k, v in base.items() if k != "textColor"}),
    }


def _table(block: Block, st) -> Table:
    header = [Paragraph(pdf_escape(h), st["head"]) for h in block.header]
    rows = [[Paragraph(pdf_escape(c), st["cell"]) for c in r] for r in block.rows]
    n = len(block.header) or (len(block.rows[0]) if block.rows else 1)
    widths = block.widths if len(block.widths) == n else tuple([1.0 / n] * n)
    t = Table([header] + rows if header else rows, colWidths=[w * _WIDTH for w in widths],
              repeatRows=1 if header else 0)
    style = [("GRID", (0, 0), (-1, -1), 0.4, _GRID), ("VALIGN", (0, 0), (-1, -1), "TOP"),
             ("TOPPADDING", (0, 0), (-1, -1), 2), ("BOTTOMPADDING", (0, 0), (-1, -1), 2),
             ("LEFTPADDING", (0, 0), (-1, -1), 3), ("RIGHTPADDING", (0, 0), (-1, -1), 3)]
    if header:
        style.append(("BACKGROUND", (0, 0), (-1, 0), _HEAD_BG))
    t.setStyle(TableStyle(style))
    return t


def _kv(block: Block, st) -> Table:
    rows = [[Paragraph(pdf_escape(k), st["head"]), Paragraph(pdf_escape(v), st["cell"])]
            for k, v in block.rows]
    t = Table(rows, colWidths=[0.34 * _WIDTH, 0.66 * _WIDTH])
    t.setStyle(TableStyle([("LINEBELOW", (0, 0), (-1, -1), 0.3, _GRID),
                           ("VALIGN", (0, 0), (-1, -1), "TOP"),
                           ("TOPPADDING", (0, 0), (-1, -1), 2), ("BOTTOMPADDING", (0, 0), (-1, -1), 2),
                           ("LEFTPADDING", (0, 0), (-1, -1), 2)]))
    return t


def _caution(block: Block, st) -> Table:
    t = Table([[Paragraph(pdf_escape(block.text), st["caution"])]], colWidths=[_WIDTH])
    t.setStyle(TableStyle([("BACKGROUND", (0, 0), (-1, -1), _CAUTION_BG),
                           ("LINEBEFORE", (0, 0), (0, -1), 2.2, _CAUTION_EDGE),
                           ("TOPPADDING", (0, 0), (-1, -1), 3), ("BOTTOMPADDING", (0, 0), (-1, -1), 3),
                           ("LEFTPADDING", (0, 0), (-1, -1), 6)]))
    return t


def _signoff(block: Block, st) -> Table:
    rows = []
    for label, value in block.rows:
        shown = value if value else " "
        rows.append([Paragraph(pdf_escape(label), st["head"]), Paragraph(pdf_escape(shown), st["p"])])
    rows.append([Paragraph("Signature", st["head"]), Paragraph(" ", st["p"])])
    t = Table(rows, colWidths=[0.25 * _WIDTH, 0.75 * _WIDTH], rowHeights=None)
    t.setStyle(TableStyle([("LINEBELOW", (1, 0), (1, -1), 0.6, _INK),
                           ("VALIGN", (0, 0), (-1, -1), "BOTTOM"),
                           ("TOPPADDING", (0, 0), (-1, -1), 9), ("BOTTOMPADDING", (0, 0), (-1, -1), 2)]))
    return t


def _figure(record, block: Block, st, have: set):
    if block.name not in have:
        return [Paragraph(pdf_escape(f"{block.text} (no data for this figure)"), st["caption"])]
    png = figure_png(record, block.name)
    img = Image(io.BytesIO(png))
    scale = _WIDTH / img.imageWidth
    img.drawWidth = _WIDTH
    img.drawHeight = img.imageHeight * scale
    return [KeepTogether([img, Paragraph(pdf_escape(block.text), st["caption"])])]


def _flowables(blocks, st, record: dict | None = None) -> list:
    have = set(available_figures(record)) if record is not None else set()
    out = []
    for block in blocks:
        k = block.kind
        if k in ("title", "subtitle", "h1", "h2", "p", "strong"):
            out.append(Paragraph(pdf_escape(block.text), st[k]))
        elif k == "caution":
            out += [_caution(block, st), Spacer(1, 3)]
        elif k == "table":
            out += [_table(block, st), Spacer(1, 5)]
        elif k == "kv":
            out += [_kv(block, st), Spacer(1, 5)]
        elif k == "signoff":
            out += [_signoff(block, st), Spacer(1, 6)]
        elif k == "figure" and record is not None:
            out += _figure(record, block, st, have)
        elif k == "pagebreak":
            out.append(PageBreak())
        else:  # pragma: no cover - every kind is listed in Block; figures need the record
            raise AssertionError(k)
    return out


def render_pdf(blocks, *, title: str, subject: str, footer: str, software_version: str,
               author: str = "", record: dict | None = None) -> bytes:
    """PDF bytes of memo blocks (:class:`core.memo_content.Block`) on A4 in the memo's styles.

    Every page carries the short caution and ``footer`` with the page number; ``record`` (a
    decision record) is needed only for ``figure`` blocks. The threshold, recheck and
    comparison memos all render through here.
    """
    _register_fonts()
    st = _styles()
    buf = io.BytesIO()

    def decorate(canvas, doc):
        canvas.saveState()
        canvas.setFont(FONT, 6.8)
        canvas.setFillColor(colors.HexColor("#666666"))
        canvas.drawString(_MARGIN, 9 * mm, cautions.SHORT)
        canvas.drawRightString(_PAGE_W - _MARGIN, 5.5 * mm, f"{footer} · page {doc.page}")
        canvas.restoreState()

    doc = SimpleDocTemplate(buf, pagesize=A4, leftMargin=_MARGIN, rightMargin=_MARGIN,
                            topMargin=14 * mm, bottomMargin=16 * mm, title=title, author=author,
                            subject=subject, creator=f"Fulcrum {software_version}")
    doc.build(_flowables(blocks, st, record), onFirstPage=decorate, onLaterPages=decorate)
    return buf.getvalue()


def memo_pdf(record: dict) -> bytes:
    """The threshold memo of a decision record as PDF bytes."""
    digest = record.get("integrity", {}).get("sha256", "")[:16]
    return render_pdf(memo_blocks(record), title=memo_title(record), subject="Threshold memo",
                      footer=f"Fulcrum threshold memo · record {digest}…",
                      software_version=record.get("software_version", ""),
                      author=record["memo"].get("author") or "", record=record)


def write_memo_pdf(record: dict, path) -> None:
    """Write the memo PDF of a record."""
    Path(path).write_bytes(memo_pdf(record))
