"""Timed faults (:mod:`sim.physics.faults`): each kind against its definition, validation, the log, meta, metrics,
report, replay caption, determinism, and a soak run of a seeded random schedule.

Reference for the sensor faults: a run of the same scenario and seed without faults under the ``zero`` controller,
whose command (zero torque) does not depend on the readings, so the plant, the sensors' own noise and every reading
outside a fault are the same to the bit; a fault's reading is then checked against its definition applied to the
reference reading.  Sources: the definitions in the fault classes' docstrings (common practice for fault
injection), the first-order low-pass of :mod:`sim.physics.sensors` (Franklin, Powell & Workman, *Digital Control of
Dynamic Systems*, 3rd ed., 1998, discrete equivalents) and Hooke's law for the cuff (f = K e).

The soak run lasts ``EXOSANDBOX_SOAK_S`` simulated seconds (25 by default); for the 10-minute soak:
``EXOSANDBOX_SOAK_S=600 python -m pytest tests/test_faults.py -k soak``.
"""

from __future__ import annotations

import dataclasses
import json
import math
import os

import numpy as np
import pytest

from models.errors import ParameterError
from sim import (
    ControlDelay,
    CuffSlip,
    EncoderGlitch,
    SensorBiasDrift,
    SensorBiasStep,
    SensorDelay,
    SensorDropout,
    SensorNoiseBurst,
    Simulation,
    StuckDrive,
    StuckEncoder,
    TorqueLoss,
    WearerJerk,
    load_run,
    load_scenario,
    random_faults,
    simulate,
)
from sim.experiments.run import evaluate_run
from sim.loop.scenario import ScenarioError
from sim.loop.simulation import build_assembly
from sim.output import viz
from sim.output.report import faults_section, write_run_report
from sim.physics.faults import FaultSchedule, FaultTargets
from sim.physics.plant import CoupledPlant, PlantParams
from sim.physics.sensors import lowpass_alpha

ROOT = os.path.dirname(os.path.dirname(os.path.abspath(__file__)))
SEED = 5
DURATION_S = 0.4


@pytest.fixture(scope="module")
def reach():
    return dataclasses.replace(load_scenario(os.path.join(ROOT, "scenarios", "reach.py")), duration_s=DURATION_S)


SENSOR_FAULTS = (
    SensorDropout(name="hand zero", cuff="hand", mode="zero", start_s=0.05, end_s=0.1),
    SensorDropout(name="forearm stuck", cuff="forearm", mode="stuck", start_s=0.05, end_s=0.1),
    SensorBiasStep(name="upper step", cuff="upper_arm", force_N=(1.0, 2.0, -3.0), torque_Nm=(0.1, 0.0, 0.0),
                   start_s=0.1, end_s=0.15),
    SensorBiasDrift(name="hand drift", cuff="hand", rate_N_per_s=(10.0, -5.0, 0.0), start_s=0.15, end_s=0.25),
    SensorNoiseBurst(name="forearm noise", cuff="forearm", std_N=2.0, std_Nm=0.1, start_s=0.15, end_s=0.3),
    EncoderGlitch(name="elbow glitch", joint="exo_elbow", spike_rad=0.01, start_s=0.2, end_s=0.203),
    StuckEncoder(name="shoulder stuck", joint="exo_shoulder_a", start_s=0.25, end_s=0.3),
    SensorDelay(name="bus delay", ticks=3, start_s=0.32, end_s=0.36),
)


def _run(scenario, controller, faults=(), seed=SEED):
    sc = dataclasses.replace(scenario, faults=tuple(faults))
    return Simulation(sc, controller, seed=seed).run()


@pytest.fixture(scope="module")
def sensor_runs(reach):
    ref = _run(reach, "zero")
    run = _run(reach, "zero", SENSOR_FAULTS)
    return ref.arrays, run.arrays, run


def _ticks(a, fault):
    t = a["t"]
    return np.flatnonzero((t >= fault.start_s) & (t < fault.end_s))


def test_zero_controller_makes_the_plant_independent_of_the_readings(sensor_runs):
    ref, run, _ = sensor_runs
    for name in ("q_exo", "q_human", "tau_cmd", "tau_applied", "cuff_wrench_human"):
        assert np.array_equal(ref[name], run[name]), name


def test_fault_active_column_marks_start_le_t_lt_end(sensor_runs):
    _, run, traj = sensor_runs
    col = run["fault_active"]
    assert col.dtype == bool and col.shape == (len(run["t"]), len(SENSOR_FAULTS))
    for i, f in enumerate(SENSOR_FAULTS):
        assert np.array_equal(col[:, i], (run["t"] >= f.start_s) & (run["t"] < f.end_s)), f.name
        assert col[:, i].any()
    assert [f["name"] for f in traj.meta["faults"]] == [f.name for f in SENSOR_FAULTS]
    assert traj.meta["faults"][0] == {"name": "hand zero", "kind": "sensor_dropout", "start_s": 0.05, "end_s": 0.1,
                                      "parameters": {"cuff": "hand", "mode": "zero"}}


def test_no_fault_column_without_faults(sensor_runs):
    ref, _, _ = sensor_runs
    assert "fault_active" not in ref


def test_dropout_zero_gives_exactly_zero_then_the_normal_reading(sensor_runs):
    ref, run, _ = sensor_runs
    f = SENSOR_FAULTS[0]
    k = _ticks(run, f)
    assert np.all(run["cuff_wrench_meas"][k, 2] == 0.0)
    after = np.arange(k[-1] + 1, _ticks(run, SENSOR_FAULTS[3])[0])
    assert np.array_equal(run["cuff_wrench_meas"][after, 2], ref["cuff_wrench_meas"][after, 2])
    assert np.array_equal(run["cuff_wrench_meas"][:k[0], 2], ref["cuff_wrench_meas"][:k[0], 2])


def test_dropout_stuck_holds_the_last_reading(sensor_runs):
    ref, run, _ = sensor_runs
    k = _ticks(run, SENSOR_FAULTS[1])
    held = ref["cuff_wrench_meas"][k[0] - 1, 1]
    assert np.array_equal(run["cuff_wrench_meas"][k, 1], np.broadcast_to(held, (len(k), 6)))
    assert not np.array_equal(ref["cuff_wrench_meas"][k, 1], run["cuff_wrench_meas"][k, 1])  # it did change
    nxt = k[-1] + 1
    assert np.array_equal(run["cuff_wrench_meas"][nxt, 1], ref["cuff_wrench_meas"][nxt, 1])


def test_bias_step_adds_its_bias(sensor_runs):
    ref, run, _ = sensor_runs
    k = _ticks(run, SENSOR_FAULTS[2])
    d = run["cuff_wrench_meas"][k, 0] - ref["cuff_wrench_meas"][k, 0]
    np.testing.assert_allclose(d, np.broadcast_to([1.0, 2.0, -3.0, 0.1, 0.0, 0.0], d.shape), rtol=0, atol=1e-12)


def test_bias_drift_is_slope_times_time(sensor_runs):
    ref, run, _ = sensor_runs
    f = SENSOR_FAULTS[3]
    k = _ticks(run, f)
    d = run["cuff_wrench_meas"][k, 2] - ref["cuff_wrench_meas"][k, 2]
    expected = np.outer(run["t"][k] - f.start_s, [10.0, -5.0, 0.0, 0.0, 0.0, 0.0])
    np.testing.assert_allclose(d, expected, rtol=0, atol=1e-12)


def test_noise_burst_has_its_standard_deviation_and_is_seeded(sensor_runs, reach):
    ref, run, _ = sensor_runs
    f = SENSOR_FAULTS[4]
    k = _ticks(run, f)
    d = run["cuff_wrench_meas"][k, 1] - ref["cuff_wrench_meas"][k, 1]
    n = len(k)
    # sample standard deviation of n draws of N(0, s^2): within 4 standard errors s / sqrt(2 (n - 1)) (textbook)
    for axes, s in (((0, 1, 2), 2.0), ((3, 4, 5), 0.1)):
        sd = d[:, axes].std(ddof=1)
        assert abs(sd - s) < 4 * s / math.sqrt(2 * (3 * n - 1)), (axes, sd)
    assert abs(d[:, :3].mean()) < 4 * 2.0 / math.sqrt(3 * n)
    again = _run(reach, "zero", SENSOR_FAULTS[4:5]).arrays
    assert np.array_equal(again["cuff_wrench_meas"][k, 1], run["cuff_wrench_meas"][k, 1])  # its own stream
    other = _run(reach, "zero", SENSOR_FAULTS[4:5], seed=SEED + 1).arrays
    assert not np.array_equal(other["cuff_wrench_meas"][k, 1] - ref["cuff_wrench_meas"][k, 1], d)


def test_encoder_glitch_reads_the_quantised_spiked_position(sensor_runs, reach):
    ref, run, _ = sensor_runs
    f = SENSOR_FAULTS[5]
    k = _ticks(run, f)
    assert len(k) == 3
    r = reach.encoder.resolution_rad
    j = 3  # exo_elbow
    np.testing.assert_array_equal(run["q_exo_meas"][k, j], np.round((ref["q_exo"][k, j] + 0.01) / r) * r)
    assert np.array_equal(run["q_exo_meas"][k[-1] + 1, j], ref["q_exo_meas"][k[-1] + 1, j])


def test_stuck_encoder_holds_the_reading_and_its_velocity_decays_as_the_filter_says(sensor_runs, reach):
    ref, run, _ = sensor_runs
    f = SENSOR_FAULTS[6]
    k = _ticks(run, f)
    j = 0
    assert np.all(run["q_exo_meas"][k, j] == ref["q_exo_meas"][k[0] - 1, j])
    # the backward difference is 0, so the low-pass decays: dq_k = (1 - alpha)^(k - k0 + 1) dq_(k0 - 1)
    a = lowpass_alpha(reach.encoder.velocity_cutoff_Hz, reach.control_period_s)
    expected = ref["dq_exo_meas"][k[0] - 1, j] * (1 - a) ** np.arange(1, len(k) + 1)
    np.testing.assert_allclose(run["dq_exo_meas"][k, j], expected, rtol=1e-9, atol=1e-12)


def test_sensor_delay_gives_the_readings_of_d_ticks_before(sensor_runs):
    ref, run, _ = sensor_runs
    k = _ticks(run, SENSOR_FAULTS[7])
    for name in ("q_exo_meas", "cuff_wrench_meas"):
        assert np.array_equal(run[name][k], ref[name][k - 3]), name
        assert np.array_equal(run[name][k[-1] + 1], ref[name][k[-1] + 1]), name
    # the velocity estimate of joint 0 still carries the stuck encoder's transient (its low-pass decays, 20 ticks
    # before): exact on the other joints, within that decay on joint 0
    assert np.array_equal(run["dq_exo_meas"][k, 1:], ref["dq_exo_meas"][k - 3, 1:])
    np.testing.assert_allclose(run["dq_exo_meas"][k, 0], ref["dq_exo_meas"][k - 3, 0], rtol=0, atol=1e-2)


@pytest.fixture(scope="module")
def drive_runs(reach):
    faults = (TorqueLoss(name="elbow off", joint="exo_elbow", start_s=0.1, end_s=0.15),
              StuckDrive(name="shoulder stuck", joint="exo_shoulder_a", start_s=0.33, end_s=0.39),
              WearerJerk(name="jerk", joint="human_elbow_flexion", torque_Nm=3.0, start_s=0.2, end_s=0.22))
    # one run per fault: each changes the motion from its start on
    return _run(reach, "gravity").arrays, [_run(reach, "gravity", (f,)).arrays for f in faults], faults


def test_torque_loss_delivers_zero_on_its_joint(drive_runs):
    ref, runs, faults = drive_runs
    run = runs[0]
    k = _ticks(run, faults[0])
    assert np.all(run["tau_applied"][k, 3] == 0.0)
    assert np.all(ref["tau_applied"][k, 3] != 0.0)
    assert np.array_equal(run["tau_applied"][:k[0]], ref["tau_applied"][:k[0]])


def test_stuck_drive_holds_the_torque_it_delivered_before(drive_runs):
    ref, runs, faults = drive_runs
    run = runs[1]
    k = _ticks(run, faults[1])
    assert np.all(run["tau_applied"][k, 0] == ref["tau_applied"][k[0], 0])
    assert np.ptp(ref["tau_applied"][k, 0]) > 0.0  # the drive would have changed its torque


def test_wearer_jerk_adds_its_torque(drive_runs):
    ref, runs, faults = drive_runs
    run = runs[2]
    k = _ticks(run, faults[2])
    assert len(k) == 20
    # at the first tick the state is still the reference's: the difference is the pulse alone
    d = run["tau_human"][k[0]] - ref["tau_human"][k[0]]
    np.testing.assert_allclose(d, [0, 0, 0, 3.0, 0, 0, 0], rtol=0, atol=1e-12)


def _schedule(faults, reach, seed=0):
    asm = build_assembly(reach)
    targets = FaultTargets(tuple(c.name for c in asm.cuffs), tuple(asm.exo.joint_names),
                           tuple(asm.human.joint_names))
    return FaultSchedule(faults, targets, reach.control_period_s,
                         [np.random.default_rng(seed + i) for i in range(len(faults))])


def test_control_delay_gives_the_command_of_d_ticks_before(reach):
    s = _schedule((ControlDelay(name="late", ticks=2, start_s=0.005, end_s=0.008),), reach)
    out = []
    for k in range(10):
        s.begin_tick(k, k * 1e-3)
        out.append(float(s.command(np.full(7, float(k)))[0]))
    assert out == [0, 1, 2, 3, 4, 3, 4, 5, 8, 9]


def test_drive_faults_act_on_every_substep_and_leave_other_ticks_alone(reach):
    from sim.physics.actuators import TorqueSourceActuators
    s = _schedule((TorqueLoss(name="off", joint="exo_elbow", start_s=0.001, end_s=0.002),), reach)
    act = TorqueSourceActuators(np.full(7, 50.0))
    act.reset(np.ones(7))
    act.hold(np.full(7, 2.0))
    s.begin_tick(0, 0.0)
    assert s.drives(act) is act
    s.begin_tick(1, 1e-3)
    tau = s.drives(act).substep(np.zeros(7), np.zeros(7), 2.5e-4)
    assert tau[3] == 0.0 and np.all(np.delete(tau, 3) > 1.0)


def test_cuff_slip_scales_the_spring_force_by_its_factor(reach):
    """Hooke's law f = K e: with the cuff velocities zero (no damping term), K times a factor gives the force
    times that factor, and factors of 1 give the cuffs' own force back to the bit."""
    plant = CoupledPlant(build_assembly(reach), PlantParams(), "coupled")
    q = plant.q_exo.copy()
    q[3] += 0.05  # stretch the cuffs
    plant.q_exo = q
    plant.invalidate()
    plant.update_cuffs()
    w0 = plant.wrench_on_human.copy()
    assert np.linalg.norm(w0[1, :3]) > 1.0
    s = _schedule((CuffSlip(name="slip", cuff="forearm", factor=0.25, start_s=0.0, end_s=0.001),), reach)
    s.begin_tick(0, 0.0)
    s.coupling(plant)
    plant.update_cuffs()
    w1 = plant.wrench_on_human.copy()
    np.testing.assert_allclose(w1[1], 0.25 * w0[1], rtol=1e-12, atol=1e-12)
    assert np.array_equal(w1[[0, 2]], w0[[0, 2]])
    s.begin_tick(1, 1e-3)
    s.coupling(plant)
    plant.update_cuffs()
    assert np.array_equal(plant.wrench_on_human, w0)


def test_faults_not_yet_active_leave_the_run_bit_identical(reach):
    late = (SensorNoiseBurst(name="late noise", cuff="hand", std_N=1.0, start_s=0.45, end_s=0.5),
            TorqueLoss(name="late loss", joint="exo_elbow", start_s=0.45, end_s=0.5))
    sc = dataclasses.replace(reach, duration_s=0.5, faults=late)
    run = Simulation(sc, "gravity", seed=SEED).run(0.3).arrays
    base = Simulation(dataclasses.replace(reach, duration_s=0.5), "gravity", seed=SEED).run(0.3).arrays
    assert set(run) - set(base) == {"fault_active"}
    for name in base:
        assert np.array_equal(run[name], base[name], equal_nan=run[name].dtype.kind == "f"), name


# -- validation: one line naming the field --------------------------------------------------------------
@pytest.mark.parametrize("make, words", [
    (lambda: SensorDropout(name="x", cuff="hand", start_s=1.0, end_s=0.5), "SensorDropout('x').end_s must be after"),
    (lambda: SensorDelay(name="x", ticks=-2, start_s=0.0, end_s=1.0), "SensorDelay('x').ticks must be an integer"),
    (lambda: ControlDelay(name="x", ticks=1.5, start_s=0.0, end_s=1.0), "ControlDelay('x').ticks must be"),
    (lambda: SensorDropout(name="x", cuff="hand", mode="off", start_s=0, end_s=1), "mode must be 'zero' or 'stuck'"),
    (lambda: CuffSlip(name="x", cuff="hand", factor=1.5, start_s=0, end_s=1), "CuffSlip('x').factor must be in (0, 1]"),
    (lambda: SensorNoiseBurst(name="x", cuff="hand", std_N=-1, start_s=0, end_s=1), "std_N must be >= 0"),
    (lambda: TorqueLoss(name="x", joint="exo_elbow", start_s=-1, end_s=1), "TorqueLoss('x').start_s must be >= 0"),
    (lambda: SensorBiasStep(name="x", cuff="hand", force_N=(1, 2), start_s=0, end_s=1), "force_N must be a sequence"),
    (lambda: WearerJerk(name="", joint="a", torque_Nm=1, start_s=0, end_s=1), "WearerJerk.name must be"),
])
def test_bad_fault_fields_get_one_line_naming_the_field(make, words):
    with pytest.raises(ParameterError) as e:
        make()
    assert words in str(e.value) and "\n" not in str(e.value)


def test_scenario_rejects_unknown_cuffs_duplicates_and_non_faults(reach):
    cases = [((SensorDropout(name="x", cuff="foot", start_s=0, end_s=1),), "cuff must name one of the scenario's"),
             ((TorqueLoss(name="x", joint="exo_elbow", start_s=0, end_s=1),
               TorqueLoss(name="x", joint="exo_wrist_dev", start_s=0, end_s=1)), "faults[1].name must be unique"),
             (("not a fault",), "faults[0] must be a fault")]
    for faults, words in cases:
        with pytest.raises(ParameterError) as e:
            dataclasses.replace(reach, faults=faults)
        assert words in str(e.value) and "\n" not in str(e.value), str(e.value)


def test_a_fault_after_a_shortened_run_is_never_active(reach):
    late = TorqueLoss(name="late", joint="exo_elbow", start_s=9.0, end_s=10.0)
    run = Simulation(dataclasses.replace(reach, duration_s=0.05, faults=(late,)), "zero").run()
    assert not run.arrays["fault_active"].any()


def test_unknown_joints_are_refused_when_the_run_starts_before_anything_is_written(reach, tmp_path):
    for f, words in ((StuckEncoder(name="x", joint="exo_knee", start_s=0, end_s=0.1),
                      "StuckEncoder('x').joint must name one of the robot's joints"),
                     (WearerJerk(name="x", joint="exo_elbow", torque_Nm=1, start_s=0, end_s=0.1),
                      "WearerJerk('x').joint must name one of the wearer's joints")):
        sc = dataclasses.replace(reach, faults=(f,))
        with pytest.raises(ParameterError) as e:
            simulate(sc, "gravity", tmp_path / "run")
        assert words in str(e.value) and "\n" not in str(e.value)
        assert not (tmp_path / "run").exists()


def test_a_scenario_file_with_a_bad_fault_names_the_file_and_the_field(tmp_path):
    from _scenario_files import write_scenario
    p = write_scenario(tmp_path / "bad.py", faults='(__import__("sim").SensorDelay(name="d", ticks=-1, '
                                                   'start_s=0.0, end_s=0.1),)')
    with pytest.raises(ScenarioError) as e:
        load_scenario(p)
    assert "bad.py" in str(e.value) and "SensorDelay('d').ticks" in str(e.value)


# -- the run folder: meta, metrics, report, replay caption ----------------------------------------------
@pytest.fixture(scope="module")
def shipped_run(tmp_path_factory):
    sc = load_scenario(os.path.join(ROOT, "scenarios", "sensor_faults.py"))
    out = tmp_path_factory.mktemp("faults") / "run"
    simulate(sc, "transparent", out, seed=1)
    return sc, out


def test_run_folder_records_the_faults(shipped_run):
    sc, out = shipped_run
    run = load_run(out)
    meta = json.loads((out / "meta.json").read_text())
    assert [f["kind"] for f in meta["faults"]] == ["sensor_dropout", "sensor_bias_drift", "cuff_slip", "wearer_jerk"]
    assert meta["parameters"]["faults"][2]["factor"] == 0.3
    col = np.asarray(run.arrays["fault_active"])
    assert col.shape == (sc.n_ticks, 4) and col.any(axis=0).all()
    m = evaluate_run(out, run=run)
    assert m["fault_count"] == 4
    assert m["faults"][3] == {"name": "elbow jerk", "kind": "wearer_jerk", "start_s": 2.5, "end_s": 2.55}


def test_report_has_a_faults_section(shipped_run):
    _, out = shipped_run
    lines = faults_section(json.loads((out / "meta.json").read_text()))
    assert lines[0] == "## Faults"
    assert "| hand sensor sticks | sensor_dropout | 0.8 | 1.1 | cuff = hand, mode = stuck |" in "\n".join(lines)
    assert faults_section({"faults": []}) == []
    text = write_run_report(out, evaluate_run(out), figures=False).read_text()
    assert "## Faults" in text and "| upper-arm cuff slips | cuff_slip | 1.6 | 2.2 |" in text


def test_fault_spans_merge_overlaps():
    from sim.output.figures import fault_spans
    meta = {"faults": [{"start_s": 1.6, "end_s": 2.2}, {"start_s": 1.3, "end_s": 2.0}, {"start_s": 0.8, "end_s": 1.1},
                       {"start_s": 2.5, "end_s": 9.0}, {"start_s": 9.5, "end_s": 10.0}]}
    assert fault_spans(meta, 3.0) == [(0.8, 1.1), (1.3, 2.2), (2.5, 3.0)]


def test_replay_caption_names_the_active_faults(shipped_run):
    _, out = shipped_run
    cap = viz.replay_captions(out, fps=20)
    assert cap["faults"] == ["hand sensor sticks", "forearm sensor drifts", "upper-arm cuff slips", "elbow jerk"]
    by_time = dict(zip(cap["t_s"], cap["fault_text"]))
    assert by_time[0.5] == ""
    assert by_time[0.9] == "fault: hand sensor sticks"
    assert by_time[1.75] == "fault: forearm sensor drifts, upper-arm cuff slips"
    html = viz.add_captions("<html><head><title>x</title></head><body></body></html>", cap)
    assert 'id="xs-faults"' in html and "fault: hand sensor sticks" in html


# -- random schedules and the soak run ------------------------------------------------------------------
def test_random_faults_are_seeded_and_valid(reach):
    asm = build_assembly(reach)
    args = (30.0, [c.name for c in asm.cuffs], asm.exo.joint_names)
    a = random_faults(7, *args, rate_per_s=1.0, wearer_joints=asm.human.joint_names)
    assert a == random_faults(7, *args, rate_per_s=1.0, wearer_joints=asm.human.joint_names)
    assert a != random_faults(8, *args, rate_per_s=1.0, wearer_joints=asm.human.joint_names)
    assert 10 < len(a) < 60  # Poisson mean 30, +- 5 standard deviations (sqrt 30)
    assert len({f.kind for f in a}) >= 8
    assert all(0 <= f.start_s < 30.0 - 2e-3 and f.end_s > f.start_s for f in a)
    _schedule(a, reach)  # every name is the run's
    with pytest.raises(ParameterError, match="random_faults.rate_per_s must be > 0"):
        random_faults(1, 10.0, ["hand"], ["exo_elbow"], rate_per_s=0)


@pytest.mark.slow
def test_soak_random_faults(tmp_path):
    duration = float(os.environ.get("EXOSANDBOX_SOAK_S", "25"))
    sc = load_scenario(os.path.join(ROOT, "scenarios", "reach.py"))
    asm = build_assembly(sc)
    faults = random_faults(11, duration, [c.name for c in asm.cuffs], asm.exo.joint_names, rate_per_s=1.0,
                           wearer_joints=asm.human.joint_names)
    sc = dataclasses.replace(sc, duration_s=duration, faults=faults)
    simulate(sc, "transparent", tmp_path / "soak", seed=2)
    run = load_run(tmp_path / "soak")
    assert run.meta["status"] == "complete"
    assert len(run.arrays["t"]) == sc.n_ticks
    for name, a in run.arrays.items():
        a = np.asarray(a)
        if a.dtype.kind == "f":
            assert np.all(np.isfinite(a)), name
    col = np.asarray(run.arrays["fault_active"])
    assert col.shape == (sc.n_ticks, len(faults)) and col.any(axis=0).all()
    m = evaluate_run(tmp_path / "soak", run=run)
    assert m["fault_count"] == len(faults)
    bad = [k for k, v in m.items() if isinstance(v, float) and not math.isfinite(v)]
    assert not bad, bad
