r"""The level-by-level reference of a hierarchy, written directly in cvxpy.

The one independent reference for stacks of priority levels, used by the
test suite and by ``exosandbox bench``: cvxpy with the Clarabel solver, one
problem per level, none of the project's solver code. Each level's optimal
slacks are frozen for the levels below, the lexicographic formulation of
[Kanoun2011]_. Level k solves

.. math::
    \min_{x, v} \sum_i w_i \|A_i x - b_i\|^2 + \sum_j w_j \|v_j\|^2
    \;\text{s.t.}\; C_j x - d_j \le v_j,\ \text{the hard rows},\ \text{the levels above frozen},

and, when asked, a last level :math:`\min \|x\|^2` makes the answer unique.
cvxpy is an optional dependency (the ``test`` extra); it is imported when a
reference is asked for.

References
----------
.. [Kanoun2011] O. Kanoun, F. Lamiraux, P.-B. Wieber, "Kinematic control of redundant manipulators:
   generalizing the task-priority framework to inequality tasks", *IEEE Transactions on Robotics*
   27(4):785-792, 2011.
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass, field

import numpy as np

from models.errors import SandboxError

__all__ = ["ReferenceSolveError", "cvxpy_lexicographic", "ControllerRows", "controller_rows",
           "controller_lexicographic"]


class ReferenceSolveError(SandboxError, RuntimeError):
    """cvxpy is missing, or a level of the reference did not solve."""


def _solve(prob, cp, ok, what: str) -> None:
    with warnings.catch_warnings():  # "solution may be inaccurate": the status check decides
        warnings.simplefilter("ignore", UserWarning)
        try:
            prob.solve(solver="CLARABEL")
        except cp.error.SolverError as e:
            raise ReferenceSolveError(f"cvxpy (CLARABEL) failed on {what}: {e}") from e
    if prob.status not in ok:
        raise ReferenceSolveError(f"cvxpy (CLARABEL) did not solve {what}: status {prob.status}")


def cvxpy_lexicographic(entries, n, hard=(), *, hard_eq=(), lb=None, ub=None, min_norm=False, eq_band=None,
                        accept_inaccurate=False, objectives=False):
    """The lexicographic optimum (n,) of ``entries``: per level ``(eq, ineq)`` lists of ``(M, v, w)``.

    ``hard`` holds pairs ``(G, h)`` of rows ``G x <= h`` and ``hard_eq`` pairs ``(A, b)`` of rows
    ``A x = b`` that every level keeps, ``lb``/``ub`` bounds on x (entries may be infinite). A level's
    equality rows are frozen exactly (``eq_band`` None) or to within ``eq_band * (1 + |b|)`` (a small band so
    that rounding cannot make a frozen level infeasible), its inequality rows at their optimal slack
    (+ 1e-9). ``min_norm``: a last level min ||x||^2. A level must solve to optimality (or, with
    ``accept_inaccurate``, to Clarabel's reduced accuracy: the caller's comparison then decides). With
    ``objectives`` returns ``(x, per-level optimal cost)``.

    Raises
    ------
    ReferenceSolveError
        cvxpy is not installed, or a level does not solve.
    """
    try:
        import cvxpy as cp
    except ImportError as e:
        raise ReferenceSolveError("the cvxpy reference needs cvxpy: pip install cvxpy (part of the test extra)") from e

    ok = (cp.OPTIMAL, cp.OPTIMAL_INACCURATE) if accept_inaccurate else (cp.OPTIMAL,)
    x = cp.Variable(n)
    kept = [A @ x == b for A, b in hard_eq] + [G @ x <= h for G, h in hard]
    for bound, sign in ((lb, -1.0), (ub, 1.0)):
        if bound is not None:
            bound = np.asarray(bound, dtype=float)
            finite = np.isfinite(bound)
            if finite.any():
                kept.append(sign * x[finite] <= sign * bound[finite])
    costs = []
    for k, (eq, ineq) in enumerate(entries):
        eq, ineq = [e for e in eq if e[0].shape[0]], [e for e in ineq if e[0].shape[0]]  # entries without rows
        if not eq and not ineq:
            costs.append(0.0)
            continue
        slacks = [cp.Variable(M.shape[0]) for M, _, _ in ineq]
        cost = sum(w * cp.sum_squares(M @ x - v) for M, v, w in eq) + sum(
            w * cp.sum_squares(s) for s, (_, _, w) in zip(slacks, ineq))
        own = [M @ x - v <= s for s, (M, v, _) in zip(slacks, ineq)]
        prob = cp.Problem(cp.Minimize(cost), kept + own)
        _solve(prob, cp, ok, f"level {k}")
        if x.value is None:
            raise ReferenceSolveError(f"cvxpy (CLARABEL) returned no point for level {k}")
        costs.append(prob.value)
        xs = x.value.copy()
        if eq_band is None:
            kept += [M @ x - v == M @ xs - v for M, v, _ in eq]
        else:
            kept += [cp.abs(M @ x - M @ xs) <= eq_band * (1.0 + np.abs(v)) for M, v, _ in eq]
        kept += [M @ x - v <= np.maximum(s.value, 0.0) + 1e-9 for s, (M, v, _) in zip(slacks, ineq)]
    if min_norm:
        prob = cp.Problem(cp.Minimize(cp.sum_squares(x)), kept)
        _solve(prob, cp, ok, "the minimum-norm level")
        if x.value is None:
            raise ReferenceSolveError("cvxpy (CLARABEL) returned no point for the minimum-norm level")
    out = np.array(x.value)
    return (out, np.array(costs, dtype=float)) if objectives else out


@dataclass
class ControllerRows:
    """One tick of an HQP controller's stack as rows in x = [q̈; τ]: inertia M [kg m²], bias h, cuff force and
    torque limits (nv,) [N m] and, per level, ``(eq, ineq)`` lists of ``(A, b, w)`` as the tasks returned them."""

    M: np.ndarray
    h: np.ndarray
    cuff_force: np.ndarray
    tau_max: np.ndarray
    levels: list = field(default_factory=list)


def controller_rows(controller, measurement) -> ControllerRows:
    """The rows of a reset HQP ``controller`` at ``measurement``: its tick state and each task's public
    ``rows`` (nothing of the controller's own stacking or solver). Updates the controller's tick state."""
    s = controller.state
    s.update(measurement)
    levels = []
    for tasks in controller.levels:
        eq, ineq = [], []
        for t in tasks:
            r = t.rows(s)
            if r is not None:
                (eq if t.kind == "eq" else ineq).append((np.array(r[0], dtype=float).reshape(-1, 2 * s.nv),
                                                          np.array(r[1], dtype=float).reshape(-1), float(t.weight)))
        levels.append((eq, ineq))
    tau_max = np.array(controller.context.arm.model.effortLimit, dtype=float)
    return ControllerRows(s.M.copy(), s.h.copy(), s.cuff_force.copy(), tau_max, levels)


def controller_lexicographic(rows: ControllerRows) -> np.ndarray:
    r"""The reference x = [q̈; τ] (2 nv,) of one tick of an HQP controller: the levels of ``rows`` below the
    hard rigid-body dynamics :math:`M \ddot q - \tau = \sum_c J_c^T w_c - h` and torque limits
    :math:`|\tau| \le \tau_{max}`, then the minimum-norm level (the controller's own last level).
    """
    nv = rows.M.shape[0]
    hard_eq = [(np.hstack([rows.M, -np.eye(nv)]), rows.cuff_force - rows.h)]
    lb = np.concatenate([np.full(nv, -np.inf), -rows.tau_max])
    ub = np.concatenate([np.full(nv, np.inf), rows.tau_max])
    return cvxpy_lexicographic(rows.levels, 2 * nv, hard_eq=hard_eq, lb=lb, ub=ub, min_norm=True, eq_band=1e-9,
                               accept_inaccurate=True)
