"""The interface every titration strategy implements, and the plan of one simulated curve."""
from __future__ import annotations

from collections.abc import Callable, Mapping
from dataclasses import dataclass, field
from typing import TYPE_CHECKING, Any

import numpy as np
from numpy.typing import NDArray

from ..findings import Finding

if TYPE_CHECKING:  # pragma: no cover
    from ..equilibrium import ChemicalSystem, Equilibrium
    from ..medium import Medium
    from ..method import Method, Sample
    from ..pretreatment import Prepared

Array = NDArray[np.float64]


@dataclass(frozen=True)
class Carry:
    """What earlier steps leave in the solution a titration starts from (a multi-step strategy's carry-over).

    Attributes
    ----------
    volume_mL : float
        Volume added to the aliquot before this step (titrant of earlier steps) [mL].
    amounts_mmol : dict
        Component -> amount added (or, negative, consumed) before this step [mmol]: the titrant of earlier steps, a
        metal-titrant complex, a ligand a reagent destroys. The step's own reagents (buffer, masking agents,
        indicator) are concentrations at the step's start and are not carried.
    titrated : tuple of str
        Metals an earlier step titrated: the titrant they hold is the earlier step's, not this one's.
    """

    volume_mL: float = 0.0
    amounts_mmol: dict[str, float] = field(default_factory=dict)
    titrated: tuple[str, ...] = ()


@dataclass
class Plan:
    """One titration's set-up between the batched solves.

    Attributes
    ----------
    system : ChemicalSystem
    metals : list of str
        The system's metals (the sample's, after pretreatment, and any the strategy adds).
    totals_before : callable
        Titrant volume [mL] -> component totals [mol/L], the titrant added to the aliquot.
    totals : callable
        Curve volume [mL] (titrant, or back-titrant) -> component totals [mol/L]; set by the strategy.
    V_eq : float
        Titrant volume that holds exactly the analyte [mL].
    V_eq_ref : float
        Equivalence volume on the curve's own axis [mL] (set by the strategy).
    V_x : float or None
        Titrant added before the curve starts (an excess), [mL].
    V_hi : float
        End of the coarse curve [mL].
    V_all : float
        Titrant volume that holds every metal that binds it [mL].
    slow : list of str
        Analytes that react slowly with the titrant.
    findings : list of Finding
    frozen : dict
        Slow metal -> fraction held inert in its titrant complex.
    inert_mM : dict
        Component -> amount held in inert complexes, taken out of the equilibrium [mmol].
    V : array
        The coarse curve's volumes [mL].
    medium : Medium
        The recipe's counter-ions and spectator anions (:mod:`optimiser.medium`); Na+ and K+ are components of
        ``system``, their totals in ``totals``, the spectators the solve's background (``medium.background_M``).
    """

    sample: Sample
    method: Method
    prep: Prepared
    system: ChemicalSystem
    metals: list[str]
    totals_before: Callable[[Array], Array]
    V_eq: float
    V_all: float
    n_points: int
    slow: list[str]
    findings: list[Finding] = field(default_factory=list)
    totals: Callable[[Array], Array] | None = None
    V_eq_ref: float = 0.0
    V_x: float | None = None
    V_hi: float = 0.0
    frozen: dict[str, float] = field(default_factory=dict)
    inert_mM: dict[str, float] = field(default_factory=dict)
    V: Array | None = None
    medium: Medium | None = None
    carry: Carry | None = None

    @property
    def V_start(self) -> float:
        """The solution's volume when this titration starts (the aliquot and what earlier steps added) [mL]."""
        return self.sample.volume_mL + (self.carry.volume_mL if self.carry is not None else 0.0)


def indicator_bound(method: Method, eq: Equilibrium, metals: list[str] | tuple[str, ...]) -> Array:
    """Fraction of the indicator bound to any of ``metals`` at each point."""
    ind = method.indicator
    tot = eq.totals[:, eq.system.index(ind)]
    return sum(eq.bound(ind, m) for m in metals) / np.maximum(tot, 1e-300)


class Strategy:
    """A way of running a titration (the interface; see :mod:`optimiser.strategies`).

    Attributes
    ----------
    id : str
        The name used in scenarios, on the command line and in the JSON (``mode``).
    label : str
        What the report calls it.
    complexity : float
        What it adds to the bench complexity objective (a second standard and titre count 1; our own scale,
        common practice: simpler methods are preferred where they do the job).
    reads_release : bool
        True where the end point is the analyte releasing the indicator (a direct titration): the indicator blank,
        the magnesium needed by calcium indicators, the inference of a blocking metal and the pH drift apply.
    slow_is_violation : bool
        True where an analyte that reacts slowly with the titrant makes the method unusable.
    uses_standard : bool
        True where the method needs a second standard (``Method.back_metal``).
    volume_name : str
        What the curve's volume axis is ("titrant", "back-titrant").
    family : str or None
        The kind of selectivity the strategy stands for in the report's alternatives ("back-titration"); None where
        the reagents and pH decide it (a direct titration: masking, another titrant, pH control).
    composite : bool
        True where the strategy runs several titrations (steps in one aliquot, or aliquots) and simulates them
        itself (:meth:`simulate`); each step is then an ordinary single titration on the full equilibrium.
    time_cost : float
        Bench time relative to one direct titration (our own scale, common practice: a second titration or aliquot
        about doubles it); the search may weigh it beside :attr:`complexity`.
    """

    id: str = ""
    label: str = ""
    complexity: float = 0.0
    reads_release: bool = True
    slow_is_violation: bool = False
    uses_standard: bool = False
    volume_name: str = "titrant"
    family: str | None = None
    composite: bool = False
    time_cost: float = 1.0

    # -- set-up ------------------------------------------------------------------------------------------
    def check(self, method: Method) -> None:
        """Raise an InputError if the method's strategy-specific fields are not allowed."""

    def added_metals(self, method: Method) -> tuple[str, ...]:
        """Metals the strategy brings into the solution (a back-titration standard)."""
        return ()

    def plan_curve(self, plan: Plan) -> None:
        """Set ``plan.totals``, ``V_eq_ref``, ``V_x``, ``V_hi`` and add the strategy's findings."""
        raise NotImplementedError

    # -- reading the indicator ------------------------------------------------------------------------------
    def reference(self, plan: Plan, eq: Equilibrium) -> float:
        """The indicator fraction that counts as fully turned (or fully bound) on the coarse curve."""
        raise NotImplementedError

    def turned(self, plan: Plan, eq: Equilibrium, ref: float) -> Array:
        """Fraction of the indicator turned at each point (0 before, 1 after the end point)."""
        raise NotImplementedError

    def error_percent(self, plan: Plan, V_ep: float) -> float:
        """The titration error [%] of an end point at ``V_ep`` on the curve's axis."""
        raise NotImplementedError

    def budget(self, plan: Plan, eq: Equilibrium, point: int, V_ep: float) -> dict[str, float]:
        """The titration error at an end point, split by cause [% of the analyte]; the parts add up to
        :meth:`error_percent`. Keys: ``cotitration:<metal>``, ``titrant_unbound``, ``indicator_blank``,
        ``analyte_unbound`` and the strategy's own (:data:`optimiser.readout.BUDGET_LABELS` words them)."""
        raise NotImplementedError

    def colour_change(self, complex_colour: str, free_colour: str) -> tuple[str, str]:
        """(colour before, colour after) the end point."""
        return complex_colour, free_colour

    def complex_metal(self, method: Method, sample: Sample) -> str:
        """The metal whose indicator complex gives the colour on the complex side of the change."""
        return sample.analyte[0]

    def free_form_point(self) -> int:
        """Index of the curve point where the free dye's form is read (its colour at the end point)."""
        return -1

    def held_from_indicator(self, speciation: dict[str, float]) -> float:
        """Share of a blocking metal kept away from the indicator at the start."""
        return speciation["masked"]

    # -- the bench -------------------------------------------------------------------------------------------
    def titre_mL(self, endpoint_mL: float | None, excess_mL: float | None) -> float:
        """The largest volume the burette must deliver [mL]."""
        return endpoint_mL or 0.0

    def variant(self, method: Any) -> str:
        """The strategy's own choice in a method (the back-titration standard), or ``""``."""
        return ""

    def describe(self, method: Any) -> str:
        """A short phrase for summaries ("direct", "back-titration with Zn")."""
        return self.id

    def volume_label(self, method: Method) -> str:
        """The curve's volume axis label."""
        return f"titrant ({method.titrant}) volume / mL"

    def json_fields(self, method: Any) -> dict[str, Any]:
        """The strategy's keys in the JSON result."""
        return {"mode": self.id, "back_metal": None}

    # -- what the search needs ---------------------------------------------------------------------------
    def applies(self, sample: Sample, search: Any) -> bool:
        """Whether the strategy can serve this sample with this search space (a search leaves it out where not)."""
        return True

    def applies_when_asked(self, sample: Sample, search: Any) -> bool:
        """Whether the strategy can serve the sample where the scenario lists it in ``search.modes`` (by default as
        :meth:`applies`; a strategy searched by default only for some samples may serve more when asked)."""
        return self.applies(sample, search)

    def genes(self, sample: Sample, search: Any) -> dict[str, tuple]:
        """The strategy's own variables for a search, beyond the method's (pH, buffer, titrant, masking, indicator,
        ``back_metal``): name -> ``("real", low, high)`` or ``("choice", options)``."""
        return {}

    def method_fields(self, extra: dict[str, Any], sample: Sample, search: Any, base: dict[str, Any]) -> dict[str, Any]:
        """The :class:`~optimiser.method.Method` keywords the strategy's genes (``extra``) stand for; ``base`` holds
        the method's own keywords (pH, buffer, titrant, ...)."""
        return {}

    def prescreen(self, candidate: Any, scenario: Any) -> list[tuple[str, str]]:
        """Violations (kind, text) of the strategy's own genes that need no equilibrium (a second step's indicator
        outside its pH range, a complex added outside its pH range); kinds of :data:`optimiser.objectives.VIOLATIONS`."""
        return []

    def hazards(self, method: Any) -> tuple[int, ...]:
        """Hazard classes (0-4) of the reagents the strategy adds beyond the method's own."""
        return ()

    def reagent_cautions(self, method: Any) -> list[tuple[str, int, tuple[str, ...]]]:
        """(name, hazard class, cautions) of each reagent the strategy adds beyond the method's own."""
        return []

    # -- several titrations ----------------------------------------------------------------------------------
    def simulate(self, sample: Sample, method: Method, n_points: int, pH_drift: bool, standardise: bool):
        """Simulate every step of a composite strategy and return one :class:`~optimiser.titration.Titration` with
        an end point per step (and per result); single titrations are simulated by :mod:`optimiser.titration`."""
        raise NotImplementedError

    def bench_steps(self, scenario: Any, method: Any, t: Any, writers: list | None = None) -> list[str] | None:
        """The numbered bench steps of a composite strategy after the standardisation (None: the single titration's
        procedure); the writers of its steps' additions are appended to ``writers`` where given."""
        return None

    def result_formula(self, scenario: Any, method: Any) -> str | None:
        """How the titres become results, where the strategy has its own (None: the single titration's)."""
        return None

    def reagent_steps(self, method: Any, V0_mL: float) -> list[str]:
        """Bench steps for what the strategy adds to a single titration after the buffer (a displacing complex)."""
        return []


def titrant_parts(plan: Plan, eq: Equilibrium, point: int) -> dict[str, float]:
    """Titrant held by each metal of the system at ``point``, and the rest ("unbound") [mol/L]."""
    Y = plan.method.titrant
    held = {m: float(eq.bound(Y, m)[point]) for m in plan.metals}
    held["unbound"] = float(eq.totals[point, eq.system.index(Y)]) - sum(held.values())
    return held


def analyte_parts(plan: Plan, eq: Equilibrium, point: int, dilution: float, sample_share: Mapping[str, float] | None = None
                  ) -> tuple[float, float, float]:
    """The analyte at ``point``: its amount as the sample holds it (diluted), bound to the titrant, and held by the
    indicator [mol/L]. ``sample_share`` gives, for a metal that is also added (a back-titration standard that is an
    analyte metal too, e.g. Mg in total hardness), the share of its bound amounts that is the sample's own."""
    sample, method = plan.sample, plan.method
    comps = eq.system.components
    share = sample_share or {}
    total = sample.n_analyte_mmol / dilution
    on_titrant = sum(share.get(a, 1.0) * float(eq.bound(method.titrant, a)[point]) for a in sample.analyte if a in comps)
    on_indicator = sum(share.get(a, 1.0) * float(eq.bound(method.indicator, a)[point])
                       for a in sample.analyte if a in comps)
    return total, on_titrant, on_indicator


def budget_parts(plan: Plan, eq: Equilibrium, point: int, dilution_mL: float, inert_mmol: float = 0.0,
                 standard: str | None = None, standard_added_M: float = 0.0) -> dict[str, float]:
    """The error split by cause at ``point`` [% of the analyte] (shared by the strategies).

    With A the analyte as the sample holds it, Y_m the titrant held by metal m, Y_u the titrant held by none, and
    the analyte's parts bound to the titrant (plus any inert complex) and to the indicator:
    error = sum over interferents of Y_m / A + Y_u / A - (analyte on the indicator) / A - (analyte bound to neither) / A
    - (standard added but not held by the titrant) / A; the parts add up to the error exactly (mass balance). After an
    earlier step in the same solution (``plan.carry``), the titrant that step added less what the metals it titrated
    hold is one part (``carried_over``: its over- or under-titration).

    Where the sample holds the standard's metal too, the equilibrium cannot tell the sample's atoms from the added
    ones: its titrant and indicator complexes are split in proportion to the two amounts (also when that metal is an
    analyte, as magnesium is in total hardness).
    """
    in_sample = (plan.sample.metals.get(standard, 0.0) * plan.sample.volume_mL / dilution_mL
                 if standard is not None else 0.0)
    f_sample = in_sample / (in_sample + standard_added_M) if in_sample > 0 else 0.0
    share = {standard: f_sample} if standard is not None and standard in plan.sample.analyte else None
    A, on_titrant, on_indicator = analyte_parts(plan, eq, point, dilution_mL, share)
    inert = inert_mmol / dilution_mL
    held = titrant_parts(plan, eq, point)
    earlier = plan.carry.titrated if plan.carry is not None else ()
    parts = {f"cotitration:{m}": 100.0 * y / A for m, y in held.items()
             if m not in ("unbound", standard) and m not in plan.sample.analyte and m not in earlier}
    if plan.carry is not None and (earlier or plan.method.titrant in plan.carry.amounts_mmol):
        # the titrant an earlier step added, less what the metals it titrated hold: its over- or under-titration
        carried = plan.carry.amounts_mmol.get(plan.method.titrant, 0.0) / dilution_mL
        parts["carried_over"] = 100.0 * (sum(held.get(m, 0.0) for m in earlier) - carried) / A
    parts["titrant_unbound"] = 100.0 * held["unbound"] / A
    if standard is not None:
        from_sample = held[standard] * f_sample
        if in_sample > 0 and standard not in plan.sample.analyte:
            parts[f"cotitration:{standard}"] = 100.0 * from_sample / A
        parts["standard_unbound"] = -100.0 * (standard_added_M - (held[standard] - from_sample)) / A
    parts["indicator_blank"] = -100.0 * on_indicator / A
    parts["analyte_unbound"] = -100.0 * (A - on_titrant - inert - on_indicator) / A
    return parts
