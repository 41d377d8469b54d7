"""Invariants of the constants database itself (optimiser/data)."""
import csv
import io
from importlib import resources

import pytest

from optimiser import data
from optimiser.constants import H, database
from optimiser.reagents import catalogue

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
