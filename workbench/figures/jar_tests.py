"""Jar-test results over the predicted residual curves."""

from __future__ import annotations

import numpy as np
import pandas as pd
import plotly.graph_objects as go

from workbench.figures.palette import metal_style
from workbench.figures.text import plain, title_text

FLOOR_MG_L = 1e-9  # lowest value drawn on the log axis [mg/L]
_MARKERS = {  # (fraction, below detection) -> plotly symbol; filtered filled, unfiltered open
    ("dissolved", False): "circle",
    ("total", False): "circle-open",
    ("dissolved", True): "triangle-down",
    ("total", True): "triangle-down-open",
}
_LABELS = {
    ("dissolved", False): "dissolved",
    ("total", False): "total",
    ("dissolved", True): "dissolved, below detection",
    ("total", True): "total, below detection",
}


def fig_jar_tests(
    tidy: pd.DataFrame,
    predicted_curve: pd.DataFrame,
    *,
    fig: go.Figure | None = None,
    calibrated_curve: pd.DataFrame | None = None,
    title: str | None = None,
    subtitle: str | None = None,
) -> go.Figure:
    """Measured jar results (log scale, mg/L) against pH over the predicted dissolved curves.

    Filtered (dissolved) results are filled markers, unfiltered (total) results open ones; a result below
    detection is a downward triangle drawn at its detection limit. Each metal keeps its palette colour; its
    predicted curve is a line and, when given, its calibrated curve a dotted line.

    Parameters
    ----------
    tidy : pandas.DataFrame
        From :func:`workbench.treatment.jar_tests.read_jar_tests`. [mg/L]
    predicted_curve : pandas.DataFrame
        From :func:`workbench.residual_curve`: index pH, a column per metal. [mg/L]
    fig : plotly.graph_objects.Figure, optional
        Figure (or FigureWidget) to draw into; its traces are replaced.
    calibrated_curve : pandas.DataFrame, optional
        The same with the fitted solubility shifts (:func:`workbench.treatment.calibration.calibrated_curve`).
    title, subtitle : str, optional
        Plain text (markup is shown as written, never followed), e.g. the scenario's name.
    """
    fig = go.Figure() if fig is None else fig
    traces = []
    metals = list(dict.fromkeys(tidy["metal"]))
    x = predicted_curve.index.to_numpy(dtype=float)
    for metal in metals:
        colour, dash = metal_style(metal)
        if metal in predicted_curve.columns:
            traces.append(_line(metal, x, predicted_curve[metal], colour, dash, f"{metal} predicted", 2))
        if calibrated_curve is not None and metal in calibrated_curve.columns:
            cx = calibrated_curve.index.to_numpy(dtype=float)
            shift = calibrated_curve.attrs.get("solubility_shift", {}).get(metal)
            label = f"{metal} calibrated" + (f" ({shift:+.2f} log)" if shift is not None else "")
            traces.append(
                _line(
                    metal, cx, calibrated_curve[metal], colour, "dash" if dash == "dot" else "dot", label, 1.5
                )
            )
        rows = tidy[tidy["metal"] == metal]
        for (fraction, censored), symbol in _MARKERS.items():
            sel = rows[(rows["fraction"] == fraction) & (rows["censored"] == censored)]
            if not sel.empty:
                traces.append(_points(metal, sel, fraction, censored, symbol, colour))
    with fig.batch_update():
        fig.data = ()
        fig.add_traces(traces)
        lo = min([float(tidy["pH"].min())] + ([float(x.min())] if x.size else []))
        hi = max([float(tidy["pH"].max())] + ([float(x.max())] if x.size else []))
        fig.update_layout(
            title=title_text(title, subtitle),
            xaxis=dict(title="pH", range=[lo - 0.2, hi + 0.2], dtick=1),
            yaxis=dict(title="metal (mg/L)", type="log", exponentformat="power", dtick=1),
            legend=dict(title="metal"),
            template="simple_white",
            hovermode="closest",
        )
    return fig


def _line(metal, x, y, colour, dash, name, width) -> go.Scatter:
    return go.Scatter(
        x=x,
        y=np.maximum(np.asarray(y, dtype=float), FLOOR_MG_L),
        mode="lines",
        name=name,
        legendgroup=metal,
        line=dict(color=colour, dash=dash, width=width),
        hovertemplate=f"{name}: %{{y:.3g}} mg/L dissolved at pH %{{x:.2f}}<extra></extra>",
    )


def _points(metal, sel, fraction, censored, symbol, colour) -> go.Scatter:
    column = "detection_limit_mg_l" if censored else "value_mg_l"
    y = sel[column].to_numpy(dtype=float)
    shown = [f"<{v:.3g}" if censored else f"{v:.3g}" for v in y]
    return go.Scatter(
        x=sel["pH"].to_numpy(dtype=float),
        y=np.maximum(y, FLOOR_MG_L),
        mode="markers",
        name=f"{metal} {_LABELS[(fraction, censored)]}",
        legendgroup=metal,
        marker=dict(color=colour, symbol=symbol, size=9, line=dict(color=colour, width=1.5)),
        customdata=np.column_stack([sel["jar"].astype(str).map(plain).to_numpy(), shown]),  # ids as written
        hovertemplate=(
            f"jar %{{customdata[0]}}: {metal} {fraction} %{{customdata[1]}} mg/L at pH %{{x:.2f}}<extra></extra>"
        ),
    )
