"""Reading reactions as published, e.g. ``"2 Cu^2+ + 2 H2O = Cu2(OH)2^2+ + 2 H+"``.

A reaction is returned as a mapping species -> stoichiometric coefficient, products positive and reactants
negative. Coefficients may be integers, decimals or fractions (``1/2 Ag2O(s)``).
"""

from __future__ import annotations

import re
from fractions import Fraction

_TERM = re.compile(r"^(?:(\d+(?:\.\d+)?|\d+/\d+)\s+)?(\S+)$")


def parse_reaction(text: str) -> dict[str, float]:
    """Parse ``"lhs = rhs"`` into {species: coefficient}, products positive.

    Raises
    ------
    ValueError
        If the text has no single ``=`` or a term cannot be read.
    """
    sides = text.split(" = ")
    if len(sides) != 2:
        raise ValueError(f"reaction {text!r}: expected one ' = ' between reactants and products")
    out: dict[str, float] = {}
    for sign, side in ((-1.0, sides[0]), (1.0, sides[1])):
        for term in side.split(" + "):
            m = _TERM.match(term.strip())
            if not m:
                raise ValueError(f"reaction {text!r}: cannot read the term {term!r}")
            coef = float(Fraction(m.group(1))) if m.group(1) else 1.0
            out[m.group(2)] = out.get(m.group(2), 0.0) + sign * coef
    return out
