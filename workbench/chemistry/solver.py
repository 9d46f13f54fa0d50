"""Chemical equilibrium at many points: the one entry to the two engines that solve it.

:func:`solve` takes a tableau (:mod:`workbench.chemistry.tableau`), component totals and a pH (fixed-pH mode) or
none (charge-balance mode) at N points and returns a verified :class:`Equilibrium`. The equations, the
tolerances and the verification are in :mod:`workbench.chemistry.equations`. Two engines solve them, beside each
other; neither imports the other or this module:

* the compiled engine (:mod:`workbench.chemistry.compiled_engine`, the default): a per-point loop compiled with numba
  (:mod:`workbench.chemistry.kernel`),
  each point from its neighbour, on a thread per core for large calls. It gives up any point that does not go
  straight; those points go to the numpy engine.
* the numpy engine (:mod:`workbench.chemistry.numpy_engine`): every point at once with every safeguard; the
  reference the compiled engine is tested against (``engine="numpy"`` uses it alone).

Either way every point returned has passed the same verification; otherwise
:class:`~workbench.errors.ConvergenceError` names the points, and a water beyond the activity model's range
raises :class:`~workbench.errors.ModelRangeError`.
"""

from __future__ import annotations

import numpy as np

from workbench.chemistry import numpy_engine
from workbench.chemistry.equations import (
    ACTIVITY_MODELS,
    MAX_IONIC_STRENGTH,
    ROW_FIELDS,
    Equilibrium,
    Problem,
    StartRows,
    filled,
)
from workbench.chemistry.tableau import Tableau

__all__ = [
    "ACTIVITY_MODELS",
    "ENGINES",
    "MAX_IONIC_STRENGTH",
    "Equilibrium",
    "StartRows",
    "limit_blas",
    "solve",
]

ENGINES = ("compiled", "numpy")


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
        the kernel is tested against). Both verify every answer in the same way. In a process whose
        installation has no compiled kernel yet, ``"compiled"`` calls are served by the numpy engine while the
        kernel is compiled in the background (:func:`workbench.chemistry.compiled_engine.ready`); their results
        agree with the kernel's to 1e-8 (tests/test_kernel.py), not to the last digit.

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
    ph_arr = filled((n_pts,), ph) if fixed else None
    totals = filled((n_pts, len(tab.components)), totals)
    guess = filled((n_pts,), ph_guess)
    limit_blas()
    if engine == "numpy":
        return numpy_engine.solve(tab, totals, ph_arr, activity, guess, log_k, log_ks, start).finish()
    # (numba is imported at the first compiled solve, not with this module)
    from workbench.chemistry import compiled_engine

    if not compiled_engine.ready():  # being compiled in the background: the numpy engine serves meanwhile
        return numpy_engine.solve(tab, totals, ph_arr, activity, guess, log_k, log_ks, start).finish()

    # the compiled kernel, which verifies what it returns; the points it gives up go to the numpy engine, whose
    # answers are verified in the same way (State.finish)
    problem = Problem(tab, totals, ph_arr, activity, log_k, log_ks, compiled=True)
    if start is not None:
        problem.start_from(start)  # (the kernel holds the pH itself)
    eq, rest = compiled_engine.solve(problem, start is not None, guess)
    if rest.size:
        sub = numpy_engine.solve(
            tab,
            totals[rest],
            None if ph_arr is None else ph_arr[rest],
            activity,
            guess[rest],
            None if log_k is None else problem.log_k[rest],
            None if log_ks is None else problem.log_ks[rest],
            None if start is None else StartRows(start, rest),
        ).finish()
        for name in ROW_FIELDS:
            getattr(eq, name)[rest] = getattr(sub, name)
        eq.dissolved_totals[rest] = sub.dissolved()
    return eq


_BLAS_LIMITED = False


def limit_blas() -> None:
    """Set BLAS to one thread, once per process. The solver's matrices are
    small: BLAS threads gain nothing on them, and after each call they spin on the other core for a while,
    where the compiled kernel's second thread runs (measured: a fifth of all CPU time in a Monte Carlo run)."""
    global _BLAS_LIMITED
    if not _BLAS_LIMITED:
        from threadpoolctl import threadpool_limits

        threadpool_limits(limits=1, user_api="blas")
        _BLAS_LIMITED = True
