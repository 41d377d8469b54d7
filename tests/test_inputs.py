"""Issue "Every bad input gets one located line, before any work; no output is left half-written": the bounded YAML
reader, ranges and units, names and aliases, the output folder check, files written together, and safe names.

The generated hostile files are in ``test_fuzz_inputs.py``; these are the hand-written cases behind each rule.
"""
import os
import re

import pytest
from conftest import TINY_SCENARIO

from optimiser import report, results, yaml_reader
from optimiser.cli import main
from optimiser.constants import database
from optimiser.errors import (
    InputError,
    ScenarioError,
    UnknownNameError,
    did_you_mean,
    printable,
)
from optimiser.reagents import catalogue, ligand_id
from optimiser.scenario import load, parse
from optimiser.units import concentration_M, molarity, reagent_M, volume_mL

LOCATED = re.compile(r"^(?P<file>[^:]+):(?P<line>\d+):(?P<column>\d+): \S")


def _refused(text, path="s.yaml") -> ScenarioError:
    with pytest.raises(ScenarioError) as exc:
        parse(text, path)
    message = str(exc.value)
    assert LOCATED.match(message) and "\n" not in message, message
    return exc.value


# --- the bounded reader ----------------------------------------------------------------------------------------------

@pytest.mark.parametrize("snippet,needle", [
    ("&a [*a]", "anchor (&a) is not allowed"),
    ("[" * 40 + "]" * 40, "nesting deeper than 16 levels"),
    ("!!python/tuple [1, 2]", "tag 'tag:yaml.org,2002:python/tuple' is not allowed"),
    ("!!binary aGVsbG8=", "tag 'tag:yaml.org,2002:binary' is not allowed"),
    ('"x\\e[2Jy"', "U+001B (a control character)"),
    ('"evil\\u202etxt"', "U+202E (a direction-override character)"),
])
def test_the_reader_refuses_what_a_scenario_never_needs(snippet, needle):
    """Each refusal is located at the value that carries it (line 2: the description)."""
    exc = _refused(TINY_SCENARIO.replace("description: A calcium standard with a little magnesium (test fixture).",
                                         f"description: {snippet}"))
    assert needle in str(exc) and exc.line == 3


def test_an_alias_bomb_is_refused_at_its_first_anchor_at_once():
    text = TINY_SCENARIO + "x: &a0 [lol, lol, lol, lol, lol, lol, lol, lol, lol]\n" + "".join(
        f"x{k}: &a{k} [{', '.join([f'*a{k - 1}'] * 9)}]\n" for k in range(1, 9))
    exc = _refused(text)
    assert "anchor (&a0)" in str(exc) and exc.line == TINY_SCENARIO.count("\n") + 1


@pytest.mark.parametrize("text,needle,line,column", [
    ("name: x\n? [a, b]\n: 1\n", "a key must be text", 2, 3),
    ("name: x\n<<: {a: 1}\n", "merge key (<<) is not allowed", 2, 1),
    ("name: x\nname: y\n", "duplicate key 'name'", 2, 1),
    ("name: x\n---\nname: y\n", "a second YAML document", 2, 1),
    ("name: x\x00\n", "U+0000 (a NUL character)", 1, 8),
    ("a: 1\r\nname: \x1b[31mx\n", "U+001B (a control character)", 2, 7),
])
def test_structural_refusals_are_located(text, needle, line, column):
    exc = _refused(text)
    assert needle in str(exc) and (exc.line, exc.column) == (line, column)


def test_non_utf8_bytes_are_located_at_the_first_bad_byte(tmp_path):
    p = tmp_path / "latin1.yaml"
    p.write_bytes(TINY_SCENARIO.encode() + "matrix2: µ\n".encode("latin-1"))
    with pytest.raises(ScenarioError) as exc:
        load(p)
    assert "byte 0xb5 is not UTF-8" in str(exc.value)
    assert (exc.value.line, exc.value.column) == (TINY_SCENARIO.count("\n") + 1, 10)


def test_utf16_and_oversized_files_are_refused_before_parsing(tmp_path):
    p = tmp_path / "utf16.yaml"
    p.write_bytes(TINY_SCENARIO.encode("utf-16"))
    with pytest.raises(ScenarioError, match=r":1:1: the file is UTF-16 or UTF-32"):
        load(p)
    p.write_bytes(TINY_SCENARIO.encode() + b"# " + b"c" * yaml_reader.MAX_BYTES + b"\n")
    with pytest.raises(ScenarioError, match=r":1:1: the file is [\d,]+ bytes; allowed: at most 262,144 bytes"):
        load(p)


def test_a_utf8_byte_order_mark_is_fine(tmp_path):
    p = tmp_path / "bom.yaml"
    p.write_bytes(b"\xef\xbb\xbf" + TINY_SCENARIO.encode())
    assert load(p).name == "tiny-calcium"


def test_keys_are_the_text_as_written():
    """``1:`` and ``null:`` are the keys "1" and "null" (unknown, and said so), never a number or None."""
    assert "unknown key '1' in the top level" in str(_refused(TINY_SCENARIO + "1: x\n"))
    assert "unknown metal 'null'" in str(_refused(TINY_SCENARIO.replace("{Mg: 0.2 mmol/L}", "{null: 0.2 mmol/L}")))


# --- values: type, range, finiteness ---------------------------------------------------------------------------------

@pytest.mark.parametrize("old,new,needle", [
    ("burette: 25 mL", "burette: 1e-320 mL", "titrant.burette must be between 1 and 100 mL; got 1e-320 mL"),
    ("burette: 25 mL", "burette: 5e10 mL", "titrant.burette must be between 1 and 100 mL"),
    ("volume: 50 mL", "volume: 1e-300 mL", "sample.volume must be between 0.1 and 1000 mL"),
    ("Mg: 0.2 mmol/L", "Mg: 1e300 M", "interferents.Mg must be between 1e-12 and 10 mol/L"),
    ("Mg: 0.2 mmol/L", "Mg: 5e-324 M", "interferents.Mg must be between 1e-12 and 10 mol/L"),
    ("Ca: 1.0 mmol/L", "Ca: 0 M", "analyte.metals.Ca must be between 1e-12 and 10 mol/L"),
    ("max_error_percent: 1.0", "max_error_percent: .nan", "must be a finite number"),
    ("max_error_percent: 1.0", "weights: {error: .inf}", "must be a finite number"),
    ("max_error_percent: 1.0", "weights: {error: 1" + "0" * 400 + "}", "a number of 401 digits"),
    ("max_error_percent: 1.0", "weights: {error: '5'}", "must be a number, not the text '5'"),
    ("max_masking_agents: 0", "max_masking_agents: true", "search.max_masking_agents must be a whole number"),
    ("modes: [direct]", "modes: [direct]\n  back_metals: []", "search.back_metals is empty"),
    ("modes: [direct]", "modes: []", "search.modes is empty"),
    ("pH: [9.0, 13.0]", "pH: [.nan, 13]", "search.pH.0: the value must be a finite number"),
    ("name: tiny-calcium", "name: tiny-calcium\nanalyte_x: 1", "unknown key 'analyte_x'"),
    ("{metals: {Ca: 1.0 mmol/L}}", "{metals: {Ca: 1.0 mmol/L}, report_as: not a formula}", "is not a formula"),
    ("{metals: {Ca: 1.0 mmol/L}}", "{metals: {Ca: 1.0 mmol/L}, report_as: Xx}", "'Xx' is not a formula"),
    ("name: tiny-calcium", "name: 2024-01-01", "name must be text"),
    ("name: tiny-calcium", "name: " + "n" * 201, "name is 201 characters long; allowed: at most 200"),
    ("Mg: 0.2 mmol/L", "Mg: 0.2 mmol/L trailing", "unknown unit 'mmol/L trailing'"),
    ("Mg: 0.2 mmol/L", "Mg: 5 mol/L/0", "unknown unit 'mol/L/0'"),
    ("Mg: 0.2 mmol/L", "Mg: 5 mg/L as ()", "'()' is not a formula"),
    ("Mg: 0.2 mmol/L", "Mg: 5 mol/L**1e9", "unknown unit 'mol/L**1e9'"),
])
def test_out_of_range_and_meaningless_values_are_refused_where_they_are(old, new, needle):
    assert old in TINY_SCENARIO
    exc = _refused(TINY_SCENARIO.replace(old, new, 1))
    assert needle in str(exc), str(exc)


def test_names_are_checked_and_never_echoed_raw():
    exc = _refused(TINY_SCENARIO.replace("Mg: 0.2", '"Mg\\u00ad": 0.2'))  # a soft hyphen: invisible
    assert "unknown metal 'Mg\\xad'" in str(exc)
    exc = _refused(TINY_SCENARIO.replace("matrix", "x").replace("sample: {", 'sample: {matrix: "a\\u200bb", '))
    assert "sample.matrix holds U+200B" in str(exc)


def test_a_description_may_span_lines_and_a_long_cjk_name_is_fine():
    sc = parse(TINY_SCENARIO.replace("name: tiny-calcium", "name: " + "漢" * 80)
               .replace("description: A calcium", "description: |\n  two\n  lines. A calcium"), "s.yaml")
    assert sc.name == "漢" * 80 and "\n" in sc.description


@pytest.mark.parametrize("value,expected", [("0.1", 0.1), (0.1, 0.1), ("100 mM", 0.1), ("0.1 M", 0.1)])
def test_a_bare_reagent_concentration_is_mol_per_litre(value, expected):
    """One rule in scenarios and on the command line: a reagent's bare number is mol/L; a metal's needs its unit."""
    assert molarity(value, "x") == pytest.approx(expected)
    with pytest.raises(InputError, match="give a unit"):
        concentration_M(0.1, "Ca")
    assert volume_mL(25) == 25.0


@pytest.mark.parametrize("value", ["1e300M", "5e-324 M", "11 M", "1 M/0", "nan M", "1e999 M"])
def test_reagent_concentrations_outside_the_range_are_refused(value):
    with pytest.raises(InputError, match=r"between 1e-12 and 10 mol/L|unknown unit|finite|cannot read"):
        reagent_M(value, "dose")


# --- names, aliases, "did you mean" ----------------------------------------------------------------------------------

@pytest.mark.parametrize("lookup,name,expected", [
    (lambda n: catalogue().masking_agent(n).id, "thiosulphate", "thiosulfate"),
    (lambda n: catalogue().masking_agent(n).id, "Sodium Thiosulphate", "thiosulfate"),
    (lambda n: catalogue().masking_agent(n).id, "triethanolamine", "TEA"),
    (lambda n: catalogue().buffer(n).id, "sodium hydroxide", "NaOH"),
    (lambda n: catalogue().buffer(n).id, "nitric-acid", "nitric_acid"),
    (lambda n: catalogue().titrant(n).id, "edta", "EDTA"),
    (database().metal, "aluminum", "Al"),
    (database().metal, "aluminium", "Al"),
    (database().metal, "ferric", "Fe(III)"),
    (ligand_id, "ammonia", "NH3"),
    (ligand_id, "thiosulphate", "thiosulfate"),
])
def test_aliases_from_the_data(lookup, name, expected):
    assert lookup(name) == expected


@pytest.mark.parametrize("lookup,name,close", [
    (database().metal, "Fe", ["Fe(II)", "Fe(III)"]),
    (database().metal, "iron", ["Fe(II)", "Fe(III)"]),
    (lambda n: catalogue().titrant(n), "EDTX", ["EDTA"]),
    (lambda n: catalogue().masking_agent(n), "thiosulfte", ["thiosulfate"]),
    (ligand_id, "amonia", ["NH3"]),
])
def test_a_close_miss_says_what_was_meant(lookup, name, close):
    with pytest.raises(UnknownNameError) as exc:
        lookup(name)
    hint = re.search(r"did you mean (.*)\?", str(exc.value))
    assert hint, str(exc.value)
    assert all(c in hint.group(1) for c in close)
    assert "known " in str(exc.value)  # and what is allowed


def test_did_you_mean_stays_quiet_without_a_close_name():
    assert did_you_mean("Zz", ["Ca", "Mg"]) == [] and did_you_mean("x" * 100, ["x"]) == []


def test_forbid_takes_any_spelling():
    sc = parse(TINY_SCENARIO.replace("max_masking_agents: 0", "forbid: [Thiosulphate, KCN]"), "s.yaml")
    assert "thiosulfate" not in sc.search.masking and "cyanide" not in sc.search.masking


def test_printable_escapes_what_a_terminal_would_act_on():
    assert printable("a\x1b[2Jb\u202ec\x85d\u2066") == "a\\x1b[2Jb\\u202ec\\x85d\\u2066"
    assert printable("漢字 and é") == "漢字 and é"
    assert printable("x" * 10, 4) == "xxxx..."


# --- outputs: the folder checked first, files written together, safe names ---------------------------------------

def test_writable_folder(tmp_path):
    f = tmp_path / "a-file.txt"
    f.write_text("x")
    with pytest.raises(InputError, match=r"a-file\.txt is a file, not a folder"):
        results.writable_folder(f)
    with pytest.raises(InputError, match=r"lies below the file .*a-file\.txt"):
        results.writable_folder(f / "sub" / "deeper")
    assert results.writable_folder(tmp_path / "new" / "deep").is_dir()
    assert os.listdir(tmp_path / "new" / "deep") == []  # the probe is gone


def _pair(folder, report_text, json_text, fail_at=None):
    """Write a report and its JSON together; ``fail_at`` makes that writer (0: report, 1: JSON) raise."""
    def writer(text, k):
        def write(path):
            if fail_at == k:
                raise OSError("disk full")
            path.write_text(text)
        return write
    results.write_together([(folder / "r.html", writer(report_text, 0)), (folder / "r.json", writer(json_text, 1))])


@pytest.mark.parametrize("fail_at", [0, 1])
def test_a_failed_write_changes_neither_file(tmp_path, fail_at):
    _pair(tmp_path, "old report", "old json")
    with pytest.raises(OSError, match="disk full"):
        _pair(tmp_path, "new report", "new json", fail_at)
    assert (tmp_path / "r.html").read_text() == "old report" and (tmp_path / "r.json").read_text() == "old json"
    assert sorted(p.name for p in tmp_path.iterdir()) == ["r.html", "r.json"]  # no temporary left


def test_the_json_is_renamed_last(tmp_path, monkeypatch):
    """Stopped between the renames (as a SIGKILL could), a new JSON never stands beside an old report."""
    _pair(tmp_path, "old report", "old json")
    real_replace, done = os.replace, []

    def replace_then_stop(src, dst):
        if done:
            raise KeyboardInterrupt  # the process dies before the second rename
        real_replace(src, dst)
        done.append(dst)
    monkeypatch.setattr(results.os, "replace", replace_then_stop)
    with pytest.raises(KeyboardInterrupt):
        _pair(tmp_path, "new report", "new json")
    assert [os.path.basename(d) for d in done] == ["r.html"]
    assert (tmp_path / "r.json").read_text() == "old json"  # the JSON still names the previous run


@pytest.mark.parametrize("name", ["漢" * 80, "漢" * 10_000, "a" + "\u0301" * 5000, "🧪" * 80, "../../etc/passwd", "CON",
                                  "-rf", "\u202eexe.txt", ""])
def test_any_scenario_name_gives_a_short_safe_file_name(tmp_path, name):
    base = report.report_base(name)
    assert len(base.encode()) <= report.MAX_NAME_BYTES and base and "/" not in base and not base.startswith("-")
    assert base.lower() != "con" and printable(base) == base
    (tmp_path / f"{base}.html").write_text("ok")  # the file system takes it ("File name too long" was the bug)


def test_run_and_batch_share_the_naming_rule():
    from optimiser.batch import _unique_bases
    long = "漢" * 80
    assert _unique_bases([f"a/{long}.yaml", f"b/{long}.yaml"]) == [report.report_base(long),
                                                                   report.report_base(long, [report.report_base(long)])]
    assert _unique_bases(["a/Water.yaml", "b/water.yaml"]) == ["Water", "water-2"]


# --- the command line ------------------------------------------------------------------------------------------------

def _main(capsys, *argv):
    code = main(list(argv))
    out, err = capsys.readouterr()
    return code, out, err


@pytest.mark.parametrize("argv,needle", [
    (["batch", "x.yaml", "--jobs", "2.5"], "--jobs must be a whole number from 1 to 256; got '2.5'"),
    (["run", "--seed", "1e3"], "--seed must be a whole number"),
    (["run", "--seed", "-1"], "--seed must be a whole number from 0"),
    (["conditional", "Ca", "--pH", "10", "--ligand", "=0.1"], "no name before '='"),
    (["conditional", "Ca", "--pH", "10", "--ligand", "NH3=0.1", "--ligand", "ammonia=0.2"], "NH3 is given twice"),
    (["conditional", "Ca", "--pH", "10", "--temperature", "nan"], "cannot read temperature|finite"),
    (["conditional", "Ca", "--pH", "10", "--complex", "1e300 M"], "--complex must be between 1e-12 and 10 mol/L"),
    (["conditional", "Ca\u202e", "--pH", "10"], r"unknown metal 'Ca\\u202e'"),
])
def test_command_line_inputs_are_refused_in_one_line(capsys, argv, needle):
    code, _, err = _main(capsys, *argv)
    assert code == 2 and len(err.strip().splitlines()) == 1 and re.search(needle, err), err


def test_a_bare_ligand_concentration_is_mol_per_litre(capsys):
    _, a, _ = _main(capsys, "conditional", "Zn", "--pH", "10", "--ligand", "NH3=0.1", "--json")
    _, b, _ = _main(capsys, "conditional", "Zn", "--pH", "10", "--ligand", "ammonia=100 mM", "--json")
    assert a == b and '"NH3": 0.1' in a


def test_check_reports_each_file_and_echoes_no_control_character(capsys, tmp_path):
    good = tmp_path / "good.yaml"
    good.write_text(TINY_SCENARIO.replace("name: tiny-calcium", "name: ok-name"))
    bad = tmp_path / "bad.yaml"
    bad.write_text(TINY_SCENARIO.replace("name: tiny-calcium", 'name: "x\\e[2J"'))
    code, out, err = _main(capsys, "check", str(bad), str(good), str(tmp_path / "missing.yaml"))
    assert code == 2 and "good.yaml: ok (ok-name" in out
    lines = err.strip().splitlines()
    assert len(lines) == 2 and "bad.yaml:2:7: U+001B" in lines[0] and "missing.yaml: no such file" in lines[1]
    assert "\x1b" not in out + err


def test_batch_index_escapes_control_characters():
    from optimiser.batch import BatchRow, index_html, summary_csv
    rows = [BatchRow("in/\x1b[31m.yaml", "name\u202e", False, message="m\x07")]
    page, table = index_html(rows), summary_csv(rows)
    assert not re.search("[\x00-\x08\x1b\x7f\u202e]", page + table)
