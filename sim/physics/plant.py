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

With both arms simulated, the two models are also held as one
(``pinocchio.appendModel``, the human's tree beside the robot's), so each
substep is one forward kinematics, one aba and one integrate; joint by joint
these do the same arithmetic as two models, and the plant checks this to the
bit when it is built.  :meth:`CoupledPlant.advance` runs all the substeps of a
control tick in one call, asking the actuators before each.  On the pair
model a substep makes two compiled calls between pinocchio's: one for the
cuff wrenches, the torque-source actuators' lag and friction
(:func:`_substep_inputs`), one for the Euler velocity (:func:`_euler_velocity`);
the per-cuff arrays they read and write are packed in two flat arrays
(:func:`_cuff_blocks`), since numba's dispatcher costs a little for every array
argument of every call.
"""

from __future__ import annotations

import dataclasses
import math
from dataclasses import dataclass
from typing import Literal

import numba
import numpy as np
import pinocchio as pin

from models.arm import ArmModel
from models.checks import in_range, nonnegative, positive
from models.coupling import Assembly
from models.cuffs import cuff_energy_terms, cuff_power_terms
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


def _state_setter(pair: str, split: str, robot: bool, own: str):
    """Setter of a :class:`CoupledPlant` state vector: attribute ``own``, or with the pair model a new pair
    state ``pair`` with the robot's (``robot``) or the human's part replaced, split at the robot's size ``split``."""

    def set_(self, value: np.ndarray) -> None:
        if not self._pair:
            setattr(self, own, value)
            return
        k, state = getattr(self, split), getattr(self, pair)
        value = np.asarray(value, dtype=float)
        setattr(self, pair, np.concatenate((value, state[k:]) if robot else (state[:k], value)))

    return set_


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
        # With both arms simulated, one pinocchio model holds the pair (:func:`_pair_model`): one forward
        # kinematics, one aba and one integrate per substep do, joint by joint, what two of each do.  Its
        # Data then holds both arms' kinematics, its joint j + off being joint j >= 1 of the human.
        self._m = _pair_model(me, mh) if self.has_exo and self.has_human else None
        self._pair = self._m is not None
        self._nq_e, self._nv_e = me.nq, me.nv
        if self._pair:
            self._d = self._m.createData()
            data_e = data_h = self._d
            self._fext = pin.StdVec_Force()
            for _ in range(self._m.njoints):
                self._fext.append(pin.Force.Zero())
            fext_e = fext_h = self._fext
            off = me.njoints - 1
        else:
            data_e, data_h = self._de, self._dh
            fext_e, fext_h = pin.StdVec_Force(), pin.StdVec_Force()
            for _ in range(me.njoints):
                fext_e.append(pin.Force.Zero())
            for _ in range(mh.njoints):
                fext_h.append(pin.Force.Zero())
            self._fext_e, self._fext_h = fext_e, fext_h
            off = 0
        self._human_joint_offset = off
        # constant per cuff: its two joints, the placements of its frames in them, its K and D diagonals
        self._joints = np.array([[me.frames[c.exo_frame_id].parentJoint for c in self.cuffs],
                                 [mh.frames[c.human_frame_id].parentJoint + off for c in self.cuffs]],
                                dtype=np.int64).reshape(2, nc)
        place = np.array([[_se3_record(me.frames[c.exo_frame_id].placement) for c in self.cuffs],
                          [_se3_record(mh.frames[c.human_frame_id].placement * c.human_offset)
                           for c in self.cuffs]]).reshape(2, nc, 12)
        kd = np.array([[cp.k_diag for cp in self._cuff_params],
                       [cp.d_diag for cp in self._cuff_params]]).reshape(2, nc, 6)
        # both in one array (the pair's kernels take it as one argument, see _cuff_blocks); named views below
        self._cuff_const = np.concatenate((place.ravel(), kd.ravel()))
        self._kd_nominal = kd.copy()  # the cuffs' own K and D diagonals (scale_cuffs multiplies them)
        # in-place views of the Data's joint placements and velocities and of the forces aba reads
        # (fixed-size storage, so they stay valid): one compiled call reads and writes them all
        # (with the pair model, both arms' views are one)
        self._oMi_e = _records([data_e.oMi[j].rotation for j in range(len(data_e.oMi))], 12, "joint placements")
        self._oMi_h = _records([data_h.oMi[j].rotation for j in range(len(data_h.oMi))], 12, "joint placements")
        self._v_e = _records([data_e.v[j].vector for j in range(len(data_e.v))], 6, "joint velocities")
        self._v_h = _records([data_h.v[j].vector for j in range(len(data_h.v))], 6, "joint velocities")
        self._fext_e_rec = _records([f.vector for f in fext_e], 6, "external forces")
        self._fext_h_rec = _records([f.vector for f in fext_h], 6, "external forces")
        self._friction_coeffs = np.array([me.damping, me.friction], dtype=float).reshape(2, me.nv)  # read once
        self._damping, self._coulomb = self._friction_coeffs[0], self._friction_coeffs[1]
        if self._pair:  # the pair's joint torque: the robot's (plus friction) then the human's, rewritten each substep
            self._tau = np.zeros(me.nv + mh.nv)
            self._tau_e, self._tau_h = self._tau[:me.nv], self._tau[me.nv:]
            self._vh = np.zeros(me.nv + mh.nv)  # h v+ of each substep, for integrate
            self._tau_in = np.zeros((2, me.nv))  # row 0: the robot's torque of a substep, when no lag computes it
            # the state of the pair; q_exo, q_human, v_exo, v_human are views of it (properties below)
            self._q = np.concatenate((assembly.q_exo0, assembly.q_human0)).astype(float)
            self._v = np.zeros(me.nv + mh.nv)
        else:
            self._tau_e = np.zeros(me.nv)  # joint torque plus friction, rewritten each substep
            self._vh_e, self._vh_h = np.zeros(me.nv), np.zeros(mh.nv)  # h v+ of each substep, for integrate
            self._q_exo, self._v_exo = assembly.q_exo0.copy(), np.zeros(me.nv)
            self._q_human, self._v_human = assembly.q_human0.copy(), np.zeros(mh.nv)
        # what each cuff update writes, in one array (one kernel argument, see _cuff_blocks), as views of it:
        #: Per cuff, the last wrench on the robot [f; tau] in its cuff frame, and on the human in the human cuff frame.
        self._cuff_out = np.zeros(_CUFF_OUT_WIDTH * nc)
        (self._place, self._kd, self.wrench_on_exo, self.wrench_on_human, self._terms,
         self._force_world) = _cuff_blocks(self._cuff_const, self._cuff_out, nc)
        # (_terms: per cuff e, K e, v_a, v_b of the last update; _force_world: per cuff, the force on the human
        # in world axes [N]; the spring energy and the power are computed from the terms of the last update when
        # first read, see the properties below)
        self._energy_J, self._power_W = 0.0, 0.0
        self._cuffs_fresh = False
        self._hand = {}
        for which, arm, data, shift in (("exo", self.exo, data_e, 0), ("human", self.human, data_h, off)):
            f = arm.model.frames[arm.frame_id(arm.hand_frame)]
            # data.oMi's item getter: the live vector of joint placements (fixed size, as for the views above)
            self._hand[which] = (data.oMi.__getitem__, f.parentJoint + shift, f.placement.translation.copy())

    # -- state -------------------------------------------------------------------------
    # With the pair model the four vectors are views of its state (each substep makes a new one, as
    # pinocchio.integrate and aba return new arrays); assigning one copies it into a new pair state.
    # (the getters are read several times a tick, so each is one expression)
    q_exo = property(lambda self: self._q[:self._nq_e] if self._pair else self._q_exo,
                     _state_setter("_q", "_nq_e", True, "_q_exo"), doc="Robot joint positions (nq,) [rad].")
    v_exo = property(lambda self: self._v[:self._nv_e] if self._pair else self._v_exo,
                     _state_setter("_v", "_nv_e", True, "_v_exo"), doc="Robot joint velocities (nv,) [rad/s].")
    q_human = property(lambda self: self._q[self._nq_e:] if self._pair else self._q_human,
                       _state_setter("_q", "_nq_e", False, "_q_human"), doc="Human joint positions (nq,) [rad].")
    v_human = property(lambda self: self._v[self._nv_e:] if self._pair else self._v_human,
                       _state_setter("_v", "_nv_e", False, "_v_human"), doc="Human joint velocities (nv,) [rad/s].")

    def _joint_forces(self) -> tuple[list[np.ndarray], list[np.ndarray]]:
        """The joint-frame wrenches aba reads, per arm: one (6,) [N, N m] per joint, universe first (copies)."""
        if not self._pair:
            return [f.vector.copy() for f in self._fext_e], [f.vector.copy() for f in self._fext_h]
        f, nje, off = self._fext, self.exo.model.njoints, self._human_joint_offset
        return ([f[j].vector.copy() for j in range(nje)],
                [f[0].vector.copy()] + [f[j + off].vector.copy() for j in range(1, self.human.model.njoints)])

    def scale_cuffs(self, scale: np.ndarray) -> None:
        """Multiply each cuff's own stiffness and damping diagonals by factors (a cuff that slips).

        ``scale`` (n_cuffs, 2): row c gives the factors on cuff c's K (column 0) and D (column 1); ones give
        the cuffs' own values back exactly.  The cuff wrenches are recomputed at the next update.
        """
        scale = np.asarray(scale, dtype=float)
        if scale.shape != (len(self.cuffs), 2) or not np.all(np.isfinite(scale)) or np.any(scale < 0):
            raise SandboxError(f"CoupledPlant.scale_cuffs: scale must be ({len(self.cuffs)}, 2) finite factors "
                               f">= 0, got {scale!r}")
        self._kd[0] = self._kd_nominal[0] * scale[:, 0:1]
        self._kd[1] = self._kd_nominal[1] * scale[:, 1:2]
        self._cuffs_fresh = False

    def invalidate(self) -> None:
        """Mark the cuff wrenches stale; call after changing a state vector in place."""
        self._cuffs_fresh = False

    # -- kinematics and cuff forces ---------------------------------------------------
    def _kinematics(self) -> None:
        if self._pair:
            pin.forwardKinematics(self._m, self._d, self._q, self._v)
            return
        if self.has_exo:
            pin.forwardKinematics(self.exo.model, self._de, self.q_exo, self.v_exo)
        if self.has_human:
            pin.forwardKinematics(self.human.model, self._dh, self.q_human, self.v_human)

    def update_cuffs(self) -> None:
        """Compute every cuff wrench from the current state (kinematics updated here).

        Does nothing when the state has not changed since the last call.
        """
        if not self._cuffs_fresh:
            self._refresh_cuffs()

    def _refresh_cuffs(self) -> None:
        self._cuffs_fresh = True
        if self._pair:
            pin.forwardKinematics(self._m, self._d, self._q, self._v)
            if self.cuffs:
                _pair_cuffs(self._oMi_e, self._v_e, self._fext_e_rec, self._joints, self._cuff_const,
                            self._cuff_out)
                self._energy_J = self._power_W = None
            return
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
            self._energy_J = float(cuff_energy_terms(t[:, 0:6], t[:, 6:12]).sum())
        return self._energy_J

    @property
    def cuff_power_W(self) -> float:
        """Power all cuffs draw from the two arms [W] at the last cuff update (:func:`models.cuffs.cuff_wrenches`)."""
        if self._power_W is None:
            t = self._terms
            self._power_W = float(cuff_power_terms(self.wrench_on_exo, self.wrench_on_human,
                                                    t[:, 12:18], t[:, 18:24]).sum())
        return self._power_W

    def hand_position(self, which: str) -> np.ndarray:
        """World position [m] of the hand point of ``"exo"`` or ``"human"`` (kinematics of the last update)."""
        if not self._cuffs_fresh:
            self._refresh_cuffs()
        placement, joint, offset = self._hand[which]
        return placement(joint).act(offset)

    # -- dynamics ----------------------------------------------------------------------
    def substep(self, tau_exo_Nm: np.ndarray, tau_human_Nm: np.ndarray, dt_s: float) -> None:
        """Advance both arms by ``dt_s`` with the given joint torques held constant."""
        self.advance(tau_exo_Nm, tau_human_Nm, dt_s, 1)

    def advance(self, exo_torque, tau_human_Nm: np.ndarray, dt_s: float, n_substeps: int) -> None:
        """Advance both arms by ``n_substeps`` substeps of ``dt_s`` each, in one call.

        The same as ``n_substeps`` calls of :meth:`substep`, to the bit.
        ``exo_torque`` is either the robot's joint torque (nv,) [N m], held
        over all the substeps, or an actuator (:class:`sim.physics.actuators.Actuators`,
        anything with ``substep(q, v, dt_s)``), asked before every substep for
        the torque it applies over it given the robot's state then.  The
        human's torque ``tau_human_Nm`` (nv,) [N m] is held over all of them; with both arms it may also
        be an object with ``substep(q, v, dt_s)``, asked before every substep for the human's torque given
        the human's state then (a fixture that moves the wearer's hand, :mod:`sim.physics.fixture`).
        An actuator whose ``lag_arrays(dt_s)`` gives its state
        (:meth:`sim.physics.actuators.TorqueSourceActuators.lag_arrays`) is stepped
        inside the plant's compiled substep instead, with the same numbers.
        """
        if not (isinstance(n_substeps, (int, np.integer)) and n_substeps >= 1):
            raise SandboxError(f"CoupledPlant.advance: n_substeps must be an integer >= 1, got {n_substeps!r}")
        actuator = getattr(exo_torque, "substep", None)
        tau_held = None if actuator is not None else np.asarray(exo_torque, dtype=float)
        if self._pair:
            lag_arrays = getattr(exo_torque, "lag_arrays", None)
            self._advance_pair(actuator, lag_arrays(dt_s) if lag_arrays is not None else None, tau_held,
                               tau_human_Nm, dt_s, n_substeps)
            return
        has_exo, has_human = self.has_exo, self.has_human
        human = getattr(tau_human_Nm, "substep", None)  # None: a torque held over all the substeps
        me, mh, de, dh = self.exo.model, self.human.model, self._de, self._dh
        fext_e, fext_h, vh_e, vh_h = self._fext_e, self._fext_h, self._vh_e, self._vh_h
        friction = self.params.exo_friction
        smoothing = self.params.coulomb_smoothing_rad_s
        aba, integrate = pin.aba, pin.integrate
        cuffs = bool(self.cuffs)
        for _ in range(n_substeps):
            tau = actuator(self.q_exo, self.v_exo, dt_s) if actuator is not None else tau_held
            # the cuff wrenches, written into the joint-frame forces aba reads, need this substep's kinematics;
            # without cuffs nothing here reads them (aba does its own): update_cuffs brings them up to date
            if cuffs and not self._cuffs_fresh:
                self._refresh_cuffs()
            if has_exo:
                if friction:  # tau - b v - tau_c tanh(v / v_s) (PlantParams)
                    _friction_torque(tau, self.v_exo, self._damping, self._coulomb, smoothing, self._tau_e)
                    tau = self._tau_e
                a = aba(me, de, self.q_exo, self.v_exo, tau, fext_e)  # a new array: it becomes v
                _euler_velocity(a, self.v_exo, dt_s, vh_e)
                self.v_exo = a
                self.q_exo = integrate(me, self.q_exo, vh_e)
                self._cuffs_fresh = False
            if has_human:
                a = aba(mh, dh, self.q_human, self.v_human,
                        tau_human_Nm if human is None else human(self.q_human, self.v_human, dt_s), fext_h)
                _euler_velocity(a, self.v_human, dt_s, vh_h)
                self.v_human = a
                self.q_human = integrate(mh, self.q_human, vh_h)
                self._cuffs_fresh = False

    def _advance_pair(self, actuator, lag, tau_held, tau_human_Nm, dt_s: float, n_substeps: int) -> None:
        """:meth:`advance` of both arms at once, on the pair model.

        Between pinocchio's forward kinematics, aba and integrate, each substep makes two compiled calls:
        :func:`_substep_inputs` (the cuff wrenches, the actuators' lag when ``lag`` gives its state
        (:meth:`sim.physics.actuators.TorqueSourceActuators.lag_arrays`), friction) and :func:`_euler_velocity`.
        Another actuator is asked in Python before each substep, as :meth:`advance` says.
        """
        m, d, fext, vh, tau_all, tau_e = self._m, self._d, self._fext, self._vh, self._tau, self._tau_e
        friction = self.params.exo_friction
        smoothing = self.params.coulomb_smoothing_rad_s
        kinematics, aba, integrate = pin.forwardKinematics, pin.aba, pin.integrate
        oMi, vel, f_rec, joints = self._oMi_e, self._v_e, self._fext_e_rec, self._joints
        const, out, coeffs = self._cuff_const, self._cuff_out, self._friction_coeffs
        if lag is not None:
            tau_u, alpha = lag
        else:  # the torque of each substep is copied here: the kernel always gets a C-ordered writable array
            tau_u, alpha = self._tau_in, 0.0
        tau = tau_u[0]
        lagged = lag is not None
        human = getattr(tau_human_Nm, "substep", None)  # None: a torque held over all the substeps
        if human is None:
            self._tau_h[:] = tau_human_Nm
        nq_e, nv_e = self._nq_e, self._nv_e
        refresh = not self._cuffs_fresh
        refreshed = False
        q, v = self._q, self._v
        try:
            for _ in range(n_substeps):
                if not lagged:  # the state so far is the plant's, for the actuator to read
                    self._q, self._v = q, v
                    tau[:] = actuator(self.q_exo, self.v_exo, dt_s) if actuator is not None else tau_held
                if human is not None:
                    self._tau_h[:] = human(q[nq_e:], v[nv_e:], dt_s)
                if refresh:  # the cuff wrenches (the kernel writes them into the forces aba reads) need kinematics
                    kinematics(m, d, q, v)
                    refreshed = True
                _substep_inputs(refresh, oMi, vel, f_rec, joints, const, out, tau_u, alpha, lagged, v, coeffs,
                                smoothing, friction, tau_e)
                a = aba(m, d, q, v, tau_all, fext)  # a new array: it becomes v
                _euler_velocity(a, v, dt_s, vh)
                v = a
                refresh = True  # the state moved
                q = integrate(m, q, vh)
        finally:  # the state reached, also when a call raised
            self._q, self._v = q, v
            self._cuffs_fresh = not refresh
            if refreshed and self.cuffs:
                self._energy_J = self._power_W = None

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
        if self._pair:  # the four vectors are the two halves of the pair's q and v
            bad = _first_nonfinite_pair(self._q, self._v, self._nq_e, self._nv_e)
        else:
            bad = _first_nonfinite(self.q_exo, self.v_exo, self.q_human, self.v_human)
        return None if bad < 0 else ("q_exo", "v_exo", "q_human", "v_human")[bad]


# -- compiled cuff kernel ----------------------------------------------------------------
# Every numba function the plant calls lives in this file: numba's on-disk cache is keyed on the file of the
# compiled function and does not see edits to functions it calls in other files.  Inside the kernel, 3-vectors
# are tuples and 3x3 matrices tuples of rows: they live in registers, with no array allocated per cuff.

_EPS = float(np.finfo(np.float64).eps)
_PREC2 = _EPS ** (1.0 / 3.0)  # bound of a 2nd-order Taylor expansion at machine precision (as pinocchio)
_PREC3 = _EPS ** (1.0 / 4.0)  # the same for a 3rd-order expansion


@numba.njit(cache=True)
def _cross(a, b):
    return (a[1] * b[2] - a[2] * b[1], a[2] * b[0] - a[0] * b[2], a[0] * b[1] - a[1] * b[0])


@numba.njit(cache=True)
def _dot(a, b):
    return a[0] * b[0] + a[1] * b[1] + a[2] * b[2]


@numba.njit(cache=True)
def _mul33(X, Y):
    """(3, 3) product X Y of two matrices given as tuples of rows."""
    return ((X[0][0] * Y[0][0] + X[0][1] * Y[1][0] + X[0][2] * Y[2][0],
             X[0][0] * Y[0][1] + X[0][1] * Y[1][1] + X[0][2] * Y[2][1],
             X[0][0] * Y[0][2] + X[0][1] * Y[1][2] + X[0][2] * Y[2][2]),
            (X[1][0] * Y[0][0] + X[1][1] * Y[1][0] + X[1][2] * Y[2][0],
             X[1][0] * Y[0][1] + X[1][1] * Y[1][1] + X[1][2] * Y[2][1],
             X[1][0] * Y[0][2] + X[1][1] * Y[1][2] + X[1][2] * Y[2][2]),
            (X[2][0] * Y[0][0] + X[2][1] * Y[1][0] + X[2][2] * Y[2][0],
             X[2][0] * Y[0][1] + X[2][1] * Y[1][1] + X[2][2] * Y[2][1],
             X[2][0] * Y[0][2] + X[2][1] * Y[1][2] + X[2][2] * Y[2][2]))


@numba.njit(cache=True)
def _mul33_vec(X, v):
    return (_dot(X[0], v), _dot(X[1], v), _dot(X[2], v))


@numba.njit(cache=True)
def _mul33t_vec(X, v):
    """:math:`X^T v`."""
    return (X[0][0] * v[0] + X[1][0] * v[1] + X[2][0] * v[2],
            X[0][1] * v[0] + X[1][1] * v[1] + X[2][1] * v[2],
            X[0][2] * v[0] + X[1][2] * v[1] + X[2][2] * v[2])


@numba.njit(cache=True)
def _unskew(R):
    """:math:`\\tfrac12 (R - R^T)^\\vee`."""
    return (0.5 * (R[2][1] - R[1][2]), 0.5 * (R[0][2] - R[2][0]), 0.5 * (R[1][0] - R[0][1]))


@numba.njit(cache=True)
def _theta_axis(i0, val, R):
    """Angle and unit axis of R from its largest diagonal quaternion term ``i0`` (near pi, :func:`_log3`)."""
    i1, i2 = (i0 + 1) % 3, (i0 + 2) % 3
    sign = 1.0 if R[i2][i1] >= R[i1][i2] else -1.0
    s = math.sqrt(val + _EPS + _EPS * _EPS) * sign
    a0 = s / 2.0
    a1 = 1.0 / (2.0 * s) * (R[i1][i0] + R[i0][i1])
    a2 = 1.0 / (2.0 * s) * (R[i2][i0] + R[i0][i2])
    w = 1.0 / (2.0 * s) * (R[i2][i1] - R[i1][i2])
    axis = (a0, a1, a2) if i0 == 0 else ((a2, a0, a1) if i0 == 1 else (a1, a2, a0))  # entries i0, i1, i2
    n = math.sqrt(_dot(axis, axis))
    return 2.0 * math.atan2(n, w), (axis[0] / n, axis[1] / n, axis[2] / n)


@numba.njit(cache=True)
def _log3(R):
    """Rotation vector w = theta u of a rotation matrix R, and theta [rad] in [0, pi].

    .. math:: \\theta = \\arccos\\frac{\\operatorname{tr} R - 1}{2}, \\qquad
              w = \\frac{\\theta}{\\sin\\theta}\\,\\tfrac12 (R - R^T)^\\vee,

    on R re-orthonormalised column by column, with a Taylor series of
    :math:`\\theta / \\sin\\theta` near 0 and the angle-axis read off the largest
    diagonal quaternion term near pi: the branches and thresholds of
    pinocchio's ``log3`` (Murray, Li & Sastry, *A Mathematical Introduction to
    Robotic Manipulation*, 1994, section 2.2; section from memory), so that both agree to rounding.
    """
    n0 = math.sqrt(R[0][0] * R[0][0] + R[1][0] * R[1][0] + R[2][0] * R[2][0])
    n1 = math.sqrt(R[0][1] * R[0][1] + R[1][1] * R[1][1] + R[2][1] * R[2][1])
    c0 = (R[0][0] / n0, R[1][0] / n0, R[2][0] / n0)
    c1 = (R[0][1] / n1, R[1][1] / n1, R[2][1] / n1)
    c2 = _cross(c0, c1)
    c0 = _cross(c1, c2)
    Rn = ((c0[0], c1[0], c2[0]), (c0[1], c1[1], c2[1]), (c0[2], c1[2], c2[2]))
    tr = Rn[0][0] + Rn[1][1] + Rn[2][2]
    cos_value = (tr - 1.0) / 2.0
    if cos_value < -1.0 + _PREC2:  # near pi: from the largest of the quaternion's squared terms
        v0, v1, v2 = 2.0 * Rn[0][0] - tr + 1.0, 2.0 * Rn[1][1] - tr + 1.0, 2.0 * Rn[2][2] - tr + 1.0
        if v0 >= v1:
            i0, val = (0, v0) if v0 >= v2 else (2, v2)
        else:
            i0, val = (1, v1) if v1 >= v2 else (2, v2)
        theta, axis = _theta_axis(i0, val, Rn)
        return (theta * axis[0], theta * axis[1], theta * axis[2]), theta
    acos_expansion = math.sqrt(2.0 * (1.0 - cos_value) + _EPS * _EPS)
    if tr <= 3.0 - _PREC2:
        theta = math.acos(cos_value) if tr >= -1.0 + _PREC2 else math.pi - acos_expansion
    else:
        theta = acos_expansion
    a = _unskew(Rn)
    n2 = _dot(a, a)
    t = theta / math.sin(theta) if theta >= _PREC2 else 1.0 + n2 / 6.0 + n2 * n2 * 3.0 / 40.0
    return (t * a[0], t * a[1], t * a[2]), theta


@numba.njit(cache=True)
def _jlog3(theta, w):
    """(3, 3) right Jacobian of log3 at the rotation vector w, of angle theta [rad].

    .. math:: J = \\frac{\\theta \\sin\\theta}{2 (1 - \\cos\\theta)} I + \\tfrac12 [w]_\\times
                  + \\Big(\\frac1{\\theta^2} - \\frac{\\sin\\theta}{2 \\theta (1 - \\cos\\theta)}\\Big) w w^T

    with Taylor series below the 3rd-order threshold (pinocchio's ``Jlog3``;
    Chirikjian, *Stochastic Models, Information Theory, and Lie Groups*,
    vol. 2, 2012, chapter 10; chapter from memory).
    """
    if theta < _PREC3:
        alpha = 1.0 / 12.0 + theta * theta / 720.0
        diag = 0.5 * (2.0 - theta * theta / 6.0)
    else:
        st, ct = math.sin(theta), math.cos(theta)
        st_1mct = st / (1.0 - ct)
        alpha = 1.0 / (theta * theta) - st_1mct / (2.0 * theta)
        diag = 0.5 * (theta * st_1mct)
    aw = (alpha * w[0], alpha * w[1], alpha * w[2])
    h = (0.5 * w[0], 0.5 * w[1], 0.5 * w[2])
    return ((aw[0] * w[0] + diag, aw[0] * w[1] - h[2], aw[0] * w[2] + h[1]),
            (aw[1] * w[0] + h[2], aw[1] * w[1] + diag, aw[1] * w[2] - h[0]),
            (aw[2] * w[0] - h[1], aw[2] * w[1] + h[0], aw[2] * w[2] + diag))


@numba.njit(cache=True)
def _log6_jlog6(R, p):
    """log6 of the placement (R, p) and the blocks of its right Jacobian Jlog6.

    Returns the linear and angular parts of e [m, rad] and the blocks A, B of

    .. math:: J_{\\log} = \\begin{bmatrix} A & B \\\\ 0 & A \\end{bmatrix}, \\qquad
              A = J_{\\log 3}(w), \\qquad
              e = \\begin{bmatrix} \\alpha p - \\tfrac12 w \\times p + \\beta (w \\cdot p) w \\\\ w \\end{bmatrix}

    with :math:`\\alpha = \\theta \\sin\\theta / (2 (1 - \\cos\\theta))`,
    :math:`\\beta = 1/\\theta^2 - \\sin\\theta / (2 \\theta (1 - \\cos\\theta))`
    and B from the derivative of :math:`\\beta` (Barfoot, *State Estimation
    for Robotics*, 2017, section 7.1.5, the SE(3) Jacobians; section from memory), with the branches
    and thresholds of pinocchio's ``log6`` and ``Jlog6``.  R is a tuple of rows, p a 3-tuple.
    """
    w, theta = _log3(R)
    st, ct = math.sin(theta), math.cos(theta)
    a = _unskew(R)
    t2 = _dot(a, a)
    if R[0][0] + R[1][1] + R[2][2] >= 3.0 - _PREC2:
        alpha = 1.0 - t2 / 12.0 - t2 * t2 / 720.0
        beta = 1.0 / 12.0 + t2 / 720.0
    else:
        alpha = theta * st / (2.0 * (1.0 - ct))
        beta = 1.0 / (theta * theta) - st / (2.0 * theta * (1.0 - ct))
    wp = _cross(w, p)
    wTp = _dot(w, p)
    bw = beta * wTp
    lin = (alpha * p[0] - 0.5 * wp[0] + bw * w[0], alpha * p[1] - 0.5 * wp[1] + bw * w[1],
           alpha * p[2] - 0.5 * wp[2] + bw * w[2])
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
    s1 = beta_dot_over_theta * wTp
    s2 = th2 * beta_dot_over_theta + 2.0 * beta_j
    v3 = (s1 * w[0] - s2 * p[0], s1 * w[1] - s2 * p[1], s1 * w[2] - s2 * p[2])
    bj = (beta_j * w[0], beta_j * w[1], beta_j * w[2])
    dg = wTp * beta_j
    h = (0.5 * p[0], 0.5 * p[1], 0.5 * p[2])
    C = ((v3[0] * w[0] + bj[0] * p[0] + dg, v3[0] * w[1] + bj[0] * p[1] - h[2], v3[0] * w[2] + bj[0] * p[2] + h[1]),
         (v3[1] * w[0] + bj[1] * p[0] + h[2], v3[1] * w[1] + bj[1] * p[1] + dg, v3[1] * w[2] + bj[1] * p[2] - h[0]),
         (v3[2] * w[0] + bj[2] * p[0] - h[1], v3[2] * w[1] + bj[2] * p[1] + h[0], v3[2] * w[2] + bj[2] * p[2] + dg))
    return lin, w, A, _mul33(C, A)


@numba.njit(cache=True)
def _cuff_law(R, p, v_a, v_b, k, d, w_a, w_b, e_out, ke_out):
    """The cuff law of :mod:`models.cuffs` for one cuff, compiled; writes w_a, w_b, e and K e (6,) each.

    With the placement :math:`{}^A M_B = (R, p)` of B in A (R a tuple of
    rows, p a 3-tuple), the frames' own velocities :math:`v_A, v_B` (6,) and
    the diagonals k, d (6,) of K and D:

    .. math::
        e = \\log_6({}^A M_B), \\quad \\nu_{B/A} = v_B - {}^B X_A v_A, \\quad
        \\dot e = J_{\\log} \\nu_{B/A}, \\quad
        w_B = -J_{\\log}^T (K e + D \\dot e), \\quad w_A = -{}^A X_B^{*} w_B

    (Bullo & Murray 1999, section 3; :func:`models.cuffs.cuff_wrench` is the
    reference implementation this one must match to rounding).
    """
    e_lin, e_ang, A, B = _log6_jlog6(R, p)
    # relative twist in B: v_B minus (R^T (v - p x omega), R^T omega) of v_A
    pw = _cross(p, (v_a[3], v_a[4], v_a[5]))
    la = _mul33t_vec(R, (v_a[0] - pw[0], v_a[1] - pw[1], v_a[2] - pw[2]))
    aa = _mul33t_vec(R, (v_a[3], v_a[4], v_a[5]))
    nu_lin = (v_b[0] - la[0], v_b[1] - la[1], v_b[2] - la[2])
    nu_ang = (v_b[3] - aa[0], v_b[4] - aa[1], v_b[5] - aa[2])
    for i in range(3):
        e_out[i], e_out[3 + i] = e_lin[i], e_ang[i]
        ke_out[i], ke_out[3 + i] = k[i] * e_lin[i], k[3 + i] * e_ang[i]
    # y = K e + D e_dot, e_dot = J nu with J = [[A, B], [0, A]]
    a_lin, b_ang, a_ang = _mul33_vec(A, nu_lin), _mul33_vec(B, nu_ang), _mul33_vec(A, nu_ang)
    y_lin = (ke_out[0] + d[0] * (a_lin[0] + b_ang[0]), ke_out[1] + d[1] * (a_lin[1] + b_ang[1]),
             ke_out[2] + d[2] * (a_lin[2] + b_ang[2]))
    y_ang = (ke_out[3] + d[3] * a_ang[0], ke_out[4] + d[4] * a_ang[1], ke_out[5] + d[5] * a_ang[2])
    # w_B = -J^T y
    f_b = _mul33t_vec(A, y_lin)
    t_b1, t_b2 = _mul33t_vec(B, y_lin), _mul33t_vec(A, y_ang)
    for i in range(3):
        w_b[i] = -f_b[i]
        w_b[3 + i] = -(t_b1[i] + t_b2[i])
    # w_A = -(R f, R tau + p x R f) of w_B
    rf = _mul33_vec(R, (w_b[0], w_b[1], w_b[2]))
    rt = _mul33_vec(R, (w_b[3], w_b[4], w_b[5]))
    prf = _cross(p, rf)
    for i in range(3):
        w_a[i] = -rf[i]
        w_a[3 + i] = -(rt[i] + prf[i])


@numba.njit(cache=True)
def _se3(M):
    """(R as a tuple of rows, p) of an SE3 stored as pinocchio stores it (12,): R column by column, then p."""
    return ((M[0], M[3], M[6]), (M[1], M[4], M[7]), (M[2], M[5], M[8])), (M[9], M[10], M[11])


@numba.njit(cache=True)
def _placement(M, P):
    """World placement (R, p) of a frame: the joint placement M times the frame placement P in it (both (12,)).

    :math:`R = R_M R_P`, :math:`p = R_M p_P + p_M`.
    """
    R_m, p_m = _se3(M)
    R_p, p_p = _se3(P)
    rp = _mul33_vec(R_m, p_p)
    return _mul33(R_m, R_p), (rp[0] + p_m[0], rp[1] + p_m[1], rp[2] + p_m[2])


@numba.njit(cache=True)
def _frame_twist(P, v, out):
    """The frame's own (LOCAL) twist of the joint twist v (6,): :math:`(R^T (v - p \\times \\omega), R^T \\omega)`.

    P (12,) is the frame's placement in its joint, stored as in :func:`_se3`; writes out (6,).
    """
    R, p = _se3(P)
    om = (v[3], v[4], v[5])
    pw = _cross(p, om)
    lin = _mul33t_vec(R, (v[0] - pw[0], v[1] - pw[1], v[2] - pw[2]))
    ang = _mul33t_vec(R, om)
    for i in range(3):
        out[i], out[3 + i] = lin[i], ang[i]


@numba.njit(cache=True)
def _add_joint_wrench(P, w, f):
    """Add to the joint-frame wrench f (6,) the frame wrench w (6,): :math:`(R f_w, R \\tau_w + p \\times R f_w)`."""
    R, p = _se3(P)
    rf = _mul33_vec(R, (w[0], w[1], w[2]))
    rt = _mul33_vec(R, (w[3], w[4], w[5]))
    prf = _cross(p, rf)
    for i in range(3):
        f[i] += rf[i]
        f[3 + i] += rt[i] + prf[i]


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
        R = ((R_a[0][0] * R_b[0][0] + R_a[1][0] * R_b[1][0] + R_a[2][0] * R_b[2][0],  # R_a^T R_b
              R_a[0][0] * R_b[0][1] + R_a[1][0] * R_b[1][1] + R_a[2][0] * R_b[2][1],
              R_a[0][0] * R_b[0][2] + R_a[1][0] * R_b[1][2] + R_a[2][0] * R_b[2][2]),
             (R_a[0][1] * R_b[0][0] + R_a[1][1] * R_b[1][0] + R_a[2][1] * R_b[2][0],
              R_a[0][1] * R_b[0][1] + R_a[1][1] * R_b[1][1] + R_a[2][1] * R_b[2][1],
              R_a[0][1] * R_b[0][2] + R_a[1][1] * R_b[1][2] + R_a[2][1] * R_b[2][2]),
             (R_a[0][2] * R_b[0][0] + R_a[1][2] * R_b[1][0] + R_a[2][2] * R_b[2][0],
              R_a[0][2] * R_b[0][1] + R_a[1][2] * R_b[1][1] + R_a[2][2] * R_b[2][1],
              R_a[0][2] * R_b[0][2] + R_a[1][2] * R_b[1][2] + R_a[2][2] * R_b[2][2]))
        p = _mul33t_vec(R_a, (p_b[0] - p_a[0], p_b[1] - p_a[1], p_b[2] - p_a[2]))
        _frame_twist(place[0, c], v_e[joints[0, c]], terms[c, 12:18])
        _frame_twist(place[1, c], v_h[joints[1, c]], terms[c, 18:24])
        _cuff_law(R, p, terms[c, 12:18], terms[c, 18:24], kd[0, c], kd[1, c], w_a[c], w_b[c],
                  terms[c, 0:6], terms[c, 6:12])
        fw = _mul33_vec(R_b, (w_b[c, 0], w_b[c, 1], w_b[c, 2]))
        for i in range(3):
            force_world[c, i] = fw[i]
        _add_joint_wrench(place[0, c], w_a[c], fext_e[joints[0, c]])
        _add_joint_wrench(place[1, c], w_b[c], fext_h[joints[1, c]])


@numba.njit(cache=True)
def _any_nonfinite(x):
    for i in range(x.shape[0]):
        if not math.isfinite(x[i]):
            return True
    return False


@numba.njit(cache=True)
def _first_nonfinite(a, b, c, d):
    """Index (0-3) of the first of the four vectors that holds a NaN or an infinity, or -1."""
    if _any_nonfinite(a):
        return 0
    if _any_nonfinite(b):
        return 1
    if _any_nonfinite(c):
        return 2
    return 3 if _any_nonfinite(d) else -1


@numba.njit(cache=True)
def _first_nonfinite_pair(q, v, nq_e, nv_e):
    """:func:`_first_nonfinite` of ``q[:nq_e], v[:nv_e], q[nq_e:], v[nv_e:]`` (the pair model's state)."""
    return _first_nonfinite(q[:nq_e], v[:nv_e], q[nq_e:], v[nv_e:])


@numba.njit(cache=True)
def _friction_torque(tau, v, damping, coulomb, smoothing, out):
    """Joint torque plus friction, :math:`\\tau - b v - \\tau_c \\tanh(v / v_s)` (PlantParams), into out.

    On the first ``len(out)`` joints (v may hold more: the pair model's velocity, the robot's first).
    """
    for i in range(out.shape[0]):
        out[i] = tau[i] + (-damping[i] * v[i] - coulomb[i] * math.tanh(v[i] / smoothing))


@numba.njit(cache=True)
def _euler_velocity(a, v, h, vh):
    """The semi-implicit Euler velocity :math:`v_+ = v + h a` into ``a`` (in place), and ``vh`` = :math:`h v_+`.

    The operations of ``a *= h; a += v; vh = a * h`` in numpy, in that order (the module docstring's scheme).
    """
    for i in range(a.shape[0]):
        a[i] = a[i] * h + v[i]
        vh[i] = a[i] * h


#: Values per cuff in the plant's output array: wrench on the robot (6), on the human (6), terms (24), force (3).
_CUFF_OUT_WIDTH = 39


@numba.njit(cache=True)
def _cuff_blocks(const, out, nc):
    """The named arrays inside the plant's two flat per-cuff arrays, as C-ordered views (no copy).

    ``const`` (36 nc,): the placements (2, nc, 12) then the stiffness and damping diagonals (2, nc, 6) of
    :func:`_cuff_kernel`.  ``out`` (39 nc,): the wrenches on the robot and on the human (nc, 6) each, the
    terms (nc, 24) and the world forces (nc, 3).  Passing one flat array instead of four costs numba's
    dispatcher less per call (each array argument is typed and unboxed on every call).
    """
    place = const[:24 * nc].reshape((2, nc, 12))
    kd = const[24 * nc:36 * nc].reshape((2, nc, 6))
    return (place, kd, out[:6 * nc].reshape((nc, 6)), out[6 * nc:12 * nc].reshape((nc, 6)),
            out[12 * nc:36 * nc].reshape((nc, 24)), out[36 * nc:39 * nc].reshape((nc, 3)))


@numba.njit(cache=True)
def _pair_cuffs(oMi, vel, fext, joints, const, out):
    """:func:`_cuff_kernel` on the pair model (one Data: both arms' placements, velocities and forces are one),
    with the per-cuff arrays packed as :func:`_cuff_blocks` says."""
    place, kd, w_a, w_b, terms, force_world = _cuff_blocks(const, out, joints.shape[1])
    _cuff_kernel(oMi, oMi, vel, vel, joints, place, kd, w_a, w_b, terms, force_world, fext, fext)


@numba.njit(cache=True)
def _substep_inputs(refresh, oMi, vel, fext, joints, const, out, tau_u, alpha, lagged, v, coeffs, smoothing,
                    friction, tau_out):
    """Everything aba needs for one substep of the pair model that is not pinocchio's, in one call.

    In order: with ``lagged``, the actuators' first-order lag in place on the applied torque ``tau_u[0]``
    toward the held command ``tau_u[1]``, :math:`\\tau \\mathrel{+}= \\alpha (u - \\tau)` (the arithmetic of
    :func:`sim.physics.actuators._lag`, :class:`sim.physics.actuators.TorqueSourceActuators`); with ``refresh``,
    every cuff's wrenches into the joint-frame forces (:func:`_pair_cuffs`, its arguments from ``oMi`` to ``out``, on
    kinematics updated just before); then the robot's joint torque plus friction into ``tau_out``
    (:func:`_friction_torque` with the damping ``coeffs[0]`` and the Coulomb torques ``coeffs[1]``), or
    ``tau_u[0]`` as it is without ``friction``.  The same operations in the same order as the separate
    calls, so the same numbers to the bit (tests/test_plant_advance.py).
    """
    tau = tau_u[0]
    if lagged:
        u = tau_u[1]
        for i in range(tau.shape[0]):
            tau[i] += alpha * (u[i] - tau[i])
    if refresh:
        _pair_cuffs(oMi, vel, fext, joints, const, out)
    if friction:
        _friction_torque(tau, v, coeffs[0], coeffs[1], smoothing, tau_out)
    else:
        for i in range(tau_out.shape[0]):
            tau_out[i] = tau[i]


def _pair_model(exo: pin.Model, human: pin.Model) -> pin.Model | None:
    """One model of both arms, the human's tree appended at the universe (``pinocchio.appendModel``).

    The robot's joints come first, then the human's; the armature, which appendModel leaves at zero, is
    the two arms' own.  The articulated-body algorithm's passes run joint by joint over each tree
    (Featherstone 2008, ch. 7), so the pair's forward kinematics, aba and integrate do the two arms'
    arithmetic.  Checked here on one seeded state: if the pair's accelerations and configuration update
    differ by a bit from the two arms' (another pinocchio), returns None and the plant steps two models.
    """
    pair = pin.appendModel(exo, human, 0, pin.SE3.Identity())
    if not (pair.nq == exo.nq + human.nq and pair.nv == exo.nv + human.nv
            and pair.njoints == exo.njoints + human.njoints - 1):
        return None
    pair.armature[:] = np.concatenate((np.asarray(exo.armature), np.asarray(human.armature)))
    rng = np.random.default_rng(0)
    parts = []
    for model in (exo, human):
        q = pin.normalize(model, rng.uniform(-1.0, 1.0, size=model.nq))
        v, tau = rng.normal(size=model.nv), rng.normal(size=model.nv)
        f = pin.StdVec_Force()
        for _ in range(model.njoints):
            f.append(pin.Force(rng.normal(size=6)))
        parts.append((model, q, v, tau, f))
    (_, qe, ve, te, fe), (_, qh, vh, th, fh) = parts
    f_pair = pin.StdVec_Force()
    for f in list(fe) + list(fh)[1:]:
        f_pair.append(f)
    q, v = np.concatenate((qe, qh)), np.concatenate((ve, vh))
    a_two = np.concatenate([pin.aba(m, m.createData(), q_, v_, t_, f_) for m, q_, v_, t_, f_ in parts])
    a_pair = pin.aba(pair, pair.createData(), q, v, np.concatenate((te, th)), f_pair)
    q_two = np.concatenate([pin.integrate(m, q_, v_) for m, q_, v_, _, _ in parts])
    same = np.array_equal(a_pair, a_two) and np.array_equal(pin.integrate(pair, q, v), q_two)
    return pair if same else None


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
