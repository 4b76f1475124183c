"""Property tests over the validated parameter ranges of the exo and the human arm.

* Physical consistency of every link (Traversaro, Brossette, Escande & Nori
  2016, "Identification of fully physical consistent inertial parameters
  using optimization on manifolds", IROS, eq. 6): m > 0, rotational inertia
  about the COM symmetric positive definite, principal moments obeying the
  triangle inequality I_1 <= I_2 + I_3.  Re-implemented here with numpy on the
  inertias that pinocchio read from the URDF.
* Shoulder singularity of the exoskeleton, closed form derived here [D]: the
  angular shoulder Jacobian is [u1, R1 u2, R1 R2 u3].  Multiplying by R1^T
  leaves its singular values unchanged and gives [u1, u2, R2 u3]; u2 is normal
  to u1 and to u3 (models/exo.py shoulder_axes) and to R2 u3, so the Gram
  matrix is [[1, 0, c], [0, 1, 0], [c, 0, 1]] with c = u1 . R2 u3 and the
  smallest singular value is sqrt(1 - |c|).  u3 = +z is 90 deg - b from u1
  (b = elevation of axis 1) and positive joint 2 turns it away from u1, so
  c = cos(90 deg - b + q2) = sin(b - q2):

      sigma_min = sqrt(1 - |sin(b - q2)|),

  zero exactly when q2 = b +- 90 deg (for b = 0: q2 = +-90 deg), i.e. when the
  upper arm lies along the line of axis 1.
"""

from __future__ import annotations

import math
import xml.etree.ElementTree as ET

import numpy as np
import pinocchio as pin
from hypothesis import given, settings
from hypothesis import strategies as st

from models.exo import EXO_JOINTS, ExoParams, build_exo
from models.human import HumanParams, Subject, build_human

# derandomize: a fixed seed, so every run draws the same examples; no example database
SETTINGS = settings(max_examples=30, deadline=None, derandomize=True, database=None)

_R = ExoParams.ADJUSTMENT_RANGES_M
#: Validated ranges of the axis-1 angles (checked by ExoParams.__post_init__) [rad].
AZIMUTH_RANGE = (0.0, math.radians(80.0))
ELEVATION_RANGE = (math.radians(-60.0), math.radians(60.0))


def _in(lo: float, hi: float):
    return st.floats(min_value=lo, max_value=hi, allow_nan=False, allow_infinity=False)


exo_params = st.builds(
    ExoParams,
    upper_arm_length_m=_in(*_R["upper_arm_length_m"]),
    forearm_length_m=_in(*_R["forearm_length_m"]),
    hand_length_m=_in(*_R["hand_length_m"]),
    shoulder_axis_azimuth_rad=_in(*AZIMUTH_RANGE),
    shoulder_axis_elevation_rad=_in(*ELEVATION_RANGE),
    link_mass_kg=st.tuples(*[_in(0.05, 5.0)] * 7),
)
human_params = st.builds(
    HumanParams,
    subject=st.builds(
        Subject,
        stature_m=_in(*Subject.STATURE_RANGE_M),
        mass_kg=_in(*Subject.MASS_RANGE_KG),
        sex=st.sampled_from(["female", "male"]),
    ),
    girdle=st.booleans(),
)


def _assert_physically_consistent(model: pin.Model) -> None:
    """Traversaro et al. (2016), eq. 6, on every moving body of the model."""
    for j in range(1, model.njoints):
        Y = model.inertias[j]
        name = model.names[j]
        assert Y.mass > 0.0, name
        I = np.asarray(Y.inertia)
        assert np.all(np.isfinite(I)) and np.all(np.isfinite(Y.lever)), name
        np.testing.assert_allclose(I, I.T, rtol=0, atol=1e-15 * np.abs(I).max())
        e = np.linalg.eigvalsh(I)  # ascending
        assert e[0] > 0.0, (name, e)
        # I3 <= I1 + I2 (the other two permutations hold trivially when sorted)
        assert e[2] <= (e[0] + e[1]) * (1.0 + 1e-12), (name, e)


def _assert_parses_as_urdf_xml(text: str, n_movable: int) -> None:
    root = ET.fromstring(text)  # Python's own XML parser
    assert root.tag == "robot"
    kinds = [j.get("type") for j in root.findall("joint")]
    assert kinds.count("revolute") == n_movable
    assert set(kinds) <= {"revolute", "fixed"}


@SETTINGS
@given(p=exo_params)
def test_every_valid_exo_parses_and_has_physically_consistent_links(p):
    arm = build_exo(p)
    assert arm.joint_names == EXO_JOINTS
    _assert_parses_as_urdf_xml(arm.urdf, 7)
    _assert_physically_consistent(arm.model)
    total = sum(arm.model.inertias[j].mass for j in range(1, arm.model.njoints))
    assert math.isclose(total, sum(p.link_mass_kg), rel_tol=1e-12)


@SETTINGS
@given(p=human_params)
def test_every_valid_human_parses_and_has_physically_consistent_links(p):
    arm = build_human(p)
    assert arm.nv == (9 if p.girdle else 7)
    _assert_parses_as_urdf_xml(arm.urdf, arm.nv)
    _assert_physically_consistent(arm.model)


# -- shoulder singularity of the exoskeleton ----------------------------------------------
def _shoulder_sigma_min(arm, q: np.ndarray) -> float:
    """Smallest singular value of the angular rows, first 3 columns, of the upper-arm Jacobian."""
    model = arm.model
    data = model.createData()
    J = pin.computeFrameJacobian(model, data, q, model.getFrameId("exo_upper_arm"),
                                 pin.LOCAL_WORLD_ALIGNED)
    return float(np.linalg.svd(J[3:6, :3], compute_uv=False)[-1])


def _closed_form_sigma_min(b: float, q2: float) -> float:
    """sqrt(1 - |sin(b - q2)|), derived in the module docstring [D]."""
    return math.sqrt(max(0.0, 1.0 - abs(math.sin(b - q2))))


@SETTINGS
@given(a=_in(*AZIMUTH_RANGE), b=_in(*ELEVATION_RANGE),
       q=st.tuples(_in(-math.pi, math.pi), _in(-math.pi, math.pi), _in(-math.pi, math.pi)))
def test_shoulder_jacobian_smallest_singular_value_follows_the_closed_form(a, b, q):
    arm = build_exo(ExoParams(shoulder_axis_azimuth_rad=a, shoulder_axis_elevation_rad=b))
    qq = np.zeros(7)
    qq[:3] = q
    # compare squares: sqrt amplifies rounding near the singularity (sqrt(1e-16) = 1e-8)
    assert abs(_shoulder_sigma_min(arm, qq) ** 2 - _closed_form_sigma_min(b, q[1]) ** 2) <= 1e-12
    # at q = 0 as well; q1 and q3 do not enter the closed form
    assert abs(_shoulder_sigma_min(arm, np.zeros(7)) ** 2 - _closed_form_sigma_min(b, 0.0) ** 2) <= 1e-12


@SETTINGS
@given(b=_in(math.radians(-20.0), math.radians(20.0)))
def test_hanging_arm_stays_well_conditioned_when_axis_one_is_near_horizontal(b):
    """sigma_min >= 0.8 at q = 0 whenever |sin b| <= 0.36, i.e. |b| <= 21.1 deg (closed form).

    Note: with the default b = 30 deg the closed form gives sqrt(1/2) = 0.707
    (arm 60 deg from the axis-1 line, as models/exo.py documents), so the
    0.8 bound does not hold over the whole validated range of b.
    """
    arm = build_exo(ExoParams(shoulder_axis_elevation_rad=b))
    assert _shoulder_sigma_min(arm, np.zeros(7)) >= 0.8


def test_default_hanging_arm_is_sixty_degrees_from_the_axis_one_line():
    arm = build_exo()
    b = ExoParams().shoulder_axis_elevation_rad
    s = _shoulder_sigma_min(arm, np.zeros(7))
    assert abs(s - math.sqrt(1.0 - math.cos(math.radians(60.0)))) <= 1e-12
    assert abs(s - _closed_form_sigma_min(b, 0.0)) <= 1e-12


@SETTINGS
@given(a=_in(*AZIMUTH_RANGE), b=_in(*ELEVATION_RANGE), q1=_in(-1.0, 1.0), q3=_in(-1.0, 1.0))
def test_shoulder_jacobian_drops_to_zero_when_the_upper_arm_points_along_axis_one(a, b, q1, q3):
    p = ExoParams(shoulder_axis_azimuth_rad=a, shoulder_axis_elevation_rad=b)
    arm = build_exo(p)
    u1 = np.array([-math.sin(a) * math.cos(b), -math.cos(a) * math.cos(b), math.sin(b)])
    model, data = arm.model, arm.model.createData()
    elbow_id = model.getJointId("exo_elbow")
    for q2, along in ((b + math.pi / 2, 1.0), (b - math.pi / 2, -1.0)):
        q = np.array([q1, q2, q3, 0.0, 0.0, 0.0, 0.0])
        pin.forwardKinematics(model, data, q)
        d = data.oMi[elbow_id].translation - data.oMi[3].translation
        assert abs(float(d @ u1) / np.linalg.norm(d) - along) <= 1e-12  # arm on the axis-1 line
        assert _shoulder_sigma_min(arm, q) <= 1e-7
        # and it drops continuously: 5 deg before, sigma_min = sqrt(1 - cos 5 deg)
        q[1] = q2 - math.radians(5.0)
        assert abs(_shoulder_sigma_min(arm, q) - math.sqrt(1.0 - math.cos(math.radians(5.0)))) <= 1e-9


def test_shoulder_with_horizontal_axis_one_is_singular_exactly_at_plus_minus_90_deg():
    arm = build_exo(ExoParams(shoulder_axis_elevation_rad=0.0))
    for q2_deg in (-90.0, 90.0):
        q = np.zeros(7)
        q[1] = math.radians(q2_deg)
        assert _shoulder_sigma_min(arm, q) <= 1e-7
    q = np.zeros(7)
    assert abs(_shoulder_sigma_min(arm, q) - 1.0) <= 1e-12
