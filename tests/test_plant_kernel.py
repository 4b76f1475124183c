"""The plant's compiled cuff kernel against pinocchio and the NumPy cuff law it restates.

References: pinocchio's ``log6`` and ``Jlog6`` (a general-purpose rigid-body
library; the compiled log and its Jacobian copy its branches and
thresholds), the NumPy law :func:`models.cuffs.cuff_wrenches` built on them
(itself checked against Hooke's law, the torsion spring, the energy gradient
and Newton's third law in tests/test_cuffs.py), and pinocchio's frame
kinematics (``framesForwardKinematics``, ``getFrameVelocity`` in the LOCAL
frame) and force transforms (``SE3.act``) for the plant-level checks.  The
agreement asked is rounding: 1e-12 relative to the largest entry of each
compared quantity (common practice for two implementations of one formula).
"""

from __future__ import annotations

import math

import numpy as np
import pinocchio as pin
import pytest
from _random_plant import random_plant

from models import CuffParams
from models.cuffs import cuff_wrench, cuff_wrenches
from models.errors import SandboxError
from sim.physics import plant as plant_module

REL = 1e-12  # relative agreement to rounding (common practice)


def _random_placements(rng: np.random.Generator, n: int) -> list[pin.SE3]:
    """Relative cuff placements over the whole range of the log: generic angles, tiny ones, zero, near pi."""
    out = []
    for i in range(n):
        kind = i % 5
        angle = {0: rng.uniform(0.0, 3.1), 1: 10.0 ** rng.uniform(-12, -2), 2: 0.0,
                 3: math.pi - 10.0 ** rng.uniform(-9, -3), 4: 10.0 ** rng.uniform(-4.5, -3)}[kind]
        axis = rng.normal(size=3)
        axis /= np.linalg.norm(axis)
        out.append(pin.SE3(pin.exp3(angle * axis), rng.normal(scale=0.05, size=3)))  # [rad], [m]
    return out


def _rows(M: pin.SE3) -> tuple:
    """(R as a tuple of rows, p as a tuple): the form the compiled functions take."""
    return tuple(tuple(float(x) for x in row) for row in M.rotation), tuple(float(x) for x in M.translation)


def _close(got: np.ndarray, ref: np.ndarray, rel: float = REL) -> None:
    np.testing.assert_allclose(got, ref, rtol=0, atol=rel * max(np.abs(ref).max(), 1e-300))


def test_compiled_log6_and_its_jacobian_equal_pinocchio():
    rng = np.random.default_rng(20)
    for M in _random_placements(rng, 500):
        lin, ang, A, B = plant_module._log6_jlog6(*_rows(M))
        J = np.zeros((6, 6))
        J[:3, :3], J[:3, 3:], J[3:, 3:] = np.array(A), np.array(B), np.array(A)
        _close(np.concatenate((lin, ang)), pin.log6(M).vector)
        _close(J, pin.Jlog6(M))


def test_compiled_cuff_law_equals_the_numpy_law_for_random_poses_and_twists():
    rng = np.random.default_rng(21)
    params = [CuffParams(), CuffParams.with_damping_ratio(0.2, 1.5, (0.01, 0.01, 0.002))]
    placements = _random_placements(rng, 400)
    for i, M in enumerate(placements):
        p = params[i % 2]
        v_a, v_b = rng.normal(size=6), rng.normal(size=6)  # [m/s, rad/s]
        w_a, w_b, energy, power = cuff_wrenches([M], v_a[None], v_b[None], p.k_diag[None], p.d_diag[None])
        out = [np.zeros(6) for _ in range(4)]
        plant_module._cuff_law(*_rows(M), v_a, v_b, p.k_diag.copy(), p.d_diag.copy(), *out)
        got_a, got_b, e, ke = out
        _close(got_a, w_a[0])
        _close(got_b, w_b[0])
        _close(e, pin.log6(M).vector)
        _close(ke, p.k_diag * pin.log6(M).vector)
        assert 0.5 * float(e @ ke) == pytest.approx(energy[0], rel=REL, abs=1e-300)
        # the power is a difference of two nearly equal dot products: its rounding is relative to them
        assert -(float(got_a @ v_a) + float(got_b @ v_b)) == pytest.approx(power[0], rel=1e-10, abs=1e-12)


@pytest.mark.parametrize("seed", [0, 1, 2])
def test_plant_cuff_wrenches_equal_the_one_cuff_law_on_pinocchio_frames(seed):
    plant = random_plant(seed)
    plant.update_cuffs()
    me, mh = plant.exo.model, plant.human.model
    de, dh = me.createData(), mh.createData()
    pin.forwardKinematics(me, de, plant.q_exo, plant.v_exo)
    pin.forwardKinematics(mh, dh, plant.q_human, plant.v_human)
    pin.updateFramePlacements(me, de)
    pin.updateFramePlacements(mh, dh)
    fext_e = [np.zeros(6) for _ in range(me.njoints)]
    fext_h = [np.zeros(6) for _ in range(mh.njoints)]
    energy = power = 0.0
    for k, c in enumerate(plant.cuffs):
        oMa = de.oMf[c.exo_frame_id]
        oMb = dh.oMf[c.human_frame_id] * c.human_offset
        v_a = pin.getFrameVelocity(me, de, c.exo_frame_id, pin.LOCAL).vector
        # the strap offset is a fixed placement on the human frame: its own twist by the inverse action
        v_b = c.human_offset.actInv(pin.getFrameVelocity(mh, dh, c.human_frame_id, pin.LOCAL)).vector
        ref = cuff_wrench(oMa, oMb, v_a, v_b, c.spec.params)
        _close(plant.wrench_on_exo[k], ref.on_a)
        _close(plant.wrench_on_human[k], ref.on_b)
        _close(plant.force_on_human_world[k], oMb.rotation @ ref.on_b[:3])
        energy += ref.energy_J
        power += ref.power_W
        ja, jb = me.frames[c.exo_frame_id].parentJoint, mh.frames[c.human_frame_id].parentJoint
        fext_e[ja] += me.frames[c.exo_frame_id].placement.act(pin.Force(ref.on_a)).vector
        fext_h[jb] += (mh.frames[c.human_frame_id].placement * c.human_offset).act(pin.Force(ref.on_b)).vector
    assert plant.cuff_energy_J == pytest.approx(energy, rel=REL)
    assert plant.cuff_power_W == pytest.approx(power, rel=1e-10, abs=1e-12)  # a difference: see above
    got_e, got_h = plant._joint_forces()
    for got, ref in zip(got_e + got_h, fext_e + fext_h):
        if np.any(ref):  # joints with a cuff: the summed joint-frame wrench
            _close(got, ref)
        else:  # all others hold no force
            np.testing.assert_array_equal(got, 0.0)
    assert np.abs(plant.wrench_on_human).max() > 1.0  # the test saw real forces [N]


def test_plant_substep_equals_aba_with_the_reference_wrenches_and_friction():
    # one substep by hand: v+ = v + h aba(q, v, tau + friction, fext), q+ = integrate(q, h v+) (pinocchio)
    plant = random_plant(3)
    h = 0.25e-3  # [s]
    tau_e, tau_h = np.linspace(-2.0, 2.0, plant.exo.nv), np.linspace(1.0, -1.0, plant.human.nv)  # [N m]
    q_e, v_e, q_h, v_h = plant.q_exo.copy(), plant.v_exo.copy(), plant.q_human.copy(), plant.v_human.copy()
    plant.update_cuffs()
    fe, fh = pin.StdVec_Force(), pin.StdVec_Force()
    got_e, got_h = plant._joint_forces()
    for f in got_e:
        fe.append(pin.Force(f))
    for f in got_h:
        fh.append(pin.Force(f))
    me, mh, pp = plant.exo.model, plant.human.model, plant.params
    friction = -np.array(me.damping) * v_e - np.array(me.friction) * np.tanh(v_e / pp.coulomb_smoothing_rad_s)
    ve1 = v_e + h * pin.aba(me, me.createData(), q_e, v_e, tau_e + friction, fe)
    vh1 = v_h + h * pin.aba(mh, mh.createData(), q_h, v_h, tau_h, fh)
    plant.substep(tau_e, tau_h, h)
    _close(plant.v_exo, ve1)
    _close(plant.v_human, vh1)
    _close(plant.q_exo, pin.integrate(me, q_e, ve1 * h))
    _close(plant.q_human, pin.integrate(mh, q_h, vh1 * h))


def test_in_place_views_read_and_write_equally_spaced_records_and_refuse_others():
    buf = np.arange(48.0).reshape(6, 8)  # six records of 8 float64, the first 6 of each used
    view = plant_module._records([row[:6] for row in buf], 6, "joint velocities")
    np.testing.assert_array_equal(view, buf[:, :6])
    view[2, 1] = -1.0
    assert buf[2, 1] == -1.0  # written in place
    flat = np.zeros(30)
    with pytest.raises(SandboxError, match="joint velocities are not stored as equally spaced records of 6"):
        plant_module._records([flat[0:6], flat[6:12], flat[18:24]], 6, "joint velocities")
