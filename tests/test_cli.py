"""main([...]) for every command, including every bad-input path (exit status 2, one clear line, no traceback)."""
import json
import re
from html.parser import HTMLParser
from pathlib import Path

import pytest

from optimiser.cli import main
from optimiser.scenario import load


def run(capsys, *argv):
    code = main(list(argv))
    out, err = capsys.readouterr()
    return code, out, err


def test_conditional_text_and_json(capsys):
    code, out, err = run(capsys, "conditional", "Ca", "--pH", "4", "10", "--complex", "0.0267M")
    assert code == 0 and "log K_cond" in out and "free Ca" in out
    code, out, _ = run(capsys, "conditional", "Zn", "--pH", "10", "--ligand", "NH3=0.1M", "--json")
    doc = json.loads(out)
    for key in ("metal", "titrant", "pH", "log_alpha_Y", "log_alpha_M", "log_K", "log_K_conditional"):
        assert key in doc
    assert doc["metal"] == "Zn" and len(doc["log_K_conditional"]) == 1
    assert doc["log_alpha_M"][0] > 4  # ammine complexes (Harvey constants): alpha_M(NH3) ~ 10^4.6 at 0.1 M total NH3
    code, out, _ = run(capsys, "conditional", "Ca", "--pH", "10", "--complex", "0.01 M", "--json")
    assert "free_metal_M" in json.loads(out)


@pytest.mark.parametrize("argv,needle", [
    (("conditional", "Unobtainium", "--pH", "10"), "known metals: Al, Ba"),
    (("conditional", "Ca", "--pH", "15"), "pH must be between 0 and 14"),
    (("conditional", "Ca", "--pH", "ten"), "pH must be a number"),
    (("conditional", "Ca", "--pH", "10", "--ligand", "NH3=-1M"), "cannot be negative"),
    (("conditional", "Ca", "--pH", "10", "--ligand", "NH3=0.1 blorp"), "unknown unit"),
    (("conditional", "Ca", "--pH", "10", "--ligand", "NH3"), "NAME=CONCENTRATION"),
    (("conditional", "Ca", "--pH", "10", "--ligand", "XYZ=0.1M"), "unknown ligand"),
    (("conditional", "Ca", "--titrant", "NTA", "--pH", "10"), "unknown titrant"),
    (("conditional", "Ca", "--pH", "10", "--ionic-strength", "5"), "ionic strength"),
    (("constants", "nothing"), "unknown name 'nothing'"),
    (("frobnicate",), "invalid choice"),
    (("conditional", "Ca"), "required"),
])
def test_bad_input_exits_2_with_one_line(capsys, argv, needle):
    code, out, err = run(capsys, *argv)
    assert code == 2
    assert needle in err
    assert "Traceback" not in err and len(err.strip().splitlines()) == 1


def test_constants(capsys):
    code, out, _ = run(capsys, "constants")
    assert code == 0 and "metals:" in out and "indicators:" in out
    code, out, _ = run(capsys, "constants", "Cu")
    assert code == 0 and "Cu + EDTA = CuEDTA" in out and "sources:" in out and "NIST" in out
    code, out, _ = run(capsys, "constants", "EBT", "--json")
    doc = json.loads(out)
    assert doc["name"] == "EBT" and any(r["from_memory"] for r in doc["constants"])


def test_simulate_text_and_json(capsys, scenarios_dir):
    sc = str(scenarios_dir / "hardness_iron_aluminium.yaml")
    code, out, _ = run(capsys, "simulate", sc, "--pH", "10", "--titrant", "EDTA", "--indicator", "EBT", "--masking", "TEA=10mM")
    assert code == 0 and "end point" in out and "error" in out
    code, out, _ = run(capsys, "simulate", sc, "--pH", "10", "--titrant", "EDTA", "--indicator", "EBT",
                       "--buffer", "ammonia=0.1M", "--json")
    doc = json.loads(out)
    for key in ("equivalence", "endpoint", "error_percent", "sharpness_mL", "cotitrated", "precipitates", "warnings", "curve"):
        assert key in doc
    assert set(doc["equivalence"]) == {"volume_mL", "pM"} and set(doc["curve"]) >= {"volume_mL", "pM"}
    assert len(doc["curve"]["volume_mL"]) == len(doc["curve"]["pM"]["Ca"])
    assert doc["blocked_by"] == ["Fe(III)", "Al"]  # unmasked Fe(III) and Al block EBT (common practice)
    assert 0.0 <= doc["mass_balance_error"] <= 1.0001e-10  # recomputed from the species over the whole curve


@pytest.mark.parametrize("argv,needle", [
    (("--pH", "10", "--titrant", "EDTA", "--indicator", "Nonexistent Blue"), "unknown indicator"),
    (("--pH", "10", "--titrant", "EDTA", "--indicator", "EBT", "--masking", "arsenic=1mM"), "unknown masking agent"),
    (("--pH", "7.2", "--titrant", "EDTA", "--indicator", "EBT"), "no buffer in the database holds pH 7.2"),
    (("--pH", "10", "--titrant", "EDTA", "--indicator", "EBT", "--buffer", "ammonia=-2M"), "cannot be negative"),
])
def test_simulate_bad_input(capsys, scenarios_dir, argv, needle):
    code, _, err = run(capsys, "simulate", str(scenarios_dir / "zinc_beside_copper.yaml"), *argv)
    assert code == 2 and needle in err and "Traceback" not in err


SCENARIO = """name: cli-test
sample:
  volume: 50 mL
analyte:
  metals: {Ca: 1 mmol/L}
interferents:
  Mg: 0.5 mmol/L
titrant:
  concentration: 0.01 M
search:
  pH: [9.0, 13.0]
"""


@pytest.mark.parametrize("change,needle,line", [
    (("Ca: 1 mmol/L", "Zz: 1 mmol/L"), "unknown metal 'Zz'", 5),
    (("Mg: 0.5 mmol/L", "Mg: 0.5 blorp/L"), "unknown unit", 7),
    (("Mg: 0.5 mmol/L", "Mg: -0.5 mmol/L"), "cannot be negative", 7),
    (("pH: [9.0, 13.0]", "pH: [13.0, 9.0]"), "low < high", 11),
    (("  volume: 50 mL", "  volume: 50 mL\n  colour: red"), "unknown key 'colour'", 4),
    (("interferents:", "interferents: [\n"), "malformed YAML", None),
])
@pytest.mark.parametrize("command", ["check", "simulate", "run"])
def test_scenario_errors_through_every_command(capsys, tmp_path, change, needle, line, command):
    p = tmp_path / "bad.yaml"
    p.write_text(SCENARIO.replace(*change))
    extra = {"check": [], "simulate": ["--pH", "10", "--titrant", "EDTA", "--indicator", "EBT"], "run": ["--out", str(tmp_path)]}
    code, _, err = run(capsys, command, str(p), *extra[command])
    assert code == 2, err
    assert needle in err and str(p) in err and "Traceback" not in err
    if line is not None:
        assert re.search(rf"{re.escape(str(p))}:{line}:\d+", err), err


def test_check_ok(capsys, scenarios_dir):
    code, out, _ = run(capsys, "check", *map(str, sorted(scenarios_dir.glob("*.yaml"))))
    assert code == 0 and out.count(": ok") >= 6


def test_run_writes_report_and_json(capsys, tmp_path):
    code, out, err = run(capsys, "run", "--out", str(tmp_path), "--seed", "3")
    assert code == 0, err
    assert "searching" in err  # progress on stderr
    html, js = tmp_path / "well-water-hardness.html", tmp_path / "well-water-hardness.json"
    assert html.exists() and js.exists()
    assert str(html) in out
    doc = json.loads(js.read_text())
    for key in ("scenario", "analyte", "seed", "evaluations", "recommended", "alternatives", "conditional_constants"):
        assert key in doc
    rec = doc["recommended"]
    for key in ("pH", "buffer", "titrant", "titrant_conc_M", "masking", "indicator", "mode", "predicted_error_percent",
                "selectivity_margin_log", "endpoint_sharpness_mL", "hazard", "precipitates", "robust_pH", "warnings"):
        assert key in rec
    assert doc["seed"] == 3 and rec["mode"] in ("direct", "back")
    assert not list(tmp_path.glob(".*.tmp"))  # atomic writes leave no temporary file


class _Links(HTMLParser):
    def __init__(self):
        super().__init__()
        self.links = []

    def handle_starttag(self, tag, attrs):
        if tag == "a":
            self.links += [v for k, v in attrs if k == "href"]


# three of the examples (the quickest to search); every example is searched, analysed and written up by
# tests/test_sop.py (the searches are shared across the session, tests/conftest.py)
BATCH_EXAMPLES = ("aluminium_back_titration", "bismuth_beside_lead", "cement_iron")


def test_batch_over_examples(capsys, tmp_path, scenarios_dir):
    """Every scenario of a folder completes; every link in index.html resolves; summary.csv has a row each, whose
    status says plainly whether a method meets the criteria (as the scenario's JSON does); the exit status is 0 only
    when every scenario has one."""
    import csv
    import io
    import shutil
    folder = tmp_path / "in"
    folder.mkdir()
    for name in BATCH_EXAMPLES:
        shutil.copy(scenarios_dir / f"{name}.yaml", folder)
    scenarios_dir, tmp_path = folder, tmp_path / "out"
    code, out, err = run(capsys, "batch", str(scenarios_dir), "--out", str(tmp_path), "--jobs", "2")
    table = list(csv.DictReader(io.StringIO((tmp_path / "summary.csv").read_text())))
    assert {r["status"] for r in table} <= {"ok", "no method"}, out + err
    for r in table:
        doc = json.loads((tmp_path / r["json"]).read_text())
        assert (r["status"] == "ok") == doc["meets_criteria"]
        if r["status"] == "no method":
            assert "no method meets the criteria" in r["message"] and r["recommended_method"].startswith("closest compromise")
        else:  # a recommended method has no part of its error budget beyond the target
            target = load(r["source"]).targets.max_error_percent
            assert all(abs(v) <= target for v in doc["recommended"]["error_budget_standardised"].values())
    assert code == (0 if all(r["status"] == "ok" for r in table) else 1), out + err
    index = (tmp_path / "index.html").read_text()
    parser = _Links()
    parser.feed(index)
    assert len(parser.links) >= 2 * len(BATCH_EXAMPLES)  # each scenario's report and JSON at least
    for href in parser.links:
        assert (tmp_path / href).exists(), href
    rows = (tmp_path / "summary.csv").read_text().strip().splitlines()
    assert len(rows) == 1 + len(list(scenarios_dir.glob("*.yaml")))


def test_batch_keeps_going_after_a_failure(capsys, tmp_path, scenarios_dir):
    bad = tmp_path / "in" / "broken.yaml"
    bad.parent.mkdir()
    bad.write_text("name: [unclosed\n")
    good = tmp_path / "in" / "bismuth.yaml"
    good.write_text((scenarios_dir / "bismuth_beside_lead.yaml").read_text())
    code, out, _ = run(capsys, "batch", str(tmp_path / "in"), "--out", str(tmp_path / "out"), "--jobs", "1")
    assert code == 1
    assert re.search(r"FAILED +broken", out) and "OK " in out
    assert "broken.yaml" in (tmp_path / "out" / "index.html").read_text()


def test_batch_bad_paths(capsys, tmp_path):
    code, _, err = run(capsys, "batch", str(tmp_path / "nope"))
    assert code == 2 and "no such file" in err


def test_python_dash_m(tmp_path):
    import subprocess
    import sys
    r = subprocess.run([sys.executable, "-m", "optimiser", "conditional", "Mg", "--pH", "10", "--json"], capture_output=True,
                       text=True, cwd=tmp_path)
    assert r.returncode == 0 and json.loads(r.stdout)["metal"] == "Mg"
    # the command leaves with os._exit (cli.command): its exit status and its flushed output are kept
    r = subprocess.run([sys.executable, "-m", "optimiser", "conditional", "Mg", "--pH", "15"], capture_output=True,
                       text=True, cwd=tmp_path)
    assert r.returncode == 2 and "pH" in r.stderr and len(r.stderr.strip().splitlines()) == 1


def test_run_jobs_must_be_a_whole_number(capsys):
    """--jobs takes 1-256 processes; anything else stops before any search, saying what is allowed."""
    for bad in ("0", "2.5", "many"):
        code, _, err = run(capsys, "run", "--jobs", bad)
        assert code == 2 and "--jobs must be a whole number from 1 to 256" in err


def test_run_format_option_lists_the_formats(capsys):
    """--format takes a registered report format; another name stops before any search, naming the allowed ones."""
    code, _, err = run(capsys, "run", "--format", "docx")
    assert code == 2 and "docx" in err and "html, md, pdf" in err and len(err.strip().splitlines()) == 1
    code, _, err = run(capsys, "run", "--format", "html,md", "--format", "odt")
    assert code == 2 and "odt" in err
    code, _, err = run(capsys, "batch", "somewhere", "--format", "txt")
    assert code == 2 and "txt" in err and "html, md, pdf" in err
    from optimiser.cli import build_parser
    sub = build_parser()._subparsers._group_actions[0].choices
    for command in ("run", "batch"):
        help_text = sub[command].format_help()
        assert "--format FORMAT" in help_text and "report format: html, md, pdf (default html)" in help_text


def test_every_option_has_help_and_the_help_lists_the_allowed_names_from_the_registries():
    """Each subcommand's --help: text for every option and argument; the names from the data and registries (a new
    titrant, strategy or format appears with no change to the command line's code)."""
    import argparse

    from optimiser.cli import build_parser
    from optimiser.objectives import OBJECTIVES
    from optimiser.reagents import catalogue
    from optimiser.report import FORMATS
    from optimiser.strategies import strategy_ids
    parser = build_parser()
    subs = next(a for a in parser._actions if isinstance(a, argparse._SubParsersAction)).choices
    assert set(subs) == {"conditional", "constants", "simulate", "run", "check", "batch"}
    texts = {}
    for name, sub in subs.items():
        texts[name] = " ".join(sub.format_help().split())  # unwrapped
        for action in sub._actions:
            assert action.help and "{" not in action.help, (name, action.dest)
    cat = catalogue()
    for name in ("run", "batch", "check"):
        for ids in (cat.titrants, cat.buffers, cat.masking, cat.indicators, cat.standards, strategy_ids(),
                    [o if isinstance(o, str) else o.name for o in OBJECTIVES]):
            assert all(i in texts[name] for i in ids), (name, list(ids))
    for name in ("run", "batch"):
        assert all(f in texts[name] for f in FORMATS)
    assert all(i in texts["simulate"] for i in [*cat.titrants, *cat.indicators, *cat.masking, *cat.buffers,
                                                 *strategy_ids(), *cat.standards])
    assert "Fe(III)" in texts["conditional"] and "Fe(III)" in texts["constants"]


def _readme():
    return (Path(__file__).resolve().parent.parent / "README.md").read_text(encoding="utf-8")


def test_readme_demo_is_the_demo_file_and_the_annotated_example_is_valid(scenarios_dir):
    """The README shows the demo file as it is, and its every-key example is a scenario the reader accepts."""
    from optimiser.scenario import demo, parse
    blocks = re.findall(r"```yaml\n(.*?)```", _readme(), flags=re.S)
    assert blocks[0] == (scenarios_dir / "hardness_iron_aluminium.yaml").read_text(encoding="utf-8")
    assert dict(parse(blocks[0], "readme.yaml").as_read) == dict(demo().as_read)  # and the packaged demo is the same
    sc = parse(blocks[1], "readme-every-key.yaml")
    assert sc.name == "every-key-example" and sc.search.max_masking_agents == 1


def test_readme_commands_are_the_program_s():
    """Every command and option in the README's command table exists in the parser."""
    import argparse

    from optimiser.cli import build_parser
    subs = next(a for a in build_parser()._actions if isinstance(a, argparse._SubParsersAction)).choices
    rows = re.findall(r"^\| `optimiser (\w+)([^`]*)`", _readme(), flags=re.M)
    assert {cmd for cmd, _ in rows} == set(subs)
    for cmd, usage in rows:
        options = {o for a in subs[cmd]._actions for o in a.option_strings}
        for opt in re.findall(r"--[\w-]+", usage):
            assert opt in options, (cmd, opt)
