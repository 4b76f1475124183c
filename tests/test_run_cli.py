"""The ``exosandbox run`` command and the run folder it writes: log, meta.json, metrics.json.

Known answers come from the issue's contract for ``run`` (metric names, units
and definitions, also written in the docstrings of ``sim/analysis/metrics.py``) and
from the 1 ms default control period of ``sim.loop.scenario.Scenario``.
"""

from __future__ import annotations

import contextlib
import dataclasses
import io
import json
import subprocess
import sys
from pathlib import Path
from types import MappingProxyType

import numpy as np
import pytest
from _scenario_files import write_scenario

import sim
from controllers import registry
from controllers.base import Controller
from controllers.registry import CONTROLLERS
from models.records import Measurement
from sim.cli import main
from sim.experiments.run import run_scenario
from sim.loop.scenario import load_scenario
from sim.loop.simulate import simulate

REPO = Path(__file__).resolve().parents[1]
REACH = REPO / "scenarios" / "reach.py"
SEED = 7  # not the scenario's default (0), so that --seed is seen to take effect
DT_S = 1e-3  # default control period (sim/loop/scenario.py)
CUFFS = ("upper_arm", "forearm", "hand")  # default cuffs (models/coupling.py DEFAULT_CUFFS)

METRIC_KEYS = (
    "sim_duration_s", "interaction_force_rms_N", "interaction_force_peak_N", "cuffs",
    "human_effort_rms_Nm", "human_effort_ratio", "path_deviation_rms_rad",
    "torque_saturation_fraction", "tick_time_median_us", "realtime_factor",
)



# ----------------------------------------------------------------------------------------------
# the two reference runs, once per module: gravity through a subprocess, zero through main()
# ----------------------------------------------------------------------------------------------


@pytest.fixture(scope="module")
def gravity_run(tmp_path_factory):
    """``python -m sim.cli run reach.py --controller gravity --seed 7`` in a fresh folder, default --out."""
    cwd = tmp_path_factory.mktemp("gravity")
    done = subprocess.run(
        [sys.executable, "-m", "sim.cli", "run", str(REACH), "--controller", "gravity", "--seed", str(SEED)],
        cwd=cwd, capture_output=True, text=True, timeout=120,
    )
    return done, cwd / "runs" / f"reach-gravity-seed{SEED}"


@pytest.fixture(scope="module")
def zero_run(tmp_path_factory):
    """``sim.cli.main(["run", reach.py, "--controller", "zero", "--seed", "7", "--out", DIR])``."""
    out = tmp_path_factory.mktemp("zero") / "zero-run"
    stdout = io.StringIO()
    with contextlib.redirect_stdout(stdout):
        status = main(["run", str(REACH), "--controller", "zero", "--seed", str(SEED), "--out", str(out)])
    return status, stdout.getvalue(), out


@pytest.fixture(scope="module", params=["gravity", "zero"])
def run_folder(request, gravity_run, zero_run):
    """The folder of each finished reference run."""
    return gravity_run[1] if request.param == "gravity" else zero_run[2]


def test_run_via_subprocess_finishes_and_prints_the_default_run_folder(gravity_run):
    done, folder = gravity_run
    assert done.returncode == 0, done.stderr
    assert "Traceback" not in done.stderr
    # default --out is runs/SCENARIO-CONTROLLER-seedN (relative to the working directory)
    assert str(Path("runs") / f"reach-gravity-seed{SEED}") in done.stdout
    assert "metrics.json" in done.stdout
    assert folder.is_dir()


def test_run_via_main_finishes_and_prints_the_given_out_folder(zero_run):
    status, stdout, out = zero_run
    assert status == 0
    assert str(out) in stdout
    assert str(out / "metrics.json") in stdout


def test_run_folder_holds_log_meta_metrics_and_baseline(run_folder):
    assert (run_folder / "meta.json").is_file()
    assert (run_folder / "metrics.json").is_file()
    assert sorted(p.name for p in (run_folder / "log").iterdir()) == [
        "chunk_000000.parquet", "chunk_000001.parquet", "chunk_000002.parquet",
        "chunk_000003.parquet"]  # 3100 ticks / 1000
    assert (run_folder / "human_alone" / "meta.json").is_file()


def test_run_applies_the_chosen_controller_and_seed(gravity_run, zero_run):
    for name, folder in (("gravity", gravity_run[1]), ("zero", zero_run[2])):
        meta = sim.load_run(folder).meta
        assert (meta["controller"], meta["seed"], meta["status"]) == (name, SEED, "complete")
        base = sim.load_run(folder / "human_alone").meta
        assert (base["mode"], base["seed"]) == ("human_alone", SEED)


def test_metrics_json_has_the_contract_keys_in_si_units(run_folder):
    m = json.loads((run_folder / "metrics.json").read_text(encoding="utf-8"))
    assert set(METRIC_KEYS) <= set(m)
    assert set(m["cuffs"]) == set(CUFFS)
    for cuff in CUFFS:
        assert set(m["cuffs"][cuff]) >= {"force_rms_N", "force_peak_N"}
        assert 0 < m["cuffs"][cuff]["force_rms_N"] <= m["cuffs"][cuff]["force_peak_N"]
    for key in METRIC_KEYS:
        if key != "cuffs":
            assert isinstance(m[key], float) and np.isfinite(m[key]), key
    assert 0.0 <= m["torque_saturation_fraction"] <= 1.0
    assert m["tick_time_median_us"] > 0 and m["realtime_factor"] > 0


def test_gravity_compensation_lowers_the_interaction_force_well_below_zero_torque(gravity_run, zero_run):
    # done-when check of the issue: with gravity compensation the wearer no longer carries the robot
    f_gravity = json.loads((gravity_run[1] / "metrics.json").read_text())["interaction_force_rms_N"]
    f_zero = json.loads((zero_run[2] / "metrics.json").read_text())["interaction_force_rms_N"]
    assert f_gravity < 0.75 * f_zero


def test_interaction_force_metrics_match_the_definition_recomputed_from_the_log(run_folder):
    # definition in the issue: RMS over time of sqrt(sum over cuffs of |f_c|^2), f_c the force part on the human
    run = sim.load_run(run_folder)
    w = run["cuff_wrench_human"]
    assert w.shape == (3100, len(CUFFS), 6)
    f = w[:, :, :3]
    total_sq = np.einsum("kci,kci->k", f, f)
    m = run.metrics
    assert m["interaction_force_rms_N"] == pytest.approx(np.sqrt(total_sq.mean()), rel=1e-12)
    assert m["interaction_force_peak_N"] == pytest.approx(np.sqrt(total_sq.max()), rel=1e-12)
    for i, cuff in enumerate(CUFFS):
        sq = np.einsum("ki,ki->k", f[:, i], f[:, i])
        assert m["cuffs"][cuff]["force_rms_N"] == pytest.approx(np.sqrt(sq.mean()), rel=1e-12)
        assert m["cuffs"][cuff]["force_peak_N"] == pytest.approx(np.sqrt(sq.max()), rel=1e-12)


def test_duration_deviation_and_effort_match_the_log_and_its_human_alone_baseline(run_folder):
    # definitions in the issue: N ticks of 1 ms; path deviation and effort ratio against the human-alone run
    run, base = sim.load_run(run_folder), sim.load_run(run_folder / "human_alone")
    m = run.metrics
    n = len(run["t"])
    assert n == 3100  # reach.py: duration_s = 3.1 at 1 ms
    assert m["sim_duration_s"] == pytest.approx(n * DT_S, rel=1e-12)
    d = run["q_human"] - base["q_human"]
    assert m["path_deviation_rms_rad"] == pytest.approx(np.sqrt(np.mean(np.sum(d**2, axis=1))), rel=1e-12)
    effort = np.sqrt(np.mean(np.sum(run["tau_human"] ** 2, axis=1)))
    effort_alone = np.sqrt(np.mean(np.sum(base["tau_human"] ** 2, axis=1)))
    assert m["human_effort_rms_Nm"] == pytest.approx(effort, rel=1e-12)
    assert m["human_effort_ratio"] == pytest.approx(effort / effort_alone, rel=1e-12)
    assert m["torque_saturation_fraction"] == pytest.approx(np.mean(run["saturated"].any(axis=1)), rel=1e-12)


def test_timing_metrics_come_from_the_wall_clock_tick_times(run_folder):
    # tick times are kept apart from the log (timing.npz, sim/loop/simulation.py);
    # realtime factor = sim time / wall time
    with np.load(run_folder / "timing.npz") as f:
        ticks = f["tick_time_s"]
    m = json.loads((run_folder / "metrics.json").read_text())
    assert m["tick_time_median_us"] == pytest.approx(np.median(ticks) * 1e6, rel=1e-12)
    assert m["realtime_factor"] == pytest.approx(len(ticks) * DT_S / ticks.sum(), rel=1e-9)


def test_load_run_gives_named_arrays_metadata_and_metrics(run_folder):
    run = sim.load_run(run_folder)
    assert run.complete
    np.testing.assert_array_equal(run["t"], np.arange(run.ticks) * DT_S)
    assert run["q_exo"].shape == (run.ticks, 7)
    meta = run.meta
    assert meta["seed"] == SEED
    assert meta["parameters"]["name"] == "reach" and meta["parameters"]["duration_s"] == 3.1
    env = meta["environment"]
    assert env["numpy"] == np.__version__
    assert "git_revision" in env
    assert run.metrics == json.loads((run_folder / "metrics.json").read_text())


# ----------------------------------------------------------------------------------------------
# determinism
# ----------------------------------------------------------------------------------------------


def _all_logs(folder: Path) -> dict[str, bytes]:
    return {p.relative_to(folder).as_posix(): p.read_bytes() for p in sorted(folder.rglob("log/chunk_*"))}


def test_same_seed_gives_the_same_log_bit_for_bit_and_another_seed_changes_the_sensed_wrenches(tmp_path):
    # sim/loop/simulation.py: all randomness comes from one seed, the same seed gives bit-identical logs
    scenario = load_scenario(write_scenario(tmp_path / "short.py", duration_s="1.05"))  # 2 chunks of the log
    a = run_scenario(scenario, "gravity", tmp_path / "a", seed=3).folder
    b = run_scenario(scenario, "gravity", tmp_path / "b", seed=3).folder
    c = simulate(scenario, "gravity", tmp_path / "c", seed=4).folder
    for sub in ("", "human_alone"):
        ra, rb = sim.load_run(a / sub), sim.load_run(b / sub)
        assert ra.arrays.keys() == rb.arrays.keys()
        for name in ra.arrays:
            np.testing.assert_array_equal(ra[name], rb[name], err_msg=name)
    logs_a, logs_b = _all_logs(a), _all_logs(b)
    assert sorted(logs_a) == ["human_alone/log/chunk_000000.parquet", "human_alone/log/chunk_000001.parquet",
                              "log/chunk_000000.parquet", "log/chunk_000001.parquet"]
    assert logs_a == logs_b
    ra, rc = sim.load_run(a), sim.load_run(c)
    assert ra.ticks == rc.ticks == 1050
    assert not np.array_equal(ra["cuff_wrench_meas"], rc["cuff_wrench_meas"])


# ----------------------------------------------------------------------------------------------
# the controller sees only a Measurement
# ----------------------------------------------------------------------------------------------


class _Spy(Controller):
    """Commands zero torque and keeps every Measurement it is given."""

    name = "spy"
    seen: list = []

    def step(self, measurement):
        type(self).seen.append(measurement)
        return np.zeros(self.context.arm.nv)


def test_controller_receives_only_a_read_only_measurement_of_the_sensors(tmp_path, monkeypatch):
    monkeypatch.setattr(registry, "CONTROLLERS", MappingProxyType({**CONTROLLERS, "spy": _Spy}))
    monkeypatch.setattr(_Spy, "seen", [])
    scenario = load_scenario(write_scenario(tmp_path / "spy.py", duration_s="0.05", controllers='("spy",)'))
    folder = simulate(scenario, "spy", tmp_path / "run", seed=1).folder
    seen = _Spy.seen
    assert len(seen) == 50
    m = seen[-1]
    assert type(m) is Measurement
    # models/records.py: only what the hardware senses, no field of the human's state
    assert [f.name for f in dataclasses.fields(m)] == ["t_s", "q_rad", "dq_rad_s", "tau_Nm", "cuff_wrench"]
    for arr in (m.q_rad, m.dq_rad_s, m.tau_Nm, *m.cuff_wrench.values()):
        with pytest.raises(ValueError):
            arr[0] = 1.0
    assert tuple(m.cuff_wrench) == CUFFS
    assert all(w.shape == (6,) for w in m.cuff_wrench.values())
    # each tick's measurement is its own copy: what the controller kept equals what was logged as sensed
    run = sim.load_run(folder)
    np.testing.assert_array_equal([s.t_s for s in seen], run["t"])
    np.testing.assert_array_equal([s.q_rad for s in seen], run["q_exo_meas"])
    np.testing.assert_array_equal([[s.cuff_wrench[c] for c in CUFFS] for s in seen], run["cuff_wrench_meas"])


def test_run_prints_the_wall_figures_only_in_a_wall_scenario(zero_run, tmp_path):
    # mechanism check: the printed figures are those of metrics.json, to the printed digits
    assert "interaction_force_free_rms_N" not in zero_run[1]  # reach has no wall
    out, short = tmp_path / "wall", tmp_path / "short_push.py"
    short.write_text("import dataclasses\n\nfrom scenarios.wall_push import SCENARIO as PUSH\n\n"
                     "SCENARIO = dataclasses.replace(PUSH, duration_s=3.2)  # the first push and release\n",
                     encoding="utf-8")
    stdout = io.StringIO()
    with contextlib.redirect_stdout(stdout):
        status = main(["run", str(short), "--controller", "walls", "--out", str(out)])
    assert status == 0
    m = json.loads((out / "metrics.json").read_text(encoding="utf-8"))
    assert m["wall_penetration_max_m"] > 0
    assert f"interaction_force_free_rms_N = {m['interaction_force_free_rms_N']:.2f}" in stdout.getvalue()
    assert f"wall_stiffness_rendered_N_per_m = {m['wall_stiffness_rendered_N_per_m']:.1f}" in stdout.getvalue()
