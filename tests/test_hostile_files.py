"""Hostile and careless files and values refused at the door: spreadsheet bombs (bounded work, the limit named),
a scenario nested 100,000 deep. The bombs are made here, small (tests/hostile_files.py); how long a refusal takes
and how much memory it uses is measured by the benchmark (make bench), not asserted here.
"""

from __future__ import annotations

from datetime import UTC, datetime

import hostile_files as hostile
import pytest

import workbench as wb
from workbench.treatment import workbook_limits as limits

BOMBS = {
    # name: (builder, what it holds, the limit its refusal names)
    "2 million shared strings": (hostile.shared_strings_bomb, "more than 100000 shared strings", "shared strings"),
    "8 million shared strings": (
        lambda: hostile.shared_strings_bomb(8_000_000),
        "bytes unpacked",
        "unpacked size",
    ),
    "500 columns x 1,048,576 rows declared": (
        hostile.dimension_bomb,
        "declared as A1:SF1048576 (1048576 rows x 500 columns)",
        "declared dimensions",
    ),
    "one cell in the last row": (hostile.far_cell_bomb, "row 1048576", "cells"),
    "a million empty cells": (hostile.cells_bomb, "the cells span", "cells"),
    "190 MB of whitespace": (hostile.whitespace_bomb, "190002540 bytes unpacked", "unpacked size"),
    "nested entities": (hostile.entity_bomb, "a document type declaration", "XML elements"),
}


@pytest.mark.parametrize("name", list(BOMBS))
def test_each_spreadsheet_bomb_is_refused_with_the_limit_it_passes(name):
    build, held, limit = BOMBS[name]
    data = build()
    assert len(data) < 400_000  # small files: the work they would cause is the attack
    with pytest.raises(wb.InputError) as err:
        wb.read_jar_tests(data, file_format="xlsx")
    assert held in str(err.value) and f"(limit: {limit})" in str(err.value), str(err.value)


SMALL = {
    "shared strings": lambda: hostile.shared_strings_bomb(10),
    "declared dimensions": lambda: hostile.dimension_bomb(columns=5, rows=3),
    "far cell": lambda: hostile.far_cell_bomb(row=10),
    "empty cells": lambda: hostile.cells_bomb(100),
    "whitespace": lambda: hostile.whitespace_bomb(1),
}


@pytest.mark.parametrize("name", list(SMALL))
def test_the_same_workbooks_within_the_limits_are_read(name):
    """The bombs are valid workbooks: made small, the reader takes them (so the refusals above are the limits)."""
    tidy = wb.read_jar_tests(SMALL[name](), file_format="xlsx")
    assert list(tidy["jar"]) == ["1", "2"] and list(tidy["value_mg_l"]) == [25.0, 0.4]


def test_limits_sit_at_the_edge_each_names(monkeypatch):
    """One string or cell more than a limit is refused; exactly at it is read."""
    monkeypatch.setattr(limits, "MAX_SHARED_STRINGS", 10)
    wb.read_jar_tests(hostile.shared_strings_bomb(10), file_format="xlsx")
    with pytest.raises(wb.InputError, match="limit: shared strings"):
        wb.read_jar_tests(hostile.shared_strings_bomb(20), file_format="xlsx")
    monkeypatch.setattr(limits, "MAX_CELLS", 15)  # the sheet writes 3 rows of 5 cells
    wb.read_jar_tests(hostile._workbook({}), file_format="xlsx")
    with pytest.raises(wb.InputError, match="limit: declared dimensions"):
        wb.read_jar_tests(hostile.dimension_bomb(columns=5, rows=4), file_format="xlsx")


def test_a_bomb_uploaded_to_the_panel_is_refused_beside_the_upload():
    from workbench.widgets import JarTestPanel

    panel = JarTestPanel(wb.Water(metals_mg_l={"Zn": 25.0}, ph=6.4, temperature_c=22.0))
    data = hostile.dimension_bomb()
    item = {"name": "jars.xlsx", "type": "", "size": len(data), "content": memoryview(data)}
    item["last_modified"] = datetime.now(UTC)
    panel.upload.value = (item,)
    assert "limit: declared dimensions" in panel.upload_field.error_text
    assert panel.tidy is None and panel.panel_error.value == ""
