"""Tasks and their shared math against closed forms.

Sources: Khatib (1987) operational-space identities (Khatib O. (1987), A unified approach for motion and force
control of robot manipulators: the operational space formulation, IEEE Journal of Robotics and Automation
3(1):43-53);
uniform-deceleration kinematics v^2 = 2 a d for the braking distance.
"""

from __future__ import annotations

import numpy as np
import pinocchio as pin
import pytest

import models
from controllers.tasks import JointPositionLimits, TickState, operational_space
from models.records import Measurement


def _exo_state(q, dq=None):
    arm = models.build_exo()
    s = TickState(arm, {"hand": "exo_cuff_hand"}, 1e-3)
    dq = np.zeros(arm.nv) if dq is None else dq
    s.update(Measurement(0.0, q, dq, np.zeros(arm.nv), {"hand": np.zeros(6)}))
    return arm, s


def test_operational_space_identities_hold_on_the_exoskeleton():
    # J Jbar = I and J M^-1 N^T = 0: null-space torque causes no task acceleration (Khatib 1987)
    rng = np.random.default_rng(31)
    arm = models.build_exo()
    for _ in range(20):
        q = rng.uniform(*arm.position_limits())
        _, s = _exo_state(q)
        J = s.jacobian(arm.frame_id("exo_hand_point"))
        Lam, Jbar, N_T = operational_space(s.M, J)
        assert np.allclose(J @ Jbar, np.eye(6), atol=1e-9)
        assert np.abs(J @ np.linalg.solve(s.M, N_T)).max() < 1e-9
        assert np.allclose(Lam, Lam.T, atol=1e-8 * np.abs(Lam).max())


def test_point_mass_on_three_prismatic_joints_has_operational_inertia_m_times_identity():
    m_kg = 2.5
    model = pin.Model()
    parent = 0
    for k, joint in enumerate((pin.JointModelPX(), pin.JointModelPY(), pin.JointModelPZ())):
        parent = model.addJoint(parent, joint, pin.SE3.Identity(), f"p{k}")
        mass = m_kg if k == 2 else 0.0
        model.appendBodyToJoint(parent, pin.Inertia(mass, np.zeros(3), np.eye(3) * 1e-3 * (k == 2)), pin.SE3.Identity())
    data = model.createData()
    q = np.array([0.1, -0.2, 0.3])
    M = pin.crba(model, data, q)
    M = np.triu(M) + np.triu(M, 1).T
    J = pin.computeJointJacobian(model, data, q, 3)[:3]
    Lam, _, _ = operational_space(M, J)
    assert np.allclose(Lam, m_kg * np.eye(3), atol=1e-12)


def test_operational_inertia_of_a_two_link_arm_diverges_at_the_stretched_singularity():
    # Lambda grows without bound as q2 -> 0 along the singular direction (Khatib 1987)
    model = pin.Model()
    j1 = model.addJoint(0, pin.JointModelRZ(), pin.SE3.Identity(), "j1")
    model.appendBodyToJoint(j1, pin.Inertia(1.0, np.array([0.15, 0, 0]), np.eye(3) * 1e-3), pin.SE3.Identity())
    j2 = model.addJoint(j1, pin.JointModelRZ(), pin.SE3(np.eye(3), np.array([0.3, 0, 0])), "j2")
    model.appendBodyToJoint(j2, pin.Inertia(1.0, np.array([0.125, 0, 0]), np.eye(3) * 1e-3), pin.SE3.Identity())
    fid = model.addFrame(pin.Frame("tip", j2, 0, pin.SE3(np.eye(3), np.array([0.25, 0, 0])), pin.FrameType.OP_FRAME))
    data = model.createData()
    largest = []
    for q2 in (0.5, 0.1, 0.02, 0.004):
        q = np.array([0.3, q2])
        M = pin.crba(model, data, q)
        M = np.triu(M) + np.triu(M, 1).T
        pin.computeJointJacobians(model, data, q)
        pin.updateFramePlacements(model, data)
        J = pin.getFrameJacobian(model, data, fid, pin.LOCAL_WORLD_ALIGNED)[:2]
        largest.append(np.linalg.eigvalsh(operational_space(M, J)[0])[-1])
    assert all(b > 10 * a for a, b in zip(largest[1:], largest[2:])) or all(np.diff(largest) > 0)
    assert largest[-1] > 1e3 * largest[0]


def test_braking_distance_bound_stops_a_fast_joint_inside_its_range():
    # double integrator driven at the largest allowed acceleration toward the limit: it never
    # crosses it, and at every tick it could still stop: v <= sqrt(2 a d) (uniform deceleration)
    arm, s = _exo_state(np.zeros(7))
    task = JointPositionLimits(braking_accel_rad_s2=20.0, margin_rad=0.02)
    task.bind(s)
    lo, hi = arm.position_limits()
    dt = 1e-3
    q, v = np.zeros(7), np.full(7, 2.5)  # 2.5 rad/s toward every upper stop
    for _ in range(3000):
        s.update(Measurement(0.0, q, v, np.zeros(7), {"hand": np.zeros(6)}))
        C, d = task.rows(s)
        a_up = d[:7]  # rows 0..6 bound q_dd from above
        a = np.minimum(a_up, 50.0)  # push as hard as the bound lets (50 rad/s^2 drive)
        room = np.maximum(hi - 0.02 - q, 0.0)
        v = v + a * dt
        q = q + v * dt
        assert np.all(q <= hi - 0.02 + 1e-9)  # inside the range, margin included
        assert np.all(v <= np.sqrt(2 * 20.0 * room) + 1e-9)  # the next tick can still brake in time
    assert np.all(q > hi - 0.03)  # and it used the room it had


def _wall_state(q):
    arm = models.build_exo()
    s = TickState(arm, {"hand": "exo_cuff_hand"}, 1e-3)
    s.update(Measurement(0.0, q, np.zeros(7), np.zeros(7), {"hand": np.zeros(6)}))
    return arm, s


def test_walls_are_one_sided_and_their_faces_follow_the_geometry():
    # closed-form geometry: plane n.(x - x0), box faces per axis, sphere |x - c| - r
    from controllers.tasks import BoxWall, PlaneWall, SphereWall

    p = np.array([0.3, -0.1, -0.4])
    plane = PlaneWall((0.25, 0, 0), (2.0, 0, 0))
    assert plane.faces(p)[0][1] == pytest.approx(0.05) and np.allclose(plane.faces(p)[0][0], [1, 0, 0])
    assert PlaneWall((0.35, 0, 0), (1, 0, 0)).faces(p) == []  # not touched: no rows
    box = BoxWall((-0.2, -0.05, -0.5), (0.2, 0.2, 0.0))
    faces = {tuple(n): d for n, d in box.faces(p)}
    assert faces == {(1.0, 0.0, 0.0): pytest.approx(0.1), (0.0, -1.0, 0.0): pytest.approx(0.05)}
    keep_out = SphereWall((0.3, -0.1, -0.3), 0.15)
    (n, d), = keep_out.faces(p)
    assert d == pytest.approx(0.05) and np.allclose(n, [0, 0, 1])  # pushed back out, along -(outward)
    keep_in = SphereWall((0.3, -0.1, -0.3), 0.05, inside=True)
    (n, d), = keep_in.faces(p)
    assert d == pytest.approx(0.05) and np.allclose(n, [0, 0, -1])


def test_plane_wall_row_holds_the_robot_still_when_the_wearer_pushes_with_the_spring_force():
    # quasi-static equilibrium of m_n a = f_n - K p - B v: zero acceleration when f_n = K p (Hooke)
    from controllers.tasks import PlaneWall, WallLaw

    q = np.radians([100, 5, -60, 20, 20, 0, 0])
    arm, s = _wall_state(q)
    x = s.position(arm.frame_id("exo_hand_point"))
    wall = PlaneWall(x - np.array([0.01, 0, 0]), (1, 0, 0), WallLaw(800.0, 0.0))  # 1 cm inside the wall
    wall.bind(s)
    R = s.rotation(arm.frame_id("exo_cuff_hand"))
    f_world = np.array([800.0 * 0.01, 0, 0])  # the wearer pushes with exactly K p along n
    s.update(Measurement(0.0, q, np.zeros(7), np.zeros(7), {"hand": np.concatenate([R.T @ f_world, np.zeros(3)])}))
    A, b = wall.rows(s)
    assert A.shape == (1, 14) and b[0] == pytest.approx(0.0, abs=1e-9)
