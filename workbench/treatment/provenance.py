"""Which published constants a result rests on, and their references: what a figure caption or a report lists
as its data sources.

A constant "matters" for a water over a pH range when its species carries at least ``threshold`` (1 % by
default) of the dissolved total of any component other than H+ at some pH of the range, or when its solid forms
somewhere in the range. Kw is always counted (every pH-dependent result uses it). Each such species or solid is
traced through the linear map from published reactions to formation constants (chemistry/database.py), so a
species defined through other reactions brings their rows too.
"""

from __future__ import annotations

import csv
import re
from dataclasses import dataclass

import numpy as np
import pandas as pd

from workbench._paths import data_dir
from workbench.chemistry import database
from workbench.treatment.solubility import equilibrium
from workbench.treatment.water import Water

SIGNIFICANT_FRACTION = 0.01
ACTIVITY_SOURCE = "davies1962"  # the activity model used for every result


@dataclass(frozen=True)
class Reference:
    """One entry of data/references.csv."""

    key: str
    citation: str
    note: str

    @property
    def short(self) -> str:
        """A short label for captions: 'Powell et al. 2013', 'Baes & Mesmer 1976', or the key."""
        return short_citation(self.key, self.citation)


def bibliography() -> dict[str, Reference]:
    """Every reference of data/references.csv by key."""
    with open(data_dir() / "references.csv", encoding="utf-8") as fh:
        rows = list(csv.DictReader(ln for ln in fh if not ln.startswith("#")))
    return {r["key"]: Reference(r["key"], r["citation"], r["note"]) for r in rows}


def short_citation(key: str, citation: str) -> str:
    """'Surname et al. YEAR', 'A & B YEAR' or 'Organisation YEAR' from a citation written as
    'Surname, I., Surname, I. (YEAR) Title...'; the key when the citation does not start that way."""
    if key == "memory":
        return "values recalled without a readable source (tagged memory)"
    match = re.match(r"^(?P<authors>[^()]+?)\s*\((?P<year>\d{4})\b", citation)
    if not match:
        return key
    tokens = [t.strip() for t in match.group("authors").split(",") if t.strip()]
    names = [t for t in tokens if not _INITIALS.match(t)]
    year = match.group("year")
    if not names or (len(names) > 1 and any(ch.isdigit() for n in names for ch in n)):
        return key
    if len(names) == 1 and "et al" not in match.group("authors"):
        label = f"{names[0]} {year}"
    elif len(names) == 2 and "et al" not in match.group("authors"):
        label = f"{names[0]} & {names[1]} {year}"
    else:
        label = f"{names[0]} et al. {year}"
    return label if len(label) <= 40 else key


_INITIALS = re.compile(r"^(?:[A-ZÀ-Ý][a-zà-ÿ]?\.-?)+(?:\s*et al\.?)?$")


def constants_used(
    water: Water, ph, *, solids: str = "fresh", solubility_shift=None, threshold: float = SIGNIFICANT_FRACTION
) -> pd.DataFrame:
    """The published reaction rows that matter for this water over these pH values.

    Parameters
    ----------
    water : Water
    ph : sequence of float
        pH values examined. [-]
    solids : {"fresh", "aged"}
    solubility_shift : mapping, optional
        Calibration as for :func:`workbench.residual_curve`. [log10 units]
    threshold : float
        Fraction of a component's dissolved total a species must carry somewhere to count. [-]

    Returns
    -------
    pandas.DataFrame
        One row per reaction row used, in data order: ``name``, ``table``, ``reaction``, ``source``,
        ``read_via``, ``quality``.
    """
    tab, eq = equilibrium(water, ph, solids=solids, solubility_shift=solubility_shift)
    data = database.load()
    a = np.abs(tab.a)
    contrib = eq.conc[:, :, None] * a[None, :, :]  # (points, species, components) [mol/L]
    total = contrib.sum(axis=1, keepdims=True)
    frac = np.where(total > 0, contrib / np.where(total > 0, total, 1.0), 0.0)
    frac[:, :, 0] = 0.0  # H+ is held by the fixed pH, not a total
    carriers = tab.species_index[(frac >= threshold).any(axis=(0, 2))]
    formed = tab.solid_index[(eq.solid_amount > 0).any(axis=0)]
    wanted = {int(i) for i in (*carriers, *formed)} | {data.index("OH-")}
    rows = sorted({int(r) for i in wanted for r in np.flatnonzero(data.row_map[i] != 0)})
    return pd.DataFrame(
        [
            {
                "name": data.rows[r].name,
                "table": data.rows[r].table,
                "reaction": data.rows[r].reaction,
                "source": data.rows[r].source,
                "read_via": data.rows[r].read_via,
                "quality": data.rows[r].quality,
            }
            for r in rows
        ]
    )


def sources_of(used: pd.DataFrame) -> pd.DataFrame:
    """The references behind :func:`constants_used` rows (plus the activity model), most used first.

    Returns
    -------
    pandas.DataFrame
        Index ``key``; columns ``short`` (caption label), ``citation``, ``role`` ("constants", "read via" or
        "activity model"), ``rows`` (how many constants), ``names`` (the species and solids, ``; ``-joined).
    """
    refs = bibliography()
    out = []
    for role, column in (("constants", "source"), ("read via", "read_via")):
        keys = [k for k in used[column] if k]
        for key in sorted(set(keys), key=lambda k: (-keys.count(k), k)):
            names = "; ".join(used.loc[used[column] == key, "name"])
            ref = refs[key]
            out.append((key, ref.short, ref.citation, role, keys.count(key), names))
    ref = refs[ACTIVITY_SOURCE]
    out.append((ref.key, ref.short, ref.citation, "activity model", 0, "Davies equation"))
    df = pd.DataFrame(out, columns=["key", "short", "citation", "role", "rows", "names"])
    return df.drop_duplicates("key").set_index("key")
