"""Invariants of the constants database itself (optimiser/data)."""
import csv
import io
from importlib import resources

import pytest

from optimiser import data
from optimiser.conditional import Conditions
from optimiser.constants import IONIC_STRENGTH_MAX_M, TEMPERATURE_RANGE_C, H, database
from optimiser.errors import InputError, ScenarioError, UnknownNameError
from optimiser.reagents import KINDS, catalogue
from optimiser.scenario import parse

TABLES = ("protonation.csv", "complexes.csv", "hydrolysis.csv", "solids.csv", "water.csv")


@pytest.mark.parametrize("name", TABLES)
def test_every_source_key_resolves(name):
    """Every row's source key is in references.csv."""
    refs = data.references()
    for row in data.table(name):
        assert row["source"] in refs, (name, row)


@pytest.mark.parametrize("name", TABLES)
def test_no_value_lacks_temperature_and_ionic_strength(name):
    for row in data.table(name):
        assert float(row["temperature_C"]) >= 0
        assert float(row["ionic_strength_M"]) >= 0


def test_every_reference_has_a_citation():
    for key, row in data.references().items():
        assert len(row["citation"]) > 20, key


def test_memory_values_are_flagged_as_such():
    """The key 'memory' resolves to a citation that says the value is from memory."""
    assert "from memory" in data.references()["memory"]["citation"].lower()
    db = database()
    mem = [k for ks in db.complexes.values() for k in ks if k.from_memory]
    assert mem and all(k.ref == "memory" for k in mem)


def test_every_charge_balances():
    """The charge of each species equals the sum over its components (checked again here, not only at load)."""
    db = database()
    all_k = [k for ks in db.complexes.values() for k in ks] + [k for ks in db.protonation.values() for k in ks] + \
        [k for ks in db.hydrolysis.values() for k in ks] + [s.constant for ss in db.solids.values() for s in ss]
    assert len(all_k) > 300
    for k in all_k:
        assert k.charge == sum(nu * db.charges[c] for c, nu in k.stoichiometry.items()), k.species


# Harvey, Analytical Chemistry 2.1, appendix 'Formation Constants' (Martell & Smith): stepwise log K of the
# metal-ammine complexes at 25 degC, I = 0 (Co at 20 degC). The table stores the cumulative constants.
HARVEY_AMMINE_STEPWISE = {
    "Cu": [4.04, 3.43, 2.80, 1.48],
    "Zn": [2.21, 2.29, 2.36, 2.03],
    "Cd": [2.55, 2.01, 1.34, 0.84],
    "Ni": [2.72, 2.17, 1.66, 1.12, 0.67, -0.03],
    "Co": [1.99, 1.51, 0.93, 0.64, 0.06, -0.73],
}


@pytest.mark.parametrize("metal", sorted(HARVEY_AMMINE_STEPWISE))
def test_cumulative_and_stepwise_agree(metal):
    """Cumulative beta_n of the ammines equals the sum of Harvey's stepwise K (source: Harvey appendix)."""
    ks = sorted(database().complexes[(metal, "NH3")], key=lambda k: k.stoichiometry["NH3"])
    steps = HARVEY_AMMINE_STEPWISE[metal]
    assert len(ks) == len(steps)
    for n, k in enumerate(ks, start=1):
        assert k.log_K == pytest.approx(sum(steps[:n]), abs=0.006)


def test_protonation_constants_are_cumulative_and_increasing():
    """Stepwise protonation constants (differences of the cumulative ones) are positive for every ligand."""
    for lig, ks in database().protonation.items():
        betas = [k.log_K for k in ks]
        steps = [b - a for a, b in zip([0.0] + betas, betas)]
        assert all(s > 0 for s in steps), (lig, steps)
        assert [k.stoichiometry[H] for k in ks] == list(range(1, len(ks) + 1)), lig


def test_edta_acid_constants_are_the_nea_review():
    """EDTA protonation (cumulative 11.24, 18.04, 21.19, 23.42, 24.72 at I = 0) as in ThermoChimie v10a (NEA-TDB, Hummel
    et al. 2005), the set that treats Na+ and K+ pairs of Y4- as separate species."""
    ks = database().protonation["EDTA"]
    assert [k.log_K for k in ks] == pytest.approx([11.24, 18.04, 21.19, 23.42, 24.72])
    assert all(k.ionic_strength_M == 0 and k.ref == "thermochimie_v10a" for k in ks)


# NIST SRD 46 (MINTEQA2 v4) and NEA (ThermoChimie v10a) log K(MY) at I = 0, with their pKa6 10.948 and 11.24
# (reference/constants.md sections 1a and 1b). Only K(MY)/K(HY) is free of the alkali-ion medium, so NIST's K(MY)
# moved by the pKa6 difference must land on NEA's independently reviewed value.
NIST_NEA_MY = {"Ca": (12.42, 12.69), "Mg": (10.57, 10.90), "Ni": (20.1, 20.54)}


@pytest.mark.parametrize("metal", sorted(NIST_NEA_MY), ids=lambda m: f"NIST46-vs-NEA-{m}")
def test_nist_MY_moved_to_the_nea_basis_agrees_with_nea(metal):
    """NIST K(MY) + (11.24 - 10.948) is within 0.2 of NEA's K(MY): the rule used for the other metals' rows."""
    nist, nea = NIST_NEA_MY[metal]
    assert nist + (11.24 - 10.948) == pytest.approx(nea, abs=0.2)
    stored = [k for k in database().complexes[(metal, "EDTA")] if "H+" not in k.stoichiometry][0]
    assert stored.log_K == pytest.approx(nea) and stored.ref == "thermochimie_v10a"


def test_nist_EDTA_rows_are_on_the_nea_basis():
    """Every EDTA row still from NIST carries the +0.292 shift, stated in its note."""
    rows = [r for r in data.table("complexes.csv") if r["ligand"] == "EDTA" and r["source"] == "nist46_minteq4"]
    assert rows and all("plus 0.292" in r["note"] for r in rows)


@pytest.mark.parametrize("titrant", ["EDTA", "EGTA", "CDTA", "DTPA"])
def test_titrants_cover_the_usual_metals(titrant):
    db = database()
    have = {m for (m, t) in db.complexes if t == titrant}
    need = {"Mg", "Ca", "Sr", "Ba", "Mn", "Fe(II)", "Fe(III)", "Co", "Ni", "Cu", "Zn", "Cd", "Hg", "Pb"}
    assert need - have == set() or titrant != "EDTA"
    assert len(have) >= 11


def test_every_reagent_formula_has_a_molar_mass():
    """Molar masses of the usual salts come from periodictable (Na2H2Y.2H2O is 372.24 g/mol, common practice)."""
    cat = catalogue()
    assert cat.titrant("EDTA").molar_mass == pytest.approx(372.24, abs=0.02)
    for agent in cat.masking.values():
        assert agent.molar_mass > 10
    for t in cat.titrants.values():
        assert t.molar_mass > 200


def test_every_hazardous_reagent_carries_cautions():
    cat = catalogue()
    for thing in [*cat.masking.values(), *cat.buffers.values()]:
        if thing.hazard >= 2:
            assert thing.cautions, thing.id
    assert any("acid" in c.lower() for c in cat.masking_agent("cyanide").cautions)
    assert any("gluconate" in c.lower() for c in cat.masking_agent("fluoride").cautions)


def test_disagreements_are_written_down():
    text = resources.files("optimiser").joinpath("data", "README.md").read_text()
    for word in ("Ba-EDTA", "Cu(I)-cyanide", "Zn(CN)4", "Fe(OH)2", "pKa6"):
        assert word in text


def test_tables_have_no_duplicate_rows():
    rows = list(csv.DictReader(io.StringIO(resources.files("optimiser").joinpath("data", "complexes.csv").read_text())))
    keys = [(r["metal"], r["ligand"], r["n"], r["h"]) for r in rows]
    assert len(keys) == len(set(keys))


# --- the reagent catalogue: what the data now owns ----------------------------------------------------------

def test_every_indicator_source_resolves():
    """Every key in an indicator's sources is in references.csv (checked at load; asserted here on the real data)."""
    refs = data.references()
    for ind in catalogue().indicators.values():
        assert ind.sources and all(s in refs for s in ind.sources), ind.id


@pytest.mark.parametrize("kind,expected", [
    ("titrants", ("EDTA", "EGTA", "CDTA", "DTPA")),
    ("buffers", ("ammonia", "acetate", "hexamine", "NaOH", "nitric_acid")),
    ("masking", ("cyanide", "fluoride", "TEA", "thiosulfate", "thiourea", "iodide", "phen", "citrate", "tartrate")),
    ("indicators", ("EBT", "calmagite", "murexide", "calcon_carboxylic", "xylenol_orange", "PAN", "methylthymol_blue",
                    "sulfosalicylic_acid")),
])
def test_default_search_lists_are_the_ones_the_code_held(kind, expected):
    """The search_default flags reproduce the lists scenario.py used to hard-code, in the same order."""
    assert catalogue().default_ids(kind) == expected


def test_default_ids_of_an_unknown_kind():
    with pytest.raises(UnknownNameError, match="known reagent kinds: buffers, indicators, masking, titrants"):
        catalogue().default_ids("standards_")


def test_default_search_space_comes_from_the_catalogue():
    from optimiser.scenario import SearchSpace
    sp = SearchSpace()
    cat = catalogue()
    assert (sp.titrants, sp.buffers, sp.masking, sp.indicators) == tuple(cat.default_ids(k) for k in KINDS)
    assert sp.back_metals == ("Zn", "Mg") == tuple(cat.standards)


def test_titrant_complexity():
    """EDTA adds nothing; EGTA, CDTA and DTPA add a half (our own scale, common practice)."""
    assert {t.id: t.complexity for t in catalogue().titrants.values()} == {"EDTA": 0.0, "EGTA": 0.5, "CDTA": 0.5, "DTPA": 0.5}


def test_back_titration_standards():
    """Zn and Mg standards, their salts' molar masses from periodictable (ZnSO4.7H2O 287.5, MgSO4.7H2O 246.5 g/mol,
    common practice)."""
    cat = catalogue()
    assert list(cat.standards) == ["Zn", "Mg"]
    assert cat.standard("zn") is cat.standards["Zn"]
    assert cat.standards["Zn"].molar_mass == pytest.approx(287.5, abs=0.1)
    assert cat.standards["Mg"].molar_mass == pytest.approx(246.5, abs=0.1)
    assert cat.standards["Zn"].hazard == 2 and cat.standards["Zn"].cautions
    with pytest.raises(UnknownNameError, match="known back-titration standards: Mg, Zn"):
        cat.standard("Cd")


@pytest.mark.parametrize("buffer,kind,weighed,solution,molarity", [
    ("ammonia", "salt_plus_base_solution", "NH4Cl", "concentrated ammonia (25 % NH3)", 13.4),
    ("acetate", "salt_plus_acid_solution", "C2H3NaO2(H2O)3", "glacial acetic acid", 17.4),
    ("hexamine", "base_plus_acid_solution", "C6H12N4", "hydrochloric acid 1 M", 1.0),
    ("NaOH", "strong_base", None, "sodium hydroxide 1 M", 1.0),
    ("nitric_acid", "strong_acid", None, "nitric acid 1 M", 1.0),
])
def test_buffer_recipes(buffer, kind, weighed, solution, molarity):
    r = catalogue().buffer(buffer).recipe
    assert (r.kind, r.weighed_formula, r.solution.name, r.solution.molarity_M) == (kind, weighed, solution, molarity)


def test_only_sodium_hydroxide_raises_the_pH_with_strong_alkali():
    assert [b.id for b in catalogue().buffers.values() if b.strong_alkali] == ["NaOH"]


def test_buffer_raw_keeps_the_keys_older_callers_read():
    """``Buffer.raw`` still offers acid_formula / base_formula / *_solution as reagents.yaml used to."""
    raw = catalogue().buffer("ammonia").raw
    assert raw["acid_formula"] == "NH4Cl"
    assert raw["base_solution"] == {"name": "concentrated ammonia (25 % NH3)", "molarity_M": 13.4}
    assert "base_formula" not in raw and "acid_solution" not in raw
    assert catalogue().buffer("NaOH").raw["base_formula"] == "NaOH"


@pytest.mark.parametrize("reagents,names", [
    (["EDTA", "ammonia", "cyanide", "EBT"], ["acid and cyanide"]),
    (["EDTA", "hexamine", "cyanide", "TEA", "xylenol_orange"], ["acid and cyanide"]),
    (["EDTA", "NaOH", "cyanide", "calcon_carboxylic"], []),
    (["EDTA", "ammonia", "TEA", "EBT"], []),
    ([], []),
])
def test_safety_rules_for(reagents, names):
    """The acid-and-cyanide caution goes with cyanide unless the method stays in NaOH (as the report printed it)."""
    rules = catalogue().safety_rules_for(reagents)
    assert [r.name for r in rules] == names
    for r in rules:
        assert r.hazard == 4
        assert r.cautions == ("Never bring an acid near a cyanide-containing solution or its waste.",)


@pytest.mark.parametrize("indicator,metal,colour", [
    ("murexide", "Ca", "pink"),
    ("murexide", "Ni", "yellow"),
    ("murexide", "Cu2+", "yellow"),
    ("murexide", "Co(II)", "yellow"),
    ("EBT", "Mg", "wine-red"),
    ("EBT", "Ni", "wine-red"),
    ("xylenol_orange", "Zn", "red-violet"),
])
def test_indicator_complex_colour(indicator, metal, colour):
    """Murexide's calcium complex is pink, its nickel, copper and cobalt complexes yellow (from memory)."""
    assert catalogue().indicator(indicator).complex_colour(metal) == colour


def test_metal_colour_is_the_default_complex_colour():
    cat = catalogue()
    assert cat.indicator("murexide").metal_colour == "pink"
    assert cat.indicator("EBT").metal_colour == "wine-red"
    with pytest.raises(UnknownNameError, match="unknown metal 'Xq'"):
        cat.indicator("EBT").complex_colour("Xq")


# --- limits of the model, defined once in constants.py ------------------------------------------------------

@pytest.mark.parametrize("I,T,ok", [
    (IONIC_STRENGTH_MAX_M, TEMPERATURE_RANGE_C[1], True),
    (0.0, TEMPERATURE_RANGE_C[0], True),
    (IONIC_STRENGTH_MAX_M + 0.01, 25.0, False),
    (0.1, TEMPERATURE_RANGE_C[1] + 0.5, False),
    (0.1, TEMPERATURE_RANGE_C[0] - 0.5, False),
])
def test_scenario_and_conditions_share_the_limits(I, T, ok):
    """The scenario and Conditions accept and refuse the same ionic strengths and temperatures (1 M, 0-90 degC)."""
    assert (IONIC_STRENGTH_MAX_M, TEMPERATURE_RANGE_C) == (1.0, (0.0, 90.0))
    text = (f"name: limits\nsample: {{volume: 50 mL, ionic_strength: {I} M, temperature: {T} degC}}\n"
            "analyte: {metals: {Ca: 1 mmol/L}}\ntitrant: {concentration: 0.01 M}\n")
    if ok:
        assert parse(text).sample.temperature_C == T
        assert Conditions(ionic_strength_M=I, temperature_C=T).temperature_C == T
    else:
        with pytest.raises(ScenarioError, match="sample.(ionic_strength must be at most 1 M|temperature must be between 0 and 90)"):
            parse(text)
        with pytest.raises(InputError, match="(ionic strength must be between 0 and 1 M|temperature must be between 0 and 90)"):
            Conditions(ionic_strength_M=I, temperature_C=T)

@pytest.mark.parametrize("name", TABLES)
def test_every_row_states_its_uncertainty(name):
    """Every constant carries an uncertainty in log units (the published figure or its class default, data/README.md)."""
    for row in data.table(name):
        assert float(row["uncertainty"]) > 0, (name, row)


def test_uncertainty_reaches_the_formation_constant():
    """The column is read into FormationConstant.uncertainty (memory values at least the 'from memory' default)."""
    db = database()
    every = [k for ks in db.complexes.values() for k in ks] + [k for ks in db.protonation.values() for k in ks] + \
        [k for ks in db.hydrolysis.values() for k in ks] + [s.constant for ss in db.solids.values() for s in ss] + [db.water]
    assert all(k.uncertainty is not None and k.uncertainty > 0 for k in every)
    assert all(k.uncertainty >= 0.5 for k in every if k.from_memory)
