"""The compiled kernel (the default engine) against the numpy solver, and its safeguards.

Both engines solve the same equations and verify their answers the same way, but they are separate code
(a compiled per-point loop with continuation from the point before, and a vectorised numpy solver with every
safeguard). The numpy solver is itself checked against outside references (tests/test_chempy_crosscheck.py,
tests/test_check_curves.py, tests/test_closed_form.py); here the kernel must reproduce it on every kind of call the
workbench makes: residual curves (fixed pH, Davies), titration (charge balance, lime), perturbed constants from a
start (Monte Carlo), ideal single metals, and waters that need the numpy solver's safeguards.
"""

from __future__ import annotations

import multiprocessing
from dataclasses import replace

import numpy as np
import pytest
from numba import njit

from tests.benchmarks.__main__ import mixed_water as benchmark_water
from workbench.chemistry import compiled_engine, equations, kernel, solver, tableau
from workbench.errors import ModelRangeError
from workbench.treatment.dose import dose_curve
from workbench.treatment.solubility import equilibrium

REL = 1e-8  # relative agreement of dissolved totals above FLOOR mol/L
FLOOR = 1e-16


def mixed_water(**changes):
    """The benchmark's mixed water (8 metals, Ca, Mg, Na, carbonate, sulfate, chloride, ammonia), with changes."""
    return replace(benchmark_water(), **changes)


@pytest.fixture
def kernel_states(monkeypatch):
    """The problems of the compiled-engine calls made in a test (their stats: Newton steps per point and more), in
    call order."""
    states = []
    real = compiled_engine.solve

    def keep_state(problem, *args):
        states.append(problem)
        return real(problem, *args)

    monkeypatch.setattr(compiled_engine, "solve", keep_state)
    return states


def both(tab, totals, ph=None, **kw):
    return (
        solver.solve(tab, totals, ph, engine="compiled", **kw),
        solver.solve(tab, totals, ph, engine="numpy", **kw),
    )


def assert_same(fast, ref):
    d_fast, d_ref = fast.dissolved()[:, 1:], ref.dissolved()[:, 1:]
    big = np.abs(d_ref) > FLOOR
    rel = np.abs(d_fast[big] / d_ref[big] - 1.0)
    assert rel.max(initial=0.0) < REL, f"dissolved totals differ by {rel.max():.2e} (relative)"
    np.testing.assert_allclose(fast.ph, ref.ph, rtol=0, atol=1e-9)
    np.testing.assert_allclose(fast.ionic_strength, ref.ionic_strength, rtol=1e-8)
    assert ((fast.solid_amount > 0) == (ref.solid_amount > 0)).all(), "different solids present"
    scale = np.maximum(np.abs(ref.solid_amount), 1e-300)
    present = ref.solid_amount > 1e-14
    assert (np.abs(fast.solid_amount - ref.solid_amount)[present] / scale[present]).max(initial=0.0) < 1e-6


@njit(fastmath=kernel.FAST)
def _exp10_loop(y, out):
    for i in range(y.size):  # as in the kernel: a loop compiled with its fast-math flags
        out[i] = kernel.exp10(y[i])


def test_kernel_power_of_ten_agrees_with_numpy_to_one_ulp():
    """The kernel's own 10**y (kernel.exp10, vectorisable) against numpy's power over the whole range the kernel
    uses (-290 to 300), and exactly at the integers, where 10**y is exact in numpy for 0 <= y <= 22."""
    rng = np.random.default_rng(7)
    y = np.concatenate(
        [rng.uniform(-300.0, 300.0, 200_000), rng.uniform(-1.0, 1.0, 20_000), np.arange(-300.0, 301.0)]
    )
    out = np.empty_like(y)
    _exp10_loop(y, out)
    reference = np.power(10.0, y)
    assert np.max(np.abs(out / reference - 1.0)) <= 2.0 * np.finfo(float).eps
    exact = np.arange(0.0, 23.0)
    _exp10_loop(exact, out[: exact.size])
    assert np.array_equal(out[: exact.size], np.power(10.0, exact))


def test_the_kernels_gathered_sums_rebuild_the_mass_balances_and_their_jacobian():
    """The compressed columns and the Jacobian terms the kernel gathers from, on the mixed water's tableau: summed
    for random concentrations they give A^T c and A^T diag(c) A (numpy, dense)."""
    tab, _ = equilibrium(mixed_water(), np.array([7.0]))
    a = np.asarray(tab.a, dtype=float)
    c = np.random.default_rng(3).lognormal(-10.0, 3.0, a.shape[0])
    ptr, species, coef = equations.by_component(a)
    balances = [coef[ptr[j] : ptr[j + 1]] @ c[species[ptr[j] : ptr[j + 1]]] for j in range(a.shape[1])]
    np.testing.assert_allclose(balances, a.T @ c, rtol=1e-13)
    e_ptr, row, col, sp, weight = equations.jacobian_terms(a)
    jac = np.zeros((a.shape[1], a.shape[1]))
    for e in range(row.size):
        terms = slice(e_ptr[e], e_ptr[e + 1])
        jac[row[e], col[e]] = jac[col[e], row[e]] = weight[terms] @ c[sp[terms]]
    np.testing.assert_allclose(jac, a.T @ (c[:, None] * a), rtol=1e-13, atol=1e-300)


def test_mixed_water_residual_curve_matches_the_numpy_solver():
    tab, _ = equilibrium(mixed_water(), np.array([7.0]))
    t = equilibrium(mixed_water(), np.array([7.0]))[1].totals[0]
    assert_same(*both(tab, t, np.linspace(4.0, 14.0, 281)))


@pytest.mark.parametrize("temperature_c", [5.0, 25.0, 45.0])
def test_mixed_water_at_temperature_matches(temperature_c):
    water = mixed_water(temperature_c=temperature_c)
    tab, eq = equilibrium(water, np.array([7.0]))
    assert_same(*both(tab, eq.totals[0], np.linspace(5.0, 12.5, 76)))


def test_single_metal_ideal_matches():
    tab = tableau.build(("Zn^2+",), 25.0, "aged")
    t = np.zeros(len(tab.components))
    t[1] = 0.01
    assert_same(*both(tab, t, np.linspace(6.0, 14.0, 500), activity="ideal"))


def test_points_fixed_by_their_solids_need_no_newton_step_and_match(kernel_states):
    """Copper and zinc, ideal activities, pH 4 to 14: where both oxides are present every free concentration
    follows from the pH (no Newton step); the kernel must take that path there, leave it where a solid appears or
    dissolves (ZnO redissolves as zincate near pH 12.5), and agree with the numpy solver everywhere."""
    tab = tableau.build(("Cu^2+", "Zn^2+"), 25.0, "aged")
    t = np.zeros(len(tab.components))
    t[tab.component("Cu^2+")] = 1e-4
    t[tab.component("Zn^2+")] = 1e-4
    ph = np.linspace(4.0, 14.0, 401)
    fast, ref = both(tab, t, ph, activity="ideal")
    assert_same(fast, ref)
    newton_steps = kernel_states[0].stats[:, 1]
    oxides = [tab.solids.index("CuO (tenorite)"), tab.solids.index("ZnO (zincite)")]
    both_solids = (ref.solid_amount[:, oxides] > 0).all(axis=1)
    first = np.flatnonzero(both_solids)[0]
    # past the first point with both solids, no Newton step while both stay; Newton steps where one dissolves
    assert both_solids[first:].sum() > 150
    assert (newton_steps[first + 1 :][both_solids[first + 1 :]] == 0).all()
    gone = np.flatnonzero(~both_solids[first:])[0] + first
    assert newton_steps[gone] > 0 and ph[gone] > 12.0


def test_a_solid_whose_trend_shows_it_appearing_enters_before_the_newton_steps(kernel_states):
    """Zinc, Davies activities (no explicit path), pH 6 to 14: at the point where zincite first appears, its
    saturation index extrapolated from the two points before is positive, so the kernel takes it in at once: at most
    three Newton steps there (converging on the old set first, then adding it, took six), and the same answer as
    the numpy solver at every point."""
    tab = tableau.build(("Zn^2+",), 25.0, "aged")
    t = np.zeros(len(tab.components))
    t[tab.component("Zn^2+")] = 1e-3
    ph = np.linspace(6.0, 14.0, 401)
    fast, ref = both(tab, t, ph, activity="davies")
    assert_same(fast, ref)
    present = (ref.solid_amount > 0).any(axis=1)
    appears = np.flatnonzero(present)[0]
    assert 6.5 < ph[appears] < 8.0 and not present[appears - 2 : appears].any()
    assert kernel_states[0].stats[appears, 1] <= 3


def test_lime_titration_in_charge_balance_mode_matches():
    water = mixed_water()
    doses = np.linspace(0.0, 800.0, 60)
    fast = dose_curve(water, "lime", doses)
    import workbench.chemistry.solver as s

    original = s.solve
    try:
        s.solve = lambda *a, **k: original(*a, **{**k, "engine": "numpy"})
        ref = dose_curve(water, "lime", doses)
    finally:
        s.solve = original
    np.testing.assert_allclose(fast["pH"].to_numpy(), ref["pH"].to_numpy(), rtol=0, atol=1e-8)


def test_perturbed_constants_from_a_start_match(kernel_states):
    """The Monte Carlo call: each point's constants shifted, starting from the nominal solution. The starts (the
    sample's shift carried from the point before, with the solids it gained or lost) keep the Newton steps low:
    3.7 per point on this call (4.3 before those starts)."""
    water = mixed_water()
    grid = np.linspace(4.0, 13.0, 91)  # (shifted constants can take pH 14 past the activity model's range)
    tab, nominal = equilibrium(water, grid)
    rng = np.random.default_rng(7)
    k = 6
    log_k = np.repeat(tab.log_k[None, :] + 0.3 * rng.standard_normal((k, tab.log_k.size)), grid.size, axis=0)
    log_ks = np.repeat(
        tab.log_ks[None, :] + 0.3 * rng.standard_normal((k, tab.log_ks.size)), grid.size, axis=0
    )
    start = solver.StartRows(nominal, np.tile(np.arange(grid.size), k))
    before = len(kernel_states)  # (the nominal solve above may have been one)
    fast, ref = both(tab, start.totals, np.tile(grid, k), log_k=log_k, log_ks=log_ks, start=start)
    assert_same(fast, ref)
    assert kernel_states[before].stats[:, 1].mean() < 4.0


def test_points_the_kernel_gives_up_are_solved_by_the_numpy_solver(monkeypatch):
    """Every point handed over (here: all, by a kernel that gives up everything) comes back solved and verified."""
    tab, eq = equilibrium(mixed_water(), np.array([7.0]))
    ph = np.linspace(4.0, 14.0, 41)
    ref = solver.solve(tab, eq.totals[0], ph, engine="numpy")
    real = compiled_engine.run_chunks

    def give_up_every_other(args, chunks, *sizes):
        real(args, chunks, *sizes)
        ok = args[compiled_engine.CHUNKS_ARGUMENT + 1]
        ok[::2] = False

    monkeypatch.setattr(compiled_engine, "run_chunks", give_up_every_other)
    assert_same(solver.solve(tab, eq.totals[0], ph), ref)


def test_too_concentrated_is_refused_by_either_engine():
    tab = tableau.build(("Na+", "SO4^2-"), 25.0, "fresh")
    t = np.zeros(len(tab.components))
    t[tab.component("Na+")] = 4.0
    t[tab.component("SO4^2-")] = 2.0
    for engine in ("compiled", "numpy"):
        with pytest.raises(ModelRangeError, match="ionic strength"):
            solver.solve(tab, t, np.array([7.0]), engine=engine)


def test_unknown_engine_is_refused_with_the_allowed_values():
    tab = tableau.build(("Zn^2+",), 25.0, "aged")
    with pytest.raises(ValueError, match=r"engine: got 'fast'; allowed \('compiled', 'numpy'\)"):
        solver.solve(tab, np.zeros(len(tab.components)), 7.0, engine="fast")


def _solve_in_child(queue):
    tab = tableau.build(("Zn^2+",), 25.0, "aged")
    t = np.zeros(len(tab.components))
    t[1] = 1e-3
    eq = solver.solve(tab, np.tile(t, (4000, 1)), np.linspace(7.0, 12.0, 4000), activity="ideal")
    queue.put(float(eq.dissolved()[:, 1].min()))


def test_a_forked_process_can_solve_after_its_parent_used_threads():
    tab = tableau.build(("Zn^2+",), 25.0, "aged")
    t = np.zeros(len(tab.components))
    t[1] = 1e-3
    parent = solver.solve(tab, np.tile(t, (4000, 1)), np.linspace(7.0, 12.0, 4000), activity="ideal")
    ctx = multiprocessing.get_context("fork")
    queue = ctx.Queue()
    child = ctx.Process(target=_solve_in_child, args=(queue,))
    child.start()
    child.join(120)
    assert child.exitcode == 0
    assert queue.get(timeout=5) == pytest.approx(float(parent.dissolved()[:, 1].min()), rel=1e-12)
