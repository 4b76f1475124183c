"""Series-elastic drives: a motor behind a torsion spring, with an inner torque loop (Pratt & Williamson 1995).

Each joint's drive is a motor (rotor and gear, reflected to the joint) that
winds a spring whose other end is the joint.  All quantities are reflected
to the joint side:

.. math::

    J_m \\ddot\\theta_m + b_m \\dot\\theta_m + \\tau_c \\tanh(\\dot\\theta_m / v_s)
        = \\tau_m - \\tau_s, \\qquad \\tau_s = k_s (\\theta_m - q),

and :math:`\\tau_s` is the torque the joint receives (the plant's robot
torque) and the joint-torque sensor measures (the spring's deflection times
its stiffness, [PrattWilliamson1995]_).  With such drives the rotor inertia and
the gear friction sit on the motor side of the spring: a run with them
builds its exoskeleton with zero armature and zero joint friction (plant and
controller model alike, :func:`sim.loop.simulation.build_assembly`), and the
drive's reflected motor inertia, viscous damping and Coulomb friction default
to the exoskeleton's armature and friction values (:meth:`SeriesElasticParams.resolved`).

Inner torque loop (sampled at ``loop_rate_Hz``, held in between): a PD law
on the spring torque with unit feed-forward of the desired torque
:math:`\\tau_d` (the controller's command, clipped to the joint's torque
limit), the derivative on the measurement (no derivative kick), and
feed-forwards of the motor's own viscous damping (``damping_feedforward``,
on by default) and inertia (``inertia_feedforward``, off by default) as the
joint moves, so that the motor follows the joint without the spring having
to drag it,

.. math::

    \\tau_m = \\operatorname{sat}_{\\tau_{m,max}}\\big(\\tau_d + K_p (\\tau_d - \\tau_s)
               - K_d \\dot\\tau_s + [J_m \\hat{\\ddot q}] + [b_m \\dot q]\\big), \\qquad
    \\dot\\tau_s = k_s(\\dot\\theta_m - \\dot q),

with :math:`\\hat{\\ddot q}` the backward difference of the joint speed
between two loop samples (the joint and motor encoders are what the drive
reads).  The inertia feed-forward is a delayed positive feedback of the
joint's acceleration: where the motor's inertia exceeds the link-side inertia
of its joint it destabilises the joint (inertia compensation by acceleration
feedback is stable only below the physical inertia, common practice, from
memory).  On the shipped exoskeleton the forearm and wrist links carry
0.002-0.004 kg m^2 against motor inertias of 0.005-0.01 kg m^2, and the wall
push with it on chatters at those joints with the motors at their limits: it
stays off unless asked for.

With the output locked (:math:`q = 0`, the feed-forward then nil), no Coulomb friction and a
continuous loop it closes to the standard second-order system

.. math::

    \\frac{\\tau_s}{\\tau_d}(s) = \\frac{\\omega_n^2}{s^2 + 2\\zeta\\omega_n s + \\omega_n^2},\\quad
    \\omega_n = \\sqrt{\\frac{k_s (1 + K_p)}{J_m}},\\quad
    \\zeta = \\frac{b_m + k_s K_d}{2 J_m \\omega_n},

whose -3 dB bandwidth is
:math:`\\omega_b = \\omega_n\\sqrt{1 - 2\\zeta^2 + \\sqrt{4\\zeta^4 - 4\\zeta^2 + 2}}` and
step overshoot :math:`e^{-\\pi\\zeta/\\sqrt{1-\\zeta^2}}` ([Ogata2010]_, sections 5-3 and
7-5; :func:`torque_loop_closed_form`).  Without the loop (:math:`K_p = K_d = 0`,
:math:`\\tau_m = \\tau_d`) the locked drive rings at :math:`\\sqrt{k_s/J_m}`.

Integration: over each physics substep of length h the motor torque is held
and the joint is taken to move at the speed it has at the substep's start,
:math:`q(t) = q_0 + \\dot q_0 t`; the linear part of the motor (inertia, spring,
viscous damping) is then stepped exactly, :math:`x_{k+1} = \\Phi x_k + \\Gamma_0 u_0
+ \\Gamma_1 u_1` with :math:`u(t) = u_0 + u_1 t`, :math:`\\Phi = e^{Ah}` (hold
discretisation, [FranklinPowellWorkman1998]_ ch. 4; :math:`\\Gamma_0, \\Gamma_1` from
the exponential of the augmented matrix); the Coulomb term enters the held
input.  The spring torque applied to the joint over the substep is that at
its start.

References
----------
.. [PrattWilliamson1995] G. A. Pratt, M. M. Williamson, "Series elastic
   actuators", *Proc. IEEE/RSJ International Conference on Intelligent Robots
   and Systems (IROS)*, vol. 1, pp. 399-406, 1995.
.. [Ogata2010] K. Ogata, *Modern Control Engineering*, 5th ed., Prentice Hall,
   2010 (second-order step response: section 5-3; bandwidth: section 7-5, from memory).
.. [FranklinPowellWorkman1998] G. F. Franklin, J. D. Powell, M. L. Workman,
   *Digital Control of Dynamic Systems*, 3rd ed., Addison-Wesley, 1998.
"""

from __future__ import annotations

import dataclasses
import math
from dataclasses import dataclass
from typing import ClassVar

import numba
import numpy as np
from scipy.linalg import expm

from models.checks import in_range, nonnegative, positive
from models.errors import ParameterError
from models.exo import ExoParams
from sim.physics.drive_base import Actuators, clip_command

__all__ = ["SeriesElasticParams", "SeriesElasticActuators", "TorqueLoopClosedForm", "torque_loop_closed_form",
           "N_DRIVE_JOINTS", "loop_decimation"]

#: Joints of the exoskeleton, one drive each (3 shoulder, elbow, pronation, 2 wrist).
N_DRIVE_JOINTS = len(ExoParams().torque_limit_Nm)

_PER_JOINT = ("spring_stiffness_Nm_per_rad", "motor_inertia_kg_m2", "motor_damping_Nm_s_per_rad",
              "motor_coulomb_Nm", "motor_torque_limit_Nm", "torque_kp", "torque_kd_s")
_POSITIVE = ("spring_stiffness_Nm_per_rad", "motor_inertia_kg_m2", "motor_torque_limit_Nm")


def _per_joint(owner: str, name: str, value, unit: str, must_be_positive: bool) -> tuple[float, ...]:
    """A scalar broadcast to every joint, or a sequence of one value per joint, checked."""
    if isinstance(value, (int, float)) and not isinstance(value, bool):
        value = (value,) * N_DRIVE_JOINTS
    try:
        values = tuple(value)
    except TypeError:
        raise ParameterError(f"{owner}.{name} must be a number or {N_DRIVE_JOINTS} numbers{' ' + unit if unit else ''}"
                             f", got {value!r}") from None
    if len(values) != N_DRIVE_JOINTS:
        raise ParameterError(f"{owner}.{name} must be a number or {N_DRIVE_JOINTS} numbers (one per joint), "
                             f"got {len(values)}: {value!r}")
    check = positive if must_be_positive else nonnegative
    return tuple(check(owner, f"{name}[{i}]", v, unit) for i, v in enumerate(values))


@dataclass(frozen=True)
class SeriesElasticParams:
    """Series-elastic drive parameters, per joint, reflected to the joint; SI units.

    Each per-joint field takes one number for every joint or one per joint
    (in the exoskeleton's joint order: 3 shoulder, elbow, pronation, 2 wrist).
    None takes the value from the run's exoskeleton (:meth:`resolved`).

    Defaults:

    * ``spring_stiffness_Nm_per_rad`` = torque limit / 0.1 rad, i.e.
      800/800/800/400/200/200/200 N m/rad: the spring deflects about 6 deg at
      the peak torque (a few degrees of deflection at peak torque is common
      practice for SEA design).  With the default motor inertias the locked
      drive's own resonance :math:`\\sqrt{k_s/J_m}` is 16-32 Hz.
    * ``motor_inertia_kg_m2``, ``motor_damping_Nm_s_per_rad``,
      ``motor_coulomb_Nm``: None, the exoskeleton's armature, viscous and
      Coulomb joint friction (:class:`models.exo.ExoParams`; the rotor and the
      gear are on the motor side of the spring).
    * ``motor_torque_limit_Nm``: None, the exoskeleton's joint torque limit
      (the drive's peak torque is what limits the joint).
    * ``torque_kp`` = 1 (a proportional torque gain of order one, common
      practice; it raises the loop's natural frequency by :math:`\\sqrt 2`).
      Higher gains widen the locked-output bandwidth but cost passivity
      against the light, compliant load of the arm (a known limit of SEA
      torque control, from memory): with :math:`K_p = 4` the wall push chatters
      with the motors at their limits a third of the time.
    * ``torque_kd_s``: None, chosen per joint for the damping ratio
      ``torque_damping_ratio`` = 0.7 of the locked loop (common practice) by
      :math:`K_d = (2\\zeta J_m\\omega_n - b_m)/k_s` (floored at 0).  The
      closed loop's bandwidth is then about 23-45 Hz per joint, at or just
      above the 5-30 Hz typical of exoskeleton SEA drives (common practice).
    * ``damping_feedforward`` = True: the loop adds :math:`b_m \\dot q` (the motor's viscous damping as
      the joint moves; common practice).
    * ``inertia_feedforward`` = False: :math:`J_m \\hat{\\ddot q}` would be added; off, as it destabilises
      joints whose motor inertia exceeds their link-side inertia (module docstring).
    * ``loop_rate_Hz`` = 4000 Hz (inner current/torque loops run at 1-10 kHz,
      common practice); the physics substep rate must be a whole multiple of it.
    * ``coulomb_smoothing_rad_s`` = 0.01 rad/s, as the plant's friction
      (:class:`sim.physics.plant.PlantParams`).
    """

    model: ClassVar[str] = "series_elastic"

    spring_stiffness_Nm_per_rad: float | tuple[float, ...] = (800.0, 800.0, 800.0, 400.0, 200.0, 200.0, 200.0)
    motor_inertia_kg_m2: float | tuple[float, ...] | None = None
    motor_damping_Nm_s_per_rad: float | tuple[float, ...] | None = None
    motor_coulomb_Nm: float | tuple[float, ...] | None = None
    motor_torque_limit_Nm: float | tuple[float, ...] | None = None
    torque_kp: float | tuple[float, ...] = 1.0
    torque_kd_s: float | tuple[float, ...] | None = None
    torque_damping_ratio: float = 0.7
    damping_feedforward: bool = True
    inertia_feedforward: bool = False
    loop_rate_Hz: float = 4000.0
    coulomb_smoothing_rad_s: float = 0.01

    def __post_init__(self) -> None:
        o = "SeriesElasticParams"
        units = {"spring_stiffness_Nm_per_rad": "N m/rad", "motor_inertia_kg_m2": "kg m^2",
                 "motor_damping_Nm_s_per_rad": "N m s/rad", "motor_coulomb_Nm": "N m",
                 "motor_torque_limit_Nm": "N m", "torque_kp": "", "torque_kd_s": "s"}
        for name in _PER_JOINT:
            v = getattr(self, name)
            if v is not None:
                object.__setattr__(self, name, _per_joint(o, name, v, units[name], name in _POSITIVE))
        object.__setattr__(self, "torque_damping_ratio",
                           in_range(o, "torque_damping_ratio", self.torque_damping_ratio, 0.05, 5.0))
        for name in ("damping_feedforward", "inertia_feedforward"):
            if not isinstance(getattr(self, name), bool):
                raise ParameterError(f"{o}.{name} must be True or False, got {getattr(self, name)!r}")
        object.__setattr__(self, "loop_rate_Hz", positive(o, "loop_rate_Hz", self.loop_rate_Hz, "Hz"))
        object.__setattr__(self, "coulomb_smoothing_rad_s",
                           positive(o, "coulomb_smoothing_rad_s", self.coulomb_smoothing_rad_s, "rad/s"))

    def resolved(self, exo: ExoParams) -> SeriesElasticParams:
        """Every None filled in: the motor's inertia, damping, Coulomb friction and torque limit from ``exo``'s
        armature, viscous and Coulomb friction and torque limit, and ``torque_kd_s`` for ``torque_damping_ratio``
        (:func:`torque_loop_closed_form`)."""
        fill = {"motor_inertia_kg_m2": exo.armature_kg_m2,
                "motor_damping_Nm_s_per_rad": exo.viscous_friction_Nm_s_per_rad,
                "motor_coulomb_Nm": exo.coulomb_friction_Nm,
                "motor_torque_limit_Nm": exo.torque_limit_Nm}
        p = dataclasses.replace(self, **{k: v for k, v in fill.items() if getattr(self, k) is None})
        if p.torque_kd_s is None:
            k, J, b = (np.asarray(getattr(p, f)) for f in ("spring_stiffness_Nm_per_rad", "motor_inertia_kg_m2",
                                                           "motor_damping_Nm_s_per_rad"))
            wn = np.sqrt(k * (1.0 + np.asarray(p.torque_kp)) / J)
            kd = np.maximum(0.0, (2.0 * p.torque_damping_ratio * J * wn - b) / k)
            p = dataclasses.replace(p, torque_kd_s=tuple(float(x) for x in kd))
        return p

    @property
    def is_resolved(self) -> bool:
        """Whether no field is None (:meth:`resolved`)."""
        return all(getattr(self, f) is not None for f in _PER_JOINT)


@dataclass(frozen=True)
class TorqueLoopClosedForm:
    """The locked-output torque loop as a second-order system, per joint (arrays).

    ``natural_frequency_rad_s`` :math:`\\omega_n`, ``damping_ratio`` :math:`\\zeta`,
    ``bandwidth_Hz`` (-3 dB), ``overshoot`` (step, fraction; 0 for :math:`\\zeta \\ge 1`),
    ``open_resonance_Hz`` (the locked drive without loop, :math:`\\sqrt{k_s/J_m}/2\\pi`).
    """

    natural_frequency_rad_s: np.ndarray
    damping_ratio: np.ndarray
    bandwidth_Hz: np.ndarray
    overshoot: np.ndarray
    open_resonance_Hz: np.ndarray


def torque_loop_closed_form(params: SeriesElasticParams) -> TorqueLoopClosedForm:
    """The closed form of the locked-output torque loop (continuous, no Coulomb friction) of resolved ``params``.

    .. math::

        \\omega_n = \\sqrt{k_s(1 + K_p)/J_m}, \\quad \\zeta = \\frac{b_m + k_s K_d}{2 J_m \\omega_n}, \\quad
        \\omega_b = \\omega_n\\sqrt{1 - 2\\zeta^2 + \\sqrt{4\\zeta^4 - 4\\zeta^2 + 2}}, \\quad
        M_p = e^{-\\pi\\zeta/\\sqrt{1 - \\zeta^2}}

    (second-order system, [Ogata2010]_ sections 5-3 and 7-5).
    """
    if not params.is_resolved:
        raise ParameterError("torque_loop_closed_form needs resolved SeriesElasticParams (params.resolved(exo))")
    k, J, b, kp, kd = (np.asarray(getattr(params, f), dtype=float) for f in (
        "spring_stiffness_Nm_per_rad", "motor_inertia_kg_m2", "motor_damping_Nm_s_per_rad", "torque_kp",
        "torque_kd_s"))
    wn = np.sqrt(k * (1.0 + kp) / J)
    z = (b + k * kd) / (2.0 * J * wn)
    wb = wn * np.sqrt(1.0 - 2.0 * z**2 + np.sqrt(4.0 * z**4 - 4.0 * z**2 + 2.0))
    with np.errstate(invalid="ignore", divide="ignore"):
        mp = np.where(z < 1.0, np.exp(-np.pi * z / np.sqrt(np.maximum(1.0 - z**2, 1e-300))), 0.0)
    return TorqueLoopClosedForm(wn, z, wb / (2.0 * np.pi), mp, np.sqrt(k / J) / (2.0 * np.pi))


def loop_decimation(loop_rate_Hz: float, substep_s: float) -> int | None:
    """Substeps per inner-loop update, :math:`n = f_{sub} / f_{loop}`, if a whole number >= 1; else None."""
    n = 1.0 / (substep_s * loop_rate_Hz)
    r = round(n)
    return int(r) if r >= 1 and abs(n - r) <= 1e-9 * max(1.0, n) else None


@numba.njit(cache=True)
def _sea_substep(state, q, v, u_cmd, par, phi, gam, gam1, smoothing, update, loop_dt, tau_out, saturated):
    """One substep of every joint's drive, in place; see the module docstring.

    ``state`` (4, n): motor angle [rad], motor speed [rad/s], motor torque [N m] (held between loop updates),
    joint speed at the last loop update [rad/s].  ``par`` (7, n): k_s, K_p, K_d, motor torque limit, Coulomb
    torque, and the feed-forwards' J_m and b_m (each zero without it).  ``phi`` (n, 2, 2), ``gam`` and ``gam1``
    (n, 2): the exact step of the linear motor for a unit held input and a unit ramp of input.  ``update``: the
    loop samples now, ``loop_dt`` [s] after the last sample.  Writes the spring torque over the substep into
    ``tau_out`` and, on an update, the saturation flags.
    """
    for i in range(q.shape[0]):
        th, om = state[0, i], state[1, i]
        k = par[0, i]
        ts = k * (th - q[i])
        if update:
            dts = k * (om - v[i])
            acc = (v[i] - state[3, i]) / loop_dt
            state[3, i] = v[i]
            tm = u_cmd[i] + par[1, i] * (u_cmd[i] - ts) - par[2, i] * dts + par[5, i] * acc + par[6, i] * v[i]
            lim = par[3, i]
            saturated[i] = abs(tm) > lim
            state[2, i] = -lim if tm < -lim else (lim if tm > lim else tm)
        u = state[2, i] - par[4, i] * math.tanh(om / smoothing) + k * q[i]
        u1 = k * v[i]  # the joint's motion over the substep, a ramp of the spring's input
        state[0, i] = phi[i, 0, 0] * th + phi[i, 0, 1] * om + gam[i, 0] * u + gam1[i, 0] * u1
        state[1, i] = phi[i, 1, 0] * th + phi[i, 1, 1] * om + gam[i, 1] * u + gam1[i, 1] * u1
        tau_out[i] = ts


class SeriesElasticActuators(Actuators):
    """Series-elastic drives with an inner torque loop (module docstring), the motor states inside.

    Parameters
    ----------
    torque_limit_Nm : (n,) array_like [N m]
        The joints' torque limits: the command is clipped to them (the
        ``saturated`` flags) before the loop tracks it.
    params : SeriesElasticParams
        Resolved (:meth:`SeriesElasticParams.resolved`).

    Notes
    -----
    :meth:`reset` starts the drives in steady state at the given spring
    torque: the first :meth:`substep` places each motor at
    :math:`\\theta_m = q + \\tau_0/k_s` moving with the joint.  The joint
    torque sensor reads :math:`k_s(\\theta_m - q)` (:meth:`delivered_Nm`).
    """

    def __init__(self, torque_limit_Nm: np.ndarray, params: SeriesElasticParams) -> None:
        if not isinstance(params, SeriesElasticParams) or not params.is_resolved:
            raise ParameterError("SeriesElasticActuators needs resolved SeriesElasticParams (params.resolved(exo)), "
                                 f"got {params!r}")
        self.params = params
        self._limit = np.asarray(torque_limit_Nm, dtype=float).copy()
        n = self._limit.shape[0]
        if n != N_DRIVE_JOINTS:
            raise ParameterError(f"SeriesElasticActuators: torque_limit_Nm must have {N_DRIVE_JOINTS} entries, got {n}")
        self._par = np.zeros((7, n))
        for row, f in enumerate(("spring_stiffness_Nm_per_rad", "torque_kp", "torque_kd_s", "motor_torque_limit_Nm",
                                 "motor_coulomb_Nm")):
            self._par[row] = getattr(params, f)
        self._J = np.asarray(params.motor_inertia_kg_m2, dtype=float)
        self._b = np.asarray(params.motor_damping_Nm_s_per_rad, dtype=float)
        if params.inertia_feedforward:
            self._par[5] = self._J
        if params.damping_feedforward:
            self._par[6] = self._b
        self._state = np.zeros((4, n))
        self._u = np.zeros(n)  # the held command, clipped to the joint torque limit
        self._tau = np.zeros(n)  # the spring torque over the last substep
        self._saturated = np.zeros(n, dtype=np.bool_)  # the motor torque at its limit (last loop update)
        self._pending: np.ndarray | None = np.zeros(n)  # the spring torque to start at, placed at the first substep
        self._count = 0
        self._steps: dict[float, tuple[np.ndarray, np.ndarray, np.ndarray, int]] = {}

    # -- the exact step of the linear motor --------------------------------------------------
    def _step_matrices(self, dt_s: float) -> tuple[np.ndarray, np.ndarray, np.ndarray, int]:
        got = self._steps.get(dt_s)
        if got is None:
            n_loop = loop_decimation(self.params.loop_rate_Hz, dt_s)
            if n_loop is None:
                raise ParameterError(f"SeriesElasticParams.loop_rate_Hz must divide the substep rate {1 / dt_s:g} Hz "
                                     f"by a whole number, got {self.params.loop_rate_Hz!r}")
            n = self._J.shape[0]
            phi, gam, gam1 = np.zeros((n, 2, 2)), np.zeros((n, 2)), np.zeros((n, 2))
            k = self._par[0]
            for i in range(n):
                # x' = A x + B u, u' = u1, u1' = 0: its exponential holds Phi, Gamma_0 and Gamma_1
                M = np.zeros((4, 4))
                M[0, 1] = 1.0
                M[1, 0], M[1, 1], M[1, 2] = -k[i] / self._J[i], -self._b[i] / self._J[i], 1.0 / self._J[i]
                M[2, 3] = 1.0
                E = expm(M * dt_s)
                phi[i], gam[i], gam1[i] = E[:2, :2], E[:2, 2], E[:2, 3]
            got = self._steps[dt_s] = (phi, gam, gam1, n_loop)
        return got

    # -- Actuators -------------------------------------------------------------------------
    def reset(self, tau0_Nm: np.ndarray) -> None:
        tau0 = np.asarray(tau0_Nm, dtype=float)
        self._pending = tau0.copy()
        self._tau[:] = tau0
        self._state[2] = np.clip(tau0, -self._par[3], self._par[3])  # a motor too weak to hold it starts at its limit
        self._u[:] = tau0
        self._saturated[:] = np.abs(tau0) > self._par[3]
        self._count = 0

    def hold(self, command_Nm: np.ndarray) -> np.ndarray:
        return clip_command(command_Nm, self._limit, self._u)

    def substep(self, q: np.ndarray, v: np.ndarray, dt_s: float) -> np.ndarray:
        phi, gam, gam1, n_loop = self._step_matrices(dt_s)
        q = np.asarray(q, dtype=float)
        v = np.asarray(v, dtype=float)
        if self._pending is not None:  # steady state: the motor wound up to the start torque, moving with the joint
            self._state[0] = q + self._pending / self._par[0]
            self._state[1] = v
            self._state[3] = v
            self._pending = None
        update = self._count % n_loop == 0
        self._count += 1
        _sea_substep(self._state, q, v, self._u, self._par, phi, gam, gam1, self.params.coulomb_smoothing_rad_s, update,
                     n_loop * dt_s, self._tau, self._saturated)
        return self._tau

    @property
    def applied_Nm(self) -> np.ndarray:
        """The spring torque over the last substep (nv,) [N m] (a copy); :meth:`delivered_Nm` for that at a
        given joint state."""
        return self._tau.copy()

    def delivered_Nm(self, q: np.ndarray, v: np.ndarray) -> np.ndarray:
        """The spring torque :math:`k_s(\\theta_m - q)` at joint angles ``q`` (nv,) [N m] (a new array)."""
        if self._pending is not None:
            return self._pending.copy()
        return self._par[0] * (self._state[0] - np.asarray(q, dtype=float))

    # -- the motor side --------------------------------------------------------------------
    @property
    def motor_Nm(self) -> np.ndarray:
        """The motor torque held now (nv,) [N m, reflected to the joint] (a copy)."""
        return self._state[2].copy()

    @property
    def motor_saturated(self) -> np.ndarray:
        """Whether each motor's torque was at its limit at the last loop update (nv,) bool (a copy)."""
        return self._saturated.copy()

    @property
    def motor_state(self) -> tuple[np.ndarray, np.ndarray]:
        """The motor angles [rad] and speeds [rad/s] (nv,) each, reflected to the joint (copies)."""
        return self._state[0].copy(), self._state[1].copy()

    def energy_J(self, q: np.ndarray) -> float:
        """Motor kinetic plus spring energy at joint angles ``q`` [J]:
        :math:`\\sum_i \\tfrac12 J_{m,i}\\dot\\theta_{m,i}^2 + \\tfrac12 k_{s,i}(\\theta_{m,i} - q_i)^2`."""
        th, om = self._state[0], self._state[1]
        d = th - np.asarray(q, dtype=float)
        return float(0.5 * np.sum(self._J * om * om) + 0.5 * np.sum(self._par[0] * d * d))
