"""The analysis computed once after the search: one definition of log(cK') for the feasibility and the margin, the
strategy's words and labels, the safety list, and a report package that only renders it."""
import ast
import math
from dataclasses import replace
from pathlib import Path

import pytest

from optimiser.quantities import pipette_mL

from conftest import AL_BACK

from optimiser import report
from optimiser.analysis import analyse, analyte_feasibility, safety
from optimiser.conditional import conditional_constant
from optimiser.medium import side_reactions
from optimiser.method import Method
from optimiser.scenario import parse
from optimiser.search import run_search

BI_PB = """
name: bi-beside-pb
sample: {volume: 25 mL, ionic_strength: 0.1 M}
analyte: {metals: {Bi: 2 mmol/L}}
interferents: {Pb: 2 mmol/L}
titrant: {concentration: 0.01 M}
search:
  pH: [1.5, 3.0]
  titrants: [EDTA]
  buffers: [nitric_acid]
  indicators: [xylenol_orange]
  max_masking_agents: 0
  modes: [direct]
"""


CHEMISTRY = {"conditional", "constants", "equilibrium", "kernel", "titration", "readout", "reagents", "search", "method",
             "pretreatment", "strategies", "findings", "procedure", "units", "scenario", "data", "medium"}


@pytest.fixture(scope="module")
def bi():
    r = run_search(parse(BI_PB, "bi.yaml"), seed=1, pop_size=12, n_gen=4, with_robustness=False)
    return r, analyse(r)


@pytest.fixture(scope="module")
def al():
    r = run_search(parse(AL_BACK, "al.yaml"), seed=1, pop_size=12, n_gen=4, with_robustness=False)
    return r, analyse(r)


def _log_cK(metal, method, conc):
    """log(c K') on the medium's side reactions: the aliquot's ionic strength and the Na+ at equivalence."""
    cond, alkali = side_reactions(parse(BI_PB, "bi.yaml").sample, method)
    return float(conditional_constant(metal, "EDTA", method.pH, method.ligand_totals(), cond, alkali).log_K_conditional
                 ) + math.log10(conc)


def test_feasibility_and_margin_share_one_concentration(bi):
    """log(cK') of Bi with c as pipetted (2 mM, not diluted to the end point), and the search's margin is that minus
    Pb's log(cK') at its own 2 mM (Pb stays dissolved and unmasked at pH 2-3)."""
    r, a = bi
    method = r.recommended_titration.method
    feas = analyte_feasibility(r.scenario, method)
    assert feas == pytest.approx(_log_cK("Bi", method, 0.002), abs=1e-9)
    assert r.recommended.margin == pytest.approx(feas - _log_cK("Pb", method, 0.002), abs=1e-6)
    V0, V_ep = 25.0, r.recommended_titration.endpoint_mL
    diluted = _log_cK("Bi", method, 0.002 * V0 / (V0 + V_ep))  # what the report read before: lower by the dilution
    assert feas - diluted == pytest.approx(math.log10((V0 + V_ep) / V0), abs=1e-9) and feas - diluted > 0.05
    shown = {c.name.split(" (")[0]: c for c in a.criteria}
    assert shown["Feasibility log(c K') of the analyte"].value == report.fmt(feas, 3)
    assert shown["Selectivity margin delta log(cK') over the strongest interferent left in solution"].value == \
        report.fmt(r.recommended.margin, 3)


def test_direct_titration_words(bi):
    r, a = bi
    assert a.method.strategy == "direct titration" and a.method.standard is None and a.method.excess_mL is None
    assert a.volume_name == "titrant" and a.volume_label == "titrant (EDTA) volume / mL"
    assert all(row.mode == "direct" for row in a.alternatives)


def test_back_titration_words_and_titre(al):
    r, a = al
    t = r.recommended_titration
    assert a.method.strategy == "back-titration with Zn" and a.method.standard == "Zn"
    assert a.volume_label == "back-titrant (Zn) volume / mL" and a.volume_name == "back-titrant"
    assert any(row.mode == "back (Zn)" for row in a.alternatives)
    titre = next(c for c in a.criteria if c.name == "Titre within the burette")
    assert titre.value == f"{report.fmt(max(t.endpoint_mL, t.excess_mL), 4)} mL" and titre.met
    assert a.method.standardisation[0].startswith("Primary standard: dissolve about")
    assert a.method.procedure[2].startswith(f"Pipette {pipette_mL(t.excess_mL, at_least=True):g} mL of EDTA 0.02 mol/L "
                                            "(an excess)")


def test_log_K_table_holds_the_method_pH(bi):
    r, a = bi
    pH = round(r.recommended.candidate.pH, 2)
    assert pH in a.log_K_table.pH and len(a.log_K_table.pH) == 6
    row = next(x for x in a.log_K_table.rows if x.metal == "Bi")
    k = row.log_K[a.log_K_table.pH.index(pH)]
    # the table's column is the method's pH rounded to 0.01: compare at that pH (log K' of Bi rises about 3 per pH unit
    # below pH 2, so the rounding alone can move it by 0.015)
    method = replace(r.recommended_titration.method, pH=pH)
    assert k == pytest.approx(_log_cK("Bi", method, 1.0), abs=0.01)


def test_cyanide_caution_only_outside_strong_alkali():
    def m(buffer, pH):
        return Method(pH=pH, buffer=buffer, titrant="EDTA", titrant_conc_M=0.01, indicator="calcon_carboxylic",
                      masking=(("cyanide", 0.01),))
    assert "acid and cyanide" not in [x.name for x in safety(m("NaOH", 12.5))]
    names = [x.name for x in safety(m("ammonia", 10.0))]
    assert names == ["ammonia / ammonium chloride", "cyanide (as KCN)", "EDTA (ethylenediaminetetraacetate)", "acid and cyanide"]


def _imported_modules(path: Path):
    for node in ast.walk(ast.parse(path.read_text())):
        if isinstance(node, ast.ImportFrom) and node.level:
            yield from ([node.module.split(".")[0]] if node.module else [a.name for a in node.names])
        elif isinstance(node, ast.ImportFrom) and node.module and node.module.startswith("optimiser."):
            yield node.module.split(".")[1]
        elif isinstance(node, ast.Import):
            yield from (a.name.split(".")[1] for a in node.names if a.name.startswith("optimiser."))


def test_report_package_imports_no_chemistry():
    """The report renders the analysis; only its entry point for a bare search result builds one (lazily)."""
    folder = Path(report.__file__).parent
    found = {p.name: set(_imported_modules(p)) & CHEMISTRY for p in folder.glob("*.py")}
    assert found == {p.name: set() for p in folder.glob("*.py")}


def test_a_second_format_is_one_function(bi, tmp_path, monkeypatch):
    r, a = bi

    def write_text(analysis, path):
        path.write_text(f"{analysis.scenario.name}: {analysis.method.strategy}\n")
    monkeypatch.setitem(report.FORMATS, "txt", write_text)
    out, js = report.write(r, tmp_path, "{}\n", report_format="txt", analysis=a)
    assert out == tmp_path / "bi-beside-pb.txt" and out.read_text() == "bi-beside-pb: direct titration\n"
    assert js.read_text() == "{}\n"


def test_unknown_format_lists_the_known_ones(bi, tmp_path):
    from optimiser.errors import UnknownNameError
    with pytest.raises(UnknownNameError, match="known report formats: html, md, pdf"):
        report.write(bi[0], tmp_path, "{}\n", report_format="docx")


def test_the_constants_table_holds_what_the_figures_use():
    """Iron(III) and aluminium masked by triethanolamine (an assumption, so absent from the equilibrium) still appear
    in the log K' figure: their constants with the titrant are in the report's table."""
    from optimiser.analysis import constants_table
    from optimiser.scenario import demo
    from optimiser.titration import simulate
    sc = demo()
    t = simulate(sc.sample, Method(10.0, "ammonia", "EDTA", 0.01, "EBT", buffer_total_M=0.3, masking=(("TEA", 0.03),)))
    assert "Fe(III)" not in t.method.ligand_totals() and "Fe(III)" in t.masked_by_assumption
    reactions = [r.reaction for r in constants_table(t, 25.0, sc)]
    assert any("Fe" in r and "EDTA" in r for r in reactions) and any("Al" in r and "EDTA" in r for r in reactions)
    assert len(reactions) == len(set(reactions))
