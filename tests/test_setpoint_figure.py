"""The setpoint figure draws the design's own numbers: curves, targets, limits, windows, setpoint, stages, band."""

import numpy as np
import pytest

import workbench as wb
from workbench.figures import fig_setpoint
from workbench.figures.palette import WINDOW_FILL, metal_style

WATER = wb.Water(
    metals_mg_l={"Zn": 20.0, "Cd": 2.0},
    ph=6.5,
    sodium_mg_l=230.0,
    sulfate_mg_l=480.0,
    alkalinity_mg_l_caco3=100.0,
)
LIMITS = wb.permit_limits({"Zn": 2.0, "Cd": 0.2})


@pytest.fixture(scope="module")
def design():
    return wb.design_setpoint(WATER, LIMITS, 0.8, ph_range=(7.0, 11.5), samples=4, seed=2)


def _by_name(fig):
    return {t.name: t for t in fig.data}


def test_traces_are_the_designs_curves_targets_and_limits(design):
    fig = fig_setpoint(design)
    traces = _by_name(fig)
    for metal in ("Zn", "Cd"):
        colour, dash = metal_style(metal)
        curve = traces[metal]
        np.testing.assert_array_equal(curve.x, design.curve.index.to_numpy(float))
        np.testing.assert_array_equal(curve.y, np.maximum(design.curve[metal].to_numpy(float), 1e-9))
        assert curve.line.color == colour
        target, limit = traces[f"{metal} target"], traces[f"{metal} limit"]
        assert tuple(target.y) == (0.8 * LIMITS.set_index("metal").loc[metal, "limit_mg_l"],) * 2
        assert tuple(limit.y) == (LIMITS.set_index("metal").loc[metal, "limit_mg_l"],) * 2
        assert target.line.color == limit.line.color == colour
        assert (target.line.dash, limit.line.dash) == ("dash", "dot")
    assert fig.layout.yaxis.type == "log"
    assert fig.layout.xaxis.title.text == "pH" and "(mg/L)" in fig.layout.yaxis.title.text
    assert len(fig.data) == 6  # no band asked for


def test_window_is_shaded_and_setpoint_marked(design):
    fig = fig_setpoint(design)
    rects = [s for s in fig.layout.shapes if s.type == "rect"]
    lines = [s for s in fig.layout.shapes if s.type == "line"]
    assert [(r.x0, r.x1) for r in rects] == design.windows and rects[0].fillcolor == WINDOW_FILL
    assert [ln.x0 for ln in lines] == [design.setpoint_ph]
    texts = [a.text for a in fig.layout.annotations]
    assert f"setpoint pH {design.setpoint_ph:.2f}" in texts


def test_band_is_drawn_from_the_monte_carlo_quantiles(design):
    fig = fig_setpoint(design, band=design.band)
    traces = _by_name(fig)
    for metal in ("Zn", "Cd"):
        lower = traces[f"{metal} 5-95 % band (dissolved)"]
        upper = traces[f"{metal} 5-95 % band (dissolved) upper"]
        np.testing.assert_array_equal(lower.y, np.maximum(design.band.lower[metal].to_numpy(float), 1e-9))
        np.testing.assert_array_equal(upper.y, np.maximum(design.band.upper[metal].to_numpy(float), 1e-9))
        assert lower.fill == "tonexty"


def test_two_stage_design_marks_both_stages():
    # aluminium (minimum near pH 6.5) and cadmium (needs pH > 10) at tight limits: no single pH (as in
    # tests/test_setpoint.py)
    water = wb.Water(metals_mg_l={"Al": 20.0, "Cd": 5.0}, ph=3.0, sulfate_mg_l=300, sodium_mg_l=60)
    design = wb.design_setpoint(water, wb.permit_limits({"Al": 1.0, "Cd": 0.1}), margin=1.0)
    assert design.setpoint_ph is None and design.stages
    fig = fig_setpoint(design)
    marks = sorted(s.x0 for s in fig.layout.shapes if s.type == "line")
    assert marks == sorted(s["ph"] for s in design.stages)
    texts = {a.text for a in fig.layout.annotations}
    assert {f"stage {s['stage']} pH {s['ph']:.2f}" for s in design.stages} <= texts
    assert not [s for s in fig.layout.shapes if s.type == "rect"]


def test_redraw_into_an_existing_figure_replaces_everything(design):
    fig = fig_setpoint(design, band=design.band)
    again = fig_setpoint(design, fig=fig)
    assert again is fig and len(fig.data) == 6
