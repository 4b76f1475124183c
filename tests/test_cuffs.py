"""The cuff wrench law checked against mechanics closed forms.

Sources: Hooke's law for a linear spring; Newton's third law; a force field is
conservative iff its work around every closed path vanishes (e.g. Goldstein,
Poole & Safko, *Classical Mechanics*, 3rd ed., section 1.2); a linear viscous
damper dissipates the power c v^2; the measured stiffness of an upper-arm
exoskeleton interface, cuff and soft tissue (Schiebl J. et al. (2025),
Sensors 25(15):4605: medians 2.1 N/mm along the arm, 4.5 N/mm across).
"""

from __future__ import annotations

import numpy as np
import pinocchio as pin
import pytest

from models import CuffParams, ParameterError, cuff_energy, cuff_wrench

UNDAMPED = CuffParams(damping_N_s_per_m=(0.0, 0.0, 0.0), rot_damping_Nm_s_per_rad=(0.0, 0.0, 0.0))


def _random_pose(rng: np.random.Generator) -> pin.SE3:
    R = pin.exp3(rng.normal(size=3))
    return pin.SE3(R, rng.normal(size=3) * 0.3)


def _offset(oMa: pin.SE3, xi: np.ndarray) -> pin.SE3:
    return oMa * pin.exp6(pin.Motion(np.asarray(xi, dtype=float)))


def test_zero_pose_error_and_zero_relative_velocity_give_zero_wrench():
    rng = np.random.default_rng(1)
    for _ in range(20):
        oMa = _random_pose(rng)
        v = rng.normal(size=6)
        # same frame, same spatial velocity: a rigidly moving pair has no relative motion
        w = cuff_wrench(oMa, oMa, v, v, CuffParams())
        assert np.allclose(w.on_a, 0.0, atol=1e-12)
        assert np.allclose(w.on_b, 0.0, atol=1e-12)
        assert w.energy_J == pytest.approx(0.0, abs=1e-15)


def test_wrenches_on_the_two_bodies_are_equal_and_opposite_in_the_world_frame():
    # Newton's third law: the spatial forces sum to zero at any common point.
    rng = np.random.default_rng(2)
    for _ in range(50):
        oMa = _random_pose(rng)
        oMb = _offset(oMa, rng.normal(size=6) * 0.05)
        w = cuff_wrench(oMa, oMb, rng.normal(size=6), rng.normal(size=6), CuffParams())
        total = oMa.act(pin.Force(w.on_a)).vector + oMb.act(pin.Force(w.on_b)).vector
        assert np.allclose(total, 0.0, atol=1e-9 * max(1.0, np.abs(w.on_b).max()))


@pytest.mark.parametrize("axis", [0, 1, 2])
def test_small_translation_follows_hookes_law_on_each_axis(axis):
    # Hooke: F = -k x along each axis of the cuff frame.
    p = UNDAMPED
    x = 1e-3  # 1 mm [m]
    xi = np.zeros(6)
    xi[axis] = x
    oMa = pin.SE3.Identity()
    w = cuff_wrench(oMa, _offset(oMa, xi), np.zeros(6), np.zeros(6), p)
    expected = np.zeros(6)
    expected[axis] = -p.stiffness_N_per_m[axis] * x
    assert np.allclose(w.on_b, expected, rtol=1e-12, atol=1e-12)


@pytest.mark.parametrize("axis", [0, 1, 2])
def test_rotation_about_one_axis_gives_torsion_spring_torque(axis):
    # torsion spring: tau = -k theta, exact for a rotation about a principal axis
    p = UNDAMPED
    theta = 0.2  # [rad]
    xi = np.zeros(6)
    xi[3 + axis] = theta
    w = cuff_wrench(pin.SE3.Identity(), pin.exp6(pin.Motion(xi)), np.zeros(6), np.zeros(6), p)
    expected = np.zeros(6)
    expected[3 + axis] = -p.rot_stiffness_Nm_per_rad[axis] * theta
    assert np.allclose(w.on_b, expected, rtol=1e-12, atol=1e-12)


def test_spring_wrench_is_the_negative_gradient_of_the_stored_energy():
    rng = np.random.default_rng(3)
    h = 1e-6
    for _ in range(10):
        oMa = _random_pose(rng)
        oMb = _offset(oMa, rng.normal(size=6) * 0.1)
        w = cuff_wrench(oMa, oMb, np.zeros(6), np.zeros(6), UNDAMPED)
        grad = np.zeros(6)
        for i in range(6):
            d = np.zeros(6)
            d[i] = h
            grad[i] = (cuff_energy(oMa, _offset(oMb, d), UNDAMPED)
                       - cuff_energy(oMa, _offset(oMb, -d), UNDAMPED)) / (2 * h)
        assert np.allclose(w.on_b, -grad, rtol=1e-6, atol=1e-6)


def test_work_of_the_spring_around_a_closed_path_vanishes():
    # Conservative field: the line integral of w_B . nu over a closed loop of B is zero.
    # The loop is B(s) = A exp(xi(s)), xi periodic in s; nu is the body twist of B.
    rng = np.random.default_rng(4)
    oMa = pin.SE3.Identity()
    c1, c2, c3 = (rng.normal(size=6) * 0.08 for _ in range(3))

    def xi(s):
        return c1 * np.cos(s) + c2 * np.sin(s) + c3 * np.sin(2 * s)

    n = 4000
    s = np.linspace(0.0, 2 * np.pi, n + 1)
    poses = [_offset(oMa, xi(si)) for si in s]
    work = 0.0
    for k in range(n):
        # body twist over the step, by the logarithm of the relative displacement
        step = pin.log6(poses[k].actInv(poses[k + 1])).vector
        mid = _offset(poses[k], 0.5 * step)
        w = cuff_wrench(oMa, mid, np.zeros(6), np.zeros(6), UNDAMPED)
        work += float(w.on_b @ step)
    scale = max(abs(cuff_energy(oMa, p_, UNDAMPED)) for p_ in poses)
    assert abs(work) < 1e-5 * scale


def test_damper_dissipates_its_viscous_power_and_never_generates_energy():
    # P_drawn = dU/dt + e_dot^T D e_dot >= dU/dt (linear damper power c v^2).
    rng = np.random.default_rng(5)
    p = CuffParams()
    dt = 1e-6
    for _ in range(30):
        oMa = _random_pose(rng)
        oMb = _offset(oMa, rng.normal(size=6) * 0.05)
        va, vb = rng.normal(size=6), rng.normal(size=6)
        w = cuff_wrench(oMa, oMb, va, vb, p)

        def moved(sign, oMa=oMa, oMb=oMb, va=va, vb=vb):
            # advance both bodies by their own body twists
            return oMa * pin.exp6(pin.Motion(sign * va * dt)), oMb * pin.exp6(pin.Motion(sign * vb * dt))

        (a_p, b_p), (a_m, b_m) = moved(1.0), moved(-1.0)
        e_dot = (pin.log6(a_p.actInv(b_p)).vector - pin.log6(a_m.actInv(b_m)).vector) / (2 * dt)
        dU = (cuff_energy(a_p, b_p, p) - cuff_energy(a_m, b_m, p)) / (2 * dt)
        viscous = float(e_dot @ p.D @ e_dot)
        assert w.power_W == pytest.approx(dU + viscous, rel=1e-6, abs=1e-6)
        assert w.power_W - dU >= -1e-6


def test_default_cuff_stiffness_lies_in_the_measured_interface_range():
    # Schiebl 2025: interface stiffness 2-5 N/mm (medians 2.1 along, 4.5 across the arm).
    p = CuffParams()
    for k in p.stiffness_N_per_m:
        assert 2000.0 <= k <= 5000.0
    assert p.stiffness_N_per_m[2] < min(p.stiffness_N_per_m[:2])  # soft along the limb


def test_damping_ratio_constructor_gives_the_critical_damping_fraction():
    # c = 2 zeta sqrt(k m): a mass-spring-damper with that c has damping ratio zeta.
    p = CuffParams.with_damping_ratio(0.3, 2.0, (0.015, 0.015, 0.003))
    for c, k in zip(p.damping_N_s_per_m, p.stiffness_N_per_m):
        assert c / (2.0 * np.sqrt(k * 2.0)) == pytest.approx(0.3, rel=1e-12)
    # the shipped defaults are these values rounded to 3 significant digits
    assert np.allclose(CuffParams().damping_N_s_per_m, p.damping_N_s_per_m, rtol=5e-3)
    assert np.allclose(CuffParams().rot_damping_Nm_s_per_rad, p.rot_damping_Nm_s_per_rad, rtol=5e-3)


@pytest.mark.parametrize(
    "kwargs, field",
    [
        ({"stiffness_N_per_m": (4500.0, -1.0, 2100.0)}, r"stiffness_N_per_m\[1\]"),
        ({"rot_damping_Nm_s_per_rad": (0.1, float("nan"), 0.1)}, "rot_damping_Nm_s_per_rad"),
        ({"damping_N_s_per_m": (1.0, 2.0)}, "damping_N_s_per_m"),
    ],
)
def test_invalid_cuff_parameters_name_the_field(kwargs, field):
    with pytest.raises(ParameterError, match=field):
        CuffParams(**kwargs)
