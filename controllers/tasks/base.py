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

import dataclasses
import inspect
from abc import ABC, abstractmethod
from collections.abc import Mapping
from typing import Literal

import numpy as np

from .state import TickState

__all__ = ["Task", "TaskKind", "q_rows", "constant_rows", "plain_value"]

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

    def diagnostic_names(self) -> tuple[str, ...]:
        """Names of the task's per-tick diagnostics (fixed after :meth:`bind`); none by default.

        The controller logs each as ``diag_<task name>_<name>`` (:class:`controllers.hqp.HQPController`), one
        float per tick, e.g. the adapted stiffness of :class:`controllers.tasks.AssistAsNeeded`.
        """
        return ()

    def diagnostics(self) -> Mapping[str, float]:
        """The values of :meth:`diagnostic_names` after the last :meth:`rows` (one float each)."""
        return {}

    def describe(self) -> str:
        """One line for logs and reports."""
        return f"{self.name} ({self.kind})"

    def params(self) -> dict:
        """The task's parameters as plain JSON values, for reports and ``meta.json``.

        The rule, the same for every task: each argument of the class's ``__init__`` that the task keeps as an
        attribute of the same name (the shipped tasks keep every one), in the order of the signature; a
        dataclass value (e.g. a :class:`~controllers.tasks.WallLaw`) is spread into ``NAME.FIELD`` entries.
        ``weight``, ``name`` and ``kind`` are left out (they are the task's own entries in
        :meth:`controllers.base.Controller.structure`). When an argument is not kept under its name, or the
        class has no ``__init__`` of its own, the public instance attributes not listed yet are added as they
        are, as far as they can be shown (:func:`plain_value`). A task may override this method.
        """
        out: dict = {}
        try:
            sig = inspect.signature(type(self).__init__)
            names = [p.name for p in list(sig.parameters.values())[1:]
                     if p.kind not in (p.VAR_POSITIONAL, p.VAR_KEYWORD)]
        except (TypeError, ValueError):  # a signature Python cannot read
            names = []
        missing = type(self).__init__ is object.__init__ or type(self).__init__ is Task.__init__
        for name in names:
            if name in ("weight", "name", "kind"):  # the task's own entries in Controller.structure
                continue
            if name in getattr(self, "__dict__", {}) or hasattr(type(self), name):
                _spread(out, name, getattr(self, name))
            else:
                missing = True
        if missing:
            for name, value in getattr(self, "__dict__", {}).items():
                if not name.startswith("_") and name not in ("name", "kind", "weight") and name not in out \
                        and not any(k.startswith(f"{name}.") for k in out):
                    _spread(out, name, value)
        return out


def q_rows(nv: int, rows: np.ndarray) -> np.ndarray:
    """(m, nv) rows on q̈ embedded into (m, 2 nv) rows on x = [q̈; τ] (zeros on τ)."""
    A = np.zeros((rows.shape[0], 2 * nv))
    A[:, :nv] = rows
    return A


def constant_rows(A: np.ndarray) -> np.ndarray:
    """``A`` made read-only, to be returned every tick by a task whose rows do not depend on the state."""
    A.setflags(write=False)
    return A


def plain_value(value):
    """``value`` as a plain JSON value for a report: numbers, strings, booleans and None as they are (numpy
    scalars as Python ones), arrays and sequences as lists (an array of more than 64 entries as its shape),
    mappings as dicts, a dataclass by its fields, anything else by its ``repr`` (cut at 80 characters)."""
    if value is None or isinstance(value, (bool, int, float, str)):
        return value
    if isinstance(value, np.generic):
        return value.item()
    if isinstance(value, np.ndarray):
        return value.tolist() if value.size <= 64 else f"array of shape {value.shape}"
    if isinstance(value, (list, tuple)):
        return [plain_value(v) for v in value]
    if isinstance(value, Mapping):
        return {str(k): plain_value(v) for k, v in value.items()}
    if dataclasses.is_dataclass(value) and not isinstance(value, type):
        return {f.name: plain_value(getattr(value, f.name)) for f in dataclasses.fields(value)}
    text = repr(value)
    return text if len(text) <= 80 else text[:77] + "..."


def _spread(out: dict, name: str, value) -> None:
    """``out[name] = plain_value(value)``; a dataclass value as one ``name.FIELD`` entry per field."""
    if dataclasses.is_dataclass(value) and not isinstance(value, type):
        for f in dataclasses.fields(value):
            out[f"{name}.{f.name}"] = plain_value(getattr(value, f.name))
    else:
        out[name] = plain_value(value)
