"""Invariants of the equilibrium solution on realistic mixed waters (Davies activity, carbonate, ligands)."""

import numpy as np
import pytest

import workbench as wb
from workbench.scenario import demo_water
from workbench.treatment.solubility import equilibrium

PH = np.round(np.arange(2.0, 13.5001, 0.1), 4)

WATERS = {
    "demo": demo_water(),
    "chelated": wb.Water(
        metals_mg_l={"Cu": 30, "Ni": 20, "Zn": 10},
        ph=4.0,
        sulfate_mg_l=400,
        sodium_mg_l=200,
        edta_mg_l=80,
        citrate_mg_l=50,
        ammonia_mg_l_n=40,
        calcium_mg_l=40,
        temperature_c=35,
    ),
    "trace beside iron": wb.Water(
        metals_mg_l={"Ag": 0.001, "Fe": 2000, "Fe(II)": 50, "Mn": 5, "Co": 2},
        ph=1.5,
        sulfate_mg_l=6000,
        chloride_mg_l=100,
        calcium_mg_l=300,
        magnesium_mg_l=100,
        temperature_c=10,
    ),
    "fluoride pickle": wb.Water(
        metals_mg_l={"Al": 50, "Fe": 100, "Ni": 5},
        ph=2.5,
        fluoride_mg_l=300,
        sulfate_mg_l=2000,
        calcium_mg_l=200,
    ),
}


@pytest.fixture(params=sorted(WATERS), scope="module")
def solved(request):
    water = WATERS[request.param]
    tab, eq = equilibrium(water, PH)
    return water, tab, eq


def test_mass_balance_closes(solved):
    _, tab, eq = solved
    tot = eq.conc @ tab.a + eq.solid_amount @ tab.b
    t = eq.totals
    present = t[:, 1:] > 0
    rel = np.abs(tot[:, 1:] - t[:, 1:])[present] / t[:, 1:][present]
    assert rel.max() < 1e-10


def test_saturation_indices(solved):
    _, tab, eq = solved
    present = eq.solid_amount > 0
    assert np.abs(eq.saturation_index[present]).max(initial=0.0) < 1e-9
    assert eq.saturation_index[~present].max(initial=-1.0) <= 1e-9
    assert (eq.solid_amount >= 0).all()


def test_no_nan_and_ph_held(solved):
    _, _, eq = solved
    assert np.isfinite(eq.conc).all() and np.isfinite(eq.ionic_strength).all()
    np.testing.assert_allclose(eq.ph, PH, atol=1e-10)


def test_residual_never_exceeds_influent_and_equals_it_below_saturation():
    water = WATERS["demo"]
    curve = wb.residual_curve(water, PH)
    for metal, mg in water.metals_mg_l.items():
        assert (curve[metal] <= mg * (1 + 1e-9)).all()
    # at pH 2 nothing precipitates from the demo water: residual = influent
    for metal, mg in water.metals_mg_l.items():
        assert curve.loc[2.0, metal] == pytest.approx(mg, rel=1e-9)


def test_scalar_and_array_ph_agree():
    water = WATERS["demo"]
    curve = wb.residual_curve(water, [7.0, 8.5, 10.0])
    for ph in (7.0, 8.5, 10.0):
        one = wb.residual_curve(water, ph)
        np.testing.assert_allclose(one.loc[ph].to_numpy(), curve.loc[ph].to_numpy(), rtol=1e-9)
        sp = wb.speciate(water, ph)
        np.testing.assert_allclose(sp.dissolved_mg_l.to_numpy(), curve.loc[ph].to_numpy(), rtol=1e-9)


def test_speciate_reports_solids_and_charge_balance():
    water = WATERS["demo"]
    sp = wb.speciate(water, 9.0)
    assert "Cu(OH)2 (fresh precipitate)" in sp.solids.index and (sp.solids["mg_l"] > 0).all()
    assert set(sp.saturation.columns) == {"saturation_index", "present"}
    assert 0.01 < sp.ionic_strength_mol_l < 0.1
    # holding pH 9 in this water needs base: the strong-base residual is positive
    assert sp.strong_base_eq_l > 0
    # species table: mass balance of copper from the table itself
    cu = sp.species.loc[[s for s in sp.species.index if s.startswith("Cu")], "mol_l"]
    assert cu.sum() > 0


def test_more_soluble_fresh_solid_gives_higher_residual():
    # Pankow, Aquatic Chemistry Concepts: the aged/dehydrated solid is less soluble than the fresh hydroxide
    water = wb.Water(metals_mg_l={"Zn": 20, "Cu": 20, "Al": 10, "Cr": 10, "Fe": 10}, ph=5.0, sulfate_mg_l=200)
    fresh = wb.residual_curve(water, [6.5, 9.0, 10.0])
    aged = wb.residual_curve(water, [6.5, 9.0, 10.0], solids="aged")
    assert (aged.to_numpy() <= fresh.to_numpy() * (1 + 1e-9)).all()
    assert (aged.loc[9.0] < fresh.loc[9.0]).all()


def test_too_concentrated_is_refused_not_computed():
    # beyond the Davies equation's range the activity coefficients are meaningless: a clear error, not a number
    water = wb.Water(metals_mg_l={"Zn": 10.0}, magnesium_mg_l=20000, chloride_mg_l=20000)
    with pytest.raises(wb.ModelRangeError, match="ionic strength"):
        wb.residual_curve(water, [7.0])
    # a dilute water can still be held at pH 14 (I ~ 1.05 mol/L from the base), with a warning
    curve = wb.residual_curve(WATERS["demo"], [13.0, 14.0])
    assert any("Davies" in w for w in curve.attrs["warnings"])


def test_solubility_shift_scales_the_residual_where_the_solid_controls():
    # a shift of +0.8 in log10 Ksp of every Zn solid multiplies dissolved Zn by 10**0.8 wherever a Zn solid is
    # present: every mononuclear Zn species is proportional to the free Zn2+ the solid fixes (ideal activities;
    # at pH >= 9.5 the Zn2OH3+ dimer, which breaks the proportionality, is below 1e-5 of the total)
    water = wb.Water(metals_mg_l={"Zn": 10.0}, ph=5.0, sodium_mg_l=100)
    ph = [9.5, 10.0, 10.5]
    base = wb.residual_curve(water, ph, activity="ideal")
    shifted = wb.residual_curve(water, ph, activity="ideal", solubility_shift={"Zn": 0.8})
    np.testing.assert_allclose(shifted["Zn"] / base["Zn"], 10**0.8, rtol=1e-5)
    with pytest.raises(wb.InputError, match="solubility_shift"):
        wb.residual_curve(water, [9.0], solubility_shift={"Cu": 0.5})
