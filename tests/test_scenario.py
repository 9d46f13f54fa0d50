"""Scenario files: the full schema, exact round trips, refused files (field named, file untouched), atomic save."""

import math
import os
import subprocess
import sys
import textwrap
import tomllib

import pytest

import workbench as wb
import workbench.scenario as sc
from workbench.figures import fig_setpoint
from workbench.scenario import (
    Calibration,
    DesignOptions,
    LimitsChoice,
    ReagentChoice,
    Scenario,
    UncertaintySettings,
    demo_scenario_path,
    demo_water,
    parse_scenario,
    read_scenario,
    save_scenario,
)


def full_scenario() -> Scenario:
    """A scenario with every field set, away from its default, with values that are hard to write exactly."""
    water = wb.Water(
        metals_mg_l={"Zn": 0.1 + 0.2, "Cd": 1e-7 * 3, "Cu": 12345.678901234567, "Fe(II)": 2.5, "Pb": 1},
        temperature_c=17.3,
        ph=6.123456789012345,
        sulfate_mg_l=850.0,
        chloride_mg_l=1 / 3,
        sodium_mg_l=320.0,
        calcium_mg_l=60.0,
        magnesium_mg_l=15.0,
        alkalinity_mg_l_caco3=150.0,
        ammonia_mg_l_n=0.7,
        edta_mg_l=0.05,
        citrate_mg_l=0.02,
        fluoride_mg_l=1.25,
        tss_mg_l=40.0,
    )
    return Scenario(
        name='Plant "B" \\ line 2\nrinse — Zn/Cd (°C)',
        water=water,
        limits=LimitsChoice(
            set="40cfr433.15",
            basis="monthly_avg",
            permit={"Zn": 0.9, "Cd": 0.05},
            permit_source="Permit 12-A",
        ),
        design=DesignOptions(
            margin=0.7, ph_low=6.0, ph_high=11.5, rule="max_headroom", effluent_tss_mg_l=12.5, solids="aged"
        ),
        reagent=ReagentChoice(name="caustic", purity=0.5, flow_m3_d=123.456),
        calibration=Calibration(
            shift={"Zn": 0.55, "Cd": -0.1}, interval={"Zn": (0.3, 0.8)}, note="jars of 3 June"
        ),
        uncertainty=UncertaintySettings(samples=7, seed=123456789, default_uncertainty=0.25),
    )


def _bits(value):
    """Floats compared exactly (same bits), recursively."""
    if isinstance(value, float):
        return value.hex()
    if isinstance(value, dict):
        return {k: _bits(v) for k, v in value.items()}
    if isinstance(value, tuple | list):
        return [_bits(v) for v in value]
    return value


def _fields(s: Scenario) -> dict:
    w = s.water
    out = {
        f: getattr(w, f)
        for f in (
            "temperature_c",
            "ph",
            "sulfate_mg_l",
            "chloride_mg_l",
            "sodium_mg_l",
            "calcium_mg_l",
            "magnesium_mg_l",
            "alkalinity_mg_l_caco3",
            "ammonia_mg_l_n",
            "edta_mg_l",
            "citrate_mg_l",
            "fluoride_mg_l",
            "tss_mg_l",
            "name",
        )
    }
    out["metals"] = dict(w.metals_mg_l)
    out["name"] = s.name
    out["limits"] = (s.limits.set, s.limits.basis, dict(s.limits.permit), s.limits.permit_source)
    out["design"] = vars(s.design)
    out["reagent"] = vars(s.reagent) if s.reagent else None
    c = s.calibration
    out["calibration"] = (dict(c.shift), dict(c.interval), c.note) if c else None
    out["uncertainty"] = vars(s.uncertainty)
    return _bits(out)


# ---------------------------------------------------------------------------------------------------- schema
def test_demo_scenario_has_the_full_schema():
    s = read_scenario(demo_scenario_path())
    assert "invented" in s.name
    assert "INVENTED" in demo_scenario_path().read_text(encoding="utf-8")  # the header says it
    # values typed in data/demo/demo_scenario.toml
    assert dict(s.water.metals_mg_l) == {
        "Cu": 18.0,
        "Ni": 12.0,
        "Zn": 25.0,
        "Cd": 0.8,
        "Pb": 1.5,
        "Cr": 9.0,
        "Fe": 6.0,
        "Al": 3.0,
    }
    assert (s.water.temperature_c, s.water.ph, s.water.alkalinity_mg_l_caco3) == (22.0, 6.4, 150.0)
    assert s.limits.set == "40cfr433.15" and s.limits.basis is None and not s.limits.permit
    assert s.design == DesignOptions(
        margin=0.5, ph_low=5.0, ph_high=12.5, rule="widest_centre", solids="fresh"
    )
    assert s.reagent == ReagentChoice(name="lime", purity=None, flow_m3_d=500.0)
    assert s.calibration is None
    assert s.uncertainty == UncertaintySettings(samples=200, seed=1, default_uncertainty=0.2)
    assert demo_water() == s.water and isinstance(demo_water(), wb.Water)


def test_limits_table_is_the_example_set_plus_the_permit():
    s = full_scenario()
    table = s.limits_table()
    example = wb.load_limits("40cfr433.15")
    assert len(table) == len(example) + 2
    permit = table[table["origin"] == "permit"].set_index("metal")
    assert permit.loc["Zn", "limit_mg_l"] == 0.9 and permit.loc["Cd", "limit_mg_l"] == 0.05
    assert set(permit["source"]) == {"Permit 12-A"}
    kwargs = s.design_kwargs()
    assert kwargs["ph_range"] == (6.0, 11.5) and kwargs["basis"] == "monthly_avg"
    assert kwargs["solubility_shift"] == {"Zn": 0.55, "Cd": -0.1} and kwargs["samples"] == 7


def test_docstring_example_is_a_valid_scenario():
    doc = sc.__doc__
    block = doc[doc.index("::") + 2 : doc.index("Every table but")]
    s = parse_scenario(tomllib.loads(textwrap.dedent(block)))
    assert s.limits.permit == {"Zn": 1.0} and s.calibration.interval == {"Zn": (0.3, 0.8)}
    assert s.design.effluent_tss_mg_l == 10.0 and s.uncertainty.samples == 200


# ---------------------------------------------------------------------------------------------------- round trip
def test_round_trip_gives_identical_inputs(tmp_path):
    original = full_scenario()
    path = save_scenario(original, tmp_path / "plant.toml")
    loaded = read_scenario(path)
    assert loaded == original
    assert _fields(loaded) == _fields(original)  # every field, floats bit for bit
    again = save_scenario(loaded, tmp_path / "again.toml")
    assert again.read_bytes() == path.read_bytes()


def test_round_trip_of_the_demo_keeps_every_value(tmp_path):
    demo = read_scenario(demo_scenario_path())
    loaded = read_scenario(save_scenario(demo, tmp_path / "demo.toml"))
    assert loaded == demo and _fields(loaded) == _fields(demo)


def test_round_trip_gives_identical_figure_data(tmp_path):
    s = Scenario(
        name="Zn and Cd rinse (test)",
        water=wb.Water(
            metals_mg_l={"Zn": 20.0, "Cd": 2.0},
            ph=6.5,
            sodium_mg_l=230.0,
            sulfate_mg_l=480.0,
            alkalinity_mg_l_caco3=100.0,
        ),
        limits=LimitsChoice(permit={"Zn": 2.0, "Cd": 0.2}, permit_source="test permit"),
        design=DesignOptions(margin=0.8, ph_low=7.0, ph_high=11.5),
        calibration=Calibration(shift={"Zn": 0.3}),
        uncertainty=UncertaintySettings(samples=4, seed=3),
    )
    loaded = read_scenario(save_scenario(s, tmp_path / "s.toml"))

    def figure(scenario):
        design = wb.design_setpoint(scenario.water, scenario.limits_table(), **scenario.design_kwargs())
        return fig_setpoint(design, band=design.band)

    first, second = figure(s).to_dict(), figure(loaded).to_dict()
    assert first["data"] == second["data"]
    assert first["layout"]["shapes"] == second["layout"]["shapes"]  # window and setpoint
    assert len(first["layout"]["shapes"]) == 2
    assert len(first["data"]) == 2 * 5  # two metals: curve, target, limit and two band edges each


# ---------------------------------------------------------------------------------------------------- refused files
DEMO_TEXT = demo_scenario_path().read_text(encoding="utf-8")


def _edit(old: str, new: str) -> bytes:
    assert old in DEMO_TEXT
    return DEMO_TEXT.replace(old, new, 1).encode("utf-8")


BAD_FILES = {
    "bad TOML": (_edit("margin = 0.5", "margin = = 0.5"), "scenario file", "valid TOML"),
    "unknown key": (_edit("margin = 0.5", "margn = 0.5"), "design.margn", "unknown key"),
    "unknown top table": (DEMO_TEXT.encode() + b"\n[dosing]\nx = 1\n", "dosing", "unknown key"),
    "unknown influent key": (_edit("ph = 6.4", "ph = 6.4\nphh = 7.0"), "influent.phh", "unknown key"),
    "wrong type": (_edit("margin = 0.5", 'margin = "0.5"'), "design.margin", "allowed (0, 1]"),
    "wrong type samples": (_edit("samples = 200", "samples = 200.0"), "uncertainty.samples", "integer"),
    "version 2": (_edit("version = 1", "version = 2"), "version", "version 1"),
    "Cr(VI)": (_edit("Cr = 9.0", '"Cr(VI)" = 9.0'), "influent.metals_mg_l.Cr(VI)", "reduced"),
    "negative margin": (_edit("margin = 0.5", "margin = -0.5"), "design.margin", "allowed (0, 1]"),
    "unknown limit set": (_edit('set = "40cfr433.15"', 'set = "40cfr999"'), "limits.set", "40cfr433.15"),
    "reagent name": (_edit('name = "lime"', 'name = "lye"'), "reagent.name", "caustic"),
    "purity above 1": (_edit('name = "lime"', 'name = "lime"\npurity = 1.5'), "reagent.purity", "(0, 1]"),
    "zero flow": (_edit("flow_m3_d = 500.0", "flow_m3_d = 0.0"), "reagent.flow_m3_d", "positive"),
    "permit metal not in influent": (
        _edit('set = "40cfr433.15"', 'set = "40cfr433.15"\n[limits.permit]\nAg = 0.2'),
        "limits.permit.Ag",
        "influent",
    ),
    "calibration too large": (
        DEMO_TEXT.encode() + b"\n[calibration]\nZn = 7.5\n",
        "calibration.Zn",
        "-5 to 5",
    ),
    "interval without shift": (
        DEMO_TEXT.encode() + b"\n[calibration]\nZn = 0.5\n[calibration.interval]\nNi = [0.1, 0.2]\n",
        "calibration.interval.Ni",
        "shift for Ni",
    ),
    "ph range inverted": (_edit("ph_high = 12.5", "ph_high = 4.0"), "design.ph_high", "ph_low"),
    "missing influent": (b'version = 1\nname = "x"\n', "influent", "required"),
    "huge file": (DEMO_TEXT.encode() + b"#" * (sc.MAX_FILE_BYTES + 10), "scenario file", "bytes"),
    "non-UTF-8": (
        DEMO_TEXT.encode().replace(b"Demo plant (invented)", b"Demo plant \xff\xfe (invented)", 1),
        "scenario file",
        "UTF-8",
    ),
}


@pytest.mark.parametrize("case", list(BAD_FILES), ids=list(BAD_FILES))
def test_bad_file_is_refused_with_the_field_named_and_left_untouched(case, tmp_path):
    content, field, allowed = BAD_FILES[case]
    path = tmp_path / "bad.toml"
    path.write_bytes(content)
    before = (path.read_bytes(), os.stat(path).st_mtime_ns)
    with pytest.raises(wb.InputError) as info:
        read_scenario(path)
    assert info.value.field == field
    assert allowed in str(info.value)
    assert (path.read_bytes(), os.stat(path).st_mtime_ns) == before
    assert sorted(p.name for p in tmp_path.iterdir()) == ["bad.toml"]


def test_read_does_not_modify_a_good_file(tmp_path):
    path = tmp_path / "demo.toml"
    path.write_bytes(DEMO_TEXT.encode("utf-8"))
    before = (path.read_bytes(), os.stat(path).st_mtime_ns)
    read_scenario(path)
    assert (path.read_bytes(), os.stat(path).st_mtime_ns) == before


def test_programmatic_values_are_checked_like_file_values():
    with pytest.raises(wb.InputError) as info:
        DesignOptions(margin=math.nan)
    assert info.value.field == "design.margin"
    with pytest.raises(wb.InputError) as info:
        UncertaintySettings(samples=True)
    assert info.value.field == "uncertainty.samples"
    with pytest.raises(wb.InputError) as info:
        Scenario(name="x", water=wb.Water(metals_mg_l={"Zn": 1.0}), limits=LimitsChoice(permit={"Cu": 1.0}))
    assert info.value.field == "limits.permit.Cu"


def test_scenario_without_limits_cannot_build_a_limit_table():
    s = Scenario(name="no limits", water=wb.Water(metals_mg_l={"Zn": 1.0}))
    with pytest.raises(wb.InputError) as info:
        s.limits_table()
    assert info.value.field == "limits"


# ---------------------------------------------------------------------------------------------------- atomic save
def test_failed_save_leaves_the_previous_file_intact(tmp_path, monkeypatch):
    path = tmp_path / "plant.toml"
    save_scenario(read_scenario(demo_scenario_path()), path)
    before = path.read_bytes()

    def broken_replace(src, dst):
        raise OSError("disk full (simulated)")

    monkeypatch.setattr(sc.os, "replace", broken_replace)
    with pytest.raises(OSError, match="simulated"):
        save_scenario(full_scenario(), path)
    assert path.read_bytes() == before
    assert [p.name for p in tmp_path.iterdir()] == ["plant.toml"]  # no temporary file left


def test_save_keeps_the_file_permissions(tmp_path):
    path = tmp_path / "plant.toml"
    path.write_text("old", encoding="utf-8")
    os.chmod(path, 0o640)
    save_scenario(full_scenario(), path)
    assert os.stat(path).st_mode & 0o777 == 0o640
    assert read_scenario(path) == full_scenario()


def test_save_refuses_a_missing_folder_and_a_folder_as_file(tmp_path):
    with pytest.raises(wb.InputError) as info:
        save_scenario(full_scenario(), tmp_path / "missing" / "plant.toml")
    assert info.value.field == "scenario file"
    with pytest.raises(wb.InputError):
        save_scenario(full_scenario(), tmp_path)
    assert list(tmp_path.iterdir()) == []


def test_unknown_metal_keys_are_named_with_their_dotted_key():
    with pytest.raises(wb.InputError) as info:
        LimitsChoice(permit={"Xx": 1.0})
    assert info.value.field == "limits.permit.Xx" and "known metals" in str(info.value)
    with pytest.raises(wb.InputError) as info:
        Calibration(shift={"Cr(VI)": 0.1})
    assert info.value.field == "calibration.Cr(VI)" and "reduced" in str(info.value)


def test_scenario_files_are_read_without_plotting_or_widget_libraries():
    # reading a scenario is part of the core path (command line, widgets): it must stay light
    code = (
        "import sys, workbench.scenario as s; s.read_scenario(s.demo_scenario_path());"
        "bad = [m for m in ('plotly', 'ipywidgets', 'kaleido') if m in sys.modules]; print(bad);"
        "sys.exit(1 if bad else 0)"
    )
    done = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True)
    assert done.returncode == 0, done.stdout + done.stderr
