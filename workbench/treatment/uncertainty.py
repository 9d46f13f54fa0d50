"""Uncertainty band: Monte Carlo over the published uncertainties of the equilibrium constants.

Every reaction row in data/thermo carries the ± its source prints (the compilations do not say uniformly whether
it is one standard deviation or a 95 % interval; it is used here as one standard deviation of a normal
distribution in log10 K). Rows without a published ± get ``default_uncertainty``. Kw (IAPWS R11-07) is held
at its value: it is known far better than any metal constant. Each sample perturbs all rows at once; the
formation constants follow through the same linear map as the nominal ones (chemistry/database.py), so a sample
is a full, consistent set of constants. Each sample's curve is solved starting from the nominal solution.
"""

from __future__ import annotations

import math
import numbers
from collections.abc import Callable, Mapping
from dataclasses import dataclass

import numpy as np
import pandas as pd

from workbench.chemistry import database, solver
from workbench.errors import InputError
from workbench.treatment.solubility import equilibrium_within_model, metal_mg_l, ph_index
from workbench.treatment.water import Water, as_array

HELD_SOURCES = ("iapws_r11_07",)
MAX_SAMPLES = 20_000
#: samples x pH points of one band: the samples' curves are kept (x metals x 8 bytes) for the quantiles
MAX_BAND_POINTS = 3_000_000
POINTS_PER_CHUNK = 20_000
PROGRESS_STEPS = 10  # a band is computed in at least this many batches (each reported to ``progress``)


@dataclass
class UncertaintyBand:
    """Result of :func:`uncertainty_band`.

    Attributes
    ----------
    nominal, lower, median, upper : pandas.DataFrame
        Dissolved metal per metal (columns) against pH (index): with the nominal constants, and the
        ``quantiles`` of the samples. [mg/L]
    quantiles : (float, float, float)
    samples, seed : int
        Recorded so that the band can be reproduced exactly.
    default_uncertainty, uncertainty_scale : float
        ± used where none is published, and the factor applied to every ±. [log10 units]
    probability_meets : pandas.Series or None
        Per metal, the fraction of samples meeting its limit at ``setpoint_ph``.
    setpoint_ph : float or None
    """

    nominal: pd.DataFrame
    lower: pd.DataFrame
    median: pd.DataFrame
    upper: pd.DataFrame
    quantiles: tuple[float, float, float]
    samples: int
    seed: int
    default_uncertainty: float
    uncertainty_scale: float
    probability_meets: pd.Series | None = None
    setpoint_ph: float | None = None


def row_uncertainty(default_uncertainty: float) -> np.ndarray:
    """± per reaction row used for sampling: the published one, else the default; Kw held. [log10 units]"""
    data = database.load()
    sigma = np.array(
        [r.uncertainty if math.isfinite(r.uncertainty) else default_uncertainty for r in data.rows]
    )
    held = np.array([r.source in HELD_SOURCES for r in data.rows])
    return np.where(held, 0.0, sigma)


def uncertainty_band(
    water: Water,
    ph,
    *,
    samples: int = 200,
    seed: int = 0,
    quantiles: tuple[float, float, float] = (0.05, 0.5, 0.95),
    default_uncertainty: float = 0.2,
    uncertainty_scale: float = 1.0,
    limits: pd.Series | None = None,
    setpoint_ph: float | None = None,
    solids: str = "fresh",
    solubility_shift=None,
    progress: Callable[[int, int], None] | None = None,
) -> UncertaintyBand:
    """Band of dissolved metal against pH from Monte Carlo samples of the constants.

    Parameters
    ----------
    water : Water
    ph : sequence of float
        pH grid. [-]
    samples : int
        Number of samples (1-20,000).
    seed : int
        Seed of the random generator; the same seed gives the same band.
    quantiles : (low, middle, high)
        Quantiles reported, e.g. (0.05, 0.5, 0.95).
    default_uncertainty : float
        ± for rows without a published one. [log10 units]
    uncertainty_scale : float
        Factor on every ± (0 gives the nominal curve with zero width). [-]
    limits : pandas.Series, optional
        Limit per metal (mg/L); with ``setpoint_ph``, the probability that each metal meets it is reported.
    setpoint_ph : float, optional
        pH at which to report that probability (added to the grid if absent).
    progress : callable(done, total), optional
        Called after each batch of samples.
    """
    samples = _int("samples", samples, 1, MAX_SAMPLES)
    seed = _int("seed", seed, 0, 2**63 - 1)
    for name, v, lo, hi in (
        ("default_uncertainty", default_uncertainty, 0.0, 5.0),
        ("uncertainty_scale", uncertainty_scale, 0.0, 10.0),
    ):
        if (
            isinstance(v, bool)
            or not isinstance(v, numbers.Real)
            or not math.isfinite(v)
            or not lo <= v <= hi
        ):
            raise InputError(name, v, f"allowed {lo:g} to {hi:g}")
    try:
        q = tuple(float(x) for x in quantiles)
    except (TypeError, ValueError):
        raise InputError(
            "quantiles", quantiles, "three increasing fractions in [0, 1], e.g. (0.05, 0.5, 0.95)"
        ) from None
    if len(q) != 3 or not 0.0 <= q[0] < q[1] < q[2] <= 1.0:
        raise InputError(
            "quantiles", quantiles, "three increasing fractions in [0, 1], e.g. (0.05, 0.5, 0.95)"
        )
    progress = check_progress(progress)
    grid = as_array(ph)
    if setpoint_ph is not None:
        if np.size(setpoint_ph) != 1:
            raise InputError("setpoint_ph", setpoint_ph, "one pH value between 0 and 14")
        grid = np.unique(np.append(grid, as_array(setpoint_ph)))
    if samples * grid.size > MAX_BAND_POINTS:
        raise InputError(
            "samples",
            samples,
            f"at most {MAX_BAND_POINTS} samples x pH points per band ({grid.size} pH points here: up to "
            f"{MAX_BAND_POINTS // grid.size} samples)",
        )
    limits = _check_band_limits(limits, water, setpoint_ph)
    asked = grid
    tab, nominal_eq, reach = equilibrium_within_model(
        water, asked, solids=solids, solubility_shift=solubility_shift
    )
    grid = asked[reach.held]  # the band stops where the model stops, as the curves do
    metals = list(water.metals_mg_l)
    nominal = pd.DataFrame(metal_mg_l(water, tab, nominal_eq), index=ph_index(grid))[metals]
    data = database.load()
    base = data.log_beta(water.temperature_c)
    shift = base[tab.solid_index] - tab.log_ks  # the calibration shift carried into every sample
    sigma = row_uncertainty(default_uncertainty) * uncertainty_scale
    rng = np.random.default_rng(seed)
    perturb = rng.standard_normal((samples, sigma.size)) * sigma  # drawn at once: chunking cannot change it
    # at most POINTS_PER_CHUNK points per solver call, and at least PROGRESS_STEPS calls so progress() moves
    per_chunk = max(1, min(POINTS_PER_CHUNK // grid.size, -(-samples // PROGRESS_STEPS)))
    out = np.empty((samples, grid.size, len(metals)))
    for start in range(0, samples, per_chunk):
        stop = min(samples, start + per_chunk)
        k = stop - start
        log_beta = data.log_beta(water.temperature_c, row_shift=perturb[start:stop])
        log_k = np.repeat(log_beta[:, tab.species_index], grid.size, axis=0)
        log_ks = np.repeat(log_beta[:, tab.solid_index] - shift, grid.size, axis=0)
        first = solver.StartRows(nominal_eq, np.tile(np.arange(grid.size), k))
        eq = solver.solve(tab, first.totals, np.tile(grid, k), log_k=log_k, log_ks=log_ks, start=first)
        values = metal_mg_l(water, tab, eq)
        out[start:stop] = np.stack([values[m].reshape(k, grid.size) for m in metals], axis=2)
        if progress is not None:
            progress(stop, samples)
    qs = np.quantile(out, q, axis=0)
    whole = ph_index(asked)
    frames = [pd.DataFrame(qs[i], index=nominal.index, columns=metals).reindex(whole) for i in range(3)]
    prob = None
    if limits is not None and np.isclose(grid, float(setpoint_ph)).any():  # limits come with a setpoint
        i = int(np.flatnonzero(np.isclose(grid, float(setpoint_ph)))[0])
        prob = pd.Series(
            {
                m: float((out[:, i, j] <= float(limits[m])).mean())
                for j, m in enumerate(metals)
                if m in limits.index
            },
            name="probability_meets",
        )
    return UncertaintyBand(
        nominal.reindex(whole),
        frames[0],
        frames[1],
        frames[2],
        q,
        samples,
        seed,
        float(default_uncertainty),
        float(uncertainty_scale),
        prob,
        None if setpoint_ph is None else float(setpoint_ph),
    )


def check_progress(progress):
    """``progress`` as given when it is None or callable as progress(done, total)."""
    if progress is not None and not callable(progress):
        raise InputError("progress", progress, "a function progress(done, total), or None")
    return progress


def _check_band_limits(limits, water: Water, setpoint_ph) -> pd.Series | None:
    """The limits as a Series of positive finite mg/L for metals of the water (each named in a refusal)."""
    if limits is None:
        return None
    if not isinstance(limits, pd.Series | Mapping):
        raise InputError("limits", type(limits).__name__, "a mapping (or Series) of metal key to mg/L")
    if setpoint_ph is None:
        raise InputError("setpoint_ph", None, "a pH is required with limits: the probability is taken there")
    items = dict(limits.items())
    if not items:
        raise InputError("limits", items, "at least one metal's limit, or None")
    for metal, value in items.items():
        if metal not in water.metals_mg_l:
            known = ", ".join(water.metals_mg_l) or "none"
            raise InputError("limits", metal, f"a limit for a metal of this water (its metals: {known})")
        if isinstance(value, bool) or not isinstance(value, numbers.Real) or not (math.isfinite(value) and value > 0):
            raise InputError(f"limits[{metal!r}]", value, "a positive number of mg/L")
    return pd.Series(items, dtype=float)


def _int(name, value, lo, hi) -> int:
    if isinstance(value, bool) or not isinstance(value, numbers.Integral) or not lo <= value <= hi:
        raise InputError(name, value, f"an integer from {lo} to {hi}")
    return int(value)
