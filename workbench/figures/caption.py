"""A caption printed under a figure, inside it (so every exported file carries its conditions, sources and
cautions)."""

from __future__ import annotations

import textwrap

import plotly.graph_objects as go

from workbench.figures.text import plain

CAPTION_NAME = "caption"
FONT_PX = 11
LINE_PX = 15  # vertical space of one caption line at FONT_PX
WRAP_CHARS = 140  # about 920 px of 11 px text: the export width less the left margin


def wrap_caption(lines: list[str], width: int = WRAP_CHARS) -> list[str]:
    """Each paragraph wrapped to ``width`` characters; returns the physical lines."""
    out = []
    for line in lines:
        out += textwrap.wrap(line, width=width, break_on_hyphens=False) or [""]
    return out


def add_caption(
    fig: go.Figure,
    lines: list[str],
    *,
    width: int = 1000,
    plot_height: int = 560,
    top_margin: int = 70,
    axis_space: int = 60,
) -> go.Figure:
    """Print ``lines`` under the plot, left-aligned, and size the figure to hold them.

    Parameters
    ----------
    fig : plotly.graph_objects.Figure
        Changed in place (one annotation named "caption" added or replaced; size and bottom margin set).
    lines : list of str
        Caption paragraphs (plain text; wrapped here).
    width, plot_height : int
        Figure width and the height above the caption. [px]
    top_margin : int
        Space for the title. [px]
    axis_space : int
        Space under the plot for the x-axis labels and title. [px]
    """
    wrapped = wrap_caption(lines)
    caption_px = LINE_PX * len(wrapped) + 10
    text = "<br>".join(plain(line) for line in wrapped)  # user text in the lines: shown as written
    kept = [a for a in fig.layout.annotations if a.name != CAPTION_NAME]
    fig.update_layout(
        annotations=[
            *kept,
            dict(
                name=CAPTION_NAME,
                text=text,
                xref="paper",
                yref="paper",
                x=0,
                y=0,
                xanchor="left",
                yanchor="top",
                yshift=-axis_space,
                align="left",
                showarrow=False,
                font=dict(size=FONT_PX),
            ),
        ],
        width=width,
        height=plot_height + caption_px + axis_space,
        margin=dict(t=top_margin, b=axis_space + caption_px, l=80, r=30),
    )
    return fig
