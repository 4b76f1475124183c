"""The pieces of ``exosandbox bench`` on tiny inputs (no speed is asserted anywhere).

* Order statistics of the tick times against numpy's own median and
  percentile (linear interpolation, Hyndman & Fan 1996 definition 7, numpy's
  default).
* The replay of a run's logged measurements reproduces the logged torques bit
  for bit (the benchmark's comparisons really run on the run's ticks).
* The tick breakdown's stages add up to the mean tick of its timing file
  (an identity of the own-time accounting), and the instrumented run logs
  the same numbers as an uninstrumented one (the timers change nothing).
* The level-by-level cvxpy formulation agrees with our solver on a few ticks
  (cvxpy with Clarabel as the independent optimiser).
* The user's-task case compares like with like: its Python task (a ceiling
  out of reach) never binds, so every run commands the same torques (to
  1e-9 N m, rounding of the extra row's solve; common practice), and the
  task's rows were asked for on every tick of its runs.
* The machine's two-process speedup (:class:`sim.experiments.bench.TwoWarmProcesses`)
  times runs of its own: mechanism checks (each timed run is a complete sweep
  case on a seed of its own; the speedup is the ratio of the times it
  reports).
"""

from __future__ import annotations

import dataclasses
from pathlib import Path

import numpy as np
import pytest

from controllers.registry import make_controller
from models.errors import ParameterError
from sim.cli import main
from sim.experiments.bench import (
    BenchParams,
    TwoWarmProcesses,
    chain_tick_times,
    compare_cvxpy,
    level_stacks,
    measurements_from_run,
    pinocchio_time,
    replay,
    tick_breakdown,
    tick_statistics,
    user_task_cost,
)
from sim.loop.runlog import load_run
from sim.loop.scenario import load_scenario
from sim.loop.simulate import simulate
from sim.loop.simulation import build_assembly, controller_context

SCENARIOS = Path(__file__).resolve().parents[1] / "scenarios"


@pytest.fixture(scope="module")
def short_wall_run(tmp_path_factory):
    sc = dataclasses.replace(load_scenario(SCENARIOS / "wall_push.py"), duration_s=0.05)
    folder = tmp_path_factory.mktemp("bench") / "run"
    simulate(sc, "walls", folder)
    return sc, folder


def test_tick_statistics_are_the_median_and_99th_percentile_of_the_timing_file(tmp_path):
    tick = np.arange(1, 101) * 1e-6  # 1 .. 100 us
    solve = tick / 2
    rows = tick / 4
    np.savez(tmp_path / "timing.npz", tick_time_s=tick, controller_time_s=solve, diag_solve_time_s=solve,
             diag_rows_time_s=rows)
    st = tick_statistics(tmp_path, 1e-3)
    assert st["tick_time_median_us"] == pytest.approx(50.5)  # mean of the 50th and 51st values
    assert st["tick_time_p99_us"] == pytest.approx(99.01)  # 1 + 0.99 * 99, definition 7
    assert st["hqp_solve_median_us"] == pytest.approx(25.25)
    assert st["task_rows_median_us"] == pytest.approx(12.625)
    # a tick whose rows failed has no solve time (NaN): the statistics leave it out
    solve[-1] = np.nan
    np.savez(tmp_path / "timing.npz", tick_time_s=tick, controller_time_s=solve, diag_solve_time_s=solve)
    st = tick_statistics(tmp_path, 1e-3)
    assert st["hqp_solve_median_us"] == pytest.approx(25.0) and st["task_rows_median_us"] is None
    assert st["realtime_factor"] == pytest.approx(100 * 1e-3 / tick.sum())


def test_replaying_a_runs_measurements_reproduces_its_logged_torques(short_wall_run):
    sc, folder = short_wall_run
    meas = measurements_from_run(folder)
    ctx = controller_context(build_assembly(sc), sc.control_period_s)
    tau, times = replay(make_controller("walls", sc.variants, sc.walls), ctx, meas)
    logged = load_run(folder)["tau_cmd"]
    assert len(meas) == sc.n_ticks
    np.testing.assert_array_equal(tau, logged)
    assert np.all(times > 0)


def test_cvxpy_level_by_level_gives_the_same_torques_on_a_few_ticks(short_wall_run):
    pytest.importorskip("cvxpy")
    sc, folder = short_wall_run
    out = compare_cvxpy(sc, folder, ticks=4, agreement_tol_Nm=1e-5)
    assert out["cvxpy_ticks"] == 4
    assert out["cvxpy_max_torque_diff_Nm"] < 1e-5


def test_level_series_stacks_grow_by_one_level_in_the_documented_order():
    sc = load_scenario(SCENARIOS / "wall_push.py")
    stacks = level_stacks(sc)
    assert list(stacks) == [f"levels{k}" for k in range(1, 7)]
    assert [len(v) for v in stacks.values()] == [1, 2, 3, 4, 5, 6]
    assert stacks["levels6"][2][0][0] == "wall_plane" and stacks["levels6"][5][0][0] == "posture"
    for name in stacks:  # every stack builds into a controller
        make_controller(name, stacks)


def test_chain_ticks_run_the_hqp_stack_without_a_fallback(tmp_path):
    out = chain_tick_times(14, 5, tmp_path / "chain")
    assert out["joints"] == 14 and out["fallbacks"] == 0
    assert out["tick_time_median_us"] > 0
    assert load_run(tmp_path / "chain")["q"].shape == (5, 14)


@pytest.mark.parametrize("joints", [7, 28])
def test_every_chain_gets_the_torque_to_hold_its_own_weight(tmp_path, joints):
    # reference: the static joint torques at the start pose from pinocchio's RNEA with zero velocity and
    # acceleration (Featherstone 2008, section 5.3); with a fixed 40 N m, 28 links of 0.4 kg could not hold
    # themselves, every level went to the QP backend and the series compared a saturated chain
    import pinocchio as pin

    from models.chain import ChainParams, build_chain

    arm = build_chain(ChainParams(n_joints=joints))
    q0 = np.full(arm.nq, 0.3)
    static = pin.rnea(arm.model, arm.model.createData(), q0, np.zeros(arm.nv), np.zeros(arm.nv))
    out = chain_tick_times(joints, 5, tmp_path / "chain")
    assert out["torque_limit_Nm"] >= max(ChainParams().torque_limit_Nm, 2.0 * np.abs(static).max())
    assert out["torque_limit_Nm"] < max(ChainParams().torque_limit_Nm, 2.0 * np.abs(static).max()) + 10.0
    assert out["qp_backend_ticks"] == 0 and out["fallbacks"] == 0


@pytest.mark.parametrize(("kwargs", "field"), [
    ({"reference_duration_s": 0.0}, "reference_duration_s"),
    ({"compare_ticks": 0}, "compare_ticks"),
    ({"chain_joints": (7, 0)}, "chain_joints"),
    ({"sweep_subjects": ()}, "sweep_subjects"),
    ({"sweep_repeats": 0}, "sweep_repeats"),
])
def test_bad_bench_parameters_name_the_field(kwargs, field):
    with pytest.raises(ParameterError, match=f"BenchParams.{field}"):
        BenchParams(**kwargs)


def test_bench_command_names_a_missing_scenario_file(tmp_path, capsys):
    assert main(["bench", "--quick", "--scenario", str(tmp_path / "nope.py")]) == 1
    assert "nope.py" in capsys.readouterr().err


def test_pinocchio_time_counts_every_algorithm_call_and_changes_no_number(short_wall_run, tmp_path):
    # references: the plant's substep (one forward kinematics, one aba, one integrate each; sim.physics.plant docstring)
    # and TickState.update (forward kinematics, joint Jacobians, frame placements, crba, Cholesky, M^-1, h, g and
    # one Jacobian per cuff): at least 4 * 3 + 8 + 3 calls per tick
    import pinocchio as pin

    sc, folder = short_wall_run
    aba, minv = pin.aba, pin.cholesky.computeMinv
    out = pinocchio_time(sc, tmp_path / "instrumented")
    assert pin.aba is aba and pin.cholesky.computeMinv is minv  # the timers are removed afterwards
    assert out["pinocchio_calls_per_tick"] >= 4 * 3 + 8 + 3
    with np.load(tmp_path / "instrumented" / "timing.npz") as f:
        mean_tick_us = float(np.mean(f["tick_time_s"]) * 1e6)
    assert 0.0 < out["pinocchio_us_per_tick"] < mean_tick_us  # a part of the tick it was measured in
    plain, timed = load_run(folder), load_run(tmp_path / "instrumented")
    for name in plain.arrays:
        np.testing.assert_array_equal(timed[name], plain[name], err_msg=name)


def test_tick_breakdown_stages_add_up_to_the_mean_tick_and_change_no_number(short_wall_run, tmp_path):
    import sim.physics.plant

    sc, folder = short_wall_run
    advance = sim.physics.plant.CoupledPlant.__dict__["advance"]
    out = tick_breakdown(sc, tmp_path / "instrumented")
    assert sim.physics.plant.CoupledPlant.__dict__["advance"] is advance  # the timers are removed afterwards
    stages = [k for k in out if k not in ("rest of the loop", "tick (mean, instrumented)")]
    assert len(stages) == 7 and all(out[k] > 0 for k in stages)
    with np.load(tmp_path / "instrumented" / "timing.npz") as f:
        mean_tick_us = float(np.mean(f["tick_time_s"]) * 1e6)
    assert sum(out[k] for k in stages) + out["rest of the loop"] == pytest.approx(mean_tick_us, rel=1e-9)
    assert out["tick (mean, instrumented)"] == pytest.approx(mean_tick_us, rel=1e-12)
    plain, timed = load_run(folder), load_run(tmp_path / "instrumented")
    for name in plain.arrays:
        np.testing.assert_array_equal(timed[name], plain[name], err_msg=name)


def test_two_warm_processes_time_whole_sweep_cases_each_on_a_seed_of_its_own(tmp_path):
    # mechanism check: one measurement is one case alone, then two at once; every timed case simulates its own
    # human-alone baseline (a seed used once), and the speedup is 2 t1 / t2 of the times it reports
    with TwoWarmProcesses(SCENARIOS / "wall_push.py", "m50", "walls", 0.05, tmp_path) as warm:
        out = warm.measure()
    assert out["one_s"] > 0 and out["two_s"] > 0
    assert out["speedup"] == pytest.approx(2.0 * out["one_s"] / out["two_s"], rel=1e-15)
    folders = sorted(p for p in tmp_path.iterdir() if p.is_dir())
    assert len(folders) == 2 + 3  # the two warm-up runs, then 1 + 2 timed runs
    assert len({p.name for p in folders}) == len(folders)
    for f in folders:
        assert (f / "metrics.json").is_file() and (f / "human_alone" / "log").is_dir()


def test_two_warm_processes_refuse_a_controller_the_scenario_does_not_list(tmp_path):
    from models.errors import UnknownNameError

    with pytest.raises(UnknownNameError, match="nonesuch"):
        TwoWarmProcesses(SCENARIOS / "wall_push.py", "m50", "nonesuch", 0.05, tmp_path)


def test_two_warm_processes_report_a_worker_that_died(tmp_path):
    # mechanism check: a killed worker is a BenchError naming it, not a hang or a bare EOFError
    from sim.experiments.bench import BenchError

    with TwoWarmProcesses(SCENARIOS / "wall_push.py", "m50", "walls", 0.05, tmp_path) as warm:
        proc, _conn = warm._workers[1]
        proc.kill()
        proc.join()
        with pytest.raises(BenchError, match="worker process stopped"):
            warm.measure()


def test_user_task_case_runs_the_same_motion_with_and_without_the_python_task(tmp_path, monkeypatch):
    from sim.experiments import bench

    sc = dataclasses.replace(load_scenario(SCENARIOS / "wall_push.py"), duration_s=0.05)
    calls, real = [], bench.PythonHandCeiling.rows

    def counted(self, state):
        calls.append(state.measurement.t_s)
        return real(self, state)

    monkeypatch.setattr(bench.PythonHandCeiling, "rows", counted)
    out = user_task_cost(sc, tmp_path, repeats=2)
    assert [(u["stack"], u["runs"]) for u in out] == [("walls", 2), ("walls + a task in Python", 2)]
    assert all(u["tick_time_median_us"] > 0 and u["task_rows_median_us"] > 0 for u in out)
    assert len(calls) == 2 * sc.n_ticks
    base = load_run(tmp_path / "stack0_run0")["tau_cmd"]
    for run in ("stack0_run1", "stack1_run0", "stack1_run1"):
        np.testing.assert_allclose(load_run(tmp_path / run)["tau_cmd"], base, rtol=0, atol=1e-9)
