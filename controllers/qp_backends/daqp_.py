r"""DAQP, a dense dual active-set QP solver [Arnstrom2022]_, called directly.

Why this adapter is kept beside qpsolvers (every other solver goes through
:func:`controllers.qp_backends.solve_with_qpsolvers`): qpsolvers' DAQP
interface (qpsolvers 4.13) returns only ``found``; it drops DAQP's exit flag
and iteration count. The hierarchy's :class:`~controllers.qp_backends.QPSolveError`
names the solver's status, and a user must be able to tell an infeasible level
(exit flag −1) from an iteration limit (−4) or from a singular ``P`` without
proximal iterations (−5). The settings themselves come from the shared table,
``SOLVER_SETTINGS["daqp"]`` (module docstring of
:mod:`controllers.qp_backends`); the data are laid out as qpsolvers' DAQP
interface lays them out.

Solves

.. math::

    \min_y \; \tfrac12 y^\top P y + q^\top y
    \quad \text{s.t.} \quad G y \le h, \quad A y = b, \quad lb \le y \le ub

with ``daqp.solve``, the data laid out as DAQP takes them (bounds first,
then ``G y <= h``, then ``A y = b`` with sense 5). DAQP factorises ``P``
and so needs it positive definite; a semidefinite ``P`` (a hierarchy level
whose cost does not involve every variable) is handled by DAQP's
proximal-point iterations [Rockafellar1976]_: it minimises
:math:`f(y) + \tfrac{\varepsilon}{2}\|y - y_j\|^2` and repeats from the new
point until the point stops moving. At that fixed point the proximal term has
zero gradient, so the point is an exact minimiser of :math:`f`; a single step
would be off by at most
:math:`f(y_{j+1}) - f^\star \le \tfrac{\varepsilon}{2}\,\mathrm{dist}(y_j, Y^\star)^2`.

Settings passed (the shared table; every other DAQP setting keeps its default):

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

The exit flag is read from the same call; ``iterations`` is DAQP's
iteration count.

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
from types import MappingProxyType

import daqp
import numpy as np
import qpsolvers

from models.errors import ParameterError

from . import QPResult, QPSolveError, QPTolerances, check_qp, solver_settings

__all__ = ["NAME", "solve"]

NAME = "daqp"

#: DAQP exit flags (``daqp.h``, ``EXIT_*``).
_EXIT_FLAGS = MappingProxyType({
    2: "soft optimal",
    1: "optimal",
    -1: "infeasible",
    -2: "cycling",
    -3: "unbounded",
    -4: "iteration limit",
    -5: "nonconvex (singular P without proximal iterations)",
    -6: "overdetermined initial working set",
})

_BIG = 1e30  # DAQP's "no bound"


def _layout(P, q, G, h, A, b, lb, ub):
    """``(A_all, bupper, blower, sense, ms, mi)``: bounds first (``ms`` of them), then ``mi`` rows of G, then A."""
    n = q.size
    mi = 0 if G is None else G.shape[0]
    me = 0 if A is None else A.shape[0]
    ms = n if (lb is not None or ub is not None) else 0
    m = ms + mi + me
    bupper = np.empty(m)
    blower = np.full(m, -_BIG)
    if ms:
        bupper[:ms] = _BIG if ub is None else ub
        if lb is not None:
            blower[:ms] = lb
    if mi:
        bupper[ms: ms + mi] = h
    if me:
        bupper[ms + mi:] = b
    if mi and me:
        A_all = np.vstack([G, A])
    else:
        A_all = G if mi else (A if me else np.zeros((0, n)))
    sense = np.zeros(m, dtype=c_int)
    sense[ms + mi:] = 5  # DAQP: equality constraint
    return A_all, bupper, blower, sense, ms, mi


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
        If DAQP raises.
    """
    start = time.perf_counter()
    P, q, G, h, A, b, lb, ub = check_qp(P, q, G, h, A, b, lb, ub)
    if not (np.isfinite(regularization) and regularization >= 0):
        raise ParameterError(f"daqp: regularization must be a finite float >= 0, got {regularization!r}")
    settings = solver_settings(NAME, tolerances, regularization)
    initvals = None if warm_start is None else np.array(warm_start, dtype=float).reshape(q.shape)  # writable copy
    A_all, bupper, blower, sense, ms, mi = _layout(P, q, G, h, A, b, lb, ub)
    try:
        x, _, flag, info = daqp.solve(P, q, A_all, bupper, blower, sense, primal_start=initvals, **settings)
    except Exception as e:  # DAQP raises several types; re-raise as ours
        raise QPSolveError(f"daqp raised {type(e).__name__}: {e}") from e
    flag = int(flag)
    iterations = int(info["iterations"]) if "iterations" in info else None
    if flag > 0:
        lam = np.asarray(info["lam"], dtype=float)
        out = qpsolvers.Solution(qpsolvers.Problem(P, q, G, h, A, b, lb, ub), found=True, extras={"exitflag": flag})
        out.x = np.array(x, dtype=float)
        out.z = None if G is None else lam[ms: ms + mi].copy()
        out.y = None if A is None else lam[ms + mi:].copy()
        out.z_box = None if (lb is None and ub is None) else lam[:ms].copy()
        return QPResult(out.x, True, "optimal", time.perf_counter() - start, iterations, out.z, out.z_box, out.y, out)
    status = f"{_EXIT_FLAGS.get(flag, 'unknown')} (exitflag {flag})"
    return QPResult(None, False, status, time.perf_counter() - start, iterations)
