"""What both equilibrium engines solve: the equations, the tolerances they share, the result, and the arrays
each derives from a tableau.

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
  backtracking line search on Phi makes each step a descent. Solids with negative amounts leave and the most
  supersaturated solids enter (the phase rule enforced).
* Activity: Davies coefficients at the ionic strength I, with I found by a root search on
  log10 I(computed) - log10 I(used); the counter-ion of the acid/base that holds the pH counts as monovalent in
  fixed-pH mode.

Two engines solve these equations, beside each other behind one entry (:func:`workbench.chemistry.solver.solve`):
the numpy engine (:mod:`workbench.chemistry.numpy_engine`, all points at once with every safeguard) and the
compiled engine (:mod:`workbench.chemistry.kernel`, one point after another, each from its neighbour). Both take
their shared settings, the result type and the per-tableau arrays from this module and import nothing from each
other. Both verify every answer the same way: mass balance closes to TOL_MASS, absent solids are not
supersaturated and present ones saturated with positive amounts (VERIFY_SATURATION), the activity coefficients
are those of the solution's ionic strength (TOL_IONIC_VERIFIED), and nothing is NaN.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from workbench.chemistry.tableau import Tableau

LN10 = np.log(10.0)
ABSENT = -400.0  # log10 concentration used for a component whose total is zero
ACTIVITY_MODELS = ("davies", "ideal")
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
MAX_STEP_LOG = 2.0  # largest change of any species' log10 concentration in one Newton step
MAX_IONIC_STRENGTH = (
    1.5  # mol/L; beyond it the Davies equation no longer gives usable activity coefficients (it turns
)
# upward near 1.7 mol/L); between 0.5 and this limit results carry a warning
INIT_ITER = 30  # per-component steps of the initial guess
EARLY_DROP_ITER = 4  # after this many iterations a pass stops where a present solid has a negative amount


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


def filled(shape: tuple, value) -> np.ndarray:
    """A new float array of this shape holding value, broadcast (raises as numpy does if it cannot be)."""
    out = np.empty(shape)
    out[...] = value
    return out


ROW_FIELDS = (
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


def constant_rows(values, n_pts: int, width: int) -> np.ndarray:
    """Constants as the kernel takes them: a C-ordered array of one row (the same at every point) or n_pts rows."""
    arr = np.ascontiguousarray(values, dtype=float)
    if arr.ndim == 1 or arr.shape[0] == 1:
        return arr.reshape(1, width)
    return np.ascontiguousarray(np.broadcast_to(arr, (n_pts, width)))


_TABLEAU_CACHE: dict = {}


def per_tableau(kind: str, tab: Tableau, make) -> tuple:
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


def tableau_arrays(tab: Tableau) -> tuple:
    """Row of each component's free species, each solid's weight in the ranking of supersaturated solids,
    and log10 of the positive stoichiometric coefficients (the initial guess)."""

    def make(tab):
        weight = np.maximum(1.0, np.abs(tab.b[:, 1:]).sum(axis=1))
        a_pos = np.clip(tab.a[:, 1:], 0.0, None)
        with np.errstate(divide="ignore"):
            log_a = np.where(a_pos > 0, np.log10(np.where(a_pos > 0, a_pos, 1.0)), -np.inf)
        return component_rows(tab), weight, log_a

    return per_tableau("arrays", tab, make)


def compiled_arrays(tab: Tableau) -> tuple:
    """The kernel's arrays for one tableau (its stoichiometry also as compressed rows)."""
    return per_tableau("kernel", tab, _compiled_arrays)


def _compiled_arrays(tab: Tableau) -> tuple:
    comp_species, weight, log_a = tableau_arrays(tab)
    nz_rows, nz_cols = np.nonzero(tab.a)
    arrays = (
        np.ascontiguousarray(tab.a, dtype=float),
        np.searchsorted(nz_rows, np.arange(len(tab.species) + 1)).astype(np.int64),
        nz_cols.astype(np.int64),
        np.ascontiguousarray(tab.a[nz_rows, nz_cols], dtype=float),
        by_component(tab.a),
        jacobian_terms(tab.a),
        solid_rows(tab.b),
        np.ascontiguousarray(log_a),
        np.ascontiguousarray(tab.b, dtype=float),
        np.ascontiguousarray(tab.z, dtype=float),
        comp_species.astype(np.int64),
        np.ascontiguousarray(weight, dtype=float),
        float(tab.davies_a),
    )
    return arrays


def by_component(a: np.ndarray) -> tuple:
    """The stoichiometry as compressed columns: species q of component j for q in ptr[j]:ptr[j + 1], with its
    coefficient (the kernel sums the mass balances component by component)."""
    cols, rows = np.nonzero(a.T)
    ptr = np.searchsorted(cols, np.arange(a.shape[1] + 1)).astype(np.int64)
    return ptr, rows.astype(np.int64), np.ascontiguousarray(a[rows, cols], dtype=float)


def solid_rows(b: np.ndarray) -> tuple:
    """The solids' stoichiometry as compressed rows: component col[q] with coefficient val[q] for q in
    ptr[s]:ptr[s + 1] (a solid holds two or three of the components)."""
    rows, cols = np.nonzero(b)
    ptr = np.searchsorted(rows, np.arange(b.shape[0] + 1)).astype(np.int64)
    return ptr, cols.astype(np.int64), np.ascontiguousarray(b[rows, cols], dtype=float)


def jacobian_terms(a: np.ndarray) -> tuple:
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


def component_rows(tab: Tableau) -> np.ndarray:
    return np.array([tab.species.index(c) for c in tab.components])


def charges(tab: Tableau) -> np.ndarray:
    return tab.z[component_rows(tab)]


class Problem:
    """One solve's inputs as both engines take them, and its solution as it is worked on (rows: points): the
    component totals (the H+ row set by the mode), which components are present and free, which solids can form,
    and the free concentrations X, solid amounts, solids present and ionic strength that the engines update.

    ``compiled=True`` keeps the constants in the compiled engine's form (one C-ordered row for every point, or a
    row per point); otherwise they are broadcast to every point (the numpy engine's form).
    """

    def __init__(
        self,
        tab: Tableau,
        totals: np.ndarray,
        ph: np.ndarray | None,
        activity: str,
        log_k=None,
        log_ks=None,
        compiled: bool = False,
    ):
        self.tab = tab
        n_all = totals.shape[0]
        if not compiled:
            self.log_k = np.broadcast_to(
                tab.log_k if log_k is None else np.asarray(log_k, float), (n_all, len(tab.species))
            )
            self.log_ks = np.broadcast_to(
                tab.log_ks if log_ks is None else np.asarray(log_ks, float), (n_all, len(tab.solids))
            )
        else:  # the kernel's form: one row for all points, or a row per point
            self.log_k = constant_rows(tab.log_k if log_k is None else log_k, n_all, len(tab.species))
            self.log_ks = constant_rows(tab.log_ks if log_ks is None else log_ks, n_all, len(tab.solids))
        self.ph = ph
        self.ideal = activity == "ideal"
        n_pts, m = totals.shape
        s = len(tab.solids)
        self.m, self.s = m, s
        self.present = totals > 0
        self.present[:, 0] = True
        self.t = totals.copy()
        if ph is None:  # proton condition from electroneutrality (solids are neutral)
            self.t[:, 0] = -(totals[:, 1:] @ charges(tab)[1:])
        else:
            self.t[:, 0] = 0.0
        self.free = self.present.copy()  # components whose X is an unknown
        self.free[:, 0] = ph is None
        self.x = np.zeros((n_pts, m))
        self.n = np.zeros((n_pts, s))
        self.active = np.zeros((n_pts, s), bool)
        self.ionic = filled((n_pts,), 1e-7)
        self.comp_species, self.weight, self.log_a = tableau_arrays(tab)
        # a solid can only form at a point where all its components are present
        needs = per_tableau("needs", tab, lambda tab: (np.abs(tab.b[:, 1:]) > 0).astype(float).T)  # (m-1, s)
        if self.present.all() or (self.present == self.present[0]).all():  # the same everywhere (a curve)
            self.possible = np.empty((n_pts, s), bool)
            self.possible[...] = ((~self.present[0, 1:]).astype(float) @ needs) == 0.0
        else:
            self.possible = ((~self.present[:, 1:]).astype(float) @ needs) == 0.0

    def start_from(self, eq: Equilibrium) -> None:
        """Start every point from a previous solution of the same system at the same points."""
        if eq.log_free.shape != self.x.shape or eq.solid_amount.shape != self.n.shape:
            raise ValueError("start: a solution of the same system at the same number of points is required")
        self.x[:] = eq.log_free
        self.n[:] = eq.solid_amount
        self.active[:] = eq.solid_amount > 0
        if not self.ideal:
            self.ionic[:] = np.maximum(eq.ionic_strength, 1e-9)
