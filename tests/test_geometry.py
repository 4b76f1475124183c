"""Frame and axis conventions of the URDF writer and of the exoskeleton shoulder."""

from __future__ import annotations

import math

import numpy as np
import pinocchio as pin
import pytest

from models import ExoParams
from models.exo import shoulder_axes
from models.urdf import rpy_from_z_axis


def test_rpy_written_for_a_cylinder_turns_local_z_onto_the_requested_axis():
    # URDF rpy convention (fixed axes X, Y, Z: R = Rz(yaw) Ry(pitch) Rx(roll)), as
    # implemented independently by pinocchio.rpy.rpyToMatrix.
    rng = np.random.default_rng(11)
    axes = list(rng.normal(size=(200, 3))) + [np.array(a, float) for a in
                                               [(0, 0, 1), (0, 0, -1), (1, 0, 0), (0, -1, 0)]]
    for a in axes:
        R = pin.rpy.rpyToMatrix(*rpy_from_z_axis(a))
        assert np.allclose(R @ [0.0, 0.0, 1.0], a / np.linalg.norm(a), atol=1e-12)


# Upper-arm directions of everyday postures in the base frame (x forward, y left,
# z up; right arm).  Our own design list, common practice for upper-limb tasks.
POSTURES = {
    "hanging": (0.0, 0.0, -1.0),
    "reach forward at shoulder height": (1.0, 0.0, 0.0),
    "reach forward and up": (1.0, 0.0, 1.0),
    "arm overhead": (0.0, 0.0, 1.0),
    "sideways at shoulder height": (0.0, -1.0, 0.0),
    "sideways and up": (0.0, -1.0, 1.0),
    "across the body": (1.0, 1.0, 0.0),
    "hand to mouth": (0.5, 0.2, -0.85),
    "hand behind the head": (0.3, -0.7, 0.6),
    "hand to the opposite hip": (0.35, 0.2, -0.92),
    "wind-up of a throw": (-0.3, -0.95, 0.0),
}


@pytest.mark.parametrize("name, direction", list(POSTURES.items()))
def test_default_shoulder_keeps_everyday_postures_30_deg_off_its_singular_line(name, direction):
    # The spherical shoulder is singular only with the upper arm along axis 1 (either way).
    u1 = shoulder_axes(ExoParams())[0]
    d = np.asarray(direction) / np.linalg.norm(direction)
    angle = math.degrees(math.acos(min(1.0, abs(float(d @ u1)))))
    assert angle > 30.0, name
    if name == "hanging":
        assert angle == pytest.approx(60.0, abs=1e-9)  # 90 deg - elevation of axis 1 (30 deg)


def test_shoulder_axes_meet_at_the_shoulder_centre_and_two_and_three_are_normal_to_the_others():
    u1, u2, u3 = shoulder_axes(ExoParams())
    for u in (u1, u2, u3):
        assert np.linalg.norm(u) == pytest.approx(1.0, abs=1e-15)
    assert abs(u1 @ u2) < 1e-15 and abs(u2 @ u3) < 1e-15
    from models import build_exo

    arm = build_exo()
    for name in ("exo_shoulder_a", "exo_shoulder_b", "exo_shoulder_c"):
        jid = arm.model.getJointId(name)
        assert np.allclose(arm.model.jointPlacements[jid].translation, 0.0, atol=0)
