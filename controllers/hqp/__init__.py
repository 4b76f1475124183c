"""Hierarchical QP: priority levels, their compiled solve, and the controller that stacks tasks in them.

* :mod:`~controllers.hqp.levels`: :class:`Level`, :class:`LevelStack` and their checks;
* :mod:`~controllers.hqp.params`: :class:`HQPParams`, :class:`HierarchyResult`, :class:`HQPInfeasibleError`;
* :mod:`~controllers.hqp.solver`: :func:`solve_hierarchy`, :class:`HierarchySolver` and the glue to the QP
  backend for a level the compiled solve cannot verify;
* :mod:`~controllers.hqp.kernels`: the compiled (numba) hierarchical solve, its one implementation;
* :mod:`~controllers.hqp.torque_kernels`: the compiled torque-limit rows and torque read-back;
* :mod:`~controllers.hqp.controller`: :class:`HQPController`.
"""

from ..qp_backends import QPSolveError
from .controller import HQPController
from .levels import Level, LevelStack
from .params import HierarchyResult, HQPInfeasibleError, HQPParams
from .solver import HierarchySolver, solve_hierarchy

__all__ = ["HQPParams", "Level", "LevelStack", "solve_hierarchy", "HierarchySolver", "HierarchyResult",
           "HQPInfeasibleError", "HQPController", "QPSolveError"]
