"""Where the replay's camera stands: the plane of the hand path, the side to look from, and a distance.

Pure computation (numpy only, nothing drawn): :func:`frame_view` returns a
:class:`View` that :mod:`sim.output.viz` turns into a camera.

The camera looks along the normal of the plane that best fits the hand path,
so a movement that lies in a plane is seen undistorted, without
foreshortening.  That plane is the span of the first two principal
components of the hand positions; its normal is the third, the right singular
vector of the centred positions with the smallest singular value, which is
also the total-least-squares plane fit ([Jolliffe2002]_, [Shakarji1998]_).

References
----------
.. [Jolliffe2002] I. T. Jolliffe, *Principal Component Analysis*, 2nd ed.,
   Springer, 2002, ch. 1-3 (principal components as the eigenvectors of the
   covariance matrix, obtained from the singular value decomposition of the
   centred data, sec. 3.5).
.. [Shakarji1998] C. M. Shakarji, "Least-squares fitting algorithms of the
   NIST algorithm testing system", *Journal of Research of the National
   Institute of Standards and Technology* 103(6):633-641, 1998 (plane fit:
   the normal is the singular vector of the smallest singular value of the
   centred points; volume and pages from memory).
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

__all__ = ["View", "principal_plane", "path_normal", "sight_blocked", "frame_view"]

#: A hand path whose RMS distance from its centroid is below this is treated as a point [m].
MIN_SPREAD_M = 0.01
#: A path whose second singular value is below this fraction of the first is treated as a line.
MIN_PLANARITY = 0.1


@dataclass(frozen=True)
class View:
    """A camera pose that frames a set of points.

    Attributes
    ----------
    target_m : ndarray, shape (3,)
        Point looked at, world coordinates [m].
    direction : ndarray, shape (3,)
        Unit vector from the target toward the camera.
    up : ndarray, shape (3,)
        Unit vector, perpendicular to ``direction``, that points up on screen.
    distance_m : float
        Camera to target [m].
    fov_deg : float
        Vertical field of view the distance was computed for [deg].
    """

    target_m: np.ndarray
    direction: np.ndarray
    up: np.ndarray
    distance_m: float
    fov_deg: float

    def __post_init__(self) -> None:
        for name in ("target_m", "direction", "up"):
            v = np.asarray(getattr(self, name), dtype=float)
            if v.shape != (3,) or not np.all(np.isfinite(v)):
                raise ValueError(f"View.{name} must be 3 finite numbers, got {getattr(self, name)!r}")
            v = v.copy()
            v.flags.writeable = False
            object.__setattr__(self, name, v)
        if not (math.isfinite(self.distance_m) and self.distance_m > 0):
            raise ValueError(f"View.distance_m must be a positive number of metres, got {self.distance_m!r}")
        if not 0 < self.fov_deg < 180:
            raise ValueError(f"View.fov_deg must lie in (0, 180) degrees, got {self.fov_deg!r}")

    @property
    def camera_m(self) -> np.ndarray:
        """Camera position, world coordinates [m]: ``target + distance * direction``."""
        return self.target_m + self.distance_m * self.direction


def _points(name: str, points) -> np.ndarray:
    p = np.asarray(points, dtype=float)
    if p.ndim != 2 or p.shape[1] != 3 or len(p) == 0:
        raise ValueError(f"{name} must be an array of shape (N, 3) with N >= 1, got shape {p.shape}")
    if not np.all(np.isfinite(p)):
        raise ValueError(f"{name} must be finite; it holds NaN or infinite values")
    return p


def principal_plane(points_m) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Principal axes of a point set (principal component analysis by SVD).

    With the centred points :math:`X = P - \\bar p` (one point a row) and
    :math:`X = U \\Sigma V^T`, the rows of :math:`V^T` are the principal
    directions in order of decreasing variance :math:`\\sigma_i^2 / N`; the
    first two span the least-squares plane, the third is its normal
    ([Jolliffe2002]_ sec. 3.5, [Shakarji1998]_).

    Parameters
    ----------
    points_m : array_like, shape (N, 3)
        Points [m].

    Returns
    -------
    centroid : ndarray, shape (3,)
        Mean point [m].
    axes : ndarray, shape (3, 3)
        Unit principal directions as rows, right-handed (``axes[2] = axes[0] x axes[1]``).
    singular_values : ndarray, shape (3,)
        :math:`\\sigma_1 \\ge \\sigma_2 \\ge \\sigma_3 \\ge 0` [m] (zero-padded for N < 3).
    """
    p = _points("points_m", points_m)
    c = p.mean(axis=0)
    _, s, vt = np.linalg.svd(p - c, full_matrices=True)
    s = np.concatenate([s, np.zeros(3 - len(s))])
    axes = vt.copy()
    axes[2] = np.cross(axes[0], axes[1])
    return c, axes, s


def path_normal(points_m, min_spread_m: float = MIN_SPREAD_M, min_planarity: float = MIN_PLANARITY,
                prefer=(0.0, 0.0, 1.0)) -> np.ndarray | None:
    """Normal of the plane a path moves in, or None when the path does not define one.

    With the singular values :math:`\\sigma_1 \\ge \\sigma_2 \\ge \\sigma_3` of
    :func:`principal_plane`:

    * a path that spans a plane (:math:`\\sigma_2 \\ge` ``min_planarity``
      :math:`\\sigma_1` and :math:`\\sigma_3 \\le \\sigma_2 / 2`): the third
      principal direction;
    * otherwise a path along a line (or a line with as much spread across it
      in every direction, so that no plane is better than another): the
      horizontal direction perpendicular to the line (world z is up), so the
      line is seen side-on from its own height; for a line within 17 deg of
      vertical, the direction perpendicular to it nearest to ``prefer``;
    * a path that hardly moves (RMS distance from its centroid below
      ``min_spread_m``), or a line along ``prefer``: None.

    The sign is arbitrary; :func:`frame_view` chooses the side.

    Parameters
    ----------
    points_m : array_like, shape (N, 3)
        Hand positions over the run [m].
    min_spread_m : float, optional
        Smallest RMS spread that counts as a movement [m].
    min_planarity : float, optional
        Smallest :math:`\\sigma_2 / \\sigma_1` that counts as a plane.
    prefer : array_like, shape (3,), optional
        Direction wanted for a near-vertical line's normal.

    Returns
    -------
    ndarray, shape (3,), or None
    """
    p = _points("points_m", points_m)
    _, axes, s = principal_plane(p)
    if s[0] / math.sqrt(len(p)) < min_spread_m:
        return None
    if s[1] >= min_planarity * s[0] and s[2] <= 0.5 * s[1]:
        return axes[2]
    n = np.cross(axes[0], [0.0, 0.0, 1.0])
    if np.linalg.norm(n) < 0.3:  # within 17 deg of vertical: the perpendicular nearest to `prefer`
        w = np.asarray(prefer, dtype=float)
        n = w - (w @ axes[0]) * axes[0]
    norm = float(np.linalg.norm(n))
    return n / norm if norm > 1e-6 else None


def sight_blocked(eye_m, target_m, wall) -> bool:
    """Whether a virtual wall lies across the line of sight from ``eye_m`` to ``target_m``.

    Parameters
    ----------
    eye_m, target_m : array_like, shape (3,)
        Ends of the line of sight [m].
    wall : (str, dict)
        A wall as stored in ``meta.json``: ``("wall_plane", {"point_m", "normal"})``
        (crossed when the ends lie on opposite sides of the plane),
        ``("wall_box", {"lower_m", "upper_m"})`` (the segment meets the box: slab
        test) or ``("wall_sphere", {"center_m", "radius_m"})``. Other kinds never block.

    Returns
    -------
    bool
    """
    a, b = np.asarray(eye_m, dtype=float), np.asarray(target_m, dtype=float)
    kind, p = wall[0], (wall[1] if len(wall) > 1 else {})
    d = b - a
    if kind == "wall_plane":
        n = np.asarray(p["normal"], dtype=float)
        x0 = np.asarray(p["point_m"], dtype=float)
        return float((a - x0) @ n) * float((b - x0) @ n) < 0.0
    if kind == "wall_box":
        lo, hi = np.asarray(p["lower_m"], dtype=float), np.asarray(p["upper_m"], dtype=float)
        t0, t1 = 0.0, 1.0
        for i in range(3):
            if abs(d[i]) < 1e-12:
                if a[i] < lo[i] or a[i] > hi[i]:
                    return False
                continue
            u, v = (lo[i] - a[i]) / d[i], (hi[i] - a[i]) / d[i]
            t0, t1 = max(t0, min(u, v)), min(t1, max(u, v))
            if t0 > t1:
                return False
        return True
    if kind == "wall_sphere":
        c, r = np.asarray(p["center_m"], dtype=float), float(p["radius_m"])
        t = float(np.clip((c - a) @ d / max(float(d @ d), 1e-12), 0.0, 1.0))
        return float(np.linalg.norm(a + t * d - c)) < r
    return False


def frame_view(hand_path_m, arm_points_m, walls: Sequence = (), body_centre_m=None,
               fallback_normal=(0.0, -1.0, 0.0), fov_deg: float = 34.0, aspect: float = 4.0 / 3.0,
               fill: float = 0.8, raise_deg: float = 0.0) -> View:
    """A camera that looks along the normal of the hand path's plane and frames the arm.

    1. Direction: :func:`path_normal` of ``hand_path_m`` (with ``prefer=fallback_normal``);
       ``fallback_normal`` when the path does not move.
    2. Side: each of the two opposite directions is first turned, if a
       virtual plane lies between it and the arm's centre, into that plane
       (the camera slides along the wall instead of looking through it).  Of
       the two, the one whose line of sight crosses fewer walls
       (:func:`sight_blocked`) is taken; on a tie, the one on the arm's side
       of ``body_centre_m`` (so the trunk is behind the arm); then the one
       turned least; then the one from above.
    3. Optionally the camera is raised by ``raise_deg`` (turned about the
       horizontal screen axis toward world +z), unless it already looks within
       30 deg of straight down or up: a view from a little above shows the
       floor in depth, and shortens lengths in the path's plane by at most
       :math:`1 - \\cos` ``raise_deg`` (3.4 % at 15 deg).
    4. Screen axes: up is world z projected on the image plane (world x when
       looking straight down or up), right = up x direction.
    5. Target and distance: the points ``arm_points_m`` are projected on the
       screen axes; the target is the middle of their extent, and the
       distance is the smallest at which a pinhole camera of vertical field
       of view ``fov_deg`` and width/height ``aspect`` sees them within the
       central ``fill`` of the picture's height and width:
       :math:`d = w_{near} + \\max(h_y, h_x / a) / (f \\tan(\\phi/2))`, with
       :math:`h` the half-extents and :math:`w_{near}` the depth of the point
       nearest to the camera (pinhole projection, common practice).

    Parameters
    ----------
    hand_path_m : array_like, shape (N, 3)
        Hand positions over the run [m].
    arm_points_m : array_like, shape (M, 3)
        Every point to keep in the picture (the arm's joints over the run) [m].
    walls : sequence, optional
        Walls as stored in ``meta.json``.
    body_centre_m : array_like, shape (3,), optional
        A point inside the wearer's trunk.
    fallback_normal : array_like, shape (3,), optional
        Direction used when the hand path defines no plane.
    fov_deg : float, optional
        Vertical field of view [deg].
    aspect : float, optional
        Picture width / height assumed for the horizontal extent.
    fill : float, optional
        Fraction of the picture's height (and width) the points may span, in (0, 1].
    raise_deg : float, optional
        Elevation added to the camera [deg], in [0, 45].

    Returns
    -------
    View
    """
    hand = _points("hand_path_m", hand_path_m)
    pts = np.concatenate([_points("arm_points_m", arm_points_m), hand])
    if not 0 < fill <= 1:
        raise ValueError(f"fill must lie in (0, 1], got {fill!r}")
    if not aspect > 0:
        raise ValueError(f"aspect must be positive, got {aspect!r}")
    if not 0 < fov_deg < 180:
        raise ValueError(f"fov_deg must lie in (0, 180) degrees, got {fov_deg!r}")
    if not 0 <= raise_deg <= 45:
        raise ValueError(f"raise_deg must lie in [0, 45] degrees, got {raise_deg!r}")
    fb = np.asarray(fallback_normal, dtype=float)
    if fb.shape != (3,) or not np.linalg.norm(fb) > 0:
        raise ValueError(f"fallback_normal must be a non-zero 3-vector, got {fallback_normal!r}")
    fb = fb / np.linalg.norm(fb)
    n = path_normal(hand, prefer=fb)
    if n is None:
        n = fb
    centre = 0.5 * (pts.min(axis=0) + pts.max(axis=0))
    reach = 2.0 + float(np.linalg.norm(pts.max(axis=0) - pts.min(axis=0)))
    planes = [(np.asarray(w[1]["normal"], dtype=float), np.asarray(w[1]["point_m"], dtype=float))
              for w in walls if w[0] == "wall_plane"]

    def candidate(sign: float) -> tuple[tuple, np.ndarray]:
        c = sign * n
        for m, x0 in planes:  # a plane between camera and arm: slide the camera along the plane
            m = m / np.linalg.norm(m)
            if sight_blocked(centre + reach * c, centre, ("wall_plane", {"normal": m, "point_m": x0})):
                c_in = c - (c @ m) * m
                if np.linalg.norm(c_in) > 1e-6:
                    c = c_in / np.linalg.norm(c_in)
        eye = centre + reach * c
        blocked = sum(sight_blocked(eye, centre, w) for w in walls)
        trunk_between = 0.0
        if body_centre_m is not None:
            trunk_between = -float(c @ (centre - np.asarray(body_centre_m, dtype=float)))
        return (blocked, trunk_between > 1e-9, round(-float(c @ (sign * n)), 9), round(trunk_between, 9),
                -c[2]), c

    direction = min((candidate(1.0), candidate(-1.0)), key=lambda sc: sc[0])[1]
    horizontal = math.hypot(direction[0], direction[1])
    if raise_deg > 0 and horizontal > math.sin(math.radians(30.0)):
        elevation = math.atan2(direction[2], horizontal) + math.radians(raise_deg)
        direction = np.array([direction[0] / horizontal * math.cos(elevation),
                              direction[1] / horizontal * math.cos(elevation), math.sin(elevation)])
    z = np.array([0.0, 0.0, 1.0])
    up = z - (z @ direction) * direction
    if np.linalg.norm(up) < 1e-6:
        x = np.array([1.0, 0.0, 0.0])
        up = x - (x @ direction) * direction
    up /= np.linalg.norm(up)
    right = np.cross(up, direction)
    rel = pts - centre
    u, v, w = rel @ right, rel @ up, rel @ direction
    target = centre + right * 0.5 * (u.max() + u.min()) + up * 0.5 * (v.max() + v.min())
    hx, hy = 0.5 * (u.max() - u.min()), 0.5 * (v.max() - v.min())
    t = math.tan(math.radians(fov_deg) / 2.0)
    d = float(w.max()) + max(hy, hx / aspect, 0.05) / (fill * t)
    return View(target, direction, up, d, fov_deg)
