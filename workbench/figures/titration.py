"""Titration curve: pH against reagent dose, with the setpoint and the reagent's pH ceiling."""

from __future__ import annotations

import numpy as np
import pandas as pd
import plotly.graph_objects as go

from workbench.figures.palette import CEILING_LINE, SETPOINT_LINE, TITRATION_LINE
from workbench.figures.text import title_text


def fig_titration(
    curve: pd.DataFrame,
    *,
    target_ph: float | None = None,
    ceiling_ph: float | None = None,
    fig: go.Figure | None = None,
    title: str | None = None,
    subtitle: str | None = None,
) -> go.Figure:
    """pH against reagent dose (mg/L of product as sold), the setpoint and the ceiling as horizontal lines.

    Parameters
    ----------
    curve : pandas.DataFrame
        From :func:`workbench.treatment.dose.dose_curve`: columns ``dose_mg_l`` and ``pH``. [mg/L], [-]
    target_ph : float, optional
        The pH setpoint, drawn as a dashed line. [-]
    ceiling_ph : float, optional
        The highest pH the reagent reaches in this water (saturation), drawn as a dotted line. [-]
    fig : plotly.graph_objects.Figure, optional
        Figure (or FigureWidget) to draw into; its traces and shapes are replaced.
    title, subtitle : str, optional
        Plain text (markup is shown as written, never followed), e.g. the scenario's name.
    """
    fig = go.Figure() if fig is None else fig
    curve = curve.sort_values("dose_mg_l")
    reagent = curve.attrs.get("reagent", "reagent")
    x = curve["dose_mg_l"].to_numpy(dtype=float)
    traces = [
        go.Scatter(
            x=x,
            y=curve["pH"].to_numpy(dtype=float),
            mode="lines",
            name=f"pH ({reagent})",
            line=dict(color=TITRATION_LINE, width=2),
            hovertemplate="pH %{y:.2f} at %{x:.4g} mg/L<extra></extra>",
        )
    ]
    lines = [(target_ph, "setpoint", SETPOINT_LINE, "dash"), (ceiling_ph, "ceiling", CEILING_LINE, "dot")]
    for value, label, colour, dash in lines:
        if value is None:
            continue
        traces.append(
            go.Scatter(
                x=[float(x.min()), float(x.max())],
                y=[float(value), float(value)],
                mode="lines",
                name=f"{label}: pH {float(value):.2f}",
                line=dict(color=colour, dash=dash, width=1.5),
                hoverinfo="skip",
            )
        )
    top = max([float(np.nanmax(curve["pH"]))] + [float(v) for v, *_ in lines if v is not None])
    bottom = float(np.nanmin(curve["pH"]))
    with fig.batch_update():
        fig.data = ()
        fig.add_traces(traces)
        fig.update_layout(
            title=title_text(title, subtitle),
            xaxis=dict(title="reagent dose (mg/L of product as sold)"),
            yaxis=dict(title="pH", range=[np.floor(bottom) - 0.25, min(14.0, np.ceil(top) + 0.25)]),
            legend=dict(title=None),
            template="simple_white",
            hovermode="closest",
        )
    return fig
