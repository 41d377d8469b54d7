"""The HTML format: one self-contained page (inline SVG figures and styles, no network) rendered from an analysis."""
from __future__ import annotations

import datetime as _dt
import os
import re
from collections.abc import Mapping
from importlib import resources
from pathlib import Path
from typing import TYPE_CHECKING

from .. import __version__
from .text import fmt, pH_text, range_text, share_percent, signed, signed_fixed

if TYPE_CHECKING:  # pragma: no cover
    from ..analysis import Analysis

SECTIONS = ("summary", "why", "tradeoffs", "curve", "speciation", "robustness", "assumptions", "safety", "constants")
FIGURES = ("fig-conditional", "fig-budget", "fig-pareto", "fig-curve", "fig-speciation", "fig-robustness")


def _env():
    import jinja2  # loaded when a page is rendered, not when the command line is parsed
    loader = jinja2.FunctionLoader(lambda name: resources.files("optimiser.report").joinpath(name).read_text(encoding="utf-8"))
    env = jinja2.Environment(loader=loader, autoescape=True, undefined=jinja2.StrictUndefined)
    env.globals.update(fmt=fmt, signed=signed, range_text=range_text, pH_text=pH_text, share_percent=share_percent,
                       signed_fixed=signed_fixed)
    return env


FIGURES_ALWAYS = ("conditional", "pareto")  # figures of figures.py (<name>_figure), in the page's order
FIGURES_OF_A_METHOD = ("budget", "titration", "speciation", "robustness")  # ... drawn where a method is shown
FIGURE_SHARES = (("pareto", "conditional", "budget"), ("titration", "speciation", "robustness"))  # the figures drawn
#   in each of two processes (measured on the demo: 0.57-0.60 s for both, against 0.68-0.77 s with the budget in the
#   second share and 0.72-0.88 s with the Pareto panels and the budget alone in the first)


STANDBY = "figures"  # the name under which a process stands by for a report's figures (:func:`prepare`)


def prepare() -> None:
    """Fork a process that loads matplotlib and draws a first figure while the search goes on, so that the report's
    figures start at once (:func:`optimiser.parallel.stand_by`; nothing where one process is asked for). Loading
    matplotlib and its first figure took 0.4-0.5 s on the demo, before the figures themselves."""
    from .. import parallel
    parallel.stand_by(STANDBY, f"{__package__}.figures", "warm_up")


def _draw(job: tuple[Analysis, tuple[str, ...]]) -> list[str]:
    """The figures named in ``job`` of its analysis, as SVG text."""
    from . import figures  # matplotlib is loaded only when a page is drawn
    analysis, names = job
    return [getattr(figures, f"{n}_figure")(analysis) for n in names]


def _figures(analysis: Analysis) -> dict[str, str]:
    """Each figure as SVG text; the figures shared out over two processes where there are cores for them (the
    drawing is the report's largest cost; the SVG does not depend on the process, see :mod:`optimiser.report.figures`),
    drawn by the process standing by for them where :func:`prepare` made one."""
    from .. import parallel
    names = FIGURES_ALWAYS + (FIGURES_OF_A_METHOD if analysis.method is not None else ())
    shares = [part for part in (tuple(n for n in share if n in names) for share in FIGURE_SHARES) if part]
    jobs = [(analysis, part) for part in shares]
    standby = parallel.take(STANDBY)
    drawn = standby.map(_draw, jobs) if standby is not None else None
    if drawn is None:
        drawn = parallel.fork_map(_draw, jobs)
    svg = dict(zip([n for s in shares for n in s], [x for part in drawn for x in part]))
    return {n: svg[n] for n in names}


def build_date(environ: Mapping[str, str] = os.environ) -> str | None:
    """The date a report shows: from SOURCE_DATE_EPOCH (seconds since 1970, UTC) when it is set, else none, so that
    identical runs write identical files (the reproducible-builds convention).

    >>> build_date({"SOURCE_DATE_EPOCH": "1700000000"}), build_date({})
    ('2023-11-14', None)
    """
    epoch = environ.get("SOURCE_DATE_EPOCH", "").strip()
    if not epoch.isdigit():
        return None
    return _dt.datetime.fromtimestamp(int(epoch), _dt.timezone.utc).strftime("%Y-%m-%d")


def _scrolling_tables(page: str) -> str:
    """Every table inside a wrapper as wide as the page that scrolls sideways when the table is wider (a phone), so
    that no table widens the page. (Cell text is escaped, so a literal ``<table`` is always markup.)"""
    page = re.sub(r"<table\b", '<div class="table-scroll"><table', page)
    return page.replace("</table>", "</table></div>")


def render(analysis: Analysis, date: str | None = None) -> str:
    """The report as one HTML string (``date``: as given, else :func:`build_date`)."""
    result = analysis.result
    css = resources.files("optimiser.report").joinpath("style.css").read_text(encoding="utf-8")
    return _scrolling_tables(_env().get_template("template.html.j2").render(
        a=analysis, sc=analysis.scenario, result=result, m=analysis.method, figs=_figures(analysis), css=css,
        version=__version__, date=date or build_date()))


def write_html(analysis: Analysis, path: Path) -> None:
    """Write the HTML report to ``path`` (atomically)."""
    from ..results import write_atomic
    write_atomic(path, render(analysis))
