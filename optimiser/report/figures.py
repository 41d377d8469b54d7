"""Report figures as inline SVG (matplotlib, Agg backend), readable in greyscale.

Each metal keeps one line style and marker in every figure, so the figures read without colour. Each figure draws
an :class:`optimiser.analysis.Analysis`: the arrays of its search result, and the analysis's own tables and labels.
"""
from __future__ import annotations

import hashlib
import io
import re
from typing import TYPE_CHECKING

import matplotlib
import matplotlib.ticker

matplotlib.use("Agg")
import matplotlib.pyplot as plt  # noqa: E402
import numpy as np  # noqa: E402

if TYPE_CHECKING:  # pragma: no cover
    from ..analysis import Analysis

STYLES = [("-", "o"), ("--", "s"), ("-.", "^"), (":", "D"), ((0, (5, 1, 1, 1)), "v"), ((0, (1, 1)), "P"), ((0, (8, 2)), "X")]
COLOURS = ["#1b4f72", "#a04000", "#196f3d", "#6c3483", "#7b7d7d", "#b7950b", "#922b21"]

# svg.hashsalt fixed: matplotlib salts its clip-path ids with a random uuid otherwise, and identical runs must give
# identical files (so must the figure ids below, taken from the SVG's content, and the metadata, written without a date)
plt.rcParams.update({"font.size": 9, "axes.grid": True, "grid.alpha": 0.3, "svg.fonttype": "none",
                     "font.family": "sans-serif", "figure.dpi": 100, "svg.hashsalt": "optimiser-report"})
SVG_METADATA = {"Date": None, "Creator": None}


def _style(i: int) -> dict:
    ls, mk = STYLES[i % len(STYLES)]
    return {"linestyle": ls, "marker": mk, "color": COLOURS[i % len(COLOURS)], "markevery": 0.1, "markersize": 4}


def _svg(fig) -> str:
    buf = io.StringIO()
    fig.savefig(buf, format="svg", bbox_inches="tight", metadata=SVG_METADATA)
    plt.close(fig)
    text = buf.getvalue()
    text = text[text.index("<svg"):]
    # unique ids per figure so that several inline SVGs do not share clip-path ids; from the content, not from
    # Python's hash() (salted per process), so that identical runs give identical ids
    tag = "f" + hashlib.sha256(text.encode("utf-8")).hexdigest()[:10]
    text = re.sub(r'id="([^"]+)"', lambda m: f'id="{tag}-{m.group(1)}"', text)
    text = re.sub(r'url\(#([^)]+)\)', lambda m: f"url(#{tag}-{m.group(1)})", text)
    text = re.sub(r'xlink:href="#([^"]+)"', lambda m: f'xlink:href="#{tag}-{m.group(1)}"', text)
    return text


def _legend_below(fig, handles: list, labels: list, ncol: int = 2) -> None:
    """The figure's legend under its axes (and their labels), never over a curve."""
    fig.tight_layout()
    fig.legend(handles, labels, fontsize=7, ncol=ncol, loc="upper center", bbox_to_anchor=(0.5, 0.0), frameon=False)


def warm_up() -> None:
    """Draw a small figure of every kind of element the report's figures hold (lines with markers, scatter, text,
    a legend below, ticks), so that matplotlib's one-time work (fonts found and loaded, the SVG writer set up) is done
    before the first figure of a report; a process standing by for the figures runs this while the search goes on."""
    fig, ax = plt.subplots(figsize=(3.2, 2.6))
    ax.plot([0.0, 1.0], [0.0, 1.0], label="a", **_style(0))
    ax.scatter([0.5], [0.5], marker="*", s=120, color="black", label="b")
    ax.annotate("text", (0.5, 1.0), ha="left", va="top", fontsize=8)
    ax.set_xlabel("pH")
    ax.set_ylabel("log K' / log(L/mol)")
    _legend_below(fig, *ax.get_legend_handles_labels())
    _svg(fig)


def conditional_figure(analysis: Analysis) -> str:
    result = analysis.result
    cc = result.conditional
    pH = cc["pH"]
    fig, ax = plt.subplots(figsize=(6.4, 3.6))
    for i, m in enumerate(analysis.metals):
        st = _style(i)
        role = "analyte" if m in result.scenario.sample.analyte else "interferent"
        if not np.any(np.isfinite(cc[m])):  # no constant with this titrant: no curve (the table says so)
            continue
        ax.plot(pH, cc[m], label=f"{m} ({role}), with the method's ligands", **st)
        st2 = dict(st, linestyle=":", marker=None, alpha=0.6)
        ax.plot(pH, cc[m + " (no ligands)"], label=f"{m}, no buffer or masking ligand", **st2)
    if result.recommended is not None:
        ax.axvline(result.recommended.candidate.pH, color="black", lw=1)
        ax.annotate("recommended pH", (result.recommended.candidate.pH, ax.get_ylim()[1]), ha="left", va="top", fontsize=8)
    ax.set_xlabel("pH")
    ax.set_ylabel(f"log K' (conditional, {analysis.log_K_table.titrant}) / log(L/mol)")
    _legend_below(fig, *ax.get_legend_handles_labels(), ncol=2)
    return _svg(fig)


def pareto_figure(analysis: Analysis) -> str:
    result = analysis.result
    objs = list(result.objectives)
    labels = {"error": "error by cause / %", "selectivity": "-(selectivity margin) / log units", "sharpness": "sharpness / mL",
              "hazard": "hazard level (0-4)", "complexity": "bench complexity"}
    F = np.array([a.evaluation.F for a in result.front]) if result.front else np.zeros((0, len(objs)))
    pairs = [(objs[0], o) for o in objs[1:]] if len(objs) > 1 else [(objs[0], objs[0])]
    n = len(pairs)
    cols = min(n, 2)  # a grid of two columns: a row of four panels would be a strip too low to read on a phone
    rows = -(-n // cols)
    fig, axes = plt.subplots(rows, cols, figsize=(3.2 * cols, 2.6 * rows), squeeze=False)
    for ax in axes.flat[n:]:
        ax.set_visible(False)
    strategies = sorted({a.strategy for a in result.front})
    for ax, (a, b) in zip(axes.flat, pairs):
        ia, ib = objs.index(a), objs.index(b)
        for k, strat in enumerate(strategies):
            sel = [j for j, alt in enumerate(result.front) if alt.strategy == strat]
            st = _style(k)
            ax.scatter(F[sel, ia], F[sel, ib], marker=st["marker"], s=22, facecolors="none", edgecolors=st["color"], label=strat)
        if result.recommended is not None:
            f = result.recommended.F
            ax.scatter([f[ia]], [f[ib]], marker="*", s=120, color="black", label="recommended")
        ax.set_xlabel(labels[a])
        ax.set_ylabel(labels[b])
    _legend_below(fig, *axes[0][0].get_legend_handles_labels(), ncol=min(len(strategies) + 1, 4))
    return _svg(fig)


def titration_figure(analysis: Analysis) -> str:
    t = analysis.result.recommended_titration
    fig, ax = plt.subplots(figsize=(6.4, 3.8))
    order = [m for m in analysis.metals if m in t.pM] + [m for m in t.pM if m not in analysis.metals]
    order = [m for m in order if np.isfinite(t.pM[m]).any()]  # a slow analyte held inert has no free ion on the curve
    for i, m in enumerate(order):
        if np.any(np.isfinite(t.pM[m])):  # a metal no step's solution holds has no curve
            ax.plot(t.volume_mL, t.pM[m], label=f"p{m}", **_style(i))
    lo_hi = None
    if t.endpoint_mL is not None and t.sharpness_mL is not None and len(t.endpoints) == 1:
        lo_hi = (t.endpoint_mL - t.sharpness_mL / 2, t.endpoint_mL + t.sharpness_mL / 2)
        ax.axvspan(*lo_hi, color="0.85", label="indicator turning (10-90 %)")
    read = [ep for ep in t.endpoints if not ep.derived]
    if len(read) > 1:  # a multi-step strategy: each step's end point where its curve starts, and where the steps meet
        lo_hi = None
        for k, ep in enumerate(read):
            if k:
                ax.axvline(ep.start_mL, color="0.5", lw=0.8, linestyle=":")
            if ep.volume_mL is not None:
                x = ep.start_mL + ep.volume_mL
                ax.axvline(x, color="black", lw=1.5, linestyle=["-", "-.", (0, (5, 1))][k % 3],
                           label=f"end point {k + 1} ({ep.label}) {ep.volume_mL:.2f} mL")
    else:
        ax.axvline(t.equivalence_mL, color="black", lw=1, linestyle="--", label=f"equivalence {t.equivalence_mL:.2f} mL")
    if t.endpoint_mL is not None and len(read) <= 1:
        ax.axvline(t.endpoint_mL, color="black", lw=1.5, label=f"end point {t.endpoint_mL:.2f} mL")
    ax2 = ax.twinx()
    ax2.plot(t.volume_mL, np.clip(t.turned, 0, 1) * 100, color="0.4", lw=1, linestyle=(0, (2, 2)), label="indicator turned")
    ax2.set_ylabel("indicator turned / %")
    ax2.set_ylim(-5, 105)
    ax2.grid(False)
    ax.set_xlabel(analysis.volume_label)
    ax.set_ylabel("pM = -log10 [M] (free metal ion)")
    h1, l1 = ax.get_legend_handles_labels()
    h2, l2 = ax2.get_legend_handles_labels()
    _legend_below(fig, h1 + h2, l1 + l2, ncol=3)
    return _svg(fig)


HATCHES = ["", "///", "...", "xx", "\\\\", "--", "oo", "++"]


def budget_figure(analysis: Analysis) -> str:
    """The error split by cause, as simulated (grey) and after standardisation (black), with the target."""
    rows = analysis.budget
    fig, ax = plt.subplots(figsize=(6.4, 0.45 * max(len(rows), 1) + 1.3))
    y = np.arange(len(rows))
    ax.barh(y - 0.18, [r.part_percent for r in rows], height=0.34, color="0.75", edgecolor="black", linewidth=0.5,
            label="as simulated")
    ax.barh(y + 0.18, [r.standardised_percent for r in rows], height=0.34, color="0.1", edgecolor="black",
            linewidth=0.5, hatch="///", label="after standardisation")
    target = analysis.scenario.targets.max_error_percent
    for x in (-target, target):
        ax.axvline(x, color="black", lw=1, linestyle="--")
    ax.axvline(0, color="black", lw=0.8)
    ax.set_yticks(y)
    ax.set_yticklabels([r.label for r in rows], fontsize=7)
    ax.invert_yaxis()
    ax.set_xlabel("part of the titration error / % of the analyte")
    ax.legend(fontsize=7, loc="upper center", bbox_to_anchor=(0.5, -0.3), ncol=2)
    return _svg(fig)


def speciation_figure(analysis: Analysis) -> str:
    rows = [(r.label, r.shares) for r in analysis.speciation]
    fig, ax = plt.subplots(figsize=(6.4, 0.35 * len(rows) + 1.2))
    y = np.arange(len(rows))
    left = np.zeros(len(rows))
    greys = ["#ffffff", "#1b4f72", "#a04000", "#196f3d", "#b7950b", "#7b7d7d", "#000000", "#d5d8dc"]
    for k, cat in enumerate(analysis.categories):
        vals = np.array([r[1].get(cat, 0.0) for r in rows]) * 100
        ax.barh(y, vals, left=left, color=greys[k], edgecolor="black", hatch=HATCHES[k], label=cat, linewidth=0.5)
        left += vals
    ax.set_yticks(y)
    ax.set_yticklabels([r[0] for r in rows])
    ax.set_xlabel("share of the metal / %")
    ax.set_xlim(0, 100)
    ax.invert_yaxis()
    ax.legend(fontsize=7, ncol=4, loc="upper center", bbox_to_anchor=(0.5, -0.25))
    return _svg(fig)


def robustness_figure(analysis: Analysis) -> str:
    result = analysis.result
    target = result.scenario.targets.max_error_percent
    n = 1 + len(result.robustness_dose_scan)
    fig, axes = plt.subplots(1, n, figsize=(3.4 * n, 2.8), squeeze=False)
    ax = axes[0][0]
    if result.robustness_pH_scan is None:
        ax.text(0.5, 0.5, "robustness scan not run", ha="center", va="center", transform=ax.transAxes)
        ax.set_xlabel("pH")
        ax.set_ylabel("predicted titration error / %")
        return _svg(fig)
    grid, err = result.robustness_pH_scan
    ax.plot(grid, err, marker="o", markersize=3, color="black")
    ax.axhspan(-target, target, color="0.9", label=f"target +/- {target:g} %")
    if result.robust_pH:
        ax.axvspan(*result.robust_pH, color="0.75", alpha=0.6, label="robust window")
    ax.axvline(result.recommended.candidate.pH, color="black", lw=1, linestyle="--", label="recommended")
    ax.set_xlabel("pH")
    ax.set_ylabel("predicted titration error / %")
    handles = ax.get_legend_handles_labels()
    for k, (agent, (dose, derr)) in enumerate(result.robustness_dose_scan.items(), start=1):
        ax = axes[0][k]
        ax.semilogx(dose * 1000, derr, marker="s", markersize=3, color="black")
        ax.axhspan(-target, target, color="0.9")
        if agent in result.robust_dose:
            lo, hi = result.robust_dose[agent]
            ax.axvspan(lo * 1000, hi * 1000, color="0.75", alpha=0.6)
        t = result.recommended_titration  # its masking as the strategy completes it (demasking adds its agent)
        d0 = dict(t.method.masking if t is not None else result.recommended.candidate.masking)[agent]
        ax.axvline(d0 * 1000, color="black", lw=1, linestyle="--")
        # 1-2-5 ticks: a dose window of a factor of 20 spans a single decade tick otherwise
        ax.xaxis.set_major_locator(matplotlib.ticker.LogLocator(base=10, subs=(1.0, 2.0, 5.0)))
        ax.xaxis.set_major_formatter(matplotlib.ticker.FormatStrFormatter("%g"))
        ax.xaxis.set_minor_formatter(matplotlib.ticker.NullFormatter())
        ax.set_xlabel(f"{agent} dose / (mmol/L)")
        ax.set_ylabel("predicted titration error / %")
    _legend_below(fig, *handles, ncol=3)
    return _svg(fig)
