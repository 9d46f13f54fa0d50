"""Equilibrium of a water open to a gas of fixed CO2 partial pressure (an aerated reactor).

Method: a change of basis, solved by the same engines in one call
------------------------------------------------------------------
In a closed system carbonate is a component, ``CO3^2-``, with a fixed total. In a system open to a gas phase of
fixed CO2 partial pressure the total is free and the activity of dissolved CO2 is fixed instead (Henry's law):

.. math::

    \\{H_2CO_3^*\\} = K_H \\, p_{CO_2}, \\qquad
    \\{CO_3^{2-}\\}\\{H^+\\}^2 = K_H \\, p_{CO_2} / \\beta_{H_2CO_3}

where :math:`\\beta_{H_2CO_3}` is the tableau's formation constant of :math:`H_2CO_3^*` from
:math:`CO_3^{2-} + 2 H^+` (Stumm & Morgan, *Aquatic Chemistry*, 3rd ed. 1996, ch. 4, the open system). So
every species or solid holding n carbonate can be written from the other components with the carbonate replaced
by ``CO2(g) + H2O - 2 H+`` at fixed CO2(g): its carbonate coefficient becomes 0, its H+ coefficient falls by 2n
and its formation constant rises by n (log K_H + log pCO2 - log beta_H2CO3). The carbonate component leaves the
tableau (its total is whatever the gas supplies), the charges of all species stay as they are, so charge-balance
mode (the pH from electroneutrality) and fixed-pH mode work unchanged; H2CO3* itself, now a constant
(K_H pCO2), leaves the species list. The transformed system is solved by :func:`workbench.chemistry.solver.solve`
in **one call** over all points, at the cost of a closed solve (no outer iteration on the total carbonate).

The answer is then written back in the closed tableau's terms (its components, species and solids, with the
carbonate total that the gas has supplied at each point, dissolved plus in solids), so that every caller reads
it like a closed result, and **verified** there with the closed tableau's own constants:

* the CO2 condition: log10 of the H2CO3* activity recomputed from the free carbonate and H+ activities with the
  closed tableau's beta equals log10(K_H pCO2) to ``TOL_CO2_LOG`` (1e-9 log units);
* every species' concentration recomputed from the closed tableau agrees with the transformed solve to
  ``TOL_CO2_LOG`` (log units), so the mass balances of the closed tableau close as the solver verified them.

Henry's constant is the ``CO2(g)`` row of data/thermo/gases.csv at the tableau's temperature (Plummer &
Busenberg 1982), on the molal scale as published, used for mol/L as everywhere in this model (dilute water).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from workbench.chemistry import database, solver
from workbench.chemistry.equations import Equilibrium, component_rows
from workbench.chemistry.tableau import Tableau
from workbench.errors import ConvergenceError

CARBONATE = "CO3^2-"
DISSOLVED_CO2 = "H2CO3"  # the species H2CO3* (CO2(aq) + H2CO3) in data/thermo/aqueous.csv
UNDERFLOW_LOG = -280.0  # species below this (log10 mol/L) are zero in floating point and not compared
TOL_CO2_LOG = 1e-9  # verified: |log10 {H2CO3*} - log10 (K_H pCO2)| and species agreement [log10 units]


def henry_log_k(temperature_c: float) -> float:
    """log10 K_H of CO2(g) + H2O = H2CO3* at a temperature (data/thermo/gases.csv). [log10 mol/(L atm)]"""
    data = database.load()
    row = next(i for i, r in enumerate(data.rows) if r.name == "CO2(g)" and r.table == "gases")
    return float(data.row_log_k(temperature_c)[row])


@dataclass(frozen=True)
class OpenTableau:
    """A closed tableau rewritten for a fixed CO2 partial pressure (internal to this module and its tests)."""

    closed: Tableau
    open: Tableau
    carbonate: int  # column of CO3^2- in the closed tableau
    kept: np.ndarray  # closed species kept in the open tableau (in order)
    dropped: np.ndarray  # closed species with no component left (H2CO3*)
    log_shift: float  # log K_H + log pCO2 - log beta_H2CO3 = log ({CO3^2-}{H+}^2) [log10]


_CACHE: dict = {}
_CACHE_SIZE = 16


def open_tableau(tab: Tableau, log_pco2: float, log_kh: float) -> OpenTableau:
    """The tableau ``tab`` (which must hold CO3^2-) with carbonate exchanged with a gas at log10 pCO2 [atm].

    The last few are kept (a tableau is immutable), so that the solver's per-tableau arrays are made once.

    Parameters
    ----------
    tab : Tableau
        The closed system, with ``CO3^2-`` among its components.
    log_pco2 : float
        log10 of the CO2 partial pressure. [log10 atm]
    log_kh : float
        log10 Henry constant of CO2 at the tableau's temperature (:func:`henry_log_k`). [log10 mol/(L atm)]
    """
    key = (id(tab), float(log_pco2), float(log_kh))
    hit = _CACHE.get(key)
    if hit is not None and hit.closed is tab:
        return hit
    if len(_CACHE) >= _CACHE_SIZE:
        _CACHE.pop(next(iter(_CACHE)))
    _CACHE[key] = made = _open_tableau(tab, log_pco2, log_kh)
    return made


def _open_tableau(tab: Tableau, log_pco2: float, log_kh: float) -> OpenTableau:
    j = tab.component(CARBONATE)
    log_beta_co2 = float(tab.log_k[tab.species.index(DISSOLVED_CO2)])
    shift = float(log_kh + log_pco2 - log_beta_co2)
    keep_cols = np.array([k for k in range(len(tab.components)) if k != j])
    n_sp = tab.a[:, j]
    a = tab.a.copy()
    a[:, 0] -= 2.0 * n_sp  # CO3^2- = CO2(g) + H2O - 2 H+
    log_k = tab.log_k + n_sp * shift
    n_so = tab.b[:, j]
    b = tab.b.copy()
    b[:, 0] -= 2.0 * n_so
    log_ks = tab.log_ks + n_so * shift
    a, b = a[:, keep_cols], b[:, keep_cols]
    empty = ~(np.abs(a) > 0).any(axis=1)
    kept, dropped = np.flatnonzero(~empty), np.flatnonzero(empty)
    opened = Tableau(
        components=tuple(tab.components[k] for k in keep_cols),
        species=tuple(tab.species[i] for i in kept),
        a=a[kept],
        log_k=log_k[kept],
        z=tab.z[kept],
        solids=tab.solids,
        b=b,
        log_ks=log_ks,
        temperature_c=tab.temperature_c,
        davies_a=tab.davies_a,
        species_index=tab.species_index[kept],
        solid_index=tab.solid_index,
        component_index=tab.component_index[keep_cols],
    )
    return OpenTableau(tab, opened, j, kept, dropped, shift)


def solve(
    tab: Tableau,
    totals: np.ndarray,
    ph: np.ndarray | None = None,
    *,
    log_pco2: float,
    log_kh: float,
    activity: str = "davies",
    ph_guess: np.ndarray | float = 7.0,
    engine: str = "compiled",
) -> Equilibrium:
    """Equilibrium at N points of a water open to CO2 at ``log_pco2``, in the closed tableau's terms.

    Parameters
    ----------
    tab : Tableau
        The closed system; it must hold ``CO3^2-`` (with a total of 0 if the water has none).
    totals : ndarray (m,) or (N, m)
        Component totals of the closed tableau; the CO3^2- and H+ columns are ignored (the gas sets the one,
        electroneutrality or the fixed pH the other). [mol/L]
    ph : ndarray (N,) or float, optional
        Fixed pH; None: charge-balance mode.
    log_pco2, log_kh : float
        As for :func:`open_tableau`.
    activity, ph_guess, engine
        As for :func:`workbench.chemistry.solver.solve`.

    Returns
    -------
    Equilibrium
        Over the closed tableau: ``totals[:, CO3^2-]`` is the carbonate the water holds at each point (dissolved
        plus in solids); everything else as from a closed solve. [mol/L]

    Raises
    ------
    ConvergenceError
        A point that fails the solver's verification or the CO2 condition.
    """
    ot = open_tableau(tab, log_pco2, log_kh)
    totals = np.atleast_2d(np.asarray(totals, dtype=float))
    keep_cols = [k for k in range(len(tab.components)) if k != ot.carbonate]
    eq = solver.solve(ot.open, totals[:, keep_cols], ph, activity=activity, ph_guess=ph_guess, engine=engine)
    return _closed_terms(ot, eq, log_pco2, log_kh)


def _closed_terms(ot: OpenTableau, eq: Equilibrium, log_pco2: float, log_kh: float) -> Equilibrium:
    """The open solution written over the closed tableau, and verified there."""
    tab, j = ot.closed, ot.carbonate
    n = eq.ph.shape[0]
    log_gamma = np.zeros((n, len(tab.species)))
    log_gamma[:, ot.kept] = eq.log_gamma
    conc = np.zeros((n, len(tab.species)))
    conc[:, ot.kept] = eq.conc
    # species without a component left (H2CO3*): neutral, activity coefficient 1 in this model's Davies equation
    conc[:, ot.dropped] = 10.0 ** (tab.log_k[ot.dropped] + tab.a[ot.dropped, j] * ot.log_shift)[None, :]
    log_free = np.empty((n, len(tab.components)))
    keep_cols = [k for k in range(len(tab.components)) if k != j]
    log_free[:, keep_cols] = eq.log_free
    log_free[:, j] = np.log10(conc[:, tab.species.index(CARBONATE)])
    dissolved = conc @ tab.a
    totals = np.empty((n, len(tab.components)))
    totals[:, keep_cols] = eq.totals
    totals[:, j] = dissolved[:, j] + eq.solid_amount @ tab.b[:, j]
    closed = Equilibrium(
        tableau=tab,
        log_free=log_free,
        conc=conc,
        log_gamma=log_gamma,
        solid_amount=eq.solid_amount,
        saturation_index=eq.saturation_index,
        ionic_strength=eq.ionic_strength,
        ph=eq.ph,
        strong_base=eq.strong_base,
        totals=totals,
        dissolved_totals=dissolved,
    )
    _verify(closed, log_pco2, log_kh)
    return closed


def co2_activity_log(eq: Equilibrium) -> np.ndarray:
    """log10 activity of H2CO3* at each point, from the free CO3^2- and H+ activities and the tableau's own
    formation constant of H2CO3* (for a closed or an open result). [log10]"""
    tab = eq.tableau
    h, c = tab.species.index("H+"), tab.species.index(CARBONATE)
    log_beta = tab.log_k[tab.species.index(DISSOLVED_CO2)]
    with np.errstate(divide="ignore"):
        log_c = np.log10(eq.conc[:, c]) + eq.log_gamma[:, c]
        log_h = np.log10(eq.conc[:, h]) + eq.log_gamma[:, h]
    return log_beta + log_c + 2.0 * log_h


def _verify(eq: Equilibrium, log_pco2: float, log_kh: float) -> None:
    """The CO2 condition and the species recomputed with the closed tableau's constants (TOL_CO2_LOG)."""
    tab = eq.tableau
    co2_gap = np.abs(co2_activity_log(eq) - (log_kh + log_pco2))
    log_free_activity = eq.log_free + eq.log_gamma[:, component_rows(tab)]
    log_c = tab.log_k[None, :] + log_free_activity @ tab.a.T - eq.log_gamma
    with np.errstate(divide="ignore"):
        log_conc = np.log10(eq.conc)
    counted = log_c > UNDERFLOW_LOG  # species of an absent component are 0 in both
    species_gap = np.where(counted, np.abs(log_c - log_conc), 0.0).max(axis=1, initial=0.0)
    bad = ~(co2_gap <= TOL_CO2_LOG) | ~(species_gap <= TOL_CO2_LOG)
    if bad.any():
        k = int(np.flatnonzero(bad)[0])
        raise ConvergenceError(
            f"open-system solve failed its CO2 check at {int(bad.sum())} point(s), e.g. pH {eq.ph[k]:.3g}: "
            f"CO2 activity off by {co2_gap[k]:.2g} log units, species by {species_gap[k]:.2g}"
        )
