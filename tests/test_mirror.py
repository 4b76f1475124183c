"""Left arms are the mirror images of right arms.

Known answers: a reflection S = diag(1, -1, 1) maps every point p to S p and
every rotation R to S R S; the kinetic and potential energy of a mechanism are
invariant under a reflection that keeps gravity in the mirror plane, so the
mass matrix, the bias forces and gravity of the mirrored arm equal the
original's at the same joint angles (Lagrangian mechanics, e.g. Spong,
Hutchinson & Vidyasagar 2006, ch. 7).  MuJoCo, an independent engine, loads
the left-arm URDFs with the same dynamics as pinocchio.
"""

from __future__ import annotations

import numpy as np
import pinocchio as pin
import pytest

from models import ExoParams, HumanParams, ParameterError, assemble, build_exo, build_human, girdle_posture
from models.urdf import mirrored, to_urdf

S = np.diag([1.0, -1.0, 1.0])


def _pairs():
    yield build_exo(ExoParams()), build_exo(ExoParams(side="left"))
    yield build_human(HumanParams("f5")), build_human(HumanParams("f5", side="left"))
    yield build_human(HumanParams("m95", girdle=True)), build_human(HumanParams("m95", girdle=True, side="left"))


def _random_q(model, rng):
    return rng.uniform(model.lowerPositionLimit, model.upperPositionLimit)


@pytest.mark.parametrize("right, left", list(_pairs()))
def test_every_frame_of_the_left_arm_is_the_reflection_of_the_right_arm(right, left):
    rng = np.random.default_rng(21)
    dr, dl = right.model.createData(), left.model.createData()
    for _ in range(20):
        q = _random_q(right.model, rng)
        pin.framesForwardKinematics(right.model, dr, q)
        pin.framesForwardKinematics(left.model, dl, q)
        for frame in right.model.frames:
            fr = dr.oMf[right.model.getFrameId(frame.name)]
            fl = dl.oMf[left.model.getFrameId(frame.name)]
            assert np.allclose(fl.translation, S @ fr.translation, atol=1e-12)
            assert np.allclose(fl.rotation, S @ fr.rotation @ S, atol=1e-12)


@pytest.mark.parametrize("right, left", list(_pairs()))
def test_left_and_right_arms_have_equal_joint_space_dynamics(right, left):
    rng = np.random.default_rng(22)
    dr, dl = right.model.createData(), left.model.createData()
    for _ in range(20):
        q = _random_q(right.model, rng)
        v = rng.normal(size=right.nv)
        Mr, Ml = pin.crba(right.model, dr, q), pin.crba(left.model, dl, q)
        assert np.allclose(np.triu(Ml), np.triu(Mr), atol=1e-12)
        assert np.allclose(pin.rnea(left.model, dl, q, v, 0 * v), pin.rnea(right.model, dr, q, v, 0 * v), atol=1e-10)


@pytest.mark.parametrize("right, left", list(_pairs()))
def test_mujoco_loads_the_left_arm_with_the_same_dynamics_as_pinocchio(right, left):
    mujoco = pytest.importorskip("mujoco")
    mj = mujoco.MjModel.from_xml_string(left.urdf)
    md = mujoco.MjData(mj)
    model = left.model.copy()
    model.armature[:] = 0.0  # URDF carries no rotor inertia
    data = model.createData()
    rng = np.random.default_rng(23)
    for _ in range(10):
        q, v = _random_q(model, rng), rng.normal(size=model.nv)
        md.qpos[:], md.qvel[:] = q, v
        mujoco.mj_forward(mj, md)
        M = np.zeros((model.nv, model.nv))
        mujoco.mj_fullM(mj, md, M)
        Mp = pin.crba(model, data, q)
        Mp = np.triu(Mp) + np.triu(Mp, 1).T
        assert np.allclose(M, Mp, rtol=0, atol=1e-8 * np.abs(Mp).max())
        h = pin.rnea(model, data, q, v, 0 * v)
        assert np.allclose(md.qfrc_bias, h, rtol=0, atol=1e-8 * np.abs(h).max())


def test_mirroring_twice_gives_back_the_same_urdf_text_up_to_rounding():
    from models.exo import exo_description

    once, twice = exo_description(ExoParams()), mirrored(mirrored(exo_description(ExoParams())))
    a = build_exo()
    b = pin.buildModelFromXML(to_urdf(twice))
    for i in range(1, a.model.njoints):
        assert np.allclose(a.model.inertias[i].toDynamicParameters(), b.inertias[i].toDynamicParameters(), atol=1e-15)
    assert len(once.links) == len(twice.links)


def test_left_wearer_in_left_exoskeleton_starts_strapped_without_preload():
    asm = assemble(HumanParams("f50", side="left"))
    assert asm.exo_params.side == "left"
    for c in asm.cuffs:
        assert np.allclose(c.human_offset.homogeneous, np.eye(4), atol=1e-12)


def test_mismatched_sides_are_rejected():
    with pytest.raises(ParameterError, match="left arm but the human arm is the right"):
        assemble(HumanParams("m50"), exo=ExoParams(side="left"))
    with pytest.raises(ParameterError, match=r"HumanParams\.side must be 'right' or 'left', got 'both'"):
        HumanParams("m50", side="both")


def test_girdle_posture_is_the_same_for_both_sides():
    # the mirrored model at the same angles is the mirror image, so the rhythm solution is shared
    q7 = np.radians([50.0, 25.0, 10.0, 40.0, 0.0, 0.0, 0.0])
    right = girdle_posture(HumanParams("m50", girdle=True), q7)
    left_params = HumanParams("m50", girdle=True, side="left")
    left = girdle_posture(left_params, q7)
    assert np.allclose(left, right, atol=1e-12)
    # and it keeps the humerus orientation of the 7-DOF left arm
    arm7, arm9 = build_human(HumanParams("m50", side="left")), build_human(left_params)
    d7, d9 = arm7.model.createData(), arm9.model.createData()
    pin.framesForwardKinematics(arm7.model, d7, q7)
    pin.framesForwardKinematics(arm9.model, d9, left)
    R7 = d7.oMf[arm7.frame_id("human_upper_arm")].rotation
    R9 = d9.oMf[arm9.frame_id("human_upper_arm")].rotation
    assert np.allclose(R7, R9, atol=1e-9)
