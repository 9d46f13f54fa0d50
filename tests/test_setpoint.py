"""Setpoint design: limit tables, pH windows, two-stage schemes, complexants, uncertainty band, bad input."""

from dataclasses import replace

import numpy as np
import pandas as pd
import pytest

import workbench as wb
from workbench.chemistry import solver, tableau
from workbench.scenario import demo_water

# 40 CFR 433.15 (PSES, existing metal-finishing sources), daily maximum / monthly average, mg/L (regulation text)
CFR_433_15 = {"Cd": (0.69, 0.26), "Cr": (2.77, 1.71), "Cu": (3.38, 2.07), "Pb": (0.69, 0.43), "Ni": (3.98, 2.38),
              "Ag": (0.43, 0.24), "Zn": (2.61, 1.48)}
# 40 CFR 433.17 (PSNS, new sources): cadmium 0.11 / 0.07, the other metals as 433.15
CFR_433_17 = {**CFR_433_15, "Cd": (0.11, 0.07)}
# 40 CFR 413.14 (electroplating, common metals, >= 10,000 gal/d): daily maximum / maximum 4-day average
CFR_413_14_LARGE = {"Cd": (1.2, 0.7), "Pb": (0.6, 0.4), "Cr": (7.0, 4.0), "Cu": (4.5, 2.7), "Ni": (4.1, 2.6),
                    "Zn": (4.2, 2.6), "Ag": (1.2, 0.7)}


@pytest.mark.parametrize(
    "name, expected, average",
    [("40cfr433.15", CFR_433_15, "monthly_avg"), ("40cfr433.17", CFR_433_17, "monthly_avg"),
     ("40cfr413.14-large", CFR_413_14_LARGE, "four_day_avg")],
)
def test_limit_tables_reproduce_the_regulation(name, expected, average):
    table = wb.load_limits(name)
    assert set(table["metal"]) == set(expected)
    for metal, (day, avg) in expected.items():
        rows = table[table["metal"] == metal].set_index("basis")["limit_mg_l"]
        assert rows["daily_max"] == day and rows[average] == avg
    assert "40 CFR" in " ".join(table["source"]) or "Title 40" in " ".join(table["source"])
    assert "permit governs" in table.attrs["note"]


def test_single_metal_window_edges_are_where_its_curve_crosses_the_target():
    water = wb.Water(metals_mg_l={"Zn": 20.0}, ph=4.0, sodium_mg_l=230, sulfate_mg_l=480)
    limits = wb.permit_limits({"Zn": 1.0})
    design = wb.design_setpoint(water, limits, margin=0.8, ph_range=(6.0, 12.5), step=0.01)
    assert len(design.windows) == 1
    low, high = design.windows[0]
    curve = wb.residual_curve(water, [low - 0.02, low + 0.02, high - 0.02, high + 0.02])["Zn"].to_numpy()
    # the core's own curve is above the target just outside each edge and below just inside
    assert curve[0] > 0.8 and curve[1] < 0.8 and curve[2] < 0.8 and curve[3] > 0.8
    assert design.edges == [("Zn", "Zn")]
    assert low < design.setpoint_ph < high and design.rule == "widest_centre"
    row = design.table.loc["Zn"]
    assert row["meets_target"] and row["headroom"] == pytest.approx(0.8 / row["dissolved_mg_l"])


def test_aluminium_and_cadmium_need_two_stages():
    # aluminium (amphoteric, minimum near pH 6.5) and cadmium (needs pH > 10) at tight limits: no single pH
    water = wb.Water(metals_mg_l={"Al": 20.0, "Cd": 5.0}, ph=3.0, sulfate_mg_l=300, sodium_mg_l=60)
    limits = wb.permit_limits({"Al": 1.0, "Cd": 0.1})
    design = wb.design_setpoint(water, limits, margin=1.0)
    assert design.windows == [] and design.setpoint_ph is None
    s1, s2 = design.stages
    assert s1["ph"] < 8.5 < s2["ph"]
    assert "Al" in s1["removes"] and "Cd" in s2["removes"]
    # recompute both stages with the core: stage 1 at pH1, its dissolved effluent to stage 2 at pH2
    first = wb.speciate(water, s1["ph"])
    effluent = wb.Water(
        metals_mg_l={m: float(v) for m, v in first.dissolved_mg_l.items()}, ph=s1["ph"],
        sulfate_mg_l=water.sulfate_mg_l, sodium_mg_l=water.sodium_mg_l + max(first.strong_base_eq_l, 0) * 22990,
        chloride_mg_l=max(-first.strong_base_eq_l, 0) * 35450,
    )
    second = wb.residual_curve(effluent, [s2["ph"]]).iloc[0]
    assert second["Al"] <= 1.0 and second["Cd"] <= 0.1
    assert design.table["meets_target"].all()


def test_edta_keeps_copper_dissolved_and_is_named():
    # EDTA equimolar to copper (1 mmol/L each): the chelate holds copper in solution across the pH range
    water = wb.Water(metals_mg_l={"Cu": 63.5, "Zn": 10.0}, ph=4.0, edta_mg_l=292.2, sodium_mg_l=200,
                     sulfate_mg_l=300)
    design = wb.design_setpoint(water, wb.permit_limits({"Cu": 1.0, "Zn": 1.0}), two_stage=False)
    assert design.windows == []
    assert (design.curve["Cu"] > 0.5 * 63.5).all()
    text = " ".join(design.notes)
    assert "Cu cannot be met" in text and "EDTA" in text


def test_user_permit_wins_over_example_and_limits_for_absent_metals():
    example = wb.load_limits("40cfr433.15")
    permit = wb.permit_limits({"Zn": 0.5}, basis="monthly_avg", source="permit 123")
    both = wb.combine_limits(example, permit)
    zn = both[(both["metal"] == "Zn") & (both["basis"] == "monthly_avg")]
    assert zn["limit_mg_l"].tolist() == [0.5] and zn["source"].tolist() == ["permit 123"]
    design = wb.design_setpoint(demo_water(), both)
    assert design.table.loc["Zn", "limit_mg_l"] == 0.5
    assert any("Ag" in n and "not in the influent" in n for n in design.notes)
    assert design.cautions and any("jar test" in c for c in design.cautions)


def test_demo_design_and_total_metal_with_carry_over():
    water = demo_water()
    design = wb.design_setpoint(water, wb.load_limits("40cfr433.15"))
    assert design.windows and design.setpoint_ph is not None and design.table["meets_target"].all()
    total = wb.design_setpoint(water, wb.load_limits("40cfr433.15"), effluent_tss_mg_l=5.0)
    assert "total" in total.compared
    ph = total.setpoint_ph if total.setpoint_ph is not None else total.table.attrs["ph"]
    assert (total.table["total_mg_l"] >= total.table["dissolved_mg_l"] - 1e-12).all()
    assert ph is not None


def test_uncertainty_band():
    water = demo_water()
    ph = np.round(np.arange(7.0, 11.01, 0.25), 3)
    band = wb.uncertainty_band(water, ph, samples=40, seed=7)
    tol = 1e-9
    assert ((band.lower <= band.nominal * (1 + tol)) & (band.nominal <= band.upper * (1 + tol))).all().all()
    assert (band.upper - band.lower).max().max() > 0
    again = wb.uncertainty_band(water, ph, samples=40, seed=7)
    pd.testing.assert_frame_equal(band.upper, again.upper)  # fixed seed: identical output
    flat = wb.uncertainty_band(water, ph, samples=10, seed=7, uncertainty_scale=0.0)
    assert float((flat.upper - flat.lower).abs().max().max()) == 0.0  # exactly zero width
    pd.testing.assert_frame_equal(flat.median, flat.nominal, rtol=1e-9)
    assert band.samples == 40 and band.seed == 7
    done = []
    limits = pd.Series({"Zn": 1.48, "Ni": 2.38})
    b = wb.uncertainty_band(water, ph, samples=12, seed=1, limits=limits, setpoint_ph=9.3,
                            progress=lambda d, t: done.append((d, t)))
    assert done[-1] == (12, 12) and set(b.probability_meets.index) == {"Zn", "Ni"}
    assert b.probability_meets.between(0, 1).all()


@pytest.mark.parametrize(
    "call, field",
    [
        (lambda w: wb.permit_limits({"Hg": 0.01}), "permit limits"),  # refused at the entry, not later
        (lambda w: wb.permit_limits({"Zn": -1.0}), "permit limits['Zn']"),
        (lambda w: wb.permit_limits({"Zn": float("nan")}), "permit limits['Zn']"),
        (lambda w: wb.design_setpoint(w, wb.permit_limits({"Zn": 1.0}), margin=0.0), "margin"),
        (lambda w: wb.design_setpoint(w, wb.permit_limits({"Zn": 1.0}), margin=1.5), "margin"),
        (lambda w: wb.design_setpoint(w, wb.permit_limits({"Zn": 1.0}), rule="middle"), "rule"),
        (lambda w: wb.design_setpoint(w, wb.permit_limits({"Zn": 1.0}), effluent_tss_mg_l=-1), "effluent_tss_mg_l"),
        (lambda w: wb.load_limits("40cfr999"), "limit set"),
        (lambda w: wb.uncertainty_band(w, [8.0, 9.0], samples=0), "samples"),
    ],
)
def test_bad_input(call, field):
    water = wb.Water(metals_mg_l={"Zn": 10.0}, ph=5.0)
    with pytest.raises(wb.InputError) as err:
        call(water)
    assert err.value.field == field


def test_design_completes_when_the_water_without_its_complexant_is_not_a_valid_analysis():
    """The complexant notes compare with the water without EDTA; with EDTA's ionic strength gone, an alkalinity
    at the edge of what the measured pH holds needs more CO2 than water holds (found by drawing waters): the
    design is still made and says the comparison is not computed."""
    base = dict(metals_mg_l={"Zn": 5.0}, edta_mg_l=20_000.0, ph=4.0, temperature_c=25.0)

    def valid(alkalinity):
        try:
            wb.Water(**base, alkalinity_mg_l_caco3=alkalinity)
            return True
        except wb.InputError:
            return False

    low, high = 1.0, 20_000.0  # the largest alkalinity this analysis holds, by bisection
    for _ in range(60):
        mid = (low * high) ** 0.5
        low, high = (mid, high) if valid(mid) else (low, mid)
    water = wb.Water(**base, alkalinity_mg_l_caco3=low)
    with pytest.raises(wb.InputError, match="CO2"):
        replace(water, edta_mg_l=0.0)
    design = wb.design_setpoint(water, wb.permit_limits({"Zn": 0.1}))
    assert any("without EDTA is not computed" in note for note in design.notes)


def test_two_stage_search_settles_where_a_hydroxide_must_replace_a_carbonate_started_from_a_neighbour():
    """Stage 2 of this drawn water (found by drawing waters), started from neighbours holding siderite and CoCO3,
    must end with Fe(OH)2 and Co(OH)2 instead: the pass with Fe(OH)2 beside siderite failed, Fe(OH)2 was taken
    back each time and the point went round the same sets (or, one solid at a time, settled supersaturated and
    failed verification). Now siderite, negative, leaves; every point settles, and each stage-2 point equals the
    same point solved alone."""
    water = wb.Water(
        metals_mg_l={"Fe(II)": 22.857690559017648, "Co": 826.0601935131975},
        chloride_mg_l=1.0, ammonia_mg_l_n=1.0, sulfate_mg_l=0.0427176340651354, fluoride_mg_l=1.0,
        edta_mg_l=2872.26723757999, calcium_mg_l=0.05206076751485864, citrate_mg_l=1.0, sodium_mg_l=1.0,
        magnesium_mg_l=1.0, alkalinity_mg_l_caco3=4220.026511089017, temperature_c=47.2769254578913,
    )  # fmt: skip
    limits = wb.permit_limits({"Fe(II)": 0.017460570322657524, "Co": 1.0})
    wb.design_setpoint(water, limits, 0.228840430981324)  # raised ConvergenceError before
    # the stage-2 batch as the two-stage search builds it: stage-1 effluents at pH 5-11.5, each at pH 6-12.5
    totals = water.totals()
    tab = tableau.build(tuple(dict.fromkeys([*totals, "Na+", "Cl-"])), water.temperature_c, "fresh")
    t = np.zeros(len(tab.components))
    for comp, value in totals.items():
        t[tab.component(comp)] = value
    ph1, ph2 = np.round(np.arange(5.0, 11.5 + 1e-9, 0.1), 3), np.round(np.arange(6.0, 12.5 + 1e-9, 0.05), 3)
    eq1 = solver.solve(tab, t, ph1)
    effluent = eq1.dissolved().copy()
    effluent[:, tab.component("Na+")] += np.maximum(eq1.strong_base, 0.0)
    effluent[:, tab.component("Cl-")] += np.maximum(-eq1.strong_base, 0.0)
    effluent[:, 0] = 0.0
    t2, p2 = np.repeat(effluent, ph2.size, axis=0), np.tile(ph2, ph1.size)
    batch = solver.solve(tab, t2, p2, engine="numpy")
    for row in (124, 125, 130, 131 * 10 + 124):  # points that failed (stage-1 pH 5.0 and 6.0, stage-2 pH 12.2+)
        alone = solver.solve(tab, t2[row : row + 1], p2[row : row + 1], engine="numpy")
        np.testing.assert_allclose(batch.dissolved()[row, 1:], alone.dissolved()[0, 1:], rtol=1e-8, atol=1e-20)
        assert (batch.solid_amount[row] > 0).tolist() == (alone.solid_amount[0] > 0).tolist()
