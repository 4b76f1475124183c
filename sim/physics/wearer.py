"""The wearer's motor control: intent tracking with an internal model and joint impedance.

The human computes, along the intended motion :math:`q_d(t)`, the torque its
own arm needs (the nervous system carries a model of its arm: inertia,
Coriolis and gravity, by inverse dynamics) and adds a joint impedance around
the intent,

.. math::
    \\tau_h = \\mathrm{ID}(q_d, \\dot q_d, \\ddot q_d)
              + K (q_d - q) + B (\\dot q_d - \\dot q),

saturated at the arm's peak joint torques (the sum and the saturation are one
compiled call, :func:`_impedance_torque`).  It does not anticipate the robot.
An impaired wearer (:mod:`sim.physics.impairment`) saturates at the capacity
its weakness leaves, and adds the involuntary torque (spasticity,
contracture, tremor) after the saturation.
Impedance magnitudes: shoulder and elbow from the standard two-link arm model
of Shadmehr & Mussa-Ivaldi (1994), diagonal terms of K = [[15, 6], [6, 16]]
N m/rad and B = [[2.3, 0.9], [0.9, 2.4]] N m s/rad [ShadmehrMussaIvaldi1994]_
(from memory); forearm, wrist and girdle values are common practice.

References
----------
.. [ShadmehrMussaIvaldi1994] R. Shadmehr, F. A. Mussa-Ivaldi, *Journal of
   Neuroscience* 14(5):3208-3224, 1994 (joint stiffness and viscosity of the
   two-link arm model; from memory, unconfirmed).
"""

from __future__ import annotations

from dataclasses import dataclass

import numba
import numpy as np
import pinocchio as pin

from models.arm import ArmModel
from models.checks import vector
from models.errors import ParameterError
from models.human import HumanParams, girdle_posture
from sim.physics.impairment import Impairment, ImpairmentTorque
from sim.physics.intent import JointIntent

__all__ = ["HumanMotorParams", "HumanMotor"]


@numba.njit(cache=True)
def _impedance_torque(ff, K, dq, B, dqd, v, limit, out):
    """:math:`\\tau = \\mathrm{sat}_{\\pm\\tau_{max}}(\\tau_{ff} + K \\Delta q + B (\\dot q_d - \\dot q))` into out.

    ``dq`` is :math:`q_d \\ominus q` (``pinocchio.difference``); saturation as ``numpy.clip`` (a NaN stays NaN).
    """
    for i in range(out.shape[0]):
        x = (ff[i] + K[i] * dq[i]) + B[i] * (dqd[i] - v[i])
        lim = limit[i]
        out[i] = -lim if x < -lim else (lim if x > lim else x)


@dataclass(frozen=True)
class HumanMotorParams:
    """Joint impedance and internal-model switches of the wearer (7 arm joints).

    ``stiffness_Nm_per_rad``: shoulder (3) 15, elbow 16 (Shadmehr &
    Mussa-Ivaldi 1994, from memory), forearm and wrist 2 (common practice).
    ``damping_Nm_s_per_rad``: shoulder 2.3, elbow 2.4 (same source), forearm
    and wrist 0.1 (common practice).  The girdle joints, when present, get
    ``girdle_stiffness_Nm_per_rad`` and ``girdle_damping_Nm_s_per_rad``.
    """

    stiffness_Nm_per_rad: tuple[float, ...] = (15.0, 15.0, 15.0, 16.0, 2.0, 2.0, 2.0)
    damping_Nm_s_per_rad: tuple[float, ...] = (2.3, 2.3, 2.3, 2.4, 0.1, 0.1, 0.1)
    girdle_stiffness_Nm_per_rad: float = 30.0
    girdle_damping_Nm_s_per_rad: float = 2.0
    gravity_feedforward: bool = True
    inertial_feedforward: bool = True

    def __post_init__(self) -> None:
        o = "HumanMotorParams"
        for f in ("stiffness_Nm_per_rad", "damping_Nm_s_per_rad"):
            v = vector(o, f, getattr(self, f), 7)
            if any(x < 0 for x in v):
                raise ParameterError(f"{o}.{f} must be >= 0 on every joint, got {v}")
            object.__setattr__(self, f, v)
        for f in ("girdle_stiffness_Nm_per_rad", "girdle_damping_Nm_s_per_rad"):
            x = float(getattr(self, f))
            if not (np.isfinite(x) and x >= 0):
                raise ParameterError(f"{o}.{f} must be >= 0, got {getattr(self, f)!r}")


class HumanMotor:
    """Torque the wearer produces at time t given their own joint state.

    Parameters
    ----------
    arm : ArmModel
        The human arm (its own, exact model).
    params : HumanParams
        The same parameters the arm was built from (girdle, rhythm, limits).
    intent : JointIntent
        Intended motion of the 7 arm joints [rad].
    motor : HumanMotorParams
        Impedance and internal-model switches.
    impairment : Impairment, optional
        The wearer's impairment (None: a healthy arm, the arithmetic of before).
    period_s : float
        Control period [s]: with an impairment, :meth:`torque` is called once per period (the reflex delay's
        history of joint speeds).
    seed : int
        The run's seed (a tremor's phase when not fixed).
    """

    #: Step of the central difference that gives girdle velocities and accelerations [s].
    _FD_STEP_S = 1e-4

    def __init__(self, arm: ArmModel, params: HumanParams, intent: JointIntent,
                 motor: HumanMotorParams | None = None, *, impairment: Impairment | None = None,
                 period_s: float = 1e-3, seed: int = 0) -> None:
        self.arm, self.params, self.intent = arm, params, intent
        self.motor = HumanMotorParams() if motor is None else motor
        if len(intent.start_rad) != 7:
            raise ParameterError(f"the intent must give the 7 arm joints, got {len(intent.start_rad)}")
        self._model = arm.model
        self._data = arm.model.createData()
        g = (self.motor.girdle_stiffness_Nm_per_rad, self.motor.girdle_damping_Nm_s_per_rad)
        extra = 2 if params.girdle else 0
        self.K = np.array([g[0]] * extra + list(self.motor.stiffness_Nm_per_rad))
        self.B = np.array([g[1]] * extra + list(self.motor.damping_Nm_s_per_rad))
        self._limit = arm.model.effortLimit.copy()
        self._nv = int(arm.model.nv)
        #: Intended posture used by the last :meth:`torque` call [rad].
        self.last_desired_q = np.zeros(arm.nq)
        #: The involuntary part of the last :meth:`torque` call (nv,) [N m] (zeros without an impairment).
        self.last_impairment_torque = np.zeros(self._nv)
        self.impairment = impairment
        self._impaired = None
        if impairment is not None:
            self._impaired = ImpairmentTorque(impairment, arm.joint_names, period_s, seed)
            self._limit = self._limit * self._impaired.capacity_scale

    def desired(self, t_s: float) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """Intended (q, dq, ddq) of every joint of the model at ``t_s``."""
        if not self.params.girdle:
            return self.intent.at(t_s)
        h = self._FD_STEP_S
        qm, q0, qp = (girdle_posture(self.params, self.intent.at(t_s + k * h)[0]) for k in (-1, 0, 1))
        return q0, (qp - qm) / (2 * h), (qp - 2 * q0 + qm) / h**2

    def torque(self, t_s: float, q: np.ndarray, v: np.ndarray) -> np.ndarray:
        """Joint torques (nv,) [N m] at time ``t_s`` and state (q, v)."""
        qd, dqd, ddqd = self.desired(t_s)
        self.last_desired_q = qd
        model, data, m = self._model, self._data, self.motor
        if m.inertial_feedforward and m.gravity_feedforward:
            ff = pin.rnea(model, data, qd, dqd, ddqd)
        elif m.gravity_feedforward:
            ff = pin.computeGeneralizedGravity(model, data, qd)
        elif m.inertial_feedforward:
            ff = pin.rnea(model, data, qd, dqd, ddqd) - pin.computeGeneralizedGravity(model, data, qd)
        else:
            ff = np.zeros(self._nv)
        tau = np.empty(self._nv)
        _impedance_torque(ff, self.K, pin.difference(model, q, qd), self.B, dqd, np.asarray(v, dtype=float),
                          self._limit, tau)
        if self._impaired is not None:
            self.last_impairment_torque = self._impaired.torque(t_s, q, v)
            tau += self.last_impairment_torque
        return tau
