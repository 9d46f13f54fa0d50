"""A warm notebook kernel: the libraries the panels need, loaded when the kernel starts rather than in the user's
first cell.

``python -m workbench lab`` starts JupyterLab with a kernel definition of its own (:func:`kernel_dir`): the
usual ``python3`` kernel, which runs :func:`warm_up` at start. JupyterLab starts that kernel as soon as it opens
the setpoint notebook, so by the time the cell is run the plotting widget (plotly's FigureWidget and what it
imports, over a second on a 2-core machine), pandas, the workbench and the compiled solver kernel (loaded from
numba's cache) are in memory and the panel is drawn in well under two seconds. Other Jupyter servers use their
own kernels; the workbench works the same there, its first cell only takes longer.
"""

from __future__ import annotations

import json
import logging
import time
from pathlib import Path

log = logging.getLogger(__name__)

#: the line the kernel runs at start (ipykernel's exec_lines)
WARM_UP_LINE = (
    "import workbench.widgets.warm as _workbench_warm; _workbench_warm.warm_up(); del _workbench_warm"
)


def warm_up() -> float:
    """Import what the panels use and load the solver's kernel when numba's cache holds it (never starts a
    compile: that, and its message, belong to the user's first solve). Returns the seconds it took; any failure
    is logged and left for the user's own cell to meet."""
    start = time.perf_counter()
    try:
        import plotly.graph_objects as go

        go.FigureWidget  # noqa: B018 (imports the widget's stack: anywidget, plotly.io's renderers, nbformat)
        go.Figure(go.Scatter(x=[7.0], y=[1.0]), layout=dict(height=580, yaxis=dict(type="log")))  # validators

        import workbench.widgets  # noqa: F401 (the panels, the treatment layer, pandas, ipywidgets)
        from workbench.chemistry import compiled_engine, database

        database.load()
        if compiled_engine.is_cached():
            compiled_engine.ready()
    except Exception:  # a warm-up never stops the kernel from starting
        log.exception("workbench: warming the kernel failed")
    return time.perf_counter() - start


def kernel_dir(folder: Path, base_spec: dict) -> Path:
    """Write into ``folder`` a Jupyter data directory whose ``python3`` kernel is ``base_spec`` (a kernel.json
    as a dict) running :data:`WARM_UP_LINE` at start; put ``folder`` first on ``JUPYTER_PATH`` for a server to
    use it. Returns ``folder``."""
    spec = dict(base_spec)
    spec["argv"] = [*base_spec["argv"], f"--IPKernelApp.exec_lines={WARM_UP_LINE}"]
    target = Path(folder) / "kernels" / "python3"
    target.mkdir(parents=True, exist_ok=True)
    (target / "kernel.json").write_text(json.dumps(spec, indent=1), encoding="utf-8")
    return Path(folder)
