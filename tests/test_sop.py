"""The bench procedure from stock solutions, the safety texts checked against each other, and the SOP exports
(Markdown and PDF read back against the HTML)."""
import html as htmllib
import itertools
import json
import re
from pathlib import Path
from types import SimpleNamespace

import pytest
from conftest import example_search

from optimiser import report
from optimiser.analysis import analyse, safety
from optimiser.errors import InputError, UnknownNameError
from optimiser.method import Method
from optimiser.quantities import amounts, is_measurable_volume, is_weighable_mass, number
from optimiser.reagents import catalogue
from optimiser.results import dumps, to_json
from optimiser.report.markdown import unescape
from optimiser.report.pdf import latin1
from optimiser.scenario import load
from optimiser.stocks import HAZARD_CAUTIONS, HAZARD_WORDS, HEATING_CAUTION, StockSolution, stock, stocks

ROOT = Path(__file__).resolve().parent.parent
EXAMPLES = sorted((ROOT / "scenarios").glob("*.yaml"))
DEMO = ROOT / "optimiser" / "scenarios" / "demo_hardness.yaml"
SECTION_TITLES = ("Scope and range", "Principle", "Interferences and how they are handled", "Reagents (stock solutions)",
                  "Standardisation", "Procedure", "Calculation", "Quality control", "Safety", "References")


def _analysis(path):
    return analyse(example_search(path))


@pytest.fixture(scope="module", params=EXAMPLES, ids=[p.stem for p in EXAMPLES])
def example(request):
    return _analysis(request.param)


def _measurable(text):
    """Every volume and mass in ``text`` as a bench measures it (volumetric pipette, two significant figures
    graduated, a weighable mass); "weighed to 0.1 mg" is a balance's resolution, not an amount."""
    bad = []
    for value, unit in amounts(text.replace("weighed to 0.1 mg", "")):
        if unit in ("mL", "L"):
            ok = is_measurable_volume(value * (1000 if unit == "L" else 1))
        elif unit in ("uL", "µL"):
            ok = False  # microlitres are not dispensed in a titration (common practice)
        else:
            ok = is_weighable_mass(value * {"mg": 1, "g": 1000, "kg": 1e6}[unit])
        if not ok:
            bad.append(f"{value:g} {unit}")
    return bad


def test_every_example_is_written_up_and_a_recommendation_keeps_each_cause_within_target(example, tmp_path):
    """Every example completes: its report and JSON are written; where a method meets the criteria, no part of its
    error budget after standardisation is beyond the target (the error by cause, not only the net figure)."""
    html, json_path = report.write(example.result, tmp_path, dumps(to_json(example.result)), report_format="html",
                                   analysis=example)
    assert "<h1" in html.read_text() and json.loads(json_path.read_text())["meets_criteria"] == example.result.meets_criteria
    r = example.result
    if r.meets_criteria:
        target = r.scenario.targets.max_error_percent
        assert all(abs(v) <= target for v in r.recommended_titration.standardised_budget.values())
        assert r.recommended_titration.error_by_cause_percent >= abs(r.recommended_titration.standardised_error_percent) - 1e-9


def test_every_added_quantity_is_measured_as_a_lab_would(example):
    """Issue 15: for every example, each amount the procedure and the standardisation add, and each per-litre amount
    of a stock, is a volume or mass a bench measures."""
    m = example.method
    assert m is not None, example.scenario.name
    texts = [*m.procedure, *m.standardisation, *(s.per_litre for s in m.stocks)]
    assert [(t, _measurable(t)) for t in texts if _measurable(t)] == []
    for add in m.additions:
        assert add.volume_mL is None or is_measurable_volume(add.volume_mL), add
        assert add.mass_mg is None or is_weighable_mass(add.mass_mg), add
        assert add.volume_mL is not None or add.mass_mg is not None or add.text  # a worded dose (drops) at least
    assert any(a.what == "sample" and a.volume_mL == example.scenario.sample.volume_mL for a in m.additions)


def test_each_acid_preserved_example_neutralises_its_acid_first(example):
    """Issue 15: the acid a preserved sample holds is taken up before the buffer goes in."""
    steps = example.method.procedure
    buffer = next(k for k, x in enumerate(steps) if "adjust to pH" in x or "sets the pH" in x)
    neutral = [k for k, x in enumerate(steps) if x.startswith("Neutralise the sample's own acid")]
    if example.scenario.sample.acid_M > 0:
        assert neutral and neutral[0] < buffer
        mmol = example.scenario.sample.acid_M * example.scenario.sample.volume_mL
        assert f"({number(mmol, 2)} mmol H+ in the aliquot)" in steps[neutral[0]]
    else:
        assert not neutral


def test_the_method_names_its_standardisation_blank_timing_and_temperature(example):
    m, sc = example.method, example.scenario
    assert m.standardisation[0].startswith("Primary standard")
    assert any("same indicator" in x for x in m.standardisation)
    assert any(x.startswith("Reagent blank") for x in m.procedure)
    assert m.procedure[0].startswith(f"Bring the sample, the standards and the reagents to {sc.sample.temperature_C:g} degC")
    assert all("[" in line for line in m.calculation[:-1])  # every formula carries its units
    qc = " ".join(m.quality_control)
    assert "Reagent blank" in qc and "Duplicate" in qc and "Control sample" in qc
    timing = stock("buffers", m.buffer).timing
    if timing:
        assert any(timing in x for x in m.procedure)


def test_the_hardness_method_finishes_within_5_minutes_of_the_buffer():
    """Standard Methods 2340 C: complete the titration within 5 minutes of adding the buffer (ammonia buffer stock)."""
    assert "within 5 minutes of adding the buffer" in stock("buffers", "ammonia").timing
    assert stock("buffers", "ammonia").timing_source == "standard_methods_2340c"


def test_every_reagent_has_a_stock_solution():
    """Each titrant, buffer, masking agent, indicator and back-titration standard of the data has its stock, with a
    shelf life and a source (the loader checks the hazard words and the source keys)."""
    cat = catalogue()
    for section, ids in (("titrants", cat.titrants), ("buffers", cat.buffers), ("masking", cat.masking),
                         ("indicators", cat.indicators), ("standards", cat.standards)):
        for reagent in ids:
            st = stock(section, reagent)
            assert st is not None, (section, reagent)
            assert st.shelf_life and st.source
    assert {k for k, _ in stocks()} >= {"neutralisers"}
    for p in cat.primary_standards.values():  # the hazards of weighing and dissolving each primary standard
        assert p.hazards and set(p.hazards) <= set(HAZARD_CAUTIONS), p.id


def test_every_hazard_word_has_its_caution():
    assert set(HAZARD_WORDS) == set(HAZARD_CAUTIONS)


def test_indicator_solutions_in_ethanol_are_flammable_and_ammonia_is_corrosive():
    """Issue 15's safety faults: concentrated ammonia is corrosive (not an irritant); the ethanol of an indicator
    solution is flammable."""
    ammonia = " ".join(catalogue().buffer("ammonia").cautions).lower()
    assert "corrosive" in ammonia and "irritant" not in ammonia
    for st in stocks().values():
        if st.recipe and "ethanol" in st.recipe:
            assert "flammable" in st.hazards, st.id


def _stock_rows(ids_by_section):
    return [StockSolution(section, reagent, "", "", st.hazards, st.source)
            for section, ids in ids_by_section for reagent in ids if (st := stock(section, reagent)) is not None]


def test_no_method_prints_contradicting_safety_instructions():
    """Every combination of titrant, buffer, indicator and up to two masking agents, with its stocks' hazards and a
    heating step: no pair of ``safety_contradictions`` (reagents.yaml) appears in one method's safety text."""
    cat = catalogue()
    masking = [(), *((a,) for a in cat.masking), *itertools.combinations(cat.masking, 2)]
    seen = 0
    for titrant, buffer, indicator in itertools.product(cat.titrants, cat.buffers, cat.indicators):
        for agents in masking:
            method = Method(pH=7.0, buffer=buffer, titrant=titrant, titrant_conc_M=0.01, indicator=indicator,
                            masking=tuple((a, 0.001) for a in agents))
            rows = _stock_rows([("titrants", [titrant]), ("buffers", [buffer]), ("indicators", [indicator]),
                                ("masking", agents), ("neutralisers", ["NaOH"])])
            items = safety(method, SimpleNamespace(stocks=rows, heated=True))  # raises DataError on a contradiction
            texts = [c for item in items for c in item.cautions]
            assert cat.safety_conflicts(texts) == []
            seen += 1
    assert seen == len(cat.titrants) * len(cat.buffers) * len(cat.indicators) * len(masking)


def test_the_contradiction_check_catches_the_old_texts():
    """The texts issue 15 found (cyanide waste 'destroyed with alkaline hypochlorite' beside the ammonia buffer's
    'never mix with hypochlorite') are caught; the resolved cyanide text is not."""
    old = ["Purchase, storage and disposal are regulated; destroy residues (for example with alkaline hypochlorite) as "
           "the safety officer directs.", "Never mix ammonia with hypochlorite (bleach): toxic chloramines form."]
    assert [name for name, *_ in catalogue().safety_conflicts(old)] == ["hypochlorite treatment beside an ammonia method"]
    new = [*catalogue().masking_agent("cyanide").cautions, *catalogue().buffer("ammonia").cautions]
    assert "hypochlorite" in " ".join(new) and catalogue().safety_conflicts(new) == []


def test_a_boiling_step_carries_its_caution(tmp_path):
    a = _analysis(ROOT / "scenarios" / "aluminium_back_titration.yaml")
    if a.method.heated:
        assert any(HEATING_CAUTION in item.cautions for item in a.safety)
    assert set(HAZARD_CAUTIONS) >= {h for s in a.method.stocks for h in s.hazards}


# -- the SOP exports ----------------------------------------------------------------------------------------------

@pytest.fixture(scope="module")
def demo_files(tmp_path_factory):
    a = _analysis(DEMO)
    out = tmp_path_factory.mktemp("sop")
    first, json_path = report.write(a.result, out, "{}\n", report_format="html,md,pdf", analysis=a)
    return a, {fmt: first.with_suffix("." + fmt) for fmt in ("html", "md", "pdf")}


def _html_list(html, css_class):
    block = re.search(rf'<ol class="{css_class}">(.*?)</ol>', html, re.S).group(1)
    return [htmllib.unescape(x) for x in re.findall(r"<li>(.*?)</li>", block, re.S)]


def _md_section(md, title):
    body = md.split(f". {title}\n", 1)[1].split("\n## ", 1)[0]
    return [unescape(re.sub(r"^\d+\. ", "", line)) for line in body.splitlines() if re.match(r"\d+\. ", line)]


def _flat(text):
    return " ".join(text.split())


def test_md_and_pdf_hold_the_same_procedure_as_the_html(demo_files):
    """Issue 15: the md and pdf exports of the demo hold the same procedure and standardisation as the HTML."""
    from pypdf import PdfReader
    a, files = demo_files
    assert a.meets_criteria
    html, md = files["html"].read_text(), files["md"].read_text()
    pdf = _flat(" ".join(page.extract_text() for page in PdfReader(files["pdf"]).pages))
    for css, title in (("procedure", "Procedure"), ("standardisation", "Standardisation")):
        steps = _html_list(html, css)
        assert steps and steps == list(getattr(a.method, css))
        assert _md_section(md, title) == steps
        for step in steps:
            assert _flat(latin1(step)) in pdf, step


def test_the_sop_has_the_sections_of_a_laboratory_method(demo_files):
    from pypdf import PdfReader
    _, files = demo_files
    md = files["md"].read_text()
    headings = re.findall(r"^## \d+\. (.+)$", md, re.M)
    assert tuple(unescape(h) for h in headings) == SECTION_TITLES
    pdf = _flat(" ".join(page.extract_text() for page in PdfReader(files["pdf"]).pages))
    positions = [pdf.index(f"{k}. {title}") for k, title in enumerate(SECTION_TITLES, 1)]
    assert positions == sorted(positions)
    assert "safety data sheet" in md and "safety officer" in md


def test_identical_runs_give_identical_sop_files(demo_files, tmp_path):
    a, files = demo_files
    again, _ = report.write(a.result, tmp_path, "{}\n", report_format=("md", "pdf"), analysis=a)
    assert again.read_bytes() == files["md"].read_bytes()
    assert again.with_suffix(".pdf").read_bytes() == files["pdf"].read_bytes()


def test_formats_are_parsed_and_checked():
    assert report.parse_formats("pdf") == ("pdf",)
    assert report.parse_formats(["html, md", "md", "PDF"]) == ("html", "md", "pdf")
    with pytest.raises(UnknownNameError, match="report format"):
        report.parse_formats("docx")
    with pytest.raises(InputError):
        report.parse_formats([""])


def test_the_cli_refuses_an_unknown_format_before_searching(capsys, tmp_path):
    from optimiser.cli import main
    assert main(["run", str(DEMO), "--out", str(tmp_path), "--format", "html,docx"]) == 2
    err = capsys.readouterr().err
    assert "docx" in err and "html" in err and "pdf" in err
    assert list(tmp_path.iterdir()) == []


def test_cyanide_goes_in_only_after_the_buffer_and_TEA_before_it():
    """Cyanide meets only an alkaline solution (hydrogen cyanide in acid: ``alkaline_only``, common practice); TEA goes
    in before the pH is raised (it must hold iron and aluminium before their hydroxides form, reagents.yaml)."""
    from optimiser.bench_steps import written_method
    from optimiser.method import Sample
    from optimiser.procedure import result_formula
    from optimiser.scenario import parse
    from optimiser.titration import simulate
    sc = parse("""
name: cn
sample: {volume: 25 mL, pH: 2}
analyte: {metals: {Ca: 1 mmol/L}}
interferents: {Zn: 0.5 mmol/L}
titrant: {concentration: 0.01 M}
""", "cn.yaml")
    method = Method(pH=10.0, buffer="ammonia", titrant="EDTA", titrant_conc_M=0.01, indicator="EBT",
                    masking=(("cyanide", 0.01), ("TEA", 0.005)))
    t = simulate(Sample(25.0, {"Ca": 0.001, "Zn": 0.0005}, ("Ca",)), method)
    steps = written_method(sc, method, t, result_formula(sc, method)).procedure
    at = {key: next(k for k, x in enumerate(steps) if key in x)
          for key in ("Neutralise", "triethanolamine solution", "adjust to pH", "cyanide")}
    assert at["Neutralise"] < at["triethanolamine solution"] < at["adjust to pH"] < at["cyanide"]
    assert steps[at["cyanide"]].startswith("Only now that the solution is alkaline (check pH above 9")


def test_a_compromise_is_not_written_as_a_procedure(demo_files):
    """Where no method meets the criteria, the method document says so and gives no procedure to follow."""
    import dataclasses
    from optimiser.report.markdown import render_md
    a, _ = demo_files
    md = render_md(dataclasses.replace(a, meets_criteria=False))
    procedure = md.split(". Procedure\n", 1)[1].split("\n## ", 1)[0]
    assert "Not given for a method that fails the criteria" in procedure and "Pipette" not in procedure
