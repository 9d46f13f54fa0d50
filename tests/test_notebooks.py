"""Every notebook runs headless, top to bottom, on the demo scenario, without an error."""

from pathlib import Path

import nbformat
import pytest
from nbclient import NotebookClient

NOTEBOOKS = sorted((Path(__file__).resolve().parents[1] / "notebooks").glob("*.ipynb"))


def test_there_are_notebooks():
    assert NOTEBOOKS


@pytest.mark.parametrize("path", NOTEBOOKS, ids=lambda p: p.name)
def test_notebook_runs(path, tmp_path):
    nb = nbformat.read(path, as_version=4)
    assert all(not c.get("outputs") for c in nb.cells if c.cell_type == "code"), (
        "commit notebooks without outputs"
    )
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
    if path.name == "setpoint.ipynb":
        data = figs[0]["data"]["application/vnd.plotly.v1+json"]["data"]
        names = {t["name"] for t in data if t.get("mode") == "lines"}
        assert names == {"Cu", "Ni", "Zn", "Cd", "Pb", "Cr", "Fe", "Al"}
