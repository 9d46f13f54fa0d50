"""Setpoint design: the pH window in which every metal meets its limit with margin, the setpoint, the headroom
at it, and a two-stage scheme when no single pH works.

The comparison is made on the predicted effluent: dissolved metal at equilibrium (fresh solids by default) or,
when an effluent suspended-solids concentration is given, total metal = dissolved + the solids carried over from
the clarifier (effluent TSS x the metal's fraction of the sludge formed at that pH). Each metal is compared with
``margin x limit`` (the design target); by default the most stringent limit listed for the metal is used.
"""

from __future__ import annotations

import math
import numbers
from dataclasses import dataclass, field, replace

import numpy as np
import pandas as pd

from workbench.chemistry import database, solver, tableau
from workbench.errors import InputError
from workbench.treatment.cautions import cautions
from workbench.treatment.limits import check_limits
from workbench.treatment.solubility import (
    check_ph_range,
    check_shift,
    equilibrium,
    equilibrium_within_model,
    model_warnings,
)
from workbench.treatment.uncertainty import UncertaintyBand, check_progress, uncertainty_band
from workbench.treatment.water import METALS, Water

RULES = ("widest_centre", "max_headroom")
DEFAULT_MARGIN = 0.5  # design to half of each limit (common practice: long-term average well below the limit)
DEFAULT_PH_RANGE = (5.0, 12.5)
COMPLEXANTS = {"edta_mg_l": "EDTA", "citrate_mg_l": "citrate", "ammonia_mg_l_n": "ammonia"}


@dataclass
class SetpointDesign:
    """Result of :func:`design_setpoint`.

    Attributes
    ----------
    windows : list of (float, float)
        pH intervals where every metal meets margin x limit (single stage).
    setpoint_ph : float or None
        Recommended single-stage setpoint, chosen by ``rule``; None when no window exists.
    rule : str
        "widest_centre" (centre of the widest window) or "max_headroom" (the pH where the smallest headroom of
        any metal is largest).
    table : pandas.DataFrame
        Per metal at the setpoint (or at the final stage): limit, basis, target, dissolved, total, compared value,
        headroom (target / compared), meets_limit, meets_target, source.
    edges : list of (str, str)
        For each window, the metal that limits it at the low and at the high edge ("range" at the range ends).
    stages : list of dict or None
        Two-stage scheme when no single window exists: each stage's pH, its pH range, and the metals it removes.
    curve : pandas.DataFrame
        Compared value per metal against pH (index pH). [mg/L]
    targets : pandas.Series
        margin x limit per metal. [mg/L]
    compared : str
        What is compared: "dissolved" or "total (dissolved + carry-over at ... mg/L TSS)".
    notes : list of str
        Complexants that shrink the window, metals that cannot be met and why, example limits not used.
    cautions, warnings : list of str
        Safety cautions; where the model is stretched.
    band : UncertaintyBand or None
        Monte Carlo band (dissolved metal) and the probability of meeting each limit at the setpoint, when
        samples were asked for.
    """

    windows: list[tuple[float, float]]
    setpoint_ph: float | None
    rule: str
    margin: float
    table: pd.DataFrame
    edges: list[tuple[str, str]]
    stages: list[dict] | None
    curve: pd.DataFrame
    targets: pd.Series
    compared: str
    notes: list[str] = field(default_factory=list)
    cautions: list[str] = field(default_factory=cautions)
    warnings: list[str] = field(default_factory=list)
    band: UncertaintyBand | None = None


def design_setpoint(
    water: Water,
    limits: pd.DataFrame,
    margin: float = DEFAULT_MARGIN,
    *,
    ph_range: tuple[float, float] = DEFAULT_PH_RANGE,
    step: float = 0.02,
    rule: str = "widest_centre",
    basis: str | None = None,
    effluent_tss_mg_l: float | None = None,
    solids: str = "fresh",
    solubility_shift=None,
    two_stage: bool = True,
    samples: int = 0,
    seed: int = 0,
    default_uncertainty: float = 0.2,
    progress=None,
) -> SetpointDesign:
    """Find the pH window, the setpoint and the headroom of every metal; a two-stage scheme if needed.

    Parameters
    ----------
    water : Water
        Influent.
    limits : pandas.DataFrame
        From :func:`workbench.load_limits`, :func:`workbench.permit_limits` or :func:`workbench.combine_limits`.
        Permit limits for a metal that is not in the water are refused; example-set limits for such metals are
        left out (and listed in ``notes``).
    margin : float
        Design target = margin x limit, in (0, 1]. Default 0.5 (common practice).
    ph_range : (float, float)
        pH range searched.
    step : float
        pH grid step. [pH units]
    rule : {"widest_centre", "max_headroom"}
        How the setpoint is chosen within the windows.
    basis : str, optional
        Limit basis to use (e.g. "monthly_avg"); default: the most stringent limit listed per metal.
    effluent_tss_mg_l : float, optional
        Clarifier effluent suspended solids; when given, total metal is compared. [mg/L]
    solids : {"fresh", "aged"}
    solubility_shift : mapping, optional
        Calibrated apparent solubility shift per metal (from jar tests). [log10 units]
    two_stage : bool
        Search a two-stage scheme when no single window exists.
    samples, seed, default_uncertainty, progress
        When ``samples`` > 0, a Monte Carlo band (:func:`workbench.uncertainty_band`) over the design range on a
        0.1 pH grid, and the probability that each metal meets its limit at the setpoint; ``progress(done,
        total)`` is called as samples complete.
    """
    if not isinstance(water, Water):
        raise InputError("water", type(water).__name__, "a workbench Water is required")
    margin = _check_margin(margin)
    if rule not in RULES:
        raise InputError("rule", rule, f"allowed {', '.join(RULES)}")
    lo, hi = check_ph_range(ph_range)
    if not isinstance(step, numbers.Real) or not (0.001 <= step <= 0.5):
        raise InputError("step", step, "allowed 0.001 to 0.5 pH units")
    tss = _check_tss(effluent_tss_mg_l)
    check_shift(water, solubility_shift)
    check_progress(progress)
    used, notes = _limits_for(water, limits, basis)
    targets = used["limit_mg_l"] * margin
    metals = list(used.index)
    opts = dict(solids=solids, solubility_shift=solubility_shift)
    grid = np.round(np.arange(lo, hi + 1e-9, step), 6)
    tab, eq, reach = equilibrium_within_model(water, grid, **opts)
    curve = _held_curve(_compared(water, tab, eq, tss)[metals], grid, reach)
    hi = min(hi, float(grid[reach.held].max()))  # the two-stage search stays where the model holds
    windows, edges = _windows(curve, targets)
    compared = "dissolved" if tss is None else f"total (dissolved + carry-over at {tss:g} mg/L effluent TSS)"
    setpoint = _choose(windows, curve, targets, rule)
    stages = None
    if setpoint is not None:
        table = _table(water, used, targets, setpoint, tss, opts)
    else:
        stages = _two_stage(water, metals, targets, tss, opts, lo, hi) if two_stage else None
        if stages is not None:
            table = _with_limits(stages[-1].pop("table"), used)
        else:
            closest = (curve / targets).max(axis=1, skipna=False).idxmin()  # held points only
            table = _table(water, used, targets, float(closest), tss, opts)
            notes += _why_not_met(water, curve, targets, opts, lo, hi)
    notes += _complexant_notes(water, used, targets, tss, opts, windows, lo, hi, step)
    band = None
    if samples:
        band = uncertainty_band(
            water,
            np.round(np.arange(lo, hi + 1e-9, 0.1), 3),
            samples=samples,
            seed=seed,
            default_uncertainty=default_uncertainty,
            limits=used["limit_mg_l"] if setpoint is not None else None,  # a probability needs the setpoint
            setpoint_ph=setpoint,
            solids=solids,
            solubility_shift=solubility_shift,
            progress=progress,
        )
    return SetpointDesign(
        windows=windows,
        setpoint_ph=setpoint,
        rule=rule,
        margin=margin,
        table=table,
        edges=edges,
        stages=stages,
        curve=curve,
        targets=targets,
        compared=compared,
        notes=notes,
        warnings=model_warnings(water, tab, eq) + ([reach.note(grid)] if not reach.complete else []),
        band=band,
    )


# ---------------------------------------------------------------------------------------------------- inputs
def _check_margin(margin) -> float:
    if isinstance(margin, bool) or not isinstance(margin, numbers.Real) or not math.isfinite(margin):
        raise InputError("margin", margin, "a number in (0, 1]: the design target is margin x limit")
    if not 0.0 < margin <= 1.0:
        raise InputError("margin", margin, "allowed (0, 1]: the design target is margin x limit")
    return float(margin)


def _check_tss(tss):
    if tss is None:
        return None
    if (
        isinstance(tss, bool)
        or not isinstance(tss, numbers.Real)
        or not math.isfinite(tss)
        or not 0 <= tss <= 1000
    ):
        raise InputError(
            "effluent_tss_mg_l", tss, "allowed 0 to 1000 mg/L, or None to compare dissolved metal"
        )
    return float(tss)


def _limits_for(water: Water, limits: pd.DataFrame, basis: str | None) -> tuple[pd.DataFrame, list[str]]:
    """Per metal of the water: the limit used (most stringent, or of the given basis)."""
    check_limits(limits)
    notes = []
    origin = limits["origin"] if "origin" in limits.columns else pd.Series("permit", index=limits.index)
    absent = limits[~limits["metal"].isin(list(water.metals_mg_l))]
    for metal in sorted(set(absent["metal"])):
        rows = absent[absent["metal"] == metal]
        if (origin[rows.index] == "permit").any():
            raise InputError(
                "limits",
                metal,
                f"a permit limit is given for {metal}, which is not in the water "
                f"(metals in the water: {', '.join(water.metals_mg_l)}); add it to the influent or remove the limit",
            )
        notes.append(f"{metal}: listed in the example limit set but not in the influent; not used.")
    sel = limits[limits["metal"].isin(list(water.metals_mg_l))]
    if basis is not None:
        if basis not in set(sel["basis"]):
            raise InputError("basis", basis, f"bases in these limits: {', '.join(sorted(set(sel['basis'])))}")
        sel = sel[sel["basis"] == basis]
    if sel.empty:
        raise InputError(
            "limits", "no limit for any metal in the water", "give limits for the influent's metals"
        )
    idx = sel.groupby("metal")["limit_mg_l"].idxmin()
    used = sel.loc[idx].set_index("metal")
    order = [m for m in water.metals_mg_l if m in used.index]
    missing = [m for m in water.metals_mg_l if m not in used.index]
    if missing:
        notes.append(f"No limit given for {', '.join(missing)}: not part of the window.")
    return used.loc[order], notes


# ---------------------------------------------------------------------------------------------------- model
def _compared(water: Water, tab, eq, tss) -> pd.DataFrame:
    """Dissolved (or total with carry-over) metal per metal key over the points of ``eq``. [mg/L]"""
    data = database.load()
    diss = eq.dissolved()
    out = {}
    sludge = (eq.solid_amount * data.molar_mass_g_mol[tab.solid_index]).sum(axis=1) * 1000.0  # mg/L dry
    for key in water.metals_mg_l:
        comp = tab.component(METALS[key])
        mass = data.input_molar_mass[METALS[key]] * 1000.0
        dissolved = diss[:, comp] * mass
        if tss is None:
            out[key] = dissolved
        else:
            in_solids = np.maximum(eq.totals[:, comp] - diss[:, comp], 0.0) * mass
            fraction = np.where(sludge > 0, in_solids / np.where(sludge > 0, sludge, 1.0), 0.0)
            out[key] = dissolved + tss * fraction
    return pd.DataFrame(out)


def _held_curve(values: pd.DataFrame, grid: np.ndarray, reach) -> pd.DataFrame:
    """Values at the held points spread over the whole grid (NaN where the model does not hold), index pH."""
    out = pd.DataFrame(np.nan, index=pd.Index(grid, name="pH"), columns=values.columns)
    out.loc[grid[reach.held]] = values.to_numpy()
    return out


def _windows(curve: pd.DataFrame, targets: pd.Series) -> tuple[list, list]:
    ph = curve.index.to_numpy(float)
    with np.errstate(divide="ignore"):
        lr = np.log10(np.maximum(curve.to_numpy(float), 1e-300) / targets.to_numpy(float))  # > 0: not met
    ok = (lr <= 0).all(axis=1)
    windows, edges = [], []
    i = 0
    while i < ph.size:
        if not ok[i]:
            i += 1
            continue
        j = i
        while j + 1 < ph.size and ok[j + 1]:
            j += 1
        low, low_metal = _edge(ph, lr, curve.columns, i, i - 1)
        high, high_metal = _edge(ph, lr, curve.columns, j, j + 1)
        windows.append((round(low, 3), round(high, 3)))
        edges.append((low_metal, high_metal))
        i = j + 1
    return windows, edges


def _edge(ph, lr, metals, inside, outside):
    if outside < 0 or outside >= ph.size:
        return float(ph[inside]), "range"
    k = int(np.argmax(lr[outside]))
    y0, y1 = lr[inside, k], lr[outside, k]
    frac = (0.0 - y0) / (y1 - y0) if y1 != y0 else 0.0
    return float(ph[inside] + frac * (ph[outside] - ph[inside])), str(metals[k])


def _choose(windows, curve, targets, rule):
    if not windows:
        return None
    if rule == "widest_centre":
        low, high = max(windows, key=lambda w: w[1] - w[0])
        return round(0.5 * (low + high), 2)
    headroom = -np.log10(np.maximum(curve.to_numpy(float), 1e-300) / targets.to_numpy(float)).max(axis=1)
    return round(float(curve.index[int(np.nanargmax(headroom))]), 2)


def _table(water, used, targets, ph, tss, opts) -> pd.DataFrame:
    tab, eq = equilibrium(water, [ph], **opts)
    dissolved = _compared(water, tab, eq, None).iloc[0]
    total = (
        _compared(water, tab, eq, tss).iloc[0]
        if tss is not None
        else pd.Series(np.nan, index=dissolved.index)
    )
    return _table_from(used, targets, dissolved, total, tss, ph)


def _table_from(used, targets, dissolved, total, tss, ph) -> pd.DataFrame:
    metals = list(used.index)
    compared = (total if tss is not None else dissolved)[metals]
    df = pd.DataFrame(
        {
            "limit_mg_l": used["limit_mg_l"],
            "basis": used["basis"],
            "target_mg_l": targets,
            "dissolved_mg_l": dissolved[metals],
            "total_mg_l": total[metals],
            "compared_mg_l": compared,
            "headroom": targets / np.maximum(compared, 1e-300),
            "meets_limit": compared <= used["limit_mg_l"],
            "meets_target": compared <= targets,
            "source": used["source"] if "source" in used.columns else "",
        }
    )
    df.index.name = "metal"
    df.attrs["ph"] = ph
    return df


# ---------------------------------------------------------------------------------------------------- two stages
def _two_stage(water, metals, targets, tss, opts, lo, hi):
    """Stage 1 at pH1, solids removed, stage 2 at pH2 on the stage-1 effluent: the best feasible pair."""
    totals = water.totals()
    comps = tuple(dict.fromkeys([*totals, "Na+", "Cl-"]))
    tab = tableau.build(comps, water.temperature_c, opts["solids"])
    for key, delta in check_shift(water, opts.get("solubility_shift")).items():
        tab = tab.with_solubility_shift(METALS[key], delta)
    t = np.zeros(len(tab.components))
    for comp, v in totals.items():
        t[tab.component(comp)] = v
    ph1 = np.round(np.arange(max(lo, 5.0), min(hi, 11.5) + 1e-9, 0.1), 3)
    ph2 = np.round(np.arange(max(lo, 6.0), hi + 1e-9, 0.05), 3)
    eq1 = solver.solve(tab, t, ph1)
    effluent = eq1.dissolved()
    na, cl = tab.component("Na+"), tab.component("Cl-")
    effluent[:, na] += np.maximum(eq1.strong_base, 0.0)  # the base that held pH1 stays in the water
    effluent[:, cl] += np.maximum(-eq1.strong_base, 0.0)
    effluent[:, 0] = 0.0
    t2 = np.repeat(effluent, ph2.size, axis=0)
    eq2 = solver.solve(tab, t2, np.tile(ph2, ph1.size))
    data = database.load()
    mass = np.array([data.input_molar_mass[METALS[k]] * 1000.0 for k in metals])
    cols = [tab.component(METALS[k]) for k in metals]
    final = (eq2.dissolved()[:, cols] * mass).reshape(ph1.size, ph2.size, len(metals))
    if tss is not None:  # carry-over of stage-2 solids only (stage-1 solids are separated before stage 2)
        sludge = (eq2.solid_amount * data.molar_mass_g_mol[tab.solid_index]).sum(axis=1) * 1000.0
        in_solids = np.maximum(t2[:, cols] - eq2.dissolved()[:, cols], 0.0) * mass
        frac = np.where(sludge[:, None] > 0, in_solids / np.where(sludge > 0, sludge, 1.0)[:, None], 0.0)
        final = final + tss * frac.reshape(final.shape)
    score = -np.log10(np.maximum(final, 1e-300) / targets.to_numpy()).max(axis=2)  # worst headroom, log10
    if not (score >= 0).any():
        return None
    i, j = np.unravel_index(int(np.argmax(score)), score.shape)
    stage1_range = _run(ph1, score[:, j] >= 0, i)
    stage2_range = _run(ph2, score[i] >= 0, j)
    influent = np.array([water.metals_mg_l[k] for k in metals])
    after1 = effluent[i, cols] * mass
    removed1 = [k for k, a, b in zip(metals, influent, after1, strict=True) if a > 0 and b <= 0.5 * a]
    removed2 = [k for k, a, b in zip(metals, after1, final[i, j], strict=True) if a > 0 and b <= 0.5 * a]
    final_s = pd.Series(final[i, j], index=metals)
    dissolved_s = pd.Series((eq2.dissolved()[i * ph2.size + j, cols] * mass), index=metals)
    return [
        {
            "stage": 1,
            "ph": float(ph1[i]),
            "ph_range": stage1_range,
            "removes": removed1,
            "effluent_mg_l": dict(zip(metals, after1.round(6).tolist(), strict=True)),
        },
        {
            "stage": 2,
            "ph": float(ph2[j]),
            "ph_range": stage2_range,
            "removes": removed2,
            "effluent_mg_l": dict(zip(metals, final_s.round(6).tolist(), strict=True)),
            "table": _stage_table(targets, dissolved_s, final_s, tss, float(ph2[j])),
        },
    ]


def _stage_table(targets, dissolved, final, tss, ph):
    df = pd.DataFrame(
        {
            "target_mg_l": targets,
            "dissolved_mg_l": dissolved,
            "total_mg_l": final if tss is not None else np.nan,
            "compared_mg_l": final,
            "headroom": targets / np.maximum(final, 1e-300),
            "meets_target": final <= targets,
        }
    )
    df.index.name = "metal"
    df.attrs["ph"] = ph
    return df


def _with_limits(table: pd.DataFrame, used: pd.DataFrame) -> pd.DataFrame:
    """A stage table with the limit columns of the single-stage table (limit, basis, meets_limit, source)."""
    out = table.copy()
    out.insert(0, "limit_mg_l", used["limit_mg_l"])
    out.insert(1, "basis", used["basis"])
    out["meets_limit"] = out["compared_mg_l"] <= used["limit_mg_l"]
    out["source"] = used["source"] if "source" in used.columns else ""
    out.attrs = dict(table.attrs)
    return out


def _run(ph, ok, i) -> tuple[float, float]:
    """The contiguous range of ``ph`` around index i where ``ok`` holds."""
    a = b = i
    while a > 0 and ok[a - 1]:
        a -= 1
    while b < ph.size - 1 and ok[b + 1]:
        b += 1
    return float(ph[a]), float(ph[b])


# ---------------------------------------------------------------------------------------------------- notes
def _why_not_met(water, curve, targets, opts, lo, hi) -> list[str]:
    notes = []
    ratio = curve / targets
    for metal in curve.columns:
        best = float(ratio[metal].min())
        if best <= 1.0:
            continue
        ph_best = float(ratio[metal].idxmin())
        lowest = float(curve[metal].min())
        culprit = [
            name
            for fld, name in COMPLEXANTS.items()
            if getattr(water, fld) > 0 and _meets_without(water, fld, metal, targets[metal], opts, lo, hi)
        ]
        if culprit:
            why = f"held in solution by {' and '.join(culprit)} (without it the metal would meet its target)"
        elif np.isclose(lowest, water.metals_mg_l[metal], rtol=1e-6):
            why = "no solid forms at this concentration (e.g. lead without carbonate): it stays dissolved"
        else:
            why = f"its target is below the theoretical minimum ({lowest:.3g} mg/L at pH {ph_best:.2f})"
        notes.append(f"{metal} cannot be met by hydroxide precipitation alone: {why}.")
    return notes


def _without(water, fields) -> Water | None:
    """The water without these complexants, or None where that analysis is not valid on its own (its alkalinity
    was converted at an ionic strength the complexants helped make: without them it may exceed the CO2 a water
    holds at the measured pH)."""
    try:
        return replace(water, **dict.fromkeys(fields, 0.0))
    except InputError:
        return None


def _meets_without(water, fld, metal, target, opts, lo, hi) -> bool:
    bare = _without(water, [fld])
    if bare is None:
        return False
    grid = np.round(np.arange(lo, hi + 1e-9, 0.05), 4)
    tab, eq, _ = equilibrium_within_model(bare, grid, **opts)
    return bool((_compared(bare, tab, eq, None)[metal] <= target).any())


def _complexant_notes(water, used, targets, tss, opts, windows, lo, hi, step) -> list[str]:
    present = [(fld, name) for fld, name in COMPLEXANTS.items() if getattr(water, fld) > 0]
    if not present:
        return []
    names = " and ".join(name for _, name in present)
    bare = _without(water, [fld for fld, _ in present])
    if bare is None:
        return [f"{names} present: the window without {names} is not computed (the analysis without it is "
                "inconsistent: its alkalinity needs more CO2 than water holds at the measured pH)."]
    grid = np.round(np.arange(lo, hi + 1e-9, step), 6)
    tab, eq, reach = equilibrium_within_model(bare, grid, **opts)
    curve = _held_curve(_compared(bare, tab, eq, tss)[list(used.index)], grid, reach)
    bare_windows, _ = _windows(curve, targets)
    width = sum(b - a for a, b in windows)
    bare_width = sum(b - a for a, b in bare_windows)
    if bare_width - width < 1e-9:
        return [f"{names} present: no effect on the window at these concentrations."]
    shown = ", ".join(f"{a:.2f}-{b:.2f}" for a, b in bare_windows) or "none"
    now = ", ".join(f"{a:.2f}-{b:.2f}" for a, b in windows) or "none"
    return [f"{names} shrink the pH window: without {names} it would be {shown}; with {names} it is {now}."]
