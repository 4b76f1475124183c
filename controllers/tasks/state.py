"""Kinematics and dynamics computed once per tick and shared by every task.

:class:`TickState` runs pinocchio once per control tick on the controller's
own model and measured state, then hands out the mass matrix, the bias and
gravity terms, frame Jacobians, frame drift accelerations and the generalized
force of the measured cuff wrenches.  Frame quantities are cached per tick.

References
----------
.. [Khatib1987] O. Khatib, "A unified approach for motion and force control of robot manipulators: the
   operational space formulation", IEEE J. Robotics and Automation 3(1):43-53, 1987.
.. [Featherstone2005] R. Featherstone, "Efficient factorization of the joint-space inertia matrix for
   branched kinematic trees", Int. J. Robotics Research 24(6), 2005.
"""

from __future__ import annotations

import numpy as np
import pinocchio as pin

from models.arm import ArmModel
from models.records import Measurement

from . import kernels

__all__ = ["TickState", "operational_space"]


class TickState:
    """Shared per-tick quantities of the controller's model.

    After :meth:`update`: ``q``, ``dq`` (nv,), ``M`` (nv, nv) joint-space
    inertia (rotor inertia included) and its inverse ``Minv`` (from
    pinocchio's sparse factorisation :math:`M = U D U^T`, Featherstone,
    "Efficient factorization of the joint-space inertia matrix for branched
    kinematic trees", IJRR 24(6), 2005), ``h`` (nv,) Coriolis, centrifugal and
    gravity terms, ``g`` (nv,) gravity, ``cuff_force`` (nv,) the generalized
    force :math:`\\sum_c J_c^T w_c` of the measured cuff wrenches (each
    Jacobian in the sensor's LOCAL frame, where the wrench is measured), and
    ``dt_s``.
    """

    def __init__(self, arm: ArmModel, cuff_frames: dict[str, str], dt_s: float) -> None:
        self.arm = arm
        self.model = arm.model
        self.data = arm.model.createData()
        self.nv = arm.nv
        self.dt_s = float(dt_s)
        self.cuff_ids = {name: arm.frame_id(frame) for name, frame in cuff_frames.items()}
        self._zero = np.zeros(self.nv)
        self._cuffs = list(self.cuff_ids.items())
        self._cuff_jacobians = np.zeros((len(self._cuffs), 6, self.nv))
        self._cuff_wrenches = np.zeros((len(self._cuffs), 6))
        self._jac: dict[tuple[int, object], np.ndarray] = {}
        self._drift: dict[int, np.ndarray] = {}
        self.measurement: Measurement | None = None

    def update(self, m: Measurement) -> None:
        """Run the model on the measured state (kinematics, M, h, g, cuff forces)."""
        model, data = self.model, self.data
        self.measurement = m
        self.q, self.dq = m.q_rad, m.dq_rad_s
        pin.forwardKinematics(model, data, self.q, self.dq, self._zero)  # a = 0: frame accelerations are J'q'
        pin.computeJointJacobians(model, data)  # reuses the placements just computed
        pin.updateFramePlacements(model, data)
        U = pin.crba(model, data, self.q)  # crba fills the upper triangle: mirrored by tick_terms
        pin.cholesky.decompose(model, data)  # of data.M, just computed: M = U D U^T (sparse, Featherstone 2005)
        Minv = pin.cholesky.computeMinv(model, data)
        nle = pin.nonLinearEffects(model, data, self.q, self.dq)
        g = pin.computeGeneralizedGravity(model, data, self.q)
        jac = self._jac
        jac.clear()
        self._drift.clear()
        # sum_c J_c^T w_c over the cuffs measured this tick
        k, jacobians, wrenches = 0, self._cuff_jacobians, self._cuff_wrenches
        for name, fid in self._cuffs:
            w = m.cuff_wrench.get(name)
            if w is not None:
                J = jac[(fid, pin.LOCAL)] = pin.getFrameJacobian(model, data, fid, pin.LOCAL)
                jacobians[k] = J
                wrenches[k] = w
                k += 1
        self.M, self.Minv, self.h, self.g, self.cuff_force = kernels.tick_terms(U, Minv, nle, g, jacobians,
                                                                                 wrenches, k)

    def jacobian(self, frame_id: int, reference=pin.LOCAL_WORLD_ALIGNED) -> np.ndarray:
        """(6, nv) frame Jacobian in ``reference`` (cached for the tick)."""
        key = (frame_id, reference)
        J = self._jac.get(key)
        if J is None:
            J = self._jac[key] = pin.getFrameJacobian(self.model, self.data, frame_id, reference)
        return J

    def drift(self, frame_id: int) -> np.ndarray:
        """(6,) classical acceleration :math:`\\dot J \\dot q` of a frame at zero joint acceleration.

        World-aligned axes at the frame origin (``pinocchio.getFrameClassicalAcceleration``).
        """
        a = self._drift.get(frame_id)
        if a is None:
            a = self._drift[frame_id] = pin.getFrameClassicalAcceleration(
                self.model, self.data, frame_id, pin.LOCAL_WORLD_ALIGNED).vector.copy()
        return a

    def position(self, frame_id: int) -> np.ndarray:
        """(3,) world position of a frame [m]."""
        return self.data.oMf[frame_id].translation

    def rotation(self, frame_id: int) -> np.ndarray:
        """(3, 3) world orientation of a frame."""
        return self.data.oMf[frame_id].rotation


def operational_space(M: np.ndarray, J: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Operational-space inertia, dynamically consistent inverse and null-space projector.

    .. math::
        \\Lambda = (J M^{-1} J^T)^{-1}, \\qquad \\bar J = M^{-1} J^T \\Lambda, \\qquad
        N^T = I - J^T \\bar J^T

    (Khatib 1987, see References).  Returns ``(Lambda, Jbar, N_T)``; J must have full row rank.
    """
    Minv_JT = np.linalg.solve(M, J.T)
    Lam = np.linalg.inv(J @ Minv_JT)
    Jbar = Minv_JT @ Lam
    N_T = np.eye(M.shape[0]) - J.T @ Jbar.T
    return Lam, Jbar, N_T
