"""Influent acidity, supersaturation and ion balance: the metals of an analysis count in full, a measured hot
peroxide acidity sizes the unmeasured acid, and an analysis that does not balance is reported. Each check names
its outside source."""

import math

import periodictable
import pytest

import workbench as wb
from workbench.treatment import dose, influent

M_CAOH2 = periodictable.formula("Ca(OH)2").mass  # IUPAC atomic weights through the periodictable package
M_NAOH = periodictable.formula("NaOH").mass
CACO3_PER_EQ = periodictable.formula("CaCO3").mass / 2.0  # 50.04 mg CaCO3 per meq

# The acid mine drainage water of the issue: Fe(III) 200, Al 50, Zn 20, Mn 15, Cu 5 mg/L, sulfate 3000 mg/L, pH 2.8
AMD = dict(
    metals_mg_l={"Fe": 200.0, "Al": 50.0, "Zn": 20.0, "Mn": 15.0, "Cu": 5.0}, sulfate_mg_l=3000.0, ph=2.8
)


def kirby_cravotta_acidity(ph, fe2=0.0, fe3=0.0, mn=0.0, al=0.0):
    """Calculated acidity, mg/L as CaCO3 (Kirby & Cravotta 2005, Applied Geochemistry 20, 1920-1940, abstract):
    50 {1000 10^-pH + [2 Fe(II) + 3 Fe(III)]/56 + 2 Mn/55 + 3 Al/27}, metals in mg/L."""
    return 50.0 * (1000.0 * 10.0**-ph + (2 * fe2 + 3 * fe3) / 56.0 + 2 * mn / 55.0 + 3 * al / 27.0)


def lime_as_caco3(dose_mg_l):
    """A dose of 100 % Ca(OH)2 as mg/L CaCO3 (2 eq per mol)."""
    return dose_mg_l / M_CAOH2 * 2.0 * CACO3_PER_EQ


# ------------------------------------------------------------------------------------------ metals count in full
def test_amd_lime_demand_to_ph_8_3_meets_the_hand_acidity():
    # Kirby & Cravotta (2005): 920 mg/L as CaCO3 for this water (958 with Zn and Cu at 2 eq/mol). Tolerance
    # -5 % / +25 %: the formula leaves out bisulfate (HSO4-: 3000 mg/L sulfate at pH 2.8 holds several meq/L) and
    # counts Fe and Al as if unhydrolysed at the sample pH; its authors say the errors "tend to approximately
    # cancel". The model may exceed it by the bisulfate but must not fall short: the earlier closure, which let
    # 150 mg/L of the Fe(III) count as already precipitated, gave 597 (-35 %) and fails here.
    hand = kirby_cravotta_acidity(2.8, fe3=200.0, mn=15.0, al=50.0)
    assert hand == pytest.approx(920.0, abs=0.5)
    water = wb.Water(**AMD)
    lime = wb.dose_for_ph(water, "lime", 8.3, purity=1.0)
    assert 0.95 * hand <= lime_as_caco3(lime) <= 1.25 * hand
    assert lime_as_caco3(lime) == pytest.approx(958.0, rel=0.05)  # with Zn and Cu at 2 eq/mol
    acidity = dose.raw_water_acidity(water)
    assert acidity.total_acidity_mg_l_caco3 == pytest.approx(lime_as_caco3(lime), rel=2e-3)


def test_amd_result_says_it_is_supersaturated_and_its_analysis_does_not_balance():
    water = wb.Water(**AMD)
    curve = wb.dose_curve(water, "lime", [0.0, 300.0])
    over = curve.attrs["supersaturated_at_influent_ph"]
    assert "Fe(OH)3 (ferrihydrite)" in over and over["Fe(OH)3 (ferrihydrite)"] > 0
    assert curve["pH"].iloc[0] == pytest.approx(curve.attrs["influent_ph_with_solids"], abs=1e-9)
    assert curve.attrs["influent_ph_with_solids"] < 2.8  # ferrihydrite releases its acid at zero dose
    assert any(
        "supersaturated at its pH 2.8 with Fe(OH)3 (ferrihydrite), SI +" in w for w in curve.attrs["warnings"]
    )
    # no cation beside the metals and H+ is given: the sulfate is unbalanced, and the result says so
    assert any(w.startswith("The analysis does not balance") for w in curve.attrs["warnings"])
    d = wb.dose_for_ph(water, "lime", 8.3)
    assert d.acidity_basis == "measured pH" and "Fe(OH)3 (ferrihydrite)" in d.supersaturated_at_influent_ph


def test_an_undersaturated_influent_starts_its_curve_at_the_measured_ph():
    water = wb.Water(metals_mg_l={"Zn": 5.0, "Ni": 2.0}, sulfate_mg_l=100.0, sodium_mg_l=40.0, ph=6.0)
    curve = wb.dose_curve(water, "caustic", [0.0, 10.0])
    assert curve.attrs["supersaturated_at_influent_ph"] == {}
    assert curve["pH"].iloc[0] == pytest.approx(6.0, abs=1e-9)


# ------------------------------------------------------------------------------------------ measured acidity
@pytest.mark.parametrize("reagent, molar_mass, eq_per_mol", [("lime", M_CAOH2, 2), ("caustic", M_NAOH, 1)])
@pytest.mark.parametrize("acidity", [920.0, 400.0])
def test_a_water_with_a_measured_hot_acidity_titrates_to_ph_8_3_with_that_much_base(
    reagent, molar_mass, eq_per_mol, acidity
):
    # Standard Methods 2310 B / EPA 305.1 (NEMI summary): hot peroxide acidity is the strong base that brings
    # the oxidised, CO2-free sample to pH 8.2-8.3. For a water with neither carbonate nor Fe(II) nor Mn the
    # closed reactor's dose to pH 8.3 is that base; accuracy of the dose search: 0.0002 pH, i.e. 0.2 %.
    water = wb.Water(
        metals_mg_l={"Fe": 200.0, "Al": 50.0, "Zn": 20.0, "Cu": 5.0},
        sulfate_mg_l=3000.0,
        ph=2.8,
        acidity_mg_l_caco3=acidity,
    )
    d = wb.dose_for_ph(water, reagent, 8.3, purity=1.0)
    base_as_caco3 = d / molar_mass * eq_per_mol * CACO3_PER_EQ
    assert base_as_caco3 == pytest.approx(acidity, rel=2e-3)
    assert d.acidity_basis == "measured acidity"
    found = dose.raw_water_acidity(water)
    assert found.basis == "measured acidity"
    assert found.hot_acidity_mg_l_caco3 == pytest.approx(acidity, rel=1e-9)


def test_the_measured_acidity_is_what_the_metals_and_ph_give_when_they_agree():
    # Cravotta & Kirby (2004): the hot acidity is comparable to the acidity computed from the initial pH and the
    # metals minus the alkalinity. A water whose acidity is the model's own hot acidity at its pH has the same
    # unmeasured acid either way, and holds its measured pH with it.
    by_ph = dose.raw_water_acidity(wb.Water(**AMD))
    by_acidity = dose.raw_water_acidity(wb.Water(**AMD, acidity_mg_l_caco3=by_ph.hot_acidity_mg_l_caco3))
    assert by_acidity.unmeasured_strong_acid_eq_l == pytest.approx(
        by_ph.unmeasured_strong_acid_eq_l, rel=1e-8
    )
    assert by_acidity.ph_as_analysed == pytest.approx(2.8, abs=1e-6)
    assert not any("disagree" in w for w in by_acidity.warnings)
    # an acidity far from the pH's is used, and the disagreement reported
    off = dose.raw_water_acidity(wb.Water(**AMD, acidity_mg_l_caco3=400.0))
    assert off.ph_as_analysed > 3.3 and any("disagree" in w for w in off.warnings)


def test_hot_acidity_counts_ferrous_iron_and_manganese_as_oxidised():
    # Kirby & Cravotta (2005): Fe(II) and Mn count 2 eq/mol in the hot (peroxide) acidity. A ferrous,
    # manganiferous sulfate water at pH 3.0: 50 (1 + 2 100/56 + 2 20/55) = 264.9 mg/L as CaCO3. Tolerance 10 %:
    # the formula leaves out bisulfate and the ion pairs that the model counts.
    water = wb.Water(metals_mg_l={"Fe(II)": 100.0, "Mn": 20.0}, sulfate_mg_l=500.0, ph=3.0)
    hand = kirby_cravotta_acidity(3.0, fe2=100.0, mn=20.0)
    assert hand == pytest.approx(264.9, abs=0.1)
    assert dose.raw_water_acidity(water).hot_acidity_mg_l_caco3 == pytest.approx(hand, rel=0.10)


def test_the_hot_acidity_of_a_bicarbonate_water_is_minus_its_alkalinity():
    # Kirby & Cravotta (2004, 2005): hot acidity is a net acidity, "= measured alkalinity - calculated acidity"
    # with the sign reversed; a water whose only acid-base species are carbonate and a little H+ has a net
    # acidity of minus its alkalinity (the CO2 is boiled off). The measured alkalinity is used consistently: the
    # same water titrated with acid to pH 4.5 gives it back (mineral acidity = -alkalinity, within the
    # end point's 1 %: some HCO3- is left at pH 4.5 and some H+ added).
    water = wb.Water(
        sodium_mg_l=46.0, calcium_mg_l=40.0, sulfate_mg_l=96.0, alkalinity_mg_l_caco3=100.0, ph=7.8
    )
    found = dose.raw_water_acidity(water)
    assert found.hot_acidity_mg_l_caco3 == pytest.approx(-100.0, rel=0.01)
    assert found.mineral_acidity_mg_l_caco3 == pytest.approx(-100.0, rel=0.01)
    # negative measured acidity accepted: a net alkaline water
    alkaline = dose.raw_water_acidity(
        wb.Water(
            sodium_mg_l=46.0,
            calcium_mg_l=40.0,
            sulfate_mg_l=96.0,
            alkalinity_mg_l_caco3=100.0,
            ph=7.8,
            acidity_mg_l_caco3=found.hot_acidity_mg_l_caco3,
        )
    )
    assert alkaline.ph_as_analysed == pytest.approx(7.8, abs=1e-6)


# ------------------------------------------------------------------------------------------ ion balance
def _meq(mg_l, formula, charge):
    return mg_l / periodictable.formula(formula).mass * abs(charge)


def test_ion_balance_of_the_amd_water_by_hand():
    # cations: the metals at their charge and H+ from the pH; anions: sulfate (Murray & Wade 1996: for acidic,
    # metal-bearing waters H+ and the metals must be counted); % = 100 (C - A)/(C + A) (Colorado DRMS plan)
    cations = (
        _meq(200, "Fe", 3) + _meq(50, "Al", 3) + _meq(20, "Zn", 2) + _meq(15, "Mn", 2) + _meq(5, "Cu", 2)
    ) + 1000 * 10**-2.8
    anions = _meq(3000, "SO4", 2)
    balance = influent.ion_balance(wb.Water(**AMD))
    assert balance.cations_meq_l == pytest.approx(cations, rel=1e-4)
    assert balance.anions_meq_l == pytest.approx(anions, rel=1e-4)
    assert balance.difference_percent == pytest.approx(
        100 * (cations - anions) / (cations + anions), rel=1e-4
    )
    assert not balance.acceptable


@pytest.mark.parametrize(
    "sulfate_meq, acceptable",
    [(4.50, True), (4.06, True), (4.04, False), (2.18, False)],
)
def test_ion_balance_warns_beyond_five_percent(sulfate_meq, acceptable):
    # the acceptance rule: |% difference| <= 5 (Colorado DRMS monitoring response plan, read; data/analysis).
    # Na 10 meq/L against Cl 5 meq/L and sulfate: 4.06 meq/L sulfate gives 4.94 %, 4.04 gives 5.04 %, 2.18 gives
    # 10 % (1.8 meq/L)
    na_mg = 10.0 * periodictable.Na.mass
    cl_mg = 5.0 * periodictable.Cl.mass
    so4_mg = sulfate_meq / 2.0 * periodictable.formula("SO4").mass
    water = wb.Water(sodium_mg_l=na_mg, chloride_mg_l=cl_mg, sulfate_mg_l=so4_mg, ph=7.0)
    balance = influent.ion_balance(water)
    anions = 5.0 + sulfate_meq
    assert balance.difference_percent == pytest.approx(100 * (10.0 - anions) / (10.0 + anions), abs=0.01)
    assert balance.acceptable is acceptable
    assert influent.acceptance_rule().tolerance_percent == 5.0
    assert influent.acceptance_rule().quality == "compilation"  # read, second-hand: not the standard itself
    curve = wb.dose_curve(water, "caustic", [0.0])
    warned = [w for w in curve.attrs["warnings"] if w.startswith("The analysis does not balance")]
    assert bool(warned) is not acceptable
    if warned:
        assert f"{balance.difference_meq_l:+.3g} meq/L" in warned[0]
        assert f"{balance.difference_percent:+.1f} %" in warned[0]
        assert "strong acid (entered as Cl-)" in warned[0]  # how the closure fills the gap


def test_ion_balance_counts_alkalinity_and_weak_bases_at_the_ph():
    # carbonate anions = alkalinity - OH- + H+ (Stumm & Morgan's total alkalinity); ammonium at the pH with the
    # tableau's pKa 9.25 (at pH 9.25 half of the ammonia is NH4+)
    water = wb.Water(
        sodium_mg_l=2.0 * periodictable.Na.mass,
        alkalinity_mg_l_caco3=2.0 * CACO3_PER_EQ,
        ammonia_mg_l_n=1.0 * periodictable.N.mass,
        ph=9.25,
    )
    balance = influent.ion_balance(water)
    assert balance.terms["NH3"] == pytest.approx(0.5, abs=0.01)
    assert balance.terms["HCO3- + CO3^2-"] + balance.terms["OH-"] + balance.terms["H+"] == pytest.approx(
        -2.0, rel=1e-4
    )  # (the workbench's and periodictable's CaCO3 masses differ in the 6th digit)
    assert balance.cations_meq_l == pytest.approx(2.0 + 0.5 + 1000 * 10**-9.25, rel=0.02)
    assert math.isfinite(balance.difference_percent)


def test_bad_acidity_is_refused():
    for bad in ("high", math.nan, 1e6, True):
        with pytest.raises(wb.InputError) as err:
            wb.Water(ph=3.0, acidity_mg_l_caco3=bad)
        assert err.value.field == "acidity_mg_l_caco3" and "mg/L as CaCO3" in err.value.allowed
    assert wb.Water(ph=7.0, acidity_mg_l_caco3=-250.0).acidity_mg_l_caco3 == -250.0  # net alkaline
