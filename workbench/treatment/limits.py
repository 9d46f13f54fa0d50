"""Discharge limits: example regulatory sets from data/limits/ and the user's own permit limits.

Limits are on total metal, mg/L. The example sets are examples: the local permit always governs, and a user's
permit limits, entered with :func:`permit_limits`, replace an example's limit for the same metal and basis
(:func:`combine_limits`).
"""

from __future__ import annotations

import csv
import math
import numbers
import re
from collections.abc import Mapping

import pandas as pd

from workbench._paths import data_dir
from workbench.errors import InputError
from workbench.treatment.water import METALS, REFUSED_METALS

BASES = ("daily_max", "monthly_avg", "four_day_avg", "instantaneous_max", "permit")
COLUMNS = ["metal", "basis", "limit_mg_l", "source", "origin"]


def _rows() -> list[dict[str, str]]:
    with open(data_dir() / "limits" / "limit_sets.csv", encoding="utf-8") as fh:
        return list(csv.DictReader(ln for ln in fh if not ln.startswith("#")))


def _citations() -> dict[str, str]:
    with open(data_dir() / "references.csv", encoding="utf-8") as fh:
        return {r["key"]: r["citation"] for r in csv.DictReader(ln for ln in fh if not ln.startswith("#"))}


def available_limit_sets() -> list[str]:
    """Names of the example limit sets in data/limits/limit_sets.csv."""
    return list(dict.fromkeys(r["set"] for r in _rows()))


def load_limits(name: str) -> pd.DataFrame:
    """An example limit set.

    Returns
    -------
    pandas.DataFrame
        Columns ``metal``, ``basis``, ``limit_mg_l`` [mg/L, total metal], ``source`` (full citation), ``origin``
        ("example"). ``attrs["title"]`` names the set; ``attrs["note"]`` says that the local permit governs.
    """
    rows = [r for r in _rows() if r["set"] == name]
    if not rows:
        raise InputError("limit set", name, f"known sets are {', '.join(available_limit_sets())}")
    cites = _citations()
    df = pd.DataFrame(
        {
            "metal": [r["metal"] for r in rows],
            "basis": [r["basis"] for r in rows],
            "limit_mg_l": [float(r["limit_mg_l"]) for r in rows],
            "source": [cites[r["source"]] for r in rows],
            "origin": "example",
        }
    )
    df.attrs["title"] = rows[0]["title"]
    df.attrs["note"] = "Example limits only: the local permit governs; verify against the current regulation."
    return df


def permit_limits(
    limits_mg_l: Mapping[str, float], *, basis: str = "permit", source: str = "local permit"
) -> pd.DataFrame:
    """The user's own permit limits, {metal: total metal mg/L}, in the same table form as :func:`load_limits`."""
    if not isinstance(limits_mg_l, Mapping) or not limits_mg_l:
        raise InputError("permit limits", limits_mg_l, "a non-empty mapping of metal to mg/L is required")
    if basis not in BASES:
        raise InputError("basis", basis, f"allowed {', '.join(BASES)}")
    if not isinstance(source, str) or not source.strip():
        raise InputError("source", source, "say where the limits come from (e.g. the permit number)")
    rows = []
    for metal, value in limits_mg_l.items():
        check_permit_metal(metal)
        if (
            isinstance(value, bool)
            or not isinstance(value, numbers.Real)
            or not math.isfinite(value)
            or value <= 0
        ):
            raise InputError(f"permit limits[{metal!r}]", value, "a positive number of mg/L is required")
        rows.append((metal, basis, float(value), source, "permit"))
    return pd.DataFrame(rows, columns=COLUMNS)


_ION = re.compile(r"^([A-Za-z]{1,2})\s*(?:\^?\s*(\d)\s*\+|(\++))$")  # Zn2+, Zn^2+, Zn++, Ag+


def check_permit_metal(metal) -> str:
    """A permit limit's metal key, exactly as :data:`workbench.treatment.water.METALS` writes it; anything else is
    refused with the key to use (the ion, another case) or the reason (Cr(VI), cyanide)."""
    known = f"known metals are {', '.join(METALS)}"
    if not isinstance(metal, str) or not metal.strip():
        raise InputError("permit limits", metal, f"metal keys are text, e.g. 'Zn'; {known}")
    if metal in REFUSED_METALS:
        raise InputError(f"permit limits[{metal!r}]", metal, REFUSED_METALS[metal])
    if metal in METALS:
        return metal
    by_case = {k.lower(): k for k in [*METALS, *REFUSED_METALS]}
    ion = _ION.match(metal.strip())
    if ion:
        element = by_case.get(ion.group(1).lower())
        charge = int(ion.group(2)) if ion.group(2) else len(ion.group(3) or "")
        key = {("Fe", 2): "Fe(II)", ("Fe", 3): "Fe", ("Cr", 6): "Cr(VI)"}.get((element, charge), element)
        if key in REFUSED_METALS:
            raise InputError(f"permit limits[{metal!r}]", metal, REFUSED_METALS[key])
        if key in METALS:
            raise InputError(
                "permit limits", metal, f"write the metal key {key!r}: limits are on the total element, not an ion"
            )
    if metal.strip().lower() in by_case:
        key = by_case[metal.strip().lower()]
        if key in REFUSED_METALS:
            raise InputError(f"permit limits[{metal!r}]", metal, REFUSED_METALS[key])
        raise InputError("permit limits", metal, f"write the metal key {key!r} (keys are written exactly so)")
    raise InputError("permit limits", metal, known)


def combine_limits(*tables: pd.DataFrame) -> pd.DataFrame:
    """Stack limit tables; a later table's limit replaces an earlier one for the same metal and basis (so the
    user's permit, passed last, wins)."""
    if not tables:
        raise InputError("limits", tables, "at least one limit table is required")
    for t in tables:
        check_limits(t)
    out = pd.concat(tables, ignore_index=True)
    out = out.drop_duplicates(subset=["metal", "basis"], keep="last").reset_index(drop=True)
    out.attrs = {k: v for t in tables for k, v in t.attrs.items()}
    return out


def check_limits(limits: pd.DataFrame) -> pd.DataFrame:
    """Validate a limit table (columns, positive finite limits, known bases)."""
    if not isinstance(limits, pd.DataFrame):
        raise InputError(
            "limits", type(limits).__name__, "a limit table (load_limits / permit_limits) is required"
        )
    missing = [c for c in ("metal", "basis", "limit_mg_l") if c not in limits.columns]
    if missing:
        raise InputError("limits", list(limits.columns), f"columns {missing} are required")
    if limits.empty:
        raise InputError("limits", "empty table", "at least one limit is required")
    for i, row in limits.iterrows():
        v = row["limit_mg_l"]
        if not isinstance(v, numbers.Real) or not math.isfinite(v) or v <= 0:
            raise InputError(f"limits row {i} ({row['metal']}) limit_mg_l", v, "a positive number of mg/L")
        if row["basis"] not in BASES:
            raise InputError(
                f"limits row {i} ({row['metal']}) basis", row["basis"], f"allowed {', '.join(BASES)}"
            )
    return limits
