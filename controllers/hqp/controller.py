"""A controller that stacks tasks in strict priority levels and solves them as a hierarchical QP.

Decision variables :math:`x = [\\ddot q; \\tau]` (2 nv).  Above every level
sit the hard constraints: the rigid-body dynamics with the measured cuff
wrenches and the torque limits,

.. math::
    M(q)\\ddot q + h(q, \\dot q) = \\tau + \\sum_c J_c^T w_c, \\qquad
    |\\tau| \\le \\tau_{max},

then the levels, highest first (:func:`controllers.hqp.solve_hierarchy`;
[Kanoun2011]_), then the minimum-norm level
:math:`\\min \\tfrac12 \\|x\\|^2` that makes the answer unique.  The command is
the τ part of the solution.

**Eliminating τ.**  The dynamics give τ as an affine function of q̈,
:math:`\\tau = M \\ddot q + c` with :math:`c = h - \\sum_c J_c^T w_c`, so by
default (``eliminate_torque=True``) the controller solves the *same* QP in
q̈ alone (nv variables instead of 2 nv): a task row :math:`A_q \\ddot q + A_\\tau
\\tau = b` becomes :math:`(A_q + A_\\tau M)\\ddot q = b - A_\\tau c`, the torque limits
become the hard rows :math:`\\pm (M \\ddot q + c) \\le \\tau_{max}`, and the
minimum-norm level becomes the equality level
:math:`[I; M]\\,\\ddot q \\approx [0; -c]` (the same
:math:`\\tfrac12\\|\\ddot q\\|^2 + \\tfrac12\\|\\tau\\|^2`).  Every level then has the same
feasible set and cost as a function of q̈, hence the same optimum; the
difference to the 2 nv form is rounding and solver tolerance (tested against
it and against cvxpy).  The torque is clipped to its limits to remove the
rounding of the hard rows (at most the feasibility tolerance).

**One path for every task.**  Each tick the controller calls every task's
``rows(state)`` (shipped or a user's: the same public API), checks the shape
and finiteness of what it returned (an error names the level and the task),
puts the rows in q̈ as above and copies them into row buffers it owns, then
solves the stack with a :class:`~controllers.hqp.HierarchySolver`.  A task's
weight and parameters are read every tick.  Rows a task returns as the same
read-only array every tick (constant rows) are split into their q̈ and τ
parts once.

If a solve fails, a task's linear algebra fails or the hard constraints cannot hold, the controller never
uses a made-up answer: it commands the safe fallback
:math:`\\tau = g(q) - D \\dot q` (gravity compensation and joint damping),
counts the event and keeps its reason.

References
----------
.. [Kanoun2011] O. Kanoun, F. Lamiraux, P.-B. Wieber, "Kinematic control of
   redundant manipulators: generalizing the task-priority framework to
   inequality tasks", IEEE Trans. Robotics 27(4):785-792, 2011.
"""

from __future__ import annotations

import logging
import math
import time
from collections.abc import Sequence

import numpy as np

from models.errors import ParameterError, SandboxError
from models.records import Measurement

from ..base import Controller, ControllerContext
from ..tasks import Task, TickState
from ..tasks.base import plain_value
from .kernels import place_q_rows, stack_is_finite
from .level_status import level_status
from .levels import Level, LevelStack
from .params import HQPParams
from .solver import HierarchySolver, compiled_head, solve_hierarchy
from .torque_kernels import clipped_torque, torque_limit_rows

__all__ = ["HQPController"]

_log = logging.getLogger(__name__)
_NDARRAY, _F64 = np.ndarray, np.dtype(np.float64)


class _StackBuffers:
    """Row buffers of the stacked levels, written every tick and grown (doubled) when a tick needs more rows.

    ``A, b, sw`` hold the equality rows, their right-hand sides and the square roots of their weights,
    ``C, d, wi`` the inequality rows, theirs and their weights, ``eq_off``/``in_off`` (p + 1,) where each
    level starts and ``unit_eq`` (p,) whether a level's equality weights are all 1 (see
    :class:`~controllers.hqp.LevelStack`), for ``cols`` columns.
    """

    def __init__(self, cols: int, p: int, rows: int = 64) -> None:
        self.cols = cols
        self.A, self.b, self.sw = np.zeros((rows, cols)), np.zeros(rows), np.zeros(rows)
        self.C, self.d, self.wi = np.zeros((rows, cols)), np.zeros(rows), np.zeros(rows)
        self.eq_off, self.in_off = np.zeros(p + 1, dtype=np.int64), np.zeros(p + 1, dtype=np.int64)
        self.unit_eq = np.ones(p, dtype=np.bool_)

    def parts(self, is_eq: bool, rows: int) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """``(A, b, sw)`` or ``(C, d, wi)``, first grown (doubled, keeping the rows written) to hold ``rows`` rows."""
        arrays = (self.A, self.b, self.sw) if is_eq else (self.C, self.d, self.wi)
        if rows > arrays[0].shape[0]:
            names = ("A", "b", "sw") if is_eq else ("C", "d", "wi")
            size = max(rows, 2 * arrays[0].shape[0])
            grown = []
            for name, old in zip(names, arrays):
                new = np.zeros((size, *old.shape[1:]))
                new[: old.shape[0]] = old
                setattr(self, name, new)
                grown.append(new)
            arrays = tuple(grown)
        return arrays


def _task_bases(t: Task) -> list[str]:
    """Names of the Task classes ``t``'s class derives from, nearest first, without Task itself."""
    return [c.__name__ for c in type(t).__mro__[1:] if isinstance(c, type) and issubclass(c, Task) and c is not Task]


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
    eliminate_torque : bool, default True
        Solve in q̈ alone with τ eliminated through the dynamics (module
        docstring); False solves in x = [q̈; τ] with the dynamics as hard
        equalities. Both give the same torques.
    params : HQPParams, optional
        Tolerances and switches of the hierarchical solver (default: its defaults).
    binding_tol : float, default 1e-6
        Relative tolerance of the per-level diagnostic ``binding_i``
        (:mod:`controllers.hqp.level_status`): ten times the solver's default ``slack_tol``, so that a
        backend's rounding is not taken for an unmet row (common practice).

    Notes
    -----
    Per-tick diagnostics (:meth:`diagnostic_names`): ``solve_time_s``, ``rows_time_s`` [s], ``fallback``
    (1.0 on a fallback tick), ``active_rows`` (task rows this tick), ``qp_solves`` (calls of the QP
    backend), and per level i (0 = highest priority): ``residual_i`` (the level's weighted squared error at
    the answer), ``level_i_time_s`` [s], ``active_i`` (1.0: the level had rows this tick), ``binding_i``
    (1.0: an equality row of the level is not met or an inequality row sits at its bound, within
    ``binding_tol``) and ``qp_i`` (1.0: the compiled solve could not verify the level and the QP backend
    solved it). On a fallback tick the per-level values are NaN. Then each task's own diagnostics
    (:meth:`controllers.tasks.Task.diagnostic_names`) as ``<task name>_<name>``.
    """

    def __init__(self, levels: Sequence[Sequence[Task]], *, name: str = "hqp", solver: str | None = None,
                 fallback_damping_Nm_s_per_rad: float = 1.0, eliminate_torque: bool = True,
                 params: HQPParams | None = None, binding_tol: float = 1e-6) -> None:
        super().__init__()
        self.name = name
        self.levels = [list(level) for level in levels]
        if not self.levels or not all(self.levels):
            raise ParameterError(f"controller {name!r}: every level needs at least one task")
        for i, level in enumerate(self.levels):
            for t in level:
                if not isinstance(t, Task):
                    raise ParameterError(f"controller {name!r}: level {i} holds {t!r}, not a Task")
        if not isinstance(eliminate_torque, bool):
            raise ParameterError(f"controller {name!r}: eliminate_torque must be a bool, got {eliminate_torque!r}")
        if params is not None and not isinstance(params, HQPParams):
            raise ParameterError(f"controller {name!r}: params must be an HQPParams, got {type(params).__name__}")
        if not (isinstance(binding_tol, (int, float)) and not isinstance(binding_tol, bool)
                and math.isfinite(binding_tol) and 0 < binding_tol < 1):
            raise ParameterError(f"controller {name!r}: binding_tol must be in (0, 1), got {binding_tol!r}")
        self.binding_tol = float(binding_tol)
        self.params = params
        self.solver = solver
        self.eliminate_torque = eliminate_torque
        self.fallback_damping = float(fallback_damping_Nm_s_per_rad)
        self.fallback_count = 0
        self.last_fallback_reason: str | None = None
        self._level_names = [f"level {i} ({', '.join(t.name for t in tasks)})" for i, tasks in enumerate(self.levels)]
        self._stack_names = (*self._level_names, "minimum norm of [qdd; tau]")

    def reset(self, context: ControllerContext) -> None:
        super().reset(context)
        self.state = TickState(context.arm, dict(context.cuff_frames), context.dt_s)
        for i, level in enumerate(self.levels):
            for t in level:
                try:
                    t.bind(self.state)
                except SandboxError:
                    raise  # names its culprit already (e.g. an unknown frame)
                except Exception as e:  # a task's own error: one line naming it, before the run starts
                    raise ParameterError(f"{self._level_names[i]}, task {t.name!r}: bind() raised "
                                         f"{type(e).__name__}: {e}") from e
        n = context.arm.nv
        tau_max = np.array(context.arm.model.effortLimit, dtype=float)
        self._tau_max = tau_max
        self._lb = np.concatenate([np.full(n, -np.inf), -tau_max])
        self._ub = np.concatenate([np.full(n, np.inf), tau_max])
        self._A_dyn = np.zeros((n, 2 * n))
        self._A_dyn[:, n:] = -np.eye(n)
        self._eye = np.eye(n)  # the constant half of the minimum-norm rows [I; M]
        self._G, self._h = np.zeros((2 * n, n)), np.zeros(2 * n)  # the hard rows of the torque limits
        self._hqp = HierarchySolver(n, self.solver, params=self.params)
        # every level's rows are written into these buffers each tick (plus the minimum-norm level)
        self._buf = _StackBuffers(n if self.eliminate_torque else 2 * n, len(self.levels) + 1)
        self._prev = None
        # per level, (slot, task, is an equality task); a task's slot holds its constant rows, split, once seen
        self._plan, slot = [], 0
        for tasks in self.levels:
            self._plan.append([(slot + j, t, t.kind == "eq") for j, t in enumerate(tasks)])
            slot += len(tasks)
        self._constant_rows: list = [None] * slot  # (read-only rows, their q part, their tau part or None)
        self._raw_rows: list = []  # (level, task, A, b) as the tasks returned them this tick
        self._placed: list = [None] * slot  # (q part, first row, weight) of the constant rows written last tick
        self._min_norm_at = -1  # the first row of the minimum-norm level last tick
        self.fallback_count = 0
        self.last_fallback_reason = None
        self._diag = dict.fromkeys(self.diagnostic_names(), 0.0)
        self._task_diag = self._task_diagnostic_keys()  # empty unless a task reports diagnostics
        self._level_keys = [(f"residual_{i}", f"level_{i}_time_s") for i in range(len(self.levels))]
        p = len(self.levels)
        self._status_keys = [(f"active_{i}", f"binding_{i}", f"qp_{i}") for i in range(p)]
        # per level: had rows, binding (level_status), solved by the QP backend; and the answer, copied in
        self._active, self._binding, self._qp_level = np.zeros(p), np.zeros(p), np.zeros(p)
        self._x = np.zeros(self._buf.cols)
        self._preload()

    def _preload(self) -> None:
        """Load now the compiled kernels of the rare ticks on which a level needs the QP backend.

        Those ticks go through :func:`~controllers.hqp.solve_hierarchy`'s compiled path
        (``solve_levels_fast``), which numba would otherwise load inside the first such tick, typically the first
        wall contact: about 0.1 s, or a minute right after installing, a stall no control loop may take. An empty
        stack in the controller's own buffers, above its torque-limit rows, makes the same calls with the same
        argument types (checked by the tests) and changes no state of the controller. The same for the copy of a
        task's rows (``place_q_rows``), whose first call may come with a wall's first contact. Best effort:
        should that trivial solve fail, the reset goes on, and a tick that fails later falls back as any failed
        tick does.
        """
        buf = self._buf
        # the per-level status of every tick: loaded now, with the argument types of a tick
        level_status(self._x, buf.A[:0], buf.b[:0], buf.eq_off, buf.C[:0], buf.d[:0], buf.in_off, self.binding_tol,
                     self._active[:0], self._binding[:0])
        if not self.eliminate_torque:  # that path calls solve_hierarchy on every tick: its first tick loads them
            return
        p = len(self.levels) + 1
        n = buf.cols
        place_q_rows(np.zeros((0, 2 * n)), np.zeros(0), n, buf.A, buf.b, buf.sw, 0, 1.0)  # writes nothing
        eq_off, in_off = np.zeros_like(buf.eq_off), np.zeros_like(buf.in_off)
        stack = LevelStack.from_arrays(buf.A[:0], buf.b[:0], buf.sw[:0], eq_off, buf.unit_eq, buf.C[:0], buf.d[:0],
                                       buf.wi[:0], in_off, buf.cols, self._stack_names, [([], [])] * p)
        try:
            self._hqp.solve_trusted(stack, np.zeros_like(self._G), np.zeros_like(self._h), "torque limits", None,
                                    time.perf_counter())
        except (SandboxError, np.linalg.LinAlgError) as e:  # the errors step() turns into a fallback
            _log.debug("controller %s: the reset's preload solve failed: %s", self.name, e)

    @property
    def last_result(self):
        """The :class:`~controllers.hqp.HierarchyResult` of the last successful tick (None after a fallback).

        Its ``x`` is q̈ (nv,) when the torque is eliminated, else [q̈; τ] (2 nv,).
        """
        prev = self._prev
        if type(prev) is tuple:  # a tick the compiled kernel solved whole: its record is built when first read
            out, p, seconds = prev
            prev = self._prev = self._hqp.compiled_result(out, p, seconds)
        return prev

    def structure(self) -> dict:
        """:meth:`Controller.structure` with every level's tasks, highest priority first, and the solver's
        settings (``solver``: the QP backend asked for, None for the default; ``eliminate_torque``;
        ``binding_tol``). Each task also lists ``bases``: the names of the Task classes its class derives from
        (e.g. ``["WallTask"]`` for a plane wall), so that a report can tell a user's wall from its family."""
        levels = [{"level": i, "tasks": [{"name": str(t.name), "type": type(t).__name__, "kind": str(t.kind),
                                          "weight": plain_value(t.weight), "params": t.params(),
                                          "bases": _task_bases(t)} for t in tasks]}
                  for i, tasks in enumerate(self.levels)]
        return {**super().structure(), "levels": levels, "solver": self.solver,
                "eliminate_torque": self.eliminate_torque, "binding_tol": self.binding_tol}

    def diagnostic_names(self) -> tuple[str, ...]:
        p = range(len(self.levels))
        return (("solve_time_s", "rows_time_s", "fallback", "active_rows", "qp_solves")
                + tuple(f"residual_{i}" for i in p)
                + tuple(f"level_{i}_time_s" for i in p)
                + tuple(f"{kind}_{i}" for i in p for kind in ("active", "binding", "qp"))
                + tuple(key for _, _, key in self._task_diagnostic_keys()))

    def _task_diagnostic_keys(self) -> list[tuple[Task, str, str]]:
        """(task, its diagnostic's name, the controller's name for it) of every task's diagnostics
        (:meth:`controllers.tasks.Task.diagnostic_names`): ``<task name>_<name>``, or ``<task name>_<level>_<j>_<name>``
        when two tasks would give the same name."""
        out, seen = [], set()
        for i, level in enumerate(self.levels):
            for j, t in enumerate(level):
                for name in t.diagnostic_names():
                    key = f"{t.name}_{name}"
                    if key in seen:
                        key = f"{t.name}_{i}_{j}_{name}"
                    seen.add(key)
                    out.append((t, name, key))
        return out

    def diagnostics(self):
        return self._diag

    def _fill_stack(self, s: TickState, c: np.ndarray | None) -> tuple[LevelStack, int]:
        """Every level's rows of this tick written into the controller's buffers (in q̈ when ``c`` is given).

        Calls each task's ``rows(state)`` once. Returns the stack over the buffers (valid until the next
        tick) and the number of task rows. Rows that are 2-D and 1-D float arrays of matching shapes go in
        as they are (their finiteness is checked once on the whole stack, :meth:`_check_finite`); any other
        entry goes through the checks of :class:`~controllers.hqp.Level` (:meth:`_checked_rows`). An entry
        with no rows is left out, as one that returned None. With ``c``, a row on the torques
        :math:`A_q \\ddot q + A_\\tau \\tau = b` is written as :math:`(A_q + A_\\tau M)\\ddot q = b - A_\\tau c`
        (module docstring).
        """
        n, buf = s.nv, self._buf
        cols = 2 * n
        M = s.M
        cache = self._constant_rows
        raw = self._raw_rows
        raw.clear()
        # constant rows written at the same place with the same weight last tick are still there: the rows are
        # written in order every tick, so nothing has written over them since (only their right-hand side is new);
        # a tick that stops on an error forgets them all, as it may have written anywhere
        last, placed = self._placed, [None] * len(cache)
        min_norm_at, self._placed, self._min_norm_at = self._min_norm_at, placed, -1
        layout = []
        ends = [0, 0]  # rows written so far: equality, inequality
        eq_off, in_off, unit_eq = buf.eq_off, buf.in_off, buf.unit_eq
        for i, level in enumerate(self._plan):
            spans = ([], [])  # per kind, (first row, end row, weight) of each entry
            unit = True
            for slot, t, is_eq in level:
                try:
                    r = t.rows(s)
                except Exception as e:  # a task's own error fails this tick, as a non-finite row does
                    raise SandboxError(f"{self._level_names[i]}, task {t.name!r}: rows() raised "
                                       f"{type(e).__name__}: {e}") from e
                if r is None:
                    continue
                A, b = r[0], r[1]
                raw.append((i, t, A, b))
                hit = cache[slot]
                if (hit is not None and hit[0] is A and type(b) is _NDARRAY and b.dtype == _F64 and b.ndim == 1
                        and b.shape[0] == A.shape[0]):
                    A_q, A_t = hit[1], hit[2]  # the same read-only rows as at an earlier tick: checked and split then
                else:
                    A, b = self._checked_rows(i, t, is_eq, A, b, cols)
                    if b.shape[0] == 0:
                        continue
                    A_q = A_t = None  # this tick's own rows: placed below
                    if c is None:
                        A_q = A
                    elif not (A.flags.writeable and b.flags.writeable and A.flags.c_contiguous
                              and b.flags.c_contiguous):
                        A_t = A[:, n:]
                        A_q, A_t = A[:, :n], (A_t if np.count_nonzero(A_t) else None)
                        if type(r[0]) is _NDARRAY and not r[0].flags.writeable and np.isfinite(A.sum()):
                            cache[slot] = (r[0], A_q, A_t)  # constant rows: split them once
                w = float(t.weight)
                w_row = math.sqrt(w) if is_eq else w  # the equality rows carry the square roots of their weights
                start = ends[not is_eq]
                end = start + b.shape[0]
                rows_buf, rhs_buf, w_buf = buf.parts(is_eq, end)
                if A_q is None:  # one compiled copy of rows on q̈ alone; rows on the torques are eliminated below
                    if not place_q_rows(A, b, n, rows_buf, rhs_buf, w_buf, start, w_row):
                        A_q, A_t = A[:, :n], A[:, n:]
                if A_q is not None:
                    if A_t is not None:  # a row on the torques: tau = M qdd + c
                        rows_buf[start:end] = A_q + A_t @ M
                        rhs_buf[start:end] = b - A_t @ c
                        w_buf[start:end] = w_row
                    else:
                        rhs_buf[start:end] = b
                        prev = last[slot]
                        if prev is None or prev[0] is not A_q or prev[1] != start or prev[2] != w:
                            rows_buf[start:end] = A_q
                            w_buf[start:end] = w_row
                        if A_q is not A:  # only the split of cached constant rows is the same object next tick
                            placed[slot] = (A_q, start, w)
                spans[not is_eq].append((start, end, w))
                if is_eq and w != 1.0:
                    unit = False
                ends[not is_eq] = end
            eq_off[i + 1], in_off[i + 1] = ends
            unit_eq[i] = unit
            layout.append(spans)
        m_e, m_i = ends
        rows = m_e + m_i
        names = self._level_names
        if c is not None:  # the minimum-norm level [I; M] qdd ~ [0; -c]: 1/2 ||qdd||^2 + 1/2 ||tau||^2
            end = m_e + 2 * n
            buf.parts(True, end)
            if min_norm_at != m_e:  # else its constant half [I; 0] and its weights are still in place
                buf.A[m_e:m_e + n] = self._eye
                buf.b[m_e:m_e + n] = 0.0
                buf.sw[m_e:end] = 1.0
            self._min_norm_at = m_e
            buf.A[m_e + n:end] = s.M
            np.negative(c, out=buf.b[m_e + n:end])
            layout.append(([(m_e, end, 1.0)], []))
            m_e = end
            p = len(self.levels)
            buf.eq_off[p + 1], buf.in_off[p + 1], buf.unit_eq[p] = m_e, m_i, True
            names = self._stack_names
        stack = LevelStack.from_arrays(buf.A[:m_e], buf.b[:m_e], buf.sw[:m_e], buf.eq_off, buf.unit_eq, buf.C[:m_i],
                                       buf.d[:m_i], buf.wi[:m_i], buf.in_off, buf.cols, names, layout)
        return stack, rows

    def _checked_rows(self, i: int, t: Task, is_eq: bool, A, b, cols: int) -> tuple[np.ndarray, np.ndarray]:
        """A task's rows as they are when they are 2-D and 1-D float arrays of matching shapes with ``cols``
        columns; otherwise through the checks of :class:`~controllers.hqp.Level`, which raise naming the level
        and the entry (or normalise it, e.g. a 1-D row), and a check of the number of columns."""
        if not (type(A) is _NDARRAY and type(b) is _NDARRAY and A.dtype == _F64 and b.dtype == _F64
                and A.ndim == 2 and b.ndim == 1 and A.shape == (b.shape[0], cols)):
            kind = "eq" if is_eq else "ineq"
            checked = Level(**{kind: [(A, b, t.weight)]}, name=self._level_names[i])
            A, b = (checked.A, checked.b) if is_eq else (checked.C, checked.d)
            if A.shape[1] != cols:
                raise ParameterError(f"{self._level_names[i]}: task {t.name!r} returned {A.shape[1]} "
                                     f"columns, expected 2 nv = {cols}")
        return A, b

    def _check_finite(self, stack: LevelStack) -> None:
        """Raise naming the first task whose rows are not finite, if the stacked rows are not.

        One compiled pass over the whole stack in the common case; only a non-finite entry looks at the tasks' rows
        of this tick (as they returned them).
        """
        if stack_is_finite(stack.A, stack.b, stack.C, stack.d):
            return
        for i, t, A, b in self._raw_rows:  # the checks of Level name the level, the task and the bad element
            Level(**{"eq" if t.kind == "eq" else "ineq": [(A, b, t.weight)]},
                  name=f"{self._level_names[i]}, task {t.name!r}")
        raise SandboxError("the dynamics terms of this tick (M, h or the cuff forces) are not finite")

    def step(self, measurement: Measurement) -> np.ndarray:
        s = self.state
        s.update(measurement)
        n = s.nv
        t0 = time.perf_counter()
        t_solve = None  # when the hierarchical solve started (after the task rows and the stack)
        rows = 0
        p = len(self.levels)
        try:
            if self.eliminate_torque:
                M = s.M
                # tau = M qdd + c, and the torque limits -tau_max <= M qdd + c <= tau_max as rows G qdd <= h
                G, h = self._G, self._h
                c = torque_limit_rows(M, s.h, s.cuff_force, self._tau_max, G, h)
                stack, rows = self._fill_stack(s, c)
                self._check_finite(stack)
                t_solve = time.perf_counter()
                # the stack, G and h are the controller's own C-ordered float64 buffers: no checks needed
                out = self._hqp.solve_compiled(stack, G, h)
                if out is not None:  # nearly every tick: the compiled kernel solved every level
                    # the result record is built only if read (last_result), a few µs a tick saved
                    p_all = len(stack.names)
                    res = (out, p_all, time.perf_counter() - t_solve)
                    x, residuals_all, times_all = compiled_head(out, n, p_all)
                else:
                    res = self._hqp.solve_with_backend(stack, G, h, "torque limits", self.last_result)
                    # a writable copy, as the kernel's output is: a read-only x would make numba load (or
                    # compile) another clipped_torque inside the first such tick
                    x = res.x.copy()
                tau, finite = clipped_torque(M, x, c, self._tau_max)
                if not finite:
                    raise SandboxError("the solver returned non-finite torques")
            else:
                self._A_dyn[:, :n] = s.M
                hard = Level(eq=[(self._A_dyn, s.cuff_force - s.h)], name="dynamics")
                stack, rows = self._fill_stack(s, None)
                self._check_finite(stack)
                t_solve = time.perf_counter()
                res = solve_hierarchy(stack, 2 * n, self.solver, hard=hard, lb=self._lb, ub=self._ub,
                                      warm_start=self.last_result, params=self.params)
                tau = np.asarray(res.x[n:], dtype=float)
                if not math.isfinite(tau.sum()):
                    raise SandboxError("the solver returned non-finite torques")
            t_end = time.perf_counter()
            self._prev = res
            fallback = 0.0
            qp_level = self._qp_level
            if type(res) is tuple:  # the kernel's output, read in place
                residuals, level_times = residuals_all[:p].tolist(), times_all[:p].tolist()
                qp_solves = 0.0
                qp_level[:] = 0.0
                self._x[:] = x
            else:
                residuals = res.level_residuals[:p].tolist()
                level_times = res.level_times_s[:p].tolist()
                qp_solves = float(res.qp_solves)
                methods = res.level_methods
                for i in range(p):
                    qp_level[i] = 1.0 if methods[i] == "qp" else 0.0
                self._x[:] = res.x
            level_status(self._x, stack.A, stack.b, stack.eq_off, stack.C, stack.d, stack.in_off, self.binding_tol,
                         self._active, self._binding)
            status = (self._active.tolist(), self._binding.tolist(), qp_level.tolist())
        except (SandboxError, np.linalg.LinAlgError) as e:  # a singular task matrix is a failed tick too
            t_end = time.perf_counter()
            tau = s.g - self.fallback_damping * s.dq
            self.fallback_count += 1
            self.last_fallback_reason = f"t = {measurement.t_s:.3f} s: {e}"
            # the first fallback of a run is a warning; the others only for debugging, or a task that fails on
            # every tick would print thousands of lines (the run's count is hqp_fallback_count)
            _log.log(logging.WARNING if self.fallback_count == 1 else logging.DEBUG,
                     "controller %s fell back to gravity + damping: %s", self.name, self.last_fallback_reason)
            self._prev = None
            fallback = 1.0
            qp_solves = math.nan  # the tick has no solve to count
            residuals = [np.nan] * p
            level_times = [np.nan] * p
            status = ([np.nan] * p,) * 3
        d = self._diag
        if t_solve is None:  # the rows failed: no solve this tick
            d["rows_time_s"], d["solve_time_s"] = t_end - t0, math.nan
        else:
            d["rows_time_s"], d["solve_time_s"] = t_solve - t0, t_end - t_solve
        d["fallback"] = fallback
        d["active_rows"] = float(rows)
        d["qp_solves"] = qp_solves
        for i, (residual_key, time_key) in enumerate(self._level_keys):
            d[residual_key] = residuals[i]
            d[time_key] = level_times[i]
        active, binding, qp_level = status
        for i, (active_key, binding_key, qp_key) in enumerate(self._status_keys):
            d[active_key], d[binding_key], d[qp_key] = active[i], binding[i], qp_level[i]
        for t, name, key in self._task_diag:  # the tasks' own, as they stand after this tick's rows()
            d[key] = float(t.diagnostics().get(name, math.nan))
        return tau
