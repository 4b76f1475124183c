"""The coupled plant: exoskeleton and human arm, two pinocchio models joined by cuffs.

Each cuff's wrench (:func:`models.cuffs.cuff_wrench`) acts on the robot at
the robot-side cuff frame and, equal and opposite, on the human at the
strapped human-side frame.  Both arms advance by forward dynamics with
external forces (the articulated-body algorithm, ``pinocchio.aba`` with
``fext``; Featherstone, *Rigid Body Dynamics Algorithms*, 2008, ch. 7) and
semi-implicit (symplectic) Euler,

.. math:: v_{k+1} = v_k + h\\,\\ddot q(q_k, v_k), \\qquad
          q_{k+1} = q_k \\oplus h\\,v_{k+1}

(``pinocchio.integrate``; Hairer, Lubich & Wanner, *Geometric Numerical
Integration*, 2006, section VI.3).  The plant owns its pinocchio ``Data``;
the controller never shares it.

pinocchio runs the rigid-body algorithms (forward kinematics, aba,
integrate).  Everything between them for all the cuffs (the frame
placements and twists, the cuff law, the joint-frame wrenches aba takes) is
one compiled call (:func:`_cuff_kernel`, numba), reading and writing the
pinocchio ``Data`` and force vectors in place; it restates the law of
:mod:`models.cuffs`, the reference it is tested against.  The first run
compiles it (numba ``cache=True``: later processes load it from disk).
"""

from __future__ import annotations

import dataclasses
import math
from dataclasses import dataclass
from typing import Literal

import numba
import numpy as np
import pinocchio as pin

from models._checks import in_range, nonnegative, positive
from models.arm import ArmModel
from models.coupling import Assembly
from models.cuffs import _cuff_energy_terms, _cuff_power_terms
from models.errors import SandboxError

__all__ = ["PlantParams", "CoupledPlant", "PlantMode"]

PlantMode = Literal["coupled", "human_alone", "exo_alone"]


@dataclass(frozen=True)
class PlantParams:
    """Physics switches and the plant's model error.

    ``model_mass_scale`` multiplies every exoskeleton link mass and rotational
    inertia of the plant (1.1 = the real robot is 10 % heavier than the
    controller's model).  Coulomb friction is smoothed as
    :math:`\\tau_c \\tanh(v / v_s)` with ``coulomb_smoothing_rad_s`` = v_s
    (common practice for friction in simulation).
    """

    gravity_m_s2: float = 9.81
    exo_friction: bool = True
    cuff_damping: bool = True
    model_mass_scale: float = 1.0
    coulomb_smoothing_rad_s: float = 0.01

    def __post_init__(self) -> None:
        o = "PlantParams"
        object.__setattr__(self, "gravity_m_s2", nonnegative(o, "gravity_m_s2", self.gravity_m_s2, "m/s^2"))
        object.__setattr__(self, "model_mass_scale",
                           in_range(o, "model_mass_scale", self.model_mass_scale, 0.1, 10.0))
        object.__setattr__(self, "coulomb_smoothing_rad_s",
                           positive(o, "coulomb_smoothing_rad_s", self.coulomb_smoothing_rad_s, "rad/s"))


def _scaled(arm: ArmModel, scale: float, gravity: float) -> ArmModel:
    model = arm.model.copy()
    for i in range(model.njoints):
        Y = model.inertias[i]
        model.inertias[i] = pin.Inertia(Y.mass * scale, Y.lever, Y.inertia * scale)
    model.gravity.linear = np.array([0.0, 0.0, -gravity])
    return dataclasses.replace(arm, model=model)


class CoupledPlant:
    """State and dynamics of the exoskeleton, the human arm and the cuffs.

    Parameters
    ----------
    assembly : Assembly
        Models, registration and strapped cuffs (:func:`models.assemble`).
    params : PlantParams
        Physics switches and model error.
    mode : {"coupled", "human_alone", "exo_alone"}
        ``human_alone`` simulates the arm with no robot and no cuffs (the
        transparency baseline); ``exo_alone`` the robot with no wearer.

    The state vectors ``q_exo``, ``v_exo``, ``q_human``, ``v_human`` are
    public; after changing one in place, call :meth:`invalidate`.
    """

    def __init__(self, assembly: Assembly, params: PlantParams | None = None, mode: PlantMode = "coupled") -> None:
        self.params = PlantParams() if params is None else params
        self.mode = mode
        p = self.params
        self.exo = _scaled(assembly.exo, p.model_mass_scale, p.gravity_m_s2)
        self.human = _scaled(assembly.human, 1.0, p.gravity_m_s2)
        self.cuffs = assembly.cuffs if mode == "coupled" else ()
        self.has_exo = mode != "human_alone"
        self.has_human = mode != "exo_alone"
        self._de = self.exo.model.createData()
        self._dh = self.human.model.createData()
        self._cuff_params = [
            c.spec.params if p.cuff_damping else dataclasses.replace(
                c.spec.params, damping_N_s_per_m=(0.0, 0.0, 0.0), rot_damping_Nm_s_per_rad=(0.0, 0.0, 0.0))
            for c in self.cuffs
        ]
        me, mh = self.exo.model, self.human.model
        nc = len(self.cuffs)
        self._fext_e = pin.StdVec_Force()
        self._fext_h = pin.StdVec_Force()
        for _ in range(me.njoints):
            self._fext_e.append(pin.Force.Zero())
        for _ in range(mh.njoints):
            self._fext_h.append(pin.Force.Zero())
        # constant per cuff: its two joints, the placements of its frames in them, its K and D diagonals
        self._joints = np.array([[me.frames[c.exo_frame_id].parentJoint for c in self.cuffs],
                                 [mh.frames[c.human_frame_id].parentJoint for c in self.cuffs]],
                                dtype=np.int64).reshape(2, nc)
        self._place = np.array([[_se3_record(me.frames[c.exo_frame_id].placement) for c in self.cuffs],
                                [_se3_record(mh.frames[c.human_frame_id].placement * c.human_offset)
                                 for c in self.cuffs]]).reshape(2, nc, 12)
        self._kd = np.array([[cp.k_diag for cp in self._cuff_params],
                             [cp.d_diag for cp in self._cuff_params]]).reshape(2, nc, 6)
        # in-place views of the Data's joint placements and velocities and of the forces aba reads
        # (fixed-size storage, so they stay valid): one compiled call reads and writes them all
        de, dh = self._de, self._dh
        self._oMi_e = _records([de.oMi[j].rotation for j in range(me.njoints)], 12, "joint placements")
        self._oMi_h = _records([dh.oMi[j].rotation for j in range(mh.njoints)], 12, "joint placements")
        self._v_e = _records([de.v[j].vector for j in range(me.njoints)], 6, "joint velocities")
        self._v_h = _records([dh.v[j].vector for j in range(mh.njoints)], 6, "joint velocities")
        self._fext_e_rec = _records([f.vector for f in self._fext_e], 6, "external forces")
        self._fext_h_rec = _records([f.vector for f in self._fext_h], 6, "external forces")
        self._damping = np.array(me.damping)  # constant: read once
        self._coulomb = np.array(me.friction)
        self._tau_e = np.zeros(me.nv)  # joint torque plus friction, rewritten each substep
        self.q_exo = assembly.q_exo0.copy()
        self.v_exo = np.zeros(me.nv)
        self.q_human = assembly.q_human0.copy()
        self.v_human = np.zeros(mh.nv)
        #: Per cuff, the last wrench on the human [f; tau] in the human cuff frame, and on the robot in its frame.
        self.wrench_on_human = np.zeros((len(self.cuffs), 6))
        self.wrench_on_exo = np.zeros((len(self.cuffs), 6))
        # per cuff, the force on the human in world axes [N]; it, the spring energy and the power are
        # computed from the terms of the last update when first read (see the properties below)
        self._force_world = np.zeros((len(self.cuffs), 3))
        self._terms = np.zeros((len(self.cuffs), 24))  # per cuff e, K e, v_a, v_b of the last update
        self._energy_J, self._power_W = 0.0, 0.0
        self._cuffs_fresh = False
        self._hand = {}
        for which, arm in (("exo", self.exo), ("human", self.human)):
            f = arm.model.frames[arm.frame_id(arm.hand_frame)]
            self._hand[which] = (f.parentJoint, f.placement.translation.copy())

    def invalidate(self) -> None:
        """Mark the cuff wrenches stale; call after changing a state vector in place."""
        self._cuffs_fresh = False

    # -- kinematics and cuff forces ---------------------------------------------------
    def _kinematics(self) -> None:
        if self.has_exo:
            pin.forwardKinematics(self.exo.model, self._de, self.q_exo, self.v_exo)
        if self.has_human:
            pin.forwardKinematics(self.human.model, self._dh, self.q_human, self.v_human)

    def update_cuffs(self) -> None:
        """Compute every cuff wrench from the current state (kinematics updated here).

        Does nothing when the state has not changed since the last call.
        """
        if self._cuffs_fresh:
            return
        self._cuffs_fresh = True
        self._kinematics()
        if not self.cuffs:
            return
        _cuff_kernel(self._oMi_e, self._oMi_h, self._v_e, self._v_h, self._joints, self._place, self._kd,
                     self.wrench_on_exo, self.wrench_on_human, self._terms, self._force_world,
                     self._fext_e_rec, self._fext_h_rec)
        self._energy_J = self._power_W = None

    @property
    def force_on_human_world(self) -> np.ndarray:
        """(n_cuffs, 3) per cuff, the force on the human in world axes [N] (of the last cuff update)."""
        return self._force_world

    @property
    def cuff_energy_J(self) -> float:
        """Spring energy of all cuffs [J] at the last cuff update (:func:`models.cuffs.cuff_wrenches`)."""
        if self._energy_J is None:
            t = self._terms
            self._energy_J = float(_cuff_energy_terms(t[:, 0:6], t[:, 6:12]).sum())
        return self._energy_J

    @property
    def cuff_power_W(self) -> float:
        """Power all cuffs draw from the two arms [W] at the last cuff update (:func:`models.cuffs.cuff_wrenches`)."""
        if self._power_W is None:
            t = self._terms
            self._power_W = float(_cuff_power_terms(self.wrench_on_exo, self.wrench_on_human,
                                                    t[:, 12:18], t[:, 18:24]).sum())
        return self._power_W

    def hand_position(self, which: str) -> np.ndarray:
        """World position [m] of the hand point of ``"exo"`` or ``"human"`` (kinematics of the last update)."""
        self.update_cuffs()
        joint, offset = self._hand[which]
        return (self._de if which == "exo" else self._dh).oMi[joint].act(offset)

    # -- dynamics ----------------------------------------------------------------------
    def substep(self, tau_exo_Nm: np.ndarray, tau_human_Nm: np.ndarray, dt_s: float) -> None:
        """Advance both arms by ``dt_s`` with the given joint torques held constant."""
        self.update_cuffs()  # also writes the cuff wrenches into the joint-frame forces aba reads
        if self.has_exo:
            me = self.exo.model
            tau = tau_exo_Nm
            if self.params.exo_friction:
                tau = self._tau_e
                _friction_torque(tau_exo_Nm, self.v_exo, self._damping, self._coulomb,
                                 self.params.coulomb_smoothing_rad_s, tau)
            a = pin.aba(me, self._de, self.q_exo, self.v_exo, tau, self._fext_e)
            a *= dt_s
            a += self.v_exo
            self.v_exo = a  # v + h a, a new array (aba returns its own)
            self.q_exo = pin.integrate(me, self.q_exo, self.v_exo * dt_s)
            self._cuffs_fresh = False
        if self.has_human:
            mh = self.human.model
            a = pin.aba(mh, self._dh, self.q_human, self.v_human, tau_human_Nm, self._fext_h)
            a *= dt_s
            a += self.v_human
            self.v_human = a
            self.q_human = pin.integrate(mh, self.q_human, self.v_human * dt_s)
            self._cuffs_fresh = False

    # -- energy ------------------------------------------------------------------------
    def energy_J(self) -> dict[str, float]:
        """Kinetic (links and rotors), gravitational potential and cuff spring energy [J]."""
        out = {"kinetic_J": 0.0, "potential_J": 0.0, "cuff_J": 0.0}
        for on, arm, data, q, v in ((self.has_exo, self.exo, self._de, self.q_exo, self.v_exo),
                                    (self.has_human, self.human, self._dh, self.q_human, self.v_human)):
            if not on:
                continue
            M = pin.crba(arm.model, data, q)
            M = np.triu(M) + np.triu(M, 1).T
            out["kinetic_J"] += 0.5 * float(v @ M @ v)
            out["potential_J"] += float(pin.computePotentialEnergy(arm.model, data, q))
        self.update_cuffs()
        out["cuff_J"] = self.cuff_energy_J
        out["total_J"] = out["kinetic_J"] + out["potential_J"] + out["cuff_J"]
        return out

    def state_is_finite(self) -> str | None:
        """Name of the first non-finite state vector, or None."""
        if math.isfinite(self.q_exo.sum() + self.v_exo.sum() + self.q_human.sum() + self.v_human.sum()):
            return None  # one sum: a NaN or inf in any vector makes it non-finite (overflow too, then checked)
        for name in ("q_exo", "v_exo", "q_human", "v_human"):
            if not np.all(np.isfinite(getattr(self, name))):
                return name
        return None


# -- compiled cuff kernel ----------------------------------------------------------------
# Every numba function the plant calls lives in this file: numba's on-disk cache is keyed on the file of the
# compiled function and does not see edits to functions it calls in other files.

_EPS = float(np.finfo(np.float64).eps)
_PREC2 = _EPS ** (1.0 / 3.0)  # bound of a 2nd-order Taylor expansion at machine precision (as pinocchio)
_PREC3 = _EPS ** (1.0 / 4.0)  # the same for a 3rd-order expansion


@numba.njit(cache=True)
def _theta_axis(i0, val, R):
    """Angle and axis of R from the row ``i0`` of its quaternion (the near-pi branch of :func:`_log3`)."""
    i1, i2 = (i0 + 1) % 3, (i0 + 2) % 3
    sign = 1.0 if R[i2, i1] >= R[i1, i2] else -1.0
    s = math.sqrt(val + _EPS + _EPS * _EPS) * sign
    axis = np.empty(3)
    axis[i0] = s / 2.0
    axis[i1] = 1.0 / (2.0 * s) * (R[i1, i0] + R[i0, i1])
    axis[i2] = 1.0 / (2.0 * s) * (R[i2, i0] + R[i0, i2])
    w = 1.0 / (2.0 * s) * (R[i2, i1] - R[i1, i2])
    n = math.sqrt(axis[0] * axis[0] + axis[1] * axis[1] + axis[2] * axis[2])
    return 2.0 * math.atan2(n, w), axis / n


@numba.njit(cache=True)
def _log3(R):
    """Rotation vector w = theta u of a rotation matrix R (3, 3), and theta [rad] in [0, pi].

    .. math:: \\theta = \\arccos\\frac{\\operatorname{tr} R - 1}{2}, \\qquad
              w = \\frac{\\theta}{\\sin\\theta}\\,\\tfrac12 (R - R^T)^\\vee,

    on R re-orthonormalised column by column, with a Taylor series of
    :math:`\\theta / \\sin\\theta` near 0 and the angle-axis read off the largest
    diagonal quaternion term near pi: the branches and thresholds of
    pinocchio's ``log3`` (Murray, Li & Sastry, *A Mathematical Introduction to
    Robotic Manipulation*, 1994, section 2.2), so that both agree to rounding.
    """
    c0 = R[:, 0] / math.sqrt(R[0, 0] * R[0, 0] + R[1, 0] * R[1, 0] + R[2, 0] * R[2, 0])
    c1 = R[:, 1] / math.sqrt(R[0, 1] * R[0, 1] + R[1, 1] * R[1, 1] + R[2, 1] * R[2, 1])
    c2 = np.cross(c0, c1)
    c0 = np.cross(c1, c2)
    Rn = np.empty((3, 3))
    Rn[:, 0], Rn[:, 1], Rn[:, 2] = c0, c1, c2
    tr = Rn[0, 0] + Rn[1, 1] + Rn[2, 2]
    cos_value = (tr - 1.0) / 2.0
    acos_expansion = math.sqrt(2.0 * (1.0 - cos_value) + _EPS * _EPS)
    if tr <= 3.0 - _PREC2:
        theta = math.acos(cos_value) if tr >= -1.0 + _PREC2 else math.pi - acos_expansion
    else:
        theta = acos_expansion
    if cos_value < -1.0 + _PREC2:  # near pi: from the largest of the quaternion's squared terms
        val = 2.0 * np.array([Rn[0, 0], Rn[1, 1], Rn[2, 2]]) - tr + 1.0
        if val[0] >= val[1]:
            i0 = 0 if val[0] >= val[2] else 2
        else:
            i0 = 1 if val[1] >= val[2] else 2
        theta_s, axis = _theta_axis(i0, val[i0], Rn)
        return theta_s * axis, theta_s
    a = np.array([0.5 * (Rn[2, 1] - Rn[1, 2]), 0.5 * (Rn[0, 2] - Rn[2, 0]), 0.5 * (Rn[1, 0] - Rn[0, 1])])
    n2 = a[0] * a[0] + a[1] * a[1] + a[2] * a[2]
    t = theta / math.sin(theta) if theta >= _PREC2 else 1.0 + n2 / 6.0 + n2 * n2 * 3.0 / 40.0
    return t * a, theta


@numba.njit(cache=True)
def _jlog3(theta, w):
    """(3, 3) right Jacobian of log3 at the rotation vector w, of angle theta [rad].

    .. math:: J = \\frac{\\theta \\sin\\theta}{2 (1 - \\cos\\theta)} I + \\tfrac12 [w]_\\times
                  + \\Big(\\frac1{\\theta^2} - \\frac{\\sin\\theta}{2 \\theta (1 - \\cos\\theta)}\\Big) w w^T

    with Taylor series below the 3rd-order threshold (pinocchio's ``Jlog3``;
    Chirikjian, *Stochastic Models, Information Theory, and Lie Groups*,
    vol. 2, 2012, chapter 10).
    """
    st, ct = math.sin(theta), math.cos(theta)
    if theta < _PREC3:
        alpha = 1.0 / 12.0 + theta * theta / 720.0
        diag = 0.5 * (2.0 - theta * theta / 6.0)
    else:
        st_1mct = st / (1.0 - ct)
        alpha = 1.0 / (theta * theta) - st_1mct / (2.0 * theta)
        diag = 0.5 * (theta * st_1mct)
    J = np.empty((3, 3))
    for i in range(3):
        for j in range(3):
            J[i, j] = alpha * w[i] * w[j]
        J[i, i] += diag
    J[0, 1] -= 0.5 * w[2]
    J[0, 2] += 0.5 * w[1]
    J[1, 0] += 0.5 * w[2]
    J[1, 2] -= 0.5 * w[0]
    J[2, 0] -= 0.5 * w[1]
    J[2, 1] += 0.5 * w[0]
    return J


@numba.njit(cache=True)
def _log6_jlog6(R, p):
    """log6 of the placement (R, p) and the blocks of its right Jacobian Jlog6.

    Returns e (6,) [m, rad] (linear part first) and the blocks A, B (3, 3) of

    .. math:: J_{\\log} = \\begin{bmatrix} A & B \\\\ 0 & A \\end{bmatrix}, \\qquad
              A = J_{\\log 3}(w), \\qquad
              e = \\begin{bmatrix} \\alpha p - \\tfrac12 w \\times p + \\beta (w \\cdot p) w \\\\ w \\end{bmatrix}

    with :math:`\\alpha = \\theta \\sin\\theta / (2 (1 - \\cos\\theta))`,
    :math:`\\beta = 1/\\theta^2 - \\sin\\theta / (2 \\theta (1 - \\cos\\theta))`
    and B from the derivative of :math:`\\beta` (Barfoot, *State Estimation
    for Robotics*, 2017, section 7.1.5, the SE(3) Jacobians), with the branches
    and thresholds of pinocchio's ``log6`` and ``Jlog6``.
    """
    w, theta = _log3(R)
    st, ct = math.sin(theta), math.cos(theta)
    a = np.array([0.5 * (R[2, 1] - R[1, 2]), 0.5 * (R[0, 2] - R[2, 0]), 0.5 * (R[1, 0] - R[0, 1])])
    t2 = a[0] * a[0] + a[1] * a[1] + a[2] * a[2]
    if R[0, 0] + R[1, 1] + R[2, 2] >= 3.0 - _PREC2:
        alpha = 1.0 - t2 / 12.0 - t2 * t2 / 720.0
        beta = 1.0 / 12.0 + t2 / 720.0
    else:
        alpha = theta * st / (2.0 * (1.0 - ct))
        beta = 1.0 / (theta * theta) - st / (2.0 * theta * (1.0 - ct))
    wp = np.cross(w, p)
    wTp = w[0] * p[0] + w[1] * p[1] + w[2] * p[2]
    e = np.empty(6)
    e[:3] = alpha * p - 0.5 * wp + (beta * wTp) * w
    e[3:] = w
    A = _jlog3(theta, w)
    th2 = theta * theta
    if theta < _PREC3:
        beta_j = 1.0 / 12.0 + th2 / 720.0
        beta_dot_over_theta = 1.0 / 360.0
    else:
        tinv = 1.0 / theta
        t2inv = tinv * tinv
        inv_2_2ct = 1.0 / (2.0 * (1.0 - ct))
        beta_j = t2inv - st * tinv * inv_2_2ct
        beta_dot_over_theta = -2.0 * t2inv * t2inv + (1.0 + st * tinv) * t2inv * inv_2_2ct
    v3 = (beta_dot_over_theta * wTp) * w - (th2 * beta_dot_over_theta + 2.0 * beta_j) * p
    C = np.empty((3, 3))
    for i in range(3):
        for j in range(3):
            C[i, j] = v3[i] * w[j] + beta_j * w[i] * p[j]
        C[i, i] += wTp * beta_j
    C[0, 1] -= 0.5 * p[2]
    C[0, 2] += 0.5 * p[1]
    C[1, 0] += 0.5 * p[2]
    C[1, 2] -= 0.5 * p[0]
    C[2, 0] -= 0.5 * p[1]
    C[2, 1] += 0.5 * p[0]
    return e, A, _mul33(C, A)


@numba.njit(cache=True)
def _mul33(X, Y):
    """(3, 3) product X Y, written out (small products cost less inline than through BLAS)."""
    Z = np.empty((3, 3))
    for i in range(3):
        for j in range(3):
            Z[i, j] = X[i, 0] * Y[0, j] + X[i, 1] * Y[1, j] + X[i, 2] * Y[2, j]
    return Z


@numba.njit(cache=True)
def _cuff_law(R, p, v_a, v_b, k, d, w_a, w_b, e_out, ke_out):
    """The cuff law of :mod:`models.cuffs` for one cuff, compiled; writes w_a, w_b, e and K e (6,) each.

    With the placement :math:`{}^A M_B = (R, p)` of B in A, the frames' own
    velocities :math:`v_A, v_B` and the diagonals k, d of K and D:

    .. math::
        e = \\log_6({}^A M_B), \\quad \\nu_{B/A} = v_B - {}^B X_A v_A, \\quad
        \\dot e = J_{\\log} \\nu_{B/A}, \\quad
        w_B = -J_{\\log}^T (K e + D \\dot e), \\quad w_A = -{}^A X_B^{*} w_B

    (Bullo & Murray 1999, section 3; :func:`models.cuffs.cuff_wrench` is the
    reference implementation this one must match to rounding).
    """
    e, A, B = _log6_jlog6(R, p)
    # relative twist in B: R^T (v_lin - p x w), R^T w of v_A, subtracted from v_B
    la = v_a[:3] - np.cross(p, v_a[3:])
    nu = np.empty(6)
    for i in range(3):
        nu[i] = v_b[i] - (R[0, i] * la[0] + R[1, i] * la[1] + R[2, i] * la[2])
        nu[3 + i] = v_b[3 + i] - (R[0, i] * v_a[3] + R[1, i] * v_a[4] + R[2, i] * v_a[5])
    y = np.empty(6)
    for i in range(3):
        ed_lin = (A[i, 0] * nu[0] + A[i, 1] * nu[1] + A[i, 2] * nu[2]
                  + B[i, 0] * nu[3] + B[i, 1] * nu[4] + B[i, 2] * nu[5])
        ed_ang = A[i, 0] * nu[3] + A[i, 1] * nu[4] + A[i, 2] * nu[5]
        ke_out[i], ke_out[3 + i] = k[i] * e[i], k[3 + i] * e[3 + i]
        y[i] = ke_out[i] + d[i] * ed_lin
        y[3 + i] = ke_out[3 + i] + d[3 + i] * ed_ang
        e_out[i], e_out[3 + i] = e[i], e[3 + i]
    for i in range(3):  # w_B = -J^T y, J = [[A, B], [0, A]]
        w_b[i] = -(A[0, i] * y[0] + A[1, i] * y[1] + A[2, i] * y[2])
        w_b[3 + i] = -(B[0, i] * y[0] + B[1, i] * y[1] + B[2, i] * y[2]
                       + A[0, i] * y[3] + A[1, i] * y[4] + A[2, i] * y[5])
    # w_A = -(R f, R tau + p x R f) of w_B
    for i in range(3):
        w_a[i] = -(R[i, 0] * w_b[0] + R[i, 1] * w_b[1] + R[i, 2] * w_b[2])
        w_a[3 + i] = -(R[i, 0] * w_b[3] + R[i, 1] * w_b[4] + R[i, 2] * w_b[5])
    pf = np.cross(p, w_a[:3])  # p x (-R f) = -(p x R f)
    for i in range(3):
        w_a[3 + i] += pf[i]


@numba.njit(cache=True)
def _placement(M, P):
    """World placement (R, p) of a frame: the joint placement M (12,) times the frame placement P (12,) in it.

    Both are stored as pinocchio stores an SE3: the rotation column by column, then the translation.
    :math:`R = R_M R_P`, :math:`p = R_M p_P + p_M`.
    """
    R = np.empty((3, 3))
    p = np.empty(3)
    for i in range(3):
        for j in range(3):
            R[i, j] = M[i] * P[3 * j] + M[3 + i] * P[3 * j + 1] + M[6 + i] * P[3 * j + 2]
        p[i] = M[i] * P[9] + M[3 + i] * P[10] + M[6 + i] * P[11] + M[9 + i]
    return R, p


@numba.njit(cache=True)
def _frame_twist(P, v, out):
    """The frame's own (LOCAL) twist of the joint twist v (6,): :math:`(R^T (v - p \\times \\omega), R^T \\omega)`.

    P (12,) is the frame's placement in its joint, stored as in :func:`_placement`.
    """
    lin0 = v[0] - (P[10] * v[5] - P[11] * v[4])
    lin1 = v[1] - (P[11] * v[3] - P[9] * v[5])
    lin2 = v[2] - (P[9] * v[4] - P[10] * v[3])
    for i in range(3):  # column i of R is P[3i:3i+3]: (R^T x)_i = R[:, i] . x
        out[i] = P[3 * i] * lin0 + P[3 * i + 1] * lin1 + P[3 * i + 2] * lin2
        out[3 + i] = P[3 * i] * v[3] + P[3 * i + 1] * v[4] + P[3 * i + 2] * v[5]


@numba.njit(cache=True)
def _add_joint_wrench(P, w, f):
    """Add to the joint-frame wrench f (6,) the frame wrench w (6,): :math:`(R f_w, R \\tau_w + p \\times R f_w)`."""
    rf = np.empty(3)
    for i in range(3):
        rf[i] = P[i] * w[0] + P[3 + i] * w[1] + P[6 + i] * w[2]
    for i in range(3):
        f[i] += rf[i]
    f[3] += P[0] * w[3] + P[3] * w[4] + P[6] * w[5] + (P[10] * rf[2] - P[11] * rf[1])
    f[4] += P[1] * w[3] + P[4] * w[4] + P[7] * w[5] + (P[11] * rf[0] - P[9] * rf[2])
    f[5] += P[2] * w[3] + P[5] * w[4] + P[8] * w[5] + (P[9] * rf[1] - P[10] * rf[0])


@numba.njit(cache=True)
def _cuff_kernel(oMi_e, oMi_h, v_e, v_h, joints, place, kd, w_a, w_b, terms, force_world, fext_e, fext_h):
    """Every cuff's wrenches from the two arms' joint placements and velocities, in one call.

    For cuff c with robot-side frame A on joint i (placement :math:`{}^iM_A`)
    and human-side frame B on joint j (:math:`{}^jM_B`, the strap offset
    included):

    .. math::
        {}^oM_A = {}^oM_i\\,{}^iM_A, \\quad {}^oM_B = {}^oM_j\\,{}^jM_B, \\quad
        {}^AM_B = ({}^oM_A)^{-1}\\,{}^oM_B, \\quad
        v_A = {}^AX_i\\, v_i, \\quad v_B = {}^BX_j\\, v_j,

    then the cuff law (:func:`_cuff_law`) gives :math:`w_A, w_B`, and aba
    takes them in the joint frames, :math:`f_i \\mathrel{+}= {}^iX_A^{*} w_A`,
    :math:`f_j \\mathrel{+}= {}^jX_B^{*} w_B` (Featherstone 2008, ch. 2, the
    force transform), summed over the cuffs on one joint.

    Parameters
    ----------
    oMi_e, oMi_h : (n_joints, 12) ndarray
        Joint placements of each arm, as pinocchio stores them (the
        rotation column by column, then the translation) [m].
    v_e, v_h : (n_joints, 6) ndarray
        Joint velocities ``[v; omega]`` in the joint frames [m/s, rad/s].
    joints : (2, k) int64 ndarray
        Robot-side and human-side joint of each cuff.
    place : (2, k, 12) ndarray
        Placements of A and of B in their joints, stored as ``oMi_e``.
    kd : (2, k, 6) ndarray
        Diagonal stiffness and damping of each cuff.
    w_a, w_b : (k, 6) ndarray, written
        Wrenches on A (in A) and on B (in B) [N, N m].
    terms : (k, 24) ndarray, written
        Per cuff e, K e, v_A, v_B (for the energy and the power).
    force_world : (k, 3) ndarray, written
        Force on B in world axes [N].
    fext_e, fext_h : (n_joints, 6) ndarray, written
        External wrenches in the joint frames; rows of joints with no cuff are left as they are.
    """
    k = joints.shape[1]
    for c in range(k):
        fext_e[joints[0, c], :] = 0.0
        fext_h[joints[1, c], :] = 0.0
    for c in range(k):
        R_a, p_a = _placement(oMi_e[joints[0, c]], place[0, c])
        R_b, p_b = _placement(oMi_h[joints[1, c]], place[1, c])
        R = np.empty((3, 3))
        for i in range(3):
            for j in range(3):
                R[i, j] = R_a[0, i] * R_b[0, j] + R_a[1, i] * R_b[1, j] + R_a[2, i] * R_b[2, j]
        dp = p_b - p_a
        p = np.empty(3)
        for i in range(3):
            p[i] = R_a[0, i] * dp[0] + R_a[1, i] * dp[1] + R_a[2, i] * dp[2]
        _frame_twist(place[0, c], v_e[joints[0, c]], terms[c, 12:18])
        _frame_twist(place[1, c], v_h[joints[1, c]], terms[c, 18:24])
        _cuff_law(R, p, terms[c, 12:18], terms[c, 18:24], kd[0, c], kd[1, c], w_a[c], w_b[c],
                  terms[c, 0:6], terms[c, 6:12])
        for i in range(3):
            force_world[c, i] = R_b[i, 0] * w_b[c, 0] + R_b[i, 1] * w_b[c, 1] + R_b[i, 2] * w_b[c, 2]
        _add_joint_wrench(place[0, c], w_a[c], fext_e[joints[0, c]])
        _add_joint_wrench(place[1, c], w_b[c], fext_h[joints[1, c]])


@numba.njit(cache=True)
def _friction_torque(tau, v, damping, coulomb, smoothing, out):
    """Joint torque plus friction, :math:`\\tau - b v - \\tau_c \\tanh(v / v_s)` (PlantParams), into out."""
    for i in range(v.shape[0]):
        out[i] = tau[i] + (-damping[i] * v[i] - coulomb[i] * math.tanh(v[i] / smoothing))


def _records(items: list[np.ndarray], width: int, what: str) -> np.ndarray:
    """One (n, width) view onto n equally spaced records of float64, given each record's leading array.

    pinocchio keeps ``Data.oMi``, ``Data.v`` and a ``StdVec_Force`` in contiguous fixed-size storage; the
    view reads (and writes) them in place, so one compiled call sees every joint.  The layout is checked
    record by record: a pinocchio that stores them otherwise gets a clear error, not wrong numbers.
    """
    addr = [a.__array_interface__["data"][0] for a in items]
    stride = addr[1] - addr[0] if len(items) > 1 else 8 * width
    first = items[0].ravel(order="K")
    if (first.__array_interface__["data"][0] != addr[0] or stride < 8 * width
            or any(b - a != stride for a, b in zip(addr, addr[1:]))):
        raise SandboxError(f"pinocchio's {what} are not stored as equally spaced records of {width} float64; "
                           "the plant cannot read them in place")
    return np.lib.stride_tricks.as_strided(first, shape=(len(items), width), strides=(stride, 8))


def _se3_record(M: pin.SE3) -> np.ndarray:
    """(12,) an SE3 as pinocchio stores it: the rotation column by column, then the translation [m]."""
    return np.concatenate((M.rotation.ravel(order="F"), M.translation))
