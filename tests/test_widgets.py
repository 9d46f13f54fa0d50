"""Headless tests of the interactive panels: set controls as a user would, then check that the figure's data are
the treatment layer's result for the same inputs, that a bad value is shown beside its field and changes nothing
else, and that files are read and written as promised."""

from __future__ import annotations

import json
import logging
import shutil
from dataclasses import replace
from datetime import UTC, datetime

import numpy as np
import pandas as pd
import pytest
from plotly.utils import PlotlyJSONEncoder

import workbench as wb
import workbench.scenario as scenario_module
from workbench.figures.setpoint import FLOOR_MG_L
from workbench.scenario import (
    DesignOptions,
    LimitsChoice,
    ReagentChoice,
    Scenario,
    demo_scenario_path,
    demo_water,
    read_scenario,
)
from workbench.treatment import calibration as cal
from workbench.treatment import dose
from workbench.treatment.jar_tests import demo_jar_tests_path
from workbench.widgets import JarTestPanel, SetpointPanel
from workbench.widgets.jar_tests import UPLOAD_MAX_BYTES, curve_ph
from workbench.widgets.setpoint import field_for, parse_permit

pytestmark = pytest.mark.slow


# ---------------------------------------------------------------------------------------------------- helpers
def reference_design(scenario, panel, **extra):
    """design_setpoint called directly, as the core API is used outside the panel."""
    kwargs = {**scenario.design_kwargs(), "samples": 0, "step": panel.ph_step, **extra}
    return wb.design_setpoint(scenario.water, scenario.limits_table(), **kwargs)


def metal_traces(fig, metals) -> dict:
    return {t.name: t for t in fig.data if t.name in metals and t.mode == "lines"}


def assert_figure_shows(fig, design):
    """Each metal's curve, target and limit in the figure equal the design's numbers."""
    curve = design.curve
    traces = metal_traces(fig, set(curve.columns))
    assert set(traces) == set(curve.columns)
    for metal in curve.columns:
        np.testing.assert_allclose(traces[metal].x, curve.index.to_numpy(), rtol=0, atol=1e-12)
        np.testing.assert_allclose(
            traces[metal].y, np.maximum(curve[metal].to_numpy(), FLOOR_MG_L), rtol=1e-12, atol=0
        )
        target = next(t for t in fig.data if t.name == f"{metal} target")
        np.testing.assert_allclose(target.y, [design.targets[metal]] * 2, rtol=1e-12)
        limit = [t for t in fig.data if t.name == f"{metal} limit"]
        if "limit_mg_l" in design.table.columns:  # a two-stage design's table holds targets only
            np.testing.assert_allclose(limit[0].y, [design.table.loc[metal, "limit_mg_l"]] * 2, rtol=1e-12)
        else:
            assert limit == []
    marks = [s for s in fig.layout.shapes if s.type == "line"]
    if design.setpoint_ph is not None:
        assert marks and marks[0].x0 == pytest.approx(design.setpoint_ph)
    windows = [v for s in fig.layout.shapes if s.type == "rect" for v in (s.x0, s.x1)]
    assert windows == pytest.approx([v for w in design.windows for v in w])


def values(panel) -> dict:
    return {name: field.value for name, field in panel.fields.items()}


def figure_data(fig) -> str:
    """The figure's traces as JSON text, without the ids the widget gives each trace it draws."""
    traces = [{k: v for k, v in t.items() if k != "uid"} for t in fig.to_dict()["data"]]
    return json.dumps(traces, cls=PlotlyJSONEncoder, sort_keys=True)


@pytest.fixture(scope="module")
def demo():
    return read_scenario(demo_scenario_path())


@pytest.fixture
def panel(demo):
    return SetpointPanel(demo)


# ---------------------------------------------------------------------------------------------------- setpoint
def test_setpoint_panel_draws_the_design_of_its_inputs(panel, demo):
    assert panel.state() == demo
    design = reference_design(demo, panel)
    assert_figure_shows(panel.figure, design)
    assert panel.design.setpoint_ph == design.setpoint_ph
    assert f"{design.setpoint_ph:.2f}" in panel.headroom.value
    pd.testing.assert_frame_equal(panel.design.table, design.table)
    assert "the local permit governs" in panel.headroom.value
    assert "the local permit governs" in panel.cautions.value
    assert panel.figure.layout.title.text.startswith(demo.name.replace("(", "(")[:20])
    assert "the local permit governs" in panel.figure.layout.title.text
    assert panel.panel_error.value == ""
    assert all(f.error_text == "" for f in panel.fields.values())


def test_changing_zinc_margin_and_limit_set_redraws_with_the_core_result(panel, demo):
    panel.fields["metal:Zn"].value = 40.0
    water = replace(demo.water, metals_mg_l={**demo.water.metals_mg_l, "Zn": 40.0})
    assert panel.state().water == water
    assert_figure_shows(panel.figure, reference_design(replace(demo, water=water), panel))

    panel.fields["margin"].value = 0.8
    panel.fields["limit_set"].value = "40cfr433.17"
    expected = replace(
        demo,
        water=water,
        design=replace(demo.design, margin=0.8),
        limits=replace(demo.limits, set="40cfr433.17"),
    )
    assert panel.state() == expected
    design = reference_design(expected, panel)
    assert_figure_shows(panel.figure, design)
    assert design.margin == 0.8 and panel.design.margin == 0.8


def test_permit_limits_typed_by_the_user_replace_the_example(panel, demo):
    panel.fields["permit"].value = "# from our permit\nZn = 0.5\nNi: 1.2 mg/L\n"
    panel.fields["permit_source"].value = "Permit 12-A"
    state = panel.state()
    assert dict(state.limits.permit) == {"Zn": 0.5, "Ni": 1.2}
    design = reference_design(state, panel)
    assert design.table.loc["Zn", "limit_mg_l"] == 0.5
    assert_figure_shows(panel.figure, design)
    assert "Permit 12-A" in panel.headroom.value


def test_a_bad_value_is_shown_beside_its_field_and_nothing_else_changes(panel):
    before_values = values(panel)
    before_figure = figure_data(panel.figure)
    before_design = panel.design
    panel.fields["metal:Zn"].value = -5.0
    assert "allowed 0 to" in panel.fields["metal:Zn"].error_text
    assert panel.fields["metal:Zn"].value == -5.0  # what was typed stays
    assert {k: v for k, v in values(panel).items() if k != "metal:Zn"} == {
        k: v for k, v in before_values.items() if k != "metal:Zn"
    }
    assert all(f.error_text == "" for k, f in panel.fields.items() if k != "metal:Zn")
    assert figure_data(panel.figure) == before_figure
    assert panel.design is before_design
    assert "Not updated" in panel.status.value
    with pytest.raises(wb.InputError):
        panel.state()

    # a second bad field in another section is marked too; the first stays marked
    panel.fields["ph"].value = "7,2"
    assert panel.fields["ph"].value == "7,2"
    assert "decimal point" in panel.fields["ph"].error_text
    assert "allowed 0 to" in panel.fields["metal:Zn"].error_text
    assert figure_data(panel.figure) == before_figure

    # correcting both redraws and clears the marks
    panel.fields["ph"].value = "6.4"
    panel.fields["metal:Zn"].value = 25.0
    assert all(f.error_text == "" for f in panel.fields.values())
    assert figure_data(panel.figure) == before_figure  # same inputs as before: same figure


@pytest.mark.parametrize(
    ("field", "value", "expected"),
    [
        ("permit", "Zn = abc", "not a number"),
        ("permit", "Co = 0.5", "Co"),  # a permit limit for a metal not in the influent
        ("permit", "Cr(VI) = 0.1", "reduced"),
        ("temperature_c", 80.0, "°C"),
        ("alkalinity_mg_l_caco3", 5000.0, "inconsistent with pH"),
        ("effluent_tss_mg_l", "lots", "a number is required"),
        ("purity", "1.5", "(0, 1]"),
        ("ph_high", 5.2, "at least 0.5"),
    ],
)
def test_each_bad_value_is_reported_beside_its_own_field(panel, field, value, expected):
    before = figure_data(panel.figure)
    panel.fields[field].value = value
    assert expected in panel.fields[field].error_text
    assert [k for k, f in panel.fields.items() if f.error_text] == [field]
    assert panel.fields[field].value == value
    assert figure_data(panel.figure) == before


def test_no_limits_at_all_is_said_beside_the_limit_set(panel):
    before = figure_data(panel.figure)
    panel.fields["limit_set"].value = None
    assert "permit limits" in panel.fields["limit_set"].error_text
    assert figure_data(panel.figure) == before


def test_an_unexpected_failure_is_logged_and_shown_and_inputs_stay(panel, monkeypatch, caplog):
    def broken(*args, **kwargs):
        raise RuntimeError("solver exploded")

    monkeypatch.setattr(scenario_module, "design_setpoint", broken)  # (the panel designs through design_scenario)
    before_values, before_figure = values(panel), figure_data(panel.figure)
    with caplog.at_level(logging.ERROR, logger="workbench.widgets.setpoint"):
        panel.fields["margin"].value = 0.65
    assert "RuntimeError: solver exploded" in panel.panel_error.value
    assert any(r.exc_info and "solver exploded" in str(r.exc_info[1]) for r in caplog.records)
    assert values(panel) == {**before_values, "margin": 0.65}
    assert figure_data(panel.figure) == before_figure


def test_dose_and_sludge_at_the_setpoint_are_the_dose_modules(panel, demo):
    design = panel.design
    expected = dose.daily_table(demo.water, "lime", design.setpoint_ph, 500.0)
    pd.testing.assert_frame_equal(panel.dose_table, expected)
    total = panel.sludge_table.loc["total", "kg_d"]
    assert total == pytest.approx(expected["dry_sludge_kg_d"].iloc[0], rel=1e-9)
    assert f"{expected['dose_mg_l'].iloc[0]:.4g} mg/L" in panel.dose.value
    assert f"{expected['reagent_kg_d'].iloc[0]:.4g} kg/d" in panel.dose.value


def test_measured_acidity_and_reactor_reach_the_dose_and_the_scenario_file(panel, demo, tmp_path):
    panel.fields["acidity_mg_l_caco3"].value = "250"
    panel.fields["reagent"].value = "caustic"
    panel.fields["reactor"].value = "open"
    state = panel.state()
    assert state.water.acidity_mg_l_caco3 == 250.0 and state.reagent.reactor == "open"
    target = panel.design.setpoint_ph
    expected = dose.daily_table(state.water, "caustic", target, 500.0, reactor="open")
    pd.testing.assert_frame_equal(panel.dose_table, expected)
    assert "open to the air (aerated) reactor" in panel.dose.value
    assert panel.sludge_table.attrs["acidity_basis"] == "measured acidity"
    path = tmp_path / "acid.toml"
    panel.fields["path"].value = str(path)
    panel.save_button.click()
    saved = read_scenario(path)
    assert saved.water.acidity_mg_l_caco3 == 250.0 and saved.reagent.reactor == "open"
    panel.fields["acidity_mg_l_caco3"].value = "lots"  # refused beside its own field, nothing else changes
    assert "a number is required" in panel.fields["acidity_mg_l_caco3"].error_text
    panel.fields["acidity_mg_l_caco3"].value = ""  # blank: not measured
    assert panel.state().water.acidity_mg_l_caco3 is None


def test_two_stage_scheme_is_shown_when_no_single_ph_works():
    # aluminium (amphoteric, minimum near pH 6.5) and cadmium (needs pH > 10) at tight limits: no single pH
    water = wb.Water(metals_mg_l={"Al": 20.0, "Cd": 5.0}, ph=3.0, sulfate_mg_l=300, sodium_mg_l=60)
    scenario = Scenario(
        name="two stages",
        water=water,
        limits=LimitsChoice(permit={"Al": 1.0, "Cd": 0.1}),
        design=DesignOptions(margin=1.0),
        reagent=ReagentChoice(name="caustic", flow_m3_d=100.0),
    )
    panel = SetpointPanel(scenario)
    design = reference_design(panel.state(), panel)
    assert design.setpoint_ph is None and len(design.stages) == 2
    assert_figure_shows(panel.figure, design)
    stage_marks = [s.x0 for s in panel.figure.layout.shapes if s.type == "line"]
    assert stage_marks == pytest.approx([st["ph"] for st in design.stages])
    assert "two-stage" in panel.stages.value
    assert all(f"{st['ph']:.2f}" in panel.stages.value for st in design.stages)
    expected = dose.daily_table(water, "caustic", design.stages[0]["ph"], 100.0)
    pd.testing.assert_frame_equal(panel.dose_table, expected)
    assert "stage 1" in panel.dose.value and "Stage 2" in panel.dose.value


def test_monte_carlo_band_reaches_the_sample_count_and_is_drawn(panel, demo):
    panel.fields["samples"].value = 3
    panel.fields["seed"].value = 7
    seen = []
    panel.progress.observe(lambda change: seen.append(change["new"]), names="value")
    panel.compute_band.click()
    assert panel.panel_error.value == ""
    assert panel.progress.value == panel.progress.max == 3
    assert seen and seen[-1] == 3
    expected = reference_design(demo, panel, samples=3, seed=7).band
    band = panel.design.band
    for metal in panel.design.curve.columns:
        lower = next(t for t in panel.figure.data if t.name.startswith(f"{metal} ") and t.fill == "tonexty")
        np.testing.assert_allclose(
            lower.y, np.maximum(expected.lower[metal].to_numpy(), FLOOR_MG_L), rtol=1e-9
        )
        np.testing.assert_allclose(lower.x, expected.lower.index.to_numpy())
    pd.testing.assert_series_equal(band.probability_meets, expected.probability_meets)
    assert "Share of samples" in panel.band_table.value
    # a change of input clears the band (it belonged to the old inputs)
    panel.fields["margin"].value = 0.55
    assert not any(t.fill == "tonexty" for t in panel.figure.data)
    assert panel.band_table.value == ""


def test_zero_samples_is_refused_beside_the_field(panel):
    panel.fields["samples"].value = 0
    panel.compute_band.click()
    assert "at least 1" in panel.fields["samples"].error_text


def test_save_and_load_scenario_round_trip(panel, demo, tmp_path):
    path = tmp_path / "plant.toml"
    panel.fields["metal:Zn"].value = 31.5
    panel.fields["flow_m3_d"].value = "750"
    panel.fields["path"].value = str(path)
    panel.save_button.click()
    assert panel.fields["path"].error_text == ""
    saved = read_scenario(path)
    assert saved == panel.state()
    assert saved.water.metals_mg_l["Zn"] == 31.5 and saved.reagent.flow_m3_d == 750.0

    panel.fields["metal:Zn"].value = 10.0
    panel.load_button.click()
    assert panel.fields["metal:Zn"].value == 31.5
    assert panel.state() == saved
    assert_figure_shows(panel.figure, reference_design(saved, panel))


def test_a_bad_scenario_file_is_refused_beside_the_path_and_inputs_stay(panel, tmp_path):
    bad = tmp_path / "bad.toml"
    bad.write_text('version = 1\nname = "x"\n[influent]\ntemperature_c = 99.0\n', encoding="utf-8")
    before_values, before_figure = values(panel), figure_data(panel.figure)
    panel.fields["path"].value = str(bad)
    panel.load_button.click()
    assert "temperature_c" in panel.fields["path"].error_text
    assert {k: v for k, v in values(panel).items() if k != "path"} == {
        k: v for k, v in before_values.items() if k != "path"
    }
    assert figure_data(panel.figure) == before_figure
    panel.fields["path"].value = str(tmp_path / "missing.toml")
    panel.load_button.click()
    assert "existing" in panel.fields["path"].error_text


def test_saving_with_a_bad_input_writes_nothing(panel, tmp_path):
    path = tmp_path / "plant.toml"
    panel.fields["metal:Ni"].value = -1.0
    panel.fields["path"].value = str(path)
    panel.save_button.click()
    assert "not saved" in panel.fields["path"].error_text
    assert "allowed 0 to" in panel.fields["metal:Ni"].error_text
    assert not path.exists()


def test_the_panel_displays_as_a_widget(panel):
    bundle = panel._repr_mimebundle_()
    assert "application/vnd.jupyter.widget-view+json" in bundle


def test_parse_permit_and_field_mapping():
    assert parse_permit("Zn = 1\n\n# comment\nFe(II): 0.3  # ferrous\n") == {"Zn": 1.0, "Fe(II)": 0.3}
    for text in ("Zn 1", "Zn = 1,5", "Zn = 1\nZn = 2"):
        with pytest.raises(ValueError):
            parse_permit(text)
    assert field_for("metals_mg_l['Zn']") == "metal:Zn"
    assert field_for("influent.metals_mg_l['Cd']") == "metal:Cd"
    assert field_for("limits.permit.Zn") == "permit"
    assert field_for("design.margin") == field_for("margin") == "margin"
    assert field_for("ionic strength") == ""


# ---------------------------------------------------------------------------------------------------- jar tests
LABELS = {
    ("dissolved", False): "dissolved",
    ("total", False): "total",
    ("dissolved", True): "dissolved, below detection",
    ("total", True): "total, below detection",
}
SYMBOLS = {  # filtered filled, unfiltered open, below detection a downward triangle (DESIGN.md section 6)
    ("dissolved", False): "circle",
    ("total", False): "circle-open",
    ("dissolved", True): "triangle-down",
    ("total", True): "triangle-down-open",
}


@pytest.fixture(scope="module")
def jar_panel():
    panel = JarTestPanel(demo_water())
    panel.path_field.value = str(demo_jar_tests_path())
    panel.load_button.click()
    return panel


@pytest.fixture(scope="module")
def jar_reference():
    water = demo_water()
    tidy = wb.read_jar_tests(demo_jar_tests_path())
    fits = cal.fit_solubility_shifts(tidy, water)
    return water, tidy, fits


def test_jar_panel_draws_the_jars_over_the_cores_curves(jar_panel, jar_reference):
    water, tidy, fits = jar_reference
    assert jar_panel.path_field.error_text == "" and jar_panel.panel_error.value == ""
    pd.testing.assert_frame_equal(jar_panel.tidy, tidy)
    ph = curve_ph(tidy)
    predicted = wb.residual_curve(water, ph)
    calibrated = cal.calibrated_curve(water, ph, fits)
    traces = {t.name: t for t in jar_panel.figure.data}
    for metal in water.metals_mg_l:
        line = traces[f"{metal} predicted"]
        np.testing.assert_allclose(line.x, ph)
        np.testing.assert_allclose(line.y, np.maximum(predicted[metal].to_numpy(), 1e-9), rtol=1e-12)
        for (fraction, censored), label in LABELS.items():
            rows = tidy[
                (tidy["metal"] == metal) & (tidy["fraction"] == fraction) & (tidy["censored"] == censored)
            ]
            name = f"{metal} {label}"
            if rows.empty:
                assert name not in traces
                continue
            np.testing.assert_allclose(traces[name].x, rows["pH"].to_numpy())
            column = "detection_limit_mg_l" if censored else "value_mg_l"
            np.testing.assert_allclose(traces[name].y, rows[column].to_numpy())
            assert traces[name].marker.symbol == SYMBOLS[(fraction, censored)]
    for metal, shift in cal.calibrated_shift(fits).items():
        line = next(t for t in jar_panel.figure.data if t.name.startswith(f"{metal} calibrated"))
        assert f"{shift:+.2f}" in line.name
        np.testing.assert_allclose(line.y, np.maximum(calibrated[metal].to_numpy(), 1e-9), rtol=1e-12)


def test_jar_panel_tables_are_the_calibration_modules(jar_panel, jar_reference):
    water, tidy, fits = jar_reference
    table = cal.fits_table(fits)
    pd.testing.assert_frame_equal(cal.fits_table(jar_panel.fits), table)
    assert f"{table.loc['Zn', 'shift']:+.2f}" in jar_panel.fits_html.value
    assert f"{table.loc['Ni', 'shift']:+.2f}" in jar_panel.fits_html.value
    pd.testing.assert_frame_equal(jar_panel.overlay, cal.overlay(tidy, water))
    # flags and minima: the panel's own tables, or the error they raise shown in their section
    for attr, html_widget, make in (
        ("flags", jar_panel.flags_html, lambda: cal.flag_jars(tidy, water)),
        ("minima", jar_panel.minima_html, lambda: cal.compare_minima(tidy, water)),
    ):
        try:
            expected = make()
        except Exception as exc:  # the section says what failed; nothing else is hidden
            assert type(exc).__name__ in html_widget.value
            continue
        pd.testing.assert_frame_equal(getattr(jar_panel, attr), expected)
    if jar_panel.flags is not None and not jar_panel.flags.empty:
        for reason in jar_panel.flags["reason"]:
            assert reason.split(":")[0] in jar_panel.flags_html.value
    assert "the local permit governs" in jar_panel.cautions.value


def test_carry_calibration_into_scenario_changes_only_the_calibration(jar_panel, jar_reference, tmp_path):
    _, _, fits = jar_reference
    path = tmp_path / "plant.toml"
    shutil.copyfile(demo_scenario_path(), path)
    before = read_scenario(path)
    jar_panel.scenario_field.value = str(path)
    jar_panel.carry_button.click()
    assert jar_panel.scenario_field.error_text == "", jar_panel.scenario_field.error_text
    after = read_scenario(path)
    shift = cal.calibrated_shift(fits)
    assert dict(after.calibration.shift) == shift
    for metal, (low, high) in after.calibration.interval.items():
        assert (low, high) == (fits[metal].low, fits[metal].high)
    assert set(after.calibration.interval) == {
        m for m in shift if np.isfinite(fits[m].low) and np.isfinite(fits[m].high)
    }
    assert replace(after, calibration=None) == replace(before, calibration=None)
    assert "Written into" in jar_panel.carry_status.value
    # the setpoint panel picks the calibration up from that file
    panel = SetpointPanel(after)
    assert panel.use_calibration.value and panel.state().calibration == after.calibration


def test_carry_refuses_a_missing_scenario_beside_its_path(jar_panel, tmp_path):
    jar_panel.scenario_field.value = str(tmp_path / "nowhere.toml")
    jar_panel.carry_button.click()
    assert "existing" in jar_panel.scenario_field.error_text
    assert not (tmp_path / "nowhere.toml").exists()


SMALL_JARS = (
    "jar,reagent,dose (mg/L),pH,Zn dissolved (mg/L),Zn total (mg/L)\n"
    "1,none,0,6.4,25,25\n2,lime,150,8.0,1.1,1.3\n3,lime,215,9.1,0.19,0.5\n4,lime,240,9.6,0.1,0.6\n"
    "5,lime,330,10.5,0.37,0.9\n"
)


def upload(panel, name: str, content: bytes, size: int | None = None) -> None:
    item = {
        "name": name,
        "type": "",
        "size": len(content) if size is None else size,
        "content": memoryview(content),
    }
    item["last_modified"] = datetime.now(UTC)
    panel.upload.value = (item,)


def test_upload_reads_the_file_and_refuses_bad_ones_beside_the_upload():
    water = wb.Water(metals_mg_l={"Zn": 25.0}, ph=6.4, temperature_c=22.0, alkalinity_mg_l_caco3=150.0)
    panel = JarTestPanel(water)
    upload(panel, "jars.csv", SMALL_JARS.encode())
    assert panel.upload_field.error_text == "" and panel.panel_error.value == ""
    tidy = wb.read_jar_tests(SMALL_JARS.encode(), file_format="csv")
    pd.testing.assert_frame_equal(panel.tidy, tidy)
    line = next(t for t in panel.figure.data if t.name == "Zn predicted")
    ph = curve_ph(tidy)
    np.testing.assert_allclose(line.y, np.maximum(wb.residual_curve(water, ph)["Zn"].to_numpy(), 1e-9))
    before = figure_data(panel.figure)

    upload(panel, "huge.csv", b"jar\n", size=UPLOAD_MAX_BYTES + 1)
    assert "MB" in panel.upload_field.error_text
    upload(panel, "notes.docx", b"PK")
    assert ".csv or .xlsx" in panel.upload_field.error_text
    upload(panel, "broken.csv", SMALL_JARS.replace("8.0", "eight").encode())
    assert "row" in panel.upload_field.error_text and "eight" in panel.upload_field.error_text
    assert figure_data(panel.figure) == before
    pd.testing.assert_frame_equal(panel.tidy, tidy)
