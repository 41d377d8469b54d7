"""Many scenarios in parallel processes: a report each, an index.html that compares them, a summary.csv."""
from __future__ import annotations

import csv
import html
import io
import os
import sys
import traceback
from concurrent.futures import ProcessPoolExecutor, as_completed
from dataclasses import dataclass
from multiprocessing import get_context
from pathlib import Path
from typing import Any

from . import parallel
from .equilibrium import warm_up
from .errors import OptimiserError, printable
from .reagents import HAZARD_NAMES
from .report import DEFAULT_FORMAT, report_base
from .report.text import short_name
from .results import dumps, to_json, write_together


@dataclass(frozen=True)
class BatchRow:
    source: str
    name: str
    ok: bool
    html: str = ""
    json: str = ""
    method: str = ""  # the method in one line, readable names and doses (:func:`method_text`)
    error_percent: float | None = None
    margin: float | None = None
    hazard: str = ""
    message: str = ""
    seconds: float = 0.0  # printed by the command, never written to a file (identical runs, identical files)
    meets_criteria: bool = False
    largest_part: str = ""  # the error budget's largest part after standardisation, worded
    strategy: str = ""  # the strategy the method stands for ("masking", "pH control", ...)
    analyte: str = ""

    @property
    def status(self) -> str:
        """"ok" (a method meets the criteria), "no method" (the run worked, nothing meets them), or "failed"."""
        return "failed" if not self.ok else "ok" if self.meets_criteria else "no method"


def method_text(method: Any) -> str:
    """One line naming a method by the catalogue's display names, with its doses: titrant and its concentration, pH,
    buffer and its total, indicator, masking agents and their concentrations in the aliquot, and the strategy's own
    words where it needs a standard. ``method`` is an :class:`optimiser.method.Method`."""
    s = method.strategy
    buf = method.buffer_info
    buffer = short_name(buf.name) + (f" {method.buffer_total_M:.2g} mol/L" if buf.ligand and method.buffer_total_M else "")
    masking = [f"{short_name(a.name)} {d * 1000:.2g} mmol/L" for a, (_, d) in zip(method.masking_agents, method.masking,
                                                                                   strict=True)]
    return (f"{method.titrant} {method.titrant_conc_M:g} mol/L, pH {method.pH:.2f} ({buffer}), "
            f"{short_name(method.indicator_info.name)}"
            + (f", masking {', '.join(masking)}" if masking else "")
            + (f", {s.describe(method)}" if s.family is not None else ""))


def largest_part_text(t: Any) -> str:
    """The budget's largest part after standardisation in words, or that every part rounds to zero."""
    from .readout import budget_label
    from .report.text import signed_fixed
    if t is None or t.largest_part is None:
        return ""
    key, part = t.largest_part
    if signed_fixed(part) == "0.000":
        return "every part below 0.0005 %"
    return f"{budget_label(key)} {signed_fixed(part)} %"


def run_one(path: str, out_dir: str, seed: int, base: str | None = None,
            report_format: str | tuple[str, ...] = DEFAULT_FORMAT) -> BatchRow:
    """Load, search, report one scenario; never raises (a failure becomes a row with its message)."""
    import gc
    import time

    from . import report
    from .analysis import analyse
    from .decision import strategy_of
    from .scenario import load
    from .search import run_search
    t0 = time.perf_counter()
    name = Path(path).stem
    try:
        report.prepare(report.parse_formats(report_format))
        sc = load(path)
        name = sc.name
        result = run_search(sc, seed=seed)
        report_path, json_path = report.write(result, Path(out_dir), dumps(to_json(result)), base=base,
                                              report_format=report_format, analysis=analyse(result))
        e, t = result.recommended, result.recommended_titration
        files = {"html": report_path.name, "json": json_path.name, "analyte": sc.analyte_label}
        if e is None or t is None:
            return BatchRow(path, name, True, method="no method meets the criteria",
                            message="no method meets the criteria; none can even be run", seconds=time.perf_counter() - t0,
                            **files)
        return BatchRow(path, name, True, method=("" if result.meets_criteria else "closest compromise, not to follow: ")
                        + method_text(t.method), error_percent=e.standardised_error_percent, margin=e.margin,
                        hazard=HAZARD_NAMES[e.hazard], message="" if result.meets_criteria else "no method meets the criteria",
                        seconds=time.perf_counter() - t0, meets_criteria=result.meets_criteria,
                        largest_part=largest_part_text(t), strategy=strategy_of(e), **files)
    except OptimiserError as exc:
        return BatchRow(path, name, False, message=str(exc), seconds=time.perf_counter() - t0)
    except Exception as exc:  # a bug must not stop the other scenarios; it is reported with its type
        tb = traceback.format_exception_only(type(exc), exc)[-1].strip()
        return BatchRow(path, name, False, message=f"internal error: {tb}", seconds=time.perf_counter() - t0)
    finally:
        parallel.dismiss()  # a standby for the figures of a report never written
        if not gc.isenabled():  # the console command runs with the collector off: its cycles are freed here
            gc.collect()


def _fmt(x, nd=2) -> str:
    return "" if x is None else f"{x:.{nd}f}"


def _signed(x) -> str:
    from .report.text import signed_fixed
    return "" if x is None else signed_fixed(x, 3)


def index_html(rows: list[BatchRow]) -> str:
    """The side-by-side comparison page (self-contained, links relative to the output folder)."""
    def e(text: str) -> str:  # escaped for HTML, with no control or direction-override character left raw
        return html.escape(printable(text))
    body = []
    for r in rows:
        link = f'<a href="{e(r.html)}">{e(r.name)}</a>' if r.ok and r.html else e(r.name)
        status = r.status
        data = f'<a href="{e(r.json)}">json</a>' if r.json else ""
        body.append(f"<tr class='{status.replace(' ', '-')}'><td>{link}</td><td>{e(r.analyte)}</td><td>{status}</td>"
                    f"<td class='m'>{e(r.method)}</td><td>{e(r.strategy)}</td><td class='n'>{_signed(r.error_percent)}</td>"
                    f"<td class='largest'>{e(r.largest_part)}</td><td class='n'>{_fmt(r.margin)}</td><td>{e(r.hazard)}</td>"
                    f"<td>{e(r.message)}</td><td>{data}</td><td>{e(r.source)}</td></tr>")
    return f"""<!DOCTYPE html>
<html lang="en"><head><meta charset="utf-8"><meta name="viewport" content="width=device-width, initial-scale=1">
<title>Titration methods: batch comparison</title>
<style>
body {{ font: 14px/1.45 "Segoe UI", Arial, sans-serif; margin: 24px; color: #1d2433; }}
.table-scroll {{ max-width: 100%; overflow-x: auto; }}
table {{ border-collapse: collapse; width: 100%; }} th, td {{ border-bottom: 1px solid #d5d9e0; padding: 4px 6px; text-align: left; vertical-align: top; }}
th {{ background: #f4f6f9; }} td.n {{ text-align: right; font-variant-numeric: tabular-nums; white-space: nowrap; }}
tr.failed td, tr.no-method td {{ background: #fdf1f0; }} h1 {{ font-size: 1.4em; }}
td.m {{ min-width: 18em; }} td.largest {{ min-width: 10em; }}
</style></head><body>
<h1>Titration methods: {len(rows)} scenarios compared</h1>
<p>{sum(r.status == "ok" for r in rows)} with a method that meets the criteria, {sum(r.status == "no method" for r in rows)}
where no method meets them ("no method": the method shown is the closest compromise, not to follow),
{sum(not r.ok for r in rows)} failed. Method: titrant and its concentration, pH, buffer and its total, indicator, masking
agents and their concentrations in the aliquot. Error: predicted titration error after standardisation (%); largest
part: the largest cause of that error; margin: selectivity margin delta log(cK') over the strongest interferent left in
solution (blank: none left).</p>
<div class="table-scroll"><table><tr><th>Scenario</th><th>Analyte</th><th>Status</th><th>Recommended method</th><th>Strategy</th>
<th>Error / %</th><th>Largest part</th><th>Margin</th><th>Hazard</th><th>Message</th><th>Data</th><th>Scenario file</th></tr>
{''.join(body)}
</table></div></body></html>
"""


def summary_csv(rows: list[BatchRow]) -> str:
    """One row per scenario; no timings (identical runs write identical files)."""
    buf = io.StringIO()
    w = csv.writer(buf, lineterminator="\n")
    w.writerow(["scenario", "source", "analyte", "status", "recommended_method", "strategy", "standardised_error_percent",
                "largest_error_part", "selectivity_margin_log", "hazard", "report", "json", "message"])
    for r in rows:
        w.writerow([printable(r.name), printable(r.source), printable(r.analyte), r.status, printable(r.method), r.strategy,
                    _fmt(r.error_percent, 4), printable(r.largest_part), _fmt(r.margin, 3), r.hazard, r.html, r.json,
                    printable(r.message)])
    return buf.getvalue()


def _progress(done: int, total: int, name: str) -> None:
    width = 24
    filled = int(width * done / max(total, 1))
    sys.stderr.write(f"\r[{'#' * filled}{'-' * (width - filled)}] {done}/{total} scenarios  {printable(name, 37):<40}")
    sys.stderr.flush()


def _unique_bases(paths: list[Path]) -> list[str]:
    """Each scenario's file base name by the one naming rule of ``run`` and ``batch``: the scenario's ``name``
    (:func:`optimiser.report.report_base`), with ``-2``, ``-3``, ... for a name already taken earlier in the batch
    (input order). A file that cannot be read keeps its file name here (it writes no report; its row says why)."""
    from .scenario import load
    bases: list[str] = []
    for p in paths:
        try:
            name = load(p).name
        except (OptimiserError, OSError):
            name = Path(p).stem
        bases.append(report_base(name, bases))
    return bases


def run_batch(paths: list[Path], out_dir: Path, jobs: int | None = None, seed: int = 1, progress: bool = True,
              report_format: str | tuple[str, ...] = DEFAULT_FORMAT) -> list[BatchRow]:
    """Run every scenario (in parallel processes) and write the index and the summary; rows in input order."""
    jobs = jobs or os.cpu_count() or 1
    out_dir.mkdir(parents=True, exist_ok=True)
    rows: dict[int, BatchRow] = {}
    args = [(str(p), str(out_dir), seed, base, report_format) for p, base in zip(paths, _unique_bases(paths), strict=True)]

    def done(k: int, row: BatchRow) -> None:
        rows[k] = row
        if progress:
            _progress(len(rows), len(paths), row.name)
    if progress:
        _progress(0, len(paths), "")
    if jobs == 1:
        for k, arg in enumerate(args):
            done(k, run_one(*arg))
    else:
        warm_up()  # compile (or load) the solver's kernel once, before the workers fork
        # each scenario's search splits its own batches over its share of the cores only (none where they are taken)
        share = max(1, parallel.available_cores() // jobs)
        with ProcessPoolExecutor(max_workers=jobs, mp_context=get_context("fork"), initializer=parallel.set_workers,
                                 initargs=(share,)) as pool:
            futures = {pool.submit(run_one, *arg): k for k, arg in enumerate(args)}
            for f in as_completed(futures):
                done(futures[f], f.result())
    if progress:
        sys.stderr.write("\n")
    ordered = [rows[k] for k in range(len(paths))]
    # together, the index last: a new index always has its new summary beside it
    write_together([(out_dir / "summary.csv", summary_csv(ordered)), (out_dir / "index.html", index_html(ordered))])
    return ordered
