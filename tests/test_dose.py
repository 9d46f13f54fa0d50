"""Reagent dose, titration curve, pH ceiling, sludge and fluoride, against published values and analytical
formulas (each source named beside its check)."""

import math

import numpy as np
import pandas as pd
import periodictable
import pytest
from iapws import IAPWS95
from iapws._iapws import _Dielectric, _Kw

import workbench as wb
from workbench.chemistry import database, solver, tableau
from workbench.chemistry.formula import element_counts
from workbench.errors import InputError
from workbench.figures import fig_titration
from workbench.scenario import demo_water
from workbench.treatment import dose, reagents
from workbench.treatment.water import METALS

# IUPAC standard atomic weights as shipped by the periodictable package (independent of data/atomic_weights.csv)
M_CAOH2 = periodictable.formula("Ca(OH)2").mass
M_NAOH = periodictable.formula("NaOH").mass
M_CACL2 = periodictable.formula("CaCl2").mass
M_CACO3 = periodictable.formula("CaCO3").mass
PURE_WATER = wb.Water(ph=7.0)


def _davies_log_gamma(z, ionic, temperature_c=25.0):
    """Davies (1962) with the Debye-Hückel A from IAPWS-95 density and the IAPWS permittivity (iapws package):
    A = 1.82483e6 rho^0.5 / (eps T)^1.5, rho in g/cm3 (the classical Debye-Hückel limiting-law constant)."""
    t = temperature_c + 273.15
    rho = IAPWS95(T=t, P=0.101325).rho
    a = 1.82483e6 * math.sqrt(rho / 1000.0) / (_Dielectric(rho, t) * t) ** 1.5
    s = math.sqrt(ionic)
    return -a * z * z * (s / (1 + s) - 0.3 * ionic)


# ------------------------------------------------------------------------------------------ saturated lime
@pytest.fixture(scope="module")
def lime_in_pure_water():
    doses = [2000.0, 5000.0, 20000.0]
    return {
        t: dose.dose_curve(wb.Water(ph=7.0, temperature_c=t), "lime", doses, purity=1.0) for t in (25.0, 35.0)
    }


def test_large_lime_dose_levels_at_saturated_lime_ph(lime_in_pure_water):
    # Bates, Bower & Smith (1956) J. Res. NBS 56, 305 (NBS pH standard): saturated Ca(OH)2 has pH 12.45 at 25 C
    curve = lime_in_pure_water[25.0]
    assert curve["pH"].to_numpy() == pytest.approx(12.45, abs=0.05)
    # beyond saturation more lime only adds undissolved solid: the level is flat
    assert np.ptp(curve["pH"].to_numpy()) < 1e-6
    assert dose.reagent_ceiling_ph(PURE_WATER, "lime") == pytest.approx(curve["pH"].iloc[-1], abs=1e-6)


def test_saturated_lime_level_falls_with_temperature(lime_in_pure_water):
    # Bates, Bower & Smith (1956): temperature coefficient -0.033 pH per C. Portlandite's enthalpy is a single
    # study (data/thermo/solids.csv), so the computed slope is held to +-40 % of the published one
    slope = (lime_in_pure_water[35.0]["pH"].iloc[-1] - lime_in_pure_water[25.0]["pH"].iloc[-1]) / 10.0
    assert -0.046 <= slope <= -0.020


# ------------------------------------------------------------------------------------------ stoichiometry
@pytest.fixture(scope="module")
def zinc_sulfate_water():
    # 1 mmol/L ZnSO4 at the pH of its own solution (computed), so nothing else is in the water
    zn_mg_l = periodictable.Zn.mass  # 1 mmol/L
    so4_mg_l = periodictable.formula("SO4").mass
    tab = tableau.build(("Zn^2+", "SO4^2-"), 25.0, "fresh")
    data = database.load()
    t = np.zeros(len(tab.components))
    t[tab.component("Zn^2+")] = zn_mg_l / 1000.0 / data.input_molar_mass["Zn^2+"]
    t[tab.component("SO4^2-")] = so4_mg_l / 1000.0 / data.input_molar_mass["SO4^2-"]
    ph = float(solver.solve(tab, t, None, ph_guess=6.0).ph[0])
    water = wb.Water(metals_mg_l={"Zn": zn_mg_l}, sulfate_mg_l=so4_mg_l, ph=ph)
    target = float(wb.minimum_solubility(water).loc["Zn", "ph_min"])  # complete zinc precipitation
    return water, target


def test_zinc_sulfate_water_has_no_unmeasured_acid(zinc_sulfate_water):
    water, _ = zinc_sulfate_water
    # the analysis is a neutral salt at its own pH: the charge-balance closure is (almost) nothing
    assert abs(dose.raw_water_acidity(water).unmeasured_strong_acid_eq_l) < 1e-6


@pytest.mark.parametrize(
    ("reagent", "molar_mass", "hydroxide_per_unit"), [("lime", M_CAOH2, 2), ("caustic", M_NAOH, 1)]
)
def test_zinc_precipitation_takes_two_hydroxides_per_zinc(
    zinc_sulfate_water, reagent, molar_mass, hydroxide_per_unit
):
    # Zn2+ + 2 OH- = Zn(OH)2: 2 mmol/L OH- for 1 mmol/L Zn, i.e. 1 mmol/L Ca(OH)2 = 74.09 mg/L or 2 mmol/L NaOH
    # = 80.0 mg/L of pure reagent (molar masses from IUPAC atomic weights via periodictable)
    water, target = zinc_sulfate_water
    stoichiometric = 2.0 / hydroxide_per_unit * molar_mass
    assert stoichiometric == pytest.approx({"lime": 74.09, "caustic": 80.0}[reagent], abs=0.01)
    pure = dose.dose_for_ph(water, reagent, target, purity=1.0)
    # The model needs a little more, and says why: at pH ~9.6 the water keeps about 4e-5 mol/L free OH-
    # (10^(pH - pKw)), about 2 % of the 2 mmol/L; the rest, within 1.5 %, is the zinc left dissolved (under 1 % of
    # it) with the OH- its hydroxo complexes hold
    free_oh = 10.0 ** (target - _Kw(IAPWS95(T=298.15, P=0.101325).rho, 298.15))  # Kw: IAPWS R11-07 (iapws)
    assert pure / stoichiometric - 1.0 == pytest.approx(free_oh / 2e-3, abs=0.015)
    assert pure == pytest.approx(stoichiometric, rel=0.04)
    # purity scales the dose of product as sold inversely
    assert dose.dose_for_ph(water, reagent, target, purity=0.5) == pytest.approx(2.0 * pure, rel=1e-3)


# ------------------------------------------------------------------------------------------ analytical titration
def test_strong_acid_titrated_with_caustic_matches_analytical_curve():
    # 0.01 mol/L HCl titrated with NaOH, ideal solution: [H+] - [OH-] = Ca - Cb, so
    # [H+] = ((Ca - Cb) + sqrt((Ca - Cb)^2 + 4 Kw)) / 2 (the textbook strong acid / strong base curve), with Kw
    # at 25 C from IAPWS R11-07 through the iapws package
    acid = 0.01
    chloride_mg_l = acid * periodictable.Cl.mass * 1000.0
    water = wb.Water(chloride_mg_l=chloride_mg_l, ph=2.0)
    kw = 10.0 ** -_Kw(IAPWS95(T=298.15, P=0.101325).rho, 298.15)
    cb = np.concatenate(
        (np.linspace(0.0, 0.0099, 12), [0.00999, 0.01, 0.01001], np.linspace(0.0101, 0.02, 8))
    )
    # moles of NaOH per mg on the workbench's own molar-mass basis (abridged IUPAC weights, checked against
    # periodictable in test_reagents_data.py): at the equivalence point the pH moves by ~0.1 for a relative
    # dose error of 6e-6, the difference between the abridged and the full atomic weights
    doses = cb * reagents.get("caustic").molar_mass_g_mol * 1000.0
    curve = dose.dose_curve(water, "caustic", doses, purity=1.0, activity="ideal")
    d = acid - cb
    expected = -np.log10((d + np.sqrt(d * d + 4.0 * kw)) / 2.0)
    np.testing.assert_allclose(curve["pH"].to_numpy(), expected, rtol=0, atol=2e-3)


# ------------------------------------------------------------------------------------------ gypsum
def test_gypsum_forms_only_above_its_solubility_product():
    # Bennett & Adams (1972) Soil Sci. Soc. Am. Proc. 36, 288: gypsum Ksp (activity product) 2.58e-5 at 25 C
    log_ksp = math.log10(2.58e-5)
    water = wb.Water(sulfate_mg_l=4000.0, sodium_mg_l=1915.0, ph=7.0)  # sodium sulfate rinse, ~42 mmol/L
    doses = np.linspace(0.0, 6000.0, 25)
    tab, eq = dose.dose_equilibrium(water, "lime", doses, purity=1.0)
    gypsum = tab.solids.index("CaSO4.2H2O (gypsum)")
    ca, so4 = tab.species.index("Ca^2+"), tab.species.index("SO4^2-")
    with np.errstate(divide="ignore"):  # no calcium at dose 0: log 0 = -inf, below any Ksp
        log_iap = np.log10(eq.conc[:, ca] * eq.conc[:, so4]) + eq.log_gamma[:, ca] + eq.log_gamma[:, so4]
    present = eq.solid_amount[:, gypsum] > 0
    assert present.any() and (~present).any()
    # 2.58e-5 is printed to three figures (+-0.0008 in log10); data/thermo keeps log10 to three decimals
    assert np.all(np.abs(log_iap[present] - log_ksp) < 1e-3)
    assert np.all(log_iap[~present] < log_ksp + 1e-3)
    # it appears at the first dose where the activity product would otherwise exceed Ksp, and stays
    assert np.all(np.diff(present.astype(int)) >= 0)


# ------------------------------------------------------------------------------------------ ceilings
def test_magnesium_hydroxide_cannot_drive_pure_water_much_above_ph_10_5():
    # common practice: Mg(OH)2 is self-limiting, "pH near 9 in practice" (vendor data, secondary); the
    # saturated solution in pure water is about pH 10.4-10.5
    ceiling = dose.reagent_ceiling_ph(PURE_WATER, "magnesium_hydroxide")
    assert 10.3 <= ceiling <= 10.6
    with pytest.raises(InputError) as err:
        dose.dose_for_ph(PURE_WATER, "magnesium_hydroxide", 11.0)
    assert err.value.field == "target_ph"
    assert f"{ceiling:.2f}" in str(err.value)


def test_caustic_overshoots_where_lime_levels_off():
    water = demo_water()
    lime = dose.dose_curve(water, "lime", [3000.0, 6000.0, 12000.0])
    assert np.ptp(lime["pH"].to_numpy()) < 1e-6  # saturated with portlandite: flat
    ceiling = dose.reagent_ceiling_ph(water, "lime")
    assert lime["pH"].iloc[-1] == pytest.approx(ceiling, abs=1e-6)
    caustic = dose.dose_curve(water, "caustic", [3000.0, 6000.0, 12000.0])  # 50 % solution
    assert np.all(np.diff(caustic["pH"].to_numpy()) > 0.05)
    assert caustic["pH"].iloc[-1] > ceiling + 0.3
    assert dose.reagent_ceiling_ph(water, "caustic") is None
    assert dose.dose_for_ph(water, "caustic", ceiling + 0.3) > 0
    with pytest.raises(InputError, match="ceiling"):
        dose.dose_for_ph(water, "lime", ceiling + 0.3)


# ------------------------------------------------------------------------------------------ fluorite
def test_fluorite_solubility_in_pure_water_matches_its_ksp():
    # Harris, Quantitative Chemical Analysis, App. F (after Smith & Martell): CaF2 pKsp 10.50, Ksp 3.2e-11;
    # solubility in pure water s = (Ksp / (4 g2 g1^2))^(1/3), dissolved fluoride 2 s. A water holding 1 mmol/L
    # CaF2 is supersaturated and precipitates down to s.
    ksp = 10.0**-10.50
    water = wb.Water(calcium_mg_l=40.078, fluoride_mg_l=2 * 18.998, ph=7.0)
    ideal = dose.dose_curve(water, "lime", 0.0, activity="ideal")
    s = (ksp / 4.0) ** (1.0 / 3.0)
    # CaF+ (about 0.3 % of dissolved F here) and HF (0.02 % at pH 7) add a little
    assert ideal["fluoride_mg_l"].iloc[0] == pytest.approx(2 * s * periodictable.F.mass * 1000.0, rel=0.01)
    davies = dose.dose_curve(water, "lime", 0.0)
    ionic = 3.0 * s  # free Ca2+ and 2 F-
    for _ in range(5):
        g1, g2 = 10 ** _davies_log_gamma(1, ionic), 10 ** _davies_log_gamma(2, ionic)
        s_act = (ksp / (4.0 * g2 * g1 * g1)) ** (1.0 / 3.0)
        ionic = 3.0 * s_act
    assert davies["fluoride_mg_l"].iloc[0] == pytest.approx(
        2 * s_act * periodictable.F.mass * 1000.0, rel=0.01
    )
    assert s_act > s  # activity coefficients raise the solubility


def test_calcium_chloride_drives_residual_fluoride_down_as_the_solubility_product_says():
    # Harris App. F: Ksp(CaF2) = 10^-10.50. Sodium fluoride rinse, 1 mmol/L F; calcium chloride at increasing
    # doses, pH held at 8 with caustic. Ideal solution: (Ca_T - p)(F_T - 2 p)^2 = Ksp for the p mol/L of fluorite
    # formed; dissolved fluoride is F_T - 2 p, of which the ion pair CaF+ is part (its constant, tagged memory,
    # is read from data/thermo so that the check follows the table).
    ksp = 10.0**-10.50
    data = database.load()
    log_k_caf = next(r.log_k for r in data.rows if r.name == "CaF+")
    f_total = 1e-3
    water = wb.Water(fluoride_mg_l=f_total * 18.998 * 1000, sodium_mg_l=f_total * 22.990 * 1000, ph=7.0)
    cacl2_mg_l = np.array([100.0, 300.0, 1000.0])
    table = dose.fluoride_at_setpoint(water, "caustic", 8.0, cacl2_mg_l, activity="ideal")
    ca_total = cacl2_mg_l / 1000.0 / M_CACL2
    expected = []
    for ca in ca_total:
        # free F from the fluorite balance with CaF+: F_T = f + K ca_free f + 2 p, ca_free = Ca_T - p - K ca_free f
        lo, hi = 0.0, f_total
        for _ in range(200):  # bisection on free fluoride f
            f = 0.5 * (lo + hi)
            ca_free = ksp / (f * f)
            caf = 10**log_k_caf * ca_free * f
            p = (ca - ca_free - caf) if ca > ca_free + caf else 0.0
            if f + caf + 2 * p > f_total:
                hi = f
            else:
                lo = f
        expected.append((f + caf) * periodictable.F.mass * 1000.0)
    np.testing.assert_allclose(table["fluoride_mg_l"].to_numpy(), expected, rtol=0.01)
    assert np.all(np.diff(table["fluoride_mg_l"].to_numpy()) < 0)
    assert table["pH"].to_numpy() == pytest.approx(8.0, abs=0.01)


def test_lime_lowers_fluoride_along_the_curve_and_fluorite_is_saturated():
    # pickling rinse with fluoride: lime brings the calcium; where fluorite is present, a(Ca) a(F)^2 = Ksp
    # (Harris App. F, pKsp 10.50)
    water = wb.Water(
        metals_mg_l={"Zn": 20.0}, fluoride_mg_l=60.0, sulfate_mg_l=300.0, chloride_mg_l=200.0, ph=2.5
    )
    doses = np.linspace(0.0, 1500.0, 31)
    curve = dose.dose_curve(water, "lime", doses)
    assert curve["fluoride_mg_l"].iloc[-1] < 0.2 * 60.0
    assert np.all(np.diff(curve["fluoride_mg_l"].to_numpy()) <= 1e-9)
    tab, eq = dose.dose_equilibrium(water, "lime", doses)
    k = tab.solids.index("CaF2 (fluorite)")
    ca, f = tab.species.index("Ca^2+"), tab.species.index("F-")
    with np.errstate(divide="ignore"):  # no calcium at dose 0
        log_iap = (
            np.log10(eq.conc[:, ca])
            + eq.log_gamma[:, ca]
            + 2 * (np.log10(eq.conc[:, f]) + eq.log_gamma[:, f])
        )
    present = eq.solid_amount[:, k] > 0
    assert present.any()
    assert np.all(np.abs(log_iap[present] + 10.50) < 1e-6)
    # at the setpoint, extra calcium chloride lowers the residual further
    table = dose.fluoride_at_setpoint(water, "lime", 9.0, [0.0, 500.0])
    assert table["fluoride_mg_l"].iloc[1] < 0.8 * table["fluoride_mg_l"].iloc[0]


# ------------------------------------------------------------------------------------------ demo plant
FLOW_M3_D = 500.0


@pytest.fixture(scope="module")
def demo_daily():
    return dose.daily_table(demo_water(), ["lime", "caustic"], 9.0, FLOW_M3_D, solids_fraction=0.25)


def test_dose_for_ph_round_trip():
    water = demo_water()
    for reagent in ("lime", "caustic", "magnesium_hydroxide"):
        d = dose.dose_for_ph(water, reagent, 9.0)
        assert dose.dose_curve(water, reagent, d)["pH"].iloc[0] == pytest.approx(9.0, abs=0.01)


def test_demo_doses_to_ph_9_are_bounded_by_stoichiometry(demo_daily):
    water = demo_water()
    acidity = dose.raw_water_acidity(water)
    totals = water.totals()
    lime, caustic = demo_daily.loc["lime"], demo_daily.loc["caustic"]
    caustic_eq = caustic["dose_mg_l"] * caustic["purity"] / 1000.0 / M_NAOH
    lime_eq = 2.0 * lime["dose_mg_l"] * lime["purity"] / 1000.0 / M_CAOH2
    # lower bound: more base than the water's total acidity to pH 8.3 (pH rises monotonically with dose).
    # upper bound: from 8.3 to 9 at most every carbonate gives up one more proton (HCO3- -> CO3^2-), every
    # calcium precipitating as calcite from bicarbonate releases one, and every metal still dissolved takes z
    to_eq = 1.0 / (1000.0 * M_CACO3 / 2.0)
    metals_eq = sum(
        totals[METALS[k]] * database.load().charges[database.load().components.index(METALS[k])]
        for k in water.metals_mg_l
    )
    upper = acidity.total_acidity_mg_l_caco3 * to_eq + totals["CO3^2-"] + totals["Ca^2+"] + metals_eq
    assert acidity.total_acidity_mg_l_caco3 * to_eq < caustic_eq < upper
    # lime: at least what caustic needs (its calcium also precipitates carbonate as calcite, which releases
    # protons), at most that plus two equivalents per mol of carbonate removed
    assert caustic_eq <= lime_eq <= caustic_eq + 2.0 * totals["CO3^2-"]
    # kg/d at the flow: mg/L x m3/d / 1000
    for reagent in ("lime", "caustic"):
        row = demo_daily.loc[reagent]
        assert row["reagent_kg_d"] == pytest.approx(row["dose_mg_l"] * FLOW_M3_D / 1000.0, rel=1e-12)
        assert row["active_kg_d"] == pytest.approx(row["reagent_kg_d"] * row["purity"], rel=1e-12)
        assert row["wet_sludge_m3_d"] == pytest.approx(row["dry_sludge_kg_d"] / 0.25 / 1000.0, rel=1e-12)
    assert np.isnan(caustic["ceiling_ph"]) and lime["ceiling_ph"] > 12.0
    # 50 % caustic, SG 1.52 (data/reagents): product volume
    assert caustic["product_m3_d"] == pytest.approx(caustic["reagent_kg_d"] / 1520.0, rel=1e-12)
    assert lime["dry_sludge_kg_d"] > caustic["dry_sludge_kg_d"]  # lime brings calcite and inerts


def test_sludge_closes_the_metal_mass_balance():
    water = demo_water()
    d = dose.dose_for_ph(water, "lime", 9.0)
    table = dose.sludge_at_dose(water, "lime", d, flow_m3_d=FLOW_M3_D, solids_fraction=0.25)
    curve = dose.dose_curve(water, "lime", d)
    solids = table.drop(index=["total", "reagent inerts"])
    # element counts of each solid's formula (parsed here), on the workbench's own atomic-weight basis so that
    # the balance is exact (the weights themselves are checked against periodictable in test_data_integrity)
    mass = database.load().input_molar_mass
    for metal, influent in water.metals_mg_l.items():
        element = "Fe" if metal == "Fe(II)" else metal
        in_solids = sum(
            row["mol_l"] * element_counts(row["formula"]).get(element, 0.0) for _, row in solids.iterrows()
        )
        dissolved = curve[metal].iloc[0] / 1000.0 / mass[METALS[metal]]
        assert in_solids + dissolved == pytest.approx(influent / 1000.0 / mass[METALS[metal]], rel=1e-8), (
            metal
        )
    # calcium: influent + lime (95 % Ca(OH)2 by default) = dissolved + in solids
    ca_in = water.calcium_mg_l / 1000.0 / mass["Ca^2+"] + reagents.get("lime").active_mol_l(d, 0.95)
    ca_solids = sum(
        row["mol_l"] * element_counts(row["formula"]).get("Ca", 0.0) for _, row in solids.iterrows()
    )
    assert ca_solids + curve["calcium_mg_l"].iloc[0] / 1000.0 / mass["Ca^2+"] == pytest.approx(
        ca_in, rel=1e-8
    )
    # the table adds up, and the inerts are the lime's non-active part (data/reagents: 95 % Ca(OH)2)
    assert table.loc["total", "mg_l"] == pytest.approx(table["mg_l"].drop("total").sum(), rel=1e-12)
    assert table.loc["reagent inerts", "mg_l"] == pytest.approx(0.05 * d, rel=1e-12)
    assert table.loc["total", "mg_l"] == pytest.approx(curve["sludge_mg_l"].iloc[0], rel=1e-9)
    assert table.loc["total", "kg_d"] == pytest.approx(
        table.loc["total", "mg_l"] * FLOW_M3_D / 1000.0, rel=1e-12
    )


def test_curve_starts_where_the_supersaturated_influent_settles_and_is_vectorised():
    water = demo_water()
    doses = np.linspace(0.0, 800.0, 41)
    curve = dose.dose_curve(water, "lime", doses)
    # the analysis, every metal dissolved, holds its measured pH (the closure); the demo influent is
    # supersaturated with Cr(OH)3 and ferrihydrite, which form at zero dose and release their acidity
    assert dose.dose_curve(water, "lime", [0.0], solids="none")["pH"].iloc[0] == pytest.approx(water.ph, abs=1e-6)
    assert {"Cr(OH)3 (amorphous)", "Fe(OH)3 (ferrihydrite)"} <= set(curve.attrs["supersaturated_at_influent_ph"])
    assert curve["pH"].iloc[0] == pytest.approx(curve.attrs["influent_ph_with_solids"], abs=1e-9)
    assert curve["pH"].iloc[0] < water.ph - 0.05
    assert np.all(np.diff(curve["pH"].to_numpy()) > -1e-9)
    assert list(curve.columns[:2]) == ["dose_mg_l", "pH"] and "sludge_mg_l" in curve
    # order of doses does not matter; a single dose gives the same row as the curve
    shuffled = dose.dose_curve(water, "lime", doses[::-1])
    np.testing.assert_allclose(shuffled["pH"].to_numpy()[::-1], curve["pH"].to_numpy(), rtol=0, atol=1e-9)
    single = dose.dose_curve(water, "lime", doses[17])
    assert single["pH"].iloc[0] == pytest.approx(curve["pH"].iloc[17], abs=1e-9)


def test_titration_figure_shows_the_curve_setpoint_and_ceiling():
    water = demo_water()
    curve = dose.dose_curve(water, "lime", np.linspace(0.0, 1000.0, 21))
    fig = fig_titration(curve, target_ph=9.0, ceiling_ph=12.6)
    traces = fig.data
    np.testing.assert_allclose(traces[0].y, curve["pH"].to_numpy(), rtol=0, atol=0)
    np.testing.assert_allclose(traces[0].x, curve["dose_mg_l"].to_numpy(), rtol=0, atol=0)
    assert [t.y[0] for t in traces[1:]] == [9.0, 12.6]
    assert "mg/L" in fig.layout.xaxis.title.text and fig.layout.yaxis.title.text == "pH"


# ------------------------------------------------------------------------------------------ bad input
@pytest.mark.parametrize(
    ("call", "field", "fragment"),
    [
        (
            lambda w: dose.dose_curve(w, "limestone", 100.0),
            "reagent",
            "lime, quicklime, caustic, magnesium_hydroxide, soda_ash",
        ),
        (lambda w: dose.dose_for_ph(w, "sodium hydroxide", 9.0), "reagent", "known reagents are"),
        (lambda w: dose.dose_curve(w, "lime", -5.0), "dose_mg_l", "allowed 0 to"),
        (lambda w: dose.dose_curve(w, "lime", [10.0, math.nan]), "dose_mg_l", "allowed 0 to"),
        (lambda w: dose.dose_curve(w, "lime", 100.0, purity=0.0), "purity", "greater than 0 and at most 1"),
        (lambda w: dose.dose_curve(w, "lime", 100.0, purity=1.2), "purity", "greater than 0 and at most 1"),
        (lambda w: dose.dose_for_ph(w, "caustic", 9.0, purity=True), "purity", "mass fraction"),
        (lambda w: dose.dose_for_ph(w, "lime", 13.5), "target_ph", "ceiling"),
        (lambda w: dose.dose_for_ph(w, "lime", 5.0), "target_ph", "only raises the pH"),
        (lambda w: dose.dose_for_ph(w, "lime", 15.0), "target_ph", "allowed 0 to 14"),
        (lambda w: dose.sludge_at_dose(w, "lime", 100.0, flow_m3_d=-1.0), "flow_m3_d", "greater than 0"),
        (
            lambda w: dose.sludge_at_dose(w, "lime", 100.0, flow_m3_d=10.0, solids_fraction=1.5),
            "solids_fraction",
            "at most 1",
        ),
        (lambda w: dose.dose_curve(wb.Water(metals_mg_l={"Zn": 5.0}), "lime", 100.0), "ph", "measured pH"),
        (lambda w: dose.fluoride_at_setpoint(w, "lime", 9.0), "water.fluoride_mg_l", "fluoride"),
    ],
)
def test_bad_input_is_refused_and_changes_nothing(call, field, fragment):
    water = demo_water()
    facts = dict(reagents.load())
    with pytest.raises(InputError) as err:
        call(water)
    assert isinstance(err.value, ValueError)
    assert err.value.field == field
    assert fragment in str(err.value)
    assert dict(reagents.load()) == facts
    assert water == demo_water()


def test_sludge_table_columns_without_flow():
    table = dose.sludge_at_dose(demo_water(), "caustic", 400.0)
    assert list(table.columns) == ["formula", "kind", "metal", "mol_l", "mg_l"]
    assert "reagent inerts" not in table.index  # a solution brings no inerts
    assert isinstance(table, pd.DataFrame) and table.index.name == "solid"


def test_closure_holds_the_measured_ph_when_the_acids_chloride_precipitates_silver():
    """Found by the titration property test: a silver water at pH 9.9 whose unmeasured acid (entered as Cl-)
    precipitates AgCl, which carries none of the acid's charge until the silver is used up; the closure used to
    stop after its plain steps with 'did not converge'. The analysis, every metal dissolved, must hold its
    measured pH; the curve starts where its supersaturated solids have formed."""
    water = wb.Water(
        metals_mg_l={"Ag": 1321.94, "Pb": 1000.0, "Ni": 7.17, "Cu": 0.356, "Zn": 1.0},
        calcium_mg_l=1.0,
        ph=9.9358,
        temperature_c=23.85,
    )
    curve = wb.dose_curve(water, "caustic", [0.0, 1.0, 2.6])
    bare = wb.dose_curve(water, "caustic", [0.0], solids="none")
    assert bare["pH"].iloc[0] == pytest.approx(9.9358, abs=1e-9)
    assert curve["pH"].iloc[0] == pytest.approx(curve.attrs["influent_ph_with_solids"], abs=1e-9)
    assert (np.diff(curve["pH"].to_numpy()) > 0).all()


# ------------------------------------------------------------------------------------------ found by drawing waters
# Waters drawn by the property tests (tests/test_properties.py) on which dose_for_ph used to fail.
BRUCITE_BUFFERED = dict(magnesium_mg_l=3882.3461989535185, fluoride_mg_l=3882.3461989535185, temperature_c=9.5)
HYDROXYCARBONATE = dict(
    metals_mg_l={
        "Co": 0.0024148, "Zn": 5000.0, "Al": 3.97538e-07, "Cu": 1.0, "Ni": 0.0024148, "Ag": 167.208, "Pb": 691.719
    },
    edta_mg_l=0.0024148,
    sodium_mg_l=0.0024148,
    fluoride_mg_l=1.0,
    sulfate_mg_l=1.0,
    chloride_mg_l=0.0024148,
    citrate_mg_l=167.208,
    magnesium_mg_l=691.719,
    alkalinity_mg_l_caco3=691.719,
    ph=7.727121379455244,
    temperature_c=45.44803044167553,
)


def test_dose_for_a_ph_where_the_ph_eases_before_rising_again_is_the_smallest_dose_that_reaches_it():
    """With brucite present, lime exchanges Mg(OH)2 for fluorite (Mg2+ + 2 F- + Ca(OH)2 -> Mg(OH)2 + CaF2): the
    ionic strength falls and the pH eases by 0.02 over a range of doses before it rises again. That is the model's
    chemistry, not a solver error: the dose for a pH inside the dip is the first dose that reaches it."""
    water = wb.Water(**BRUCITE_BUFFERED, ph=6.507198881626396)
    grid = np.linspace(0.0, 20_000.0, 2001)
    ph = wb.dose_curve(water, "lime", grid)["pH"].to_numpy()
    top = int(np.argmax(np.diff(ph) < 0))  # where the pH first eases
    assert top > 0 and ph[top] - ph[top:].min() > 0.01 and ph[-1] > ph[top]  # eases by more than 0.01, rises again
    target = float(ph[top] - 0.005)  # crossed three times: on the way up, down into the dip, up again
    found = wb.dose_for_ph(water, "lime", target)
    first = grid[np.argmax(ph >= target)]
    assert grid[np.argmax(ph >= target) - 1] <= found <= first
    at = float(wb.dose_curve(water, "lime", [found])["pH"].iloc[0])
    assert at == pytest.approx(target, abs=2e-4)  # SEARCH_PH_TOL


@pytest.mark.parametrize("engine", ["compiled", "numpy"])
def test_solids_settle_where_zinc_hydroxide_and_hydroxycarbonate_together_fix_the_carbonate(engine):
    """At these lime doses Zn(OH)2 with hydrozincite fixes {CO3}/{OH}^2; saturating cerussite as well at the
    pH held before the step put Pb6(OH)8 4+ at 10^4.7 mol/L and the solver went round the same sets of solids
    (found by drawing waters). Each point now settles and verifies."""
    from test_properties import assert_verified

    water = wb.Water(**HYDROXYCARBONATE)
    setup = dose._setup(water, "lime", None)
    for active in (0.009602868133327577, 0.02063293592608744, 0.03024412760021134):
        totals = setup.totals(np.array([active]), np.array([0.0]))
        eq = solver.solve(setup.tab, totals, None, ph_guess=water.ph, engine=engine)
        assert_verified(setup.tab, totals, None, eq)
    assert wb.dose_for_ph(water, "lime", 9.5) > 0
