"""Report formats: each renders an :class:`optimiser.analysis.Analysis` (computed once after the search) to a file.

This package imports no chemistry module: every number and sentence it shows comes from the analysis. The JSON
result is written beside every report, whatever the format.

Adding a format: write a function ``(analysis, path) -> None`` and add one line to :data:`FORMATS`; the file takes
the format's name as its extension.
"""
from __future__ import annotations

from collections.abc import Callable
from pathlib import Path
from typing import TYPE_CHECKING, Any

from .html import FIGURES, SECTIONS, render, write_html
from .text import fmt, range_text, signed

if TYPE_CHECKING:  # pragma: no cover
    from ..analysis import Analysis

FORMATS: dict[str, Callable[[Analysis, Path], None]] = {
    "html": write_html,
}
DEFAULT_FORMAT = "html"


def safe_name(name: str) -> str:
    """A file name from a scenario name (letters, digits, - and _ only)."""
    out = "".join(ch if ch.isalnum() or ch in "-_" else "_" for ch in name).strip("_")
    return out[:80] or "scenario"


def write(result: Any, out_dir: Path, json_text: str, base: str | None = None, report_format: str = DEFAULT_FORMAT,
          analysis: Analysis | None = None) -> tuple[Path, Path]:
    """Write DIR/<name>.<report_format> and DIR/<name>.json atomically (name from the scenario unless given); returns both.

    ``analysis`` is the result's analysis when the caller has it; otherwise it is computed here.
    """
    from ..errors import UnknownNameError
    if report_format not in FORMATS:
        raise UnknownNameError("report format", report_format, FORMATS)
    if analysis is None:
        from ..analysis import analyse  # for callers that hold only the search result
        analysis = analyse(result)
    out_dir = Path(out_dir)
    base = safe_name(base or result.scenario.name)
    report_path, json_path = out_dir / f"{base}.{report_format}", out_dir / f"{base}.json"
    from ..results import write_atomic
    write_atomic(json_path, json_text)
    FORMATS[report_format](analysis, report_path)
    return report_path, json_path


__all__ = [
    "DEFAULT_FORMAT",
    "FIGURES",
    "FORMATS",
    "SECTIONS",
    "fmt",
    "range_text",
    "render",
    "safe_name",
    "signed",
    "write",
    "write_html",
]
