"""The replay camera: the plane of the hand path, the side it looks from, and the framing distance.

References for the checks:

* the normal of a point set's best-fitting plane is the eigenvector of its covariance matrix with the smallest
  eigenvalue (principal component analysis, Jolliffe, *Principal Component Analysis*, 2nd ed., Springer 2002,
  ch. 1-3); computed here independently with ``scipy.linalg.eigh``;
* the framing distance is checked with the pinhole projection x_screen = f * X / Z, f = 1 / tan(fov / 2)
  (common practice: the perspective camera of three.js, which meshcat uses).
"""

from __future__ import annotations

import math

import numpy as np
import pytest
import scipy.linalg

from sim.output import framing

NORMAL = np.array([1.0, 2.0, 2.0]) / 3.0


def _plane_path(normal=NORMAL, n=400, seed=0, noise=0.002):
    """A figure-of-eight of about 30 cm in the plane through (0.3, -0.1, 0.05) with the given normal, plus noise."""
    rng = np.random.default_rng(seed)
    a = np.cross(normal, [0.0, 0.0, 1.0])
    a /= np.linalg.norm(a)
    b = np.cross(normal, a)
    s = np.linspace(0.0, 2 * np.pi, n)
    pts = np.array([0.3, -0.1, 0.05]) + 0.15 * np.outer(np.sin(s), a) + 0.08 * np.outer(np.sin(2 * s), b)
    return pts + noise * rng.standard_normal(pts.shape)


def test_path_normal_is_the_smallest_covariance_eigenvector():
    pts = _plane_path()
    n = framing.path_normal(pts)
    _, vecs = scipy.linalg.eigh(np.cov(pts.T))  # ascending eigenvalues: column 0 is the normal
    ref = vecs[:, 0]
    assert abs(n @ ref) == pytest.approx(1.0, abs=1e-9)
    assert abs(n @ NORMAL) > 0.999  # and it is the plane the path was drawn in (noise 2 mm)
    c, axes, s = framing.principal_plane(pts)
    np.testing.assert_allclose(c, pts.mean(axis=0))
    np.testing.assert_allclose(axes @ axes.T, np.eye(3), atol=1e-12)
    assert np.linalg.det(axes) == pytest.approx(1.0)
    np.testing.assert_allclose(s ** 2 / (len(pts) - 1), scipy.linalg.eigh(np.cov(pts.T))[0][::-1], rtol=1e-9)


def test_view_looks_along_the_plane_normal_from_the_arm_side():
    pts = _plane_path()
    arm = np.vstack([pts, [[0.0, 0.0, 0.0]]])
    body = np.array([0.3, -0.1, 0.05]) - 0.3 * NORMAL  # trunk on the -normal side of the path
    v = framing.frame_view(pts, arm, body_centre_m=body)
    np.testing.assert_allclose(v.direction, NORMAL, atol=2e-3)  # camera on the +normal side, trunk behind
    v2 = framing.frame_view(pts, arm, body_centre_m=np.array([0.3, -0.1, 0.05]) + 0.3 * NORMAL)
    np.testing.assert_allclose(v2.direction, -NORMAL, atol=2e-3)
    assert v.up @ v.direction == pytest.approx(0.0, abs=1e-12) and v.up[2] > 0
    assert np.linalg.norm(v.camera_m - v.target_m) == pytest.approx(v.distance_m)


def test_a_wall_between_camera_and_arm_sends_the_camera_to_the_other_side():
    pts = _plane_path()
    c = pts.mean(axis=0)
    # a plane 10 cm from the path on the +normal side, parallel to it: the camera must look from the -normal side
    wall = ("wall_plane", {"point_m": list(c + 0.1 * NORMAL), "normal": list(NORMAL)})
    body = c - 0.3 * NORMAL  # the trunk alone would ask for the +normal side
    v = framing.frame_view(pts, pts, walls=[wall], body_centre_m=body)
    np.testing.assert_allclose(v.direction, -NORMAL, atol=2e-3)
    assert not framing.sight_blocked(v.camera_m, c, wall)
    # a 10 cm wall box on one side, a sphere on the other: each blocks the line of sight on its side only
    box = ("wall_box", {"lower_m": list(c + 0.3 * NORMAL - 0.05), "upper_m": list(c + 0.3 * NORMAL + 0.05)})
    assert framing.sight_blocked(c + 2 * NORMAL, c, box) and not framing.sight_blocked(c - 2 * NORMAL, c, box)
    ball = ("wall_sphere", {"center_m": list(c - 0.5 * NORMAL), "radius_m": 0.1})
    assert framing.sight_blocked(c - 2 * NORMAL, c, ball) and not framing.sight_blocked(c + 2 * NORMAL, c, ball)


def test_a_plane_across_both_sides_turns_the_camera_into_it():
    # a path in the x-z plane (normal y) and a wall y = 0.05 that cuts the path's plane: whichever side,
    # the camera must not look through the wall, so it slides along it (direction within the wall)
    s = np.linspace(0, 2 * np.pi, 200)
    pts = np.column_stack([0.3 + 0.1 * np.cos(s), np.zeros_like(s), 0.1 * np.sin(s)])
    wall = ("wall_plane", {"point_m": [0.0, 0.05, 0.0], "normal": [0.3, 1.0, 0.0]})
    v = framing.frame_view(pts, pts, walls=[wall])
    assert not framing.sight_blocked(v.camera_m, pts.mean(axis=0), wall)


def test_distance_frames_the_points_within_the_requested_fill():
    rng = np.random.default_rng(3)
    pts = _plane_path()
    arm = np.vstack([pts, rng.uniform(-0.3, 0.3, (50, 3))])
    fov, aspect, fill = 34.0, 4.0 / 3.0, 0.6
    v = framing.frame_view(pts, arm, fov_deg=fov, aspect=aspect, fill=fill)
    right = np.cross(v.up, v.direction)
    rel = arm - v.camera_m
    depth = -(rel @ v.direction)  # distance in front of the camera
    assert np.all(depth > 0)
    f = 1.0 / math.tan(math.radians(fov) / 2)
    y_ndc = f * (rel @ v.up) / depth  # -1 .. 1 over the picture's height
    x_ndc = f * (rel @ right) / depth / aspect
    worst = max(np.abs(y_ndc).max(), np.abs(x_ndc).max())
    assert worst <= fill + 1e-9  # everything inside the central `fill` of the picture
    assert worst > 0.6 * fill  # and not lost in the middle of it (the bound is conservative in depth)


def test_raised_camera_keeps_its_azimuth_and_gains_the_elevation():
    pts = _plane_path(normal=np.array([0.0, -1.0, 0.0]))  # a movement in the sagittal (x-z) plane
    flat = framing.frame_view(pts, pts, fallback_normal=(0.0, -1.0, 0.0))
    raised = framing.frame_view(pts, pts, fallback_normal=(0.0, -1.0, 0.0), raise_deg=15.0)
    el = [math.degrees(math.asin(v.direction[2])) for v in (flat, raised)]
    assert el[1] - el[0] == pytest.approx(15.0, abs=1e-9)
    az = [math.atan2(v.direction[1], v.direction[0]) for v in (flat, raised)]
    assert az[1] == pytest.approx(az[0], abs=1e-12)
    assert np.linalg.norm(raised.direction) == pytest.approx(1.0)
    with pytest.raises(ValueError, match="raise_deg"):
        framing.frame_view(pts, pts, raise_deg=60.0)


def test_degenerate_paths():
    line = np.outer(np.linspace(0, 0.3, 50), [1.0, 1.0, 0.0]) / math.sqrt(2)  # a horizontal line
    n = framing.path_normal(line)
    assert abs(n @ [1.0, 1.0, 0.0]) < 1e-9 and abs(n[2]) < 1e-9  # side-on, level
    still = np.full((30, 3), 0.2) + 1e-4 * np.random.default_rng(0).standard_normal((30, 3))
    assert framing.path_normal(still) is None
    v = framing.frame_view(still, still + [0.0, 0.0, 0.3], fallback_normal=(0.0, -2.0, 0.0))
    np.testing.assert_allclose(v.direction, [0.0, -1.0, 0.0], atol=1e-12)
    vertical = np.outer(np.linspace(0, 0.3, 50), [0.0, 0.0, 1.0])
    n = framing.path_normal(vertical, prefer=(1.0, 1.0, 0.3))
    np.testing.assert_allclose(n, np.array([1.0, 1.0, 0.0]) / math.sqrt(2), atol=1e-9)


@pytest.mark.parametrize("kwargs, match", [
    ({"hand_path_m": np.zeros((0, 3))}, "hand_path_m"),
    ({"hand_path_m": np.zeros((5, 2))}, "hand_path_m"),
    ({"arm_points_m": [[np.nan, 0, 0]]}, "arm_points_m"),
    ({"fill": 1.5}, "fill"),
    ({"fov_deg": 0.0}, "fov_deg"),
    ({"fallback_normal": (0, 0, 0)}, "fallback_normal"),
])
def test_bad_inputs_name_the_culprit(kwargs, match):
    args = {"hand_path_m": _plane_path(n=20), "arm_points_m": _plane_path(n=20)} | kwargs
    with pytest.raises(ValueError, match=match):
        framing.frame_view(**args)
