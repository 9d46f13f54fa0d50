"""Residual dissolved metal against pH."""

from __future__ import annotations

import numpy as np
import pandas as pd
import plotly.graph_objects as go

from workbench.figures.palette import metal_style
from workbench.figures.text import title_text


def fig_residual_curve(
    curve: pd.DataFrame,
    minima: pd.DataFrame | None = None,
    *,
    fig: go.Figure | None = None,
    title: str | None = None,
    subtitle: str | None = None,
) -> go.Figure:
    """Log-scale dissolved metal (mg/L) against pH, one trace per metal; each metal's minimum marked.

    Parameters
    ----------
    curve : pandas.DataFrame
        From :func:`workbench.residual_curve`: index pH, one column per metal. [mg/L]
    minima : pandas.DataFrame, optional
        From :func:`workbench.minimum_solubility`: marks ``ph_min``/``residual_mg_l`` per metal.
    fig : plotly.graph_objects.Figure, optional
        Figure (or FigureWidget) to draw into; its traces are replaced.
    title, subtitle : str, optional
        Plain text (markup is shown as written, never followed), e.g. the scenario's name.
    """
    fig = go.Figure() if fig is None else fig
    traces = []
    for metal in curve.columns:
        colour, dash = metal_style(metal)
        y = np.maximum(curve[metal].to_numpy(dtype=float), 1e-9)
        traces.append(
            go.Scatter(
                x=curve.index.to_numpy(dtype=float),
                y=y,
                mode="lines",
                name=metal,
                legendgroup=metal,
                line=dict(color=colour, dash=dash, width=2),
                hovertemplate=f"{metal}: %{{y:.3g}} mg/L at pH %{{x:.2f}}<extra></extra>",
            )
        )
        if minima is not None and metal in minima.index and np.isfinite(minima.loc[metal, "ph_min"]):
            row = minima.loc[metal]
            traces.append(
                go.Scatter(
                    x=[row["ph_min"]],
                    y=[max(row["residual_mg_l"], 1e-9)],
                    mode="markers",
                    legendgroup=metal,
                    showlegend=False,
                    name=f"{metal} minimum",
                    marker=dict(color=colour, size=10, symbol="diamond", line=dict(color="white", width=1)),
                    hovertemplate=(
                        f"{metal} minimum: %{{y:.3g}} mg/L at pH %{{x:.2f}}<br>solid: {row['solid']}"
                        "<extra></extra>"
                    ),
                )
            )
    with fig.batch_update():
        fig.data = ()
        fig.add_traces(traces)
        fig.update_layout(
            title=title_text(title, subtitle),
            xaxis=dict(title="pH", range=[float(curve.index.min()), float(curve.index.max())], dtick=1),
            yaxis=dict(title="dissolved metal (mg/L)", type="log", exponentformat="power", dtick=1),
            legend=dict(title="metal"),
            template="simple_white",
            hovermode="closest",
        )
    return fig
