"""The bench procedure of each strategy that adds steps: the procedure asks the strategy (its steps, its reagents,
its result formula), numbers every step, and shows each step's colour change and predicted reading."""
import textwrap

from optimiser.method import Method
from optimiser.procedure import bench_method
from optimiser.scenario import parse
from optimiser.titration import simulate

SC = textwrap.dedent("""
    name: procedures (an invented demo)
    sample: {volume: 50 mL}
    analyte:
      - {metals: {Mg: 0.8 mmol/L}}
      - {metals: {Ca: 1.6 mmol/L}}
    titrant: {concentration: 0.01 M}
""")


def _bench(sc, method):
    t = simulate(sc.sample, method, standardise=True)
    return t, bench_method(sc, method, t, None)


def test_difference_procedure_has_two_flasks_and_the_difference():
    sc = parse(SC)
    stage = Method(13.0, "NaOH", "EDTA", 0.01, "calcon_carboxylic", buffer_total_M=0.0)
    t, b = _bench(sc, Method(10.0, "ammonia", "EDTA", 0.01, "EBT", buffer_total_M=0.3, mode="difference", stage=stage,
                             co_analytes=("Ca",)))
    text = " ".join(b.procedure)
    assert "titration flask 1" in text and "titration flask 2" in text
    assert "V1" in text and "V2" in text and "(V1 - V2)" in b.formula
    assert "pH 13.00" in text and "Calconcarboxylic" in text and "Eriochrome Black T" in text
    from optimiser.quantities import number
    assert f"predicted titre about {number(t.endpoints[1].volume_mL, 2)} mL" in text  # as a burette is read, 2 figures


def test_sequential_procedure_continues_in_the_same_flask():
    sc = parse(textwrap.dedent("""
        name: bismuth then lead (an invented demo)
        sample: {volume: 50 mL}
        analyte:
          - {metals: {Bi: 2 mmol/L}}
          - {metals: {Pb: 2 mmol/L}}
        titrant: {concentration: 0.01 M}
    """))
    stage = Method(6.0, "hexamine", "EDTA", 0.01, "xylenol_orange")
    t, b = _bench(sc, Method(2.3, "nitric_acid", "EDTA", 0.01, "xylenol_orange", buffer_total_M=0.0, mode="sequential",
                             stage=stage, co_analytes=("Pb",)))
    text = " ".join(b.procedure)
    assert "titration flask 2" not in text and "Without emptying the flask" in text
    assert "Continue titrating" in text  # the same dye serves both steps
    assert "c(Bi)" in b.formula and "c(Pb)" in b.formula


def test_demasking_and_displacement_procedures_name_their_reagents():
    sc = parse(textwrap.dedent("""
        name: zinc beside copper (an invented demo)
        sample: {volume: 50 mL}
        analyte: {metals: {Zn: 1 mmol/L}}
        interferents: {Cu: 1 mmol/L}
        titrant: {concentration: 0.01 M}
    """))
    _, b = _bench(sc, Method(10.0, "ammonia", "EDTA", 0.01, "EBT", masking=(("cyanide", 0.02),), mode="demasking"))
    text = " ".join(b.procedure)
    assert "formaldehyde" in text and "fume hood" in text and "potassium cyanide" in text
    ca = parse(textwrap.dedent("""
        name: calcium alone (an invented demo)
        sample: {volume: 50 mL}
        analyte: {metals: {Ca: 2 mmol/L}}
        titrant: {concentration: 0.01 M}
    """))
    _, b = _bench(ca, Method(10.0, "ammonia", "EDTA", 0.01, "EBT", mode="displacement", back_metal="Mg"))
    assert any("magnesium-EDTA" in step and "adds nothing to the titre" in step for step in b.procedure)
