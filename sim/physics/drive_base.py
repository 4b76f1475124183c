"""What every drive model is: the :class:`Actuators` interface, and the saturation they share.

The interface takes the held torque command and returns the torque applied to
the joints, substep by substep, given the joint state.  The models are in
:mod:`sim.physics.actuators` (an ideal source, a first-order lag, and the choice
among them) and :mod:`sim.physics.sea` (series-elastic drives).
"""

from __future__ import annotations

from abc import ABC, abstractmethod

import numba
import numpy as np

__all__ = ["Actuators", "saturate", "clip_command"]


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

    def delivered_Nm(self, q: np.ndarray, v: np.ndarray) -> np.ndarray:
        """The joint torque delivered at the joint state ``q`` [rad], ``v`` [rad/s] (nv,) [N m], what a joint
        torque sensor reads: a torque source's does not depend on the joint state (:attr:`applied_Nm`)."""
        return self.applied_Nm


@numba.njit(cache=True)
def saturate(command, limit, out, saturated):
    """``out = clip(command, -limit, limit)`` and ``saturated = |command| > limit`` (numpy semantics)."""
    for i in range(command.shape[0]):
        c, lim = command[i], limit[i]
        out[i] = -lim if c < -lim else (lim if c > lim else c)
        saturated[i] = abs(c) > lim


def clip_command(command_Nm, limit_Nm: np.ndarray, out: np.ndarray) -> np.ndarray:
    """Write the command clipped to ``±limit_Nm`` into ``out`` (nv,) [N m]; return which joints it clipped.

    What every drive model's :meth:`Actuators.hold` does first (:func:`saturate`); the flags are a new array.
    """
    saturated = np.empty(limit_Nm.shape, dtype=np.bool_)
    saturate(np.asarray(command_Nm, dtype=float), limit_Nm, out, saturated)
    return saturated
