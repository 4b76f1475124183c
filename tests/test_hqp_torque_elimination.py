"""The HQP controller in q̈ alone (τ eliminated through the dynamics) against the 2 nv form and cvxpy.

Eliminating τ = M q̈ + c leaves every level's feasible set and cost the same
as functions of q̈, so the torques must agree with

* the same controller in x = [q̈; τ] with the dynamics as hard equalities, and
* an independent optimiser: the stack solved level by level with cvxpy
  (``sim/experiments/lexicographic.py``, Kanoun, Lamiraux & Wieber 2011,
  interior-point solver Clarabel),

on random states that touch the wall, sit near joint limits and saturate
torques. Tolerance 1e-5 N m (the issue's agreement figure).
"""

from __future__ import annotations

import numpy as np
import pytest

import models
from controllers.base import ControllerContext
from controllers.registry import make_controller
from models.records import Measurement

pytest.importorskip("cvxpy")
from sim.experiments.lexicographic import controller_lexicographic, controller_rows  # noqa: E402

TOL_NM = 1e-5
WALL = (("wall_plane", {"point_m": (0.40, 0.0, 0.0), "normal": (1.0, 0.0, 0.0), "law": (600.0, 5.0)}),)


def _context():
    arm = models.build_exo()
    cuffs = {"upper_arm": "exo_cuff_upper_arm", "forearm": "exo_cuff_forearm", "hand": "exo_cuff_hand"}
    return arm, ControllerContext(arm=arm, cuff_frames=cuffs)


def _states(arm, n, seed):
    rng = np.random.default_rng(seed)
    lo, hi = arm.position_limits()
    for k in range(n):
        q = rng.uniform(lo, hi)
        if k % 3 == 0:  # close to a joint limit, moving towards it
            j = rng.integers(7)
            q[j] = hi[j] - 0.03
        dq = rng.normal(scale=1.0, size=7)
        w = {c: rng.normal(scale=15.0 if k % 4 == 0 else 3.0, size=6) for c in ("upper_arm", "forearm", "hand")}
        yield Measurement(0.0, q, dq, np.zeros(7), w)


def test_eliminated_torque_form_gives_the_torques_of_the_two_nv_form_and_of_cvxpy():
    arm, ctx = _context()
    fast = make_controller("walls", walls=WALL)
    full = make_controller("walls", walls=WALL)
    full.eliminate_torque = False
    ref = make_controller("walls", walls=WALL)
    for c in (fast, full, ref):
        c.reset(ctx)
    touched = saturated = 0
    for m in _states(arm, 12, seed=7):
        tau_fast = fast.step(m)
        tau_full = full.step(m)
        rows = controller_rows(ref, m)
        tau_cvx = controller_lexicographic(rows)[7:]
        assert fast.diagnostics()["fallback"] == 0.0 and full.diagnostics()["fallback"] == 0.0
        assert np.abs(tau_fast - tau_full).max() < TOL_NM
        assert np.abs(tau_fast - tau_cvx).max() < TOL_NM
        assert np.all(np.abs(tau_fast) <= arm.model.effortLimit)
        touched += bool(rows.levels[1][0])
        saturated += bool(np.any(np.abs(tau_cvx) > arm.model.effortLimit - 1e-6))
    assert touched >= 1  # the wall row took part at least once
    assert saturated >= 1  # and a torque limit bound


def test_a_task_row_on_the_torques_is_carried_through_the_elimination():
    # gravity as a torque task (A acts on tau only): tau = g(q) exactly in both forms
    from controllers.hqp import HQPController
    from controllers.tasks import GravityTorque, JointDamping

    arm, ctx = _context()
    rng = np.random.default_rng(3)
    for eliminate in (True, False):
        c = HQPController([[GravityTorque()], [JointDamping()]], eliminate_torque=eliminate)
        c.reset(ctx)
        q = rng.uniform(*arm.position_limits())
        m = Measurement(0.0, q, np.zeros(7), np.zeros(7), {k: np.zeros(6) for k in ("upper_arm", "forearm", "hand")})
        tau = c.step(m)
        import pinocchio as pin

        g = pin.computeGeneralizedGravity(arm.model, arm.model.createData(), q)  # pinocchio's RNEA gravity
        np.testing.assert_allclose(tau, g, atol=1e-8)


def test_working_set_step_gives_the_backends_torques_and_is_used():
    # the checked active-set step replaces backend calls; it must give the backend's answer (and cvxpy's, above)
    from controllers.hqp import HQPParams

    arm, ctx = _context()
    step = make_controller("walls", walls=WALL)
    backend = make_controller("walls", walls=WALL)
    backend.params = HQPParams(working_set_step=False)
    for c in (step, backend):
        c.reset(ctx)
    used = fewer_calls = 0
    for m in _states(arm, 12, seed=21):
        tau_step, tau_backend = step.step(m), backend.step(m)
        assert np.abs(tau_step - tau_backend).max() < TOL_NM
        used += "working-set" in step.last_result.level_methods
        assert "working-set" not in backend.last_result.level_methods
        # the logged diagnostic is the tick's count of backend calls (bookkeeping: a check of mechanism)
        for c in (step, backend):
            assert c.diagnostics()["qp_solves"] == c.last_result.qp_solves
        fewer_calls += step.diagnostics()["qp_solves"] < backend.diagnostics()["qp_solves"]
    assert used >= 1 and fewer_calls >= 1


def test_a_users_inequality_beside_an_equality_task_gives_the_torques_of_cvxpy_without_the_backend():
    # A joint-speed cap written as a user's task in the transparency level: a level with both kinds of rows, whose
    # inequality binds on the random states' fast joints. Every tick against cvxpy (level by level, Kanoun et al.
    # 2011); the ticks whose level the working-set step solves make no call of the QP backend.
    from controllers.hqp import HQPController
    from controllers.tasks import JointDamping, JointPositionLimits, Task, Transparency

    class SpeedCap(Task):
        """|q'| <= 1.5 rad/s one tick ahead: ±q̈ <= (1.5 ∓ q') / dt."""

        name, kind = "speed_cap", "ineq"

        def rows(self, state):
            n, dt = state.nv, state.dt_s
            C = np.zeros((2 * n, 2 * n))
            C[:n, :n], C[n:, :n] = np.eye(n), -np.eye(n)
            return C, np.concatenate([(1.5 - state.dq) / dt, (1.5 + state.dq) / dt])

    def levels():
        return [[JointPositionLimits()], [Transparency(), SpeedCap()], [JointDamping()]]

    arm, ctx = _context()
    ctrl, ref = HQPController(levels()), HQPController(levels())
    ctrl.reset(ctx)
    ref.reset(ctx)
    by_step = 0
    for m in _states(arm, 8, seed=23):
        tau = ctrl.step(m)
        rows = controller_rows(ref, m)
        assert np.abs(tau - controller_lexicographic(rows)[7:]).max() < TOL_NM
        if ctrl.last_result.level_methods[1] == "working-set":
            by_step += 1
            C, d, _ = rows.levels[1][1][0]  # the cap's rows on [q̈; τ]; the solver's x is q̈
            assert np.any(C[:, :7] @ ctrl.last_result.x > d + 1e-9)  # the cap binds: some speed stays above it
            assert ctrl.diagnostics()["qp_solves"] == 0.0
    assert by_step >= 3


def _follows_cvxpy(make_levels, seed, ticks=6):
    """Step an HQP controller of ``make_levels()`` through random states, each tick against cvxpy's torques.

    A second controller of the same levels gives cvxpy its rows (their tasks keep their own state). Returns
    the stepped controller.
    """
    from controllers.hqp import HQPController

    arm, ctx = _context()
    ctrl, ref = HQPController(make_levels()), HQPController(make_levels())
    ctrl.reset(ctx)
    ref.reset(ctx)
    for m in _states(arm, ticks, seed=seed):
        tau = ctrl.step(m)
        tau_cvx = controller_lexicographic(controller_rows(ref, m))[7:]
        assert ctrl.diagnostics()["fallback"] == 0.0
        assert np.abs(tau - tau_cvx).max() < TOL_NM
    return ctrl


def test_rows_that_outgrow_the_stack_buffers_give_the_torques_of_cvxpy():
    # a task whose number of rows changes from tick to tick, up to more than the controller's first buffers
    # hold, between the limits and transparency: the stack is regrown and every tick still matches cvxpy
    from controllers.tasks import JointDamping, JointPositionLimits, Task, Transparency

    class ManyPostureRows(Task):
        """k copies of the rows q̈ = -q' (the same least-squares optimum whatever k), weight 0.1."""

        name, kind, weight = "many_rows", "eq", 0.1

        def __init__(self):
            self.k, self.sizes = 0, []

        def rows(self, state):
            self.k = (self.k + 37) % 150 + 1
            self.sizes.append(7 * self.k)
            A = np.zeros((self.k * 7, 14))
            A[:, :7] = np.tile(np.eye(7), (self.k, 1))
            return A, np.tile(-state.dq, self.k)

    ctrl = _follows_cvxpy(lambda: [[JointPositionLimits()], [ManyPostureRows()], [Transparency()], [JointDamping()]],
                          seed=11)
    sizes = ctrl.levels[1][0].sizes
    assert max(sizes) > 64 and len(set(sizes)) > 1  # beyond the first buffers (64 rows), and changing


def test_constant_rows_kept_in_place_follow_a_task_that_comes_and_goes():
    # a task above constant-row tasks returns rows only on some ticks, so the constant rows below it move in the
    # stack from tick to tick (and back); the torques still match cvxpy's at every tick
    from controllers.tasks import JointDamping, JointVelocityLimits, Task, Transparency

    class EveryOtherTick(Task):
        """q̈_0 = 0 on every other tick (weight 0.5), nothing on the others."""

        name, kind, weight = "every_other_tick", "eq", 0.5

        def __init__(self):
            self.ticks = 0

        def rows(self, state):
            self.ticks += 1
            if self.ticks % 2:
                return None
            A = np.zeros((1, 14))
            A[0, 0] = 1.0
            return A, np.zeros(1)

    ctrl = _follows_cvxpy(lambda: [[JointVelocityLimits()], [EveryOtherTick(), JointDamping(weight=0.2)],
                                   [Transparency()], [JointDamping()]], seed=17, ticks=8)
    assert ctrl.levels[1][0].ticks == 8


def test_the_result_read_after_a_tick_is_the_solvers_result_of_that_ticks_stack(monkeypatch):
    # The controller builds a tick's result record only when last_result is read. A check of mechanism: the
    # record must be the one HierarchySolver.solve gives for the same stack (itself checked against cvxpy
    # above and in test_hierarchy_solver.py), and the diagnostics must hold its per-level figures.
    from controllers.hqp import HierarchySolver

    arm, ctx = _context()
    ctrl = make_controller("walls", walls=WALL)
    ctrl.reset(ctx)
    seen = []
    real = HierarchySolver.solve_compiled

    def recording(self, stack, G, h):
        out = real(self, stack, G, h)
        seen.append((stack, G.copy(), h.copy(), out is not None))
        return out

    monkeypatch.setattr(HierarchySolver, "solve_compiled", recording)
    kernel_ticks = 0
    for m in _states(arm, 12, seed=5):
        ctrl.step(m)
        stack, G, h, by_kernel = seen[-1]
        kernel_ticks += by_kernel
        got = ctrl.last_result
        assert ctrl.last_result is got  # built once
        ref = HierarchySolver(arm.nv, ctrl.solver, params=ctrl.params).solve(stack, G, h, name="torque limits")
        np.testing.assert_array_equal(got.x, ref.x)
        np.testing.assert_array_equal(got.level_residuals, ref.level_residuals)
        assert got.level_methods == ref.level_methods and got.free_dims == ref.free_dims
        for (e_got, v_got), (e_ref, v_ref) in zip(got.level_slacks, ref.level_slacks):
            np.testing.assert_array_equal(e_got, e_ref)
            np.testing.assert_array_equal(v_got, v_ref)
        assert not got.x.flags.writeable and got.solve_time_s > 0.0
        d = ctrl.diagnostics()
        for i in range(len(ctrl.levels)):
            assert d[f"residual_{i}"] == got.level_residuals[i]
            assert d[f"level_{i}_time_s"] == got.level_times_s[i]
    assert kernel_ticks >= 1  # the deferred record was exercised
