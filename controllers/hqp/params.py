"""Parameters, result and errors of the hierarchical solve (:mod:`controllers.hqp.solver`)."""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from models.errors import ParameterError, SandboxError

from ..qp_backends import QPSolveError, QPTolerances

__all__ = ["HQPParams", "HierarchyResult", "HQPInfeasibleError", "QPSolveError", "DEFAULT_PARAMS"]


class HQPInfeasibleError(SandboxError, RuntimeError):
    """The hard constraints (hard level, bounds) cannot all hold."""


@dataclass(frozen=True)
class HQPParams:
    r"""Numerical parameters of :func:`solve_hierarchy`.

    Attributes
    ----------
    tolerances : QPTolerances
        Passed to the QP backend (explicit solver tolerances).
    rank_tol : float, default 1e-10
        A singular value of :math:`W_k^{1/2} A_k N_{k-1}` counts as zero when
        it is at most ``rank_tol`` times the Frobenius norm of
        :math:`W_k^{1/2} A_k` (scale-free). Directions below it are left to
        lower levels; they can change level :math:`k`'s error by at most
        that singular value times the step.
    feasibility_tol : float, default 1e-9
        Tolerance on hard and frozen constraints when accepting a
        closed-form level and when checking the returned point, relative to
        ``1 + `` the largest magnitude among the hard right-hand sides and
        finite bounds (OSQP's primal tolerance is relative in the same way);
        hard equalities are checked against ``feasibility_tol * (1 + max|b|)``.
    slack_tol : float, default 1e-7
        An inequality row whose optimal slack exceeds ``slack_tol * (1 +
        |d|)`` is violated at every optimum of its level, so it is frozen as
        an equality (eliminated with the equality rows); rows below it stay
        frozen inequalities :math:`C x \le d + v^\star`. Above the
        backends' accuracy, so noise is not mistaken for a violation.
    multiplier_tol : float, default 1e-6
        A frozen, hard or bound row whose multiplier at a level's optimum
        exceeds ``multiplier_tol`` times the largest multiplier (at least 1)
        is active at every optimum of that level (complementary slackness), so
        it too is frozen as an equality; smaller multipliers are treated as
        zero and the row stays an inequality.
    closed_form : bool, default True
        Solve a level without the backend when its unconstrained
        least-squares point satisfies every constraint (exact; see the module
        docstring). False sends every level with freedom left to the backend.
    working_set_step : bool, default True
        Before calling the backend on a level whose least-squares point
        violates rows, try one active-set step with the violated rows held
        as equalities and keep it only if it satisfies the level's optimality
        conditions (:func:`controllers.hqp.kernels.solve_level_fast`); exact when kept.
    """

    tolerances: QPTolerances = field(default_factory=QPTolerances)
    rank_tol: float = 1e-10
    feasibility_tol: float = 1e-9
    slack_tol: float = 1e-7
    multiplier_tol: float = 1e-6
    closed_form: bool = True
    working_set_step: bool = True

    def __post_init__(self) -> None:
        if not isinstance(self.tolerances, QPTolerances):
            raise ParameterError(f"HQPParams.tolerances must be a QPTolerances, got {self.tolerances!r}")
        for name in ("rank_tol", "feasibility_tol", "slack_tol", "multiplier_tol"):
            value = getattr(self, name)
            if not (isinstance(value, (int, float)) and np.isfinite(value) and 0 < value < 1):
                raise ParameterError(f"HQPParams.{name} must be in (0, 1), got {value!r}")
        for name in ("closed_form", "working_set_step"):
            if not isinstance(getattr(self, name), bool):
                raise ParameterError(f"HQPParams.{name} must be a bool, got {getattr(self, name)!r}")


#: The parameters used when none are given.
DEFAULT_PARAMS = HQPParams()


@dataclass(frozen=True, eq=False)
class HierarchyResult:
    """The solution of a hierarchy.

    Attributes
    ----------
    x : (n,) ndarray
        The lexicographic optimum (minimum norm among them if
        ``regularization > 0``).
    level_residuals : (p,) ndarray
        One float per level, :meth:`Level.residual` at ``x``: weighted
        squared equality error plus weighted squared inequality violation.
    level_slacks : tuple of p pairs of ndarray
        Each level's optimal slacks ``(e*, v*)``, shapes (m_e,), (m_i,), as
        frozen for the levels below (:meth:`slack`).
    found : bool
        True: a failed solve raises instead of returning.
    solve_time_s : float
        Wall time of the whole call [s].
    level_times_s : (p,) ndarray
        Wall time per level [s].
    solver : str
        Name of the QP backend used.
    level_methods : tuple of str
        Per level: ``"closed-form"``, ``"working-set"`` (one checked active-set
        step, :attr:`HQPParams.working_set_step`), ``"qp"``, ``"no freedom"`` (nothing
        left to move, or nothing in the level depends on what is left) or
        ``"empty"`` (a level without rows).
    free_dims : tuple of int
        Dimension of the freedom left after each level.
    level_x : tuple of (n,) ndarray
        The solution after each level; a later call uses it to warm-start
        the same level.
    qp_solves : int
        Number of backend calls.
    """

    x: np.ndarray
    level_residuals: np.ndarray
    level_slacks: tuple
    found: bool
    solve_time_s: float
    level_times_s: np.ndarray
    solver: str
    level_methods: tuple = ()
    free_dims: tuple = ()
    level_x: tuple = ()
    qp_solves: int = 0

    def slack(self, level: int) -> tuple[np.ndarray, np.ndarray]:
        """Optimal slacks ``(e*, v*)`` of level ``level`` (its index in ``levels``)."""
        return self.level_slacks[level]
