"""The HTML format: one self-contained page (inline SVG figures and styles, no network) rendered from an analysis."""
from __future__ import annotations

import datetime as _dt
from importlib import resources
from pathlib import Path
from typing import TYPE_CHECKING

from .. import __version__
from .text import fmt, range_text, signed

if TYPE_CHECKING:  # pragma: no cover
    from ..analysis import Analysis

SECTIONS = ("summary", "why", "tradeoffs", "curve", "speciation", "robustness", "assumptions", "safety", "constants")
FIGURES = ("fig-conditional", "fig-budget", "fig-pareto", "fig-curve", "fig-speciation", "fig-robustness")


def _env():
    import jinja2  # loaded when a page is rendered, not when the command line is parsed
    loader = jinja2.FunctionLoader(lambda name: resources.files("optimiser.report").joinpath(name).read_text(encoding="utf-8"))
    env = jinja2.Environment(loader=loader, autoescape=True, undefined=jinja2.StrictUndefined)
    env.globals.update(fmt=fmt, signed=signed, range_text=range_text)
    return env


def _figures(analysis: Analysis) -> dict[str, str]:
    from . import figures  # matplotlib is loaded only when a page is drawn
    figs = {"conditional": figures.conditional_figure(analysis), "pareto": figures.pareto_figure(analysis)}
    if analysis.method is not None:
        figs.update(budget=figures.budget_figure(analysis),
                    titration=figures.titration_figure(analysis), speciation=figures.speciation_figure(analysis),
                    robustness=figures.robustness_figure(analysis))
    return figs


def render(analysis: Analysis, date: str | None = None) -> str:
    """The report as one HTML string."""
    result = analysis.result
    css = resources.files("optimiser.report").joinpath("style.css").read_text(encoding="utf-8")
    return _env().get_template("template.html.j2").render(
        a=analysis, sc=analysis.scenario, result=result, m=analysis.method, figs=_figures(analysis), css=css,
        version=__version__, date=date or _dt.datetime.now(_dt.timezone.utc).strftime("%Y-%m-%d %H:%M UTC"))


def write_html(analysis: Analysis, path: Path) -> None:
    """Write the HTML report to ``path`` (atomically)."""
    from ..results import write_atomic
    write_atomic(path, render(analysis))
