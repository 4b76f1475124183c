"""The two reference controllers: zero torque and model gravity compensation."""

from __future__ import annotations

import numpy as np
import pinocchio as pin

from models.records import Measurement

from .base import Controller, ControllerContext

__all__ = ["ZeroTorque", "GravityCompensation"]


class ZeroTorque(Controller):
    """Commands zero torque: the wearer carries the whole robot."""

    name = "zero"

    def reset(self, context: ControllerContext) -> None:
        super().reset(context)
        self._zero = np.zeros(context.arm.nv)

    def step(self, measurement: Measurement) -> np.ndarray:
        return self._zero.copy()


class GravityCompensation(Controller):
    """Gravity compensation from the controller's own model.

    .. math:: \\tau = g(q_{meas})

    with :math:`g` the generalized gravity of the model
    (``pinocchio.computeGeneralizedGravity``; Spong, Hutchinson & Vidyasagar
    2006, section 7.3).
    """

    name = "gravity"

    def reset(self, context: ControllerContext) -> None:
        super().reset(context)
        self._model = context.arm.model
        self._data = self._model.createData()

    def step(self, measurement: Measurement) -> np.ndarray:
        return pin.computeGeneralizedGravity(self._model, self._data, measurement.q_rad).copy()
