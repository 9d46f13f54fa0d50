"""Property tests over the whole valid input space: every valid water gets a verified answer or a clear refusal.

Hypothesis draws waters with any subset of the metals (0 to 5,000 mg/L on a log scale), the major ions (sulfate,
chloride, sodium, calcium, magnesium, fluoride up to 20,000 mg/L), ammonia, EDTA and citrate (up to 20,000 mg/L),
alkalinity with or without a measured pH (0-14) and a temperature of 5-50 °C. Each water goes through
``residual_curve`` (a few drawn pH values and a fixed grid), ``speciate`` and the charge-balance solver. The only
acceptable outcomes are a verified answer (a curve stops where the model stops: points beyond the activity model's
range at the ends of the pH range are left empty and named) or a :class:`~workbench.ModelRangeError` (ionic
strength beyond the activity model's range at every point asked); an analysis whose alkalinity the measured pH
cannot hold is refused by the Water itself with an ``InputError`` naming ``alkalinity_mg_l_caco3``. Never a
``ConvergenceError``, another exception, NaN or inf.

A verified answer is checked from the returned equilibrium itself (the solver is observed, not trusted): mass
balance of every component to 1e-10 relative, species concentrations from the free concentrations by mass action,
Davies activity coefficients at the reported ionic strength, saturation indices recomputed from the activities
(present solids at saturation, absent ones not supersaturated, both within 1e-9), non-negative solid amounts,
the pH held (fixed-pH mode) or electroneutrality (charge-balance mode), dissolved metal never above the influent.

Six properties draw 13,300 waters in all (EXAMPLES): every entry point on each water; the residual curve alone;
scalar and array pH giving the same residual and the same refusal; metals far below the solubility of any of their
solids staying dissolved (residual = influent); a reagent dose curve (any of the five reagents, 2-12 doses up to
1-5,000 mg/L, every solve verified; with caustic soda and ideal activities the pH never falls) followed by the
other dose entries (dose_for_ph for a drawn target pH, its answer checked on the curve; reagent_ceiling_ph;
sludge_at_dose; raw_water_acidity); the setpoint design with drawn permit limits, margin, rule and effluent TSS,
then the daily reagent table at its setpoint. A dose search may refuse only with a reason (DOSE_REFUSALS: a target
below the water's pH or above the reagent's reach, the activity model's range). Each property's examples are split
over two worker processes with fixed seeds, so every run draws the same waters (about 3 minutes on two cores).
``WORKBENCH_PROPERTY_SCALE=10`` multiplies every example count for a deeper run; ``-m slow`` selects these tests,
``-m "not slow"`` leaves them out. Fixed cases complete the picture: each metal alone over the pH scale at 5,
25 and 50 °C in both solver modes, and the waters at the edge of the input space (pure water, major ions only,
a metal entered as 0 mg/L) through every entry point including ``minimum_solubility``.
"""

from __future__ import annotations

import math
import multiprocessing
import os
import traceback
import zlib
from collections import Counter
from concurrent.futures import ProcessPoolExecutor
from contextlib import contextmanager

import numpy as np
import pytest
from hypothesis import HealthCheck, given, seed, settings
from hypothesis import strategies as st

import workbench as wb
from workbench.chemistry import solver, tableau
from workbench.chemistry import water_properties as wp
from workbench.treatment.dose import SEARCH_PH_TOL
from workbench.treatment.solubility import ph_index
from workbench.treatment.water import METALS

SCALE = int(os.environ.get("WORKBENCH_PROPERTY_SCALE", "1"))
#: examples (= random waters) per property in one run; together at least 10,000
EXAMPLES = {
    "every entry point": 2_500,
    "residual curve": 7_000,
    "scalar and array": 200,
    "tiny metals": 300,
    "titration": 3_000,  # with the dose entries: dose_for_ph, reagent_ceiling_ph, sludge_at_dose, acidity
    "design": 300,  # design_setpoint, then daily_table at its setpoint (about 0.15 s a water: two-stage search)
}

MAX_METAL_MG_L = 5_000.0
MAX_ION_MG_L = 20_000.0
MAX_ALKALINITY_MG_L_CACO3 = 20_000.0
LOWEST_METAL_MG_L = 1e-9  # below this a drawn metal concentration is entered as exactly 0
LOWEST_ION_MG_L = 1e-3
LOWEST_ALKALINITY_MG_L_CACO3 = 1.0  # as reported by a laboratory (whole mg/L)
GRID_PH = (1.0, 4.0, 7.0, 10.0, 13.0)  # fixed points solved with every drawn water

TOL_MASS = 1e-10  # relative mass balance
TOL_SI = 1e-9  # saturation index of present (|SI|) and absent (SI) solids
TOL_INFLUENT = 1e-9  # dissolved metal above the influent, relative
TOL_LOG = 1e-9  # mass action, log10 units
TOL_GAMMA = 1e-8  # activity coefficients at the reported ionic strength (I converged to 1e-10 in log10 I)

MAJOR_IONS = (
    "sulfate_mg_l",
    "chloride_mg_l",
    "sodium_mg_l",
    "calcium_mg_l",
    "magnesium_mg_l",
    "fluoride_mg_l",
)
LIGANDS = ("ammonia_mg_l_n", "edta_mg_l", "citrate_mg_l")


def _settings(examples: int):
    return settings(
        max_examples=examples * SCALE,
        deadline=None,
        derandomize=True,
        database=None,
        suppress_health_check=[HealthCheck.too_slow, HealthCheck.data_too_large],
    )


# ---------------------------------------------------------------------------------------------- strategies
def _log_scale(low: float, high: float, *, with_zero: bool = False):
    """Concentrations spread evenly in log10 between low and high; with_zero: one more decade below low, drawn as
    exactly 0 (an analysis that reports the field as zero)."""
    bottom = math.log10(low) - (1.0 if with_zero else 0.0)
    exponents = st.floats(bottom, math.log10(high))
    return exponents.map(lambda e: 0.0 if e < math.log10(low) else min(10.0**e, high))


METAL_MG_L = _log_scale(LOWEST_METAL_MG_L, MAX_METAL_MG_L, with_zero=True)
ION_MG_L = _log_scale(LOWEST_ION_MG_L, MAX_ION_MG_L, with_zero=True)
PH = st.floats(0.0, 14.0)
TEMPERATURE_C = st.floats(*wp.VALID_TEMPERATURE_C)


ANY_METALS = st.fixed_dictionaries({}, optional={k: METAL_MG_L for k in METALS})
PH_OR_NONE = st.none() | PH  # a water with or without a measured pH


@st.composite
def water_inputs(draw, metals=ANY_METALS, measured_ph=PH_OR_NONE):
    """Keyword arguments of a valid Water (its alkalinity/pH pair may still be inconsistent)."""
    kwargs = {"metals_mg_l": draw(metals)}
    kwargs.update(draw(st.fixed_dictionaries({}, optional={f: ION_MG_L for f in MAJOR_IONS + LIGANDS})))
    alkalinity = draw(st.none() | _log_scale(LOWEST_ALKALINITY_MG_L_CACO3, MAX_ALKALINITY_MG_L_CACO3))
    if alkalinity is not None:
        kwargs["alkalinity_mg_l_caco3"] = alkalinity
    kwargs["ph"] = draw(measured_ph)
    kwargs["temperature_c"] = draw(TEMPERATURE_C)
    return kwargs


def make_water(kwargs: dict, counts: Counter) -> wb.Water:
    """The Water of the drawn inputs. An alkalinity the measured pH cannot hold must be refused clearly (field,
    value, reason); the same analysis without a measured pH (alkalinity read at pH 8.3) is then used."""
    try:
        return wb.Water(**kwargs)
    except wb.InputError as err:
        assert err.field == "alkalinity_mg_l_caco3", f"valid input refused: {err}"
        assert kwargs.get("alkalinity_mg_l_caco3", 0) > 0 and kwargs.get("ph") is not None, str(err)
        assert "inconsistent with pH" in str(err) and err.value == kwargs["alkalinity_mg_l_caco3"]
        counts["water refused: alkalinity inconsistent with the measured pH"] += 1
        return wb.Water(**{**kwargs, "ph": None})


# ---------------------------------------------------------------------------------------------- observing the solver
@contextmanager
def observed_solves():
    """Record every (tableau, totals, ph, Equilibrium) the solver returns while the block runs."""
    real = solver.solve
    calls = []

    def spy(tab, totals, ph=None, **kwargs):
        eq = real(tab, totals, ph, **kwargs)
        calls.append((tab, np.asarray(totals, dtype=float), ph, eq))
        return eq

    solver.solve = spy
    try:
        yield calls
    finally:
        solver.solve = real


def assert_verified(tab, totals, ph, eq) -> None:
    """The equilibrium satisfies every condition of the model, recomputed here from its own arrays."""
    n_pts = eq.conc.shape[0]
    for name in ("log_free", "conc", "log_gamma", "solid_amount", "saturation_index", "ionic_strength", "ph"):
        assert np.isfinite(getattr(eq, name)).all(), f"{name} is not finite"
    t = np.broadcast_to(np.atleast_2d(totals), (n_pts, len(tab.components)))
    # mass balance of every component present (column 0 is H+)
    tot = eq.conc @ tab.a + eq.solid_amount @ tab.b
    # a metal entered as 0 mg/L stays in the tableau with no total: nothing of it may appear anywhere
    present = t[:, 1:] > 0
    assert (np.abs(tot[:, 1:][~present]) == 0).all(), "a component with no total appears in species or solids"
    rel = np.abs(tot[:, 1:] - t[:, 1:])[present] / t[:, 1:][present]
    assert rel.max(initial=0.0) <= TOL_MASS, f"mass balance off by {rel.max(initial=0.0):.3g} (relative)"
    # species from the free component concentrations by mass action, with Davies coefficients at the reported I
    rows = np.array([tab.species.index(c) for c in tab.components])
    log_act = eq.log_free + eq.log_gamma[:, rows]
    log_c = tab.log_k + log_act @ tab.a.T - eq.log_gamma
    visible = log_c > -290.0  # below this the concentration underflows in the result
    with np.errstate(divide="ignore"):
        gap = np.abs(np.log10(eq.conc) - log_c)
    assert gap[visible].max(initial=0.0) <= TOL_LOG, (
        "concentrations do not follow from the free concentrations"
    )
    lg = wp.davies_log_gamma(tab.z[None, :], eq.ionic_strength[:, None], tab.davies_a)
    assert np.abs(lg - eq.log_gamma).max() <= TOL_GAMMA, (
        "activity coefficients not at the reported ionic strength"
    )
    # saturation indices from the activities, and the solids they imply
    si = tab.log_ks + log_act @ tab.b.T
    assert np.abs(si - eq.saturation_index).max(initial=0.0) <= TOL_LOG, (
        "reported SI differ from the activities"
    )
    assert (eq.solid_amount >= 0).all(), "negative solid amount"
    formed = eq.solid_amount > 0
    assert np.abs(si[formed]).max(initial=0.0) <= TOL_SI, "a solid reported present is not saturated"
    assert si[~formed].max(initial=-np.inf) <= TOL_SI, "a solid reported absent is supersaturated"
    if ph is None:
        # charge-balance mode: electroneutral to the accuracy of the mass balances (the larger of the dissolved
        # charge and the charge of the totals: most of a total may sit in neutral solids)
        z_comp = tab.z[rows]
        scale = np.maximum(eq.conc @ np.abs(tab.z), np.abs(t[:, 1:]) @ np.abs(z_comp[1:]))
        assert (np.abs(eq.conc @ tab.z) <= TOL_MASS * scale).all(), "not electroneutral"
    else:
        np.testing.assert_allclose(eq.ph, np.broadcast_to(ph, eq.ph.shape), rtol=0, atol=1e-9)


def assert_one_verified_solve(calls, ph) -> None:
    assert len(calls) == 1, f"expected one solve, saw {len(calls)}"
    tab, totals, ph_used, eq = calls[0]
    np.testing.assert_array_equal(np.atleast_1d(ph_used), np.atleast_1d(ph))
    assert_verified(tab, totals, ph_used, eq)


def assert_refusal_is_the_model_range(err: wb.ModelRangeError) -> None:
    assert err.field == "ionic strength" and "Davies" in err.allowed, str(err)
    assert err.value >= solver.MAX_IONIC_STRENGTH  # shown rounded to 0.01


def charge_balance_inputs(water: wb.Water):
    """Tableau and totals vector of a water, arranged as solubility.equilibrium() does."""
    totals = water.totals()
    tab = tableau.build(tuple(totals), water.temperature_c, "fresh")
    t = np.zeros(len(tab.components))
    for comp, value in totals.items():
        t[tab.component(comp)] = value
    return tab, t


def assert_dissolved_within_influent(water: wb.Water, dissolved: dict) -> None:
    assert list(dissolved) == list(water.metals_mg_l)
    for metal, influent in water.metals_mg_l.items():
        values = np.asarray(dissolved[metal], dtype=float)
        assert np.isfinite(values).all() and (values >= 0).all(), metal
        assert (values <= influent * (1 + TOL_INFLUENT)).all(), (
            f"{metal}: {values.max()} > influent {influent}"
        )


# ---------------------------------------------------------------------------------------------- one call each
def residual_curve_verified(water: wb.Water, ph: np.ndarray, counts: Counter):
    """residual_curve: a verified curve (returned), possibly stopped where the model stops (the points beyond the
    activity model's range at the ends of the pH range are empty and named), or a refusal for ionic strength when
    no point holds (None)."""
    with observed_solves() as calls:
        try:
            curve = wb.residual_curve(water, ph)
        except wb.ModelRangeError as err:
            assert_refusal_is_the_model_range(err)
            counts["residual_curve refused: ionic strength"] += 1
            return None
    counts["residual_curve solved"] += 1
    ph = np.atleast_1d(ph)
    # the index: the pH asked for, float noise near a short decimal dropped (ph_index); never more than 1e-12 off
    labels = ph_index(ph).to_numpy()
    np.testing.assert_array_equal(curve.index.to_numpy(), labels)
    np.testing.assert_allclose(curve.index.to_numpy(), ph, rtol=0, atol=1e-12)
    beyond = np.asarray(curve.attrs["beyond_model_ph"], float)
    held = ~np.isin(labels, beyond)
    if beyond.size:
        counts["residual_curve stopped where the model stops"] += 1
        # trimmed from the ends only: no point beyond the range lies between two points that hold
        assert ((beyond > labels[held].max()) | (beyond < labels[held].min())).all(), (ph, beyond)
        assert any("The curve stops" in w for w in curve.attrs["warnings"]), curve.attrs["warnings"]
        assert curve[~held].isna().all().all()
    assert_one_verified_solve(calls, ph[held])  # the tries before it were refused for ionic strength
    assert_dissolved_within_influent(water, {m: curve[m].to_numpy()[held] for m in curve.columns})
    return curve


def speciate_verified(water: wb.Water, ph: float, counts: Counter):
    """speciate: a verified result (returned) or a refusal for ionic strength (None)."""
    with observed_solves() as calls:
        try:
            result = wb.speciate(water, ph)
        except wb.ModelRangeError as err:
            assert_refusal_is_the_model_range(err)
            counts["speciate refused: ionic strength"] += 1
            return None
    counts["speciate solved"] += 1
    assert_one_verified_solve(calls, [ph])
    assert_dissolved_within_influent(water, result.dissolved_mg_l.to_dict())
    sat = result.saturation
    assert (sat.loc[sat["present"], "saturation_index"].abs() <= TOL_SI).all()
    assert (sat.loc[~sat["present"], "saturation_index"] <= TOL_SI).all()
    assert set(result.solids.index) == set(sat.index[sat["present"]])
    assert (result.solids["mol_l"] > 0).all() and np.isfinite(result.species.to_numpy(float)).all()
    return result


def charge_balance_verified(water: wb.Water, counts: Counter) -> None:
    """The solver in charge-balance mode (pH from electroneutrality): verified, or refused for ionic strength."""
    tab, t = charge_balance_inputs(water)
    try:
        eq = solver.solve(tab, t, None)
    except wb.ModelRangeError as err:
        assert_refusal_is_the_model_range(err)
        counts["charge balance refused: ionic strength"] += 1
        return
    counts["charge balance solved"] += 1
    assert_verified(tab, t, None, eq)


# ---------------------------------------------------------------------------------------------- properties
def every_entry_point(kwargs, drawn_ph, speciate_ph, counts: Counter) -> None:
    water = make_water(kwargs, counts)
    counts["waters"] += 1
    residual_curve_verified(water, np.array(list(drawn_ph) + list(GRID_PH)), counts)
    speciate_verified(water, speciate_ph, counts)
    charge_balance_verified(water, counts)


def residual_curve_only(kwargs, drawn_ph, counts: Counter) -> None:
    water = make_water(kwargs, counts)
    counts["waters"] += 1
    residual_curve_verified(water, np.array(list(drawn_ph) + list(GRID_PH)), counts)


def scalar_and_array_agree(kwargs, ph, counts: Counter) -> None:
    """The same pH gives the same answer alone, within an array, and through speciate; a refusal for ionic
    strength is a property of the pH values, not of how they are grouped."""
    water = make_water(kwargs, counts)
    counts["waters"] += 1
    curve = residual_curve_verified(water, np.array(ph), counts)
    refused = []
    for i, p in enumerate(ph):
        one = residual_curve_verified(water, p, counts)
        sp = speciate_verified(water, p, counts)
        assert (one is None) == (sp is None), f"pH {p}: residual_curve and speciate disagree on refusing"
        refused.append(one is None)
        if one is not None and curve is not None and not np.isnan(curve.iloc[i].to_numpy()).any():
            row = curve.iloc[i].to_numpy()
            np.testing.assert_allclose(one.iloc[0].to_numpy(), row, rtol=1e-8, atol=0, err_msg=f"pH {p}")
            np.testing.assert_allclose(
                sp.dissolved_mg_l.to_numpy(), row, rtol=1e-8, atol=0, err_msg=f"pH {p}"
            )
    empty = (
        [True] * len(ph)
        if curve is None
        else list(np.isin(ph_index(np.array(ph)).to_numpy(), curve.attrs["beyond_model_ph"]))
    )
    assert empty == refused, f"empty in the array: {empty}; points refused alone: {refused}"
    counts["compared"] += curve is not None


def tiny_metals_stay_dissolved(kwargs, drawn_ph, counts: Counter) -> None:
    """Metals far below the solubility of any of their solids: the residual is the influent at every pH where the
    model holds."""
    water = make_water(kwargs, counts)
    counts["waters"] += 1
    ph = np.array(list(drawn_ph) + list(GRID_PH))
    curve = residual_curve_verified(water, ph, counts)
    if curve is not None:
        held = ~np.isin(ph_index(ph).to_numpy(), curve.attrs["beyond_model_ph"])
        for metal, influent in water.metals_mg_l.items():
            np.testing.assert_allclose(
                curve[metal].to_numpy()[held], influent, rtol=TOL_INFLUENT, atol=0, err_msg=metal
            )


def titration(kwargs, reagent, top_dose, n_doses, target_ph, counts: Counter) -> None:
    """A reagent dose curve (charge-balance mode, every dose one solve): each answer verified, or a clear refusal
    (ionic strength; a water without a measured pH cannot be titrated). With caustic soda and ideal activities the
    pH never falls as it is added (a strong base in a closed system). With Davies activities it can ease a little:
    a trivalent metal precipitating (Al 100 mg/L at 5 °C) lowers the ionic strength and the pH eases by 0.007
    while Al(OH)3 forms (found by this test; the ideal curve of the same water rises). With the other reagents it
    can fall, and does in real waters: soda ash that precipitates a metal hydroxycarbonate
    (5 Zn2+ + 2 CO3 2- + 6 H2O -> Zn5(CO3)2(OH)6 + 6 H+) releases more acid than its carbonate takes up, and the
    calcium of lime can free a metal from a chelate to hydrolyse (both found by this test)."""
    water = make_water(kwargs, counts)
    counts["waters"] += 1
    doses = np.linspace(0.0, top_dose, n_doses)
    with observed_solves() as calls:
        try:
            curve = wb.dose_curve(water, reagent, doses)
        except wb.ModelRangeError as err:
            assert_refusal_is_the_model_range(err)
            counts["titration refused: ionic strength"] += 1
            return
        except wb.InputError as err:
            assert err.field == "ph" and water.ph is None, str(err)
            counts["titration refused: no measured pH"] += 1
            return
    counts["titration solved"] += 1
    for tab, totals, ph, eq in calls:
        assert_verified(tab, totals, ph, eq)
    ph_curve = curve["pH"].to_numpy()
    assert np.isfinite(ph_curve).all()
    if reagent == "caustic":
        ideal = wb.dose_curve(water, reagent, doses, activity="ideal")["pH"].to_numpy()
        assert (np.diff(ideal) >= -1e-9).all(), f"pH falls as caustic is added (ideal activities): {ideal}"
    dose_entries_verified(water, reagent, target_ph, top_dose, counts)


#: refusals of a dose search that are answers, not failures (the field and a part of the message)
DOSE_REFUSALS = (
    ("target_ph", "allowed above the water's pH without reagent"),  # an alkali only raises the pH
    ("target_ph", "cannot raise this water above pH"),  # above the reagent's ceiling here
    ("target_ph", "reaches only pH"),  # beyond the most reagent searched
    ("target_ph", "the activity model's range"),  # the water leaves the Davies range first
    ("reagent", "the activity model's range"),
    ("reagent", "does not saturate this water below"),
)


def _dose_refusal(err: wb.InputError, counts: Counter, entry: str) -> None:
    if isinstance(err, wb.ModelRangeError):
        assert_refusal_is_the_model_range(err)
        counts[f"{entry} refused: ionic strength"] += 1
        return
    assert any(err.field == f and part in err.allowed for f, part in DOSE_REFUSALS), f"{entry}: {err}"
    counts[f"{entry} refused: {err.field}"] += 1


def dose_entries_verified(
    water: wb.Water, reagent: str, target_ph: float, dose_mg_l: float, counts: Counter
) -> None:
    """dose_for_ph (its answer checked on the titration curve: the pH reached within the search's 0.0002 pH, no
    smaller dose of a coarse grid at the target), reagent_ceiling_ph, sludge_at_dose, raw_water_acidity: each an
    answer or a refusal that says why (DOSE_REFUSALS)."""
    try:
        found = wb.dose_for_ph(water, reagent, target_ph)
    except wb.InputError as err:
        _dose_refusal(err, counts, "dose_for_ph")
    else:
        counts["dose_for_ph solved"] += 1
        assert math.isfinite(found) and found >= 0.0
        check = wb.dose_curve(water, reagent, np.append(np.linspace(0.0, found, 9)[:-1], found))[
            "pH"
        ].to_numpy()
        assert abs(check[-1] - target_ph) <= SEARCH_PH_TOL + 1e-9 or (found == 0 and check[-1] >= target_ph)
        assert (check[:-1] < target_ph + SEARCH_PH_TOL).all(), "a smaller dose reaches the target"
    try:
        ceiling = wb.reagent_ceiling_ph(water, reagent)
    except wb.InputError as err:
        _dose_refusal(err, counts, "reagent_ceiling_ph")
    else:
        counts["reagent_ceiling_ph solved"] += 1
        # finite; not bounded by 14: at 5 °C pKw is 14.7, and lime over sodium fluoride makes caustic soda
        # (Ca(OH)2 + 2 F- -> CaF2 + 2 OH-), found by this test at pH 14.2
        assert ceiling is None or (math.isfinite(ceiling) and ceiling > 0.0)
    try:
        sludge = wb.sludge_at_dose(water, reagent, dose_mg_l)
    except wb.ModelRangeError as err:
        _dose_refusal(err, counts, "sludge_at_dose")
    else:
        counts["sludge_at_dose solved"] += 1
        assert np.isfinite(sludge["mg_l"]).all() and (sludge["mg_l"] >= 0).all()
    try:
        acidity = wb.raw_water_acidity(water)
    except wb.ModelRangeError as err:
        _dose_refusal(err, counts, "raw_water_acidity")
    else:
        counts["raw_water_acidity solved"] += 1
        assert np.isfinite([acidity.mineral_acidity_mg_l_caco3, acidity.total_acidity_mg_l_caco3]).all()


def design(kwargs, limits_mg_l, margin, rule, tss, reagent, counts: Counter) -> None:
    """design_setpoint with permit limits on the water's metals, then the reagent dose at its setpoint (or at its
    first stage, or where it comes nearest to meeting every target) and the daily table at a drawn reagent: an
    answer or a refusal that says why."""
    water = make_water(kwargs, counts)
    counts["waters"] += 1
    metals = [m for m, v in water.metals_mg_l.items() if v > 0]
    if not metals:
        counts["no metal to design for"] += 1
        return
    limits = wb.permit_limits({m: limits_mg_l[m] for m in metals})
    try:
        result = wb.design_setpoint(water, limits, margin, rule=rule, effluent_tss_mg_l=tss)
    except wb.ModelRangeError as err:
        assert_refusal_is_the_model_range(err)
        counts["design refused: ionic strength"] += 1
        return
    counts["design solved"] += 1
    for low, high in result.windows:
        assert 4.0 <= low <= high <= 13.5
    if result.setpoint_ph is not None:
        assert any(low <= result.setpoint_ph <= high for low, high in result.windows)
        target = result.setpoint_ph
    elif result.stages:
        target = result.stages[0]["ph"]
    else:  # the pH nearest to meeting every target, where the headroom table is computed
        counts["design: no pH meets every target"] += 1
        target = result.table.attrs["ph"]
    assert 4.0 <= target <= 13.5
    if water.ph is None:
        return
    try:
        table = wb.daily_table(water, reagent, target, 100.0)
    except wb.InputError as err:
        _dose_refusal(err, counts, "daily_table")
        return
    counts["daily_table solved"] += 1
    assert np.isfinite(table[["dose_mg_l", "reagent_kg_d", "dry_sludge_kg_d"]].to_numpy()).all()


TINY_METAL_MG_L = _log_scale(1e-10, 1e-6)
DRAWN_PH = st.lists(PH, min_size=1, max_size=3)
PROPERTIES = {
    "every entry point": (
        every_entry_point,
        dict(kwargs=water_inputs(), drawn_ph=DRAWN_PH, speciate_ph=PH),
    ),
    "residual curve": (residual_curve_only, dict(kwargs=water_inputs(), drawn_ph=DRAWN_PH)),
    "scalar and array": (
        scalar_and_array_agree,
        dict(kwargs=water_inputs(), ph=st.lists(PH, min_size=2, max_size=3)),
    ),
    "titration": (
        titration,
        dict(
            kwargs=water_inputs(measured_ph=PH),  # a dose follows from the measured pH
            reagent=st.sampled_from(("lime", "caustic", "quicklime", "magnesium_hydroxide", "soda_ash")),
            top_dose=_log_scale(1.0, 5_000.0),
            n_doses=st.integers(2, 12),
            target_ph=st.floats(6.0, 12.5),
        ),
    ),
    "design": (
        design,
        dict(
            # at least one metal; a measured pH, so that the dose at the setpoint follows
            kwargs=water_inputs(st.dictionaries(st.sampled_from(list(METALS)), METAL_MG_L, min_size=1), PH),
            limits_mg_l=st.fixed_dictionaries({k: _log_scale(0.01, 100.0) for k in METALS}),
            margin=st.floats(0.1, 1.0),
            rule=st.sampled_from(("widest_centre", "max_headroom")),
            tss=st.none() | st.floats(0.0, 100.0),
            reagent=st.sampled_from(("lime", "caustic", "quicklime", "magnesium_hydroxide", "soda_ash")),
        ),
    ),
    "tiny metals": (
        tiny_metals_stay_dissolved,
        dict(
            kwargs=water_inputs(st.dictionaries(st.sampled_from(list(METALS)), TINY_METAL_MG_L, min_size=1)),
            drawn_ph=DRAWN_PH,
        ),
    ),
}


# ---------------------------------------------------------------------------------------------- running
SHARDS = 2  # the examples of each property are split over two processes (CI has two cores)


def _run_shard(name: str, examples: int, shard: int) -> tuple[Counter, str | None]:
    """Run one shard of a property (in a worker process); returns the counts and the failure report, if any."""
    prop, strategies = PROPERTIES[name]
    counts = Counter()

    @seed(zlib.crc32(name.encode()) + shard)  # a distinct, fixed example sequence per property and shard
    @_settings(examples)
    @given(**strategies)
    def inner(**drawn):
        prop(**drawn, counts=counts)

    try:
        inner()
    except BaseException as err:  # reported by the parent process (exceptions need not pickle)
        return counts, "".join(traceback.format_exception(err))
    return counts, None


def run_property(name: str, examples: int) -> Counter:
    """Run ``examples`` examples of a property, split over SHARDS processes; fail with every shard's report."""
    per_shard = -(-examples // SHARDS)
    with ProcessPoolExecutor(SHARDS, mp_context=multiprocessing.get_context("fork")) as pool:
        results = list(pool.map(_run_shard, [name] * SHARDS, [per_shard] * SHARDS, range(SHARDS)))
    counts = sum((c for c, _ in results), Counter())
    print(f"{name}: {dict(counts)}")
    failures = [f"shard {k}:\n{report}" for k, (_, report) in enumerate(results) if report]
    if failures:
        pytest.fail("\n\n".join(failures), pytrace=False)
    return counts


@pytest.mark.slow
def test_every_valid_water_through_every_entry_point_is_verified_or_refused_for_ionic_strength():
    counts = run_property("every entry point", EXAMPLES["every entry point"])
    # not vacuous: most drawn waters are solved, not refused
    assert counts["waters"] >= EXAMPLES["every entry point"] * SCALE
    assert counts["residual_curve solved"] >= 0.7 * counts["waters"]
    assert counts["speciate solved"] >= 0.8 * counts["waters"]
    assert counts["charge balance solved"] >= 0.8 * counts["waters"]


@pytest.mark.slow
def test_residual_curve_of_every_valid_water_is_verified_or_refused_for_ionic_strength():
    counts = run_property("residual curve", EXAMPLES["residual curve"])
    assert counts["waters"] >= EXAMPLES["residual curve"] * SCALE
    assert counts["residual_curve solved"] >= 0.7 * counts["waters"]


@pytest.mark.slow
def test_scalar_and_array_ph_give_the_same_residual_and_the_same_refusal():
    counts = run_property("scalar and array", EXAMPLES["scalar and array"])
    assert counts["compared"] >= 0.5 * counts["waters"]


@pytest.mark.slow
def test_metals_far_below_saturation_stay_dissolved_at_every_ph():
    counts = run_property("tiny metals", EXAMPLES["tiny metals"])
    assert counts["residual_curve solved"] >= 0.7 * counts["waters"]


SWEEP_MG_L = (1e-3, 1e-2, 0.1, 1.0, 10.0, 100.0, 1000.0, MAX_METAL_MG_L)
SWEEP_TEMPERATURE_C = (5.0, 25.0, 50.0)
SWEEP_PH = np.round(np.arange(0.0, 13.0001, 0.05), 2)  # pH 14 is beyond the model's range at 50 °C (pKw 13.3)


@pytest.mark.parametrize("metal", list(METALS))
def test_each_metal_alone_over_the_ph_scale_is_verified_in_both_solver_modes(metal):
    counts = Counter()
    for mg_l in SWEEP_MG_L:
        for temperature_c in SWEEP_TEMPERATURE_C:
            water = wb.Water(metals_mg_l={metal: mg_l}, temperature_c=temperature_c)
            counts["waters"] += 1
            try:
                residual_curve_verified(water, SWEEP_PH, counts)
                charge_balance_verified(water, counts)
            except Exception as err:
                err.add_note(f"water: {metal} {mg_l:g} mg/L alone at {temperature_c:g} °C")
                raise
    assert counts["residual_curve solved"] >= 0.8 * counts["waters"], dict(counts)
    assert counts["charge balance solved"] == counts["waters"], dict(counts)


@pytest.mark.slow
def test_reagent_dose_curve_of_every_valid_water_is_verified_and_caustic_never_lowers_the_ph():
    counts = run_property("titration", EXAMPLES["titration"])
    assert counts["waters"] >= EXAMPLES["titration"] * SCALE
    assert counts["titration solved"] >= 0.5 * counts["waters"]
    assert counts["dose_for_ph solved"] >= 0.1 * counts["waters"]  # many targets lie below the water's pH
    assert counts["reagent_ceiling_ph solved"] >= 0.3 * counts["waters"]


@pytest.mark.slow
def test_setpoint_design_of_every_valid_water_and_the_dose_at_its_setpoint_are_answers_or_clear_refusals():
    counts = run_property("design", EXAMPLES["design"])
    assert counts["waters"] >= EXAMPLES["design"] * SCALE
    assert counts["design solved"] >= 0.5 * counts["waters"]
    assert counts["daily_table solved"] >= 0.1 * counts["waters"]


def test_the_property_tests_draw_at_least_ten_thousand_waters():
    assert sum(EXAMPLES.values()) >= 10_000


EDGE_WATERS = {
    "pure water": {},
    "major ions only": dict(sodium_mg_l=46.0, chloride_mg_l=71.0),
    "a metal entered as 0 mg/L": dict(metals_mg_l={"Zn": 0.0, "Cu": 1.0}, sulfate_mg_l=100.0),
}


@pytest.mark.parametrize("name", list(EDGE_WATERS))
def test_waters_at_the_edge_of_the_input_space_are_solved_by_every_entry_point(name):
    water = wb.Water(**EDGE_WATERS[name])
    counts = Counter()
    assert residual_curve_verified(water, np.array(GRID_PH), counts) is not None
    assert speciate_verified(water, 7.0, counts) is not None
    charge_balance_verified(water, counts)
    assert counts["charge balance solved"] == 1
    table = wb.minimum_solubility(water)
    assert list(table.index) == list(water.metals_mg_l)
    for metal, influent in water.metals_mg_l.items():
        assert 0.0 <= table.loc[metal, "residual_mg_l"] <= influent
