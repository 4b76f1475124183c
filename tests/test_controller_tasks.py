r"""The HQP controller's one path for every task: each task's public ``rows``, checked and copied into the
controller's buffers, solved by the compiled hierarchy.

References, each beside its check:

* cvxpy (Clarabel), level by level (``sim/experiments/lexicographic.py``, Kanoun, Lamiraux & Wieber 2011): the
  torques of a controller holding every shipped task and a user's tasks, to 1e-5 N m;
* each task's own ``rows`` as the stack's reference: the rows the controller stacks are those rows, with
  the torque eliminated (:math:`(A_q + A_\tau M)\ddot q = b - A_\tau c`, the controller's docstring) in NumPy;
* the wall shapes' touched faces against their geometry written in NumPy (a plane's signed distance
  :math:`n^T(p - x_0)`, a box's per-axis excess, a sphere's radial distance).
"""

from __future__ import annotations

import numpy as np
import pytest

import models
from controllers.base import ControllerContext
from controllers.hqp import HQPController
from controllers.tasks import (
    BoxWall,
    GravityTorque,
    JointDamping,
    JointPositionLimits,
    JointVelocityLimits,
    PlaneWall,
    Posture,
    SphereWall,
    Task,
    TickState,
    Transparency,
    WallLaw,
    kernels,
)
from models.records import Measurement

pytest.importorskip("cvxpy")
from sim.experiments.bench import PythonHandCeiling  # noqa: E402
from sim.experiments.lexicographic import controller_lexicographic, controller_rows  # noqa: E402

CUFFS = {"upper_arm": "exo_cuff_upper_arm", "forearm": "exo_cuff_forearm", "hand": "exo_cuff_hand"}
TOL_NM = 1e-5  # as the bench's cvxpy comparison


def _context():
    arm = models.build_exo()
    return arm, ControllerContext(arm=arm, cuff_frames=CUFFS)


def _hand(arm):
    """The hand point at the middle of the joint ranges [m]."""
    s = TickState(arm, CUFFS, 1e-3)
    lo, hi = arm.position_limits()
    s.update(Measurement(0.0, (lo + hi) / 2, np.zeros(7), np.zeros(7), {c: np.zeros(6) for c in CUFFS}))
    return s.position(arm.frame_id("exo_hand_point")).copy()


def _states(arm, n, seed, wrench_scale=10.0, speed_scale=1.0, spread=0.15):
    """Random states around the middle posture, some near a joint limit, with cuff wrenches [N, N m]."""
    rng = np.random.default_rng(seed)
    lo, hi = arm.position_limits()
    mid = (lo + hi) / 2
    for k in range(n):
        q = mid + rng.uniform(-spread, spread, size=7) * (hi - lo)
        if k % 3 == 0 and spread >= 0.1:
            j = rng.integers(7)
            q[j] = hi[j] - 0.03
        dq = rng.normal(scale=speed_scale, size=7)
        w = {c: rng.normal(scale=wrench_scale, size=6) for c in CUFFS}
        yield Measurement(0.0, q, dq, np.zeros(7), w)


class _WristTorque(Task):
    """A user's equality on the torques, tau_wrist = 0.1 N m, weight 2: as plain lists (which the checks
    turn into arrays) on one tick in three, no rows on the next, an empty array on the third."""

    name, kind, weight = "wrist_torque", "eq", 2.0

    def __init__(self):
        self.calls = 0

    def rows(self, state):
        self.calls += 1
        if self.calls % 3 == 1:
            return [[0.0] * (2 * state.nv - 1) + [1.0]], [0.1]
        if self.calls % 3 == 2:
            return None
        return np.zeros((0, 2 * state.nv)), np.zeros(0)


class _NearerPlane(PlaneWall):
    """A subclass of a shipped task that changes its faces: its rows come from its own rows, as any task's."""

    def faces(self, p):
        return super().faces(np.asarray(p) + [0.01, 0.0, 0.0])


def _stacks(arm):
    """Level lists that hold every shipped task, weights other than 1, and walls touched on some ticks only."""
    x = _hand(arm)
    law = WallLaw(800.0, 6.0)
    return {
        "walls": lambda: [[JointPositionLimits(), JointVelocityLimits(fraction=0.7)],
                          [PlaneWall(x + [0.01, 0, 0], (1.0, 0.2, 0.0), law,
                                     cuff_stiffness_N_per_m=(2000, 2100, 1500))],
                          [Transparency(0.4)], [JointDamping()]],
        "shapes": lambda: [[JointVelocityLimits()],
                           [BoxWall(x - [0.02, 0.05, 0.02], x + [0.01, 0.05, 0.03], law, weight=2.0),
                            SphereWall(x + [0.0, 0.0, 0.02], 0.03, law, weight=0.5),
                            SphereWall(x, 0.02, law, inside=True, cuff_stiffness_N_per_m=(3000, 3000, 3000))],
                           [Transparency(0.6, weight=3.0), GravityTorque(weight=0.2)],
                           [Posture((0.1, 0.2, 0.0, 0.8, 0.0, 0.1, 0.0), frequency_Hz=2.0, weight=0.5),
                            JointDamping(weight=0.1)]],
        "torque": lambda: [[JointPositionLimits(braking_accel_rad_s2=12.0)], [GravityTorque()], [JointDamping()]],
        "user": lambda: [[JointPositionLimits(), PythonHandCeiling(x[2] + 0.05)],
                         [_NearerPlane(x + [0.02, 0, 0], (1.0, 0.2, 0.0), law)],
                         [Transparency(0.4), _WristTorque()], [JointDamping()]],
    }


@pytest.mark.parametrize("name", ["walls", "shapes", "torque", "user"])
def test_the_stack_holds_each_tasks_own_rows_with_the_torque_eliminated(name):
    # reference: each task's rows as it returns them (sim.experiments.lexicographic.controller_rows, public API)
    # and the elimination of the torque written in NumPy: (A_q + A_tau M) qdd = b - A_tau c
    arm, ctx = _context()
    ctrl, ref = HQPController(_stacks(arm)[name]()), HQPController(_stacks(arm)[name]())
    ctrl.reset(ctx)
    ref.reset(ctx)
    n = 7
    touched = set()
    for m in _states(arm, 24, seed=5):
        rows = controller_rows(ref, m)
        ctrl.state.update(m)
        s = ctrl.state
        c = s.h - s.cuff_force
        stack, count = ctrl._fill_stack(s, c)
        assert count == sum(A.shape[0] for eq, ineq in rows.levels for A, _, _ in (*eq, *ineq) if A.shape[0])
        for k, (eq, ineq) in enumerate(rows.levels):
            level = stack[k]
            for entries, M_, v_, w_ in ((eq, level.A, level.b, level.weights_eq),
                                         (ineq, level.C, level.d, level.weights_ineq)):
                entries = [e for e in entries if e[0].shape[0]]
                if not entries:
                    assert M_.shape[0] == 0
                    continue
                A = np.vstack([e[0] for e in entries])
                b = np.concatenate([e[1] for e in entries])
                w = np.concatenate([np.full(e[0].shape[0], e[2]) for e in entries])
                np.testing.assert_allclose(M_, A[:, :n] + A[:, n:] @ s.M, rtol=1e-14, atol=1e-12)
                np.testing.assert_allclose(v_, b - A[:, n:] @ c, rtol=1e-14, atol=1e-12)
                np.testing.assert_array_equal(w_, w)
        # the last level: the minimum norm of [qdd; tau], [I; M] qdd ~ [0; -c]
        last = stack[len(rows.levels)]
        np.testing.assert_array_equal(last.A, np.vstack([np.eye(n), s.M]))
        np.testing.assert_array_equal(last.b, np.concatenate([np.zeros(n), -c]))
        # walls hold no state between ticks: asking again which touched this tick changes nothing
        touched.update(t.name for level in ref.levels for t in level
                       if t.name.startswith("wall") and t.rows(ref.state) is not None)
    if name == "shapes":  # every wall shape wrote rows on some tick
        assert {"wall_box", "wall_sphere"} <= touched


@pytest.mark.parametrize(("name", "tol_Nm"), [("walls", TOL_NM), ("shapes", 1e-4), ("torque", TOL_NM),
                                             ("user", TOL_NM)])
def test_a_controller_of_every_shipped_task_and_a_users_gives_the_torques_of_cvxpy(name, tol_Nm):
    # reference: cvxpy (Clarabel) level by level on the rows of a controller of the same levels. The walls of
    # "shapes" hold the hand deep inside them, so most torques sit at their limits (80 N m), where the
    # reference, solved to Clarabel's default tolerances, is off by up to 6e-5 N m (common practice: compare
    # to the reference's own precision)
    arm, ctx = _context()
    make = _stacks(arm)[name]
    ctrl, ref = HQPController(make()), HQPController(make())
    ctrl.reset(ctx)
    ref.reset(ctx)
    for m in _states(arm, 8, seed=9, wrench_scale=3.0, speed_scale=0.3, spread=0.03):
        tau = ctrl.step(m)
        assert ctrl.diagnostics()["fallback"] == 0.0
        tau_cvx = controller_lexicographic(controller_rows(ref, m))[7:]
        assert np.abs(tau - tau_cvx).max() < tol_Nm


def test_a_users_task_weight_is_read_every_tick():
    # reference: the weight the task holds when its rows are written (sqrt(w) on its equality rows)
    arm, ctx = _context()
    ctrl = HQPController(_stacks(arm)["user"]())
    ctrl.reset(ctx)
    new_weight_seen = False
    for k, m in enumerate(_states(arm, 9, seed=3)):
        if k == 4:
            ctrl.levels[2][1].weight = 0.25
        ctrl.state.update(m)
        c = ctrl.state.h - ctrl.state.cuff_force
        a, _ = ctrl._fill_stack(ctrl.state, c)
        new_weight_seen |= 0.5 in a.sw  # sqrt(0.25): the wrist row of a tick after the change
    assert new_weight_seen


def test_non_finite_rows_of_a_users_task_name_it_and_its_rows_are_called_once_a_tick():
    class Glitch(_WristTorque):
        name = "glitch"

        def rows(self, state):
            self.calls += 1
            return np.zeros((1, 2 * state.nv)), np.array([np.nan if self.calls == 2 else 0.0])

    arm, ctx = _context()
    ctrl = HQPController([[Transparency()], [Glitch(), JointDamping()]])
    ctrl.reset(ctx)
    for k, m in enumerate(_states(arm, 3, seed=2)):
        ctrl.step(m)
        assert ctrl.levels[1][0].calls == k + 1  # also on the tick whose error names the task
    assert ctrl.fallback_count == 1 and "glitch" in ctrl.last_fallback_reason


def test_rows_of_a_users_task_with_the_wrong_columns_name_it():
    class Short(_WristTorque):
        name = "short_rows"

        def rows(self, state):
            return [[1.0] * (2 * state.nv - 1)], [0.0]  # one column short, as plain lists

    arm, ctx = _context()
    ctrl = HQPController([[Transparency()], [Short(), JointDamping()]])
    ctrl.reset(ctx)
    ctrl.step(next(_states(arm, 1, seed=4)))
    assert ctrl.fallback_count == 1
    assert "short_rows" in ctrl.last_fallback_reason and "expected 2 nv = 14" in ctrl.last_fallback_reason


def test_non_finite_rows_of_a_shipped_task_name_it():
    # a posture a float cannot reach: omega^2 (q* - q) overflows to inf in the posture task's right-hand side
    arm, ctx = _context()
    ctrl = HQPController([[Transparency()], [Posture((1e308,) * 7, weight=0.1)]])
    ctrl.reset(ctx)
    m = next(_states(arm, 1, seed=1))
    with np.errstate(over="ignore"):  # the posture rows overflow in NumPy
        tau = ctrl.step(m)
    assert ctrl.fallback_count == 1 and "posture" in ctrl.last_fallback_reason
    np.testing.assert_allclose(tau, ctrl.state.g - ctrl.fallback_damping * m.dq_rad_s)


def test_wall_shapes_touch_the_faces_of_their_geometry():
    # reference: the geometry in NumPy, on points around each shape
    rng = np.random.default_rng(3)
    law = WallLaw()
    n = np.array([0.6, 0.0, 0.8])
    plane = PlaneWall((0.1, 0.2, 0.3), n, law)
    box = BoxWall((-0.1, -0.2, -0.3), (0.1, 0.2, 0.3), law)
    out, inn = SphereWall((0.0, 0.1, 0.0), 0.2, law), SphereWall((0.0, 0.1, 0.0), 0.2, law, inside=True)
    counts = np.zeros(4, dtype=int)
    for p in rng.uniform(-0.4, 0.4, size=(300, 3)):
        pen = n @ (p - [0.1, 0.2, 0.3])
        faces = plane.faces(p)
        assert len(faces) == (pen > 0)
        if faces:
            np.testing.assert_allclose(faces[0][0], n, atol=1e-15)
            assert faces[0][1] == pytest.approx(pen, abs=1e-15)
        expected = []
        for ax in range(3):
            e = np.eye(3)[ax]
            if p[ax] > box.hi[ax]:
                expected.append((e, p[ax] - box.hi[ax]))
            if p[ax] < box.lo[ax]:
                expected.append((-e, box.lo[ax] - p[ax]))
        got = box.faces(p)
        assert len(got) == len(expected)
        for (gn, gp), (en, ep) in zip(got, expected):
            assert np.array_equal(gn, en) and gp == ep
        d = p - [0.0, 0.1, 0.0]
        dist = np.linalg.norm(d)
        for sphere, inside in ((out, False), (inn, True)):
            got = sphere.faces(p)
            touched = dist > 0.2 if inside else dist < 0.2
            assert len(got) == touched
            if got:
                np.testing.assert_allclose(got[0][0], (d if inside else -d) / dist, atol=1e-15)
                assert got[0][1] == pytest.approx(abs(dist - 0.2), abs=1e-15)
        counts += [len(plane.faces(p)) > 0, len(got) > 0, len(box.faces(p)) > 1, len(out.faces(p)) > 0]
    assert (counts > 10).all()


def test_hand_point_is_the_cuff_deflection_rotated_to_the_world():
    # reference: p + R (K_c^-1 f) in NumPy (WallTask's docstring)
    rng = np.random.default_rng(4)
    for _ in range(20):
        R = np.linalg.qr(rng.normal(size=(3, 3)))[0]
        p, w, comp = rng.normal(size=3), rng.normal(scale=20, size=6), rng.uniform(1e-4, 1e-3, size=3)
        np.testing.assert_allclose(kernels.hand_point(p, R, w, comp), p + R @ (comp * w[:3]), rtol=1e-13,
                                   atol=1e-16)


def test_a_tick_that_stops_on_a_tasks_error_leaves_the_next_ticks_stack_whole():
    # a user's task before constant rows writes a different number of rows each tick and fails on one tick;
    # reference: the next ticks' stacks against each task's own rows (as the first test), and cvxpy
    class Flaky(Task):
        name, kind, tick = "flaky", "ineq", 0

        def rows(self, state):
            if self.tick == 2:
                return [[1.0] * (2 * state.nv - 1)], [0.0]  # one column short: this tick falls back
            k = self.tick % 3
            return np.ones((k, 2 * state.nv)) * 1e-3, np.full(k, 50.0)

    arm, ctx = _context()

    def make():
        return [[Flaky(), JointPositionLimits(), JointVelocityLimits()], [Transparency()], [JointDamping()]]

    ctrl, ref = HQPController(make()), HQPController(make())
    ctrl.reset(ctx)
    ref.reset(ctx)
    n = 7
    for k, m in enumerate(_states(arm, 7, seed=12, wrench_scale=3.0, speed_scale=0.3, spread=0.03)):
        ctrl.levels[0][0].tick = ref.levels[0][0].tick = k
        tau = ctrl.step(m)
        if k == 2:
            assert ctrl.diagnostics()["fallback"] == 1.0 and "flaky" in ctrl.last_fallback_reason
            continue
        assert ctrl.diagnostics()["fallback"] == 0.0
        rows = controller_rows(ref, m)
        assert np.abs(tau - controller_lexicographic(rows)[7:]).max() < TOL_NM
        s = ctrl.state
        c = s.h - s.cuff_force
        level = ctrl._fill_stack(s, c)[0][0]  # this tick's stack, with the torque eliminated as in the first test
        C = np.vstack([e[0] for e in rows.levels[0][1] if e[0].shape[0]])
        d = np.concatenate([e[1] for e in rows.levels[0][1]])
        np.testing.assert_allclose(level.C, C[:, :n] + C[:, n:] @ s.M, rtol=1e-14, atol=1e-12)
        np.testing.assert_allclose(level.d, d - C[:, n:] @ c, rtol=1e-14, atol=1e-12)
