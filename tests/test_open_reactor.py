"""An open (aerated) reactor: the water at equilibrium with the air's CO2, against closed-form textbook results
with the published constants typed in here (each source named beside its check)."""

import math

import numpy as np
import pytest
from iapws import IAPWS95
from iapws._iapws import _Kw
from scipy import optimize

import workbench as wb
from workbench.chemistry import open_system, tableau
from workbench.errors import InputError
from workbench.treatment import dose, influent

# Plummer & Busenberg (1982), Geochim. Cosmochim. Acta 46, 1011-1040, values at 25 °C, I = 0 (Table 1 and the
# ion-pair constants of the paper), typed in from the paper:
LOG_KH = -1.468  # CO2(g) + H2O = H2CO3*   [mol/(kg atm)]
LOG_K1 = -6.352  # H2CO3* = HCO3- + H+
LOG_K2 = -10.329  # HCO3- = CO3^2- + H+
LOG_KSP_CALCITE = -8.48  # CaCO3(s) = Ca^2+ + CO3^2-
LOG_K_CAHCO3 = 1.11  # Ca^2+ + HCO3- = CaHCO3+
# NOAA GML global annual mean CO2 of 2024 (Lan, Tans, Thoning, NOAA GML, co2_annmean_gl.txt, created
# 2025-09-05): 422.80 ± 0.10 µmol/mol of dry air
CO2_2024_UMOL_MOL = 422.80
LOG_PCO2 = math.log10(CO2_2024_UMOL_MOL * 1e-6)


def _kw_25c() -> float:
    """Kw at 25 °C from IAPWS R11-07 through the iapws package (independent of the workbench's own formula)."""
    t = 298.15
    return 10.0 ** -_Kw(IAPWS95(T=t, P=0.101325).rho, t)


def _open_carbonate(h: float) -> tuple[float, float, float]:
    """H2CO3*, HCO3-, CO3^2- at equilibrium with the air at [H+] = h (ideal solution). [mol/L]"""
    co2 = 10.0 ** (LOG_KH + LOG_PCO2)
    hco3 = co2 * 10.0**LOG_K1 / h
    return co2, hco3, hco3 * 10.0**LOG_K2 / h


def test_the_default_air_is_the_noaa_2024_global_mean():
    # NOAA GML global annual mean 2024: 422.80 ± 0.10 µmol/mol; log pCO2 = -3.374 at 1 atm of dry air
    air = influent.atmospheric_co2()
    assert air.mole_fraction_umol_mol == 422.80 and air.uncertainty_umol_mol == 0.10 and air.year == 2024
    assert air.log_pco2 == pytest.approx(LOG_PCO2, abs=1e-12)
    assert air.log_pco2 == pytest.approx(-3.374, abs=5e-4)
    assert air.source == "noaa_gml_co2_global"


def test_pure_water_in_air_has_the_textbook_ph():
    # closed form (e.g. Stumm & Morgan, Aquatic Chemistry, ch. 4): [H+]^2 = K1 K_H pCO2 + Kw -> pH 5.60
    h = math.sqrt(10.0 ** (LOG_K1 + LOG_KH + LOG_PCO2) + _kw_25c())
    tab = tableau.build(("CO3^2-",), 25.0, "fresh")
    eq = open_system.solve(
        tab, np.zeros(len(tab.components)), log_pco2=LOG_PCO2, log_kh=LOG_KH, activity="ideal"
    )
    assert eq.ph[0] == pytest.approx(-math.log10(h), abs=1e-3)  # the published constants' last digit
    assert eq.ph[0] == pytest.approx(5.60, abs=0.01)


@pytest.mark.parametrize("naoh_mmol_l", [0.1, 1.0])
def test_caustic_in_pure_water_under_air_is_the_closed_form_bicarbonate_solution(naoh_mmol_l):
    # NaOH in water at equilibrium with the air is a NaHCO3 / Na2CO3 solution: charge balance
    # Na + H = HCO3 + 2 CO3 + OH with the carbonate species from the air (closed form above); its alkalinity is
    # its sodium (CO2 exchange does not change it). Up to 1 mmol/L the NaCO3- pair (a memory constant in
    # data/thermo) holds under 2 % of the carbonate; at 10 mmol/L it moves the pH by 0.01, so it is not tested.
    water = wb.Water(ph=7.0)
    dose_mg_l = naoh_mmol_l * 39.997  # NaOH, 100 %
    curve = wb.dose_curve(water, "caustic", [dose_mg_l], purity=1.0, activity="ideal", reactor="open")
    na = (
        naoh_mmol_l / 1000.0 - curve.attrs["unmeasured_strong_acid_eq_l"]
    )  # the closure of pure water at pH 7
    kw = _kw_25c()

    def charge(ph):
        h = 10.0**-ph
        _, hco3, co3 = _open_carbonate(h)
        return na + h - hco3 - 2 * co3 - kw / h

    ph_ref = optimize.brentq(charge, 4.0, 11.0, xtol=1e-12)
    assert curve["pH"].iloc[0] == pytest.approx(ph_ref, abs=2e-3)  # the published constants' last digit
    tab, eq = dose.dose_equilibrium(
        water, "caustic", [dose_mg_l], purity=1.0, activity="ideal", reactor="open"
    )
    conc = dict(zip(tab.species, eq.conc[0], strict=True))
    alkalinity = conc["HCO3-"] + 2 * conc["CO3^2-"] + conc["OH-"] - conc["H+"]
    alkalinity += 2 * conc.get("NaCO3-", 0.0) + conc.get("NaHCO3(aq)", 0.0)
    assert alkalinity == pytest.approx(na, rel=1e-8)


def test_every_point_of_an_open_lime_curve_holds_the_airs_co2():
    # pCO2 = {H2CO3*} / K_H at every dose, K_H of Plummer & Busenberg (1982) typed in above
    water = wb.Water(metals_mg_l={"Zn": 20.0, "Ni": 5.0}, sulfate_mg_l=300.0, calcium_mg_l=40.0, ph=5.5)
    doses = np.linspace(0.0, 120.0, 25)
    tab, eq = dose.dose_equilibrium(water, "lime", doses, reactor="open")
    log_pco2 = open_system.co2_activity_log(eq) - LOG_KH
    np.testing.assert_allclose(log_pco2, LOG_PCO2, rtol=0, atol=1e-9)
    h2co3 = eq.conc[:, tab.species.index("H2CO3")]
    np.testing.assert_allclose(np.log10(h2co3) - LOG_KH, LOG_PCO2, rtol=0, atol=1e-9)  # neutral: activity 1
    curve = wb.dose_curve(water, "lime", doses, reactor="open")
    assert curve.attrs["reactor"] == "open" and curve.attrs["pco2_atm"] == pytest.approx(10**LOG_PCO2)
    np.testing.assert_allclose(curve["pH"], eq.ph, rtol=0, atol=1e-12)
    assert np.all(np.diff(curve["pH"]) > -1e-9)
    assert any(w.startswith("Open reactor") for w in curve.attrs["warnings"])


def test_lime_in_an_open_reactor_stops_at_the_calcite_air_ph():
    # Once calcite forms, more lime only makes calcite (Ca(OH)2 + CO2 = CaCO3 + H2O): the water is the
    # textbook calcite-water-air system. Closed form with Plummer & Busenberg (1982) constants, ion pairs
    # CaHCO3+ included, ideal solution: pH 8.18 at 422.8 µmol/mol (about 8.2-8.3 in textbooks for older air)
    kw = _kw_25c()

    def charge(ph):
        h = 10.0**-ph
        _, hco3, co3 = _open_carbonate(h)
        ca = 10.0**LOG_KSP_CALCITE / co3
        cahco3 = 10.0**LOG_K_CAHCO3 * ca * hco3
        return 2 * ca + cahco3 + h - hco3 - 2 * co3 - kw / h

    ph_ref = optimize.brentq(charge, 6.0, 11.0, xtol=1e-12)
    assert 8.1 < ph_ref < 8.4
    ceiling = wb.reagent_ceiling_ph(wb.Water(ph=7.0), "lime", activity="ideal", reactor="open")
    assert ceiling == pytest.approx(ph_ref, abs=2e-3)  # 1 in the last digit of the published log K values
    with pytest.raises(InputError, match="open reactor's air supplying the carbonate") as err:
        wb.dose_for_ph(wb.Water(ph=7.0), "lime", 9.0, reactor="open")
    assert err.value.field == "target_ph"


def test_aeration_strips_the_co2_of_a_carbonated_influent_and_every_result_says_which_reactor():
    # an influent at pH 6.4 with 150 mg/L alkalinity holds CO2 far above the air's: an open reactor strips it, so
    # the pH without reagent rises; above pH 8.3 the air's CO2 must be neutralised, so caustic to pH 9.5 needs more
    water = wb.Water(
        metals_mg_l={"Zn": 10.0}, alkalinity_mg_l_caco3=150.0, sodium_mg_l=140.0, sulfate_mg_l=100.0, ph=6.4
    )
    closed = wb.dose_curve(water, "caustic", [0.0])
    opened = wb.dose_curve(water, "caustic", [0.0], reactor="open")
    assert opened["pH"].iloc[0] > closed["pH"].iloc[0] + 1.0
    assert closed.attrs["reactor"] == "closed" and closed.attrs["pco2_atm"] is None
    d_closed = wb.dose_for_ph(water, "caustic", 9.5)
    d_open = wb.dose_for_ph(water, "caustic", 9.5, reactor="open")
    assert d_open > d_closed
    assert d_closed.reactor == "closed" and d_open.reactor == "open"
    assert d_open.pco2_atm == pytest.approx(10**LOG_PCO2)
    table = wb.daily_table(water, "caustic", 9.5, 100.0, reactor="open")
    assert table["reactor"].iloc[0] == "open" and table.attrs["reactor"] == "open"
    assert table["dose_mg_l"].iloc[0] == pytest.approx(float(d_open), rel=1e-9)
    sludge = wb.sludge_at_dose(water, "caustic", 100.0, reactor="open")
    assert sludge.attrs["reactor"] == "open"


def test_the_open_solution_is_the_closed_solution_at_the_carbonate_it_takes_up():
    # the change of basis is exact: a closed solve with the carbonate total the open one reports gives the same
    # pH and species (the closed tableau's own constants), and the CO2 condition holds there too
    water = wb.Water(metals_mg_l={"Cu": 5.0, "Zn": 8.0}, sulfate_mg_l=200.0, calcium_mg_l=30.0, ph=6.0)
    tab, eq = dose.dose_equilibrium(water, "lime", [20.0, 60.0], reactor="open")
    from workbench.chemistry import solver

    closed = solver.solve(tab, eq.totals, None, ph_guess=7.0)
    np.testing.assert_allclose(closed.ph, eq.ph, rtol=0, atol=1e-8)
    np.testing.assert_allclose(open_system.co2_activity_log(closed) - LOG_KH, LOG_PCO2, rtol=0, atol=1e-8)


@pytest.mark.parametrize(
    "kwargs, field, allowed",
    [
        ({"reactor": "aerated"}, "reactor", "allowed closed"),
        ({"reactor": None}, "reactor", "allowed closed"),
        ({"reactor": "open", "pco2_atm": 0.0}, "pco2_atm", "greater than 0 and at most 1"),
        ({"reactor": "open", "pco2_atm": 2.0}, "pco2_atm", "greater than 0 and at most 1"),
        ({"reactor": "open", "pco2_atm": math.nan}, "pco2_atm", "greater than 0 and at most 1"),
        ({"pco2_atm": 0.01}, "pco2_atm", "reactor='open' only"),
    ],
)
def test_reactor_options_are_checked(kwargs, field, allowed):
    with pytest.raises(InputError) as err:
        wb.dose_curve(wb.Water(ph=7.0), "lime", [10.0], **kwargs)
    assert err.value.field == field and allowed in err.value.allowed
