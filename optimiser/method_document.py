"""The recommended method as a laboratory method document (plain data for the SOP formats).

Its sections follow a laboratory method: scope and range, principle, interferences and how they are handled,
reagents (stock solutions), standardisation, procedure, calculation, quality control, safety and references. The
procedure, standardisation, calculation and quality control are the very texts of the bench method
(:class:`optimiser.procedure.BenchMethod`), so that every format prints the same procedure.
"""
from __future__ import annotations

from dataclasses import dataclass

from .constants import database
from .procedure import BenchMethod
from .readout import DROP_mL
from .scenario import Scenario
from .titration import Titration

READING_mL = DROP_mL  # one drop: the reading uncertainty of a visual end point (common practice)


@dataclass(frozen=True)
class Section:
    """One section: an id, a title, paragraphs, then a list (numbered where ``ordered``) and a table."""

    id: str
    title: str
    paragraphs: tuple[str, ...] = ()
    items: tuple[str, ...] = ()
    ordered: bool = False
    table: tuple[tuple[str, ...], ...] = ()  # the first row is the header


@dataclass(frozen=True)
class MethodDocument:
    title: str
    status: str  # what the document is: a method to validate, or a compromise not to follow
    sections: tuple[Section, ...]


def working_range(scenario: Scenario, method: BenchMethod) -> tuple[float, float]:
    """The analyte concentrations [mmol/L] the method covers with its aliquot: from the titre whose reading (one drop)
    stays within the error target, to a full burette (common practice)."""
    target = scenario.targets.max_error_percent / 100
    V0, c = scenario.sample.volume_mL, method.titrant_conc_M
    return READING_mL / target * c / V0 * 1000, scenario.burette_mL * c / V0 * 1000


def _interferences(scenario: Scenario, t: Titration) -> tuple[str, ...]:
    out = []
    for metal in scenario.sample.interferents:
        end = t.speciation_end.get(metal)
        where = ""
        if end:
            share = {k: v for k, v in end.items() if v > 0.005}
            agents = ", ".join(a.name for a in t.method.masking_agents)
            where = ", ".join(f"{k}{f' (by {agents})' if k == 'masked' and agents else ''} {100 * v:.0f} %"
                              for k, v in sorted(share.items(), key=lambda kv: -kv[1]))
        titrated = t.cotitrated.get(metal)
        held = "held out of the titration by an assumption stated in the report" if metal in t.masked_by_assumption else ""
        parts = [f"{metal} ({scenario.sample.metals[metal] * 1000:.3g} mmol/L in the sample)"]
        if where:
            parts.append(f"at the end point: {where}")
        if titrated is not None:
            parts.append(f"titrated with the analyte: {100 * titrated:.2g} %")
        if held:
            parts.append(held)
        out.append("; ".join(parts) + ".")
    if t.blocked_by:
        out.append("The indicator is blocked by " + ", ".join(t.blocked_by) + ".")
    return tuple(out) or ("The sample holds no other metal that binds the titrant.",)


def _references(keys: list[str]) -> tuple[str, ...]:
    refs = database().references
    out = []
    for k in dict.fromkeys(keys):
        if k in refs:
            out.append(refs[k]["citation"])
    return tuple(out)


def method_document(scenario: Scenario, t: Titration, m: BenchMethod, meets_criteria: bool,
                    safety: tuple, indicator_sources: tuple[str, ...], constants_cited: int) -> MethodDocument:
    """The method document of the recommended (or closest) method.

    ``safety`` holds the analysis's safety items (name, hazard, cautions); ``indicator_sources`` the reference keys
    of the indicator's data; ``constants_cited`` how many constants the report's table lists.
    """
    lo, hi = working_range(scenario, m)
    analyte = scenario.analyte_label
    status = ("A method designed by simulation: validate it at the bench (standard, spiked sample, duplicates) "
              "before routine use." if meets_criteria else
              "No method meets the criteria: the closest compromise is shown for comparison only; it is not a "
              "procedure to follow.")
    scope = Section("scope", "Scope and range", (
        f"Determination of {analyte} in the sample ({scenario.matrix or 'matrix not stated'}) by complexometric titration.",
        f"Range: {lo:.3g} to {hi:.3g} mmol/L in the sample with a {m.aliquot_mL:g} mL aliquot and a "
        f"{scenario.burette_mL:g} mL burette (from a titre whose one-drop reading stays within "
        f"{scenario.targets.max_error_percent:g} % to a full burette); the sample as described holds "
        f"{sum(scenario.sample.metals[a] for a in scenario.sample.analyte) * 1000:.3g} mmol/L. Outside the range "
        "take another aliquot volume, and check the error again.",))
    principle_text = (f"{analyte[:1].upper()}{analyte[1:]} is determined by {m.strategy} with {m.titrant_name} ({m.titrant_conc_M:g} mol/L) at "
                      f"pH {m.pH:.2f} ({m.buffer_name}); {m.indicator_name} turns from {m.colour_change[0]} to "
                      f"{m.colour_change[1]} at the end point.")
    if m.masking:
        principle_text += " Masking: " + ", ".join(k.name for k in m.masking) + "."
    err = "-" if m.predicted_error_percent is None else f"{_signed(m.predicted_error_percent)} %"
    principle = Section("principle", "Principle", (principle_text,
                        f"Predicted titration error {err} before standardisation; the standardisation against the "
                        "analyte by the same method cancels what the analyte alone shows."))
    interferences = Section("interferences", "Interferences and how they are handled",
                            items=_interferences(scenario, t) + tuple(m.warnings))
    header = ("Stock solution", "Role", "Recipe", "Keeps", "Hazards")
    rows = tuple((s.name, s.role, s.per_litre, s.shelf_life, ", ".join(s.hazards) or "-") for s in m.stocks)
    reagents = Section("reagents", "Reagents (stock solutions)",
                       ("Deionised water throughout; reagents of analytical grade.",), table=(header, *rows))
    standardisation = Section("standardisation", "Standardisation", items=m.standardisation, ordered=True)
    procedure = Section("procedure", "Procedure", items=m.procedure, ordered=True)
    calculation = Section("calculation", "Calculation", items=m.calculation)
    qc = Section("quality-control", "Quality control", items=m.quality_control)
    cautions = tuple(f"{s.name} (hazard: {s.hazard}): {' '.join(s.cautions)}" for s in safety if s.cautions)
    safety_section = Section("safety", "Safety", items=cautions, paragraphs=(
        "These are the usual cautions, not a risk assessment: follow the safety data sheet of each reagent, local "
        "regulations and the laboratory's safety officer.",))
    keys = [s.source for s in m.stocks] + list(indicator_sources)
    references = Section("references", "References", items=_references(keys), paragraphs=(
        f"The {constants_cited} formation, protonation and solubility constants the simulation used are listed with "
        "their sources in the HTML report.",))
    return MethodDocument(f"Method: {analyte} - {scenario.name}", status,
                          (scope, principle, interferences, reagents, standardisation, procedure, calculation, qc,
                           safety_section, references))


__all__ = ["MethodDocument", "Section", "method_document", "working_range"]


def _signed(x: float) -> str:
    """Signed to 0.01, never "-0.00" (as :func:`optimiser.report.text.signed_fixed`)."""
    text = f"{x:+.2f}"
    return text if float(text) != 0 else "0.00"
