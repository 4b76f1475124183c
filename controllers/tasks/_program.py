"""A stack of tasks as one compiled program: every level's rows written in one call per tick.

:class:`TaskProgram` turns the levels of an :class:`~controllers.hqp_controller.HQPController` into the
arrays of :func:`controllers.tasks._kernels.fill_program`: a code and parameters per task, and per wall
frame a row of the tick's frame data (orientation, position, wrench, drift and Jacobian) gathered from the
:class:`TickState`. The kernel computes every row of a shipped task (exactly these classes, not subclasses,
which may change ``rows`` or ``faces``) with the same functions as the task's own ``rows``. Any other task
(a user's, a subclass) is an *external* entry: the controller calls its ``rows`` each tick, checks them and
eliminates the torque as it does task by task, and the kernel copies them into place. So the stack it writes
is the one the controller writes task by task (tested to the bit), and a stack that holds a user's task
keeps its shipped tasks compiled.
"""

from __future__ import annotations

import math
from collections.abc import Sequence

import numpy as np

from . import _kernels
from ._common import TickState
from .base import Task
from .library import (
    BoxWall,
    GravityTorque,
    JointDamping,
    JointPositionLimits,
    JointVelocityLimits,
    PlaneWall,
    Posture,
    SphereWall,
    Transparency,
)

__all__ = ["TaskProgram", "LazyLayout", "PROGRAM_TASKS"]

#: The task classes a program can hold (exact types).
PROGRAM_TASKS = frozenset({GravityTorque, JointPositionLimits, JointVelocityLimits, Transparency, JointDamping,
                           Posture, PlaneWall, BoxWall, SphereWall})

#: The most rows a task of each code writes, in multiples of nv (walls: 3 rows, a box's corner)
_ROWS_NV = {_kernels.GRAVITY: 1, _kernels.POSITION_LIMITS: 2, _kernels.VELOCITY_LIMITS: 2, _kernels.TRANSPARENCY: 1,
            _kernels.DAMPING: 1, _kernels.POSTURE: 1}
_WALL_ROWS = 3


class TaskProgram:
    """The tasks of bound levels as a program of :func:`~controllers.tasks._kernels.fill_program`.

    Build with :meth:`build` (None when no task is one of :data:`PROGRAM_TASKS` written as one: the
    controller then writes the stack task by task). Attributes: ``prog`` (T, 5) int64, ``fp`` float64
    parameters, ``frames`` (F, 24 + 6 nv) the wall frames' data, rewritten by :meth:`gather`, ``spans``
    (T, 2) int64 written by the kernel, ``tasks`` the tasks in program order with their levels,
    ``max_eq``/``max_in`` the most equality and inequality rows the program's own tasks can write (the final
    minimum-norm level's 2 nv included; the external tasks' rows come on top), and ``external`` per
    external task ``(slot, level, task, is equality, where its parameters start in fp)``, its slot being its
    index in ``tasks``; their rows of a tick go into ``ext_rows``, ``ext_rhs`` and ``ext_spans`` (E, 2)
    (:meth:`reserve` grows the first two).
    """

    def __init__(self, prog, fp, frame_keys, tasks, n_levels: int, nv: int, max_eq: int, max_in: int,
                 external=()) -> None:
        self.prog, self.fp = prog, fp
        self.tasks, self.n_levels, self.nv = tasks, n_levels, nv
        self.max_eq, self.max_in = max_eq, max_in
        self.external = tuple(external)
        room = 4 * nv if self.external else 0  # rows; grown by reserve
        self.ext_rows, self.ext_rhs = np.zeros((room, nv)), np.zeros(room)
        self.ext_spans = np.full((len(self.external), 2), -1, dtype=np.int64)
        self.frames = np.zeros((len(frame_keys), _kernels.FRAME_J + 6 * nv))
        self.spans = np.full((len(tasks), 2), -1, dtype=np.int64)
        # per frame: (frame id, sensor frame id, sensor) and views of its row, written by gather
        self._gather = []
        k = _kernels
        for (fid, sid, sensor), row in zip(frame_keys, self.frames):
            self._gather.append((fid, sid, sensor, row[k.FRAME_R: k.FRAME_R + 9].reshape(3, 3),
                                 row[k.FRAME_P: k.FRAME_P + 3], row[k.FRAME_W: k.FRAME_W + 6],
                                 row[k.FRAME_DRIFT: k.FRAME_DRIFT + 6], row[k.FRAME_J:].reshape(6, nv)))

    @classmethod
    def build(cls, levels: Sequence[Sequence[Task]], state: TickState) -> TaskProgram | None:
        """The program of ``levels`` (tasks already bound to ``state``), or None if none of its tasks is a
        shipped one the kernel can write (every task external: the controller then writes the stack task by
        task, which keeps constant rows in place from tick to tick)."""
        nv = state.nv
        rows, fp, frame_keys, tasks, external = [], [], [], [], []
        max_eq, max_in = 2 * nv, 0
        for level, level_tasks in enumerate(levels):
            for t in level_tasks:
                entry = t._program_entry(state) if type(t) in PROGRAM_TASKS else None
                if entry is None:  # its rows come from its own rows() each tick
                    external.append((len(tasks), level, t, t.kind == "eq", len(fp)))
                    entry = (_kernels.EXTERNAL, (len(external) - 1,), None)
                code, params, frame = entry
                is_eq = t.kind == "eq"
                w = float(t.weight)
                slot = -1
                if frame is not None:
                    if frame not in frame_keys:
                        frame_keys.append(frame)
                    slot = frame_keys.index(frame)
                rows.append((code, level, int(is_eq), len(fp), slot))
                fp += [w, math.sqrt(w), *map(float, params)]
                most = 0 if code == _kernels.EXTERNAL else _WALL_ROWS if code == _kernels.WALL else _ROWS_NV[code] * nv
                if is_eq:
                    max_eq += most
                else:
                    max_in += most
                tasks.append((level, t))
        if len(external) == len(tasks):
            return None
        prog = np.array(rows, dtype=np.int64).reshape(-1, 5)
        return cls(prog, np.array(fp, dtype=float), frame_keys, tasks, len(levels), nv, max_eq, max_in, external)

    def reserve(self, rows: int) -> None:
        """Grow ``ext_rows`` and ``ext_rhs`` (doubled, keeping the rows written) to hold ``rows`` rows."""
        if rows > self.ext_rhs.shape[0]:
            size = max(rows, 2 * self.ext_rhs.shape[0])
            grown_rows, grown_rhs = np.zeros((size, self.nv)), np.zeros(size)
            grown_rows[: self.ext_rhs.shape[0]] = self.ext_rows
            grown_rhs[: self.ext_rhs.shape[0]] = self.ext_rhs
            self.ext_rows, self.ext_rhs = grown_rows, grown_rhs

    def gather(self, state: TickState) -> None:
        """Write this tick's data of every wall frame (as :class:`~controllers.tasks.WallTask` reads them).

        The sensor's orientation and wrench, the frame's position, drift :math:`\\dot J \\dot q` and
        world-aligned Jacobian.
        """
        wrenches = state.measurement.cuff_wrench
        for fid, sid, sensor, R, p, w, drift, J in self._gather:
            w[:] = wrenches[sensor]
            R[:] = state.rotation(sid)
            p[:] = state.position(fid)
            drift[:] = state.drift(fid)
            J[:] = state.jacobian(fid)

    def layout(self, m_e: int) -> list:
        """Per level, the ``(eq, ineq)`` lists of ``(first row, end row, weight)`` of this tick's entries
        (:meth:`controllers.hqp.LevelStack.from_arrays`), from the spans the kernel wrote, and last the final
        minimum-norm level (its 2 nv rows end at ``m_e``)."""
        out = [([], []) for _ in range(self.n_levels)]
        for (level, t), (start, end) in zip(self.tasks, self.spans.tolist()):
            if start >= 0:
                out[level][t.kind != "eq"].append((start, end, float(t.weight)))
        out.append(([(m_e - 2 * self.nv, m_e, 1.0)], []))
        return out


class LazyLayout(Sequence):
    """:meth:`TaskProgram.layout` of one tick, made when first indexed (only a level that needs the QP
    backend, a message or the Python path reads it)."""

    __slots__ = ("_program", "_m_e", "_n", "_layout")

    def __init__(self, program: TaskProgram, m_e: int) -> None:
        self._program, self._m_e, self._n, self._layout = program, m_e, program.n_levels + 1, None

    def __len__(self) -> int:
        return self._n

    def __getitem__(self, k):
        if self._layout is None:
            self._layout = self._program.layout(self._m_e)
        return self._layout[k]
