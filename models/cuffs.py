"""The cuff: a 6-DOF linear spring-damper between a robot frame and a human frame.

A cuff joins frame A (on an exoskeleton link) to frame B (on a human
segment).  With the relative pose :math:`{}^A M_B` and its logarithm
:math:`e = \\log_6({}^A M_B) \\in \\mathbb R^6` (linear part first, as in
pinocchio; the same coordinates in A and in B), the stored energy is

.. math:: U = \\tfrac12 e^T K e,

and the wrench on B, in B's frame, is the exact negative gradient plus a
damper on :math:`\\dot e`:

.. math::
    w_B = -J_{\\log}^T (K e + D \\dot e), \\qquad \\dot e = J_{\\log} \\nu_{B/A}

with :math:`J_{\\log}` = ``pinocchio.Jlog6`` (the derivative of log6 under a
right perturbation of B) and :math:`\\nu_{B/A} = v_B - {}^B X_A v_A` the
relative twist in B.  The wrench on A is equal and opposite:
:math:`w_A = -{}^A X_B^{*} w_B`.  Being a gradient, the spring part is
conservative for any symmetric K; the damper only dissipates,
:math:`P = -\\dot e^T D \\dot e`.  (Lie-group spring: e.g. Bullo & Murray
1999, "Tracking for fully actuated mechanical systems: a geometric
framework", Automatica 35(1), section 3.)

K and D are diagonal in the cuff frame, whose z axis runs along the limb:
straps slide, so the cuff is soft along z.

References
----------
.. [Schiebl2025] J. Schiebl et al., *Sensors* 25(15):4605, 2025: measured
   stiffness of an upper-arm exoskeleton interface (cuff and soft tissue),
   median 2.1 N/mm along the arm, 4.5 N/mm across, 0.03 N m/deg about the
   long axis.
"""

from __future__ import annotations

from dataclasses import dataclass
from functools import cached_property

import numpy as np
import pinocchio as pin

from .checks import nonnegative, positive, vector

__all__ = ["CuffParams", "CuffWrench", "cuff_wrench", "cuff_wrenches", "cuff_energy", "cuff_energy_terms",
           "cuff_power_terms", "HAND_GRIP"]


def _triple(owner: str, field: str, value, strict: bool) -> tuple[float, float, float]:
    v = vector(owner, field, value, 3)
    check = positive if strict else nonnegative
    return tuple(check(owner, f"{field}[{i}]", x) for i, x in enumerate(v))


@dataclass(frozen=True)
class CuffParams:
    """Per-axis stiffness and damping of a cuff, in the cuff frame (z along the limb).

    Defaults: translational stiffness 4.5 N/mm across and 2.1 N/mm along the
    upper arm, rotational stiffness about the long axis 0.03 N m/deg =
    1.7 N m/rad (median values of Schiebl et al. 2025 [Schiebl2025]_).
    Rotational stiffness about the transverse axes is derived, not measured:
    a cuff of width w = 0.1 m resting on springs of 4.5 N/mm spread evenly
    along it gives k w^2 / 12 = 3.75 N m/rad
    (beam on an elastic foundation; common practice).  Damping is set for a
    damping ratio of 0.3 with a 2.0 kg, 0.015 / 0.015 / 0.003 kg m^2 segment,
    c = 2 zeta sqrt(k m) (common practice: zeta in 0.1-0.5).
    """

    stiffness_N_per_m: tuple[float, float, float] = (4500.0, 4500.0, 2100.0)
    rot_stiffness_Nm_per_rad: tuple[float, float, float] = (3.75, 3.75, 1.7)
    damping_N_s_per_m: tuple[float, float, float] = (56.9, 56.9, 38.9)
    rot_damping_Nm_s_per_rad: tuple[float, float, float] = (0.142, 0.142, 0.0428)

    def __post_init__(self) -> None:
        o = "CuffParams"
        for f in ("stiffness_N_per_m", "rot_stiffness_Nm_per_rad"):
            object.__setattr__(self, f, _triple(o, f, getattr(self, f), strict=True))
        for f in ("damping_N_s_per_m", "rot_damping_Nm_s_per_rad"):
            object.__setattr__(self, f, _triple(o, f, getattr(self, f), strict=False))

    @classmethod
    def with_damping_ratio(
        cls,
        damping_ratio: float,
        mass_kg: float,
        inertia_kg_m2: tuple[float, float, float],
        stiffness_N_per_m: tuple[float, float, float] = (4500.0, 4500.0, 2100.0),
        rot_stiffness_Nm_per_rad: tuple[float, float, float] = (3.75, 3.75, 1.7),
    ) -> CuffParams:
        """Damping :math:`c_i = 2 \\zeta \\sqrt{k_i m_i}` for each axis."""
        z = nonnegative("CuffParams", "damping_ratio", damping_ratio)
        m = positive("CuffParams", "mass_kg", mass_kg, "kg")
        inertia = _triple("CuffParams", "inertia_kg_m2", inertia_kg_m2, strict=True)
        k = _triple("CuffParams", "stiffness_N_per_m", stiffness_N_per_m, strict=True)
        kr = _triple("CuffParams", "rot_stiffness_Nm_per_rad", rot_stiffness_Nm_per_rad, strict=True)
        return cls(
            stiffness_N_per_m=k,
            rot_stiffness_Nm_per_rad=kr,
            damping_N_s_per_m=tuple(2.0 * z * np.sqrt(ki * m) for ki in k),
            rot_damping_Nm_s_per_rad=tuple(2.0 * z * np.sqrt(ki * ii) for ki, ii in zip(kr, inertia)),
        )

    @property
    def K(self) -> np.ndarray:
        """(6, 6) stiffness, [N/m] on the linear and [N m/rad] on the angular block."""
        return np.diag(self.k_diag)

    @property
    def D(self) -> np.ndarray:
        """(6, 6) damping, [N s/m] and [N m s/rad]."""
        return np.diag(self.d_diag)

    @cached_property
    def k_diag(self) -> np.ndarray:
        """(6,) diagonal of :attr:`K` (read-only)."""
        a = np.array(self.stiffness_N_per_m + self.rot_stiffness_Nm_per_rad)
        a.setflags(write=False)
        return a

    @cached_property
    def d_diag(self) -> np.ndarray:
        """(6,) diagonal of :attr:`D` (read-only)."""
        a = np.array(self.damping_N_s_per_m + self.rot_damping_Nm_s_per_rad)
        a.setflags(write=False)
        return a


#: The hand grip uses the same interface law (no separate measurement; common practice).
HAND_GRIP = CuffParams()


@dataclass(frozen=True)
class CuffWrench:
    """Result of :func:`cuff_wrench`.

    ``on_a`` and ``on_b`` are wrenches ``[f; tau]`` [N, N m] in the frames of A
    and B; ``error`` the pose error e (6,) [m, rad]; ``energy_J`` the spring
    energy; ``power_W`` the power the cuff draws from the two bodies
    (``-(w_A . v_A + w_B . v_B)``, >= 0 when it dissipates or stores energy).
    """

    on_a: np.ndarray
    on_b: np.ndarray
    error: np.ndarray
    energy_J: float
    power_W: float


def cuff_wrench(
    oMa: pin.SE3,
    oMb: pin.SE3,
    v_a: np.ndarray,
    v_b: np.ndarray,
    params: CuffParams,
) -> CuffWrench:
    """Wrenches of a cuff on its two frames (pure function; see the module docstring).

    Parameters
    ----------
    oMa, oMb : pinocchio.SE3
        World placements of the robot-side frame A and the human-side frame B.
    v_a, v_b : (6,) ndarray
        Spatial velocities ``[v; omega]`` of A and B in their own (LOCAL)
        frames [m/s, rad/s].
    params : CuffParams
        Stiffness and damping.
    """
    v_a = np.asarray(v_a, dtype=float)
    v_b = np.asarray(v_b, dtype=float)
    aMb = oMa.actInv(oMb)
    e = pin.log6(aMb).vector
    J = pin.Jlog6(aMb)
    e_dot = J @ (v_b - aMb.actInv(pin.Motion(v_a)).vector)
    ke = params.k_diag * e  # K and D are diagonal in the cuff frame
    w_b = -J.T @ (ke + params.d_diag * e_dot)
    w_a = -aMb.act(pin.Force(w_b)).vector
    power = -(float(w_a @ v_a) + float(w_b @ v_b))
    return CuffWrench(on_a=w_a, on_b=w_b, error=e, energy_J=0.5 * float(e @ ke), power_W=power)


def cuff_wrenches(
    aMb: list[pin.SE3],
    v_a: np.ndarray,
    v_b: np.ndarray,
    k_diag: np.ndarray,
    d_diag: np.ndarray,
) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """The law of :func:`cuff_wrench` for several cuffs at once (same equations, stacked arrays).

    Parameters
    ----------
    aMb : list of k pinocchio.SE3
        Placement of each cuff's frame B in its frame A.
    v_a, v_b : (k, 6) ndarray
        Spatial velocities of A and B in their own frames [m/s, rad/s].
    k_diag, d_diag : (k, 6) ndarray
        Diagonal stiffness and damping of each cuff (:attr:`CuffParams.k_diag`, ``d_diag``).

    Returns
    -------
    on_a, on_b : (k, 6) ndarray
        Wrenches ``[f; tau]`` on A (in A) and on B (in B) [N, N m].
    energy_J, power_W : (k,) ndarray
        Spring energy and power drawn from the bodies, as in :class:`CuffWrench`.
    """
    w_a, w_b, e, ke = _cuff_wrench_terms(aMb, v_a, v_b, k_diag, d_diag)
    return w_a, w_b, cuff_energy_terms(e, ke), cuff_power_terms(w_a, w_b, v_a, v_b)


def _cuff_wrench_terms(aMb, v_a, v_b, k_diag, d_diag):
    """Wrenches of :func:`cuff_wrenches` with the pose errors e and K e, (k, 6) each: energy and power left out."""
    k = len(aMb)
    e = np.empty((k, 6))
    J = np.empty((k, 6, 6))
    X_ba = np.empty((k, 6, 6))  # motion action of B<-A: b-frame twist of an a-frame twist
    for i, M in enumerate(aMb):
        e[i] = pin.log6(M).vector
        J[i] = pin.Jlog6(M)
        X_ba[i] = M.actionInverse
    v_rel = v_b - (X_ba @ v_a[:, :, None])[:, :, 0]
    e_dot = (J @ v_rel[:, :, None])[:, :, 0]
    ke = k_diag * e
    w_b = -(np.swapaxes(J, 1, 2) @ (ke + d_diag * e_dot)[:, :, None])[:, :, 0]
    # force action A<-B is the transpose of the motion action B<-A
    w_a = -(np.swapaxes(X_ba, 1, 2) @ w_b[:, :, None])[:, :, 0]
    return w_a, w_b, e, ke


def cuff_energy_terms(e, ke):
    """(k,) spring energy of each cuff [J], :math:`\\tfrac12 e^T K e`, from e and K e."""
    return 0.5 * np.einsum("ij,ij->i", e, ke)


def cuff_power_terms(w_a, w_b, v_a, v_b):
    """(k,) power each cuff draws from its bodies [W], :math:`-(w_A \\cdot v_A + w_B \\cdot v_B)`."""
    return -(np.einsum("ij,ij->i", w_a, v_a) + np.einsum("ij,ij->i", w_b, v_b))


def cuff_energy(oMa: pin.SE3, oMb: pin.SE3, params: CuffParams) -> float:
    """Spring energy :math:`\\tfrac12 e^T K e` [J] of a cuff at the given placements."""
    e = pin.log6(oMa.actInv(oMb)).vector
    return 0.5 * float(e @ (params.k_diag * e))
