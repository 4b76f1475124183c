r"""DAQP, a dense dual active-set QP solver [Arnstrom2022]_, through qpsolvers.

Solves

.. math::

    \min_y \; \tfrac12 y^\top P y + q^\top y
    \quad \text{s.t.} \quad G y \le h, \quad A y = b, \quad lb \le y \le ub

with ``qpsolvers.solve_problem(..., solver="daqp")``. DAQP factorises ``P``
and so needs it positive definite; a semidefinite ``P`` (a hierarchy level
whose cost does not involve every variable) is handled by DAQP's
proximal-point iterations [Rockafellar1976]_: it minimises
:math:`f(y) + \tfrac{\varepsilon}{2}\|y - y_j\|^2` and repeats from the new
point until the point stops moving. At that fixed point the proximal term has
zero gradient, so the point is an exact minimiser of :math:`f`; a single step
would be off by at most
:math:`f(y_{j+1}) - f^\star \le \tfrac{\varepsilon}{2}\,\mathrm{dist}(y_j, Y^\star)^2`.

Settings passed (all explicitly; every other DAQP setting keeps its default):

=================  ====================  ==========================  =============
QPTolerances       DAQP setting          value passed                DAQP default
=================  ====================  ==========================  =============
``eps_abs``        ``primal_tol``        1e-9                        1e-6
``dual_tol``       ``dual_tol``          1e-12                       1e-12
``max_iter``       ``iter_limit``        20000                       10000
``prox_tol``       ``eta_prox``          1e-12                       −1 (automatic)
regularization ε   ``eps_prox``          −ε (automatic: proximal     −1e-6
                                         only if ``P`` is singular)
=================  ====================  ==========================  =============

``eps_prox = 0`` (``regularization=0``) turns the proximal iterations off, and
DAQP then rejects a singular ``P`` (exit flag −5).

qpsolvers does not pass DAQP's exit flag or iteration count on. When a solve
fails, the adapter runs DAQP once more directly on the same data only to read
the exit flag for the status; ``iterations`` is always ``None``.

References
----------
.. [Arnstrom2022] D. Arnström, A. Bemporad, D. Axehill, IEEE Trans. Automatic
   Control 67(8):4362-4369, 2022.
.. [Rockafellar1976] R. T. Rockafellar, "Monotone operators and the proximal
   point algorithm", SIAM J. Control and Optimization 14(5):877-898, 1976.
"""

from __future__ import annotations

import time
from ctypes import c_int

import daqp
import numpy as np
import qpsolvers

from models.errors import ParameterError

from . import QPResult, QPSolveError, QPTolerances, check_qp

__all__ = ["NAME", "solve"]

NAME = "daqp"

if "daqp" not in qpsolvers.available_solvers:  # pragma: no cover - depends on the install
    raise ImportError("qpsolvers does not list daqp among its available solvers")

#: DAQP exit flags (``daqp.h``, ``EXIT_*``).
_EXIT_FLAGS = {
    2: "soft optimal",
    1: "optimal",
    -1: "infeasible",
    -2: "cycling",
    -3: "unbounded",
    -4: "iteration limit",
    -5: "nonconvex (singular P without proximal iterations)",
    -6: "overdetermined initial working set",
}

_BIG = 1e30  # DAQP's "no bound"


def _settings(tolerances: QPTolerances, regularization: float) -> dict:
    return {
        "primal_tol": tolerances.eps_abs,
        "dual_tol": tolerances.dual_tol,
        "iter_limit": int(tolerances.max_iter),
        "eps_prox": -float(regularization),
        "eta_prox": tolerances.prox_tol,
    }


def _exit_flag(P, q, G, h, A, b, lb, ub, settings: dict) -> int:
    """DAQP's exit flag for the same problem, from a direct call (failure path only)."""
    n = q.size
    rows = [M for M in (G, A) if M is not None]
    C = np.vstack(rows) if rows else np.zeros((0, n))
    upper = np.concatenate([v for v in (h, b) if v is not None] or [np.zeros(0)])
    lower = np.full(upper.size, -_BIG)
    sense = np.zeros(upper.size, dtype=c_int)
    if A is not None:
        sense[upper.size - A.shape[0] :] = 5  # DAQP: equality constraint
        lower[upper.size - A.shape[0] :] = b
    if lb is not None or ub is not None:
        bu = np.full(n, _BIG) if ub is None else np.minimum(ub, _BIG)
        bl = np.full(n, -_BIG) if lb is None else np.maximum(lb, -_BIG)
        upper, lower = np.concatenate([bu, upper]), np.concatenate([bl, lower])
        sense = np.concatenate([np.zeros(n, dtype=c_int), sense])
    _, _, flag, _ = daqp.solve(P, q, C, upper, lower, sense, **settings)
    return int(flag)


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
    """Solve a dense convex QP with DAQP.

    Parameters
    ----------
    P : (n, n) array_like
        Symmetric positive semidefinite cost matrix.
    q : (n,) array_like
        Linear cost.
    G, h : (m_i, n), (m_i,) array_like or None
        Inequalities ``G y <= h``.
    A, b : (m_e, n), (m_e,) array_like or None
        Equalities ``A y = b``.
    lb, ub : (n,) array_like or None
        Bounds (entries may be infinite).
    warm_start : (n,) array_like or None
        Primal guess (e.g. the previous control tick's solution); DAQP
        starts from the constraints that are nearly active there.
    tolerances : QPTolerances
        Explicit tolerances, mapped as in the module table.
    regularization : float, default 0.0
        Proximal weight ε used only when ``P`` is singular (module docstring).

    Returns
    -------
    QPResult
        ``found`` is True for DAQP exit flags 1 and 2.

    Raises
    ------
    ParameterError
        If the QP data have wrong shapes or non-finite values.
    QPSolveError
        If DAQP or qpsolvers raises.
    """
    start = time.perf_counter()
    P, q, G, h, A, b, lb, ub = check_qp(P, q, G, h, A, b, lb, ub)
    if not (np.isfinite(regularization) and regularization >= 0):
        raise ParameterError(f"daqp: regularization must be a finite float >= 0, got {regularization!r}")
    settings = _settings(tolerances, regularization)
    initvals = None if warm_start is None else np.array(warm_start, dtype=float).reshape(q.shape)  # writable copy
    try:
        problem = qpsolvers.Problem(P, q, G, h, A, b, lb, ub)
        solution = qpsolvers.solve_problem(problem, solver="daqp", initvals=initvals, verbose=False, **settings)
    except Exception as e:  # qpsolvers and DAQP raise several types; re-raise as ours
        raise QPSolveError(f"daqp through qpsolvers raised {type(e).__name__}: {e}") from e
    if solution.found and solution.x is not None:
        z = None if G is None else np.asarray(solution.z, dtype=float).copy()
        z_box = None if (lb is None and ub is None) else np.asarray(solution.z_box, dtype=float).copy()
        return QPResult(solution.x.copy(), True, "optimal", time.perf_counter() - start, None, z, z_box)
    flag = _exit_flag(P, q, G, h, A, b, lb, ub, settings)
    status = f"{_EXIT_FLAGS.get(flag, 'unknown')} (exitflag {flag})"
    return QPResult(None, False, status, time.perf_counter() - start)
