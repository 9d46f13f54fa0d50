"""Equilibrium solver: Newton-Raphson in log10 concentrations with an active set of solids.

At fixed activity coefficients, chemical equilibrium is the minimum of a convex function of the log10 free
concentrations X of the components (the dual of the Gibbs energy minimisation; e.g. Smith & Missen 1982,
*Chemical Reaction Equilibrium Analysis*, ch. 6):

    Phi(X) = sum_i c_i(X) / ln10 - sum_j T_j X_j,   log10 c_i = log_k_i + sum_j a_ij (X_j + lg_j) - lg_i,

subject to the linear constraints SI_s(X) = log_ks_s + sum_j b_sj (X_j + lg_j) <= 0 for every candidate solid.
The stationarity conditions are the mass balances, with the solid amounts n_s as the Lagrange multipliers:
``sum_i a_ij c_i + sum_s b_sj n_s = T_j``; complementarity says a solid is either present and saturated
(SI = 0, n > 0) or absent and not supersaturated (SI <= 0, n = 0).

* Hydrogen ion: in fixed-pH mode X_H is held (``X_H + lg_H = -pH``) and the strong acid or base that holds it is
  the charge-balance residual; in charge-balance mode X_H is free and its "total" is fixed by electroneutrality,
  ``T_H = -sum_{j != H} z_j T_j`` (solids are neutral, so this is the proton condition).
* Solids (active set): Newton steps solve the KKT system of the equality-constrained problem for the present
  solids, from a point where their constraints hold exactly (a least-norm projection restores them whenever the
  set or the activity coefficients change); because the constraints are linear, every step keeps them, and a
  backtracking line search on Phi makes each step a descent. After each pass, solids with negative amounts leave
  and, per point, the most supersaturated solids enter (at most one per component per pass).
* Activity: Davies coefficients at the ionic strength I; I is iterated outside the Newton passes (secant on
  log10 I), the counter-ion of the acid/base that holds the pH counted as monovalent in fixed-pH mode.

Two engines solve these equations. By default a compiled kernel (:mod:`workbench.chemistry.kernel`) solves the
points one after another, each from its neighbour; any point it gives up goes to the numpy solver in this module,
which solves all points at once (numpy batches, no Python loop over points) with every safeguard below
(``engine="numpy"`` uses it alone). Either way the result is verified before it is returned: mass balance closes
to 1e-10, absent solids are not supersaturated, present solids are saturated with positive amounts, the activity
coefficients are those of the solution's ionic strength, and nothing is NaN; otherwise
:class:`~workbench.errors.ConvergenceError` names the points.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from workbench.chemistry import water_properties as wp
from workbench.chemistry.tableau import Tableau
from workbench.errors import ConvergenceError, ModelRangeError

LN10 = np.log(10.0)
ABSENT = -400.0  # log10 concentration used for a component whose total is zero
ACTIVITY_MODELS = ("davies", "ideal")
ENGINES = ("compiled", "numpy")
TOL_RESIDUAL = 1e-12  # scaled mass-balance residual at which a Newton pass has converged
TOL_STEP = 1e-10  # largest change of X at which a Newton pass has converged [log10 units]
NEAR_RESIDUAL = 1e-6  # scaled residual below which full Newton steps are taken without a line search
TOL_STALL = 1e-13  # change of X below which a Newton pass is at rounding level [log10 units]
TOL_IONIC = 1e-10  # |log10(I computed / I used)| at which the ionic strength has converged
TOL_SATURATION = 1e-9  # SI above which an absent solid is taken as supersaturated
TOL_MASS = 1e-10  # verified relative mass-balance error
TOL_IONIC_VERIFIED = 1e-8  # verified |log10(I of the solution / I of the activity coefficients)|
VERIFY_SATURATION = 1e-7  # verified: |SI| of a present solid, SI of an absent one at most this
FAR_START_LOG = 3.0  # a species this far (log10) above the largest total marks a start to abandon
RESTORE_PH_WEIGHT = 1e-4  # relative freedom of log10 [H+] in the saturation restore (charge-balance mode)
WAIT_PASSES = 3  # passes a solid waits after its entry made a Newton pass fail
CYCLE_GUARD = 6  # after this many changes of a point's solids, they enter one at a time
MAX_STEP_LOG = 2.0  # largest change of any species' log10 concentration in one Newton step
MAX_IONIC_STRENGTH = (
    1.5  # mol/L; beyond it the Davies equation no longer gives usable activity coefficients (it turns
)
# upward near 1.7 mol/L); between 0.5 and this limit results carry a warning
INIT_ITER = 30  # per-component steps of the initial guess
MAX_ITER = 100  # Newton iterations per pass
EARLY_DROP_ITER = 4  # after this many iterations a pass stops where a present solid has a negative amount
MAX_IONIC_HALVINGS = 6  # halvings of one ionic-strength step that a failed Newton pass may take
MAX_ROUNDS = 200  # passes (active-set and ionic-strength updates)


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
    dissolved_totals: np.ndarray | None = field(default=None, repr=False, compare=False)

    def dissolved(self) -> np.ndarray:
        """Total dissolved amount of each component (H+ column meaningless). [mol/L]

        The kernel sums it as it verifies the mass balances (``dissolved_totals``); otherwise it is computed."""
        if self.dissolved_totals is not None and self.dissolved_totals.shape[0] == self.conc.shape[0]:
            return self.dissolved_totals
        return self.conc @ self.tableau.a


def solve(
    tab: Tableau,
    totals: np.ndarray,
    ph: np.ndarray | None = None,
    *,
    activity: str = "davies",
    ph_guess: np.ndarray | float = 7.0,
    log_k: np.ndarray | None = None,
    log_ks: np.ndarray | None = None,
    start: Equilibrium | StartRows | None = None,
    engine: str = "compiled",
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
    log_k, log_ks : ndarray (N, n) and (N, s), optional
        Per-point formation constants of the species and solids, replacing the tableau's (Monte Carlo samples).
    start : Equilibrium, optional
        A solution of the same system at the same N points (e.g. the nominal constants) to start from: its free
        concentrations, solids and ionic strength. Makes perturbed solves take a few Newton steps.
    engine : {"compiled", "numpy"}
        ``"compiled"`` (default): the compiled per-point kernel (:mod:`workbench.chemistry.kernel`), with the
        numpy solver taking any point the kernel gives up; ``"numpy"``: the numpy solver alone (the reference
        the kernel is tested against). Both verify every answer in the same way.

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
    if engine not in ENGINES:
        raise ValueError(f"engine: got {engine!r}; allowed {ENGINES}")
    fixed = ph is not None
    totals = np.atleast_2d(np.asarray(totals, dtype=float))
    n_pts = max(totals.shape[0], np.size(ph)) if fixed else totals.shape[0]
    ph_arr = _filled((n_pts,), ph) if fixed else None
    totals = _filled((n_pts, len(tab.components)), totals)
    guess = _filled((n_pts,), ph_guess)
    _limit_blas()
    if engine == "numpy":
        return _solve_numpy(tab, totals, ph_arr, activity, guess, log_k, log_ks, start).finish()
    # the compiled kernel, which verifies what it returns; the points it gives up go to the numpy solver, whose
    # answers are verified in the same way (State.finish)
    state = _State(tab, totals, ph_arr, activity, log_k, log_ks, numpy_solver=False)
    if start is not None:
        state.start_from(start, hold_ph=False)  # the kernel holds the pH itself
    eq, rest = state.kernel(start is not None, guess)
    if rest.size:
        sub = _solve_numpy(
            tab,
            totals[rest],
            None if ph_arr is None else ph_arr[rest],
            activity,
            guess[rest],
            None if log_k is None else state.log_k[rest],
            None if log_ks is None else state.log_ks[rest],
            None if start is None else StartRows(start, rest),
        ).finish()
        for name in _ROW_FIELDS:
            getattr(eq, name)[rest] = getattr(sub, name)
        eq.dissolved_totals[rest] = sub.dissolved()
    return eq


_NONE = np.empty(0, int)  # no points (read only)
_NONE.flags.writeable = False


def _filled(shape: tuple, value) -> np.ndarray:
    """A new float array of this shape holding value, broadcast (raises as numpy does if it cannot be)."""
    out = np.empty(shape)
    out[...] = value
    return out


_ROW_FIELDS = (
    "log_free",
    "conc",
    "log_gamma",
    "solid_amount",
    "saturation_index",
    "ionic_strength",
    "ph",
    "strong_base",
    "totals",
)


class StartRows:
    """A start for :func:`solve` taken from rows of a solution (e.g. the nominal solution repeated for each Monte
    Carlo sample): its free concentrations, solid amounts, ionic strength and totals at those rows."""

    def __init__(self, eq: Equilibrium, rows: np.ndarray):
        self.log_free = eq.log_free[rows]
        self.solid_amount = eq.solid_amount[rows]
        self.ionic_strength = eq.ionic_strength[rows]
        self.totals = eq.totals[rows]


def _solve_numpy(tab, totals, ph_arr, activity, guess, log_k, log_ks, start) -> _State:
    """The numpy solver (vectorised over points, with every safeguard): returns the settled working state."""
    n_pts = totals.shape[0]
    state = _State(tab, totals, ph_arr, activity, log_k, log_ks)
    if start is not None:
        state.start_from(start)
    elif n_pts <= CONTINUATION_MIN_POINTS:
        state.initial_guess(np.arange(n_pts), guess)
    else:
        # continuation: solve a few points first, then start every point from its nearest solved neighbour
        # with the same totals (its solids, ionic strength and free concentrations): a few Newton steps each
        coarse, nearest, below, above, weight = _continuation_plan(
            totals, None if log_k is None else np.asarray(log_k)
        )
        state.initial_guess(coarse, guess)
        _iterate(state, coarse)
        fresh = state.copy_from(nearest)
        state.blend(below, above, weight)
        if fresh.size:
            state.initial_guess(fresh, guess)
    _iterate(state, np.arange(n_pts))
    return state


CONTINUATION_MIN_POINTS = 24
KERNEL_MIN_CHUNK = 64  # fewer points per chunk than this are not worth a thread (each chunk starts cold)
# threads: a call whose estimated time on one thread is below KERNEL_THREAD_SECONDS runs on one (handing work to
# a second thread costs about 0.2 ms on a 2-core laptop). The estimate is points x species x seconds per species
# and point, measured on such a machine with `make bench`; it depends on the call alone, never on timings, so
# that the same call is always split the same way and gives the same digits
KERNEL_THREAD_SECONDS = 2e-3
KERNEL_SPECIES_SECONDS = 2.5e-7  # Newton steps with Davies activities, or in charge-balance mode
KERNEL_SPECIES_SECONDS_EXPLICIT = 4e-8  # fixed pH, ideal activities: most points need no Newton step


def _kernel_rows(values, n_pts: int, width: int) -> np.ndarray:
    """Constants as the kernel takes them: a C-ordered array of one row (the same at every point) or n_pts rows."""
    arr = np.ascontiguousarray(values, dtype=float)
    if arr.ndim == 1 or arr.shape[0] == 1:
        return arr.reshape(1, width)
    return np.ascontiguousarray(np.broadcast_to(arr, (n_pts, width)))


def _continuation_plan(totals: np.ndarray, log_k: np.ndarray | None):
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


def _iterate(state: _State, todo: np.ndarray) -> None:
    """Alternate Newton passes, active-set updates and ionic-strength steps until every point has settled."""
    restarted = np.zeros(state.x.shape[0], bool)
    for _ in range(MAX_ROUNDS):
        state.restore(todo)
        stuck = state.newton(todo)
        if stuck.size:
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


_BLAS_LIMITED = False


def _limit_blas() -> None:
    """Set BLAS to one thread, once per process. The solver's matrices are
    small: BLAS threads gain nothing on them, and after each call they spin on the other core for a while,
    where the compiled kernel's second thread runs (measured: a fifth of all CPU time in a Monte Carlo run)."""
    global _BLAS_LIMITED
    if not _BLAS_LIMITED:
        from threadpoolctl import threadpool_limits

        threadpool_limits(limits=1, user_api="blas")
        _BLAS_LIMITED = True


_TABLEAU_CACHE: dict = {}


def _per_tableau(kind: str, tab: Tableau, make) -> tuple:
    """Arrays derived from a tableau alone, kept for the last few tableaux used (a tableau is immutable)."""
    key = (kind, id(tab))
    hit = _TABLEAU_CACHE.get(key)
    if hit is not None and hit[0] is tab:
        return hit[1]
    value = make(tab)
    if len(_TABLEAU_CACHE) >= 64:
        _TABLEAU_CACHE.pop(next(iter(_TABLEAU_CACHE)))
    _TABLEAU_CACHE[key] = (tab, value)
    return value


def _tableau_arrays(tab: Tableau) -> tuple:
    """Row of each component's free species, each solid's weight in the ranking of supersaturated solids,
    and log10 of the positive stoichiometric coefficients (the initial guess)."""

    def make(tab):
        weight = np.maximum(1.0, np.abs(tab.b[:, 1:]).sum(axis=1))
        a_pos = np.clip(tab.a[:, 1:], 0.0, None)
        with np.errstate(divide="ignore"):
            log_a = np.where(a_pos > 0, np.log10(np.where(a_pos > 0, a_pos, 1.0)), -np.inf)
        return _component_rows(tab), weight, log_a

    return _per_tableau("arrays", tab, make)


def _kernel_tableau(tab: Tableau) -> tuple:
    """The kernel's arrays for one tableau (its stoichiometry also as compressed rows)."""
    return _per_tableau("kernel", tab, _kernel_arrays)


def _kernel_arrays(tab: Tableau) -> tuple:
    comp_species, weight, log_a = _tableau_arrays(tab)
    nz_rows, nz_cols = np.nonzero(tab.a)
    arrays = (
        np.ascontiguousarray(tab.a, dtype=float),
        np.searchsorted(nz_rows, np.arange(len(tab.species) + 1)).astype(np.int64),
        nz_cols.astype(np.int64),
        np.ascontiguousarray(tab.a[nz_rows, nz_cols], dtype=float),
        _by_component(tab.a),
        _jacobian_terms(tab.a),
        _solid_rows(tab.b),
        np.ascontiguousarray(log_a),
        np.ascontiguousarray(tab.b, dtype=float),
        np.ascontiguousarray(tab.z, dtype=float),
        comp_species.astype(np.int64),
        np.ascontiguousarray(weight, dtype=float),
        float(tab.davies_a),
    )
    return arrays


def _by_component(a: np.ndarray) -> tuple:
    """The stoichiometry as compressed columns: species q of component j for q in ptr[j]:ptr[j + 1], with its
    coefficient (the kernel sums the mass balances component by component)."""
    cols, rows = np.nonzero(a.T)
    ptr = np.searchsorted(cols, np.arange(a.shape[1] + 1)).astype(np.int64)
    return ptr, rows.astype(np.int64), np.ascontiguousarray(a[rows, cols], dtype=float)


def _solid_rows(b: np.ndarray) -> tuple:
    """The solids' stoichiometry as compressed rows: component col[q] with coefficient val[q] for q in
    ptr[s]:ptr[s + 1] (a solid holds two or three of the components)."""
    rows, cols = np.nonzero(b)
    ptr = np.searchsorted(rows, np.arange(b.shape[0] + 1)).astype(np.int64)
    return ptr, cols.astype(np.int64), np.ascontiguousarray(b[rows, cols], dtype=float)


def _jacobian_terms(a: np.ndarray) -> tuple:
    """The terms of the mass-balance Jacobian, sum_i a_ij a_ik c_i, entry by entry (j <= k, the Jacobian being
    symmetric): entry e at row[e], col[e] sums weight[q] * c[species[q]] for q in ptr[e]:ptr[e + 1]. The kernel
    gathers each entry in a register instead of adding every species into the matrix in memory."""
    m = a.shape[1]
    entries = [(j, k) for j in range(m) for k in range(j, m) if np.any((a[:, j] != 0) & (a[:, k] != 0))]
    row = np.array([j for j, _ in entries], np.int64)
    col = np.array([k for _, k in entries], np.int64)
    species = [np.flatnonzero((a[:, j] != 0) & (a[:, k] != 0)) for j, k in entries]
    ptr = np.concatenate([[0], np.cumsum([s.size for s in species])]).astype(np.int64)
    sp = np.concatenate(species).astype(np.int64) if species else np.zeros(0, np.int64)
    products = [a[s, j] * a[s, k] for s, (j, k) in zip(species, entries, strict=True)]
    weight = np.concatenate(products) if products else np.zeros(0)
    return ptr, row, col, sp, np.ascontiguousarray(weight, dtype=float)


class _State:
    """Working arrays of one solve (internal)."""

    def __init__(
        self,
        tab: Tableau,
        totals: np.ndarray,
        ph: np.ndarray | None,
        activity: str,
        log_k=None,
        log_ks=None,
        numpy_solver: bool = True,
    ):
        self.tab = tab
        n_all = totals.shape[0]
        if numpy_solver:
            self.log_k = np.broadcast_to(
                tab.log_k if log_k is None else np.asarray(log_k, float), (n_all, len(tab.species))
            )
            self.log_ks = np.broadcast_to(
                tab.log_ks if log_ks is None else np.asarray(log_ks, float), (n_all, len(tab.solids))
            )
        else:  # the kernel's form: one row for all points, or a row per point
            self.log_k = _kernel_rows(tab.log_k if log_k is None else log_k, n_all, len(tab.species))
            self.log_ks = _kernel_rows(tab.log_ks if log_ks is None else log_ks, n_all, len(tab.solids))
        self.ph = ph
        self.ideal = activity == "ideal"
        n_pts, m = totals.shape
        s = len(tab.solids)
        self.m, self.s = m, s
        self.present = totals > 0
        self.present[:, 0] = True
        self.t = totals.copy()
        if ph is None:  # proton condition from electroneutrality (solids are neutral)
            self.t[:, 0] = -(totals[:, 1:] @ _charges(tab)[1:])
        else:
            self.t[:, 0] = 0.0
        self.free = self.present.copy()  # components whose X is an unknown
        self.free[:, 0] = ph is None
        self.x = np.zeros((n_pts, m))
        self.n = np.zeros((n_pts, s))
        self.active = np.zeros((n_pts, s), bool)
        self.ionic = _filled((n_pts,), 1e-7)
        if numpy_solver:  # the numpy solver's own bookkeeping (the kernel keeps its own)
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
        self.comp_species, self.weight, self.log_a = _tableau_arrays(tab)
        # a solid can only form at a point where all its components are present
        needs = _per_tableau("needs", tab, lambda tab: (np.abs(tab.b[:, 1:]) > 0).astype(float).T)  # (m-1, s)
        if self.present.all() or (self.present == self.present[0]).all():  # the same everywhere (a curve)
            self.possible = np.empty((n_pts, s), bool)
            self.possible[...] = ((~self.present[0, 1:]).astype(float) @ needs) == 0.0
        else:
            self.possible = ((~self.present[:, 1:]).astype(float) @ needs) == 0.0

    # ------------------------------------------------------------------ compiled fast path
    def kernel(self, use_start: bool, guess: np.ndarray) -> tuple[Equilibrium, np.ndarray]:
        """Solve the points with the compiled kernel (:mod:`workbench.chemistry.kernel`), in place. Without a
        start, points are solved in order, each from the one before (a continuation along the curve), in one chunk
        per thread. Returns the Equilibrium (verified at the points it solved) and the points it gave up."""
        from workbench.chemistry import kernel

        tab = self.tab
        n_pts = self.x.shape[0]
        if not use_start and not self.present.all():  # (x is zero where a component is present)
            self.x[:, 1:] = np.where(self.present[:, 1:], 0.0, ABSENT)
        # threads pay only for enough work (see KERNEL_THREAD_SECONDS); with a start, chunks cost nothing extra
        # and several per thread balance the load; without, each chunk's first point starts cold: one per thread
        per_species = (
            KERNEL_SPECIES_SECONDS_EXPLICIT if self.ideal and self.ph is not None else KERNEL_SPECIES_SECONDS
        )
        heavy = n_pts * len(tab.species) * per_species >= KERNEL_THREAD_SECONDS
        threads = kernel.threads() if heavy else 1
        per_chunk = max(KERNEL_MIN_CHUNK, -(-n_pts // (threads * (4 if use_start and threads > 1 else 1))))
        chunks = np.array([*range(0, n_pts, per_chunk), n_pts], np.int64)
        ok = np.zeros(n_pts, bool)
        self.stats = np.zeros((n_pts, 3), np.int64)
        ionic_ceiling = np.inf if self.ideal else MAX_IONIC_STRENGTH
        n_sp, n_so = len(tab.species), len(tab.solids)
        conc = np.empty((n_pts, n_sp))
        log_gamma = np.empty((n_pts, n_sp))
        si = np.empty((n_pts, n_so))
        dissolved = np.empty((n_pts, self.m))
        ionic = np.empty(n_pts)
        charge = np.empty(n_pts)
        args = (
            self.log_k,
            self.log_ks,
            *_kernel_tableau(tab),
            self.ideal,
            self.ph is not None,
            np.zeros(n_pts) if self.ph is None else np.ascontiguousarray(self.ph),
            np.ascontiguousarray(guess, dtype=float),
            self.t,
            self.free,
            self.present,
            np.ascontiguousarray(self.possible),
            self.x,
            self.n,
            self.active,
            self.ionic,
            use_start,
            self.x.copy() if use_start else self.x,
            self.active.copy() if use_start else self.active,
            self.ionic.copy() if use_start else self.ionic,
            ionic_ceiling,
            ok,
            self.stats,
            conc,
            log_gamma,
            si,
            dissolved,
            ionic,
            charge,
        )
        kernel.run_chunks(args, chunks, n_sp, self.m, n_so)
        ph = -(self.x[:, 0] + log_gamma[:, self.comp_species[0]])
        eq = Equilibrium(
            tableau=tab,
            log_free=self.x,
            conc=conc,
            log_gamma=log_gamma,
            solid_amount=self.n,  # the kernel sets absent solids' amounts to zero
            saturation_index=si,
            ionic_strength=ionic,
            ph=ph,
            strong_base=-charge if self.ph is not None else np.zeros(n_pts),
            totals=self.t,
            dissolved_totals=dissolved,
        )
        return eq, (_NONE if ok.all() else np.flatnonzero(~ok))

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

    def start_from(self, eq: Equilibrium, hold_ph: bool = True) -> None:
        """Start every point from a previous solution of the same system at the same points."""
        if eq.log_free.shape != self.x.shape or eq.solid_amount.shape != self.n.shape:
            raise ValueError("start: a solution of the same system at the same number of points is required")
        self.x[:] = eq.log_free
        self.n[:] = eq.solid_amount
        self.active[:] = eq.solid_amount > 0
        if not self.ideal:
            self.ionic[:] = np.maximum(eq.ionic_strength, 1e-9)
        if hold_ph:
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
            s1 = _log_sum(logc[:, :, None] + self.log_a[None])  # log10 sum_i a_ij c_i
            s2 = _log_sum(logc[:, :, None] + 2.0 * self.log_a[None])  # log10 sum_i a_ij^2 c_i
            step = np.where(
                pos, (log_t - s1) / np.power(10.0, s2 - s1), 0.0
            )  # d log S_j / d x_j = 10**(s2-s1)
            x += np.clip(step, -50.0, 50.0)
            if np.abs(step).max(initial=0.0) < 0.05:
                break
        self.x[idx, 1:] = x
        self.x[idx, 0] = h
        if not self.ideal:
            z2 = _charges(tab)[1:] ** 2
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
        si = np.where(act, self._si(sub), 0.0)
        bf = np.where(act[:, :, None] & self.free[sub][:, None, :], self.tab.b[None], 0.0)  # (k, s, m)
        # weighted least norm: moving the pH (charge-balance mode) to saturate a solid is a last resort
        inv_w = np.ones(self.m)
        inv_w[0] = RESTORE_PH_WEIGHT
        gram = (bf * inv_w) @ bf.transpose(0, 2, 1)
        gram[:, np.arange(self.s), np.arange(self.s)] += np.where(act, 0.0, 1.0)
        y = _solve_batch(gram, si)
        self.x[sub] -= np.einsum("psm,ps->pm", bf * inv_w, y)
        self._abandon_far_starts(idx)

    def _abandon_far_starts(self, idx):
        """A start far from a point's equilibrium (e.g. a neighbour's solids at another pH) can put a species many
        orders of magnitude above any total; Newton would crawl down from there. Such points start cold."""
        logc = self._logc(idx, self.x[idx], self._lg(idx))
        # only species holding a component with a total (H+ and OH- follow the pH, not a total)
        holds = (self.present[idx, 1:].astype(float) @ (np.abs(self.tab.a[:, 1:]) > 0).T) > 0
        top = np.where(holds, logc, -np.inf).max(axis=1)
        far = top > np.log10(np.abs(self.t[idx, 1:]).max(axis=1, initial=0.0) + 1e-300) + FAR_START_LOG
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
            sol = _solve_batch(kkt, rhs)
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
                # a solid with a negative amount will leave the set anyway: stop polishing a set that cannot stay
                done |= (self.active[pending] & (n_new < 0.0)).any(axis=1)
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
        dx = _solve_batch(kkt, d_rhs)[:, :m]
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
                ok &= self.waiting[idx][rows, k] == 0
                act[rows[ok], k[ok]] = True
                claimed[ok] |= uses[k[ok]]
                changed |= ok
            self._keep_independent(idx, act, cand & act)
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
            scale = np.maximum(c @ np.abs(tab.z), np.abs(self.t[:, 1:]) @ np.abs(_charges(tab)[1:]))
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


def _component_rows(tab: Tableau) -> np.ndarray:
    return np.array([tab.species.index(c) for c in tab.components])


def _charges(tab: Tableau) -> np.ndarray:
    return tab.z[_component_rows(tab)]


def _log_sum(values: np.ndarray) -> np.ndarray:
    """log10 of the sum of 10**values over axis 1 (species), without overflow."""
    top = values.max(axis=1)
    safe = np.where(np.isfinite(top), top, 0.0)
    return safe + np.log10(np.power(10.0, values - safe[:, None, :]).sum(axis=1))


def _solve_batch(mat: np.ndarray, rhs: np.ndarray) -> np.ndarray:
    """Solve M y = rhs for every point; singular points fall back to least squares."""
    try:
        return np.linalg.solve(mat, rhs[..., None])[..., 0]
    except np.linalg.LinAlgError:
        out = np.empty_like(rhs)
        for p in range(mat.shape[0]):  # rare fallback only
            out[p] = np.linalg.lstsq(mat[p], rhs[p], rcond=None)[0]
        return out
