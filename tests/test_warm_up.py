"""``sim.experiments.run.warm_up``: the compiled kernels are loaded before a run's timed loop, once per batch.

No timing is asserted here (the bench prints figures): these tests check the
mechanism, that the warm-up leaves nothing behind, and that a failing warm-up
changes nothing a user sees.
"""

from __future__ import annotations

import importlib
import re
import tempfile

import pytest
from _scenario_files import write_scenario

from sim.experiments.run import Batch
from sim.loop.scenario import load_scenario
from sim.loop.simulation import SimulationError

simulate_module = importlib.import_module("sim.experiments.run")  # run_scenario, warm_up and the simulate they call


@pytest.fixture()
def fresh(monkeypatch, tmp_path):
    """A temporary folder of this test's own."""
    monkeypatch.setattr(tempfile, "tempdir", str(tmp_path / "tmp"))
    (tmp_path / "tmp").mkdir()
    return tmp_path


def test_warm_up_runs_once_per_scenario_and_controller_and_leaves_nothing(fresh, monkeypatch):
    sc = load_scenario(write_scenario(fresh / "s.py", name='"warm"'))
    batch = Batch()  # an empty registry of warmed pairs
    runs = []
    simulate = simulate_module.simulate

    def counting(scenario, controller, folder, **kw):
        runs.append((scenario.n_ticks, controller))
        return simulate(scenario, controller, folder, **kw)

    monkeypatch.setattr(simulate_module, "simulate", counting)
    assert simulate_module.warm_up(sc, "gravity", batch) > 0.0
    assert simulate_module.warm_up(sc, "gravity", batch) == 0.0  # already warm: nothing run
    assert simulate_module.warm_up(sc, "zero", batch) > 0.0  # another controller is another pair
    assert runs == [(simulate_module.WARM_UP_TICKS, "gravity"), (simulate_module.WARM_UP_TICKS, "zero")]
    assert list((fresh / "tmp").iterdir()) == []  # the throw-away runs are removed


def test_run_scenario_warms_up_before_its_runs_and_keeps_its_folder_as_before(fresh, monkeypatch):
    sc = load_scenario(write_scenario(fresh / "s.py", name='"warm"'))
    order = []
    warm_up, simulate = simulate_module.warm_up, simulate_module.simulate
    monkeypatch.setattr(simulate_module, "warm_up", lambda *a: order.append("warm_up") or warm_up(*a))
    monkeypatch.setattr(simulate_module, "simulate",
                        lambda s, c, folder, **kw: order.append(kw.get("mode", "coupled")) or simulate(s, c, folder,
                                                                                                        **kw))
    result = simulate_module.run_scenario(sc, "gravity", fresh / "out", report=False)
    # the warm-up's own coupled run comes first, then the run and its human-alone baseline
    assert order == ["warm_up", "coupled", "coupled", "human_alone"]
    assert sorted(p.name for p in (fresh / "out").iterdir()) == sorted(
        ["exo.urdf", "human.urdf", "human_alone", "log", "meta.json", "metrics.json", "timing.npz"])
    assert result.metrics["sim_duration_s"] == pytest.approx(sc.duration_s)


def test_a_warm_up_that_fails_is_silent_and_the_run_reports_the_error(fresh, monkeypatch):
    sc = load_scenario(write_scenario(fresh / "s.py", name='"warm"'))
    batch = Batch()
    simulate = simulate_module.simulate

    def failing(scenario, controller, folder, **kw):
        raise SimulationError(f"non-finite plant state in {folder}")

    monkeypatch.setattr(simulate_module, "simulate", failing)
    assert simulate_module.warm_up(sc, "gravity", batch) >= 0.0  # no exception
    assert not batch.warmed("warm", "gravity")  # tried again next time
    with pytest.raises(SimulationError, match=re.escape(str(fresh / "out"))):
        simulate_module.run_scenario(sc, "gravity", fresh / "out", report=False, batch=batch)
    monkeypatch.setattr(simulate_module, "simulate", simulate)
    assert simulate_module.warm_up(sc, "gravity", batch) > 0.0 and batch.warmed("warm", "gravity")


def test_a_controller_loads_at_reset_the_kernel_of_its_rare_qp_ticks_with_their_argument_types(tmp_path,
                                                                                                monkeypatch):
    # a tick on which a level needs the QP backend goes through solve_hierarchy's compiled levels; the controller
    # makes that call at reset (an empty stack in its own buffers), with exactly the argument types of the real
    # ticks, so the first wall contact does not wait for numba to load (or compile) the kernel
    import dataclasses
    from pathlib import Path

    import numba
    import numpy as np

    from controllers.hqp import kernels as hqp_kernels
    from controllers.registry import make_controller
    from sim.experiments.bench import _context_and_measurements

    calls = []
    real = hqp_kernels.solve_levels_fast

    def recording(*args):
        calls.append(tuple(numba.typeof(a) for a in args))
        return real(*args)

    # and the torque read back: every tick, those solved by the kernel and those by the backend alike, hands
    # clipped_torque the same argument types (one compiled signature, loaded by the first tick)
    from controllers.hqp import controller as hqp_controller

    clip_calls = []
    real_clip = hqp_controller.clipped_torque

    def recording_clip(*args):
        clip_calls.append(tuple(numba.typeof(a) for a in args))
        return real_clip(*args)

    monkeypatch.setattr(hqp_controller, "clipped_torque", recording_clip)

    monkeypatch.setattr(hqp_kernels, "solve_levels_fast", recording)
    wall_push = Path(__file__).resolve().parents[1] / "scenarios" / "wall_push.py"
    sc = dataclasses.replace(load_scenario(wall_push), duration_s=1.3)  # the hand meets the wall at about 1.18 s
    simulate_module.simulate(sc, "walls", tmp_path / "run")
    assert len(calls) >= 2, "expected the reset's call and at least one tick that needed the QP backend"
    assert all(c == calls[0] for c in calls[1:])
    assert len(clip_calls) == sc.n_ticks and all(c == clip_calls[0] for c in clip_calls[1:])
    # the reset's call changes nothing: the same torques, to the bit, as a controller that skips it
    context, meas = _context_and_measurements(sc, tmp_path / "run")
    with_preload = make_controller("walls", sc.variants, sc.walls)
    with_preload.reset(context)
    tau = np.array([with_preload.step(m) for m in meas])
    without = make_controller("walls", sc.variants, sc.walls)
    monkeypatch.setattr(type(without), "_preload", lambda self: None)
    without.reset(context)
    assert np.array_equal(tau, np.array([without.step(m) for m in meas]))


def test_a_preload_that_fails_does_not_stop_the_reset(monkeypatch):
    # the preload is best effort: a failure of its trivial solve leaves the controller usable
    from pathlib import Path

    from controllers.hqp import HierarchySolver, QPSolveError
    from controllers.registry import make_controller
    from sim.loop.simulation import build_assembly, controller_context

    sc = load_scenario(Path(__file__).resolve().parents[1] / "scenarios" / "wall_push.py")
    context = controller_context(build_assembly(sc), sc.control_period_s)

    def failing(self, *args):
        raise QPSolveError("backend failed")

    ctrl = make_controller("walls", sc.variants, sc.walls)
    with monkeypatch.context() as m:
        m.setattr(HierarchySolver, "solve_trusted", failing)
        ctrl.reset(context)  # no exception
    assert ctrl.fallback_count == 0 and ctrl.last_result is None
