"""The data files' schemas, and the lists the data owns (defaults, standards, safety rules), on edited copies
of the real data held in memory: each test changes one thing and checks what the loaders make of it."""
import csv
import io

import pytest
import yaml

from optimiser import constants, data, reagents
from optimiser.errors import DataError, ScenarioError, UnknownNameError
from optimiser.scenario import parse

SCENARIO = """
name: defaults
sample: {volume: 50 mL}
analyte: {metals: {Ca: 1 mmol/L}}
titrant: {concentration: 0.01 M}
"""


def _clear_caches() -> None:
    for cached in (data.table, data.document, data.references, constants.database, reagents.catalogue):
        cached.cache_clear()


class EditedData:
    """The package's data files with some replaced in memory (the files on disk are never touched)."""

    def __init__(self, original):
        self.original = original
        self.texts: dict[str, str] = {}

    def text(self, name: str) -> str:
        return self.texts.get(name) or self.original(name)

    def put(self, name: str, text: str) -> None:
        self.texts[name] = text
        _clear_caches()

    def edit_yaml(self, name: str, change) -> None:
        """Apply ``change(document)`` (in place) to a YAML file."""
        doc = yaml.safe_load(self.text(name))
        change(doc)
        self.put(name, yaml.safe_dump(doc, sort_keys=False))

    def add_csv_rows(self, name: str, rows: list[dict]) -> None:
        reader = csv.DictReader(io.StringIO(self.text(name)))
        out = io.StringIO()
        writer = csv.DictWriter(out, fieldnames=reader.fieldnames, lineterminator="\n")
        writer.writeheader()
        writer.writerows([*reader, *rows])
        self.put(name, out.getvalue())


@pytest.fixture()
def edited(monkeypatch):
    ed = EditedData(data._text)
    monkeypatch.setattr(data, "_text", ed.text)
    _clear_caches()
    yield ed
    _clear_caches()  # the next user of the caches reads the real files again


def _entry(doc, section, ident):
    entries = doc if section is None else doc[section]
    return next(e for e in entries if e.get("id", e.get("name")) == ident)


def _copy_of_EBT(ed: EditedData, new_id: str = "EBT_copy") -> None:
    """EBT under a new id: its entry, its ligand charge and its constants copied (in memory)."""
    def add_indicator(doc):
        ebt = dict(_entry(doc, None, "EBT"))
        doc.append({**ebt, "id": new_id, "name": "Copy of Eriochrome Black T", "aliases": []})
    ed.edit_yaml("indicators.yaml", add_indicator)
    ed.edit_yaml("reagents.yaml", lambda doc: doc["ligands"].append({"id": new_id, "charge": -3}))
    for table in ("protonation.csv", "complexes.csv"):
        rows = [dict(r, ligand=new_id) for r in csv.DictReader(io.StringIO(ed.text(table))) if r["ligand"] == "EBT"]
        assert rows
        ed.add_csv_rows(table, rows)


# --- data owns the default search space -------------------------------------------------------------------

def test_a_new_indicator_is_searched_by_default_with_no_code_change(edited):
    """An indicator added to indicators.yaml (a copy of EBT) joins the default search space of a scenario without
    an indicators list; one that lists its indicators is unchanged."""
    before = parse(SCENARIO).search.indicators
    assert "EBT_copy" not in before
    _copy_of_EBT(edited)
    sc = parse(SCENARIO)
    assert sc.search.indicators == (*before, "EBT_copy")
    db = constants.database()
    assert [k.log_K for k in db.protonation["EBT_copy"]] == [k.log_K for k in db.protonation["EBT"]]
    assert parse(SCENARIO + "search: {indicators: [EBT]}\n").search.indicators == ("EBT",)


def test_search_default_false_keeps_a_reagent_out_of_the_defaults_but_usable_by_name(edited):
    edited.edit_yaml("indicators.yaml", lambda doc: _entry(doc, None, "PAN").update(search_default=False))
    edited.edit_yaml("reagents.yaml", lambda doc: _entry(doc, "titrants", "DTPA").update(search_default=False))
    sc = parse(SCENARIO)
    assert "PAN" not in sc.search.indicators and "EBT" in sc.search.indicators
    assert sc.search.titrants == ("EDTA", "EGTA", "CDTA")
    assert parse(SCENARIO + "search: {indicators: [PAN], titrants: [DTPA]}\n").search.indicators == ("PAN",)
    assert parse(SCENARIO + "search: {forbid: [PAN]}\n").search.indicators == sc.search.indicators


# --- back-titration standards -----------------------------------------------------------------------------

def test_back_metals_are_checked_against_the_standards_in_the_data(edited):
    with pytest.raises(ScenarioError, match="the back-titration standard must be Zn or Mg") as exc:
        parse(SCENARIO + "search: {back_metals: [Zn, Cd]}\n", "s.yaml")
    line = "search: {back_metals: [Zn, Cd]}"
    assert (exc.value.line, exc.value.column) == (6, line.index("Cd") + 1)

    def add_cd(doc):
        doc["standards"].append({"id": "Cd", "name": "cadmium standard", "salt": "cadmium nitrate tetrahydrate",
                                 "formula": "Cd(NO3)2(H2O)4", "hazard": 4, "cautions": ["Toxic."]})
    edited.edit_yaml("reagents.yaml", add_cd)
    assert parse(SCENARIO + "search: {back_metals: [Zn, Cd]}\n").search.back_metals == ("Zn", "Cd")
    assert parse(SCENARIO).search.back_metals == ("Zn", "Mg", "Cd")
    with pytest.raises(ScenarioError, match="must be Zn, Mg or Cd"):
        parse(SCENARIO + "search: {back_metals: [Pb]}\n")


def test_a_standard_must_be_a_metal_id(edited):
    edited.edit_yaml("reagents.yaml", lambda doc: _entry(doc, "standards", "Zn").update(id="Zn2+"))
    with pytest.raises(DataError, match="spelling of 'Zn'") as exc:
        reagents.catalogue()
    assert (exc.value.file, exc.value.entry, exc.value.key) == ("reagents.yaml", "standards/Zn2+", "id")


# --- schemas: unknown, missing and mistyped keys, unresolved sources ------------------------------------------

@pytest.mark.parametrize("file,section,ident,change,key,message", [
    ("reagents.yaml", "titrants", "EDTA", {"colour": "white"}, "colour", "unknown key; allowed: id, name, charge"),
    ("reagents.yaml", "titrants", "EGTA", {"complexity": "high"}, "complexity", "must be a number; got 'high'"),
    ("reagents.yaml", "buffers", "ammonia", {"hazard": 7}, "hazard", "7 is not allowed; allowed: 0, 1, 2, 3, 4"),
    ("reagents.yaml", "buffers", "acetate", {"recipe": {"kind": "mix", "base_formula": "NaOAc"}}, "recipe.kind",
     "'mix' is not allowed; allowed: salt_plus_base_solution"),
    ("reagents.yaml", "buffers", "NaOH", {"recipe": {"kind": "strong_base", "base_solution": {"name": "NaOH 1 M"}}},
     "recipe.base_solution.molarity_M", "missing key (required: name, molarity_M)"),
    ("reagents.yaml", "masking", "TEA", {"masks": {"Al": {"pH_range": [9.5, 13], "min_ratio": 3}}}, "masks.Al.note",
     "missing key"),
    ("reagents.yaml", "masking", "cyanide", {"search_default": "yes"}, "search_default", "must be true or false"),
    ("reagents.yaml", "safety_rules", "acid and cyanide", {"when": ["cyanide"]}, "when", "unknown key; allowed: name, when_all"),
    ("indicators.yaml", None, "EBT", {"metal_colour": "wine-red"}, "metal_colour", "unknown key; allowed: id, name, aliases"),
    ("indicators.yaml", None, "murexide", {"sources": ["memory", "nobody_2031"]}, "sources",
     "source key 'nobody_2031' is not in references.csv"),
    ("indicators.yaml", None, "PAN", {"usable_pH": [2.5, "ten"]}, "usable_pH[1]", "must be a number; got 'ten'"),
    ("metals.yaml", None, "Zn", {"charge": 2.5}, "charge", "must be a whole number; got 2.5"),
])
def test_a_bad_entry_names_file_entry_key_and_what_is_allowed(edited, file, section, ident, change, key, message):
    edited.edit_yaml(file, lambda doc: _entry(doc, section, ident).update(change))
    with pytest.raises(DataError) as exc:
        reagents.catalogue()
    entry = f"{section}/{ident}" if section else ident
    assert (exc.value.file, exc.value.entry, exc.value.key) == (file, entry, key)
    assert message in str(exc.value)
    assert str(exc.value).startswith(f"{file} entry {entry!r} key {key!r}: ")


@pytest.mark.parametrize("file,section,ident,key", [
    ("reagents.yaml", "titrants", "CDTA", "complexity"),
    ("reagents.yaml", "buffers", "hexamine", "recipe"),
    ("reagents.yaml", "standards", "Mg", "formula"),
    ("indicators.yaml", None, "calmagite", "complex_colours"),
    ("indicators.yaml", None, "EBT", "search_default"),
])
def test_a_missing_key_is_named(edited, file, section, ident, key):
    edited.edit_yaml(file, lambda doc: _entry(doc, section, ident).pop(key))
    with pytest.raises(DataError, match="missing key") as exc:
        reagents.catalogue()
    assert (exc.value.file, exc.value.key) == (file, key)


def test_optional_keys_take_their_defaults(edited):
    """A buffer without strong_alkali or default_total_M, a metal without aliases: the declared defaults."""
    def drop(doc):
        _entry(doc, "buffers", "NaOH").pop("strong_alkali")
        _entry(doc, "buffers", "ammonia").pop("default_total_M")
    edited.edit_yaml("reagents.yaml", drop)
    cat = reagents.catalogue()
    assert cat.buffer("NaOH").strong_alkali is False
    assert cat.buffer("ammonia").default_total_M == 0.0
    edited.edit_yaml("metals.yaml", lambda doc: _entry(doc, None, "Zn").pop("aliases"))
    assert constants.database().metals["Zn"]["aliases"] == []
    with pytest.raises(UnknownNameError):
        constants.database().metal("Zn2+")


@pytest.mark.parametrize("file,section,ident,change,message", [
    ("reagents.yaml", "buffers", "acetate", {"recipe": {"kind": "salt_plus_acid_solution", "base_formula": "NaOAc"}},
     "a salt_plus_acid_solution recipe needs acid_solution"),
    ("reagents.yaml", "buffers", "nitric_acid", {"ligand": "acetate"}, "a strong_acid recipe goes with no ligand"),
    ("reagents.yaml", "titrants", "DTPA", {"charge": -4}, "charge -4 differs from the ligand's -5"),
    ("reagents.yaml", "safety_rules", "acid and cyanide", {"unless_any": ["NaOH", "bleach"]}, "'bleach' is not a reagent id"),
    ("indicators.yaml", None, "murexide", {"complex_colours": {"Ni": "yellow"}}, "needs a 'default' colour"),
    ("indicators.yaml", None, "murexide", {"complex_colours": {"default": "pink", "Unobtainium": "gold"}}, "unknown metal"),
    ("indicators.yaml", None, "EBT", {"blocked_by": ["Cu", "Fe3+"]}, "is a spelling of 'Fe(III)'"),
])
def test_inconsistent_entries_are_refused(edited, file, section, ident, change, message):
    edited.edit_yaml(file, lambda doc: _entry(doc, section, ident).update(change))
    with pytest.raises(DataError) as exc:
        reagents.catalogue()
    assert message in str(exc.value)
    assert exc.value.file == file and exc.value.entry == (f"{section}/{ident}" if section else ident)


def test_an_indicator_needs_a_ligand_charge(edited):
    edited.edit_yaml("indicators.yaml", lambda doc: doc.append({**_entry(doc, None, "EBT"), "id": "EBT_orphan"}))
    with pytest.raises(DataError, match="no charge") as exc:
        reagents.catalogue()
    assert (exc.value.entry, exc.value.key) == ("EBT_orphan", "id")


def test_an_id_given_twice_is_refused(edited):
    edited.edit_yaml("reagents.yaml", lambda doc: doc["masking"].append(dict(_entry(doc, "masking", "iodide"))))
    with pytest.raises(DataError, match="given twice") as exc:
        reagents.catalogue()
    assert exc.value.entry == "masking/iodide"


def test_an_unknown_section_is_refused(edited):
    edited.edit_yaml("reagents.yaml", lambda doc: doc.update(indicators=[]))
    with pytest.raises(DataError, match="unknown section; allowed: ligands, titrants") as exc:
        reagents.catalogue()
    assert exc.value.key == "indicators"


def test_malformed_yaml_is_a_data_error(edited):
    edited.put("metals.yaml", "- {id: Mg, element: Mg\n- {id: Ca}\n")
    with pytest.raises(DataError, match="malformed YAML at line 2") as exc:
        constants.database()
    assert exc.value.file == "metals.yaml"


# --- CSV tables -------------------------------------------------------------------------------------------

@pytest.mark.parametrize("row_change,column,message", [
    ({"log_beta": "ten"}, "log_beta", "'ten' is not a number"),
    ({"n": "1.5"}, "n", "'1.5' is not a whole number"),
    ({"temperature_C": ""}, "temperature_C", "field is empty (it is required)"),
    ({"source": "nobody_2031"}, "source", "source key 'nobody_2031' is not in references.csv"),
])
def test_a_bad_table_cell_names_file_line_and_column(edited, row_change, column, message):
    text = edited.text("complexes.csv")
    rows = list(csv.DictReader(io.StringIO(text)))
    rows[4].update(row_change)
    out = io.StringIO()
    writer = csv.DictWriter(out, fieldnames=list(rows[0]), lineterminator="\n")
    writer.writeheader()
    writer.writerows(rows)
    edited.put("complexes.csv", out.getvalue())
    with pytest.raises(DataError) as exc:
        constants.database()
    assert (exc.value.file, exc.value.entry, exc.value.key) == ("complexes.csv", "line 6", column)
    assert message in str(exc.value)


def test_a_missing_or_unknown_column_is_named(edited):
    text = edited.text("solids.csv")
    edited.put("solids.csv", text.replace("log_Ksp", "logKsp", 1))
    with pytest.raises(DataError, match="unknown column; allowed: solid, metal, ligand, n, log_Ksp") as exc:
        constants.database()
    assert (exc.value.file, exc.value.key) == ("solids.csv", "logKsp")
    edited.put("solids.csv", text)
    edited.put("water.csv", "reaction,log_K,temperature_C,ionic_strength_M,source\nH2O = H+ + OH-,-14,25,0,memory\n")
    with pytest.raises(DataError, match="required column is missing") as exc:
        constants.database()
    assert (exc.value.file, exc.value.key) == ("water.csv", "dH_kJ_mol")


def test_a_duplicate_reference_key_is_refused(edited):
    edited.put("references.csv", edited.text("references.csv") + 'memory,"A second memory entry, twice over.",none,\n')
    with pytest.raises(DataError, match="duplicate reference key") as exc:
        data.references()
    assert exc.value.key == "memory"


def test_a_new_indicator_is_simulated_by_the_search_with_no_code_change(edited):
    """The search itself takes the new indicator: it is in the structures the search enumerates, and a candidate that
    uses it is simulated and reads like EBT's (the same constants under another name)."""
    from optimiser.candidate import Candidate
    from optimiser.evaluation import Evaluator
    from optimiser.structures import enumerate_structures

    _copy_of_EBT(edited)
    text = SCENARIO + ("interferents: {Mg: 0.3 mmol/L}\n"
                       "search: {pH: [9.0, 10.5], titrants: [EDTA], buffers: [ammonia], max_masking_agents: 0, "
                       "modes: [direct]}\n")
    sc = parse(text)
    assert "EBT_copy" in sc.search.indicators
    ev = Evaluator(sc)
    assert "EBT_copy" in {st.indicator for st in enumerate_structures(sc)[0]}
    pair = ev.evaluate([Candidate(10.0, "ammonia", -1.0, "EDTA", (), ind, "direct", "Zn") for ind in ("EBT", "EBT_copy")])
    assert pair[1].titration is not None and pair[1].titration.method.indicator == "EBT_copy"
    assert pair[1].error_percent == pytest.approx(pair[0].error_percent, rel=1e-9)
