"""Alkaline reagents: their facts from ``data/reagents/``, validation of a reagent name, a purity and a dose.

A reagent is sold as a product (a dry hydrate, a solution, a slurry) that holds a mass fraction ``purity`` of its
active ingredient. Doses are mg/L of the product as sold. Dosing the product adds the active ingredient's ions to
the water's component totals (``adds``: mol of each component per mol of active ingredient); the hydroxide or
oxide part needs no component of its own, because the pH follows from the charge balance. The part of the
product that is not active, ``1 - purity``, is water or dissolved salts for solutions and slurries, and
insoluble inerts (unburnt limestone, MgO, silica) for lime: the fraction ``insoluble_fraction_of_remainder`` of
it ends in the sludge.

Every fact carries its source key and quality tag from ``data/reagents/reagents.csv``; the active ingredient's
molar mass is computed here from its formula and the IUPAC atomic weights in ``data/atomic_weights.csv``.
"""

from __future__ import annotations

import csv
import functools
import math
import numbers
from dataclasses import dataclass
from pathlib import Path
from types import MappingProxyType

import numpy as np

from workbench._paths import data_dir
from workbench.chemistry import database
from workbench.chemistry.formula import molar_mass
from workbench.errors import DataError, InputError

#: Reagent keys, in the order they are listed to the user.
REAGENTS = ("lime", "quicklime", "caustic", "magnesium_hydroxide", "soda_ash")
#: Largest dose accepted. [mg/L of product as sold]
MAX_DOSE_MG_L = 200_000.0
MAX_DOSES = 15_000  # doses solved in one call (as many as pH values: workbench.treatment.water.MAX_PH_POINTS)
#: Calcium chloride, dosed as pure anhydrous CaCl2 to supply calcium (common ion for fluorite).
CALCIUM_CHLORIDE_FORMULA = "CaCl2"
CALCIUM_CHLORIDE_ADDS = MappingProxyType({"Ca^2+": 1.0, "Cl-": 2.0})


@dataclass(frozen=True)
class Fact:
    """One reagent fact with its provenance: ``value`` (a number, or None for a text-only fact), ``text``,
    ``source`` (key into data/references.csv) and ``quality`` tag."""

    value: float | None
    text: str
    source: str
    quality: str


@dataclass(frozen=True)
class Reagent:
    """An alkaline reagent as sold.

    Attributes
    ----------
    key : str
        ``"lime"``, ``"quicklime"``, ``"caustic"``, ``"magnesium_hydroxide"`` or ``"soda_ash"``.
    name : str
        Trade name.
    formula : str
        Active ingredient, e.g. ``Ca(OH)2``.
    molar_mass_g_mol : float
        Of the active ingredient, computed from the formula. [g/mol]
    adds : mapping
        Component -> mol added per mol of active ingredient.
    purity : Fact
        Default mass fraction of active ingredient in the product as sold. [-]
    purity_basis : str
    insoluble_fraction_of_remainder : Fact
        Fraction of the non-active part ``1 - purity`` that is insoluble and ends in the sludge. [-]
    product_density : Fact
        Density of a liquid or slurry product (None for dry products). [kg/L]
    feed_strength, ph_ceiling_practice : Fact
        Text facts: how the product is usually fed, and the pH ceiling seen in practice.
    note : str
    """

    key: str
    name: str
    formula: str
    molar_mass_g_mol: float
    adds: MappingProxyType
    purity: Fact
    purity_basis: str
    insoluble_fraction_of_remainder: Fact
    product_density: Fact
    feed_strength: Fact
    ph_ceiling_practice: Fact
    note: str

    def active_mol_l(self, dose_mg_l, purity: float) -> np.ndarray:
        """Active ingredient added by a dose of product. [mol/L]"""
        return np.asarray(dose_mg_l, float) * purity / 1000.0 / self.molar_mass_g_mol

    def dose_mg_l(self, active_mol_l, purity: float) -> np.ndarray:
        """Dose of product that carries the given active ingredient. [mg/L of product as sold]"""
        return np.asarray(active_mol_l, float) * self.molar_mass_g_mol * 1000.0 / purity

    def inerts_mg_l(self, dose_mg_l, purity: float) -> np.ndarray:
        """Insoluble inerts that a dose of product brings to the sludge. [mg/L dry]"""
        share = self.insoluble_fraction_of_remainder.value
        return np.asarray(dose_mg_l, float) * (1.0 - purity) * share


def _read_csv(path: Path) -> list[dict[str, str]]:
    with open(path, encoding="utf-8", newline="") as fh:
        return list(csv.DictReader(ln for ln in fh if not ln.startswith("#")))


def atomic_weights(folder: str | None = None) -> dict[str, float]:
    """IUPAC standard atomic weights from data/atomic_weights.csv. [g/mol]"""
    base = Path(folder) if folder else data_dir()
    return {r["element"]: float(r["atomic_weight"]) for r in _read_csv(base / "atomic_weights.csv")}


def _fact(
    row: dict, value_col: str | None, text_col: str | None, source_col: str, quality_col: str, line: int
):
    where = f"data/reagents/reagents.csv row {line}"
    text = row[text_col].strip() if text_col else ""
    raw = row[value_col].strip() if value_col else ""
    value = None
    if raw:
        try:
            value = float(raw)
        except ValueError:
            raise DataError(f"{where}, column {value_col}: {raw!r} is not a number") from None
    source, quality = row[source_col].strip(), row[quality_col].strip()
    if (raw or text) and not source:
        raise DataError(f"{where}, column {source_col}: empty")
    if (raw or text) and quality not in database.QUALITY_TAGS:
        raise DataError(f"{where}, column {quality_col}: {quality!r}; allowed {database.QUALITY_TAGS}")
    return Fact(value, text, source, quality)


def _adds(text: str, components: tuple[str, ...], line: int) -> MappingProxyType:
    out = {}
    for part in text.split(";"):
        comp, _, count = part.strip().rpartition(":")
        if comp not in components:
            raise DataError(f"data/reagents/reagents.csv row {line}, column adds: unknown component {comp!r}")
        out[comp] = float(count)
    return MappingProxyType(out)


@functools.cache
def load(folder: str | None = None) -> MappingProxyType:
    """Reagent facts from data/reagents/reagents.csv (cached): {key: Reagent}."""
    base = Path(folder) if folder else data_dir()
    weights = atomic_weights(folder)
    components = database.load().components
    out = {}
    for line, r in enumerate(_read_csv(base / "reagents" / "reagents.csv"), start=2):
        key = r["reagent"].strip()
        purity = _fact(r, "default_purity", "purity_basis", "source", "quality", line)
        if purity.value is None or not 0.0 < purity.value <= 1.0:
            raise DataError(
                f"data/reagents/reagents.csv row {line}, column default_purity: must be in (0, 1]"
            )
        inert = _fact(
            r, "insoluble_fraction_of_remainder", None, "insoluble_source", "insoluble_quality", line
        )
        if inert.value is None or not 0.0 <= inert.value <= 1.0:
            raise DataError(
                f"data/reagents/reagents.csv row {line}, column insoluble_fraction_of_remainder: must be in [0, 1]"
            )
        out[key] = Reagent(
            key=key,
            name=r["name"].strip(),
            formula=r["formula"].strip(),
            molar_mass_g_mol=molar_mass(r["formula"].strip(), weights),
            adds=_adds(r["adds"], components, line),
            purity=purity,
            purity_basis=r["purity_basis"].strip(),
            insoluble_fraction_of_remainder=inert,
            product_density=_fact(r, "product_density_kg_l", None, "density_source", "density_quality", line),
            feed_strength=_fact(r, None, "feed_strength_note", "feed_source", "feed_quality", line),
            ph_ceiling_practice=_fact(r, None, "ph_ceiling_note", "ceiling_source", "ceiling_quality", line),
            note=r["note"].strip(),
        )
    if tuple(out) != REAGENTS:
        raise DataError(f"data/reagents/reagents.csv: reagents {tuple(out)}; expected {REAGENTS}")
    return MappingProxyType(out)


@functools.cache
def sludge_assumptions(folder: str | None = None) -> MappingProxyType:
    """Sludge handling assumptions from data/reagents/sludge.csv: {quantity: Fact}."""
    base = Path(folder) if folder else data_dir()
    out = {}
    for line, r in enumerate(_read_csv(base / "reagents" / "sludge.csv"), start=2):
        out[r["quantity"].strip()] = _fact(r, "value", "note", "source", "quality", line)
    return MappingProxyType(out)


def calcium_chloride_molar_mass() -> float:
    """Molar mass of anhydrous CaCl2 from the IUPAC atomic weights. [g/mol]"""
    return molar_mass(CALCIUM_CHLORIDE_FORMULA, atomic_weights())


# ---------------------------------------------------------------------------------------------- validation
def get(reagent) -> Reagent:
    """The reagent named ``reagent``; an unknown name raises InputError listing the known ones."""
    table = load()
    if not isinstance(reagent, str) or reagent not in table:
        raise InputError("reagent", reagent, f"known reagents are {', '.join(REAGENTS)}")
    return table[reagent]


def check_purity(reagent: Reagent, purity) -> float:
    """The purity to use: the reagent's default when ``purity`` is None, else a number in (0, 1]. [-]"""
    if purity is None:
        return reagent.purity.value
    if isinstance(purity, bool) or not isinstance(purity, numbers.Real) or not math.isfinite(purity):
        raise InputError("purity", purity, "a mass fraction of active ingredient in (0, 1] is required")
    if not 0.0 < float(purity) <= 1.0:
        raise InputError(
            "purity",
            purity,
            f"allowed greater than 0 and at most 1 (mass fraction of {reagent.formula} in the product as sold)",
        )
    return float(purity)


def check_doses(dose_mg_l, field: str = "dose_mg_l") -> np.ndarray:
    """Doses as a 1-D float array, checked: numbers (not text, not True/False), finite, 0 to MAX_DOSE_MG_L, at
    most MAX_DOSES of them. [mg/L]"""
    count = len(dose_mg_l) if hasattr(dose_mg_l, "__len__") and not isinstance(dose_mg_l, str | bytes) else 1
    if count > MAX_DOSES:
        raise InputError(field, f"{count} values", f"at most {MAX_DOSES} doses per call")
    items = np.atleast_1d(np.asarray(dose_mg_l, dtype=object)).ravel()
    if any(isinstance(v, bool | np.bool_) or not isinstance(v, numbers.Real) for v in items):
        raise InputError(field, dose_mg_l, "a number or a 1-D sequence of numbers (mg/L) is required")
    try:
        arr = np.atleast_1d(np.asarray(dose_mg_l, dtype=float))
    except (TypeError, ValueError):
        raise InputError(
            field, dose_mg_l, "a number or a 1-D sequence of numbers (mg/L) is required"
        ) from None
    if arr.ndim != 1 or arr.size == 0:
        raise InputError(field, dose_mg_l, "one dose or a 1-D sequence of doses (mg/L) is required")
    if (~np.isfinite(arr) | (arr < 0) | (arr > MAX_DOSE_MG_L)).any():
        raise InputError(field, dose_mg_l, f"allowed 0 to {MAX_DOSE_MG_L:g} mg/L (finite numbers)")
    return arr


def check_amount(value, field: str, high: float, unit: str) -> float:
    """A single non-negative number up to ``high``."""
    if isinstance(value, bool) or not isinstance(value, numbers.Real) or not math.isfinite(value):
        raise InputError(field, value, f"a number from 0 to {high:g} {unit} is required")
    if not 0.0 <= float(value) <= high:
        raise InputError(field, value, f"allowed 0 to {high:g} {unit}")
    return float(value)


def check_positive(value, field: str, high: float, unit: str) -> float:
    """A single number greater than 0 and at most ``high``."""
    if isinstance(value, bool) or not isinstance(value, numbers.Real) or not math.isfinite(value):
        raise InputError(field, value, f"a number greater than 0 and at most {high:g} {unit} is required")
    if not 0.0 < float(value) <= high:
        raise InputError(field, value, f"allowed greater than 0 and at most {high:g} {unit}")
    return float(value)
