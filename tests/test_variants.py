"""The shipped controller variants in their scenarios, and the HQP controller's own guarantees.

Known answers: the closed form of force-feedback transparency derived from
the dynamics (see controllers.tasks.Transparency); the commanded wall
law (rendered stiffness within 15 % of the commanded one, the figure the
issue sets); the fallback law tau = g(q) - D dq.
"""

from __future__ import annotations

import dataclasses
from pathlib import Path

import numpy as np
import pytest

import models
from controllers import ControllerContext
from controllers.hqp import HQPController
from controllers.registry import build_levels, make_controller
from controllers.tasks import JointDamping, Task, Transparency
from models.errors import ParameterError, UnknownNameError
from models.records import Measurement
from sim import load_run, simulate
from sim.analysis.derived import cuff_columns
from sim.analysis.metrics import joint_limit_violation_count, wall_metrics
from sim.experiments.run import run_scenario
from sim.loop.scenario import load_scenario

SCENARIOS = Path(__file__).resolve().parents[1] / "scenarios"


@pytest.fixture(scope="module")
def reach_runs(tmp_path_factory):
    sc = load_scenario(SCENARIOS / "reach.py")
    sc = dataclasses.replace(sc, controllers=("gravity", "transparent"))
    root = tmp_path_factory.mktemp("reach")
    return {c: run_scenario(sc, c, root / c).metrics for c in ("gravity", "transparent")}


def test_transparent_lowers_reach_interaction_force_by_at_least_40_percent_against_gravity(reach_runs):
    # closed-loop compensation of about half the robot's inertia (the practitioners' figure)
    g, t = reach_runs["gravity"]["interaction_force_rms_N"], reach_runs["transparent"]["interaction_force_rms_N"]
    assert t <= 0.6 * g


@pytest.mark.parametrize("stiffness", [300.0, 1000.0])
def test_walls_render_the_commanded_stiffness_within_15_percent_without_joint_limit_violations(tmp_path, stiffness):
    sc = load_scenario(SCENARIOS / "wall_push.py")
    spec = dict(sc.walls[0][1])
    spec["law"] = (stiffness, 5.0)
    sc = dataclasses.replace(sc, walls=(("wall_plane", spec),))
    simulate(sc, "walls", tmp_path / "run")
    run = load_run(tmp_path / "run")
    lo, hi = models.assemble("m50").exo.position_limits()
    m = wall_metrics(run.arrays | cuff_columns(run), point_m=spec["point_m"], normal=spec["normal"],
                     stiffness_N_per_m=stiffness, hand_cuff=run.meta["cuffs"].index("hand"), dt_s=sc.control_period_s)
    assert m["wall_stiffness_rendered_N_per_m"] == pytest.approx(stiffness, rel=0.15)
    assert joint_limit_violation_count(run["q_exo"], lo, hi) == 0
    assert m["wall_penetration_max_m"] > 0.01  # the wearer really pushed into it
    assert np.count_nonzero(run["diag_fallback"]) == 0


def _context():
    arm = models.build_exo()
    return arm, ControllerContext(arm=arm, cuff_frames={"hand": "exo_cuff_hand", "forearm": "exo_cuff_forearm"})


def test_transparency_level_gives_the_closed_form_force_feedback_torque():
    # alpha M qdd = sum J^T w with M qdd + h = tau + sum J^T w  =>  tau = h + (1 - alpha)/alpha sum J^T w
    arm, ctx = _context()
    ctrl = HQPController([[Transparency(inertia_compensation=0.5)], [JointDamping()]])
    ctrl.reset(ctx)
    rng = np.random.default_rng(41)
    for _ in range(10):
        q = rng.uniform(*arm.position_limits())
        dq = rng.normal(scale=0.3, size=7)
        w = {"hand": rng.normal(scale=3.0, size=6), "forearm": rng.normal(scale=3.0, size=6)}
        tau = ctrl.step(Measurement(0.0, q, dq, np.zeros(7), w))
        s = ctrl.state
        expected = s.h + 1.0 * s.cuff_force  # (1 - 0.5) / 0.5 = 1
        assert np.all(np.abs(expected) < arm.model.effortLimit)  # no saturation in this check
        assert np.allclose(tau, expected, atol=1e-5 * max(1.0, np.abs(expected).max()))


class _GlitchTask(Transparency):
    """A task whose rows turn non-finite, as after a sensor glitch."""

    name = "glitch"

    def rows(self, state):
        A, b = super().rows(state)
        return A, b * np.nan


def test_failed_solve_falls_back_to_gravity_plus_damping_and_is_counted():
    arm, ctx = _context()
    ctrl = HQPController([[_GlitchTask()]], fallback_damping_Nm_s_per_rad=2.0)
    ctrl.reset(ctx)
    q = np.radians([60, 20, 10, 70, 20, 10, 0])
    dq = np.full(7, 0.1)
    tau = ctrl.step(Measurement(0.0, q, dq, np.zeros(7), {"hand": np.zeros(6), "forearm": np.zeros(6)}))
    import pinocchio as pin

    g = pin.computeGeneralizedGravity(arm.model, arm.model.createData(), q)
    assert np.allclose(tau, g - 2.0 * dq, atol=1e-12)
    assert ctrl.fallback_count == 1 and ctrl.diagnostics()["fallback"] == 1.0
    assert "t = 0.000 s" in ctrl.last_fallback_reason and "glitch" in ctrl.last_fallback_reason


def test_a_variant_declared_by_task_names_and_parameters_builds_the_stack_in_order():
    levels = build_levels([["joint_limits", "velocity_limits"], [("transparency", {"inertia_compensation": 0.3})],
                           ["damping"]], "mine")
    assert [[t.name for t in lv] for lv in levels] == [["joint_limits", "velocity_limits"], ["transparency"],
                                                       ["damping"]]
    assert levels[1][0].c == 0.3
    ctrl = make_controller("mine", {"mine": [["transparency"]]})
    assert isinstance(ctrl, HQPController) and ctrl.name == "mine"


def test_unknown_task_or_parameter_in_a_variant_names_it():
    with pytest.raises(UnknownNameError, match="unknown task 'wal_plane'"):
        build_levels([["wal_plane"]], "typo")
    with pytest.raises(ParameterError, match="task 'transparency'.*stiffness"):
        build_levels([[("transparency", {"stiffness": 3})]], "typo")


def test_wall_push_metrics_json_holds_the_wall_keys_under_walls(tmp_path):
    # the keys the wall_push scenario adds to metrics.json (names exactly as in the issue)
    import json

    sc = load_scenario(SCENARIOS / "wall_push.py")
    run_scenario(sc, "walls", tmp_path / "run")
    m = json.loads((tmp_path / "run" / "metrics.json").read_text())
    for key in ("wall_stiffness_commanded_N_per_m", "wall_stiffness_rendered_N_per_m", "wall_penetration_max_m",
                "joint_limit_violation_count"):
        assert key in m
    assert m["wall_stiffness_commanded_N_per_m"] == 600.0  # scenarios/wall_push.py
    assert m["wall_stiffness_rendered_N_per_m"] == pytest.approx(600.0, rel=0.15)
    assert m["joint_limit_violation_count"] == 0


class _Counting(Task):
    """A user's task that keeps state between ticks (the number of its calls); no rows."""

    name, kind = "counting", "eq"

    def __init__(self):
        self.calls = 0

    def rows(self, state):
        self.calls += 1
        return None


def test_a_task_object_in_a_variant_is_a_template_copied_for_every_controller():
    # mechanism check: a stateful task must not carry its state from one run (or the warm-up) into the next
    template = _Counting()
    variants = {"mine": [[template], ["damping"]]}
    first, second = make_controller("mine", variants), make_controller("mine", variants)
    arm, ctx = _context()
    m = Measurement(0.0, np.radians([60, 20, 10, 70, 20, 10, 0]), np.zeros(7), np.zeros(7),
                    {"hand": np.zeros(6), "forearm": np.zeros(6)})
    for ctrl, ticks in ((first, 3), (second, 1)):
        ctrl.reset(ctx)
        for _ in range(ticks):
            ctrl.step(m)
    assert (first.levels[0][0].calls, second.levels[0][0].calls, template.calls) == (3, 1, 0)


def test_a_task_object_that_cannot_be_copied_is_named():
    import threading

    class Locked(_Counting):
        name = "locked"

        def __init__(self):
            super().__init__()
            self.lock = threading.Lock()

    with pytest.raises(ParameterError, match=r"variant 'mine' level 0: task object 'locked' \(Locked\) cannot be "
                                             r"copied"):
        build_levels([[Locked()], ["damping"]], "mine")
