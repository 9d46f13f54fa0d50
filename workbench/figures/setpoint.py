"""Setpoint design figure: the compared metal against pH with targets, limits, the feasible window, the setpoint
(or the two stages) and the uncertainty band."""

from __future__ import annotations

import math

import numpy as np
import plotly.graph_objects as go

from workbench.figures.palette import WINDOW_FILL, metal_style
from workbench.figures.text import title_text

FLOOR_MG_L = 1e-9  # values below are drawn at this floor (a log axis cannot show zero)
SETPOINT_COLOUR = "#333333"
BAND_ALPHA = 0.15


def _rgba(colour: str, alpha: float) -> str:
    """'#RRGGBB' -> 'rgba(r, g, b, alpha)'."""
    r, g, b = (int(colour[i : i + 2], 16) for i in (1, 3, 5))
    return f"rgba({r}, {g}, {b}, {alpha})"


def _axis_title(compared: str) -> str:
    if compared == "dissolved":
        return "dissolved metal (mg/L)"
    return "total metal: dissolved + carried-over solids (mg/L)"


def fig_setpoint(
    design,
    *,
    band=None,
    fig: go.Figure | None = None,
    title: str | None = None,
    subtitle: str | None = None,
) -> go.Figure:
    """Log-scale compared metal (mg/L) against pH for a setpoint design.

    One trace per metal (the palette's colour), each metal's design target (margin x limit, dashed) and limit
    (dotted) as horizontal lines in its colour, the feasible window(s) shaded, the setpoint marked by a
    vertical line (or, for a two-stage scheme, both stage pH values), and, when a band is given, the Monte
    Carlo band of each metal as a filled area. Values below 1e-9 mg/L are drawn at 1e-9.

    Parameters
    ----------
    design : SetpointDesign
        From :func:`workbench.design_setpoint`: ``curve`` (compared value per metal against pH) [mg/L],
        ``targets`` [mg/L], ``table`` (``limit_mg_l``) [mg/L], ``windows``, ``setpoint_ph``, ``stages``,
        ``compared``, ``margin``.
    band : UncertaintyBand, optional
        From :func:`workbench.uncertainty_band` (``design.band``): ``lower`` and ``upper`` per metal against
        pH, dissolved metal. [mg/L]
    fig : plotly.graph_objects.Figure, optional
        Figure (or FigureWidget) to draw into; its traces, shapes and annotations are replaced.
    title, subtitle : str, optional
        Plain text (markup is shown as written, never followed), e.g. the scenario's name.
    """
    fig = go.Figure() if fig is None else fig
    curve = design.curve
    ph = curve.index.to_numpy(dtype=float)
    x_range = [float(ph.min()), float(ph.max())]
    limits = design.table["limit_mg_l"] if "limit_mg_l" in design.table.columns else None
    traces = []
    for metal in curve.columns:
        colour, dash = metal_style(metal)
        if band is not None and metal in band.lower.columns:
            traces += _band_traces(band, metal, colour)
        traces.append(
            go.Scatter(
                x=ph,
                y=np.maximum(curve[metal].to_numpy(dtype=float), FLOOR_MG_L),
                mode="lines",
                name=metal,
                legendgroup=metal,
                line=dict(color=colour, dash=dash, width=2),
                hovertemplate=f"{metal}: %{{y:.3g}} mg/L at pH %{{x:.2f}}<extra></extra>",
            )
        )
        target = float(design.targets[metal])
        traces.append(
            _hline(x_range, target, f"{metal} target", colour, "dash", f"{design.margin:g} x limit")
        )
        if limits is not None and metal in limits.index and math.isfinite(limits[metal]):
            traces.append(_hline(x_range, float(limits[metal]), f"{metal} limit", colour, "dot", "limit"))
    shapes, notes = _windows_and_setpoint(design)
    with fig.batch_update():
        fig.data = ()
        fig.add_traces(traces)
        fig.update_layout(
            title=title_text(title, subtitle),
            shapes=shapes,
            annotations=notes,
            xaxis=dict(title="pH", range=x_range, dtick=1),
            yaxis=dict(
                title=_axis_title(design.compared),
                type="log",
                exponentformat="power",
                dtick=1,
                range=_y_range(curve, design.targets, limits),
            ),
            legend=dict(title="metal"),
            template="simple_white",
            hovermode="closest",
        )
    return fig


def _hline(x_range, value, name, colour, dash, label) -> go.Scatter:
    return go.Scatter(
        x=x_range,
        y=[value, value],
        mode="lines",
        name=name,
        legendgroup=name.split()[0],
        showlegend=False,
        line=dict(color=colour, dash=dash, width=1),
        hovertemplate=f"{name} ({label}): {value:.3g} mg/L<extra></extra>",
    )


def _band_traces(band, metal, colour) -> list[go.Scatter]:
    x = band.lower.index.to_numpy(dtype=float)
    low, high = (100 * band.quantiles[0], 100 * band.quantiles[2])
    name = f"{metal} {low:g}-{high:g} % band (dissolved)"
    upper = go.Scatter(
        x=x,
        y=np.maximum(band.upper[metal].to_numpy(dtype=float), FLOOR_MG_L),
        mode="lines",
        name=f"{name} upper",
        legendgroup=metal,
        showlegend=False,
        line=dict(width=0, color=colour),
        hoverinfo="skip",
    )
    lower = go.Scatter(
        x=x,
        y=np.maximum(band.lower[metal].to_numpy(dtype=float), FLOOR_MG_L),
        mode="lines",
        name=name,
        legendgroup=metal,
        showlegend=False,
        line=dict(width=0, color=colour),
        fill="tonexty",
        fillcolor=_rgba(colour, BAND_ALPHA),
        hoverinfo="skip",
    )
    return [upper, lower]


def _windows_and_setpoint(design) -> tuple[list[dict], list[dict]]:
    shapes, notes = [], []
    for low, high in design.windows:
        shapes.append(
            dict(
                type="rect",
                xref="x",
                yref="paper",
                x0=low,
                x1=high,
                y0=0,
                y1=1,
                fillcolor=WINDOW_FILL,
                line=dict(width=0),
                layer="below",
            )
        )
        notes.append(_label((low + high) / 2, f"window pH {low:.2f}-{high:.2f}", 1.0, "bottom"))
    marks = []
    if design.setpoint_ph is not None:
        marks.append((design.setpoint_ph, f"setpoint pH {design.setpoint_ph:.2f}"))
    for stage in design.stages or []:
        marks.append((stage["ph"], f"stage {stage['stage']} pH {stage['ph']:.2f}"))
    for i, (ph, text) in enumerate(marks):
        shapes.append(
            dict(
                type="line",
                xref="x",
                yref="paper",
                x0=ph,
                x1=ph,
                y0=0,
                y1=1,
                line=dict(color=SETPOINT_COLOUR, width=2, dash="solid"),
            )
        )
        notes.append(_label(ph, text, 0.97 - 0.06 * i, "top", xanchor="left"))
    return shapes, notes


def _label(x, text, y, yanchor, xanchor="center") -> dict:
    return dict(
        x=x,
        y=y,
        xref="x",
        yref="paper",
        text=text,
        showarrow=False,
        xanchor=xanchor,
        yanchor=yanchor,
        xshift=4 if xanchor == "left" else 0,
        font=dict(size=12),
        bgcolor="rgba(255, 255, 255, 0.8)",
    )


def _y_range(curve, targets, limits) -> list[float]:
    """Log10 axis range: a decade below the lowest target or predicted value, above the highest value."""
    values = curve.to_numpy(dtype=float).ravel()
    values = values[np.isfinite(values) & (values > 0)]
    marks = [float(v) for v in targets] + ([float(v) for v in limits] if limits is not None else [])
    if values.size:
        marks += [float(values.min()), float(values.max())]
    low, high = min(marks), max(marks)
    return [math.floor(math.log10(max(low, FLOOR_MG_L))) - 1.0, math.ceil(math.log10(high)) + 0.3]
