"""Architecture: the chemistry core imports no plotting or widget library (DESIGN.md section 2)."""

import subprocess
import sys


def test_chemistry_imports_without_plotly_or_widgets():
    code = (
        "import sys, workbench.chemistry.solver, workbench.chemistry.tableau, workbench.treatment.solubility;"
        "bad = [m for m in ('plotly', 'ipywidgets') if m in sys.modules]; print(bad); sys.exit(1 if bad else 0)"
    )
    done = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True)
    assert done.returncode == 0, done.stdout + done.stderr


def test_every_subpackage_is_listed_for_installation():
    # pyproject lists packages by hand (data/ is mapped in); a missing entry would drop a subpackage from wheels
    import tomllib
    from pathlib import Path

    root = Path(__file__).resolve().parents[1]
    listed = set(tomllib.loads((root / "pyproject.toml").read_text())["tool"]["setuptools"]["packages"])
    found = {".".join(p.parent.relative_to(root).parts) for p in (root / "workbench").rglob("__init__.py")}
    assert found <= listed, f"add to pyproject [tool.setuptools] packages: {sorted(found - listed)}"
