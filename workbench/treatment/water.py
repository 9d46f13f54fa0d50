"""The influent water: what the engineer enters, validated, and turned into component totals.

A :class:`Water` holds inputs only. Every field is checked on construction; a bad value raises
:class:`~workbench.errors.InputError` naming the field, the value and what is allowed. Nothing is rounded,
clipped or renamed.
"""

from __future__ import annotations

import math
import numbers
from collections.abc import Mapping
from dataclasses import dataclass, field, fields
from types import MappingProxyType

import numpy as np

from workbench.chemistry import database
from workbench.chemistry import water_properties as wp
from workbench.errors import InputError

#: Metal keys and the component each one enters as (oxidation state a treatment plant precipitates).
METALS: Mapping[str, str] = MappingProxyType(
    {
        "Cu": "Cu^2+",
        "Ni": "Ni^2+",
        "Zn": "Zn^2+",
        "Cd": "Cd^2+",
        "Pb": "Pb^2+",
        "Cr": "Cr^3+",
        "Fe": "Fe^3+",
        "Fe(II)": "Fe^2+",
        "Al": "Al^3+",
        "Mn": "Mn^2+",
        "Co": "Co^2+",
        "Ag": "Ag+",
    }
)

#: Keys refused with the reason (and what to enter instead).
REFUSED_METALS: Mapping[str, str] = MappingProxyType(
    {
        "Cr(VI)": "hexavalent chromium (chromate) does not precipitate as a hydroxide: it must be reduced to Cr(III) "
        "first (e.g. with bisulfite or ferrous iron at pH 2-3), then entered as 'Cr'",
        "Cr(III)": "enter trivalent chromium as 'Cr'",
        "Fe(III)": "enter ferric iron as 'Fe'",
        "CN": "cyanide is not a metal: it must be destroyed (e.g. alkaline chlorination) before precipitation; never "
        "acidify a cyanide-bearing water",
    }
)

#: Major-ion fields: field name -> component.
MAJOR_IONS: Mapping[str, str] = MappingProxyType(
    {
        "sodium_mg_l": "Na+",
        "calcium_mg_l": "Ca^2+",
        "magnesium_mg_l": "Mg^2+",
        "sulfate_mg_l": "SO4^2-",
        "chloride_mg_l": "Cl-",
        "fluoride_mg_l": "F-",
        "ammonia_mg_l_n": "NH3",
        "edta_mg_l": "Y^4-",
        "citrate_mg_l": "Cit^3-",
    }
)

MAX_METAL_MG_L = 20_000.0
#: pH values solved in one call: a grid from 0 to 14 at 0.001 is 14,001; a mixed water takes about 33 kB a point
MAX_PH_POINTS = 15_000
MAX_MAJOR_MG_L = 50_000.0
DEFAULT_ALKALINITY_PH = (
    8.3  # pH at which a stated alkalinity is read when no pH is measured (phenolphthalein end point)
)
CACO3_EQ_G = 50.0435  # g CaCO3 per equivalent (100.087 g/mol / 2; atomic weights in data/atomic_weights.csv)


def _number(name: str, value, low: float, high: float, unit: str) -> float:
    if isinstance(value, bool) or not isinstance(value, numbers.Real):
        raise InputError(name, value, f"a number between {low:g} and {high:g} {unit} is required")
    v = float(value)
    if not math.isfinite(v) or v < low or v > high:
        raise InputError(name, value, f"allowed {low:g} to {high:g} {unit}")
    return v


@dataclass(frozen=True)
class Water:
    """An influent analysis.

    Parameters
    ----------
    metals_mg_l : mapping
        Dissolved + suspended metal of each kind, as the element. Keys: Cu, Ni, Zn, Cd, Pb, Co, Mn, Ag (II/I),
        ``Cr`` = Cr(III), ``Fe`` = Fe(III), ``Fe(II)``, ``Al``. [mg/L]
    temperature_c : float
        Water temperature, 5-50. [°C]
    ph : float, optional
        Measured pH, 0-14. [-]
    sulfate_mg_l, chloride_mg_l, fluoride_mg_l : float
        As SO4, Cl, F. [mg/L]
    sodium_mg_l, calcium_mg_l, magnesium_mg_l : float
        As the element. [mg/L]
    alkalinity_mg_l_caco3 : float
        Measured (total) alkalinity; total carbonate follows from it at the measured pH, or pH 8.3 when none is
        given. [mg/L as CaCO3]
    acidity_mg_l_caco3 : float, optional
        Measured net acidity by the hot peroxide method (Standard Methods 2310 B, EPA 305.1: oxidised, boiled,
        titrated to pH 8.2-8.3), negative for a net alkaline water; None when not measured. When given, it
        sizes the raw water's unmeasured acid or base for the dose instead of the measured pH. [mg/L as CaCO3]
    ammonia_mg_l_n : float
        Ammonia + ammonium as N. [mg/L]
    edta_mg_l : float
        EDTA as the free acid C10H16N2O8. [mg/L]
    citrate_mg_l : float
        Citrate as citric acid C6H8O7. [mg/L]
    tss_mg_l : float
        Total suspended solids of the influent (kept for the treatment layer). [mg/L]
    name : str
        A label for figures and files.
    """

    metals_mg_l: Mapping[str, float] = field(default_factory=dict)
    temperature_c: float = 25.0
    ph: float | None = None
    sulfate_mg_l: float = 0.0
    chloride_mg_l: float = 0.0
    sodium_mg_l: float = 0.0
    calcium_mg_l: float = 0.0
    magnesium_mg_l: float = 0.0
    alkalinity_mg_l_caco3: float = 0.0
    ammonia_mg_l_n: float = 0.0
    edta_mg_l: float = 0.0
    citrate_mg_l: float = 0.0
    fluoride_mg_l: float = 0.0
    tss_mg_l: float = 0.0
    acidity_mg_l_caco3: float | None = None
    name: str = ""

    def __post_init__(self):
        if not isinstance(self.metals_mg_l, Mapping):
            raise InputError("metals_mg_l", self.metals_mg_l, "a mapping of metal symbol to mg/L is required")
        metals = {}
        for key, value in self.metals_mg_l.items():
            if key in REFUSED_METALS:
                raise InputError(f"metals_mg_l[{key!r}]", value, REFUSED_METALS[key])
            if key not in METALS:
                raise InputError("metals_mg_l", key, f"known metals are {', '.join(METALS)}")
            metals[key] = _number(f"metals_mg_l[{key!r}]", value, 0.0, MAX_METAL_MG_L, "mg/L")
        object.__setattr__(self, "metals_mg_l", MappingProxyType(metals))
        lo, hi = wp.VALID_TEMPERATURE_C
        _number("temperature_c", self.temperature_c, lo, hi, "°C (range of the thermodynamic data)")
        if self.ph is not None:
            _number("ph", self.ph, 0.0, 14.0, "")
        for f in fields(self):
            if f.name.endswith("_mg_l") or f.name.endswith("_mg_l_n") or f.name.endswith("_mg_l_caco3"):
                if f.name not in ("metals_mg_l", "acidity_mg_l_caco3"):
                    _number(f.name, getattr(self, f.name), 0.0, MAX_MAJOR_MG_L, "mg/L")
        if self.acidity_mg_l_caco3 is not None:
            _number(
                "acidity_mg_l_caco3",
                self.acidity_mg_l_caco3,
                -MAX_MAJOR_MG_L,
                MAX_MAJOR_MG_L,
                "mg/L as CaCO3 (hot peroxide net acidity: negative for a net alkaline water; None: not measured)",
            )
        if not isinstance(self.name, str):
            raise InputError("name", self.name, "a text label is required")
        if self.alkalinity_mg_l_caco3 > 0:
            self._carbonate_total()  # refuses an inconsistent alkalinity/pH pair

    # ------------------------------------------------------------------ derived quantities
    @property
    def alkalinity_ph(self) -> float:
        """pH at which the alkalinity is converted to total carbonate. [-]"""
        return self.ph if self.ph is not None else DEFAULT_ALKALINITY_PH

    def totals(self) -> dict[str, float]:
        """Total of each component present; every metal entered is listed, at 0 when entered as 0 (so results
        keep a column for it). [mol/L]"""
        data = database.load()
        out = {}
        for key, mg in self.metals_mg_l.items():
            comp = METALS[key]
            out[comp] = out.get(comp, 0.0) + mg / 1000.0 / data.input_molar_mass[comp]
        for fname, comp in MAJOR_IONS.items():
            mg = getattr(self, fname)
            if mg > 0:
                out[comp] = mg / 1000.0 / data.input_molar_mass[comp]
        if self.alkalinity_mg_l_caco3 > 0:
            out["CO3^2-"] = self._carbonate_total()
        metals = {METALS[key] for key in self.metals_mg_l}
        return {c: v for c, v in out.items() if v > 0 or c in metals}

    def _carbonate_total(self) -> float:
        """Total carbonate from alkalinity at the measured pH. [mol/L]

        Carbonate alkalinity ``Alk = C_T (a1 + 2 a2) + [OH-] - [H+]`` with conditional constants from the Davies
        equation at the ionic strength of the major ions (Stumm & Morgan's definition of total alkalinity).
        """
        data = database.load()
        t = self.temperature_c
        k = data.row_log_k(t)
        log_k1 = k[_row(data, "H2CO3")]
        log_k2 = k[_row(data, "HCO3-")]
        log_kw = k[_row(data, "OH-")]
        log_kh = k[_row(data, "CO2(g)", "gases")]  # CO2(g) + H2O = H2CO3*: H2CO3* under 1 atm CO2
        ionic = self._ionic_strength_estimate()
        a = float(wp.davies_a(t))
        g1 = float(wp.davies_log_gamma(1, ionic, a))
        g2 = float(wp.davies_log_gamma(2, ionic, a))
        ph = self.alkalinity_ph
        h = 10.0 ** (-ph - g1)  # [H+]
        k1c = 10.0 ** (log_k1 - 2 * g1)
        k2c = 10.0 ** (log_k2 - g2)
        kwc = 10.0 ** (log_kw - 2 * g1)
        alk = self.alkalinity_mg_l_caco3 / 1000.0 / CACO3_EQ_G
        denom = h * h + k1c * h + k1c * k2c
        a1, a2, a0 = k1c * h / denom, k1c * k2c / denom, h * h / denom
        carb_alk = alk - kwc / h + h
        if carb_alk <= 0 or (a1 + 2 * a2) <= 0:
            raise InputError(
                "alkalinity_mg_l_caco3",
                self.alkalinity_mg_l_caco3,
                f"inconsistent with pH {ph:g}: at that pH the water cannot hold this alkalinity; check the analysis",
            )
        ct = carb_alk / (a1 + 2 * a2)
        co2 = ct * a0
        if co2 > 10.0**log_kh:
            raise InputError(
                "alkalinity_mg_l_caco3",
                self.alkalinity_mg_l_caco3,
                f"inconsistent with pH {ph:g}: it would need {co2 * 44009:.0f} mg/L dissolved CO2, more than water "
                "holds under 1 atm of CO2; check the pH and alkalinity",
            )
        return ct

    def _ionic_strength_estimate(self) -> float:
        """Ionic strength of the entered ions taken as free ions (for converting alkalinity only). [mol/L]"""
        data = database.load()
        total = 0.0
        for key, mg in self.metals_mg_l.items():
            comp = METALS[key]
            total += (
                mg / 1000.0 / data.input_molar_mass[comp] * data.charges[data.components.index(comp)] ** 2
            )
        for fname, comp in MAJOR_IONS.items():
            mg = getattr(self, fname)
            total += (
                mg / 1000.0 / data.input_molar_mass[comp] * data.charges[data.components.index(comp)] ** 2
            )
        total += self.alkalinity_mg_l_caco3 / 1000.0 / CACO3_EQ_G  # as HCO3-
        return 0.5 * total


def _row(data, name: str, table: str = "aqueous") -> int:
    return next(i for i, r in enumerate(data.rows) if r.name == name and r.table == table)


def metal_component(key: str) -> str:
    """Component of a metal key, e.g. ``"Fe"`` -> ``"Fe^3+"``."""
    return METALS[key]


def as_array(values) -> np.ndarray:
    """pH values as a 1-D float array, checked: finite, 0-14, at most MAX_PH_POINTS of them."""
    count = len(values) if hasattr(values, "__len__") and not isinstance(values, str | bytes) else 1
    if count > MAX_PH_POINTS:  # before any per-value work: a grid of millions would only end in MemoryError
        raise InputError(
            "ph", f"{count} values", f"at most {MAX_PH_POINTS} pH values per call (0 to 14 at 0.001 is 14001)"
        )
    items = np.atleast_1d(np.asarray(values, dtype=object))
    if any(isinstance(v, (bool, np.bool_)) or not isinstance(v, numbers.Real) for v in items.ravel()):
        raise InputError("ph", values, "numbers from 0 to 14 are required")
    arr = np.atleast_1d(np.asarray(values, dtype=float))
    if arr.ndim != 1 or arr.size == 0:
        raise InputError("ph", values, "one pH value or a 1-D sequence of them is required")
    bad = ~np.isfinite(arr) | (arr < 0) | (arr > 14)
    if bad.any():
        raise InputError("ph", values, "allowed 0 to 14 (finite numbers)")
    return arr
