"""Virtual walls on a frame: a plane, a box, a sphere, with a spring-damper law.

Rows in x = [q̈; τ] through the public :class:`~controllers.tasks.base.Task` API; the arithmetic of the
rows and of the touched faces is in :mod:`controllers.tasks.kernels`.

References
----------
.. [Khatib1987] O. Khatib, "A unified approach for motion and force control of robot manipulators: the
   operational space formulation", IEEE J. Robotics and Automation 3(1):43-53, 1987.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from models.checks import nonnegative, positive, vector
from models.errors import ParameterError

from . import kernels
from .hand import HandPointTask
from .state import TickState

__all__ = ["PlaneWall", "BoxWall", "SphereWall", "WallTask", "WallLaw"]


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


class WallTask(HandPointTask):
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
        self._hand_settings(frame, sensor, inertia_compensation, weight, cuff_stiffness_N_per_m)

    def faces(self, p: np.ndarray) -> list[tuple[np.ndarray, float]]:
        """(normal into the wall, penetration [m]) of every touched face at position p."""
        raise NotImplementedError

    def rows(self, state: TickState):
        p, R, w = self.hand(state)  # the wearer's hand point, with the cuff's stiffness given
        touched = self.faces(p)
        if not touched:
            return None
        normals = np.array([n for n, _ in touched], dtype=float).reshape(-1, 3)
        pens = np.array([pen for _, pen in touched], dtype=float)
        # per face: the row n^T J (the wall-normal speed is n^T J q' and 1 / m_n = n^T J M^-1 J^T n / alpha)
        return kernels.wall_rows(normals, pens, R, w, state.jacobian(self.fid), state.drift(self.fid), state.Minv,
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
        self.point_m, self.normal = self.x0, self.n  # the arguments, by name (Task.params; the normal made unit)

    def faces(self, p):
        return _faces(kernels.plane_faces, self.n, self.x0, *_point(p))


class BoxWall(WallTask):
    """Keep the frame inside an axis-aligned box ``[lower_m, upper_m]`` (world frame)."""

    name = "wall_box"

    def __init__(self, lower_m, upper_m, law: WallLaw = WallLaw(), *, frame: str = "exo_hand_point",
                 sensor: str = "hand", inertia_compensation: float = 0.5, weight: float = 1.0,
                 cuff_stiffness_N_per_m=None) -> None:
        super().__init__(law, frame, sensor, inertia_compensation, weight, cuff_stiffness_N_per_m)
        self.lo = np.array(vector("BoxWall", "lower_m", lower_m, 3))
        self.hi = np.array(vector("BoxWall", "upper_m", upper_m, 3))
        self.lower_m, self.upper_m = self.lo, self.hi  # the arguments, by name (Task.params)
        if not np.all(self.lo < self.hi):
            raise ParameterError(f"BoxWall: lower_m {self.lo} must be below upper_m {self.hi} on every axis")

    def faces(self, p):
        return _faces(kernels.box_faces, self.lo, self.hi, *_point(p))


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
        self.center_m, self.radius_m = self.c, self.r  # the arguments, by name (Task.params)

    def faces(self, p):
        return _faces(kernels.sphere_faces, self.c, self.r, self.inside, *_point(p))
