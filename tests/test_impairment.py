"""The impaired wearer (sim.physics.impairment) and the completion metrics, against outside references.

References named beside each check:

* Lance J.W. (1980), Symposium synopsis, in Feldman R.G., Young R.R., Koella W.P. (eds.), Spasticity: Disordered
  Motor Control, Year Book Medical, Chicago, pp. 485-494: spasticity is "a motor disorder characterized by a
  velocity-dependent increase in tonic stretch reflexes": no resistance below a threshold speed, more above it,
  after the reflex delay.
* Hooke's law (a linear spring, F = -k x): the contracture's end ranges.
* numpy.fft.rfft and scipy.signal.periodogram: the tremor's spectrum.
* Flash T., Hogan N. (1985), J. Neurosci. 5(7):1688-1703: the minimum-jerk profile x(tau) = 10 tau^3 - 15 tau^4
  + 6 tau^5, whose crossing time scipy.optimize.brentq solves for.
* numpy.clip: the saturation of the weak wearer's torque.
"""

from __future__ import annotations

import dataclasses
import math
from pathlib import Path

import numpy as np
import pinocchio as pin
import pytest
from scipy.optimize import brentq
from scipy.signal import periodogram

import models
from models.errors import ParameterError
from models.human import HUMAN_ARM_JOINTS, HUMAN_ARM_LIMITS_RAD, HumanParams
from sim import (
    Contracture,
    Impairment,
    JointIntent,
    Simulation,
    Spasticity,
    Tremor,
    Via,
    Weakness,
    load_scenario,
)
from sim.analysis.metrics import (
    TARGET_TOLERANCE_M,
    completion_metrics,
    movement_completion,
    time_to_target_s,
)
from sim.experiments.run import run_scenario
from sim.output.report import wearer_section
from sim.physics.impairment import ImpairmentTorque
from sim.physics.wearer import HumanMotor

SCENARIOS = Path(__file__).resolve().parents[1] / "scenarios"
ELBOW = "human_elbow_flexion"
J_ELBOW = HUMAN_ARM_JOINTS.index(ELBOW)
T = 1e-3  # control period [s]


def spastic(**kw) -> ImpairmentTorque:
    s = Spasticity({ELBOW: 2.0}, threshold_rad_s=1.0, reflex_delay_s=0.04, **kw)
    return ImpairmentTorque(Impairment(spasticity=s), HUMAN_ARM_JOINTS, T)


def elbow_torques(model: ImpairmentTorque, speeds: np.ndarray) -> np.ndarray:
    """The model's elbow torque [N m] for a sequence of elbow speeds [rad/s], one per tick."""
    out = []
    for k, w in enumerate(speeds):
        v = np.zeros(7)
        v[J_ELBOW] = w
        out.append(model.torque(k * T, np.zeros(7), v)[J_ELBOW])
    return np.array(out)


# -- spasticity: Lance (1980) ------------------------------------------------------------------------------
@pytest.mark.parametrize("speed", [-0.5, -0.99, 0.5, 3.0])
def test_spasticity_is_zero_below_the_threshold_speed_and_in_the_unstretched_direction(speed):
    # Lance 1980: a velocity-dependent stretch reflex; below the threshold (|v| < 1 rad/s) and for flexion (v > 0,
    # the flexors shorten) there is none
    tau = elbow_torques(spastic(), np.full(200, speed))
    assert np.all(tau == 0.0)


def test_spasticity_grows_with_speed_above_the_threshold_after_the_reflex_delay():
    # Lance 1980 with the closed form tau = -G (|v(t - d)| - v_th)_+ sign(v(t - d)): a step of extension speed at
    # tick 100 is resisted from tick 100 + d / T on, by G (|v| - v_th), opposing the motion
    G, v_th, d_ticks = 2.0, 1.0, 40
    peaks = []
    for speed in (-1.5, -2.0, -3.0):
        speeds = np.r_[np.zeros(100), np.full(200, speed)]
        tau = elbow_torques(spastic(), speeds)
        assert np.all(tau[:100 + d_ticks] == 0.0)  # nothing before the reflex delay has passed
        np.testing.assert_allclose(tau[100 + d_ticks:], G * (abs(speed) - v_th), rtol=0, atol=1e-12)
        peaks.append(tau[-1])
    assert peaks[0] < peaks[1] < peaks[2]  # grows with speed


def test_spasticity_stretched_both_ways_opposes_either_motion():
    tau = elbow_torques(spastic(stretched_by="both"), np.r_[np.full(100, 2.5), np.full(100, -2.5)])
    assert tau[50] == pytest.approx(-2.0 * 1.5) and tau[-1] == pytest.approx(2.0 * 1.5)  # -G (|v| - v_th) sign(v)


def test_reflex_delay_is_kept_in_whole_control_periods():
    s = Spasticity({ELBOW: 1.0}, reflex_delay_s=0.0234)
    assert ImpairmentTorque(Impairment(spasticity=s), HUMAN_ARM_JOINTS, 1e-3).delay_ticks == 23
    assert ImpairmentTorque(Impairment(spasticity=s), HUMAN_ARM_JOINTS, 2e-3).delay_ticks == 12


# -- weakness: saturation at the scaled capacity -----------------------------------------------------------
def test_weak_wearer_torque_saturates_at_the_scaled_capacity():
    asm = models.assemble("m50")
    arm = asm.human
    q0 = np.radians([20.0, 10.0, 0.0, 50.0, 0.0, 0.0, 0.0])
    intent = JointIntent(start_rad=tuple(q0), vias=(Via(posture_rad=tuple(q0 + 0.4), move_s=1.0),))
    weak = Weakness({"human_gh_flexion": 0.25, ELBOW: 0.1})
    healthy = HumanMotor(arm, asm.human_params, intent)
    impaired = HumanMotor(arm, asm.human_params, intent, impairment=Impairment(weakness=weak))
    capacity = arm.model.effortLimit * np.array([weak.scale[j] for j in HUMAN_ARM_JOINTS])
    rng = np.random.default_rng(3)
    saturated = 0
    for t in (0.0, 0.4, 0.8):
        q = q0 + rng.normal(scale=1.0, size=7)  # far off the intent: large voluntary torques
        v = rng.normal(scale=3.0, size=7)
        free = healthy.torque(t, q, v)  # below the healthy limits here, or clipped at them
        tau = impaired.torque(t, q, v)
        np.testing.assert_array_equal(tau, np.clip(free, -capacity, capacity))  # numpy.clip as the reference
        saturated += int(np.sum(np.abs(tau) == capacity))
    assert saturated >= 2
    assert np.all(impaired.last_impairment_torque == 0.0)  # weakness is no involuntary torque


# -- contracture: Hooke's law beyond the reduced range ------------------------------------------------------
def test_contracture_is_zero_inside_the_range_and_a_linear_spring_beyond_it():
    lo, hi, k = math.radians(30.0), math.radians(110.0), 20.0
    model = ImpairmentTorque(Impairment(contracture=Contracture({ELBOW: (lo, hi)}, stiffness_Nm_per_rad=k)),
                             HUMAN_ARM_JOINTS, T)

    def tau(q_elbow):
        q = np.zeros(7)
        q[J_ELBOW] = q_elbow
        return model.torque(0.0, q, np.zeros(7))[J_ELBOW]

    for q in np.linspace(lo, hi, 9):
        assert tau(q) == 0.0
    for x in (0.01, 0.1, 0.3):  # Hooke: F = -k x, x the excursion past the end
        assert tau(hi + x) == pytest.approx(-k * x, rel=1e-12)
        assert tau(lo - x) == pytest.approx(k * x, rel=1e-12)
    eps = 1e-9  # continuity at both ends
    assert abs(tau(hi + eps)) <= k * eps * 1.01 and abs(tau(lo - eps)) <= k * eps * 1.01


def test_contracture_grade_keeps_a_share_of_the_model_range_about_its_middle():
    lower, upper = models.build_human(HumanParams("m50")).position_limits()  # AAOS ranges (Norkin & White)
    np.testing.assert_allclose(np.array(HUMAN_ARM_LIMITS_RAD), np.c_[lower, upper], rtol=0, atol=1e-12)
    lo, hi = HUMAN_ARM_LIMITS_RAD[J_ELBOW]
    for grade, kept in zip(("mild", "moderate", "severe"), Contracture.GRADE_RANGE_KEPT):
        lo_c, hi_c = Contracture.grade(grade).range_rad[ELBOW]
        assert hi_c - lo_c == pytest.approx(kept * (hi - lo))
        assert 0.5 * (lo_c + hi_c) == pytest.approx(0.5 * (lo + hi))


# -- tremor: the spectrum peaks at the given frequency with the given amplitude -----------------------------
def test_tremor_spectrum_peaks_at_its_frequency_with_its_amplitude():
    A, f = 0.8, 5.0
    model = ImpairmentTorque(Impairment(tremor=Tremor({ELBOW: A}, frequency_Hz=f)), HUMAN_ARM_JOINTS, T, seed=7)
    n = 10_000  # 10 s at 1 kHz: 50 whole periods
    x = np.array([model.torque(k * T, np.zeros(7), np.zeros(7))[J_ELBOW] for k in range(n)])
    spectrum = np.abs(np.fft.rfft(x)) * 2.0 / n  # numpy: the one-sided amplitude spectrum
    freqs = np.fft.rfftfreq(n, T)
    assert freqs[np.argmax(spectrum)] == pytest.approx(f)
    assert spectrum.max() == pytest.approx(A, rel=1e-6)
    fp, pxx = periodogram(x, fs=1.0 / T, scaling="spectrum")  # scipy: power A^2 / 2 at f
    assert fp[np.argmax(pxx)] == pytest.approx(f) and pxx.max() == pytest.approx(A**2 / 2, rel=1e-6)


def test_tremor_phase_comes_from_the_seed_or_is_fixed():
    tr = Impairment(tremor=Tremor.grade("mild"))
    phases = [ImpairmentTorque(tr, HUMAN_ARM_JOINTS, T, seed=s).tremor_phase_rad for s in (1, 1, 2)]
    assert phases[0] == phases[1] != phases[2]
    fixed = Impairment(tremor=Tremor.grade("mild", phase_rad=0.5))
    assert ImpairmentTorque(fixed, HUMAN_ARM_JOINTS, T, seed=9).tremor_phase_rad == 0.5


# -- completion metrics -------------------------------------------------------------------------------------
def test_a_hand_that_goes_60_percent_of_the_way_has_completion_0_6():
    start, target = np.array([0.1, -0.2, -0.3]), np.array([0.4, -0.1, 0.1])
    s = np.linspace(0.0, 0.6, 50)[:, None]
    side = np.cross(target - start, [0.0, 0.0, 1.0])  # perpendicular to start -> target
    path = start + s * (target - start) + 0.05 * side * np.sin(np.pi * s)  # a bowed path, off the line
    assert movement_completion(path, start, target) == pytest.approx(0.6)
    assert movement_completion(start + 1.2 * (target - start)[None], start, target) == 1.0  # clipped
    assert movement_completion(start - (target - start)[None], start, target) == 0.0
    assert movement_completion(path, start, start) is None  # no intended movement


def test_time_to_target_of_a_minimum_jerk_reach_is_the_closed_form_crossing_time():
    # Flash & Hogan (1985): x(tau) = 10 tau^3 - 15 tau^4 + 6 tau^5; within tol of the target when x = 1 - tol / L
    L, move_s, hold_s, dt = 0.3, 1.0, 0.3, 1e-3
    t = np.arange(0.0, 2.0, dt)
    tau = np.clip((t - hold_s) / move_s, 0.0, 1.0)
    x = 10 * tau**3 - 15 * tau**4 + 6 * tau**5
    direction = np.array([0.6, 0.0, 0.8])
    intent = np.array([0.05, -0.2, -0.3]) + L * x[:, None] * direction
    tau_star = brentq(lambda s: 10 * s**3 - 15 * s**4 + 6 * s**5 - (1 - TARGET_TOLERANCE_M / L), 0.0, 1.0)
    m = completion_metrics(t, intent, intent)  # a hand that follows its intent exactly
    assert m["movement_completion"] == 1.0
    assert abs(m["time_to_target_s"] - tau_star * move_s) <= dt  # to one tick
    lagging = completion_metrics(t, intent[np.maximum(np.arange(len(t)) - 100, 0)], intent)  # 0.1 s late
    assert abs(lagging["time_to_target_s"] - (tau_star * move_s + 0.1)) <= dt
    short = 0.5 * (intent - intent[0]) + intent[0]  # half way only: never within tol
    assert time_to_target_s(t, short, intent[-1], hold_s) is None


# -- validation ---------------------------------------------------------------------------------------------
@pytest.mark.parametrize("make, match", [
    (lambda: Weakness({"elbow": 0.5}), r"Weakness.scale names an unknown joint 'elbow'; known: human_gh_flexion"),
    (lambda: Weakness(0.0), r"Weakness.scale\['human_gh_flexion'\] must be in \(0, 1\]"),
    (lambda: Weakness(1.5), r"must be in \(0, 1\], got 1.5"),
    (lambda: Weakness.grade("mildish"), r"Weakness.grade must be one of mild, moderate, severe"),
    (lambda: Spasticity({ELBOW: -1.0}), r"Spasticity.gain_Nm_s_per_rad\['human_elbow_flexion'\] must be >= 0"),
    (lambda: Spasticity({ELBOW: 1.0}, reflex_delay_s=2.0), r"Spasticity.reflex_delay_s must be in \[0, 1\]"),
    (lambda: Spasticity({ELBOW: 1.0}, stretched_by="up"), r"Spasticity.stretched_by must be one of negative"),
    (lambda: Spasticity({}), r"Spasticity.gain_Nm_s_per_rad must name at least one joint"),
    (lambda: Contracture({ELBOW: (1.0, 0.5)}), r"Contracture.range_rad\['human_elbow_flexion'\] must have lower"),
    (lambda: Contracture({ELBOW: 1.0}), r"Contracture.range_rad\['human_elbow_flexion'\] must be \(lower, upper\)"),
    (lambda: Contracture({ELBOW: (0.1, 1.0)}, stiffness_Nm_per_rad=0), r"Contracture.stiffness_Nm_per_rad must be > 0"),
    (lambda: Tremor({ELBOW: 1.0}, frequency_Hz=-5), r"Tremor.frequency_Hz must be > 0"),
    (lambda: Tremor("big"), r"Tremor.amplitude_Nm must be a number or a mapping"),
    (lambda: Impairment(weakness=0.5), r"Impairment.weakness must be a Weakness or None"),
])
def test_bad_impairment_fields_are_named_in_one_line(make, match):
    with pytest.raises(ParameterError, match=match) as e:
        make()
    assert "\n" not in str(e.value)


def test_scenario_rejects_a_tremor_above_the_nyquist_frequency_and_a_wrong_impairment_type():
    reach = load_scenario(SCENARIOS / "reach.py")
    with pytest.raises(ParameterError, match=r"impairment.tremor.frequency_Hz = 600.0 must be below .* 500 Hz"):
        dataclasses.replace(reach, impairment=Impairment(tremor=Tremor({ELBOW: 1.0}, frequency_Hz=600.0)))
    with pytest.raises(ParameterError, match=r"Scenario\('reach'\).impairment must be Impairment"):
        dataclasses.replace(reach, impairment=Weakness(0.5))


# -- in a run -----------------------------------------------------------------------------------------------
def test_the_impairment_column_exists_only_with_an_impairment_and_is_part_of_tau_human():
    reach = load_scenario(SCENARIOS / "reach.py")
    healthy = Simulation(reach, None, mode="human_alone")
    assert "tau_human_impairment" not in healthy.columns
    assert healthy.meta["parameters"]["impairment"] is None
    shaky = dataclasses.replace(reach, impairment=Impairment(tremor=Tremor({ELBOW: 1.0}, frequency_Hz=5.0,
                                                                               phase_rad=0.0)))
    sim = Simulation(shaky, None, mode="human_alone")
    assert sim.meta["parameters"]["impairment"]["tremor"] == {"amplitude_Nm": {ELBOW: 1.0}, "frequency_Hz": 5.0,
                                                               "phase_rad": 0.0}
    a = sim.run(0.2).arrays
    b = healthy.run(0.2).arrays
    tremor = np.sin(2 * np.pi * 5.0 * a["t"])
    np.testing.assert_allclose(a["tau_human_impairment"][:, J_ELBOW], tremor, rtol=0, atol=1e-12)
    assert np.all(a["tau_human_impairment"][:, np.arange(7) != J_ELBOW] == 0.0)
    # the first tick's states are equal, so the torques differ by the tremor alone there
    np.testing.assert_allclose(a["tau_human"][0] - b["tau_human"][0], a["tau_human_impairment"][0], atol=1e-12)


def test_reach_spastic_is_resisted_only_in_the_fast_extension():
    sc = load_scenario(SCENARIOS / "reach_spastic.py")
    a = Simulation(sc, None, mode="human_alone").run().arrays
    t, tau, dq = a["t"], a["tau_human_impairment"][:, J_ELBOW], a["dq_human"][:, J_ELBOW]
    slow, fast = t < 5.1, t >= 5.1  # the slow reach and back end at 0.3 + 2 x 2.4 s
    s = sc.impairment.spasticity
    assert np.max(np.abs(dq[slow])) < s.threshold_rad_s  # slowly: below the threshold, no resistance
    assert np.all(tau[slow] == 0.0)
    assert np.min(dq[fast]) < -2 * s.threshold_rad_s and np.max(tau[fast]) > 2.0  # fast extension: resisted
    assert np.all(tau >= 0.0)  # it opposes extension (q decreasing) only


@pytest.mark.parametrize("variant", ["transparent", "gravity"])
def test_a_moderately_weak_wearer_does_not_complete_the_shipped_reach(tmp_path, variant):
    reach = load_scenario(SCENARIOS / "reach.py")
    weak = dataclasses.replace(reach, impairment=Impairment(weakness=Weakness.grade("moderate")))
    m = run_scenario(weak, variant, tmp_path / "weak", report=False, figures=False).metrics
    assert m["movement_completion"] < 0.5 and m["time_to_target_s"] is None
    healthy = run_scenario(reach, variant, tmp_path / "healthy", report=False, figures=False).metrics
    assert healthy["movement_completion"] == 1.0 and healthy["time_to_target_s"] is not None
    # why (a static check, independent of the run): at the shelf the arm's own weight needs more shoulder torque
    # than the moderate grade leaves (pinocchio's generalized gravity of the wearer's model)
    arm = models.build_human(reach.human)
    g = pin.computeGeneralizedGravity(arm.model, arm.model.createData(), np.asarray(reach.intent.vias[0].posture_rad))
    assert abs(g[0]) > Weakness.GRADE_SCALE[1] * reach.human.torque_limit_Nm[0]


def test_wearer_section_states_the_impairment_and_warns_when_the_movement_is_not_completed():
    meta = {"parameters": {"impairment": {"weakness": {"scale": {ELBOW: 0.15}}, "spasticity": None,
                                          "contracture": None, "tremor": None}}, "human_joints": list(HUMAN_ARM_JOINTS)}
    text = "\n".join(wearer_section(meta, {"movement_completion": 0.31, "time_to_target_s": None}))
    assert "## Wearer" in text and "weakness" in text and "human_elbow_flexion: 0.15" in text
    assert "**Warning: the movement was not completed.**" in text and "31 %" in text
    done = "\n".join(wearer_section(meta, {"movement_completion": 1.0, "time_to_target_s": 1.5}))
    assert "Warning" not in done and "1.5 s" in done
    assert wearer_section({"parameters": {"impairment": None}}, {"movement_completion": 0.2}) == []
