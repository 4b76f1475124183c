"""``CoupledPlant.advance`` (all the substeps of a control tick in one call) against substep-by-substep stepping.

References: pinocchio (a general-purpose rigid-body library) for the
articulated-body algorithm with external forces (``aba``), the
configuration update (``integrate``) and the frame kinematics; the NumPy cuff
law :func:`models.cuffs.cuff_wrench` (itself checked against closed forms in
tests/test_cuffs.py); the exactly discretised first-order lag
:math:`\\tau_{k+1} = \\tau_k + (1 - e^{-h/T})(u - \\tau_k)` (Franklin, Powell &
Workman, *Digital Control of Dynamic Systems*, the chapter on discrete
equivalents); semi-implicit Euler (Hairer, Lubich & Wanner 2006, section
VI.3).  Agreement with the by-hand loop is asked to rounding, 1e-12 relative
to the largest entry (common practice for two implementations of one
formula); with :meth:`CoupledPlant.substep` to the bit, as documented.
"""

from __future__ import annotations

import math

import numpy as np
import pinocchio as pin
import pytest
from _random_plant import random_plant

from models.cuffs import cuff_wrench
from models.errors import SandboxError
from sim.physics import plant as plant_module
from sim.physics.actuators import ActuatorParams, TorqueSourceActuators
from sim.physics.plant import CoupledPlant, PlantParams

H = 0.25e-3  # [s]: 1 ms control period / 4 substeps
REL = 1e-12  # common practice, see the module docstring


class _StateSpring:
    """A state-dependent joint torque, tau = u - K q - B v (nv,) [N m]: shows which state each substep is given."""

    def __init__(self, nv: int) -> None:
        self.u = np.linspace(-3.0, 3.0, nv)  # [N m]
        self.calls: list[tuple[np.ndarray, np.ndarray]] = []

    def substep(self, q: np.ndarray, v: np.ndarray, dt_s: float) -> np.ndarray:
        self.calls.append((q.copy(), v.copy()))
        return self.u - 20.0 * q - 0.5 * v


def _state(plant: CoupledPlant) -> list[np.ndarray]:
    plant.update_cuffs()
    return [plant.q_exo.copy(), plant.v_exo.copy(), plant.q_human.copy(), plant.v_human.copy(),
            plant.wrench_on_exo.copy(), plant.wrench_on_human.copy()]


@pytest.mark.parametrize("mode", ["coupled", "human_alone", "exo_alone"])
@pytest.mark.parametrize("friction", [True, False])
def test_advance_equals_substep_calls_fed_by_the_same_actuator_to_the_bit(mode, friction):
    params = PlantParams(exo_friction=friction, cuff_damping=friction)
    a, b = random_plant(4, mode, params), random_plant(4, mode, params)
    act_a, act_b = _StateSpring(a.exo.nv), _StateSpring(b.exo.nv)
    tau_h = np.linspace(1.0, -1.0, a.human.nv)  # [N m]
    for _ in range(3):  # three control ticks of four substeps
        a.update_cuffs()  # the loop reads the cuffs at the start of every tick
        b.update_cuffs()
        for _ in range(4):
            a.substep(act_a.substep(a.q_exo, a.v_exo, H), tau_h, H)
        b.advance(act_b, tau_h, H, 4)
    for x, y in zip(_state(a), _state(b)):
        np.testing.assert_array_equal(x, y)
    # the actuator was asked before every substep, given the robot's state at that substep
    assert len(act_b.calls) == 12
    for (qa, va), (qb, vb) in zip(act_a.calls, act_b.calls):
        np.testing.assert_array_equal(qa, qb)
        np.testing.assert_array_equal(va, vb)
    if mode != "human_alone":  # the robot's state did move between substeps (with no robot it stays put)
        assert not np.array_equal(act_b.calls[0][0], act_b.calls[-1][0])


def test_advance_with_a_held_torque_equals_substep_calls_to_the_bit():
    a, b = random_plant(5), random_plant(5)
    tau_e, tau_h = np.linspace(-2.0, 2.0, a.exo.nv), np.linspace(1.0, -1.0, a.human.nv)  # [N m]
    for _ in range(6):
        a.substep(tau_e, tau_h, H)
    b.advance(tau_e, tau_h, H, 6)
    for x, y in zip(_state(a), _state(b)):
        np.testing.assert_array_equal(x, y)


def _reference_forces(plant: CoupledPlant, q_e, v_e, q_h, v_h) -> tuple[pin.StdVec_Force, pin.StdVec_Force]:
    """Joint-frame cuff wrenches from pinocchio's frame kinematics and the NumPy cuff law."""
    me, mh = plant.exo.model, plant.human.model
    de, dh = me.createData(), mh.createData()
    pin.forwardKinematics(me, de, q_e, v_e)
    pin.forwardKinematics(mh, dh, q_h, v_h)
    pin.updateFramePlacements(me, de)
    pin.updateFramePlacements(mh, dh)
    fe = [np.zeros(6) for _ in range(me.njoints)]
    fh = [np.zeros(6) for _ in range(mh.njoints)]
    for c in plant.cuffs:
        oMa, oMb = de.oMf[c.exo_frame_id], dh.oMf[c.human_frame_id] * c.human_offset
        v_a = pin.getFrameVelocity(me, de, c.exo_frame_id, pin.LOCAL).vector
        v_b = c.human_offset.actInv(pin.getFrameVelocity(mh, dh, c.human_frame_id, pin.LOCAL)).vector
        w = cuff_wrench(oMa, oMb, v_a, v_b, c.spec.params)
        fe[me.frames[c.exo_frame_id].parentJoint] += me.frames[c.exo_frame_id].placement.act(pin.Force(w.on_a)).vector
        fh[mh.frames[c.human_frame_id].parentJoint] += (
            (mh.frames[c.human_frame_id].placement * c.human_offset).act(pin.Force(w.on_b)).vector)
    out_e, out_h = pin.StdVec_Force(), pin.StdVec_Force()
    for f in fe:
        out_e.append(pin.Force(f))
    for f in fh:
        out_h.append(pin.Force(f))
    return out_e, out_h


def test_advance_with_torque_source_actuators_equals_a_by_hand_pinocchio_loop():
    plant = random_plant(6)
    T = 0.002  # [s]
    limit = plant.exo.model.effortLimit
    act = TorqueSourceActuators(limit, ActuatorParams(torque_time_constant_s=T))
    act.reset(np.zeros(plant.exo.nv))
    command = np.linspace(-1.5, 1.5, plant.exo.nv) * limit  # [N m]: the outer joints saturate
    act.hold(command)
    tau_h = np.linspace(1.0, -1.0, plant.human.nv)  # [N m]
    me, mh, pp = plant.exo.model, plant.human.model, plant.params
    q_e, v_e, q_h, v_h = plant.q_exo.copy(), plant.v_exo.copy(), plant.q_human.copy(), plant.v_human.copy()
    tau, u = np.zeros(plant.exo.nv), np.clip(command, -limit, limit)
    for _ in range(8):
        tau = tau + (1.0 - math.exp(-H / T)) * (u - tau)
        fe, fh = _reference_forces(plant, q_e, v_e, q_h, v_h)
        friction = -np.array(me.damping) * v_e - np.array(me.friction) * np.tanh(v_e / pp.coulomb_smoothing_rad_s)
        v_e = v_e + H * pin.aba(me, me.createData(), q_e, v_e, tau + friction, fe)
        v_h = v_h + H * pin.aba(mh, mh.createData(), q_h, v_h, tau_h, fh)
        q_e, q_h = pin.integrate(me, q_e, v_e * H), pin.integrate(mh, q_h, v_h * H)
    plant.advance(act, tau_h, H, 4)
    plant.advance(act, tau_h, H, 4)
    for got, ref in ((plant.q_exo, q_e), (plant.v_exo, v_e), (plant.q_human, q_h), (plant.v_human, v_h),
                     (act.applied_Nm, tau)):
        np.testing.assert_allclose(got, ref, rtol=0, atol=REL * np.abs(ref).max())
    assert np.abs(plant.wrench_on_human).max() > 1.0  # the test saw real cuff forces [N]


def test_an_arm_alone_steps_as_a_by_hand_pinocchio_loop_to_the_bit():
    # reference: pinocchio's aba on a new Data each substep (so no kinematics left from before) and
    # semi-implicit Euler. With no cuffs the plant skips the kinematics between substeps: aba computes its own.
    plant = random_plant(8, "human_alone")
    mh = plant.human.model
    q, v = plant.q_human.copy(), plant.v_human.copy()
    tau_h = np.linspace(2.0, -2.0, plant.human.nv)  # [N m]
    zero = pin.StdVec_Force()
    for _ in range(mh.njoints):
        zero.append(pin.Force.Zero())
    for _ in range(8):
        a = pin.aba(mh, mh.createData(), q, v, tau_h, zero)
        v = v + H * a
        q = pin.integrate(mh, q, v * H)
    plant.advance(np.zeros(plant.exo.nv), tau_h, H, 4)
    plant.advance(np.zeros(plant.exo.nv), tau_h, H, 4)
    np.testing.assert_array_equal(plant.q_human, q)
    np.testing.assert_array_equal(plant.v_human, v)


@pytest.mark.parametrize("bad", [0, -1, 2.0, "4"])
def test_advance_refuses_a_substep_count_that_is_not_a_positive_integer(bad):
    plant = random_plant(7)
    with pytest.raises(SandboxError, match="n_substeps"):
        plant.advance(np.zeros(plant.exo.nv), np.zeros(plant.human.nv), H, bad)


def test_the_pair_model_steps_both_arms_as_two_models_do_to_the_bit(monkeypatch):
    # pinocchio's appendModel (one model of both trees) against the two arms' own models, on the same inputs
    pair = random_plant(8)
    monkeypatch.setattr(plant_module, "_pair_model", lambda exo, human: None)
    two = random_plant(8)
    assert pair._pair and not two._pair
    for p in (pair, two):  # assigning a state vector (not only changing it in place) reaches the dynamics
        p.v_human = p.v_human + 0.1  # [rad/s]
        p.invalidate()
    act_p, act_t = _StateSpring(pair.exo.nv), _StateSpring(two.exo.nv)
    tau_h = np.linspace(1.0, -1.0, pair.human.nv)  # [N m]
    for _ in range(5):
        pair.advance(act_p, tau_h, H, 4)
        two.advance(act_t, tau_h, H, 4)
    for x, y in zip(_state(pair), _state(two)):
        np.testing.assert_array_equal(x, y)
    for which in ("exo", "human"):
        np.testing.assert_array_equal(pair.hand_position(which), two.hand_position(which))
    for x, y in zip(*(sum(p._joint_forces(), []) for p in (pair, two))):
        np.testing.assert_array_equal(x, y)
    assert pair.energy_J() == two.energy_J()


class _AskedActuator:
    """Torque-source actuators reached only through ``substep``: the plant asks them in Python every substep."""

    def __init__(self, inner: TorqueSourceActuators) -> None:
        self.inner = inner

    def substep(self, q: np.ndarray, v: np.ndarray, dt_s: float) -> np.ndarray:
        return self.inner.substep(q, v, dt_s)


@pytest.mark.parametrize("friction", [True, False])
def test_the_lag_inside_the_plant_kernel_equals_the_actuators_own_substep_to_the_bit(friction):
    # the compiled substep applies the lag of TorqueSourceActuators.lag_arrays; the reference is the actuators'
    # own substep (the exactly discretised lag, Franklin, Powell & Workman), asked before every substep
    params = PlantParams(exo_friction=friction, cuff_damping=friction)
    fused, asked = random_plant(9, "coupled", params), random_plant(9, "coupled", params)
    assert fused._pair and asked._pair
    limit = fused.exo.model.effortLimit
    acts = [TorqueSourceActuators(limit, ActuatorParams(torque_time_constant_s=0.002)) for _ in range(2)]
    tau_h = np.linspace(1.0, -1.0, fused.human.nv)  # [N m]
    for k in range(4):  # four control ticks, a new command each
        command = np.linspace(-1.5, 1.5, fused.exo.nv)[::1 if k % 2 else -1] * limit  # [N m]: some saturate
        for act in acts:
            act.hold(command)
        fused.advance(acts[0], tau_h, H, 4)
        asked.advance(_AskedActuator(acts[1]), tau_h, H, 4)
        for x, y in zip(_state(fused), _state(asked)):
            np.testing.assert_array_equal(x, y)
        np.testing.assert_array_equal(acts[0].applied_Nm, acts[1].applied_Nm)
    assert fused.cuff_energy_J == asked.cuff_energy_J and fused.cuff_power_W == asked.cuff_power_W


def test_an_actuator_subclass_with_its_own_substep_gives_no_lag_arrays():
    class Doubled(TorqueSourceActuators):
        def substep(self, q, v, dt_s):
            return 2.0 * super().substep(q, v, dt_s)

    limit = np.ones(3)  # [N m]
    assert TorqueSourceActuators(limit).lag_arrays(H) is not None
    assert Doubled(limit).lag_arrays(H) is None  # the plant then asks its substep, as for any actuator


@pytest.mark.parametrize("mode", ["coupled", "human_alone", "exo_alone"])
def test_the_first_state_vector_holding_a_nan_or_an_infinity_is_named(mode):
    # IEEE 754: NaN and +-inf are the non-finite doubles (numpy.isfinite is the reference)
    plant = random_plant(10, mode)
    assert plant.state_is_finite() is None
    names = [n for n in ("q_exo", "v_exo", "q_human", "v_human") if (n.endswith("exo") and plant.has_exo)
             or (n.endswith("human") and plant.has_human)]
    for name in reversed(names):  # each bad vector is named while it is the first bad one
        vec = getattr(plant, name)
        vec[-1] = np.inf if name.startswith("q") else np.nan
        assert not np.all(np.isfinite(getattr(plant, name)))
        assert plant.state_is_finite() == name
