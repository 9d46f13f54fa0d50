"""Temperature: constants against published enthalpies and published solubility at 5, 25 and 50 °C.

Hydrolysis constants and hydroxide/oxide solubilities without a published enthalpy are estimated by holding the
reaction written with OH- (database.ThermoData.row_log_k; Baes & Mesmer 1981, Am. J. Sci. 281, 935: the first
hydrolysis enthalpy is "usually near the enthalpy of dissociation of water"; the minimum solubility "is expected
to have a small temperature dependence"). These tests check that estimate against every reaction in data/thermo
that has a measured enthalpy, and the model's answers against published temperature series.
"""

from __future__ import annotations

import math

import numpy as np
import pytest

import workbench as wb
from workbench.chemistry import database
from workbench.chemistry import water_properties as wp

TEMPERATURES = (5.0, 25.0, 50.0)


def _estimate_error(w: float, delta_h: float, t: float) -> float:
    """log K change 25 C -> t by the estimate minus the change by the published enthalpy (van 't Hoff)."""
    estimated = w * (float(wp.pkw(25.0)) - float(wp.pkw(t)))
    published = float(wp.van_t_hoff(0.0, delta_h, t))
    return estimated - published


def test_the_estimate_against_every_published_hydrolysis_and_hydroxide_enthalpy():
    # the measured enthalpies of data/thermo (IUPAC SC-Database entries, Liu & Millero 1999, Brown & Ekberg) are
    # the outside data; the accuracy stated in data/thermo/README.md section 9 must hold for every one of them
    data = database.load()
    checked = 0
    for i, row in enumerate(data.rows):
        w = data.hydrolysis_release[i]
        if w == 0 or not math.isfinite(row.delta_h_kj_mol):
            continue
        for t in (5.0, 50.0):
            err = abs(_estimate_error(w, row.delta_h_kj_mol, t))
            first_step = row.table == "aqueous" and w == 1
            bound = 0.45 if first_step else 0.5 * abs(w)
            assert err <= bound, (
                f"{row.name} at {t:g} °C: estimate off by {err:.2f} log units (bound {bound})"
            )
        checked += 1
    assert checked >= 30  # not vacuous: the hydrolysis rows with an enthalpy, solids included


def test_only_rows_without_an_enthalpy_are_estimated_and_results_say_which():
    data = database.load()
    for i in np.flatnonzero(data.estimated_water):
        assert not math.isfinite(data.rows[i].delta_h_kj_mol)
    warm = wb.Water(metals_mg_l={"Zn": 10.0}, ph=7.0, temperature_c=40.0)
    warnings = " ".join(wb.residual_curve(warm, [9.0]).attrs["warnings"])
    assert "Zn(OH)2(aq)" in warnings and "estimated" in warnings and "Baes & Mesmer" in warnings
    assert not any(
        "estimated" in w
        for w in wb.residual_curve(wb.Water(metals_mg_l={"Zn": 10.0}), [9.0]).attrs["warnings"]
    )


def _ph_min(metal: str, t: float) -> tuple[float, float]:
    water = wb.Water(
        metals_mg_l={metal: 60.0 if metal == "Pb" else 10.0},
        ph=4.0,
        sodium_mg_l=460.0,
        sulfate_mg_l=960.0,
        temperature_c=t,
    )
    row = wb.minimum_solubility(water, ph_range=(4.0, 13.5)).loc[metal]
    return float(row["ph_min"]), float(row["residual_mg_l"])


# ΔpKw from IAPWS R11-07 is -0.74 (5 -> 25 °C) and -0.73 (25 -> 50 °C). Where every species bounding the minimum
# moves by the estimate, the minimum moves with pKw; measured enthalpies move it further: CuOH+ (35 kJ/mol) and
# CoOH+ (34) by about 0.1, PbOH+ (24) and the lead polynuclears by up to 0.5, Al(OH)4- (177.6 against 223 for the
# estimate) by about 0.1 the other way.
SHIFT_TOLERANCE = {"Pb": 0.6}


@pytest.mark.parametrize("metal", ["Cu", "Ni", "Zn", "Cd", "Pb", "Cr", "Al", "Mn", "Co", "Ag", "Fe(II)"])
def test_the_minimum_solubility_ph_falls_with_temperature_as_pkw(metal):
    ph = [_ph_min(metal, t)[0] for t in TEMPERATURES]
    d_pkw = [float(wp.pkw(25.0) - wp.pkw(5.0)), float(wp.pkw(50.0) - wp.pkw(25.0))]
    tol = SHIFT_TOLERANCE.get(metal, 0.25)
    assert ph[1] - ph[0] == pytest.approx(d_pkw[0], abs=tol), ph
    assert ph[2] - ph[1] == pytest.approx(d_pkw[1], abs=tol), ph


# Liu & Millero 1999 (Geochim. Cosmochim. Acta 63, 3487), abstract: log K*Fe(OH)3 = -13.486 + 5254/T,
# log beta1..4* = 2.517 - 1320/T, 0.4511 - 1996/T, -0.2965 - 4086/T, 4.4466 - 7980/T at I = 0 (T in K),
# fitted to iron(III) hydroxide solubility measured at 5-50 °C
LIU_MILLERO = ((-13.486, 5254.0), (2.517, -1320.0), (0.4511, -1996.0), (-0.2965, -4086.0), (4.4466, -7980.0))


def _liu_millero_log_solubility(t: float, ph: float) -> float:
    tk = t + 273.15
    k, *betas = (a + b / tk for a, b in LIU_MILLERO)
    h = 10.0**-ph
    return k + math.log10(h**3 + sum(10.0**b * h ** (2 - q) for q, b in enumerate(betas)))


def test_ferrihydrite_minimum_moves_as_the_published_iron_solubility():
    ph = [_ph_min("Fe", t)[0] for t in TEMPERATURES]
    grid = np.arange(5.0, 11.0, 0.001)
    published = [grid[np.argmin([_liu_millero_log_solubility(t, p) for p in grid])] for t in TEMPERATURES]
    # published: 8.76, 8.04, 7.26 (shifts -0.72 and -0.78)
    assert ph[1] - ph[0] == pytest.approx(published[1] - published[0], abs=0.1)
    assert ph[2] - ph[1] == pytest.approx(published[2] - published[1], abs=0.1)


def test_iron_at_neutral_ph_is_more_soluble_in_cold_water_as_published():
    # Liu & Millero 1999: "The solubility at 5 degrees C is considerably higher than at 25 degrees C at neutral pH"
    for ph in (7.0, 8.0):
        ours = []
        for t in TEMPERATURES:
            water = wb.Water(metals_mg_l={"Fe": 5.0}, sodium_mg_l=230.0, chloride_mg_l=355.0, temperature_c=t)
            ours.append(math.log10(wb.residual_curve(water, [ph])["Fe"].iloc[0] / 1000.0 / 55.845))
        theirs = [_liu_millero_log_solubility(t, ph) for t in TEMPERATURES]
        assert ours[0] > ours[1] > ours[2]
        assert ours[0] - ours[1] == pytest.approx(theirs[0] - theirs[1], abs=0.3)
        assert ours[1] - ours[2] == pytest.approx(theirs[1] - theirs[2], abs=0.3)


def _log_activity(result, species: str) -> float:
    return float(result.species.loc[species, "log_activity"])


def test_otavite_solubility_product_at_5_25_and_50_c():
    # Stipp, Parks, Nordstrom & Leckie 1993 (Geochim. Cosmochim. Acta 57): pKsp 12.4, 12.1, 12.2 (+/- 0.1) at 5,
    # 25, 50 °C; an independent study ('Solid-solute phase equilibria XI', J. Solution Chem.) gives -12.01 at 25 °C
    expected = {5.0: -12.4, 25.0: -12.1, 50.0: -12.2}
    for t, log_ksp in expected.items():
        water = wb.Water(
            metals_mg_l={"Cd": 5.0}, alkalinity_mg_l_caco3=200.0, ph=8.3, sodium_mg_l=100.0, temperature_c=t
        )
        one = wb.speciate(water, 8.5)
        assert "CdCO3 (otavite)" in one.solids.index
        iap = _log_activity(one, "Cd^2+") + _log_activity(one, "CO3^2-")
        assert iap == pytest.approx(log_ksp, abs=0.05), t
        if t == 25.0:
            assert iap == pytest.approx(-12.01, abs=0.15)


def test_gibbsite_aluminate_solubility_at_5_25_and_50_c():
    # Wesolowski 1992 (Geochim. Cosmochim. Acta 56, 1065), abstract: Al(OH)4- = Al(OH)3(gibbsite) + OH-,
    # log K = 1.143, dH = -22.5 kJ/mol, dCp = -148 J/K/mol at 25 °C; precision about 0.02 log units. With pKw
    # (IAPWS R11-07): gibbsite + H2O = Al(OH)4- + H+ has log K -16.14, -15.14, -14.08 at 5, 25, 50 °C.
    def published(t: float) -> float:
        tk, t0, r = t + 273.15, 298.15, 8.314462618
        log_k4 = (
            1.143
            + 22500.0 / (r * math.log(10)) * (1 / tk - 1 / t0)
            + (-148.0) / (r * math.log(10)) * (t0 / tk - 1 + math.log(tk / t0))
        )
        return -log_k4 - float(wp.pkw(t))

    for t in TEMPERATURES:
        water = wb.Water(metals_mg_l={"Al": 20.0}, sodium_mg_l=230.0, chloride_mg_l=355.0, temperature_c=t)
        one = wb.speciate(water, 10.0, solids="aged")
        assert "Al(OH)3 (gibbsite)" in one.solids.index
        log_k = _log_activity(one, "Al(OH)4-") - 10.0
        assert log_k == pytest.approx(published(t), abs=0.1), t


def test_crystalline_nickel_hydroxide_solubility_moves_as_measured():
    # beta-Ni(OH)2 solubility measured 0-200 °C (Oak Ridge study in J. Coord. Chem., OSTI 1055155), abstract:
    # log *Ks 11.67 at 25 °C, dH -82.1 +/- 0.8 kJ/mol, dCp 0: log *Ks changes by +1.03 (25 -> 5 °C) and -1.11
    # (25 -> 50 °C). Its 25 °C value differs from this table's (Brown & Ekberg 10.96, a data choice recorded in
    # data/thermo/README.md); the temperature dependence is what is tested here.
    log_ks = []
    for t in TEMPERATURES:
        water = wb.Water(metals_mg_l={"Ni": 50.0}, sodium_mg_l=46.0, chloride_mg_l=71.0, temperature_c=t)
        one = wb.speciate(water, 8.0, solids="aged")
        assert "beta-Ni(OH)2 (theophrastite)" in one.solids.index
        log_ks.append(_log_activity(one, "Ni^2+") + 2 * 8.0)
    assert log_ks[0] - log_ks[1] == pytest.approx(1.03, abs=0.15)
    assert log_ks[2] - log_ks[1] == pytest.approx(-1.11, abs=0.15)


@pytest.mark.parametrize("metal", ["Cu", "Ni", "Zn", "Cd", "Cr", "Fe", "Al", "Mn", "Co"])
def test_the_lowest_residual_changes_little_with_temperature(metal):
    # Baes & Mesmer 1981: the solid <=> M(OH)z(aq) equilibrium "which usually determines the minimum solubility
    # of the solid, is expected to have a small temperature dependence": within a factor of 5 from 5 to 50 °C
    # (it spread 253-fold for Cd while hydrolysis constants were held at 25 °C). Silver is not such a case: its
    # minimum lies between Ag+ and Ag(OH)2-, and its oxide has a measured enthalpy (-21.8 kJ/mol).
    residuals = [_ph_min(metal, t)[1] for t in TEMPERATURES]
    assert max(residuals) / min(residuals) <= 5.0, residuals
