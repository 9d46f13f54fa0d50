"""The numpy engine: all points of a solve at once, in numpy batches (no Python loop over points), with every
safeguard.

It solves the equations of :mod:`workbench.chemistry.equations` by alternating Newton passes at fixed activity
coefficients (the KKT system of the present solids, a backtracking line search on Phi far from the solution),
active-set updates (solids with negative amounts leave; per point, the most supersaturated solids enter, at most
one per component per pass, a degenerate set resolved by a ratio test) and ionic-strength steps (a bracketed
root search on log10 I: false position with the Illinois modification, or a Newton step from the implicit
derivative of the solution where it stays inside the bracket). Safeguards: a pass that fails just after solids
entered takes them back (they wait WAIT_PASSES passes); one that fails just after an ionic-strength step halves
that step (MAX_IONIC_HALVINGS times at most); otherwise the point starts again once from the cold initial guess;
after CYCLE_GUARD changes of a point's solids they enter one at a time. Many points without a start are solved
by continuation: a coarse subset first, then every point from its nearest solved neighbour.

It is the reference the compiled engine (:mod:`workbench.chemistry.kernel`) is tested against, and it solves
every point that engine gives up. Call it through :func:`workbench.chemistry.solver.solve` (``engine="numpy"``).
"""

from __future__ import annotations

import numpy as np

from workbench.chemistry import water_properties as wp
from workbench.chemistry.equations import (
    ABSENT,
    EARLY_DROP_ITER,
    FAR_START_LOG,
    INIT_ITER,
    LN10,
    MAX_IONIC_STRENGTH,
    MAX_STEP_LOG,
    NEAR_RESIDUAL,
    RESTORE_PH_WEIGHT,
    TOL_IONIC,
    TOL_IONIC_VERIFIED,
    TOL_MASS,
    TOL_RESIDUAL,
    TOL_SATURATION,
    TOL_STALL,
    TOL_STEP,
    VERIFY_SATURATION,
    Equilibrium,
    Problem,
    StartRows,
    charges,
)
from workbench.chemistry.tableau import Tableau
from workbench.errors import ConvergenceError, ModelRangeError

WAIT_PASSES = 3  # passes a solid waits after its entry made a Newton pass fail
CYCLE_GUARD = 6  # after this many changes of a point's solids, they enter one at a time
CYCLING_DROP_ITER = 20  # a pass at such a point stops on a negative amount after this many iterations, not 4
MAX_ITER = 100  # Newton iterations per pass
MAX_IONIC_HALVINGS = 6  # halvings of one ionic-strength step that a failed Newton pass may take
MAX_ROUNDS = 200  # passes (active-set and ionic-strength updates)
CONTINUATION_MIN_POINTS = 24


def solve(
    tab, totals, ph_arr, activity, guess, log_k, log_ks, start: Equilibrium | StartRows | None
) -> State:
    """Solve every point (totals, fixed pH or None, activity model, starting pH, per-point constants or None, a
    start or None; arrays as :func:`workbench.chemistry.solver.solve` prepares them): returns the settled working
    state, whose :meth:`State.finish` verifies it and gives the Equilibrium."""
    n_pts = totals.shape[0]
    state = State(tab, totals, ph_arr, activity, log_k, log_ks)
    if start is not None:
        state.start_from(start)
    elif n_pts <= CONTINUATION_MIN_POINTS:
        state.initial_guess(np.arange(n_pts), guess)
    else:
        # continuation: solve a few points first, then start every point from its nearest solved neighbour
        # with the same totals (its solids, ionic strength and free concentrations): a few Newton steps each
        coarse, nearest, below, above, weight = continuation_plan(
            totals, None if log_k is None else np.asarray(log_k)
        )
        state.initial_guess(coarse, guess)
        iterate(state, coarse)
        fresh = state.copy_from(nearest)
        state.blend(below, above, weight)
        if fresh.size:
            state.initial_guess(fresh, guess)
    iterate(state, np.arange(n_pts))
    return state


def continuation_plan(totals: np.ndarray, log_k: np.ndarray | None):
    """Coarse points to solve first and, for every point, the coarse point to start from. Points are grouped
    by identical totals (and constants); within a group (in the order given, e.g. along pH) every k-th point is
    coarse, and each point starts from the nearest coarse point of its own group, its free concentrations and
    ionic strength interpolated between the coarse points below and above it (returned with the weight)."""
    n_pts = totals.shape[0]
    key = totals if log_k is None or log_k.ndim < 2 else np.hstack([totals, log_k])
    _, group = np.unique(key, axis=0, return_inverse=True)
    group = group.ravel()
    order = np.argsort(group, kind="stable")
    sizes = np.bincount(group)
    starts = np.concatenate([[0], np.cumsum(sizes)[:-1]])
    rank = np.empty(n_pts, int)
    rank[order] = np.arange(n_pts) - np.repeat(starts, sizes)
    per_group = max(2, int(np.ceil(CONTINUATION_MIN_POINTS / sizes.size)))
    stride = np.maximum(1, np.ceil(sizes / per_group).astype(int))[group]
    size = sizes[group]
    last_coarse = ((size - 1) // stride) * stride
    near_rank = np.minimum(np.rint(rank / stride).astype(int) * stride, last_coarse)
    nearest = order[starts[group] + near_rank]
    low_rank = np.minimum((rank // stride) * stride, last_coarse)
    high_rank = np.minimum(low_rank + stride, last_coarse)
    below = order[starts[group] + low_rank]
    above = order[starts[group] + high_rank]
    weight = np.where(high_rank > low_rank, (rank - low_rank) / np.maximum(high_rank - low_rank, 1), 0.0)
    coarse = np.flatnonzero(rank % stride == 0)
    return coarse, nearest, below, above, weight


def iterate(state: State, todo: np.ndarray) -> None:
    """Alternate Newton passes, active-set updates and ionic-strength steps until every point has settled."""
    restarted = np.zeros(state.x.shape[0], bool)
    for _ in range(MAX_ROUNDS):
        state.restore(todo)
        stuck = state.newton(todo)
        if stuck.size:
            # a pass that fails where a solid present before the last update holds a negative amount drops that
            # solid (the most negative) and keeps the new one: the set cannot stay as it was (e.g. Fe(OH)2 added
            # beside siderite at a pH where only the hydroxide holds; taking the hydroxide back cycled)
            dropped = state.drop_negative(stuck)
            stuck = stuck[~dropped]
            # a pass that does not converge after solids were just added goes back to the set before, and
            # those solids wait a few passes; otherwise (e.g. a far neighbour's state) the point starts again
            # once from the cold initial guess, without solids; a further failure is an error
            reverted = state.revert_added(stuck)
            # a pass that fails just after an ionic-strength step goes back to the solution before it and
            # takes half that step (in log I), a few times at most, before starting cold
            halved = state.halve_ionic_step(stuck[~reverted])
            cold = stuck[~reverted][~halved]
            if restarted[cold].any():
                state.fail(cold[restarted[cold]], "Newton iterations did not converge")
            restarted[cold] = True
            state.restart(cold)
            continue
        changed = state.update_active_set(todo)
        # the solution kept before belongs to another set of solids
        state.ionic_before[todo[changed]] = np.nan
        moved = np.zeros_like(changed)
        state.remember(todo[~changed])
        moved[~changed] = state.update_ionic_strength(todo[~changed])
        state.check_range(todo)
        todo = todo[moved | changed]
        if todo.size == 0:
            return
    state.fail(todo, "the solids present and the ionic strength did not settle")


class State(Problem):
    """The numpy engine's working state of one solve: the problem's arrays and its own bookkeeping."""

    def __init__(
        self, tab: Tableau, totals: np.ndarray, ph: np.ndarray | None, activity: str, log_k=None, log_ks=None
    ):
        super().__init__(tab, totals, ph, activity, log_k, log_ks)
        n_pts, m = totals.shape
        s = len(tab.solids)
        self.bracket = np.full((5, n_pts), np.nan)  # root search on log10 I (see update_ionic_strength)
        # the settled state before the last ionic-strength step (see halve_ionic_step)
        self.x_before = np.zeros((n_pts, m))
        self.n_before = np.zeros((n_pts, s))
        self.ionic_before = np.full(n_pts, np.nan)
        self.halvings = np.zeros(n_pts, int)
        self.changes = np.zeros(n_pts, int)  # how often each point's set of solids has changed
        self.added = np.zeros((n_pts, s), bool)  # solids added at the last update
        # passes a taken-back solid waits before it may enter again
        self.waiting = np.zeros((n_pts, s), int)
        self.outer = LN10 * (tab.a[:, :, None] * tab.a[:, None, :]).reshape(len(tab.species), m * m)

    # ------------------------------------------------------------------ pieces of the model
    def _lg(self, idx):
        """log10 activity coefficients of the species at the current ionic strength (Davies)."""
        if self.ideal:
            return np.zeros((idx.size, len(self.tab.species)))
        return wp.davies_log_gamma(self.tab.z[None, :], self.ionic[idx, None], self.tab.davies_a)

    def _logc(self, idx, x, lg):
        tab = self.tab
        return self.log_k[idx] + (x + lg[:, self.comp_species]) @ tab.a.T - lg

    def _conc(self, idx, lg=None, x=None):
        lg = self._lg(idx) if lg is None else lg
        x = self.x[idx] if x is None else x
        return np.power(10.0, np.minimum(self._logc(idx, x, lg), 300.0))

    def _si(self, idx, lg=None, x=None):
        lg = self._lg(idx) if lg is None else lg
        x = self.x[idx] if x is None else x
        return self.log_ks[idx] + (x + lg[:, self.comp_species]) @ self.tab.b.T

    def _ionic_of(self, c):
        tab = self.tab
        ionic = 0.5 * (c @ tab.z**2)
        if self.ph is not None:
            ionic = ionic + 0.5 * np.abs(c @ tab.z)  # counter-ion of the acid/base holding the pH
        return ionic

    def _phi(self, idx, x, lg):
        """The convex objective (per point)."""
        c = np.power(10.0, np.minimum(self._logc(idx, x, lg), 300.0))
        xt = np.where(self.free[idx], x, 0.0)
        return c.sum(axis=1) / LN10 - (self.t[idx] * xt).sum(axis=1)

    def _hold_ph(self, idx, lg=None):
        if self.ph is not None:
            lg = self._lg(idx) if lg is None else lg
            self.x[idx, 0] = -self.ph[idx] - lg[:, self.comp_species[0]]

    # ------------------------------------------------------------------ start
    def restart(self, idx) -> None:
        """Cold start for the given points: initial guess, no solids, fresh ionic-strength search."""
        self.added[idx] = False
        self.active[idx] = False
        self.n[idx] = 0.0
        self.bracket[:, idx] = np.nan
        self.ionic_before[idx] = np.nan
        self.initial_guess(idx, -self.x[:, 0].copy() if self.ph is None else None)

    def start_from(self, eq: Equilibrium) -> None:
        """Start every point from a previous solution of the same system at the same points, the pH held."""
        super().start_from(eq)
        self._hold_ph(np.arange(self.x.shape[0]))

    def blend(self, below, above, weight) -> None:
        """Interpolate free concentrations and log ionic strength between two solved points (where both share
        the point's components); the solids stay those of the nearest point."""
        same = (self.present == self.present[below]).all(axis=1) & (self.present == self.present[above]).all(
            axis=1
        )
        p = np.flatnonzero(same & (weight > 0))
        w = weight[p][:, None]
        free = self.free[p]
        mix = (1.0 - w) * self.x[below[p]] + w * self.x[above[p]]
        self.x[p] = np.where(free, mix, self.x[p])
        if not self.ideal:
            u = (1.0 - w[:, 0]) * np.log10(self.ionic[below[p]]) + w[:, 0] * np.log10(self.ionic[above[p]])
            self.ionic[p] = 10.0**u

    def copy_from(self, source: np.ndarray) -> np.ndarray:
        """Start each point from the state of point ``source[p]`` where the components present agree; returns
        the points that could not be started so (they need their own initial guess)."""
        same = (self.present == self.present[source]).all(axis=1) & (
            self.possible == self.possible[source]
        ).all(axis=1)
        dst = np.flatnonzero(same & (source != np.arange(source.size)))
        src = source[dst]
        unmatched = np.flatnonzero(~same)
        self.x[dst, 1:] = self.x[src, 1:]
        if self.ph is None:
            self.x[dst, 0] = self.x[src, 0]
        self.n[dst] = self.n[src]
        self.active[dst] = self.active[src]
        self.ionic[dst] = self.ionic[src]
        self.ionic_before[dst] = np.nan
        return unmatched

    def initial_guess(self, idx, ph_guess):
        """Start near the mass balances: per-component Newton steps in the log domain (no overflow), ideal
        activities, no solids; then a free-ion estimate of the ionic strength."""
        tab = self.tab
        pos = self.present[idx, 1:]
        x = np.where(pos, np.log10(np.where(pos, self.t[idx, 1:], 1.0)), ABSENT)
        h = -(self.ph[idx] if self.ph is not None else ph_guess[idx])
        log_t = x.copy()
        for _ in range(INIT_ITER):
            logc = self.log_k[idx] + h[:, None] * tab.a[:, 0] + x @ tab.a[:, 1:].T
            s1 = log_sum(logc[:, :, None] + self.log_a[None])  # log10 sum_i a_ij c_i
            s2 = log_sum(logc[:, :, None] + 2.0 * self.log_a[None])  # log10 sum_i a_ij^2 c_i
            step = np.where(
                pos, (log_t - s1) / np.power(10.0, s2 - s1), 0.0
            )  # d log S_j / d x_j = 10**(s2-s1)
            x += np.clip(step, -50.0, 50.0)
            if np.abs(step).max(initial=0.0) < 0.05:
                break
        self.x[idx, 1:] = x
        self.x[idx, 0] = h
        if not self.ideal:
            z2 = charges(tab)[1:] ** 2
            conc_h = 10.0**h
            self.ionic[idx] = np.clip(0.5 * (self.t[idx, 1:] @ z2 + conc_h + 1e-14 / conc_h), 1e-7, 3.0)
        self._hold_ph(idx)

    def restore(self, idx):
        """Least-norm change of X that makes every present solid exactly saturated (constraints are linear)."""
        self._hold_ph(idx)
        act = self.active[idx]
        if not act.any():
            self._abandon_far_starts(idx)
            return
        rows = np.flatnonzero(act.any(axis=1))
        sub = idx[rows]
        act = act[rows]
        sane = ~self._far(sub)
        before = self.x[sub]
        si = np.where(act, self._si(sub), 0.0)
        bf = np.where(act[:, :, None] & self.free[sub][:, None, :], self.tab.b[None], 0.0)  # (k, s, m)
        # weighted least norm: moving the pH (charge-balance mode) to saturate a solid is a last resort
        inv_w = np.ones(self.m)
        inv_w[0] = RESTORE_PH_WEIGHT
        gram = (bf * inv_w) @ bf.transpose(0, 2, 1)
        gram[:, np.arange(self.s), np.arange(self.s)] += np.where(act, 0.0, 1.0)
        y = solve_batch(gram, si)
        self.x[sub] -= np.einsum("psm,ps->pm", bf * inv_w, y)
        # the projection is linear and holds the pH: where the solids present fix a ratio of activities that the
        # pH must move to meet (e.g. a zinc hydroxide and a zinc hydroxycarbonate together), it can throw a sane
        # point far away. Such a point keeps its state and its solids: the Newton pass restores saturation with
        # its line search (starting it cold would lose the solids and the pass would cycle back to them)
        undo = sane & self._far(sub)
        self.x[sub[undo]] = before[undo]
        self._abandon_far_starts(idx)

    def _far(self, idx) -> np.ndarray:
        """Points where a species holding a component with a total lies more than FAR_START_LOG (log10) above the
        largest total (H+ and OH- follow the pH, not a total)."""
        logc = self._logc(idx, self.x[idx], self._lg(idx))
        holds = (self.present[idx, 1:].astype(float) @ (np.abs(self.tab.a[:, 1:]) > 0).T) > 0
        top = np.where(holds, logc, -np.inf).max(axis=1)
        return top > np.log10(np.abs(self.t[idx, 1:]).max(axis=1, initial=0.0) + 1e-300) + FAR_START_LOG

    def _abandon_far_starts(self, idx):
        """A start far from a point's equilibrium (e.g. a neighbour's solids at another pH) can put a species many
        orders of magnitude above any total; Newton would crawl down from there. Such points start cold."""
        far = self._far(idx)
        if far.any():
            self.restart(idx[far])

    # ------------------------------------------------------------------ Newton passes
    def _system(self, idx, lg):
        """KKT matrix and right-hand side for [dX (m), n (K present solids)], mass rows scaled. Only the solids
        present take part (K = the most present at any of these points; shorter sets are padded with inert
        rows), which keeps the batched solves small. Returns the system, the concentrations, the row scale and
        the solid index of each of the K slots with its validity."""
        tab, m = self.tab, self.m
        c = self._conc(idx, lg)
        free = self.free[idx]
        act = self.active[idx]
        k = idx.size
        n_slots = int(act.sum(axis=1).max(initial=0))
        slots = np.argsort(~act, axis=1, kind="stable")[:, :n_slots]  # present solids first
        valid = np.take_along_axis(act, slots, axis=1)
        b = np.where(valid[:, :, None], tab.b[slots], 0.0)  # (k, K, m)
        dissolved = c @ tab.a
        scale = 1.0 / np.maximum(np.maximum(np.abs(self.t[idx]), c @ np.abs(tab.a)), 1e-300)
        u = m + n_slots
        kkt = np.zeros((k, u, u))
        rhs = np.zeros((k, u))
        kkt[:, :m, :m] = (c @ self.outer).reshape(k, m, m) * scale[:, :, None]  # ln10 sum_i a_ij a_ik c_i
        kkt[:, :m, m:] = b.transpose(0, 2, 1) * (scale * free)[:, :, None]
        rhs[:, :m] = (self.t[idx] - dissolved) * scale
        # components that are not unknowns keep their value
        fixed_rows = np.nonzero(~free)
        kkt[fixed_rows[0], fixed_rows[1], :] = 0.0
        kkt[fixed_rows[0], fixed_rows[1], fixed_rows[1]] = 1.0
        rhs[:, :m][~free] = 0.0
        # present solids: b . dX = -SI (zero after restore); padding slots: n = 0
        kkt[:, m:, :m] = b * free[:, None, :]
        si = np.take_along_axis(self._si(idx, lg), slots, axis=1)
        rhs[:, m:] = np.where(valid, -si, 0.0)
        diag = np.arange(n_slots)
        kkt[:, m + diag, m + diag] = np.where(valid, 0.0, 1.0)
        return kkt, rhs, c, scale, slots, valid

    def _scatter(self, values, slots, valid):
        """Solid amounts from the K slots back to all candidate solids (absent: 0)."""
        out = np.zeros((values.shape[0], self.s))
        rows = np.nonzero(valid)
        out[rows[0], slots[rows]] = values[rows]
        return out

    def newton(self, idx) -> np.ndarray:
        """Newton passes at fixed activity coefficients, with a backtracking line search on Phi. Returns the
        points that did not converge within MAX_ITER iterations."""
        m = self.m
        pending = idx.copy()
        stuck = []
        for it in range(MAX_ITER):
            if pending.size == 0:
                break
            lg = self._lg(pending)
            kkt, rhs, c, scale, slots, valid = self._system(pending, lg)
            sol = solve_batch(kkt, rhs)
            dx, n_slot = sol[:, :m], sol[:, m:]
            n_new = self._scatter(n_slot, slots, valid)
            self.n[pending] = n_new
            residual = np.abs(rhs[:, :m] - np.einsum("pjk,pk->pj", kkt[:, :m, m:], n_slot)).max(axis=1)
            step_size = np.abs(dx).max(axis=1)
            # converged, or stalled at rounding level: the latter happens when the present solids cannot all
            # stay (huge multipliers of mixed sign); the active-set update then drops the negative ones, and the
            # final verification catches anything else
            done = ((residual < TOL_RESIDUAL) & (step_size < TOL_STEP)) | (step_size < TOL_STALL)
            if it >= EARLY_DROP_ITER:
                # a solid with a negative amount will leave the set anyway: stop polishing a set that cannot stay.
                # Not at a point whose set keeps changing: an amount that is negative before convergence can end
                # positive, and dropping the solid early sends the point round the same sets again
                cycling = (self.changes[pending] >= CYCLE_GUARD) & (it < CYCLING_DROP_ITER)
                done |= (self.active[pending] & (n_new < 0.0)).any(axis=1) & ~cycling
            lam = self._step_limit(pending, dx, c)
            x0 = self.x[pending]
            phi0 = self._phi(pending, x0, lg)
            slope = np.einsum(
                "pj,pj->p", np.where(self.free[pending], c @ self.tab.a - self.t[pending], 0.0), dx
            )
            # near the solution the change in Phi is below rounding: take the Newton step as it is
            # (and close to it, where Newton converges quadratically, the line search would only slow it)
            trial = (
                ~done
                & (np.abs(slope) > 1e-10 * np.maximum(np.abs(phi0), 1e-300))
                & (residual > NEAR_RESIDUAL)
            )
            self.x[pending[~done & ~trial]] = (x0 + lam[:, None] * dx)[~done & ~trial]
            for _ls in range(40):
                if not trial.any():
                    break
                xt = x0[trial] + lam[trial, None] * dx[trial]
                phi = self._phi(pending[trial], xt, lg[trial])
                ok = np.isfinite(phi) & (
                    phi
                    <= phi0[trial]
                    + 1e-4 * lam[trial] * np.minimum(slope[trial], 0.0)
                    + 1e-14 * np.abs(phi0[trial])
                )
                rows = np.flatnonzero(trial)
                self.x[pending[rows[ok]]] = xt[ok]
                trial[rows[ok]] = False
                lam[rows[~ok]] *= 0.5
            # a point whose line search found no descent cannot progress from here: hand it back at once
            failed = pending[trial]
            stuck.append(failed)
            pending = pending[~done & ~trial]
        stuck.append(pending)
        return np.concatenate(stuck)

    def _step_limit(self, idx, dx, c):
        """Largest step fraction (<= 1) such that no species rises above 100x the largest total, none that is
        already that high rises by more than MAX_STEP_LOG, and no free concentration moves by more than 10 log
        units. Falling concentrations are left to the line search."""
        rise = dx @ self.tab.a.T  # change of log10 c_i for the full step
        logc = np.log10(np.maximum(c, 1e-300))
        ceiling = np.log10(np.abs(self.t[idx]).max(axis=1) + 1e-300)[:, None] + 2.0
        room = np.where(logc < ceiling, ceiling - logc, MAX_STEP_LOG)
        with np.errstate(divide="ignore", invalid="ignore"):
            lam = np.where(rise > 0, room / rise, np.inf).min(axis=1)
        lam = np.minimum(lam, 10.0 / np.maximum(np.abs(dx).max(axis=1), 1e-300))
        return np.minimum(1.0, lam)

    def update_ionic_strength(self, idx) -> np.ndarray:
        """One step of a bracketed root search on F(u) = log10 I(computed) - u, u = log10 I (the ionic strength
        used for the activity coefficients). F is continuous (the equilibrium is, across solids appearing), so
        once a sign change is bracketed, false position with the Illinois modification converges
        superlinearly. Before that, the plain step u + F. Returns the points whose ionic strength moved."""
        if self.ideal:
            return np.zeros(idx.size, bool)
        c = self._conc(idx)
        u = np.log10(self.ionic[idx])
        r = np.log10(np.maximum(self._ionic_of(c), 1e-300)) - u
        moved = np.abs(r) > TOL_IONIC
        br = self.bracket[:, idx]  # rows: u_low, f_low (>0), u_high, f_high (<0), side of the last update
        pos = r > 0
        same_side = br[4] == np.where(pos, 1.0, -1.0)
        # Illinois rule: when the same end is replaced twice running, halve the other end's residual
        br[3] = np.where(pos & same_side, 0.5 * br[3], br[3])
        br[1] = np.where(~pos & same_side, 0.5 * br[1], br[1])
        br[0] = np.where(pos, u, br[0])
        br[1] = np.where(pos, r, br[1])
        br[2] = np.where(pos, br[2], u)
        br[3] = np.where(pos, br[3], r)
        br[4] = np.where(pos, 1.0, -1.0)
        both = np.isfinite(br[1]) & np.isfinite(br[3])
        with np.errstate(divide="ignore", invalid="ignore"):
            false_pos = br[0] - br[1] * (br[2] - br[0]) / (br[3] - br[1])
        bracketed = np.where(np.isfinite(false_pos), false_pos, 0.5 * (br[0] + br[2]))
        # Newton step on u from the implicit derivative of the solution; kept only inside the bracket
        slope = self._ionic_slope(idx, c)
        with np.errstate(divide="ignore", invalid="ignore"):
            newton = u - r / slope
        lo, hi = np.fmin(br[0], br[2]), np.fmax(br[0], br[2])
        # unbracketed, a Newton step must go where the residual points (a positive slope, from strong feedback
        # of the activity coefficients, would otherwise send it away from the root)
        toward = np.sign(newton - u) == np.sign(r)
        inside = (
            np.isfinite(newton)
            & np.where(both, (newton > lo) & (newton < hi), toward)
            & (np.abs(newton - u) <= 1.0)
        )
        new = np.where(inside, newton, np.where(both, bracketed, u + np.clip(r, -1.0, 1.0)))
        self.bracket[:, idx] = br
        self.ionic[idx] = np.where(moved, 10.0**new, self.ionic[idx])
        return moved

    def _ionic_slope(self, idx, c):
        """dF/du for F(u) = log10 I(computed) - u, u = log10 I(used), at the current (converged) solution with
        its solids held: implicit differentiation of the KKT system (one extra right-hand side)."""
        tab, m = self.tab, self.m
        ionic = self.ionic[idx]
        root = np.sqrt(ionic)
        d_davies = 1.0 / (2.0 * root * (1.0 + root) ** 2) - 0.3  # dD/dI of the Davies function
        dlg = -tab.davies_a * tab.z[None, :] ** 2 * (d_davies * ionic * LN10)[:, None]  # d log10 gamma_i / du
        comp_dlg = dlg[:, self.comp_species]
        g = comp_dlg @ tab.a.T - dlg  # d log10 c_i / du at fixed X
        lg = self._lg(idx)
        kkt, _, _, scale, slots, valid = self._system(idx, lg)
        d_rhs = np.zeros((idx.size, kkt.shape[1]))
        d_rhs[:, :m] = -(LN10 * (c * g) @ tab.a) * scale
        d_rhs[:, :m][~self.free[idx]] = 0.0
        dxh = np.zeros(idx.size)
        if self.ph is not None:  # X_H follows the activity coefficient of H+ to hold the pH
            dxh = -comp_dlg[:, 0]
            d_rhs[:, 0] = dxh
        d_si = -(comp_dlg @ tab.b.T + tab.b[:, 0][None, :] * dxh[:, None])  # (k, s)
        d_rhs[:, m:] = np.where(valid, np.take_along_axis(d_si, slots, axis=1), 0.0)
        dx = solve_batch(kkt, d_rhs)[:, :m]
        dlogc = g + dx @ tab.a.T  # total d log10 c_i / du
        dc = LN10 * c * dlogc
        d_ionic = dc @ (0.5 * tab.z**2)
        if self.ph is not None:
            d_ionic = d_ionic + 0.5 * np.sign(c @ tab.z) * (dc @ tab.z)
        return d_ionic / (np.maximum(self._ionic_of(c), 1e-300) * LN10) - 1.0

    def update_active_set(self, idx) -> np.ndarray:
        """Drop solids with negative amounts; add supersaturated ones. Returns which points changed."""
        act = self.active[idx]
        drop = act & (self.n[idx] < 0.0)
        # a point whose set keeps changing drops only its most negative solid (relative to what it could hold)
        guard = self.changes[idx] >= CYCLE_GUARD
        if (guard & drop.any(axis=1)).any():
            scale = np.abs(self.t[idx, 1:]) @ (np.abs(self.tab.b[:, 1:]) > 0).T + 1e-300  # (k, s)
            worst = np.argmin(np.where(drop, self.n[idx] / scale, np.inf), axis=1)
            only = np.zeros_like(drop)
            only[np.arange(idx.size), worst] = True
            drop = np.where(guard[:, None], drop & only, drop)
        changed = drop.any(axis=1)
        act = act & ~drop
        si = self._si(idx)
        cand = ~act & self.possible[idx] & (si > TOL_SATURATION) & ~changed[:, None]
        # a supersaturated solid that waits (taken back after its entry made a pass fail) keeps the point from
        # settling, and the others may enter meanwhile: without this, a point taking one solid at a time whose
        # most supersaturated solid waits added none, settled, and failed verification
        waiting = self.waiting[idx] > 0
        held = (cand & waiting).any(axis=1)
        cand &= ~waiting
        # a point whose set keeps changing takes one solid at a time (the most supersaturated): breaks cycles
        one_at_a_time = self.changes[idx] >= CYCLE_GUARD
        if cand.any():
            score = np.where(cand, si / self.weight, -np.inf)
            order = np.argsort(-score, axis=1)
            claimed = np.zeros((idx.size, self.m - 1), bool)
            uses = np.abs(self.tab.b[:, 1:]) > 0  # (s, m-1)
            rows = np.arange(idx.size)
            for r in range(self.s):
                k = order[:, r]
                ok = cand[rows, k] & ~(claimed & uses[k]).any(axis=1) & ~(one_at_a_time & (r > 0))
                act[rows[ok], k[ok]] = True
                claimed[ok] |= uses[k[ok]]
                changed |= ok
            self._keep_independent(idx, act, cand & act)
        changed |= held
        self.added[idx] = act & ~self.active[idx]
        self.waiting[idx] = np.maximum(self.waiting[idx] - 1, 0)
        self.active[idx] = act
        self.n[idx] = np.where(act, self.n[idx], 0.0)
        self.changes[idx] += changed
        return changed

    def remember(self, idx) -> None:
        """Keep the settled solution and ionic strength of these points, before an ionic-strength step."""
        self.x_before[idx] = self.x[idx]
        self.n_before[idx] = self.n[idx]
        self.ionic_before[idx] = self.ionic[idx]
        self.halvings[idx] = 0

    def halve_ionic_step(self, idx) -> np.ndarray:
        """Where the last ionic-strength step of these points can be halved, go back to the solution before it
        and take half the step; returns, per point, whether it was halved."""
        ok = np.isfinite(self.ionic_before[idx]) & (self.halvings[idx] < MAX_IONIC_HALVINGS)
        ok &= self.ionic[idx] != self.ionic_before[idx]
        rows = idx[ok]
        self.x[rows] = self.x_before[rows]
        self.n[rows] = self.n_before[rows]
        self.ionic[rows] = np.sqrt(self.ionic[rows] * self.ionic_before[rows])
        self.halvings[rows] += 1
        return ok

    def drop_negative(self, idx) -> np.ndarray:
        """Where a solid present before the last update has a negative amount, drop the most negative one
        (relative to what it could hold); returns, per point, whether one was dropped."""
        neg = self.active[idx] & ~self.added[idx] & (self.n[idx] < 0.0)
        some = neg.any(axis=1)
        if not some.any():
            return some
        rows = idx[some]
        scale = np.abs(self.t[rows, 1:]) @ (np.abs(self.tab.b[:, 1:]) > 0).T + 1e-300  # (k, s)
        worst = np.argmin(np.where(neg[some], self.n[rows] / scale, np.inf), axis=1)
        self.active[rows, worst] = False
        self.n[rows, worst] = 0.0
        self.changes[rows] += 1
        self.ionic_before[rows] = np.nan
        return some

    def revert_added(self, idx) -> np.ndarray:
        """Take back the solids added at the last update (they wait WAIT_PASSES passes); returns, per point,
        whether there was anything to take back."""
        added = self.added[idx]
        some = added.any(axis=1)
        rows = idx[some]
        self.active[rows] &= ~added[some]
        self.n[rows] = np.where(self.active[rows], self.n[rows], 0.0)
        self.waiting[rows] = np.where(added[some], WAIT_PASSES, self.waiting[rows])
        self.added[rows] = False
        return some

    def _keep_independent(self, idx, act, added):
        """Where a newly added solid's saturation is fixed by solids already present (the phase rule), drop the
        present solid that its formation uses up first (ratio test, as in dual active-set methods)."""
        rows = np.flatnonzero(added.any(axis=1))
        if rows.size == 0:
            return
        bf = np.where(act[rows][:, :, None] & self.free[idx[rows]][:, None, :], self.tab.b[None], 0.0)
        rank = np.linalg.matrix_rank(bf)
        for r in rows[rank < act[rows].sum(axis=1)]:  # rare: only points whose new set is degenerate
            p = idx[r]
            free = self.free[p]
            for k_new in np.flatnonzero(added[r]):
                others = np.flatnonzero(act[r])
                others = others[others != k_new]
                if others.size == 0:
                    continue
                basis = self.tab.b[others][:, free].T
                target = self.tab.b[k_new, free]
                alpha, *_ = np.linalg.lstsq(basis, target, rcond=None)
                if np.abs(basis @ alpha - target).max() > 1e-9:
                    continue  # independent
                pos = alpha > 1e-12
                if not pos.any():
                    act[r, k_new] = False  # cannot enter without breaking the phase rule
                    continue
                ratio = np.where(pos, np.maximum(self.n[p, others], 0.0) / np.where(pos, alpha, 1.0), np.inf)
                act[r, others[np.argmin(ratio)]] = False

    def check_range(self, idx):
        """Refuse points whose ionic strength is beyond the activity model's range."""
        if self.ideal:
            return
        over = self.ionic[idx] > MAX_IONIC_STRENGTH
        if over.any():
            bad = idx[over]
            where = self.ph[bad] if self.ph is not None else bad
            label = "pH" if self.ph is not None else "point"
            raise ModelRangeError(
                "ionic strength",
                float(f"{float(self.ionic[bad].max()):.4g}"),
                f"the Davies activity model is used up to {MAX_IONIC_STRENGTH} mol/L; this water exceeds it at "
                f"{label} {', '.join(f'{v:.3g}' for v in np.asarray(where)[:8])} (too concentrated, or a pH too "
                "extreme to hold with strong acid or base)",
                ph=() if self.ph is None else tuple(np.asarray(where, float)),
            )

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
        ref = np.where(self.present[:, 1:], self.t[:, 1:], 1.0)
        rel = np.where(self.present[:, 1:], np.abs(tot[:, 1:] - self.t[:, 1:]) / ref, 0.0)
        charge = c @ tab.z
        bad = (
            (rel.max(axis=1, initial=0.0) > TOL_MASS)
            | ((si > VERIFY_SATURATION) & ~self.active & self.possible).any(axis=1)
            | ((np.abs(si) > VERIFY_SATURATION) & self.active).any(axis=1)
            | (n < 0).any(axis=1)
            | ~np.isfinite(c).all(axis=1)
        )
        if self.ph is None:
            # electroneutrality to the accuracy of the mass balances (the proton condition holds what the solids
            # hold too, so its scale is the larger of the dissolved charge and the charge of the totals)
            scale = np.maximum(c @ np.abs(tab.z), np.abs(self.t[:, 1:]) @ np.abs(charges(tab)[1:]))
            bad |= np.abs(charge) > TOL_MASS * np.maximum(scale, 1e-300)
        ionic = self._ionic_of(c)
        if not self.ideal:  # the activity coefficients belong to the ionic strength of the solution
            bad |= ~(np.abs(np.log10(np.maximum(ionic, 1e-300) / self.ionic)) <= TOL_IONIC_VERIFIED)
        if bad.any():
            self.fail(np.flatnonzero(bad), "the solution failed verification")
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


def log_sum(values: np.ndarray) -> np.ndarray:
    """log10 of the sum of 10**values over axis 1 (species), without overflow."""
    top = values.max(axis=1)
    safe = np.where(np.isfinite(top), top, 0.0)
    return safe + np.log10(np.power(10.0, values - safe[:, None, :]).sum(axis=1))


def solve_batch(mat: np.ndarray, rhs: np.ndarray) -> np.ndarray:
    """Solve M y = rhs for every point; singular points fall back to least squares."""
    try:
        return np.linalg.solve(mat, rhs[..., None])[..., 0]
    except np.linalg.LinAlgError:
        out = np.empty_like(rhs)
        for p in range(mat.shape[0]):  # rare fallback only
            out[p] = np.linalg.lstsq(mat[p], rhs[p], rcond=None)[0]
        return out
