"""``sim.Simulation``: a run tick by tick or whole, in memory, from a notebook or a script.

The reference is the run folder :func:`sim.loop.simulate` writes for the same scenario, controller and seed, read
back with :func:`sim.load_run`: the rows kept in memory must equal it to the bit, since the loop's arithmetic
and its order are the same whichever way the rows go (in memory, or streamed to the log).
"""

from __future__ import annotations

import dataclasses

import numpy as np
import pytest
from _scenario_files import write_scenario

from controllers.base import Controller
from controllers.registry import make_controller
from models.errors import ParameterError
from sim import Simulation, SimulationError, Trajectory, load_run, load_scenario, simulate
from sim.loop.runlog import RunLog

SEED = 3


@pytest.fixture(scope="module")
def scenario(tmp_path_factory):
    d = tmp_path_factory.mktemp("api")
    return load_scenario(write_scenario(d / "api.py", duration_s="0.25",
                                        controllers='("gravity", "transparent", "zero")'))


@pytest.fixture(scope="module")
def reference(scenario, tmp_path_factory):
    """The run folders sim.loop.simulate writes: the "transparent" variant, and the human-alone baseline."""
    d = tmp_path_factory.mktemp("reference")
    simulate(scenario, "transparent", d / "run", seed=SEED)
    simulate(scenario, "transparent", d / "base", seed=SEED, mode="human_alone")
    return load_run(d / "run"), load_run(d / "base")


def notebook_controller() -> Controller:
    """A controller object built in code, as in a notebook: the class of the shipped ``transparent`` variant
    (taken from the registry, wherever the class lives) with fresh tasks of the same classes and defaults."""
    shipped = make_controller("transparent")
    return type(shipped)([[type(task)() for task in level] for level in shipped.levels], name="notebook")


def assert_same_arrays(arrays, reference_arrays):
    assert set(arrays) == set(reference_arrays)
    for name, ref in reference_arrays.items():
        a = np.asarray(arrays[name])
        assert a.dtype == ref.dtype and a.shape == ref.shape, name
        assert np.array_equal(a, ref, equal_nan=True), f"column {name} differs"


def test_a_controller_object_built_in_code_gives_the_run_simulate_writes_to_the_bit(scenario, reference):
    run, _ = reference
    trajectory = Simulation(scenario, notebook_controller(), seed=SEED).run()
    assert isinstance(trajectory, Trajectory) and trajectory.ticks == scenario.n_ticks == run.ticks
    assert_same_arrays(trajectory.arrays, run.arrays)
    np.testing.assert_array_equal(trajectory.t_s, np.arange(scenario.n_ticks) * scenario.control_period_s)
    assert trajectory.meta["controller"] == "notebook" and trajectory.meta["seed"] == SEED
    for key in ("scenario", "mode", "dt_s", "substeps", "n_ticks_planned", "cuffs", "exo_joints", "models"):
        assert trajectory.meta[key] == run.meta[key], key
    # by name, as the command line gives it: the same rows
    assert_same_arrays(Simulation(scenario, "transparent", seed=SEED).run().arrays, run.arrays)


def test_the_human_alone_baseline_in_memory_is_the_one_simulate_writes(scenario, reference):
    _, base = reference
    trajectory = Simulation(scenario, None, seed=SEED, mode="human_alone").run()
    assert trajectory.meta["controller"] is None
    assert_same_arrays(trajectory.arrays, base.arrays)


def test_reset_with_a_seed_gives_the_same_run_again_and_another_seed_another(scenario):
    sim = Simulation(scenario, notebook_controller())  # the same controller object, reset with the run
    sim.reset(seed=7)
    first = sim.run()
    kept = {k: v.copy() for k, v in first.arrays.items()}
    sim.reset(seed=7)
    second = sim.run()
    assert sim.seed == 7 and second.meta["seed"] == 7
    assert_same_arrays(second.arrays, kept)
    assert_same_arrays(first.arrays, kept)  # a later run leaves an earlier trajectory as it was
    sim.reset(seed=8)
    other = sim.run()
    # the sensors' noise comes from the seed: the measured cuff wrenches differ, the columns stay the same
    assert set(other.arrays) == set(kept)
    assert not np.array_equal(other.arrays["cuff_wrench_meas"], kept["cuff_wrench_meas"])
    with pytest.raises(ValueError):  # the rows are read-only
        first.arrays["tau_cmd"][0, 0] = 1.0


def test_n_steps_are_the_first_n_rows_of_the_run(scenario):
    n = 37
    sim = Simulation(scenario, "gravity", seed=2)
    rows = [sim.step() for _ in range(n)]
    assert sim.ticks == n and sim.t_s == pytest.approx(n * scenario.control_period_s)
    whole = Simulation(scenario, "gravity", seed=2).run()
    assert set(rows[0]) == set(whole.arrays)
    for name, column in whole.arrays.items():
        stepped = np.stack([np.asarray(r[name]) for r in rows])
        assert stepped.dtype == column.dtype
        assert np.array_equal(stepped, column[:n], equal_nan=True), name
    # and the rest of the run after the steps: the whole run
    assert_same_arrays(sim.run().arrays, whole.arrays)
    with pytest.raises(SimulationError, match="over"):
        sim.step()


def test_run_for_a_duration_goes_on_from_where_it_is(scenario):
    whole = Simulation(scenario, "zero", seed=1).run()
    sim = Simulation(scenario, "zero", seed=1)
    part = sim.run(0.1)
    assert part.ticks == round(0.1 / scenario.control_period_s)
    assert_same_arrays(part.arrays, {k: v[:part.ticks] for k, v in whole.arrays.items()})
    assert_same_arrays(sim.run(10.0).arrays, whole.arrays)  # up to the scenario's end, no further


def test_save_writes_the_run_folder_that_load_run_reads_back(scenario, reference, tmp_path):
    run, _ = reference
    trajectory = Simulation(scenario, notebook_controller(), seed=SEED).run()
    folder = trajectory.save(tmp_path / "saved")
    saved = load_run(folder)
    assert_same_arrays(saved.arrays, trajectory.arrays)
    assert_same_arrays(saved.arrays, run.arrays)
    assert saved.meta["status"] == "complete" and saved.ticks == scenario.n_ticks
    assert saved.meta["controller"] == "notebook" and saved.meta["seed"] == SEED
    assert sorted(p.name for p in folder.iterdir()) == sorted(p.name for p in run.folder.iterdir())
    for name in ("exo.urdf", "human.urdf"):
        assert (folder / name).read_bytes() == (run.folder / name).read_bytes()
    with np.load(folder / "timing.npz") as f:
        assert len(f["tick_time_s"]) == scenario.n_ticks


def test_a_run_streamed_to_a_log_is_what_simulate_writes(scenario, reference, tmp_path):
    run, _ = reference
    sim = Simulation(scenario, "transparent", seed=SEED)
    with RunLog(tmp_path / "streamed", sim.columns, metadata=sim.meta) as log:
        trajectory = sim.run(log=log)
    assert trajectory.folder == tmp_path / "streamed"
    assert_same_arrays(load_run(tmp_path / "streamed").arrays, run.arrays)
    assert_same_arrays(trajectory.arrays, run.arrays)  # read back from the log's folder


class _NaNAfter(Controller):
    """Zero torque, then NaN from t = 5 ms on."""

    name = "nan_after"

    def step(self, measurement):
        return np.full(self.context.arm.nv, np.nan if measurement.t_s >= 0.005 else 0.0)


def test_a_run_that_cannot_go_on_names_the_tick_and_keeps_its_rows(scenario):
    # without the safety monitor, which would command its safe state instead (tests/test_safety.py)
    sim = Simulation(dataclasses.replace(scenario, safety=None), _NaNAfter(), seed=SEED)
    with pytest.raises(SimulationError, match=r"'nan_after'.*t = 0\.0050 s"):
        sim.run()
    assert sim.trajectory.ticks == 5 and np.all(np.isfinite(sim.trajectory.arrays["q_exo"]))
    with pytest.raises(SimulationError, match="reset"):
        sim.step()
    sim.reset()
    assert sim.ticks == 0 and sim.step()["t"] == 0.0


@pytest.mark.parametrize("kwargs,match", [
    ({"mode": "both"}, "mode must be one of coupled, human_alone, exo_alone, got 'both'"),
    ({"controller": 3}, "controller must be a Controller object or a variant name"),
    ({"seed": -1}, "seed must be an integer >= 0, got -1"),
    ({"seed": 1.5}, "seed must be an integer >= 0, got 1.5"),
])
def test_bad_arguments_are_named(scenario, kwargs, match):
    args = {"controller": "gravity", **kwargs}
    with pytest.raises(ParameterError, match=match):
        Simulation(scenario, args.pop("controller"), **args)


def test_bad_uses_are_named(scenario, tmp_path):
    with pytest.raises(ParameterError, match="Scenario"):
        Simulation("scenarios/reach.py", "gravity")
    sim = Simulation(scenario, "gravity")
    with pytest.raises(ParameterError, match="duration_s must be a finite number of seconds > 0, got 0"):
        sim.run(0)
    sim.step()
    with RunLog(tmp_path / "log", sim.columns, metadata=sim.meta) as log:
        with pytest.raises(SimulationError, match=r"right after reset\(\)"):
            sim.run(log=log)
