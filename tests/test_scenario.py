"""Scenario files: schema, units, located errors, and a fuzz of the loader."""
import pytest
import yaml
from hypothesis import given, settings
from hypothesis import strategies as st

from optimiser.errors import OptimiserError, ScenarioError
from optimiser.scenario import demo, find_scenarios, load, parse
from optimiser.units import concentration_M


def test_every_example_scenario_loads(scenarios_dir):
    paths = find_scenarios([scenarios_dir])
    assert len(paths) >= 6
    for p in paths:
        sc = load(p)
        assert sc.sample.analyte and sc.titrant_conc_M > 0


def test_demo_is_built_in():
    sc = demo()
    assert sc.analyte_label == "total hardness" and sc.sample.analyte == ("Ca", "Mg")


@pytest.mark.parametrize("text,species,expected", [
    ("2.5 mmol/L", "Ca", 0.0025), ("0.01 M", "Ca", 0.01), ("0.01 mol/L", "Ca", 0.01), ("5 umol/L", "Ca", 5e-6),
    ("5 µmol/L", "Ca", 5e-6), ("1 mM", "Ca", 1e-3), ("40.078 mg/L", "Ca", 1e-3), ("40.078 ppm", "Ca", 1e-3),
    ("0.065380 g/L", "Zn", 1e-3),
    ("100.0869 mg/L as CaCO3", "Mg", 1e-3),  # hardness units: 100.09 g/mol CaCO3 (common practice)
])
def test_units(text, species, expected):
    """Molar masses from periodictable (Ca 40.078, Zn 65.38 g/mol, IUPAC standard atomic weights)."""
    assert concentration_M(text, species) == pytest.approx(expected, rel=1e-4)


def test_hardness_conversion_factors():
    """Ca x 2.497 and Mg x 4.118 convert mg/L of the metal to mg/L as CaCO3 (common practice)."""
    ca = concentration_M("1 mg/L", "Ca")
    mg = concentration_M("1 mg/L", "Mg")
    assert concentration_M("2.497 mg/L as CaCO3") == pytest.approx(ca, rel=1e-3)
    assert concentration_M("4.118 mg/L as CaCO3") == pytest.approx(mg, rel=1e-3)


def _write(tmp_path, text, name="s.yaml"):
    p = tmp_path / name
    p.write_text(text)
    return p


@pytest.mark.parametrize("change,message,line", [
    (("sample: {volume: 50 mL,", "sample: {colour: blue, volume: 50 mL,"), "unknown key 'colour'", 4),
    (("Mg: 0.2 mmol/L", "Mg: 0.2 blorps/L"), "unknown unit", 6),
    (("Mg: 0.2 mmol/L", "Mg: 0.2 furlongs/L"), "is not a concentration; allowed units", 6),
    (("Mg: 0.2 mmol/L", "Mg: -0.2 mmol/L"), "cannot be negative", 6),
    (("pH: [9.0, 13.0]", "pH: [13.0, 9.0]"), "low < high", 9),
    (("Mg: 0.2 mmol/L", "Xq: 0.2 mmol/L"), "unknown metal 'Xq'", 6),
    (("titrants: [EDTA]", "titrants: [EDTX]"), "unknown titrant 'EDTX'", 10),
])
def test_errors_name_file_line_and_what_is_allowed(tmp_path, tiny_scenario_text, change, message, line):
    text = tiny_scenario_text.replace(*change)
    assert text != tiny_scenario_text
    p = _write(tmp_path, text)
    with pytest.raises(ScenarioError) as exc:
        load(p)
    assert message in str(exc.value)
    assert exc.value.path == str(p) and exc.value.line == line
    assert f"{p}:{line}:" in str(exc.value)


def test_malformed_yaml_is_located(tmp_path):
    p = _write(tmp_path, "name: x\nsample: {volume: 50 mL\nanalyte: [\n")
    with pytest.raises(ScenarioError) as exc:
        load(p)
    assert "malformed YAML" in str(exc.value) and exc.value.line is not None


def test_duplicate_keys_are_rejected(tmp_path, tiny_scenario_text):
    p = _write(tmp_path, tiny_scenario_text + "name: again\n")
    with pytest.raises(ScenarioError, match="duplicate key 'name'"):
        load(p)


def test_unsafe_yaml_tags_are_refused(tmp_path):
    p = _write(tmp_path, "name: !!python/object/apply:os.system ['echo hi']\n")
    with pytest.raises(ScenarioError):
        load(p)


def test_missing_file():
    with pytest.raises(ScenarioError, match="no such file"):
        load("/nonexistent/scenario.yaml")


def test_forbid_removes_a_reagent():
    sc = parse("""
name: f
sample: {volume: 25 mL}
analyte: {metals: {Zn: 1 mmol/L}}
interferents: {Cu: 0.5 mmol/L}
titrant: {concentration: 0.01 M}
search: {forbid: [cyanide, thiourea], max_hazard: moderate}
""")
    assert "cyanide" not in sc.search.masking and "thiourea" not in sc.search.masking
    assert sc.search.max_hazard == 2


KEYS = st.sampled_from(["name", "sample", "analyte", "titrant", "search", "targets", "interferents", "volume", "metals", "Ca",
                        "pH", "concentration", "weights", "bogus", "max_hazard", "forbid", "modes"])
LEAVES = st.one_of(st.none(), st.booleans(), st.integers(-5, 100), st.floats(allow_nan=True), st.text(max_size=12),
                   st.sampled_from(["50 mL", "0.01 M", "2 mmol/L", "-1 mM", "x mg/L", "as CaCO3", "EDTA", "[1, 2]"]))
DOCS = st.recursive(LEAVES, lambda ch: st.one_of(st.lists(ch, max_size=4), st.dictionaries(KEYS, ch, max_size=6)), max_leaves=25)


@settings(max_examples=300, deadline=None)
@given(DOCS)
def test_fuzz_loader_raises_only_our_errors(doc):
    """Random YAML documents and values: the loader raises nothing but the project's own error type."""
    text = yaml.safe_dump(doc)
    try:
        parse(text, "fuzz.yaml")
    except OptimiserError:
        pass


@settings(max_examples=200, deadline=None)
@given(st.text(max_size=200))
def test_fuzz_loader_on_raw_text(text):
    try:
        parse(text, "fuzz.yaml")
    except OptimiserError:
        pass


@pytest.mark.parametrize("line,message", [
    ("  titrants: null", "search.titrants must be a list"),
    ("  buffers: null", "search.buffers must be a list"),
    ("  modes: null", "search.modes must be a list"),
    ("  pH: null", "search.pH must be [low, high], two numbers"),
    ("  max_masking_agents: null", "search.max_masking_agents must be a whole number"),
])
def test_null_where_a_value_is_needed_is_located(tiny_scenario_text, line, message):
    """A null search value was a bare TypeError from inside the parser; it is now a located ScenarioError."""
    key = line.split(":")[0]
    lines = [ln for ln in tiny_scenario_text.splitlines() if not ln.startswith(key + ":")]
    at = lines.index("search:") + 1
    text = "\n".join(lines[:at] + [line] + lines[at:]) + "\n"
    with pytest.raises(ScenarioError, match=message.replace("[", r"\[").replace("]", r"\]")) as exc:
        parse(text, "s.yaml")
    assert exc.value.line == at + 1


def test_null_weights_are_located(tiny_scenario_text):
    text = tiny_scenario_text.replace("targets: {max_error_percent: 1.0}", "targets: {weights: null}")
    with pytest.raises(ScenarioError, match="targets.weights must be a mapping"):
        parse(text, "s.yaml")


def test_demo_search_space_is_the_catalogue_defaults():
    """The demo lists no reagents: it searches what the code used to list, now the data's defaults, in the same order."""
    sp = demo().search
    assert sp.titrants == ("EDTA", "EGTA", "CDTA", "DTPA")
    assert sp.buffers == ("ammonia", "acetate", "hexamine", "NaOH", "nitric_acid")
    assert sp.masking == ("cyanide", "fluoride", "TEA", "thiosulfate", "thiourea", "iodide", "phen", "citrate", "tartrate")
    assert sp.indicators == ("EBT", "calmagite", "murexide", "calcon_carboxylic", "xylenol_orange", "PAN", "methylthymol_blue",
                             "sulfosalicylic_acid")
    assert sp.back_metals == ("Zn", "Mg") and sp.max_masking_agents == 1 and sp.pH_range == (7.0, 13.0)


@pytest.mark.parametrize("line,acid", [("pH: 2", 0.01), ("acid: 20 mmol/L", 0.02), ("pH: 7", 0.0)])
def test_an_acid_preserved_sample_states_its_acid(line, acid):
    """The sample's own acid (a preserved water: pH 2, common practice) is read from sample.pH or sample.acid."""
    text = ("name: acid\nsample: {volume: 50 mL, " + line.replace(": ", ": ", 1) + "}\n"
            "analyte: {metals: {Ca: 1 mmol/L}}\ntitrant: {concentration: 0.01 M}\n")
    assert parse(text, "acid.yaml").sample.acid_M == pytest.approx(acid)


def test_acid_and_pH_together_are_refused():
    text = ("name: acid\nsample: {volume: 50 mL, pH: 2, acid: 10 mmol/L}\n"
            "analyte: {metals: {Ca: 1 mmol/L}}\ntitrant: {concentration: 0.01 M}\n")
    with pytest.raises(ScenarioError, match="either as sample.acid"):
        parse(text, "acid.yaml")
