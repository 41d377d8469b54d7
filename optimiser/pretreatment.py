"""The sample as the masking agents leave it, where a stated assumption stands in for a constant.

Some masking works by a redox step (copper(II) reduced to copper(I) by thiosulfate, thiourea or cyanide) or by
binding for which no usable constants exist (iron(III), aluminium and manganese by triethanolamine). The reagent
data say so (``reduces:`` and ``masks:`` in ``reagents.yaml``); this module applies those rules before the
equilibrium is solved and records each as a finding.
"""
from __future__ import annotations

from dataclasses import dataclass

from . import findings as fd
from .findings import Finding
from .method import Method, Sample


@dataclass(frozen=True)
class Prepared:
    """A sample after the stated assumptions (reduction of Cu(II), masking without constants) are applied.

    Attributes
    ----------
    metals : dict
        Metal id -> concentration left for the equilibrium [mol/L].
    masked_by_assumption : dict
        Metal id -> concentration taken as masked without a constant [mol/L].
    ligand_totals : dict
        Ligand id -> total the buffer and masking agents bring, less what the redox steps used [mol/L].
    findings : tuple of Finding
    """

    metals: dict[str, float]
    masked_by_assumption: dict[str, float]
    ligand_totals: dict[str, float]
    findings: tuple[Finding, ...]

    @property
    def masked_metals(self) -> tuple[str, ...]:
        """The metals taken as masked without a constant."""
        return tuple(m for m, c in self.masked_by_assumption.items() if c > 0)


def _reduce(agent, dose: float, metals: dict[str, float], out: list[Finding]) -> float:
    """Apply an agent's redox rules; returns the dose left [mol/L]."""
    left = dose
    for metal, rule in agent.reduces.items():
        c = metals.get(metal, 0.0)
        if c <= 0:
            continue
        need = rule["mol_reagent_per_mol_metal"] * c
        frac = min(1.0, left / need) if need > 0 else 1.0
        metals[metal] = c * (1 - frac)
        metals[rule["to"]] = metals.get(rule["to"], 0.0) + c * frac
        left -= need * frac
        out.append(fd.assumption("reduction", agent=agent.name, note=rule["note"]))
        if frac < 1:
            out.append(fd.warning("reduction_incomplete", agent=agent.name, metal=metal, fraction=frac))
    return left


def _mask(agent, dose: float, pH: float, metals: dict[str, float], masked: dict[str, float], out: list[Finding]) -> None:
    """Apply an agent's assumption-based masking rules."""
    for metal, rule in agent.masks.items():
        c = metals.get(metal, 0.0)
        if c <= 0:
            continue
        lo, hi = rule["pH_range"]
        in_range = lo <= pH <= hi
        if in_range and dose >= rule["min_ratio"] * c:
            masked[metal] = masked.get(metal, 0.0) + c
            metals[metal] = 0.0
            out.append(fd.assumption("masked_by_assumption", agent=agent.name, note=rule["note"]))
        elif in_range:
            out.append(fd.warning("masking_dose_low", agent=agent.name, metal=metal, min_ratio=rule["min_ratio"]))


def prepare(sample: Sample, method: Method) -> Prepared:
    """Apply the masking agents' reductions and assumption-based masking to the sample's metals."""
    metals = dict(sample.metals)
    ligand_totals: dict[str, float] = {}
    if method.buffer_info.ligand:
        ligand_totals[method.buffer_info.ligand] = method.buffer_total_M
    out: list[Finding] = []
    masked: dict[str, float] = {}
    for agent, (_, dose) in zip(method.masking_agents, method.masking):
        left = _reduce(agent, dose, metals, out)
        _mask(agent, dose, method.pH, metals, masked, out)
        ligand_totals[agent.ligand] = ligand_totals.get(agent.ligand, 0.0) + max(left, 0.0)
        if method.pH < agent.min_pH:
            out.append(fd.warning("masking_below_pH", agent=agent.name, min_pH=agent.min_pH, pH=method.pH))
    metals = {m: c for m, c in metals.items() if c > 0 or m in sample.analyte}
    return Prepared(metals, masked, ligand_totals, tuple(out))
