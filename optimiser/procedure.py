"""The bench procedure of a method: reagent amounts per aliquot, the buffer recipe, the steps and the result formula.

Every decision here rests on facts: the method's strategy (:mod:`optimiser.strategies`: does it need a second
standard, does it add an excess), the simulated titration (slow analytes, solids at the start) and what each
reagent's data entry declares (the buffer's solutions and salts). No mode or reagent is tested by its name.
"""
from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass

from .constants import H
from .medium import buffer_forms, free_hydrogen_M, free_hydroxide_M
from .method import Method
from .reagents import HAZARD_NAMES, Buffer, molar_mass
from .scenario import Scenario
from .stocks import Addition, StockSolution, formula_text
from .titration import Titration
from .units import molar_mass_of_metal

# How a buffer is made up (the keys of _RECIPES); see recipe_kind.
ACID_SALT_AND_BASE_SOLUTION = "acid_salt_and_base_solution"  # NH4Cl + concentrated ammonia
BASE_SALT_AND_ACID_SOLUTION = "base_salt_and_acid_solution"  # sodium acetate + acetic acid
BASE_AND_STRONG_ACID = "base_and_strong_acid"  # hexamine + HCl
STRONG_BASE = "strong_base"  # NaOH only, no complexing buffer
STRONG_ACID = "strong_acid"  # HNO3 only, no complexing buffer
PH_METER_ONLY = "pH_meter_only"  # an entry that declares nothing to weigh or measure


_KINDS = {  # the data's recipe kinds (reagents.yaml, ``recipe.kind``) -> the recipe writers below
    "salt_plus_base_solution": ACID_SALT_AND_BASE_SOLUTION,
    "salt_plus_acid_solution": BASE_SALT_AND_ACID_SOLUTION,
    "base_plus_acid_solution": BASE_AND_STRONG_ACID,
    "strong_base": STRONG_BASE,
    "strong_acid": STRONG_ACID,
}


def recipe_kind(buffer: Buffer) -> str:
    """How a buffer is made up: its data entry's ``recipe.kind`` (never its id)."""
    return _KINDS.get(buffer.recipe.kind, PH_METER_ONLY)


@dataclass(frozen=True)
class RecipeInput:
    """What a recipe needs: the buffer, its ligand's total [mol/L], the base and acid forms [mmol per aliquot]."""

    buffer: Buffer
    total_M: float
    pH: float
    V0_mL: float
    ionic_strength_M: float
    temperature_C: float
    n_base: float = 0.0
    n_acid: float = 0.0
    extra_OH_mmol: float = 0.0


def _acid_salt_and_base_solution(r: RecipeInput) -> str:
    raw, lig = r.buffer.raw, r.buffer.ligand
    m_acid = r.n_acid * molar_mass(raw["acid_formula"])  # mg
    v_base = r.n_base / raw["base_solution"]["molarity_M"]
    return (f"{r.n_acid:.3g} mmol {formula_text(raw['acid_formula'])} ({m_acid:.0f} mg) and {v_base:.2f} mL "
            f"{raw['base_solution']['name']} ({r.n_base:.3g} mmol {lig}): total {lig} {r.total_M:.3g} mol/L in the aliquot")


def _base_salt_and_acid_solution(r: RecipeInput) -> str:
    raw = r.buffer.raw
    m_base = r.n_base * molar_mass(raw["base_formula"])
    v_acid = r.n_acid / raw["acid_solution"]["molarity_M"]
    return (f"{m_base:.0f} mg {formula_text(raw['base_formula'])} ({r.n_base:.3g} mmol) and {v_acid:.3f} mL "
            f"{raw['acid_solution']['name']} ({r.n_acid:.3g} mmol): total {r.buffer.ligand} {r.total_M:.3g} mol/L")


def _base_and_strong_acid(r: RecipeInput) -> str:
    raw = r.buffer.raw
    n_tot = r.n_base + r.n_acid
    m = n_tot * molar_mass(raw["base_formula"])
    v_acid = r.n_acid / raw["acid_solution"]["molarity_M"]
    return (f"{m:.0f} mg {r.buffer.ligand}, {formula_text(raw['base_formula'])} ({n_tot:.3g} mmol), and {v_acid:.2f} mL "
            f"{raw['acid_solution']['name']}: total {r.buffer.ligand} {r.total_M:.3g} mol/L")


def _strong_base(r: RecipeInput) -> str:
    sol = r.buffer.raw["base_solution"]
    n_oh = r.V0_mL * free_hydroxide_M(r.pH, r.ionic_strength_M, r.temperature_C) + r.extra_OH_mmol
    return (f"about {n_oh / sol['molarity_M']:.2f} mL {sol['name']} ({n_oh:.3g} mmol OH-, of which "
            f"{r.extra_OH_mmol:.3g} mmol go into hydroxide precipitates)")


def _strong_acid(r: RecipeInput) -> str:
    sol = r.buffer.raw["acid_solution"]
    n_h = r.V0_mL * free_hydrogen_M(r.pH, r.ionic_strength_M, r.temperature_C)
    return f"about {n_h / sol['molarity_M']:.2f} mL {sol['name']} (or a strong base if the sample is more acid)"


_RECIPES: dict[str, Callable[[RecipeInput], str]] = {
    ACID_SALT_AND_BASE_SOLUTION: _acid_salt_and_base_solution, BASE_SALT_AND_ACID_SOLUTION: _base_salt_and_acid_solution,
    BASE_AND_STRONG_ACID: _base_and_strong_acid, STRONG_BASE: _strong_base, STRONG_ACID: _strong_acid,
}


def buffer_recipe(buffer: Buffer, total_M: float, pH: float, V0_mL: float, ionic_strength_M: float, temperature_C: float,
                  extra_OH_mmol: float = 0.0) -> list[str]:
    """How to make up the buffer for one aliquot (amounts per aliquot, then adjust with a pH meter).

    The ligand's base and acid forms split as its protonation fractions at the pH, ionic strength and temperature
    give them (the fully deprotonated form is the base).
    """
    r = RecipeInput(buffer, total_M, pH, V0_mL, ionic_strength_M, temperature_C, extra_OH_mmol=extra_OH_mmol)
    if buffer.ligand:
        forms = buffer_forms(buffer, total_M, pH, ionic_strength_M, temperature_C) * V0_mL  # mmol in the aliquot
        r = RecipeInput(buffer, total_M, pH, V0_mL, ionic_strength_M, temperature_C, float(forms[0]), float(forms[1:].sum()),
                        extra_OH_mmol)
    make = _RECIPES.get(recipe_kind(buffer))
    steps = [make(r)] if make is not None else []
    steps.append(f"adjust to pH {pH:.2f} with a calibrated pH meter")
    return steps


@dataclass(frozen=True)
class MaskingDose:
    """One masking agent's dose per aliquot."""

    agent: str
    name: str
    conc_M: float
    mmol_per_aliquot: float
    grams_per_aliquot: float
    amount: str


def masking_doses(method: Method, V0_mL: float) -> list[MaskingDose]:
    """Each masking agent's amount per aliquot (mmol, mg of its salt, and uL where the data give a density)."""
    out = []
    for agent, (_, conc) in zip(method.masking_agents, method.masking, strict=True):
        mmol = conc * V0_mL
        grams = mmol * agent.molar_mass / 1000
        amount = f"{mmol:.3g} mmol = {grams * 1000:.1f} mg {agent.salt}"
        if agent.density_g_mL:
            amount += f" ({grams / agent.density_g_mL * 1000:.0f} uL)"
        out.append(MaskingDose(agent.id, agent.name, conc, mmol, grams, amount))
    return out


def hydroxide_in_solids_mmol(titration: Titration) -> float:
    """Hydroxide taken up by the solids present at the start [mmol per aliquot]: the H+ each solid releases as it
    forms (2 per M(OH)2; none for a salt of the sample's anions such as CaCO3)."""
    s = titration.sample
    released = {k.species[:-3]: max(-k.stoichiometry.get(H, 0), 0) for k in titration.constants_used
                if k.species.endswith("(s)")}
    return sum(released.get(name, 0) * float(amount[0]) * s.volume_mL for name, amount in titration.solids.items())


def result_formula(scenario: Scenario, method: Method) -> str:
    """How the analyst turns the titre into a concentration (and into mg/L where a formula or a single metal allows)."""
    V0, cT = scenario.sample.volume_mL, scenario.titrant_conc_M
    own = method.strategy.result_formula(scenario, method)
    if own is not None:
        return own
    if method.strategy.uses_standard:
        std = method.strategy.variant(method)
        formula = (f"n({scenario.analyte_label}) [mmol] = c(titrant) x V(titrant) - c({std}) x V({std}); "
                   f"c [mmol/L] = n / {V0:g} mL x 1000")
    else:
        formula = f"c({scenario.analyte_label}) [mmol/L] = {cT:g} mol/L x V(titrant) [mL] / {V0:g} mL x 1000"
    if scenario.report_as:
        try:
            formula += f"; as {scenario.report_as}: mg/L = c [mmol/L] x {molar_mass(scenario.report_as):.2f}"
        except (ValueError, KeyError):
            pass
    elif len(scenario.sample.analyte) == 1:
        a = scenario.sample.analyte[0]
        formula += f"; mg/L {a} = c [mmol/L] x {molar_mass_of_metal(a):.3f}"
    return formula


def strategy_text(method: Method) -> str:
    """'direct titration', 'back-titration with Zn': the strategy's label, with its standard where it needs one."""
    s = method.strategy
    return f"{s.label} with {s.variant(method)}" if s.uses_standard else s.label


@dataclass(frozen=True)
class BenchMethod:
    """The recommended method as an analyst runs it, with its figures of merit (plain data for any report format).

    ``stocks`` (with per-litre recipes), ``standardisation``, ``procedure`` (numbered steps), ``calculation`` and
    ``quality_control`` are the written method (:mod:`optimiser.bench_steps`); ``additions`` lists every amount the
    procedure adds to an aliquot, as measured.
    """

    aliquot_mL: float
    pH: float
    buffer: str
    buffer_name: str
    buffer_total_M: float
    buffer_recipe: tuple[str, ...]
    titrant: str
    titrant_name: str
    titrant_conc_M: float
    titrant_salt: str
    titrant_g_per_L: float
    masking: tuple[MaskingDose, ...]
    indicator: str
    indicator_name: str
    indicator_dose: str
    strategy: str  # "direct titration", "back-titration with Zn"
    standard: str | None  # the second standard's metal, where the strategy needs one
    standard_conc_M: float | None
    excess_mL: float | None
    endpoint_mL: float | None
    equivalence_mL: float
    colour_change: tuple[str, str]
    predicted_error_percent: float | None
    selectivity_margin_log: float | None
    endpoint_sharpness_mL: float | None
    endpoint_sharpness_drops: float | None
    hazard: str
    hazard_level: int
    precipitates: tuple[str, ...]
    formula: str
    procedure: tuple[str, ...]
    warnings: tuple[str, ...]
    assumptions: tuple[str, ...]
    indicator_blank_percent: float | None
    stocks: tuple[StockSolution, ...] = ()
    additions: tuple[Addition, ...] = ()
    standardisation: tuple[str, ...] = ()
    calculation: tuple[str, ...] = ()
    quality_control: tuple[str, ...] = ()
    heated: bool = False


def bench_method(scenario: Scenario, method: Method, t: Titration, margin: float | None) -> BenchMethod:
    """The bench procedure and figures of merit of ``method`` as simulated in ``t``."""
    from .bench_steps import written_method  # the written steps build on the recipe helpers above
    V0 = scenario.sample.volume_mL
    buf, tit = method.buffer_info, method.titrant_info
    extra_OH = hydroxide_in_solids_mmol(t) if recipe_kind(buf) == STRONG_BASE else 0.0
    total_buf = method.buffer_total_M if buf.ligand else 0.0
    I_start = float(t.ionic_strength_M[0]) if len(t.ionic_strength_M) else scenario.sample.ionic_strength_M
    recipe = buffer_recipe(buf, total_buf, method.pH, V0, I_start, scenario.sample.temperature_C, extra_OH)
    masking = masking_doses(method, V0)
    formula = result_formula(scenario, method)
    written = written_method(scenario, method, t, formula)
    uses_standard = method.strategy.uses_standard
    return BenchMethod(
        aliquot_mL=V0, pH=method.pH, buffer=buf.id, buffer_name=buf.name, buffer_total_M=total_buf,
        buffer_recipe=tuple(recipe), titrant=tit.id, titrant_name=tit.name, titrant_conc_M=method.titrant_conc_M,
        titrant_salt=tit.salt, titrant_g_per_L=method.titrant_conc_M * tit.molar_mass, masking=tuple(masking),
        indicator=method.indicator, indicator_name=method.indicator_info.name, indicator_dose=method.indicator_info.dose,
        strategy=strategy_text(method), standard=method.strategy.variant(method) if uses_standard else None,
        standard_conc_M=method.back_concentration if uses_standard else None, excess_mL=t.excess_mL,
        endpoint_mL=t.endpoint_mL, equivalence_mL=t.equivalence_mL, colour_change=tuple(t.colour_change),
        predicted_error_percent=t.error_percent, selectivity_margin_log=margin, endpoint_sharpness_mL=t.sharpness_mL,
        endpoint_sharpness_drops=t.sharpness_drops, hazard=HAZARD_NAMES[method.hazard], hazard_level=method.hazard,
        precipitates=tuple(sorted(set(t.precipitates_start) | set(t.precipitates_end))), formula=formula,
        procedure=written.procedure, warnings=tuple(t.warnings), assumptions=tuple(t.assumptions),
        indicator_blank_percent=t.indicator_blank_percent, stocks=written.stocks, additions=written.additions,
        standardisation=written.standardisation, calculation=written.calculation,
        quality_control=written.quality_control, heated=written.heated)


__all__ = [
    "BenchMethod",
    "MaskingDose",
    "bench_method",
    "buffer_recipe",
    "formula_text",
    "free_hydrogen_M",
    "free_hydroxide_M",
    "masking_doses",
    "recipe_kind",
    "result_formula",
    "strategy_text",
]
