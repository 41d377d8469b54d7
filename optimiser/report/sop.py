"""What the SOP formats (Markdown, PDF) share: the method document's blocks in reading order (no chemistry here).

A block is ``(kind, content)``: ``("title", text)``, ``("status", text)``, ``("heading", text)``,
``("paragraph", text)``, ``("items", (ordered, texts))`` or ``("table", rows)`` with the header first. A format walks
the blocks and lays each out; the words and numbers are the analysis's own.
"""
from __future__ import annotations

from collections.abc import Iterator
from typing import TYPE_CHECKING, Any

if TYPE_CHECKING:  # pragma: no cover
    from ..analysis import Analysis

NO_METHOD = ("No method in the search space meets the criteria, and no candidate could be described: see the HTML "
             "report's alternatives for what stops each one.")


def blocks(analysis: Analysis) -> Iterator[tuple[str, Any]]:
    """The method document of ``analysis`` as blocks, numbered sections in order."""
    doc = analysis.document
    sc = analysis.scenario
    if doc is None:
        yield "title", f"Method: {sc.analyte_label} - {sc.name}"
        yield "status", NO_METHOD
        for note in analysis.result.notes:
            yield "paragraph", note
        return
    yield "title", doc.title
    yield "status", doc.status
    for k, section in enumerate(doc.sections, 1):
        yield "heading", f"{k}. {section.title}"
        if not analysis.meets_criteria and section.id in ("standardisation", "procedure", "calculation"):
            yield "paragraph", "Not given for a method that fails the criteria (see the HTML report, section 2)."
            continue
        for p in section.paragraphs:
            yield "paragraph", p
        if section.items:
            yield "items", (section.ordered, section.items)
        if section.table:
            yield "table", section.table
