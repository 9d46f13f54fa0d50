"""The workbench's one colour palette: colour-blind safe, fixed per metal so a metal keeps its colour everywhere.

Colours are the eight of Okabe & Ito (2008) "Color Universal Design" (a published palette distinguishable under
the common colour-vision deficiencies), extended with four darker tones; metals beyond the first eight also get
their own dash pattern, so no two metals rely on colour alone.
"""

from __future__ import annotations

OKABE_ITO = ("#000000", "#E69F00", "#56B4E9", "#009E73", "#F0E442", "#0072B2", "#D55E00", "#CC79A7")

METAL_STYLE: dict[str, tuple[str, str]] = {
    "Cu": ("#D55E00", "solid"),
    "Ni": ("#009E73", "solid"),
    "Zn": ("#0072B2", "solid"),
    "Cd": ("#CC79A7", "solid"),
    "Pb": ("#000000", "solid"),
    "Cr": ("#E69F00", "solid"),
    "Fe": ("#8C510A", "dash"),
    "Fe(II)": ("#8C510A", "dot"),
    "Al": ("#56B4E9", "solid"),
    "Mn": ("#666666", "dash"),
    "Co": ("#01665E", "dash"),
    "Ag": ("#762A83", "dash"),
}
FALLBACK = ("#999999", "dashdot")
WINDOW_FILL = "rgba(0, 158, 115, 0.12)"


def metal_style(metal: str) -> tuple[str, str]:
    """(colour, dash) of a metal."""
    return METAL_STYLE.get(metal, FALLBACK)


# titration figure: the curve, the pH setpoint and the reagent's ceiling
TITRATION_LINE = "#0072B2"
SETPOINT_LINE = "#009E73"
CEILING_LINE = "#D55E00"
