"""What is titrated and how: the :class:`Sample` (the aliquot) and the :class:`Method` (the conditions).

Both are frozen and validate themselves. A ``Method`` resolves its reagent ids once, on creation, to the
catalogue's entries (``method.titrant_info``, ``method.buffer_info``, ``method.indicator_info``,
``method.masking_agents``) and its titration mode to a strategy object (``method.strategy``), so that the
simulation, the search and the report never look a name up again or test a mode by its name.
"""
from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass, field, replace

from .anions import ligands as anion_ligands
from .conditional import check_concentration, check_pH
from .constants import IONIC_STRENGTH_MAX_M, database
from .errors import InputError
from .reagents import Buffer, Indicator, MaskingAgent, Titrant, catalogue


@dataclass(frozen=True)
class Sample:
    """The aliquot as titrated.

    Attributes
    ----------
    volume_mL : float
        Aliquot volume [mL].
    metals : Mapping[str, float]
        Metal id -> concentration in the aliquot [mol/L].
    analyte : tuple of str
        The metal or metals determined (summed, e.g. ("Ca", "Mg") for total hardness).
    ionic_strength_M : float
        The ionic strength of the sample matrix's own electrolyte that the model does not otherwise know (not its
        metals, acid or ``alkali_M``), in the aliquot [mol/L]; 0 for the metals' salts in water. The ionic strength
        of each point of a titration is computed from the whole recipe with this as its background
        (:mod:`optimiser.medium`).
    temperature_C : float
        [degC].
    acid_M : float
        Strong acid the sample holds (an acid-preserved sample), as H+ [mol/L]; neutralised before the buffer.
    anions : Mapping[str, float]
        The sample's own anions: ligand id (``"carbonate"``, ``"sulfate"``, ``"phosphate"``, ``"chloride"``; see
        :mod:`optimiser.anions`) -> total in the aliquot [mol/L].
    anion_notes : tuple of str
        The assumptions behind the anions as given (alkalinity taken as hydrogencarbonate, ...).
    alkali_M : Mapping[str, float]
        Counter-ion id (``Na``, ``K``) -> the matrix's own alkali ions in the aliquot [mol/L] (with a monovalent
        anion); they bind the titrant like the recipe's.
    groups : tuple of tuple of str
        Further metals or groups determined separately (a scenario's ``analyte`` list beyond its first group); a
        strategy with several titrations or aliquots (:mod:`optimiser.strategies`) reports each, a single titration
        treats them as interferents.
    """

    volume_mL: float
    metals: Mapping[str, float]
    analyte: tuple[str, ...]
    ionic_strength_M: float = 0.0
    temperature_C: float = 25.0
    acid_M: float = 0.0
    anions: Mapping[str, float] = field(default_factory=dict)
    anion_notes: tuple[str, ...] = ()
    alkali_M: Mapping[str, float] = field(default_factory=dict)
    groups: tuple[tuple[str, ...], ...] = ()

    def __post_init__(self) -> None:
        db = database()
        if not (self.volume_mL > 0):
            raise InputError(f"sample volume must be positive (mL); got {self.volume_mL}")
        metals = {db.metal(m): float(check_concentration(c, f"concentration of {m}")) for m, c in self.metals.items()}
        object.__setattr__(self, "metals", metals)
        analyte = tuple(db.metal(a) for a in self.analyte)
        if not analyte:
            raise InputError("the sample needs an analyte")
        for a in analyte:
            if a not in metals:
                raise InputError(f"analyte {a} has no concentration in the sample (metals given: {', '.join(metals)})")
        object.__setattr__(self, "analyte", analyte)
        groups = tuple(tuple(db.metal(m) for m in g) for g in self.groups)
        for g in groups:
            if not g or any(m not in metals or m in analyte for m in g):
                raise InputError(f"each further analyte group must name metals of the sample other than the first "
                                 f"group's ({', '.join(analyte)}); got {', '.join(g) or 'an empty group'}")
        if len({m for g in groups for m in g}) != sum(len(g) for g in groups):
            raise InputError("a metal may belong to one analyte group only")
        object.__setattr__(self, "groups", groups)
        if not 0.0 <= self.acid_M <= 2.0:
            raise InputError(f"the sample's acid must be between 0 and 2 mol/L of H+; got {self.acid_M}")
        known = anion_ligands()
        for a in self.anions:
            if a not in known:
                raise InputError(f"unknown sample anion {a!r}; known: {', '.join(known)}")
        object.__setattr__(self, "anions", {a: float(check_concentration(c, f"concentration of {a}"))
                                            for a, c in self.anions.items()})
        if not 0.0 <= self.ionic_strength_M <= IONIC_STRENGTH_MAX_M:
            raise InputError(f"the sample's background ionic strength must be between 0 and {IONIC_STRENGTH_MAX_M:g} M; "
                             f"got {self.ionic_strength_M}")
        alkali = {}
        for m, c in self.alkali_M.items():
            mid = db.metal(m)
            if not db.metals[mid].get("counter_ion"):
                allowed = ", ".join(k for k, row in db.metals.items() if row.get("counter_ion"))
                raise InputError(f"{m} is not an alkali ion of the matrix (allowed: {allowed})")
            alkali[mid] = float(check_concentration(c, f"concentration of {m} in the matrix"))
        object.__setattr__(self, "alkali_M", alkali)

    @property
    def interferents(self) -> tuple[str, ...]:
        return tuple(m for m in self.metals if m not in self.analyte)

    @property
    def n_analyte_mmol(self) -> float:
        return sum(self.metals[a] for a in self.analyte) * self.volume_mL


@dataclass(frozen=True)
class Method:
    """The conditions of one titration method.

    Attributes
    ----------
    pH : float
    buffer : str
        Buffer id (see ``optimiser constants``).
    buffer_total_M : float
        Total of the buffer's ligand in the aliquot (NH3 + NH4+, ...) [mol/L]; ignored for a buffer without ligand.
    titrant, titrant_conc_M
        Titrant id and concentration [mol/L].
    masking : tuple of (agent, conc_M)
        Masking agents and their concentrations in the aliquot [mol/L].
    indicator : str
    indicator_conc_M : float or None
        Effective concentration in the aliquot [mol/L]; the indicator's usual dose by default.
    mode : str
        The strategy's id (:mod:`optimiser.strategies`): ``"direct"``, or ``"back"`` (excess titrant, then a
        standard of ``back_metal``).
    back_metal, back_conc_M, excess_ratio
        Back-titration standard, its concentration [mol/L], and the excess of titrant over the metals present
        (read by the strategies that use them; a displacement reads ``back_metal`` as the metal of the complex it
        adds).
    stage : Method or None
        The conditions of a multi-step strategy's other titration (a sequential titration's first step in the same
        aliquot; a determination by difference's second aliquot); None for a single titration.
    co_analytes : tuple of str
        The metals that other titration determines (read by the strategies that use them).
    """

    pH: float
    buffer: str
    titrant: str
    titrant_conc_M: float
    indicator: str
    buffer_total_M: float = 0.1
    masking: tuple[tuple[str, float], ...] = ()
    indicator_conc_M: float | None = None
    mode: str = "direct"
    back_metal: str = "Zn"
    back_conc_M: float | None = None
    excess_ratio: float = 1.5
    stage: "Method | None" = None
    co_analytes: tuple[str, ...] = ()
    titrant_info: Titrant = field(init=False, compare=False, repr=False)
    buffer_info: Buffer = field(init=False, compare=False, repr=False)
    indicator_info: Indicator = field(init=False, compare=False, repr=False)
    masking_agents: tuple[MaskingAgent, ...] = field(init=False, compare=False, repr=False)

    def __post_init__(self) -> None:
        from .strategies import strategy  # the strategies read Method; imported here to keep the import graph one-way

        cat = catalogue()
        check_pH(self.pH)
        object.__setattr__(self, "buffer_info", cat.buffer(self.buffer))
        object.__setattr__(self, "titrant_info", cat.titrant(self.titrant))
        object.__setattr__(self, "indicator_info", cat.indicator(self.indicator))
        object.__setattr__(self, "buffer", self.buffer_info.id)
        object.__setattr__(self, "titrant", self.titrant_info.id)
        object.__setattr__(self, "indicator", self.indicator_info.id)
        agents = tuple(cat.masking_agent(a) for a, _ in self.masking)
        masking = tuple((agent.id, float(check_concentration(c, f"dose of {a}"))) for agent, (a, c) in zip(agents, self.masking))
        if len({a for a, _ in masking}) != len(masking):
            raise InputError("each masking agent may be given once")
        object.__setattr__(self, "masking", masking)
        object.__setattr__(self, "masking_agents", agents)
        if not self.titrant_conc_M > 0:
            raise InputError(f"titrant concentration must be positive; got {self.titrant_conc_M}")
        check_concentration(self.buffer_total_M, "buffer total")
        object.__setattr__(self, "co_analytes", tuple(database().metal(m) for m in self.co_analytes))
        strategy(self.mode).check(self)

    @property
    def strategy(self):
        """The :class:`optimiser.strategies.Strategy` that runs this method."""
        return _strategy(self.mode)

    def with_mode(self, mode: str) -> "Method":
        """The same conditions as a single titration run by the strategy ``mode`` (no stage, no co-analytes)."""
        from dataclasses import replace

        return replace(self, mode=mode, stage=None, co_analytes=())

    @property
    def back_concentration(self) -> float:
        return self.back_conc_M if self.back_conc_M is not None else self.titrant_conc_M

    @property
    def indicator_dose_M(self) -> float:
        """Effective indicator concentration in the aliquot [mol/L]."""
        return self.indicator_conc_M if self.indicator_conc_M is not None else self.indicator_info.conc_M

    @property
    def ligands(self) -> tuple[str, ...]:
        out = [self.titrant]
        if self.buffer_info.ligand:
            out.append(self.buffer_info.ligand)
        out += [agent.ligand for agent in self.masking_agents]
        out.append(self.indicator)
        return tuple(dict.fromkeys(out))

    def ligand_totals(self) -> dict[str, float]:
        """Total concentration of each ligand the method adds (buffer ligand and masking agents) [mol/L]."""
        out: dict[str, float] = {}
        if self.buffer_info.ligand:
            out[self.buffer_info.ligand] = self.buffer_total_M
        for agent, (_, dose) in zip(self.masking_agents, self.masking):
            out[agent.ligand] = out.get(agent.ligand, 0.0) + dose
        return out

    @property
    def hazard(self) -> int:
        """The highest hazard class of the method's reagents (0-4)."""
        levels = [self.titrant_info.hazard, self.buffer_info.hazard, self.indicator_info.hazard]
        levels += [agent.hazard for agent in self.masking_agents]
        levels += list(self.strategy.hazards(self))
        return max(levels)


def as_titrated(sample: Sample, method: Method) -> Sample:
    """The aliquot as ``method`` titrates it: at its indicator's working temperature where the indicator has one
    (the procedure warms the solution to it), otherwise at the sample's own temperature [degC].

    >>> s = Sample(50, {"Fe(III)": 1e-3}, ("Fe(III)",))
    >>> as_titrated(s, Method(1.5, "nitric_acid", "EDTA", 0.01, "sulfosalicylic_acid")).temperature_C
    50.0
    >>> as_titrated(s, Method(1.8, "nitric_acid", "EDTA", 0.01, "xylenol_orange")).temperature_C
    25.0
    """
    T = titration_temperature_C(sample, method.indicator_info)
    return sample if T == sample.temperature_C else replace(sample, temperature_C=T)


def titration_temperature_C(sample: Sample, indicator: Indicator) -> float:
    """The temperature a titration with ``indicator`` runs at [degC]: its working temperature, or the sample's."""
    T = indicator.working_temperature_C
    return sample.temperature_C if T is None else float(T)


def _strategy(mode: str):
    """The strategy registered under ``mode`` (imported on first use: the strategies import this module)."""
    global _strategy
    from .strategies import strategy as _strategy
    return _strategy(mode)
