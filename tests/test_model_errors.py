"""Invalid parameters and malformed URDF fail with the project's own errors.

What counts as invalid comes from outside the project:

* physical consistency of a rigid body: m > 0, rotational inertia positive
  definite, principal moments obeying the triangle inequality (Traversaro,
  Brossette, Escande & Nori 2016, IROS, eq. 6);
* the URDF joint specification (ROS wiki, urdf/XML/joint; from memory): a
  ``revolute`` joint needs a ``<limit>`` with ``effort`` and ``velocity``,
  ``lower <= upper``; ``continuous`` and ``prismatic`` are other kinds;
* a joint-space inertia is positive definite only if every joint moves some
  mass (Featherstone, *Rigid Body Dynamics Algorithms*, 2008, ch. 6; from
  memory);
* the built-in subject names are the ANSUR II percentiles f/m x 5/50/95
  (Gordon 2014: Gordon C.C. et al. (2014), 2012 Anthropometric Survey of U.S.
  Army Personnel: Methods and Summary Statistics, NATICK/TR-15/007), and the
  validated ranges are those documented in the parameter classes (design
  choices, common practice).

Every message must name the culprit (field or element) and the value.
"""

from __future__ import annotations

import math
import re

import pytest

from models.arm import load_arm
from models.errors import ModelError, ParameterError, SandboxError, UnknownNameError
from models.exo import EXO_JOINTS, ExoParams, build_exo, exo_urdf
from models.human import HumanParams, Subject, human_urdf
from models.inertia import Inertial
from models.sites import SiteSpec


# -- parameters ---------------------------------------------------------------------------
def test_error_types_are_also_the_builtin_ones_a_caller_expects():
    assert issubclass(ParameterError, ValueError) and issubclass(ParameterError, SandboxError)
    assert issubclass(ModelError, ValueError) and issubclass(ModelError, SandboxError)
    assert issubclass(UnknownNameError, LookupError) and issubclass(UnknownNameError, SandboxError)


def test_negative_link_mass_names_the_field_the_joint_and_the_value():
    masses = (1.8, 1.6, -2.0, 0.7, 0.8, 0.3, 0.35)
    with pytest.raises(ParameterError, match=re.escape(
            "ExoParams.link_mass_kg[2] (exo_shoulder_c) must be > 0, got -2.0")):
        ExoParams(link_mass_kg=masses)


def test_negative_inertial_mass_names_the_owner_and_the_value():
    with pytest.raises(ParameterError, match=r"forearm shell\.mass_kg must be > 0 kg, got -0\.5"):
        Inertial(-0.5, (0.0, 0.0, 0.0), (1e-3, 1e-3, 1e-3, 0.0, 0.0, 0.0), name="forearm shell")


def test_inertial_violating_the_triangle_inequality_is_rejected():
    """Principal moments (1, 1, 3): 3 > 1 + 1 (Traversaro et al. 2016)."""
    with pytest.raises(ParameterError, match=r"plate: principal moments .* violate the triangle inequality"):
        Inertial(1.0, (0.0, 0.0, 0.0), (1.0, 1.0, 3.0, 0.0, 0.0, 0.0), name="plate")


@pytest.mark.parametrize("field, value", [
    ("upper_arm_length_m", 0.5),
    ("forearm_length_m", 0.1),
    ("hand_length_m", 0.2),
])
def test_exo_length_outside_its_adjustment_range_names_the_range_and_value(field, value):
    lo, hi = ExoParams.ADJUSTMENT_RANGES_M[field]
    with pytest.raises(ParameterError, match=re.escape(
            f"ExoParams.{field} must be in [{lo:g}, {hi:g}] m, got {value!r}")):
        ExoParams(**{field: value})


def test_subject_stature_outside_range_names_the_field_and_value():
    with pytest.raises(ParameterError, match=re.escape("Subject.stature_m must be in [1.2, 2.2] m, got 2.5")):
        Subject(2.5, 80.0, "male")


def test_lower_limit_above_upper_limit_names_both_values():
    d = ExoParams()
    d_lower, d_upper = d.limits_rad()
    lower = (0.5,) + d_lower[1:]
    upper = (0.2,) + d_upper[1:]
    with pytest.raises(ParameterError, match=re.escape(
            "ExoParams.position_lower_rad[0] (exo_shoulder_a) = 0.5 must be below position_upper_rad[0] = 0.2")):
        ExoParams(position_lower_rad=lower, position_upper_rad=upper)


@pytest.mark.parametrize("build, pattern", [
    (lambda: ExoParams(forearm_length_m=math.nan), r"ExoParams\.forearm_length_m must be finite, got nan"),
    (lambda: ExoParams(link_mass_kg=(1.0,) * 6 + (math.nan,)), r"ExoParams\.link_mass_kg must be finite"),
    (lambda: Subject(1.7, math.nan, "male"), r"Subject\.mass_kg must be finite, got nan"),
    (lambda: ExoParams(shoulder_axis_elevation_rad=math.inf),
     r"ExoParams\.shoulder_axis_elevation_rad must be finite, got inf"),
])
def test_non_finite_parameter_names_the_field(build, pattern):
    with pytest.raises(ParameterError, match=pattern):
        build()


def test_bad_sex_names_the_allowed_values_and_the_value():
    with pytest.raises(ParameterError, match=r"Subject\.sex must be 'female' or 'male', got 'other'"):
        Subject(1.7, 70.0, "other")


def test_unknown_subject_lists_every_builtin_name():
    with pytest.raises(UnknownNameError, match=r"unknown subject 'm99'") as info:
        HumanParams("m99")
    # the ANSUR II percentiles (Gordon 2014): 5th, 50th and 95th, female and male
    for name in ("f5", "f50", "f95", "m5", "m50", "m95"):
        assert re.search(rf"\b{name}\b", str(info.value)), name


@pytest.mark.parametrize("cls", [ExoParams, HumanParams])
def test_sites_that_are_not_site_specs_raise_parameter_error(cls):
    with pytest.raises(ParameterError, match=r"sites must hold SiteSpec records, got 'upper_arm'"):
        cls(sites=("upper_arm",))


# -- malformed URDF -----------------------------------------------------------------------
def _two_link_urdf(*, mass2: str = "0.8", inertia2: str | None = None, type2: str = "revolute",
                   limit2: str = 'lower="-1.0" upper="1.0" effort="10.0" velocity="2.0"',
                   with_inertial2: bool = True) -> str:
    """A small hand-written URDF: base, link1 (on j1), link2 (on j2)."""
    inertia2 = inertia2 or 'ixx="0.002" ixy="0" ixz="0" iyy="0.002" iyz="0" izz="0.001"'
    inertial2 = (f'<inertial><origin xyz="0 0 -0.1" rpy="0 0 0"/><mass value="{mass2}"/>'
                 f'<inertia {inertia2}/></inertial>') if with_inertial2 else ""
    return f"""<?xml version="1.0"?>
<robot name="two_link">
  <link name="base"/>
  <link name="link1">
    <inertial><origin xyz="0 0 -0.15" rpy="0 0 0"/><mass value="1.2"/>
      <inertia ixx="0.01" ixy="0" ixz="0" iyy="0.01" iyz="0" izz="0.002"/></inertial>
  </link>
  <link name="link2">{inertial2}</link>
  <joint name="j1" type="revolute">
    <origin xyz="0 0 0" rpy="0 0 0"/><parent link="base"/><child link="link1"/>
    <axis xyz="0 1 0"/><limit lower="-1.5" upper="1.5" effort="20.0" velocity="3.0"/>
  </joint>
  <joint name="j2" type="{type2}">
    <origin xyz="0 0 -0.3" rpy="0 0 0"/><parent link="link1"/><child link="link2"/>
    <axis xyz="0 1 0"/><limit {limit2}/>
  </joint>
</robot>
"""


def test_hand_written_two_link_urdf_loads():
    """The fixture itself is valid, so each failure below is due to its one edit."""
    arm = load_arm(_two_link_urdf(), joint_names=("j1", "j2"))
    assert arm.joint_names == ("j1", "j2")


def _replace_once(text: str, old: str, new: str) -> str:
    assert text.count(old) == 1, old
    return text.replace(old, new)


def test_broken_xml_raises_model_error_naming_the_source():
    text = exo_urdf()[:-30]  # cut off the closing tags
    with pytest.raises(ModelError, match=r"my_exo\.urdf: malformed URDF XML"):
        load_arm(text, source="my_exo.urdf")


def test_negative_mass_in_generated_exo_urdf_names_the_link_and_value():
    text = _replace_once(exo_urdf(), '<mass value="2.0" />', '<mass value="-2.0" />')
    with pytest.raises(ModelError, match=re.escape("link 'exo_upper_arm': mass must be > 0 kg, got -2.0")):
        load_arm(text, joint_names=EXO_JOINTS)


def test_negative_mass_in_generated_human_urdf_names_the_link_and_value():
    p = HumanParams("m50")
    m = p.mass_kg("forearm")
    text = _replace_once(human_urdf(p), f'<mass value="{m!r}" />', f'<mass value="{-m!r}" />')
    with pytest.raises(ModelError, match=re.escape(f"link 'human_forearm': mass must be > 0 kg, got {-m!r}")):
        load_arm(text)


def test_non_finite_mass_names_the_attribute_and_value():
    with pytest.raises(ModelError, match=r"link 'link2' <mass>: value='nan' is not finite"):
        load_arm(_two_link_urdf(mass2="nan"))


def test_inertia_that_is_not_positive_definite_names_the_link_and_moments():
    bad = 'ixx="-0.002" ixy="0" ixz="0" iyy="0.002" iyz="0" izz="0.001"'
    pattern = r"link 'link2': inertia must be positive definite, principal moments \[-0\.002"
    with pytest.raises(ModelError, match=pattern):
        load_arm(_two_link_urdf(inertia2=bad))


def test_inertia_breaking_the_triangle_inequality_names_the_link_and_moments():
    """Principal moments (0.001, 0.002, 0.005): 0.005 > 0.003 (Traversaro et al. 2016)."""
    bad = 'ixx="0.001" ixy="0" ixz="0" iyy="0.002" iyz="0" izz="0.005"'
    with pytest.raises(ModelError, match=r"link 'link2': principal moments .* violate the triangle inequality "
                                         r"I3 <= I1 \+ I2 \(0\.005 > 0\.003\)"):
        load_arm(_two_link_urdf(inertia2=bad))


def test_lower_limit_above_upper_in_generated_exo_urdf_names_the_joint_and_values():
    lo, hi = math.radians(-55.0), math.radians(170.0)  # ExoParams defaults of joint 1 (docstring)
    text = _replace_once(exo_urdf(), f'lower="{lo!r}" upper="{hi!r}"', f'lower="{hi!r}" upper="{lo!r}"')
    with pytest.raises(ModelError, match=re.escape(
            f"joint 'exo_shoulder_a' <limit>: lower={hi!r} is above upper={lo!r}")):
        load_arm(text, joint_names=EXO_JOINTS)


def test_zero_effort_in_generated_exo_urdf_names_the_joint_and_value():
    text = exo_urdf().replace('effort="80.0"', 'effort="0.0"', 1)  # first joint: exo_shoulder_a
    with pytest.raises(ModelError, match=re.escape("joint 'exo_shoulder_a' <limit>: effort must be > 0, got 0.0")):
        load_arm(text, joint_names=EXO_JOINTS)


def test_zero_velocity_limit_names_the_joint_and_value():
    lim = 'lower="-1.0" upper="1.0" effort="10.0" velocity="0"'
    with pytest.raises(ModelError, match=re.escape("joint 'j2' <limit>: velocity must be > 0, got 0.0")):
        load_arm(_two_link_urdf(limit2=lim))


def test_prismatic_joint_where_revolute_is_required_names_the_joint_and_type():
    text = _replace_once(exo_urdf(), '<joint name="exo_elbow" type="revolute">',
                         '<joint name="exo_elbow" type="prismatic">')
    with pytest.raises(ModelError, match=re.escape(
            "joint 'exo_elbow' must be revolute (with limits), got type 'prismatic'")):
        load_arm(text, joint_names=EXO_JOINTS)


def test_continuous_joint_is_rejected_even_without_a_joint_list():
    message = "joints ['j2'] must be revolute (with limits), got j2='continuous'"
    with pytest.raises(ModelError, match=re.escape(message)):
        load_arm(_two_link_urdf(type2="continuous"))


def test_revolute_joint_without_limit_element_names_the_joint():
    text = _two_link_urdf().replace('<limit lower="-1.0" upper="1.0" effort="10.0" velocity="2.0"/>', "")
    with pytest.raises(ModelError, match=r"joint 'j2': a revolute joint needs a <limit> element"):
        load_arm(text)


def test_missing_cuff_frame_names_the_frame_and_lists_the_frames():
    text = exo_urdf().replace("exo_cuff_upper_arm", "exo_cuff_shoulder")
    sites = {"upper_arm": "exo_cuff_upper_arm", "forearm": "exo_cuff_forearm"}
    expected = r"upper_arm frame 'exo_cuff_upper_arm' does not exist; the links are .*exo_cuff_shoulder"
    with pytest.raises(UnknownNameError, match=expected):
        load_arm(text, sites=sites, joint_names=EXO_JOINTS)


def test_missing_hand_frame_names_the_frame():
    text = exo_urdf().replace("exo_hand_point", "exo_grip_point")
    with pytest.raises(UnknownNameError, match=r"hand point frame 'exo_hand_point' does not exist"):
        load_arm(text, hand_frame="exo_hand_point", joint_names=EXO_JOINTS)


def test_required_joint_missing_from_the_file_lists_the_joints():
    with pytest.raises(UnknownNameError, match=re.escape("no joint named 'j3'; joints are ['j1', 'j2']")):
        load_arm(_two_link_urdf(), joint_names=("j1", "j2", "j3"))


def test_joint_that_moves_no_mass_names_the_joint_and_the_diagonal_entry():
    with pytest.raises(ModelError, match=re.escape("joint 'j2' moves no mass (M[1,1] = 0 kg m^2)")):
        load_arm(_two_link_urdf(with_inertial2=False), joint_names=("j1", "j2"))


def test_armature_of_the_wrong_length_names_the_expected_count():
    with pytest.raises(ParameterError, match=r"armature_kg_m2 must be 2 finite values >= 0, got \[0\.1\]"):
        load_arm(_two_link_urdf(), armature_kg_m2=[0.1])


def test_build_exo_still_succeeds_on_the_unedited_text():
    """Control for the edits above: the generated files themselves are valid."""
    assert build_exo().joint_names == EXO_JOINTS
    load_arm(human_urdf(HumanParams("f5", girdle=True)))


# -- an <inertial> the URDF parser would drop must not give a massless link ---------------
def test_non_finite_inertial_origin_names_the_link():
    # urdfdom drops an inertial with a bad origin; pinocchio would build a massless link
    com = ExoParams().inertials()[2].com_m  # exo_upper_arm
    old = '<origin xyz="{}" rpy="0 0 0" />'.format(" ".join(repr(x) for x in com))
    text = _replace_once(exo_urdf(), old, old.replace(repr(com[0]), "nan", 1))
    with pytest.raises(ModelError, match=r"link 'exo_upper_arm'.*origin.*xyz"):
        load_arm(text, joint_names=EXO_JOINTS)


def test_missing_inertia_attribute_names_the_link_and_attribute():
    # urdfdom rejects an incomplete <inertia>; pinocchio would get a zero rotational inertia
    ixx = ExoParams().inertials()[2].inertia_kg_m2[0]  # exo_upper_arm
    text = _replace_once(exo_urdf(), f'ixx="{ixx!r}" ixy="0.0" ', f'ixx="{ixx!r}" ')
    with pytest.raises(ModelError, match=r"link 'exo_upper_arm' <inertia>: missing attribute 'ixy'"):
        load_arm(text, joint_names=EXO_JOINTS)


def test_site_spec_fraction_outside_zero_one_names_the_site_and_value():
    with pytest.raises(ParameterError, match=re.escape("SiteSpec('cuff').fraction must be in [0, 1], got 1.5")):
        SiteSpec("cuff", "forearm", 1.5)


def test_default_shoulder_b_stops_keep_the_upper_arm_20_deg_off_the_singular_line():
    # Geometry: the spherical shoulder is singular when the upper arm lies along axis 1.
    import pinocchio as pin

    from models import build_exo
    from models.exo import shoulder_axes

    for elevation_deg in (-40.0, 0.0, 30.0, 55.0):
        p = ExoParams(shoulder_axis_elevation_rad=math.radians(elevation_deg))
        arm = build_exo(p)
        u1 = shoulder_axes(p)[0]
        data = arm.model.createData()
        lower, upper = p.limits_rad()
        for stop in (lower[1], upper[1]):
            q = arm.neutral()
            q[1] = stop
            pin.framesForwardKinematics(arm.model, data, q)
            elbow = data.oMf[arm.frame_id("exo_elbow")].translation
            cos = abs(elbow @ u1) / math.hypot(*elbow)
            assert math.degrees(math.acos(min(1.0, cos))) >= 20.0 - 1e-9


def test_shoulder_b_stop_near_the_singularity_is_rejected():
    lower, upper = ExoParams().limits_rad()
    too_low = lower[:1] + (math.radians(-55.0),) + lower[2:]  # singular at 30 - 90 = -60 deg
    with pytest.raises(ParameterError, match="exo_shoulder_b.*singularity"):
        ExoParams(position_lower_rad=too_low)
