"""The compiled rows of the shipped tasks against their equations written in NumPy.

References, each beside its check:

* joint position limits: the braking-distance bound from :math:`v^2 = 2 a d` (uniform deceleration) and
  the one-tick position bound, as written in the docstring of ``JointPositionLimits``;
* joint velocity limits: :math:`|\\dot q + \\ddot q \\Delta t| \\le \\dot q_{max}` solved for q̈;
* wall rows: the operational-space mass along the normal, :math:`m_n = \\alpha / (n^T J M^{-1} J^T n)`
  (Khatib 1987), with :math:`M^{-1}` from ``numpy.linalg.inv`` of pinocchio's
  mass matrix, and the spring-damper law of ``WallTask``.

Khatib 1987: Khatib O. (1987), A unified approach for motion and force control of robot manipulators: the
operational space formulation, IEEE Journal of Robotics and Automation 3(1):43-53.
"""

from __future__ import annotations

import numpy as np
import pinocchio as pin
import pytest

import models
from controllers.tasks import BoxWall, JointPositionLimits, JointVelocityLimits, TickState, WallLaw, kernels
from models.records import Measurement

CUFFS = {"upper_arm": "exo_cuff_upper_arm", "forearm": "exo_cuff_forearm", "hand": "exo_cuff_hand"}


def _states(seed, n=20):
    arm = models.build_exo()
    s = TickState(arm, CUFFS, 1e-3)
    lo, hi = arm.position_limits()
    rng = np.random.default_rng(seed)
    for k in range(n):
        q = rng.uniform(lo - 0.05, hi + 0.05)  # some joints beyond their stops
        if k % 2:
            q[k % 7] = hi[k % 7] - 0.021  # inside the margin band
        dq = rng.normal(scale=2.0, size=7)
        w = {c: rng.normal(scale=10.0, size=6) for c in CUFFS}
        s.update(Measurement(0.0, q, dq, np.zeros(7), w))
        yield arm, s


def test_position_limit_rows_are_the_braking_and_one_tick_bounds():
    task = JointPositionLimits(braking_accel_rad_s2=15.0, margin_rad=0.03)
    for arm, s in _states(1):
        task.bind(s)
        C, d = task.rows(s)
        lo, hi = arm.position_limits()
        dt, a = s.dt_s, 15.0
        for side, dist, v in ((slice(0, 7), hi - 0.03 - s.q, s.dq), (slice(7, 14), s.q - (lo + 0.03), -s.dq)):
            dist = np.maximum(dist, 0.0)
            expected = np.minimum((np.sqrt(2 * a * dist) - v) / dt, (dist - v * dt) / dt**2)
            np.testing.assert_allclose(d[side], expected, rtol=1e-14, atol=1e-9)
        np.testing.assert_array_equal(C[:7, :7], np.eye(7))
        np.testing.assert_array_equal(C[7:, :7], -np.eye(7))


def test_velocity_limit_rows_bound_the_next_ticks_speed():
    task = JointVelocityLimits(fraction=0.8)
    for arm, s in _states(2):
        task.bind(s)
        C, d = task.rows(s)
        vmax = 0.8 * arm.model.velocityLimit
        # the largest q̈ of each row keeps |q' + q̈ dt| <= vmax exactly
        np.testing.assert_allclose(s.dq + d[:7] * s.dt_s, vmax, rtol=1e-12)
        np.testing.assert_allclose(s.dq - d[7:] * s.dt_s, -vmax, rtol=1e-12)


def test_position_limit_bounds_keep_a_nan_for_the_finiteness_check():
    out = kernels.position_limit_bounds(np.array([np.nan, 0.0]), np.zeros(2), np.ones(2), np.ones(2), 40.0, 1e-3)
    assert np.isnan(out[0]) and np.isnan(out[2]) and np.isfinite(out[[1, 3]]).all()


@pytest.mark.parametrize("compliance", [None, (2100.0, 2100.0, 1500.0)])
def test_wall_rows_give_the_operational_space_spring_damper_of_every_touched_face(compliance):
    hand = "exo_hand_point"
    touched_faces = 0
    for arm, s in _states(3):
        p = s.position(arm.frame_id(hand))
        # a box around the hand point, shifted so that one to three of its faces are crossed
        box = BoxWall(p - 0.05 + np.array([0.07, 0.0, 0.06]), p + 0.05 - np.array([0.0, 0.08, 0.0]),
                      WallLaw(700.0, 9.0), inertia_compensation=0.4, cuff_stiffness_N_per_m=compliance)
        box.bind(s)
        out = box.rows(s)
        w = s.measurement.cuff_wrench["hand"]
        R = s.rotation(arm.frame_id("exo_cuff_hand"))
        x = p if compliance is None else p + R @ (w[:3] / np.asarray(compliance))
        faces = box.faces(x)
        if not faces:
            assert out is None
            continue
        A, b = out
        J = pin.getFrameJacobian(s.model, s.data, arm.frame_id(hand), pin.LOCAL_WORLD_ALIGNED)[:3]
        drift = pin.getFrameClassicalAcceleration(s.model, s.data, arm.frame_id(hand),
                                                  pin.LOCAL_WORLD_ALIGNED).linear
        Minv = np.linalg.inv(s.M)
        assert A.shape == (len(faces), 14) and not A[:, 7:].any()
        for i, (n, pen) in enumerate(faces):
            m_n = 0.6 / (n @ J @ Minv @ J.T @ n)  # alpha = 1 - 0.4 (Khatib 1987)
            np.testing.assert_allclose(A[i, :7], m_n * (n @ J), rtol=1e-10, atol=1e-12)
            expected = n @ (R @ w[:3]) - 700.0 * pen - 9.0 * (n @ J @ s.dq) - m_n * (n @ drift)
            assert b[i] == pytest.approx(expected, rel=1e-10, abs=1e-9)
        touched_faces += len(faces)
    assert touched_faces >= 5


def test_tick_terms_mirror_the_inertia_and_sum_the_cuff_forces():
    # references: pinocchio's crba (upper triangle) mirrored with numpy.triu, and sum_c J_c^T w_c in numpy
    arm = models.build_exo()
    model, data = arm.model, arm.model.createData()
    rng = np.random.default_rng(8)
    lo, hi = arm.position_limits()
    for _ in range(10):
        q = rng.uniform(lo, hi)
        pin.forwardKinematics(model, data, q)
        pin.computeJointJacobians(model, data)
        pin.updateFramePlacements(model, data)
        U = pin.crba(model, data, q).copy()
        Js = np.array([pin.getFrameJacobian(model, data, arm.frame_id(f), pin.LOCAL) for f in CUFFS.values()])
        ws = rng.normal(scale=10.0, size=(3, 6))
        Minv, nle, g = rng.normal(size=(7, 7)), rng.normal(size=7), rng.normal(size=7)
        for k in (0, 2, 3):
            M, Minv2, h2, g2, f = kernels.tick_terms(U, Minv, nle, g, Js, ws, k)
            np.testing.assert_array_equal(M, np.triu(U) + np.triu(U, 1).T)
            np.testing.assert_array_equal(M, M.T)
            assert np.array_equal(Minv2, Minv) and Minv2 is not Minv and np.array_equal(h2, nle)
            assert np.array_equal(g2, g)
            expected = sum((J.T @ w for J, w in zip(Js[:k], ws[:k])), np.zeros(7))
            np.testing.assert_allclose(f, expected, rtol=0, atol=1e-12 * (1 + np.abs(expected).max()))
