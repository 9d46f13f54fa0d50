"""Chemical formulas: element counts and molar masses.

Handles the formulas used in data/: element symbols with counts, parentheses, fractional counts
(``CrO1.5``), hydrate dots (``CaSO4.2H2O``) and a leading fraction for a solid's unit as its reaction writes it
(``1/3 Pb3(CO3)2(OH)2``: one Pb). Charges written as ``^2+`` or a trailing ``+``/``-`` and
phase tags such as ``(s)``, ``(aq)``, ``(am)`` are ignored.
"""

from __future__ import annotations

import re
from collections import Counter
from collections.abc import Mapping

_TOKEN = re.compile(r"([A-Z][a-z]?)|(\()|(\))|(\d+(?:\.\d+)?)")
_PHASE = re.compile(r"\((?:s|aq|am|cr|g|l)\)")


def strip_charge(name: str) -> str:
    """Remove a charge and a phase tag from a species name: ``Zn(OH)4^2-`` -> ``Zn(OH)4``."""
    name = _PHASE.sub("", name.strip())
    name = re.sub(r"\^\d*[+-]$", "", name)
    return re.sub(r"[+-]+$", "", name)


def element_counts(formula: str) -> Counter:
    """Element counts of a formula, e.g. ``element_counts("CaSO4.2H2O")`` -> {Ca: 1, S: 1, O: 6, H: 4}.

    Raises
    ------
    ValueError
        If the formula contains characters that are not elements, counts or parentheses.
    """
    total: Counter = Counter()
    text = strip_charge(formula)
    unit = re.match(
        r"^(\d+)/(\d+)\s+(.+)$", text
    )  # a formula unit with its coefficient: "1/3 Pb3(CO3)2(OH)2"
    scale = 1.0
    if unit:
        scale, text = int(unit.group(1)) / int(unit.group(2)), unit.group(3)
    for part_index, part in enumerate(re.split(r"\.(?=\d*[A-Z])", text)):
        mult = 1.0
        m = re.match(r"^(\d+(?:\.\d+)?)(.*)$", part)
        if m and part_index > 0:
            mult, part = float(m.group(1)), m.group(2)
        for el, n in _parse_group(part, formula).items():
            total[el] += n * mult * scale
    return total


def _parse_group(text: str, whole: str) -> Counter:
    stack: list[Counter] = [Counter()]
    pos = 0
    last: Counter | str | None = None
    while pos < len(text):
        m = _TOKEN.match(text, pos)
        if not m:
            raise ValueError(f"formula {whole!r}: cannot read {text[pos:]!r}")
        el, opened, closed, num = m.groups()
        pos = m.end()
        if el:
            stack[-1][el] += 1
            last = el
        elif opened:
            stack.append(Counter())
            last = None
        elif closed:
            group = stack.pop()
            stack[-1].update(group)
            last = group
        else:
            n = float(num)
            if isinstance(last, str):
                stack[-1][last] += n - 1
            elif isinstance(last, Counter):
                for k, v in last.items():
                    stack[-1][k] += v * (n - 1)
            else:
                raise ValueError(f"formula {whole!r}: a count with nothing before it")
            last = None
    if len(stack) != 1:
        raise ValueError(f"formula {whole!r}: unbalanced parentheses")
    return stack[0]


def molar_mass(formula: str, atomic_weights: Mapping[str, float]) -> float:
    """Molar mass of a formula from the given atomic weights. [g/mol]"""
    counts = element_counts(formula)
    missing = [el for el in counts if el not in atomic_weights]
    if missing:
        raise ValueError(f"formula {formula!r}: no atomic weight for {', '.join(missing)}")
    return float(sum(n * atomic_weights[el] for el, n in counts.items()))
