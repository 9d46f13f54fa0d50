"""A curve stops where the model stops: points beyond the Davies equation's range are left out, not the whole curve.

The solver refuses a point whose ionic strength exceeds solver.MAX_IONIC_STRENGTH (1.5 mol/L): holding pH 13.5
takes about 0.3-0.6 mol/L of strong base by itself, more in a warm water (pKw 13.26 at 50 °C, IAPWS R11-07), so
the end of a wide pH range can lie beyond the activity model for an ordinary water.
"""

from __future__ import annotations

import dataclasses

import numpy as np
import pytest

import workbench as wb
from workbench.chemistry import solver
from workbench.scenario import demo_water
from workbench.treatment.solubility import DEFAULT_PH_RANGE


@pytest.mark.parametrize("temperature_c", [5.0, 25.0, 46.0, 50.0])
def test_minimum_solubility_of_the_demo_water_at_every_temperature(temperature_c):
    water = dataclasses.replace(demo_water(), temperature_c=temperature_c)
    table = wb.minimum_solubility(water)
    assert list(table.index) == list(water.metals_mg_l)
    lo, hi = DEFAULT_PH_RANGE
    assert table["ph_min"].dropna().between(lo, hi).all()


def test_a_warm_curve_to_ph_14_stops_where_the_ionic_strength_leaves_the_davies_range():
    water = dataclasses.replace(demo_water(), temperature_c=50.0)
    ph = np.round(np.arange(6.0, 14.001, 0.1), 1)
    curve = wb.residual_curve(water, ph)
    beyond = np.asarray(curve.attrs["beyond_model_ph"])
    assert beyond.size > 0 and beyond.min() >= 13.0  # only the top of the range is lost
    assert curve.loc[beyond].isna().all().all()
    held = curve.drop(index=beyond)
    assert held.notna().all().all() and held.index.max() < beyond.min()
    note = next(w for w in curve.attrs["warnings"] if w.startswith("The curve stops"))
    assert f"above pH {held.index.max():g}" in note and "Davies" in note
    # the last point kept is within the range, the first one left out is not
    last = wb.speciate(water, float(held.index.max()))
    assert last.ionic_strength_mol_l <= solver.MAX_IONIC_STRENGTH
    with pytest.raises(wb.ModelRangeError):
        wb.speciate(water, float(beyond.min()))


def test_the_points_that_hold_are_the_same_as_in_a_curve_that_stays_in_range():
    water = dataclasses.replace(demo_water(), temperature_c=50.0)
    wide = wb.residual_curve(water, np.round(np.arange(6.0, 14.001, 0.1), 1))
    narrow = wb.residual_curve(water, np.round(np.arange(6.0, 12.001, 0.1), 1))
    assert narrow.attrs["beyond_model_ph"] == []
    np.testing.assert_allclose(wide.loc[narrow.index].to_numpy(), narrow.to_numpy(), rtol=1e-9, atol=0)


def test_a_water_beyond_the_range_at_every_ph_is_still_refused():
    brine = wb.Water(metals_mg_l={"Zn": 5.0}, sodium_mg_l=50_000.0, chloride_mg_l=50_000.0, ph=7.0)
    with pytest.raises(wb.ModelRangeError) as err:
        wb.residual_curve(brine, [4.0, 7.0, 10.0])
    assert err.value.field == "ionic strength"
    with pytest.raises(wb.ModelRangeError):
        wb.minimum_solubility(brine)


def test_the_default_search_range_is_one_a_plant_reaches():
    # lime cannot pass its ceiling (about pH 12.45 at 25 °C, Bates, Bower & Smith 1956), and a waste at pH 12.5 or
    # above is corrosive (40 CFR 261.22(a)(1)): the default search stops there
    assert DEFAULT_PH_RANGE == (4.0, 12.5)
    assert wb.reagent_ceiling_ph(demo_water(), "lime") < DEFAULT_PH_RANGE[1] + 0.1
