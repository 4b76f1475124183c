"""Dynamics of the generated URDF files, checked outside the project.

* Independent engine: MuJoCo loads the very same URDF text that pinocchio
  loads, and its joint-space inertia (``mj_fullM``), bias forces
  (``qfrc_bias`` = C(q, qdot) qdot + g(q)) and gravity (``qfrc_bias`` at zero
  velocity) must agree with pinocchio's ``crba``, ``rnea(q, qdot, 0)`` and
  ``computeGeneralizedGravity`` to 1e-8 relative (tolerance of the project
  spec).  URDF carries no rotor armature, so the pinocchio armature is zeroed
  before comparing.
* Textbook closed form: a planar two-link arm written with the project's URDF
  writer reproduces the "planar elbow manipulator" of Spong, Hutchinson &
  Vidyasagar (2006), *Robot Modeling and Control*, Wiley, Ch. 7 (dynamics),
  planar elbow manipulator example (equation numbers from memory; every
  expression re-derived with sympy).
* Round trip: the writer prints floats with ``repr``, so the inertial
  parameters that pinocchio (an independent URDF parser) reads back are
  bit-identical to the records that went in.
"""

from __future__ import annotations

import math
import xml.etree.ElementTree as ET

import mujoco
import numpy as np
import pinocchio as pin
import pytest

from models.arm import ArmModel, load_arm
from models.chain import ChainParams, build_chain
from models.exo import EXO_JOINTS, ExoParams, build_exo
from models.human import HumanParams, build_human
from models.inertia import Inertial
from models.urdf import Joint, Link, RobotDescription, to_urdf

#: Agreement between two engines, relative (project spec).
ENGINE_RTOL = 1e-8
#: Agreement with the closed form, relative (brief of this test set).
CLOSED_FORM_RTOL = 1e-10
#: Standard gravity used by both engines and the closed form [m/s^2].
G = 9.81
N_STATES = 20


# -- helpers ------------------------------------------------------------------------------
def _full_mass_matrix_mujoco(m: mujoco.MjModel, d: mujoco.MjData) -> np.ndarray:
    """Dense joint-space inertia from MuJoCo (signature changed in MuJoCo 4)."""
    M = np.zeros((m.nv, m.nv))
    try:
        mujoco.mj_fullM(m, d, M)  # MuJoCo >= 4: (model, data, dst)
    except TypeError:  # pragma: no cover - MuJoCo 3: (model, dst, qM)
        mujoco.mj_fullM(m, M, d.qM)
    return M


def _crba_full(model: pin.Model, data: pin.Data, q: np.ndarray) -> np.ndarray:
    """pinocchio ``crba`` fills the upper triangle only; symmetrise it."""
    M = pin.crba(model, data, q)
    return np.triu(M) + np.triu(M, 1).T


def _rel_err(a: np.ndarray, ref: np.ndarray) -> float:
    return float(np.linalg.norm(a - ref) / max(np.linalg.norm(ref), 1e-300))


def _fitted_exo(subject: str) -> ExoParams:
    """Exoskeleton whose lengths are set to a built-in subject's arm."""
    h = HumanParams(subject)
    return ExoParams.fitted_to(h.length_m("upper_arm"), h.length_m("forearm"), h.grip_distance_m)


EXO_CASES = {
    "exo-default": lambda: build_exo(),
    "exo-fitted-f5": lambda: build_exo(_fitted_exo("f5")),
    "exo-fitted-m95": lambda: build_exo(_fitted_exo("m95")),
    "exo-short-tilted": lambda: build_exo(
        ExoParams(
            upper_arm_length_m=0.21, forearm_length_m=0.19, hand_length_m=0.04,
            shoulder_axis_azimuth_rad=math.radians(10.0),
            shoulder_axis_elevation_rad=math.radians(-40.0),
        )
    ),
    "exo-long-heavy": lambda: build_exo(
        ExoParams(
            upper_arm_length_m=0.35, forearm_length_m=0.33, hand_length_m=0.11,
            shoulder_axis_azimuth_rad=math.radians(70.0),
            shoulder_axis_elevation_rad=math.radians(55.0),
            link_mass_kg=(4.0, 3.5, 3.0, 1.5, 1.2, 0.6, 0.7),
        )
    ),
}
HUMAN_CASES = {
    f"human-{s}-girdle{g}": (lambda s=s, g=g: build_human(HumanParams(s, girdle=g)))
    for s in ("f5", "m50", "m95")
    for g in (False, True)
}
#: Serial test chains of the benchmark's joint series (models.chain).
CHAIN_CASES = {f"chain-{n}": (lambda n=n: build_chain(ChainParams(n_joints=n))) for n in (7, 28)}
ALL_CASES = {**EXO_CASES, **HUMAN_CASES, **CHAIN_CASES}


@pytest.fixture(scope="module", params=sorted(ALL_CASES), ids=sorted(ALL_CASES))
def arm_and_mujoco(request) -> tuple[ArmModel, mujoco.MjModel]:
    arm = ALL_CASES[request.param]()
    mj = mujoco.MjModel.from_xml_string(arm.urdf)
    return arm, mj


def _without_armature(arm: ArmModel) -> pin.Model:
    model = arm.model.copy()
    model.armature = np.zeros(model.nv)
    return model


# -- pinocchio against MuJoCo -------------------------------------------------------------
def test_mujoco_reads_the_same_joints_in_the_same_order(arm_and_mujoco):
    """Same chain: names, count and order of the joints (MuJoCo's own URDF parser)."""
    arm, mj = arm_and_mujoco
    assert mj.nq == mj.nv == arm.nv
    assert tuple(mj.joint(i).name for i in range(mj.njnt)) == arm.joint_names


def test_mujoco_reads_the_same_total_mass_and_joint_limits(arm_and_mujoco):
    """MuJoCo's parse of the mass and of the <limit> elements equals pinocchio's."""
    arm, mj = arm_and_mujoco
    pin_mass = sum(arm.model.inertias[j].mass for j in range(1, arm.model.njoints))
    assert float(np.sum(mj.body_mass)) == pytest.approx(pin_mass, rel=1e-12)
    np.testing.assert_allclose(mj.jnt_range[:, 0], arm.model.lowerPositionLimit, rtol=0, atol=1e-15)
    np.testing.assert_allclose(mj.jnt_range[:, 1], arm.model.upperPositionLimit, rtol=0, atol=1e-15)


def test_mass_matrix_bias_and_gravity_agree_with_mujoco_at_random_states(arm_and_mujoco):
    """crba, rnea(q, qdot, 0) and computeGeneralizedGravity equal MuJoCo to 1e-8 relative.

    Source: MuJoCo as an independent dynamics engine on the same URDF text;
    tolerance from the project spec.
    """
    arm, mj = arm_and_mujoco
    model = _without_armature(arm)
    data = model.createData()
    d = mujoco.MjData(mj)
    np.testing.assert_allclose(mj.opt.gravity, model.gravity.linear, rtol=0, atol=0)
    rng = np.random.default_rng(20240611)
    lo, hi = model.lowerPositionLimit, model.upperPositionLimit
    for _ in range(N_STATES):
        q = rng.uniform(lo, hi)
        v = rng.normal(scale=2.0, size=model.nv)  # [rad/s]
        d.qpos[:] = q
        d.qvel[:] = v
        mujoco.mj_forward(mj, d)
        M_mj = _full_mass_matrix_mujoco(mj, d)
        bias_mj = d.qfrc_bias.copy()
        d.qvel[:] = 0.0
        mujoco.mj_forward(mj, d)
        grav_mj = d.qfrc_bias.copy()

        M_pin = _crba_full(model, data, q)
        bias_pin = pin.rnea(model, data, q, v, np.zeros(model.nv))
        grav_pin = pin.computeGeneralizedGravity(model, data, q)

        assert _rel_err(M_pin, M_mj) <= ENGINE_RTOL, (q, M_pin, M_mj)
        assert _rel_err(bias_pin, bias_mj) <= ENGINE_RTOL, (q, v, bias_pin, bias_mj)
        assert _rel_err(grav_pin, grav_mj) <= ENGINE_RTOL, (q, grav_pin, grav_mj)


# -- planar elbow manipulator (Spong, Hutchinson & Vidyasagar 2006) -----------------------
def _planar_arm(m1, m2, l1, lc1, lc2, I1, I2) -> ArmModel:
    """Two links in the world x-z plane, written with the project's URDF writer.

    Mapping to Spong's planar elbow manipulator (Spong et al. 2006, Ch. 7):
    Spong's x is world x (link direction at q = 0, horizontal), Spong's y is
    world z (up, so gravity -9.81 along world z acts along Spong's -y), and
    Spong's z = x cross y is world x cross z = -y.  Both joints therefore turn
    about -y, so that q1 is measured from the horizontal, counter-clockwise
    towards +z, and q2 is relative to link 1.  Each link is a body whose
    centre of mass lies on its local x axis; its inertia about the COM about
    the joint axis (local y) is I_i.  The two other principal moments do not
    enter planar motion; they are chosen to keep the body physical.
    """
    def inertial(m, lc, I, name):
        # slender body along x: small axial moment, I about y and z
        return Inertial(m, (lc, 0.0, 0.0), (0.1 * I, I, I, 0.0, 0.0, 0.0), name=name)

    axis = (0.0, -1.0, 0.0)
    links = (
        Link("base"),
        Link("link1", inertial(m1, lc1, I1, "link1")),
        Link("link2", inertial(m2, lc2, I2, "link2")),
    )
    lim = dict(lower=-math.pi, upper=math.pi, effort=100.0, velocity=10.0)
    joints = (
        Joint("q1", "revolute", "base", "link1", axis=axis, **lim),
        Joint("q2", "revolute", "link1", "link2", xyz_m=(l1, 0.0, 0.0), axis=axis, **lim),
    )
    return load_arm(to_urdf(RobotDescription("planar_elbow", links, joints)), joint_names=("q1", "q2"))


def _spong(q, qd, m1, m2, l1, lc1, lc2, I1, I2, g=G):
    """M(q), C(q, qdot) qdot and g(q) of Spong et al. (2006), Ch. 7, planar elbow manipulator example."""
    c2 = math.cos(q[1])
    M11 = m1 * lc1**2 + m2 * (l1**2 + lc2**2 + 2 * l1 * lc2 * c2) + I1 + I2
    M12 = m2 * (lc2**2 + l1 * lc2 * c2) + I2
    M22 = m2 * lc2**2 + I2
    M = np.array([[M11, M12], [M12, M22]])
    h = -m2 * l1 * lc2 * math.sin(q[1])
    Cqd = np.array([h * (2 * qd[0] * qd[1] + qd[1] ** 2), -h * qd[0] ** 2])
    grav = np.array([
        (m1 * lc1 + m2 * l1) * g * math.cos(q[0]) + m2 * lc2 * g * math.cos(q[0] + q[1]),
        m2 * lc2 * g * math.cos(q[0] + q[1]),
    ])
    return M, Cqd, grav


def test_planar_two_link_arm_matches_spong_closed_form_at_random_states():
    """M, C qdot and g of the URDF arm equal Spong et al. (2006) Ch. 7 to 1e-10 relative.

    Five random arms x 20 random (q, qdot) = 100 states.
    """
    rng = np.random.default_rng(7)
    n_checked = 0
    for _ in range(5):
        l1 = rng.uniform(0.2, 0.6)
        par = dict(
            m1=rng.uniform(0.5, 3.0), m2=rng.uniform(0.5, 3.0), l1=l1,
            lc1=rng.uniform(0.2, 0.8) * l1, lc2=rng.uniform(0.05, 0.4),
            I1=rng.uniform(0.005, 0.05), I2=rng.uniform(0.005, 0.05),
        )
        arm = _planar_arm(**par)
        model = arm.model
        data = model.createData()
        assert model.gravity.linear[2] == -G
        for _ in range(20):
            q = rng.uniform(-math.pi, math.pi, 2)
            qd = rng.normal(scale=3.0, size=2)
            M_ref, Cqd_ref, g_ref = _spong(q, qd, **par)
            M = _crba_full(model, data, q)
            g = pin.computeGeneralizedGravity(model, data, q)
            Cqd = pin.rnea(model, data, q, qd, np.zeros(2)) - g
            np.testing.assert_allclose(M, M_ref, rtol=CLOSED_FORM_RTOL, atol=CLOSED_FORM_RTOL * np.abs(M_ref).max())
            np.testing.assert_allclose(g, g_ref, rtol=CLOSED_FORM_RTOL, atol=CLOSED_FORM_RTOL * np.abs(g_ref).max())
            scale = max(np.abs(Cqd_ref).max(), np.abs(M_ref).max() * float(qd @ qd))
            np.testing.assert_allclose(Cqd, Cqd_ref, rtol=CLOSED_FORM_RTOL, atol=CLOSED_FORM_RTOL * scale)
            n_checked += 1
    assert n_checked == 100


def test_planar_two_link_arm_has_skew_symmetric_mdot_minus_two_c():
    """Mdot - 2C is skew-symmetric (Spong et al. 2006, Ch. 7).

    C is pinocchio's Coriolis matrix and Mdot is taken from the closed-form M
    by central differences along qdot.
    """
    rng = np.random.default_rng(11)
    par = dict(m1=1.3, m2=0.9, l1=0.35, lc1=0.16, lc2=0.12, I1=0.012, I2=0.008)
    model = _planar_arm(**par).model
    data = model.createData()
    for _ in range(10):
        q = rng.uniform(-math.pi, math.pi, 2)
        qd = rng.normal(size=2)
        eps = 1e-6
        Mdot = (_spong(q + eps * qd, qd, **par)[0] - _spong(q - eps * qd, qd, **par)[0]) / (2 * eps)
        C = pin.computeCoriolisMatrix(model, data, q, qd)
        S = Mdot - 2 * C
        np.testing.assert_allclose(S + S.T, np.zeros((2, 2)), atol=1e-8)


# -- the writer round-trips ---------------------------------------------------------------
def _random_inertial(rng: np.random.Generator, name: str) -> Inertial:
    """A physical rigid body with full (non-diagonal) inertia and many-digit floats."""
    Q, _ = np.linalg.qr(rng.normal(size=(3, 3)))
    a, b, c = rng.uniform(0.1, 1.0, 3)
    principal = np.array([a + b, b + c, a + c]) * 1e-2  # sums of two positives obey the triangle inequality
    return Inertial.from_matrix(rng.uniform(0.05, 5.0), rng.normal(scale=0.1, size=3),
                                Q @ np.diag(principal) @ Q.T, name=name)


def test_urdf_writer_round_trips_inertials_through_pinocchio_bit_for_bit():
    """pinocchio (an independent URDF parser) reads back exactly the Inertial records written."""
    rng = np.random.default_rng(3)
    links, joints, records = [Link("base")], [], []
    parent = "base"
    for i in range(5):
        rec = _random_inertial(rng, f"body{i}")
        axis = rng.normal(size=3)
        records.append(rec)
        links.append(Link(f"body{i}", rec))
        joints.append(Joint(
            f"j{i}", "revolute", parent, f"body{i}",
            xyz_m=tuple(rng.normal(scale=0.2, size=3)), rpy_rad=tuple(rng.uniform(-3, 3, 3)),
            axis=tuple(axis / np.linalg.norm(axis)), lower=-1.0, upper=1.0, effort=10.0, velocity=2.0,
        ))
        parent = f"body{i}"
    arm = load_arm(to_urdf(RobotDescription("roundtrip", tuple(links), tuple(joints))))
    for i, (rec, j) in enumerate(zip(records, joints), start=1):
        Y = arm.model.inertias[i]
        assert Y.mass == rec.mass_kg
        assert np.array_equal(Y.lever, rec.com)
        assert np.array_equal(Y.inertia, rec.matrix)
        assert np.array_equal(arm.model.jointPlacements[i].translation, np.array(j.xyz_m))


def test_generated_exo_urdf_text_holds_the_exact_design_inertials():
    """Python's XML parser reads back the exo's Inertial records exactly (repr floats)."""
    p = ExoParams.fitted_to(0.2913, 0.2471, 0.0733, shoulder_axis_azimuth_rad=0.7123)
    root = ET.fromstring(build_exo(p).urdf)
    by_name = {link.get("name"): link for link in root.findall("link")}
    child_of = {j.get("name"): j.find("child").get("link") for j in root.findall("joint")}
    for joint, rec in zip(EXO_JOINTS, p.inertials()):
        ine = by_name[child_of[joint]].find("inertial")
        assert float(ine.find("mass").get("value")) == rec.mass_kg
        com = tuple(float(x) for x in ine.find("origin").get("xyz").split())
        assert com == rec.com_m
        el = ine.find("inertia")
        got = tuple(float(el.get(k)) for k in ("ixx", "iyy", "izz", "ixy", "ixz", "iyz"))
        assert got == rec.inertia_kg_m2
    # pinocchio merges the massless cuff frames into their links; that may cost an ulp
    model = build_exo(p).model
    for jid, rec in enumerate(p.inertials(), start=1):
        Y = model.inertias[jid]
        assert Y.mass == rec.mass_kg
        np.testing.assert_allclose(Y.lever, rec.com, rtol=0, atol=1e-15)
        np.testing.assert_allclose(Y.inertia, rec.matrix, rtol=0, atol=1e-15 * np.abs(rec.matrix).max())
