"""Reagent dose: the raw water's acidity, the titration curve, the dose for a target pH, the reagent's pH
ceiling, the sludge at a dose, residual fluoride, and a daily reagent and sludge table.

How a dose is modelled
----------------------
A dose of reagent adds the ions of its active ingredient to the water's component totals (lime: Ca; caustic:
Na; magnesium hydroxide: Mg; soda ash: 2 Na + CO3; calcium chloride: Ca + 2 Cl). The hydroxide needs no component
of its own: the pH follows from electroneutrality (the solver's charge-balance mode), and any solid that becomes
supersaturated precipitates (metal hydroxides and carbonates, gypsum, calcite, fluorite, and the reagent itself
as portlandite or brucite once the water is saturated with it). The reactor is closed: no CO2 is exchanged with
the air.

The raw water is made electroneutral first. An analysis never balances exactly, and the acidity that matters for
dosing (free mineral acid from pickling, the acid that holds metals in solution) is usually not measured as an
ion. The measured pH closes the balance: the strong acid (entered as Cl-) or strong base (entered as Na+) that
makes the analysis hold its measured pH is found by fixed-pH solves and added to the totals, so that the
titration curve starts at the measured pH and the dose follows from the real water. The same closure gives the
water's acidity in mg/L as CaCO3 to the usual titration end points.

Everything is vectorised over doses: one curve is one solver call, and the dose for a target pH is found by a
bracketed search in which each round is one solver call over a few points per problem.
"""

from __future__ import annotations

import numbers
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, fields

import numpy as np
import pandas as pd

from workbench.chemistry import database, solver, tableau
from workbench.errors import ConvergenceError, InputError, ModelRangeError
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


# ------------------------------------------------------------------------------------------------ setup
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
    closure_eq_l: float  # strong base (+) or acid (-) that closes the raw water's charge balance [eq/L]
    activity: str

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
        eq = solver.solve(
            self.tab,
            self.totals(active[order], cacl2[order]),
            None,
            activity=self.activity,
            ph_guess=self.water.ph,
        )
        back = np.empty_like(order)
        back[order] = np.arange(order.size)
        return _take(eq, back)


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
    water, reagent, purity, *, solids="fresh", activity="davies", with_calcium_chloride=False
) -> _Setup:
    water = _check_water(water)
    reagent = rg.get(reagent)
    purity = rg.check_purity(reagent, purity)
    _check_choices(solids, activity)
    totals = water.totals()
    comps = set(totals) | set(reagent.adds) | {"Na+", "Cl-"}
    if with_calcium_chloride:
        comps |= set(rg.CALCIUM_CHLORIDE_ADDS)
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
    base, closure = _close_charge_balance(tab, raw, water.ph, activity)
    return _Setup(water, reagent, purity, tab, base, unit, cacl2, closure, activity)


def _with_closure(tab, raw: np.ndarray, net_base_eq_l: float) -> np.ndarray:
    out = raw.copy()
    if net_base_eq_l >= 0:
        out[tab.component("Na+")] += net_base_eq_l
    else:
        out[tab.component("Cl-")] -= net_base_eq_l
    return out


def _close_charge_balance(tab, raw: np.ndarray, ph: float, activity: str) -> tuple[np.ndarray, float]:
    """Strong base (+, as Na+) or acid (-, as Cl-) that makes the analysis hold its measured pH. [eq/L]

    The strong base a fixed-pH solve needs is the charge-balance residual of the analysis. Adding it as Na+ or
    Cl- shifts the ion pairs those ions form a little, so the residual is taken again until it vanishes. Where
    that is slow (the acid's chloride precipitating silver as AgCl carries none of the acid's charge until the
    silver is used up), the root is bracketed and found by Brent's method: the base still missing never rises
    as base is added."""

    def missing(net: float) -> float:
        eq = solver.solve(tab, _with_closure(tab, raw, net), np.array([ph]), activity=activity)
        return float(eq.strong_base[0])

    net, residual = 0.0, missing(0.0)
    tried = [(net, residual)]
    for _ in range(CLOSURE_MAX_ITER):
        if abs(residual) <= CLOSURE_TOL_EQ_L:
            return _with_closure(tab, raw, net), net
        net += residual
        residual = missing(net)
        tried.append((net, residual))
    if abs(residual) <= CLOSURE_TOL_EQ_L:
        return _with_closure(tab, raw, net), net
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
            return _with_closure(tab, raw, net), net
    raise ConvergenceError(
        f"charge-balance closure of the raw water did not converge (residual {residual:.3g} eq/L at pH {ph:g})"
    )


SLOW_SOLIDS = ("CaCO3", "CaSO4.2H2O")  # calcite and gypsum: they precipitate slowly from supersaturation


def _warnings(setup: _Setup, eq) -> list[str]:
    """The core's model warnings, and a note when calcite or gypsum carry part of the result."""
    out = model_warnings(setup.water, setup.tab, eq)
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
    """The raw water's acidity, from its analysis and measured pH.

    Attributes
    ----------
    ph : float
        Measured pH. [-]
    unmeasured_strong_acid_eq_l : float
        Strong acid (positive) or base (negative) not in the analysis that makes it hold its measured pH: the
        charge balance closed. [eq/L]
    unmeasured_strong_acid_mg_l_caco3 : float
        The same as CaCO3. [mg/L as CaCO3]
    mineral_acidity_mg_l_caco3 : float
        Strong base needed to bring the water to pH 4.5 (negative: the water is above pH 4.5 and the value is the
        acid it would take to bring it down). [mg/L as CaCO3]
    total_acidity_mg_l_caco3 : float
        Strong base needed to bring the water to pH 8.3, including what the metals that precipitate on the way
        consume (negative as above). [mg/L as CaCO3]
    """

    ph: float
    unmeasured_strong_acid_eq_l: float
    unmeasured_strong_acid_mg_l_caco3: float
    mineral_acidity_mg_l_caco3: float
    total_acidity_mg_l_caco3: float


def raw_water_acidity(water: Water, *, solids: str = "fresh", activity: str = "davies") -> WaterAcidity:
    """The raw water's unmeasured strong acid and its acidity to pH 4.5 and 8.3.

    Parameters
    ----------
    water : Water
        With a measured pH.
    solids : {"fresh", "aged", "none"}
        Solids that may form (metal hydroxides precipitating on the way to an end point consume base).
    activity : {"davies", "ideal"}

    Returns
    -------
    WaterAcidity

    Notes
    -----
    Acidity to an end point is the strong base a fixed-pH solve needs to hold the closed water at that pH,
    converted with 50.04 g CaCO3 per equivalent.
    """
    water = _check_water(water)
    _check_choices(solids, activity)
    totals = water.totals()
    tab = tableau.build(tuple(set(totals) | {"Na+", "Cl-"}), water.temperature_c, solids)
    raw = np.zeros(len(tab.components))
    for comp, value in totals.items():
        raw[tab.component(comp)] = value
    base, closure = _close_charge_balance(tab, raw, water.ph, activity)
    eq = solver.solve(tab, base, np.array([MINERAL_ACIDITY_PH, TOTAL_ACIDITY_PH]), activity=activity)
    to_caco3 = CACO3_EQ_G * 1000.0
    return WaterAcidity(
        ph=float(water.ph),
        unmeasured_strong_acid_eq_l=-closure,
        unmeasured_strong_acid_mg_l_caco3=-closure * to_caco3,
        mineral_acidity_mg_l_caco3=float(eq.strong_base[0]) * to_caco3,
        total_acidity_mg_l_caco3=float(eq.strong_base[1]) * to_caco3,
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
        unmeasured_strong_acid_eq_l=-setup.closure_eq_l,
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

    Returns
    -------
    pandas.DataFrame
        One row per dose, in the order given. Columns ``dose_mg_l``, ``pH``, one column per metal of the water
        (dissolved, mg/L), ``fluoride_mg_l`` (dissolved F, when the water has fluoride), ``calcium_mg_l``
        (dissolved Ca, when calcium is present), ``sludge_mg_l`` (dry solids formed plus the reagent's inerts).
        ``attrs`` holds the reagent, purity, temperature, the unmeasured strong acid and ``warnings``.
    """
    setup, doses, cacl2, eq = _at_doses(
        water, reagent, dose_mg_l, purity, extra_calcium_chloride_mg_l, solids, activity
    )
    return _curve_frame(setup, doses, eq, cacl2)


def _at_doses(water, reagent, dose_mg_l, purity, extra_calcium_chloride_mg_l, solids, activity):
    doses = rg.check_doses(dose_mg_l)
    cacl2 = rg.check_amount(
        extra_calcium_chloride_mg_l, "extra_calcium_chloride_mg_l", MAX_CALCIUM_CHLORIDE_MG_L, "mg/L of CaCl2"
    )
    setup = _setup(water, reagent, purity, solids=solids, activity=activity, with_calcium_chloride=cacl2 > 0)
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
):
    """The equilibria behind :func:`dose_curve`: ``(tableau, Equilibrium)`` at each dose, for speciation
    detail (activities, saturation indices). Arguments as for :func:`dose_curve`. Internal building block."""
    setup, _, _, eq = _at_doses(
        water, reagent, dose_mg_l, purity, extra_calcium_chloride_mg_l, solids, activity
    )
    return setup.tab, eq


# ------------------------------------------------------------------------------------------------ ceiling
def _ceiling_solids(setup: _Setup) -> np.ndarray:
    """Solids made only of the reagent's own ions and hydroxide (portlandite for lime, brucite for
    magnesium hydroxide): once one is present, more reagent only adds solid and the pH stops rising."""
    tab = setup.tab
    own = np.zeros(len(tab.components), bool)
    own[0] = True
    own[[tab.component(c) for c in setup.reagent.adds]] = True
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
) -> float | None:
    """The highest pH the reagent can reach in this water: the pH once the water is saturated with it.

    Lime and quicklime stop at saturation with portlandite, magnesium hydroxide at saturation with brucite:
    beyond that dose the extra reagent stays undissolved. The value is computed in the given water (its
    temperature, ionic strength and what the reagent has already precipitated), not typed in.

    Parameters
    ----------
    water, reagent, purity, extra_calcium_chloride_mg_l, solids, activity
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
    setup = _setup(water, reagent, purity, solids=solids, activity=activity, with_calcium_chloride=cacl2 > 0)
    scan = _scan(setup, _cacl2_mol_l(np.array([cacl2])))
    return None if scan.solid is None else float(scan.ceiling_ph[0])


# ------------------------------------------------------------------------------------------------ dose for pH
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
            f"saturated with {scan.solid} at {setup.water.temperature_c:g} °C); allowed up to {top:.2f}, or "
            "choose a reagent without a ceiling (caustic)",
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
) -> float:
    """Dose of reagent that brings the water to a target pH.

    Parameters
    ----------
    water : Water
        The influent, with its measured pH.
    reagent : {"lime", "quicklime", "caustic", "magnesium_hydroxide", "soda_ash"}
    target_ph : float
        pH to reach, above the water's own pH and at most the reagent's ceiling in this water. [-]
    purity, extra_calcium_chloride_mg_l, solids, activity
        As for :func:`dose_curve`.

    Returns
    -------
    float
        Dose of product as sold (purity applied). [mg/L]

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
    setup = _setup(water, reagent, purity, solids=solids, activity=activity, with_calcium_chloride=cacl2 > 0)
    active, _ = _roots(setup, target, _cacl2_mol_l(np.array([cacl2])))
    return float(setup.reagent.dose_mg_l(active[0], setup.purity))


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
) -> pd.DataFrame:
    """Each solid formed at one dose, dry, per litre and per day, and the wet volume.

    Parameters
    ----------
    water, reagent, purity, extra_calcium_chloride_mg_l, solids, activity
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
    setup = _setup(water, reagent, purity, solids=solids, activity=activity, with_calcium_chloride=cacl2 > 0)
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
) -> pd.DataFrame:
    """Residual fluoride at a pH setpoint, with and without extra calcium (calcium chloride).

    Calcium is the common ion that drives fluoride down as fluorite (CaF2): lime brings its own; with caustic
    the water's calcium and any calcium chloride dosed are all there is. At each calcium chloride dose the
    reagent dose is found again so that the setpoint holds.

    Parameters
    ----------
    water : Water
        With fluoride and a measured pH.
    reagent, purity, solids, activity
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
    setup = _setup(water, reagent, purity, solids=solids, activity=activity, with_calcium_chloride=True)
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
    wet_density_kg_m3, extra_calcium_chloride_mg_l, solids, activity
        As for :func:`sludge_at_dose`.

    Returns
    -------
    pandas.DataFrame
        Index ``reagent``; columns ``target_ph``, ``dose_mg_l`` (as sold), ``purity``, ``reagent_kg_d`` (as
        sold), ``active_kg_d``, ``product_m3_d`` (liquid and slurry products, NaN for dry ones), ``ceiling_ph``
        (NaN: no ceiling), ``dry_sludge_kg_d``, ``wet_sludge_m3_d`` (with a solids fraction),
        ``fluoride_mg_l`` (water with fluoride) and ``calcium_chloride_kg_d`` (when dosed).
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
            water, name, purities[name], solids=solids, activity=activity, with_calcium_chloride=cacl2 > 0
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
        }
        if fraction is not None:
            row["wet_sludge_m3_d"] = row["dry_sludge_kg_d"] / fraction / density
        if setup.water.fluoride_mg_l > 0:
            row["fluoride_mg_l"] = float(_component_mg_l(setup.tab, eq, "F-")[0])
        if cacl2 > 0:
            row["calcium_chloride_kg_d"] = cacl2 * flow / 1000.0
        rows.append(row)
    df = pd.DataFrame(rows).set_index("reagent")
    df.attrs.update(flow_m3_d=flow, solids_fraction=fraction, wet_density_kg_m3=density)
    return df
