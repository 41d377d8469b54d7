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

from .equilibrium import warm_up
from .errors import OptimiserError, printable
from .reagents import HAZARD_NAMES
from .report import DEFAULT_FORMAT, report_base
from .results import dumps, to_json, write_together
from .strategies import strategy


@dataclass(frozen=True)
class BatchRow:
    source: str
    name: str
    ok: bool
    html: str = ""
    json: str = ""
    method: str = ""
    error_percent: float | None = None
    margin: float | None = None
    hazard: str = ""
    message: str = ""
    seconds: float = 0.0
    meets_criteria: bool = False
    largest_part: str = ""  # the error budget's largest part after standardisation, worded

    @property
    def status(self) -> str:
        """"ok" (a method meets the criteria), "no method" (the run worked, nothing meets them), or "failed"."""
        return "failed" if not self.ok else "ok" if self.meets_criteria else "no method"


def method_text(candidate: Any) -> str:
    """One line naming a recommended method (titrant, pH, buffer, indicator, masking, and its standard if any)."""
    s = strategy(candidate.mode)
    return (f"{candidate.titrant}, pH {candidate.pH:.2f} ({candidate.buffer}), {candidate.indicator}"
            + (f", masking {', '.join(a for a, _ in candidate.masking)}" if candidate.masking else "")
            + (f", {s.describe(candidate)}" if s.family is not None else ""))


def run_one(path: str, out_dir: str, seed: int, base: str | None = None, report_format: str = DEFAULT_FORMAT) -> BatchRow:
    """Load, search, report one scenario; never raises (a failure becomes a row with its message)."""
    import time

    from . import report
    from .analysis import analyse
    from .scenario import load
    from .search import run_search
    t0 = time.perf_counter()
    name = Path(path).stem
    try:
        sc = load(path)
        name = sc.name
        result = run_search(sc, seed=seed)
        report_path, json_path = report.write(result, Path(out_dir), dumps(to_json(result)), base=base,
                                              report_format=report_format, analysis=analyse(result))
        e = result.recommended
        if e is None:
            return BatchRow(path, name, True, report_path.name, json_path.name, "no method meets the criteria",
                            message="no method meets the criteria; none can even be run", seconds=time.perf_counter() - t0)
        return BatchRow(path, name, True, report_path.name, json_path.name,
                        ("" if result.meets_criteria else "closest compromise, not to follow: ") + method_text(e.candidate),
                        e.standardised_error_percent, e.margin, HAZARD_NAMES[e.hazard],
                        message="" if result.meets_criteria else "no method meets the criteria",
                        seconds=time.perf_counter() - t0, meets_criteria=result.meets_criteria,
                        largest_part=_largest_part(result.recommended_titration))
    except OptimiserError as exc:
        return BatchRow(path, name, False, message=str(exc), seconds=time.perf_counter() - t0)
    except Exception as exc:  # a bug must not stop the other scenarios; it is reported with its type
        tb = traceback.format_exception_only(type(exc), exc)[-1].strip()
        return BatchRow(path, name, False, message=f"internal error: {tb}", seconds=time.perf_counter() - t0)


def _largest_part(t: Any) -> str:
    from .readout import budget_label
    if t is None or t.largest_part is None:
        return ""
    key, part = t.largest_part
    return f"{budget_label(key)} {part:+.3f} %"


def _fmt(x, nd=2) -> str:
    return "" if x is None else f"{x:.{nd}f}"


def index_html(rows: list[BatchRow]) -> str:
    """The side-by-side comparison page (self-contained, links relative to the output folder)."""
    def e(text: str) -> str:  # escaped for HTML, with no control or direction-override character left raw
        return html.escape(printable(text))
    body = []
    for r in rows:
        link = f'<a href="{e(r.html)}">{e(r.name)}</a>' if r.ok and r.html else e(r.name)
        status = r.status
        data = f'<a href="{e(r.json)}">json</a>' if r.json else ""
        body.append(f"<tr class='{status.replace(' ', '-')}'><td>{link}</td><td>{e(r.method)}</td><td class='n'>{_fmt(r.error_percent, 3)}</td>"
                    f"<td>{e(r.largest_part)}</td><td class='n'>{_fmt(r.margin)}</td><td>{e(r.hazard)}</td><td>{status}</td><td>{e(r.message)}</td>"
                    f"<td>{data}</td><td>{e(r.source)}</td></tr>")
    return f"""<!DOCTYPE html>
<html lang="en"><head><meta charset="utf-8"><title>Titration methods: batch comparison</title>
<style>
body {{ font: 14px/1.45 "Segoe UI", Arial, sans-serif; margin: 24px; color: #1d2433; }}
table {{ border-collapse: collapse; width: 100%; }} th, td {{ border-bottom: 1px solid #d5d9e0; padding: 4px 6px; text-align: left; }}
th {{ background: #f4f6f9; }} td.n {{ text-align: right; font-variant-numeric: tabular-nums; }}
tr.failed td, tr.no-method td {{ background: #fdf1f0; }} h1 {{ font-size: 1.4em; }}
</style></head><body>
<h1>Titration methods: {len(rows)} scenarios compared</h1>
<p>{sum(r.status == "ok" for r in rows)} with a method that meets the criteria, {sum(r.status == "no method" for r in rows)}
where no method meets them, {sum(not r.ok for r in rows)} failed. Error: predicted titration error of the recommended
method after standardisation (%); largest part: the largest cause of that error; margin: selectivity margin delta log(cK') over the strongest interferent left in solution (blank: none left).</p>
<table><tr><th>Scenario</th><th>Recommended method</th><th>Error / %</th><th>Largest part</th><th>Margin</th><th>Hazard</th><th>Status</th><th>Message</th><th>Data</th><th>File</th></tr>
{''.join(body)}
</table></body></html>
"""


def summary_csv(rows: list[BatchRow]) -> str:
    buf = io.StringIO()
    w = csv.writer(buf, lineterminator="\n")
    w.writerow(["scenario", "source", "status", "recommended_method", "standardised_error_percent", "largest_error_part",
                "selectivity_margin_log", "hazard", "report", "json", "message", "seconds"])
    for r in rows:
        w.writerow([printable(r.name), printable(r.source), r.status, r.method, _fmt(r.error_percent, 4),
                    printable(r.largest_part), _fmt(r.margin, 3), r.hazard, r.html, r.json, printable(r.message),
                    f"{r.seconds:.2f}"])
    return buf.getvalue()


def _progress(done: int, total: int, name: str) -> None:
    width = 24
    filled = int(width * done / max(total, 1))
    sys.stderr.write(f"\r[{'#' * filled}{'-' * (width - filled)}] {done}/{total} scenarios  {printable(name, 37):<40}")
    sys.stderr.flush()


def _unique_bases(paths: list[Path]) -> list[str]:
    """Report names after the scenario files, made unique within the batch (name, name-2, ...; the naming rule of
    :func:`optimiser.report.report_base`)."""
    bases: list[str] = []
    for p in paths:
        bases.append(report_base(Path(p).stem, bases))
    return bases


def run_batch(paths: list[Path], out_dir: Path, jobs: int | None = None, seed: int = 1, progress: bool = True,
              report_format: str = DEFAULT_FORMAT) -> list[BatchRow]:
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
        with ProcessPoolExecutor(max_workers=jobs, mp_context=get_context("fork")) as pool:
            futures = {pool.submit(run_one, *arg): k for k, arg in enumerate(args)}
            for f in as_completed(futures):
                done(futures[f], f.result())
    if progress:
        sys.stderr.write("\n")
    ordered = [rows[k] for k in range(len(paths))]
    # together, the index last: a new index always has its new summary beside it
    write_together([(out_dir / "summary.csv", summary_csv(ordered)), (out_dir / "index.html", index_html(ordered))])
    return ordered
