"""What a simulation finds, as structured facts, and the one place where they are put into words.

The simulation, the strategies and the read-out record a :class:`Finding` (a kind, the metal or reagent it is
about, and the numbers behind it); nothing in them writes sentences. :func:`words` turns a finding into the
sentence that the command line, the JSON and the report print, so the wording lives here only.
"""
from __future__ import annotations

from collections.abc import Callable, Iterable, Mapping
from dataclasses import dataclass, field
from typing import Any

WARNING = "warning"
ASSUMPTION = "assumption"


@dataclass(frozen=True)
class Finding:
    """One fact about a simulated titration.

    Attributes
    ----------
    kind : str
        Key of :data:`WORDING` (what sort of fact this is).
    role : str
        ``"warning"`` (something the analyst must act on) or ``"assumption"`` (a stated model assumption).
    values : Mapping[str, Any]
        The names and numbers the fact is about (metal, reagent, fraction, pH, ...).
    source : str
        Where the rule behind it comes from (a reference key, or "common practice").
    """

    kind: str
    role: str = WARNING
    values: Mapping[str, Any] = field(default_factory=dict)
    source: str = "common practice"

    def __post_init__(self) -> None:
        if self.kind not in WORDING:
            raise KeyError(f"no wording for finding kind {self.kind!r}")
        if self.role not in (WARNING, ASSUMPTION):
            raise ValueError(f"role must be {WARNING!r} or {ASSUMPTION!r}; got {self.role!r}")

    @property
    def text(self) -> str:
        return WORDING[self.kind](self.values)


def warning(kind: str, source: str = "common practice", **values: Any) -> Finding:
    return Finding(kind, WARNING, values, source)


def assumption(kind: str, source: str = "common practice", **values: Any) -> Finding:
    return Finding(kind, ASSUMPTION, values, source)


def words(findings: Iterable[Finding], role: str) -> tuple[str, ...]:
    """The sentences of the findings with ``role``, in order, each once."""
    return tuple(dict.fromkeys(f.text for f in findings if f.role == role))


def _join(names: Iterable[str]) -> str:
    return ", ".join(names)


def agree(names: Iterable[str] | str, singular: str, plural: str) -> str:
    """The verb that agrees with a list of names: ``singular`` for one, ``plural`` for several.

    >>> agree(["Mg(OH)2"], "does", "do"), agree(["Mg(OH)2", "Fe(OH)3"], "does", "do")
    ('does', 'do')
    """
    return singular if isinstance(names, str) or len(list(names)) == 1 else plural


def count(n: int, noun: str, plural: str | None = None) -> str:
    """A number with its noun in the right number ("1 interferent", "2 interferents", "0 interferents").

    >>> count(1, "interferent"), count(2, "interferent"), count(2, "analysis", "analyses")
    ('1 interferent', '2 interferents', '2 analyses')
    """
    return f"{n} {noun if n == 1 else plural or noun + 's'}"


# One sentence per kind. `v` holds the finding's values.
WORDING: dict[str, Callable[[Mapping[str, Any]], str]] = {
    # pretreatment (reagents that reduce or mask by a stated assumption)
    "reduction": lambda v: f"{v['agent']}: {v['note']}.",
    # the sample's anions as given (optimiser.anions)
    "anion_input": lambda v: f"Sample anions: {v['note']}.",
    "reduction_incomplete": lambda v: (f"{v['agent']} dose is too small to reduce all {v['metal']} "
                                       f"({100 * v['fraction']:.0f} % reduced)."),
    "masked_by_assumption": lambda v: f"{v['agent']}: {v['note']}.",
    "masking_dose_low": lambda v: (f"{v['agent']}: the dose is below {v['min_ratio']} times the {v['metal']} present; "
                                   f"{v['metal']} is not taken as masked."),
    "masking_below_pH": lambda v: f"{v['agent']} is not used below pH {v['min_pH']} (the method's pH is {v['pH']:.2f}).",
    # strategies
    "back_excess": lambda v: (f"Back-titration: {v['excess_ratio']:g} times the titrant needed for the metals present "
                              f"({v['excess_mL']:.2f} mL) is added first, then titrated with {v['standard_conc_M']:g} M "
                              f"{v['standard']}."),
    "slow_heated": lambda v: (f"{_join(v['metals'])} {agree(v['metals'], 'reacts', 'react')} with the titrant only on "
                              "heating (boil a few minutes after the excess is added); "
                              f"{agree(v['metals'], 'its complex is', 'their complexes are')} then inert and not "
                              f"displaced by {v['standard']} during the back-titration."),
    "working_temperature": lambda v: (f"Titrated at {v['temperature_C']:g} degC, where {v['indicator']} is read in published "
                                      f"practice (the sample is at {v['sample_C']:g} degC and is warmed to it); constants "
                                      "with no published enthalpy are kept at their own temperature."),
    "slow_direct": lambda v: (f"{_join(v['metals'])} {agree(v['metals'], 'reacts', 'react')} too slowly with "
                              f"{v['titrant']} at room temperature for a direct titration: use a back-titration "
                              "(common practice)."),
    # the medium (optimiser.medium)
    "medium": lambda v: ("Ionic strength computed at each point from the whole recipe: "
                         f"{v['low']:.3g} to {v['high']:.3g} M along the curve"
                         + (f" (with {v['background']:.3g} M of the sample's own background electrolyte)"
                            if v['background'] > 0 else "")
                         + "; alkali ions (their published ion pairs with the titrant are in the equilibrium): "
                         + (", ".join([f"{m}+ {1000 * c:.3g} mmol/L from the sample and reagents" for m, c in v['ions'].items()
                                       if c > 0]
                                      + [f"{n:g} {m}+ per {v['titrant']} from the titrant"
                                         for m, n in v['titrant_ions'].items()]) or "none")
                         + (f" (no published {', '.join(m + '+' for m in v['unpaired'])} pair of {v['titrant']}: taken as "
                            "not binding)" if v.get('unpaired') else "")
                         + "; the sample's metals are taken as nitrates or chlorides."),
    "davies_range": lambda v: (f"The ionic strength reaches {v['ionic_strength']:.2f} M, beyond about {v['limit']:g} M where "
                               "the Davies equation holds: activity corrections, and every log K' and pM, are uncertain there "
                               "(use less buffer, masking agent or alkali, or dilute the sample)."),
    "displacement_complex": lambda v: (f"Displacement: {v['conc_M']:g} M of the {v['metal']}-titrant complex is added to the "
                                       f"sample; the analyte frees {v['metal']}, which holds the indicator until the end "
                                       f"point. Equal amounts of metal and titrant are added, so the titre is unchanged "
                                       f"({v['origin']})."),
    "step_carry": lambda v: (f"Step {v['step']} starts from the solution step {v['step'] - 1} left at its end point: "
                             f"{v['titrant_mmol']:.4f} mmol of titrant and {v['volume_mL']:.2f} mL already added."),
    "second_aliquot": lambda v: (f"A second aliquot of the sample is titrated under other conditions; {v['analyte']} is the "
                                 f"difference of the two titres."),
    "demasking": lambda v: (f"{v['agent']} ({v['dose_M']:.3g} M) destroys {v['ratio']:g} mol of {v['ligand']} per mol "
                            f"({v['note']}); the metals it held are then titrated as the constants say"
                            + (f", while {_join(v['inert'])} stay(s) in {v['ligand']} complexes taken as inert "
                               "(a stated assumption)." if v.get("inert") else ".")),
    "step_problem": lambda v: f"Step {v['step']}: {v['text']}",
    # read-out
    "indicator_unbound": lambda v: (f"{v['indicator']} is hardly bound by the metals at pH {v['pH']:.2f} "
                                    f"({100 * v['bound']:.0f} % bound): no visible colour change is predicted."),
    "analyte_precipitates": lambda v: (f"The analyte {v['metal']} precipitates as {v['solid']}: the titration would be slow "
                                       "and low (add the titrant before the pH is raised, or change the pH)."),
    "solid_carries_down": lambda v: (f"{v['solid']} precipitates: it can adsorb or carry down {_join(v['analyte'])} and the "
                                     "indicator (a negative error that grows with the precipitate); add most of the titrant "
                                     "before the pH is raised (Flaschka and Ganchoff)."),
    "anion_solid": lambda v: (f"{v['solid']} ({v['metal']} with the sample's {v['anion']}) precipitates {v['where']}: "
                              f"{v['amount_mM']:.3g} mmol/L, {v['share']:.0f} % of the {v['metal']}."),
    "anion_solid_dissolves": lambda v: (
        f"{v['solid']} ({v['metal']} with the sample's {v['anion']}) is supersaturated once the pH is raised: at "
        f"equilibrium {v['amount_mM']:.3g} mmol/L ({v['share']:.0f} % of the {v['metal']}) precipitates before the "
        "titrant binds it. It forms within minutes and redissolves only slowly as the titrant is added, so the end "
        "point is low or returns (the reason for the water standards' rule to finish within 5 minutes of raising the "
        f"pH). Add about 90 % of the expected titrant before the pH is raised, or first {v['expel']}."),
    "blocked": lambda v: f"{_join(v['metals'])} {agree(v['metals'], 'blocks', 'block')} {v['indicator']} at this pH and dose: mask it, or change the method.",
    "indicator_pH": lambda v: (f"{v['indicator']} shows its colour change only between pH {v['low']:g} and {v['high']:g} "
                               f"(the method's pH is {v['pH']:.2f})."),
    "needs_magnesium": lambda v: (f"{v['indicator']} gives a sharp calcium end point only with magnesium present: add a "
                                  "little Mg-EDTA to the buffer (it does not change the result)."),
    "too_gradual": lambda v: (f"The colour change takes {v['sharpness_mL']:.2f} mL ({v['drops']:.0f} drops): too gradual to "
                              "see sharply."),
}
