"""Speciation, residual-vs-pH curves and minimum-solubility pH of a water (the public core API).

Each function takes a :class:`~workbench.treatment.water.Water` and returns pandas objects with units in the
column names. The pH is held by a strong acid or base (fixed-pH mode); "residual" means dissolved metal
(0.45 µm filtered) at equilibrium with whatever solids form.
"""

from __future__ import annotations

import numbers
from collections.abc import Mapping
from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from workbench.chemistry import database, solver, tableau
from workbench.errors import InputError, ModelRangeError
from workbench.treatment.water import METALS, Water, as_array

SOLID_CHOICES = tableau.SOLID_CHOICES
DAVIES_LIMIT_MOL_L = 0.5  # upper ionic strength of the Davies equation's usual range (Davies 1962)
# pH range searched for minima by default: 4 to 12.5. Plants hold their precipitation pH below 12.5 (lime cannot
# pass its ceiling of about 12.45 at 25 C, and at pH 12.5 or above a waste is corrosive under 40 CFR 261.22(a)(1));
# every metal's minimum in the tables lies below it.
DEFAULT_PH_RANGE = (4.0, 12.5)


@dataclass
class SpeciationResult:
    """One equilibrium of a water at one pH.

    Attributes
    ----------
    ph, temperature_c, ionic_strength_mol_l : float
    strong_base_eq_l : float
        Strong base (positive) or acid (negative) that holds the pH: the charge-balance residual of the
        analysis at this pH. [eq/L]
    dissolved_mg_l : pandas.Series
        Dissolved metal by metal key. [mg/L]
    species : pandas.DataFrame
        Index species; columns ``mol_l``, ``mg_l``, ``activity``, ``log_activity``, ``charge``.
    solids : pandas.DataFrame
        Solids formed; index solid; columns ``formula``, ``mol_l``, ``mg_l`` (dry mass).
    saturation : pandas.DataFrame
        Every candidate solid: ``saturation_index``, ``present``.
    warnings : list of str
        Where the model is stretched for this water.
    """

    ph: float
    temperature_c: float
    ionic_strength_mol_l: float
    strong_base_eq_l: float
    dissolved_mg_l: pd.Series
    species: pd.DataFrame
    solids: pd.DataFrame
    saturation: pd.DataFrame
    warnings: list[str] = field(default_factory=list)


def equilibrium(water: Water, ph, *, solids: str = "fresh", activity: str = "davies", solubility_shift=None):
    """Solve the water at the given pH values; returns (tableau, Equilibrium). Internal building block."""
    _check_inputs(water, solids, activity)
    ph = as_array(ph)
    tab, t = _system(water, solids, solubility_shift)
    return tab, solver.solve(tab, t, ph, activity=activity)


def _check_inputs(water, solids, activity) -> None:
    if not isinstance(water, Water):
        raise InputError("water", type(water).__name__, "a workbench Water is required")
    if solids not in SOLID_CHOICES:
        raise InputError("solids", solids, f"allowed {', '.join(SOLID_CHOICES)}")
    if activity not in solver.ACTIVITY_MODELS:
        raise InputError("activity", activity, f"allowed {', '.join(solver.ACTIVITY_MODELS)}")


def _system(water: Water, solids: str, solubility_shift) -> tuple[tableau.Tableau, np.ndarray]:
    """The water's tableau (with any solubility shift) and its component totals."""
    totals = water.totals()
    tab = tableau.build(tuple(totals), water.temperature_c, solids)
    for key, delta in check_shift(water, solubility_shift).items():
        tab = tab.with_solubility_shift(METALS[key], delta)
    t = np.zeros(len(tab.components))
    for comp, v in totals.items():
        t[tab.component(comp)] = v
    return tab, t


@dataclass(frozen=True)
class ModelReach:
    """Which points of a pH curve lie within the range where the model holds.

    Attributes
    ----------
    held : ndarray of bool
        Per pH asked for (in the order given): True where the point was solved.
    reason : str
        Why the other points were left out ("" when every point holds).
    """

    held: np.ndarray
    reason: str = ""

    @property
    def complete(self) -> bool:
        return bool(self.held.all())

    def note(self, ph: np.ndarray) -> str:
        """One sentence for a result's warnings: from which pH the curve stops, and why ("" when complete)."""
        if self.complete:
            return ""
        ph = np.asarray(ph, float)
        kept = ph[self.held]
        out = []
        if (ph > kept.max()).any():
            out.append(f"above pH {kept.max():g}")
        if (ph < kept.min()).any():
            out.append(f"below pH {kept.min():g}")
        return (
            f"The curve stops {' and '.join(out)}: {self.reason} Those points are left empty (NaN) and take no "
            "part in minima, windows or setpoints."
        )


MAX_RANGE_CUTS = 8  # re-solves while trimming points beyond the model's range from the ends of a curve
RANGE_PIVOT_PH = 7.0  # points beyond the range above this pH cut the curve's high end, below it the low end


def equilibrium_within_model(
    water: Water, ph, *, solids: str = "fresh", activity: str = "davies", solubility_shift=None
):
    """Like :func:`equilibrium`, but a curve stops where the model stops instead of being refused whole.

    Points whose ionic strength lies beyond the activity model's range sit at the ends of a pH curve (it takes
    more strong base, or acid, to hold a more extreme pH). They are trimmed from the end they lie on and the rest
    is solved again. A water beyond the range at every pH is still refused (:class:`ModelRangeError`).

    Returns
    -------
    (Tableau, Equilibrium, ModelReach)
        The equilibrium holds the points ``ph[reach.held]``, in the order given.
    """
    _check_inputs(water, solids, activity)
    ph = as_array(ph)
    tab, t = _system(water, solids, solubility_shift)
    held = np.ones(ph.size, bool)
    reason = ""
    for _ in range(MAX_RANGE_CUTS):
        try:
            return tab, solver.solve(tab, t, ph[held], activity=activity), ModelReach(held, reason)
        except ModelRangeError as exc:
            if not exc.ph:
                raise
            bad = np.asarray(exc.ph)
            high, low = bad[bad >= RANGE_PIVOT_PH], bad[bad < RANGE_PIVOT_PH]
            trimmed = held.copy()
            if high.size:
                trimmed &= ph < high.min()
            if low.size:
                trimmed &= ph > low.max()
            if not trimmed.any() or (trimmed == held).all():
                raise
            held = trimmed
            reason = (
                f"beyond it the ionic strength would exceed {solver.MAX_IONIC_STRENGTH:g} mol/L, the range of the "
                "Davies activity model (the strong base or acid that holds such a pH is itself too concentrated)."
            )
    raise ModelRangeError(
        "ionic strength",
        "beyond the activity model's range",
        "the curve could not be trimmed to its valid part",
    )


MAX_SHIFT_LOG = 5.0
PH_LABEL_DECIMALS = 9  # pH index labels: a value this close to a short decimal is shown as it (ph_index)
PH_LABEL_SNAP = 1e-12  # [pH units]


def check_shift(water: Water, solubility_shift) -> dict[str, float]:
    """Validate an apparent solubility shift: {metal key of the water: delta log10 Ksp}, |delta| <= 5."""
    if solubility_shift is None:
        return {}
    if not isinstance(solubility_shift, Mapping):
        raise InputError(
            "solubility_shift", solubility_shift, "a mapping of metal key to log10 units is required"
        )
    out = {}
    for key, value in solubility_shift.items():
        if key not in water.metals_mg_l:
            raise InputError(
                "solubility_shift", key, f"metals in this water are {', '.join(water.metals_mg_l)}"
            )
        if isinstance(value, bool) or not isinstance(value, numbers.Real) or not np.isfinite(value):
            raise InputError(
                f"solubility_shift[{key!r}]", value, "a finite number of log10 units is required"
            )
        if abs(value) > MAX_SHIFT_LOG:
            raise InputError(
                f"solubility_shift[{key!r}]", value, f"allowed -{MAX_SHIFT_LOG:g} to {MAX_SHIFT_LOG:g}"
            )
        out[key] = float(value)
    return out


def metal_mg_l(water: Water, tab, eq) -> dict[str, np.ndarray]:
    """Dissolved metal per metal key over the points of ``eq``. [mg/L]"""
    data = database.load()
    diss = eq.dissolved()
    return {
        key: diss[:, tab.component(METALS[key])] * data.input_molar_mass[METALS[key]] * 1000.0
        for key in water.metals_mg_l
    }


def ph_index(ph: np.ndarray) -> pd.Index:
    """The ``pH`` index of a curve computed at the pH values ``ph``.

    A value within PH_LABEL_SNAP (1e-12) of a number with at most PH_LABEL_DECIMALS (9) decimals is labelled with
    that number: the float noise of a grid such as ``np.arange(6, 12.01, 0.1)`` (9.500000000000007) is dropped,
    so ``curve.loc[9.5]`` finds its row. Every other value is its own label. Only the label changes: each row is
    computed at the pH given, which differs from its label by at most 1e-12 pH units.
    """
    ph = np.asarray(ph, dtype=float)
    short = np.round(ph, PH_LABEL_DECIMALS)
    return pd.Index(np.where(np.abs(short - ph) <= PH_LABEL_SNAP, short, ph), name="pH")


def residual_curve(
    water: Water, ph, *, solids: str = "fresh", activity: str = "davies", solubility_shift=None
) -> pd.DataFrame:
    """Dissolved metal against pH.

    Parameters
    ----------
    water : Water
    ph : float or sequence of float
        pH values, 0-14. [-]
    solids : {"fresh", "aged", "none"}
        Which solids may form (fresh precipitates by default; "aged" is a thermodynamic lower bound).
    activity : {"davies", "ideal"}
    solubility_shift : mapping, optional
        Apparent solubility shift per metal key: every solid of that metal is made 10**delta more soluble
        (e.g. from a jar-test calibration). [log10 units]

    Returns
    -------
    pandas.DataFrame
        Index ``pH`` (the values asked for, float noise such as 9.500000000000007 shown as 9.5: :func:`ph_index`);
        one column per metal key: dissolved metal. [mg/L]
        ``attrs["warnings"]`` lists where the model is stretched.
    """
    phs = as_array(ph)
    tab, eq, reach = equilibrium_within_model(
        water, phs, solids=solids, activity=activity, solubility_shift=solubility_shift
    )
    values = {}
    for key, held_values in metal_mg_l(water, tab, eq).items():
        values[key] = np.full(phs.size, np.nan)
        values[key][reach.held] = held_values
    labels = ph_index(phs)
    df = pd.DataFrame(values, index=labels)
    df.attrs["units"] = "mg/L dissolved"
    df.attrs["warnings"] = model_warnings(water, tab, eq) + ([reach.note(phs)] if not reach.complete else [])
    df.attrs["beyond_model_ph"] = labels[~reach.held].tolist()  # as labelled in the index
    return df


def speciate(
    water: Water,
    ph: float | None = None,
    *,
    solids: str = "fresh",
    activity: str = "davies",
    solubility_shift=None,
) -> SpeciationResult:
    """One equilibrium: species, solids formed, saturation indices, ionic strength.

    Parameters
    ----------
    water : Water
    ph : float, optional
        pH to hold; defaults to the water's measured pH. [-]
    solids, activity : str
        As for :func:`residual_curve`.
    """
    if ph is None:
        if water.ph is None:
            raise InputError("ph", None, "give a pH, or a Water with a measured pH")
        ph = water.ph
    phs = as_array(ph)
    if phs.size != 1:
        raise InputError("ph", ph, "speciate takes one pH; use residual_curve for many")
    tab, eq = equilibrium(water, phs, solids=solids, activity=activity, solubility_shift=solubility_shift)
    data = database.load()
    sp_idx = tab.species_index
    conc = eq.conc[0]
    act = conc * 10.0 ** eq.log_gamma[0]
    species = pd.DataFrame(
        {
            "mol_l": conc,
            "mg_l": conc * data.molar_mass_g_mol[sp_idx] * 1000.0,
            "activity": act,
            "log_activity": np.log10(np.maximum(act, 1e-300)),
            "charge": tab.z,
        },
        index=pd.Index(tab.species, name="species"),
    )
    present = eq.solid_amount[0] > 0
    so_idx = tab.solid_index
    solids_df = pd.DataFrame(
        {
            "formula": [data.rows[i - len(data.components)].formula for i in so_idx[present]],
            "mol_l": eq.solid_amount[0][present],
            "mg_l": eq.solid_amount[0][present] * data.molar_mass_g_mol[so_idx[present]] * 1000.0,
        },
        index=pd.Index([tab.solids[k] for k in np.flatnonzero(present)], name="solid"),
    )
    saturation = pd.DataFrame(
        {"saturation_index": eq.saturation_index[0], "present": present},
        index=pd.Index(tab.solids, name="solid"),
    )
    return SpeciationResult(
        ph=float(phs[0]),
        temperature_c=water.temperature_c,
        ionic_strength_mol_l=float(eq.ionic_strength[0]),
        strong_base_eq_l=float(eq.strong_base[0]),
        dissolved_mg_l=pd.Series(
            {k: float(v[0]) for k, v in metal_mg_l(water, tab, eq).items()}, dtype=float, name="mg_l"
        ),
        species=species,
        solids=solids_df,
        saturation=saturation,
        warnings=model_warnings(water, tab, eq),
    )


def minimum_solubility(
    water: Water,
    *,
    ph_range: tuple[float, float] = DEFAULT_PH_RANGE,
    solids: str = "fresh",
    activity: str = "davies",
    solubility_shift=None,
) -> pd.DataFrame:
    """Each metal's minimum dissolved residual over pH in this water.

    The residual curve is computed on a 0.05 pH grid over ``ph_range``, then refined to 0.005 pH around each
    metal's lowest point. The window ``ph_low_2x``-``ph_high_2x`` is the pH range around the minimum where the
    residual stays within twice the minimum: where the bottom is flat, it is more useful than the point.

    Returns
    -------
    pandas.DataFrame
        Index ``metal``; columns ``ph_min``, ``residual_mg_l``, ``solid`` (the solid that controls the metal at
        ``ph_min``), ``ph_low_2x``, ``ph_high_2x``, ``influent_mg_l``, ``note``. A metal for which no solid
        forms anywhere in the range has ``solid`` = "none", ``ph_min`` NaN and the influent as residual.
    """
    lo, hi = check_ph_range(ph_range)
    columns = ["ph_min", "residual_mg_l", "solid", "ph_low_2x", "ph_high_2x", "influent_mg_l", "note"]
    if not water.metals_mg_l:  # pure water or major ions only: nothing to report
        return pd.DataFrame(columns=columns, index=pd.Index([], name="metal"))
    full = np.round(np.arange(lo, hi + 1e-9, 0.05), 6)
    opts = dict(solids=solids, activity=activity, solubility_shift=solubility_shift)
    tab, eq, reach = equilibrium_within_model(water, full, **opts)
    grid = full[reach.held]  # the points where the model holds: a curve stops where the model stops
    lo_held, hi_held = float(grid.min()), float(grid.max())
    coarse = metal_mg_l(water, tab, eq)
    metals = list(water.metals_mg_l)
    # refine around each metal's lowest grid point, all metals in one solve
    fine_ph, owner = [], []
    for k, key in enumerate(metals):
        i = int(np.argmin(coarse[key]))
        pts = np.clip(grid[i] + np.arange(-0.05, 0.0501, 0.005), lo_held, hi_held)
        fine_ph.append(pts)
        owner.append(np.full(pts.size, k))
    fine_ph = np.concatenate(fine_ph)
    owner = np.concatenate(owner)
    tab_f, eq_f = equilibrium(water, fine_ph, **opts)
    fine = metal_mg_l(water, tab_f, eq_f)
    rows = []
    for k, key in enumerate(metals):
        influent = water.metals_mg_l[key]
        sel = np.flatnonzero(owner == k)
        best = sel[np.argmin(fine[key][sel])]
        res_min = float(min(fine[key][best], influent))
        comp = tab_f.component(METALS[key])
        has = (tab_f.b[:, comp] > 0) & (eq_f.solid_amount[best] > 0)
        held_by = _complexant_note(tab_f, eq_f.conc[best], METALS[key], key)
        if influent <= 0 or not has.any():
            note = "; ".join(n for n in (_none_note(influent, lo, hi), held_by) if n)
            rows.append((key, np.nan, influent, "none", np.nan, np.nan, influent, note))
            continue
        amounts = np.where(has, eq_f.solid_amount[best] * tab_f.b[:, comp], 0.0)
        solid = tab_f.solids[int(np.argmax(amounts))]
        ph_min = round(float(fine_ph[best]), 3)
        low, high = (round(v, 3) for v in _window(grid, coarse[key], 2.0 * res_min, ph_min))
        note = ""
        if ph_min <= lo + 1e-9 or ph_min >= hi - 1e-9:
            note = f"lowest at the edge of the pH range searched ({lo:g}-{hi:g}): no minimum inside it"
        elif ph_min <= lo_held + 1e-9 or ph_min >= hi_held - 1e-9:
            note = (
                f"lowest at the edge of the range where the model holds (pH {lo_held:g}-{hi_held:g}): "
                "no minimum inside it"
            )
        note = "; ".join(n for n in (note, held_by) if n)
        rows.append((key, ph_min, res_min, solid, low, high, influent, note))
    df = pd.DataFrame(rows, columns=["metal", *columns]).set_index("metal")
    df.attrs["warnings"] = model_warnings(water, tab, eq) + ([reach.note(full)] if not reach.complete else [])
    df.attrs["ph_range_held"] = (lo_held, hi_held)
    return df


#: Complexing components and the names results give them.
COMPLEXANTS = {"Y^4-": "EDTA", "Cit^3-": "citrate", "NH3": "ammonia"}
COMPLEXED_SHARE_NOTED = (
    0.1  # a complexant holding at least this share of a metal's dissolved residual is named
)


def complexed_share(tab, conc: np.ndarray, metal_component: str) -> dict[str, float]:
    """Share of a metal's dissolved amount held in complexes with each complexant present (one point). [-]"""
    m = tab.component(metal_component)
    carrying = tab.a[:, m] > 0
    total = float(conc[carrying] @ tab.a[carrying, m])
    out = {}
    for comp, name in COMPLEXANTS.items():
        if comp not in tab.components or total <= 0:
            continue
        with_ligand = carrying & (tab.a[:, tab.component(comp)] > 0)
        out[name] = float(conc[with_ligand] @ tab.a[with_ligand, m]) / total
    return out


def _complexant_note(tab, conc: np.ndarray, metal_component: str, key: str) -> str:
    shares = complexed_share(tab, conc, metal_component)
    named = [(n, f) for n, f in shares.items() if f >= COMPLEXED_SHARE_NOTED]
    if not named:
        return ""
    parts = " and ".join(f"{name} holds {100 * f:.0f} %" for name, f in named)
    return (
        f"{parts} of the dissolved {key} here: the complexant, not the solid, sets the residual; remove or break "
        "the complex (e.g. a low-pH split or a chelate breaker) before relying on precipitation"
    )


def _none_note(influent: float, lo: float, hi: float) -> str:
    if influent <= 0:
        return "not in the influent"
    return f"no solid forms between pH {lo:g} and {hi:g} at this concentration: the metal stays dissolved"


def _window(grid: np.ndarray, curve: np.ndarray, level: float, ph_min: float) -> tuple[float, float]:
    """pH interval around ph_min where curve <= level (edges interpolated in log residual)."""
    below = curve <= level
    i = int(np.argmin(np.abs(grid - ph_min)))
    if not below[i]:
        return ph_min, ph_min
    left = i
    while left > 0 and below[left - 1]:
        left -= 1
    right = i
    while right < grid.size - 1 and below[right + 1]:
        right += 1
    return _cross(grid, curve, level, left, left - 1), _cross(grid, curve, level, right, right + 1)


def _cross(grid, curve, level, inside, outside) -> float:
    if outside < 0 or outside >= grid.size:
        return float(grid[inside])
    y0, y1 = np.log10(curve[inside]), np.log10(curve[outside])
    frac = (np.log10(level) - y0) / (y1 - y0) if y1 != y0 else 0.0
    return float(grid[inside] + frac * (grid[outside] - grid[inside]))


def check_ph_range(ph_range) -> tuple[float, float]:
    """Validate a (low, high) pH range: 0 <= low < high <= 14, at least 0.5 apart."""
    try:
        lo, hi = (float(v) for v in ph_range)
    except (TypeError, ValueError):
        raise InputError("ph_range", ph_range, "a pair (low, high) of pH values is required") from None
    if not (0.0 <= lo < hi <= 14.0) or hi - lo < 0.5:
        raise InputError("ph_range", ph_range, "allowed 0 <= low < high <= 14, at least 0.5 apart")
    return lo, hi


def model_warnings(water: Water, tab, eq) -> list[str]:
    """Where the model is stretched for this water (shown beside every result)."""
    data = database.load()
    out = []
    imax = float(eq.ionic_strength.max())
    if imax > DAVIES_LIMIT_MOL_L:
        out.append(
            f"Ionic strength reaches {imax:.2f} mol/L, beyond the Davies equation's range (about 0.5 mol/L): "
            "activity corrections, and so the residuals, are approximate."
        )
    t = eq.totals[0]
    frac = eq.conc[:, :, None] * np.abs(tab.a)[None] / np.where(t > 0, t, np.inf)[None, None, :]
    significant = frac[:, :, 1:].max(axis=(0, 2), initial=0.0) > 0.01
    rows = data.rows
    n_comp = len(data.components)
    memory_sp = [
        tab.species[i]
        for i, gi in enumerate(tab.species_index)
        if gi >= n_comp and rows[gi - n_comp].quality == "memory" and significant[i]
    ]
    memory_so = [
        tab.solids[k]
        for k, gi in enumerate(tab.solid_index)
        if rows[gi - n_comp].quality == "memory" and (eq.solid_amount[:, k] > 0).any()
    ]
    if memory_sp or memory_so:
        out.append(
            "Constants recalled without a readable source (tagged 'memory' in data/thermo) matter here: "
            + ", ".join(memory_sp + memory_so)
            + ". Treat the affected metals' residuals as indicative."
        )
    if abs(water.temperature_c - 25.0) > 2.0:
        out += temperature_warnings(water.temperature_c, tab)
    floc = _floc_formed(tab, eq)
    others = [k for k in water.metals_mg_l if k not in ("Fe", "Al", "Fe(II)")]
    if floc and others:
        out.append(
            f"{' and '.join(floc)} precipitate here. Metals adsorb on and co-precipitate with such floc, which this "
            f"model does not include: real residuals of {', '.join(others)} are then usually lower than computed "
            "(the computed values are conservative); confirm with jar tests."
        )
    if "Fe(II)" in water.metals_mg_l:
        out.append(
            "Fe(II) is treated as staying ferrous; in an aerated tank it oxidises to Fe(III), "
            "which precipitates at far lower pH."
        )
    if "Mn" in water.metals_mg_l:
        out.append(
            "Mn(II) oxidation to Mn(III/IV) oxides (which lowers residual Mn in aerated lime treatment) "
            "is not modelled."
        )
    return out


FLOC_COMPONENTS = {"Fe^3+": "Ferric hydroxide", "Al^3+": "Aluminium hydroxide"}


def _floc_formed(tab, eq) -> list[str]:
    """Names of the hydrous iron(III) and aluminium solids formed at any point."""
    out = []
    for comp, name in FLOC_COMPONENTS.items():
        if comp not in tab.components:
            continue
        rows = tab.b[:, tab.component(comp)] > 0
        if (eq.solid_amount[:, rows] > 0).any():
            out.append(name)
    return out


def _names(names: list[str], shown: int = 6) -> str:
    more = f" and {len(names) - shown} more" if len(names) > shown else ""
    return ", ".join(names[:shown]) + more


def temperature_warnings(temperature_c: float, tab) -> list[str]:
    """Which constants of this system move with temperature by an estimate, and which are held at 25 °C."""
    data = database.load()
    used = set(tab.species_index) | set(tab.solid_index)
    estimated = [r.name for r in data.estimated_rows() if data.index(r.name) in used]
    held = [r.name for r in data.rows_without_enthalpy() if data.index(r.name) in used]
    out = []
    if estimated:
        out.append(
            f"At {temperature_c:g} °C, {len(estimated)} hydrolysis constants and hydroxide/oxide solubilities of "
            f"this system have no published enthalpy and are estimated ({_names(estimated)}): each reaction "
            "written with OH- is held at its 25 °C constant (Baes & Mesmer 1981); against the published enthalpies "
            "this is within about 0.5 log units per OH- at 5 or 50 °C (data/thermo/README.md, section 9)."
        )
    if held:
        out.append(
            f"{len(held)} other constants in this system have no published reaction enthalpy and are held at their "
            f"25 °C values at {temperature_c:g} °C ({_names(held)})."
        )
    return out
