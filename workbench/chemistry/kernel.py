"""Compiled per-point equilibrium kernel (numba): the code of the compiled engine.

The same model as the numpy engine (:mod:`workbench.chemistry.equations`: Newton-Raphson on the convex dual in
log10 free concentrations, an active set of solids, Davies activity coefficients), written as one loop over
points (:func:`solve_points`). :mod:`workbench.chemistry.compiled_engine` prepares its arguments and runs it on
a thread per core; this module holds only compiled code and its constants, so that a change to the driver does
not invalidate numba's cache of the kernel (keyed on this file's time stamp and size).

How a point is solved
---------------------
* Each point starts from the solution of the point before it in the same chunk, extrapolated from the two before
  (a curve along pH or dose is a continuation: two or three Newton steps per point), or from a given start moved
  as the point before moved from its own (Monte Carlo samples; a sample keeps the solids it gained or lost at
  the point before, with its shift from the nominal solution). Only the first point of a chunk, or a point whose
  components differ from its neighbour's, starts cold (:func:`_cold_start`).
* Where the trend of the two points before shows a solid appearing (its saturation index, extrapolated, above
  EARLY_ADD_SI) or dissolving (its amount, extrapolated, below zero), the start takes that change before any
  Newton step (:func:`_expected_solids`); converging on the old set first cost three or four extra steps.
  Mean Newton steps per Monte Carlo point: 2.66 -> 2.38 (two is the floor with a 1e-12 residual: one step from
  the predictor, one to the quadratic check).
* Near the solution the ionic strength is one more Newton unknown (u = log10 I, G = log10 I(computed) - u = 0).
  A present solid that fixes a single free concentration (a hydroxide at fixed pH) is eliminated before the LU
  (:func:`_solve_kkt`).
* With ideal activities at fixed pH, a point whose solids fix every free concentration (each metal present as
  its hydroxide or oxide, no ligand) is explicit: the free concentrations follow from saturation and the solid
  amounts from the mass balances, with no Newton step (:func:`_explicit`); where a solid would come out negative
  or another becomes supersaturated, the point takes the Newton steps.
* The kernel is kept simple on purpose: it adds one solid at a time and drops the most negative one, and
  whenever something does not go straight (Newton does not converge, a singular system, too many changes of the
  solids, an ionic strength beyond the activity model's range, a failed verification) it gives the point up
  (``ok[p] = False``). The numpy engine, with all its safeguards, then solves those points; every point, from
  either engine, passes the same verification (:func:`_final`, the numpy engine's ``State.finish``).

What makes it fast (keep it that way)
-------------------------------------
* No allocation and no reference counting: compiled with ``_nrt=False``; the working arrays come from Python
  (``compiled_engine.buffers``: rows of floats, rows of integers and the square matrices, packed in three arrays,
  made once per thread and system size and kept; the rows are named V_* and I_* below). Reference counts of the
  arrays passed per point used to cost as much as the arithmetic, and numba passes every array of a call field
  by field, so a call with thirty arrays cost more than the work of an easy point (both measured with
  ``perf``). No ``np.empty``, no array results, few array arguments in kernel code. The verification, the
  explicit points and the concentrations are inlined (``inline="always"``) into their callers for the same
  reason; inlining the whole per-point solve as well doubles the compile time.
* Species concentrations use the kernel's own 10**y (:func:`exp10`: y = k log10(2) + t, a Taylor polynomial in
  t ln 10, 2**k built from its bits; within 2 ulp of numpy's power, tested). numba without Intel's SVML (pip
  builds) compiles ``np.exp`` to one C-library call per element, which was a seventh of the Monte Carlo time;
  this form has no call, so the loop over species runs on the vector units (about 5x faster). It is compiled
  without the "reassoc" fast-math flag: reassociating the reduction would cost up to 30 ulp at |y| near 300.
  (Pointing LLVM at glibc's vector maths library through llvmlite options did not take effect.)
* Sums that used to add species by species into memory (mass balances, their Jacobian, the ionic-strength
  column) are gathered entry by entry from lists made once per tableau (``equations.by_component``,
  ``jacobian_terms``, ``solid_rows``): each sum stays in a register instead of every addition waiting for the
  one before it. The solids' stoichiometry is used as compressed rows (two or three components per solid).
* Tried and measured, not kept: concentrations as products of powers of the component activities (one exp() per
  component instead of per species) was slower; zeroing the Newton matrices in one block instead of row by row
  changed nothing; more chunks per thread in Monte Carlo calls (16 instead of 4) changed nothing; a chord step
  (reusing the first step's factorisation) cannot meet the 1e-12 residual in one step from the typical first
  step of 1e-4..1e-3, so it would not save a factorisation.

Changing it
-----------
numba compiles the kernel on first use (about 30 s on a 2-core machine, one type signature: the driver always
passes the same array types) and caches it in ``__pycache__/`` beside this file. ``make install`` compiles it
(``python -m workbench.chemistry.compiled_engine``); a process that finds no usable cache compiles it in the
background while the numpy engine serves (see the compiled engine). Measure a change with ``make bench`` and
check it with ``tests/test_kernel.py`` (the kernel against the numpy engine, to 1e-8) and
``tests/test_properties.py`` (every answer of 10,000 drawn waters verified). Costs inside the kernel are
measured by duplicating one part in a copy of this module and timing both on the same captured Monte Carlo
call, single-threaded, taking the minimum of many runs (the machine's speed drifts too much for medians;
``perf`` attribution is unreliable in a VM).
"""

from __future__ import annotations

import math

import numpy as np
from llvmlite import ir
from numba import njit, types
from numba.extending import intrinsic

from workbench.chemistry.equations import (
    ABSENT,
    EARLY_DROP_ITER,
    FAR_START_LOG,
    INIT_ITER,
    LN10,
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
)
from workbench.chemistry.water_properties import DAVIES_LINEAR

# the kernel's own settings (the shared tolerances above are the numpy solver's)
JOINT_RESIDUAL = 0.1  # below this scaled residual the ionic strength joins the Newton step
QUADRATIC_STEP = 1e-6  # a full Newton step below this (log10 units) is checked as the last one...
QUADRATIC_RESIDUAL = 1e-4  # ...if the scaled residual before it was below this
MIN_STEP = 1e-6  # a line search that only finds a shorter step than this gives the point up
NEIGHBOUR_PH = 0.5  # a given start yields to the point before only within this pH distance
MAX_ITER = 300  # Newton steps per point, all changes of the solids and the ionic strength included
MAX_CHANGES = 40  # changes of the solids per point
# an absent solid whose SI, extrapolated to a point from the two before, exceeds this enters before Newton steps
EARLY_ADD_SI = 1e-3
UNDERFLOW_LOG = -290.0  # species below 10**this mol/L are taken as zero
# fast-math flags without "nnan"/"ninf": the kernel tests for NaN and infinity
FAST = {"reassoc", "contract", "arcp", "nsz", "afn"}
# the packed working arrays (buffers): rows named where more than one function uses them; the others in _solve_point
V_LG, V_LOGC, V_C, V_SI, V_N_ACT, V_DISSOLVED, V_SUMABS, V_Z, V_XL = 0, 1, 2, 5, 6, 8, 9, 18, 19
V_COLD = 23  # three rows for _cold_start
V_G_SP = 26
# per species: d log10 c_i / du = davies_a * (d/du of the Davies term) * this row (solve_points sets it)
V_W_DAVIES = 27
VEC_ROWS, IVEC_ROWS, MAT_COUNT = 28, 8, 4
I_FREE, I_ACT, I_ALL, I_PIN = 0, 2, 3, 5
# 10**y in exp10: log10(2) split so that k * LOG10_2_HI is exact (its last 32 bits are zero) for |k| < 2**20
LOG10_2_HI = 0.30102992057800293
LOG10_2_LO = 7.508597826552624e-08  # log10(2) - LOG10_2_HI
LOG2_10 = 3.321928094887362
EXP_TAYLOR = tuple(1.0 / math.factorial(n) for n in range(14))  # 1/n!: e**r to 4e-18 for |r| <= ln(2) / 2


@njit(cache=True, fastmath=FAST, _nrt=False)
def _lu_solve(mat, rhs, size, cols):
    """Solve mat[:size, :size] y = rhs[:size] in place (Gaussian elimination, partial pivoting); the answer is
    left in rhs. Row updates skip the zeros of the pivot row (the systems are sparse); cols is scratch space of at
    least size integers. Returns False for a singular or non-finite system."""
    for k in range(size):
        piv = k
        big = abs(mat[k, k])
        for r in range(k + 1, size):
            v = abs(mat[r, k])
            if v > big:
                big = v
                piv = r
        if not (big > 0.0) or not np.isfinite(big):
            return False
        if piv != k:
            for col in range(size):
                tmp = mat[k, col]
                mat[k, col] = mat[piv, col]
                mat[piv, col] = tmp
            tmp = rhs[k]
            rhs[k] = rhs[piv]
            rhs[piv] = tmp
        n_cols = 0
        for col in range(k + 1, size):
            if mat[k, col] != 0.0:
                cols[n_cols] = col
                n_cols += 1
        inv = 1.0 / mat[k, k]
        for r in range(k + 1, size):
            f = mat[r, k] * inv
            if f != 0.0:
                for q in range(n_cols):
                    col = cols[q]
                    mat[r, col] -= f * mat[k, col]
                rhs[r] -= f * rhs[k]
    for k in range(size - 1, -1, -1):
        acc = rhs[k]
        for col in range(k + 1, size):
            acc -= mat[k, col] * rhs[col]
        rhs[k] = acc / mat[k, k]
        if not np.isfinite(rhs[k]):
            return False
    return True


@intrinsic
def _float_from_bits(typingctx, bits):
    """The float64 whose IEEE 754 bits are the given int64."""
    if bits != types.int64:
        return None

    def codegen(context, builder, signature, args):
        return builder.bitcast(args[0], ir.DoubleType())

    return types.float64(types.int64), codegen


_C = EXP_TAYLOR


@njit(cache=True, fastmath=FAST - {"reassoc"}, _nrt=False)
def exp10(y):
    """10**y for -300 <= y <= 300, to about 2 ulp. numba compiles exp() to one call of the C library per element;
    this form (y = k log10(2) + t with integer k, 10**t = e**(t ln 10) by its Taylor polynomial, times 2**k built
    from its bits) has no call, so a loop over species runs on the CPU's vector units (about 5x faster here).
    Compiled without "reassoc": reassociating (y - k HI) - k LO would undo the exact reduction. LLVM inlines it
    into the loops that call it."""
    k = np.rint(y * LOG2_10)
    r = ((y - k * LOG10_2_HI) - k * LOG10_2_LO) * LN10  # |r| <= ln(2) / 2
    p = _C[13] * r + _C[12]
    p = p * r + _C[11]
    p = p * r + _C[10]
    p = p * r + _C[9]
    p = p * r + _C[8]
    p = p * r + _C[7]
    p = p * r + _C[6]
    p = p * r + _C[5]
    p = p * r + _C[4]
    p = p * r + _C[3]
    p = p * r + _C[2]
    p = p * r + 1.0
    p = p * r + 1.0
    return p * _float_from_bits((np.int64(k) + 1023) << 52)


@njit(cache=True, fastmath=FAST, _nrt=False)
def _log_gamma(z, ionic, davies_a, ideal, lg):
    if ideal:
        lg.fill(0.0)
        return
    root = np.sqrt(ionic)
    d = root / (1.0 + root) - DAVIES_LINEAR * ionic
    for i in range(z.size):
        lg[i] = -davies_a * z[i] * z[i] * d


@njit(cache=True, fastmath=FAST, _nrt=False, inline="always")
def _concentrations(log_k, a_ptr, a_col, a_val, x, lg, comp_species, logc, c, xl):
    """log10 and concentration of every species (a species below 1e-290 mol/L is taken as zero)."""
    for j in range(x.size):
        xl[j] = x[j] + lg[comp_species[j]]
    for i in range(logc.size):
        acc = log_k[i] - lg[i]
        for q in range(a_ptr[i], a_ptr[i + 1]):
            acc += a_val[q] * xl[a_col[q]]
        logc[i] = acc
    for i in range(logc.size):
        acc = logc[i]
        value = exp10(min(max(acc, UNDERFLOW_LOG), 300.0))
        c[i] = value if acc > UNDERFLOW_LOG else 0.0


@njit(cache=True, fastmath=FAST, _nrt=False, inline="always")
def _component_totals(a_csc, c, out):
    """Dissolved total of each component, sum_i a_ij c_i, gathered component by component (a_csc: compressed
    columns of the stoichiometry)."""
    c_ptr, c_sp, c_val = a_csc
    for j in range(out.size):
        acc = 0.0
        for q in range(c_ptr[j], c_ptr[j + 1]):
            acc += c_val[q] * c[c_sp[q]]
        out[j] = acc


@njit(cache=True, fastmath=FAST, _nrt=False)
def _saturation(log_ks, b_rows, x, lg, comp_species, s_idx, k, out):
    b_ptr, b_col, b_val = b_rows
    for q in range(k):
        s = s_idx[q]
        acc = log_ks[s]
        for e in range(b_ptr[s], b_ptr[s + 1]):
            j = b_col[e]
            acc += b_val[e] * (x[j] + lg[comp_species[j]])
        out[s] = acc


@njit(cache=True, fastmath=FAST, _nrt=False)
def _phi(log_k, a_ptr, a_col, a_val, x, lg, comp_species, free, t, logc, c, xl):
    _concentrations(log_k, a_ptr, a_col, a_val, x, lg, comp_species, logc, c, xl)
    total = 0.0
    for i in range(c.size):
        total += c[i]
    total /= LN10
    for j in range(x.size):
        if free[j]:
            total -= t[j] * x[j]
    return total


@njit(cache=True, fastmath=FAST, _nrt=False)
def _ionic_of(c, z, fixed):
    ionic = 0.0
    charge = 0.0
    for i in range(c.size):
        ionic += 0.5 * z[i] * z[i] * c[i]
        charge += z[i] * c[i]
    if fixed:
        ionic += 0.5 * abs(charge)
    return ionic


@njit(cache=True, fastmath=FAST, _nrt=False)
def _cold_start(log_k, a, log_a, t, present, ph_start, x, z_comp, log_t, logc, step):
    """Per-component Newton steps on the mass balances in the log domain, ideal activities, no solids (the
    numpy solver's initial guess). Returns the starting ionic strength."""
    n, m = a.shape
    for j in range(1, m):
        if present[j]:
            x[j] = np.log10(t[j])
        else:
            x[j] = ABSENT
        log_t[j] = x[j]
    h = -ph_start
    x[0] = h
    for _ in range(INIT_ITER):
        for i in range(n):
            acc = log_k[i]
            for j in range(m):
                acc += a[i, j] * x[j]
            logc[i] = acc
        biggest = 0.0
        for j in range(1, m):
            step[j] = 0.0
            if not present[j]:
                continue
            top1 = -np.inf
            top2 = -np.inf
            for i in range(n):
                if log_a[i, j - 1] > -np.inf:
                    top1 = max(top1, logc[i] + log_a[i, j - 1])
                    top2 = max(top2, logc[i] + 2.0 * log_a[i, j - 1])
            if not np.isfinite(top1):
                top1 = 0.0
            if not np.isfinite(top2):
                top2 = 0.0
            sum1 = 0.0
            sum2 = 0.0
            for i in range(n):
                if log_a[i, j - 1] > -np.inf:
                    sum1 += 10.0 ** (logc[i] + log_a[i, j - 1] - top1)
                    sum2 += 10.0 ** (logc[i] + 2.0 * log_a[i, j - 1] - top2)
            s1 = top1 + np.log10(sum1)
            s2 = top2 + np.log10(sum2)
            st = (log_t[j] - s1) / 10.0 ** (s2 - s1)
            st = min(max(st, -50.0), 50.0)
            step[j] = st
            biggest = max(biggest, abs(st))
        for j in range(1, m):
            x[j] += step[j]
        if biggest < 0.05:
            break
    ionic = 10.0**h + 1e-14 / 10.0**h
    for j in range(1, m):
        ionic += t[j] * z_comp[j] * z_comp[j]
    return min(max(0.5 * ionic, 1e-7), 3.0)


@njit(cache=True, fastmath=FAST, _nrt=False)
def _active_list(active, act):
    k = 0
    for s in range(active.size):
        if active[s]:
            act[k] = s
            k += 1
    return k


@njit(cache=True, fastmath=FAST, _nrt=False)
def _restore(log_ks, b, b_rows, x, lg, comp_species, act, k_act, free_idx, f, si, gram, y, cols):
    """Least-norm change of the free X that saturates every present solid exactly (the constraints are linear).
    Moving the pH (charge-balance mode) is a last resort (small weight). Returns False if singular."""
    if k_act == 0:
        return True
    _saturation(log_ks, b_rows, x, lg, comp_species, act, k_act, si)
    for r in range(k_act):
        y[r] = si[act[r]]
        for q in range(k_act):
            acc = 0.0
            for jj in range(f):
                j = free_idx[jj]
                w = RESTORE_PH_WEIGHT if j == 0 else 1.0
                acc += b[act[r], j] * w * b[act[q], j]
            gram[r, q] = acc
    if not _lu_solve(gram, y, k_act, cols):
        return False
    for jj in range(f):
        j = free_idx[jj]
        w = RESTORE_PH_WEIGHT if j == 0 else 1.0
        acc = 0.0
        for r in range(k_act):
            acc += b[act[r], j] * y[r]
        x[j] -= w * acc
    return True


@njit(cache=True, fastmath=FAST, _nrt=False)
def _solve_kkt(kkt, rhs, size, f, k_act, cols, pin_col, keep_row, keep_col, red, red_rhs, sol):
    """Solve the KKT system kkt[:size, :size] y = rhs[:size] (unknowns: f changes of X, k_act solid amounts, then
    du if present), answer in rhs. A present solid whose saturation row holds a single change of X (in fixed-pH
    mode, a metal hydroxide or oxide: its metal's free concentration is fixed by the pH) is eliminated first,
    with that X and its own amount (found from its metal's mass balance after the rest): two fewer unknowns for
    the LU each, which is most of the system at precipitation pH. Returns False for a singular system."""
    n_pin = 0
    for q in range(k_act):
        r_s = f + q
        nz = 0
        col = -1
        for c in range(f):
            if kkt[r_s, c] != 0.0:
                nz += 1
                col = c
        pin_col[q] = -1
        if nz == 1:
            taken = False
            for q2 in range(q):
                if pin_col[q2] == col:
                    taken = True
            if not taken:
                pin_col[q] = col
                n_pin += 1
    if n_pin == 0:
        return _lu_solve(kkt, rhs, size, cols)
    # eliminate each pinned X from every other row with its saturation row (non-zeros: that X and du only)
    for q in range(k_act):
        c_m = pin_col[q]
        if c_m < 0:
            continue
        r_s = f + q
        v = kkt[r_s, c_m]
        for r in range(size):
            if r != r_s and kkt[r, c_m] != 0.0:
                factor = kkt[r, c_m] / v
                kkt[r, c_m] = 0.0
                for col in range(f + k_act, size):
                    kkt[r, col] -= factor * kkt[r_s, col]
                rhs[r] -= factor * rhs[r_s]
    # the rest: without the saturation rows and the pinned X, and without each pinned metal's mass row and its
    # solid's amount (that row is the only one holding it)
    # (the same unknowns are kept as equations: keep_col lists them)
    for r in range(size):
        keep_row[r] = 1
    for q in range(k_act):
        if pin_col[q] >= 0:
            keep_row[f + q] = 0
            keep_row[pin_col[q]] = 0
    sz = 0
    for r in range(size):
        if keep_row[r]:
            keep_col[sz] = r
            sz += 1
    for r2 in range(sz):
        r = keep_col[r2]
        for c2 in range(sz):
            red[r2, c2] = kkt[r, keep_col[c2]]
        red_rhs[r2] = rhs[r]
    if not _lu_solve(red, red_rhs, sz, cols):
        return False
    for r in range(size):
        sol[r] = 0.0
    for c2 in range(sz):
        sol[keep_col[c2]] = red_rhs[c2]
    for q in range(k_act):
        c_m = pin_col[q]
        if c_m >= 0:
            r_s = f + q
            acc = rhs[r_s]
            for col in range(f + k_act, size):
                acc -= kkt[r_s, col] * sol[col]
            sol[c_m] = acc / kkt[r_s, c_m]
    for q in range(k_act):
        c_m = pin_col[q]
        if c_m >= 0:
            acc = rhs[c_m]
            for col in range(size):
                if col != f + q:
                    acc -= kkt[c_m, col] * sol[col]
            piv = kkt[c_m, f + q]
            if piv == 0.0:
                return False
            sol[f + q] = acc / piv
    for r in range(size):
        if not np.isfinite(sol[r]):
            return False
        rhs[r] = sol[r]
    return True


@njit(cache=True, fastmath=FAST, _nrt=False)
def _settled(
    log_k,
    log_ks,
    a_ptr,
    a_col,
    a_val,
    a_csc,
    b_rows,
    b,
    z,
    comp_species,
    davies_a,
    ideal,
    fixed,
    ph,
    t,
    possible,
    x,
    active,
    k_act,
    f,
    ionic,
    max_ionic,
    vec,
    ivec,
):
    """Whether the point is solved as it stands: scaled mass residual below TOL_RESIDUAL with the solid amounts
    of the last Newton step (all >= 0), present solids saturated, absent ones not supersaturated, |G| <=
    TOL_IONIC. Works in _solve_point's rows of the packed arrays; leaves the pH held at the activity coefficients
    of the given ionic strength."""
    n_sp = a_ptr.size - 1
    m = x.size
    n_so = b.shape[0]
    lg, logc, c, xl = vec[V_LG, :n_sp], vec[V_LOGC, :n_sp], vec[V_C, :n_sp], vec[V_XL, :m]
    si, n_act = vec[V_SI, :n_so], vec[V_N_ACT, :n_so]
    dissolved, sumabs = vec[V_DISSOLVED, :m], vec[V_SUMABS, :m]
    free_idx, act, all_s = ivec[I_FREE, :m], ivec[I_ACT, :n_so], ivec[I_ALL, :n_so]
    _log_gamma(z, ionic, davies_a, ideal, lg)
    if fixed:
        x[0] = -ph - lg[comp_species[0]]
    _concentrations(log_k, a_ptr, a_col, a_val, x, lg, comp_species, logc, c, xl)
    c_ptr, c_sp, c_val = a_csc
    for j in range(m):
        acc = 0.0
        acc_abs = 0.0
        for q in range(c_ptr[j], c_ptr[j + 1]):
            av = c_val[q] * c[c_sp[q]]
            acc += av
            acc_abs += abs(av)
        dissolved[j] = acc
        sumabs[j] = acc_abs
    b_ptr, b_col, b_val = b_rows
    for q in range(k_act):
        if n_act[q] < 0.0:
            return False
        s = act[q]
        for e in range(b_ptr[s], b_ptr[s + 1]):
            dissolved[b_col[e]] += b_val[e] * n_act[q]  # (only the free components' balances are checked)
    for jj in range(f):
        j = free_idx[jj]
        if abs(t[j] - dissolved[j]) > TOL_RESIDUAL * max(max(abs(t[j]), sumabs[j]), 1e-300):
            return False
    _saturation(log_ks, b_rows, x, lg, comp_species, all_s, b.shape[0], si)
    for s in range(b.shape[0]):
        if active[s]:
            if abs(si[s]) > TOL_SATURATION:
                return False
        elif possible[s] and si[s] > TOL_SATURATION:
            return False
    if not ideal:
        computed = _ionic_of(c, z, fixed)
        if not (computed > 0.0) or computed > max_ionic:
            return False
        if abs(np.log10(computed) - np.log10(ionic)) > TOL_IONIC:
            return False
    return True


@njit(cache=True, fastmath=FAST, _nrt=False, inline="always")
def _final(
    log_k,
    log_ks,
    a_ptr,
    a_col,
    a_val,
    a_csc,
    b_rows,
    b,
    z,
    z_comp,
    comp_species,
    davies_a,
    ideal,
    fixed,
    ph,
    t,
    present,
    possible,
    x,
    n_out,
    active,
    ionic,
    c_work,
    lg_work,
    conc,
    lg,
    si,
    dissolved,
):
    """The solution at one point (concentrations and activity coefficients as the solver left them in c_work and
    lg_work, saturation indices) and its
    verification, the same as the numpy solver's: mass balances close to TOL_MASS, present solids saturated with
    amounts >= 0, absent ones not supersaturated, all finite, the activity coefficients those of the solution's
    ionic strength, and (charge-balance mode) electroneutrality. Returns (verified, ionic strength, charge)."""
    n_sp = a_ptr.size - 1
    m = x.size
    for i in range(n_sp):
        conc[i] = c_work[i]
        lg[i] = lg_work[i]
    _component_totals(a_csc, conc, dissolved)
    charge = 0.0
    charge_scale = 0.0
    ionic_c = 0.0
    ok = True
    for i in range(n_sp):
        if not np.isfinite(conc[i]):
            ok = False
        charge += z[i] * conc[i]
        charge_scale += abs(z[i]) * conc[i]
        ionic_c += 0.5 * z[i] * z[i] * conc[i]
    if fixed:
        ionic_c += 0.5 * abs(charge)
    n_so = b.shape[0]
    b_ptr, b_col, b_val = b_rows
    for s in range(n_so):
        acc = log_ks[s]
        for e in range(b_ptr[s], b_ptr[s + 1]):
            acc += b_val[e] * (x[b_col[e]] + lg[comp_species[b_col[e]]])
        si[s] = acc
        if active[s]:
            if abs(acc) > VERIFY_SATURATION or n_out[s] < 0.0:
                ok = False
        elif possible[s] and acc > VERIFY_SATURATION:
            ok = False
    for j in range(1, m):
        if present[j]:
            tot = dissolved[j]
            for s in range(n_so):
                if active[s]:
                    tot += b[s, j] * n_out[s]
            if not (abs(tot - t[j]) <= TOL_MASS * t[j]):
                ok = False
    if not fixed:
        total_charge = 0.0
        for j in range(1, m):
            total_charge += abs(t[j] * z_comp[j])
        if not (abs(charge) <= TOL_MASS * max(max(charge_scale, total_charge), 1e-300)):
            ok = False
    if not ideal and not (abs(np.log10(max(ionic_c, 1e-300) / ionic)) <= TOL_IONIC_VERIFIED):
        ok = False
    return ok, ionic_c, charge


@njit(cache=True, fastmath=FAST, _nrt=False, inline="always")
def _explicit(
    log_k,
    log_ks,
    a_ptr,
    a_col,
    a_val,
    a_csc,
    b,
    comp_species,
    fixed,
    ph,
    t,
    free,
    possible,
    x,
    n_out,
    active,
    vec,
    ivec,
):
    """A fixed-pH point with ideal activities whose present solids each fix one free concentration, and fix them
    all (a metal hydroxide or oxide for each metal: its metal's free concentration follows from the pH), needs no
    Newton step: the free concentrations follow from saturation, the solid amounts from the mass balances. Sets
    them (concentrations in the kernel's working rows) and returns True if the result holds: no solid amount
    below zero, no absent solid supersaturated; otherwise returns False, leaving x saturated as a start for
    the Newton steps."""
    m = x.size
    n_so = b.shape[0]
    n_sp = a_ptr.size - 1
    pin = ivec[I_PIN, :m]  # the present solid fixing each free component
    for j in range(m):
        pin[j] = -1
    for s in range(n_so):
        if active[s]:
            col = -1
            for j in range(m):
                if free[j] and b[s, j] != 0.0:
                    if col >= 0:
                        return False
                    col = j
            if col < 0 or pin[col] >= 0:
                return False
            pin[col] = s
    for j in range(m):
        if free[j] and pin[j] < 0:
            return False
    lg, logc, c, xl = vec[V_LG, :n_sp], vec[V_LOGC, :n_sp], vec[V_C, :n_sp], vec[V_XL, :m]
    dissolved = vec[V_DISSOLVED, :m]
    lg.fill(0.0)
    if fixed:
        x[0] = -ph
    for j in range(m):
        s = pin[j]
        if s >= 0:
            acc = log_ks[s]
            for k in range(m):
                if k != j and b[s, k] != 0.0:
                    acc += b[s, k] * x[k]
            x[j] = -acc / b[s, j]
    _concentrations(log_k, a_ptr, a_col, a_val, x, lg, comp_species, logc, c, xl)
    _component_totals(a_csc, c, dissolved)
    for s in range(n_so):
        n_out[s] = 0.0
    for j in range(m):
        s = pin[j]
        if s >= 0:
            n_out[s] = (t[j] - dissolved[j]) / b[s, j]
            if not (n_out[s] >= 0.0):
                return False
    for s in range(n_so):
        if possible[s] and not active[s]:
            acc = log_ks[s]
            for j in range(m):
                if b[s, j] != 0.0:
                    acc += b[s, j] * x[j]
            if acc > TOL_SATURATION:
                return False
    return True


@njit(cache=True, fastmath=FAST, _nrt=False)
def _solve_point(
    log_k,
    log_ks,
    a_ptr,
    a_col,
    a_val,
    a_csc,
    jac_terms,
    b_rows,
    a_row_max,
    b,
    z,
    comp_species,
    weight,
    davies_a,
    ideal,
    fixed,
    ph,
    t,
    free,
    possible,
    x,
    n_out,
    active,
    ionic0,
    max_ionic,
    warm,
    vec,
    ivec,
    mat,
    stats,
):
    """Solve one point from the given x, active set and ionic strength. Returns (ok, ionic).

    Newton steps on the mass balances and the saturation of the present solids, joined by the ionic strength
    as one more unknown, u = log10 I, with its own equation G = log10 I(computed) - u = 0 (Davies activity
    coefficients at I). Far from the solution (scaled residual above NEAR_RESIDUAL) a backtracking line search
    on the convex objective at fixed activity coefficients keeps each step a descent. Near it, the set of solids
    changes (drop the most negative, else add the most supersaturated). Solved when the step and residual are
    at rounding level, the solids stay and |G| <= TOL_IONIC."""
    n_sp = a_ptr.size - 1
    m = x.size
    n_so = b.shape[0]
    big = m + n_so + 1
    # views of the packed working arrays (buffers)
    lg, logc, c = vec[V_LG, :n_sp], vec[V_LOGC, :n_sp], vec[V_C, :n_sp]
    logc_t, c_t, g_sp, w_davies = vec[3, :n_sp], vec[4, :n_sp], vec[V_G_SP, :n_sp], vec[V_W_DAVIES, :n_sp]
    si, n_act, y_buf = vec[V_SI, :n_so], vec[V_N_ACT, :n_so], vec[7, :n_so]
    dissolved, sumabs = vec[V_DISSOLVED, :m], vec[V_SUMABS, :m]
    scale, x0, dx = vec[10, :m], vec[11, :m], vec[12, :m]
    mass_rhs, dlg_comp, col_sq, col_z, g_col = vec[13, :m], vec[14, :m], vec[15, :m], vec[16, :m], vec[17, :m]
    z_comp, xl = vec[V_Z, :m], vec[V_XL, :m]
    rhs, red_rhs, sol = vec[20, :big], vec[21, :big], vec[22, :big]
    free_idx, row_of, act, all_s = ivec[I_FREE, :m], ivec[1, :m], ivec[I_ACT, :n_so], ivec[I_ALL, :n_so]
    cols, pin_col, keep_row, keep_col = ivec[4, :big], ivec[I_PIN, :n_so], ivec[6, :big], ivec[7, :big]
    jac, kkt, gram, red = mat[0], mat[1], mat[2], mat[3]
    f = 0
    for j in range(m):
        row_of[j] = -1
        if free[j]:
            free_idx[f] = j
            row_of[j] = f
            f += 1
    ionic = ionic0
    # scaled residual of the last Newton step in this set of solids (a warm start takes the ionic strength into
    # the Newton step at once)
    last_residual = 0.0 if warm else np.inf
    changes = 0
    in_set = 0  # Newton steps since the set of solids last changed
    big_t = 0.0
    for j in range(1, m):
        big_t = max(big_t, abs(t[j]))
    log_big = np.log10(big_t + 1e-300)
    k_act = _active_list(active, act)
    restore = (
        not warm
    )  # a warm start goes straight into the joined Newton step, which restores saturation too
    was_joint = False
    h_sp = comp_species[0]
    for it in range(MAX_ITER):
        stats[1] += 1
        # the ionic strength joins the Newton step once the last step was near the solution; a step at fixed
        # activity coefficients after a joined one starts from saturated solids again
        joint = not ideal and last_residual < JOINT_RESIDUAL
        if was_joint and not joint and k_act > 0:
            restore = True
        was_joint = joint
        _log_gamma(z, ionic, davies_a, ideal, lg)
        if fixed:
            x[0] = -ph - lg[h_sp]
        if restore:
            stats[0] += 1
            if not _restore(
                log_ks, b, b_rows, x, lg, comp_species, act, k_act, free_idx, f, si, gram, y_buf, cols
            ):
                return False, ionic
            restore = False
        _concentrations(log_k, a_ptr, a_col, a_val, x, lg, comp_species, logc, c, xl)
        if it == 0:
            # a start far from this point's equilibrium: give it up (the caller starts cold)
            for i in range(n_sp):
                if logc[i] > log_big + FAR_START_LOG:
                    for q in range(a_ptr[i], a_ptr[i + 1]):
                        if a_col[q] > 0 and t[a_col[q]] != 0.0:
                            return False, ionic
        # KKT system for [dX (free components), n (present solids), du], mass rows scaled: the mass balances,
        # their Jacobian and, with the ionic strength as an unknown, its column and row: d log10 gamma_i / du
        # (Davies) and d log10 c_i / du at fixed X (with the pH held in fixed-pH mode: X_H + log10 gamma_H stays)
        size = f + k_act + (1 if joint else 0)
        if joint:
            root = np.sqrt(ionic)
            d_davies = (1.0 / (2.0 * root * (1.0 + root) ** 2) - DAVIES_LINEAR) * ionic * LN10
            for j in range(m):
                dlg_comp[j] = 0.0 if (fixed and j == 0) else -davies_a * z_comp[j] * z_comp[j] * d_davies
        # the ionic strength's sums, and each species' d log10 c_i / du (joint step)
        ionic_sq = 0.0
        charge = 0.0
        du_sq = 0.0
        du_z = 0.0
        if joint:
            k_davies = davies_a * d_davies
            for i in range(n_sp):
                ci = c[i]
                gi = k_davies * w_davies[i]
                g_sp[i] = gi
                zi = z[i]
                ionic_sq += 0.5 * zi * zi * ci
                charge += zi * ci
                du_sq += 0.5 * zi * zi * ci * gi
                du_z += zi * ci * gi
        # mass balances component by component, and the Jacobian entry by entry, each sum kept in a register
        # (adding species by species into memory makes every addition wait for the one before)
        c_ptr, c_sp, c_val = a_csc
        for j in range(m):
            acc = 0.0
            acc_abs = 0.0
            acc_g = 0.0
            acc_sq = 0.0
            acc_z = 0.0
            for q in range(c_ptr[j], c_ptr[j + 1]):
                i = c_sp[q]
                av = c_val[q] * c[i]
                acc += av
                acc_abs += abs(av)
                if joint:
                    acc_g += av * g_sp[i]
                    acc_sq += 0.5 * z[i] * z[i] * av
                    acc_z += z[i] * av
            dissolved[j] = acc
            sumabs[j] = acc_abs
            g_col[j] = acc_g
            col_sq[j] = acc_sq
            col_z[j] = acc_z
        e_ptr, e_row, e_col, e_sp, e_w = jac_terms
        for j in range(m):
            for q in range(m):
                jac[j, q] = 0.0
        for e in range(e_ptr.size - 1):
            acc = 0.0
            for q in range(e_ptr[e], e_ptr[e + 1]):
                acc += e_w[q] * c[e_sp[q]]
            jac[e_row[e], e_col[e]] = LN10 * acc
            jac[e_col[e], e_row[e]] = LN10 * acc
        for r in range(size):
            rhs[r] = 0.0
            for q in range(size):
                kkt[r, q] = 0.0
        for r in range(f):
            j = free_idx[r]
            scale[j] = 1.0 / max(max(abs(t[j]), sumabs[j]), 1e-300)
            for q in range(f):
                kkt[r, q] = jac[j, free_idx[q]] * scale[j]
            rhs[r] = (t[j] - dissolved[j]) * scale[j]
            mass_rhs[r] = rhs[r]
        b_ptr, b_col, b_val = b_rows
        for q in range(k_act):
            s = act[q]
            for e in range(b_ptr[s], b_ptr[s + 1]):
                r = row_of[b_col[e]]
                if r >= 0:
                    kkt[r, f + q] = b_val[e] * scale[b_col[e]]
                    kkt[f + q, r] = b_val[e]
        if k_act > 0:
            _saturation(log_ks, b_rows, x, lg, comp_species, act, k_act, si)
            for q in range(k_act):
                rhs[f + q] = -si[act[q]]
        g_res = np.inf
        if ideal:
            g_res = 0.0
        elif joint:
            # G = log10 I(computed) - u; in fixed-pH mode I counts the counter-ion of the acid or base that
            # holds the pH (|charge| / 2)
            sign = 0.0
            computed = ionic_sq
            if fixed:
                computed += 0.5 * abs(charge)
                sign = 0.5 if charge > 0 else -0.5
            if not (computed > 0.0) or computed > max_ionic:
                return False, ionic
            g_res = np.log10(computed) - np.log10(ionic)
            col = f + k_act
            for r in range(f):
                j = free_idx[r]
                kkt[r, col] = LN10 * g_col[j] * scale[j]
                kkt[col, r] = (col_sq[j] + sign * col_z[j]) / computed
            for q in range(k_act):
                acc = 0.0
                for e in range(b_ptr[act[q]], b_ptr[act[q] + 1]):
                    acc += b_val[e] * dlg_comp[b_col[e]]
                kkt[f + q, col] = acc
            kkt[col, col] = (du_sq + sign * du_z) / computed - 1.0
            rhs[col] = -g_res
        if not _solve_kkt(kkt, rhs, size, f, k_act, cols, pin_col, keep_row, keep_col, red, red_rhs, sol):
            return False, ionic
        du = rhs[f + k_act] if joint else 0.0
        # mass rows' residual after the step: minus the solids' share (mass_rhs is not needed after this)
        for q in range(k_act):
            s = act[q]
            for e in range(b_ptr[s], b_ptr[s + 1]):
                r = row_of[b_col[e]]
                if r >= 0:
                    mass_rhs[r] -= b_val[e] * scale[b_col[e]] * rhs[f + q]
        residual = 0.0
        for r in range(f):
            residual = max(residual, abs(mass_rhs[r]))
        step = abs(du)
        for r in range(f):
            step = max(step, abs(rhs[r]))
        for q in range(k_act):
            n_act[q] = rhs[f + q]
        converged = (residual < TOL_RESIDUAL and step < TOL_STEP) or step < TOL_STALL
        last_residual = residual
        near = residual < NEAR_RESIDUAL or converged
        in_set += 1
        # solids: near the solution (or after a few steps in this set) drop the most negative one (relative to
        # its components' totals); near, add the most supersaturated
        if near or in_set > EARLY_DROP_ITER:
            worst = -1
            worst_v = 0.0
            for q in range(k_act):
                if n_act[q] < 0.0:
                    ref = 1e-300
                    for j in range(1, m):
                        if b[act[q], j] != 0.0:
                            ref += abs(t[j])
                    if n_act[q] / ref < worst_v:
                        worst_v = n_act[q] / ref
                        worst = act[q]
            if worst >= 0 and (converged or in_set > EARLY_DROP_ITER or worst_v < -1e-6):
                active[worst] = False
                changes += 1
                if changes > MAX_CHANGES:
                    return False, ionic
                k_act = _active_list(active, act)
                in_set = 0
                restore = True
                last_residual = np.inf
                continue
        if near:
            _saturation(log_ks, b_rows, x, lg, comp_species, all_s, n_so, si)
            best = -1
            best_v = -np.inf
            threshold = TOL_SATURATION if converged else 1e-6
            for s in range(n_so):
                if possible[s] and not active[s] and si[s] > threshold:
                    v = si[s] / weight[s]
                    if v > best_v:
                        best_v = v
                        best = s
            if best >= 0:
                active[best] = True
                changes += 1
                if changes > MAX_CHANGES:
                    return False, ionic
                k_act = _active_list(active, act)
                in_set = 0
                restore = True
                last_residual = np.inf
                continue
        if converged and abs(g_res) <= TOL_IONIC:
            break
        # Newton step, limited: no species above 100x the largest total, none already there rising by more
        # than MAX_STEP_LOG, no free concentration moving by more than 10 log units
        dx.fill(0.0)
        for r in range(f):
            dx[free_idx[r]] = rhs[r]
        ceiling = log_big + 2.0
        lam = 1.0
        # no species can rise by more than a_row_max * step: where that leaves every one below the ceiling (and
        # within MAX_STEP_LOG), the full step stands without looking at each species
        top = -np.inf
        for i in range(n_sp):
            top = max(top, logc[i])
        if not (a_row_max * step < min(ceiling - top, MAX_STEP_LOG)):
            for i in range(n_sp):
                rise = 0.0
                for q in range(a_ptr[i], a_ptr[i + 1]):
                    rise += a_val[q] * dx[a_col[q]]
                if rise > 0.0:
                    room = ceiling - logc[i] if logc[i] < ceiling else MAX_STEP_LOG
                    lam = min(lam, room / rise)
        lam = min(lam, 10.0 / max(step, 1e-300))
        for j in range(m):
            x0[j] = x[j]
        phi0 = 0.0
        slope = 0.0
        far = not joint and residual > NEAR_RESIDUAL
        if far:
            for i in range(n_sp):
                phi0 += c[i]
            phi0 /= LN10
            for jj in range(f):
                j = free_idx[jj]
                phi0 -= t[j] * x[j]
                slope += (dissolved[j] - t[j]) * dx[j]
        if far and abs(slope) > 1e-10 * max(abs(phi0), 1e-300):
            # far: line search on the objective at the present activity coefficients
            accepted = False
            for _ls in range(40):
                stats[2] += 1
                for j in range(m):
                    x[j] = x0[j] + lam * dx[j]
                phi = _phi(log_k, a_ptr, a_col, a_val, x, lg, comp_species, free, t, logc_t, c_t, xl)
                if np.isfinite(phi) and phi <= phi0 + 1e-4 * lam * min(slope, 0.0) + 1e-14 * abs(phi0):
                    accepted = True
                    break
                lam *= 0.5
            if not accepted or lam < MIN_STEP:
                return False, ionic
        else:
            for j in range(m):
                x[j] = x0[j] + lam * dx[j]
            du *= lam
        if du != 0.0:
            ionic = 10.0 ** (np.log10(ionic) + min(max(du, -1.0), 1.0))
        # a full Newton step this small, near the solution, leaves an error of order its square: check the new
        # point directly (mass balances with the step's solid amounts, saturation, ionic strength) instead of
        # taking one more Newton step to find it converged
        if lam == 1.0 and step < QUADRATIC_STEP and residual < QUADRATIC_RESIDUAL and (joint or ideal):
            stats[2] += 1
            if _settled(
                log_k,
                log_ks,
                a_ptr,
                a_col,
                a_val,
                a_csc,
                b_rows,
                b,
                z,
                comp_species,
                davies_a,
                ideal,
                fixed,
                ph,
                t,
                possible,
                x,
                active,
                k_act,
                f,
                ionic,
                max_ionic,
                vec,
                ivec,
            ):
                break
    else:
        return False, ionic
    for s in range(n_so):
        n_out[s] = 0.0
    for q in range(k_act):
        n_out[act[q]] = n_act[q]
    return True, ionic


@njit(cache=True, fastmath=FAST, _nrt=False, inline="always")
def _step_ratio(fixed, ph, p, prev, prev2):
    """Step from the point before to point p over the step from the one before that, along the curve (pH in
    fixed-pH mode, the point's place in charge-balance mode); 0 where the two points before coincide."""
    s_p = ph[p] if fixed else float(p)
    s_1 = ph[prev] if fixed else float(prev)
    s_2 = ph[prev2] if fixed else float(prev2)
    return (s_p - s_1) / (s_1 - s_2) if s_1 != s_2 else 0.0


@njit(cache=True, fastmath=FAST, _nrt=False, inline="always")
def _expected_solids(weight, fixed, ph, possible, active, n_out, si_out, p, prev, prev2):
    """Before the Newton steps of a point started from the two points before it: change the set of solids where
    their trend already shows the change, so that the steps go to it at once instead of first converging on the
    old set. Drops the present solid whose amount, extrapolated from the two points before, falls below zero
    soonest; takes in the absent solid whose saturation index, extrapolated alike, rises highest above
    EARLY_ADD_SI (ranked by weight as in _solve_point). One of each at most: the Newton steps make any further
    change, and check these."""
    n_so = active.shape[1]
    ratio = _step_ratio(fixed, ph, p, prev, prev2)
    if not (ratio > 0.0 and ratio <= 2.0):
        return
    worst = -1
    worst_v = 0.0
    best = -1
    best_v = -np.inf
    for s in range(n_so):
        if active[p, s] and active[prev, s] and active[prev2, s] and n_out[prev, s] > 0.0:
            ahead = (n_out[prev, s] + ratio * (n_out[prev, s] - n_out[prev2, s])) / n_out[prev, s]
            if ahead < worst_v:
                worst_v = ahead
                worst = s
        elif possible[s] and not active[p, s] and not active[prev, s] and not active[prev2, s]:
            ahead = si_out[prev, s] + ratio * (si_out[prev, s] - si_out[prev2, s])
            if ahead > EARLY_ADD_SI and ahead / weight[s] > best_v:
                best_v = ahead / weight[s]
                best = s
    if worst >= 0:
        active[p, worst] = False
    if best >= 0:
        active[p, best] = True


@njit(cache=True, nogil=True, fastmath=FAST, _nrt=False)
def solve_points(
    log_k,
    log_ks,
    a,
    a_ptr,
    a_col,
    a_val,
    a_csc,
    jac_terms,
    b_rows,
    log_a,
    b,
    z,
    comp_species,
    weight,
    davies_a,
    ideal,
    fixed,
    ph,
    ph_guess,
    t,
    free,
    present,
    possible,
    x,
    n_out,
    active,
    ionic,
    use_start,
    x_start,
    x_start_active,
    ionic_start,
    chunks,
    max_ionic,
    ok,
    stats,
    conc,
    lg_out,
    si_out,
    dissolved_out,
    ionic_c,
    charge,
    buffers,
):
    """Solve every point; chunks[c]:chunks[c+1] are solved in order, each point from the one before it (or, with
    use_start, from its own given state). Fills x, n_out, active, ionic and ok (False: left to the numpy solver),
    the verified solution (conc, lg_out, si_out, dissolved_out, ionic_c, charge) and, per point, diagnostics in
    stats: saturation restores, Newton steps, line-search trials and final checks (kept on the solver's working
    state for developers measuring the kernel)."""
    n_sp, m = a.shape
    n_so = b.shape[0]
    vec, ivec, mat = buffers
    z_comp = vec[V_Z, :m]
    for j in range(m):
        z_comp[j] = z[comp_species[j]]
    # z_i^2 - sum_j a_ij z_j^2 (without the H+ component where the pH is held): the Davies term's weight in
    # d log10 c_i / du at fixed X
    w_davies = vec[V_W_DAVIES, :n_sp]
    for i in range(n_sp):
        acc = z[i] * z[i]
        for q in range(a_ptr[i], a_ptr[i + 1]):
            if not (fixed and a_col[q] == 0):
                acc -= a_val[q] * z_comp[a_col[q]] * z_comp[a_col[q]]
        w_davies[i] = acc
    all_s = ivec[I_ALL, :n_so]
    for s in range(n_so):
        all_s[s] = s
    a_row_max = 0.0  # the largest sum of |coefficients| of a species (bounds a species' rise in a step)
    for i in range(n_sp):
        acc = 0.0
        for q in range(a_ptr[i], a_ptr[i + 1]):
            acc += abs(a_val[q])
        a_row_max = max(a_row_max, acc)
    per_k = log_k.shape[0] > 1
    per_ks = log_ks.shape[0] > 1
    for ch in range(chunks.size - 1):
        prev = -1
        prev2 = -1
        for p in range(chunks[ch], chunks[ch + 1]):
            lk = log_k[p] if per_k else log_k[0]
            lks = log_ks[p] if per_ks else log_ks[0]
            warm = use_start
            if prev >= 0:
                same = True
                for j in range(m):
                    if present[p, j] != present[prev, j]:
                        same = False
                for s in range(n_so):
                    if possible[p, s] != possible[prev, s]:
                        same = False
                offset = use_start and same
                if offset:
                    for s in range(n_so):
                        if active[p, s] != x_start_active[prev, s]:
                            offset = False
                if offset:
                    # from the given start, moved as the point before moved from its own start, with the
                    # solids the point before ended with (e.g. a Monte Carlo sample along pH: the shift of its
                    # constants acts alike at neighbouring points, and a solid it gained or lost stays so)
                    # (extrapolated linearly from the two points before where they, and their starts, share
                    # their solids)
                    for s in range(n_so):
                        active[p, s] = active[prev, s]
                    two = prev2 >= 0
                    if two:
                        for s in range(n_so):
                            if (
                                active[prev2, s] != active[prev, s]
                                or x_start_active[prev2, s] != x_start_active[prev, s]
                            ):
                                two = False
                    for j in range(m):
                        if free[p, j]:
                            shift = x[prev, j] - x_start[prev, j]
                            if two:
                                shift += shift - (x[prev2, j] - x_start[prev2, j])
                            x[p, j] += shift
                    if not ideal:
                        ratio = ionic[prev] / ionic_start[prev]
                        if two:
                            ratio *= ratio / (ionic[prev2] / ionic_start[prev2])
                        ionic[p] *= ratio
                elif same and (not use_start or (fixed and abs(ph[p] - ph[prev]) <= NEIGHBOUR_PH)):
                    # continuation: from the point before, extrapolated along the curve (pH, or the point's
                    # place in charge-balance mode) from the two points before where they share their solids
                    for j in range(m):
                        if free[p, j]:
                            x[p, j] = x[prev, j]
                    for s in range(n_so):
                        active[p, s] = active[prev, s]
                    ionic[p] = ionic[prev]
                    warm = True
                    if prev2 >= 0:
                        for s in range(n_so):
                            if active[prev2, s] != active[prev, s]:
                                same = False
                        ratio = _step_ratio(fixed, ph, p, prev, prev2)
                        if same and ratio > 0.0 and ratio <= 2.0:
                            for j in range(m):
                                if free[p, j]:
                                    x[p, j] = x[prev, j] + ratio * (x[prev, j] - x[prev2, j])
                            if not ideal:
                                ionic[p] = ionic[prev] * (ionic[prev] / ionic[prev2]) ** ratio
            # explicit (ideal activities); else from the warm start, if any, with the changes of solids it already
            # shows; then, if that fails, cold
            good = (
                warm
                and ideal
                and _explicit(
                    lk,
                    lks,
                    a_ptr,
                    a_col,
                    a_val,
                    a_csc,
                    b,
                    comp_species,
                    fixed,
                    ph[p],
                    t[p],
                    free[p],
                    possible[p],
                    x[p],
                    n_out[p],
                    active[p],
                    vec,
                    ivec,
                )
            )
            if warm and prev2 >= 0 and not good:
                _expected_solids(weight, fixed, ph, possible[p], active, n_out, si_out, p, prev, prev2)
            for cold in (False, True):
                if good or (not cold and not warm):
                    continue
                if cold:
                    start_ph = ph[p] if fixed else ph_guess[p]
                    ionic[p] = _cold_start(
                        lk,
                        a,
                        log_a,
                        t[p],
                        present[p],
                        start_ph,
                        x[p],
                        z_comp,
                        vec[V_COLD],
                        vec[V_COLD + 1],
                        vec[V_COLD + 2],
                    )
                    for s in range(n_so):
                        active[p, s] = False
                good, ionic[p] = _solve_point(
                    lk,
                    lks,
                    a_ptr,
                    a_col,
                    a_val,
                    a_csc,
                    jac_terms,
                    b_rows,
                    a_row_max,
                    b,
                    z,
                    comp_species,
                    weight,
                    davies_a,
                    ideal,
                    fixed,
                    ph[p],
                    t[p],
                    free[p],
                    possible[p],
                    x[p],
                    n_out[p],
                    active[p],
                    ionic[p],
                    max_ionic,
                    not cold,
                    vec,
                    ivec,
                    mat,
                    stats[p],
                )
            if good:
                good, ionic_c[p], charge[p] = _final(
                    lk,
                    lks,
                    a_ptr,
                    a_col,
                    a_val,
                    a_csc,
                    b_rows,
                    b,
                    z,
                    z_comp,
                    comp_species,
                    davies_a,
                    ideal,
                    fixed,
                    ph[p],
                    t[p],
                    present[p],
                    possible[p],
                    x[p],
                    n_out[p],
                    active[p],
                    ionic[p],
                    vec[V_C, :n_sp],
                    vec[V_LG, :n_sp],
                    conc[p],
                    lg_out[p],
                    si_out[p],
                    dissolved_out[p],
                )
            ok[p] = good
            prev2 = prev if good else -1
            prev = p if good else -1
