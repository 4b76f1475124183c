"""The fitted metrics against known answers: compensation shares, wall impedance, felt mass and its quality.

Sources of the known answers, named beside each check:

* Lagrangian rigid-body dynamics, :math:`M(q)\\ddot q + C(q,\\dot q)\\dot q + g(q) = \\tau`, evaluated by the
  recursive Newton-Euler algorithm (Featherstone R., *Rigid Body Dynamics Algorithms*, Springer 2008, ch. 5) as
  implemented by pinocchio's ``rnea`` (a general-purpose reference library);
* the Kelvin-Voigt spring-damper :math:`F = k x + b \\dot x` and the mass-spring-damper
  :math:`F = m \\ddot x + b \\dot x + k x` (textbook closed forms);
* Newton's second law for a point mass, :math:`F = m a`;
* ordinary least squares and its slope's standard error (Draper N.R., Smith H., *Applied Regression Analysis*,
  3rd ed., Wiley 1998, ch. 1 and 5), as computed by ``scipy.stats.linregress`` and ``scipy.stats.t``.
"""

from __future__ import annotations

import numpy as np
import pinocchio as pin
import pytest
from scipy import stats

import models
from sim.analysis.metrics import (
    MASS_FIT_MIN_R2,
    MassFit,
    apparent_mass_fit,
    apparent_mass_kg,
    compensation_shares,
    rendered_wall_damping_N_s_per_m,
    robot_interaction_terms,
    run_metrics,
    wall_impedance_fit,
)

DT = 1e-3


# -- compensation shares ------------------------------------------------------------------------
def _reach_and_back(arm, seed=5):
    """A reach of every joint and back, as in scenarios/reach.py: rest 0.3 s, minimum-jerk 1 s out to a random
    posture inside the limits, hold 0.4 s, 1 s back, rest 0.4 s; q, dq and ddq in closed form (Flash & Hogan 1985)."""
    rng = np.random.default_rng(seed)
    lo, hi = arm.position_limits()
    span = hi - lo
    qa, qb = lo + 0.2 * span, lo + span * rng.uniform(0.5, 0.8, size=lo.shape)
    s = np.arange(0.0, 1.0, DT)
    x, v, a = 10 * s**3 - 15 * s**4 + 6 * s**5, 30 * s**2 - 60 * s**3 + 30 * s**4, 60 * s - 180 * s**2 + 120 * s**3

    def still(n, at):
        return np.full(n, at), np.zeros(n), np.zeros(n)

    segs = [still(300, 0.0), (x, v, a), still(400, 1.0), (1 - x, -v, -a), still(400, 0.0)]
    S, dS, ddS = (np.concatenate([seg[i] for seg in segs])[:, None] for i in range(3))
    return qa + S * (qb - qa), dS * (qb - qa), ddS * (qb - qa)


def _rnea_terms(model, q, dq, ddq):
    """g, C dq and M ddq per tick from pinocchio's RNEA alone (Featherstone 2008, ch. 5): rnea(q, 0, 0),
    rnea(q, dq, 0) - g and rnea(q, dq, ddq) - rnea(q, dq, 0)."""
    data = model.createData()
    zero = np.zeros(model.nv)
    g, c, m = (np.empty_like(q) for _ in range(3))
    for k in range(len(q)):
        g[k] = pin.rnea(model, data, q[k], zero, zero)
        h = pin.rnea(model, data, q[k], dq[k], zero)
        c[k] = h - g[k]
        m[k] = pin.rnea(model, data, q[k], dq[k], ddq[k]) - h
    return g, c, m


@pytest.mark.parametrize("alpha, beta, gamma", [(0.0, 1.0, 1.0), (1.0, 1.0, 1.0), (0.3, 0.5, 0.0)])
def test_compensation_shares_recover_known_shares_with_coriolis_and_friction(alpha, beta, gamma):
    # the exo model on a reach and back; the human's torque through the cuffs is what the controller
    # leaves: alpha g + beta M ddq + gamma C dq (Lagrangian dynamics by RNEA) plus the plant's joint friction
    # b dq + tau_c tanh(dq / v_s) (the model's own coefficients). The third case is the transparency task's: all of
    # C dq compensated, half of M ddq. The fit reads the robot's terms from robot_interaction_terms (ddq by central
    # differences of dq, as on a run).
    arm = models.build_exo()
    model = arm.model
    q, dq, ddq = _reach_and_back(arm)
    g, c, m = _rnea_terms(model, q, dq, ddq)
    v_s = 0.01
    friction = model.damping * dq + model.friction * np.tanh(dq / v_s)
    tau_int = alpha * g + beta * m + gamma * c + friction
    frames = ["exo_cuff_hand"]
    terms = robot_interaction_terms(arm, {"q_exo": q, "dq_exo": dq, "cuff_wrench_exo": np.zeros((len(q), 1, 6))},
                                    frames, DT)
    np.testing.assert_allclose(terms["tau_gravity"], g, atol=1e-10)
    np.testing.assert_allclose(terms["tau_coriolis"], c, atol=1e-10)
    shares = compensation_shares(tau_int, terms["tau_gravity"], terms["tau_inertia"],
                                 tau_coriolis=terms["tau_coriolis"], dq=dq, coulomb_smoothing_rad_s=v_s)
    assert shares == pytest.approx((alpha, beta), abs=1e-3)
    if gamma == beta:  # the whole inertial torque left: without the Coriolis and friction columns the shares are
        # biased (the defect this fit removes)
        a0, b0 = compensation_shares(tau_int, terms["tau_gravity"], terms["tau_inertia"])
        assert abs(a0 - alpha) + abs(b0 - beta) > 0.05
    # a tick mask leaves ticks out: corrupting the masked ticks changes nothing
    mask = np.zeros(len(q), bool)
    mask[1000:1300] = True
    spoiled = tau_int.copy()
    spoiled[mask] += 50.0
    assert compensation_shares(spoiled, terms["tau_gravity"], terms["tau_inertia"], tau_coriolis=terms["tau_coriolis"],
                               dq=dq, coulomb_smoothing_rad_s=v_s, exclude=mask) == pytest.approx((alpha, beta),
                                                                                                   abs=1e-3)
    with pytest.raises(ValueError, match="one flag per tick"):
        compensation_shares(tau_int, g, m, exclude=mask[:-1])


def test_compensation_shares_of_a_robot_at_rest_are_undefined():
    g = np.tile(np.linspace(1.0, 7.0, 7), (100, 1))
    zero = np.zeros_like(g)
    assert compensation_shares(0.5 * g, g, zero, tau_coriolis=zero, dq=zero) == (None, None)


# -- wall impedance ---------------------------------------------------------------------------------
def _pushes(seed=2, noise_N=0.5):
    """Three pushes into a wall, each a quick minimum-jerk move from 3 cm outside to 4 cm deep (0.3, 0.4, 0.5 s:
    the hand crosses the plane fast and is stopped inside), a 0.5 s hold and a slow move out to 5 mm outside (1.5,
    1.2, 1.0 s), with rests; and white force noise [N].  Entering fast and leaving slowly, the hand's speed and
    acceleration in the wall correlate, as on a wearer's push."""
    def move(T, a, b):
        s = np.arange(0.0, T, DT) / T
        return a + (b - a) * (10 * s**3 - 15 * s**4 + 6 * s**5)

    deep = 0.04
    p = [np.full(300, -0.03)]
    for t_in, t_out in ((0.3, 1.5), (0.4, 1.2), (0.5, 1.0)):
        p += [move(t_in, -0.03, deep), np.full(500, deep), move(t_out, deep, -0.005), move(0.5, -0.005, -0.03)]
    p = np.concatenate(p)
    return p, np.random.default_rng(seed).normal(scale=noise_N, size=len(p))


def test_kelvin_voigt_wall_gives_back_its_stiffness_and_damping():
    # F = k x + b dx/dt inside the wall (Kelvin-Voigt), with 0.5 N of white force noise: the joint fit returns
    # k and b, with or without the mass column (m ~ 0)
    k, b = 600.0, 5.0
    p, noise = _pushes()
    v = np.gradient(p, DT)
    F = np.where(p > 0, k * p + b * v, 0.0) + noise
    for inertia in (True, False):
        fit = wall_impedance_fit(F, p, DT, inertia=inertia)
        assert fit["stiffness_N_per_m"] == pytest.approx(k, rel=0.01)
        assert fit["damping_N_s_per_m"] == pytest.approx(b, rel=0.04)  # 0.5 N of noise on 5 N s/m
        assert rendered_wall_damping_N_s_per_m(F, p, DT, inertia=inertia) == fit["damping_N_s_per_m"]
    assert abs(wall_impedance_fit(F, p, DT)["mass_kg"]) < 0.02
    assert wall_impedance_fit(F, p, DT, inertia=False)["mass_kg"] is None


def test_a_wall_felt_with_a_mass_needs_the_mass_column_for_its_damping():
    # mass-spring-damper F = m x'' + b x' + k x (closed form) inside the wall: the k-b fit alone takes part of
    # the inertia for damping; with the mass column all three come back
    k, b, m = 600.0, 5.0, 0.9
    p, noise = _pushes(noise_N=0.2)
    v = np.gradient(p, DT)
    a = np.gradient(v, DT)
    F = np.where(p > 0, k * p + b * v + m * a, 0.0) + noise
    fit = wall_impedance_fit(F, p, DT)
    assert (fit["stiffness_N_per_m"], fit["damping_N_s_per_m"], fit["mass_kg"]) == pytest.approx((k, b, m), rel=0.02)
    assert abs(rendered_wall_damping_N_s_per_m(F, p, DT, inertia=False) - b) > 1.0


def test_wall_impedance_needs_contact_that_moves():
    p = np.full(200, 0.01)
    assert wall_impedance_fit(600.0 * p, p, DT) is None
    assert rendered_wall_damping_N_s_per_m(np.zeros(200), -np.ones(200), DT) is None


# -- felt mass and its fit --------------------------------------------------------------------------
def _min_jerk(t, T, d):
    """Minimum-jerk position and acceleration from 0 to d in T (Flash & Hogan 1985, closed form)."""
    s = np.clip(t / T, 0.0, 1.0)
    return d * (10 * s**3 - 15 * s**4 + 6 * s**5), d / T**2 * (60 * s - 180 * s**2 + 120 * s**3)


def _there_and_back(u, noise_N, seed=0):
    """A point along u: 0.3 m out in 1 s, then back in 1 s (minimum jerk); its acceleration and a force noise."""
    t = np.arange(0.0, 1.0, DT)
    x, a = _min_jerk(t, 1.0, 0.3)
    x, a = np.concatenate([x, 0.3 - x]), np.concatenate([a, -a])
    return x[:, None] * np.asarray(u), a, np.random.default_rng(seed).normal(scale=noise_N, size=(len(x), 3))


def test_felt_mass_fit_of_a_point_mass_with_noise_and_its_interval():
    # Newton's second law F = m a along a horizontal path, force noise 0.3 N per axis: the slope is m, and the
    # fit's R², intercept and 95 % half-width are those of scipy.stats.linregress on the samples the fit exposes
    # (one column and an intercept: t_{0.975, n-2} times linregress's stderr)
    m = 1.4
    u = np.array([0.6, 0.8, 0.0])
    p, a, noise = _there_and_back(u, 0.3)
    fit = apparent_mass_fit(-m * a[:, None] * u + noise, p, DT)
    assert isinstance(fit, MassFit) and fit.reason is None
    assert fit.mass_kg == fit.fitted_kg == pytest.approx(m, rel=0.02)
    assert abs(fit.mass_kg - m) < fit.ci95_kg + 0.02 * m  # the interval covers the true mass (to the smoothing's bias)
    ref = stats.linregress(fit.acc_m_s2, fit.force_N)
    assert fit.fitted_kg == pytest.approx(ref.slope, rel=1e-10)
    assert fit.intercept_N == pytest.approx(ref.intercept, abs=1e-9)
    assert fit.r2 == pytest.approx(ref.rvalue**2, rel=1e-10)
    assert fit.ci95_kg == pytest.approx(stats.t.ppf(0.975, fit.n_samples - 2) * ref.stderr, rel=1e-8)
    assert fit.n_samples == len(fit.acc_m_s2) == len(fit.force_N) > 1000
    assert apparent_mass_kg(-m * a[:, None] * u + noise, p, DT) == fit.mass_kg


def test_felt_mass_interval_with_a_weight_column_is_the_ols_standard_error():
    # a path with a vertical part adds the weight column: the slope's standard error is then
    # sqrt(s^2 / sum(r^2)), r the acceleration's residual on the other columns (the partial-regression form of
    # the OLS covariance, Draper & Smith 1998), computed here without the fit's (X^T X)^-1
    m, m_g = 1.1, 3.0
    u = np.array([0.6, 0.0, 0.8])
    p, a, noise = _there_and_back(u, 0.3, seed=4)
    force = -(m * a[:, None] * u + m_g * 9.81 * np.array([0.0, 0.0, 1.0])) + noise
    fit = apparent_mass_fit(force, p, DT)
    assert fit.mass_kg == pytest.approx(m, rel=0.02)
    resid = fit.force_N - (fit.fitted_kg * fit.acc_m_s2 + fit.intercept_N)
    n_cols = 3
    s2 = resid @ resid / (fit.n_samples - n_cols)
    # the other columns: the intercept and the weight column 9.81 (z . u), u the direction of motion (+u out, -u back)
    v = np.gradient(p, DT, axis=0)
    speed = np.linalg.norm(v, axis=1)
    uz = v[speed > 0.05, 2] / speed[speed > 0.05]
    others = np.column_stack([np.ones(fit.n_samples), 9.81 * uz])
    r = fit.acc_m_s2 - others @ np.linalg.lstsq(others, fit.acc_m_s2, rcond=None)[0]
    se = np.sqrt(s2 / (r @ r))
    assert fit.ci95_kg == pytest.approx(stats.t.ppf(0.975, fit.n_samples - n_cols) * se, rel=1e-6)


def test_negative_and_poor_felt_mass_fits_are_rejected_with_a_reason():
    u = np.array([1.0, 0.0, 0.0])
    p, a, noise = _there_and_back(u, 0.3)
    # a force that pushes along the acceleration: a negative slope, no mass
    neg = apparent_mass_fit(+1.0 * a[:, None] * u + noise, p, DT)
    assert neg.mass_kg is None and neg.fitted_kg == pytest.approx(-1.0, rel=0.05)
    assert "negative" in neg.reason
    # a 0.2 kg mass under 3 N of noise: the line explains little of the force (R² under the threshold)
    _, _, loud = _there_and_back(u, 3.0, seed=7)
    poor = apparent_mass_fit(-0.2 * a[:, None] * u + loud, p, DT)
    assert poor.mass_kg is None and poor.r2 < MASS_FIT_MIN_R2
    assert poor.reason.startswith("poor fit")
    assert apparent_mass_kg(-0.2 * a[:, None] * u + loud, p, DT) is None
    # nothing moving: nothing to fit
    still = apparent_mass_fit(np.zeros((500, 3)), np.zeros((500, 3)), DT)
    assert still.fitted_kg is None and still.mass_kg is None and "nothing to fit" in still.reason
    with pytest.raises(ValueError, match="reason"):
        MassFit(None, 1.0, 0.9, 0.1, 10, None, np.zeros(3), np.zeros(3), 0.0)


def test_run_metrics_report_the_felt_mass_fit_and_why_it_is_null():
    # a robot that leaves all its weight to the wearer (tau_int = g): the mass is null and the note says so,
    # while the fit's R² and interval are still reported; the hand moves a point mass of 1.4 kg (F = m a)
    m = 1.4
    u = np.array([0.6, 0.8, 0.0])
    p, a, noise = _there_and_back(u, 0.3)
    n = len(p)
    force = -m * a[:, None] * u + noise
    rng = np.random.default_rng(1)
    g = rng.normal(size=(n, 7)) + 3.0
    arrays = {"t": np.arange(n) * DT, "tau_human": np.zeros((n, 7)), "cuff_wrench_human": np.zeros((n, 1, 6)),
              "saturated": np.zeros((n, 7), bool), "cuff_force_human_world": force[:, None, :], "p_hand_human": p,
              "dq_exo": rng.normal(size=(n, 7)), "cuff_wrench_exo": np.zeros((n, 1, 6))}
    terms = {"cuff_twist": np.zeros((n, 1, 6)), "tau_interaction": g, "tau_gravity": g,
             "tau_inertia": rng.normal(size=(n, 7)), "tau_coriolis": rng.normal(size=(n, 7))}
    common = dict(cuff_names=["hand"], baseline=None, dt_s=DT, tick_times_s=np.zeros(n))
    out = run_metrics(arrays, robot_terms=terms, **common)
    assert out["gravity_share_left"] == pytest.approx(1.0, abs=1e-9)
    assert out["inertia_share_left"] == pytest.approx(0.0, abs=1e-9)
    assert out["apparent_mass_hand_kg"] is None
    assert "gravity_share_left = 1.00 > 0.5" in out["apparent_mass_hand_note"]
    assert out["apparent_mass_hand_r2"] > 0.9 and out["apparent_mass_hand_ci95_kg"] > 0
    # without the robot's terms the same hand force gives the mass, and no note
    free = run_metrics(arrays, **common)
    assert free["apparent_mass_hand_kg"] == pytest.approx(m, rel=0.02) and free["apparent_mass_hand_note"] is None
