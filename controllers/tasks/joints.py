"""Joint-space tasks: gravity torque, joint position and velocity limits, joint damping, posture.

Every task writes rows in x = [q̈; τ] through the public :class:`~controllers.tasks.base.Task` API.
"""

from __future__ import annotations

import math

import numpy as np
import pinocchio as pin

from models.checks import in_range, nonnegative, positive
from models.errors import ParameterError

from . import kernels
from .base import Task, constant_rows, q_rows
from .state import TickState

__all__ = ["GravityTorque", "JointPositionLimits", "JointVelocityLimits", "JointDamping", "Posture"]


def _limit_rows(nv: int) -> np.ndarray:
    r"""(2 nv, 2 nv) rows :math:`[I\; 0; -I\; 0]`: upper then lower bounds on q̈ (read-only)."""
    C = np.zeros((2 * nv, 2 * nv))
    C[:nv, :nv] = np.eye(nv)
    C[nv:, :nv] = -np.eye(nv)
    return constant_rows(C)


class GravityTorque(Task):
    """Gravity compensation as a torque task: :math:`\\tau = g(q)` (model feed-forward)."""

    name, kind = "gravity", "eq"

    def __init__(self, weight: float = 1.0) -> None:
        self.weight = positive("GravityTorque", "weight", weight)

    def bind(self, state: TickState) -> None:
        A = np.zeros((state.nv, 2 * state.nv))
        A[:, state.nv:] = np.eye(state.nv)
        self._A = constant_rows(A)

    def rows(self, state: TickState):
        return self._A, state.g.copy()


class JointPositionLimits(Task):
    """Keep each joint inside its range with room to stop.

    Two bounds on :math:`\\ddot q` per joint, upper side shown (lower is
    symmetric), with the remaining distance :math:`d = q_{max} - m - q`
    (margin m) and the deceleration :math:`a_{brk}` the joint may use:

    * braking distance: the velocity after one tick must still allow a stop,
      :math:`\\dot q + \\ddot q\\,\\Delta t \\le \\sqrt{2 a_{brk} \\max(d, 0)}`
      (from :math:`v^2 = 2 a d`, uniform deceleration);
    * position: :math:`q + \\dot q \\Delta t + \\ddot q \\Delta t^2 \\le q_{max} - m`
      (the factor 1 on :math:`\\ddot q \\Delta t^2`, not 1/2, keeps the bound
      safe for semi-implicit Euler, which moves a held acceleration by up to
      :math:`\\ddot q \\Delta t^2` in one period).

    The tighter of the two is used.  ``braking_accel_rad_s2`` defaults to
    20 rad/s^2 (common practice: well within the drives' capability at the
    model inertia), ``margin_rad`` to 0.02 rad.
    """

    name, kind = "joint_limits", "ineq"

    def __init__(self, braking_accel_rad_s2: float = 20.0, margin_rad: float = 0.02, weight: float = 1.0) -> None:
        self.a = positive("JointPositionLimits", "braking_accel_rad_s2", braking_accel_rad_s2, "rad/s^2")
        self.margin = nonnegative("JointPositionLimits", "margin_rad", margin_rad, "rad")
        self.braking_accel_rad_s2, self.margin_rad = self.a, self.margin  # the arguments, by name (Task.params)
        self.weight = positive("JointPositionLimits", "weight", weight)

    def bind(self, state: TickState) -> None:
        self.lo, self.hi = state.arm.position_limits()
        self._C = _limit_rows(state.nv)
        # the bounds of both sides, q_max - m and -(q_min + m): the remaining distances are upper - q and lower + q
        self._upper, self._lower = self.hi - self.margin, -(self.lo + self.margin)

    def rows(self, state: TickState):
        return self._C, kernels.position_limit_bounds(state.q, state.dq, self._upper, self._lower, 2.0 * self.a,
                                                       state.dt_s)


class JointVelocityLimits(Task):
    """:math:`|\\dot q + \\ddot q \\Delta t| \\le \\dot q_{max}` with the model's velocity limits (× ``fraction``)."""

    name, kind = "velocity_limits", "ineq"

    def __init__(self, fraction: float = 1.0, weight: float = 1.0) -> None:
        self.fraction = in_range("JointVelocityLimits", "fraction", fraction, 0.01, 1.0)
        self.weight = positive("JointVelocityLimits", "weight", weight)

    def bind(self, state: TickState) -> None:
        self.vmax = state.model.velocityLimit * self.fraction
        self._C = _limit_rows(state.nv)

    def rows(self, state: TickState):
        return self._C, kernels.velocity_limit_bounds(state.dq, self.vmax, state.dt_s)


class JointDamping(Task):
    """Joint damping on acceleration level: :math:`\\ddot q = -\\dot q / T_d` (time constant ``time_constant_s``)."""

    name, kind = "damping", "eq"

    def __init__(self, time_constant_s: float = 0.2, weight: float = 1e-3) -> None:
        self.T = positive("JointDamping", "time_constant_s", time_constant_s, "s")
        self.time_constant_s = self.T  # the argument, by name (Task.params)
        self.weight = positive("JointDamping", "weight", weight)

    def bind(self, state: TickState) -> None:
        self._A = constant_rows(q_rows(state.nv, np.eye(state.nv)))

    def rows(self, state: TickState):
        return self._A, -state.dq / self.T


class Posture(Task):
    """Joint-space PD towards a posture: :math:`\\ddot q = \\omega^2 (q^* - q) - 2\\zeta\\omega \\dot q`."""

    name, kind = "posture", "eq"

    def __init__(self, posture_rad, frequency_Hz: float = 1.0, damping_ratio: float = 1.0, weight: float = 1e-3):
        self.q_ref = np.array(posture_rad, dtype=float)
        self.frequency_Hz = positive("Posture", "frequency_Hz", frequency_Hz, "Hz")
        self.w = 2 * math.pi * self.frequency_Hz
        self.z = nonnegative("Posture", "damping_ratio", damping_ratio)
        self.posture_rad, self.damping_ratio = self.q_ref, self.z  # the arguments, by name (Task.params)
        self.weight = positive("Posture", "weight", weight)

    def bind(self, state: TickState) -> None:
        if self.q_ref.shape != (state.nv,):
            raise ParameterError(f"Posture.posture_rad must have {state.nv} entries, got {self.q_ref.shape}")
        self._A = constant_rows(q_rows(state.nv, np.eye(state.nv)))

    def rows(self, state: TickState):
        b = self.w**2 * pin.difference(state.model, state.q, self.q_ref) - 2 * self.z * self.w * state.dq
        return self._A, b
