"""Registration and strapping of the exoskeleton to the human arm.

Known answers: the mean segment lengths of de Leva (1996), typed in here
(de Leva P. (1996), Adjustments to Zatsiorsky-Seluyanov's segment inertia
parameters, J. Biomech. 29(9):1223-1230; the mean lengths from memory), and
rigid-body kinematics.
"""

from __future__ import annotations

import numpy as np
import pinocchio as pin
import pytest

from models import (
    CuffSpec,
    ParameterError,
    Registration,
    UnknownNameError,
    assemble,
    cuff_wrench,
    load_exo,
)

# de Leva (1996) mean lengths [m] and stature [m] (de Leva 1996, from memory).
DE_LEVA_MALE = {"stature": 1.741, "upper_arm": 0.2817, "forearm": 0.2689}


def _frame(arm, q, name):
    data = arm.model.createData()
    pin.framesForwardKinematics(arm.model, data, q)
    return data.oMf[arm.frame_id(name)]


def _cuff_frames(asm, cuff, q_exo, q_human):
    de, dh = asm.exo.model.createData(), asm.human.model.createData()
    pin.framesForwardKinematics(asm.exo.model, de, q_exo)
    pin.framesForwardKinematics(asm.human.model, dh, q_human)
    return de.oMf[cuff.exo_frame_id], dh.oMf[cuff.human_frame_id] * cuff.human_offset


@pytest.mark.parametrize("subject", ["f5", "m50", "m95"])
def test_fitted_exoskeleton_joint_centres_coincide_with_the_wearers(subject):
    asm = assemble(subject)
    qe, qh = asm.q_exo0, asm.q_human0
    for exo_frame, human_frame in [("exo_elbow", "human_elbow_flexion"),
                                   ("exo_wrist_flex", "human_wrist_flexion"),
                                   ("exo_hand_point", "human_hand_point")]:
        pe = _frame(asm.exo, qe, exo_frame).translation
        ph = _frame(asm.human, qh, human_frame).translation
        assert np.allclose(pe, ph, atol=1e-12)
    for c in asm.cuffs:  # aligned: every strap sits exactly on the human site
        assert np.allclose(c.human_offset.homogeneous, np.eye(4), atol=1e-12)


def test_m50_elbow_lies_one_scaled_de_leva_upper_arm_below_the_shoulder():
    asm = assemble("m50")  # ANSUR II P50 man: 1.755 m
    expected = DE_LEVA_MALE["upper_arm"] * 1.755 / DE_LEVA_MALE["stature"]
    elbow = _frame(asm.human, asm.q_human0, "human_elbow_flexion").translation
    assert np.allclose(elbow, [0.0, 0.0, -expected], atol=1e-12)


def test_misaligned_wearer_starts_strapped_without_preload_and_loads_when_moved():
    offset = (0.015, -0.01, 0.02)
    asm = assemble("m50", registration=Registration(offset))
    gh = _frame(asm.human, asm.q_human0, "human_gh_flexion").translation
    assert np.allclose(gh, offset, atol=1e-12)  # human shoulder centre moved by the offset
    for c in asm.cuffs:
        oMa, oMb = _cuff_frames(asm, c, asm.q_exo0, asm.q_human0)
        w = cuff_wrench(oMa, oMb, np.zeros(6), np.zeros(6), c.spec.params)
        assert np.allclose(w.on_b, 0.0, atol=1e-9)
    # flex the robot elbow only: the misaligned elbow axes now disagree, the forearm cuff pulls
    qe = asm.q_exo0.copy()
    qe[3] = 0.5
    fa = next(c for c in asm.cuffs if c.name == "forearm")
    oMa, oMb = _cuff_frames(asm, fa, qe, asm.q_human0)
    assert np.linalg.norm(cuff_wrench(oMa, oMb, np.zeros(6), np.zeros(6), fa.spec.params).on_b[:3]) > 1.0


def test_girdle_model_starts_attached_at_rest():
    from models import HumanParams

    asm = assemble(HumanParams("f50", girdle=True))
    assert asm.human.nq == 9
    for c in asm.cuffs:
        assert np.allclose(c.human_offset.homogeneous, np.eye(4), atol=1e-12)


def test_strapping_outside_the_joint_limits_is_refused_with_the_joint_named():
    q = np.zeros(7)
    q[3] = -0.5  # elbow hyperextension beyond the mechanical stop
    with pytest.raises(ParameterError, match="exo_elbow"):
        assemble("m50", q_exo0=q)


def test_a_cuff_on_a_missing_site_names_the_cuff_and_the_site():
    with pytest.raises(UnknownNameError, match="cuff 'chest'.*'sternum'"):
        assemble("m50", cuffs=(CuffSpec("chest", "sternum", "upper_arm"),))


def test_large_misalignment_is_rejected():
    with pytest.raises(ParameterError, match="misalignment_m"):
        Registration((0.2, 0.0, 0.0))


def test_user_urdf_with_own_site_names_straps_like_the_built_in_one():
    # A user's URDF: the built-in file with its cuff links renamed, plus a site mapping.
    asm = assemble("m50")
    text = asm.exo.urdf.replace("exo_cuff_upper_arm", "my_arm_strap").replace("exo_cuff_forearm", "my_fa_strap")
    exo = load_exo(text, sites={"upper_arm": "my_arm_strap", "forearm": "my_fa_strap", "hand": "exo_cuff_hand"},
                   hand_frame="exo_hand_point")
    pe = _frame(exo, exo.neutral(), "my_arm_strap").translation
    assert np.allclose(pe, _frame(asm.exo, asm.q_exo0, "exo_cuff_upper_arm").translation, atol=0)
    with pytest.raises(UnknownNameError, match="upper_arm frame 'exo_cuff_upper_arm' does not exist"):
        load_exo(text, sites={"upper_arm": "exo_cuff_upper_arm"}, hand_frame="exo_hand_point")


def test_changing_the_subject_of_human_params_rederives_the_grip_site():
    # de Leva (1996) Table 4: hand COM at 0.7900 (male) / 0.7474 (female) of wrist->MET3.
    import dataclasses

    from models import HumanParams

    man = HumanParams("m50")
    woman = dataclasses.replace(man, subject="f50")
    assert next(s for s in man.cuff_sites() if s.name == "hand").fraction == 0.7900
    assert next(s for s in woman.cuff_sites() if s.name == "hand").fraction == 0.7474
    assert woman.clavicle_m() == pytest.approx(0.086 * 1.626, rel=1e-12)  # ANSUR II P50 woman, 1.626 m
