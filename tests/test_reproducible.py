"""Identical runs write identical files: two processes with different hash seeds (Python salts str hashes per process)
run the same scenario, and every file they write is compared byte for byte. (``batch`` writes its reports with the
same writer; its index and summary hold no timing: tests/test_batch.py.)"""
import os
import subprocess
import sys
from pathlib import Path

from conftest import ROOT, TINY_SCENARIO

from optimiser.report.html import build_date



def _files(folder: Path) -> dict[str, bytes]:
    return {str(p.relative_to(folder)): p.read_bytes() for p in sorted(folder.rglob("*")) if p.is_file()}


def test_two_identical_runs_write_byte_identical_files(tmp_path):
    scenario = tmp_path / "tiny.yaml"
    scenario.write_text(TINY_SCENARIO)
    env = {k: v for k, v in os.environ.items() if k != "SOURCE_DATE_EPOCH"}
    env["PYTHONPATH"] = str(ROOT)
    procs = [subprocess.Popen([sys.executable, "-m", "optimiser", "run", str(scenario), "--out", str(tmp_path / f"out{k}")],
                              env={**env, "PYTHONHASHSEED": str(k)}, stdout=subprocess.PIPE, stderr=subprocess.PIPE,
                              text=True) for k in (1, 2)]  # at the same time: two cores, half the wall time
    for p in procs:
        out, err = p.communicate()
        assert p.returncode == 0, out + err
    a, b = _files(tmp_path / "out1"), _files(tmp_path / "out2")
    assert sorted(a) == sorted(b) == ["tiny-calcium.html", "tiny-calcium.json"]
    for name in a:
        assert a[name] == b[name], f"{name} differs between two identical runs"


def test_the_report_date_comes_only_from_SOURCE_DATE_EPOCH():
    """The reproducible-builds convention: a date only when SOURCE_DATE_EPOCH is set (seconds since 1970, UTC)."""
    assert build_date({}) is None and build_date({"SOURCE_DATE_EPOCH": "not a number"}) is None
    assert build_date({"SOURCE_DATE_EPOCH": "0"}) == "1970-01-01"
