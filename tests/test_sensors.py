"""Joint and force/torque sensing checked against closed forms and statistics.

Sources: a mid-tread quantiser rounds to the nearest step, so its error is at
most half a step (definition of rounding); the step response of the first-order
lag 1/(tau s + 1) is 1 - exp(-t/tau), sampled exactly by its zero-order-hold
discretisation (Franklin, Powell & Workman, *Digital Control of Dynamic
Systems*); the sample standard deviation of N Gaussian draws has a relative
standard error of about 1/sqrt(2N) (large-sample theory, e.g. any
mathematical-statistics textbook).
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from models.errors import ParameterError
from sim.physics.sensors import (
    NOISE_BLOCK_TICKS,
    EncoderParams,
    ForceSensorBank,
    ForceSensorParams,
    ForceTorqueSensor,
    JointSensing,
    lowpass_alpha,
)

DT = 1e-3  # control tick [s]
N_STAT = 20000
# Relative standard error of a sample std from 20000 draws is 1/sqrt(2 N) = 0.5 %; a 5 % tolerance
# is 10 standard errors, so a correct implementation essentially never fails (seeded anyway).
STD_RTOL = 0.05

NOISELESS_FT = ForceSensorParams(noise_std_N=0.0, noise_std_Nm=0.0, cutoff_Hz=None, delay_ticks=0)


def _encoder(params: EncoderParams | None = None, n: int = 2, dt: float = DT, seed: int = 0) -> JointSensing:
    return JointSensing(params or EncoderParams(), n, dt, np.random.default_rng(seed))


# --- encoder -----------------------------------------------------------------------------------------


def test_quantiser_error_is_at_most_half_a_resolution_step():
    # Mid-tread quantiser: |round(x) - x| <= 1/2 (definition of rounding to the nearest integer).
    p = EncoderParams()
    rng = np.random.default_rng(3)
    s = _encoder(p, n=1000)
    q = rng.uniform(-math.pi, math.pi, size=1000)
    s.reset(q)
    q_meas, _, _ = s.measure(q, np.zeros(1000))
    assert np.max(np.abs(q_meas - q)) <= p.resolution_rad / 2 * (1 + 1e-9)
    # the output lies on the grid
    k = q_meas / p.resolution_rad
    assert np.allclose(k, np.round(k), atol=1e-6)


def test_a_position_exactly_on_a_step_is_read_unchanged():
    # Mid-tread quantiser: grid points are its fixed points.
    p = EncoderParams()
    q = np.array([0, 1, -1, 12345, -65536, 2**17 - 1], dtype=float) * p.resolution_rad
    s = _encoder(p, n=q.size)
    s.reset(q)
    q_meas, _, _ = s.measure(q, np.zeros(q.size))
    assert np.array_equal(q_meas, q)


def test_velocity_estimate_starts_at_zero_and_first_difference_uses_the_reset_posture():
    # Backward difference from q(reset); filter state 0 after reset, so dq_1 = alpha * dq/dt (brief).
    p = EncoderParams(resolution_rad=2.0**-20)
    dt = 2.0**-10  # powers of two: every quantity below is exact in binary floating point
    s = _encoder(p, n=1, dt=dt)
    q0 = np.array([0.25])
    s.reset(q0)
    _, dq, _ = s.measure(q0, [0.0])
    assert dq[0] == 0.0
    s.reset(q0)
    step = 1000 * p.resolution_rad
    _, dq, _ = s.measure(q0 + step, [0.0])
    assert dq[0] == pytest.approx(lowpass_alpha(p.velocity_cutoff_Hz, dt) * step / dt, rel=1e-14)


def test_velocity_estimate_of_a_constant_velocity_ramp_converges_to_the_true_velocity():
    # Default 17-bit encoder, v = 0.5 rad/s.  Each backward difference is within r/dt of v (two
    # quantiser errors of at most r/2), and the filter output is a convex combination of them, so
    # after the transient |dq_est - v| <= r/dt.  Averaged over N ticks, the differences telescope:
    # mean error <= r/(N dt) + 2 (r/dt) / (alpha N)  (derived here from the recursion).
    p = EncoderParams()
    r, v = p.resolution_rad, 0.5
    s = _encoder(p, n=1)
    s.reset([0.1])
    est = np.array([s.measure([0.1 + v * k * DT], [0.0])[1][0] for k in range(1, 1201)])
    settled = est[200:]  # after 0.2 s = 126 filter time constants
    assert np.max(np.abs(settled - v)) <= r / DT * (1 + 1e-9)
    alpha = lowpass_alpha(p.velocity_cutoff_Hz, DT)
    n = settled.size
    assert abs(settled.mean() - v) <= r / (n * DT) + 2 * (r / DT) / (alpha * n)


def test_velocity_estimate_of_an_on_grid_ramp_converges_exactly():
    # With v dt an exact multiple of the step, every difference equals v and the lag decays as
    # (1 - alpha)^k (first-order system), i.e. below 1e-12 after 0.1 s.
    p = EncoderParams(resolution_rad=2.0**-20)
    dt = 2.0**-10
    s = _encoder(p, n=1, dt=dt)
    s.reset([0.0])
    for k in range(1, 101):
        _, dq, _ = s.measure([k * dt * 1.0], [0.0])
    assert dq[0] == pytest.approx(1.0, abs=1e-12)


def test_velocity_filter_step_response_is_one_minus_exp_of_minus_t_over_tau():
    # First-order lag, tau = 1/(2 pi f_c): y(t) = 1 - exp(-t/tau); exact at the samples for the ZOH
    # discretisation (Franklin, Powell & Workman).  A ramp starting at reset is a velocity step.
    p = EncoderParams(resolution_rad=2.0**-20, velocity_cutoff_Hz=37.0)
    dt = 2.0**-10
    tau = 1.0 / (2.0 * math.pi * p.velocity_cutoff_Hz)
    s = _encoder(p, n=1, dt=dt)
    s.reset([0.0])
    for k in range(1, 201):
        _, dq, _ = s.measure([k * dt], [0.0])  # v = 1 rad/s
        assert dq[0] == pytest.approx(1.0 - math.exp(-k * dt / tau), abs=1e-12)


def test_torque_noise_sample_std_matches_the_setting():
    # Law of large numbers; tolerance STD_RTOL (10 standard errors).
    p = EncoderParams(torque_noise_std_Nm=0.2)
    s = _encoder(p, n=3, seed=11)
    s.reset(np.zeros(3))
    tau = np.array([1.0, -2.0, 0.5])
    err = np.array([s.measure(np.zeros(3), tau)[2] - tau for _ in range(N_STAT)])
    assert np.allclose(err.std(axis=0, ddof=1), 0.2, rtol=STD_RTOL)
    assert np.all(np.abs(err.mean(axis=0)) < 5 * 0.2 / math.sqrt(N_STAT))  # 5 standard errors of the mean


def test_noise_free_torque_is_passed_through_and_rng_is_not_consumed():
    # Documented behaviour of sim/physics/sensors.py (brief: std 0 means ideal torque sensing).
    rng = np.random.default_rng(5)
    before = rng.bit_generator.state
    s = JointSensing(EncoderParams(), 2, DT, rng)
    s.reset(np.zeros(2))
    _, _, tau = s.measure(np.zeros(2), [1.5, -0.25])
    assert np.array_equal(tau, [1.5, -0.25])
    assert rng.bit_generator.state == before


def test_two_joint_sensors_with_the_same_seed_give_identical_readings():
    # Seeded numpy Generator: same seed, same stream (numpy documentation).
    p = EncoderParams(torque_noise_std_Nm=0.1)
    a, b, c = _encoder(p, seed=42), _encoder(p, seed=42), _encoder(p, seed=43)
    for s in (a, b, c):
        s.reset(np.zeros(2))
    ra = [a.measure([0.01 * k, 0.0], [1.0, 2.0])[2] for k in range(50)]
    rb = [b.measure([0.01 * k, 0.0], [1.0, 2.0])[2] for k in range(50)]
    rc = [c.measure([0.01 * k, 0.0], [1.0, 2.0])[2] for k in range(50)]
    assert np.array_equal(ra, rb)
    assert not np.array_equal(ra, rc)


def test_joint_readings_are_read_only_copies_of_the_sensor_state():
    s = _encoder(EncoderParams(torque_noise_std_Nm=0.1))
    s.reset(np.zeros(2))
    q, dq, tau = s.measure([0.01, 0.02], [1.0, 2.0])
    kept = [q.copy(), dq.copy(), tau.copy()]
    for arr in (q, dq, tau):
        assert not arr.flags.writeable
        with pytest.raises(ValueError):
            arr[0] = 1.0
    s.measure([0.5, 0.6], [3.0, 4.0])  # a later tick must not change earlier readings
    for arr, k in zip((q, dq, tau), kept):
        assert np.array_equal(arr, k)
    for arr in (q, dq, tau):  # rows of a read-only array that owns its data (numpy.ndarray.setflags documentation)
        with pytest.raises(ValueError):
            arr.setflags(write=True)


# --- force/torque sensor -----------------------------------------------------------------------------


def test_force_filter_step_response_is_one_minus_exp_of_minus_t_over_tau():
    # First-order lag, closed form 1 - exp(-t/tau), tau = 1/(2 pi f_c) (Franklin, Powell & Workman).
    p = ForceSensorParams(noise_std_N=0.0, noise_std_Nm=0.0, cutoff_Hz=200.0, delay_ticks=0)
    tau = 1.0 / (2.0 * math.pi * p.cutoff_Hz)
    s = ForceTorqueSensor(p, DT, np.random.default_rng(0))
    assert np.array_equal(s.measure(np.zeros(6)), np.zeros(6))
    for k in range(1, 30):
        y = s.measure(np.ones(6))
        assert np.allclose(y, 1.0 - math.exp(-k * DT / tau), rtol=0.0, atol=1e-12)


@pytest.mark.parametrize("delay", [0, 1, 3, 7])
def test_delay_shifts_an_impulse_by_exactly_delay_ticks(delay):
    # A pure delay z^-d moves a unit impulse from tick k0 to k0 + d, unchanged (definition).
    p = ForceSensorParams(noise_std_N=0.0, noise_std_Nm=0.0, cutoff_Hz=None, delay_ticks=delay)
    s = ForceTorqueSensor(p, DT, np.random.default_rng(0))
    k0, w = 5, np.array([1.0, -2.0, 3.0, 0.1, -0.2, 0.3])
    out = np.array([s.measure(w if k == k0 else np.zeros(6)) for k in range(20)])
    expected = np.zeros((20, 6))
    expected[k0 + delay] = w
    assert np.array_equal(out, expected)


def test_delayed_output_is_the_undelayed_filtered_output_shifted():
    # Delay commutes with the (time-invariant) filter: y_d[k] = y_0[k - d] after start-up.
    d = 4
    base = dict(noise_std_N=0.3, noise_std_Nm=0.01, cutoff_Hz=150.0)
    s0 = ForceTorqueSensor(ForceSensorParams(**base, delay_ticks=0), DT, np.random.default_rng(9))
    sd = ForceTorqueSensor(ForceSensorParams(**base, delay_ticks=d), DT, np.random.default_rng(9))
    w = np.sin(np.arange(60)[:, None] * 0.3 + np.arange(6))
    y0 = np.array([s0.measure(x) for x in w])
    yd = np.array([sd.measure(x) for x in w])
    assert np.array_equal(yd[d:], y0[:-d])
    # start-up (documented): before d samples exist the output is the first filtered sample
    assert np.array_equal(yd[:d], np.repeat(y0[:1], d, axis=0))


def test_noisy_biased_filtered_delayed_reading_equals_the_documented_recursion_on_the_same_draws():
    # The class docstring's equations, u = w + b + sigma n, y_k = y_{k-1} + alpha (u_k - y_{k-1}), output
    # y_{k-d}, evaluated here with NumPy on the draws of a Generator with the same seed (alpha: ZOH gain).
    p = ForceSensorParams(noise_std_N=0.3, noise_std_Nm=0.01, bias_N=(0.5, -0.2, 0.1), bias_Nm=(0.01, 0.0, -0.02),
                          cutoff_Hz=120.0, delay_ticks=2)
    s = ForceTorqueSensor(p, DT, np.random.default_rng(4))
    rng = np.random.default_rng(4)
    alpha = lowpass_alpha(120.0, DT)
    sigma = np.array([0.3] * 3 + [0.01] * 3)
    bias = np.array(p.bias_N + p.bias_Nm)
    w = np.cos(np.arange(40)[:, None] * 0.2 + np.arange(6)) * 10.0  # [N, N m]
    ys = []
    for k, x in enumerate(w):
        u = x + bias + sigma * rng.standard_normal(6)
        ys.append(u if k == 0 else ys[-1] + alpha * (u - ys[-1]))
    expected = [ys[0], ys[0]] + ys[:-2]
    got = [s.measure(x) for x in w]
    np.testing.assert_allclose(got, expected, rtol=1e-14, atol=1e-14)


def test_encoder_reading_equals_the_documented_quantiser_and_filtered_difference():
    # q_m = r round(q / r), dq_k = dq_{k-1} + alpha ((q_m,k - q_m,k-1) / dt - dq_{k-1}) (class docstring).
    p = EncoderParams(velocity_cutoff_Hz=80.0)
    s = _encoder(p, n=3)
    q = np.stack([np.sin(0.01 * np.arange(50) + j) for j in range(3)], axis=1)  # [rad]
    s.reset(q[0])
    r, alpha = p.resolution_rad, lowpass_alpha(80.0, DT)
    q_prev, dq = np.round(q[0] / r) * r, np.zeros(3)
    for x in q[1:]:
        qm, dqm, _ = s.measure(x, np.zeros(3))
        ref = np.round(x / r) * r
        dq = dq + alpha * ((ref - q_prev) / DT - dq)
        q_prev = ref
        np.testing.assert_array_equal(qm, ref)
        np.testing.assert_allclose(dqm, dq, rtol=1e-13, atol=1e-12)


def test_force_noise_sample_std_matches_the_setting_per_axis():
    # Law of large numbers; tolerance STD_RTOL (10 standard errors); no filter so white noise is seen.
    p = ForceSensorParams(noise_std_N=0.3, noise_std_Nm=0.01, cutoff_Hz=None, delay_ticks=0)
    s = ForceTorqueSensor(p, DT, np.random.default_rng(21))
    y = np.array([s.measure(np.zeros(6)) for _ in range(N_STAT)])
    assert np.allclose(y.std(axis=0, ddof=1), [0.3] * 3 + [0.01] * 3, rtol=STD_RTOL)


def test_filtered_noise_std_matches_the_stationary_variance_of_a_first_order_filter():
    # AR(1) y_k = (1 - a) y_{k-1} + a u_k driven by white noise of variance s^2 has the stationary
    # variance a^2 s^2 / (1 - (1 - a)^2) = a s^2 / (2 - a) (e.g. Box & Jenkins, Time Series Analysis; from memory).
    # Tolerance STD_RTOL: the samples are correlated (coefficient 0.28), which widens the standard
    # error by sqrt((1 + 0.28^2) / (1 - 0.28^2)) = 1.09, still about 9 standard errors.
    p = ForceSensorParams(noise_std_N=0.3, noise_std_Nm=0.01, cutoff_Hz=200.0, delay_ticks=0)
    s = ForceTorqueSensor(p, DT, np.random.default_rng(22))
    y = np.array([s.measure(np.zeros(6)) for _ in range(N_STAT)])[100:]  # drop start-up
    a = lowpass_alpha(200.0, DT)
    gain = math.sqrt(a / (2.0 - a))
    assert np.allclose(y.std(axis=0, ddof=1), gain * np.array([0.3] * 3 + [0.01] * 3), rtol=STD_RTOL)


def test_bias_appears_in_the_mean_reading():
    # The mean of bias + zero-mean noise is the bias; tolerance 5 standard errors of the mean
    # (0.3 N / sqrt(20000) = 2.1 mN).  The filter has unit DC gain, so for an AR(1) output the
    # long-run variance of the mean, a/(2-a) * (2-a)/a * s^2/N = s^2/N, is that of the raw noise.
    bias_N, bias_Nm = (1.5, -2.0, 0.25), (0.05, 0.0, -0.1)
    p = ForceSensorParams(bias_N=bias_N, bias_Nm=bias_Nm)
    s = ForceTorqueSensor(p, DT, np.random.default_rng(23))
    w = np.array([3.0, 0.0, -1.0, 0.2, 0.1, 0.0])
    y = np.array([s.measure(w) for _ in range(N_STAT)])
    se = 5 * np.array([0.3] * 3 + [0.01] * 3) / math.sqrt(N_STAT)
    assert np.all(np.abs(y.mean(axis=0) - (w + np.array(bias_N + bias_Nm))) < se)


def test_two_force_sensors_with_the_same_seed_give_identical_sequences():
    # Seeded numpy Generator: same seed, same stream (numpy documentation).
    a = ForceTorqueSensor(ForceSensorParams(), DT, np.random.default_rng(77))
    b = ForceTorqueSensor(ForceSensorParams(), DT, np.random.default_rng(77))
    c = ForceTorqueSensor(ForceSensorParams(), DT, np.random.default_rng(78))
    w = np.ones(6)
    ya = [a.measure(w) for _ in range(100)]
    yb = [b.measure(w) for _ in range(100)]
    yc = [c.measure(w) for _ in range(100)]
    assert np.array_equal(ya, yb)
    assert not np.array_equal(ya, yc)


def test_reset_restarts_filter_and_delay_line():
    # After reset the sensor behaves like a new one (documented start-up rule).
    p = ForceSensorParams(noise_std_N=0.0, noise_std_Nm=0.0, cutoff_Hz=50.0, delay_ticks=2)
    s = ForceTorqueSensor(p, DT, np.random.default_rng(0))
    for _ in range(10):
        s.measure(np.full(6, 5.0))
    s.reset()
    w = np.arange(6.0)
    assert np.array_equal(s.measure(w), w)  # start-up output: the first (unfiltered) sample


def test_force_readings_are_read_only_copies_of_the_sensor_state():
    for delay in (0, 2):
        s = ForceTorqueSensor(ForceSensorParams(delay_ticks=delay), DT, np.random.default_rng(1))
        y = s.measure(np.ones(6))
        kept = y.copy()
        assert not y.flags.writeable
        with pytest.raises(ValueError):
            y[0] = 0.0
        for _ in range(5):
            s.measure(np.full(6, 10.0))
        assert np.array_equal(y, kept)


# --- several force/torque sensors measured together ----------------------------------------------------

BANK_PARAMS = (
    ForceSensorParams(),
    ForceSensorParams(noise_std_N=0.0, noise_std_Nm=0.0, cutoff_Hz=None, delay_ticks=0),
    ForceSensorParams(noise_std_N=0.5, noise_std_Nm=0.02, bias_N=(0.3, 0.0, -0.1), cutoff_Hz=None, delay_ticks=3),
    ForceSensorParams(noise_std_N=0.1, noise_std_Nm=0.0, bias_Nm=(0.0, 0.01, 0.0), cutoff_Hz=80.0, delay_ticks=2),
)


def _documented_readings(p: ForceSensorParams, seed: int, w: np.ndarray) -> np.ndarray:
    """The ForceTorqueSensor docstring's recursion in NumPy on the draws of a Generator with the same seed.

    u_k = w_k + b + sigma n_k; y_0 = u_0, y_k = y_{k-1} + alpha (u_k - y_{k-1}) (y_k = u_k without a filter);
    output y_{k-d}, y_0 before d samples exist.  A sensor with all sigma 0 draws nothing.
    """
    rng = np.random.default_rng(seed)
    sigma = np.array([p.noise_std_N] * 3 + [p.noise_std_Nm] * 3)
    bias = np.array(p.bias_N + p.bias_Nm)
    alpha = None if p.cutoff_Hz is None else lowpass_alpha(p.cutoff_Hz, DT)
    ys = []
    for k, x in enumerate(w):
        u = x + bias + (sigma * rng.standard_normal(6) if np.any(sigma > 0) else 0.0)
        ys.append(u if k == 0 or alpha is None else ys[-1] + alpha * (u - ys[-1]))
    d = p.delay_ticks
    return np.array([ys[0]] * d + ys[: len(ys) - d])


def test_bank_rows_equal_the_documented_recursion_and_the_sensors_measured_one_by_one():
    # Reference: the recursion of the ForceTorqueSensor docstring evaluated in NumPy (as in
    # test_noisy_biased_filtered_delayed_reading_equals_the_documented_recursion_on_the_same_draws), and,
    # bit for bit, the same sensors measured one by one (the bank's documented promise).
    seeds = (3, 4, 5, 6)
    bank = ForceSensorBank([ForceTorqueSensor(p, DT, np.random.default_rng(sd)) for p, sd in zip(BANK_PARAMS, seeds)])
    single = [ForceTorqueSensor(p, DT, np.random.default_rng(sd)) for p, sd in zip(BANK_PARAMS, seeds)]
    ticks = 2 * NOISE_BLOCK_TICKS + 44  # past two blocks of draws
    w = np.sin(np.arange(ticks)[:, None, None] * 0.3 + np.arange(4)[:, None] + np.arange(6)) * 5.0  # [N, N m]
    got = np.array([bank.measure(x) for x in w])  # (ticks, sensors, 6)
    one_by_one = np.array([[s.measure(x[i]) for i, s in enumerate(single)] for x in w])
    assert np.array_equal(got, one_by_one)
    for i, (p, sd) in enumerate(zip(BANK_PARAMS, seeds)):
        np.testing.assert_allclose(got[:, i], _documented_readings(p, sd, w[:, i]), rtol=1e-14, atol=1e-13)


def test_bank_and_its_sensors_share_state_and_a_reset_restarts_every_sensor():
    # A sensor of a bank measured on its own carries on the same filter and delay line (bank docstring);
    # reference: one sensor measured alone for the whole sequence.  After reset: the start-up rule.
    p = BANK_PARAMS[3]
    a, b = ForceTorqueSensor(p, DT, np.random.default_rng(9)), ForceTorqueSensor(p, DT, np.random.default_rng(9))
    alone = ForceTorqueSensor(p, DT, np.random.default_rng(9))
    bank = ForceSensorBank([a, b])
    w = np.cos(np.arange(2 * NOISE_BLOCK_TICKS + 20)[:, None] * 0.4 + np.arange(6))
    ref = [alone.measure(x) for x in w]
    for k, x in enumerate(w):
        y = a.measure(x) if k % 3 == 1 else bank.measure(np.stack([x, x]))[0]
        assert np.array_equal(y, ref[k])
    bank.reset()
    alone.reset()
    assert np.array_equal(bank.measure(np.stack([w[0], w[0]]))[0], alone.measure(w[0]))


def test_bank_reading_is_new_and_read_only():
    # Documented: the returned array is new, read-only and owns its data; its rows cannot be made writable
    # (numpy.ndarray.setflags documentation: WRITEABLE can be set only if the base is writeable).
    bank = ForceSensorBank([ForceTorqueSensor(ForceSensorParams(), DT, np.random.default_rng(k)) for k in range(3)])
    y = bank.measure(np.ones((3, 6)))
    kept = y.copy()
    assert not y.flags.writeable and y.base is None
    with pytest.raises(ValueError):
        y[0, 0] = 1.0
    with pytest.raises(ValueError):
        y[1].setflags(write=True)
    for _ in range(3):
        bank.measure(np.full((3, 6), 4.0))
    assert np.array_equal(y, kept)


@pytest.mark.parametrize(
    "call, match",
    [
        (lambda s: ForceSensorBank([s, s]), r"ForceSensorBank\.sensors\[1\] is given twice"),
        (lambda s: ForceSensorBank([s, "hand"]), r"ForceSensorBank\.sensors\[1\] must be a ForceTorqueSensor"),
        (lambda s: ForceSensorBank(3), r"ForceSensorBank\.sensors must be a sequence"),
        (lambda s: (ForceSensorBank([s]), ForceSensorBank([s])), r"sensors\[0\] already belongs to a ForceSensorBank"),
        (lambda s: ForceSensorBank([s]).measure(np.zeros(6)),
         r"ForceSensorBank\.measure wrenches_true must have shape"),
        (lambda s: ForceSensorBank([s]).measure([[0.0, 0.0, np.inf, 0.0, 0.0, 0.0]]),
         r"ForceSensorBank\.measure wrenches_true\[0\] must be finite"),
    ],
)
def test_invalid_bank_construction_or_input_raises_naming_the_culprit(call, match):
    with pytest.raises(ParameterError, match=match):
        call(ForceTorqueSensor(ForceSensorParams(), DT, np.random.default_rng(0)))


def test_noise_drawn_in_blocks_is_exactly_the_stream_of_one_draw_a_tick_across_resets():
    # The module docstring: a force/torque sensor draws NOISE_BLOCK_TICKS ticks at a time, the same numbers
    # in the same order as one draw a tick (numpy Generator: a stream does not depend on how it is cut),
    # and a reset does not rewind it.  Reference: rng.standard_normal(6) every tick from the same seed;
    # with w = 0, no bias, filter or delay the reading is (0 + 0) + n sigma exactly.
    p = ForceSensorParams(noise_std_N=0.3, noise_std_Nm=0.01, cutoff_Hz=None, delay_ticks=0)
    sigma = np.array([0.3] * 3 + [0.01] * 3)
    ref_rng = np.random.default_rng(12)
    alone = ForceTorqueSensor(p, DT, np.random.default_rng(12))
    banked = [ForceTorqueSensor(p, DT, np.random.default_rng(12)) for _ in range(2)]
    bank = ForceSensorBank(banked[1:])
    for k in range(3 * NOISE_BLOCK_TICKS + 5):
        if k in (50, NOISE_BLOCK_TICKS + 1):
            for s in (alone, *banked):
                s.reset()
        expected = (0.0 + 0.0) + ref_rng.standard_normal(6) * sigma
        assert np.array_equal(alone.measure(np.zeros(6)), expected)
        assert np.array_equal(banked[0].measure(np.zeros(6)), expected)
        assert np.array_equal(bank.measure(np.zeros((1, 6)))[0], expected)


# --- inputs already in the kernels' layout (float64 ndarrays) ------------------------------------------


@pytest.mark.parametrize("bad", [np.nan, np.inf, -np.inf])
def test_non_finite_array_inputs_raise_naming_the_input_and_change_nothing(bad):
    # Rule: a bad input gets a clear error naming it, and no data already produced is lost: the sensor
    # carries on as if the bad call had not happened (reference: a twin sensor that never saw it).
    p = EncoderParams(torque_noise_std_Nm=0.1)
    s, twin = _encoder(p, n=3, seed=2), _encoder(p, n=3, seed=2)
    q, tau = np.array([0.1, 0.2, 0.3]), np.array([1.0, 2.0, 3.0])
    for x in (s, twin):
        x.measure(q, tau)
    with pytest.raises(ParameterError, match=r"JointSensing\.measure q_true must be finite"):
        s.measure(np.array([0.1, bad, 0.3]), tau)
    with pytest.raises(ParameterError, match=r"JointSensing\.measure tau_joint_Nm must be finite"):
        s.measure(q + 0.01, np.array([1.0, 2.0, bad]))
    for got, ref in zip(s.measure(q + 0.02, tau), twin.measure(q + 0.02, tau)):
        assert np.array_equal(got, ref)

    bank_sensors = [ForceTorqueSensor(ForceSensorParams(), DT, np.random.default_rng(k)) for k in range(4)]
    f, f_twin = bank_sensors[0], ForceTorqueSensor(ForceSensorParams(), DT, np.random.default_rng(0))
    bank = ForceSensorBank(bank_sensors[1:])
    bank_twin = ForceSensorBank([ForceTorqueSensor(ForceSensorParams(), DT, np.random.default_rng(k))
                                 for k in (1, 2, 3)])
    w = np.arange(6.0)
    f.measure(w), f_twin.measure(w), bank.measure(np.stack([w] * 3)), bank_twin.measure(np.stack([w] * 3))
    with pytest.raises(ParameterError, match=r"ForceTorqueSensor\.measure wrench_true must be finite"):
        f.measure(np.array([0.0, 1.0, 2.0, bad, 4.0, 5.0]))
    w_bad = np.stack([w] * 3)
    w_bad[2, 4] = bad
    with pytest.raises(ParameterError, match=r"ForceSensorBank\.measure wrenches_true\[2\] must be finite"):
        bank.measure(w_bad)
    assert np.array_equal(f.measure(w + 1.0), f_twin.measure(w + 1.0))
    assert np.array_equal(bank.measure(np.stack([w + 1.0] * 3)), bank_twin.measure(np.stack([w + 1.0] * 3)))


def test_strided_float32_and_list_inputs_read_like_contiguous_float64_arrays():
    # The same numbers in any array_like give the same reading (the measure docstrings: "array_like").
    q, tau, w = np.array([0.25, -0.5]), np.array([1.0, -1.0]), np.array([1.0, 2.0, 3.0, 0.5, 0.25, 0.125])
    forms = (lambda a: a, lambda a: np.repeat(a, 2)[::2], lambda a: a.astype(np.float32), lambda a: a.tolist())
    readings = []
    for form in forms:
        j = _encoder(EncoderParams(torque_noise_std_Nm=0.1), seed=4)
        f = ForceTorqueSensor(ForceSensorParams(delay_ticks=0), DT, np.random.default_rng(4))
        b = ForceSensorBank([ForceTorqueSensor(ForceSensorParams(delay_ticks=0), DT, np.random.default_rng(4))])
        readings.append([*j.measure(form(q), form(tau)), *j.measure(form(q * 2), form(tau)), f.measure(form(w)),
                         b.measure([form(w)])[0]])
    for r in readings[1:]:
        for got, ref in zip(r, readings[0]):
            assert np.array_equal(got, ref)


# --- validation --------------------------------------------------------------------------------------


@pytest.mark.parametrize(
    "call, match",
    [
        (lambda: EncoderParams(resolution_rad=0.0), r"EncoderParams\.resolution_rad must be > 0"),
        (lambda: EncoderParams(resolution_rad=float("nan")), r"EncoderParams\.resolution_rad must be finite"),
        (lambda: EncoderParams(velocity_cutoff_Hz=-1.0), r"EncoderParams\.velocity_cutoff_Hz must be > 0"),
        (lambda: EncoderParams(torque_noise_std_Nm=-0.1), r"EncoderParams\.torque_noise_std_Nm must be >= 0"),
        (lambda: ForceSensorParams(noise_std_N=-1.0), r"ForceSensorParams\.noise_std_N must be >= 0"),
        (lambda: ForceSensorParams(noise_std_Nm=float("nan")), r"ForceSensorParams\.noise_std_Nm must be finite"),
        (lambda: ForceSensorParams(bias_N=(0.0, 1.0)), r"ForceSensorParams\.bias_N must be a sequence of 3"),
        (lambda: ForceSensorParams(bias_Nm=(0.0, np.nan, 0.0)), r"ForceSensorParams\.bias_Nm must be finite"),
        (lambda: ForceSensorParams(cutoff_Hz=0.0), r"ForceSensorParams\.cutoff_Hz must be > 0"),
        (lambda: ForceSensorParams(cutoff_Hz=math.inf), r"ForceSensorParams\.cutoff_Hz must be finite"),
        (lambda: ForceSensorParams(delay_ticks=-1), r"ForceSensorParams\.delay_ticks must be an integer >= 0"),
        (lambda: ForceSensorParams(delay_ticks=1.5), r"ForceSensorParams\.delay_ticks must be an integer >= 0"),
        (lambda: JointSensing(EncoderParams(), 0, DT, np.random.default_rng()), r"JointSensing\.n_joints"),
        (lambda: JointSensing(EncoderParams(), 2, 0.0, np.random.default_rng()), r"JointSensing\.dt_s must be > 0"),
        (lambda: JointSensing(EncoderParams(), 2, DT, None), r"JointSensing\.rng must be a numpy\.random\.Generator"),
        (lambda: ForceTorqueSensor(ForceSensorParams(), -DT, np.random.default_rng()), r"ForceTorqueSensor\.dt_s"),
        (lambda: _encoder().measure([0.0, 0.0, 0.0], [0.0, 0.0]), r"JointSensing\.measure q_true must have shape"),
        (lambda: _encoder().measure([0.0, np.nan], [0.0, 0.0]), r"JointSensing\.measure q_true must be finite"),
        (
            lambda: ForceTorqueSensor(ForceSensorParams(), DT, np.random.default_rng()).measure(np.zeros(3)),
            r"ForceTorqueSensor\.measure wrench_true must have shape",
        ),
    ],
)
def test_invalid_parameters_raise_parameter_error_naming_the_field(call, match):
    with pytest.raises(ParameterError, match=match):
        call()
