"""The compiled engine: the equilibrium kernel (:mod:`workbench.chemistry.kernel`, numba) run over the points of
a solve, on a thread per core for large calls.

:func:`solve` takes a :class:`~workbench.chemistry.equations.Problem` (made with ``compiled=True``) and returns
the verified Equilibrium at the points the kernel solved and the points it gave up (the solver hands those to
the numpy engine).

* Threads: a call whose estimated time on one thread (points x species x KERNEL_SPECIES_SECONDS) reaches
  KERNEL_THREAD_SECONDS runs one chunk per core on threads (the kernel releases the GIL); smaller ones run in
  the calling thread, since handing work to a thread costs about 0.2 ms. The choice depends on the call alone,
  never on a timing, so the same call always gives the same digits (tests/test_export.py checks identical
  bytes). The pool is rebuilt in a forked child. The solver sets BLAS to one thread for the process
  (threadpoolctl): the workbench's matrices are small and idle BLAS threads spin on the core the kernel's second
  thread needs.
* Working arrays: :func:`buffers` makes the kernel's three packed arrays, kept per thread and system size, so
  that the kernel allocates nothing (see :mod:`workbench.chemistry.kernel`).
"""

from __future__ import annotations

import functools
import inspect
import os
import subprocess
import sys
import threading
import time
from concurrent.futures import ThreadPoolExecutor

import numpy as np

from workbench.chemistry import kernel
from workbench.chemistry.equations import ABSENT, MAX_IONIC_STRENGTH, Equilibrium, Problem, compiled_arrays
from workbench.chemistry.kernel import IVEC_ROWS, MAT_COUNT, VEC_ROWS

CHUNKS_ARGUMENT = list(
    inspect.signature(getattr(kernel.solve_points, "py_func", kernel.solve_points)).parameters
).index("chunks")


@functools.cache
def threads() -> int:
    """Threads the kernel may use: the cores this process may run on (looked up once per process)."""
    return max(1, len(os.sched_getaffinity(0)) if hasattr(os, "sched_getaffinity") else (os.cpu_count() or 1))


_POOL: list = []


def _reset_pool() -> None:
    _POOL.clear()  # a forked child has none of its parent's threads: it makes its own pool when needed
    threads.cache_clear()  # nor, perhaps, its cores


os.register_at_fork(after_in_child=_reset_pool)


def buffers(n_species: int, n_components: int, n_solids: int) -> tuple:
    """Working arrays for one chunk of solve_points, packed in three arrays so that a call passes three arrays,
    not thirty (the kernel allocates nothing: it runs without numba's reference counting, which in a per-point
    loop costs as much as the arithmetic, and more on two threads): rows of floats and of integers, each long
    enough for any vector of the system, and the square matrices (see _solve_point for which row is which)."""
    big = n_components + n_solids + 1
    width = max(n_species, big)
    return (
        np.zeros((VEC_ROWS, width)),
        np.zeros((IVEC_ROWS, width), np.int64),
        np.zeros((MAT_COUNT, big, big)),
    )


_LOCAL = threading.local()


def _own_buffers(sizes: tuple) -> tuple:
    """This thread's working arrays for a system of these sizes, made once and kept (a thread runs one solve at
    a time: the compiled kernel never calls back into Python)."""
    kept = getattr(_LOCAL, "buffers", None)
    if kept is None or len(kept) > 8:
        kept = _LOCAL.buffers = {}
    if sizes not in kept:
        kept[sizes] = buffers(*sizes)
    return kept[sizes]


def _run(before: tuple, chunks: np.ndarray, after: tuple, sizes: tuple) -> None:
    kernel.solve_points(*before, chunks, *after, _own_buffers(sizes))


def run_chunks(args: tuple, chunks: np.ndarray, n_species: int, n_components: int, n_solids: int) -> None:
    """Run solve_points(*args[:chunk position], chunks, *rest, buffers) over the chunks, one chunk per thread
    (the compiled kernel releases the GIL); a single chunk runs in the calling thread."""
    before, after = args[:CHUNKS_ARGUMENT], args[CHUNKS_ARGUMENT:]
    sizes = (n_species, n_components, n_solids)
    if chunks.size <= 2:
        _run(before, chunks, after, sizes)
        return
    if not _POOL:
        _POOL.append(ThreadPoolExecutor(max_workers=threads(), thread_name_prefix="equilibrium"))
    jobs = [
        _POOL[0].submit(_run, before, chunks[i : i + 2].copy(), after, sizes) for i in range(chunks.size - 1)
    ]
    for job in jobs:
        job.result()


KERNEL_MIN_CHUNK = 64  # fewer points per chunk than this are not worth a thread (each chunk starts cold)
# threads: a call whose estimated time on one thread is below KERNEL_THREAD_SECONDS runs on one (handing work to
# a second thread costs about 0.2 ms on a 2-core laptop). The estimate is points x species x seconds per species
# and point, measured on such a machine with `make bench`; it depends on the call alone, never on timings, so
# that the same call is always split the same way and gives the same digits
KERNEL_THREAD_SECONDS = 2e-3
KERNEL_SPECIES_SECONDS = 2.5e-7  # Newton steps with Davies activities, or in charge-balance mode
KERNEL_SPECIES_SECONDS_EXPLICIT = 4e-8  # fixed pH, ideal activities: most points need no Newton step
NO_POINTS = np.empty(0, int)  # no points given up (read only)
NO_POINTS.flags.writeable = False


def solve(problem: Problem, use_start: bool, guess: np.ndarray) -> tuple[Equilibrium, np.ndarray]:
    """Solve the points of a problem (made with ``compiled=True``) with the kernel, in place. Without a
    start, points are solved in order, each from the one before (a continuation along the curve), in one chunk
    per thread. Returns the Equilibrium (verified at the points it solved) and the points it gave up."""
    tab = problem.tab
    n_pts = problem.x.shape[0]
    if not use_start and not problem.present.all():  # (x is zero where a component is present)
        problem.x[:, 1:] = np.where(problem.present[:, 1:], 0.0, ABSENT)
    # threads pay only for enough work (see KERNEL_THREAD_SECONDS); with a start, chunks cost nothing extra
    # and several per thread balance the load; without, each chunk's first point starts cold: one per thread
    per_species = (
        KERNEL_SPECIES_SECONDS_EXPLICIT
        if problem.ideal and problem.ph is not None
        else KERNEL_SPECIES_SECONDS
    )
    heavy = n_pts * len(tab.species) * per_species >= KERNEL_THREAD_SECONDS
    n_threads = threads() if heavy else 1
    per_chunk = max(KERNEL_MIN_CHUNK, -(-n_pts // (n_threads * (4 if use_start and n_threads > 1 else 1))))
    chunks = np.array([*range(0, n_pts, per_chunk), n_pts], np.int64)
    ok = np.zeros(n_pts, bool)
    problem.stats = np.zeros((n_pts, 3), np.int64)
    ionic_ceiling = np.inf if problem.ideal else MAX_IONIC_STRENGTH
    n_sp, n_so = len(tab.species), len(tab.solids)
    conc = np.empty((n_pts, n_sp))
    log_gamma = np.empty((n_pts, n_sp))
    si = np.empty((n_pts, n_so))
    dissolved = np.empty((n_pts, problem.m))
    ionic = np.empty(n_pts)
    charge = np.empty(n_pts)
    # (writable copies of read-only constants, e.g. the tableau's own: numba compiles read-only arrays as another
    # type, which would mean a second compile of the whole kernel)
    args = (
        _writable(problem.log_k),
        _writable(problem.log_ks),
        *compiled_arrays(tab),
        problem.ideal,
        problem.ph is not None,
        np.zeros(n_pts) if problem.ph is None else np.ascontiguousarray(problem.ph),
        np.ascontiguousarray(guess, dtype=float),
        problem.t,
        problem.free,
        problem.present,
        np.ascontiguousarray(problem.possible),
        problem.x,
        problem.n,
        problem.active,
        problem.ionic,
        use_start,
        problem.x.copy() if use_start else problem.x,
        problem.active.copy() if use_start else problem.active,
        problem.ionic.copy() if use_start else problem.ionic,
        ionic_ceiling,
        ok,
        problem.stats,
        conc,
        log_gamma,
        si,
        dissolved,
        ionic,
        charge,
    )
    run_chunks(args, chunks, n_sp, problem.m, n_so)
    ph = -(problem.x[:, 0] + log_gamma[:, problem.comp_species[0]])
    eq = Equilibrium(
        tableau=tab,
        log_free=problem.x,
        conc=conc,
        log_gamma=log_gamma,
        solid_amount=problem.n,  # the kernel sets absent solids' amounts to zero
        saturation_index=si,
        ionic_strength=ionic,
        ph=ph,
        strong_base=-charge if problem.ph is not None else np.zeros(n_pts),
        totals=problem.t,
        dissolved_totals=dissolved,
    )
    return eq, (NO_POINTS if ok.all() else np.flatnonzero(~ok))


def _writable(arr: np.ndarray) -> np.ndarray:
    return arr if arr.flags.writeable else arr.copy()


def compile_now() -> float:
    """Compile the kernel, or load it from numba's cache: one small solve in each mode (fixed pH and charge
    balance) through :func:`solve`. Returns the seconds it took."""
    from workbench.chemistry import tableau

    t0 = time.perf_counter()
    tab = tableau.build(("Zn^2+", "CO3^2-"), 25.0, "fresh")
    totals = np.zeros((3, len(tab.components)))
    totals[:, tab.component("Zn^2+")] = 1e-4
    totals[:, tab.component("CO3^2-")] = 1e-3
    guess = np.full(3, 7.0)
    for ph in (np.array([6.0, 9.0, 12.0]), None):
        problem = Problem(tab, totals, ph, "davies", compiled=True)
        solve(problem, False, guess)
    return time.perf_counter() - t0


# ---------------------------------------------------------------------------------------------------- first use
#: the command that compiles the kernel into numba's cache (also what `make install` runs)
COMPILE_COMMAND = (sys.executable, "-m", "workbench.chemistry.compiled_engine")
COMPILING_MESSAGE = (
    "workbench: the solver's compiled kernel is not in this installation's cache yet; it is being compiled in "
    "the background (about a minute, once per installation). Until it is ready, results come from the numpy "
    "engine: the same equations and checks, slower on large runs."
)
_LOCK = threading.Lock()
_STATUS = {"ready": False, "job": None, "failed": None, "seconds": None}


def ready() -> bool:
    """Whether the kernel can run in this process now.

    The first call loads the kernel when numba's cache holds it for this machine (well under a second) and
    returns True. When it does not, it starts compiling it in a separate process (:data:`COMPILE_COMMAND`),
    prints :data:`COMPILING_MESSAGE` once on stderr and returns False until the compiled kernel has been loaded
    here; the solver uses the numpy engine meanwhile, so no result waits for the compiler. If the compiling
    process fails, its last error line is printed once and the numpy engine keeps serving.
    """
    if _STATUS["ready"]:
        return True
    with _LOCK:
        if _STATUS["ready"] or _STATUS["job"] is not None or _STATUS["failed"]:
            return _STATUS["ready"]
        if is_cached():
            compile_now()  # loads it from the cache
            _STATUS["ready"] = True
            return True
        print(COMPILING_MESSAGE, file=sys.stderr, flush=True)
        job = threading.Thread(target=_compile_in_background, name="workbench-kernel-compile", daemon=True)
        _STATUS["job"] = job
        job.start()
        return False


def wait_until_ready(timeout: float | None = None) -> bool:
    """Wait for a compile started by :func:`ready` (e.g. before timing the compiled engine); returns
    :func:`ready`."""
    job = _STATUS["job"]
    if job is not None:
        job.join(timeout)
    return ready()


def status() -> dict:
    """``ready`` (bool), ``compiling`` (bool), ``failed`` (the error line or None) and ``seconds`` (the
    background compile's time, once done)."""
    job = _STATUS["job"]
    return {
        "ready": _STATUS["ready"],
        "compiling": job is not None and job.is_alive(),
        "failed": _STATUS["failed"],
        "seconds": _STATUS["seconds"],
    }


def is_cached() -> bool:
    """Whether numba's cache holds the kernel compiled for this machine and this source (read from numba's cache
    index; False when that cannot be read, so that the kernel is then compiled in the background)."""
    dispatcher = kernel.solve_points
    try:
        index = dispatcher._cache._cache_file._load_index()  # empty when missing or stale (source changed)
        magic = dispatcher.targetctx.codegen().magic_tuple()  # this CPU and target
        return any(key[1] == magic for key in index)
    except Exception:  # numba's internals moved: compile in the background, which is always safe
        return False


def _compile_in_background() -> None:
    started = time.perf_counter()
    package_parent = os.path.dirname(os.path.dirname(os.path.dirname(os.path.abspath(__file__))))
    env = dict(os.environ)
    env["PYTHONPATH"] = os.pathsep.join(p for p in (package_parent, env.get("PYTHONPATH")) if p)
    try:
        done = subprocess.run(
            COMPILE_COMMAND, env=env, stdin=subprocess.DEVNULL, capture_output=True, text=True, check=False
        )
        failed = None if done.returncode == 0 else (done.stderr.strip().splitlines() or ["no message"])[-1]
    except OSError as exc:
        failed = str(exc)
    if failed is not None:
        _STATUS["failed"] = failed
        print(
            f"workbench: the solver's kernel could not be compiled ({failed}); the numpy engine keeps serving.",
            file=sys.stderr,
            flush=True,
        )
        return
    compile_now()  # loads what the other process cached (or compiles here if it could not cache)
    _STATUS["seconds"] = time.perf_counter() - started
    _STATUS["ready"] = True


def _forget_job_in_child() -> None:
    _STATUS["job"] = None  # a forked child has no compile thread; it checks the cache again when asked


os.register_at_fork(after_in_child=_forget_job_in_child)


if __name__ == "__main__":  # `make install` runs it: python -m workbench.chemistry.compiled_engine
    if is_cached():
        print(
            f"solver kernel already compiled: loaded from numba's cache in {compile_now():.1f} s", flush=True
        )
    else:
        print(f"solver kernel compiled and cached in {compile_now():.1f} s", flush=True)
