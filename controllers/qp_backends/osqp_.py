r"""OSQP, an operator-splitting (ADMM) QP solver [Stellato2020]_, called directly.

Solves

.. math::

    \min_y \; \tfrac12 y^\top P y + q^\top y
    \quad \text{s.t.} \quad G y \le h, \quad A y = b, \quad lb \le y \le ub

written as OSQP's :math:`l \le \bar A y \le u` with
:math:`\bar A = [G; A; I_{\text{finite bounds}}]`. ADMM needs no strictly
convex ``P``, so ``regularization`` is not used. Polishing (an active-set
refinement after ADMM, [Stellato2020]_ section 5) makes the answer accurate
beyond the ADMM stopping tolerance when it succeeds.

Settings passed (all explicitly; every other OSQP setting keeps its default,
e.g. ``rho`` 0.1, ``sigma`` 1e-6, ``alpha`` 1.6, ``scaling`` 10, adaptive rho):

==================  =================================  ===========  ============
QPTolerances        OSQP setting                       value        OSQP default
==================  =================================  ===========  ============
``eps_abs``         ``eps_abs``                        1e-9         1e-3
``eps_rel``         ``eps_rel``                        1e-9         1e-3
``eps_infeasible``  ``eps_prim_inf``, ``eps_dual_inf``  1e-6         1e-4
``max_iter``        ``max_iter``                       20000        4000
``polish``          ``polishing``                      True         False
(none)              ``verbose``                        False        True
(warm start given)  ``warm_starting``                  True/False   True
==================  =================================  ===========  ============

OSQP 1.x prints "Polishing not needed - no active set detected at optimal
point" from its C code, whatever ``verbose`` says, whenever polishing finds no
active constraint. To keep a 1 kHz loop quiet the adapter appends one decoupled
variable :math:`t` with cost :math:`t` and constraint :math:`0 \le t \le 1`:
it is always active at :math:`t = 0`, so polishing always has an active set,
and it does not couple to ``y`` (the returned ``x`` drops it).

Work arrays reused across calls: the index arrays of the dense CSC patterns,
cached by shape. Needs OSQP >= 1.0 (setting names ``polishing``,
``warm_starting``); with an older OSQP the registry skips this adapter.
"""

from __future__ import annotations

import time
from functools import lru_cache

import numpy as np
import osqp
import scipy.sparse as sp

from . import QPResult, QPSolveError, QPTolerances, check_qp

__all__ = ["NAME", "solve"]

NAME = "osqp"

if not hasattr(osqp, "SolverStatus"):  # pragma: no cover - depends on the install
    # OSQP < 1.0 names its settings differently (polish, warm_start); the registry then skips this adapter
    raise ImportError(f"the osqp adapter needs osqp >= 1.0, found {getattr(osqp, '__version__', 'unknown')}")


@lru_cache(maxsize=64)
def _dense_pattern(m: int, n: int) -> tuple[np.ndarray, np.ndarray]:
    """CSC ``indices`` and ``indptr`` of a full (m, n) pattern (read-only)."""
    indices = np.tile(np.arange(m, dtype=np.int64), n)
    indptr = np.arange(0, m * n + 1, m, dtype=np.int64)
    indices.flags.writeable = False
    indptr.flags.writeable = False
    return indices, indptr


@lru_cache(maxsize=64)
def _upper_pattern(n: int) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Rows, columns and CSC ``indptr`` of a full (n, n) upper triangle, column by column (read-only)."""
    rows = np.concatenate([np.arange(j + 1, dtype=np.int64) for j in range(n)])
    cols = np.repeat(np.arange(n, dtype=np.int64), np.arange(1, n + 1))
    indptr = np.concatenate([[0], np.cumsum(np.arange(1, n + 1))]).astype(np.int64)
    for arr in (rows, cols, indptr):
        arr.flags.writeable = False
    return rows, cols, indptr


def solve(
    P,
    q,
    G=None,
    h=None,
    A=None,
    b=None,
    lb=None,
    ub=None,
    *,
    warm_start: np.ndarray | None = None,
    tolerances: QPTolerances,
    regularization: float = 0.0,
) -> QPResult:
    """Solve a dense convex QP with OSQP.

    Parameters
    ----------
    P : (n, n) array_like
        Symmetric positive semidefinite cost matrix (its upper triangle is
        used).
    q : (n,) array_like
        Linear cost.
    G, h : (m_i, n), (m_i,) array_like or None
        Inequalities ``G y <= h``.
    A, b : (m_e, n), (m_e,) array_like or None
        Equalities ``A y = b``.
    lb, ub : (n,) array_like or None
        Bounds (entries may be infinite).
    warm_start : (n,) array_like or None
        Primal starting point for ADMM (e.g. the previous tick's solution).
    tolerances : QPTolerances
        Explicit tolerances, mapped as in the module table.
    regularization : float, default 0.0
        Not used: ADMM handles a semidefinite ``P``.

    Returns
    -------
    QPResult
        ``found`` is True only for OSQP status ``solved``.

    Raises
    ------
    ParameterError
        If the QP data have wrong shapes or non-finite values.
    QPSolveError
        If OSQP raises (e.g. rejects the data at setup).
    """
    start = time.perf_counter()
    P, q, G, h, A, b, lb, ub = check_qp(P, q, G, h, A, b, lb, ub)
    n = q.size
    blocks, lower, upper = [], [], []
    if G is not None:
        blocks.append(G)
        lower.append(np.full(G.shape[0], -np.inf))
        upper.append(h)
    if A is not None:
        blocks.append(A)
        lower.append(b)
        upper.append(b)
    lo = np.full(n, -np.inf) if lb is None else lb
    hi = np.full(n, np.inf) if ub is None else ub
    bounded = np.flatnonzero(np.isfinite(lo) | np.isfinite(hi))
    if bounded.size:
        blocks.append(np.eye(n)[bounded])
        lower.append(lo[bounded])
        upper.append(hi[bounded])
    m = sum(blk.shape[0] for blk in blocks)

    # Dense data with the decoupled polishing variable t (last column and last row).
    A_full = np.zeros((m + 1, n + 1))
    if blocks:
        A_full[:m, :n] = np.vstack(blocks)
    A_full[m, n] = 1.0
    l_full = np.concatenate([*lower, [0.0]])
    u_full = np.concatenate([*upper, [1.0]])
    q_full = np.append(q, 1.0)
    indices, indptr = _dense_pattern(m + 1, n + 1)
    A_csc = sp.csc_matrix((A_full.ravel(order="F"), indices, indptr), shape=(m + 1, n + 1))
    p_rows, p_cols, p_indptr = _upper_pattern(n + 1)
    P_full = np.zeros((n + 1, n + 1))
    P_full[:n, :n] = P
    P_csc = sp.csc_matrix((P_full[p_rows, p_cols], p_rows, p_indptr), shape=(n + 1, n + 1))

    settings = {
        "verbose": False,
        "eps_abs": tolerances.eps_abs,
        "eps_rel": tolerances.eps_rel,
        "eps_prim_inf": tolerances.eps_infeasible,
        "eps_dual_inf": tolerances.eps_infeasible,
        "max_iter": int(tolerances.max_iter),
        "polishing": tolerances.polish,
        "warm_starting": warm_start is not None,
    }
    try:
        solver = osqp.OSQP()
        solver.setup(P_csc, q_full, A_csc, l_full, u_full, **settings)
        if warm_start is not None:
            solver.warm_start(x=np.append(np.asarray(warm_start, dtype=float).reshape(n), 0.0))
        result = solver.solve(raise_error=False)
    except (osqp.OSQPException, ValueError) as e:
        raise QPSolveError(f"osqp raised {type(e).__name__}: {e}") from e
    info = result.info
    if info.status_val != osqp.SolverStatus.OSQP_SOLVED:
        return QPResult(None, False, str(info.status), time.perf_counter() - start, int(info.iter))
    y = result.y  # OSQP: > 0 where the upper side of a row is active, < 0 where the lower side is
    z = None if G is None else y[: G.shape[0]].copy()
    z_box = None
    if lb is not None or ub is not None:
        z_box = np.zeros(n)
        z_box[bounded] = y[m - bounded.size : m]
    return QPResult(result.x[:n].copy(), True, str(info.status), time.perf_counter() - start, int(info.iter), z, z_box)
