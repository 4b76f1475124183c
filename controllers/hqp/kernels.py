r"""The hierarchical solve of :func:`controllers.hqp.solve_hierarchy`, compiled (numba): its one implementation.

:func:`solve_level_fast` solves one level in the two ways that need no QP
backend -- the closed-form least-squares point and the checked active-set
step -- and then freezes the level's optimum for the levels below (null-space
update, frozen inequality rows, elimination of rows active at every optimum).
The mathematics and every threshold are described in
:mod:`controllers.hqp.solver` ([Kanoun2011]_; [Escande2014]_). The KKT
conditions it checks before it keeps an active-set point are those of the
level's convex QP (the first-order conditions of [NocedalWright2006]_,
Theorem 12.1, which suffice for a convex QP):

* stationarity: :math:`H z + G_W^T \lambda = g` (the KKT system solved, its
  residual checked against ``feas_tol``);
* primal feasibility: every frozen and hard row holds, :math:`G z \le h`
  (within the absolute tolerance ``tol``);
* dual feasibility: :math:`\lambda \ge 0` for the rows of the working set W
  (down to ``-mult_tol`` times the largest multiplier);
* complementary slackness: rows outside W have :math:`\lambda = 0`, rows in W
  hold with equality;

and, for the level's own inequality rows, that the set S of rows whose slack is
in the cost is exactly the set of rows the point violates or meets. The
working-set updates are those of the primal active-set method
([NocedalWright2006]_, Algorithm 16.3) without its step-length rule. When
neither way verifies a level it returns :data:`NEEDS_QP` without changing
anything, and :func:`controllers.hqp.solve_hierarchy` builds the level's QP
for the backend.

:func:`solve_levels_fast` runs that over consecutive levels in one call,
timing each level with the same monotonic clock as :func:`time.perf_counter`
on Linux (``clock_gettime``; :data:`HAVE_CLOCK` is False where there is none,
and the caller then asks it for one level per call and times the call).

Box bounds on ``x`` reach these kernels as hard rows ``G x <= h``.

References
----------
.. [Kanoun2011] O. Kanoun, F. Lamiraux, P.-B. Wieber, "Kinematic control of
   redundant manipulators: generalizing the task-priority framework to
   inequality tasks", IEEE Trans. Robotics 27(4):785-792, 2011.
.. [Escande2014] A. Escande, N. Mansard, P.-B. Wieber, "Hierarchical quadratic
   programming: fast online humanoid-robot motion generation", Int. J.
   Robotics Research 33(7):1006-1028, 2014.
.. [NocedalWright2006] J. Nocedal, S. J. Wright, *Numerical Optimization*,
   2nd ed., Springer, 2006.
.. [GolubVanLoan2013] G. H. Golub, C. F. Van Loan, *Matrix Computations*,
   4th ed., Johns Hopkins University Press, 2013.
.. [Hestenes1958] M. R. Hestenes, "Inversion of matrices by biorthogonalization
   and related results", J. Soc. Indust. Appl. Math. 6(1), 1958 (from memory).
"""

from __future__ import annotations

import sys
import time

import numba as nb
import numpy as np
from llvmlite import ir
from numba.core import cgutils, types
from numba.extending import intrinsic

__all__ = ["CLOSED_FORM", "WORKING_SET", "NO_FREEDOM", "NEEDS_QP", "EMPTY", "METHODS", "OUT_HEADER", "HAVE_CLOCK",
           "solve_level_fast", "solve_levels_fast", "solve_stack_fast", "stack_is_finite", "place_q_rows"]

CLOSED_FORM, WORKING_SET, NO_FREEDOM, NEEDS_QP, EMPTY = 0, 1, 2, 3, 4
METHODS = ("closed-form", "working-set", "no freedom", "qp", "empty")
#: Scalars at the head of :func:`solve_stack_fast`'s output: stop, r, violation, tol.
OUT_HEADER = 4

#: the compiled code can read the monotonic clock (POSIX clock_gettime)
HAVE_CLOCK = (sys.platform.startswith("linux") and hasattr(time, "CLOCK_MONOTONIC")
              and not nb.config.DISABLE_JIT)  # NUMBA_DISABLE_JIT=1 runs the kernels as Python: no intrinsic
_CLOCK_ID = int(getattr(time, "CLOCK_MONOTONIC", 1))


@intrinsic
def _clock_gettime(typingctx, clock_id, timespec):
    """POSIX ``int clock_gettime(clockid_t, struct timespec *)``, called from compiled code."""
    sig = types.int32(types.int32, types.voidptr)

    def codegen(context, builder, signature, args):
        fnty = ir.FunctionType(ir.IntType(32), [ir.IntType(32), ir.IntType(8).as_pointer()])
        fn = cgutils.get_or_insert_function(builder.module, fnty, "clock_gettime")
        return builder.call(fn, args)

    return sig, codegen


@nb.njit(cache=True)
def _now_s(buf):
    """Seconds of the monotonic clock; ``buf`` is an int64 (2,) scratch array (a struct timespec)."""
    _clock_gettime(np.int32(_CLOCK_ID), buf.ctypes.data)
    return buf[0] + 1e-9 * buf[1]

_EPS = float(np.finfo(float).eps)
#: largest number of columns handed to the Jacobi SVD (measured: faster than LAPACK up to about this size)
_JACOBI_MAX = 12


#: largest product size (multiplications) summed in a loop rather than by BLAS (measured: a BLAS call
#: costs more than the arithmetic of these 7-by-7 products; common practice for tiny dense products)
_LOOP_MAX = 4096


@nb.njit(cache=True)
def _mm(A, B):
    """``A @ B``; small products summed in index order without the BLAS call."""
    m, k = A.shape
    n = B.shape[1]
    if m * k * n > _LOOP_MAX:
        return np.ascontiguousarray(A) @ np.ascontiguousarray(B)
    out = np.zeros((m, n))
    for i in range(m):
        for p in range(k):
            a = A[i, p]
            for j in range(n):
                out[i, j] += a * B[p, j]
    return out


@nb.njit(cache=True)
def _mv(A, x):
    """``A @ x``; small products summed in index order without the BLAS call."""
    m, k = A.shape
    if m * k > _LOOP_MAX:
        return np.ascontiguousarray(A) @ x
    out = np.empty(m)
    for i in range(m):
        acc = 0.0
        for p in range(k):
            acc += A[i, p] * x[p]
        out[i] = acc
    return out


@nb.njit(cache=True)
def _proj(M, N, has_N):
    if has_N:
        return _mm(M, N)
    return M.copy()


@nb.njit(cache=True)
def _lift(x, z, N, has_N):
    """``x + N @ z`` (``x + z`` without ``N``) in one new array: :func:`_mv`'s product, then x added in place."""
    if has_N:
        out = _mv(N, z)
        for i in range(out.shape[0]):
            out[i] += x[i]
        return out
    out = np.empty(x.shape[0])
    for i in range(x.shape[0]):
        out[i] = x[i] + z[i]
    return out


@nb.njit(cache=True)
def _row_dot(M, i, x):
    """``M[i] @ x``, summed in index order (no BLAS call for these small products)."""
    acc = 0.0
    for j in range(M.shape[1]):
        acc += M[i, j] * x[j]
    return acc


@nb.njit(cache=True)
def _residual(M, x, v):
    """``M @ x - v`` as a new array (:func:`_row_dot` per row)."""
    out = np.empty(M.shape[0])
    for i in range(M.shape[0]):
        out[i] = _row_dot(M, i, x) - v[i]
    return out


@nb.njit(cache=True)
def _max_violation(M, x, v, initial):
    """``max(initial, max_i (M @ x - v)_i)`` without temporaries."""
    worst = initial
    for i in range(M.shape[0]):
        r = _row_dot(M, i, x) - v[i]
        if r > worst:
            worst = r
    return worst


@nb.njit(cache=True)
def _scaled_gram(V, w):
    """``V @ diag(w) @ V.T`` (r, r) for V (r, k), summed in index order without temporaries."""
    r, k = V.shape
    out = np.empty((r, r))
    for i in range(r):
        for j in range(i, r):
            acc = 0.0
            for p in range(k):
                acc += V[i, p] * w[p] * V[j, p]
            out[i, j] = acc
            out[j, i] = acc
    return out


@nb.njit(cache=True)
def _abs_max(v):
    """``numpy.abs(v).max()`` of a finite vector without the temporary (0 for an empty one)."""
    worst = 0.0
    for k in range(v.shape[0]):
        if abs(v[k]) > worst:
            worst = abs(v[k])
    return worst


@nb.njit(cache=True)
def _lstsq(M, rhs):
    r"""Minimum-norm least squares, as ``numpy.linalg.lstsq(M, rhs, rcond=None)[0]``.

    From the singular value decomposition :math:`M V = U S`:
    :math:`x = \sum_j v_j\, u_j^T b / \sigma_j` over the
    :math:`\sigma_j > \varepsilon \max(m, n)\, \sigma_1` (LAPACK's ``gelsd``
    cut-off with numpy's default ``rcond``; Golub & Van Loan 2013, section
    5.5.4).
    """
    s, V, MV = _svd_right(M)
    x = np.zeros(M.shape[1])
    if s.shape[0] == 0 or s[0] == 0.0:
        return x
    cut = _EPS * max(M.shape[0], M.shape[1]) * s[0]
    for j in range(s.shape[0]):
        if s[j] > cut:
            c = 0.0
            for i in range(M.shape[0]):
                c += MV[i, j] * rhs[i]
            c /= s[j] * s[j]
            for i in range(x.shape[0]):
                x[i] += V[i, j] * c
    return x


@nb.njit(cache=True)
def _svd_right(P):
    r"""Singular values and a full set of right singular vectors of a small ``P`` (m, r), one-sided Jacobi.

    Rotates pairs of columns of :math:`P` until all are orthogonal (Hestenes
    1958; the rotation of Golub & Van Loan, *Matrix Computations*, 4th ed.,
    2013, section 8.6.3, Algorithm 8.6.1 for the symmetric 2-by-2 Schur
    decomposition), so that :math:`P V = [\sigma_1 u_1, \dots, \sigma_r u_r]` with
    :math:`V` (r, r) orthogonal. Accurate to a few ulps of
    :math:`\|P\|` in every singular value (Demmel & Veselic 1992), it needs no
    LAPACK workspace, which for these 7-by-7 problems is most of the cost of
    ``numpy.linalg.svd``. Returns ``(s, V, PV)`` sorted by decreasing
    :math:`\sigma`; columns with :math:`\sigma = 0` span the null space.
    """
    m, r = P.shape
    if r > _JACOBI_MAX:  # Jacobi sweeps cost O(r^3) each: LAPACK (gesdd) is faster for larger problems
        _, s_lapack, Vt = np.linalg.svd(P, full_matrices=True)
        s = np.zeros(r)
        s[: s_lapack.shape[0]] = s_lapack
        V = np.ascontiguousarray(Vt.T)
        return s, V, P @ V
    Wc = np.ascontiguousarray(P.T)  # row j: column j of P V
    V = np.eye(r)  # row j: column j of V
    # a column whose squared norm is below eps^2 ||P||_F^2 is zero to working precision: rotating it
    # against another changes nothing that matters, and its direction is rounding noise that would
    # never pass the orthogonality test, so a rank-deficient P (every wide one) would run all the
    # sweeps (the skip of negligible columns of LAPACK's dgesvj; Drmac & Veselic 2008, from memory)
    negligible = 0.0
    for k in range(m):
        for j in range(r):
            negligible += Wc[j, k] * Wc[j, k]
    negligible *= _EPS * _EPS
    for _ in range(64):
        rotated = False
        for i in range(r - 1):
            for j in range(i + 1, r):
                a = b = c = 0.0
                for k in range(m):
                    a += Wc[i, k] * Wc[i, k]
                    b += Wc[j, k] * Wc[j, k]
                    c += Wc[i, k] * Wc[j, k]
                if c == 0.0 or abs(c) <= _EPS * np.sqrt(a * b) or a <= negligible or b <= negligible:
                    continue
                rotated = True
                zeta = (b - a) / (2.0 * c)
                t = (1.0 if zeta >= 0.0 else -1.0) / (abs(zeta) + np.sqrt(1.0 + zeta * zeta))
                cs = 1.0 / np.sqrt(1.0 + t * t)
                sn = cs * t
                for k in range(m):
                    wi, wj = Wc[i, k], Wc[j, k]
                    Wc[i, k] = cs * wi - sn * wj
                    Wc[j, k] = sn * wi + cs * wj
                for k in range(r):
                    vi, vj = V[i, k], V[j, k]
                    V[i, k] = cs * vi - sn * vj
                    V[j, k] = sn * vi + cs * vj
        if not rotated:
            break
    # the column norms, summed in index order, then (s, V, P V) in decreasing s, written in place: each
    # temporary is a heap allocation, and these are most of what a 7-column call allocates
    s = np.empty(r)
    for j in range(r):
        acc = 0.0
        for k in range(m):
            acc += Wc[j, k] * Wc[j, k]
        s[j] = np.sqrt(acc)
    order = np.argsort(-s)
    s_sorted, V_sorted, PV = np.empty(r), np.empty((r, r)), np.empty((m, r))
    for c in range(r):
        o = order[c]
        s_sorted[c] = s[o]
        for k in range(r):
            V_sorted[k, c] = V[o, k]
        for k in range(m):
            PV[k, c] = Wc[o, k]
    return s_sorted, V_sorted, PV


@nb.njit(cache=True)
def _spd_solve(S, rhs):
    """(ok, x) with S x = rhs by Cholesky (Golub & Van Loan 2013, Algorithm 4.2.2); ok False if S is not
    clearly positive definite (a pivot below 1e-12 times the largest diagonal entry)."""
    m = S.shape[0]
    L = np.zeros((m, m))
    largest = 1e-300
    for j in range(m):
        largest = max(largest, abs(S[j, j]))
    floor = 1e-12 * largest if m else 0.0
    # the sums run in index order, as numba's ndarray.sum of the slices they replace (no temporaries)
    for j in range(m):
        acc = 0.0
        for k in range(j):
            acc += L[j, k] ** 2
        d = S[j, j] - acc
        if not d > floor:
            return False, rhs
        L[j, j] = np.sqrt(d)
        for i in range(j + 1, m):
            acc = 0.0
            for k in range(j):
                acc += L[i, k] * L[j, k]
            L[i, j] = (S[i, j] - acc) / L[j, j]
    y = np.empty(m)
    for i in range(m):
        acc = 0.0
        for k in range(i):
            acc += L[i, k] * y[k]
        y[i] = (rhs[i] - acc) / L[i, i]
    x = np.empty(m)
    for i in range(m - 1, -1, -1):
        acc = 0.0
        for k in range(i + 1, m):
            acc += L[k, i] * x[k]
        x[i] = (y[i] - acc) / L[i, i]
    return True, x


@nb.njit(cache=True)
def _rows(M, mask):
    out = np.empty((int(mask.sum()), M.shape[1]))
    k = 0
    for i in range(M.shape[0]):
        if mask[i]:
            out[k] = M[i]
            k += 1
    return out


@nb.njit(cache=True)
def _entries(v, mask):
    out = np.empty(int(mask.sum()))
    k = 0
    for i in range(v.shape[0]):
        if mask[i]:
            out[k] = v[i]
            k += 1
    return out


@nb.njit(cache=True)
def _vstack(P, Q):
    out = np.empty((P.shape[0] + Q.shape[0], P.shape[1] if P.shape[0] else Q.shape[1]))
    out[: P.shape[0]] = P
    out[P.shape[0]:] = Q
    return out


@nb.njit(cache=True)
def _concat(p, q):
    out = np.empty(p.shape[0] + q.shape[0])
    out[: p.shape[0]] = p
    out[p.shape[0]:] = q
    return out


@nb.njit(cache=True)
def _constraint_rows(x, N, has_N, G, h, rank_tol):
    """The frozen and hard rows in z, ``Gz z <= hz``, and the same rows in x-space ``Gx``; rows made constant
    by N (no entry above ``rank_tol`` times the row's largest) are left out."""
    Gz = _proj(G, N, has_N)
    hz = _mv(G, x)  # then h - G x, in place
    for i in range(hz.shape[0]):
        hz[i] = h[i] - hz[i]
    if has_N and Gz.shape[0]:
        keep = np.empty(Gz.shape[0], dtype=np.bool_)
        for i in range(Gz.shape[0]):
            keep[i] = _abs_max(Gz[i]) > rank_tol * max(_abs_max(G[i]), 1e-300)
        if not keep.all():
            return _rows(Gz, keep), _entries(hz, keep), _rows(G, keep)
    return Gz, hz, G  # Gx is only read


@nb.njit(cache=True)
def _working_set(x, N, has_N, G, h, C, d, wi, n_eq, V1, s1, c1, z_ls, tol, rank_tol, feas_tol, mult_tol):
    r"""Active-set steps from the least-squares point, kept only if the result is provably optimal:
    ``(kept, x, rows active at every optimum)``.

    The rows violated at the unconstrained point :math:`z_{ls}` form a working set W, held with
    equality. An inequality-only level is then at its optimum (slack 0) at any point that satisfies every
    row, so the minimum-norm correction onto W is kept if it is feasible. A level with equality rows solves
    its KKT system with W,

    .. math:: \begin{bmatrix} H_S & G_W^T \\ G_W & 0 \end{bmatrix}
              \begin{bmatrix} z \\ \lambda \end{bmatrix} =
              \begin{bmatrix} g_S \\ h_W \end{bmatrix},
              \qquad H_S = V_1 S_1^2 V_1^T + C_S^T \Omega_S C_S,
              \quad g_S = V_1 S_1 c_1 + C_S^T \Omega_S d_S

    (the equality-constrained QP of [NocedalWright2006]_ section 16.1, from memory; here by the Schur
    complement of H when it is definite, else by least squares on the whole system), where S is the set
    of the level's own inequality rows taken as violated (their weighted squared slack
    :math:`\omega (C_i z - d_i)^2` joins the cost; at first those violated at :math:`z_{ls}`). It then
    adds the most violated row of the frozen and hard ones to W, or else a row of the level's own that the
    point violates to S, or else drops from S a row the point satisfies, or else drops from W the row of
    the most negative multiplier, and solves again (the working-set updates of Algorithm 16.3, without
    its step-length rule), at most :math:`\min(2 m + 2, 8)` times for m constraint rows (on 3000 ticks of
    the reference run, ``scenarios/wall_push.py`` under ``walls``, no verified point needed more than 4,
    while a level that will not verify -- dependent rows, cycling -- should reach the backend soon). The
    point is kept once the KKT conditions of the module docstring hold: then the level's slacks are
    :math:`v = \max(C z - d, 0)` and the cost's gradient is the one the system solved, so it is an
    optimum whatever path led there. Rows of W with a clearly positive multiplier are returned for
    elimination (active at every optimum).
    """
    n = x.shape[0]
    none = np.zeros((0, n))
    n_in = C.shape[0]
    Gz, hz, Gx = _constraint_rows(x, N, has_N, G, h, rank_tol)
    if not n_eq:
        Gz = _vstack(_proj(C, N, has_N), Gz)
        hz = _concat(d - _mv(C, x), hz)
    W = np.empty(Gz.shape[0], dtype=np.bool_)  # the rows the least-squares point violates
    for i in range(Gz.shape[0]):
        W[i] = _row_dot(Gz, i, z_ls) - hz[i] > tol
    if not n_eq:
        if not W.any():
            return False, x, none
        GW, hW = _rows(Gz, W), _entries(hz, W)
        # minimum-norm correction onto W: GW^T (GW GW^T)^-1 res if GW has full row rank, else least squares
        res = hW - _mv(GW, z_ls)
        GWT = np.ascontiguousarray(GW.T)
        ok, y = _spd_solve(_mm(GW, GWT), res)
        step = _mv(GWT, y) if ok else _lstsq(GW, res)
        z = z_ls + step
        if _max_violation(Gz, z, hz, -np.inf) > tol:
            return False, x, none
        return True, _lift(x, z, N, has_N), none
    # the level's own inequality rows, in z: those of S add their weighted squared slack to the cost
    Cz = _proj(C, N, has_N)
    dz = d - _mv(C, x)
    S = np.empty(n_in, dtype=np.bool_)
    for i in range(n_in):
        S[i] = _row_dot(Cz, i, z_ls) - dz[i] > tol
    if not (W.any() or S.any()):
        return False, x, none
    r = z_ls.shape[0]
    H0 = _scaled_gram(V1, s1 * s1)
    g0 = _mv(V1, s1 * c1)
    full_rank = s1.shape[0] == r
    Hi = _scaled_gram(V1, 1.0 / (s1 * s1)) if full_rank else H0
    Hig = _mv(Hi, g0)
    for _ in range(min(2 * (Gz.shape[0] + n_in) + 2, 8)):  # at most min(2 m + 2, 8) iterations
        GW, hW = _rows(Gz, W), _entries(hz, W)
        m = GW.shape[0]
        GWT = np.ascontiguousarray(GW.T)
        H, g, definite = H0, g0, full_rank
        if S.any():  # H = H0 + C_S^T Omega_S C_S, g = g0 + C_S^T Omega_S d_S: the KKT system by least squares
            H, g, definite = H0.copy(), g0.copy(), False
            for k in range(n_in):
                if S[k]:
                    for i in range(r):
                        wc = wi[k] * Cz[k, i]
                        g[i] += wc * dz[k]
                        for j in range(r):
                            H[i, j] += wc * Cz[k, j]
        # the KKT system [H GW^T; GW 0] [z; lam] = [g; hW] by its Schur complement when H = V1 S1^2 V1^T is
        # definite (the unique solution), else by least squares: z = H^-1 (g - GW^T lam),
        # (GW H^-1 GW^T) lam = GW H^-1 g - hW (Nocedal & Wright 2006, section 16.1)
        scale = 1.0 + max(_abs_max(g), _abs_max(hW))
        ok = False
        kkt = np.inf  # the largest KKT residual of the point found
        if definite:
            HiGT = _mm(Hi, GWT)
            rhs = _mv(GW, Hig)  # then GW H^-1 g - hW, in place
            for i in range(m):
                rhs[i] -= hW[i]
            ok, lam = _spd_solve(_mm(GW, HiGT), rhs)
            if ok:
                z = _mv(HiGT, lam)  # then H^-1 g - H^-1 GW^T lam, in place
                for i in range(r):
                    z[i] = Hig[i] - z[i]
                # the KKT residual, block by block: max |H z + GW^T lam - g| and max |GW z - hW|
                Hz, GTl = _mv(H, z), _mv(GWT, lam)
                kkt = 0.0  # as _abs_max: a NaN entry is passed over
                for i in range(r):
                    e = abs(Hz[i] + GTl[i] - g[i])
                    if e > kkt:
                        kkt = e
                for i in range(m):
                    e = abs(_row_dot(GW, i, z) - hW[i])
                    if e > kkt:
                        kkt = e
        if not ok:
            K = np.zeros((r + m, r + m))
            K[:r, :r] = H
            K[:r, r:] = GWT
            K[r:, :r] = GW
            rhs = _concat(g, hW)
            sol = _lstsq(K, rhs)
            kkt = _abs_max(_mv(K, sol) - rhs)
            z, lam = sol[:r].copy(), sol[r:].copy()
        if kkt > feas_tol * scale:
            return False, x, none  # inconsistent working set
        lam_scale = max(1.0, _abs_max(lam))
        viol = _residual(Gz, z, hz)
        worst = int(np.argmax(viol)) if viol.shape[0] else -1
        if worst >= 0 and viol[worst] > tol:  # a row the step crossed: add it
            W[worst] = True
            continue
        if n_in:
            sv = _residual(Cz, z, dz)
            i_out, i_in = -1, -1
            for i in range(n_in):
                if S[i]:
                    if i_in < 0 or sv[i] < sv[i_in]:
                        i_in = i
                elif i_out < 0 or sv[i] > sv[i_out]:
                    i_out = i
            if i_out >= 0 and sv[i_out] > tol:  # a row of the level the point violates: its slack joins the cost
                S[i_out] = True
                continue
            if i_in >= 0 and sv[i_in] < -tol:  # a row of S the point satisfies: its slack leaves the cost
                S[i_in] = False
                continue
        if m and lam.min() < -mult_tol * lam_scale:  # a row that pulls the wrong way: drop it
            drop = int(np.argmin(lam))
            for i in range(W.shape[0]):
                if W[i]:
                    if drop == 0:
                        W[i] = False
                        break
                    drop -= 1
            continue
        return True, _lift(x, z, N, has_N), _rows(_rows(Gx, W), lam > mult_tol * lam_scale)
    return False, x, none


@nb.njit(cache=True)
def _eliminate(rows, N, has_N, rank_tol):
    """The freedom restricted to the null space of ``rows`` (unit rows, SVD at ``rank_tol``): (N, has_N)."""
    r = N.shape[1] if has_N else rows.shape[1]
    if rows.shape[0] == 0 or r == 0:
        return N, has_N
    unit = np.empty_like(rows)
    for i in range(rows.shape[0]):
        sq = 0.0
        for j in range(rows.shape[1]):
            sq += rows[i, j] ** 2
        norm = max(np.sqrt(sq), 1e-300)
        for j in range(rows.shape[1]):
            unit[i, j] = rows[i, j] / norm
    s, V, _ = _svd_right(_proj(unit, N, has_N))
    thr = rank_tol * np.sqrt(unit.shape[0])
    rank = 0
    for j in range(s.shape[0]):
        rank += s[j] > thr
    V2 = np.ascontiguousarray(V[:, rank:])
    if has_N:
        return _mm(N, V2), True
    return V2, True


@nb.njit(cache=True)
def solve_level_fast(x, N, has_N, G, h, A, b, sw, unit_eq, C, d, wi, tol, rank_tol, feas_tol, slack_tol, mult_tol,
                     closed_form, working_set_step):
    r"""One level of the hierarchy, closed form or one checked active-set step, compiled.

    Inputs are the state of the solve after the levels above (``x`` (n,),
    the null-space basis ``N`` (n, r) if ``has_N`` else ignored, the frozen
    and hard rows ``G x <= h``), the level's equality rows ``A x ~ b`` with
    the square roots ``sw`` of their weights (ignored if ``unit_eq``), its
    inequality rows ``C x <= d`` with the weights ``wi`` of their slacks, and the thresholds of
    :class:`controllers.hqp.HQPParams` (``tol`` is the absolute feasibility
    tolerance of the constraints). The level must have rows and freedom
    (r > 0).

    Returns ``(method, x, N, has_N, G, h, e, v)``: the method code
    (:data:`CLOSED_FORM`, :data:`WORKING_SET`, :data:`NO_FREEDOM`) and the
    state after the level, with the optimal slacks ``e = A x - b`` and
    ``v = max(C x - d, 0)``; or :data:`NEEDS_QP` and the inputs unchanged.
    """
    n = x.shape[0]
    n_eq, n_in = A.shape[0], C.shape[0]
    r = N.shape[1] if has_N else n
    rank = 0
    if n_eq:
        # W^1/2 A N = U S V^T, truncated at the rank: the cost is 1/2 ||S1 V1^T z - c1||^2 + const
        # (the products and sums below run in index order, as the array expressions they replace, without their
        # temporaries)
        err = _mv(A, x)  # then W^1/2 (b - A x), in place
        for i in range(n_eq):
            err[i] = b[i] - err[i]
        if unit_eq:
            Aw = A
        else:
            Aw = A * sw.reshape(-1, 1)
            for i in range(n_eq):
                err[i] = sw[i] * err[i]
        s, V, PV = _svd_right(_proj(Aw, N, has_N))
        sq = 0.0
        for i in range(n_eq):
            for j in range(n):
                sq += Aw[i, j] * Aw[i, j]
        thr = rank_tol * np.sqrt(sq)
        for j in range(s.shape[0]):
            rank += s[j] > thr
        V1 = np.ascontiguousarray(V[:, :rank])
        s1 = s[:rank].copy()
        V2 = np.ascontiguousarray(V[:, rank:])
        c1 = _mv(PV[:, :rank].T, err)  # U1^T err, U1 = P V1 / s1
        for j in range(rank):
            c1[j] /= s1[j]
        z_ls = _mv(V1, c1 / s1)
    else:
        z_ls = np.zeros(r)
        V1, s1, c1, V2 = np.zeros((r, 0)), np.zeros(0), np.zeros(0), np.zeros((r, 0))
    x_ls = _lift(x, z_ls, N, has_N)
    active = np.zeros((0, n))
    feasible = closed_form and _max_violation(G, x_ls, h, 0.0) <= tol
    if feasible and n_in:
        feasible = _max_violation(C, x_ls, d, -np.inf) <= tol
    if feasible:
        method, x_new = CLOSED_FORM, x_ls
    elif n_in == 0 and rank == 0:
        method, x_new = NO_FREEDOM, x.copy()
    else:
        kept = False
        x_new = x
        if working_set_step:
            kept, x_new, active = _working_set(x, N, has_N, G, h, C, d, wi, n_eq, V1, s1, c1, z_ls, tol, rank_tol,
                                               feas_tol, mult_tol)
        if not kept:
            return NEEDS_QP, x, N, has_N, G, h, np.zeros(0), np.zeros(0)
        method = WORKING_SET
    e = _residual(A, x_new, b)
    v = _residual(C, x_new, d)
    tight = np.empty(n_in, dtype=np.bool_)
    n_tight = 0
    for i in range(n_in):
        v[i] = max(v[i], 0.0)  # the slack max(C x - d, 0)
        tight[i] = v[i] > slack_tol * (1.0 + abs(d[i]))
        n_tight += tight[i]
    # freeze the optimum: equality rows through the null space, then the level's inequality rows
    if n_eq:
        N = _mm(N, V2) if has_N else V2
        has_N = True
    if n_tight:
        active = _vstack(_rows(C, tight), active)
    if n_tight < n_in:  # G <- [G; C_keep], h <- [h; d_keep + v_keep]
        m_g = G.shape[0]
        G2 = np.empty((m_g + n_in - n_tight, n))
        h2 = np.empty(m_g + n_in - n_tight)
        G2[:m_g] = G
        h2[:m_g] = h
        k = m_g
        for i in range(n_in):
            if not tight[i]:
                G2[k] = C[i]
                h2[k] = d[i] + v[i]
                k += 1
        G, h = G2, h2
    if active.shape[0]:
        N, has_N = _eliminate(active, N, has_N, rank_tol)
    return method, x_new, N, has_N, G, h, e, v


@nb.njit(cache=True)
def solve_levels_fast(start, end, timed, x, N, has_N, G, h, A, b, sw, eq_off, unit_eq, C, d, wi, in_off, tol,
                      rank_tol, feas_tol, slack_tol, mult_tol, closed_form, working_set_step, methods, X, e_all, v_all,
                      free, seconds, residuals, clock):
    r"""Levels ``start, ..., end - 1`` of a hierarchy with :func:`solve_level_fast`, until one needs the backend.

    The levels' rows are stacked: level k's equality rows are
    ``A[eq_off[k]:eq_off[k + 1]]`` (with ``b``, the square roots ``sw`` of
    their weights and ``unit_eq[k]``), its inequality rows
    ``C[in_off[k]:in_off[k + 1]]`` (with ``d`` and weights ``wi``). Per level
    it writes the method code, the point after the level ``X[k]``, the
    optimal slacks into ``e_all`` and ``v_all``, the freedom left
    ``free[k]`` and, if ``timed`` (:data:`HAVE_CLOCK`), the wall time
    ``seconds[k]`` [s]; a level without rows is :data:`EMPTY`, one without
    freedom :data:`NO_FREEDOM`.

    Returns ``(stop, x, N, has_N, G, h)``: ``stop`` is the first level that
    needs the QP backend (its outputs unwritten, the state that of the levels
    above it), or ``end``. When ``stop`` is the number of levels,
    ``residuals[k]`` holds every level's weighted squared error
    :math:`\sum w e^2 + \sum \omega v^2` at the final ``x``.
    """
    p = methods.shape[0]
    n = x.shape[0]
    k = start
    t0 = 0.0
    while k < end:
        if timed:
            t0 = _now_s(clock)
        Ak = np.ascontiguousarray(A[eq_off[k]: eq_off[k + 1]])
        bk = np.ascontiguousarray(b[eq_off[k]: eq_off[k + 1]])
        swk = np.ascontiguousarray(sw[eq_off[k]: eq_off[k + 1]])
        Ck = np.ascontiguousarray(C[in_off[k]: in_off[k + 1]])
        dk = np.ascontiguousarray(d[in_off[k]: in_off[k + 1]])
        wik = np.ascontiguousarray(wi[in_off[k]: in_off[k + 1]])
        r = N.shape[1] if has_N else n
        if Ak.shape[0] + Ck.shape[0] == 0:
            method = EMPTY
        elif r == 0:
            method = NO_FREEDOM
            for i in range(Ak.shape[0]):  # the slacks A x - b and max(C x - d, 0), as _residual and np.maximum
                e_all[eq_off[k] + i] = _row_dot(Ak, i, x) - bk[i]
            for i in range(Ck.shape[0]):
                vi = _row_dot(Ck, i, x) - dk[i]
                v_all[in_off[k] + i] = vi if vi >= 0.0 or vi != vi else 0.0
        else:
            method, x2, N2, has_N2, G2, h2, e, v = solve_level_fast(
                x, N, has_N, G, h, Ak, bk, swk, unit_eq[k], Ck, dk, wik, tol, rank_tol, feas_tol, slack_tol, mult_tol,
                closed_form, working_set_step)
            if method == NEEDS_QP:
                return k, x, N, has_N, G, h
            x, N, has_N, G, h = x2, N2, has_N2, G2, h2
            e_all[eq_off[k]: eq_off[k + 1]] = e
            v_all[in_off[k]: in_off[k + 1]] = v
        methods[k] = method
        X[k] = x
        free[k] = N.shape[1] if has_N else n
        if timed:
            seconds[k] = _now_s(clock) - t0
        k += 1
    if end < p:
        return end, x, N, has_N, G, h
    for k in range(p):  # sum w e^2 + sum omega v^2, in row order, without temporaries
        acc_e = 0.0
        for i in range(eq_off[k], eq_off[k + 1]):
            e = _row_dot(A, i, x) - b[i]
            acc_e += e * e if unit_eq[k] else sw[i] * sw[i] * e * e
        acc_v = 0.0
        for i in range(in_off[k], in_off[k + 1]):
            v = max(_row_dot(C, i, x) - d[i], 0.0)
            acc_v += wi[i] * v * v
        residuals[k] = acc_e + acc_v
    return p, x, N, has_N, G, h


@nb.njit(cache=True)
def solve_stack_fast(G, h, A, b, sw, eq_off, unit_eq, C, d, wi, in_off, rank_tol, feas_tol, slack_tol, mult_tol,
                     closed_form, working_set_step, clock):
    r"""A whole hierarchy above hard inequality rows ``G x <= h`` (no hard equalities, no bounds), in one call.

    What :func:`controllers.hqp.solve_hierarchy` does for such a stack up to
    the final minimum-norm level: the absolute feasibility tolerance
    ``feas_tol * (1 + max|h|)`` (as :func:`controllers.hqp.solve_hierarchy`), the
    start point :math:`x = 0` with the whole space free, every level through
    :func:`solve_levels_fast` (timed), and the largest violation of the hard
    rows at the final point (the solver's safety net).

    Returns one float64 array ``out`` (a tuple of arrays costs microseconds to
    hand back to Python; one array does not), laid out as :data:`OUT_HEADER`
    scalars, then the rest:

    * ``stop``: the first level that needs the QP backend, or the number of
      levels p when none does; ``r``: the dimension of the freedom left;
      ``violation``: :math:`\max_i (G x - h)_i` over the hard rows (0 without
      rows); ``tol``: the tolerance it is to be compared with;
    * the point after the levels solved, x (n), then the per-level outputs of
      :func:`solve_levels_fast`: ``residuals`` (p), ``seconds`` (p), ``X``
      (p, n), ``e_all`` (m_e), ``v_all`` (m_i);
    * the integers, exactly (all are far below 2**53): the method codes (p),
      the freedom left after each level (p), and copies of ``eq_off`` and
      ``in_off`` (p + 1 each).

    p is taken from ``eq_off``.
    """
    n = A.shape[1]
    p = eq_off.shape[0] - 1
    m_e, m_i = A.shape[0], C.shape[0]
    o = OUT_HEADER
    f_end = o + n + 2 * p + p * n + m_e + m_i
    out = np.empty(f_end + 4 * p + 2)
    residuals, seconds = out[o + n: o + n + p], out[o + n + p: o + n + 2 * p]
    X = out[o + n + 2 * p: o + n + 2 * p + p * n].reshape((p, n))
    e_all = out[o + n + 2 * p + p * n: o + n + 2 * p + p * n + m_e]
    v_all = out[o + n + 2 * p + p * n + m_e: f_end]
    ints = np.empty(2 * p, dtype=np.int64)
    methods, free = ints[:p], ints[p:]
    m_hard = G.shape[0]
    scale = 0.0
    for i in range(m_hard):
        if abs(h[i]) > scale:
            scale = abs(h[i])
    tol = feas_tol * (1.0 + scale)
    x = np.zeros(n)
    stop, x, N, has_N, _, _ = solve_levels_fast(
        0, p, True, x, np.zeros((n, 0)), False, G, h, A, b, sw, eq_off, unit_eq, C, d, wi, in_off, tol, rank_tol,
        feas_tol, slack_tol, mult_tol, closed_form, working_set_step, methods, X, e_all, v_all, free, seconds,
        residuals, clock)
    out[o: o + n] = x
    out[0] = stop
    out[1] = N.shape[1] if has_N else n
    out[2] = _max_violation(G, x, h, -np.inf) if m_hard else 0.0
    out[3] = tol
    for k in range(2 * p):
        out[f_end + k] = ints[k]
    for k in range(p + 1):
        out[f_end + 2 * p + k] = eq_off[k]
        out[f_end + 3 * p + 1 + k] = in_off[k]
    return out


@nb.njit(cache=True)
def stack_is_finite(A, b, C, d):
    """Whether every entry of the stacked rows ``A``, ``b``, ``C``, ``d`` is finite (one pass, no temporaries)."""
    for M in (A, C):
        for i in range(M.shape[0]):
            for j in range(M.shape[1]):
                if not np.isfinite(M[i, j]):
                    return False
    for v in (b, d):
        for i in range(v.shape[0]):
            if not np.isfinite(v[i]):
                return False
    return True


@nb.njit(cache=True)
def place_q_rows(A, b, n, rows, rhs, weights, start, weight):
    """Copy a task's rows ``A`` (m, 2 n) that do not act on the torques (every entry of ``A[:, n:]`` zero)
    into ``rows[start:start + m]`` (their q̈ part), ``b`` into ``rhs`` and ``weight`` into ``weights``.

    Returns False, writing nothing, when a row acts on the torques (the caller then eliminates them).
    """
    m = A.shape[0]
    for i in range(m):
        for j in range(n, 2 * n):
            if A[i, j] != 0.0:
                return False
    for i in range(m):
        for j in range(n):
            rows[start + i, j] = A[i, j]
        rhs[start + i] = b[i]
        weights[start + i] = weight
    return True
