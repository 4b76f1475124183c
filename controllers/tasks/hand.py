"""What the tasks acting at the hand share: the hand frame, its cuff sensor, and the wearer's hand estimate.

:class:`HandPointTask` is the base of the virtual walls (:mod:`controllers.tasks.walls`) and of the tasks that
follow the exercise's reference path (:mod:`controllers.tasks.assist`): it keeps the frame the task acts on
(the robot's hand point by default), the cuff sensor whose wrench the wearer applies there, the share of the
robot's inertia compensated (as :class:`~controllers.tasks.Transparency`) and, when the hand cuff's stiffness
is given, the estimate of the wearer's own hand point through the cuff's compliance,

.. math:: p_h = x + R\\,K_c^{-1} f

(Hooke's law on the cuff's sensor-frame translational stiffness :math:`K_c`, the measured force f;
:func:`controllers.tasks.kernels.hand_point`).
"""

from __future__ import annotations

import numpy as np

from models.checks import in_range, positive, vector
from models.errors import ParameterError

from . import kernels
from .base import Task
from .state import TickState

__all__ = ["HandPointTask"]


class HandPointTask(Task):
    """A task on one frame (the hand point) with a cuff sensor: its settings, :meth:`bind` and :meth:`hand`.

    Parameters (kept as attributes of the same names)
    ----------
    frame : str
        The robot frame the task acts on.
    sensor : str
        The cuff sensor whose measured wrench the wearer applies there.
    inertia_compensation : float
        Share of the robot's own inertia compensated, in [0, 0.9]; ``alpha`` = 1 − that.
    weight : float
        Weight inside its level, > 0.
    cuff_stiffness_N_per_m : 3 floats or None
        The hand cuff's sensor-frame translational stiffness [N/m]: with it, :meth:`hand` gives the wearer's
        hand point rather than the robot's.
    """

    def _hand_settings(self, frame: str, sensor: str, inertia_compensation: float, weight: float,
                       cuff_stiffness_N_per_m) -> None:
        owner = type(self).__name__
        self.frame, self.sensor = frame, sensor
        self.cuff_compliance = self.cuff_stiffness_N_per_m = None
        if cuff_stiffness_N_per_m is not None:
            k = np.array(vector(owner, "cuff_stiffness_N_per_m", cuff_stiffness_N_per_m, 3))
            if np.any(k <= 0):
                raise ParameterError(f"{owner}.cuff_stiffness_N_per_m must be > 0, got {k}")
            self.cuff_compliance, self.cuff_stiffness_N_per_m = 1.0 / k, k
        self.inertia_compensation = in_range(owner, "inertia_compensation", inertia_compensation, 0.0, 0.9)
        self.alpha = 1.0 - self.inertia_compensation
        self.weight = positive(owner, "weight", weight)

    def bind(self, state: TickState) -> None:
        self.fid = state.arm.frame_id(self.frame)
        if self.sensor not in state.cuff_ids:
            raise ParameterError(
                f"{self.name}: no cuff sensor named {self.sensor!r}; sensors are {sorted(state.cuff_ids)}")
        self.sid = state.cuff_ids[self.sensor]

    def hand(self, state: TickState) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """The hand point [m] (the wearer's, through the cuff's compliance, when it is given), the hand sensor's
        orientation (3, 3) and its wrench (6,), all as measured this tick."""
        w = state.measurement.cuff_wrench[self.sensor]
        R = state.rotation(self.sid)
        p = state.position(self.fid)
        if self.cuff_compliance is not None:
            p = kernels.hand_point(p, R, w, self.cuff_compliance)
        return p, R, w
