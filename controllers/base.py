"""The controller interface.

A controller is reset with its own description of the robot (its model, which
may differ from the plant's, and the names of its cuff sensors), then called
once per control tick with a :class:`~models.records.Measurement` and returns
the joint torque command.  It keeps its own pinocchio ``Data``; it never sees
the simulator, the human or the plant.

Every controller reports per-tick diagnostics under fixed names (declared by
:meth:`Controller.diagnostic_names` after :meth:`Controller.reset`), which
the simulation loop logs as columns.
"""

from __future__ import annotations

from abc import ABC, abstractmethod
from collections.abc import Mapping
from dataclasses import dataclass, field

import numpy as np

from models.arm import ArmModel
from models.errors import ParameterError
from models.records import Measurement

__all__ = ["ControllerContext", "Controller"]


@dataclass(frozen=True, eq=False)
class ControllerContext:
    """What a controller knows about its robot.

    Attributes
    ----------
    arm : ArmModel
        The controller's own model of the exoskeleton (nominal parameters).
    cuff_frames : mapping str -> str
        Cuff name -> frame of its force/torque sensor on the robot.
    dt_s : float
        Control period [s].
    """

    arm: ArmModel
    cuff_frames: Mapping[str, str] = field(default_factory=dict)
    dt_s: float = 1e-3

    def __post_init__(self) -> None:
        if not (np.isfinite(self.dt_s) and self.dt_s > 0):
            raise ParameterError(f"ControllerContext.dt_s must be > 0 s, got {self.dt_s!r}")
        for name, frame in self.cuff_frames.items():
            self.arm.frame_id(frame)  # raises naming the frame
            if not name:
                raise ParameterError("ControllerContext.cuff_frames has an empty cuff name")


class Controller(ABC):
    """Base class of every controller.

    Subclasses implement :meth:`step`; they may extend :meth:`reset` (call
    ``super().reset(context)``) and :meth:`diagnostic_names` /
    :meth:`diagnostics`.
    """

    #: Short name used on the command line and in logs.
    name: str = "controller"

    def __init__(self) -> None:
        self._context: ControllerContext | None = None

    @property
    def context(self) -> ControllerContext:
        """The context given to :meth:`reset`."""
        if self._context is None:
            raise RuntimeError(f"controller {self.name!r} used before reset()")
        return self._context

    def reset(self, context: ControllerContext) -> None:
        """Prepare for a run on the robot described by ``context``."""
        self._context = context

    @abstractmethod
    def step(self, measurement: Measurement) -> np.ndarray:
        """Joint torque command (nv,) [N m] for this tick."""

    def diagnostic_names(self) -> tuple[str, ...]:
        """Names of the per-tick diagnostics (fixed after :meth:`reset`)."""
        return ()

    def diagnostics(self) -> Mapping[str, float]:
        """Diagnostics of the last :meth:`step`, one float per name."""
        return {}

    def structure(self) -> dict:
        """What the controller is, as plain JSON values, for reports and ``meta.json``.

        ``{"type": class name, "name": its name, "description": one line, "levels": [...]}``. ``levels`` lists
        the priority levels, highest first, each ``{"level": i, "tasks": [{"name", "type", "kind", "weight",
        "params"}]}`` (:meth:`controllers.tasks.Task.params`); it is empty for a controller without a hierarchy
        of tasks, as here. ``description`` is the first line of the class's docstring.
        """
        doc = (type(self).__doc__ or "").strip().splitlines()
        return {"type": type(self).__name__, "name": self.name, "description": doc[0] if doc else "",
                "levels": []}
