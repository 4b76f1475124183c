"""The minimum-jerk intent checked against the closed forms of Flash & Hogan (1985).

Reference values are those of the minimum-jerk closed form
x = x0 + D (10 tau^3 - 15 tau^4 + 6 tau^5), tau = t/T: for an amplitude D in
a time T, peak velocity 1.875 D/T at tau = 1/2, peak acceleration
(10/sqrt 3) D/T^2 at tau = 1/2 -+ sqrt(3)/6, jerk 60 D/T^3 at tau = 0
(Flash T., Hogan N. (1985), The coordination of arm movements: an
experimentally confirmed mathematical model, J. Neurosci. 5(7):1688-1703,
pages from memory; the peaks re-derived with sympy).
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from models.errors import ParameterError
from sim.physics.intent import JointIntent, Via, minimum_jerk

D = 0.3  # amplitude [rad]; the worked example D = 0.3, T = 0.6 of the closed form (Flash & Hogan 1985)
T = 0.6  # duration [s]


def _trapezoid(y: np.ndarray, x: np.ndarray) -> float:
    return float(np.sum(0.5 * (y[1:] + y[:-1]) * np.diff(x)))


def test_peak_speed_is_1p875_times_mean_speed_at_mid_movement():
    # Flash & Hogan 1985: v_peak = 1.875 D/T at tau = 1/2.
    _, v, _ = minimum_jerk([0.0], [D], T, T / 2)
    mean_speed = D / T
    assert v[0] / mean_speed == pytest.approx(1.875, abs=1e-9)
    # and it is the maximum: no grid point exceeds it
    _, V, _ = minimum_jerk([0.0], [D], T, np.linspace(0.0, T, 2001))
    assert V.max() <= v[0] + 1e-12


def test_peak_acceleration_is_10_over_sqrt3_D_over_T_squared():
    # Flash & Hogan 1985: a_peak = (10/sqrt 3) D/T^2 at tau = 1/2 - sqrt(3)/6.
    tau_star = 0.5 - math.sqrt(3.0) / 6.0
    _, _, a = minimum_jerk([0.0], [D], T, tau_star * T)
    assert a[0] == pytest.approx(10.0 / math.sqrt(3.0) * D / T**2, abs=1e-9)
    _, _, A = minimum_jerk([0.0], [D], T, np.linspace(0.0, T, 2001))
    assert A.max() <= a[0] + 1e-9
    # deceleration peak is the mirror image (odd symmetry of acceleration about tau = 1/2)
    _, _, a2 = minimum_jerk([0.0], [D], T, (1.0 - tau_star) * T)
    assert a2[0] == pytest.approx(-a[0], abs=1e-9)


def test_reference_example_D0p3_T0p6_gives_published_peaks():
    # Worked example of the closed form (Flash & Hogan 1985), D = 0.3, T = 0.6: v_peak = 0.9375,
    # a_peak = 4.811 (given to 4 significant digits).
    _, v, _ = minimum_jerk([0.0], [D], T, T / 2)
    _, _, a = minimum_jerk([0.0], [D], T, (0.5 - math.sqrt(3.0) / 6.0) * T)
    assert v[0] == pytest.approx(0.9375, abs=1e-12)
    assert a[0] == pytest.approx(4.811, abs=5e-4)


@pytest.mark.parametrize("t_s", [0.0, T, -0.1, T + 0.1])
def test_velocity_and_acceleration_vanish_at_and_beyond_both_ends(t_s):
    # Boundary conditions of the minimum-jerk problem (rest at both ends; Flash & Hogan 1985).
    q0, q1 = np.array([0.1, -0.2]), np.array([0.4, 0.5])
    q, v, a = minimum_jerk(q0, q1, T, t_s)
    assert np.array_equal(v, np.zeros(2)) and np.array_equal(a, np.zeros(2))
    assert np.allclose(q, q0 if t_s <= 0.0 else q1, atol=1e-15)


def test_jerk_at_start_is_60_D_over_T_cubed_by_finite_difference():
    # Flash & Hogan 1985: jerk(0) = 60 D/T^3.  Forward difference of the acceleration;
    # truncation error is jerk'(0) h / 2 = -180 (h/T) D/T^3, i.e. 3e-7 relative for h = 1e-7 T.
    h = 1e-7 * T
    _, _, a0 = minimum_jerk([0.0], [D], T, 0.0)
    _, _, a1 = minimum_jerk([0.0], [D], T, h)
    jerk = (a1[0] - a0[0]) / h
    assert jerk == pytest.approx(60.0 * D / T**3, rel=1e-5)


def test_velocity_integrates_to_the_displacement():
    # Fundamental theorem of calculus, trapezoid rule.  Euler-Maclaurin: the h^2 error term is
    # (h^2/12)(a(T) - a(0)) = 0, the next is of order D (h/T)^4 = 3e-13 for 1001 points.
    t = np.linspace(0.0, T, 1001)
    _, V, _ = minimum_jerk([0.0, 1.0], [D, 1.0 - 2.0 * D], T, t)
    assert _trapezoid(V[:, 0], t) == pytest.approx(D, abs=1e-9)
    assert _trapezoid(V[:, 1], t) == pytest.approx(-2.0 * D, abs=1e-9)


def test_each_joint_follows_the_scalar_profile_scaled_by_its_own_amplitude():
    # The closed form is linear in D, component by component (Flash & Hogan 1985, eq. for x(t)).
    q0, q1 = np.array([0.0, 1.0, -0.5]), np.array([0.3, 0.4, -0.5])
    t = 0.37 * T
    q, v, a = minimum_jerk(q0, q1, T, t)
    tau = t / T
    s = 10 * tau**3 - 15 * tau**4 + 6 * tau**5
    assert np.allclose(q, q0 + (q1 - q0) * s, atol=1e-15)
    assert np.allclose(v, (q1 - q0) * 30 * tau**2 * (1 - tau) ** 2 / T, atol=1e-14)
    assert np.allclose(a, (q1 - q0) * 60 * tau * (1 - tau) * (1 - 2 * tau) / T**2, atol=1e-13)


# --- JointIntent -----------------------------------------------------------------------------------

START = (0.0, 0.2)
INTENT = JointIntent(
    start_rad=START,
    vias=(Via((0.5, -0.3), move_s=0.8, hold_s=0.25), Via((0.1, 0.6), move_s=0.5, hold_s=0.0)),
    start_hold_s=0.3,
)
BOUNDARIES = (0.3, 1.1, 1.35, 1.85)  # start hold, move, hold, move [s]


def test_duration_is_start_hold_plus_all_moves_and_holds():
    # Definition of the timeline (brief): 0.3 + (0.8 + 0.25) + (0.5 + 0.0).
    assert INTENT.duration_s == pytest.approx(1.85, abs=1e-12)


@pytest.mark.parametrize("t_b", BOUNDARIES)
def test_position_and_velocity_are_continuous_at_segment_boundaries(t_b):
    # A minimum-jerk move starts and ends at rest (Flash & Hogan 1985), so holds join it with
    # continuous q and dq.  Mean-value bound: |x(t+e) - x(t-e)| <= 2 e max|x'|.
    eps = 1e-9
    q_l, v_l, _ = INTENT.at(t_b - eps)
    q_r, v_r, _ = INTENT.at(t_b + eps)
    v_max = 1.875 * 0.9 / 0.5  # largest 1.875 D/T among the moves (D = 0.9 rad, T = 0.5 s) [rad/s]
    a_max = 10.0 / math.sqrt(3.0) * 0.9 / 0.5**2  # largest (10/sqrt 3) D/T^2 [rad/s^2]
    assert np.max(np.abs(q_r - q_l)) <= 2 * eps * v_max + 1e-15
    assert np.max(np.abs(v_r - v_l)) <= 2 * eps * a_max + 1e-15


def test_holds_keep_the_posture_at_rest_and_the_intent_ends_at_the_last_posture():
    q, v, a = INTENT.at(0.15)
    assert np.array_equal(q, START) and not v.any() and not a.any()
    q, v, a = INTENT.at(1.2)  # inside the hold of the first via
    assert np.allclose(q, (0.5, -0.3), atol=1e-15) and np.allclose(v, 0.0, atol=1e-15)
    for t in (INTENT.duration_s, INTENT.duration_s + 10.0):
        q, v, a = INTENT.at(t)
        assert np.array_equal(q, (0.1, 0.6)) and not v.any() and not a.any()
    q, v, _ = INTENT.at(-1.0)
    assert np.array_equal(q, START) and not v.any()


def test_move_segment_equals_the_standalone_minimum_jerk_profile():
    # Second move: from (0.5, -0.3) at t = 1.35 s to (0.1, 0.6) in 0.5 s.
    t = 1.35 + 0.21
    expected = minimum_jerk((0.5, -0.3), (0.1, 0.6), 0.5, 0.21)
    for got, exp in zip(INTENT.at(t), expected):
        assert np.allclose(got, exp, atol=1e-12)


def test_at_equals_the_python_minimum_jerk_bit_for_bit_on_every_segment():
    # at() computes its joint rows in a compiled kernel; its reference is the closed form of Flash & Hogan
    # (1985) as evaluated by minimum_jerk (Python, scalar time), segment by segment: the same operations in
    # the same order, so the same bits (DEVELOPERS.md: each kernel against its Python reference).
    segments = [(START, START, 0.3), (START, (0.5, -0.3), 0.8), ((0.5, -0.3), (0.5, -0.3), 0.25),
                ((0.5, -0.3), (0.1, 0.6), 0.5)]  # (from, to, duration [s]) of INTENT: hold, move, hold, move
    start_s, checked = 0.0, 0
    for q_from, q_to, duration_s in segments:
        for t in start_s + np.linspace(0.0, duration_s, 157, endpoint=False)[1:]:
            t = float(t)
            expected = minimum_jerk(q_from, q_to, duration_s, t - start_s)
            for got, exp in zip(INTENT.at(t), expected):
                assert got.tobytes() == exp.tobytes(), (t, got, exp)
            checked += 1
        start_s += duration_s
    assert checked == 4 * 156
    q, v, a = INTENT.at(0.7)  # the rows are new arrays: writing them changes nothing in the intent
    q[:], v[:], a[:] = 9.0, 9.0, 9.0
    assert all(np.array_equal(x, y) for x, y in zip(INTENT.at(0.7), minimum_jerk(START, (0.5, -0.3), 0.8, 0.7 - 0.3)))


def test_sample_matches_at_on_a_grid_including_outside_times():
    t = np.concatenate([np.linspace(-0.2, 2.2, 241), np.array(BOUNDARIES)])
    Q, dQ, ddQ = INTENT.sample(t)
    assert Q.shape == dQ.shape == ddQ.shape == (t.size, 2)
    for k, tk in enumerate(t):
        q, v, a = INTENT.at(tk)
        assert np.allclose(Q[k], q, atol=1e-14)
        assert np.allclose(dQ[k], v, atol=1e-14)
        assert np.allclose(ddQ[k], a, atol=1e-14)


def test_at_returns_fresh_arrays_that_do_not_alias_the_intent():
    q, _, _ = INTENT.at(-1.0)
    q[:] = 99.0
    assert np.array_equal(INTENT.at(-1.0)[0], START)


# --- validation ------------------------------------------------------------------------------------


@pytest.mark.parametrize(
    "call, match",
    [
        (lambda: minimum_jerk([0.0], [1.0], -0.5, 0.1), r"minimum_jerk\.duration_s must be > 0"),
        (lambda: minimum_jerk([0.0], [1.0], float("nan"), 0.1), r"minimum_jerk\.duration_s must be finite"),
        (lambda: minimum_jerk([0.0, np.nan], [1.0, 1.0], 0.5, 0.1), r"minimum_jerk\.q0 and q1 must be finite"),
        (lambda: minimum_jerk([0.0, 0.0], [1.0], 0.5, 0.1), r"minimum_jerk\.q1 must have the shape"),
        (lambda: Via((0.1,), move_s=-1.0), r"Via\.move_s must be > 0"),
        (lambda: Via((0.1,), move_s=0.0), r"Via\.move_s must be > 0"),
        (lambda: Via((0.1,), move_s=1.0, hold_s=-0.1), r"Via\.hold_s must be >= 0"),
        (lambda: Via((0.1,), move_s=1.0, hold_s=float("nan")), r"Via\.hold_s must be finite"),
        (lambda: Via((0.1, float("nan")), move_s=1.0), r"Via\.posture_rad must be finite"),
        (lambda: JointIntent((0.0, 0.0), (Via((1.0,), 1.0),)), r"JointIntent\.vias\[0\]\.posture_rad must have 2"),
        (lambda: JointIntent((0.0, np.inf), ()), r"JointIntent\.start_rad must be finite"),
        (lambda: JointIntent((0.0,), (), start_hold_s=-1.0), r"JointIntent\.start_hold_s must be >= 0"),
        (lambda: JointIntent((0.0,), ((1.0, 1.0),)), r"JointIntent\.vias\[0\] must be a Via"),
    ],
)
def test_invalid_inputs_raise_parameter_error_naming_the_field(call, match):
    with pytest.raises(ParameterError, match=match):
        call()


def test_parameter_error_is_also_a_value_error():
    # models/errors.py: project errors subclass the matching builtin.
    with pytest.raises(ValueError):
        Via((0.0,), move_s=-1.0)
