"""Every notebook runs headless, top to bottom, on the demo scenario, without an error."""

import json
import tomllib
from pathlib import Path

import nbformat
import numpy as np
import pytest
from nbclient import NotebookClient

import workbench as wb
from workbench.scenario import demo_scenario_path, demo_water, parse_scenario, read_scenario
from workbench.treatment.jar_tests import demo_jar_tests_path
from workbench.widgets.jar_tests import curve_ph

NOTEBOOKS = sorted((Path(__file__).resolve().parents[1] / "notebooks").glob("*.ipynb"))

# The panels' figures are widgets: their data live in the kernel, not in the notebook's outputs. A probe cell run
# after the notebook prints what the panel shows; the test recomputes it here with the core API and compares.
_PANEL_STATE = """
import json as _json
_errors = [f.error_text for f in getattr(panel, "fields", {}).values() if f.error_text]
print(_json.dumps({
    "traces": [{"name": t.name, "mode": t.mode, "x": [float(v) for v in t.x], "y": [float(v) for v in t.y]}
               for t in panel.figure.data if t.mode == "lines"],
    "errors": _errors + ([panel.panel_error.value] if panel.panel_error.value else []),
    "cautions": panel.cautions.value,
    %s
}))
"""
PROBES = {
    "setpoint.ipynb": _PANEL_STATE % '"scenario": panel.state().to_toml(), "step": panel.ph_step,',
    "jar_tests.ipynb": _PANEL_STATE % '"source": panel.tidy.attrs["source"], "fits": panel.fits_html.value,',
}


WIDGET = "application/vnd.jupyter.widget-view+json"


def probe_output(nb) -> str:
    return "".join(o.get("text", "") for o in nb.cells[-1].outputs if o.output_type == "stream")


def check_panel(name: str, shown: dict) -> None:
    """The panel's figure data equal the core's result for the demo inputs, no error shown, cautions shown."""
    assert shown["errors"] == []
    assert "the local permit governs" in shown["cautions"]
    traces = {t["name"]: t for t in shown["traces"]}
    if name == "setpoint.ipynb":
        demo = read_scenario(demo_scenario_path())
        assert parse_scenario(tomllib.loads(shown["scenario"])) == demo
        kwargs = {**demo.design_kwargs(), "samples": 0, "step": shown["step"]}
        design = wb.design_setpoint(demo.water, demo.limits_table(), **kwargs)
        assert set(design.curve.columns) == {"Cu", "Ni", "Zn", "Cd", "Pb", "Cr"}  # metals with a limit
        for metal in design.curve.columns:
            np.testing.assert_allclose(traces[metal]["x"], design.curve.index.to_numpy(), rtol=0, atol=1e-12)
            expected = np.maximum(design.curve[metal].to_numpy(), 1e-9)
            np.testing.assert_allclose(traces[metal]["y"], expected, rtol=1e-12)
            assert traces[f"{metal} target"]["y"] == pytest.approx([design.targets[metal]] * 2, rel=1e-12)
    if name == "jar_tests.ipynb":
        assert shown["source"] == demo_jar_tests_path().name
        tidy = wb.read_jar_tests(demo_jar_tests_path())
        ph = curve_ph(tidy)
        predicted = wb.residual_curve(demo_water(), ph)
        for metal in predicted.columns:
            np.testing.assert_allclose(traces[f"{metal} predicted"]["x"], ph)
            expected = np.maximum(predicted[metal].to_numpy(), 1e-9)
            np.testing.assert_allclose(traces[f"{metal} predicted"]["y"], expected, rtol=1e-12)
        assert any(n.startswith("Zn calibrated (+") for n in traces)  # the demo series was made with Zn +0.6
        assert "Zn" in shown["fits"]


def test_there_are_notebooks():
    assert NOTEBOOKS


@pytest.mark.parametrize("path", NOTEBOOKS, ids=lambda p: p.name)
def test_notebook_runs(path, tmp_path):
    nb = nbformat.read(path, as_version=4)
    assert all(not c.get("outputs") for c in nb.cells if c.cell_type == "code"), (
        "commit notebooks without outputs"
    )
    if path.name in PROBES:  # appended to the copy in memory only: the notebook itself stays display-only
        nb.cells.append(nbformat.v4.new_code_cell(PROBES[path.name]))
    NotebookClient(
        nb, timeout=300, kernel_name="python3", resources={"metadata": {"path": str(tmp_path)}}
    ).execute()
    errors = [o for c in nb.cells if c.cell_type == "code" for o in c.outputs if o.output_type == "error"]
    assert not errors
    # the first figure is the residual curve with one trace per metal of the demo influent (plus minimum markers)
    figs = [
        o
        for c in nb.cells
        if c.cell_type == "code"
        for o in c.outputs
        if "application/vnd.plotly.v1+json" in o.get("data", {})
    ]
    if path.name in PROBES:
        views = [
            o
            for c in nb.cells[:-1]
            if c.cell_type == "code"
            for o in c.outputs
            if WIDGET in o.get("data", {})
        ]
        assert views, "the notebook displays its panel"
        check_panel(path.name, json.loads(probe_output(nb)))
    if path.name == "permit_figures.ipynb":
        # the setpoint figure: one legend entry per metal with a limit in 40 CFR 433.15 (the demo's limit set)
        first = figs[0]["data"]["application/vnd.plotly.v1+json"]
        shown = {t["name"] for t in first["data"] if t.get("showlegend", True)}
        assert shown == {"Cu", "Ni", "Zn", "Cd", "Pb", "Cr"}
        caption = next(a["text"] for a in first["layout"]["annotations"] if a.get("name") == "caption")
        assert "Powell" in caption and "40 CFR" in caption
        # the pack went into the notebook's folder only (here the temporary run folder)
        packs = list(tmp_path.glob("figure_pack_*"))
        assert [p.name for p in packs] == [
            "figure_pack_demo_plant_invented_combined_rinse_of_a_plating_and_finishing_shop"
        ]
        assert (packs[0] / "setpoint.pdf").read_bytes().startswith(b"%PDF")
        assert (packs[0] / "summary.html").is_file()
