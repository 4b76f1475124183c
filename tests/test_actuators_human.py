"""The torque-source actuators and the wearer's motor torque against their documented equations.

Sources: the step response of the exactly discretised first-order lag,
:math:`\\tau_k = u (1 - e^{-k h / T})` (zero-order-hold equivalent of
1 / (T s + 1); Franklin, Powell & Workman, *Digital Control of Dynamic
Systems*, the chapter on discrete equivalents); saturation as
``numpy.clip``; the wearer's torque
:math:`\\mathrm{sat}(\\mathrm{ID}(q_d, \\dot q_d, \\ddot q_d) + K (q_d \\ominus q) + B (\\dot q_d - \\dot q))`
with the inverse dynamics of pinocchio (``rnea``), a general-purpose rigid-body library.
"""

from __future__ import annotations

import math

import numpy as np
import pinocchio as pin

import models
from sim.physics.actuators import ActuatorParams, TorqueSourceActuators
from sim.physics.intent import JointIntent, Via
from sim.physics.wearer import HumanMotor, HumanMotorParams


def test_saturation_clips_at_the_limits_and_flags_exactly_the_clipped_joints():
    limit = np.array([10.0, 5.0, 2.0, 1.0])  # [N m]
    act = TorqueSourceActuators(limit)
    cmd = np.array([12.0, -5.0, -2.5, 0.3])  # [N m]: above, at (not saturated), below, inside
    flags = act.hold(cmd)
    np.testing.assert_array_equal(flags, [True, False, True, False])
    act.reset(np.zeros(4))
    act.hold(cmd)
    for _ in range(10000):  # 2.5 s at 0.25 ms: the lag has settled on the clipped command
        applied = act.substep(np.zeros(4), np.zeros(4), 0.25e-3)
    np.testing.assert_allclose(applied, np.clip(cmd, -limit, limit), rtol=0, atol=1e-12)


def test_torque_lag_step_response_is_one_minus_exp_of_minus_t_over_T():
    T, h = 0.002, 0.25e-3  # [s]
    act = TorqueSourceActuators(np.array([100.0, 100.0]), ActuatorParams(torque_time_constant_s=T))
    act.reset(np.zeros(2))
    u = np.array([3.0, -7.0])  # [N m]
    act.hold(u)
    for k in range(1, 41):
        tau = act.substep(np.zeros(2), np.zeros(2), h)
        np.testing.assert_allclose(tau, u * (1.0 - math.exp(-k * h / T)), rtol=1e-12, atol=1e-14)
    np.testing.assert_array_equal(act.applied_Nm, tau)


def test_wearer_torque_is_inverse_dynamics_plus_impedance_then_saturated():
    asm = models.assemble("m50")
    arm = asm.human
    q0 = np.radians([20.0, 10.0, 0.0, 50.0, 0.0, 0.0, 0.0])
    intent = JointIntent(start_rad=tuple(q0), vias=(Via(posture_rad=tuple(q0 + 0.4), move_s=1.0),))
    motor = HumanMotorParams(stiffness_Nm_per_rad=(200.0,) * 7)  # [N m/rad]: stiff, so some joints saturate
    hm = HumanMotor(arm, asm.human_params, intent, motor)
    rng = np.random.default_rng(5)
    data = arm.model.createData()
    K, B = np.array(motor.stiffness_Nm_per_rad), np.array(motor.damping_Nm_s_per_rad)
    limit = arm.model.effortLimit
    clipped = 0
    for t in (0.0, 0.3, 0.5, 0.9):  # [s]
        q = q0 + rng.normal(scale=0.5, size=7)  # [rad]: far enough off for some joints to saturate
        v = rng.normal(scale=2.0, size=7)  # [rad/s]
        qd, dqd, ddqd = intent.at(t)
        free = (pin.rnea(arm.model, data, np.asarray(qd), np.asarray(dqd), np.asarray(ddqd))
                + K * pin.difference(arm.model, q, np.asarray(qd)) + B * (np.asarray(dqd) - v))
        expected = np.clip(free, -limit, limit)
        clipped += int(np.sum(expected != free))
        np.testing.assert_allclose(hm.torque(t, q, v), expected, rtol=1e-12, atol=1e-12)
    assert clipped > 0  # the saturation was exercised
