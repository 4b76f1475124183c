"""The human arm and the exoskeleton against published anthropometric tables.

Every reference number is typed in here from the source named beside it (a
short key, full references below); nothing is imported from the project's own
tables.

* de Leva 1996, Table 4: de Leva P. (1996), Adjustments to Zatsiorsky-Seluyanov's
  segment inertia parameters, J. Biomech. 29(9):1223-1230, Table 4 (values
  confirmed in a public transcription; the mean lengths from memory).
* Gordon 2014: Gordon C.C. et al. (2014), 2012 Anthropometric Survey of U.S.
  Army Personnel: Methods and Summary Statistics (ANSUR II), NATICK/TR-15/007;
  percentiles computed from its public working-data files, unweighted.
* Norkin & White, Table A.1: Norkin C.C., White D.J., Measurement of Joint
  Motion: A Guide to Goniometry, 5th ed., F.A. Davis (2016), Appendix A,
  Table A.1, AAOS (1965) column (American Academy of Orthopaedic Surgeons,
  Joint Motion: Method of Measuring and Recording, 1965).
* Morrey 1981: Morrey B.F., Askew L.J., An K.N., Chao E.Y. (1981), J. Bone
  Joint Surg. Am. 63(6):872-877.
* Inman 1944: Inman, Saunders & Abbott (1944), J. Bone Joint Surg.
  26(1):1-30 (pages from memory), for the 2:1 rhythm; Ludewig 2004: Ludewig,
  Behrens, Meyer, Spoden & Wilson (2004), J. Orthop. Sports Phys. Ther.
  34(3):140-149 (volume and pages from memory), for the clavicle elevation.
"""

from __future__ import annotations

import math

import numpy as np
import pinocchio as pin
import pytest

from models.exo import EXO_JOINTS, ExoParams, build_exo
from models.human import (
    HUMAN_ARM_JOINTS,
    SUBJECTS,
    HumanParams,
    ShoulderRhythm,
    Subject,
    build_human,
    girdle_posture,
)

REL = 1e-12

# de Leva (1996) Table 4, female / male: mass/M, COM/L from the proximal joint
# centre, radii of gyration about the COM / L (sagittal, transverse,
# longitudinal).  Confirmed in a public transcription (de Leva 1996, Table 4).
DE_LEVA_TABLE_4 = {
    "female": {
        "upper_arm": (0.0255, 0.5754, 0.278, 0.260, 0.148),
        "forearm": (0.0138, 0.4559, 0.261, 0.257, 0.094),
        "hand": (0.0056, 0.7474, 0.531, 0.454, 0.335),
    },
    "male": {
        "upper_arm": (0.0271, 0.5772, 0.285, 0.269, 0.158),
        "forearm": (0.0162, 0.4574, 0.276, 0.265, 0.121),
        "hand": (0.0061, 0.7900, 0.628, 0.513, 0.401),
    },
}
# de Leva (1996) mean stature and segment lengths [mm] -- from memory,
# unconfirmed; lengths scale with stature.
DE_LEVA_MEAN_MM = {
    "female": {"stature": 1735.0, "upper_arm": 275.1, "forearm": 264.3, "hand": 78.0},
    "male": {"stature": 1741.0, "upper_arm": 281.7, "forearm": 268.9, "hand": 86.2},
}
# ANSUR II (Gordon 2014), unweighted percentiles of the working data:
# stature [mm] and body mass [kg] at P5 / P50 / P95.
ANSUR_II = {
    "female": {"stature_mm": (1525, 1626, 1740), "mass_kg": (51.3, 66.8, 87.1)},
    "male": {"stature_mm": (1648, 1755, 1870), "mass_kg": (64.4, 84.6, 110.7)},
}
# AAOS (1965) normal active ROM [deg], Norkin & White, Table A.1, written as
# (most negative, most positive) in the model's sign convention (documented in
# models/human.py): flexion +, abduction +, internal rotation +, elbow flexion +,
# pronation +, wrist flexion +, radial deviation +.
AAOS_DEG = {
    "human_gh_flexion": (-60, 180),  # extension 60, flexion 180
    # adduction is not in the AAOS column; 45-75 deg across the body, from memory
    "human_gh_abduction": (-75, 180),
    "human_gh_rotation": (-90, 70),  # external 90, internal 70
    "human_elbow_flexion": (0, 150),
    "human_forearm_rotation": (-80, 80),  # supination 80, pronation 80
    "human_wrist_flexion": (-70, 80),  # extension 70, flexion 80
    "human_wrist_deviation": (-30, 20),  # ulnar 30, radial 20
}
SEGMENT_JOINT = {  # the joint whose child link is the segment
    "upper_arm": "human_gh_rotation",
    "forearm": "human_forearm_rotation",
    "hand": "human_wrist_deviation",
}
SUBJECT_CASES = [
    "f5", "m95",
    Subject(1.62, 58.0, "female"),
    Subject(1.93, 102.5, "male"),
    Subject(1.31, 37.5, "female"),
    Subject(2.08, 171.0, "male"),
]


def _id(s):
    return s if isinstance(s, str) else f"{s.sex}-{s.stature_m}m-{s.mass_kg}kg"


def _subject(s) -> Subject:
    return SUBJECTS[s] if isinstance(s, str) else s


def _length(sub: Subject, seg: str) -> float:
    t = DE_LEVA_MEAN_MM[sub.sex]
    return t[seg] / t["stature"] * sub.stature_m


@pytest.fixture(scope="module", params=[(s, g) for s in SUBJECT_CASES for g in (False, True)],
                ids=[f"{_id(s)}-girdle{g}" for s in SUBJECT_CASES for g in (False, True)])
def human(request):
    s, girdle = request.param
    return _subject(s), build_human(HumanParams(s, girdle=girdle)).model


# -- de Leva (1996) Table 4 ---------------------------------------------------------------
def test_segment_masses_are_de_leva_fractions_of_body_mass(human):
    sub, model = human
    for seg, jname in SEGMENT_JOINT.items():
        frac = DE_LEVA_TABLE_4[sub.sex][seg][0]
        Y = model.inertias[model.getJointId(jname)]
        assert Y.mass == pytest.approx(frac * sub.mass_kg, rel=REL), seg


def test_segment_lengths_are_de_leva_mean_lengths_scaled_by_stature(human):
    """Elbow and wrist joint centres sit one segment length below the previous one."""
    sub, model = human
    elbow = model.jointPlacements[model.getJointId("human_elbow_flexion")].translation
    wrist = model.jointPlacements[model.getJointId("human_wrist_flexion")].translation
    np.testing.assert_allclose(elbow, [0.0, 0.0, -_length(sub, "upper_arm")], rtol=REL, atol=0)
    np.testing.assert_allclose(wrist, [0.0, 0.0, -_length(sub, "forearm")], rtol=REL, atol=0)


def test_segment_centres_of_mass_are_de_leva_fractions_of_length(human):
    """COM on the long axis (-z with the arm hanging), COM/L from the proximal joint."""
    sub, model = human
    for seg, jname in SEGMENT_JOINT.items():
        com_frac = DE_LEVA_TABLE_4[sub.sex][seg][1]
        Y = model.inertias[model.getJointId(jname)]
        np.testing.assert_allclose(Y.lever, [0.0, 0.0, -com_frac * _length(sub, seg)], rtol=REL, atol=0)


def test_segment_inertia_about_com_is_mass_times_radius_of_gyration_squared(human):
    """I_a = m (r_a L)^2 about the COM (de Leva 1996 Table 4 radii).

    Axis assignment documented in HumanParams.inertial: upper arm sagittal
    radius about x and transverse about y; forearm and hand (zero posture in
    mid-pronation, a quarter turn from the anatomical position) transverse
    about x and sagittal about y; longitudinal about z for all.
    """
    sub, model = human
    for seg, jname in SEGMENT_JOINT.items():
        frac, _com, r_sag, r_tr, r_long = DE_LEVA_TABLE_4[sub.sex][seg]
        m, L = frac * sub.mass_kg, _length(sub, seg)
        rx, ry = (r_sag, r_tr) if seg == "upper_arm" else (r_tr, r_sag)
        expected = np.diag([m * (rx * L) ** 2, m * (ry * L) ** 2, m * (r_long * L) ** 2])
        Y = model.inertias[model.getJointId(jname)]
        np.testing.assert_allclose(Y.inertia, expected, rtol=REL, atol=REL * expected.max())


def test_builtin_subjects_are_ansur_ii_percentiles():
    for sex, prefix in (("female", "f"), ("male", "m")):
        ref = ANSUR_II[sex]
        for k, pct in enumerate((5, 50, 95)):
            s = SUBJECTS[f"{prefix}{pct}"]
            assert s.sex == sex
            assert s.stature_m == pytest.approx(ref["stature_mm"][k] / 1000.0, rel=REL)
            assert s.mass_kg == pytest.approx(ref["mass_kg"][k], rel=REL)


# -- range of motion ----------------------------------------------------------------------
@pytest.mark.parametrize("girdle", [False, True])
def test_default_human_joint_limits_lie_inside_aaos_range_of_motion(girdle):
    model = build_human(HumanParams("m50", girdle=girdle)).model
    for jname, (lo_deg, hi_deg) in AAOS_DEG.items():
        i = model.idx_qs[model.getJointId(jname)]
        lo, hi = model.lowerPositionLimit[i], model.upperPositionLimit[i]
        assert lo < hi
        assert lo >= math.radians(lo_deg) - 1e-12, jname
        assert hi <= math.radians(hi_deg) + 1e-12, jname


def test_default_exo_torque_limits_are_80_Nm_at_shoulder_and_20_Nm_at_wrist():
    """Design values, common practice for research rehabilitation exoskeletons."""
    tau = build_exo().model.effortLimit
    np.testing.assert_array_equal(tau[:3], [80.0, 80.0, 80.0])
    np.testing.assert_array_equal(tau[5:7], [20.0, 20.0])


def _world_axes_at_zero(model: pin.Model, frame: str) -> np.ndarray:
    """(3, nv) joint axes at q = 0 in world axes: angular rows of the frame Jacobian."""
    data = model.createData()
    J = pin.computeFrameJacobian(model, data, pin.neutral(model), model.getFrameId(frame),
                                 pin.LOCAL_WORLD_ALIGNED)
    return J[3:, :]


def test_exo_distal_joints_share_axes_and_signs_with_the_human_joints():
    """Exo joints 4-7 turn about the same world axis, same sign, as human joints 4-7 at q = 0."""
    exo = build_exo().model
    hum = build_human(HumanParams("m50")).model
    np.testing.assert_allclose(_world_axes_at_zero(exo, "exo_hand_point")[:, 3:7],
                               _world_axes_at_zero(hum, "human_hand_point")[:, 3:7], atol=1e-12)


def test_default_exo_stops_lie_inside_the_human_and_aaos_ranges_for_joints_4_to_7():
    exo = build_exo().model
    hum = build_human(HumanParams("m50")).model
    for k in range(3, 7):
        ename, hname = EXO_JOINTS[k], HUMAN_ARM_JOINTS[k]
        elo, ehi = exo.lowerPositionLimit[k], exo.upperPositionLimit[k]
        hlo, hhi = hum.lowerPositionLimit[k], hum.upperPositionLimit[k]
        assert hlo <= elo < ehi <= hhi, (ename, hname)
        lo_deg, hi_deg = AAOS_DEG[hname]
        assert math.radians(lo_deg) <= elo and ehi <= math.radians(hi_deg), ename


def test_default_exo_stops_cover_the_functional_elbow_and_forearm_range_of_daily_living():
    # Morrey, Askew, An & Chao (1981), J. Bone Joint Surg. Am. 63(6):872-877 (Morrey 1981):
    # most activities of daily living need elbow flexion 30-130 deg and forearm
    # rotation from 50 deg pronation to 50 deg supination.
    lower, upper = ExoParams().limits_rad()
    elbow, forearm = EXO_JOINTS.index("exo_elbow"), EXO_JOINTS.index("exo_forearm")
    assert lower[elbow] <= math.radians(30.0) and upper[elbow] >= math.radians(130.0)
    # pronation positive on exo_forearm (same axis and sign as human_forearm_rotation)
    assert lower[forearm] <= math.radians(-50.0) and upper[forearm] >= math.radians(50.0)


# -- shoulder rhythm and girdle -----------------------------------------------------------
def test_scapulothoracic_share_is_one_third_above_the_setting_angle_for_ratio_two():
    """theta_ST / (theta_HT - theta_0) = 1 / (1 + r) = 1/3 for r = 2 (Inman et al. 1944)."""
    rhythm = ShoulderRhythm(ratio=2.0)
    theta0 = rhythm.setting_angle_rad
    for theta in np.radians([35.0, 60.0, 90.0, 120.0, 150.0, 179.0]):
        st = rhythm.scapulothoracic_rad(theta)
        assert st / (theta - theta0) == pytest.approx(1.0 / 3.0, rel=1e-9)
    # past the setting phase, glenohumeral and scapulothoracic increments are 2 : 1
    a, b = np.radians([45.0, 140.0])
    d_gh = rhythm.glenohumeral_rad(b) - rhythm.glenohumeral_rad(a)
    d_st = rhythm.scapulothoracic_rad(b) - rhythm.scapulothoracic_rad(a)
    assert d_gh / d_st == pytest.approx(2.0, rel=1e-9)


def test_clavicle_elevation_at_120_deg_humeral_elevation_is_within_ludewig_range():
    """Clavicle elevation maximum 11-15 deg during arm elevation (Ludewig et al. 2004)."""
    elev, _prot = ShoulderRhythm().girdle_angles(math.radians(120.0))
    assert 11.0 <= math.degrees(elev) <= 15.0


def _upper_arm_rotation(model: pin.Model, q: np.ndarray) -> np.ndarray:
    data = model.createData()
    pin.framesForwardKinematics(model, data, q)
    return data.oMf[model.getFrameId("human_upper_arm")].rotation.copy()


@pytest.mark.parametrize("subject", ["f5", "m95"])
def test_girdle_posture_keeps_the_humerus_orientation_of_the_seven_dof_arm(subject):
    """pinocchio forward kinematics of the 9-DOF arm at girdle_posture(q7) gives the
    7-DOF upper-arm orientation relative to the thorax (to 1e-9), away from the
    chart singularity at 90 deg abduction."""
    p7, p9 = HumanParams(subject), HumanParams(subject, girdle=True)
    m7, m9 = build_human(p7).model, build_human(p9).model
    rng = np.random.default_rng(5)
    lo, hi = m7.lowerPositionLimit, m7.upperPositionLimit
    checked = 0
    while checked < 30:
        q7 = rng.uniform(lo, hi)
        if abs(abs(q7[1]) - math.pi / 2) < math.radians(20.0):
            continue
        q9 = girdle_posture(p9, q7)
        assert q9.shape == (9,)
        np.testing.assert_allclose(q9[5:], q7[3:], rtol=0, atol=0)
        np.testing.assert_allclose(_upper_arm_rotation(m9, q9), _upper_arm_rotation(m7, q7),
                                   rtol=0, atol=1e-9)
        checked += 1
