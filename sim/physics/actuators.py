"""Joint actuators of the exoskeleton: an ideal torque source, a first-order torque lag, and the choice.

Three drive models, each chosen by its parameter class in ``Scenario.actuators``
(:func:`make_actuators` maps one to the other): :class:`IdealActuatorParams`
(saturation only), :class:`ActuatorParams` (saturation and a first-order lag,
the default) and :class:`sim.physics.sea.SeriesElasticParams` (series-elastic
drives with an inner torque loop, :mod:`sim.physics.sea`).

The interface (:class:`Actuators`) takes the held torque command and returns
the torque applied to the joints, substep by substep, given the joint state;
a series-elastic actuator (Pratt & Williamson 1995 [PrattWilliamson1995]_)
fits the same interface by keeping its motor state inside and returning
:math:`\\tau_s = k_s(\\theta_m - q)`.

References
----------
.. [PrattWilliamson1995] G. A. Pratt, M. M. Williamson, "Series elastic
   actuators", *Proc. IEEE/RSJ International Conference on Intelligent Robots
   and Systems (IROS)*, vol. 1, pp. 399-406, 1995 (pages from memory).
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import ClassVar

import numba
import numpy as np

from models.checks import positive
from models.errors import ParameterError
from sim.physics.drive_base import Actuators, clip_command, saturate
from sim.physics.sea import SeriesElasticActuators, SeriesElasticParams

__all__ = ["ActuatorParams", "Actuators", "TorqueSourceActuators", "IdealActuatorParams", "IdealActuators",
           "make_actuators", "drive_model", "saturate", "CommandDelay"]


@dataclass(frozen=True)
class ActuatorParams:
    """Torque-source actuator parameters.

    ``torque_time_constant_s``: first-order lag of the applied torque behind the
    saturated command, :math:`T \\dot\\tau = \\tau_{cmd,sat} - \\tau`; the
    default 2 ms is a torque bandwidth of 1/(2 pi T) = 80 Hz (common practice
    for geared electric drives under current control).
    """

    model: ClassVar[str] = "lag"

    torque_time_constant_s: float = 0.002

    def __post_init__(self) -> None:
        object.__setattr__(self, "torque_time_constant_s",
                           positive("ActuatorParams", "torque_time_constant_s", self.torque_time_constant_s, "s"))


@dataclass(frozen=True)
class IdealActuatorParams:
    """An ideal torque source: the applied torque is the command clipped to the joint's torque limit, at once."""

    model: ClassVar[str] = "ideal"


@numba.njit(cache=True)
def _lag(tau, u, alpha):
    """One exact first-order-lag step in place: :math:`\\tau \\mathrel{+}= \\alpha (u - \\tau)`."""
    for i in range(tau.shape[0]):
        tau[i] += alpha * (u[i] - tau[i])


class TorqueSourceActuators(Actuators):
    """Saturation at the torque limits followed by a first-order lag.

    The lag is integrated exactly over each substep for a held input
    (zero-order hold): :math:`\\tau_{k+1} = \\tau_k + (1 - e^{-h/T})(u - \\tau_k)`
    (Franklin, Powell & Workman, *Digital Control of Dynamic Systems*, ch. 4).
    """

    def __init__(self, torque_limit_Nm: np.ndarray, params: ActuatorParams | None = None) -> None:
        self.params = ActuatorParams() if params is None else params
        self._limit = np.asarray(torque_limit_Nm, dtype=float).copy()
        self._tau_u = np.zeros((2, self._limit.shape[0]))  # the applied torque and the held command, as rows
        self._tau, self._u = self._tau_u[0], self._tau_u[1]
        self._alpha: dict[float, float] = {}

    def reset(self, tau0_Nm: np.ndarray) -> None:
        self._tau[:] = tau0_Nm
        self._u[:] = tau0_Nm

    def hold(self, command_Nm: np.ndarray) -> np.ndarray:
        return clip_command(command_Nm, self._limit, self._u)

    @property
    def applied_Nm(self) -> np.ndarray:
        return self._tau.copy()

    def substep(self, q: np.ndarray, v: np.ndarray, dt_s: float) -> np.ndarray:
        a = self._alpha.get(dt_s)
        if a is None:
            a = self._alpha[dt_s] = 1.0 - math.exp(-dt_s / self.params.torque_time_constant_s)
        _lag(self._tau, self._u, a)
        return self._tau

    def lag_arrays(self, dt_s: float) -> tuple[np.ndarray, float] | None:
        """The lag's state, for a caller that applies :meth:`substep` inside its own compiled step.

        Returns ``(tau_u, alpha)``: the (2, nv) array [N m] of the applied
        torque ``tau = tau_u[0]`` and the held saturated command
        ``u = tau_u[1]`` (the actuator's own, updated in place), and
        :math:`\\alpha = 1 - e^{-h/T}` for ``dt_s`` = h [s], such that
        ``substep(q, v, dt_s)`` is exactly
        :math:`\\tau_i \\mathrel{+}= \\alpha (u_i - \\tau_i)` on every joint, then
        returns ``tau`` (:class:`sim.physics.plant.CoupledPlant` does this in its
        substep kernel).  None if a subclass overrides :meth:`substep`: its
        step is then another one.
        """
        if type(self).substep is not TorqueSourceActuators.substep:
            return None
        a = self._alpha.get(dt_s)
        if a is None:
            a = self._alpha[dt_s] = 1.0 - math.exp(-dt_s / self.params.torque_time_constant_s)
        return self._tau_u, a


class IdealActuators(Actuators):
    """An ideal torque source: the held command clipped to the torque limits is the applied torque."""

    def __init__(self, torque_limit_Nm: np.ndarray, params: IdealActuatorParams | None = None) -> None:
        self.params = IdealActuatorParams() if params is None else params
        self._limit = np.asarray(torque_limit_Nm, dtype=float).copy()
        self._u = np.zeros(self._limit.shape[0])

    def reset(self, tau0_Nm: np.ndarray) -> None:
        self._u[:] = tau0_Nm

    def hold(self, command_Nm: np.ndarray) -> np.ndarray:
        return clip_command(command_Nm, self._limit, self._u)

    @property
    def applied_Nm(self) -> np.ndarray:
        return self._u.copy()

    def substep(self, q: np.ndarray, v: np.ndarray, dt_s: float) -> np.ndarray:
        return self._u


def drive_model(params) -> str:
    """The drive model's name of a parameter object (``"ideal"``, ``"lag"``, ``"series_elastic"``)."""
    return type(params).model


def make_actuators(params, torque_limit_Nm: np.ndarray, *, exo=None) -> Actuators:
    """The drives of a run from their parameter class: the one place that maps a class to its model.

    Parameters
    ----------
    params : IdealActuatorParams, ActuatorParams or SeriesElasticParams
    torque_limit_Nm : (nv,) array_like [N m]
        The joints' torque limits (the command's saturation).
    exo : models.exo.ExoParams, optional
        The exoskeleton the series-elastic drives' unset fields come from
        (:meth:`sim.physics.sea.SeriesElasticParams.resolved`); needed for
        those unless ``params`` is resolved already.
    """
    if isinstance(params, IdealActuatorParams):
        return IdealActuators(torque_limit_Nm, params)
    if isinstance(params, ActuatorParams):
        return TorqueSourceActuators(torque_limit_Nm, params)
    if isinstance(params, SeriesElasticParams):
        if not params.is_resolved:
            if exo is None:
                raise ParameterError("make_actuators: SeriesElasticParams with unset fields need exo=ExoParams(...)")
            params = params.resolved(exo)
        return SeriesElasticActuators(torque_limit_Nm, params)
    raise ParameterError(f"make_actuators: params must be IdealActuatorParams, ActuatorParams or SeriesElasticParams, "
                         f"got {type(params).__name__}")


class CommandDelay:
    """A first-in first-out delay of ``ticks`` control ticks on the torque command: :math:`u_k = \\tau_{cmd,k-d}`.

    The first command fills the line (the run starts in steady state, as the drives do), so that the first
    ``ticks`` ticks take it.
    """

    def __init__(self, ticks: int) -> None:
        if isinstance(ticks, bool) or not isinstance(ticks, (int, np.integer)) or ticks < 0:
            raise ParameterError(f"CommandDelay.ticks must be an integer >= 0, got {ticks!r}")
        self.ticks = int(ticks)
        self._line: list[np.ndarray] = []
        self._next = 0

    def push(self, command_Nm: np.ndarray) -> np.ndarray:
        """Take this tick's command (nv,) [N m]; return that of ``ticks`` ticks before (a held copy)."""
        c = np.array(command_Nm, dtype=float)
        if self.ticks == 0:
            return c
        if not self._line:
            self._line = [c.copy() for _ in range(self.ticks)]
        out = self._line[self._next]
        self._line[self._next] = c
        self._next = (self._next + 1) % self.ticks
        return out
