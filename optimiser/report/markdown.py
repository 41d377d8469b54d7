"""The Markdown format: the method document as plain Markdown (CommonMark with pipe tables), for a document system."""
from __future__ import annotations

import re
from pathlib import Path
from typing import TYPE_CHECKING

from .sop import blocks

if TYPE_CHECKING:  # pragma: no cover
    from ..analysis import Analysis

_SPECIAL = re.compile(r"([\\`*_\[\]<>|#])")


def escape(text: str) -> str:
    r"""Text with Markdown's special characters escaped, so that it prints as written.

    >>> escape("a_b | c*d")
    'a\\_b \\| c\\*d'
    """
    return _SPECIAL.sub(r"\\\1", " ".join(str(text).split()))


def unescape(text: str) -> str:
    """The text :func:`escape` was given (whitespace runs as one space)."""
    return re.sub(r"\\(.)", r"\1", text)


def render_md(analysis: Analysis) -> str:
    """The method document as one Markdown string."""
    out: list[str] = []
    for kind, content in blocks(analysis):
        if kind == "title":
            out += [f"# {escape(content)}", ""]
        elif kind == "status":
            out += [f"> {escape(content)}", ""]
        elif kind == "heading":
            out += [f"## {escape(content)}", ""]
        elif kind == "paragraph":
            out += [escape(content), ""]
        elif kind == "items":
            ordered, items = content
            out += [f"{k}. {escape(x)}" if ordered else f"- {escape(x)}" for k, x in enumerate(items, 1)] + [""]
        elif kind == "table":
            header, *rows = content
            out.append("| " + " | ".join(map(escape, header)) + " |")
            out.append("|" + "---|" * len(header))
            out += ["| " + " | ".join(map(escape, row)) + " |" for row in rows]
            out.append("")
    return "\n".join(out).rstrip("\n") + "\n"


def write_md(analysis: Analysis, path: Path) -> None:
    """Write the Markdown method document to ``path`` (atomically)."""
    from ..results import write_atomic
    write_atomic(path, render_md(analysis))
