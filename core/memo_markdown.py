"""The threshold memo as Markdown: the same blocks as the PDF, as text.

:func:`memo_markdown` writes the blocks of :func:`core.memo_content.memo_blocks`
as GitHub-flavoured Markdown. User text is escaped (:func:`md_escape`):
Markdown's punctuation is backslash-escaped, ``<`` and ``>`` become
entities (no raw HTML gets through), and inside tables ``|`` is escaped and
line breaks become spaces. Figures are not embedded; the text says they are
in the PDF.
"""

from __future__ import annotations

import re
from pathlib import Path

from core.memo_content import memo_blocks

__all__ = ["memo_markdown", "write_memo_markdown", "md_escape"]

_MD_SPECIAL = re.compile(r"([\\`*_{}\[\]()#+\-.!|~])")


def md_escape(text, *, cell: bool = False) -> str:
    """Text made inert for Markdown (and for HTML inside Markdown)."""
    s = str(text)
    s = s.replace("&", "&amp;").replace("<", "&lt;").replace(">", "&gt;")
    s = _MD_SPECIAL.sub(r"\\\1", s)
    if cell:
        s = s.replace("\r\n", " ").replace("\n", " ").replace("\r", " ")
    else:
        s = s.replace("\r\n", "\n").replace("\r", "\n").replace("\n", "  \n")
    return s


def _table(header, rows) -> list[str]:
    n = len(header)
    out = ["| " + " | ".join(md_escape(h, cell=True) for h in header) + " |",
           "|" + "|".join(["---"] * n) + "|"]
    for r in rows:
        out.append("| " + " | ".join(md_escape(c, cell=True) for c in r) + " |")
    return out


def memo_markdown(record: dict) -> str:
    """The threshold memo of a decision record as Markdown text."""
    lines: list[str] = []
    for b in memo_blocks(record):
        k = b.kind
        if k == "title":
            lines += ["# " + md_escape(b.text), ""]
        elif k == "subtitle":
            lines += ["*" + md_escape(b.text) + "*", ""]
        elif k == "h1":
            lines += ["## " + md_escape(b.text), ""]
        elif k == "h2":
            lines += ["### " + md_escape(b.text), ""]
        elif k == "p":
            lines += [md_escape(b.text), ""]
        elif k == "strong":
            lines += ["**" + md_escape(b.text) + "**", ""]
        elif k == "caution":
            lines += ["> ⚠ " + md_escape(b.text).replace("\n", "\n> "), ""]
        elif k == "table":
            lines += _table(b.header, b.rows) + [""]
        elif k == "kv":
            lines += _table(("Item", "Value"), b.rows) + [""]
        elif k == "signoff":
            rows = [(label, value or "") for label, value in b.rows] + [("Signature", "")]
            lines += _table(("Sign-off", ""), rows) + [""]
        elif k == "figure":
            lines += ["*Figure (in the PDF memo): " + md_escape(b.text) + "*", ""]
        elif k == "pagebreak":
            lines += ["---", ""]
        else:  # pragma: no cover
            raise AssertionError(k)
    return "\n".join(lines).rstrip() + "\n"


def write_memo_markdown(record: dict, path) -> None:
    """Write the memo Markdown of a record (UTF-8)."""
    Path(path).write_text(memo_markdown(record), encoding="utf-8")
