"""The coupled plant and the loop against mechanics closed forms.

Sources named per test: conservation of energy of a conservative mechanical
system (e.g. Goldstein, Poole & Safko, *Classical Mechanics*, section 2.7)
and the bounded energy error of symplectic integrators (Hairer, Lubich &
Wanner 2006, section IX.8); dissipation by viscous damping; hand statics of a
serial arm (Spong, Hutchinson & Vidyasagar 2006, section 4.10: tau = J^T F,
here for gravity forces m_i g at the centres of mass); the equilibrium of a
joint spring under gravity (Hooke's law).
"""

from __future__ import annotations

import math

import numpy as np
import pinocchio as pin
import pytest

import models
from models.coupling import matching_exo_velocity
from sim import load_run, simulate
from sim.loop.scenario import Scenario
from sim.physics.intent import JointIntent
from sim.physics.plant import CoupledPlant, PlantParams
from sim.physics.wearer import HumanMotorParams

H = 0.25e-3  # default substep: 1 ms control period / 4 substeps [s]


def _moving_plant(damping: bool) -> CoupledPlant:
    asm = models.assemble("m50", q_human0=np.radians([30, 10, 0, 60, 0, 0, 0]))
    plant = CoupledPlant(asm, PlantParams(gravity_m_s2=0.0, exo_friction=damping, cuff_damping=damping))
    plant.v_human[:] = [0.5, 0.2, 0.3, -0.8, 0.5, 0.3, 0.2]  # [rad/s]
    # the robot moves with the wearer, so the cuffs start unstretched and at rest relative to each other
    plant.v_exo[:] = matching_exo_velocity(asm.exo, asm.human, plant.q_exo, plant.q_human, plant.v_human)
    plant.invalidate()
    return plant


def _energy_history(plant: CoupledPlant, seconds: float, every: int = 10) -> np.ndarray:
    zero_e, zero_h = np.zeros(plant.exo.nv), np.zeros(plant.human.nv)
    out = [plant.energy_J()["total_J"]]
    for k in range(int(round(seconds / H))):
        plant.substep(zero_e, zero_h, H)
        if (k + 1) % every == 0:
            out.append(plant.energy_J()["total_J"])
    return np.array(out)


def test_undamped_coupled_system_without_gravity_or_control_conserves_energy_within_half_a_percent():
    # conservative system + symplectic Euler: total energy (kinetic + cuff springs) stays within 0.5 %
    E = _energy_history(_moving_plant(damping=False), 5.0)
    assert np.max(np.abs(E - E[0])) / E[0] < 5e-3


def test_with_cuff_damping_and_joint_friction_the_system_never_gains_energy():
    E = _energy_history(_moving_plant(damping=True), 2.0, every=4)
    assert np.all(np.diff(E) <= 1e-12 * E[0])  # viscous elements only dissipate
    assert E[-1] < 0.5 * E[0]


def _hold_scenario(q_human_deg, **kw) -> Scenario:
    q = tuple(math.radians(a) for a in q_human_deg)
    return Scenario(name="hold", subject="m50", intent=JointIntent(start_rad=q, vias=()),
                    duration_s=kw.pop("duration_s", 5.0), controllers=("gravity",), **kw)


POSTURES_DEG = [(60, 20, 10, 70, 20, 10, 0), (90, 0, 0, 0, 0, 0, 0), (20, 40, -30, 110, -40, 30, 5)]


@pytest.mark.parametrize("posture_deg", POSTURES_DEG)
def test_gravity_compensation_with_an_exact_model_holds_any_start_posture(tmp_path, posture_deg):
    # exact model, no wearer, default sensors and drives: drift < 1e-3 rad over 5 s
    simulate(_hold_scenario(posture_deg), "gravity", tmp_path / "run", mode="exo_alone")
    run = load_run(tmp_path / "run")
    assert np.abs(run["q_exo"] - run["q_exo"][0]).max() < 1e-3


def test_gravity_compensation_is_exact_with_ideal_encoders_and_no_friction(tmp_path):
    # nothing to hide errors: with a 1e-9 rad encoder the loop holds to 1e-6 rad (the 17-bit
    # default encoder alone makes a frictionless arm wander by about 1e-3 rad in 5 s)
    from sim.physics.sensors import EncoderParams

    sc = _hold_scenario(POSTURES_DEG[0], plant=PlantParams(exo_friction=False),
                        encoder=EncoderParams(resolution_rad=1e-9))
    simulate(sc, "gravity", tmp_path / "run", mode="exo_alone")
    run = load_run(tmp_path / "run")
    assert np.abs(run["q_exo"] - run["q_exo"][0]).max() < 1e-6


def test_static_shoulder_torque_holding_a_horizontal_arm_equals_the_sum_of_m_g_l(tmp_path):
    # arm straight out in front, horizontal; gravity compensation holds it, the applied torques are the statics
    sc = _hold_scenario((90, 0, 0, 0, 0, 0, 0), duration_s=1.0, plant=PlantParams(exo_friction=False))
    simulate(sc, "gravity", tmp_path / "run", mode="exo_alone")
    run = load_run(tmp_path / "run")
    q, tau = run["q_exo"][-1], run["tau_applied"][-1]
    arm = models.assemble("m50").exo
    m, d = arm.model, arm.model.createData()
    pin.computeJointJacobians(m, d, q)  # also runs forward kinematics
    g = np.array([0.0, 0.0, -9.81])
    hand_statics = np.zeros(m.nv)
    for j in range(1, m.njoints):  # tau_j = u_j . sum over the links it carries of (c_i - p_j) x m_i g
        p_j = d.oMi[j].translation
        u_j = d.J[3:, j - 1]  # world direction of joint axis j
        for i in range(j, m.njoints):
            c_i = d.oMi[i].act(m.inertias[i].lever)
            hand_statics[j - 1] -= u_j @ np.cross(c_i - p_j, m.inertias[i].mass * g)
    # to the 17-bit encoder: g is evaluated at q quantised by 4.8e-5 rad, |dg/dq| ~ 13 N m/rad
    assert np.allclose(tau, hand_statics, rtol=0, atol=1e-3)
    # the scalar form about the horizontal axis normal to the arm: sum of m_i g l_i over the links
    lever_arm = sum(m.inertias[i].mass * 9.81 * (d.oMi[i].act(m.inertias[i].lever)[0]) for i in range(1, m.njoints))
    horizontal = np.array([0.0, -1.0, 0.0])  # flexion axis of a right arm pointing forward
    torque_about_axis = 0.0
    for i in range(1, m.njoints):
        c_i = d.oMi[i].act(m.inertias[i].lever)
        torque_about_axis -= horizontal @ np.cross(c_i, m.inertias[i].mass * g)
    assert torque_about_axis == pytest.approx(lever_arm, rel=1e-12)
    assert lever_arm > 5.0  # a 7.5 kg arm held out: several N m


def test_human_alone_tracks_a_reach_as_its_exact_internal_model_and_impedance_predict(tmp_path):
    # exact feed-forward and zero initial error: the error dynamics M e'' + B e' + K e = 0 keep e at 0,
    # up to the 1 ms sampling of the human's torque
    from pathlib import Path

    from sim.loop.scenario import load_scenario

    sc = load_scenario(Path(__file__).resolve().parents[1] / "scenarios" / "reach.py")
    simulate(sc, "gravity", tmp_path / "alone", mode="human_alone")
    run = load_run(tmp_path / "alone")
    err = np.abs(run["q_human"] - run["q_human_intent"]).max()
    assert err < 2e-3


def test_without_gravity_feedforward_the_arm_sags_to_the_spring_equilibrium(tmp_path):
    # Hooke: at rest K (q_d - q*) = g(q*) for a joint spring holding the arm against gravity
    motor = HumanMotorParams(gravity_feedforward=False)
    sc = Scenario(name="sag", subject="m50", controllers=("gravity",), duration_s=4.0, motor=motor,
                  intent=JointIntent(start_rad=tuple(math.radians(a) for a in (40, 10, 0, 60, 0, 0, 0)), vias=()))
    simulate(sc, "gravity", tmp_path / "sag", mode="human_alone")
    run = load_run(tmp_path / "sag")
    q_star, q_d = run["q_human"][-1], run["q_human_intent"][-1]
    arm = models.build_human(models.HumanParams("m50"))
    g = pin.computeGeneralizedGravity(arm.model, arm.model.createData(), q_star)
    K = np.array(motor.stiffness_Nm_per_rad)
    assert np.abs(run["dq_human"][-1]).max() < 1e-3  # settled
    assert np.allclose(K * (q_d - q_star), g, atol=2e-3 * np.abs(g).max())
    assert np.abs(q_d - q_star).max() > 0.05  # it really sagged


def test_plant_model_error_scales_the_robot_masses_but_not_the_controllers_model():
    asm = models.assemble("m50")
    plant = CoupledPlant(asm, PlantParams(model_mass_scale=1.1))
    m_plant = sum(plant.exo.model.inertias[i].mass for i in range(1, plant.exo.model.njoints))
    m_ctrl = sum(asm.exo.model.inertias[i].mass for i in range(1, asm.exo.model.njoints))
    assert m_plant == pytest.approx(1.1 * m_ctrl, rel=1e-12)
    assert m_ctrl == pytest.approx(models.ExoParams().total_mass_kg, rel=1e-12)


def test_cuff_wrenches_on_robot_and_human_are_equal_and_opposite_in_the_world():
    # Newton's third law through the plant's own frame bookkeeping
    plant = _moving_plant(damping=True)
    for _ in range(40):
        plant.substep(np.zeros(7), np.zeros(7), H)
    plant.update_cuffs()
    de, dh = plant.exo.model.createData(), plant.human.model.createData()
    pin.framesForwardKinematics(plant.exo.model, de, plant.q_exo)
    pin.framesForwardKinematics(plant.human.model, dh, plant.q_human)
    for k, c in enumerate(plant.cuffs):
        oMa = de.oMf[c.exo_frame_id]
        oMb = dh.oMf[c.human_frame_id] * c.human_offset
        total = oMa.act(pin.Force(plant.wrench_on_exo[k])).vector + oMb.act(pin.Force(plant.wrench_on_human[k])).vector
        assert np.allclose(total, 0.0, atol=1e-9 * max(1.0, np.abs(plant.wrench_on_human[k]).max()))
    assert any(np.linalg.norm(w[:3]) > 1e-3 for w in plant.wrench_on_human)  # the test saw real forces
