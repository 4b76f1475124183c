"""An anthropometric human arm scaled from stature, body mass and sex, as URDF.

One table throughout: de Leva (1996), Table 4 (Zatsiorsky–Seluyanov data
adjusted to joint-centre endpoints) for the mass fractions, the centre-of-mass
fractions and the three radii of gyration of every segment, and the mean
segment lengths of the same paper scaled by stature.  de Leva is used rather
than Dempster/Winter because it is sex-specific and gives radii of gyration
about three axes, which a 3-D arm with axial rotations needs; the two tables
must not be mixed: their endpoints and methods differ (upper-arm centre of
mass at 0.577 of the length in [deLeva1996]_, 0.436 in Dempster's data as
tabulated in [Winter2009]_, Table 4.1).

Described for the right arm (``side="left"`` mirrors it across the sagittal
plane).  Joint order (all revolute; link frames parallel to the thorax frame at q = 0,
arm hanging at the side, forearm in mid-position, palm facing the body):

==  =========================  ==========================  ==========  ===========
 #  joint                      motion (+)                  axis (q=0)  limits, deg
==  =========================  ==========================  ==========  ===========
 1  ``human_gh_flexion``       shoulder flexion            -y          -60 .. 180
 2  ``human_gh_abduction``     shoulder abduction          -x          -45 .. 180
 3  ``human_gh_rotation``      internal rotation           +z          -90 .. 70
 4  ``human_elbow_flexion``    elbow flexion               -y            0 .. 150
 5  ``human_forearm_rotation`` pronation                   +z          -80 .. 80
 6  ``human_wrist_flexion``    wrist flexion               +x          -70 .. 80
 7  ``human_wrist_deviation``  radial deviation            -y          -30 .. 20
==  =========================  ==========================  ==========  ===========

Limits are the AAOS (1965) column of Norkin & White, Table A.1
[NorkinWhite2016]_, except adduction (-45 deg, across the body, from memory).  The
shoulder is a Cardan sequence (flexion, then abduction, then axial rotation)
so that its limits are the clinical ones; like every 3-angle chart it has one
singular posture, pure 90 deg abduction, where axes 1 and 3 line up.

With ``girdle=True`` two joints come first, ``human_sc_elevation`` and
``human_sc_protraction``, at the sternoclavicular joint; the glenohumeral
centre then sits at the lateral end of the clavicle and moves with it.
:class:`ShoulderRhythm` gives their angles from the humeral elevation.

References
----------
.. [deLeva1996] P. de Leva, "Adjustments to Zatsiorsky-Seluyanov's segment
   inertia parameters", *Journal of Biomechanics* 29(9):1223-1230, 1996,
   Table 4 (values confirmed in a public transcription of the table; the mean
   segment lengths and statures from memory).
.. [Winter2009] D. A. Winter, *Biomechanics and Motor Control of Human
   Movement*, 4th ed., Wiley, 2009, Table 4.1 (Dempster's data).
.. [NorkinWhite2016] C. C. Norkin, D. J. White, *Measurement of Joint Motion:
   A Guide to Goniometry*, 5th ed., F. A. Davis, 2016, Appendix A, Table A.1,
   AAOS column (American Academy of Orthopaedic Surgeons, *Joint Motion:
   Method of Measuring and Recording*, 1965).
.. [Gordon2014] C. C. Gordon et al., *2012 Anthropometric Survey of U.S. Army
   Personnel: Methods and Summary Statistics* (ANSUR II), technical report
   NATICK/TR-15/007, 2014; percentiles computed here from its public
   working-data files (unweighted).
.. [Inman1944] Inman, Saunders and Abbott, *Journal of Bone and Joint
   Surgery* 26(1):1-30, 1944 (pages from memory); reprinted in *Clinical
   Orthopaedics and Related Research* 330:3-12, 1996.
.. [Ludewig2004] Ludewig, Behrens, Meyer, Spoden and Wilson, *Journal of
   Orthopaedic & Sports Physical Therapy* 34(3):140-149, 2004 (volume and
   pages from memory).
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass, field, replace
from types import MappingProxyType
from typing import Literal

import numpy as np
import pinocchio as pin

from .arm import ArmModel, load_arm
from .checks import in_range, positive, vector
from .errors import ParameterError, UnknownNameError
from .inertia import Inertial
from .sites import SiteSpec, check_sites, site_frames
from .urdf import SIDES, Geometry, Joint, Link, RobotDescription, Side, Visual, mirrored, rpy_from_z_axis, to_urdf

__all__ = [
    "Sex",
    "Subject",
    "SUBJECTS",
    "DE_LEVA_1996",
    "SegmentRow",
    "ShoulderRhythm",
    "HumanParams",
    "hand_position_m",
    "HUMAN_ARM_JOINTS",
    "HUMAN_GIRDLE_JOINTS",
    "HUMAN_ARM_LIMITS_RAD",
    "human_description",
    "human_urdf",
    "build_human",
    "girdle_posture",
]

Sex = Literal["female", "male"]
_deg = math.radians


def _frozen(table):
    """A read-only copy of a table of tables (nested dicts become read-only mappings)."""
    return MappingProxyType({k: _frozen(v) if isinstance(v, dict) else v for k, v in table.items()})



@dataclass(frozen=True)
class SegmentRow:
    """One row of de Leva (1996) Table 4 for one sex.

    ``mass_fraction`` of body mass; ``com_fraction`` of segment length from the
    proximal joint centre; radii of gyration about the centre of mass as
    fractions of segment length, about the sagittal (antero-posterior),
    transverse (medio-lateral) and longitudinal axes.
    """

    mass_fraction: float
    com_fraction: float
    r_sagittal: float
    r_transverse: float
    r_longitudinal: float


#: de Leva (1996), Table 4, upper-limb rows, and the mean segment lengths and
#: stature of the same paper [m].  Table values confirmed in a public
#: transcription ([deLeva1996]_, Table 4); mean lengths from memory.
#: The axis meaning of the "sagittal" and "transverse" radii is taken as the
#: antero-posterior and medio-lateral axis (from memory).
DE_LEVA_1996: Mapping[str, Mapping[str, object]] = _frozen({
    "female": {
        "stature_m": 1.735,
        "length_m": {"upper_arm": 0.2751, "forearm": 0.2643, "hand": 0.0780},
        "rows": {
            "upper_arm": SegmentRow(0.0255, 0.5754, 0.278, 0.260, 0.148),
            "forearm": SegmentRow(0.0138, 0.4559, 0.261, 0.257, 0.094),
            "hand": SegmentRow(0.0056, 0.7474, 0.531, 0.454, 0.335),
        },
    },
    "male": {
        "stature_m": 1.741,
        "length_m": {"upper_arm": 0.2817, "forearm": 0.2689, "hand": 0.0862},
        "rows": {
            "upper_arm": SegmentRow(0.0271, 0.5772, 0.285, 0.269, 0.158),
            "forearm": SegmentRow(0.0162, 0.4574, 0.276, 0.265, 0.121),
            "hand": SegmentRow(0.0061, 0.7900, 0.628, 0.513, 0.401),
        },
    },
})


@dataclass(frozen=True)
class Subject:
    """A wearer: stature [m], body mass [kg] and sex."""

    stature_m: float
    mass_kg: float
    sex: Sex

    STATURE_RANGE_M = (1.2, 2.2)
    MASS_RANGE_KG = (30.0, 200.0)

    def __post_init__(self) -> None:
        lo, hi = self.STATURE_RANGE_M
        object.__setattr__(self, "stature_m", in_range("Subject", "stature_m", self.stature_m, lo, hi, "m"))
        lo, hi = self.MASS_RANGE_KG
        object.__setattr__(self, "mass_kg", in_range("Subject", "mass_kg", self.mass_kg, lo, hi, "kg"))
        if self.sex not in ("female", "male"):
            raise ParameterError(f"Subject.sex must be 'female' or 'male', got {self.sex!r}")

    @classmethod
    def named(cls, name: str) -> Subject:
        """A built-in subject by short name (``f5``, ``f50``, ``f95``, ``m5``, ``m50``, ``m95``)."""
        try:
            return SUBJECTS[name]
        except KeyError as e:
            raise UnknownNameError(
                f"unknown subject {name!r}; built-in subjects are {', '.join(SUBJECTS)}"
            ) from e


#: 5th, 50th and 95th percentile adults: ANSUR II (Gordon et al. 2014) working
#: data, unweighted percentiles of stature and of body mass ([Gordon2014]_).
#: Pairing a stature percentile with the same mass percentile is
#: common practice, not a joint percentile.
SUBJECTS: Mapping[str, Subject] = MappingProxyType({
    "f5": Subject(1.525, 51.3, "female"),
    "f50": Subject(1.626, 66.8, "female"),
    "f95": Subject(1.740, 87.1, "female"),
    "m5": Subject(1.648, 64.4, "male"),
    "m50": Subject(1.755, 84.6, "male"),
    "m95": Subject(1.870, 110.7, "male"),
})


@dataclass(frozen=True)
class ShoulderRhythm:
    """Linear scapulohumeral rhythm driving the 2-DOF shoulder girdle.

    For humerothoracic elevation :math:`\\theta_{HT}` above the setting angle
    :math:`\\theta_0` and a glenohumeral-to-scapulothoracic ratio r,

    .. math::
        \\theta_{ST} = \\max(0, \\theta_{HT} - \\theta_0) / (1 + r), \\qquad
        \\theta_{GH} = \\theta_{HT} - \\theta_{ST}

    (Inman, Saunders & Abbott 1944 [Inman1944]_: r = 2 after about 30 deg).
    The clavicle follows linearly: elevation
    ``clavicle_elevation_per_rad`` x :math:`\\theta_{HT}` (about 12 deg over
    120 deg of arm elevation, a crude fit to Ludewig et al. 2004 [Ludewig2004]_) and
    retraction ``clavicle_retraction_per_rad`` x :math:`\\theta_{HT}` (about
    20 deg over 120 deg, same source, midpoint of 15-29 deg).
    """

    ratio: float = 2.0
    setting_angle_rad: float = _deg(30.0)
    clavicle_elevation_per_rad: float = 0.1
    clavicle_retraction_per_rad: float = 20.0 / 120.0

    def __post_init__(self) -> None:
        o = "ShoulderRhythm"
        object.__setattr__(self, "ratio", positive(o, "ratio", self.ratio))
        object.__setattr__(
            self, "setting_angle_rad",
            in_range(o, "setting_angle_rad", self.setting_angle_rad, 0.0, _deg(90), "rad"),
        )
        for f in ("clavicle_elevation_per_rad", "clavicle_retraction_per_rad"):
            object.__setattr__(self, f, in_range(o, f, getattr(self, f), 0.0, 1.0))

    def scapulothoracic_rad(self, humerothoracic_rad: float) -> float:
        """Scapular upward rotation :math:`\\theta_{ST}` [rad]."""
        return max(0.0, humerothoracic_rad - self.setting_angle_rad) / (1.0 + self.ratio)

    def glenohumeral_rad(self, humerothoracic_rad: float) -> float:
        """Glenohumeral share :math:`\\theta_{GH} = \\theta_{HT} - \\theta_{ST}` [rad]."""
        return humerothoracic_rad - self.scapulothoracic_rad(humerothoracic_rad)

    def girdle_angles(self, humerothoracic_rad: float) -> tuple[float, float]:
        """(clavicle elevation, clavicle protraction) [rad]; retraction is negative protraction."""
        th = max(0.0, humerothoracic_rad)
        return self.clavicle_elevation_per_rad * th, -self.clavicle_retraction_per_rad * th


HUMAN_ARM_JOINTS: tuple[str, ...] = (
    "human_gh_flexion",
    "human_gh_abduction",
    "human_gh_rotation",
    "human_elbow_flexion",
    "human_forearm_rotation",
    "human_wrist_flexion",
    "human_wrist_deviation",
)
HUMAN_GIRDLE_JOINTS: tuple[str, ...] = ("human_sc_elevation", "human_sc_protraction")
HAND_FRAME = "human_hand_point"

#: AAOS (1965) normal active ROM, Norkin & White Table A.1 [deg]; adduction from memory.
_ROM_DEG = ((-60, 180), (-45, 180), (-90, 70), (0, 150), (-80, 80), (-70, 80), (-30, 20))
#: The same ranges [rad], (lower, upper) per joint of :data:`HUMAN_ARM_JOINTS` (the model's own joint limits).
HUMAN_ARM_LIMITS_RAD: tuple[tuple[float, float], ...] = tuple((math.radians(lo), math.radians(hi))
                                                             for lo, hi in _ROM_DEG)
#: Clavicle ranges [deg], from memory: elevation up to about 45, protraction/retraction about 30.
_GIRDLE_ROM_DEG = ((-10, 45), (-30, 30))
#: Peak voluntary joint torques of an adult [N m], from memory (order of magnitude only).
_HUMAN_TORQUE_NM = (60.0, 60.0, 30.0, 50.0, 8.0, 10.0, 10.0)
#: Joint speed bounds [rad/s], from memory: fast voluntary elbow flexion peaks at about 400-1000 deg/s.
_HUMAN_SPEED_RAD_S = (20.0, 20.0, 20.0, 17.0, 20.0, 20.0, 20.0)

#: Links that only join two intersecting joint axes (and the girdle links, whose
#: mass belongs to the trunk in de Leva's table) carry this nominal 1 mg, a
#: millionth of a segment, so that engines that reject massless moving bodies
#: (MuJoCo) load the same file.
NOMINAL_INERTIAL = Inertial(1e-6, (0.0, 0.0, 0.0), (1e-12, 1e-12, 1e-12, 0.0, 0.0, 0.0), "nominal link")

_SKIN_RGBA = (0.87, 0.66, 0.52, 1.0)
_TORSO_RGBA = (0.55, 0.62, 0.58, 1.0)
_ARM_AXES = ((0, -1, 0), (-1, 0, 0), (0, 0, 1), (0, -1, 0), (0, 0, 1), (1, 0, 0), (0, -1, 0))
_SEG_LINK = MappingProxyType({"upper_arm": "human_upper_arm", "forearm": "human_forearm", "hand": "human_hand"})


@dataclass(frozen=True)
class HumanParams:
    """The human arm: a subject plus options, validated on construction.

    Parameters
    ----------
    subject : Subject or str
        The wearer, or a built-in name such as ``"m50"``.
    girdle : bool
        Add the 2-DOF shoulder girdle (sternoclavicular elevation and
        protraction) in front of the glenohumeral joint.
    clavicle_length_m : float, optional
        Sternoclavicular to glenohumeral centre [m]; None means 0.086 x stature
        (about 150 mm for a 1.75 m adult, from memory; de Leva has no clavicle
        row). See :meth:`clavicle_m`.
    sites : tuple of SiteSpec, optional
        Cuff sites on the arm; None means mid upper arm, 60 % of the forearm
        and the hand's centre of mass (the grip). See :meth:`cuff_sites`.
    torque_limit_Nm : (7,) tuple
        Peak joint torques the human can produce [N m] (from memory, order of
        magnitude).
    rhythm : ShoulderRhythm
        Scapulohumeral rhythm used with the girdle.
    side : {"right", "left"}
        Which arm; the left is the mirror image of the right across the
        sagittal plane, with the same joint names, signs and limits.
    """

    subject: Subject | str = "m50"
    girdle: bool = False
    clavicle_length_m: float | None = None
    sites: tuple[SiteSpec, ...] | None = None
    torque_limit_Nm: tuple[float, ...] = _HUMAN_TORQUE_NM
    rhythm: ShoulderRhythm = field(default_factory=ShoulderRhythm)
    side: Side = "right"

    def __post_init__(self) -> None:
        o = "HumanParams"
        if self.side not in SIDES:
            raise ParameterError(f"{o}.side must be 'right' or 'left', got {self.side!r}")
        if isinstance(self.subject, str):
            object.__setattr__(self, "subject", Subject.named(self.subject))
        elif not isinstance(self.subject, Subject):
            raise ParameterError(f"{o}.subject must be a Subject or a name, got {self.subject!r}")
        if not isinstance(self.girdle, bool):
            raise ParameterError(f"{o}.girdle must be True or False, got {self.girdle!r}")
        # None fields stay None and are derived on use, so dataclasses.replace(subject=...) stays consistent
        if self.clavicle_length_m is not None:
            object.__setattr__(
                self, "clavicle_length_m",
                in_range(o, "clavicle_length_m", self.clavicle_length_m, 0.08, 0.25, "m"),
            )
        if self.sites is not None:
            object.__setattr__(self, "sites", check_sites(o, self.sites))
        t = vector(o, "torque_limit_Nm", self.torque_limit_Nm, 7)
        for i, x in enumerate(t):
            if not x > 0:
                raise ParameterError(f"{o}.torque_limit_Nm[{i}] ({HUMAN_ARM_JOINTS[i]}) must be > 0, got {x!r}")
        object.__setattr__(self, "torque_limit_Nm", t)
        if not isinstance(self.rhythm, ShoulderRhythm):
            raise ParameterError(f"{o}.rhythm must be a ShoulderRhythm, got {self.rhythm!r}")

    # -- table look-ups -------------------------------------------------------------
    def row(self, segment: str) -> SegmentRow:
        """The de Leva (1996) Table 4 row of ``segment`` for this subject's sex."""
        return DE_LEVA_1996[self.subject.sex]["rows"][segment]

    def length_m(self, segment: str) -> float:
        """Segment length: de Leva's mean length x stature / de Leva's mean stature [m]."""
        t = DE_LEVA_1996[self.subject.sex]
        return t["length_m"][segment] * self.subject.stature_m / t["stature_m"]

    def mass_kg(self, segment: str) -> float:
        """Segment mass: mass fraction x body mass [kg]."""
        return self.row(segment).mass_fraction * self.subject.mass_kg

    def com_distance_m(self, segment: str) -> float:
        """Centre of mass distance from the proximal joint centre [m]."""
        return self.row(segment).com_fraction * self.length_m(segment)

    def inertial(self, segment: str) -> Inertial:
        """Segment inertial in its link frame.

        :math:`I_a = m (r_a L)^2` about the centre of mass for each axis a.
        The table's axes are those of the anatomical position; the zero
        posture here has the forearm in mid-position, a quarter turn of
        pronation away, so for forearm and hand the sagittal radius lies along
        the link's y axis and the transverse one along x.
        """
        r = self.row(segment)
        m, L = self.mass_kg(segment), self.length_m(segment)
        i_sag, i_tr, i_long = (m * (k * L) ** 2 for k in (r.r_sagittal, r.r_transverse, r.r_longitudinal))
        ixx, iyy = (i_sag, i_tr) if segment == "upper_arm" else (i_tr, i_sag)
        return Inertial(m, (0.0, 0.0, -self.com_distance_m(segment)), (ixx, iyy, i_long, 0.0, 0.0, 0.0),
                        name=f"human {segment}")

    def clavicle_m(self) -> float:
        """Clavicle length [m]: the given one, or 0.086 x stature (from memory)."""
        return self.clavicle_length_m if self.clavicle_length_m is not None else 0.086 * self.subject.stature_m

    def cuff_sites(self) -> tuple[SiteSpec, ...]:
        """Cuff sites: the given ones, or mid upper arm, 60 % of the forearm and the hand's centre of mass."""
        if self.sites is not None:
            return self.sites
        return (
            SiteSpec("upper_arm", "upper_arm", 0.5),
            SiteSpec("forearm", "forearm", 0.6),
            SiteSpec("hand", "hand", self.row("hand").com_fraction),
        )

    def clavicle_vector_m(self) -> np.ndarray:
        """Sternoclavicular joint to glenohumeral centre at rest, thorax frame [m].

        Lateral and 20 deg backward in the horizontal plane (from memory).
        """
        a = _deg(20.0)
        return self.clavicle_m() * np.array([-math.sin(a), -math.cos(a), 0.0])

    @property
    def joint_names(self) -> tuple[str, ...]:
        """Joint names in ``q`` order."""
        return (HUMAN_GIRDLE_JOINTS if self.girdle else ()) + HUMAN_ARM_JOINTS

    @property
    def grip_distance_m(self) -> float:
        """Wrist centre to the hand site (the grip) [m]."""
        hand = next((s for s in self.cuff_sites() if s.segment == "hand"), None)
        frac = hand.fraction if hand is not None else self.row("hand").com_fraction
        return frac * self.length_m("hand")


def human_description(
    p: HumanParams | None = None,
    base_xyz_m: tuple[float, float, float] = (0.0, 0.0, 0.0),
    base_rpy_rad: tuple[float, float, float] = (0.0, 0.0, 0.0),
) -> RobotDescription:
    """The human arm as a :class:`~models.urdf.RobotDescription`.

    The root link ``human_world`` is the world; the fixed joint
    ``human_registration`` places the thorax frame, whose origin is the
    glenohumeral centre at rest, at ``base_xyz_m`` / ``base_rpy_rad``.
    """
    p = HumanParams() if p is None else p
    base_xyz_m = vector("human_description", "base_xyz_m", base_xyz_m, 3)
    base_rpy_rad = vector("human_description", "base_rpy_rad", base_rpy_rad, 3)
    arm = _right_arm_description(p)
    if p.side == "left":
        arm = mirrored(arm)
    # the registration is a world placement: it is set after mirroring, never mirrored
    joints = tuple(replace(j, xyz_m=base_xyz_m, rpy_rad=base_rpy_rad) if j.name == "human_registration" else j
                   for j in arm.joints)
    return replace(arm, joints=joints)


def _right_arm_description(p: HumanParams) -> RobotDescription:
    """The right arm with the thorax at the world origin."""
    base_xyz_m = base_rpy_rad = (0.0, 0.0, 0.0)
    L = {s: p.length_m(s) for s in ("upper_arm", "forearm", "hand")}
    thorax_vis = (
        Visual(Geometry("box", (0.22, 0.34, 0.50)), (-0.02, 0.19, -0.22), (0, 0, 0), _TORSO_RGBA, "human_torso"),
    )
    links = [Link("human_world"), Link("human_thorax", None, thorax_vis)]
    joints = [Joint("human_registration", "fixed", "human_world", "human_thorax", base_xyz_m, base_rpy_rad)]
    parent = "human_thorax"
    gh_origin = (0.0, 0.0, 0.0)
    if p.girdle:
        c = p.clavicle_vector_m()
        e_axis = np.cross(c, (0.0, 0.0, 1.0))
        e_axis /= np.linalg.norm(e_axis)
        links += [
            Link("human_sc_link", NOMINAL_INERTIAL),
            Link("human_clavicle", NOMINAL_INERTIAL, (_capsule_visual(-c, (0, 0, 0), 0.012),)),
        ]
        for (name, axis, child), (lo, hi) in zip(
            ((HUMAN_GIRDLE_JOINTS[0], tuple(e_axis), "human_sc_link"),
             (HUMAN_GIRDLE_JOINTS[1], (0.0, 0.0, 1.0), "human_clavicle")),
            _GIRDLE_ROM_DEG,
        ):
            xyz = tuple(-c) if child == "human_sc_link" else (0.0, 0.0, 0.0)
            joints.append(Joint(name, "revolute", parent, child, xyz, axis=axis, lower=_deg(lo),
                                upper=_deg(hi), effort=60.0, velocity=10.0))
            parent = child
        gh_origin = tuple(c)
    arm_links = ["human_gh_link_1", "human_gh_link_2", "human_upper_arm", "human_elbow_link",
                 "human_forearm", "human_wrist_link", "human_hand"]
    origins = [gh_origin, (0, 0, 0), (0, 0, 0), (0, 0, -L["upper_arm"]), (0, 0, 0),
               (0, 0, -L["forearm"]), (0, 0, 0)]
    for i, name in enumerate(HUMAN_ARM_JOINTS):
        child = arm_links[i]
        seg = {"human_upper_arm": "upper_arm", "human_forearm": "forearm", "human_hand": "hand"}.get(child)
        if seg is None:
            links.append(Link(child, NOMINAL_INERTIAL))
        else:
            radius = {"upper_arm": 0.045, "forearm": 0.035, "hand": 0.03}[seg]
            links.append(Link(child, p.inertial(seg), (_capsule_visual((0, 0, 0), (0, 0, -L[seg]), radius),)))
        lo, hi = _ROM_DEG[i]
        joints.append(Joint(name, "revolute", parent, child, tuple(float(x) for x in origins[i]),
                            axis=tuple(float(a) for a in _ARM_AXES[i]), lower=_deg(lo), upper=_deg(hi),
                            effort=p.torque_limit_Nm[i], velocity=_HUMAN_SPEED_RAD_S[i]))
        parent = child
    site_links, site_joints = site_frames("human", p.cuff_sites(), _SEG_LINK, L)
    links += site_links
    joints += site_joints
    links.append(Link(HAND_FRAME))
    joints.append(Joint(f"{HAND_FRAME}_mount", "fixed", "human_hand", HAND_FRAME, (0.0, 0.0, -p.grip_distance_m)))
    return RobotDescription("exosandbox_human_arm", tuple(links), tuple(joints))


def _capsule_visual(a, b, radius: float) -> Visual:
    """A cylinder from a to b (the viewer caps it; URDF has no capsule)."""
    a, b = np.asarray(a, float), np.asarray(b, float)
    return Visual(Geometry("cylinder", (radius, float(np.linalg.norm(b - a)))), tuple((a + b) / 2),
                  rpy_from_z_axis(b - a), _SKIN_RGBA, "human_skin")


def human_urdf(p: HumanParams | None = None, **placement) -> str:
    """URDF text of the human arm (see :func:`human_description` for the placement)."""
    return to_urdf(human_description(p, **placement))


def build_human(p: HumanParams | None = None, **placement) -> ArmModel:
    """Pinocchio model of the human arm."""
    p = HumanParams() if p is None else p
    return load_arm(
        human_urdf(p, **placement),
        sites={s.name: s.frame("human") for s in p.cuff_sites()},
        hand_frame=HAND_FRAME,
        joint_names=p.joint_names,
        source="exosandbox_human_arm",
    )


def hand_position_m(p: HumanParams | str, q_rad) -> np.ndarray:
    """Position [m] of the hand point at posture ``q_rad``, thorax frame (origin: glenohumeral centre at rest).

    Forward kinematics with pinocchio (``framesForwardKinematics``) on the
    model of :func:`build_human`; with the girdle on, ``q_rad`` has 9 entries.
    Scenario files use it to place targets and walls relative to the wearer.
    """
    hp = HumanParams(p) if isinstance(p, str) else p
    arm = build_human(hp)
    q = np.asarray(q_rad, dtype=float)
    if q.shape != (arm.nq,):
        raise ParameterError(f"hand_position_m: q_rad must have {arm.nq} entries for {hp.subject}, got shape {q.shape}")
    data = arm.model.createData()
    pin.framesForwardKinematics(arm.model, data, q)
    return data.oMf[arm.frame_id(arm.hand_frame)].translation.copy()


def humeral_elevation_rad(R_humerus: np.ndarray) -> float:
    """Angle of the humerus long axis from hanging straight down [rad].

    The humerus points along the link's -z axis, so the elevation is
    ``arccos(-(R e_z) . (-e_z))`` with R the humerus orientation in the thorax frame.
    """
    d = -np.asarray(R_humerus)[:, 2]
    return float(math.acos(max(-1.0, min(1.0, -d[2]))))


def _gh_rotation(a: float, b: float, c: float) -> np.ndarray:
    """R(-y, a) R(-x, b) R(z, c): the glenohumeral Cardan chart."""
    return pin.utils.rotate("y", -a) @ pin.utils.rotate("x", -b) @ pin.utils.rotate("z", c)


def girdle_posture(p: HumanParams, q_arm: np.ndarray) -> np.ndarray:
    """Complete a 7-DOF arm posture with girdle angles from the shoulder rhythm.

    ``q_arm`` (7,) [rad] is read as the humerothoracic posture (the humerus
    orientation relative to the thorax, as in the model without girdle).  The
    clavicle angles follow ``p.rhythm`` from the humeral elevation, and the
    glenohumeral angles are solved so that the humerus keeps the same
    orientation relative to the thorax: :math:`R_{GH} = R_{clav}^T R_{HT}`,
    decomposed in the glenohumeral chart.  Returns (9,) [rad].
    """
    q_arm = np.asarray(vector("girdle_posture", "q_arm", q_arm, 7))
    R_ht = _gh_rotation(*q_arm[:3])
    elev, prot = p.rhythm.girdle_angles(humeral_elevation_rad(R_ht))
    c = p.clavicle_vector_m()
    e_axis = np.cross(c, (0.0, 0.0, 1.0))
    e_axis /= np.linalg.norm(e_axis)
    R_clav = pin.AngleAxis(elev, e_axis).matrix() @ pin.utils.rotate("z", prot)
    R = R_clav.T @ R_ht
    # R = Ry(alpha) Rx(beta) Rz(gamma) with alpha = -a, beta = -b, gamma = c
    beta = math.asin(max(-1.0, min(1.0, -R[1, 2])))
    alpha = math.atan2(R[0, 2], R[2, 2])
    gamma = math.atan2(R[1, 0], R[1, 1])
    return np.concatenate([[elev, prot, -alpha, -beta, gamma], q_arm[3:]])

