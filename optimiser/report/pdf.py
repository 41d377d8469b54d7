"""The PDF format: the method document laid out with fpdf2 in its built-in Helvetica.

The built-in fonts cover Latin-1 only, and no font file is shipped: every character outside it is written as its
closest ASCII (compatibility decomposition first, so a subscript 2 becomes 2; then a short table; then '?').
The file carries a fixed creation date, so that identical runs give identical files.
"""
from __future__ import annotations

import datetime as _dt
import unicodedata
from pathlib import Path
from typing import TYPE_CHECKING

from .sop import blocks

if TYPE_CHECKING:  # pragma: no cover
    from ..analysis import Analysis

FIXED_DATE = _dt.datetime(2000, 1, 1, tzinfo=_dt.timezone.utc)  # no clock time in the file: runs compare byte for byte
_ASCII = {"\u2192": "->", "\u2190": "<-", "\u2264": "<=", "\u2265": ">=", "\u2212": "-", "\u2013": "-", "\u2014": "-",
          "\u2018": "'", "\u2019": "'", "\u201c": '"', "\u201d": '"', "\u2026": "...", "\u0394": "Delta ", "\u03b1": "alpha",
          "\u03b2": "beta", "\u03b3": "gamma", "\u00a0": " "}


def latin1(text: str) -> str:
    """``text`` in the characters the built-in PDF fonts have (Latin-1).

    >>> latin1("H₂O → 25 °C ≤ 1·2")
    'H2O -> 25 °C <= 1·2'
    """
    out = []
    for ch in str(text):
        if ord(ch) < 256:
            out.append(ch)
            continue
        decomposed = unicodedata.normalize("NFKD", ch)
        if all(ord(c) < 256 for c in decomposed) and decomposed.strip():
            out.append("".join(c for c in decomposed if not unicodedata.combining(c)))
        else:
            out.append(_ASCII.get(ch, "?"))
    return "".join(out)


def render_pdf(analysis: Analysis) -> bytes:
    """The method document as PDF bytes (A4, Helvetica)."""
    from fpdf import FPDF  # loaded only when a PDF is written
    from fpdf.enums import XPos, YPos

    pdf = FPDF(format="A4")
    pdf.set_creation_date(FIXED_DATE)
    pdf.set_auto_page_break(auto=True, margin=15)
    pdf.set_margins(18, 15, 18)
    pdf.add_page()
    width = pdf.w - pdf.l_margin - pdf.r_margin
    newline = {"new_x": XPos.LMARGIN, "new_y": YPos.NEXT}

    def text(line: str, size: float = 10, style: str = "", indent: float = 0.0, after: float = 1.5) -> None:
        pdf.set_font("Helvetica", style, size)
        pdf.set_x(pdf.l_margin + indent)
        pdf.multi_cell(width - indent, size * 0.5, latin1(line), **newline)
        pdf.ln(after)

    for kind, content in blocks(analysis):
        if kind == "title":
            text(content, 15, "B", after=2)
        elif kind == "status":
            text(content, 10, "I", after=3)
        elif kind == "heading":
            pdf.ln(2)
            text(content, 12, "B")
        elif kind == "paragraph":
            text(content)
        elif kind == "items":
            ordered, items = content
            for k, item in enumerate(items, 1):
                text((f"{k}. " if ordered else "- ") + item, indent=3, after=1)
        elif kind == "table":
            header, *rows = content
            pdf.set_font("Helvetica", "", 8)
            # columns as wide as their longest texts suggest, within limits (a recipe gets more room than a role)
            weights = tuple(min(60, max(10, max(len(str(r[k])) for r in content) / 3)) for k in range(len(header)))
            with pdf.table(text_align="LEFT", line_height=4, col_widths=weights) as table:
                for row in (header, *rows):
                    cells = table.row()
                    for cell in row:
                        cells.cell(latin1(cell))
            pdf.ln(2)
    return bytes(pdf.output())


def write_pdf(analysis: Analysis, path: Path) -> None:
    """Write the PDF method document to ``path`` (``report.write`` makes it atomic, through a temporary file)."""
    Path(path).write_bytes(render_pdf(analysis))
