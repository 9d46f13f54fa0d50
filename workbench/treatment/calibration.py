"""Jar-test review: predictions beside bench results, the apparent solubility shift per metal, suspect jars.

All functions take the tidy table of :func:`workbench.treatment.jar_tests.read_jar_tests` and the influent
:class:`~workbench.treatment.water.Water` the jars were filled with. Predictions are the core's dissolved residual
at each jar's measured pH (fixed-pH mode: the reagent's own ions are not added) and at the jar's temperature when
the file gives one (else the water's).

The apparent solubility shift of a metal is :math:`\\Delta` in :func:`workbench.residual_curve`'s
``solubility_shift``: every solid of that metal is taken :math:`10^{\\Delta}` times more soluble. Where one
solid controls, the predicted dissolved metal scales by :math:`10^{\\Delta}`; where the metal stays fully
dissolved in the model (no solid at that pH), the shift changes nothing, so such jars carry no information on it.
The fitted shifts go back into the core as ``solubility_shift=calibrated_shift(fits)``: the residual curves, the
minimum-solubility table and the setpoint window are then recomputed on the calibrated curves.
"""

from __future__ import annotations

import math
import numbers
from collections.abc import Iterable, Mapping
from dataclasses import dataclass, replace

import numpy as np
import pandas as pd

from workbench.errors import InputError
from workbench.treatment.jar_tests import OUTPUT_COLUMNS
from workbench.treatment.solubility import MAX_SHIFT_LOG, residual_curve
from workbench.treatment.water import METALS, Water

LOSSES = ("soft_l1", "huber", "cauchy", "linear")
BOUNDS = ("estimate", "low", "high")
INFORMATIVE_SLOPE = (
    0.2  # d log10(predicted) / d shift below which a result carries no information on the shift
)
SENSITIVITY_STEP = 0.05  # shift step of the central difference for that slope [log10 units]
BOTTOM_FACTOR = 2.0  # a minimum's "bottom": the pH range within this factor of the lowest residual
GRID_STEP = 0.02  # pH step of the predicted curve searched for the minimum


# ---------------------------------------------------------------------------------------------- predictions
def _check(tidy, water) -> None:
    if not isinstance(water, Water):
        raise InputError("water", type(water).__name__, "a workbench Water is required")
    if not isinstance(tidy, pd.DataFrame):
        raise InputError("jar tests", type(tidy).__name__, "the table read by read_jar_tests is required")
    missing = [c for c in OUTPUT_COLUMNS if c not in tidy.columns]
    if missing:
        raise InputError(
            "jar tests", f"no column {missing[0]!r}", "the table read by read_jar_tests is required"
        )
    if tidy.empty:
        raise InputError("jar tests", "a table of 0 rows", "at least one jar result (the table read_jar_tests returns)")
    bad = sorted(set(tidy["fraction"]) - {"dissolved", "total"}, key=str)
    if bad:
        raise InputError("jar tests: fraction", bad[0], "allowed 'dissolved' or 'total'")
    _check_values(tidy)
    twice = tidy.duplicated(["jar", "metal", "fraction"])
    if twice.any():
        row = tidy[twice].iloc[0]
        raise InputError(
            "jar tests",
            f"jar {row['jar']!r} {row['metal']} {row['fraction']}",
            "one result per jar, metal and fraction",
        )
    if (tidy.groupby("jar")["pH"].nunique() > 1).any():
        raise InputError("jar tests: pH", "two pH values for one jar", "one measured pH per jar")


def _numbers(column: pd.Series) -> np.ndarray:
    """A column as floats; NaN where a cell is not a real number (text, True/False, None)."""
    return np.array(
        [float(v) if isinstance(v, numbers.Real) and not isinstance(v, bool | np.bool_) else np.nan for v in column],
        dtype=float,
    )


def _refuse_first(tidy: pd.DataFrame, bad: np.ndarray, column: str, allowed: str) -> None:
    if bad.any():
        i = int(np.flatnonzero(bad)[0])
        jar = tidy["jar"].iat[i]
        raise InputError(f"jar tests row {tidy.index[i]!r} (jar {jar!r}) {column}", tidy[column].iat[i], allowed)


def _check_values(tidy: pd.DataFrame) -> None:
    """Every cell the calibration reads, as read_jar_tests writes it (a table built by hand is checked the same)."""
    jar = tidy["jar"]
    _refuse_first(tidy, (jar.isna() | (jar.astype(str).str.strip() == "")).to_numpy(), "jar", "a jar id")
    _refuse_first(tidy, ~tidy["metal"].isin(list(METALS)).to_numpy(), "metal", f"known metals are {', '.join(METALS)}")
    censored = tidy["censored"].to_numpy()
    flags = np.array([isinstance(v, bool | np.bool_) for v in censored])
    _refuse_first(tidy, ~flags, "censored", "True (below detection) or False")
    censored = censored.astype(bool)
    ph = _numbers(tidy["pH"])
    _refuse_first(tidy, ~(np.isfinite(ph) & (ph >= 0) & (ph <= 14)), "pH", "a measured pH from 0 to 14")
    dose = _numbers(tidy["dose_mg_l"])
    _refuse_first(tidy, ~(np.isfinite(dose) & (dose >= 0)), "dose_mg_l", "a dose of 0 mg/L or more")
    value = _numbers(tidy["value_mg_l"])
    _refuse_first(
        tidy,
        ~censored & ~(np.isfinite(value) & (value > 0)),
        "value_mg_l",
        "a result above 0 mg/L (a result below detection: censored with its detection limit)",
    )
    _refuse_first(tidy, censored & ~np.isnan(value), "value_mg_l", "empty (NaN) for a result below detection")
    limit = _numbers(tidy["detection_limit_mg_l"])
    _refuse_first(
        tidy, censored & ~(np.isfinite(limit) & (limit > 0)), "detection_limit_mg_l", "a detection limit above 0 mg/L"
    )
    if "temperature_c" in tidy.columns:
        t = _numbers(tidy["temperature_c"])
        bad = tidy["temperature_c"].notna().to_numpy() & ~np.isfinite(t)  # text, True/False, inf
        _refuse_first(tidy, bad, "temperature_c", "a temperature in °C, or empty (the water's)")


def _threshold(name: str, value, low: float, high: float, low_open: bool, allowed: str) -> float:
    ok = isinstance(value, numbers.Real) and not isinstance(value, bool) and math.isfinite(value)
    if not ok or not ((value > low) if low_open else (value >= low)) or value > high:
        raise InputError(name, value, allowed)
    return float(value)


def _jars(tidy: pd.DataFrame) -> pd.DataFrame:
    """One row per jar: pH and temperature (NaN: the water's)."""
    cols = ["jar", "pH"] + (["temperature_c"] if "temperature_c" in tidy.columns else [])
    jars = tidy[cols].drop_duplicates("jar").set_index("jar")
    if "temperature_c" not in jars.columns:
        jars["temperature_c"] = np.nan
    return jars


class _Model:
    """Predicted dissolved metal at a set of jars (pH, temperature) for a given shift of one metal; cached."""

    def __init__(self, water: Water, jars: pd.DataFrame, metal: str | None, solids: str, activity: str):
        temps = jars["temperature_c"].fillna(water.temperature_c).to_numpy(dtype=float)
        self.groups = []
        for t in np.unique(temps):
            sel = np.flatnonzero(temps == t)
            w = water if t == water.temperature_c else _water_at(water, t, jars.index[sel])
            phs = jars["pH"].to_numpy(dtype=float)[sel]
            grid, back = np.unique(phs, return_inverse=True)
            self.groups.append((w, sel, grid, back))
        self.n = len(jars)
        self.metal = metal
        self.opts = dict(solids=solids, activity=activity)
        self.cache: dict[float, pd.DataFrame] = {}
        self.calls = 0

    def frame(self, delta: float = 0.0, shift: Mapping | None = None) -> pd.DataFrame:
        """All metals of the water at every jar (rows in jar order). [mg/L]"""
        key = round(float(delta), 12)
        if shift is None and key in self.cache:
            return self.cache[key]
        use = dict(shift or {})
        if self.metal is not None:
            use[self.metal] = float(delta)
        parts = [None] * self.n
        for w, sel, grid, back in self.groups:
            self.calls += 1
            curve = residual_curve(w, grid, solubility_shift=use or None, **self.opts)
            for k, i in enumerate(sel):
                parts[i] = curve.iloc[back[k]]
        out = pd.DataFrame(parts).reset_index(drop=True)
        if shift is None:
            self.cache[key] = out
        return out

    def __call__(self, delta: float) -> np.ndarray:
        return self.frame(delta)[self.metal].to_numpy(dtype=float)


def _water_at(water: Water, t: float, jars) -> Water:
    try:
        return replace(water, temperature_c=float(t))
    except InputError as exc:
        raise InputError(f"jar tests: temperature_c of jar {jars[0]!r}", t, exc.allowed) from None


def overlay(
    tidy: pd.DataFrame,
    water: Water,
    *,
    solubility_shift: Mapping[str, float] | None = None,
    solids: str = "fresh",
    activity: str = "davies",
) -> pd.DataFrame:
    """Each jar result beside the predicted dissolved residual at the jar's measured pH.

    Parameters
    ----------
    tidy : pandas.DataFrame
        From :func:`~workbench.treatment.jar_tests.read_jar_tests`.
    water : Water
        The influent the jars were filled with.
    solubility_shift : mapping, optional
        Shift per metal key for the prediction (e.g. :func:`calibrated_shift`); theory when omitted. [log10]
    solids, activity : str
        As for :func:`workbench.residual_curve`.

    Returns
    -------
    pandas.DataFrame
        The tidy table plus ``influent_mg_l`` [mg/L]; ``predicted_mg_l``, the predicted *dissolved* residual
        (also on total rows) [mg/L]; ``solid_predicted``, whether a solid of the metal forms at that pH in the
        model; ``log_residual`` = log10(measured / predicted) (NaN when censored); ``log_residual_max`` =
        log10(detection limit / predicted), the most the residual of a below-detection result can be (NaN
        otherwise). Metals absent from the water get NaN predictions and a note in ``attrs["notes"]``.
    """
    _check(tidy, water)
    jars = _jars(tidy)
    pred = _Model(water, jars, None, solids, activity).frame(shift=solubility_shift or {})
    pred.index = jars.index
    out = tidy.copy()
    metals = out["metal"].to_numpy()
    known = np.array([m in water.metals_mg_l for m in metals])
    p = np.full(len(out), np.nan)
    infl = np.full(len(out), np.nan)
    for i in np.flatnonzero(known):
        p[i] = pred.at[out["jar"].iat[i], metals[i]]
        infl[i] = water.metals_mg_l[metals[i]]
    out["influent_mg_l"] = infl
    out["predicted_mg_l"] = p
    out["solid_predicted"] = known & (p < infl * (1.0 - 1e-3))
    with np.errstate(divide="ignore", invalid="ignore"):
        out["log_residual"] = np.log10(out["value_mg_l"].to_numpy(dtype=float) / p)
        out["log_residual_max"] = np.log10(out["detection_limit_mg_l"].to_numpy(dtype=float) / p)
    out.attrs = dict(tidy.attrs)
    absent = sorted(set(metals[~known]))
    out.attrs["notes"] = list(tidy.attrs.get("notes", [])) + [
        f"{m} is not in the influent analysis: no prediction to compare with" for m in absent
    ]
    return out


# ---------------------------------------------------------------------------------------------- calibration
@dataclass(frozen=True)
class ShiftFit:
    """The apparent solubility shift of one metal fitted to dissolved jar results.

    Attributes
    ----------
    metal : str
    shift : float
        Fitted shift: every solid of the metal is 10**shift times more soluble than in theory; NaN when the
        results do not determine it (see ``notes``). [log10 units]
    low, high : float
        Confidence interval of the shift; NaN when it cannot be estimated; ``low`` = -inf when the results only
        bound the shift from above (all below detection). [log10 units]
    confidence : float
        Level of the interval (e.g. 0.95).
    n_used : int
        Dissolved results that carry information on the shift (a solid of the metal forms at that pH).
    n_censored : int
        Of those, the results below detection (used as upper limits, not as numbers).
    n_no_information : int
        Dissolved results at pH values where the model keeps the metal fully dissolved.
    scale_log : float
        Robust residual scale of the fit. [log10 units]
    notes : tuple of str
    """

    metal: str
    shift: float
    low: float
    high: float
    confidence: float
    n_used: int
    n_censored: int
    n_no_information: int
    scale_log: float
    notes: tuple[str, ...] = ()

    @property
    def interval(self) -> tuple[float, float]:
        return (self.low, self.high)


def _loss_weight(loss: str, z: np.ndarray) -> np.ndarray:
    """rho'(z) of scipy's robust losses, z = (r / f_scale)**2: the weight of each residual at the solution."""
    if loss == "soft_l1":
        return 1.0 / np.sqrt(1.0 + z)
    if loss == "huber":
        return np.where(z <= 1.0, 1.0, 1.0 / np.sqrt(np.maximum(z, 1.0)))
    if loss == "cauchy":
        return 1.0 / (1.0 + z)
    return np.ones_like(z)


def _residuals(pred: np.ndarray, obs: np.ndarray, dl: np.ndarray, censored: np.ndarray) -> np.ndarray:
    """log10(measured) - log10(predicted); a below-detection result gives min(0, log10(DL) - log10(predicted)):
    zero while the prediction stays under its limit, negative (pulling the curve down) once above it."""
    lp = np.log10(pred)
    r = np.log10(np.where(censored, 1.0, obs)) - lp
    return np.where(censored, np.minimum(0.0, np.log10(np.where(censored, dl, 1.0)) - lp), r)


def fit_solubility_shift(
    tidy: pd.DataFrame,
    water: Water,
    metal: str,
    *,
    loss: str = "soft_l1",
    f_scale: float = 0.3,
    confidence: float = 0.95,
    solids: str = "fresh",
    activity: str = "davies",
) -> ShiftFit:
    """Fit one metal's apparent solubility shift to its dissolved jar results.

    Robust least squares in log10 space (:func:`scipy.optimize.least_squares`, trust-region reflective, the
    shift bounded to the core's ±5): the residual of a result is log10(measured / predicted) at the jar's pH.
    A below-detection result is an upper limit, never a number: its residual is zero while the prediction is
    at or below its detection limit and log10(DL / predicted) once the prediction exceeds it. Results at pH
    values where the model keeps the metal fully dissolved are kept in the fit but carry no information (the
    shift does not move them); they are counted in ``n_no_information``.

    Parameters
    ----------
    tidy : pandas.DataFrame
        From :func:`~workbench.treatment.jar_tests.read_jar_tests`; the metal's dissolved rows are used.
    water : Water
        The influent the jars were filled with.
    metal : str
        Metal key.
    loss : {"soft_l1", "huber", "cauchy", "linear"}
        Robust loss (scipy's); "linear" is ordinary least squares.
    f_scale : float
        Residual size at which the robust loss starts to down-weight a result. [log10 units]
    confidence : float
        Level of the interval, between 0.5 and 0.999.
    solids, activity : str
        As for :func:`workbench.residual_curve`.

    Returns
    -------
    ShiftFit

    Notes
    -----
    The interval is from the Jacobian at the solution (Gauss-Newton, robust weights), not a profile: with
    :math:`s_i = \\partial \\log_{10} C_i / \\partial \\Delta` (central difference, step 0.05) on the results
    that carry information (:math:`s_i \\ge 0.2`; a below-detection result only while its prediction is above
    the limit), the weights :math:`w_i = \\rho'((r_i/f)^2)` of the loss and :math:`n` such results,

    .. math::
        \\hat\\sigma^2 = \\frac{\\sum_i w_i r_i^2}{n - 1}, \\qquad
        \\Delta = \\hat\\Delta \\pm t_{n-1,\\,(1+c)/2}\\,\\frac{\\hat\\sigma}{\\sqrt{\\sum_i w_i s_i^2}}

    It assumes the predicted curve is locally linear in the shift, which holds where one solid controls; for
    jars near the pH at which the solid first forms it is approximate. With fewer than two such results no
    interval is given. When every informative result is below detection, the shift is not determined: ``high``
    is the largest shift that keeps every prediction at or below its detection limit and ``low`` is -inf.
    """
    _check(tidy, water)
    if metal not in METALS:
        raise InputError("metal", metal, f"known metals are {', '.join(METALS)}")
    if loss not in LOSSES:
        raise InputError("loss", loss, f"allowed {', '.join(LOSSES)}")
    if isinstance(f_scale, bool) or not (
        isinstance(f_scale, int | float) and math.isfinite(f_scale) and f_scale > 0
    ):
        raise InputError("f_scale", f_scale, "a positive number of log10 units is required")
    if isinstance(confidence, bool) or not (
        isinstance(confidence, int | float) and 0.5 <= confidence <= 0.999
    ):
        raise InputError("confidence", confidence, "allowed 0.5 to 0.999")
    rows = tidy[(tidy["metal"] == metal) & (tidy["fraction"] == "dissolved")]
    blank = dict(
        metal=metal, shift=math.nan, low=math.nan, high=math.nan, confidence=confidence, scale_log=math.nan
    )
    if rows.empty:
        return ShiftFit(
            **blank, n_used=0, n_censored=0, n_no_information=0, notes=(f"no dissolved {metal} results",)
        )
    if water.metals_mg_l.get(metal, 0.0) <= 0:
        return ShiftFit(
            **blank,
            n_used=0,
            n_censored=0,
            n_no_information=len(rows),
            notes=(f"{metal} is not in the influent analysis: nothing to calibrate",),
        )
    model = _Model(water, _jars(rows), metal, solids, activity)
    obs = rows["value_mg_l"].to_numpy(dtype=float)
    dl = rows["detection_limit_mg_l"].to_numpy(dtype=float)
    cens = rows["censored"].to_numpy(dtype=bool)
    influent = water.metals_mg_l[metal]

    def fun(x):
        return _residuals(model(x[0]), obs, dl, cens)

    p0 = model(0.0)
    r0 = _residuals(p0, obs, dl, cens)
    start = (~cens) & (p0 < 0.5 * influent)
    start = start if start.any() else ~cens
    if cens.all():  # nothing to fit: only upper limits
        informative = _slopes(model, 0.0) >= INFORMATIVE_SLOPE
        n_used = int(informative.sum())
        notes = _no_information_note(rows, informative, metal)
        return _censored_only(model, rows, informative, cens, dl, blank, notes, n_used, n_used)
    x0 = float(np.clip(np.median(r0[start]), -4.5, 4.5))
    from scipy import optimize  # imported here: scipy.optimize and scipy.stats take half the import time

    sol = optimize.least_squares(
        fun,
        [x0],
        bounds=([-MAX_SHIFT_LOG], [MAX_SHIFT_LOG]),
        loss=loss,
        f_scale=f_scale,
        diff_step=1e-3,
        x_scale=[1.0],
        xtol=1e-4,
        ftol=1e-6,
        max_nfev=60,
    )
    delta = float(sol.x[0])
    slope = _slopes(model, delta)
    informative = slope >= INFORMATIVE_SLOPE
    n_used = int(informative.sum())
    n_cens = int((informative & cens).sum())
    notes = _no_information_note(rows, informative, metal)
    if not (informative & ~cens).any():
        return _censored_only(model, rows, informative, cens, dl, blank, notes, n_used, n_cens)
    r = fun([delta])
    active = informative & ((~cens) | (r < 0))
    jac = np.where(active, -slope, 0.0)
    n = int(active.sum())
    w = _loss_weight(loss, (r / f_scale) ** 2)
    low = high = scale = math.nan
    if n >= 2:
        scale = math.sqrt(float(np.sum(w * r**2 * active)) / (n - 1))
        se = scale / math.sqrt(float(np.sum(w * jac**2)))
        from scipy import stats

        half = float(stats.t.ppf(0.5 + confidence / 2.0, n - 1)) * se
        low, high = delta - half, delta + half
    else:
        notes.append("only one result carries information: no interval")
    if abs(delta) >= MAX_SHIFT_LOG - 1e-6:
        notes.append(
            f"the fit stopped at the allowed limit of ±{MAX_SHIFT_LOG:g}: the model cannot follow these results"
        )
    if n_cens:
        notes.append(f"{n_cens} below-detection results used as upper limits")
    return ShiftFit(
        metal, delta, low, high, confidence, n_used, n_cens, len(rows) - n_used, scale, tuple(notes)
    )


def _slopes(model: _Model, delta: float) -> np.ndarray:
    """d log10(predicted) / d shift at each jar (central difference, one-sided at the bounds)."""
    h = SENSITIVITY_STEP
    lo, hi = max(delta - h, -MAX_SHIFT_LOG), min(delta + h, MAX_SHIFT_LOG)
    return (np.log10(model(hi)) - np.log10(model(lo))) / (hi - lo)


def _no_information_note(rows: pd.DataFrame, informative: np.ndarray, metal: str) -> list[str]:
    if informative.all():
        return []
    jars = rows["jar"].to_numpy()[~informative]
    phs = rows["pH"].to_numpy()[~informative]
    listed = ", ".join(f"{j} (pH {p:g})" for j, p in zip(jars, phs, strict=True))
    which = (
        f"jar {listed}: no solid forms there, so this result carries"
        if len(jars) == 1
        else (f"jars {listed}: no solid forms there, so these results carry")
    )
    return [f"{metal} stays dissolved in the model at {which} no information on the shift"]


def _censored_only(model, rows, informative, cens, dl, blank, notes, n_used, n_cens) -> ShiftFit:
    """All informative results below detection: the largest shift keeping every prediction at or under its DL."""
    metal = blank["metal"]
    use = informative & cens
    if not use.any():
        notes.append(f"no {metal} result carries information: the shift is not determined")
        return ShiftFit(
            **blank, n_used=n_used, n_censored=n_cens, n_no_information=len(rows) - n_used, notes=tuple(notes)
        )

    def excess(d):
        return float(np.max(np.log10(model(d)[use]) - np.log10(dl[use])))

    # bracket outward from 0 in whole log units (the far ends are evaluated only when the data need them)
    step = 1.0 if excess(0.0) <= 0 else -1.0
    inside, edge = 0.0, None
    for k in range(1, int(MAX_SHIFT_LOG) + 1):
        d = step * k
        if (excess(d) > 0) == (step > 0):
            edge = d
            break
        inside = d
    if edge is None and step > 0:
        bound = MAX_SHIFT_LOG
        notes.append(f"every result is below detection and stays so up to a shift of +{MAX_SHIFT_LOG:g}")
    elif edge is None:
        bound = -MAX_SHIFT_LOG
        notes.append("every result is below detection, under even the least soluble prediction allowed")
    else:
        lo, hi = sorted((inside, edge))
        from scipy import optimize

        bound = float(optimize.brentq(excess, lo, hi, xtol=0.005))
        notes.append(
            f"every informative result is below detection: the shift is at most {bound:+.2f} (not determined)"
        )
    return ShiftFit(
        **{**blank, "low": -math.inf, "high": bound},
        n_used=n_used,
        n_censored=n_cens,
        n_no_information=len(rows) - n_used,
        notes=tuple(notes),
    )


def fit_solubility_shifts(
    tidy: pd.DataFrame, water: Water, metals: Iterable[str] | None = None, **options
) -> dict[str, ShiftFit]:
    """:func:`fit_solubility_shift` for each metal with dissolved results (or the metals given)."""
    _check(tidy, water)
    if metals is None:
        metals = list(dict.fromkeys(tidy.loc[tidy["fraction"] == "dissolved", "metal"]))
    return {m: fit_solubility_shift(tidy, water, m, **options) for m in metals}


def fits_table(fits: Mapping[str, ShiftFit]) -> pd.DataFrame:
    """The fits as a table: index ``metal``; ``shift``, ``low``, ``high`` [log10], counts, ``scale_log``, notes."""
    rows = [
        {
            "metal": f.metal,
            "shift": f.shift,
            "low": f.low,
            "high": f.high,
            "confidence": f.confidence,
            "n_used": f.n_used,
            "n_censored": f.n_censored,
            "n_no_information": f.n_no_information,
            "scale_log": f.scale_log,
            "notes": "; ".join(f.notes),
        }
        for f in fits.values()
    ]
    return pd.DataFrame(rows).set_index("metal")


def calibrated_shift(fits: Mapping[str, ShiftFit], *, bound: str = "estimate") -> dict[str, float]:
    """The fitted shifts as the core's ``solubility_shift`` mapping.

    Parameters
    ----------
    fits : mapping of metal key to ShiftFit
    bound : {"estimate", "low", "high"}
        The fitted value, or an end of its interval: "high" (more soluble) is the cautious choice for a design.

    Returns
    -------
    dict
        Metal key -> shift [log10 units], clipped to the core's ±5; metals whose value is not determined (NaN or
        -inf) are left out, so they keep the theoretical curve.
    """
    if bound not in BOUNDS:
        raise InputError("bound", bound, f"allowed {', '.join(BOUNDS)}")
    if not isinstance(fits, Mapping) or not all(isinstance(f, ShiftFit) for f in fits.values()):
        raise InputError("fits", type(fits).__name__, "the mapping fit_solubility_shifts returns (metal -> ShiftFit)")
    attr = {"estimate": "shift", "low": "low", "high": "high"}[bound]
    out = {}
    for key, fit in fits.items():
        v = getattr(fit, attr)
        if math.isfinite(v):
            out[key] = float(np.clip(v, -MAX_SHIFT_LOG, MAX_SHIFT_LOG))
    return out


def calibrated_curve(
    water: Water,
    ph,
    fits: Mapping[str, ShiftFit],
    *,
    bound: str = "estimate",
    solids: str = "fresh",
    activity: str = "davies",
) -> pd.DataFrame:
    """:func:`workbench.residual_curve` with the fitted shifts; ``attrs["solubility_shift"]`` holds them."""
    shift = calibrated_shift(fits, bound=bound)
    curve = residual_curve(water, ph, solids=solids, activity=activity, solubility_shift=shift or None)
    curve.attrs["solubility_shift"] = shift
    return curve


# ---------------------------------------------------------------------------------------------- minima
def compare_minima(
    tidy: pd.DataFrame,
    water: Water,
    *,
    solubility_shift: Mapping[str, float] | None = None,
    solids: str = "fresh",
    activity: str = "davies",
) -> pd.DataFrame:
    """The observed minimum of each metal's dissolved results against the predicted one, over the tested range.

    The observed minimum is the jar with the lowest dissolved result (a below-detection result counts at its
    limit); its "bottom" is the pH span of the jars within a factor 2 of that lowest value. The predicted
    minimum is the lowest point of the predicted curve on a 0.02-pH grid over the tested pH range; its bottom is
    the span around it within a factor 2. The two agree when the bottoms overlap, the observed one widened by
    half the median pH step between jars. A metal needs at least three jars over at least one pH unit and one
    result above detection.

    Returns
    -------
    pandas.DataFrame
        Index ``metal``; ``ph_min_observed``, ``residual_min_observed_mg_l`` [mg/L], ``observed_min_censored``,
        ``observed_bottom_low``, ``observed_bottom_high``, ``ph_min_predicted``, ``residual_min_predicted_mg_l``
        [mg/L], ``predicted_bottom_low``, ``predicted_bottom_high``, ``agree`` (True/False, or None when not
        compared) and ``note``.
    """
    _check(tidy, water)
    diss = tidy[(tidy["fraction"] == "dissolved") & tidy["metal"].isin(list(water.metals_mg_l))]
    rows = []
    curve = None
    if not diss.empty:
        lo, hi = float(diss["pH"].min()), float(diss["pH"].max())
        grid = np.round(np.arange(lo, hi + GRID_STEP / 2, GRID_STEP), 6) if hi > lo else np.array([lo])
        temps = tidy["temperature_c"].dropna().unique() if "temperature_c" in tidy.columns else []
        w = _water_at(water, temps[0], list(diss["jar"])) if len(temps) == 1 else water
        curve = residual_curve(w, grid, solids=solids, activity=activity, solubility_shift=solubility_shift)
    for metal in dict.fromkeys(diss["metal"]):
        rows.append(_one_minimum(metal, diss[diss["metal"] == metal], curve, water.metals_mg_l[metal]))
    cols = [
        "metal",
        "ph_min_observed",
        "residual_min_observed_mg_l",
        "observed_min_censored",
        "observed_bottom_low",
        "observed_bottom_high",
        "ph_min_predicted",
        "residual_min_predicted_mg_l",
        "predicted_bottom_low",
        "predicted_bottom_high",
        "agree",
        "note",
    ]
    out = pd.DataFrame(rows, columns=cols).set_index("metal")
    out["agree"] = pd.Series([r["agree"] for r in rows], index=out.index, dtype=object)  # True/False/None
    return out


def _one_minimum(metal: str, rows: pd.DataFrame, curve: pd.DataFrame, influent: float) -> dict:
    out = dict.fromkeys(
        (
            "ph_min_observed",
            "residual_min_observed_mg_l",
            "observed_bottom_low",
            "observed_bottom_high",
            "ph_min_predicted",
            "residual_min_predicted_mg_l",
            "predicted_bottom_low",
            "predicted_bottom_high",
        ),
        math.nan,
    )
    out.update(metal=metal, observed_min_censored=False, agree=None, note="")
    ph = rows["pH"].to_numpy(dtype=float)
    level = np.where(rows["censored"], rows["detection_limit_mg_l"], rows["value_mg_l"]).astype(float)
    steps = np.diff(np.unique(ph))
    if len(np.unique(ph)) < 3 or np.ptp(ph) < 1.0:
        out["note"] = "fewer than three jars over at least one pH unit: the minimum is not located"
        return out
    if rows["censored"].all():
        out["note"] = "every result is below detection: the minimum is not located"
        return out
    k = int(np.argmin(level))
    bottom = ph[level <= BOTTOM_FACTOR * level[k]]
    out.update(
        ph_min_observed=float(ph[k]),
        residual_min_observed_mg_l=float(level[k]),
        observed_min_censored=bool(rows["censored"].iloc[k]),
        observed_bottom_low=float(bottom.min()),
        observed_bottom_high=float(bottom.max()),
    )
    pred = curve[metal].to_numpy(dtype=float)
    grid = curve.index.to_numpy(dtype=float)
    if np.all(pred >= influent * (1.0 - 1e-3)):
        out["note"] = "no solid forms in the model over the tested range: no predicted minimum"
        return out
    j = int(np.argmin(pred))
    within = pred <= BOTTOM_FACTOR * pred[j]
    left, right = j, j
    while left > 0 and within[left - 1]:
        left -= 1
    while right < len(grid) - 1 and within[right + 1]:
        right += 1
    out.update(
        ph_min_predicted=float(grid[j]),
        residual_min_predicted_mg_l=float(pred[j]),
        predicted_bottom_low=float(grid[left]),
        predicted_bottom_high=float(grid[right]),
    )
    tol = 0.5 * float(np.median(steps))
    out["agree"] = bool(
        out["observed_bottom_low"] - tol <= grid[right] and out["observed_bottom_high"] + tol >= grid[left]
    )
    if out["observed_min_censored"]:
        out["note"] = "the lowest result is below detection: the observed bottom is located by its limit"
    return out


# ---------------------------------------------------------------------------------------------- flags
FLAG_KINDS = ("complexant_suspected", "solids_carry_over", "minimum_ph_differs")


def flag_jars(
    tidy: pd.DataFrame,
    water: Water,
    *,
    far_log: float = 1.0,
    carryover_ratio: float = 3.0,
    uncaptured_fraction: float = 0.1,
    ph_tolerance: float = 0.5,
    solids: str = "fresh",
    activity: str = "davies",
) -> pd.DataFrame:
    """Suspect jars and metals, each with its reason.

    ``complexant_suspected`` (per metal)
        At least three quarters of the metal's dissolved results lie more than ``far_log`` (default 1: ten
        times) above the theoretical prediction, over at least three jars spanning one pH unit or more.
        Only jars where a result that far above is possible count (prediction x 10**far_log <= influent).
    ``solids_carry_over`` (per jar)
        For at least half of the metals measured both ways (and precipitated: dissolved below half the
        influent), total is ``carryover_ratio`` (default 3) times dissolved or more *and* the suspended part,
        (total - dissolved) / (influent - dissolved), is at least ``uncaptured_fraction`` (default 10 %) of the
        metal that left solution. A below-detection dissolved result counts at its limit (both measures are then
        lower bounds); a below-detection total is not compared.
    ``minimum_ph_differs`` (per metal)
        The observed bottom and the predicted bottom do not overlap (:func:`compare_minima`).
    ``ph_off_dose`` (per jar)
        The measured pH differs by more than ``ph_tolerance`` (default 0.5) from the pH the model's titration
        gives for the jar's reagent and dose (:func:`workbench.dose_curve`, default purity): a dosing or pH
        measurement error, an unmeasured acidity or buffer, or a reagent of another strength. Jars whose reagent
        is not one of the model's reagents are not checked.

    Returns
    -------
    pandas.DataFrame
        Columns ``flag``, ``metal`` ("" for a jar flag), ``jars`` (comma-separated ids), ``reason``; no rows when
        nothing is suspect.
    """
    far_log = _threshold(
        "far_log", far_log, 0.0, 10.0, True, "a number of log10 units above 0, up to 10 (1: ten times)"
    )
    carryover_ratio = _threshold(
        "carryover_ratio", carryover_ratio, 1.0, 1e6, False, "a ratio of total to dissolved of 1 or more"
    )
    uncaptured_fraction = _threshold(
        "uncaptured_fraction", uncaptured_fraction, 0.0, 1.0, False, "a fraction from 0 to 1"
    )
    ph_tolerance = _threshold("ph_tolerance", ph_tolerance, 0.0, 14.0, True, "pH units above 0, up to 14")
    ov = overlay(tidy, water, solids=solids, activity=activity)
    flags = _complexant_flags(ov, far_log) + _carry_over_flags(ov, carryover_ratio, uncaptured_fraction)
    flags += _dose_flags(tidy, water, ph_tolerance, solids)
    minima = compare_minima(tidy, water, solids=solids, activity=activity)
    for metal, m in minima.iterrows():
        if m["agree"] is not None and not m["agree"]:
            observed = _span(m["observed_bottom_low"], m["observed_bottom_high"])
            predicted = _span(m["predicted_bottom_low"], m["predicted_bottom_high"])
            flags.append(
                {
                    "flag": "minimum_ph_differs",
                    "metal": metal,
                    "jars": ", ".join(
                        _jars_in(ov, metal, m["observed_bottom_low"], m["observed_bottom_high"])
                    ),
                    "reason": (
                        f"{metal} dissolved is lowest near pH {observed}"
                        f" (lowest {m['residual_min_observed_mg_l']:.3g} mg/L at pH {m['ph_min_observed']:g}); the "
                        f"prediction is lowest at pH {m['ph_min_predicted']:.2f} (within 2x over pH "
                        f"{predicted}). Another solid, "
                        "co-precipitation or a complexant may control it; a solubility shift cannot move a minimum, "
                        "so choose the setpoint from the jars."
                    ),
                }
            )
    return pd.DataFrame(flags, columns=["flag", "metal", "jars", "reason"])


def _dose_flags(tidy: pd.DataFrame, water: Water, tolerance: float, solids: str) -> list[dict]:
    from workbench.treatment.dose import dose_curve
    from workbench.treatment.reagents import REAGENTS

    if water.ph is None:
        return []  # the titration starts from the measured pH of the influent
    jars = tidy.drop_duplicates("jar")[["jar", "reagent", "dose_mg_l", "pH"]]
    out = []
    for reagent, rows in jars.groupby("reagent", sort=False):
        if reagent not in REAGENTS:
            continue
        predicted = dose_curve(water, reagent, rows["dose_mg_l"].to_numpy(dtype=float), solids=solids)["pH"]
        for (_, jar), ph_model in zip(rows.iterrows(), predicted.to_numpy(), strict=True):
            if abs(jar["pH"] - ph_model) > tolerance:
                out.append(
                    {
                        "flag": "ph_off_dose",
                        "metal": "",
                        "jars": str(jar["jar"]),
                        "reason": (
                            f"jar {jar['jar']}: pH {jar['pH']:g} measured after {jar['dose_mg_l']:g} mg/L of "
                            f"{reagent}, but the titration of this influent gives pH {ph_model:.2f} for that dose: "
                            "check the dose and the pH reading, the reagent's strength, or an unmeasured acidity or "
                            "buffer in the water."
                        ),
                    }
                )
    return out


def _span(a: float, b: float) -> str:
    return f"{a:g}" if a == b else f"{a:g}-{b:g}"


def _jars_in(ov: pd.DataFrame, metal: str, lo: float, hi: float) -> list[str]:
    sel = ov[(ov["metal"] == metal) & (ov["fraction"] == "dissolved") & ov["pH"].between(lo, hi)]
    return list(dict.fromkeys(sel["jar"]))


def _complexant_flags(ov: pd.DataFrame, far_log: float) -> list[dict]:
    out = []
    diss = ov[(ov["fraction"] == "dissolved") & ov["predicted_mg_l"].notna()]
    for metal, rows in diss.groupby("metal", sort=False):
        possible = rows[rows["predicted_mg_l"] * 10.0**far_log <= rows["influent_mg_l"]]
        if len(possible) < 3 or np.ptp(possible["pH"].to_numpy(dtype=float)) < 1.0:
            continue
        far = possible[(~possible["censored"]) & (possible["log_residual"] >= far_log)]
        if len(far) < 0.75 * len(possible):
            continue
        ratio = 10.0 ** far["log_residual"]
        out.append(
            {
                "flag": "complexant_suspected",
                "metal": metal,
                "jars": ", ".join(far["jar"]),
                "reason": (
                    f"{metal} dissolved is {ratio.min():.0f}-{ratio.max():.0f} times the prediction in {len(far)} of "
                    f"{len(possible)} jars from pH {far['pH'].min():g} to {far['pH'].max():g}: a complexant (EDTA, "
                    "citrate, ammonia, ...) is suspected. Hydroxide precipitation alone will not reach the predicted "
                    "residual; the fitted shift absorbs the difference but does not explain it."
                ),
            }
        )
    return out


def _carry_over_flags(ov: pd.DataFrame, ratio_min: float, fraction_min: float) -> list[dict]:
    out = []
    known = ov[ov["influent_mg_l"].notna()]
    for jar, rows in known.groupby("jar", sort=False):
        d = rows[rows["fraction"] == "dissolved"].set_index("metal")
        t = rows[(rows["fraction"] == "total") & ~rows["censored"]].set_index("metal")
        hits, compared = [], 0
        for metal in d.index.intersection(t.index):
            diss = (
                d.at[metal, "detection_limit_mg_l"] if d.at[metal, "censored"] else d.at[metal, "value_mg_l"]
            )
            influent = d.at[metal, "influent_mg_l"]
            if diss >= 0.5 * influent:
                continue  # not precipitated: nothing to carry over
            compared += 1
            total = t.at[metal, "value_mg_l"]
            ratio = total / diss
            share = (total - diss) / (influent - diss)
            if ratio >= ratio_min and share >= fraction_min:
                shown = f"<{diss:.3g}" if d.at[metal, "censored"] else f"{diss:.3g}"
                hits.append(
                    f"{metal} total {total:.3g} vs dissolved {shown} mg/L ({ratio:.3g}x, {share:.0%})"
                )
        if compared and len(hits) >= max(1, math.ceil(compared / 2)):
            out.append(
                {
                    "flag": "solids_carry_over",
                    "metal": "",
                    "jars": str(jar),
                    "reason": (
                        f"jar {jar}: total far above dissolved for {len(hits)} of {compared} metals ("
                        + "; ".join(hits)
                        + "; % = share of the precipitated metal still in the supernatant): solids carry-over. "
                        "Improve solids capture (coagulant or polymer, longer settling) or filter; totals, not "
                        "dissolved results, will decide compliance."
                    ),
                }
            )
    return out
