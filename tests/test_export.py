"""Figure pack export: files of the right type, captions with conditions, sources and cautions, byte-identical
reruns, tables equal to the core's results, writes confined to the chosen folder, the command line.

Static images need Chromium (Debian's package; see .ci/run). Without it these tests skip on a workstation and
fail in CI (CI=true): never a silent skip there.
"""

import dataclasses
import html
import os
import re
import subprocess
import sys
from pathlib import Path

import pandas as pd
import pytest

import workbench as wb
from workbench.__main__ import main
from workbench.chemistry import database
from workbench.export import (
    ExportError,
    build_figure_pack,
    export_figure_pack,
    find_browser,
    image_server,
    pack_folder_name,
)
from workbench.scenario import (
    DesignOptions,
    LimitsChoice,
    Scenario,
    UncertaintySettings,
    demo_scenario_path,
    read_scenario,
    save_scenario,
)
from workbench.treatment.cautions import cautions
from workbench.treatment.provenance import bibliography

REPO = Path(__file__).resolve().parents[1]
FIGURES = ("setpoint", "residual_curves")
TABLES = ("minimum_solubility", "setpoint_headroom", "limits_used", "windows")
TEXT_FILES = ("cautions.txt", "sources.txt", "scenario.toml", "summary.html", "tables.xlsx", "pack_manifest.json")


@pytest.fixture(scope="module")
def server():
    """One kaleido browser for the whole module."""
    try:
        find_browser()
    except ExportError as exc:
        if os.environ.get("CI") == "true":
            pytest.fail(f"CI needs Chromium for figure export: {exc}")
        pytest.skip(str(exc))
    with image_server():
        yield


@pytest.fixture(scope="module")
def scenario():
    """The demo plant with a short Monte Carlo run (10 samples, seed 1) to keep the module quick."""
    demo = read_scenario(demo_scenario_path())
    return dataclasses.replace(demo, uncertainty=UncertaintySettings(samples=10, seed=1))


@pytest.fixture(scope="module")
def runs(server, scenario, tmp_path_factory):
    """Two independent exports of the same scenario (each computes its pack from scratch)."""
    base = tmp_path_factory.mktemp("packs")
    return [export_figure_pack(scenario, base / name) for name in ("first", "second")]


def _svg_text(path: Path) -> str:
    """The visible text of an SVG: tags removed, entities decoded, whitespace collapsed (lines joined)."""
    text = re.sub(r"<[^>]+>", " ", path.read_text(encoding="utf-8"))
    return " ".join(html.unescape(text).split())


def _figure_html_text(path: Path) -> str:
    """The text of a plotly HTML file with caption line breaks joined."""
    return " ".join(path.read_text(encoding="utf-8").replace("<br>", " ").split())


# ---------------------------------------------------------------------------------------------------- files
def test_every_file_is_written_with_the_right_type(runs):
    written = runs[0]
    folder = written[0].parent
    expected = {f"{s}.{f}" for s in FIGURES for f in ("png", "svg", "pdf", "html")}
    expected |= {f"{t}.csv" for t in TABLES} | set(TEXT_FILES)
    assert {p.name for p in written} == expected  # the demo has a single window: no stages.csv
    assert sorted(p.name for p in folder.iterdir()) == sorted(expected)  # nothing else (no temporary files)
    for stem in FIGURES:
        assert (folder / f"{stem}.png").read_bytes().startswith(b"\x89PNG\r\n\x1a\n")
        assert (folder / f"{stem}.pdf").read_bytes().startswith(b"%PDF")
        assert "<svg" in (folder / f"{stem}.svg").read_text(encoding="utf-8")
        page = (folder / f"{stem}.html").read_text(encoding="utf-8")
        assert "<html" in page and "Plotly.newPlot" in page
        assert not re.search(r"<script[^>]+src=\"https?:", page)  # plotly.js inside: works offline
        for fmt in ("png", "svg", "pdf", "html"):
            assert (folder / f"{stem}.{fmt}").stat().st_size > 1000


def test_captions_carry_conditions_sources_and_cautions(runs, scenario):
    folder = runs[0][0].parent
    # ground truth for the sources: the demo has zinc, whose hydrolysis constants data/thermo takes from the IUPAC
    # report on zinc (key powell2013), and the limit set 40cfr433.15 cites 40 CFR 433.15
    data = database.load()
    zinc = next(r for r in data.rows if r.name == "Zn(OH)4^2-")
    assert zinc.source == "powell2013"
    zinc_label = bibliography()["powell2013"].short
    assert zinc_label == "Powell et al. 2013"
    for text in (_svg_text(folder / "setpoint.svg"), _figure_html_text(folder / "setpoint.html")):
        assert scenario.name in text
        assert zinc_label in text and "40 CFR 433.15" in text and "Davies 1962" in text
        assert "22 °C" in text or "22 \\u00b0C" in text
        assert "margin 0.5" in text and "10 samples, seed 1" in text and "calibration: none" in text
        assert "jar tests" in text and "see cautions.txt" in text.lower()
    curves = _svg_text(folder / "residual_curves.svg")
    assert zinc_label in curves and "Cautions:" in curves and "22 °C" in curves
    summary = (folder / "summary.html").read_text(encoding="utf-8")
    assert zinc_label in summary and "40 CFR" in summary and "<svg" in summary


def test_cautions_and_sources_files_are_complete(runs):
    folder = runs[0][0].parent
    text = (folder / "cautions.txt").read_text(encoding="utf-8")
    assert all(c in text for c in cautions())
    assert "the local permit governs" in text
    sources = (folder / "sources.txt").read_text(encoding="utf-8")
    refs = bibliography()
    for key in ("powell2013", "powell2007", "iapws_r11_07", "davies1962"):
        assert refs[key].citation in sources
    assert "Title 40, Part 433" in sources and "section 433.15" in sources
    assert refs["baes_mesmer1976"].citation not in sources  # comparison-only source: not used by the model


def test_second_run_gives_identical_bytes(runs):
    first, second = runs
    assert [p.name for p in first] == [p.name for p in second]
    # tables.xlsx carries the time it was written, the manifest the digests of PNG and PDF (which carry it too)
    same_bytes = [p for p in first if p.suffix in (".html", ".svg", ".csv", ".txt", ".toml")]
    assert len(same_bytes) == 2 * 2 + len(TABLES) + len(TEXT_FILES) - 2
    for a in same_bytes:
        assert a.read_bytes() == (second[0].parent / a.name).read_bytes(), a.name


def test_tables_are_the_cores_results(runs, scenario):
    folder = runs[0][0].parent
    minima = pd.read_csv(folder / "minimum_solubility.csv", index_col="metal", keep_default_na=False)
    core = wb.minimum_solubility(scenario.water, ph_range=(5.0, 12.5))
    assert list(minima.index) == list(core.index)
    pd.testing.assert_series_equal(minima["ph_min"], core["ph_min"], check_exact=True)
    pd.testing.assert_series_equal(minima["residual_mg_l"], core["residual_mg_l"], check_exact=True)
    headroom = pd.read_csv(folder / "setpoint_headroom.csv", index_col="metal")
    assert set(headroom.index) == {"Cu", "Ni", "Zn", "Cd", "Pb", "Cr"}  # metals with a 40 CFR 433.15 limit
    assert (headroom["headroom"] - headroom["target_mg_l"] / headroom["compared_mg_l"]).abs().max() < 1e-12
    assert (headroom["target_mg_l"] == 0.5 * headroom["limit_mg_l"]).all()
    windows = pd.read_csv(folder / "windows.csv")
    setpoint = headroom["ph"].iloc[0]
    assert len(windows) == 1 and windows["ph_low"][0] < setpoint < windows["ph_high"][0]
    limits = pd.read_csv(folder / "limits_used.csv")
    assert len(limits) == len(wb.load_limits("40cfr433.15"))
    used = limits[limits["used_in_design"]]
    assert set(used["metal"]) == set(headroom.index) and set(used["basis"]) == {"monthly_avg"}
    assert read_scenario(folder / "scenario.toml") == scenario


def test_two_stage_design_writes_a_stages_table(server, tmp_path):
    water = wb.Water(metals_mg_l={"Al": 20.0, "Cd": 5.0}, ph=3.0, sulfate_mg_l=300, sodium_mg_l=60)
    s = Scenario(
        name="Al and Cd (test)",
        water=water,
        limits=LimitsChoice(permit={"Al": 1.0, "Cd": 0.1}, permit_source="test"),
        design=DesignOptions(margin=1.0),
    )
    written = export_figure_pack(s, tmp_path / "pack", formats=("svg",))
    stages = pd.read_csv(tmp_path / "pack" / "stages.csv")
    assert list(stages["stage"]) == [1, 2] and stages["ph"][0] < stages["ph"][1]
    assert "two stages" in _svg_text(tmp_path / "pack" / "setpoint.svg")
    limits = pd.read_csv(tmp_path / "pack" / "limits_used.csv")
    assert limits["used_in_design"].all() and set(limits["metal"]) == {"Al", "Cd"}
    assert {p.suffix for p in written} == {".svg", ".csv", ".txt", ".toml", ".html", ".xlsx", ".json"}


# ---------------------------------------------------------------------------------------------------- refusals
SMALL = Scenario(
    name="Zinc rinse (test)",
    water=wb.Water(metals_mg_l={"Zn": 20.0}, ph=4.0, sodium_mg_l=230.0, sulfate_mg_l=480.0),
    limits=LimitsChoice(permit={"Zn": 1.0}, permit_source="test permit"),
    design=DesignOptions(ph_low=7.0, ph_high=11.0),
)


def test_out_dir_that_is_a_file_is_refused(tmp_path):
    target = tmp_path / "report.pdf"
    target.write_bytes(b"keep me")
    with pytest.raises(wb.InputError) as info:
        export_figure_pack(SMALL, target, formats=("html",))
    assert info.value.field == "out_dir" and "file" in str(info.value)
    assert target.read_bytes() == b"keep me"


def test_out_dir_leading_outside_the_chosen_folder_is_refused(tmp_path):
    base = tmp_path / "notebooks"
    base.mkdir()
    for escape in ("../elsewhere", str(tmp_path / "elsewhere"), "packs/../../elsewhere"):
        with pytest.raises(wb.InputError) as info:
            export_figure_pack(SMALL, escape, formats=("html",), within=base)
        assert info.value.field == "out_dir"
    (base / "link").symlink_to(tmp_path, target_is_directory=True)
    with pytest.raises(wb.InputError):
        export_figure_pack(SMALL, "link/elsewhere", formats=("html",), within=base)
    assert sorted(p.name for p in tmp_path.iterdir()) == ["notebooks"]


def test_link_inside_the_folder_is_refused_before_anything_is_written(tmp_path):
    outside = tmp_path / "outside.txt"
    outside.write_text("precious", encoding="utf-8")
    pack = tmp_path / "pack"
    pack.mkdir()
    (pack / "cautions.txt").symlink_to(outside)
    with pytest.raises(wb.InputError) as info:
        export_figure_pack(SMALL, pack, formats=("html",))
    assert "link" in str(info.value)
    assert outside.read_text(encoding="utf-8") == "precious"
    assert [p.name for p in pack.iterdir()] == ["cautions.txt"]


def test_bad_formats_and_a_foreign_pack_are_refused(tmp_path):
    for formats in (("png", "gif"), (), ("svg", "svg"), "eps"):
        with pytest.raises(wb.InputError) as info:
            export_figure_pack(SMALL, tmp_path / "x", formats=formats)
        assert info.value.field == "formats"
    other = dataclasses.replace(SMALL, design=DesignOptions(ph_low=7.0, ph_high=11.0, margin=0.4))
    pack = build_figure_pack(other)
    with pytest.raises(wb.InputError) as info:
        export_figure_pack(SMALL, tmp_path / "y", formats=("html",), pack=pack)
    assert info.value.field == "pack"
    assert not (tmp_path / "x").exists() and not (tmp_path / "y").exists()


def test_a_browser_path_that_is_not_a_program_is_reported(monkeypatch, tmp_path):
    monkeypatch.setenv("BROWSER_PATH", str(tmp_path / "no-such-browser"))
    with pytest.raises(ExportError, match="BROWSER_PATH"):
        find_browser()


def test_pack_folder_name_is_a_plain_slug():
    assert pack_folder_name(read_scenario(demo_scenario_path())) == (
        "figure_pack_demo_plant_invented_combined_rinse_of_a_plating_and_finishing_shop"
    )
    assert pack_folder_name(dataclasses.replace(SMALL, name="../../Ätzerei °C")) == "figure_pack_atzerei_c"


# ---------------------------------------------------------------------------------------------------- command line
def test_command_line_writes_the_pack(server, tmp_path, capsys):
    path = save_scenario(SMALL, tmp_path / "zinc.toml")
    status = main(["figures", str(path), "--out", str(tmp_path / "out"), "--formats", "svg,html"])
    printed = capsys.readouterr().out.split()
    assert status == 0
    assert {Path(p).name for p in printed} >= {"setpoint.svg", "setpoint.html", "summary.html", "sources.txt"}
    assert all(Path(p).is_file() and Path(p).parent == tmp_path / "out" for p in printed)


def _run_cli(*args, cwd):
    env = {k: v for k, v in os.environ.items() if k != "PYTHONDONTWRITEBYTECODE"}
    return subprocess.run(
        [sys.executable, "-m", "workbench", "figures", *args],
        cwd=cwd,
        env=env,
        capture_output=True,
        text=True,
        timeout=300,
    )


def test_command_line_exits_2_with_the_message_on_a_bad_scenario(tmp_path):
    bad = tmp_path / "bad.toml"
    bad.write_text(demo_scenario_path().read_text(encoding="utf-8").replace("margin = 0.5", "margn = 0.5"))
    result = _run_cli(str(bad), "--out", str(tmp_path / "out"), cwd=REPO)
    assert result.returncode == 2
    assert "design.margn" in result.stderr and "unknown key" in result.stderr
    assert not (tmp_path / "out").exists()
    result = _run_cli(str(bad), "--out", str(tmp_path / "out"), "--formats", "png,tiff", cwd=REPO)
    assert result.returncode == 2 and "formats" in result.stderr


def test_command_line_html_only_exits_0(tmp_path):
    path = save_scenario(SMALL, tmp_path / "zinc.toml")
    result = _run_cli(str(path), "--out", "out", "--formats", "html", cwd=tmp_path)
    assert result.returncode == 0, result.stderr
    listed = [Path(line) for line in result.stdout.split()]
    assert (tmp_path / "out" / "setpoint.html") in [
        tmp_path / p if not p.is_absolute() else p for p in listed
    ]
    assert (tmp_path / "out" / "summary.html").is_file() and not (tmp_path / "out" / "setpoint.svg").exists()
