"""Reagent dose: the raw water's acidity, the titration curve, the dose for a target pH, the reagent's pH
ceiling, the sludge at a dose, residual fluoride, and a daily reagent and sludge table.

How a dose is modelled
----------------------
A dose of reagent adds the ions of its active ingredient to the water's component totals (lime: Ca; caustic:
Na; magnesium hydroxide: Mg; soda ash: 2 Na + CO3; calcium chloride: Ca + 2 Cl). The hydroxide needs no component
of its own: the pH follows from electroneutrality (the solver's charge-balance mode), and any solid that becomes
supersaturated precipitates (metal hydroxides and carbonates, gypsum, calcite, fluorite, and the reagent itself
as portlandite or brucite once the water is saturated with it).

The reactor is closed (``reactor="closed"``, the default: no CO2 is exchanged with the air) or open
(``reactor="open"``: an aerated tank, the water at equilibrium with the air's CO2 at every dose, pCO2 from
data/analysis/atmosphere.csv unless given; solved in one call per curve by a change of basis,
:mod:`workbench.chemistry.open_system`). Every result says which.

The raw water is made electroneutral first. An analysis never balances exactly, and the acidity that matters for
dosing (free mineral acid from pickling, the acid that holds metals in solution) is usually not measured as an
ion. The metals of the analysis are what the laboratory found in the water: they count in full, dissolved, with
their whole hydrolysis acidity, even where the equilibrium at the influent's pH says some would precipitate (a
supersaturated influent is the normal case; the result names the solids and their saturation indices). The
strong acid (entered as Cl-) or strong base (entered as Na+) not in the analysis is then sized in one of two ways:

* from a measured acidity (``Water.acidity_mg_l_caco3``, hot peroxide, Standard Methods 2310 B / EPA 305.1):
  the amount that makes the model's own hot peroxide titration of the water (CO2 boiled off, Fe(II) oxidised to
  Fe(III), Mn counted at 2 eq/mol as in Kirby & Cravotta 2005, titrated to pH 8.3 with the solids that form)
  equal the measured value;
* otherwise from the measured pH: the amount that makes the analysis, every metal dissolved, hold its measured
  pH (fixed-pH solves without solids), so that the titration starts from the real water.

Either way the ion balance of the analysis is checked (:func:`workbench.treatment.influent.ion_balance`) and a
gap beyond its acceptance rule is reported with the result. The same closure gives the water's acidity in mg/L as
CaCO3 to the usual titration end points.

Everything is vectorised over doses: one curve is one solver call, and the dose for a target pH is found by a
bracketed search in which each round is one solver call over a few points per problem.
"""

from __future__ import annotations

import numbers
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field, fields

import numpy as np
import pandas as pd

from workbench.chemistry import database, open_system, solver, tableau
from workbench.errors import ConvergenceError, InputError, ModelRangeError
from workbench.treatment import influent
from workbench.treatment import reagents as rg
from workbench.treatment.solubility import metal_mg_l, model_warnings
from workbench.treatment.water import CACO3_EQ_G, METALS, Water

#: End points of the usual acidity titrations: mineral acidity to pH 4.5, total acidity to pH 8.3. [-]
MINERAL_ACIDITY_PH = 4.5
TOTAL_ACIDITY_PH = 8.3
MAX_FLOW_M3_D = 1.0e6
MAX_CALCIUM_CHLORIDE_MG_L = 50_000.0
CLOSURE_TOL_EQ_L = 1e-12  # charge-balance closure converged [eq/L]
CLOSURE_MAX_ITER = 12  # plain steps before the root is bracketed
CLOSURE_MAX_DOUBLINGS = 80  # widening steps of the bracket
SEARCH_MAX_ACTIVE_MOL_L = 0.3  # largest amount of active ingredient tried by the searches [mol/L]
SEARCH_WIDE_ACTIVE_MOL_L = 1.0  # last try when a reagent without ceiling has not reached the target [mol/L]
SEARCH_GRID = 40  # points of the first, geometric grid of a search
SEARCH_SUBDIVIDE = 16  # points per bracket in each refinement round
SEARCH_MAX_ROUNDS = 16
SEARCH_PH_TOL = 2e-4  # a bracket is converged when its ends differ by less than this [pH]
ACIDITY_PH_AGREEMENT = 0.5  # measured acidity and pH disagree when the acidity's pH differs by more [pH]
MN_HOT_EQ_MOL = 2.0  # Mn dissolved at pH 8.3 in the hot peroxide titration: oxidised, 2 eq/mol [eq/mol]


# ------------------------------------------------------------------------------------------------ setup
@dataclass(frozen=True)
class Influent:
    """How the raw water's unmeasured strong acid or base was sized, and what its analysis says at its pH.

    Attributes
    ----------
    basis : {"measured pH", "measured acidity"}
        What sized the unmeasured acid or base.
    closure_eq_l : float
        Strong base (+, entered as Na+) or acid (-, as Cl-) added to the analysis. [eq/L]
    ph : float
        Measured pH. [-]
    ph_as_analysed : float
        pH the analysed water holds with the closure, every metal dissolved (the measured pH when the pH sized
        the closure). [-]
    measured_acidity_mg_l_caco3 : float or None
        The hot peroxide acidity entered. [mg/L as CaCO3]
    supersaturated : dict
        Solid -> saturation index (log10 IAP/Ksp > 0) at the measured pH with every metal dissolved, largest
        first: the solids the influent as analysed is supersaturated with. [log10 units]
    ph_with_solids : float
        pH of the influent without reagent once those solids have formed (closed vessel); the measured pH when
        it is supersaturated with none. [-]
    ion_balance : IonBalance
        Cations against anions of the analysis.
    """

    basis: str
    closure_eq_l: float
    ph: float
    ph_as_analysed: float
    measured_acidity_mg_l_caco3: float | None
    supersaturated: dict
    ph_with_solids: float
    ion_balance: influent.IonBalance

    def warnings(self) -> list[str]:
        """What the engineer should know about the influent: the ion balance when it does not close, the
        supersaturated solids, and how the measured acidity and pH agree."""
        out = []
        closure = (
            f"{self.closure_eq_l * 1000:.3g} meq/L of strong base (entered as Na+)"
            if self.closure_eq_l >= 0
            else f"{-self.closure_eq_l * 1000:.3g} meq/L of strong acid (entered as Cl-)"
        )
        if not self.ion_balance.acceptable:
            if self.basis == "measured pH":
                fill = (
                    f"To hold its measured pH {self.ph:g}, the model adds {closure}, which fills the gap: check "
                    "the analysis (a missing major ion, e.g. Ca, Mg, Na, K, sulfate, chloride) or enter the "
                    "measured acidity."
                )
            else:
                fill = f"The measured acidity sizes the unmeasured acid or base: {closure}."
            out.append(f"The analysis does not balance: {self.ion_balance.message()}. {fill}")
        if self.supersaturated:
            listed = "; ".join(f"{name}, SI {si:+.2f}" for name, si in self.supersaturated.items())
            out.append(
                f"The influent as analysed is supersaturated at its pH {self.ph:g} with {listed} (SI: log10 "
                "of ion activity product over solubility product). Its metals are counted as the analysis gives "
                "them, dissolved, with their full hydrolysis acidity; in the reactor these solids form, and "
                f"without reagent the pH would fall to {self.ph_with_solids:.2f} (where a titration curve "
                "starts). If part of a metal was already suspended solid when sampled, its acidity is spent and "
                "the dose is overstated: a measured hot peroxide acidity settles it."
            )
        if self.basis == "measured acidity" and abs(self.ph_as_analysed - self.ph) > ACIDITY_PH_AGREEMENT:
            out.append(
                f"The measured acidity ({self.measured_acidity_mg_l_caco3:g} mg/L as CaCO3) and pH ({self.ph:g}) "
                f"disagree: with the acidity, the analysed water would hold pH {self.ph_as_analysed:.2f}. The dose "
                "follows the acidity; check both measurements."
            )
        return out

    def attrs(self) -> dict:
        """The influent's facts as plain values for a result's ``attrs``."""
        return {
            "acidity_basis": self.basis,
            "unmeasured_strong_acid_eq_l": -self.closure_eq_l,
            "supersaturated_at_influent_ph": dict(self.supersaturated),
            "influent_ph_with_solids": self.ph_with_solids,
            "ion_balance_percent": self.ion_balance.difference_percent,
            "ion_balance_meq_l": self.ion_balance.difference_meq_l,
        }


@dataclass(frozen=True)
class _Setup:
    """A water made electroneutral, a reagent and the tableau that holds them both (internal)."""

    water: Water
    reagent: rg.Reagent
    purity: float
    tab: tableau.Tableau
    base: np.ndarray  # water totals including the closure [mol/L]
    unit: np.ndarray  # component totals added per mol of active ingredient
    cacl2_unit: np.ndarray  # component totals added per mol of CaCl2
    influent: Influent
    activity: str
    reactor: str = "closed"
    pco2_atm: float | None = None  # open reactor: CO2 partial pressure [atm]

    @property
    def closure_eq_l(self) -> float:
        """Strong base (+) or acid (-) that closes the raw water's balance. [eq/L]"""
        return self.influent.closure_eq_l

    def totals(self, active_mol_l: np.ndarray, cacl2_mol_l: np.ndarray) -> np.ndarray:
        return (
            self.base[None, :]
            + np.asarray(active_mol_l, float)[:, None] * self.unit[None, :]
            + np.asarray(cacl2_mol_l, float)[:, None] * self.cacl2_unit[None, :]
        )

    def solve(self, active_mol_l, cacl2_mol_l=0.0) -> solver.Equilibrium:
        """Charge-balance solve at each amount of active ingredient (one solver call; points are solved in
        ascending order so that each starts from its neighbour, and returned in the order given)."""
        active = np.atleast_1d(np.asarray(active_mol_l, float))
        cacl2 = np.broadcast_to(np.asarray(cacl2_mol_l, float), active.shape)
        order = np.lexsort((active, cacl2))
        totals = self.totals(active[order], cacl2[order])
        if self.reactor == "open":
            eq = open_system.solve(
                self.tab,
                totals,
                None,
                log_pco2=float(np.log10(self.pco2_atm)),
                log_kh=open_system.henry_log_k(self.water.temperature_c),
                activity=self.activity,
                ph_guess=self.water.ph,
            )
        else:
            eq = solver.solve(self.tab, totals, None, activity=self.activity, ph_guess=self.water.ph)
        back = np.empty_like(order)
        back[order] = np.arange(order.size)
        return _take(eq, back)

    def reactor_attrs(self) -> dict:
        """Which reactor a result used, for its ``attrs``."""
        return {"reactor": self.reactor, "pco2_atm": self.pco2_atm}

    def notes(self) -> list[str]:
        """The influent's warnings and, for an open reactor, what equilibrium with the air means."""
        out = self.influent.warnings()
        if self.reactor == "open":
            out.append(
                f"Open reactor: the water is taken at equilibrium with CO2 at {self.pco2_atm:.4g} atm "
                f"(log pCO2 {np.log10(self.pco2_atm):.2f}) at every dose. Below about pH 8 aeration strips CO2 "
                "and saves reagent; above it the water takes up CO2 that the reagent must neutralise (lime makes "
                "calcite, which caps its pH). Equilibrium with the air is the limit of complete gas exchange: real "
                "tanks exchange CO2 slowly, so the plant's dose lies between the closed and the open results."
            )
        return out


def _take(eq: solver.Equilibrium, idx: np.ndarray) -> solver.Equilibrium:
    """The points ``idx`` of an equilibrium (every per-point array reordered)."""
    n = eq.ph.shape[0]
    parts = {f.name: getattr(eq, f.name) for f in fields(eq)}
    for name, value in parts.items():
        if isinstance(value, np.ndarray) and value.ndim >= 1 and value.shape[0] == n:
            parts[name] = value[idx]
    return solver.Equilibrium(**parts)


def _check_water(water) -> Water:
    if not isinstance(water, Water):
        raise InputError("water", type(water).__name__, "a workbench Water is required")
    if water.ph is None:
        raise InputError(
            "ph",
            None,
            "a Water with a measured pH is required: the dose follows from the water's acidity, which the "
            "measured pH fixes (enter the pH of the raw water)",
        )
    return water


def _check_choices(solids, activity) -> None:
    if solids not in tableau.SOLID_CHOICES:
        raise InputError("solids", solids, f"allowed {', '.join(tableau.SOLID_CHOICES)}")
    if activity not in solver.ACTIVITY_MODELS:
        raise InputError("activity", activity, f"allowed {', '.join(solver.ACTIVITY_MODELS)}")


def _setup(
    water,
    reagent,
    purity,
    *,
    solids="fresh",
    activity="davies",
    with_calcium_chloride=False,
    reactor="closed",
    pco2_atm=None,
) -> _Setup:
    water = _check_water(water)
    reagent = rg.get(reagent)
    purity = rg.check_purity(reagent, purity)
    _check_choices(solids, activity)
    reactor = influent.check_reactor(reactor)
    pco2 = influent.check_pco2(pco2_atm, reactor)
    totals = water.totals()
    comps = set(totals) | set(reagent.adds) | {"Na+", "Cl-"}
    if with_calcium_chloride:
        comps |= set(rg.CALCIUM_CHLORIDE_ADDS)
    if reactor == "open":
        comps.add(open_system.CARBONATE)  # the air brings carbonate
    tab = tableau.build(tuple(comps), water.temperature_c, solids)
    raw = np.zeros(len(tab.components))
    for comp, value in totals.items():
        raw[tab.component(comp)] = value
    unit = np.zeros_like(raw)
    for comp, n in reagent.adds.items():
        unit[tab.component(comp)] = n
    cacl2 = np.zeros_like(raw)
    if with_calcium_chloride:
        for comp, n in rg.CALCIUM_CHLORIDE_ADDS.items():
            cacl2[tab.component(comp)] = n
    base, inf = _close_influent(water, tab, raw, solids, activity)
    return _Setup(water, reagent, purity, tab, base, unit, cacl2, inf, activity, reactor, pco2)


def _with_closure(tab, raw: np.ndarray, net_base_eq_l: float) -> np.ndarray:
    out = raw.copy()
    if net_base_eq_l >= 0:
        out[tab.component("Na+")] += net_base_eq_l
    else:
        out[tab.component("Cl-")] -= net_base_eq_l
    return out


def _close_influent(
    water: Water, tab, raw: np.ndarray, solids: str, activity: str
) -> tuple[np.ndarray, Influent]:
    """The analysis made electroneutral (totals with the closure) and what was found on the way.

    The metals count as analysed: every closure solve is made without solids (a tableau of the same components
    with ``solids="none"``). With a measured acidity the closure makes :func:`_hot_acidity_eq_l` equal it;
    otherwise it makes the water hold its measured pH."""
    bare = tableau.build(tab.components, water.temperature_c, "none")
    ph = np.array([water.ph])
    measured = water.acidity_mg_l_caco3
    if measured is None:

        def missing(net: float) -> float:  # strong base still needed to hold the measured pH
            return float(
                solver.solve(bare, _with_closure(bare, raw, net), ph, activity=activity).strong_base[0]
            )

        net = _find_closure(missing, f"to hold the measured pH {water.ph:g}")
        ph_as_analysed = float(water.ph)
    else:
        target = measured / 1000.0 / CACO3_EQ_G

        def missing(net: float) -> float:  # acidity the model still finds beyond the measured one
            return _hot_acidity_eq_l(tab, _with_closure(tab, raw, net), solids, activity) - target

        net = _find_closure(missing, f"to the measured acidity {measured:g} mg/L as CaCO3")
        as_analysed = solver.solve(
            bare, _with_closure(bare, raw, net), None, activity=activity, ph_guess=water.ph
        )
        ph_as_analysed = float(as_analysed.ph[0])
    base = _with_closure(tab, raw, net)
    supersaturated = _supersaturated(tab, solver.solve(bare, base, ph, activity=activity))
    ph_with_solids = float(water.ph)
    if supersaturated:
        ph_with_solids = float(solver.solve(tab, base, None, activity=activity, ph_guess=water.ph).ph[0])
    return base, Influent(
        basis="measured pH" if measured is None else "measured acidity",
        closure_eq_l=net,
        ph=float(water.ph),
        ph_as_analysed=ph_as_analysed,
        measured_acidity_mg_l_caco3=measured,
        supersaturated=supersaturated,
        ph_with_solids=ph_with_solids,
        ion_balance=influent.ion_balance(water),
    )


def _supersaturated(tab, eq) -> dict:
    """Solids of ``tab`` with a positive saturation index in a solution solved without solids (same
    components), largest first. [log10 units]"""
    if not tab.solids:
        return {}
    rows = [eq.tableau.species.index(c) for c in eq.tableau.components]
    log_activity = eq.log_free[0] + eq.log_gamma[0, rows]
    si = tab.log_ks + tab.b @ log_activity
    order = np.argsort(-si)
    return {tab.solids[k]: float(si[k]) for k in order if si[k] > 0}


def _hot_acidity_eq_l(tab, totals: np.ndarray, solids: str, activity: str) -> float:
    """The model's hot peroxide acidity of a water (Standard Methods 2310 B, EPA 305.1) [eq/L]: its CO2 boiled
    off, its Fe(II) oxidised to Fe(III) by the peroxide, then titrated with strong base to pH 8.3 with the solids
    that form; Mn still dissolved at pH 8.3 counts 2 eq/mol (oxidised to MnO2 by the peroxide, as the calculated
    acidity of Kirby & Cravotta 2005 counts it). A net acidity: negative for a net alkaline water.

    Removing the carbonate component in charge terms removes it as neutral H2CO3 (CO2 + H2O), which is what
    boiling an acidified sample does; moving Fe2+ to Fe3+ takes up one H+ per Fe, as the oxidation does."""
    names = dict(zip(tab.components, totals, strict=True))
    names.pop(open_system.CARBONATE, None)
    if "Fe^2+" in names:
        names["Fe^3+"] = names.get("Fe^3+", 0.0) + names.pop("Fe^2+")
    hot = tableau.build(tuple(names), tab.temperature_c, solids)
    row = np.zeros(len(hot.components))
    for comp, value in names.items():
        row[hot.component(comp)] = value
    eq = solver.solve(hot, row, np.array([TOTAL_ACIDITY_PH]), activity=activity)
    acidity = float(eq.strong_base[0])
    if "Mn^2+" in hot.components:
        acidity += MN_HOT_EQ_MOL * float(eq.dissolved()[0, hot.component("Mn^2+")])
    return acidity


def _find_closure(missing, what: str) -> float:
    """Strong base (+, as Na+) or acid (-, as Cl-) at which ``missing`` vanishes. [eq/L]

    ``missing(net)`` is the strong base still missing with ``net`` added: to hold the measured pH, or to bring
    the model's acidity down to the measured one. Adding base as Na+ or acid as Cl- shifts the ion pairs those
    ions form a little, so the residual is taken again until it vanishes. Where that is slow, the root is
    bracketed and found by Brent's method: the base still missing never rises as base is added."""
    net, residual = 0.0, missing(0.0)
    tried = [(net, residual)]
    for _ in range(CLOSURE_MAX_ITER):
        if abs(residual) <= CLOSURE_TOL_EQ_L:
            return net
        net += residual
        residual = missing(net)
        tried.append((net, residual))
    if abs(residual) <= CLOSURE_TOL_EQ_L:
        return net
    below = max((p for p in tried if p[1] > 0), default=None)  # base still missing: the root lies above
    above = min((p for p in tried if p[1] < 0), default=None)
    step = max(abs(residual), CLOSURE_TOL_EQ_L)
    for _ in range(CLOSURE_MAX_DOUBLINGS):
        if below is not None and above is not None:
            break
        step *= 2.0
        probe = net + step if below is not None else net - step
        value = missing(probe)
        if value > 0:
            below = (probe, value) if below is None or probe > below[0] else below
        else:
            above = (probe, value) if above is None or probe < above[0] else above
    if below is not None and above is not None:
        from scipy import optimize  # imported here: scipy.optimize is slow to import

        net = float(
            optimize.brentq(missing, below[0], above[0], xtol=CLOSURE_TOL_EQ_L, rtol=4 * np.finfo(float).eps)
        )
        residual = missing(net)
        if abs(residual) <= CLOSURE_TOL_EQ_L:
            return net
    raise ConvergenceError(
        f"charge-balance closure of the raw water {what} did not converge (residual {residual:.3g} eq/L)"
    )


SLOW_SOLIDS = ("CaCO3", "CaSO4.2H2O")  # calcite and gypsum: they precipitate slowly from supersaturation


def _warnings(setup: _Setup, eq) -> list[str]:
    """The influent's and the reactor's notes, the core's model warnings, and a note when calcite or gypsum
    carry part of the result."""
    out = setup.notes() + model_warnings(setup.water, setup.tab, eq)
    slow = [
        setup.tab.solids[k]
        for k in range(len(setup.tab.solids))
        if _solid_formula(setup.tab, k) in SLOW_SOLIDS and (eq.solid_amount[:, k] > 0).any()
    ]
    if slow:
        which = f"{slow[0]} precipitates" if len(slow) == 1 else f"{' and '.join(slow)} precipitate"
        it = "It" if len(slow) == 1 else "Both"
        out.append(
            f"{which} here at equilibrium. {it} can stay supersaturated in a short reaction time: the plant then "
            "uses less reagent and makes less sludge than computed, and the effluent keeps a scaling potential. "
            "Confirm with a jar test of the same reaction time."
        )
    return out


# ------------------------------------------------------------------------------------------------ acidity
@dataclass(frozen=True)
class WaterAcidity:
    """The raw water's acidity, from its analysis and its measured pH or measured acidity.

    Attributes
    ----------
    ph : float
        Measured pH. [-]
    unmeasured_strong_acid_eq_l : float
        Strong acid (positive) or base (negative) not in the analysis, with every metal counted dissolved: the
        amount that makes the analysis hold its measured pH, or match its measured acidity (``basis``). [eq/L]
    unmeasured_strong_acid_mg_l_caco3 : float
        The same as CaCO3. [mg/L as CaCO3]
    mineral_acidity_mg_l_caco3 : float
        Strong base needed to bring the water to pH 4.5 (negative: the water is above pH 4.5 and the value is the
        acid it would take to bring it down). [mg/L as CaCO3]
    total_acidity_mg_l_caco3 : float
        Strong base needed to bring the water to pH 8.3 in a closed vessel (its CO2 kept), including what the
        metals that precipitate on the way consume (negative as above). [mg/L as CaCO3]
    hot_acidity_mg_l_caco3 : float
        The model's hot peroxide acidity (CO2 boiled off, Fe(II) oxidised, Mn at 2 eq/mol, titrated to pH 8.3): a
        net acidity, what the laboratory's Standard Methods 2310 B / EPA 305.1 titration would report; equal to
        the measured acidity when one is given. [mg/L as CaCO3]
    basis : {"measured pH", "measured acidity"}
        What sized the unmeasured acid or base.
    ph_as_analysed : float
        pH the analysed water holds with the unmeasured acid, every metal dissolved (the measured pH when the pH
        is the basis). [-]
    supersaturated : dict
        Solid -> saturation index at the measured pH with every metal dissolved (positive only). [log10 units]
    ion_balance : IonBalance
        Cations against anions of the analysis (:func:`workbench.treatment.influent.ion_balance`).
    warnings : list of str
        The ion balance when it does not close, the supersaturated solids, disagreement of acidity and pH.
    """

    ph: float
    unmeasured_strong_acid_eq_l: float
    unmeasured_strong_acid_mg_l_caco3: float
    mineral_acidity_mg_l_caco3: float
    total_acidity_mg_l_caco3: float
    hot_acidity_mg_l_caco3: float = float("nan")
    basis: str = "measured pH"
    ph_as_analysed: float = float("nan")
    supersaturated: dict = field(default_factory=dict)
    ion_balance: influent.IonBalance | None = None
    warnings: list = field(default_factory=list)


def raw_water_acidity(water: Water, *, solids: str = "fresh", activity: str = "davies") -> WaterAcidity:
    """The raw water's unmeasured strong acid, its acidity to pH 4.5 and 8.3, its hot peroxide acidity, its ion
    balance and the solids it is supersaturated with.

    Parameters
    ----------
    water : Water
        With a measured pH (and, optionally, a measured hot peroxide acidity, which then sizes the unmeasured
        acid).
    solids : {"fresh", "aged", "none"}
        Solids that may form (metal hydroxides precipitating on the way to an end point consume base).
    activity : {"davies", "ideal"}

    Returns
    -------
    WaterAcidity

    Notes
    -----
    Acidity to an end point is the strong base a fixed-pH solve needs to hold the closed water at that pH,
    converted with 50.04 g CaCO3 per equivalent. How the unmeasured acid is sized, and the hot peroxide acidity,
    are described in the module docstring.
    """
    water = _check_water(water)
    _check_choices(solids, activity)
    totals = water.totals()
    tab = tableau.build(tuple(set(totals) | {"Na+", "Cl-"}), water.temperature_c, solids)
    raw = np.zeros(len(tab.components))
    for comp, value in totals.items():
        raw[tab.component(comp)] = value
    base, inf = _close_influent(water, tab, raw, solids, activity)
    eq = solver.solve(tab, base, np.array([MINERAL_ACIDITY_PH, TOTAL_ACIDITY_PH]), activity=activity)
    to_caco3 = CACO3_EQ_G * 1000.0
    closure = inf.closure_eq_l
    return WaterAcidity(
        ph=float(water.ph),
        unmeasured_strong_acid_eq_l=-closure,
        unmeasured_strong_acid_mg_l_caco3=-closure * to_caco3,
        mineral_acidity_mg_l_caco3=float(eq.strong_base[0]) * to_caco3,
        total_acidity_mg_l_caco3=float(eq.strong_base[1]) * to_caco3,
        hot_acidity_mg_l_caco3=_hot_acidity_eq_l(tab, base, solids, activity) * to_caco3,
        basis=inf.basis,
        ph_as_analysed=inf.ph_as_analysed,
        supersaturated=dict(inf.supersaturated),
        ion_balance=inf.ion_balance,
        warnings=inf.warnings(),
    )


# ------------------------------------------------------------------------------------------------ curve
def _cacl2_mol_l(mg_l) -> np.ndarray:
    return np.asarray(mg_l, float) / 1000.0 / rg.calcium_chloride_molar_mass()


def _component_mg_l(tab, eq, comp: str) -> np.ndarray:
    data = database.load()
    return eq.dissolved()[:, tab.component(comp)] * data.input_molar_mass[comp] * 1000.0


def _solids_mg_l(tab, eq) -> np.ndarray:
    """Dry mass of each solid formed at each point (N, s). [mg/L]"""
    data = database.load()
    return eq.solid_amount * data.molar_mass_g_mol[tab.solid_index][None, :] * 1000.0


def _curve_frame(setup: _Setup, doses: np.ndarray, eq, cacl2_mg_l) -> pd.DataFrame:
    water, tab = setup.water, setup.tab
    cols = {"dose_mg_l": doses, "pH": eq.ph}
    cols.update(metal_mg_l(water, tab, eq))
    if water.fluoride_mg_l > 0:
        cols["fluoride_mg_l"] = _component_mg_l(tab, eq, "F-")
    if "Ca^2+" in tab.components:
        cols["calcium_mg_l"] = _component_mg_l(tab, eq, "Ca^2+")
    cols["sludge_mg_l"] = _solids_mg_l(tab, eq).sum(axis=1) + setup.reagent.inerts_mg_l(doses, setup.purity)
    df = pd.DataFrame(cols)
    df.attrs.update(
        reagent=setup.reagent.key,
        purity=setup.purity,
        temperature_c=water.temperature_c,
        extra_calcium_chloride_mg_l=float(np.max(cacl2_mg_l)),
        **setup.reactor_attrs(),
        **setup.influent.attrs(),
        units="dose: mg/L of product as sold; metals, fluoride, calcium: dissolved mg/L; sludge: dry mg/L",
        warnings=_warnings(setup, eq),
    )
    return df


def dose_curve(
    water: Water,
    reagent: str,
    dose_mg_l,
    *,
    purity: float | None = None,
    extra_calcium_chloride_mg_l: float = 0.0,
    solids: str = "fresh",
    activity: str = "davies",
    reactor: str = "closed",
    pco2_atm: float | None = None,
) -> pd.DataFrame:
    """Titration curve: pH, dissolved metals, fluoride, calcium and dry sludge against reagent dose.

    Parameters
    ----------
    water : Water
        The influent, with its measured pH.
    reagent : {"lime", "quicklime", "caustic", "magnesium_hydroxide", "soda_ash"}
    dose_mg_l : float or sequence of float
        Doses of product as sold, 0 to 200000. [mg/L]
    purity : float, optional
        Mass fraction of active ingredient in the product as sold, in (0, 1]; the reagent's default from
        data/reagents/reagents.csv when None. [-]
    extra_calcium_chloride_mg_l : float
        Calcium chloride (anhydrous CaCl2) dosed as well, e.g. to drive fluoride down as fluorite. [mg/L]
    solids : {"fresh", "aged", "none"}
        Solids that may form.
    activity : {"davies", "ideal"}
    reactor : {"closed", "open"}
        ``"closed"``: no gas exchange; ``"open"``: an aerated reactor, the water at equilibrium with CO2 at
        ``pco2_atm`` at every dose (module docstring).
    pco2_atm : float, optional
        CO2 partial pressure of an open reactor, (0, 1]; default the air's (data/analysis/atmosphere.csv: NOAA GML
        2024 global mean, 422.80 µmol/mol, at 1 atm of dry air). [atm]

    Returns
    -------
    pandas.DataFrame
        One row per dose, in the order given. Columns ``dose_mg_l``, ``pH``, one column per metal of the water
        (dissolved, mg/L), ``fluoride_mg_l`` (dissolved F, when the water has fluoride), ``calcium_mg_l``
        (dissolved Ca, when calcium is present), ``sludge_mg_l`` (dry solids formed plus the reagent's inerts).
        ``attrs`` holds the reagent, purity, temperature, ``reactor`` and ``pco2_atm`` (None when closed), the
        unmeasured strong acid and what sized it (``acidity_basis``), the solids the influent is supersaturated
        with at its pH (``supersaturated_at_influent_ph``), its ion balance (``ion_balance_percent``,
        ``ion_balance_meq_l``) and ``warnings``.
    """
    setup, doses, cacl2, eq = _at_doses(
        water, reagent, dose_mg_l, purity, extra_calcium_chloride_mg_l, solids, activity, reactor, pco2_atm
    )
    return _curve_frame(setup, doses, eq, cacl2)


def _at_doses(
    water, reagent, dose_mg_l, purity, extra_calcium_chloride_mg_l, solids, activity, reactor, pco2_atm
):
    doses = rg.check_doses(dose_mg_l)
    cacl2 = rg.check_amount(
        extra_calcium_chloride_mg_l, "extra_calcium_chloride_mg_l", MAX_CALCIUM_CHLORIDE_MG_L, "mg/L of CaCl2"
    )
    setup = _setup(
        water,
        reagent,
        purity,
        solids=solids,
        activity=activity,
        with_calcium_chloride=cacl2 > 0,
        reactor=reactor,
        pco2_atm=pco2_atm,
    )
    eq = setup.solve(setup.reagent.active_mol_l(doses, setup.purity), _cacl2_mol_l(cacl2))
    return setup, doses, cacl2, eq


def dose_equilibrium(
    water: Water,
    reagent: str,
    dose_mg_l,
    *,
    purity: float | None = None,
    extra_calcium_chloride_mg_l: float = 0.0,
    solids: str = "fresh",
    activity: str = "davies",
    reactor: str = "closed",
    pco2_atm: float | None = None,
):
    """The equilibria behind :func:`dose_curve`: ``(tableau, Equilibrium)`` at each dose, for speciation
    detail (activities, saturation indices). Arguments as for :func:`dose_curve`. Internal building block."""
    setup, _, _, eq = _at_doses(
        water, reagent, dose_mg_l, purity, extra_calcium_chloride_mg_l, solids, activity, reactor, pco2_atm
    )
    return setup.tab, eq


# ------------------------------------------------------------------------------------------------ ceiling
def _ceiling_solids(setup: _Setup) -> np.ndarray:
    """Solids made only of the reagent's own ions and hydroxide (portlandite for lime, brucite for
    magnesium hydroxide): once one is present, more reagent only adds solid and the pH stops rising. In an open
    reactor the air supplies carbonate, so a carbonate of the reagent's ion (calcite for lime) caps it too."""
    tab = setup.tab
    own = np.zeros(len(tab.components), bool)
    own[0] = True
    own[[tab.component(c) for c in setup.reagent.adds]] = True
    if setup.reactor == "open":
        own[tab.component(open_system.CARBONATE)] = True
    uses = np.abs(tab.b) > 0
    return np.flatnonzero((uses & ~own[None, :]).sum(axis=1) == 0)


@dataclass(frozen=True)
class _Scan:
    """A geometric grid of amounts of active ingredient solved for every problem (internal)."""

    grid: np.ndarray  # amounts of active ingredient, 0 first [mol/L]
    ph: np.ndarray  # (problems, grid)
    saturated: np.ndarray  # (problems, grid): a solid of the reagent's own ions is present
    solid: str | None  # that solid (None: the reagent forms none)

    @property
    def ceiling_ph(self) -> np.ndarray:
        """pH once the reagent's own solid is present, per problem (nan: no such solid). [-]"""
        if self.solid is None:
            return np.full(self.ph.shape[0], np.nan)
        return self.ph[np.arange(self.ph.shape[0]), self.saturated.argmax(axis=1)]


def _scan(setup: _Setup, cacl2_mol_l: np.ndarray, target: float | None = None) -> _Scan:
    """Solve a geometric grid of doses up to SEARCH_MAX_ACTIVE_MOL_L of active ingredient (one solver call for
    all problems). Lime and magnesium hydroxide must saturate the water within it."""
    grid = np.concatenate(([0.0], np.geomspace(1e-7, SEARCH_MAX_ACTIVE_MOL_L, SEARCH_GRID)))
    eq = _grid_solve(setup, grid, cacl2_mol_l, target)
    own = _ceiling_solids(setup)
    k = cacl2_mol_l.size
    if own.size == 0:
        return _Scan(grid, eq.ph.reshape(k, grid.size), np.zeros((k, grid.size), bool), None)
    saturated = (eq.solid_amount[:, own] > 0).any(axis=1).reshape(k, grid.size)
    if not saturated.any(axis=1).all():
        raise InputError(
            "reagent",
            setup.reagent.key,
            f"{setup.reagent.name} does not saturate this water below {SEARCH_MAX_ACTIVE_MOL_L} mol/L of "
            f"{setup.reagent.formula}: the water's acidity is beyond the range this tool searches",
        )
    names = ", ".join(setup.tab.solids[i] for i in own)
    return _Scan(grid, eq.ph.reshape(k, grid.size), saturated, names)


def _grid_solve(setup: _Setup, grid: np.ndarray, cacl2_mol_l: np.ndarray, target: float | None):
    """Solve a grid of amounts for every problem; a model-range failure becomes a clear error."""
    k = cacl2_mol_l.size
    try:
        return setup.solve(np.tile(grid, k), np.repeat(cacl2_mol_l, grid.size))
    except ModelRangeError:
        limit = (
            f"the activity model's range (ionic strength up to {solver.MAX_IONIC_STRENGTH} mol/L) ends before "
            f"{grid.max():g} mol/L of {setup.reagent.formula} in this water"
        )
        if target is None:
            raise InputError(
                "reagent", setup.reagent.key, f"{limit}: the ceiling cannot be computed"
            ) from None
        raise InputError("target_ph", target, f"{limit}: choose a lower target") from None


def reagent_ceiling_ph(
    water: Water,
    reagent: str,
    *,
    purity: float | None = None,
    extra_calcium_chloride_mg_l: float = 0.0,
    solids: str = "fresh",
    activity: str = "davies",
    reactor: str = "closed",
    pco2_atm: float | None = None,
) -> float | None:
    """The highest pH the reagent can reach in this water: the pH once the water is saturated with it.

    Lime and quicklime stop at saturation with portlandite, magnesium hydroxide at saturation with brucite:
    beyond that dose the extra reagent stays undissolved. The value is computed in the given water (its
    temperature, ionic strength and what the reagent has already precipitated), not typed in.

    Parameters
    ----------
    water, reagent, purity, extra_calcium_chloride_mg_l, solids, activity, reactor, pco2_atm
        As for :func:`dose_curve`. The purity does not change the ceiling.

    Returns
    -------
    float or None
        The ceiling pH [-]; None for reagents that form no saturating solid (caustic, soda ash), whose pH keeps
        rising with dose (overshoot risk).
    """
    cacl2 = rg.check_amount(
        extra_calcium_chloride_mg_l, "extra_calcium_chloride_mg_l", MAX_CALCIUM_CHLORIDE_MG_L, "mg/L of CaCl2"
    )
    setup = _setup(
        water,
        reagent,
        purity,
        solids=solids,
        activity=activity,
        with_calcium_chloride=cacl2 > 0,
        reactor=reactor,
        pco2_atm=pco2_atm,
    )
    scan = _scan(setup, _cacl2_mol_l(np.array([cacl2])))
    return None if scan.solid is None else float(scan.ceiling_ph[0])


# ------------------------------------------------------------------------------------------------ dose for pH
class DoseResult(float):
    """A dose [mg/L of product as sold] that says how it was found: its attributes are the reagent, the target
    pH, the purity, ``reactor`` and ``pco2_atm``, ``acidity_basis``, ``unmeasured_strong_acid_eq_l``,
    ``supersaturated_at_influent_ph``, ``ion_balance_percent``, ``ion_balance_meq_l`` and ``warnings``. It
    behaves as a float everywhere else."""

    def __new__(cls, value: float, **info):
        obj = super().__new__(cls, value)
        obj.__dict__.update(info)
        return obj

    def __reduce__(self):
        return (_dose_result, (float(self), dict(self.__dict__)))


def _dose_result(value: float, info: dict) -> DoseResult:
    return DoseResult(value, **info)


def _check_target(target_ph) -> float:
    if isinstance(target_ph, bool) or not isinstance(target_ph, numbers.Real) or not np.isfinite(target_ph):
        raise InputError("target_ph", target_ph, "a pH between 0 and 14 is required")
    if not 0.0 <= float(target_ph) <= 14.0:
        raise InputError("target_ph", target_ph, "allowed 0 to 14")
    return float(target_ph)


def _roots(setup: _Setup, target: float, cacl2_mol_l: np.ndarray) -> tuple[np.ndarray, _Scan]:
    """Amount of active ingredient that brings each problem (one per calcium chloride amount) to the target pH
    [mol/L], and the scan (with the reagent's ceiling): the smallest amount that reaches the target, bracketed on
    a geometric grid, then narrowed until the bracket spans less than SEARCH_PH_TOL."""
    reagent = setup.reagent
    k = cacl2_mol_l.size
    scan = _scan(setup, cacl2_mol_l, target)
    grid, ph = scan.grid, scan.ph
    if scan.solid is not None and (target > scan.ceiling_ph + 1e-9).any():
        top = float(np.min(scan.ceiling_ph))
        raise InputError(
            "target_ph",
            target,
            f"{reagent.name} cannot raise this water above pH {top:.2f}, its ceiling here (the water is "
            f"saturated with {scan.solid} at {setup.water.temperature_c:g} °C"
            + (", the open reactor's air supplying the carbonate" if setup.reactor == "open" else "")
            + f"); allowed up to {top:.2f}, or choose a reagent without a ceiling (caustic)"
            + (" or a closed reactor" if setup.reactor == "open" else ""),
        )
    if scan.solid is None and (ph[:, -1] < target).any():
        wide = np.geomspace(SEARCH_MAX_ACTIVE_MOL_L, SEARCH_WIDE_ACTIVE_MOL_L, 6)[1:]
        more = _grid_solve(setup, wide, cacl2_mol_l, target).ph.reshape(k, wide.size)
        grid, ph = np.concatenate((grid, wide)), np.concatenate((ph, more), axis=1)
        if (ph[:, -1] < target).any():
            raise InputError(
                "target_ph",
                target,
                f"{reagent.name} reaches only pH {float(ph[:, -1].min()):.2f} in this water with "
                f"{SEARCH_WIDE_ACTIVE_MOL_L:g} mol/L of {reagent.formula}, the most this tool searches: choose a "
                "lower target",
            )
    start = ph[:, 0]
    if (start > target + 1e-9).any():
        raise InputError(
            "target_ph",
            target,
            f"allowed above the water's pH without reagent ({float(start.max()):.2f}): an alkali only raises the pH",
        )
    rows_all = np.arange(k)
    # the smallest dose that reaches the target: the pH need not rise everywhere (a buffer such as brucite whose
    # pH eases as the ionic strength falls, a chelate giving up its metal to the reagent's calcium), so the first
    # grid point at the target brackets it (within 1e-9 pH of a ceiling counts as reached)
    j = np.maximum((ph >= target - 1e-9).argmax(axis=1), 1)
    lo, hi = grid[j - 1], grid[j]
    ph_lo, ph_hi = ph[rows_all, j - 1], ph[rows_all, j]
    at_start = np.abs(start - target) <= 1e-9
    uniform = np.linspace(0.0, 1.0, SEARCH_SUBDIVIDE // 2 + 2)[1:-1]
    offsets = np.array([-1e-1, -1e-2, -1e-3, 0.0, 1e-3, 1e-2, 1e-1])
    for _ in range(SEARCH_MAX_ROUNDS):
        todo = ~at_start & (ph_hi - ph_lo > SEARCH_PH_TOL) & (hi - lo > 1e-12 * hi)
        if not todo.any():
            break
        r = np.flatnonzero(todo)
        width = hi[r] - lo[r]
        # an even spread keeps the bracket safe; points around the linear estimate make it converge fast
        guess = np.clip((target - ph_lo[r]) / (ph_hi[r] - ph_lo[r]), 0.0, 1.0)
        frac = np.concatenate(
            (np.broadcast_to(uniform, (r.size, uniform.size)), guess[:, None] + offsets[None, :]), axis=1
        )
        frac = np.sort(np.clip(frac, 1e-6, 1.0 - 1e-6), axis=1)
        pts = lo[r, None] + frac * width[:, None]
        p = _grid_points(setup, pts, cacl2_mol_l[r])
        xs = np.concatenate((lo[r, None], pts, hi[r, None]), axis=1)
        ps = np.concatenate((ph_lo[r, None], p, ph_hi[r, None]), axis=1)
        jj = np.maximum((ps >= np.minimum(target, ph_hi[r, None])).argmax(axis=1), 1)  # the first crossing
        rr = np.arange(r.size)
        lo[r], hi[r] = xs[rr, jj - 1], xs[rr, jj]
        ph_lo[r], ph_hi[r] = ps[rr, jj - 1], ps[rr, jj]
    else:
        raise ConvergenceError(f"dose search for pH {target:g} with {reagent.name} did not converge")
    span = np.where(ph_hi > ph_lo, ph_hi - ph_lo, 1.0)
    frac = np.clip((target - ph_lo) / span, 0.0, 1.0)
    return np.where(at_start, 0.0, lo + frac * (hi - lo)), scan


def _grid_points(setup: _Setup, pts: np.ndarray, cacl2_mol_l: np.ndarray) -> np.ndarray:
    """pH at a (problems, points) array of amounts (one solver call)."""
    eq = setup.solve(pts.ravel(), np.repeat(cacl2_mol_l, pts.shape[1]))
    return eq.ph.reshape(pts.shape)


def dose_for_ph(
    water: Water,
    reagent: str,
    target_ph: float,
    *,
    purity: float | None = None,
    extra_calcium_chloride_mg_l: float = 0.0,
    solids: str = "fresh",
    activity: str = "davies",
    reactor: str = "closed",
    pco2_atm: float | None = None,
) -> float:
    """Dose of reagent that brings the water to a target pH.

    Parameters
    ----------
    water : Water
        The influent, with its measured pH.
    reagent : {"lime", "quicklime", "caustic", "magnesium_hydroxide", "soda_ash"}
    target_ph : float
        pH to reach, above the water's own pH and at most the reagent's ceiling in this water. [-]
    purity, extra_calcium_chloride_mg_l, solids, activity, reactor, pco2_atm
        As for :func:`dose_curve`.

    Returns
    -------
    DoseResult
        Dose of product as sold (purity applied), a float [mg/L] that also carries ``reactor``, ``pco2_atm``,
        ``acidity_basis``, ``supersaturated_at_influent_ph``, the ion balance and ``warnings`` (the influent's and
        the reactor's notes) as attributes.

    Raises
    ------
    InputError
        Unknown reagent, purity outside (0, 1], a target below the water's pH, or above what the reagent can
        reach (the message gives the ceiling).

    Notes
    -----
    The dose returned is the smallest that reaches the target, as a plant adding reagent until the pH reads the
    setpoint doses. The pH need not rise everywhere with dose: in a water buffered by a solid (brucite, whose pH
    eases as the ionic strength falls) or holding a chelated metal that the reagent's calcium sets free to
    hydrolyse, it can fall a little over a range of doses; :func:`dose_curve` shows the whole curve. The search
    brackets the target on a geometric grid of doses (the first grid point at or above it), then narrows the
    bracket by subdivision, keeping the first crossing, until its two ends differ by less than 0.0002 pH, and
    interpolates.
    """
    target = _check_target(target_ph)
    cacl2 = rg.check_amount(
        extra_calcium_chloride_mg_l, "extra_calcium_chloride_mg_l", MAX_CALCIUM_CHLORIDE_MG_L, "mg/L of CaCl2"
    )
    setup = _setup(
        water,
        reagent,
        purity,
        solids=solids,
        activity=activity,
        with_calcium_chloride=cacl2 > 0,
        reactor=reactor,
        pco2_atm=pco2_atm,
    )
    active, _ = _roots(setup, target, _cacl2_mol_l(np.array([cacl2])))
    return DoseResult(
        float(setup.reagent.dose_mg_l(active[0], setup.purity)),
        reagent=setup.reagent.key,
        target_ph=target,
        purity=setup.purity,
        **setup.reactor_attrs(),
        **setup.influent.attrs(),
        warnings=setup.notes(),
    )


# ------------------------------------------------------------------------------------------------ sludge
def _solid_formula(tab, k: int) -> str:
    data = database.load()
    return data.rows[tab.solid_index[k] - len(data.components)].formula


def _solid_kind(setup: _Setup, k: int) -> tuple[str, str]:
    """(kind, metal key) of candidate solid k."""
    tab = setup.tab
    for key, comp in METALS.items():
        if comp in tab.components and tab.b[k, tab.component(comp)] > 0:
            return "metal precipitate", key
    if k in _ceiling_solids(setup):
        return "excess reagent (undissolved)", ""
    return "salt precipitated from the water and reagent", ""


def _check_flow(flow_m3_d):
    if flow_m3_d is None:
        return None
    return rg.check_positive(flow_m3_d, "flow_m3_d", MAX_FLOW_M3_D, "m3/d")


def _check_fraction(solids_fraction):
    if solids_fraction is None:
        return None
    return rg.check_positive(
        solids_fraction, "solids_fraction", 1.0, "(mass fraction of dry solids in wet sludge)"
    )


def _wet_density(wet_density_kg_m3) -> float:
    if wet_density_kg_m3 is None:
        return rg.sludge_assumptions()["wet_density_kg_m3"].value
    return rg.check_positive(wet_density_kg_m3, "wet_density_kg_m3", 3000.0, "kg/m3")


def sludge_at_dose(
    water: Water,
    reagent: str,
    dose_mg_l: float,
    *,
    purity: float | None = None,
    flow_m3_d: float | None = None,
    solids_fraction: float | None = None,
    wet_density_kg_m3: float | None = None,
    extra_calcium_chloride_mg_l: float = 0.0,
    solids: str = "fresh",
    activity: str = "davies",
    reactor: str = "closed",
    pco2_atm: float | None = None,
) -> pd.DataFrame:
    """Each solid formed at one dose, dry, per litre and per day, and the wet volume.

    Parameters
    ----------
    water, reagent, purity, extra_calcium_chloride_mg_l, solids, activity, reactor, pco2_atm
        As for :func:`dose_curve`.
    dose_mg_l : float
        Dose of product as sold. [mg/L]
    flow_m3_d : float, optional
        Water flow; adds ``kg_d``. [m3/d]
    solids_fraction : float, optional
        Mass fraction of dry solids in the wet sludge (e.g. a clarifier underflow or a filter cake), in (0, 1];
        with a flow, adds ``wet_m3_d``. [-]
    wet_density_kg_m3 : float, optional
        Density of the wet sludge; the default (data/reagents/sludge.csv, common practice) is that of water,
        which over-states the volume of a dense cake. [kg/m3]

    Returns
    -------
    pandas.DataFrame
        Index ``solid``: every solid formed (metal hydroxides, oxides and carbonates, gypsum, calcite,
        fluorite, undissolved reagent), then ``reagent inerts`` (the insoluble part of the product) and
        ``total``. Columns ``formula``, ``kind``, ``metal`` (the metal key of a metal precipitate), ``mol_l``
        (formula units as written in data/thermo), ``mg_l`` (dry), and with a flow ``kg_d`` (dry) and
        ``wet_m3_d``. The influent's own suspended solids other than its metals are not included.
    """
    doses = rg.check_doses(dose_mg_l)
    if doses.size != 1:
        raise InputError("dose_mg_l", dose_mg_l, "one dose is required (use dose_curve for many)")
    flow = _check_flow(flow_m3_d)
    fraction = _check_fraction(solids_fraction)
    density = _wet_density(wet_density_kg_m3)
    cacl2 = rg.check_amount(
        extra_calcium_chloride_mg_l, "extra_calcium_chloride_mg_l", MAX_CALCIUM_CHLORIDE_MG_L, "mg/L of CaCl2"
    )
    setup = _setup(
        water,
        reagent,
        purity,
        solids=solids,
        activity=activity,
        with_calcium_chloride=cacl2 > 0,
        reactor=reactor,
        pco2_atm=pco2_atm,
    )
    eq = setup.solve(setup.reagent.active_mol_l(doses, setup.purity), _cacl2_mol_l(cacl2))
    return _sludge_frame(setup, float(doses[0]), eq, flow, fraction, density)


def _sludge_frame(setup: _Setup, dose: float, eq, flow, fraction, density) -> pd.DataFrame:
    """The sludge table of a one-point equilibrium (see :func:`sludge_at_dose`)."""
    mg = _solids_mg_l(setup.tab, eq)[0]
    rows = []
    for k in np.flatnonzero(eq.solid_amount[0] > 0):
        kind, metal = _solid_kind(setup, k)
        formula = _solid_formula(setup.tab, k)
        rows.append((setup.tab.solids[k], formula, kind, metal, float(eq.solid_amount[0, k]), float(mg[k])))
    inerts = float(setup.reagent.inerts_mg_l(dose, setup.purity))
    if inerts > 0:
        rows.append(("reagent inerts", "", "insoluble part of the product", "", np.nan, inerts))
    columns = ["solid", "formula", "kind", "metal", "mol_l", "mg_l"]
    total = sum(r[-1] for r in rows)
    rows.append(("total", "", "", "", np.nan, total))
    df = pd.DataFrame(rows, columns=columns).set_index("solid")
    if flow is not None:
        df["kg_d"] = df["mg_l"] * flow / 1000.0  # mg/L = g/m3
        if fraction is not None:
            df["wet_m3_d"] = df["kg_d"] / fraction / density
    df.attrs.update(
        reagent=setup.reagent.key,
        dose_mg_l=dose,
        purity=setup.purity,
        pH=float(eq.ph[0]),
        flow_m3_d=flow,
        solids_fraction=fraction,
        wet_density_kg_m3=density,
        **setup.reactor_attrs(),
        **setup.influent.attrs(),
        warnings=_warnings(setup, eq),
    )
    return df


# ------------------------------------------------------------------------------------------------ fluoride
def fluoride_at_setpoint(
    water: Water,
    reagent: str,
    target_ph: float,
    calcium_chloride_mg_l=(0.0,),
    *,
    purity: float | None = None,
    solids: str = "fresh",
    activity: str = "davies",
    reactor: str = "closed",
    pco2_atm: float | None = None,
) -> pd.DataFrame:
    """Residual fluoride at a pH setpoint, with and without extra calcium (calcium chloride).

    Calcium is the common ion that drives fluoride down as fluorite (CaF2): lime brings its own; with caustic
    the water's calcium and any calcium chloride dosed are all there is. At each calcium chloride dose the
    reagent dose is found again so that the setpoint holds.

    Parameters
    ----------
    water : Water
        With fluoride and a measured pH.
    reagent, purity, solids, activity, reactor, pco2_atm
        As for :func:`dose_curve`.
    target_ph : float
        The setpoint. [-]
    calcium_chloride_mg_l : float or sequence of float
        Calcium chloride (anhydrous CaCl2) doses to compare. [mg/L]

    Returns
    -------
    pandas.DataFrame
        Index ``calcium_chloride_mg_l``; columns ``dose_mg_l`` (reagent as sold), ``pH``, ``fluoride_mg_l``
        (dissolved F), ``calcium_mg_l`` (dissolved Ca), ``fluorite_mg_l`` (CaF2 formed, dry).
    """
    if isinstance(water, Water) and water.fluoride_mg_l <= 0:
        raise InputError(
            "water.fluoride_mg_l", water.fluoride_mg_l, "a water with fluoride (> 0 mg/L) is required"
        )
    target = _check_target(target_ph)
    cacl2 = rg.check_doses(calcium_chloride_mg_l, "calcium_chloride_mg_l")
    if cacl2.max() > MAX_CALCIUM_CHLORIDE_MG_L:
        raise InputError(
            "calcium_chloride_mg_l", calcium_chloride_mg_l, f"allowed 0 to {MAX_CALCIUM_CHLORIDE_MG_L:g} mg/L"
        )
    setup = _setup(
        water,
        reagent,
        purity,
        solids=solids,
        activity=activity,
        with_calcium_chloride=True,
        reactor=reactor,
        pco2_atm=pco2_atm,
    )
    cacl2_mol = _cacl2_mol_l(cacl2)
    active, _ = _roots(setup, target, cacl2_mol)
    eq = setup.solve(active, cacl2_mol)
    fluorite = [k for k in range(len(setup.tab.solids)) if _solid_formula(setup.tab, k) == "CaF2"]
    df = pd.DataFrame(
        {
            "dose_mg_l": setup.reagent.dose_mg_l(active, setup.purity),
            "pH": eq.ph,
            "fluoride_mg_l": _component_mg_l(setup.tab, eq, "F-"),
            "calcium_mg_l": _component_mg_l(setup.tab, eq, "Ca^2+"),
            "fluorite_mg_l": _solids_mg_l(setup.tab, eq)[:, fluorite].sum(axis=1),
        },
        index=pd.Index(cacl2, name="calcium_chloride_mg_l"),
    )
    df.attrs.update(
        reagent=setup.reagent.key,
        purity=setup.purity,
        target_ph=target,
        **setup.reactor_attrs(),
        **setup.influent.attrs(),
        warnings=_warnings(setup, eq),
    )
    return df


# ------------------------------------------------------------------------------------------------ daily table
def daily_table(
    water: Water,
    reagent,
    target_ph: float,
    flow_m3_d: float,
    *,
    purity=None,
    solids_fraction: float | None = None,
    wet_density_kg_m3: float | None = None,
    extra_calcium_chloride_mg_l: float = 0.0,
    solids: str = "fresh",
    activity: str = "davies",
    reactor: str = "closed",
    pco2_atm: float | None = None,
) -> pd.DataFrame:
    """Daily reagent and sludge at a pH setpoint and a flow, for one reagent or several side by side.

    Parameters
    ----------
    water : Water
        The influent, with its measured pH.
    reagent : str or sequence of str
        Reagent key(s).
    target_ph : float
        The setpoint. [-]
    flow_m3_d : float
        Water flow. [m3/d]
    purity : float or mapping, optional
        Purity of the single reagent, or {reagent: purity}; defaults from data. [-]
    solids_fraction : float, optional
        Dry solids fraction of the wet sludge; adds ``wet_sludge_m3_d``. [-]
    wet_density_kg_m3, extra_calcium_chloride_mg_l, solids, activity, reactor, pco2_atm
        As for :func:`sludge_at_dose`.

    Returns
    -------
    pandas.DataFrame
        Index ``reagent``; columns ``target_ph``, ``dose_mg_l`` (as sold), ``purity``, ``reagent_kg_d`` (as
        sold), ``active_kg_d``, ``product_m3_d`` (liquid and slurry products, NaN for dry ones), ``ceiling_ph``
        (NaN: no ceiling), ``dry_sludge_kg_d``, ``wet_sludge_m3_d`` (with a solids fraction),
        ``reactor`` (closed or open), ``fluoride_mg_l`` (water with fluoride) and ``calcium_chloride_kg_d``
        (when dosed). ``attrs``: the flow, ``reactor``, ``pco2_atm`` and ``warnings`` (the influent's and the
        reactor's notes).
    """
    names = [reagent] if isinstance(reagent, str) or not isinstance(reagent, Sequence) else list(reagent)
    if not names:
        raise InputError("reagent", reagent, f"one or more of {', '.join(rg.REAGENTS)} is required")
    for name in names:
        rg.get(name)
    if isinstance(purity, Mapping):
        unknown = [key for key in purity if key not in names]
        if unknown:
            raise InputError(
                "purity", unknown[0], f"purities are given for the reagents asked: {', '.join(names)}"
            )
        purities = {name: purity.get(name) for name in names}
    elif purity is None or len(names) == 1:
        purities = {name: purity for name in names}
    else:
        raise InputError("purity", purity, "with several reagents, give a mapping {reagent: purity}")
    target = _check_target(target_ph)
    flow = rg.check_positive(flow_m3_d, "flow_m3_d", MAX_FLOW_M3_D, "m3/d")
    fraction = _check_fraction(solids_fraction)
    density = _wet_density(wet_density_kg_m3)
    cacl2 = rg.check_amount(
        extra_calcium_chloride_mg_l, "extra_calcium_chloride_mg_l", MAX_CALCIUM_CHLORIDE_MG_L, "mg/L of CaCl2"
    )
    rows = []
    for name in names:  # one search per reagent compared (a handful), each vectorised
        setup = _setup(
            water,
            name,
            purities[name],
            solids=solids,
            activity=activity,
            with_calcium_chloride=cacl2 > 0,
            reactor=reactor,
            pco2_atm=pco2_atm,
        )
        cacl2_mol = _cacl2_mol_l(np.array([cacl2]))
        active, ceiling = _roots(setup, target, cacl2_mol)
        eq = setup.solve(active, cacl2_mol)
        dose = float(setup.reagent.dose_mg_l(active[0], setup.purity))
        sludge = _sludge_frame(setup, dose, eq, flow, fraction, density)
        density_product = setup.reagent.product_density.value
        row = {
            "reagent": name,
            "target_ph": target,
            "dose_mg_l": dose,
            "purity": setup.purity,
            "reagent_kg_d": dose * flow / 1000.0,
            "active_kg_d": dose * setup.purity * flow / 1000.0,
            "product_m3_d": np.nan
            if density_product is None
            else dose * flow / 1000.0 / (density_product * 1000.0),
            "ceiling_ph": float(ceiling.ceiling_ph[0]),
            "dry_sludge_kg_d": float(sludge.loc["total", "kg_d"]),
            "reactor": setup.reactor,
        }
        if fraction is not None:
            row["wet_sludge_m3_d"] = row["dry_sludge_kg_d"] / fraction / density
        if setup.water.fluoride_mg_l > 0:
            row["fluoride_mg_l"] = float(_component_mg_l(setup.tab, eq, "F-")[0])
        if cacl2 > 0:
            row["calcium_chloride_kg_d"] = cacl2 * flow / 1000.0
        rows.append(row)
    df = pd.DataFrame(rows).set_index("reagent")
    df.attrs.update(
        flow_m3_d=flow,
        solids_fraction=fraction,
        wet_density_kg_m3=density,
        reactor=setup.reactor,
        pco2_atm=setup.pco2_atm,
        warnings=setup.notes(),
    )
    return df
