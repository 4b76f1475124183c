"""The task interface: a task turns the tick's state into rows in x = [q̈; τ].

A task has a ``name``, a ``kind`` (``"eq"``: rows A x = b met in the
least-squares sense; ``"ineq"``: rows C x <= d met with the least violation)
and one method, :meth:`Task.rows`, which returns ``(A, b)`` with ``A`` of
shape (m, 2 nv), or ``None`` when the task has nothing to say this tick (a
wall that is not touched).  Columns 0..nv-1 of A act on the joint
accelerations q̈ [rad/s^2], columns nv..2nv-1 on the joint torques τ [N m].

Every task, shipped or a user's, is written this way and costs the controller the same per row: the
controller calls ``rows`` each tick, checks the rows' shape and finiteness (naming the task when they are
wrong) and copies them into its own buffers. A task may do its arithmetic in compiled helpers (the
shipped ones use :mod:`controllers.tasks.kernels`). Rows that do not depend on the state may be returned
as the same read-only array every tick (:func:`constant_rows`): the controller then splits them once.
"""

from __future__ import annotations

from abc import ABC, abstractmethod
from typing import Literal

import numpy as np

from .state import TickState

__all__ = ["Task", "TaskKind", "q_rows", "constant_rows"]

TaskKind = Literal["eq", "ineq"]


class Task(ABC):
    """Base class of every task.

    Subclasses set ``name`` and ``kind`` and implement :meth:`rows`; a task
    that needs a frame resolves it in :meth:`bind`, called once when the
    controller is reset.
    """

    name: str = "task"
    kind: TaskKind = "eq"
    #: Weight inside its level (tasks of one level combine by weights).
    weight: float = 1.0

    def bind(self, state: TickState) -> None:  # noqa: B027 - optional hook, no-op by default
        """Resolve frames and sizes on the controller's model (once, at reset)."""

    @abstractmethod
    def rows(self, state: TickState) -> tuple[np.ndarray, np.ndarray] | None:
        """``(A, b)`` for this tick, A of shape (m, 2 nv); None when inactive."""

    def describe(self) -> str:
        """One line for logs and reports."""
        return f"{self.name} ({self.kind})"


def q_rows(nv: int, rows: np.ndarray) -> np.ndarray:
    """(m, nv) rows on q̈ embedded into (m, 2 nv) rows on x = [q̈; τ] (zeros on τ)."""
    A = np.zeros((rows.shape[0], 2 * nv))
    A[:, :nv] = rows
    return A


def constant_rows(A: np.ndarray) -> np.ndarray:
    """``A`` made read-only, to be returned every tick by a task whose rows do not depend on the state."""
    A.setflags(write=False)
    return A
