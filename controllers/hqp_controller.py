"""A controller that stacks tasks in strict priority levels and solves them as a hierarchical QP.

Decision variables :math:`x = [\\ddot q; \\tau]` (2 nv).  Above every level
sit the hard constraints: the rigid-body dynamics with the measured cuff
wrenches and the torque limits,

.. math::
    M(q)\\ddot q + h(q, \\dot q) = \\tau + \\sum_c J_c^T w_c, \\qquad
    |\\tau| \\le \\tau_{max},

then the levels, highest first (:func:`controllers.hqp.solve_hierarchy`;
Kanoun, Lamiraux & Wieber 2011).  The command is the τ part of the solution.
If a solve fails, a task's linear algebra fails or the hard constraints cannot hold, the controller never
uses a made-up answer: it commands the safe fallback
:math:`\\tau = g(q) - D \\dot q` (gravity compensation and joint damping),
counts the event and keeps its reason.
"""

from __future__ import annotations

import logging
import time
from collections.abc import Sequence

import numpy as np

from models.errors import ParameterError, SandboxError
from models.records import Measurement

from .base import Controller, ControllerContext
from .hqp import Level, solve_hierarchy
from .tasks import Task, TickState

__all__ = ["HQPController"]

_log = logging.getLogger(__name__)


class HQPController(Controller):
    """Strict-priority stack of tasks.

    Parameters
    ----------
    levels : sequence of sequences of Task
        Highest priority first; the tasks of one level combine by their weights.
    name : str
        Name shown in logs.
    solver : str, optional
        QP backend name (:mod:`controllers.qp_backends`); default: the fastest installed.
    fallback_damping_Nm_s_per_rad : float
        D of the safe fallback command.
    """

    def __init__(self, levels: Sequence[Sequence[Task]], *, name: str = "hqp", solver: str | None = None,
                 fallback_damping_Nm_s_per_rad: float = 1.0) -> None:
        super().__init__()
        self.name = name
        self.levels = [list(level) for level in levels]
        if not self.levels or not all(self.levels):
            raise ParameterError(f"controller {name!r}: every level needs at least one task")
        for i, level in enumerate(self.levels):
            for t in level:
                if not isinstance(t, Task):
                    raise ParameterError(f"controller {name!r}: level {i} holds {t!r}, not a Task")
        self.solver = solver
        self.fallback_damping = float(fallback_damping_Nm_s_per_rad)
        self.fallback_count = 0
        self.last_fallback_reason: str | None = None

    def reset(self, context: ControllerContext) -> None:
        super().reset(context)
        self.state = TickState(context.arm, dict(context.cuff_frames), context.dt_s)
        for level in self.levels:
            for t in level:
                t.bind(self.state)
        n = context.arm.nv
        tau_max = context.arm.model.effortLimit
        self._lb = np.concatenate([np.full(n, -np.inf), -tau_max])
        self._ub = np.concatenate([np.full(n, np.inf), tau_max])
        self._A_dyn = np.zeros((n, 2 * n))
        self._A_dyn[:, n:] = -np.eye(n)
        self._prev = None
        self.fallback_count = 0
        self.last_fallback_reason = None
        self._diag = dict.fromkeys(self.diagnostic_names(), 0.0)

    @property
    def last_result(self):
        """The :class:`~controllers.hqp.HierarchyResult` of the last successful tick (None after a fallback)."""
        return self._prev

    def diagnostic_names(self) -> tuple[str, ...]:
        p = range(len(self.levels))
        return (("solve_time_s", "fallback", "active_rows") + tuple(f"residual_{i}" for i in p)
                + tuple(f"level_{i}_time_s" for i in p))

    def diagnostics(self):
        return self._diag

    def step(self, measurement: Measurement) -> np.ndarray:
        s = self.state
        s.update(measurement)
        n = s.nv
        self._A_dyn[:, :n] = s.M
        t0 = time.perf_counter()
        rows = 0
        try:
            hard = Level(eq=[(self._A_dyn, s.cuff_force - s.h)], name="dynamics")
            levels = []
            for i, tasks in enumerate(self.levels):
                eq, ineq = [], []
                for t in tasks:
                    r = t.rows(s)
                    if r is None:
                        continue
                    rows += len(r[1])
                    (eq if t.kind == "eq" else ineq).append((r[0], r[1], t.weight))
                levels.append(Level(eq=eq, ineq=ineq, name=f"level {i} ({', '.join(t.name for t in tasks)})"))
            res = solve_hierarchy(levels, 2 * n, self.solver, hard=hard, lb=self._lb, ub=self._ub,
                                  warm_start=self._prev)
            tau = np.asarray(res.x[n:], dtype=float)
            if not np.all(np.isfinite(tau)):
                raise SandboxError("the solver returned non-finite torques")
            self._prev = res
            fallback = 0.0
            residuals = list(res.level_residuals)
            level_times = list(res.level_times_s)
        except (SandboxError, np.linalg.LinAlgError) as e:  # a singular task matrix is a failed tick too
            tau = s.g - self.fallback_damping * s.dq
            self.fallback_count += 1
            self.last_fallback_reason = f"t = {measurement.t_s:.3f} s: {e}"
            _log.warning("controller %s fell back to gravity + damping: %s", self.name, self.last_fallback_reason)
            self._prev = None
            fallback = 1.0
            residuals = [np.nan] * len(self.levels)
            level_times = [np.nan] * len(self.levels)
        self._diag["solve_time_s"] = time.perf_counter() - t0
        self._diag["fallback"] = fallback
        self._diag["active_rows"] = float(rows)
        for i, r in enumerate(residuals):
            self._diag[f"residual_{i}"] = float(r)
        for i, dt in enumerate(level_times):
            self._diag[f"level_{i}_time_s"] = float(dt)
        return tau
