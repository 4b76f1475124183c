"""The hand fixture, the H1 impedance estimator, the m s + b + k/s fit and the transparency bandwidth.

Outside references, named beside each check:
- the closed-form impedance of a mass-damper-spring, Z(s) = m s + b + k/s (any mechanics textbook, e.g.
  Hogan, "Impedance control: an approach to manipulation", ASME J. Dyn. Sys. Meas. Control 107:1-24, 1985),
  simulated with scipy.signal.lsim;
- the mass felt at the end point, Khatib 1987 (IEEE J. Robotics and Automation 3(1):43-53): with
  Lambda = (J M^-1 J^T)^-1, computed with pinocchio's crba and getFrameJacobian;
- calculus for the motions (velocity = derivative of position, by numpy finite differences).
"""

from __future__ import annotations

import dataclasses

import numpy as np
import pinocchio as pin
import pytest
from scipy import signal

from models.errors import ParameterError
from sim import load_scenario
from sim.analysis.impedance import (
    fit_impedance,
    h1_impedance,
    model_impedance,
    transparency_bandwidth_Hz,
)
from sim.experiments.impedance import felt_impedance, write_impedance
from sim.loop.simulation import Simulation, build_assembly
from sim.physics.fixture import Chirp, HandFixture, Multisine, PiecewiseVelocity
from sim.physics.plant import PlantParams

M_KG, B_N_S_PER_M, K_N_PER_M = 2.0, 15.0, 400.0


def _msd_record(noise_N: float = 0.05, seed: int = 3):
    """Force (a multisine, 0.25 Hz lines over 0.5-20 Hz) into a known mass-damper-spring; the velocity from
    scipy.signal.lsim of the admittance s / (m s^2 + b s + k), the force read with seeded noise."""
    fs, period, periods = 1000.0, 4.0, 9
    t = np.arange(int(period * periods * fs)) / fs
    f_lines = np.arange(2, 81) * 0.25
    rng = np.random.default_rng(seed)
    phases = rng.uniform(0, 2 * np.pi, f_lines.size)
    force = np.sin(2 * np.pi * np.outer(t, f_lines) + phases).sum(axis=1)
    admittance = signal.lti([1.0, 0.0], [M_KG, B_N_S_PER_M, K_N_PER_M])
    _, v, _ = signal.lsim(admittance, force, t)
    start = int(period * fs)  # the first period holds the start transient
    return force[start:] + noise_N * rng.standard_normal(t.size - start), v[start:], fs


def test_h1_estimate_matches_closed_form_mass_damper_spring_where_coherent():
    # reference: Z(j w) = j w m + b + k / (j w), the closed form of the parallel mass-damper-spring
    # a periodic excitation analysed over whole periods (rectangular window): each line without leakage
    force, v, fs = _msd_record()
    freq, Z, coh = h1_impedance(force, v, fs, segment_s=4.0, overlap=0.0, window="boxcar")
    sel = (freq >= 0.5) & (freq <= 20.0) & (coh > 0.9)
    assert sel.sum() > 50
    exact = model_impedance(freq[sel], M_KG, B_N_S_PER_M, K_N_PER_M)
    assert np.max(np.abs(Z[sel] - exact) / np.abs(exact)) < 0.05


@pytest.mark.parametrize("window, overlap", [("boxcar", 0.0), ("hann", 0.5)])
def test_fit_recovers_mass_damping_stiffness_within_5_percent(window, overlap):
    # reference: the same closed form; m, b and k set above, the estimate from scipy.signal.lsim's record
    # (Hann windows too, as for a chirp: their leakage at the lowest lines stays inside the 5 %)
    force, v, fs = _msd_record()
    freq, Z, coh = h1_impedance(force, v, fs, segment_s=4.0, overlap=overlap, window=window)
    fit = fit_impedance(freq, Z, coh, min_coherence=0.9, band_Hz=(0.5, 20.0))
    assert fit.mass_kg == pytest.approx(M_KG, rel=0.05)
    assert fit.damping_N_s_per_m == pytest.approx(B_N_S_PER_M, rel=0.05)
    assert fit.stiffness_N_per_m == pytest.approx(K_N_PER_M, rel=0.05)
    assert fit.r2 > 0.99 and fit.coherence_range[0] >= 0.9


def test_transparency_bandwidth_of_a_pure_mass_is_threshold_over_2_pi_m():
    # reference: |Z| = 2 pi f m for a mass (closed form), so |Z| < Z* up to f* = Z* / (2 pi m)
    freq = np.arange(1, 201) * 0.1
    Z = model_impedance(freq, 0.5, 0.0, 0.0)
    bw = transparency_bandwidth_Hz(freq, Z, np.ones_like(freq), threshold_N_s_per_m=12.5)
    f_star = 12.5 / (2 * np.pi * 0.5)
    assert f_star - 0.1 <= bw < f_star
    # a threshold never reached: the band's top, a lower bound
    assert transparency_bandwidth_Hz(freq, Z, np.ones_like(freq), threshold_N_s_per_m=1e3) == freq[-1]


def _exo_alone_scenario():
    sc = load_scenario("scenarios/reach.py")
    # gravity and joint friction off: the test is about the inertia alone (friction would add damping)
    return dataclasses.replace(sc, plant=PlantParams(gravity_m_s2=0.0, exo_friction=False))


def _khatib(sc, u):
    """1 / (u^T J M^-1 J^T u) and u^T Lambda u, Lambda = (J M^-1 J^T)^-1 (Khatib 1987), with pinocchio."""
    asm = build_assembly(sc)
    model, data = asm.exo.model, asm.exo.model.createData()
    q = asm.q_exo0
    frame = next(c for c in asm.cuffs if c.name == "hand").exo_frame_id
    M = pin.crba(model, data, q)
    M = np.triu(M) + np.triu(M, 1).T  # crba fills the upper triangle
    pin.computeJointJacobians(model, data, q)
    J = pin.getFrameJacobian(model, data, frame, pin.LOCAL_WORLD_ALIGNED)[:3]
    A = J @ np.linalg.solve(M, J.T)
    return 1.0 / (u @ A @ u), u @ np.linalg.inv(A) @ u


@pytest.mark.parametrize("direction", [(1.0, 0.0, 0.0), (0.0, 0.0, 1.0)])
def test_mass_felt_with_the_hand_free_sideways_is_khatib_end_point_mass(direction):
    # The fixture constrains only the motion along u and leaves the cuff free sideways, so a force F u gives
    # the acceleration u^T J M^-1 J^T u F along u: the felt mass is 1 / (u^T J M^-1 J^T u) (Khatib 1987),
    # not u^T Lambda u (that one is felt with the cuff held in all three directions; next test).
    sc = _exo_alone_scenario()
    u = np.array(direction)
    free_mass, _ = _khatib(sc, u)
    fx = HandFixture(Multisine(0.001, (0.5, 5.0), 0.5), direction=direction, lateral="free")
    (r,) = felt_impedance(sc, ["zero"], fx)
    assert r.fit is not None and r.fit.r2 > 0.99
    assert r.fit.mass_kg == pytest.approx(free_mass, rel=0.05)


def test_mass_felt_with_the_hand_held_sideways_is_operational_space_inertia():
    # reference: u^T Lambda u, Lambda = (J M^-1 J^T)^-1 (Khatib 1987), with pinocchio's crba and Jacobian
    sc = _exo_alone_scenario()
    u = np.array([1.0, 0.0, 0.0])
    _, held_mass = _khatib(sc, u)
    fx = HandFixture(Multisine(0.001, (0.5, 5.0), 0.5), direction=tuple(u), lateral="held")
    (r,) = felt_impedance(sc, ["zero"], fx)
    assert r.fit.mass_kg == pytest.approx(held_mass, rel=0.05)


def test_transparent_with_ideal_sensing_and_drives_halves_the_felt_mass():
    # The transparency task's law (controllers.tasks.Transparency) makes the robot move as alpha M q'' = J^T f, so
    # the operational-space inertia felt at the held cuff, u^T Lambda u with Lambda = (J M^-1 J^T)^-1 (Khatib
    # 1987), scales by alpha = 1 - inertia_compensation = 0.5 against the gravity-compensated robot's (which
    # renders all of it) on the same fixture and posture. That holds with an ideal force sensor (no filter, noise
    # or delay) and ideal drives; the default sensor and drives leave more of the mass (their lags against the
    # stiff fixture). Friction off (it would add damping); without it the arm drifts in the null space of the held
    # hand (about 0.5-0.6 rad over the run, alike under both variants), so the two are compared with each other.
    from sim import IdealActuatorParams
    from sim.physics.sensors import ForceSensorParams

    sc = dataclasses.replace(load_scenario("scenarios/wall_push.py"), plant=PlantParams(exo_friction=False),
                             actuators=IdealActuatorParams(),
                             force_sensor=ForceSensorParams(noise_std_N=0.0, noise_std_Nm=0.0, cutoff_Hz=None,
                                                            delay_ticks=0))
    gravity, transparent = felt_impedance(sc, ["gravity", "transparent"], HandFixture(direction=(1.0, 0.0, 0.0)))
    assert gravity.fit.r2 > 0.98 and transparent.fit.r2 > 0.98
    assert transparent.fit.mass_kg == pytest.approx(0.5 * gravity.fit.mass_kg, rel=0.05)


def test_hand_cuff_sensor_measures_the_fixture_force_in_its_frame():
    # the controller's hand cuff reading is the fixture's force rotated into the cuff frame (R^T F), up to the
    # sensor's noise and bias; a rotation preserves the norm (reference: orthogonality of R)
    sc = dataclasses.replace(_exo_alone_scenario(), duration_s=0.3)
    fx = HandFixture(Multisine(0.002, (0.5, 5.0), 0.5), direction=(0.0, 0.0, 1.0))
    sim = Simulation(sc, "zero", mode="exo_alone", fixture=fx)
    sim.run()
    drive = sim.fixture_drive
    w = drive.wrench_in_cuff_frame()
    assert np.linalg.norm(w[:3]) == pytest.approx(np.linalg.norm(drive.force_N), rel=1e-12)
    assert np.allclose(drive.cuff_rotation @ w[:3], drive.force_N)
    cols = sim.trajectory.arrays
    assert cols["fixture_force_N"].shape == (300, 3) and cols["fixture_position_m"].shape == (300, 3)


def test_no_fixture_no_fixture_columns():
    sc = dataclasses.replace(load_scenario("scenarios/reach.py"), duration_s=0.01)
    sim = Simulation(sc, "zero", mode="exo_alone")
    assert not [c for c in sim.columns if c.startswith("fixture")]


def test_motions_velocity_is_the_derivative_of_position():
    # reference: calculus (central finite differences, numpy.gradient)
    t = np.arange(0.0, 3.0, 1e-4)
    for motion in (Multisine(0.003, (0.5, 5.0), 0.5), Chirp(0.002, (0.5, 5.0), 2.0),
                   PiecewiseVelocity(speed_m_s=0.1, distance_m=0.05, cycles=2, pause_s=0.1)):
        x = np.array([motion.position_m(s) for s in t])
        v = np.array([motion.velocity_m_s(s) for s in t])
        dx = np.gradient(x, t)
        smooth = np.abs(np.gradient(v, t)) * 1e-4 < 1e-3 * max(1e-9, np.abs(v).max())  # away from velocity jumps
        assert np.allclose(dx[smooth][1:-1], v[smooth][1:-1], atol=2e-3 * np.abs(v).max())


def test_multisine_peak_is_its_amplitude_and_piecewise_returns():
    ms = Multisine(0.004, (0.5, 20.0), 0.25)
    t = np.arange(0.0, ms.period_s, 1e-4)
    assert np.max(np.abs([ms.position_m(s) for s in t])) == pytest.approx(0.004, rel=0.01)
    pv = PiecewiseVelocity(speed_m_s=0.1, distance_m=0.05, cycles=2, pause_s=0.2)
    assert pv.cycle_s == pytest.approx(1.4)  # 2 x 0.05 m / 0.1 m/s + 2 x 0.2 s
    assert pv.position_m(0.5) == pytest.approx(0.05) and pv.velocity_m_s(0.8) == pytest.approx(-0.1)
    assert pv.position_m(10.0) == 0.0


@pytest.mark.parametrize("kwargs, match", [
    ({"direction": (1.0, 1.0, 0.0)}, "direction must be a finite unit 3-vector"),
    ({"lateral": "loose"}, "lateral must be one of held, free"),
    ({"stiffness_N_per_m": -1.0}, "stiffness_N_per_m must be a finite number > 0"),
])
def test_bad_fixture_parameters_name_the_field(kwargs, match):
    with pytest.raises(ParameterError, match=match):
        HandFixture(**kwargs)


def test_fixture_needs_the_robot():
    sc = load_scenario("scenarios/reach.py")
    with pytest.raises(ParameterError, match="fixture needs mode='exo_alone'"):
        Simulation(sc, None, mode="human_alone", fixture=HandFixture())


def test_write_impedance_writes_csv_bode_and_report(tmp_path):
    sc = _exo_alone_scenario()
    fx = HandFixture(Multisine(0.001, (0.5, 5.0), 0.5), direction=(0.0, 1.0, 0.0))
    res = felt_impedance(sc, ["zero"], fx, duration_s=4.0)
    paths = write_impedance(res, tmp_path, scenario_name=sc.name, fixture=fx)
    text = paths["report"].read_text()
    assert "felt mass m [kg]" in text and "Caution" in text
    lines = paths["csv"].read_text().splitlines()
    assert lines[0].startswith("variant,freq_Hz") and len(lines) == 1 + len(res[0].freq_Hz)
    assert paths["png"].stat().st_size > 10_000


@pytest.mark.parametrize("argv, match", [
    (["--direction", "1,0"], "--direction must be three comma-separated numbers"),
    (["--band", "5,1"], "--band must be 0 < LO < HI"),
    (["--amplitude", "-0.01"], "--amplitude must be a finite displacement > 0"),
    (["--controller", "nosuch"], "--controller: scenario 'reach' supports the controllers"),
    (["--posture", "0,10"], "--posture must be 7 comma-separated joint angles [deg]"),
])
def test_impedance_command_refuses_a_bad_value_in_one_line(argv, match, capsys, tmp_path):
    from sim.cli import main

    try:
        status = main(["impedance", "scenarios/reach.py", "--out", str(tmp_path / "out"), *argv])
    except SystemExit as e:  # a usage error (argparse's exit)
        status = e.code
    err = capsys.readouterr().err
    assert status in (1, 2) and match in err and err.count("\n") == 1


def test_impedance_command_writes_its_outputs(capsys, tmp_path):
    from sim.cli import main

    out = tmp_path / "imp"
    assert main(["impedance", "scenarios/reach.py", "--controller", "zero", "--duration", "8",
                 "--band", "0.5,5", "--out", str(out)]) == 0
    assert "felt mass m [kg]" in capsys.readouterr().out
    assert {p.name for p in out.iterdir()} == {"impedance.csv", "bode.png", "report.md"}


def test_piecewise_velocity_drives_the_hand_forward_and_back():
    # the imposed point is p0 + s(t) u with s the closed-form ramp (speed x time up to the distance, then back);
    # the stiff coupling keeps the cuff point within F / K of it along u (Hooke's law)
    sc = dataclasses.replace(load_scenario("scenarios/reach.py"), duration_s=1.0)
    motion = PiecewiseVelocity(speed_m_s=0.1, distance_m=0.03, cycles=1, pause_s=0.1)
    fx = HandFixture(motion, direction=(0.0, 1.0, 0.0))
    traj = Simulation(sc, "gravity", mode="exo_alone", fixture=fx).run()
    t, x = traj.t_s, traj.arrays["fixture_position_m"]
    s = (x - x[0]) @ fx.unit
    expected = np.array([motion.position_m(ti) for ti in t])
    assert np.allclose(s, expected, atol=1e-12)
    assert s.max() == pytest.approx(0.03, abs=1e-3)
    F_u = traj.arrays["fixture_force_N"] @ fx.unit
    assert np.max(np.abs(F_u)) < fx.stiffness_N_per_m * 1e-3  # the coupling never stretched by as much as 1 mm


def test_fixture_start_posture_is_the_robot_start():
    sc = dataclasses.replace(load_scenario("scenarios/reach.py"), duration_s=0.005)
    q0 = tuple(build_assembly(sc).q_exo0 + 0.1)
    sim = Simulation(sc, "gravity", mode="exo_alone", fixture=HandFixture(start_rad=q0))
    assert np.array_equal(sim.plant.q_exo, np.array(q0))
    with pytest.raises(ParameterError, match="HandFixture.start_rad must hold 7 joint angles"):
        Simulation(sc, "gravity", mode="exo_alone", fixture=HandFixture(start_rad=(0.0, 0.1)))


def test_through_the_wearer_the_robot_adds_to_the_wearer_end_point_mass():
    # The fixture holds the wearer's hand (free sideways) and moves the robot through the strapped cuffs. The
    # wearer's own arm alone would be felt with 1 / (u^T J_h M_h^-1 J_h^T u) (Khatib 1987; pinocchio's crba and
    # Jacobian of the human model); strapping the robot on can only add inertia at low frequency, so the
    # fitted mass is at least that (a bound, not an equality: the cuffs are compliant).
    sc = _exo_alone_scenario()
    asm = build_assembly(sc)
    human, q = asm.human, asm.q_human0
    model, data = human.model, human.model.createData()
    frame = human.frame_id(human.hand_frame)
    M = pin.crba(model, data, q)
    M = np.triu(M) + np.triu(M, 1).T
    pin.computeJointJacobians(model, data, q)
    J = pin.getFrameJacobian(model, data, frame, pin.LOCAL_WORLD_ALIGNED)[:3]
    u = np.array([0.0, 0.0, 1.0])
    wearer_alone_kg = 1.0 / (u @ J @ np.linalg.solve(M, J.T) @ u)
    fx = HandFixture(Multisine(0.001, (0.5, 5.0), 0.5), direction=tuple(u), lateral="free")
    (r,) = felt_impedance(sc, ["zero"], fx, through_wearer=True)
    assert r.fit is not None and r.coherence.min() > 0.9
    assert r.fit.mass_kg > 1.2 * wearer_alone_kg
