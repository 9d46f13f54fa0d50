"""Minimum-solubility pH of each metal against published practice, and the minimum_solubility() table."""

import numpy as np
import pytest

import workbench as wb
from workbench.scenario import demo_water

# The published practice ranges of each metal's minimum pH that stood here were read from memory and widened to
# admit the model's own answers: they could not fail. The model is checked against measured data in
# tests/test_measured_data.py, against published temperature series in tests/test_temperature.py.


def test_demo_water_every_metal_has_a_row_and_a_solid():
    water = demo_water()
    table = wb.minimum_solubility(water)
    assert list(table.index) == list(water.metals_mg_l)
    assert (table["solid"] != "none").all()
    assert (table["residual_mg_l"] <= table["influent_mg_l"]).all()
    assert table["ph_min"].between(4.0, 13.5).all()


def test_minimum_is_the_lowest_point_of_the_curve():
    water = demo_water()
    table = wb.minimum_solubility(water)
    ph = np.round(np.arange(4.0, 13.5001, 0.01), 4)
    curve = wb.residual_curve(water, ph)
    for metal in water.metals_mg_l:
        best = curve[metal].min()
        # the refined minimum is within 0.1 % of the 0.01-grid minimum, and not above it by more
        assert table.loc[metal, "residual_mg_l"] <= best * 1.001
        assert abs(table.loc[metal, "ph_min"] - curve[metal].idxmin()) <= 0.02


def test_lead_needs_carbonate():
    # Powell et al. 2009: the neutral Pb(OH)2 species keeps several mg/L of lead dissolved over hydroxide alone;
    # cerussite (PbCO3) brings it lower when carbonate is present
    no_carb = wb.Water(metals_mg_l={"Pb": 5.0}, ph=4.0, sodium_mg_l=230, chloride_mg_l=355)
    carb = wb.Water(
        metals_mg_l={"Pb": 5.0}, ph=8.3, sodium_mg_l=230, chloride_mg_l=355, alkalinity_mg_l_caco3=200
    )
    a = wb.minimum_solubility(no_carb).loc["Pb"]
    b = wb.minimum_solubility(carb).loc["Pb"]
    assert a["solid"] == "none" and a["residual_mg_l"] == 5.0
    assert b["solid"] == "PbCO3 (cerussite)" and b["residual_mg_l"] < 0.5


def test_metal_that_never_precipitates_is_reported_plainly():
    water = wb.Water(metals_mg_l={"Ag": 0.05}, ph=4.0)
    row = wb.minimum_solubility(water).loc["Ag"]
    assert row["solid"] == "none" and np.isnan(row["ph_min"]) and row["residual_mg_l"] == 0.05
    assert "stays dissolved" in row["note"]


def test_a_chelated_metal_is_reported_with_the_share_its_complexant_holds():
    # EDTA's copper chelate (log K 18.80 at 20 °C, 0.1 M; Martell & Smith, read through Harvey's appendix) holds
    # copper far above the hydroxide's solubility: the table must say so, and how much
    water = wb.Water(metals_mg_l={"Cu": 20.0}, ph=4.0, edta_mg_l=30.0, sodium_mg_l=100.0)
    table = wb.minimum_solubility(water)
    note = table.loc["Cu", "note"]
    assert "EDTA holds" in note and "complexant" in note
    share = float(note.split("EDTA holds ")[1].split(" %")[0]) / 100
    # 30 mg/L of the acid is 0.103 mmol/L of EDTA, 20 mg/L Cu is 0.315 mmol/L: the chelate alone is 6.5 mg/L Cu,
    # so above the chelate the residual is nearly all chelate
    cu_in_chelate = 30.0 / 292.24 * 63.546
    assert table.loc["Cu", "residual_mg_l"] >= 0.9 * cu_in_chelate
    assert share == pytest.approx(min(1.0, cu_in_chelate / table.loc["Cu", "residual_mg_l"]), abs=0.05)
    plain = wb.minimum_solubility(wb.Water(metals_mg_l={"Cu": 20.0}, ph=4.0, sodium_mg_l=100.0))
    assert "EDTA" not in plain.loc["Cu", "note"]


def test_iron_floc_warns_that_other_residuals_are_usually_lower():
    # co-precipitation and adsorption on hydrous ferric oxide are not modelled (yet): the result must say so whenever
    # ferric or aluminium hydroxide forms beside other metals
    with_iron = wb.residual_curve(wb.Water(metals_mg_l={"Zn": 5.0, "Fe": 20.0}, ph=4.0), [8.0, 9.0])
    assert any("co-precipitate" in w and "Zn" in w for w in with_iron.attrs["warnings"])
    without = wb.residual_curve(wb.Water(metals_mg_l={"Zn": 5.0}, ph=4.0), [8.0, 9.0])
    assert not any("co-precipitate" in w for w in without.attrs["warnings"])
