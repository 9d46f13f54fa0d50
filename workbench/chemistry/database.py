"""Thermodynamic data: loading the tables in data/thermo/ and turning them into formation constants.

Values are stored in data/ as published: each row is a reaction with its log10 K at the stated temperature and
ionic strength. This module is the one place where they are transformed:

1. Ionic strength: a row measured at I > 0 is corrected to I = 0 with the Davies equation,
   ``log K0 = log Kc + sum(nu_i * log10 gamma_i(I))`` (products positive), at the row's temperature.
2. Temperature: a row measured away from 25 C is brought to 25 C with the van 't Hoff equation when its reaction
   enthalpy is published; otherwise it is kept as published and listed by :meth:`ThermoData.unadjusted_rows`.
   At the water's temperature, a row uses its published temperature function, else the van 't Hoff equation with
   its published enthalpy, else, for a hydrolysis reaction or the dissolution of a hydroxide or oxide, the
   estimate of :meth:`ThermoData.row_log_k` (the constant of the reaction written with OH- held), else its 25 C
   value (listed by :meth:`ThermoData.rows_without_enthalpy`).
3. Direction: each row defines one new species (or solid) from components, H2O and species defined in earlier
   rows. Because that is linear, the formation constant of every species from components is a fixed linear
   combination of row constants, ``log beta = L @ log K_rows``; the matrix L is built once, so the constants at
   any temperature, or under Monte Carlo perturbation of the row constants, cost one matrix product.

Conventions: log10 K; 25 C and I = 0 after step 1-2; a solid's unit is the formula as written in its reaction
(``1/2 Ag2O(s)`` is one Ag); formation constants are for ``sum(a_j * component_j) = species`` with H2O at unit
activity.
"""

from __future__ import annotations

import csv
import functools
import math
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from workbench._paths import data_dir
from workbench.chemistry import water_properties as wp
from workbench.chemistry.formula import molar_mass
from workbench.chemistry.reactions import parse_reaction
from workbench.errors import DataError

QUALITY_TAGS = ("critically evaluated", "compilation", "memory", "common practice")
SOLID_FORMS = ("fresh", "aged", "both")


@dataclass(frozen=True)
class Row:
    """One published reaction: the table it came from and its provenance."""

    table: str
    name: str
    reaction: str
    log_k: float  # as published
    uncertainty: float  # as published (nan when none)
    delta_h_kj_mol: float  # nan when none
    temperature_c: float
    ionic_strength_m: float
    source: str
    read_via: str
    quality: str
    note: str
    formula: str = ""
    form: str = ""


@dataclass
class ThermoData:
    """All thermodynamic data, resolved to formation constants from components.

    Attributes
    ----------
    components : tuple of str
        Component names, ``"H+"`` first.
    charges : ndarray
        Charge of each component.
    component_molar_mass : ndarray
        Molar mass of each component as a species. [g/mol]
    input_molar_mass : dict
        Molar mass of the basis in which each component is entered in a Water. [g/mol]
    water_field : dict
        Component -> the Water field (or metal key) that sets its total.
    rows : list of Row
        Every reaction row: aqueous species, then gases, then solids.
    names, is_solid, composition, water_count, row_map, charge, molar_mass_g_mol
        Per defined species or solid: name, whether it is a solid, stoichiometry over components, H2O count,
        the linear map onto row constants, charge and molar mass.
    """

    components: tuple[str, ...]
    charges: np.ndarray
    component_molar_mass: np.ndarray
    input_molar_mass: dict[str, float]
    water_field: dict[str, str]
    rows: list[Row]
    names: list[str] = field(default_factory=list)
    is_solid: np.ndarray = None
    is_gas: np.ndarray = None
    composition: np.ndarray = None
    water_count: np.ndarray = None
    row_map: np.ndarray = None
    charge: np.ndarray = None
    molar_mass_g_mol: np.ndarray = None
    t_functions: dict[int, tuple[float, ...]] = field(default_factory=dict)
    forms: list[str] = field(default_factory=list)
    hydrolysis_release: np.ndarray = None  # per row: H+ released by a hydrolysis/hydroxide row (w), else 0
    estimated_water: np.ndarray = (
        None  # the same where the estimate of row_log_k is used (no enthalpy), else 0
    )

    def index(self, name: str) -> int:
        """Position of a species, solid or component name in :attr:`names`."""
        try:
            return self._index[name]
        except KeyError:
            raise KeyError(f"no species, solid or component named {name!r} in data/thermo") from None

    def row_log_k(self, temperature_c: float) -> np.ndarray:
        """log10 K of every row (as written) at a temperature, I = 0. [-]

        Rows without a published enthalpy or temperature function that are hydrolysis reactions of one cation, or
        dissolutions of its hydroxide or oxide (only that cation, H+, OH- and H2O take part), are estimated by
        holding the constant of the reaction written with OH- instead of H+ (its enthalpy and heat capacity taken
        as zero):

        .. math:: \\log K(T) = \\log K(25) + w\\,[\\log K_w(T) - \\log K_w(25)]

        with w the H+ the reaction releases as written (negative when it takes H+ up) and Kw from IAPWS R11-07.
        Baes & Mesmer (1981, Am. J. Sci. 281, 935) found the enthalpy of the first hydrolysis step "always positive
        and usually near the enthalpy of dissociation of water" and the solid <=> M(OH)z(aq) equilibrium, which
        sets the minimum solubility, to depend little on temperature; this estimate is exact for both in that
        limit. Its error against every row with a published enthalpy is tested
        (tests/test_temperature.py): at 5 and 50 C within 0.45 log units for first hydrolysis steps and within
        0.5 log units per H+ released for every other reaction (data/thermo/README.md, section 9).
        """
        t = float(temperature_c)
        out = self._row_log_k25.copy()
        if abs(t - 25.0) < 1e-12:
            return out
        out = wp.van_t_hoff(out, np.nan_to_num(self._row_dh), t)
        out += self.estimated_water * (float(wp.pkw(25.0)) - float(wp.pkw(t)))
        for i, coef in self.t_functions.items():
            out[i] = _t_function(coef, t)
        for i in self._kw_rows:
            out[i] = -float(wp.pkw(t))
        return out

    def log_beta(self, temperature_c: float, row_shift: np.ndarray | None = None) -> np.ndarray:
        """Formation constants of every species and solid from components at a temperature.

        Parameters
        ----------
        temperature_c : float
            Temperature. [°C]
        row_shift : ndarray, optional
            Added to the row constants before resolving, shape (n_rows,) or (n_samples, n_rows). [log10 units]
        """
        k = self.row_log_k(temperature_c)
        if row_shift is not None:
            k = k + row_shift
        return k @ self.row_map.T

    def unadjusted_rows(self) -> list[Row]:
        """Rows published away from 25 C without a reaction enthalpy (kept at the published temperature)."""
        return [
            r for r in self.rows if abs(r.temperature_c - 25.0) > 0.5 and not math.isfinite(r.delta_h_kj_mol)
        ]

    def rows_without_enthalpy(self) -> list[Row]:
        """Rows without a published reaction enthalpy, temperature function or estimate (held at 25 C)."""
        tf = {self.rows[i].name for i in self.t_functions} | {self.rows[i].name for i in self._kw_rows}
        return [
            r
            for i, r in enumerate(self.rows)
            if not math.isfinite(r.delta_h_kj_mol) and r.name not in tf and self.estimated_water[i] == 0
        ]

    def estimated_rows(self) -> list[Row]:
        """Rows whose temperature dependence is estimated (hydrolysis, hydroxides, oxides; see row_log_k)."""
        return [r for i, r in enumerate(self.rows) if self.estimated_water[i] != 0]


def _t_function(coef: tuple[float, ...], temperature_c: float) -> float:
    """log10 K = a + b T + c/T + d log10 T + e/T^2 (Plummer & Busenberg 1982 form), T in K."""
    a, b, c, d, e = coef
    tk = temperature_c + 273.15
    return a + b * tk + c / tk + d * math.log10(tk) + e / tk**2


def _read_csv(path: Path) -> list[dict[str, str]]:
    with open(path, encoding="utf-8", newline="") as fh:
        lines = [ln for ln in fh if not ln.startswith("#")]
    return list(csv.DictReader(lines))


def _num(value: str, path: Path, line: int, column: str, required: bool = False) -> float:
    text = (value or "").strip()
    if not text:
        if required:
            raise DataError(f"{path.name} row {line}, column {column}: a number is required")
        return math.nan
    try:
        return float(text)
    except ValueError:
        raise DataError(f"{path.name} row {line}, column {column}: {text!r} is not a number") from None


def _rows(path: Path, table: str) -> list[Row]:
    out = []
    for line, r in enumerate(_read_csv(path), start=2):
        quality = r["quality"].strip()
        if quality not in QUALITY_TAGS:
            raise DataError(f"{path.name} row {line}, column quality: {quality!r}; allowed {QUALITY_TAGS}")
        if not r["source"].strip():
            raise DataError(f"{path.name} row {line}, column source: empty")
        form = r.get("form", "").strip()
        if table == "solids" and form not in SOLID_FORMS:
            raise DataError(f"{path.name} row {line}, column form: {form!r}; allowed {SOLID_FORMS}")
        out.append(
            Row(
                table=table,
                name=r["name"].strip(),
                reaction=r["reaction"].strip(),
                log_k=_num(r["log_k"], path, line, "log_k", required=True),
                uncertainty=_num(r["uncertainty"], path, line, "uncertainty"),
                delta_h_kj_mol=_num(r["delta_h_kj_mol"], path, line, "delta_h_kj_mol"),
                temperature_c=_num(r["temperature_c"], path, line, "temperature_c", required=True),
                ionic_strength_m=_num(r["ionic_strength_m"], path, line, "ionic_strength_m", required=True),
                source=r["source"].strip(),
                read_via=r["read_via"].strip(),
                quality=quality,
                note=r["note"].strip(),
                formula=r.get("formula", "").strip(),
                form=form,
            )
        )
    return out


@functools.cache
def load(folder: str | None = None) -> ThermoData:
    """Load and resolve data/thermo (cached). ``folder`` overrides the data folder (tests)."""
    base = Path(folder) if folder else data_dir()
    thermo = base / "thermo"
    weights = {r["element"]: float(r["atomic_weight"]) for r in _read_csv(base / "atomic_weights.csv")}
    comp_rows = _read_csv(thermo / "components.csv")
    components = tuple(r["component"] for r in comp_rows)
    if components[0] != "H+":
        raise DataError("components.csv: the first component must be H+")
    charges = np.array([float(r["charge"]) for r in comp_rows])
    comp_mass = np.array([molar_mass(r["formula"], weights) for r in comp_rows])
    input_mass = {r["component"]: molar_mass(r["input_formula"], weights) for r in comp_rows}
    water_field = {r["component"]: r["water_field"] for r in comp_rows}
    rows = _rows(thermo / "aqueous.csv", "aqueous") + _rows(thermo / "gases.csv", "gases")
    rows += _rows(thermo / "solids.csv", "solids")
    data = ThermoData(components, charges, comp_mass, input_mass, water_field, rows)
    _resolve(data, weights, thermo)
    return data


def _resolve(data: ThermoData, weights: dict[str, float], thermo: Path) -> None:
    m, nrow = len(data.components), len(data.rows)
    h2o_mass = molar_mass("H2O", weights)
    # known[name] = (composition over components, H2O count, row map)
    known: dict[str, tuple[np.ndarray, float, np.ndarray]] = {}
    for j, c in enumerate(data.components):
        comp = np.zeros(m)
        comp[j] = 1.0
        known[c] = (comp, 0.0, np.zeros(nrow))
    known["H2O"] = (np.zeros(m), 1.0, np.zeros(nrow))
    names, solid, comps, waters, maps, forms = list(data.components), [], [], [], [], []
    solid = [False] * m
    gas = [False] * m
    comps = [known[c][0] for c in data.components]
    waters = [0.0] * m
    maps = [np.zeros(nrow) for _ in data.components]
    forms = [""] * m
    log_k25 = np.empty(nrow)
    hydrolysis_w = np.zeros(nrow)
    for i, row in enumerate(data.rows):
        where = f"data/thermo/{row.table}.csv, {row.name!r}"
        try:
            nu = parse_reaction(row.reaction)
        except ValueError as exc:
            raise DataError(f"{where}: {exc}") from None
        unknown = [s for s in nu if s not in known]
        if len(unknown) != 1:
            raise DataError(f"{where}: the reaction must define exactly one new species; new: {unknown}")
        target = unknown[0]
        if row.table in ("aqueous", "gases") and target != row.name:
            raise DataError(f"{where}: the reaction defines {target!r}, not the row's name")
        if row.table == "solids" and "(s)" not in target:
            raise DataError(f"{where}: the solid in the reaction must carry '(s)'")
        sign = 1.0 if nu[target] > 0 else -1.0  # the unit is the species as written
        comp = np.zeros(m)
        water = 0.0
        rmap = np.zeros(nrow)
        rmap[i] = sign
        for s, v in nu.items():
            if s == target:
                continue
            c_s, w_s, r_s = known[s]
            comp -= sign * v * c_s
            water -= sign * v * w_s
            rmap -= sign * v * r_s
        z = float(comp @ data.charges)
        log_k25[i] = _to_standard(row, nu, known, data.charges, target, z)
        hydrolysis_w[i] = _hydrolysis_water(nu, known, comp, target, data.charges)
        name = row.name
        if row.table in ("aqueous", "gases"):
            known[target] = (comp, water, rmap)
        names.append(name)
        solid.append(row.table == "solids")
        gas.append(row.table == "gases")
        comps.append(comp)
        waters.append(water)
        maps.append(rmap)
        forms.append(row.form)
    data.names = names
    data._index = {n: k for k, n in enumerate(names)}
    if len(data._index) != len(names):
        dup = sorted({n for n in names if names.count(n) > 1})
        raise DataError(f"data/thermo: duplicate species or solid names {dup}")
    data.is_solid = np.array(solid)
    data.is_gas = np.array(gas)
    data.composition = np.array(comps)
    data.water_count = np.array(waters)
    data.row_map = np.array(maps)
    data.charge = data.composition @ data.charges
    data.molar_mass_g_mol = data.composition @ data.component_molar_mass + data.water_count * h2o_mass
    data.forms = forms
    data._row_log_k25 = log_k25
    data._row_dh = np.array([r.delta_h_kj_mol for r in data.rows])
    data._kw_rows = [i for i, r in enumerate(data.rows) if r.name == "OH-" and r.source == "iapws_r11_07"]
    for r in _read_csv(thermo / "temperature_functions.csv"):
        idx = next(
            (i for i, row in enumerate(data.rows) if row.name == r["name"] and row.table == r["table"]), None
        )
        if idx is None:
            raise DataError(f"temperature_functions.csv: no {r['table']} row named {r['name']!r}")
        data.t_functions[idx] = tuple(float(r[c]) for c in "abcde")
    published = np.array([math.isfinite(r.delta_h_kj_mol) for r in data.rows])
    held = np.zeros(nrow, bool)
    held[list(data.t_functions)] = True
    held[data._kw_rows] = True
    data.hydrolysis_release = hydrolysis_w
    data.estimated_water = np.where(published | held, 0.0, hydrolysis_w)


def _hydrolysis_water(
    nu: dict, known: dict, comp_target: np.ndarray, target: str, charges: np.ndarray
) -> float:
    """H+ released by a row that is a hydrolysis reaction of one cation or the dissolution of its hydroxide or oxide
    (only that cation, H+, OH- and H2O take part); 0 for any other row. Polynuclear species are estimated too: held
    in their H+ form while the mononuclear species and the solids move, they would swamp the cation at low
    temperature (13 Al^3+ of Al13O4(OH)24^7+ at 5 C), whereas the estimate keeps the pattern of species along pOH."""
    cation = None
    for s in nu:
        if s in ("H2O", "H+", "OH-"):
            continue
        comp = comp_target if s == target else known[s][0]
        others = np.flatnonzero(comp[1:]) + 1  # components other than H+
        if others.size != 1 or charges[others[0]] <= 0 or (cation is not None and others[0] != cation):
            return 0.0
        cation = others[0]
    return float(nu.get("H+", 0.0)) if cation is not None else 0.0


def _to_standard(row: Row, nu: dict, known: dict, charges: np.ndarray, target: str, z_target: float) -> float:
    """The row's log K at 25 C and I = 0 (steps 1 and 2 of the module docstring), reaction as written."""
    log_k = row.log_k
    if row.ionic_strength_m > 0:
        a = float(wp.davies_a(row.temperature_c))
        for s, v in nu.items():
            z = z_target if s == target else (0.0 if s == "H2O" else float(known[s][0] @ charges))
            if "(s)" in s:
                z = 0.0
            log_k += v * float(wp.davies_log_gamma(z, row.ionic_strength_m, a))
    if abs(row.temperature_c - 25.0) > 1e-9 and math.isfinite(row.delta_h_kj_mol):
        # van 't Hoff from the published temperature to 25 C
        log_k = float(wp.van_t_hoff(log_k, row.delta_h_kj_mol, 25.0)) - float(
            wp.van_t_hoff(0.0, row.delta_h_kj_mol, row.temperature_c)
        )
    return log_k
