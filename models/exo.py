"""A parametric 7-DOF upper-limb exoskeleton, emitted as URDF.

Described here for the right arm; ``side="left"`` gives its mirror image
across the sagittal (x-z) plane, with the same joint names, signs and limits.

Joint order and roles (all revolute, all link frames parallel to the base
frame at q = 0, where the arm hangs at the side with the forearm in
mid-position, palm facing the body):

====  ===================  =======================================  =========
 #    joint                 role                                    axis (q=0)
====  ===================  =======================================  =========
 1    ``exo_shoulder_a``    shoulder, fixed tilted axis u1           u1
 2    ``exo_shoulder_b``    shoulder, normal to u1 and to the arm    u2
 3    ``exo_shoulder_c``    shoulder, humeral long axis              +z
 4    ``exo_elbow``         elbow flexion (+) / extension            -y
 5    ``exo_forearm``       pronation (+) / supination               +z
 6    ``exo_wrist_flex``    wrist flexion (+) / extension            +x
 7    ``exo_wrist_dev``     radial (+) / ulnar deviation             -y
====  ===================  =======================================  =========

Base frame: origin at the shoulder centre, x forward, y to the left, z up.
The three shoulder axes intersect at the shoulder centre.  Axis 1 points
back, out and up (azimuth ``shoulder_axis_azimuth_rad`` behind the frontal
plane, elevation ``shoulder_axis_elevation_rad``); the shoulder is singular
only when the upper arm lies along that line.  With the defaults (35 deg, 30
deg) the hanging arm is 60 deg away from it and reaching forward, sideways,
across the body, to the mouth and behind the head all stay more than 30 deg
away (design choice, checked in the tests).  Joint 2 is singular at
b -/+ 90 deg (b the elevation of axis 1), which its stops avoid.

All defaults are design assumptions of this project (common practice for
research rehabilitation exoskeletons, not a specific device); see each field.

References
----------
.. [NorkinWhite2016] C. C. Norkin, D. J. White, *Measurement of Joint Motion:
   A Guide to Goniometry*, 5th ed., F. A. Davis, 2016, Appendix A, Table A.1,
   AAOS column (American Academy of Orthopaedic Surgeons, *Joint Motion:
   Method of Measuring and Recording*, 1965).
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from pathlib import Path
from types import MappingProxyType

import numpy as np

from .arm import ArmModel, load_arm, read_urdf_file
from .checks import in_range, vector
from .errors import ParameterError
from .inertia import Inertial, combine, cylindrical_tube, solid_box, solid_cylinder
from .sites import DEFAULT_SITES, SiteSpec, check_sites, site_frames
from .urdf import SIDES, Geometry, Joint, Link, RobotDescription, Side, Visual, mirrored, rpy_from_z_axis, to_urdf

__all__ = [
    "ExoParams", "EXO_JOINTS", "exo_description", "exo_urdf", "build_exo", "load_exo", "shoulder_axes",
]

EXO_JOINTS: tuple[str, ...] = (
    "exo_shoulder_a",
    "exo_shoulder_b",
    "exo_shoulder_c",
    "exo_elbow",
    "exo_forearm",
    "exo_wrist_flex",
    "exo_wrist_dev",
)
_LINKS = (
    "exo_shoulder_a_link",
    "exo_shoulder_b_link",
    "exo_upper_arm",
    "exo_forearm_a",
    "exo_forearm_b",
    "exo_wrist_link",
    "exo_hand",
)
_SEGMENT_LINK = MappingProxyType({"upper_arm": "exo_upper_arm", "forearm": "exo_forearm_b", "hand": "exo_hand"})
HAND_FRAME = "exo_hand_point"

_deg = math.radians

# Our own palette: steel-blue frame, graphite actuators, amber cuffs.
_FRAME_RGBA = (0.22, 0.40, 0.64, 1.0)
_MOTOR_RGBA = (0.16, 0.16, 0.18, 1.0)
_CUFF_RGBA = (0.93, 0.62, 0.16, 1.0)


def _seven(owner: str, name: str, value, sign: str = "") -> tuple[float, ...]:
    """Seven finite values, one per joint; ``sign`` is "", ">0" or ">=0"."""
    v = vector(owner, name, value, 7)
    for i, x in enumerate(v):
        if (sign == ">0" and not x > 0.0) or (sign == ">=0" and not x >= 0.0):
            raise ParameterError(
                f"{owner}.{name}[{i}] ({EXO_JOINTS[i]}) must be {sign[:-1]} 0, got {x!r}"
            )
    return v


#: Smallest distance a user-given stop of shoulder joint b may keep from its singular angle [rad].
SHOULDER_SINGULARITY_MARGIN_RAD = _deg(10.0)

_STRICTLY_POSITIVE = ("link_mass_kg", "velocity_limit_rad_s", "torque_limit_Nm")
_NONNEGATIVE = ("armature_kg_m2", "viscous_friction_Nm_s_per_rad", "coulomb_friction_Nm")


@dataclass(frozen=True)
class ExoParams:
    """Parameters of the exoskeleton, SI units, validated on construction.

    Segment lengths are adjustable within :attr:`ADJUSTMENT_RANGES_M`, as on
    a real device; use :meth:`fitted_to` to match a wearer.  Inertial
    parameters come from a simple design (tubes, bars, motor housings whose
    masses are ``link_mass_kg``) unless ``link_inertials`` gives all seven
    explicitly.

    Defaults, all common practice for research rehabilitation exoskeletons
    (design assumptions, no single source):

    * ``link_mass_kg`` totals 7.55 kg of moving mass.
    * ``torque_limit_Nm``: 80 N m for each shoulder joint and 20 N m for each
      wrist joint; 40 N m at the elbow (half the shoulder, about twice the
      static need of a large forearm plus the robot, and within the 30-70 N m
      of adult maximal voluntary elbow flexion torque, from memory); 20 N m
      for pronation/supination, like the wrist (adult maximal pronation
      torque is under 10 N m, from memory).
    * ``velocity_limit_rad_s``: 3 rad/s shoulder, 4 rad/s elbow, 5 rad/s
      forearm and wrist: above the speed of a healthy reach (peak hand speed
      0.5-1.5 m/s), below fast voluntary motion (elbow flexion about
      400-1000 deg/s); typical figures, from memory.
    * position limits: mechanical stops inside the normal human range of
      motion (AAOS 1965, [NorkinWhite2016]_ Table A.1) so the robot cannot take a
      wearer beyond it, and away from the shoulder singularity
      (:meth:`limits_rad`).
    * ``armature_kg_m2``: rotor inertia reflected through the gear,
      J_rotor N^2, e.g. 8e-6 kg m^2 x 100^2 = 0.08 kg m^2 at the shoulder.
    """

    #: Shoulder centre to elbow axis [m].
    upper_arm_length_m: float = 0.284
    #: Elbow axis to wrist centre [m].
    forearm_length_m: float = 0.271
    #: Wrist centre to the centre of the hand grip (the hand point) [m].
    hand_length_m: float = 0.068
    #: Angle of shoulder axis 1 behind the frontal plane [rad].
    shoulder_axis_azimuth_rad: float = _deg(35.0)
    #: Angle of shoulder axis 1 above the horizontal [rad].
    shoulder_axis_elevation_rad: float = _deg(30.0)
    #: Mass of each moving link, in joint order [kg].
    link_mass_kg: tuple[float, ...] = (1.8, 1.6, 2.0, 0.7, 0.8, 0.3, 0.35)
    #: Seven explicit inertials (link frames) that override the design; None keeps it.
    link_inertials: tuple[Inertial, ...] | None = None
    #: Lower / upper joint stops [rad]; None takes the design defaults of :meth:`limits_rad`.
    position_lower_rad: tuple[float, ...] | None = None
    position_upper_rad: tuple[float, ...] | None = None
    velocity_limit_rad_s: tuple[float, ...] = (3.0, 3.0, 3.0, 4.0, 5.0, 5.0, 5.0)
    torque_limit_Nm: tuple[float, ...] = (80.0, 80.0, 80.0, 40.0, 20.0, 20.0, 20.0)
    armature_kg_m2: tuple[float, ...] = (0.08, 0.08, 0.05, 0.04, 0.01, 0.005, 0.005)
    viscous_friction_Nm_s_per_rad: tuple[float, ...] = (0.4, 0.4, 0.3, 0.25, 0.1, 0.05, 0.05)
    coulomb_friction_Nm: tuple[float, ...] = (0.6, 0.6, 0.4, 0.35, 0.15, 0.08, 0.08)
    #: Cuff sites on the robot.
    sites: tuple[SiteSpec, ...] = field(default=DEFAULT_SITES)
    #: Which arm: "right", or "left" (the mirror image across the sagittal plane).
    side: Side = "right"

    #: Adjustment range of each length (design assumption, covers f5 to m95).
    ADJUSTMENT_RANGES_M = {
        "upper_arm_length_m": (0.20, 0.36),
        "forearm_length_m": (0.18, 0.34),
        "hand_length_m": (0.03, 0.12),
    }

    def __post_init__(self) -> None:
        o = "ExoParams"
        if self.side not in SIDES:
            raise ParameterError(f"{o}.side must be 'right' or 'left', got {self.side!r}")
        for name, (lo, hi) in self.ADJUSTMENT_RANGES_M.items():
            object.__setattr__(self, name, in_range(o, name, getattr(self, name), lo, hi, "m"))
        object.__setattr__(
            self, "shoulder_axis_azimuth_rad",
            in_range(o, "shoulder_axis_azimuth_rad", self.shoulder_axis_azimuth_rad, 0.0, _deg(80), "rad"),
        )
        object.__setattr__(
            self, "shoulder_axis_elevation_rad",
            in_range(o, "shoulder_axis_elevation_rad", self.shoulder_axis_elevation_rad,
                     _deg(-60), _deg(60), "rad"),
        )
        for name in _STRICTLY_POSITIVE:
            object.__setattr__(self, name, _seven(o, name, getattr(self, name), ">0"))
        for name in _NONNEGATIVE:
            object.__setattr__(self, name, _seven(o, name, getattr(self, name), ">=0"))
        for name in ("position_lower_rad", "position_upper_rad"):
            if getattr(self, name) is not None:
                object.__setattr__(self, name, _seven(o, name, getattr(self, name)))
        lower, upper = self.limits_rad()
        for i, (lo, hi) in enumerate(zip(lower, upper)):
            if not lo < hi:
                raise ParameterError(
                    f"{o}.position_lower_rad[{i}] ({EXO_JOINTS[i]}) = {lo!r} must be below "
                    f"position_upper_rad[{i}] = {hi!r}"
                )
            if not (lo <= 0.0 <= hi):
                raise ParameterError(
                    f"{o}: the zero posture must lie inside the limits of {EXO_JOINTS[i]}, "
                    f"got [{lo!r}, {hi!r}] rad"
                )
        b = self.shoulder_axis_elevation_rad
        margin = SHOULDER_SINGULARITY_MARGIN_RAD
        if lower[1] < b - math.pi / 2 + margin or upper[1] > b + math.pi / 2 - margin:
            raise ParameterError(
                f"{o}: limits of exo_shoulder_b [{lower[1]!r}, {upper[1]!r}] rad come within "
                f"{math.degrees(margin):g} deg of the shoulder singularity at elevation "
                f"{b!r} -/+ pi/2 rad (upper arm along axis 1)"
            )
        if self.link_inertials is not None:
            li = tuple(self.link_inertials)
            if len(li) != 7 or not all(isinstance(x, Inertial) for x in li):
                raise ParameterError(f"{o}.link_inertials must be 7 Inertial records or None")
            object.__setattr__(self, "link_inertials", li)
        object.__setattr__(self, "sites", check_sites(o, self.sites))

    @classmethod
    def fitted_to(cls, upper_arm_length_m: float, forearm_length_m: float, hand_grip_m: float,
                  **overrides) -> ExoParams:
        """Exoskeleton with its segment lengths set to a wearer's.

        ``hand_grip_m`` is the wearer's wrist-to-grip distance.  Other fields
        may be given as keywords.
        """
        return cls(
            upper_arm_length_m=upper_arm_length_m,
            forearm_length_m=forearm_length_m,
            hand_length_m=hand_grip_m,
            **overrides,
        )

    def limits_rad(self) -> tuple[tuple[float, ...], tuple[float, ...]]:
        """Joint stops (lower, upper), 7 each [rad]: the given ones, or the design defaults.

        Defaults, deg: shoulder a -55..170, shoulder c -85..65, elbow 0..145,
        forearm -75..75, wrist flexion -65..75, deviation -25..18 (inside the
        AAOS ranges, [NorkinWhite2016]_ Table A.1).  Shoulder b is singular at b -/+ 90 deg
        (b = ``shoulder_axis_elevation_rad``: the upper arm lies along axis 1),
        so its default range keeps 20 deg away: [max(-60, b - 70), min(80, b + 70)] deg.
        """
        b = math.degrees(self.shoulder_axis_elevation_rad)
        lo = (-55.0, max(-60.0, b - 70.0), -85.0, 0.0, -75.0, -65.0, -25.0)
        hi = (170.0, min(80.0, b + 70.0), 65.0, 145.0, 75.0, 75.0, 18.0)
        lower = self.position_lower_rad if self.position_lower_rad is not None else tuple(map(_deg, lo))
        upper = self.position_upper_rad if self.position_upper_rad is not None else tuple(map(_deg, hi))
        return lower, upper

    @property
    def total_mass_kg(self) -> float:
        """Total moving mass [kg]."""
        return float(sum(i.mass_kg for i in self.inertials()))

    def inertials(self) -> tuple[Inertial, ...]:
        """The seven link inertials, in the link frames (explicit or from the design)."""
        if self.link_inertials is not None:
            return self.link_inertials
        return _design_inertials(self)


def shoulder_axes(p: ExoParams) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Unit axes (u1, u2, u3) of the three shoulder joints at q = 0, base frame.

    For a left arm these are the mirror images :math:`-S u` of the right
    arm's (:func:`models.urdf.mirrored`); the right arm's are below.
    """
    axes = _right_shoulder_axes(p)
    if p.side == "left":
        return tuple(np.array([-u[0], u[1], -u[2]]) for u in axes)
    return axes


def _right_shoulder_axes(p: ExoParams) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Unit axes (u1, u2, u3) of the right arm's shoulder joints at q = 0, base frame.

    ``u1`` is tilted by azimuth a and elevation b:
    :math:`u_1 = (-\\sin a \\cos b, -\\cos a \\cos b, \\sin b)`;
    ``u3 = +z`` (the hanging humerus, internal rotation positive);
    ``u2 = -(u_1 \\times d)/|u_1 \\times d|`` with ``d = -z`` is normal to both,
    signed so that positive joint 2 raises the arm sideways.
    """
    a, b = p.shoulder_axis_azimuth_rad, p.shoulder_axis_elevation_rad
    u1 = np.array([-math.sin(a) * math.cos(b), -math.cos(a) * math.cos(b), math.sin(b)])
    d = np.array([0.0, 0.0, -1.0])
    u2 = -np.cross(u1, d)
    u2 /= np.linalg.norm(u2)
    return u1, u2, np.array([0.0, 0.0, 1.0])


def _rod(mass: float, a: np.ndarray, b: np.ndarray, radius: float, name: str) -> Inertial:
    """Solid rod from point a to point b."""
    a, b = np.asarray(a, float), np.asarray(b, float)
    return solid_cylinder(mass, radius, float(np.linalg.norm(b - a)), b - a, (a + b) / 2, name)


def _design_inertials(p: ExoParams) -> tuple[Inertial, ...]:
    """Inertials of the default mechanical design (shapes in :func:`_design_shapes`)."""
    out = []
    for i, parts in enumerate(_design_shapes(p)):
        m = p.link_mass_kg[i]
        out.append(combine([fn(frac * m) for frac, fn, _vis in parts], name=f"ExoParams link {_LINKS[i]}"))
    return tuple(out)


def _design_shapes(p: ExoParams):
    """Per link: list of (mass fraction, inertial factory, visual) in the link frame."""
    u1, u2, _ = _right_shoulder_axes(p)
    L1, L2, L3 = p.upper_arm_length_m, p.forearm_length_m, p.hand_length_m
    r_sh = 0.15  # radius of the shoulder actuators from the shoulder centre [m]
    ring_z = -0.10  # humeral-rotation ring below the shoulder centre [m]
    lat = -0.085  # lateral offset of the upper-arm bar [m]
    site = {s.name: s for s in p.sites}
    ua_cuff_z = -site["upper_arm"].fraction * L1 if "upper_arm" in site else -0.5 * L1
    fa_cuff_z = -site["forearm"].fraction * L2 if "forearm" in site else -0.6 * L2

    def vis_cyl(r, length, center, axis, rgba, mat):
        return Visual(Geometry("cylinder", (r, length)), tuple(center), rpy_from_z_axis(axis), rgba, mat)

    def vis_box(size, center, rgba=_FRAME_RGBA, mat="exo_frame"):
        return Visual(Geometry("box", tuple(size)), tuple(center), (0.0, 0.0, 0.0), rgba, mat)

    def vis_rod(a, b, r):
        a, b = np.asarray(a, float), np.asarray(b, float)
        return vis_cyl(r, float(np.linalg.norm(b - a)), (a + b) / 2, b - a, _FRAME_RGBA, "exo_frame")

    m1c = r_sh * u2
    m2c = np.array([0.0, 0.0, ring_z])
    elbow = np.array([0.0, 0.0, -L1])
    wrist = np.array([0.0, 0.0, -L2])
    grip = np.array([0.0, 0.0, -L3])
    shapes = [
        [  # 1: carries the joint-2 actuator on axis u2
            (0.75, lambda m: solid_cylinder(m, 0.045, 0.08, u2, m1c, "motor2"),
             vis_cyl(0.045, 0.08, m1c, u2, _MOTOR_RGBA, "exo_motor")),
            (0.25, lambda m: _rod(m, r_sh * u1, m1c, 0.015, "arc1"), vis_rod(r_sh * u1, m1c, 0.015)),
        ],
        [  # 2: carries the humeral-rotation ring
            (0.75, lambda m: cylindrical_tube(m, 0.065, 0.085, 0.05, "z", m2c, "ring3"),
             vis_cyl(0.085, 0.05, m2c, (0, 0, 1), _MOTOR_RGBA, "exo_motor")),
            (0.25, lambda m: _rod(m, m1c, m2c + (0.0, lat, 0.0), 0.015, "arc2"),
             vis_rod(m1c, m2c + (0.0, lat, 0.0), 0.015)),
        ],
        [  # 3: upper-arm bar, elbow actuator, upper-arm cuff shell
            (0.35, lambda m: _rod(m, (0, lat, ring_z), (0, lat, -L1), 0.015, "bar3"),
             vis_rod((0, lat, ring_z), (0, lat, -L1), 0.015)),
            (0.50, lambda m: solid_cylinder(m, 0.045, 0.06, "y", elbow + (0, lat - 0.01, 0), "motor4"),
             vis_cyl(0.045, 0.06, elbow + (0, lat - 0.01, 0), (0, 1, 0), _MOTOR_RGBA, "exo_motor")),
            (0.15, lambda m: cylindrical_tube(m, 0.055, 0.065, 0.08, "z", (0, 0, ua_cuff_z), "cuff3"),
             vis_cyl(0.065, 0.08, (0, 0, ua_cuff_z), (0, 0, 1), _CUFF_RGBA, "exo_cuff")),
        ],
        [  # 4: elbow bracket and the pronation ring stator
            (0.70, lambda m: cylindrical_tube(m, 0.045, 0.065, 0.04, "z", (0, 0, -0.08), "ring5"),
             vis_cyl(0.065, 0.04, (0, 0, -0.08), (0, 0, 1), _MOTOR_RGBA, "exo_motor")),
            (0.30, lambda m: _rod(m, (0, lat, 0), (0, -0.065, -0.08), 0.012, "bracket4"),
             vis_rod((0, lat, 0), (0, -0.065, -0.08), 0.012)),
        ],
        [  # 5: forearm bar, wrist actuator, forearm cuff shell
            (0.35, lambda m: _rod(m, (0, -0.055, -0.08), (0, -0.055, -L2), 0.012, "bar5"),
             vis_rod((0, -0.055, -0.08), (0, -0.055, -L2), 0.012)),
            (0.45, lambda m: solid_cylinder(m, 0.03, 0.05, "x", wrist + (-0.05, 0, 0), "motor6"),
             vis_cyl(0.03, 0.05, wrist + (-0.05, 0, 0), (1, 0, 0), _MOTOR_RGBA, "exo_motor")),
            (0.20, lambda m: cylindrical_tube(m, 0.042, 0.05, 0.07, "z", (0, 0, fa_cuff_z), "cuff5"),
             vis_cyl(0.05, 0.07, (0, 0, fa_cuff_z), (0, 0, 1), _CUFF_RGBA, "exo_cuff")),
        ],
        [  # 6: bracket holding the deviation actuator
            (0.80, lambda m: solid_cylinder(m, 0.025, 0.04, "y", (0, -0.045, 0), "motor7"),
             vis_cyl(0.025, 0.04, (0, -0.045, 0), (0, 1, 0), _MOTOR_RGBA, "exo_motor")),
            (0.20, lambda m: solid_box(m, (0.03, 0.02, 0.03), (-0.03, -0.03, 0), "bracket6"),
             vis_box((0.03, 0.02, 0.03), (-0.03, -0.03, 0))),
        ],
        [  # 7: hand grip handle (axis forward in mid-position) and its bracket
            (0.70, lambda m: solid_cylinder(m, 0.017, 0.11, "x", grip, "handle"),
             vis_cyl(0.017, 0.11, grip, (1, 0, 0), _CUFF_RGBA, "exo_cuff")),
            (0.30, lambda m: solid_box(m, (0.02, 0.02, L3), (0.06, 0, -L3 / 2), "bracket7"),
             vis_box((0.02, 0.02, L3), (0.06, 0, -L3 / 2))),
        ],
    ]
    return shapes


def exo_description(p: ExoParams | None = None) -> RobotDescription:
    """The exoskeleton as a :class:`~models.urdf.RobotDescription`."""
    p = ExoParams() if p is None else p
    u1, u2, u3 = _right_shoulder_axes(p)
    L1, L2, L3 = p.upper_arm_length_m, p.forearm_length_m, p.hand_length_m
    inertials = p.inertials()
    lower, upper = p.limits_rad()
    shapes = _design_shapes(p)
    axes = [u1, u2, u3, (0, -1, 0), (0, 0, 1), (1, 0, 0), (0, -1, 0)]
    origins = [(0, 0, 0), (0, 0, 0), (0, 0, 0), (0, 0, -L1), (0, 0, 0), (0, 0, -L2), (0, 0, 0)]
    base_visuals = (
        Visual(Geometry("box", (0.06, 0.10, 0.30)), (-0.20, -0.12, 0.05), (0, 0, 0), _FRAME_RGBA, "exo_frame"),
        Visual(Geometry("cylinder", (0.05, 0.09)), tuple(0.15 * u1), rpy_from_z_axis(u1), _MOTOR_RGBA, "exo_motor"),
    )
    links = [Link("exo_base", None, base_visuals)]
    joints = []
    parent = "exo_base"
    for i in range(7):
        vis = tuple(v for _f, _fn, v in shapes[i]) if p.link_inertials is None else ()
        links.append(Link(_LINKS[i], inertials[i], vis))
        joints.append(
            Joint(
                name=EXO_JOINTS[i], kind="revolute", parent=parent, child=_LINKS[i],
                xyz_m=tuple(float(x) for x in origins[i]), axis=tuple(float(x) for x in axes[i]),
                lower=lower[i], upper=upper[i],
                effort=p.torque_limit_Nm[i], velocity=p.velocity_limit_rad_s[i],
                damping=p.viscous_friction_Nm_s_per_rad[i], friction=p.coulomb_friction_Nm[i],
            )
        )
        parent = _LINKS[i]
    site_links, site_joints = site_frames("exo", p.sites, _SEGMENT_LINK, {"upper_arm": L1, "forearm": L2, "hand": L3})
    links += site_links
    joints += site_joints
    links.append(Link(HAND_FRAME))
    joints.append(Joint(f"{HAND_FRAME}_mount", "fixed", "exo_hand", HAND_FRAME, (0.0, 0.0, -L3)))
    right = RobotDescription("exosandbox_exo", tuple(links), tuple(joints))
    return mirrored(right) if p.side == "left" else right


def exo_urdf(p: ExoParams | None = None) -> str:
    """URDF text of the exoskeleton."""
    return to_urdf(exo_description(p))


def build_exo(p: ExoParams | None = None) -> ArmModel:
    """Pinocchio model of the exoskeleton, with armature, friction and limits set."""
    p = ExoParams() if p is None else p
    return load_arm(
        exo_urdf(p),
        sites={s.name: s.frame("exo") for s in p.sites},
        hand_frame=HAND_FRAME,
        joint_names=EXO_JOINTS,
        armature_kg_m2=p.armature_kg_m2,
        source="exosandbox_exo",
    )


def load_exo(
    urdf: str | Path,
    *,
    sites: Mapping[str, str],
    hand_frame: str,
    joint_names: Sequence[str] | None = None,
    armature_kg_m2: Sequence[float] | None = None,
) -> ArmModel:
    """Load a user's own exoskeleton URDF.

    Parameters
    ----------
    urdf : str or Path
        A path to a ``.urdf`` file, or URDF text (anything starting with ``<``).
    sites : mapping str -> str
        Cuff site name (``"upper_arm"``, ``"forearm"``, ``"hand"``, or your
        own) to the frame (URDF link) that carries it.
    hand_frame : str
        Frame of the hand point.
    joint_names : sequence of str, optional
        Required joints in chain order; every movable joint must be revolute.
    armature_kg_m2 : sequence of float, optional
        Reflected rotor inertia per joint [kg m^2]; URDF cannot carry it.

    Every check of :func:`models.arm.load_arm` applies: a missing frame, a
    non-revolute joint, a non-physical mass or inertia, an inconsistent limit
    is a :class:`~models.errors.ModelError` or
    :class:`~models.errors.UnknownNameError` that names it.
    """
    if isinstance(urdf, Path) or not str(urdf).lstrip().startswith("<"):
        source = str(urdf)
        text = read_urdf_file(urdf)
    else:
        source, text = "<urdf text>", str(urdf)
    return load_arm(
        text, sites=sites, hand_frame=hand_frame, joint_names=joint_names,
        armature_kg_m2=armature_kg_m2, source=source,
    )
