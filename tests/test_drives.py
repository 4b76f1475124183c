"""Drive models: the series-elastic drive against closed forms and scipy, the control delay, the choice per scenario.

Sources named beside each check:

* undamped oscillator: a locked motor on a spring rings at sqrt(k/J) (closed form; Pratt & Williamson 1995);
* second-order step overshoot exp(-pi zeta / sqrt(1 - zeta^2)) and -3 dB bandwidth
  omega_n sqrt(1 - 2 zeta^2 + sqrt(4 zeta^4 - 4 zeta^2 + 2)) (Ogata, Modern Control Engineering, 5th ed.,
  sections 5-3 and 7-5);
* the loop's frequency response against scipy.signal.freqresp of its transfer function;
* first-order lag bandwidth 1/(2 pi T) (closed form);
* energy: an undamped, unforced spring-mass conserves energy, a damped one never gains it (closed form).
"""

from __future__ import annotations

import dataclasses
import math
from pathlib import Path

import numpy as np
import pytest
from scipy import signal

from controllers.base import Controller
from models.errors import ParameterError
from models.exo import ExoParams
from sim import IdealActuatorParams, Scenario, SeriesElasticParams, Simulation, load_scenario
from sim.analysis.drives import (
    drive_metrics,
    drive_params_from_meta,
    torque_bandwidth_Hz,
    torque_frequency_response,
    torque_tracking_rms_Nm,
)
from sim.loop.simulation import drive_params, log_columns
from sim.physics.actuators import ActuatorParams, CommandDelay, IdealActuators, TorqueSourceActuators, make_actuators
from sim.physics.sea import SeriesElasticActuators, torque_loop_closed_form

SCENARIOS = Path(__file__).resolve().parents[1] / "scenarios"
EXO = ExoParams()
LIMIT = np.array(EXO.torque_limit_Nm)
T, SUB = 1e-3, 4  # the default control period [s] and substeps


def _linear(**kw) -> SeriesElasticParams:
    """Resolved defaults without Coulomb friction (the closed forms are linear)."""
    return dataclasses.replace(SeriesElasticParams(**kw).resolved(EXO), motor_coulomb_Nm=0.0)


def _step_locked(act: SeriesElasticActuators, command: np.ndarray, ticks: int) -> np.ndarray:
    """The delivered torque at each tick's start (ticks, nv) with the output locked."""
    q = np.zeros(len(LIMIT))
    out = np.empty((ticks, len(LIMIT)))
    for k in range(ticks):
        out[k] = act.delivered_Nm(q, q)
        act.hold(command)
        for _ in range(SUB):
            act.substep(q, q, T / SUB)
    return out


def test_locked_drive_without_loop_rings_at_sqrt_k_over_J():
    # closed form of an undamped spring-mass (Pratt & Williamson 1995: the locked SEA's motor-side resonance)
    p = _linear(torque_kp=0.0, torque_kd_s=0.0, motor_damping_Nm_s_per_rad=0.0)
    act = make_actuators(p, LIMIT)
    act.reset(0.2 * LIMIT)  # released from a deflection, commanded nothing: tau_m = 0
    y = _step_locked(act, np.zeros(len(LIMIT)), 2000)
    for j in range(len(LIMIT)):
        s = np.sign(y[:, j])
        crossings = np.flatnonzero(s[1:] != s[:-1])
        # linear interpolation of the zero crossings; half a period between two
        tc = [(i + y[i, j] / (y[i, j] - y[i + 1, j])) * T for i in crossings]
        f = (len(tc) - 1) / (2.0 * (tc[-1] - tc[0]))
        f_ref = math.sqrt(p.spring_stiffness_Nm_per_rad[j] / p.motor_inertia_kg_m2[j]) / (2 * math.pi)
        assert f == pytest.approx(f_ref, rel=1e-3)
        assert torque_loop_closed_form(p).open_resonance_Hz[j] == pytest.approx(f_ref, rel=1e-12)
    # e.g. k_s = 2155 N m/rad on J_m = 0.5 kg m^2: 10.4 Hz (the figure of the drive's specification)
    q = _linear(spring_stiffness_Nm_per_rad=2155.0, motor_inertia_kg_m2=0.5)
    assert torque_loop_closed_form(q).open_resonance_Hz[0] == pytest.approx(10.45, abs=0.01)


def test_closed_loop_step_overshoot_matches_the_second_order_closed_form():
    # Ogata, Modern Control Engineering, sec. 5-3: M_p = exp(-pi zeta / sqrt(1 - zeta^2))
    p = _linear(torque_damping_ratio=0.4)
    cf = torque_loop_closed_form(p)
    assert np.allclose(cf.damping_ratio, 0.4)
    act = make_actuators(p, LIMIT)
    act.reset(np.zeros(len(LIMIT)))
    step = 0.1 * LIMIT
    y = _step_locked(act, step, 300)
    overshoot = y.max(axis=0) / step - 1.0
    ref = math.exp(-math.pi * 0.4 / math.sqrt(1 - 0.4**2))  # 25.4 %
    # sampled loop (4 kHz) and ticks of 1 ms: a few points of overshoot from the discretisation
    assert np.allclose(overshoot, ref, atol=0.03)
    assert np.allclose(y[-1], step, rtol=1e-3)  # unit DC gain: the feed-forward plus P on the error


def test_torque_bandwidth_matches_ogata_and_scipy():
    p = _linear()
    cf = torque_loop_closed_form(p)
    wn, z = cf.natural_frequency_rad_s, cf.damping_ratio
    # Ogata sec. 7-5, the -3 dB bandwidth of a standard second-order system
    wb = wn * np.sqrt(1 - 2 * z**2 + np.sqrt(4 * z**4 - 4 * z**2 + 2))
    assert np.allclose(cf.bandwidth_Hz, wb / (2 * np.pi))
    measured = torque_bandwidth_Hz(lambda: make_actuators(p, LIMIT), LIMIT, control_period_s=T, substeps=SUB)
    assert np.allclose(measured, cf.bandwidth_Hz, rtol=0.03)
    # the exoskeleton-drive range of 5-30 Hz or a little above (common practice)
    assert 5.0 < min(measured) and max(measured) < 60.0
    # scipy.signal: |H(j w)| of wn^2 / (s^2 + 2 zeta wn s + wn^2) at a few frequencies
    for f in (3.0, 15.0, 30.0):
        g = torque_frequency_response(lambda: make_actuators(p, LIMIT), np.full(len(LIMIT), f), 0.1 * LIMIT,
                                      control_period_s=T, substeps=SUB)
        ref = [abs(signal.freqresp(signal.lti([w * w], [1.0, 2 * zz * w, w * w]), [2 * np.pi * f])[1][0])
               for w, zz in zip(wn, z)]
        assert np.allclose(g, ref, rtol=0.03)


def test_lag_bandwidth_measurement_matches_the_first_order_closed_form():
    # a first-order lag's -3 dB frequency is 1/(2 pi T) (closed form); a slow lag keeps the 1 kHz sampling out
    tau = 0.02
    f = torque_bandwidth_Hz(lambda: TorqueSourceActuators(LIMIT, ActuatorParams(tau)), LIMIT, control_period_s=T,
                            substeps=SUB)
    assert np.allclose(f, 1 / (2 * np.pi * tau), rtol=0.01)
    # an ideal source has no -3 dB frequency below a quarter of the control rate
    assert torque_bandwidth_Hz(lambda: IdealActuators(LIMIT), LIMIT, control_period_s=T, substeps=SUB) == [None] * 7


def test_spring_and_motor_store_and_return_energy_without_creating_it():
    # closed form: 1/2 J w^2 + 1/2 k d^2 is constant without damping or input, and never rises with damping
    p = _linear(torque_kp=0.0, torque_kd_s=0.0, motor_damping_Nm_s_per_rad=0.0)
    q = np.zeros(len(LIMIT))
    act = make_actuators(p, LIMIT)
    act.reset(0.3 * LIMIT)
    act.hold(np.zeros(len(LIMIT)))
    act.substep(q, q, T / SUB)  # the motor placed at its start deflection
    e0 = act.energy_J(q)
    assert e0 == pytest.approx(sum(0.5 * (0.3 * L) ** 2 / k for L, k in zip(LIMIT, p.spring_stiffness_Nm_per_rad)),
                               rel=1e-3)
    energies = []
    for _ in range(8000):  # 2 s
        act.substep(q, q, T / SUB)
        energies.append(act.energy_J(q))
    assert np.allclose(energies, e0, rtol=1e-9)  # the exact step of the linear motor: round-off only
    damped = make_actuators(dataclasses.replace(p, motor_damping_Nm_s_per_rad=EXO.viscous_friction_Nm_s_per_rad),
                            LIMIT)
    damped.reset(0.3 * LIMIT)
    damped.hold(np.zeros(len(LIMIT)))
    damped.substep(q, q, T / SUB)
    e = [damped.energy_J(q)]
    for _ in range(8000):
        damped.substep(q, q, T / SUB)
        e.append(damped.energy_J(q))
    assert np.all(np.diff(e) <= 1e-12 * e[0]) and e[-1] < 0.9 * e[0]


class _TimedSine(Controller):
    """Open-loop torques that depend on time only (so that delayed runs command the same)."""

    name = "timed_sine"

    def step(self, m):
        return 0.5 * np.sin(2 * np.pi * 3.0 * m.t_s + np.arange(7))


def _short(name: str = "stand_still", **kw) -> Scenario:
    s = load_scenario(SCENARIOS / f"{name}.py")
    return dataclasses.replace(s, duration_s=0.06, safety=None, **kw)


def test_control_delay_shifts_the_applied_torque_by_exactly_d_ticks():
    # an ideal drive applies the (clipped) command at once: a delay of d ticks must shift it by d ticks, to the bit
    runs = {d: Simulation(_short(actuators=IdealActuatorParams(), control_delay_ticks=d), _TimedSine()).run()
            for d in (0, 3)}
    a0, a3 = runs[0].arrays["tau_applied"], runs[3].arrays["tau_applied"]
    assert np.array_equal(runs[0].arrays["tau_cmd"], runs[3].arrays["tau_cmd"])
    assert np.array_equal(a3[3:], a0[:-3])
    assert not np.array_equal(a3, a0)
    assert runs[3].meta["drives"] == {"model": "ideal", "parameters": {}, "control_delay_ticks": 3}
    # an ideal drive without delay tracks with zero error (the command of tick k against row k+1)
    arr = runs[0].arrays
    assert torque_tracking_rms_Nm(arr["tau_cmd"], arr["tau_applied"], LIMIT) == 0.0
    assert torque_tracking_rms_Nm(runs[3].arrays["tau_cmd"], a3, LIMIT) > 0.0


def test_a_control_delay_fault_adds_to_the_run_s_delay():
    from sim import ControlDelay

    fault = ControlDelay(name="late", ticks=1, start_s=0.0, end_s=1.0)
    a = Simulation(_short(actuators=IdealActuatorParams(), control_delay_ticks=2, faults=(fault,)), _TimedSine()).run()
    b = Simulation(_short(actuators=IdealActuatorParams(), control_delay_ticks=3), _TimedSine()).run()
    assert np.array_equal(a.arrays["tau_applied"], b.arrays["tau_applied"])


def test_command_delay_line():
    d = CommandDelay(2)
    out = [d.push(np.array([float(k)]))[0] for k in range(5)]
    assert out == [0.0, 0.0, 0.0, 1.0, 2.0]  # the first command fills the line
    with pytest.raises(ParameterError, match="CommandDelay.ticks"):
        CommandDelay(-1)


def test_tracking_rms_by_hand():
    cmd = np.array([[100.0, 1.0], [0.0, 0.0], [0.0, 0.0]])
    app = np.array([[0.0, 0.0], [80.0, 2.0], [3.0, 4.0]])
    # rows (clip(cmd_k) - app_{k+1}): (80-80, 1-2) and (-3, -4): sqrt((1 + 25) / 2)
    assert torque_tracking_rms_Nm(cmd, app, np.array([80.0, 20.0])) == pytest.approx(math.sqrt(13.0))


def test_defaults_keep_the_lag_model_and_the_columns_of_before():
    s = load_scenario(SCENARIOS / "reach.py")
    assert type(s.actuators) is ActuatorParams and s.control_delay_ticks == 0
    assert isinstance(make_actuators(s.actuators, LIMIT), TorqueSourceActuators)
    sim = Simulation(dataclasses.replace(s, duration_s=0.01), "transparent")
    assert "tau_motor" not in sim.columns and "motor_saturated" not in sim.columns
    assert list(sim.columns) == list(log_columns("coupled", 7, 7, 3, tuple(
        d for d in sim.controller.diagnostic_names() if not d.endswith("_time_s"))))
    assert sim.meta["drives"]["model"] == "lag" and sim.meta["drives"]["control_delay_ticks"] == 0
    assert sim.meta["exo_params"]["armature_kg_m2"] == list(ExoParams().armature_kg_m2)


def test_series_elastic_run_moves_rotor_inertia_behind_the_spring_and_counts_motor_saturation():
    weak = SeriesElasticParams(motor_torque_limit_Nm=0.5)  # a motor far too weak to hold the arm
    s = _short("reach", actuators=weak)
    sim = Simulation(s, "transparent")
    traj = sim.run()
    meta, arr = traj.meta, traj.arrays
    assert meta["drives"]["model"] == "series_elastic"
    assert meta["drives"]["parameters"]["motor_inertia_kg_m2"] == list(EXO.armature_kg_m2)  # the exo's armature
    assert meta["exo_params"]["armature_kg_m2"] == [0.0] * 7 and meta["exo_params"]["coulomb_friction_Nm"] == [0.0] * 7
    assert np.all(sim.plant.exo.model.armature == 0.0) and np.all(sim.controller.context.arm.model.armature == 0.0)
    assert np.all(np.abs(arr["tau_motor"]) <= 0.5 + 1e-12)
    assert arr["motor_saturated"].any()
    # the joint-torque reading is the spring torque (no sensor noise by default)
    assert np.allclose(arr["tau_applied"][0], np.clip(arr["tau_cmd"][0], -LIMIT, LIMIT))
    assert drive_params_from_meta(meta["drives"]) == drive_params(s)  # meta.json rebuilds the run's drives
    m = drive_metrics(arr, meta, LIMIT, meta["exo_joints"])
    assert m["drive_model"] == "series_elastic" and 0.0 < m["motor_saturation_fraction"] <= 1.0
    assert set(m["torque_bandwidth_Hz"]) == set(meta["exo_joints"])


@pytest.mark.parametrize("kw, match", [
    ({"actuators": SeriesElasticParams(loop_rate_Hz=3000.0)}, "actuators.loop_rate_Hz must be the substep rate"),
    ({"control_delay_ticks": -1}, "control_delay_ticks must be an integer >= 0"),
    ({"control_delay_ticks": 2000}, "control_delay_ticks = 2000"),
    ({"actuators": "lag"}, "actuators must be a ActuatorParams, IdealActuatorParams or SeriesElasticParams, got str"),
])
def test_bad_drive_fields_name_the_culprit(kw, match):
    s = load_scenario(SCENARIOS / "reach.py")
    with pytest.raises(ParameterError, match=match):
        dataclasses.replace(s, **kw)


def test_series_elastic_params_check_their_fields():
    with pytest.raises(ParameterError, match=r"spring_stiffness_Nm_per_rad must be a number or 7 numbers"):
        SeriesElasticParams(spring_stiffness_Nm_per_rad=(1.0, 2.0))
    with pytest.raises(ParameterError, match=r"motor_inertia_kg_m2\[0\] must be > 0"):
        SeriesElasticParams(motor_inertia_kg_m2=0.0)
    assert SeriesElasticParams(torque_kp=2.0).torque_kp == (2.0,) * 7


def test_wall_push_sea_keeps_for_subject():
    from sim.loop.scenario import load_scenario as load

    s = load(SCENARIOS / "wall_push_sea.py", subject="f5")
    base = load(SCENARIOS / "wall_push.py", subject="f5")
    assert isinstance(s.actuators, SeriesElasticParams) and s.walls == base.walls and s.intent == base.intent


@pytest.mark.parametrize("damping, inertia", [(False, False), (True, False), (True, True)])
def test_moving_output_drags_the_motor_unless_fed_forward(damping, inertia):
    # closed form, steady state of the loop under a uniformly accelerating joint, tau_d = 0: with
    # theta_m = q + tau_s / k_s, J_m theta_m'' + b_m theta_m' = tau_m - tau_s, tau_m = -K_p tau_s - K_d tau_s' + FF,
    # tau_s = c0 + c1 t solves it without the feed-forward (FF = 0) for c1 = -b_m a / (1 + K_p) and
    # c0 = -(J_m a + b_m c1 / k_s + K_d c1) / (1 + K_p); with FF = b_m v, c1 = 0 and c0 = -J_m a / (1 + K_p);
    # with FF = J_m a + b_m v, tau_s = 0
    p = dataclasses.replace(_linear(), damping_feedforward=damping, inertia_feedforward=inertia)
    act = make_actuators(p, LIMIT)
    act.reset(np.zeros(7))
    act.hold(np.zeros(7))
    acc, h = 2.0, T / SUB  # [rad/s^2], [s]
    n = 2000  # 0.5 s: many loop time constants
    for i in range(n):
        t = i * h
        act.substep(np.full(7, 0.5 * acc * t * t), np.full(7, acc * t), h)
    t = n * h
    tau = act.delivered_Nm(np.full(7, 0.5 * acc * t * t), np.full(7, acc * t))
    J, b = np.array(p.motor_inertia_kg_m2), np.array(p.motor_damping_Nm_s_per_rad)
    k, kp, kd = (np.array(getattr(p, f)) for f in ("spring_stiffness_Nm_per_rad", "torque_kp", "torque_kd_s"))
    c1 = np.zeros(7) if damping else -b * acc / (1.0 + kp)
    c0 = -(J * acc + b * c1 / k + kd * c1) / (1.0 + kp)
    ref = np.zeros(7) if inertia else c0 + c1 * t
    # the loop samples at 4 kHz and estimates the acceleration by a backward difference: 2 % of the drag
    assert np.allclose(tau, ref, atol=0.02 * np.max(np.abs(J * acc + b * acc * t)))


def test_drives_report_section_only_for_other_drives_than_the_default():
    from sim.output.report import drives_section

    default = Simulation(_short(), "transparent").meta
    assert drives_section(default, {"drive_model": "lag"}) == []
    sea = Simulation(_short(actuators=SeriesElasticParams(), control_delay_ticks=2), "transparent").meta
    text = "\n".join(drives_section(sea, {"torque_tracking_rms_Nm": 1.5, "motor_saturation_fraction": 0.0,
                                          "torque_bandwidth_Hz": {n: 20.0 for n in sea["exo_joints"]}}))
    assert "## Drives" in text and "Series-elastic" in text and "Control delay: 2 tick(s)" in text
    assert "| exo_elbow | 400 |" in text  # the elbow's spring stiffness [N m/rad] in its row


def test_per_joint_bandwidths_flatten_for_tables():
    from sim.analysis.metrics import flat_metrics
    from sim.output.report import key_info

    flat = flat_metrics({"drive_model": "lag", "torque_bandwidth_Hz": {"exo_elbow": 79.6}})
    assert flat == {"drive_model": "lag", "torque_bandwidth_Hz.exo_elbow": 79.6}
    assert key_info("torque_bandwidth_Hz.exo_elbow")[:2] == ("Hz", "higher")


def test_run_warnings_say_when_a_rendered_wall_was_active():
    # passivity (the definition in sim.analysis.metrics.wall_cycle_energy_returned_J): a passive wall returns at
    # most the energy it took over a push-release cycle; a positive return under a variant rendering the wall is
    # said on the terminal, and only then (a variant without the wall commands 0 N/m: its hand just passes)
    from sim.experiments.run import run_warnings

    active = {"wall_stiffness_commanded_N_per_m": 600.0, "wall_energy_returned_J": 0.155}
    lines = run_warnings(active)
    assert len(lines) == 1 and "0.155 J" in lines[0] and "active" in lines[0]
    assert run_warnings({"wall_stiffness_commanded_N_per_m": 600.0, "wall_energy_returned_J": -0.11}) == []
    assert run_warnings({"wall_stiffness_commanded_N_per_m": 0.0, "wall_energy_returned_J": 0.2}) == []
    assert run_warnings({"wall_stiffness_commanded_N_per_m": 600.0, "wall_energy_returned_J": None}) == []


def test_series_elastic_bandwidth_is_measured_once_per_drive():
    # the remembered figure is the measurement itself (torque_bandwidth_Hz, checked against Ogata's closed form
    # above), and a second run with the same drives reuses it
    from models.exo import ExoParams
    from sim.analysis.drives import series_elastic_bandwidth_Hz, torque_bandwidth_Hz
    from sim.physics.actuators import make_actuators
    from sim.physics.sea import SeriesElasticParams

    p = SeriesElasticParams(spring_stiffness_Nm_per_rad=900.0, motor_coulomb_Nm=0.0).resolved(ExoParams())
    lim = ExoParams().torque_limit_Nm
    first = series_elastic_bandwidth_Hz(p, lim, 1e-3, 4)
    hits = series_elastic_bandwidth_Hz.cache_info().hits
    assert series_elastic_bandwidth_Hz(p, lim, 1e-3, 4) == first
    assert series_elastic_bandwidth_Hz.cache_info().hits == hits + 1
    direct = torque_bandwidth_Hz(lambda: make_actuators(p, np.array(lim)), np.array(lim), control_period_s=1e-3,
                                 substeps=4)
    assert list(first) == direct
