"""Scenario files: the workbench's own human-readable TOML schema (read with tomllib, never executed).

A scenario holds everything an engineer entered, so that a figure can be regenerated exactly for a permit file::

    version = 1                       # schema version (required)
    name = "Plant A, combined rinse"  # a label for figures and files

    [influent]                        # required: the Water fields (temperature_c, ph, sulfate_mg_l, ...)
    temperature_c = 22.0
    acidity_mg_l_caco3 = 120.0        # optional: measured hot peroxide net acidity (may be negative)
    [influent.metals_mg_l]            # metal key = mg/L as the element (Cr = Cr(III), Fe = Fe(III))
    Zn = 25.0

    [limits]                          # optional
    set = "40cfr433.15"               # an example limit set (wb.available_limit_sets()), or omitted
    basis = "monthly_avg"             # optional: compare with this basis only (default: most stringent)
    permit_source = "Permit 123-A"    # where the permit limits below come from
    [limits.permit]                   # the user's permit: metal = mg/L total; replaces the set's value
    Zn = 1.0

    [design]                          # optional; every key has a default
    margin = 0.5                      # design target = margin x limit, (0, 1]
    ph_low = 5.0                      # pH range searched
    ph_high = 12.5
    rule = "widest_centre"            # or "max_headroom"
    effluent_tss_mg_l = 10.0          # optional: compare total metal (dissolved + carried-over solids)
    solids = "fresh"                  # or "aged"

    [reagent]                         # optional
    name = "lime"                     # lime, quicklime, caustic, magnesium_hydroxide, soda_ash
    purity = 0.95                     # optional, (0, 1]; default from data/reagents
    flow_m3_d = 500.0                 # optional, > 0
    reactor = "closed"                # optional: "closed" (default) or "open" (aerated, CO2 with the air)

    [calibration]                     # optional: apparent solubility shift per metal from jar tests
    Zn = 0.55                         # log10 units, |shift| <= 5
    note = "jar tests of 3 June"
    [calibration.interval]            # optional: the fitted interval per metal, [low, high]
    Zn = [0.3, 0.8]

    [uncertainty]                     # optional: Monte Carlo band over the published ± of the constants
    samples = 200                     # 0 = no band
    seed = 1
    default_uncertainty = 0.2         # ± where none is published, log10 units

Every table but ``[influent]`` is optional. Unknown keys anywhere are refused with their dotted name
(``design.margn``), so a typo is never silently ignored. Reading never modifies the file; saving writes a
temporary file in the same folder and replaces the old file only once the new one is complete on disk.
"""

from __future__ import annotations

import math
import numbers
import os
import re
import tempfile
import tomllib
from collections.abc import Callable, Mapping
from dataclasses import dataclass, field, fields, replace
from pathlib import Path
from types import MappingProxyType

import pandas as pd

from workbench._paths import data_dir
from workbench.errors import InputError
from workbench.treatment.influent import REACTORS
from workbench.treatment.limits import BASES, available_limit_sets, combine_limits, load_limits, permit_limits
from workbench.treatment.setpoint import (
    DEFAULT_MARGIN,
    DEFAULT_PH_RANGE,
    RULES,
    SetpointDesign,
    design_setpoint,
)
from workbench.treatment.solubility import MAX_SHIFT_LOG
from workbench.treatment.uncertainty import MAX_SAMPLES
from workbench.treatment.water import METALS, REFUSED_METALS, Water

__all__ = [
    "MAX_FILE_BYTES",
    "REAGENT_NAMES",
    "SCHEMA_VERSION",
    "Calibration",
    "DesignOptions",
    "LimitsChoice",
    "ReagentChoice",
    "Scenario",
    "UncertaintySettings",
    "demo_scenario_path",
    "demo_water",
    "design_scenario",
    "parse_scenario",
    "read_scenario",
    "save_scenario",
]

SCHEMA_VERSION = 1
MAX_FILE_BYTES = 1_000_000
REAGENT_NAMES = ("lime", "quicklime", "caustic", "magnesium_hydroxide", "soda_ash")
DESIGN_SOLIDS = ("fresh", "aged")
MAX_TSS_MG_L = 1000.0
MAX_DEFAULT_UNCERTAINTY = 5.0
MAX_SEED = 2**63 - 1
_INFLUENT_KEYS = tuple(f.name for f in fields(Water) if f.name != "name")


# ---------------------------------------------------------------------------------------------------- checks
def _is_number(value) -> bool:
    return not isinstance(value, bool) and isinstance(value, numbers.Real) and math.isfinite(value)


def _number(name: str, value, ok, allowed: str) -> float:
    """A finite real number (not a bool) for which ``ok(value)`` holds, as float."""
    if not _is_number(value) or not ok(float(value)):
        raise InputError(name, value, allowed)
    return float(value)


def _integer(name: str, value, low: int, high: int) -> int:
    if isinstance(value, bool) or not isinstance(value, numbers.Integral) or not low <= value <= high:
        raise InputError(name, value, f"an integer from {low} to {high} is required")
    return int(value)


def _text(name: str, value, *, empty: bool = False) -> str:
    if not isinstance(value, str) or (not empty and not value.strip()):
        raise InputError(name, value, "text is required" if empty else "non-empty text is required")
    return value


def _choice(name: str, value, allowed: tuple[str, ...]) -> str:
    if not isinstance(value, str) or value not in allowed:
        raise InputError(name, value, f"allowed {', '.join(allowed)}")
    return value


def _table(name: str, value) -> Mapping:
    if not isinstance(value, Mapping):
        raise InputError(name, value, f"a table [{name}] is required")
    return value


def _refuse_unknown(prefix: str, table: Mapping, known) -> None:
    unknown = [k for k in table if k not in known]
    if unknown:
        key = unknown[0]
        dotted = f"{prefix}.{key}" if prefix else key
        raise InputError(dotted, table[key], f"unknown key; known keys are {', '.join(known)}")


def _metal_key(name: str, key) -> str:
    if key in REFUSED_METALS:
        raise InputError(name, key, REFUSED_METALS[key])
    if key not in METALS:
        raise InputError(name, key, f"known metals are {', '.join(METALS)}")
    return key


# ---------------------------------------------------------------------------------------------------- sections
@dataclass(frozen=True)
class LimitsChoice:
    """The ``[limits]`` table: an example set and/or the user's permit limits.

    Parameters
    ----------
    set : str, optional
        Name of an example limit set (:func:`workbench.available_limit_sets`).
    basis : str, optional
        Compare with this basis only (e.g. "monthly_avg"); default: the most stringent limit per metal.
    permit : mapping, optional
        The user's permit limits, metal key -> total metal; they replace the set's value for the same metal.
        [mg/L]
    permit_source : str, optional
        Where the permit limits come from (e.g. the permit number).
    """

    set: str | None = None
    basis: str | None = None
    permit: Mapping[str, float] = field(default_factory=dict)
    permit_source: str | None = None

    def __post_init__(self):
        if self.set is not None:
            _choice("limits.set", self.set, tuple(available_limit_sets()))
        if self.basis is not None:
            _choice("limits.basis", self.basis, BASES)
        _table("limits.permit", self.permit)
        permit = {}
        for key, value in self.permit.items():
            _metal_key(f"limits.permit.{key}", key)
            permit[key] = _number(
                f"limits.permit.{key}", value, lambda v: v > 0, "a positive number of mg/L is required"
            )
        object.__setattr__(self, "permit", MappingProxyType(permit))
        if self.permit_source is not None:
            _text("limits.permit_source", self.permit_source)

    @property
    def empty(self) -> bool:
        """True when neither an example set nor permit limits are given."""
        return self.set is None and not self.permit


@dataclass(frozen=True)
class DesignOptions:
    """The ``[design]`` table: options of :func:`workbench.design_setpoint`.

    Parameters
    ----------
    margin : float
        Design target = margin x limit, in (0, 1]. [-]
    ph_low, ph_high : float
        pH range searched, 0 <= low < high <= 14, at least 0.5 apart. [-]
    rule : {"widest_centre", "max_headroom"}
        How the setpoint is chosen within the windows.
    effluent_tss_mg_l : float, optional
        Clarifier effluent suspended solids, 0-1000; when given, total metal is compared. [mg/L]
    solids : {"fresh", "aged"}
        Which solids may form.
    """

    margin: float = DEFAULT_MARGIN
    ph_low: float = DEFAULT_PH_RANGE[0]
    ph_high: float = DEFAULT_PH_RANGE[1]
    rule: str = "widest_centre"
    effluent_tss_mg_l: float | None = None
    solids: str = "fresh"

    def __post_init__(self):
        set_ = lambda k, v: object.__setattr__(self, k, v)  # noqa: E731 - frozen dataclass
        set_(
            "margin",
            _number(
                "design.margin", self.margin, lambda v: 0 < v <= 1, "allowed (0, 1]: target = margin x limit"
            ),
        )
        ph = "a pH from 0 to 14 is required"
        set_("ph_low", _number("design.ph_low", self.ph_low, lambda v: 0 <= v <= 14, ph))
        set_("ph_high", _number("design.ph_high", self.ph_high, lambda v: 0 <= v <= 14, ph))
        if self.ph_high - self.ph_low < 0.5:
            raise InputError(
                "design.ph_high", self.ph_high, f"must exceed ph_low ({self.ph_low:g}) by at least 0.5"
            )
        _choice("design.rule", self.rule, RULES)
        if self.effluent_tss_mg_l is not None:
            set_(
                "effluent_tss_mg_l",
                _number(
                    "design.effluent_tss_mg_l",
                    self.effluent_tss_mg_l,
                    lambda v: 0 <= v <= MAX_TSS_MG_L,
                    f"allowed 0 to {MAX_TSS_MG_L:g} mg/L (omit the key to compare dissolved metal)",
                ),
            )
        _choice("design.solids", self.solids, DESIGN_SOLIDS)


@dataclass(frozen=True)
class ReagentChoice:
    """The ``[reagent]`` table (plain values; the reagent facts live in data/reagents).

    Parameters
    ----------
    name : str
        One of :data:`REAGENT_NAMES`.
    purity : float, optional
        Mass fraction of the active ingredient in the product as sold, (0, 1]; default from data/reagents. [-]
    flow_m3_d : float, optional
        Wastewater flow, > 0. [m³/d]
    reactor : {"closed", "open"}
        The reagent's reactor: closed (no gas exchange) or open to the air (aerated; CO2 at equilibrium with the
        air at every dose). The dose and sludge say which was used.
    """

    name: str = "lime"
    purity: float | None = None
    flow_m3_d: float | None = None
    reactor: str = "closed"

    def __post_init__(self):
        _choice("reagent.name", self.name, REAGENT_NAMES)
        _choice("reagent.reactor", self.reactor, REACTORS)
        if self.purity is not None:
            object.__setattr__(
                self,
                "purity",
                _number(
                    "reagent.purity", self.purity, lambda v: 0 < v <= 1, "allowed (0, 1] (mass fraction)"
                ),
            )
        if self.flow_m3_d is not None:
            object.__setattr__(
                self,
                "flow_m3_d",
                _number("reagent.flow_m3_d", self.flow_m3_d, lambda v: v > 0, "a positive flow in m3/d"),
            )


@dataclass(frozen=True)
class Calibration:
    """The ``[calibration]`` table: apparent solubility shift per metal fitted to jar tests.

    Parameters
    ----------
    shift : mapping
        Metal key -> shift; every solid of the metal is 10**shift times more soluble, |shift| <= 5.
        [log10 units]
    interval : mapping, optional
        Metal key -> (low, high) interval of the fitted shift, low <= shift <= high. [log10 units]
    note : str, optional
        Where the calibration comes from (e.g. the jar-test series).
    """

    shift: Mapping[str, float] = field(default_factory=dict)
    interval: Mapping[str, tuple[float, float]] = field(default_factory=dict)
    note: str | None = None

    def __post_init__(self):
        _table("calibration", self.shift)
        _table("calibration.interval", self.interval)
        shift = {}
        for key, value in self.shift.items():
            _metal_key(f"calibration.{key}", key)
            shift[key] = _number(
                f"calibration.{key}",
                value,
                lambda v: abs(v) <= MAX_SHIFT_LOG,
                f"a number of log10 units from -{MAX_SHIFT_LOG:g} to {MAX_SHIFT_LOG:g} is required",
            )
        interval = {}
        for key, pair in self.interval.items():
            name = f"calibration.interval.{key}"
            if key not in shift:
                raise InputError(name, pair, f"an interval needs a shift for {key} in [calibration]")
            if isinstance(pair, str | bytes) or not hasattr(pair, "__len__") or len(pair) != 2:
                raise InputError(name, pair, "a pair [low, high] of log10 units is required")
            low, high = (
                _number(name, v, lambda x: True, "a pair [low, high] of numbers is required") for v in pair
            )
            if not low <= shift[key] <= high:
                raise InputError(name, list(pair), f"low <= shift ({shift[key]:g}) <= high is required")
            interval[key] = (low, high)
        object.__setattr__(self, "shift", MappingProxyType(shift))
        object.__setattr__(self, "interval", MappingProxyType(interval))
        if self.note is not None:
            _text("calibration.note", self.note, empty=True)


@dataclass(frozen=True)
class UncertaintySettings:
    """The ``[uncertainty]`` table: Monte Carlo band settings (:func:`workbench.uncertainty_band`).

    Parameters
    ----------
    samples : int
        Number of samples, 0 (no band) to 20,000.
    seed : int
        Seed of the random generator; the same seed gives the same band.
    default_uncertainty : float
        ± for constants without a published one, 0-5. [log10 units]
    """

    samples: int = 0
    seed: int = 0
    default_uncertainty: float = 0.2

    def __post_init__(self):
        _integer("uncertainty.samples", self.samples, 0, MAX_SAMPLES)
        _integer("uncertainty.seed", self.seed, 0, MAX_SEED)
        object.__setattr__(
            self,
            "default_uncertainty",
            _number(
                "uncertainty.default_uncertainty",
                self.default_uncertainty,
                lambda v: 0 <= v <= MAX_DEFAULT_UNCERTAINTY,
                f"allowed 0 to {MAX_DEFAULT_UNCERTAINTY:g} log10 units",
            ),
        )


# ---------------------------------------------------------------------------------------------------- scenario
@dataclass(frozen=True)
class Scenario:
    """Everything entered for one design: influent, limits, design options, reagent, calibration, Monte Carlo.

    Parameters
    ----------
    name : str
        A label for figures and files; it is also the influent's label (``water.name``).
    water : Water
        The influent.
    limits : LimitsChoice
    design : DesignOptions
    reagent : ReagentChoice, optional
    calibration : Calibration, optional
    uncertainty : UncertaintySettings
    """

    name: str
    water: Water
    limits: LimitsChoice = field(default_factory=LimitsChoice)
    design: DesignOptions = field(default_factory=DesignOptions)
    reagent: ReagentChoice | None = None
    calibration: Calibration | None = None
    uncertainty: UncertaintySettings = field(default_factory=UncertaintySettings)
    version: int = SCHEMA_VERSION

    def __post_init__(self):
        _text("name", self.name, empty=True)
        if not isinstance(self.water, Water):
            raise InputError("influent", type(self.water).__name__, "a workbench Water is required")
        for name, value, kind in (
            ("limits", self.limits, LimitsChoice),
            ("design", self.design, DesignOptions),
            ("uncertainty", self.uncertainty, UncertaintySettings),
        ):
            if not isinstance(value, kind):
                raise InputError(name, type(value).__name__, f"a {kind.__name__} is required")
        if self.reagent is not None and not isinstance(self.reagent, ReagentChoice):
            raise InputError("reagent", type(self.reagent).__name__, "a ReagentChoice or None is required")
        if self.calibration is not None and not isinstance(self.calibration, Calibration):
            raise InputError(
                "calibration", type(self.calibration).__name__, "a Calibration or None is required"
            )
        if self.version != SCHEMA_VERSION:
            raise InputError(
                "version", self.version, f"this workbench writes scenario version {SCHEMA_VERSION}"
            )
        if self.water.name != self.name:
            object.__setattr__(self, "water", replace(self.water, name=self.name))
        in_water = ", ".join(self.water.metals_mg_l) or "none"
        for key in self.limits.permit:
            if key not in self.water.metals_mg_l:
                raise InputError(
                    f"limits.permit.{key}",
                    self.limits.permit[key],
                    f"a permit limit needs the metal in [influent.metals_mg_l] (metals there: {in_water})",
                )
        for key in self.calibration.shift if self.calibration is not None else ():
            if key not in self.water.metals_mg_l:
                raise InputError(
                    f"calibration.{key}",
                    self.calibration.shift[key],
                    f"a shift needs the metal in [influent.metals_mg_l] (metals there: {in_water})",
                )
        if self.limits.basis is not None and not self.limits.empty:
            bases = sorted(set(self.limits_table()["basis"]))
            if self.limits.basis not in bases:
                raise InputError(
                    "limits.basis", self.limits.basis, f"bases in these limits: {', '.join(bases)}"
                )

    # ------------------------------------------------------------------ derived inputs
    def limits_table(self) -> pd.DataFrame:
        """The limit table built from the example set and the permit (the permit wins for a metal and basis).

        Raises
        ------
        InputError
            When the scenario has neither a limit set nor permit limits.
        """
        if self.limits.empty:
            raise InputError("limits", None, "a [limits] table with a set or [limits.permit] is required")
        tables = []
        if self.limits.set is not None:
            tables.append(load_limits(self.limits.set))
        if self.limits.permit:
            tables.append(
                permit_limits(dict(self.limits.permit), source=self.limits.permit_source or "local permit")
            )
        return combine_limits(*tables)

    @property
    def solubility_shift(self) -> dict[str, float] | None:
        """The calibration as ``solubility_shift=`` for the core API, or None. [log10 units]"""
        return (
            dict(self.calibration.shift) if self.calibration is not None and self.calibration.shift else None
        )

    def design_kwargs(self) -> dict:
        """Keyword arguments of :func:`workbench.design_setpoint` (after ``water`` and ``limits``)."""
        d, u = self.design, self.uncertainty
        return dict(
            margin=d.margin,
            ph_range=(d.ph_low, d.ph_high),
            rule=d.rule,
            basis=self.limits.basis,
            effluent_tss_mg_l=d.effluent_tss_mg_l,
            solids=d.solids,
            solubility_shift=self.solubility_shift,
            samples=u.samples,
            seed=u.seed,
            default_uncertainty=u.default_uncertainty,
        )

    # ------------------------------------------------------------------ writing
    def to_toml(self) -> str:
        """The scenario as TOML text in the workbench's schema (floats written exactly, with ``repr``)."""
        out = [
            "# Hydroxide-precipitation workbench scenario (own TOML schema, described in workbench/scenario.py).",
            f"version = {self.version}",
            f"name = {_toml_str(self.name)}",
            "",
            "[influent]  # concentrations in mg/L; temperature in °C",
        ]
        for key in _INFLUENT_KEYS:
            value = getattr(self.water, key)
            if key != "metals_mg_l" and value is not None:
                out.append(f"{key} = {_toml_value(value)}")
        out += ["", "[influent.metals_mg_l]  # mg/L as the element; Cr = Cr(III), Fe = Fe(III)"]
        out += [f"{_toml_key(k)} = {_toml_value(v)}" for k, v in self.water.metals_mg_l.items()]
        lim = self.limits
        if not lim.empty or lim.basis is not None or lim.permit_source is not None:
            out += ["", "[limits]  # example limits never replace the local permit"]
            for key in ("set", "basis", "permit_source"):
                if getattr(lim, key) is not None:
                    out.append(f"{key} = {_toml_value(getattr(lim, key))}")
            if lim.permit:
                out += ["", "[limits.permit]  # total metal, mg/L"]
                out += [f"{_toml_key(k)} = {_toml_value(v)}" for k, v in lim.permit.items()]
        d = self.design
        out += ["", "[design]  # target = margin x limit; pH range searched"]
        for key in ("margin", "ph_low", "ph_high", "rule", "effluent_tss_mg_l", "solids"):
            if getattr(d, key) is not None:
                out.append(f"{key} = {_toml_value(getattr(d, key))}")
        if self.reagent is not None:
            out += [
                "",
                "[reagent]  # purity: mass fraction as sold (omitted: default); flow in m3/d; reactor closed/open",
            ]
            for key in ("name", "purity", "flow_m3_d", "reactor"):
                if getattr(self.reagent, key) is not None:
                    out.append(f"{key} = {_toml_value(getattr(self.reagent, key))}")
        if self.calibration is not None:
            cal = self.calibration
            out += ["", "[calibration]  # apparent solubility shift per metal, log10 units"]
            out += [f"{_toml_key(k)} = {_toml_value(v)}" for k, v in cal.shift.items()]
            if cal.note is not None:
                out.append(f"note = {_toml_str(cal.note)}")
            if cal.interval:
                out += ["", "[calibration.interval]  # [low, high], log10 units"]
                out += [f"{_toml_key(k)} = {_toml_value(list(v))}" for k, v in cal.interval.items()]
        u = self.uncertainty
        out += [
            "",
            "[uncertainty]  # Monte Carlo over the published ± of the constants; samples = 0: no band",
        ]
        out += [
            f"samples = {_toml_value(u.samples)}",
            f"seed = {_toml_value(u.seed)}",
            f"default_uncertainty = {_toml_value(u.default_uncertainty)}",
        ]
        return "\n".join(out) + "\n"


_BARE_KEY = re.compile(r"^[A-Za-z0-9_-]+$")


def _toml_str(text: str) -> str:
    """A TOML basic string: quote, backslash and control characters escaped."""
    parts = []
    for ch in text:
        if ch == '"':
            parts.append('\\"')
        elif ch == "\\":
            parts.append("\\\\")
        elif ch in "\b\t\n\f\r":
            parts.append({"\b": "\\b", "\t": "\\t", "\n": "\\n", "\f": "\\f", "\r": "\\r"}[ch])
        elif ord(ch) < 0x20 or ord(ch) == 0x7F:
            parts.append(f"\\u{ord(ch):04X}")
        else:
            parts.append(ch)
    return '"' + "".join(parts) + '"'


def _toml_key(key: str) -> str:
    return key if _BARE_KEY.match(key) else _toml_str(key)


def _toml_value(value) -> str:
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, numbers.Integral):
        return str(int(value))
    if isinstance(value, numbers.Real):
        v = float(value)
        if not math.isfinite(v):
            raise InputError("value", value, "finite numbers only")
        text = repr(v)  # shortest text that reads back as the same float
        return text if any(c in text for c in ".en") else text + ".0"
    if isinstance(value, str):
        return _toml_str(value)
    if isinstance(value, list | tuple):
        return "[" + ", ".join(_toml_value(v) for v in value) + "]"
    raise InputError("value", value, "numbers, text or lists of them")


# ---------------------------------------------------------------------------------------------------- reading
def design_scenario(
    scenario: Scenario,
    *,
    samples: int | None = None,
    step: float | None = None,
    progress: Callable[[int, int], None] | None = None,
) -> SetpointDesign:
    """The setpoint design of a scenario: its influent against its limit table with its design options and its
    Monte Carlo settings (:func:`workbench.design_setpoint`). The figure pack, the setpoint panel and the command
    line all make their design here.

    Parameters
    ----------
    scenario : Scenario
        It needs a ``[limits]`` table.
    samples : int, optional
        Monte Carlo samples instead of the scenario's ``[uncertainty] samples`` (0: no band).
    step : float, optional
        pH grid step of the design instead of design_setpoint's default. [pH units]
    progress : callable(done, total), optional
        Called as Monte Carlo samples complete.

    Raises
    ------
    InputError
        When the scenario is not a Scenario or has no limits, or an option is refused by the design.
    """
    if not isinstance(scenario, Scenario):
        raise InputError(
            "scenario", type(scenario).__name__, "a workbench Scenario (read_scenario) is required"
        )
    kwargs = scenario.design_kwargs()
    if samples is not None:
        kwargs["samples"] = samples
    if step is not None:
        kwargs["step"] = step
    return design_setpoint(scenario.water, scenario.limits_table(), progress=progress, **kwargs)


def demo_scenario_path() -> Path:
    """Path of the bundled demo scenario (an invented plant)."""
    return data_dir() / "demo" / "demo_scenario.toml"


def read_scenario(path: str | Path) -> Scenario:
    """Read and validate a scenario file; the file is only read (opened read-only, never written).

    Raises
    ------
    InputError
        Missing file, file larger than :data:`MAX_FILE_BYTES`, not UTF-8, not TOML, or any invalid value
        (the message names the dotted key, the value and what is allowed).
    """
    path = Path(path)
    if not path.is_file():
        raise InputError("scenario file", str(path), "an existing .toml file is required")
    size = path.stat().st_size
    too_big = f"files up to {MAX_FILE_BYTES} bytes are accepted"
    if size > MAX_FILE_BYTES:
        raise InputError("scenario file", str(path), f"{too_big} ({size} bytes given)")
    with open(path, "rb") as fh:
        raw = fh.read(MAX_FILE_BYTES + 1)
    if len(raw) > MAX_FILE_BYTES:  # the file grew after the size check
        raise InputError("scenario file", str(path), f"{too_big} (more given)")
    try:
        text = raw.decode("utf-8")
    except UnicodeDecodeError as exc:
        raise InputError(
            "scenario file", str(path), f"UTF-8 text is required (undecodable byte at offset {exc.start})"
        ) from None
    try:
        doc = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise InputError("scenario file", str(path), f"valid TOML is required ({exc})") from None
    except RecursionError:  # arrays or tables nested thousands deep: the parser recurses once per level
        raise InputError(
            "scenario file", str(path), "valid TOML nested a few levels deep is required (this nests too deep)"
        ) from None
    return parse_scenario(doc)


_TOP_KEYS = ("version", "name", "influent", "limits", "design", "reagent", "calibration", "uncertainty")


def parse_scenario(doc: Mapping) -> Scenario:
    """Validate a scenario document (already parsed TOML) and build a :class:`Scenario`."""
    _table("scenario", doc)
    version = doc.get("version")
    if isinstance(version, bool) or version != SCHEMA_VERSION:
        raise InputError("version", version, f"this workbench reads scenario version {SCHEMA_VERSION}")
    _refuse_unknown("", doc, _TOP_KEYS)
    name = _text("name", doc.get("name", ""), empty=True)
    return Scenario(
        name=name,
        water=_influent(doc.get("influent")),
        limits=_section(doc, "limits", LimitsChoice, ("set", "basis", "permit", "permit_source")),
        design=_section(doc, "design", DesignOptions, tuple(f.name for f in fields(DesignOptions))),
        reagent=_section(
            doc, "reagent", ReagentChoice, ("name", "purity", "flow_m3_d", "reactor"), optional=True
        ),
        calibration=_calibration(doc.get("calibration")),
        uncertainty=_section(
            doc, "uncertainty", UncertaintySettings, ("samples", "seed", "default_uncertainty")
        ),
    )


def _influent(influent) -> Water:
    if influent is None:
        raise InputError("influent", None, "an [influent] table is required")
    _table("influent", influent)
    _refuse_unknown("influent", influent, _INFLUENT_KEYS)
    metals = influent.get("metals_mg_l", {})
    _table("influent.metals_mg_l", metals)
    for key in metals:
        _metal_key(f"influent.metals_mg_l.{key}", key)
    try:
        return Water(**influent)
    except InputError as exc:
        raise InputError(f"influent.{exc.field}", exc.value, exc.allowed) from None


def _section(doc: Mapping, name: str, kind, keys: tuple[str, ...], *, optional: bool = False):
    table = doc.get(name)
    if table is None:
        return None if optional else kind()
    _table(name, table)
    _refuse_unknown(name, table, keys)
    if name == "limits" and "permit" in table:
        _table("limits.permit", table["permit"])
    return kind(**table)


def _calibration(table) -> Calibration | None:
    if table is None:
        return None
    _table("calibration", table)
    shift, interval, note = {}, table.get("interval", {}), table.get("note")
    for key, value in table.items():
        if key in ("interval", "note"):
            continue
        if key not in METALS and key not in REFUSED_METALS:
            raise InputError(
                f"calibration.{key}",
                value,
                f"unknown key; known keys are interval, note and the metals {', '.join(METALS)}",
            )
        shift[key] = value
    _table("calibration.interval", interval)
    return Calibration(shift=shift, interval=interval, note=note)


def demo_water() -> Water:
    """The demo plant's influent (invented)."""
    return read_scenario(demo_scenario_path()).water


# ---------------------------------------------------------------------------------------------------- saving
def save_scenario(scenario: Scenario, path: str | Path) -> Path:
    """Write a scenario file atomically: a temporary file in the same folder, flushed to disk, then renamed
    over ``path``. On any error the previous file (if any) is left as it was and no temporary file remains.

    The text is read back and compared with ``scenario`` before anything is replaced, so a file that would
    not reproduce every entered value is never written. The name must end in ``.toml``: a mistyped target (a
    notebook, a jar-test sheet) is refused, never replaced.

    Returns
    -------
    pathlib.Path
        The path written.
    """
    if not isinstance(scenario, Scenario):
        raise InputError("scenario", type(scenario).__name__, "a workbench Scenario is required")
    if not isinstance(path, str | os.PathLike) or not str(path).strip():
        raise InputError("scenario file", path, "a file path ending in .toml is required")
    path = Path(path)
    if path.suffix.lower() != ".toml":
        raise InputError(
            "scenario file", str(path), "a file name ending in .toml (a scenario is never saved over another file)"
        )
    if path.is_dir():
        raise InputError("scenario file", str(path), "a file name is required (this is a folder)")
    folder = path.parent
    if not folder.is_dir():
        raise InputError("scenario file", str(path), f"the folder {folder} must exist")
    text = scenario.to_toml()
    data = text.encode("utf-8")
    if len(data) > MAX_FILE_BYTES:
        raise InputError(
            "scenario", f"{len(data)} bytes", f"files up to {MAX_FILE_BYTES} bytes can be read back"
        )
    if parse_scenario(tomllib.loads(text)) != scenario:
        raise InputError(
            "scenario", scenario.name, "a scenario whose file reads back identically (please report)"
        )
    write_atomic(path, data)
    return path


def write_atomic(path: Path, data: bytes) -> None:
    """Write ``data`` to ``path`` through a temporary file in the same folder (fsync, then os.replace).

    The new file keeps the permissions of the file it replaces (or gets the usual ones for a new file); on any
    error the temporary file is removed and ``path`` is left as it was.
    """
    path = Path(path)
    try:
        mode = path.stat().st_mode & 0o7777
    except FileNotFoundError:
        mode = 0o666 & ~_umask()
    fd, tmp = tempfile.mkstemp(dir=path.parent, prefix=f".{path.name}.", suffix=".tmp")
    try:
        with os.fdopen(fd, "wb") as fh:
            os.fchmod(fh.fileno(), mode)
            fh.write(data)
            fh.flush()
            os.fsync(fh.fileno())
        os.replace(tmp, path)
    except BaseException:
        try:
            os.unlink(tmp)
        except FileNotFoundError:
            pass
        raise


def _umask() -> int:
    current = os.umask(0o022)
    os.umask(current)
    return current
