"""Joint actuators of the exoskeleton: saturation and a first-order torque bandwidth.

The interface (:class:`Actuators`) takes the held torque command and returns
the torque applied to the joints, substep by substep, given the joint state;
a series-elastic actuator (Pratt & Williamson 1995; REFERENCES.md section 11)
fits the same interface by keeping its motor state inside and returning
:math:`\\tau_s = k_s(\\theta_m - q)`.
"""

from __future__ import annotations

import math
from abc import ABC, abstractmethod
from dataclasses import dataclass

import numpy as np

from models._checks import positive

__all__ = ["ActuatorParams", "Actuators", "TorqueSourceActuators"]


@dataclass(frozen=True)
class ActuatorParams:
    """Torque-source actuator parameters.

    ``torque_time_constant_s``: first-order lag of the applied torque behind the
    saturated command, :math:`T \\dot\\tau = \\tau_{cmd,sat} - \\tau`; the
    default 2 ms is a torque bandwidth of 1/(2 pi T) = 80 Hz (common practice
    for geared electric drives under current control).
    """

    torque_time_constant_s: float = 0.002

    def __post_init__(self) -> None:
        object.__setattr__(self, "torque_time_constant_s",
                           positive("ActuatorParams", "torque_time_constant_s", self.torque_time_constant_s, "s"))


class Actuators(ABC):
    """What turns a torque command into joint torque."""

    @abstractmethod
    def reset(self, tau0_Nm: np.ndarray) -> None:
        """Start with applied torque ``tau0_Nm`` (nv,)."""

    @abstractmethod
    def hold(self, command_Nm: np.ndarray) -> np.ndarray:
        """Take a new command (held for the control period); returns the saturation flags (nv,) bool."""

    @abstractmethod
    def substep(self, q: np.ndarray, v: np.ndarray, dt_s: float) -> np.ndarray:
        """Advance by ``dt_s``; returns the applied joint torque (nv,) [N m]."""

    @property
    @abstractmethod
    def applied_Nm(self) -> np.ndarray:
        """The joint torque applied now (nv,) [N m] (a copy)."""


class TorqueSourceActuators(Actuators):
    """Saturation at the torque limits followed by a first-order lag.

    The lag is integrated exactly over each substep for a held input
    (zero-order hold): :math:`\\tau_{k+1} = \\tau_k + (1 - e^{-h/T})(u - \\tau_k)`
    (Franklin, Powell & Workman, *Digital Control of Dynamic Systems*, ch. 4).
    """

    def __init__(self, torque_limit_Nm: np.ndarray, params: ActuatorParams | None = None) -> None:
        self.params = ActuatorParams() if params is None else params
        self._limit = np.asarray(torque_limit_Nm, dtype=float).copy()
        self._tau = np.zeros_like(self._limit)
        self._u = np.zeros_like(self._limit)
        self._alpha: dict[float, float] = {}

    def reset(self, tau0_Nm: np.ndarray) -> None:
        self._tau[:] = tau0_Nm
        self._u[:] = tau0_Nm

    def hold(self, command_Nm: np.ndarray) -> np.ndarray:
        np.clip(command_Nm, -self._limit, self._limit, out=self._u)
        return np.abs(command_Nm) > self._limit

    @property
    def applied_Nm(self) -> np.ndarray:
        return self._tau.copy()

    def substep(self, q: np.ndarray, v: np.ndarray, dt_s: float) -> np.ndarray:
        a = self._alpha.get(dt_s)
        if a is None:
            a = self._alpha[dt_s] = 1.0 - math.exp(-dt_s / self.params.torque_time_constant_s)
        self._tau += a * (self._u - self._tau)
        return self._tau
