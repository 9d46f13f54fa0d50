"""The cautions shown beside every result that could be used to run a plant.

Sources of the facts behind them (see data/references.csv where keyed): licensed-engineer review of treatment
designs (state engineering-report rules, e.g. WAC 173-240-130); Cr(VI) reduction before precipitation and
cyanide destruction before metal precipitation, never acidifying cyanide (Liptak & Liu, Environmental Engineers'
Handbook, sections on chromium reduction and cyanide oxidation); redissolution of amphoteric hydroxides on pH
overshoot (hydrolysis constants in data/thermo); caustic and lime handling (OSHA/NIOSH chemical data).
"""

from __future__ import annotations

CAUTIONS: tuple[str, ...] = (
    "Theoretical equilibrium only: real effluents also depend on kinetics, co-precipitation, complexing agents "
    "and solids capture. Confirm every setpoint and dose with jar tests on the actual wastewater.",
    "The local discharge permit and a licensed professional engineer govern the design and operation; example "
    "limits shown here are not a permit.",
    "Hexavalent chromium must be reduced to Cr(III) before hydroxide precipitation (it does not precipitate as a "
    "hydroxide), and cyanide must be destroyed before metals precipitation.",
    "Never acidify a cyanide-bearing water or mix it with acid streams: hydrogen cyanide gas is released.",
    "pH overshoot redissolves amphoteric metals (Zn, Pb, Cr(III), Al, Cu): caustic has no pH ceiling; control "
    "the pH within the window, and trim pH only after solids separation.",
    "Caustic soda and lime are corrosive (severe skin and eye burns); diluting 50 % caustic and slaking quicklime "
    "release heat. Follow the safety data sheets.",
)


def cautions() -> list[str]:
    """The standard cautions, as a list of sentences."""
    return list(CAUTIONS)
