"""Demasking: a masking agent holds several metals, a first titration takes the metals it leaves, then a
demasking agent releases one metal, which is titrated in the same solution.

Zinc beside copper in ammonia: cyanide masks both (copper as copper(I)); formaldehyde destroys the cyanide and
releases zinc from Zn(CN)4 2-, which is then titrated with Eriochrome Black T, while copper(I) stays masked (common
practice; /work/shared/DOMAIN.md). The demasking agent is modelled as destroying cyanide (HCHO + CN- + H2O ->
HOCH2CN + OH-, from memory) in the amount its dose allows; what it releases then follows the constants of the metals'
complexes. Copper(I) is taken as not titrated (a stated assumption of the database: no constant for its titrant
complexes); in practice formaldehyde in large excess or warm slowly demasks copper too, so the demasking is done
cold and the titration promptly (common practice).
"""
from __future__ import annotations

from ..constants import database
from ..errors import InputError
from ..method import Sample
from ..reagents import catalogue
from .composite import CompositeStrategy, _candidate_text, Step, co_analyte_options, step_text

# demasking agent -> the masking ligand it destroys, mol destroyed per mol of agent, its dose as mol per mol of the
# masking agent's dose, hazard (0-4, our scale) and the cautions the report prints. Sources beside each entry.
DEMASKERS: dict[str, dict] = {
    "formaldehyde": {
        "name": "formaldehyde (formalin, 37 % HCHO, diluted 1 + 8)",
        "masking": "cyanide",
        "ligand": "cyanide",
        "mol_ligand_per_mol": 1.0,  # HCHO + HCN -> HOCH2CN (glycolonitrile), from memory
        "mol_per_mol_masking": 1.0,  # at most the cyanide added (our own choice, stated in the finding)
        # the metals it releases from their cyanide complexes; copper(I), nickel, cobalt, mercury and iron stay masked
        # (common practice, from memory): it is dosed to destroy the cyanide that these do not hold
        "releases": ("Zn", "Cd"),
        "molarity_M": 1.5,  # formalin 37 % is 13.3 M; diluted 1 + 8: about 1.5 M (from memory)
        "note": "formaldehyde + cyanide -> glycolonitrile, dosed to destroy the cyanide that the metals it does not "
                "release (copper(I), nickel, ...) hold in their highest complexes; these are not attacked in the cold "
                "(common practice)",
        "hazard": 3,
        "cautions": (
            "Formaldehyde is a carcinogen (may cause cancer), toxic if inhaled or swallowed and a skin sensitiser: "
            "dispense it in a fume hood with gloves and eye protection.",
            "Formaldehyde with cyanide forms glycolonitrile, itself toxic: treat the titrated solution and rinsings as "
            "cyanide waste, kept alkaline.",
            "Formaldehyde releases zinc from its cyanide complex; in excess or warm it slowly releases copper too: add "
            "it cold, in the stated amount, and titrate at once.",
        ),
        "source": "common practice (demasking of zinc from cyanide by formaldehyde); amounts from memory",
    },
}


def _highest(metal: str, ligand: str) -> int:
    """The most ligands one metal ion binds in the database's complexes (0 where it has none)."""
    return max((k.stoichiometry.get(ligand, 0) for k in database().complexes.get((metal, ligand), ())), default=0)


class DemaskingTitration(CompositeStrategy):
    """Masked by ``method.masking`` (a masking agent a demasker undoes); ``method.co_analytes`` titrated first where
    given; then the demasker added and the analyte titrated, same conditions, same aliquot."""

    id = "demasking"
    label = "masking, then demasking of the analyte"
    complexity = 1.5  # a masking agent and a demasking agent, with timing (our own scale)
    time_cost = 1.5
    family = "demasking"

    @staticmethod
    def demasker(method) -> tuple[str, dict] | None:
        for did, d in DEMASKERS.items():
            if any(a == d["masking"] for a, _ in method.masking):
                return did, d
        return None

    def check(self, method) -> None:
        if self.demasker(method) is None:
            raise InputError("demasking needs a masking agent that a demasking agent undoes: "
                             + ", ".join(f"{d['masking']} (by {k})" for k, d in DEMASKERS.items()))

    def applies(self, sample, search) -> bool:
        db = database()
        for d in DEMASKERS.values():
            if d["masking"] in search.masking and all(a in d["releases"] for a in sample.analyte):
                lig = catalogue().masking_agent(d["masking"]).ligand
                if all(db.complexes.get((a, lig)) for a in sample.analyte):
                    return True
        return False

    def genes(self, sample, search) -> dict[str, tuple]:
        return {"co": ("choice", ["none", *[c for c in co_analyte_options(sample) if c != "none"]])}

    def method_fields(self, extra, sample, search, base) -> dict:
        masking = tuple(base.get("masking", ()))
        for d in DEMASKERS.values():
            if d["masking"] in search.masking and not any(a == d["masking"] for a, _ in masking):
                masking = tuple(sorted((*masking, (d["masking"], catalogue().masking_agent(d["masking"]).dose_range_M[1]))))
                break
        co = str(extra.get("co", "none"))
        return {"masking": masking, "co_analytes": tuple(co.split("+")) if co != "none" else ()}

    def dose(self, method, sample: Sample | None = None) -> tuple[str, dict, float]:
        """The demasking agent, its data, and its amount [mol/L of the aliquot]: enough to destroy the masking ligand
        that the metals it does not release do not hold (each in its highest complex of the database, after any
        redox step of the masking agent); the masking agent's dose where no sample is given."""
        did, d = self.demasker(method)
        masking_dose = sum(c for a, c in method.masking if a == d["masking"])
        c = d["mol_per_mol_masking"] * masking_dose
        if sample is not None:
            agent = catalogue().masking_agent(d["masking"])
            kept = 0.0
            for m, conc in sample.metals.items():
                if m in d["releases"]:
                    continue
                rule = agent.reduces.get(m)
                form = rule["to"] if rule else m
                kept += conc * (_highest(form, d["ligand"]) + (rule["mol_reagent_per_mol_metal"] if rule else 0.0))
            c = min(c, max(masking_dose - kept, 0.0) / d["mol_ligand_per_mol"])
        return did, d, c

    def removed(self, sample: Sample, method) -> dict[str, float]:
        """What the demasking takes out of the equilibrium [mmol]: the masking ligand it destroys (all that the metals
        it does not release do not hold), and those metals with the ligand they hold, as inert complexes (not attacked
        in the cold, common practice; a stated assumption)."""
        did, d = self.demasker(method)
        agent = catalogue().masking_agent(d["masking"])
        V0 = sample.volume_mL
        out = {d["ligand"]: sum(c for a, c in method.masking if a == d["masking"]) * V0}
        for m, conc in sample.metals.items():
            rule = agent.reduces.get(m)
            form = rule["to"] if rule else m
            if m not in d["releases"] and _highest(form, d["ligand"]) > 0:
                out[form] = out.get(form, 0.0) + conc * V0
        return out

    def steps(self, sample: Sample, method) -> list[Step]:
        single = method.with_mode("direct")
        did, d, c = self.dose(method, sample)
        removed = self.removed(sample, method)
        released = Sample(sample.volume_mL, sample.metals, sample.analyte, sample.ionic_strength_M,
                          sample.temperature_C, sample.acid_M)
        text = step_text(sample.analyte, method) + f", after {d['name']}"
        if not method.co_analytes:
            return [Step(released, single, text, same_aliquot=False, removed_mmol=removed)]
        first = Sample(sample.volume_mL, sample.metals, method.co_analytes, sample.ionic_strength_M,
                       sample.temperature_C, sample.acid_M)
        return [Step(first, single, step_text(method.co_analytes, method),
                     reported=tuple(method.co_analytes) in sample.groups),
                Step(released, single, text, removed_mmol=removed)]

    def finish(self, sample, method, steps, ts):
        from dataclasses import replace

        from .. import findings as fd

        t = super().finish(sample, method, steps, ts)
        did, d, c = self.dose(method, sample)
        held = [m for m in self.removed(sample, method) if m != d["ligand"]]
        note = fd.assumption("demasking", agent=d["name"], dose_M=c, ratio=d["mol_ligand_per_mol"], ligand=d["ligand"],
                             note=d["note"], inert=held)
        return replace(t, findings=(*t.findings, note))

    def hazards(self, method) -> tuple[int, ...]:
        return (self.dose(method)[1]["hazard"],)

    def reagent_cautions(self, method) -> list[tuple[str, int, tuple[str, ...]]]:
        did, d, _ = self.dose(method)
        return [(d["name"], d["hazard"], tuple(d["cautions"]))]

    def variant(self, method) -> str:
        return "+".join(getattr(method, "co_analytes", ()))

    def describe(self, method) -> str:
        if not hasattr(method, "stage"):
            return _candidate_text(self, method)
        did, d, _ = self.dose(method)
        first = f"{'+'.join(method.co_analytes)} titrated, then " if method.co_analytes else ""
        return f"demasking: {first}{did} releases the analyte from {d['masking']}"

    def json_fields(self, method) -> dict:
        if not hasattr(method, "stage"):  # a search candidate: its genes
            return {"mode": self.id, "back_metal": None, **dict(getattr(method, "extra", ()))}
        did, d, c = self.dose(method)
        return {"mode": self.id, "back_metal": None, "co_analytes": list(method.co_analytes),
                "demasking_agent": did, "demasking_conc_M": c}

    def bench_steps(self, scenario, method, t, writers=None) -> list[str] | None:
        from .composite import composite_steps

        did, d, c = self.dose(method, scenario.sample)
        V0 = scenario.sample.volume_mL

        def between(k, step) -> str:
            return (f"Add {c * V0 / d['molarity_M']:.2g} mL of {d['name']} ({c * V0:.2g} mmol, in the cold, in a fume hood); "
                    f"it releases {', '.join(step.sample.analyte)} (the solution turns back to the complex colour)")
        return composite_steps(scenario, method, t, self.steps(scenario.sample, method), between=between, writers=writers)


__all__ = ["DemaskingTitration", "DEMASKERS"]
