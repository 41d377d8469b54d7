"""Report formats: each renders an :class:`optimiser.analysis.Analysis` (computed once after the search) to a file.

This package imports no chemistry module: every number and sentence it shows comes from the analysis. The JSON
result is written beside every report, whatever the format.

Formats: ``html`` (the full report with figures), ``md`` and ``pdf`` (the method as a laboratory method document,
:mod:`optimiser.report.sop`). Adding a format: write a function ``(analysis, path) -> None`` and add one line to
:data:`FORMATS`; the file takes the format's name as its extension, and ``--format`` offers it.
"""
from __future__ import annotations

import unicodedata
from collections.abc import Callable, Collection, Iterable
from pathlib import Path
from typing import TYPE_CHECKING, Any

from . import html
from .html import FIGURES, SECTIONS, render, write_html
from .markdown import render_md, write_md
from .pdf import render_pdf, write_pdf
from .text import fmt, range_text, signed

if TYPE_CHECKING:  # pragma: no cover
    from ..analysis import Analysis

FORMATS: dict[str, Callable[[Analysis, Path], None]] = {
    "html": write_html,
    "md": write_md,
    "pdf": write_pdf,
}
DEFAULT_FORMAT = "html"


def parse_formats(formats: str | Iterable[str]) -> tuple[str, ...]:
    """The report formats asked for: a name, a comma-separated list, or several of either; each once, in order.

    >>> parse_formats(["html,md", "pdf", "md"])
    ('html', 'md', 'pdf')
    """
    from ..errors import UnknownNameError
    items = [formats] if isinstance(formats, str) else list(formats)
    out: list[str] = []
    for item in items:
        for name in str(item).split(","):
            name = name.strip().lower()
            if name not in FORMATS:
                raise UnknownNameError("report format", name, FORMATS)
            if name not in out:
                out.append(name)
    if not out:
        raise UnknownNameError("report format", "", FORMATS)
    return tuple(out)


def prepare(formats: Collection[str]) -> None:
    """Before the search: where a format asked for draws figures (``html``), a process forked now loads matplotlib
    meanwhile (:func:`optimiser.report.html.prepare`); :func:`write` then hands it the figures."""
    if "html" in formats:
        html.prepare()


MAX_NAME_BYTES = 100  # of a report's base name, UTF-8; with ".html" and a "-12" suffix it stays far below 255
_RESERVED = {"con", "prn", "aux", "nul", *(f"com{i}" for i in range(1, 10)), *(f"lpt{i}" for i in range(1, 10))}


def safe_name(name: str, max_bytes: int = MAX_NAME_BYTES) -> str:
    """A file name from a scenario name: letters (any script), digits, - and _ only, at most ``max_bytes`` bytes of
    UTF-8 (cut at a character), never empty, never a name Windows reserves.

    >>> safe_name("well water: hardness (2024)")
    'well_water__hardness__2024'
    >>> len(safe_name("漢" * 80).encode())
    99
    """
    text = unicodedata.normalize("NFC", str(name))
    out = "".join(ch if ch.isalnum() or ch in "-_" else "_" for ch in text).strip("_").lstrip("-")
    out = out.encode("utf-8")[:max_bytes].decode("utf-8", "ignore").rstrip("_")
    if out.lower() in _RESERVED:
        out += "_"
    return out or "scenario"


def report_base(name: str, taken: Collection[str] = ()) -> str:
    """The base name of a run's files (``<base>.html``, ``<base>.json``): :func:`safe_name`, then ``-2``, ``-3``, ...
    while it is among ``taken`` (compared without case, as some file systems do). The one naming rule of ``run`` and
    ``batch``.

    >>> report_base("water", ["water", "Water-2"])
    'water-3'
    """
    lowered = {t.lower() for t in taken}
    base = safe_name(name)
    k = 2
    while base.lower() in lowered:
        suffix = f"-{k}"
        base = safe_name(name, MAX_NAME_BYTES - len(suffix)) + suffix
        k += 1
    return base


def write(result: Any, out_dir: Path, json_text: str, base: str | None = None,
          report_format: str | Iterable[str] = DEFAULT_FORMAT, analysis: Analysis | None = None) -> tuple[Path, Path]:
    """Write DIR/<name>.<format> for each format asked for (:func:`parse_formats`) and DIR/<name>.json together (name
    from the scenario unless given); returns the first format's report and the JSON (the others sit beside it, with
    their format's extension).

    All files are written in full to temporaries first and then renamed, the JSON last
    (:func:`optimiser.results.write_together`): a run's files all appear, or none changes. ``analysis`` is the
    result's analysis when the caller has it; otherwise it is computed here.
    """
    formats = parse_formats(report_format)
    if analysis is None:
        from ..analysis import analyse  # for callers that hold only the search result
        analysis = analyse(result)
    out_dir = Path(out_dir)
    base = report_base(base or result.scenario.name)
    paths = [out_dir / f"{base}.{fmt}" for fmt in formats]
    json_path = out_dir / f"{base}.json"
    from ..results import write_together

    def writer(fmt: str) -> Callable[[Path], None]:
        return lambda tmp: FORMATS[fmt](analysis, tmp)
    write_together([*((p, writer(fmt)) for p, fmt in zip(paths, formats, strict=True)), (json_path, json_text)])
    return paths[0], json_path


__all__ = [
    "DEFAULT_FORMAT",
    "FIGURES",
    "FORMATS",
    "SECTIONS",
    "fmt",
    "parse_formats",
    "prepare",
    "range_text",
    "render",
    "render_md",
    "render_pdf",
    "report_base",
    "safe_name",
    "signed",
    "write",
    "write_html",
    "write_md",
    "write_pdf",
]
