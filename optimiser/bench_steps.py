"""The written method: stock solutions with their per-litre recipes, the titrant's standardisation, the numbered
steps from stock solutions, the calculation with units and the quality control.

Every amount added to an aliquot is a volume of a stock (graduated to two significant figures, or a volumetric
pipette's where the amount enters the result) or a worded dose from the data (an indicator's drops): see
:mod:`optimiser.quantities`. The steps follow facts, never names: the strategy (does it use a second standard, does
it add an excess), the simulated titration (slow analytes, solids at the start), the buffer's recipe kind, the stock
data (timing) and the sample (its own acid, its temperature).
"""
from __future__ import annotations

from dataclasses import dataclass

from .conditional import Conditions, ligand_fractions
from .method import Method
from .quantities import device, graduated_mL, number, pipette_mL, sig
from .reagents import catalogue
from .scenario import Scenario
from .stocks import (Addition, Stock, StockSolution, buffer_per_litre, grams, graduated_addition, millilitres,
                     neutraliser, per_litre, stock)
from .titration import Titration
from .units import molar_mass_of_metal

CHECK_TEMPERATURE_C = 2.0  # the sample, standard and blank titrated within +/- 2 degC of each other (common practice)
DUPLICATE_FACTOR = 1.0  # duplicates agree within the error target (common practice)
PRIMARY_STANDARD_KEEPS = "a year, closed"  # a primary standard solution's shelf life (common practice)
MIN_WEIGHED_g = 0.02  # each substance of a primary standard at least 20 mg per litre (0.5 % at 0.1 mg; common practice)


@dataclass(frozen=True)
class WrittenMethod:
    """The parts of a method's document that a bench follows (plain text, in order)."""

    stocks: tuple[StockSolution, ...]
    additions: tuple[Addition, ...]
    standardisation: tuple[str, ...]
    procedure: tuple[str, ...]
    calculation: tuple[str, ...]
    quality_control: tuple[str, ...]
    heated: bool


def _missing(role: str, reagent: str) -> StockSolution:
    return StockSolution(role, reagent, "no stock solution in the data: prepare as the supplier directs", "-", (),
                         "common_practice")


def _stock_row(role: str, st: Stock | None, name: str, per_litre_text: str) -> StockSolution:
    if st is None:
        return _missing(role, name)
    batch = "per litre" if st.batch_mL == 1000 else f"per {number(st.batch_mL)} mL"
    recipe = f"{batch}: {per_litre_text}" + (f", {st.dissolve}" if st.dissolve else "")
    return StockSolution(role, st.name or name, recipe, st.shelf_life, st.hazards, st.source)


class _Writer:
    """Builds the written method of one simulated titration (one use)."""

    def __init__(self, scenario: Scenario, method: Method, t: Titration):
        self.sc, self.m, self.t = scenario, method, t
        self.V0 = scenario.sample.volume_mL
        self.cT = method.titrant_conc_M
        self.rows: list[StockSolution] = []
        self.adds: list[Addition] = [Addition("sample", self.V0, None, f"{self.V0:g} mL of sample")]
        # the buffer's forms are read at the ionic strength the titration starts at (computed from the whole recipe)
        I_curve = getattr(t, "ionic_strength_M", ())
        self.I = float(I_curve[0]) if len(I_curve) else scenario.sample.ionic_strength_M

    # -- stocks -----------------------------------------------------------------------------------------------
    def titrant_stock(self) -> str:
        tit = self.m.titrant_info
        st = stock("titrants", tit.id)
        label = f"{tit.id} {self.cT:g} mol/L"
        self.rows.append(_stock_row("titrant", st, label, per_litre(tit.formula, self.cT, tit.salt, 3)))
        if st is not None:
            self.rows[-1] = StockSolution("titrant", label, self.rows[-1].per_litre, st.shelf_life, st.hazards, st.source)
        return label

    def buffer_step(self) -> str:
        """The buffer's stock and the step that adds it (with the adjustment and the stock's timing)."""
        from .procedure import STRONG_ACID, STRONG_BASE, free_hydrogen_M, free_hydroxide_M, recipe_kind
        buf, s = self.m.buffer_info, self.sc.sample
        st = stock("buffers", buf.id)
        kind = recipe_kind(buf)
        adjust = f"adjust to pH {self.m.pH:.2f} with a calibrated pH meter"
        if st is None or not st.conc_M:
            self.rows.append(_missing("buffer", buf.name))
            return f"Add the buffer ({buf.name}) and {adjust}."
        c = st.conc_M[0]
        if buf.ligand:
            f_base = float(ligand_fractions(buf.ligand, self.m.pH, Conditions(self.I, s.temperature_C))[0])
            text = buffer_per_litre(kind, st, buf.recipe, c, f_base)
            label = f"{st.name or buf.name}, {c:g} mol/L {buf.ligand}, for pH {self.m.pH:.2f}"
            v = graduated_mL(self.m.buffer_total_M * self.V0 / c)
            held = f" (total {buf.ligand} {number(v * c / self.V0, 2)} mol/L in the aliquot)"
        else:
            text = buffer_per_litre(kind, st, buf.recipe, c, 1.0)
            label = f"{st.name or buf.name} {c:g} mol/L"
            if kind == STRONG_BASE:
                from .procedure import hydroxide_in_solids_mmol
                mmol = (self.V0 * free_hydroxide_M(self.m.pH, self.I, s.temperature_C)
                        + hydroxide_in_solids_mmol(self.t))
            elif kind == STRONG_ACID:
                free_H = self.V0 * free_hydrogen_M(self.m.pH, self.I, s.temperature_C)
                mmol = max(free_H - s.acid_M * self.V0, 0.0)  # the sample's own acid counts towards it
            else:
                mmol = 0.0
            v = graduated_mL(mmol / c) if mmol > 0 else 0.0
            held = ""
        self.rows.append(_stock_row("buffer", st, label, text))
        if v <= 0:
            return f"The sample's own acid sets the pH: {adjust}."
        self.adds.append(Addition(label, v, None, f"{millilitres(v)} of {label}"))
        timing = f" {st.timing}" if st.timing else ""
        return f"Add {millilitres(v)} of the {label} ({device(v)}){held}; {adjust}.{timing}"

    def masking_steps(self, after_buffer: bool) -> list[str]:
        """The masking agents' additions: before the buffer, or (``after_buffer``) those whose stock may only meet an
        alkaline solution (``alkaline_only`` in stocks.yaml: cyanide gives off hydrogen cyanide in acid)."""
        out = []
        for agent, (_, conc) in zip(self.m.masking_agents, self.m.masking, strict=True):
            st = stock("masking", agent.id)
            if (st is not None and st.alkaline_only) != after_buffer:
                continue
            mmol = conc * self.V0
            if st is None or not st.conc_M:
                self.rows.append(_missing("masking agent", agent.name))
                g = sig(mmol * agent.molar_mass / 1000, 2)
                self.adds.append(Addition(agent.name, None, g * 1000, grams(g)))
                out.append(f"Add {grams(g)} {agent.salt} ({agent.name}).")
                continue
            label = f"{agent.salt.split(' (')[0]} solution"
            add, held = graduated_addition(agent.name, mmol, st, label)
            c = st.strength_for(mmol)
            self.rows.append(_stock_row("masking agent", st, f"{label} {c:g} mol/L",
                                        per_litre(agent.formula, c, agent.salt, 2, agent.density_g_mL)))
            self.adds.append(add)
            when = (f"Only now that the solution is alkaline (check pH above {agent.min_pH:g} with indicator paper), add "
                    if after_buffer else "Add ")
            out.append(f"{when}{add.text}: {number(held / self.V0 * 1000, 2)} mmol/L {agent.ligand} in the aliquot.")
        return out

    def indicator_step(self, colour: str, titrate: str) -> str:
        ind = self.m.indicator_info
        st = stock("indicators", ind.id)
        self.rows.append(_stock_row("indicator", st, ind.name, st.recipe if st is not None and st.recipe else ind.dose))
        self.adds.append(Addition(ind.name, None, None, ind.dose))
        return f"Add {ind.name} ({ind.dose}) and {titrate} {colour}."

    def neutralise_step(self) -> str | None:
        from .procedure import STRONG_ACID, recipe_kind
        s = self.sc.sample
        if s.acid_M <= 0 or recipe_kind(self.m.buffer_info) == STRONG_ACID:
            return None
        st = neutraliser()
        n = s.acid_M * self.V0
        add, _ = graduated_addition("neutraliser", n, st, f"{st.name}")
        self.adds.append(add)
        c = st.strength_for(n)
        self.rows.append(_stock_row("neutraliser", st, f"{st.name} {c:g} mol/L", per_litre(st.formula, c, st.name, 2)))
        return (f"Neutralise the sample's own acid ({number(n, 2)} mmol H+ in the aliquot) before anything else goes in: "
                f"add {add.text} slowly with swirling, to about pH 7 (indicator paper), so that the buffer keeps its "
                "full capacity (common practice).")

    # -- standardisation --------------------------------------------------------------------------------------
    def primary_standard(self) -> tuple[float, float, list[tuple[str, float]]]:
        """The primary standard solution: (its total molarity [mol/L], the volume pipetted [mL], and (what, grams)
        weighed per litre for each analyte). It holds the analytes in the sample's proportions, at the level that
        puts the sample's amount into a volumetric pipette's volume (the aliquot's own where every mass is
        weighable), so that its titre is the sample's, as the simulated standardisation assumes."""
        s = self.sc.sample
        prims = catalogue().primary_standards
        total = sum(s.metals[a] for a in s.analyte)
        for k in (1, 2, 5, 10, 25, 50):
            V_std = pipette_mL(self.V0 / k)
            c_std = total * self.V0 / V_std
            masses = [(a, c_std * s.metals[a] / total * (prims[a].molar_mass if a in prims else molar_mass_of_metal(a)))
                      for a in s.analyte]
            if min(g for _, g in masses) >= MIN_WEIGHED_g:
                break
        return c_std, V_std, masses

    def standardisation(self, titrant: str) -> list[str]:
        s = self.sc.sample
        prims = catalogue().primary_standards
        c_std, V_std, masses = self.primary_standard()
        weighed, hazards = [], []
        for a, g in masses:
            p = prims.get(a)
            if p is None:
                share = s.metals[a] / sum(s.metals[x] for x in s.analyte)
                weighed.append(f"a certified {a} standard solution, {number(c_std * share * 1000, 2)} mmol/L")
                continue
            weighed.append(f"about {grams(g, 3)} {p.substance} ({p.formula}), weighed to 0.1 mg and {p.preparation}")
            hazards += [h for h in p.hazards if h not in hazards]
        label = f"primary standard solution ({', '.join(s.analyte)}), {number(c_std * 1000, 3)} mmol/L"
        source = prims[s.analyte[0]].source if s.analyte[0] in prims else "common_practice"
        self.rows.append(StockSolution("primary standard", label, "per litre: " + "; ".join(weighed)
                                       + ", made up to 1 L in a volumetric flask", PRIMARY_STANDARD_KEEPS, tuple(hazards),
                                       source))
        self.adds.append(Addition("primary standard", V_std, None, f"{V_std:g} mL of the primary standard"))
        steps = [
            f"Primary standard: dissolve {'; and '.join(weighed)}; make up to 1 L in a volumetric flask. Its "
            "concentration follows from the masses weighed: c(standard) = sum of m / (M x 1 L) [mol/L].",
            f"Pipette {V_std:g} mL of the primary standard into a titration flask"
            + (f", add deionised water to about {self.V0:g} mL" if V_std < self.V0 else "")
            + " and carry it through the procedure below (every step, the same reagents, the same indicator and dose, "
            "at the same temperature); titrate it in duplicate.",
        ]
        if self.m.strategy.uses_standard:
            std = self.m.strategy.variant(self.m)
            steps.append(f"c({std} standard) [mol/L] = c(primary standard) [mol/L] x {V_std:g} mL / (Vb - V1) [mL], with "
                         "V1 the mean "
                         f"back-titre of the standard and Vb the reagent blank's (the blank holds the same pipetted "
                         f"excess of {titrant}, so the titrant's own concentration cancels; common practice).")
        else:
            steps.append(f"c(titrant) [mol/L] = c(standard) [mol/L] x {V_std:g} mL / (V1 - Vb) [mL], with V1 the mean "
                         "titre of the standard and Vb the reagent blank's (common practice).")
        if self.t.standardisation is not None and self.t.standardisation.error_percent is not None:
            steps.append(f"The standardisation cancels what the analyte alone shows by this method (predicted "
                         f"{self.t.standardisation.error_percent:+.2f} %).")
        return steps

    def standard_stock(self) -> None:
        if not self.m.strategy.uses_standard:
            return
        std = catalogue().standard(self.m.strategy.variant(self.m))
        c = self.m.back_concentration
        st = stock("standards", std.id)
        label = f"{std.name} {c:g} mol/L"
        text = f"{per_litre(std.formula, c, std.salt, 3)}"
        row = _stock_row("back-titration standard", st, label, text)
        self.rows.append(StockSolution(row.role, label, row.per_litre, row.shelf_life, row.hazards, row.source))


def step_writer(scenario: Scenario, method: Method, t: Titration, writers: list | None = None) -> _Writer:
    """A writer for one step of a multi-step strategy (:func:`optimiser.strategies.composite.composite_steps`),
    appended to ``writers`` where given, so that its additions and stock solutions join the written method."""
    w = _Writer(scenario, method, t)
    w.adds.clear()
    if writers is not None:
        writers.append(w)
    return w


def written_method(scenario: Scenario, method: Method, t: Titration, formula: str) -> WrittenMethod:
    """The stocks, standardisation, steps, calculation and quality control of ``method`` as simulated in ``t``."""
    from .procedure import STRONG_BASE, recipe_kind
    w = _Writer(scenario, method, t)
    V0, cT, T = w.V0, w.cT, scenario.sample.temperature_C
    titrant = w.titrant_stock()
    heated = method.strategy.uses_standard and t.excess_mL is not None and bool(t.slow_analytes)
    V_x = pipette_mL(t.excess_mL, at_least=True) if t.excess_mL is not None else None
    steps = [f"Bring the sample, the standards and the reagents to {T:g} degC (+/- {CHECK_TEMPERATURE_C:g} degC): "
             "the method was designed at this temperature, and the sample, standard and blank must be titrated alike.",
             f"Pipette {V0:g} mL of sample into a 250 mL titration flask."]
    if heated:
        w.adds.append(Addition("titrant (excess)", V_x, None, f"{V_x:g} mL of {titrant}"))
        steps.append(f"Pipette {V_x:g} mL of {titrant} (an excess) into the still acidic sample (about pH 3), "
                     f"before it is buffered; boil gently for 3-5 minutes on a hot plate and cool to {T:g} degC "
                     "(common practice).")
    neutral = w.neutralise_step()
    if neutral:
        steps.append(neutral)
    steps += w.masking_steps(after_buffer=False)
    dissolving = [f for f in t.findings if f.kind == "anion_solid_dissolves"]  # e.g. CaCO3 from the sample's carbonate
    strong_base = recipe_kind(method.buffer_info) == STRONG_BASE
    if (strong_base and t.precipitates_start or dissolving) and not method.strategy.uses_standard:
        pre = sig(0.9 * (t.endpoint_mL or t.equivalence_mL), 2)
        step = (f"Add about {number(pre)} mL of the titrant from the burette (90 % of the expected titre) before "
                f"{'raising the pH' if strong_base else 'the buffer'}, so that "
                f"{', '.join(t.precipitates_start) or 'no solid'} does not carry down the analyte")
        if dissolving:
            expel = "; or ".join(dict.fromkeys(f.values["expel"] for f in dissolving))
            step += ("; then finish the titration within 5 minutes (the five-minute rule of Standard Methods 2340 C). "
                     f"Where the titre is not known in advance, first {expel}")
        steps.append(step + ".")
    steps.append(w.buffer_step())
    steps += w.masking_steps(after_buffer=True)
    steps += method.strategy.reagent_steps(method, V0)  # what the strategy adds after the buffer (a displacing complex)
    if t.sample.temperature_C != T:  # the indicator's working temperature (method.as_titrated)
        steps.append(f"Warm the solution to {t.sample.temperature_C:g} degC on a hot plate and keep it within about 5 degC "
                     f"of that to the end point: {method.indicator_info.name} is read at that temperature in published "
                     "practice.")
    colour = f"from {t.colour_change[0]} to {t.colour_change[1]}"
    w.standard_stock()
    if method.strategy.uses_standard:
        std = method.strategy.variant(method)
        if not heated and V_x is not None:
            w.adds.append(Addition("titrant (excess)", V_x, None, f"{V_x:g} mL of {titrant}"))
            steps.append(f"Pipette {V_x:g} mL of {titrant} (an excess) into the flask.")
        back = (t.endpoint_mL or 0.0) + ((V_x or 0.0) - (t.excess_mL or 0.0)) * cT / method.back_concentration
        steps.append(w.indicator_step(colour, f"titrate the excess with the {method.back_concentration:g} M "
                                              f"{std} standard") + f" Expected titre about {number(back, 2)} mL.")
    else:
        steps.append(w.indicator_step(colour, f"titrate with {titrant}")
                     + f" Expected titre about {number(t.endpoint_mL or t.equivalence_mL, 2)} mL.")
    steps.append(f"Reagent blank: carry {V0:g} mL of deionised water through the same steps with every reagent "
                 "and titrate it to the same colour (Vb, common practice).")
    steps.append("Titrate a second aliquot of the sample (duplicate) and calculate as below.")
    standardisation = w.standardisation(titrant)
    writers: list[_Writer] = []
    own = method.strategy.bench_steps(scenario, method, t, writers)  # a multi-step strategy writes its own steps
    if own is not None:
        steps = steps[:1] + list(own)  # the temperature first
        seen = {r.name for r in w.rows}
        for wk in writers:
            w.rows += [r for r in wk.rows if r.name not in seen and not seen.add(r.name)]
            w.adds += wk.adds
    target = scenario.targets.max_error_percent
    calculation = _calculation(scenario, method, V_x, formula)
    qc = (f"Reagent blank with every batch (step {len(steps) - 1}); a blank titre that grows from batch to batch points to "
          "contaminated water or reagents (common practice).",
          f"Duplicate: two aliquots of each sample agree within {DUPLICATE_FACTOR * target:g} % of their mean; "
          "otherwise titrate a third (common practice).",
          f"Control sample with every batch: the primary standard diluted to the sample's level, or a sample spiked with "
          f"it, recovers 100 +/- {target:g} % (common practice).",
          "Standardise the titrant at least monthly and whenever a new batch of stock is made; record its "
          "concentration, the date and the analyst.")
    return WrittenMethod(tuple(w.rows), tuple(w.adds), tuple(standardisation), tuple(steps), calculation, qc, heated)


def _calculation(scenario: Scenario, method: Method, V_x: float | None, formula: str) -> tuple[str, ...]:
    V0 = f"{scenario.sample.volume_mL:g}"
    label = scenario.analyte_label
    if method.strategy.uses_standard:
        std = method.strategy.variant(method)
        lines = [f"n({label}) [mmol] = c({std} standard) [mol/L] x (Vb - V) [mL], with Vb the reagent blank's back-titre "
                 f"(it holds the whole {V_x or 0:g} mL excess), V the sample's and c({std} standard) as standardised "
                 "(common practice)",
                 f"c({label}) [mmol/L] = n [mmol] / {V0} mL x 1000"]
    else:
        lines = [f"c({label}) [mmol/L] = c(titrant) [mol/L] x (V - Vb) [mL] / {V0} mL x 1000, with V the sample's "
                 "titre and Vb the reagent blank's"]
    mass = next((part for part in formula.split("; ")[1:] if "mg/L" in part), None)
    if mass:
        lines.append(mass + " g/mol")
    lines.append("Report the mean of the duplicates to three significant figures, with the titrant's concentration "
                 "and the date of its standardisation.")
    return tuple(lines)


__all__ = ["WrittenMethod", "written_method"]
