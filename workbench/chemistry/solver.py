"""Equilibrium solver: Newton-Raphson in log10 concentrations with an active set of solids.

Unknowns per point: the log10 free concentration X_j of every component (H+ included) and the amount n_s of every
candidate solid (mol/L; zero and inert while the solid is absent). Equations per point:

* mass balance of each component except H+, scaled by its total:
  ``(sum_i a_ij c_i + sum_s b_sj n_s - T_j) / T_j = 0``;
* for H+ either a fixed pH (``X_H + log10 gamma_H = -pH``, fixed-pH mode) or electroneutrality
  ``sum_i z_i c_i = 0`` (charge-balance mode, used when a dose sets the pH);
* for each solid present, saturation ``SI_s = log_ks_s + sum_j b_sj log10 a_j = 0``; for each absent solid ``n_s = 0``.

Species concentrations follow from the mass-action law,
``log10 c_i = log_k_i + sum_j a_ij (X_j + log10 gamma_j) - log10 gamma_i``, with Davies activity coefficients
recomputed from the ionic strength at every iteration. In fixed-pH mode the strong acid or base that holds the pH
is counted in the ionic strength as a monovalent counter-ion.

All points are solved at once (numpy batches, no Python loop over points). The active set changes between Newton
passes: solids whose amount is negative leave, and, per point, the most supersaturated solids enter (at most one per
component per pass). The result is verified before it is returned: mass balance closes, absent solids are not
supersaturated, present solids are saturated and have positive amounts, and nothing is NaN; otherwise
:class:`~workbench.errors.ConvergenceError` names the points that failed.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from workbench.chemistry import water_properties as wp
from workbench.chemistry.tableau import Tableau
from workbench.errors import ConvergenceError

LN10 = np.log(10.0)
ABSENT = -400.0  # log10 concentration used for a component whose total is zero
ACTIVITY_MODELS = ("davies", "ideal")
TOL_RESIDUAL = 1e-12  # scaled residual at which a Newton pass has converged
TOL_SATURATION = 1e-9  # SI above which an absent solid is taken as supersaturated
TOL_MASS = 1e-10  # verified relative mass-balance error
MAX_STEP_LOG = 2.0  # largest change of any species' log10 concentration in one Newton step
MAX_ITER = 200
MAX_ROUNDS = 60


@dataclass
class Equilibrium:
    """Solution at N points (arrays over points first).

    Attributes
    ----------
    tableau : Tableau
    log_free : ndarray (N, m)
        log10 free concentration of each component (H+ included). [log10 mol/L]
    conc : ndarray (N, n)
        Species concentrations. [mol/L]
    log_gamma : ndarray (N, n)
        log10 activity coefficients of the species.
    solid_amount : ndarray (N, s)
        Amount of each solid formed, zero when absent. [mol/L]
    saturation_index : ndarray (N, s)
        log10 (ion activity product / solubility product) of each candidate solid.
    ionic_strength : ndarray (N,)
        [mol/L]
    ph : ndarray (N,)
        -log10 hydrogen-ion activity.
    strong_base : ndarray (N,)
        Strong base (positive, eq/L) or acid (negative) that holds the pH in fixed-pH mode; zero in
        charge-balance mode. [eq/L]
    totals : ndarray (N, m)
        Component totals used. [mol/L]
    """

    tableau: Tableau
    log_free: np.ndarray
    conc: np.ndarray
    log_gamma: np.ndarray
    solid_amount: np.ndarray
    saturation_index: np.ndarray
    ionic_strength: np.ndarray
    ph: np.ndarray
    strong_base: np.ndarray
    totals: np.ndarray

    def dissolved(self) -> np.ndarray:
        """Total dissolved amount of each component (H+ column meaningless). [mol/L]"""
        return self.conc @ self.tableau.a


def solve(
    tab: Tableau,
    totals: np.ndarray,
    ph: np.ndarray | None = None,
    *,
    activity: str = "davies",
    ph_guess: np.ndarray | float = 7.0,
) -> Equilibrium:
    """Solve the equilibrium at N points.

    Parameters
    ----------
    tab : Tableau
        System (components, species, solids, constants at temperature).
    totals : ndarray (m,) or (N, m)
        Total of each component; the H+ column is ignored. [mol/L]
    ph : ndarray (N,) or float, optional
        Fixed pH (fixed-pH mode). When None, the pH follows from electroneutrality (charge-balance mode).
    activity : {"davies", "ideal"}
        Activity model.
    ph_guess : float or ndarray
        Starting pH in charge-balance mode.

    Returns
    -------
    Equilibrium

    Raises
    ------
    ConvergenceError
        If any point fails to converge or fails verification.
    """
    if activity not in ACTIVITY_MODELS:
        raise ValueError(f"activity: got {activity!r}; allowed {ACTIVITY_MODELS}")
    fixed = ph is not None
    totals = np.atleast_2d(np.asarray(totals, dtype=float))
    n_pts = totals.shape[0] if not fixed else max(totals.shape[0], np.size(ph))
    if fixed:
        ph_arr = np.broadcast_to(np.asarray(ph, dtype=float), (n_pts,)).copy()
    totals = np.broadcast_to(totals, (n_pts, len(tab.components))).copy()
    state = _State(tab, totals, ph_arr if fixed else None, activity)
    state.initial_guess(np.broadcast_to(np.asarray(ph_guess, float), (n_pts,)))
    todo = np.arange(n_pts)
    for _ in range(MAX_ROUNDS):
        state.newton(todo)
        changed = state.update_active_set(todo)
        todo = todo[changed]
        if todo.size == 0:
            break
    else:
        state.fail(todo, "the set of solids did not settle")
    return state.finish()


class _State:
    """Working arrays of one solve (internal)."""

    def __init__(self, tab: Tableau, totals: np.ndarray, ph: np.ndarray | None, activity: str):
        self.tab = tab
        self.t = totals
        self.ph = ph
        self.ideal = activity == "ideal"
        n_pts, m = totals.shape
        s = len(tab.solids)
        self.m, self.s = m, s
        self.present = totals > 0
        self.present[:, 0] = True
        self.x = np.zeros((n_pts, m))
        self.n = np.zeros((n_pts, s))
        self.active = np.zeros((n_pts, s), bool)
        self.ionic = np.zeros(n_pts)
        self.comp_species = np.array([tab.species.index(c) for c in tab.components])
        self.abs_z = np.abs(tab.z)
        # a solid can only form at a point where all its components are present
        self.possible = ~((np.abs(tab.b[None, :, 1:]) > 0) & ~self.present[:, None, 1:]).any(axis=2)
        self.weight = np.maximum(1.0, np.abs(tab.b[:, 1:]).sum(axis=1))

    # ------------------------------------------------------------------ pieces of the model
    def _lg(self, idx):
        """log10 activity coefficients of the species at the current ionic strength (Davies)."""
        if self.ideal:
            return np.zeros((idx.size, len(self.tab.species)))
        return wp.davies_log_gamma(self.tab.z[None, :], self.ionic[idx, None], self.tab.davies_a)

    def _dlg_di(self, idx):
        """d log10 gamma / dI of the species (Davies)."""
        if self.ideal:
            return np.zeros((idx.size, len(self.tab.species)))
        root = np.sqrt(np.maximum(self.ionic[idx], 1e-14))
        dd = 1.0 / (2.0 * root * (1.0 + root) ** 2) - 0.3
        return -self.tab.davies_a * self.tab.z[None, :] ** 2 * dd[:, None]

    def _conc(self, idx, lg=None):
        tab = self.tab
        lg = self._lg(idx) if lg is None else lg
        logc = tab.log_k + (self.x[idx] + lg[:, self.comp_species]) @ tab.a.T - lg
        return np.power(10.0, np.minimum(logc, 300.0))

    def _si(self, idx, lg=None):
        lg = self._lg(idx) if lg is None else lg
        return self.tab.log_ks + (self.x[idx] + lg[:, self.comp_species]) @ self.tab.b.T

    def _ionic_of(self, c):
        tab = self.tab
        ionic = 0.5 * (c @ tab.z**2)
        if self.ph is not None:
            ionic = ionic + 0.5 * np.abs(c @ tab.z)  # counter-ion of the acid/base holding the pH
        return ionic

    # ------------------------------------------------------------------ start
    def initial_guess(self, ph_guess):
        """Start near the mass balances: per-component Newton steps in the log domain (no overflow)."""
        tab = self.tab
        pos = self.present[:, 1:]
        self.x[:, 1:] = np.where(pos, np.log10(np.where(pos, self.t[:, 1:], 1.0)), ABSENT)
        self.x[:, 0] = -(self.ph if self.ph is not None else ph_guess)
        a = np.clip(tab.a[:, 1:], 0.0, None)
        with np.errstate(divide="ignore"):
            log_a = np.where(a > 0, np.log10(np.where(a > 0, a, 1.0)), -np.inf)  # (n, m-1)
        log_t = np.log10(np.where(pos, self.t[:, 1:], 1.0))
        for _ in range(60):
            logc = tab.log_k + self.x @ tab.a.T  # ideal, without activity coefficients
            s1 = _log_sum(logc[:, :, None] + log_a[None])  # log10 sum_i a_ij c_i
            s2 = _log_sum(logc[:, :, None] + 2.0 * log_a[None])  # log10 sum_i a_ij^2 c_i
            order = np.power(10.0, s2 - s1)  # d log S_j / d x_j
            step = np.where(pos, (log_t - s1) / order, 0.0)
            self.x[:, 1:] += np.clip(step, -50.0, 50.0)
            if np.abs(step).max(initial=0.0) < 1e-3:
                break
        if not self.ideal:
            idx = np.arange(self.t.shape[0])
            self.ionic = self._ionic_of(self._conc(idx))

    # ------------------------------------------------------------------ Newton passes
    def _residual(self, idx):
        """Scaled residuals only (for the line search)."""
        return self._residual_jacobian(idx, jacobian=False)[0]

    def _residual_jacobian(self, idx, jacobian=True):
        """Scaled residuals and Jacobian; unknowns are [X (m), n (s), I]."""
        tab, m, s = self.tab, self.m, self.s
        k = idx.size
        lg = self._lg(idx)
        dlg = self._dlg_di(idx)
        c = self._conc(idx, lg)
        g = dlg[:, self.comp_species] @ tab.a.T - dlg  # d log10 c_i / dI
        t = np.where(self.present[idx], self.t[idx], 1.0)
        act = self.active[idx]
        n = np.where(act, self.n[idx], 0.0)
        u = m + s + 1
        f = np.zeros((k, u))
        tot = c @ tab.a + n @ tab.b
        f[:, 1:m] = (tot[:, 1:] - t[:, 1:]) / t[:, 1:]
        h = self.comp_species[0]
        if self.ph is not None:
            f[:, 0] = self.x[idx, 0] + lg[:, h] + self.ph[idx]
        else:
            f[:, 0] = (c @ tab.z) / (c @ self.abs_z)
        si = self._si(idx, lg)
        f[:, m : m + s] = np.where(act, si, self.n[idx])
        if not self.ideal:
            ionic = self._ionic_of(c)
            f[:, -1] = (ionic - self.ionic[idx]) / np.maximum(ionic, 1e-12)
        absent = ~self.present[idx]
        f[:, :m][absent] = 0.0
        if not jacobian:
            return f, None
        jac = np.zeros((k, u, u))
        ca = c[:, :, None] * tab.a[None, :, :]  # (k, n, m)
        cg = LN10 * c * g  # d c_i / dI
        # mass balances
        jac[:, 1:m, :m] = LN10 * np.einsum("ij,pik->pjk", tab.a[:, 1:], ca) / t[:, 1:, None]
        jac[:, 1:m, m : m + s] = (tab.b[:, 1:].T[None, :, :] * act[:, None, :]) / t[:, 1:, None]
        jac[:, 1:m, -1] = (cg @ tab.a[:, 1:]) / t[:, 1:]
        # H+: fixed pH or electroneutrality
        if self.ph is not None:
            jac[:, 0, 0] = 1.0
            jac[:, 0, -1] = dlg[:, h]
        else:
            scale = c @ self.abs_z
            jac[:, 0, :m] = LN10 * np.einsum("i,pik->pk", tab.z, ca) / scale[:, None]
            jac[:, 0, -1] = (cg @ tab.z) / scale
        # absent components keep their value
        if absent.any():
            rows = np.nonzero(absent)
            jac[rows[0], rows[1], :] = 0.0
            jac[rows[0], rows[1], rows[1]] = 1.0
        # solids
        jac[:, m : m + s, :m] = np.where(act[:, :, None], tab.b[None, :, :], 0.0)
        jac[:, m : m + s, -1] = np.where(act, dlg[:, self.comp_species] @ tab.b.T, 0.0)
        diag = np.arange(s)
        jac[:, m + diag, m + diag] = np.where(act, 0.0, 1.0)
        # ionic strength
        if self.ideal:
            jac[:, -1, -1] = 1.0
        else:
            z2 = 0.5 * tab.z**2
            ionic = c @ z2
            d_ionic = LN10 * np.einsum("i,pik->pk", z2, ca)
            d_ionic_di = cg @ z2
            if self.ph is not None:
                charge = c @ tab.z
                sign = np.sign(charge)[:, None]
                ionic = ionic + 0.5 * np.abs(charge)
                d_ionic = d_ionic + 0.5 * sign * LN10 * np.einsum("i,pik->pk", tab.z, ca)
                d_ionic_di = d_ionic_di + 0.5 * sign[:, 0] * (cg @ tab.z)
            iscale = np.maximum(ionic, 1e-12)
            jac[:, -1, :m] = d_ionic / iscale[:, None]
            jac[:, -1, -1] = (d_ionic_di - 1.0) / iscale
        return f, jac

    def newton(self, idx):
        """Damped Newton passes with a backtracking line search on the residual norm."""
        m, s = self.m, self.s
        pending = idx.copy()
        for _ in range(MAX_ITER):
            if pending.size == 0:
                return
            f, jac = self._residual_jacobian(pending)
            norm0 = np.abs(f).max(axis=1)
            done = norm0 < TOL_RESIDUAL
            if done.all():
                return
            pending, f, jac, norm0 = pending[~done], f[~done], jac[~done], norm0[~done]
            step = _solve_batch(jac, -f)
            dx = step[:, :m]
            dlogc = np.abs(dx @ self.tab.a.T).max(axis=1)
            lam = np.minimum(1.0, MAX_STEP_LOG / np.maximum(dlogc, 1e-300))
            di = step[:, -1]
            ionic = self.ionic[pending]
            low = ionic + lam * di < 0.1 * ionic
            lam = np.where(low, np.minimum(lam, 0.9 * ionic / np.maximum(-di, 1e-300)), lam)
            x0, n0 = self.x[pending].copy(), self.n[pending].copy()
            trial = np.ones(pending.size, bool)
            for _ls in range(12):
                sub = pending[trial]
                self.x[sub] = x0[trial] + lam[trial, None] * dx[trial]
                self.n[sub] = n0[trial] + lam[trial, None] * step[trial, m : m + s]
                if not self.ideal:
                    self.ionic[sub] = ionic[trial] + lam[trial] * di[trial]
                norm = np.abs(self._residual(sub)).max(axis=1)
                ok = np.isfinite(norm) & (norm <= (1.0 - 1e-4 * lam[trial]) * norm0[trial])
                still = np.flatnonzero(trial)[~ok]
                if still.size == 0:
                    break
                trial[:] = False
                trial[still] = True
                lam[still] *= 0.5
        self.fail(pending, "Newton iterations did not converge")

    def update_active_set(self, idx) -> np.ndarray:
        """Drop solids with negative amounts; add supersaturated ones. Returns which points changed."""
        act = self.active[idx]
        n = self.n[idx]
        drop = act & (n < 0.0)
        changed = drop.any(axis=1)
        act = act & ~drop
        si = self._si(idx)
        cand = ~act & self.possible[idx] & (si > TOL_SATURATION) & ~changed[:, None]
        if cand.any():
            score = np.where(cand, si / self.weight, -np.inf)
            order = np.argsort(-score, axis=1)
            claimed = np.zeros((idx.size, self.m - 1), bool)
            uses = np.abs(self.tab.b[:, 1:]) > 0  # (s, m-1)
            rows = np.arange(idx.size)
            added = np.zeros_like(act)
            for r in range(self.s):
                k = order[:, r]
                ok = cand[rows, k] & ~(claimed & uses[k]).any(axis=1)
                act[rows[ok], k[ok]] = True
                added[rows[ok], k[ok]] = True
                claimed[ok] |= uses[k[ok]]
                changed |= ok
        self.active[idx] = act
        self.n[idx] = np.where(act, np.maximum(self.n[idx], 0.0), 0.0)
        if cand.any():
            self._warm_start(idx, added, si)
        return changed

    def _warm_start(self, idx, added, si):
        """Start each newly added solid at saturation: lower its limiting component's free concentration by
        SI / b and give the solid what that removes from solution."""
        tab = self.tab
        b = np.clip(tab.b[:, 1:], 0.0, None)
        p, k = np.nonzero(added)
        ratio = np.where(b[k] > 0, self.t[idx[p], 1:] / np.where(b[k] > 0, b[k], 1.0), np.inf)
        keep = np.isfinite(ratio).any(axis=1)
        p, k, j = p[keep], k[keep], np.argmin(ratio[keep], axis=1)
        before = (self._conc(idx) @ tab.a)[p, j + 1]
        self.x[idx[p], j + 1] -= si[p, k] / b[k, j]
        after = (self._conc(idx) @ tab.a)[p, j + 1]
        self.n[idx[p], k] = np.maximum(before - after, 0.0) / b[k, j]

    # ------------------------------------------------------------------ result
    def fail(self, idx, why):
        where = self.ph[idx] if self.ph is not None else idx
        label = "pH" if self.ph is not None else "point"
        shown = ", ".join(f"{v:.3g}" for v in np.asarray(where)[:8])
        raise ConvergenceError(f"equilibrium solver: {why} at {idx.size} point(s) ({label} {shown})")

    def finish(self) -> Equilibrium:
        tab = self.tab
        idx = np.arange(self.t.shape[0])
        lg = self._lg(idx)
        c = self._conc(idx, lg)
        si = self._si(idx, lg)
        n = np.where(self.active, self.n, 0.0)
        tot = c @ tab.a + n @ tab.b
        rel = np.where(
            self.present[:, 1:],
            np.abs(tot[:, 1:] - self.t[:, 1:]) / np.where(self.present[:, 1:], self.t[:, 1:], 1.0),
            0.0,
        )
        bad = (
            (rel.max(axis=1, initial=0.0) > TOL_MASS)
            | ((si > 1e-7) & ~self.active & self.possible).any(axis=1)
            | ((np.abs(si) > 1e-7) & self.active).any(axis=1)
            | (n < 0).any(axis=1)
            | ~np.isfinite(c).all(axis=1)
        )
        if bad.any():
            self.fail(np.flatnonzero(bad), "the solution failed verification")
        ionic = 0.5 * (c @ tab.z**2)
        charge = c @ tab.z
        if self.ph is not None:
            ionic = ionic + 0.5 * np.abs(charge)
        ph = -(self.x[:, 0] + lg[:, self.comp_species[0]])
        return Equilibrium(
            tableau=tab,
            log_free=self.x.copy(),
            conc=c,
            log_gamma=lg,
            solid_amount=n,
            saturation_index=si,
            ionic_strength=ionic,
            ph=ph,
            strong_base=-charge if self.ph is not None else np.zeros_like(charge),
            totals=self.t,
        )


def _log_sum(values: np.ndarray) -> np.ndarray:
    """log10 of the sum of 10**values over axis 1 (species), without overflow."""
    top = values.max(axis=1)
    safe = np.where(np.isfinite(top), top, 0.0)
    return safe + np.log10(np.power(10.0, values - safe[:, None, :]).sum(axis=1))


def _solve_batch(jac: np.ndarray, rhs: np.ndarray) -> np.ndarray:
    """Solve J x = rhs for every point; singular points fall back to least squares."""
    try:
        return np.linalg.solve(jac, rhs[..., None])[..., 0]
    except np.linalg.LinAlgError:
        out = np.empty_like(rhs)
        for p in range(jac.shape[0]):  # rare fallback only
            out[p] = np.linalg.lstsq(jac[p], rhs[p], rcond=None)[0]
        return out
