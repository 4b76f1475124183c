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
"""

from __future__ import annotations

import dataclasses
import math
from dataclasses import dataclass
from typing import Literal

import numpy as np
import pinocchio as pin

from models._checks import in_range, nonnegative, positive
from models.arm import ArmModel
from models.coupling import Assembly
from models.cuffs import _cuff_energy_terms, _cuff_power_terms, _cuff_wrench_terms

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
        # joint and placement of each cuff's application frame, and its human-side placement
        self._exo_joint = [me.frames[c.exo_frame_id].parentJoint for c in self.cuffs]
        self._exo_place = [me.frames[c.exo_frame_id].placement for c in self.cuffs]
        self._hum_joint = [mh.frames[c.human_frame_id].parentJoint for c in self.cuffs]
        self._hum_place = [mh.frames[c.human_frame_id].placement * c.human_offset for c in self.cuffs]
        # constant per cuff: action matrices of the frame placements in their joints, stacked (k, 6, 6)
        nc = len(self.cuffs)
        self._exo_place_inv = np.array([P.toActionMatrixInverse() for P in self._exo_place]).reshape(nc, 6, 6)
        self._hum_place_inv = np.array([P.toActionMatrixInverse() for P in self._hum_place]).reshape(nc, 6, 6)
        self._exo_place_dual = np.array([P.toDualActionMatrix() for P in self._exo_place]).reshape(nc, 6, 6)
        self._hum_place_dual = np.array([P.toDualActionMatrix() for P in self._hum_place]).reshape(nc, 6, 6)
        self._k_diag = np.array([cp.k_diag for cp in self._cuff_params]).reshape(nc, 6)
        self._d_diag = np.array([cp.d_diag for cp in self._cuff_params]).reshape(nc, 6)
        # joints that carry a cuff, with the cuffs on each (their wrenches add up in the joint frame)
        self._exo_groups = [(j, [k for k in range(nc) if self._exo_joint[k] == j])
                            for j in sorted(set(self._exo_joint))]
        self._hum_groups = [(j, [k for k in range(nc) if self._hum_joint[k] == j])
                            for j in sorted(set(self._hum_joint))]
        self._fext_e = pin.StdVec_Force()
        self._fext_h = pin.StdVec_Force()
        for _ in range(me.njoints):
            self._fext_e.append(pin.Force.Zero())
        for _ in range(mh.njoints):
            self._fext_h.append(pin.Force.Zero())
        # live references into the Data: each joint placement and velocity of a cuff's parent joint, and the
        # vector of each external force that aba reads (fixed-size storage, so they stay valid)
        self._oMi_e = [self._de.oMi[j] for j in self._exo_joint]
        self._oMi_h = [self._dh.oMi[j] for j in self._hum_joint]
        self._v_je = [self._de.v[j].vector for j in self._exo_joint]
        self._v_jh = [self._dh.v[j].vector for j in self._hum_joint]
        self._fext_e_vec = [(self._fext_e[j].vector, ks) for j, ks in self._exo_groups]
        self._fext_h_vec = [(self._fext_h[j].vector, ks) for j, ks in self._hum_groups]
        self._v_j = self._v_je + self._v_jh  # robot side first, then human side: as in the stacks below
        self._place_inv = np.concatenate([self._exo_place_inv, self._hum_place_inv])
        self._place_dual = np.concatenate([self._exo_place_dual, self._hum_place_dual])
        self._damping = np.array(me.damping)  # constant: read once
        self._coulomb = np.array(me.friction)
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
        self._terms = None  # (oMb rotations, w_a, w_b, e, K e, v_a, v_b) of the last update, or None
        self._world_fresh, self._energy_J, self._power_W = True, 0.0, 0.0
        self._zero_e = np.zeros(me.nv)
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
            self._terms, self._world_fresh, self._energy_J, self._power_W = None, True, 0.0, 0.0
            return
        aMb, oMb_rot = [], []
        for oMi_e, P_e, oMi_h, P_h in zip(self._oMi_e, self._exo_place, self._oMi_h, self._hum_place):
            oMb = oMi_h * P_h
            aMb.append((oMi_e * P_e).actInv(oMb))
            oMb_rot.append(oMb.rotation)
        nc = len(aMb)
        v = (self._place_inv @ np.array(self._v_j)[:, :, None])[:, :, 0]  # each cuff frame's own (LOCAL) velocity
        v_a, v_b = v[:nc], v[nc:]
        w_a, w_b, e, ke = _cuff_wrench_terms(aMb, v_a, v_b, self._k_diag, self._d_diag)
        self.wrench_on_exo[:] = w_a
        self.wrench_on_human[:] = w_b
        self._terms = (oMb_rot, w_a, w_b, e, ke, v_a, v_b)
        self._world_fresh = self._energy_J = self._power_W = None
        # the same wrenches in the joint frames, where aba takes them
        fj = (self._place_dual @ np.concatenate((w_a, w_b))[:, :, None])[:, :, 0]
        self._fj_e, self._fj_h = fj[:nc], fj[nc:]

    @property
    def force_on_human_world(self) -> np.ndarray:
        """(n_cuffs, 3) per cuff, the force on the human in world axes [N] (of the last cuff update)."""
        if not self._world_fresh and self._terms is not None:
            oMb_rot, _, w_b = self._terms[:3]
            self._force_world[:] = (np.array(oMb_rot) @ w_b[:, :3, None])[:, :, 0]
        self._world_fresh = True
        return self._force_world

    @property
    def cuff_energy_J(self) -> float:
        """Spring energy of all cuffs [J] at the last cuff update (:func:`models.cuffs.cuff_wrenches`)."""
        if self._energy_J is None:
            _, _, _, e, ke, _, _ = self._terms
            self._energy_J = float(_cuff_energy_terms(e, ke).sum())
        return self._energy_J

    @property
    def cuff_power_W(self) -> float:
        """Power all cuffs draw from the two arms [W] at the last cuff update (:func:`models.cuffs.cuff_wrenches`)."""
        if self._power_W is None:
            _, w_a, w_b, _, _, v_a, v_b = self._terms
            self._power_W = float(_cuff_power_terms(w_a, w_b, v_a, v_b).sum())
        return self._power_W

    def hand_position(self, which: str) -> np.ndarray:
        """World position [m] of the hand point of ``"exo"`` or ``"human"`` (kinematics of the last update)."""
        self.update_cuffs()
        joint, offset = self._hand[which]
        return (self._de if which == "exo" else self._dh).oMi[joint].act(offset)

    def _friction(self) -> np.ndarray:
        if not self.params.exo_friction:
            return self._zero_e
        return -self._damping * self.v_exo - self._coulomb * np.tanh(self.v_exo / self.params.coulomb_smoothing_rad_s)

    # -- dynamics ----------------------------------------------------------------------
    def substep(self, tau_exo_Nm: np.ndarray, tau_human_Nm: np.ndarray, dt_s: float) -> None:
        """Advance both arms by ``dt_s`` with the given joint torques held constant."""
        self.update_cuffs()
        # only joints that carry a cuff ever hold an external force; the others stay zero
        for f, ks in self._fext_e_vec:  # written in place into the force vectors aba reads
            f[:] = self._fj_e[ks[0]] if len(ks) == 1 else self._fj_e[ks].sum(axis=0)
        for f, ks in self._fext_h_vec:
            f[:] = self._fj_h[ks[0]] if len(ks) == 1 else self._fj_h[ks].sum(axis=0)
        if self.has_exo:
            me = self.exo.model
            a = pin.aba(me, self._de, self.q_exo, self.v_exo, tau_exo_Nm + self._friction(), self._fext_e)
            self.v_exo = self.v_exo + dt_s * a
            self.q_exo = pin.integrate(me, self.q_exo, self.v_exo * dt_s)
            self._cuffs_fresh = False
        if self.has_human:
            mh = self.human.model
            a = pin.aba(mh, self._dh, self.q_human, self.v_human, tau_human_Nm, self._fext_h)
            self.v_human = self.v_human + dt_s * a
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
