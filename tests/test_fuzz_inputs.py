"""Hostile inputs: generated scenario files through the loader (bounded hypothesis runs, guarded by a process pool with
a time and memory limit), and a table of bad command lines.

The generator and the guard are in ``fuzz_inputs.py`` (also a script: ``python tests/fuzz_inputs.py --cases 10000``).
"""
import os
import re
import shutil
import subprocess

import fuzz_inputs as fz
import pytest
from conftest import TINY_SCENARIO
from hypothesis import HealthCheck, Phase, example, given, settings
from hypothesis import strategies as st

from optimiser.cli import main

ISSUE = fz.issue_cases()

# Kinds whose every case is cheap today and tomorrow (the megabyte files stay in the script).
KINDS = [k for k in fz.KINDS if k != "long_names"]
CASES = st.builds(fz.make_case, st.sampled_from(KINDS), st.integers(0, 2 ** 32 - 1))
FUZZ = settings(max_examples=60, deadline=None, derandomize=True, database=None, phases=[Phase.explicit, Phase.generate],
                suppress_health_check=[HealthCheck.too_slow])


@pytest.fixture(scope="module")
def runner():
    # One worker with a 2 GiB address-space limit; a case with no answer after 3 s is killed (and is over 2 s).
    with fz.Runner(workers=1, kill_after=3.0) as r:
        yield r


def _run(runner, case) -> fz.Result:
    return runner.run([case])[0]


def _describe(r: fz.Result) -> str:
    return f"{r.case.kind} [{r.case.note}] -> {r.outcome} {r.under or ''} {r.error_type or ''}: {r.message[:300]!r}"


@FUZZ
@given(case=CASES)
@example(case=ISSUE["self-referencing alias"])
@example(case=ISSUE["complex key"])
@example(case=ISSUE["empty search.pH"])
@example(case=ISSUE["unit 5 mol/L/0"])
def test_loader_raises_no_unexpected_exception(runner, case):
    r = _run(runner, case)
    assert r.outcome not in ("unexpected", "memory", "killed") and r.under != "unexpected", _describe(r)


@FUZZ
@given(case=CASES)
@example(case=ISSUE["NUL character"])
@example(case=ISSUE["not UTF-8"])
@example(case=ISSUE["flow lists 500 deep"])
def test_every_refusal_is_an_input_error_with_one_located_line(runner, case):
    r = _run(runner, case)
    if r.outcome == "accepted" or (r.outcome == "over_2s" and r.under in ("accepted", f"killed at {runner.kill_after:g} s")):
        return
    assert r.outcome == "input_error" or r.under == "input_error", _describe(r)
    assert not r.problems, f"{r.problems}: {_describe(r)}"


@FUZZ
@given(case=CASES)
@example(case=ISSUE["nested aliases (9**7 leaves in 325 bytes)"])
def test_every_case_takes_under_2_s(runner, case):
    r = _run(runner, case)
    assert r.outcome not in ("over_2s", "memory", "killed"), _describe(r)
    assert r.elapsed_s <= fz.TIME_LIMIT_S


@FUZZ
@given(case=CASES.filter(lambda c: c.expect == "invalid"))
@example(case=ISSUE["burette 1e-320 mL"])
@example(case=ISSUE["NaN weight"])
@example(case=ISSUE["max_masking_agents: true"])
@example(case=ISSUE["back_metals: []"])
def test_files_that_must_be_refused_are_refused(runner, case):
    r = _run(runner, case)
    assert r.outcome != "accepted", _describe(r)


@FUZZ
@given(case=st.builds(fz.make_case, st.sampled_from(["valid", "valid_variant"]), st.integers(0, 2 ** 32 - 1)))
@example(case=ISSUE["80 CJK characters in the name"])
def test_valid_files_are_accepted(runner, case):
    r = _run(runner, case)
    assert r.outcome == "accepted", _describe(r)


def test_the_guard_catches_what_it_is_for(runner):
    """The harness itself: a crash, a refusal and a hang are each classified as such."""
    assert _run(runner, ISSUE["80 CJK characters in the name"]).outcome == "accepted"
    bad_unit = fz.make_case("valid", 0)
    bad_unit.data = TINY_SCENARIO.replace("Mg: 0.2 mmol/L", "Mg: 0.2 blorps/L")
    r = _run(runner, bad_unit)
    assert r.outcome == "input_error" and not r.problems and r.message.startswith(f"{bad_unit.filename}:6:")
    assert fz.message_problems("f.yaml: no line", "f.yaml") == ["not located (file:line:column)"]
    assert fz.message_problems("f.yaml:1:2: a\nb", "f.yaml") == ["not one line"]
    assert fz.message_problems("f.yaml:1:2: \x1b[2J", "f.yaml") == ["raw control/escape characters"]


def test_generator_is_deterministic_and_covers_every_kind():
    a = [(c.kind, c.data) for c in fz.generate(400, seed=5)]
    b = [(c.kind, c.data) for c in fz.generate(400, seed=5)]
    assert a == b
    assert {k for k, _ in a} == set(fz.KINDS)
    assert any(isinstance(d, bytes) for _, d in a) and any(isinstance(d, str) for _, d in a)
    assert len(fz.bomb(9, 6)) < 400 and 9 ** 7 > 10 ** 6  # a few hundred bytes that expand to millions


# ---------------------------------------------------------------------------------------------------------------------
# Bad command lines: exit 2 and one line on stderr, before the search or the solver starts.

class _Reached(BaseException):
    """Raised by the stand-ins for the search and the solver: the bad input was not found before them."""


@pytest.fixture()
def files(tmp_path):
    """The files the command lines below name."""
    f = {}
    f["tiny"] = tmp_path / "tiny.yaml"
    f["tiny"].write_text(TINY_SCENARIO)
    f["file"] = tmp_path / "a-file.txt"
    f["file"].write_text("not a folder\n")
    f["dir"] = tmp_path / "out"
    f["good"] = tmp_path / "good.yaml"
    f["good"].write_text(TINY_SCENARIO)
    f["bad1"] = tmp_path / "bad1.yaml"
    f["bad1"].write_text(TINY_SCENARIO.replace("Mg: 0.2 mmol/L", "Mg: 0.2 blorps/L"))
    f["bad2"] = tmp_path / "bad2.yaml"
    f["bad2"].write_text(TINY_SCENARIO.replace("titrants: [EDTA]", "titrants: [EDTX]"))
    f["thiosulphate"] = tmp_path / "thiosulphate.yaml"
    f["thiosulphate"].write_text(TINY_SCENARIO.replace("max_masking_agents: 0", "masking: [thiosulphate]"))
    f["fe"] = tmp_path / "fe.yaml"
    f["fe"].write_text(TINY_SCENARIO.replace("Mg: 0.2 mmol/L", "Fe: 0.2 mmol/L"))
    f["ansi"] = tmp_path / "ansi.yaml"
    f["ansi"].write_text(TINY_SCENARIO.replace("name: tiny-calcium", 'name: "tiny\\e[2J\\e[31mred"'))
    ro = tmp_path / "read-only"
    ro.mkdir()
    ro.chmod(0o555)
    immutable = False
    if os.geteuid() == 0:  # root writes into a 0o555 folder: make it immutable instead
        immutable = shutil.which("chattr") is not None and subprocess.run(
            ["chattr", "+i", str(ro)], check=False, capture_output=True).returncode == 0
    f["ro"] = ro
    f["_ro_usable"] = os.geteuid() != 0 or immutable
    yield f
    if immutable:
        subprocess.run(["chattr", "-i", str(ro)], check=False)
    ro.chmod(0o755)


# (id, argv with {names} from the files fixture, expected exit status, regexes stderr must match)
CLI_TABLE = [
    pytest.param("out-is-a-file", ["run", "{tiny}", "--out", "{file}"], 2, [r"a-file\.txt"]),
    pytest.param("out-below-a-file", ["run", "{tiny}", "--out", "{file}/reports"], 2, [r"a-file\.txt"]),
    pytest.param("out-read-only", ["run", "{tiny}", "--out", "{ro}"], 2, [r"read-only"]),
    pytest.param("ligand-unit-divides-by-zero", ["conditional", "Ca", "--pH", "10", "--ligand", "NH3=1 M/0"], 2,
                 [r"NH3"]),
    pytest.param("masking-1e300-M", ["simulate", "{tiny}", "--pH", "10", "--titrant", "EDTA", "--indicator", "EBT",
                                     "--masking", "cyanide=1e300M"], 2, [r"cyanide"]),
    pytest.param("seed-is-a-fraction", ["run", "{tiny}", "--seed", "2.5", "--out", "{dir}"], 2, [r"seed"]),
    pytest.param("check-reports-every-file", ["check", "{good}", "{bad1}", "{bad2}"], 2,
                 [r"bad1\.yaml:6:\d+: ", r"bad2\.yaml:10:\d+: "]),
    pytest.param("british-thiosulphate", ["check", "{thiosulphate}"], 0, []),
    pytest.param("ligand-ammonia", ["conditional", "Zn", "--pH", "10", "--ligand", "ammonia=0.1M"], 0, []),
    pytest.param("Fe-did-you-mean", ["conditional", "Fe", "--pH", "5"], 2,
                 [r"(?i)did you mean", r"Fe\(II\)", r"Fe\(III\)"]),
    pytest.param("Fe-did-you-mean-in-a-scenario", ["check", "{fe}"], 2,
                 [r"(?i)did you mean", r"Fe\(II\)", r"Fe\(III\)", r"fe\.yaml:6:\d+: "]),
    pytest.param("ansi-escape-in-a-metal-name", ["conditional", "Ca\x1b[31m", "--pH", "10"], 2, [r"Ca"]),
    pytest.param("ansi-escape-in-a-scenario-name", ["check", "{ansi}"], None, []),
]
CONTROL = re.compile("[\x00-\x08\x0b-\x1f\x7f-\x9f\u202a-\u202e\u2066-\u2069]")


@pytest.mark.parametrize("name,argv,status,needles", CLI_TABLE, ids=[p.values[0] for p in CLI_TABLE])
def test_bad_command_lines(files, capsys, monkeypatch, name, argv, status, needles):
    if name == "out-read-only" and not files["_ro_usable"]:
        pytest.skip("running as root and the folder cannot be made immutable (chattr): root writes anywhere")
    reached = []

    def stand_in(*args, **kwargs):
        reached.append(True)
        raise _Reached()
    import optimiser.equilibrium
    import optimiser.search
    import optimiser.titration
    monkeypatch.setattr(optimiser.search, "run_search", stand_in)  # the search never runs in these tests
    monkeypatch.setattr(optimiser.titration, "simulate", stand_in)  # nor the solver
    monkeypatch.setattr(optimiser.equilibrium, "warm_up", lambda: None)  # nor its compilation
    args = [a.format(**{k: v for k, v in files.items() if not k.startswith("_")}) for a in argv]
    try:
        code = main(args)
    except _Reached:
        code = None
    out, err = capsys.readouterr()
    assert not CONTROL.search(out + err.replace("\n", "")), f"raw control characters echoed: {out + err!r}"
    if status is None:  # accepted or refused, but never echoed raw (checked above) and never an internal error
        assert code in (0, 2), err
        return
    assert not reached, f"{name}: the search or the solver started before the bad input was found"
    assert code == status, f"{name}: exit {code}, stderr {err!r}"
    if status == 2:
        assert "internal error" not in err and "Traceback" not in err
        lines = err.strip().splitlines()
        if name == "check-reports-every-file":
            assert len(lines) >= 2 and all(line.startswith("optimiser: ") for line in lines), err
        else:
            assert len(lines) == 1 and lines[0].startswith("optimiser: error: "), err
    for needle in needles:
        assert re.search(needle, err), f"{name}: {needle!r} not in {err!r}"
