"""Methods a scenario lists (issue 13): read and validated, evaluated as the search's candidates, shown beside the
recommendation in the report and the JSON; and the search's own counts."""
import json
import re
from pathlib import Path

import pytest
from conftest import example_search

from optimiser import report
from optimiser.analysis import analyse
from optimiser.comparison import compare, constrained_dominates
from optimiser.errors import MissingConstantError, ScenarioError
from optimiser.evaluation import Evaluator
from optimiser.listed_methods import MAX_METHODS
from optimiser.results import dumps, to_json
from optimiser.scenario import load, parse
from optimiser.search import run_search
from optimiser.search_stats import SearchStats

BASE = """
name: listed
sample: {volume: 50 mL}
analyte: {metals: {Ca: 1.0 mmol/L, Mg: 0.4 mmol/L}}
interferents: {Fe(III): 0.8 mg/L, Al: 0.3 mg/L}
titrant: {concentration: 0.01 M}
"""

ONE = """methods:
  - name: bench method
    pH: 10
    titrant: edetate
    buffer: ammonia buffer
    indicator: Eriochrome Black T
    masking: {triethanolamine: 30 mM}
"""


def test_a_listed_method_is_read_with_the_catalogue_names_and_defaults():
    m, = parse(BASE + ONE, "x.yaml").methods
    assert (m.name, m.source, m.pH, m.titrant, m.buffer, m.indicator) == ("bench method", "", 10.0, "EDTA", "ammonia", "EBT")
    assert m.masking == (("TEA", pytest.approx(0.03)),)
    assert m.buffer_total_M == pytest.approx(0.1)  # the ammonia buffer's own default total (reagents.yaml)
    assert m.mode == "direct"
    c = m.candidate()
    assert (c.pH, c.buffer, c.titrant, c.indicator, c.masking) == (10.0, "ammonia", "EDTA", "EBT", m.masking)
    assert 10 ** c.log_buffer == pytest.approx(0.1)


def test_a_scenario_without_methods_lists_none():
    assert parse(BASE, "x.yaml").methods == ()


def _entry(extra: str) -> str:
    return BASE + "methods:\n  - {name: a, pH: 10, titrant: EDTA, buffer: ammonia, indicator: EBT" + extra + "}\n"


@pytest.mark.parametrize("text, message, location", [
    (BASE + "methods:\n  - {name: a, pH: 10, titrant: EDTX, buffer: ammonia, indicator: EBT}\n",
     "methods.0.titrant: unknown titrant 'EDTX'; did you mean EDTA?", (8, 32)),
    (_entry(", bufer: NH3"), "unknown key 'bufer' in methods.0; did you mean buffer?", (8, 71)),
    (_entry(", masking: {TEAA: 1 mM}"), "unknown masking agent 'TEAA'; did you mean TEA?", (8, 81)),
    (_entry(", masking: {TEA: 100 M}"), "methods.0.masking.TEA: the dose of TEA must be between", (8, 86)),
    (_entry(", mode: bak"), "'bak' is not a mode; did you mean back?", (8, 77)),
    (_entry(", back_metal: Zn"), "back_metal is read only with a mode that uses a standard", (8, 83)),
    (_entry(", mode: back, back_metal: Cu"), "unknown back-titration standard 'Cu'", (8, 95)),
    (_entry(", buffer_total: 20 M"), "methods.0.buffer_total: the total of ammonia must be between", (8, 85)),
    (_entry(", source: 3"), "methods.0.source: must be non-empty text", (8, 79)),
    (BASE + "methods:\n  - {name: a, pH: 15, titrant: EDTA, buffer: ammonia, indicator: EBT}\n",
     "methods.0.pH must be between 0 and 14; got 15", (8, 19)),
    (BASE + "methods:\n  - {name: a, pH: '10', titrant: EDTA, buffer: ammonia, indicator: EBT}\n",
     "methods.0.pH: must be a number", (8, 19)),
    (BASE + "methods:\n  - {name: a, pH: 12.5, titrant: EDTA, buffer: NaOH, buffer_total: 0.1, indicator: EBT}\n",
     "buffer NaOH adds no complexing ligand", (8, 68)),
    (BASE + "methods:\n  - {name: a, pH: 10, titrant: EDTA, indicator: EBT}\n", "methods.0 lacks buffer", (8, 5)),
    (BASE + "methods:\n  - [1]\n", "methods.0 must be a mapping", (8, 5)),
    (BASE + "methods: []\n", "methods is empty", (7, 10)),
    (BASE + "methods: {a: 1}\n", "methods must be a list", (7, 10)),
    (BASE + "methods:\n" + "  - {name: a, pH: 10, titrant: EDTA, buffer: ammonia, indicator: EBT}\n" * 2,
     "two methods are named 'a'", (9, 12)),
    (BASE + "methods:\n" + "".join(f"  - {{name: m{i}, pH: 10, titrant: EDTA, buffer: ammonia, indicator: EBT}}\n"
                                   for i in range(MAX_METHODS + 1)), f"allowed: at most {MAX_METHODS}", (8, 3)),
])
def test_a_bad_listed_method_is_refused_where_it_is_written(text, message, location):
    """Every error names the file, the line of the entry and the column of the offending key or value."""
    with pytest.raises(ScenarioError) as info:
        parse(text, "x.yaml")
    err = info.value
    assert message in err.message
    assert err.path == "x.yaml"
    assert (err.line, err.column) == location, str(err)


def test_a_listed_back_titration_is_checked_as_a_method():
    """The strategy's own checks run at reading time (a back-titration needs a standard the catalogue holds)."""
    text = BASE + ("methods:\n  - {name: b, pH: 5.5, titrant: EDTA, buffer: acetate, indicator: xylenol_orange, "
                   "mode: back, back_metal: Mg}\n")
    m, = parse(text, "x.yaml").methods
    assert (m.mode, m.back_metal) == ("back", "Mg")


# ---- evaluated beside the search's answer (the done-when of the bullet)

@pytest.fixture(scope="module")
def hardness(scenarios_dir):
    sc = load(scenarios_dir / "hardness_iron_aluminium.yaml")
    return sc, example_search(scenarios_dir / "hardness_iron_aluminium.yaml")


def test_the_hardness_example_lists_the_standard_method(hardness):
    """ISO 6059:1984 / Standard Methods 2340 C: EDTA at pH 10.0 in an ammonia buffer with Eriochrome Black T (TEA for
    iron and aluminium: common practice)."""
    sc, _ = hardness
    std = sc.methods[0]
    assert (std.titrant, std.pH, std.buffer, std.indicator) == ("EDTA", 10.0, "ammonia", "EBT")
    assert [a for a, _ in std.masking] == ["TEA"]


def test_a_listed_standard_method_is_evaluated_beside_the_recommendation(hardness, tmp_path):
    """A scenario that lists a standard's method gets it evaluated and shown beside the recommendation (issue 13)."""
    sc, r = hardness
    assert [o.listed.name for o in r.listed] == [m.name for m in sc.methods]
    std, bare = r.listed
    # the published method (ISO 6059 / Standard Methods 2340 C, with TEA for Fe and Al) passes every criterion
    assert std.meets_criteria and std.evaluation.feasible and not std.evaluation.violations
    assert std.evaluation.titration is not None and std.evaluation.titration.endpoint_mL is not None
    assert std.robust_pH is not None and std.robust_pH[0] <= 10.0 <= std.robust_pH[1]
    # without a masking agent, iron(III) and aluminium block Eriochrome Black T (Standard Methods 2340 C calls for
    # inhibitors where metals interfere): the same method fails
    assert not bare.meets_criteria
    assert any("blocked" in v for v in bare.evaluation.violations)
    assert bare.dominated  # a feasible method of the front beats a method that fails a criterion

    analysis = analyse(r)
    table = analysis.comparison
    assert [c.name for c in table.columns] == ["Recommended", *[m.name for m in sc.methods]]
    assert table.columns[0].recommendation and not table.columns[1].recommendation
    assert len(table.columns[1].values) == len(table.aspects)
    assert float(table.columns[1].values[0]) == pytest.approx(std.evaluation.standardised_error_percent, abs=5e-4)
    assert not table.columns[1].values[0].startswith("-0.000")  # a figure that rounds to zero has no sign

    doc = to_json(r)
    listed = doc["listed_methods"]
    assert [d["name"] for d in listed] == [m.name for m in sc.methods]
    assert listed[0]["meets_criteria"] is True and listed[1]["meets_criteria"] is False
    assert listed[0]["endpoint_sharpness_mL"] == pytest.approx(std.evaluation.sharpness_mL, abs=1e-4)
    assert listed[0]["masking"] == [{"agent": "TEA", "conc_M": 0.03}]
    assert listed[1]["dominated"] is True and listed[1]["violations"]

    page, _ = report.write(r, tmp_path, dumps(doc), analysis=analysis)
    html = page.read_text(encoding="utf-8")
    section = html[html.index('id="listed-methods"'):html.index("</table>", html.index('id="comparison"'))]
    for m in sc.methods:
        assert m.name in section
    rows = re.findall(r"<tr>", section)
    assert len(rows) == 1 + 4 + len(table.aspects) + 1  # header, method/source/criteria/dominance, aspects, failed


def test_a_listed_method_is_judged_as_the_search_judges_a_candidate(hardness):
    """The listed method's objectives and constraints are those the search's evaluator gives the same candidate."""
    sc, _ = hardness
    c = sc.methods[0].candidate()
    searched, = Evaluator(sc).evaluate([c])
    listed, = Evaluator(sc).evaluate_all([c])
    assert listed.F == searched.F and listed.G == searched.G and listed.violations == searched.violations


def test_a_listed_method_the_quick_checks_reject_is_still_simulated(hardness):
    """TEA below its working pH (9.5, reagents.yaml) is rejected by the search's quick checks; listed, it is
    simulated all the same, its figures shown and the failed check kept."""
    sc, r = hardness
    text = (Path(sc.source).read_text(encoding="utf-8").split("methods:")[0]
            + "methods:\n  - {name: low, pH: 9.0, titrant: EDTA, buffer: ammonia, indicator: EBT, masking: {TEA: 30 mM}}\n")
    low = parse(text, "low.yaml")
    o, = compare(low, [a.evaluation for a in r.front], r.recommended, with_robustness=False)
    assert o.evaluation.titration is not None and o.evaluation.simulated
    assert "masking_pH" in o.evaluation.kinds and not o.meets_criteria
    assert o.dominated_by_recommendation


def test_the_recommendation_does_not_dominate_itself(hardness):
    """Domination needs one objective strictly better: a method equal to the recommendation is not dominated by it."""
    _, r = hardness
    assert not constrained_dominates(r.recommended, r.recommended)


# ---- how the search went

def test_the_search_counts_its_structures_and_candidates(hardness):
    _, r = hardness
    s = r.stats
    assert isinstance(s, SearchStats)
    assert s.structures_considered == s.structures_simulated + sum(n for _, n in s.structures_pruned)
    assert 0 < s.structures_feasible <= s.structures_simulated
    assert s.candidates_simulated >= s.structures_simulated
    doc = to_json(r)["search"]
    assert doc == json.loads(json.dumps(s.as_dict()))
    assert set(doc) == {"structures_considered", "structures_pruned", "structures_simulated", "structures_feasible",
                        "candidates_simulated", "candidates_prescreened"}


def test_a_candidate_whose_simulation_fails_counts_as_simulated(monkeypatch):
    """The "N candidates simulated" note and the counts include candidates that hit a missing constant."""
    from conftest import TINY_SCENARIO

    from optimiser import evaluation
    from optimiser.candidate import Candidate

    sc = parse(TINY_SCENARIO, "tiny.yaml")

    def fails(sample, methods, errors, **kwargs):
        errors += [(k, MissingConstantError("no constant for this test")) for k in range(len(methods))]
        return [None] * len(methods)
    monkeypatch.setattr(evaluation, "simulate_many", fails)
    ev = Evaluator(sc)
    ok = Candidate(pH=10.0, buffer="ammonia", log_buffer=-1.0, titrant="EDTA", masking=(), indicator="EBT",
                   mode="direct", back_metal="Zn")
    screened = Candidate(pH=10.0, buffer="ammonia", log_buffer=-1.0, titrant="EDTA", masking=(),
                         indicator="calcon_carboxylic", mode="direct", back_metal="Zn")  # usable at pH 12-14 only
    a, b, a_again = ev.evaluate([ok, screened, ok])  # the repeat is a cache hit, not a second simulation
    assert a_again is a
    assert "missing_constant" in a.kinds and a.titration is None and a.simulated
    assert not b.simulated
    assert (ev.n_simulated, ev.n_prescreened) == (1, 1)
    from optimiser.decision import infeasible_note
    assert "among the 1 candidates simulated" in infeasible_note(list(ev.cache.values()))


def test_the_command_line_names_the_listed_methods(capsys, scenarios_dir, tmp_path, monkeypatch):
    """What `run` prints and writes of the listed methods (the search itself is the session's shared run of this
    example, seed 1, as `run --seed 1` would do it: tests/conftest.example_search)."""
    import optimiser.search
    from optimiser.cli import main
    path = str(scenarios_dir / "hardness_iron_aluminium.yaml")
    searched = example_search(path)
    monkeypatch.setattr(optimiser.search, "run_search", lambda sc, seed=1, **kw: searched if seed == 1 else None)
    assert main(["check", path]) == 0
    assert "2 listed methods" in capsys.readouterr().out
    assert main(["run", path, "--out", str(tmp_path), "--seed", "1"]) == 0
    out = capsys.readouterr().out
    assert "listed pH 10 EDTA with TEA: meets the criteria" in out
    assert "listed pH 10 EDTA without masking: fails the criteria, dominated by the search's front" in out
    doc = json.loads(next(tmp_path.glob("*.json")).read_text(encoding="utf-8"))
    assert [d["name"] for d in doc["listed_methods"]] == ["pH 10 EDTA with TEA", "pH 10 EDTA without masking"]


def test_a_listed_method_with_cyanide_gets_its_cautions_even_where_nothing_is_recommended(tmp_path):
    """Hazardous reagents of a listed method carry their cautions and the deferral to the safety data sheet, local
    regulations and the safety officer, whether or not the search recommends anything (here nothing: a 0.5 M sample
    and a 25 mL burette of 0.01 M titrant)."""
    sc = parse("""
name: too-concentrated
sample: {volume: 50 mL}
analyte: {metals: {Ca: 0.5 mol/L}}
interferents: {Cu: 0.1 mmol/L}
titrant: {concentration: 0.01 M, burette: 25 mL}
search: {titrants: [EDTA], buffers: [ammonia], indicators: [EBT, calmagite], max_masking_agents: 0}
methods:
  - {name: with cyanide, pH: 10, titrant: EDTA, buffer: ammonia, indicator: EBT, masking: {KCN: 1 mM}}
""", "x.yaml")
    r = run_search(sc, seed=1, pop_size=20, n_gen=5, with_robustness=False)
    assert r.recommended is None
    o, = r.listed
    assert not o.meets_criteria and any("burette" in v for v in o.evaluation.violations)
    analysis = analyse(r)
    assert [c.name for c in analysis.comparison.columns] == ["with cyanide"]  # no recommendation column
    assert "cyanide (as KCN)" in [item.name for item in analysis.listed_safety]
    page, _ = report.write(r, tmp_path, dumps(to_json(r)), analysis=analysis)
    html = page.read_text(encoding="utf-8")
    listed = html[html.index('id="listed-methods"'):html.index("</section>", html.index('id="listed-methods"'))]
    assert "extremely toxic" in listed and "safety officer" in listed and "safety data sheet" in listed
