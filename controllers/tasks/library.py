"""The task library: gravity, limits, virtual walls, transparency, damping, posture.

Every task writes rows in x = [q̈; τ] (see :mod:`controllers.tasks.base`).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
import pinocchio as pin

from models.checks import in_range, nonnegative, positive, vector
from models.errors import ParameterError

from . import _kernels
from ._common import TickState
from .base import Task

__all__ = [
    "GravityTorque", "JointPositionLimits", "JointVelocityLimits", "Transparency", "JointDamping", "Posture",
    "PlaneWall", "BoxWall", "SphereWall", "WallTask", "WallLaw",
]


def _q_part(state: TickState, rows: np.ndarray) -> np.ndarray:
    """Embed (m, nv) rows on q̈ into (m, 2 nv)."""
    A = np.zeros((rows.shape[0], 2 * state.nv))
    A[:, : state.nv] = rows
    return A


def _constant(A: np.ndarray) -> np.ndarray:
    """``A`` made read-only, to be returned every tick (rows that do not depend on the state)."""
    A.setflags(write=False)
    return A


def _limit_rows(nv: int) -> np.ndarray:
    r"""(2 nv, 2 nv) rows :math:`[I\; 0; -I\; 0]`: upper then lower bounds on q̈ (read-only)."""
    C = np.zeros((2 * nv, 2 * nv))
    C[:nv, :nv] = np.eye(nv)
    C[nv:, :nv] = -np.eye(nv)
    return _constant(C)


class GravityTorque(Task):
    """Gravity compensation as a torque task: :math:`\\tau = g(q)` (model feed-forward)."""

    name, kind = "gravity", "eq"

    def __init__(self, weight: float = 1.0) -> None:
        self.weight = positive("GravityTorque", "weight", weight)

    def bind(self, state: TickState) -> None:
        A = np.zeros((state.nv, 2 * state.nv))
        A[:, state.nv:] = np.eye(state.nv)
        self._A = _constant(A)

    def rows(self, state: TickState):
        return self._A, state.g.copy()

    def _program_entry(self, state: TickState):
        return _kernels.GRAVITY, [], None


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
        self.weight = positive("JointPositionLimits", "weight", weight)

    def bind(self, state: TickState) -> None:
        self.lo, self.hi = state.arm.position_limits()
        self._C = _limit_rows(state.nv)
        # the bounds of both sides, q_max - m and -(q_min + m): the remaining distances are upper - q and lower + q
        self._upper, self._lower = self.hi - self.margin, -(self.lo + self.margin)

    def rows(self, state: TickState):
        return self._C, _kernels.position_limit_bounds(state.q, state.dq, self._upper, self._lower, 2.0 * self.a,
                                                       state.dt_s)

    def _program_entry(self, state: TickState):
        return _kernels.POSITION_LIMITS, [*self._upper, *self._lower, 2.0 * self.a], None


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
        return self._C, _kernels.velocity_limit_bounds(state.dq, self.vmax, state.dt_s)

    def _program_entry(self, state: TickState):
        return _kernels.VELOCITY_LIMITS, [*self.vmax], None


class Transparency(Task):
    """Force-feedback transparency normalised by the mass matrix.

    The robot should move under the wearer's measured cuff wrenches as if its
    inertia were a fraction :math:`\\alpha = 1 - c` of the real one, gravity
    being compensated:

    .. math:: \\alpha M(q)\\,\\ddot q = \\sum_c J_c^T w_c

    With the dynamics :math:`M\\ddot q + h = \\tau + \\sum_c J_c^T w_c` this is
    the torque :math:`\\tau = h + \\tfrac{1-\\alpha}{\\alpha} \\sum_c J_c^T w_c`:
    force feedback whose gain, expressed through M, is the same in every
    posture and for every wearer (the joint-space form of the operational-space
    normalisation of Khatib 1987; REFERENCES.md section 12).
    ``inertia_compensation`` c = 0.5 halves the felt inertia.
    """

    name, kind = "transparency", "eq"

    def __init__(self, inertia_compensation: float = 0.5, weight: float = 1.0) -> None:
        self.c = in_range("Transparency", "inertia_compensation", inertia_compensation, 0.0, 0.9)
        self.weight = positive("Transparency", "weight", weight)

    def rows(self, state: TickState):
        return _q_part(state, (1.0 - self.c) * state.M), state.cuff_force.copy()

    def _program_entry(self, state: TickState):
        return _kernels.TRANSPARENCY, [1.0 - self.c], None


class JointDamping(Task):
    """Joint damping on acceleration level: :math:`\\ddot q = -\\dot q / T_d` (time constant ``time_constant_s``)."""

    name, kind = "damping", "eq"

    def __init__(self, time_constant_s: float = 0.2, weight: float = 1e-3) -> None:
        self.T = positive("JointDamping", "time_constant_s", time_constant_s, "s")
        self.weight = positive("JointDamping", "weight", weight)

    def bind(self, state: TickState) -> None:
        self._A = _constant(_q_part(state, np.eye(state.nv)))

    def rows(self, state: TickState):
        return self._A, -state.dq / self.T

    def _program_entry(self, state: TickState):
        return _kernels.DAMPING, [self.T], None


class Posture(Task):
    """Joint-space PD towards a posture: :math:`\\ddot q = \\omega^2 (q^* - q) - 2\\zeta\\omega \\dot q`."""

    name, kind = "posture", "eq"

    def __init__(self, posture_rad, frequency_Hz: float = 1.0, damping_ratio: float = 1.0, weight: float = 1e-3):
        self.q_ref = np.array(posture_rad, dtype=float)
        self.w = 2 * math.pi * positive("Posture", "frequency_Hz", frequency_Hz, "Hz")
        self.z = nonnegative("Posture", "damping_ratio", damping_ratio)
        self.weight = positive("Posture", "weight", weight)

    def bind(self, state: TickState) -> None:
        if self.q_ref.shape != (state.nv,):
            raise ParameterError(f"Posture.posture_rad must have {state.nv} entries, got {self.q_ref.shape}")
        self._A = _constant(_q_part(state, np.eye(state.nv)))

    def rows(self, state: TickState):
        b = self.w**2 * pin.difference(state.model, state.q, self.q_ref) - 2 * self.z * self.w * state.dq
        return self._A, b

    def _program_entry(self, state: TickState):
        # a program writes pinocchio.difference(q, q*) as q* - q: only on a configuration space that is a vector
        # space (nq = nv), checked here at the neutral configuration
        q0 = pin.neutral(state.model)
        if state.model.nq != state.model.nv or not np.array_equal(pin.difference(state.model, q0, self.q_ref),
                                                                  self.q_ref - q0):
            return None
        return _kernels.POSTURE, [self.w**2, 2 * self.z * self.w, *self.q_ref], None


# -- virtual walls -------------------------------------------------------------------------
def _point(p) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """``p`` as the (3,) float64 array the compiled shape functions take, and their output arrays."""
    p = np.ascontiguousarray(p, dtype=float)
    if p.shape != (3,):
        raise ParameterError(f"a wall's point must have 3 entries, got shape {p.shape}")
    return p, np.empty((6, 3)), np.empty(6)


def _faces(shape_function, *args) -> list[tuple[np.ndarray, float]]:
    """The faces a compiled shape function finds (its last three arguments from :func:`_point`), as
    (normal into the wall, penetration [m])."""
    k = shape_function(*args)
    normals, pens = args[-2], args[-1]
    return [(normals[i], float(pens[i])) for i in range(k)]


@dataclass(frozen=True)
class WallLaw:
    """Spring-damper of a virtual wall: stiffness [N/m], damping [N s/m]."""

    stiffness_N_per_m: float = 1000.0
    damping_N_s_per_m: float = 10.0

    def __post_init__(self) -> None:
        object.__setattr__(self, "stiffness_N_per_m",
                           positive("WallLaw", "stiffness_N_per_m", self.stiffness_N_per_m, "N/m"))
        object.__setattr__(self, "damping_N_s_per_m",
                           nonnegative("WallLaw", "damping_N_s_per_m", self.damping_N_s_per_m, "N s/m"))


class WallTask(Task):
    """Shared one-sided wall law on a frame (the hand point by default).

    For each touched face with unit normal n pointing into the wall and
    penetration p > 0, one row makes the frame move along n as a mass
    :math:`m_n` pushed by the wearer's force and held back by the wall:

    .. math::
        m_n\\, n^T (J \\ddot q + \\dot J \\dot q) = n^T f_{hand} - K p - B\\, n^T \\dot x

    with :math:`m_n = \\alpha / (n^T J M^{-1} J^T n)` the robot's own
    operational-space mass along n (Khatib 1987) scaled like the
    transparency task.  In quasi-static contact the wearer then feels
    :math:`K p + B \\dot p`: the commanded spring-damper.  ``f_hand`` is the
    wrench measured by the hand cuff sensor, rotated to the world.

    The wearer's hand sits ahead of the robot's by the cuff's deflection.  With
    ``cuff_stiffness_N_per_m`` (the sensor-frame translational stiffness of the
    hand cuff) the penetration is taken at the estimated human hand point,
    :math:`p = n^T(x + R K_c^{-1} f - x_0)`, so that the wearer feels K
    against their own penetration; the robot then renders the series
    stiffness :math:`K/(1 - K/k_c)`, which bounds K below the cuff stiffness
    :math:`k_c` along n (documented maximum: K <= k_c / 2).
    """

    kind = "eq"

    def __init__(self, law: WallLaw, frame: str, sensor: str, inertia_compensation: float, weight: float,
                 cuff_stiffness_N_per_m=None) -> None:
        self.law = law if isinstance(law, WallLaw) else WallLaw(*law)
        self.frame, self.sensor = frame, sensor
        self.cuff_compliance = None
        if cuff_stiffness_N_per_m is not None:
            k = np.array(vector(type(self).__name__, "cuff_stiffness_N_per_m", cuff_stiffness_N_per_m, 3))
            if np.any(k <= 0):
                raise ParameterError(f"{type(self).__name__}.cuff_stiffness_N_per_m must be > 0, got {k}")
            self.cuff_compliance = 1.0 / k
        self.alpha = 1.0 - in_range(type(self).__name__, "inertia_compensation", inertia_compensation, 0.0, 0.9)
        self.weight = positive(type(self).__name__, "weight", weight)

    def bind(self, state: TickState) -> None:
        self.fid = state.arm.frame_id(self.frame)
        if self.sensor not in state.cuff_ids:
            raise ParameterError(
                f"{self.name}: no cuff sensor named {self.sensor!r}; sensors are {sorted(state.cuff_ids)}")
        self.sid = state.cuff_ids[self.sensor]

    def faces(self, p: np.ndarray) -> list[tuple[np.ndarray, float]]:
        """(normal into the wall, penetration [m]) of every touched face at position p."""
        raise NotImplementedError

    def _shape(self) -> list[float]:
        """The shape's code and parameters in a program (:func:`controllers.tasks._kernels.fill_program`)."""
        raise NotImplementedError

    def _program_entry(self, state: TickState):
        law, comp = self.law, self.cuff_compliance
        return (_kernels.WALL, [self.alpha, law.stiffness_N_per_m, law.damping_N_s_per_m, float(comp is not None),
                                *(comp if comp is not None else (0.0, 0.0, 0.0)), *self._shape()],
                (self.fid, self.sid, self.sensor))

    def rows(self, state: TickState):
        w = state.measurement.cuff_wrench[self.sensor]
        R = state.rotation(self.sid)
        p = state.position(self.fid)
        if self.cuff_compliance is not None:
            p = _kernels.hand_point(p, R, w, self.cuff_compliance)  # the wearer's hand point
        touched = self.faces(p)
        if not touched:
            return None
        normals = np.array([n for n, _ in touched], dtype=float).reshape(-1, 3)
        pens = np.array([pen for _, pen in touched], dtype=float)
        # per face: the row n^T J (the wall-normal speed is n^T J q' and 1 / m_n = n^T J M^-1 J^T n / alpha)
        return _kernels.wall_rows(normals, pens, R, w, state.jacobian(self.fid), state.drift(self.fid), state.Minv,
                                  state.dq, self.alpha, self.law.stiffness_N_per_m, self.law.damping_N_s_per_m)


class PlaneWall(WallTask):
    """Half-space wall: the frame may not go beyond the plane through ``point_m`` with normal ``normal``.

    ``normal`` points into the wall; penetration :math:`p = n^T (x - x_0)`.
    """

    name = "wall_plane"

    def __init__(self, point_m, normal, law: WallLaw = WallLaw(), *, frame: str = "exo_hand_point",
                 sensor: str = "hand", inertia_compensation: float = 0.5, weight: float = 1.0,
                 cuff_stiffness_N_per_m=None) -> None:
        super().__init__(law, frame, sensor, inertia_compensation, weight, cuff_stiffness_N_per_m)
        self.x0 = np.array(vector("PlaneWall", "point_m", point_m, 3))
        n = np.array(vector("PlaneWall", "normal", normal, 3))
        if not np.linalg.norm(n) > 0:
            raise ParameterError("PlaneWall.normal must be non-zero")
        self.n = n / np.linalg.norm(n)

    def faces(self, p):
        return _faces(_kernels.plane_faces, self.n, self.x0, *_point(p))

    def _shape(self):
        return [_kernels.PLANE, *self.n, *self.x0]


class BoxWall(WallTask):
    """Keep the frame inside an axis-aligned box ``[lower_m, upper_m]`` (world frame)."""

    name = "wall_box"

    def __init__(self, lower_m, upper_m, law: WallLaw = WallLaw(), *, frame: str = "exo_hand_point",
                 sensor: str = "hand", inertia_compensation: float = 0.5, weight: float = 1.0,
                 cuff_stiffness_N_per_m=None) -> None:
        super().__init__(law, frame, sensor, inertia_compensation, weight, cuff_stiffness_N_per_m)
        self.lo = np.array(vector("BoxWall", "lower_m", lower_m, 3))
        self.hi = np.array(vector("BoxWall", "upper_m", upper_m, 3))
        if not np.all(self.lo < self.hi):
            raise ParameterError(f"BoxWall: lower_m {self.lo} must be below upper_m {self.hi} on every axis")

    def faces(self, p):
        return _faces(_kernels.box_faces, self.lo, self.hi, *_point(p))

    def _shape(self):
        return [_kernels.BOX, *self.lo, *self.hi]


class SphereWall(WallTask):
    """Keep the frame out of (``inside=False``) or inside (``inside=True``) a sphere."""

    name = "wall_sphere"

    def __init__(self, center_m, radius_m: float, law: WallLaw = WallLaw(), *, inside: bool = False,
                 frame: str = "exo_hand_point", sensor: str = "hand", inertia_compensation: float = 0.5,
                 weight: float = 1.0, cuff_stiffness_N_per_m=None) -> None:
        super().__init__(law, frame, sensor, inertia_compensation, weight, cuff_stiffness_N_per_m)
        self.c = np.array(vector("SphereWall", "center_m", center_m, 3))
        self.r = positive("SphereWall", "radius_m", radius_m, "m")
        self.inside = bool(inside)

    def faces(self, p):
        return _faces(_kernels.sphere_faces, self.c, self.r, self.inside, *_point(p))

    def _shape(self):
        return [_kernels.SPHERE, *self.c, self.r, float(self.inside)]
