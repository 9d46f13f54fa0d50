"""Bad input to the core API: each raises our own InputError (a ValueError) naming field, value and what is allowed."""

import math

import pytest

import workbench as wb
from workbench.errors import InputError

GOOD = dict(metals_mg_l={"Zn": 10.0}, ph=7.0)


@pytest.mark.parametrize(
    "kwargs, field, fragment",
    [
        (dict(metals_mg_l={"Zn": -1.0}), "metals_mg_l['Zn']", "allowed 0 to"),
        (dict(metals_mg_l={"Zn": "ten"}), "metals_mg_l['Zn']", "a number"),
        (dict(metals_mg_l={"Zn": math.nan}), "metals_mg_l['Zn']", "allowed 0 to"),
        (dict(metals_mg_l={"Zn": math.inf}), "metals_mg_l['Zn']", "allowed 0 to"),
        (dict(metals_mg_l={"Zn": True}), "metals_mg_l['Zn']", "a number"),
        (dict(metals_mg_l={"Unobtainium": 1.0}), "metals_mg_l", "known metals are Cu, Ni, Zn"),
        (dict(metals_mg_l={"Hg": 1.0}), "metals_mg_l", "known metals are"),
        (dict(metals_mg_l={"Cr(VI)": 1.0}), "metals_mg_l['Cr(VI)']", "must be reduced to Cr(III)"),
        (dict(metals_mg_l={"CN": 1.0}), "metals_mg_l['CN']", "never acidify"),
        (dict(metals_mg_l={"Fe(III)": 1.0}), "metals_mg_l['Fe(III)']", "enter ferric iron as 'Fe'"),
        (dict(metals_mg_l=[("Zn", 1.0)]), "metals_mg_l", "a mapping"),
        (dict(ph=14.5), "ph", "allowed 0 to 14"),
        (dict(ph=-0.1), "ph", "allowed 0 to 14"),
        (dict(ph="7"), "ph", "a number"),
        (dict(temperature_c=60.0), "temperature_c", "allowed 5 to 50"),
        (dict(temperature_c=2.0), "temperature_c", "allowed 5 to 50"),
        (dict(sulfate_mg_l=-5.0), "sulfate_mg_l", "allowed 0 to"),
        (dict(calcium_mg_l=math.nan), "calcium_mg_l", "allowed 0 to"),
        (dict(ammonia_mg_l_n=1e9), "ammonia_mg_l_n", "allowed 0 to"),
        (dict(alkalinity_mg_l_caco3=200.0, ph=3.0), "alkalinity_mg_l_caco3", "inconsistent with pH 3"),
        (dict(alkalinity_mg_l_caco3=5000.0, ph=5.0), "alkalinity_mg_l_caco3", "dissolved CO2"),
    ],
)
def test_water_refuses_bad_fields(kwargs, field, fragment):
    with pytest.raises(InputError) as err:
        wb.Water(**{**GOOD, **kwargs})
    assert isinstance(err.value, ValueError)
    assert err.value.field == field
    assert fragment in str(err.value)
    assert field in str(err.value)


def test_pure_water_and_major_ions_only_are_valid():
    assert wb.Water().metals_mg_l == {}
    w = wb.Water(calcium_mg_l=40, alkalinity_mg_l_caco3=100)
    assert w.alkalinity_ph == 8.3  # no pH given: alkalinity read at the phenolphthalein end point
    assert wb.residual_curve(w, [7, 9]).shape == (2, 0)


def test_inputs_are_not_changed():
    metals = {"Zn": 10.0, "Cu": 2.5}
    w = wb.Water(metals_mg_l=metals, ph=6.123456789)
    assert dict(w.metals_mg_l) == metals and w.ph == 6.123456789
    metals["Zn"] = 99.0  # the Water keeps its own copy
    assert w.metals_mg_l["Zn"] == 10.0


@pytest.mark.parametrize(
    "call, field",
    [
        (lambda w: wb.residual_curve(w, [7.0, 15.0]), "ph"),
        (lambda w: wb.residual_curve(w, []), "ph"),
        (lambda w: wb.residual_curve(w, [7.0, math.nan]), "ph"),
        (lambda w: wb.residual_curve(w, [7.0], solids="crystal"), "solids"),
        (lambda w: wb.residual_curve(w, [7.0], activity="debye"), "activity"),
        (lambda w: wb.speciate(w, [7.0, 8.0]), "ph"),
        (lambda w: wb.minimum_solubility(w, ph_range=(9.0, 8.0)), "ph_range"),
        (lambda w: wb.minimum_solubility(w, ph_range="high"), "ph_range"),
        (lambda w: wb.residual_curve({"Zn": 1}, [7.0]), "water"),
    ],
)
def test_api_refuses_bad_arguments(call, field):
    w = wb.Water(**GOOD)
    with pytest.raises(InputError) as err:
        call(w)
    assert err.value.field == field


def test_speciate_without_ph_needs_a_measured_ph():
    with pytest.raises(InputError, match="ph"):
        wb.speciate(wb.Water(metals_mg_l={"Zn": 1.0}))
    assert wb.speciate(wb.Water(metals_mg_l={"Zn": 1.0}, ph=6.0)).ph == 6.0


def test_minimum_solubility_of_a_water_without_metals_is_an_empty_table():
    table = wb.minimum_solubility(wb.Water(sodium_mg_l=46, chloride_mg_l=71))
    assert table.empty and "ph_min" in table.columns


def test_uncertainty_band_takes_limits_as_a_mapping():
    water = wb.Water(metals_mg_l={"Zn": 10.0}, ph=5.0)
    band = wb.uncertainty_band(water, [9.0], samples=3, seed=1, limits={"Zn": 1.0}, setpoint_ph=9.0)
    assert 0.0 <= band.probability_meets["Zn"] <= 1.0


def test_ionic_strength_refusal_states_a_value_above_the_limit():
    with pytest.raises(wb.ModelRangeError) as err:
        wb.residual_curve(wb.Water(magnesium_mg_l=12160, chloride_mg_l=35473), 7.0)
    assert err.value.value > 1.5
