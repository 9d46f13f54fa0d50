"""One function turns a scenario into a design (scenario.design_scenario): the figure pack, the setpoint panel and
the command line all make their design through it, with the scenario's own options unless told otherwise."""

from __future__ import annotations

from dataclasses import replace

import numpy as np
import pytest

import workbench as wb
from workbench import export, scenario
from workbench.scenario import UncertaintySettings, demo_scenario_path, design_scenario, read_scenario


@pytest.fixture(scope="module")
def demo():
    """The demo scenario without its Monte Carlo band (kept short)."""
    return replace(read_scenario(demo_scenario_path()), uncertainty=UncertaintySettings(samples=0))


def test_the_design_is_design_setpoint_with_the_scenarios_options(demo):
    direct = wb.design_setpoint(demo.water, demo.limits_table(), **{**demo.design_kwargs(), "samples": 0})
    design = design_scenario(demo, samples=0)
    assert design.setpoint_ph == direct.setpoint_ph and design.windows == direct.windows
    np.testing.assert_array_equal(design.curve.to_numpy(), direct.curve.to_numpy())
    assert design.band is None


def test_step_and_samples_replace_the_scenarios_own(demo):
    design = design_scenario(demo, samples=3, step=0.1)
    assert design.band is not None and design.band.samples == 3
    assert np.allclose(np.diff(design.curve.index.to_numpy()), 0.1)


def test_anything_but_a_scenario_is_refused_naming_the_field():
    with pytest.raises(wb.InputError, match="scenario"):
        design_scenario({"name": "not a scenario"})


@pytest.fixture
def calls(monkeypatch):
    """Every call of design_scenario, wherever it is made from."""
    made = []
    real = scenario.design_scenario

    def spy(*args, **kwargs):
        made.append(kwargs)
        return real(*args, **kwargs)

    monkeypatch.setattr(scenario, "design_scenario", spy)
    monkeypatch.setattr(export, "design_scenario", spy)
    from workbench.widgets import setpoint as panel_module

    monkeypatch.setattr(panel_module, "design_scenario", spy)
    return made


def test_the_figure_pack_and_the_command_line_design_through_it(demo, calls, tmp_path):
    export.build_figure_pack(demo)
    assert len(calls) == 1
    from workbench.__main__ import main

    path = wb.save_scenario(demo, tmp_path / "demo.toml")
    assert main(["figures", str(path), "--out", str(tmp_path / "pack"), "--formats", "html"]) == 0
    assert len(calls) == 2


def test_the_setpoint_panel_designs_through_it(demo, calls):
    from workbench.widgets import SetpointPanel

    panel = SetpointPanel(demo)
    assert calls and calls[-1]["samples"] == 0 and calls[-1]["step"] == panel.ph_step
