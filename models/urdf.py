"""A small URDF writer: plain frozen records in, URDF text out.

URDF (the Unified Robot Description Format, an open XML standard) is the
exchange format of the project: every built-in model is emitted as URDF text,
pinocchio builds its model from that text, and the very same file loads in any
URDF tool (MuJoCo is used in the tests as an independent engine).

Floats are written with ``repr`` so that a file round-trips bit for bit.
"""

from __future__ import annotations

import math
import xml.etree.ElementTree as ET
from dataclasses import dataclass, field, replace
from typing import Literal

import numpy as np
import pinocchio as pin

from .errors import ParameterError
from .inertia import Inertial

__all__ = [
    "Geometry", "Visual", "Link", "Joint", "RobotDescription", "to_urdf", "rpy_from_z_axis", "mirrored",
    "Side", "SIDES",
]

GeometryKind = Literal["cylinder", "box", "sphere"]
Side = Literal["right", "left"]
SIDES: tuple[str, ...] = ("right", "left")
JointKind = Literal["revolute", "fixed", "prismatic"]


@dataclass(frozen=True)
class Geometry:
    """A primitive shape in its own frame.

    ``size`` is ``(radius_m, length_m)`` for a cylinder (axis along local z),
    ``(x_m, y_m, z_m)`` for a box and ``(radius_m,)`` for a sphere.
    """

    kind: GeometryKind
    size: tuple[float, ...]

    def __post_init__(self) -> None:
        n = {"cylinder": 2, "box": 3, "sphere": 1}.get(self.kind)
        if n is None:
            raise ParameterError(f"Geometry.kind must be cylinder, box or sphere, got {self.kind!r}")
        if len(self.size) != n or any(not s > 0 for s in self.size):
            raise ParameterError(f"Geometry {self.kind} needs {n} sizes > 0 m, got {self.size!r}")


@dataclass(frozen=True)
class Visual:
    """A drawn shape: geometry, its placement in the link frame and a colour."""

    geometry: Geometry
    xyz_m: tuple[float, float, float] = (0.0, 0.0, 0.0)
    rpy_rad: tuple[float, float, float] = (0.0, 0.0, 0.0)
    rgba: tuple[float, float, float, float] = (0.7, 0.7, 0.7, 1.0)
    material: str = "grey"


@dataclass(frozen=True)
class Link:
    """A URDF link. ``inertial=None`` makes a massless frame (a named site)."""

    name: str
    inertial: Inertial | None = None
    visuals: tuple[Visual, ...] = ()


@dataclass(frozen=True)
class Joint:
    """A URDF joint; limits are required for ``revolute`` and ``prismatic``.

    Units: positions [rad] or [m], ``effort`` [N m] or [N], ``velocity``
    [rad/s] or [m/s], ``damping`` [N m s/rad], ``friction`` [N m].
    """

    name: str
    kind: JointKind
    parent: str
    child: str
    xyz_m: tuple[float, float, float] = (0.0, 0.0, 0.0)
    rpy_rad: tuple[float, float, float] = (0.0, 0.0, 0.0)
    axis: tuple[float, float, float] = (0.0, 0.0, 1.0)
    lower: float = 0.0
    upper: float = 0.0
    effort: float = 0.0
    velocity: float = 0.0
    damping: float = 0.0
    friction: float = 0.0


@dataclass(frozen=True)
class RobotDescription:
    """A kinematic tree: links and the joints that connect them."""

    name: str
    links: tuple[Link, ...]
    joints: tuple[Joint, ...] = field(default_factory=tuple)

    def __post_init__(self) -> None:
        names = [link.name for link in self.links]
        dup = {n for n in names if names.count(n) > 1}
        if dup:
            raise ParameterError(f"RobotDescription {self.name!r}: duplicate link names {sorted(dup)}")
        known = set(names)
        for j in self.joints:
            for end in (j.parent, j.child):
                if end not in known:
                    raise ParameterError(f"joint {j.name!r} refers to unknown link {end!r}")


def rpy_from_z_axis(axis) -> tuple[float, float, float]:
    r"""URDF roll-pitch-yaw of a rotation that takes local z onto ``axis``.

    URDF composes rpy as :math:`R = R_z(yaw) R_y(pitch) R_x(roll)`; with roll 0
    the image of z is :math:`(\cos y \sin p, \sin y \sin p, \cos p)`.
    """
    a = [float(x) for x in axis]
    n = math.sqrt(sum(x * x for x in a))
    if not n > 0.0:
        raise ParameterError(f"rpy_from_z_axis: axis must be non-zero, got {axis!r}")
    a = [x / n for x in a]
    pitch = math.acos(max(-1.0, min(1.0, a[2])))
    yaw = math.atan2(a[1], a[0]) if abs(math.sin(pitch)) > 1e-12 else 0.0
    return (0.0, pitch, yaw)


def _f(x: float) -> str:
    return repr(float(x))


def _v(xs: tuple[float, ...]) -> str:
    return " ".join(_f(x) for x in xs)


def to_urdf(robot: RobotDescription) -> str:
    """Serialise ``robot`` to URDF text (UTF-8, with an XML declaration)."""
    root = ET.Element("robot", name=robot.name)
    materials: dict[str, tuple[float, ...]] = {}
    for link in robot.links:
        for vis in link.visuals:
            materials.setdefault(vis.material, vis.rgba)
    for mname, rgba in materials.items():
        mat = ET.SubElement(root, "material", name=mname)
        ET.SubElement(mat, "color", rgba=_v(rgba))
    for link in robot.links:
        el = ET.SubElement(root, "link", name=link.name)
        if link.inertial is not None:
            ine = ET.SubElement(el, "inertial")
            ET.SubElement(ine, "origin", xyz=_v(link.inertial.com_m), rpy="0 0 0")
            ET.SubElement(ine, "mass", value=_f(link.inertial.mass_kg))
            ixx, iyy, izz, ixy, ixz, iyz = link.inertial.inertia_kg_m2
            ET.SubElement(
                ine, "inertia",
                ixx=_f(ixx), ixy=_f(ixy), ixz=_f(ixz), iyy=_f(iyy), iyz=_f(iyz), izz=_f(izz),
            )
        for vis in link.visuals:
            v = ET.SubElement(el, "visual")
            ET.SubElement(v, "origin", xyz=_v(vis.xyz_m), rpy=_v(vis.rpy_rad))
            g = ET.SubElement(v, "geometry")
            s = vis.geometry.size
            if vis.geometry.kind == "cylinder":
                ET.SubElement(g, "cylinder", radius=_f(s[0]), length=_f(s[1]))
            elif vis.geometry.kind == "box":
                ET.SubElement(g, "box", size=_v(s))
            else:
                ET.SubElement(g, "sphere", radius=_f(s[0]))
            ET.SubElement(v, "material", name=vis.material)
    for j in robot.joints:
        el = ET.SubElement(root, "joint", name=j.name, type=j.kind)
        ET.SubElement(el, "origin", xyz=_v(j.xyz_m), rpy=_v(j.rpy_rad))
        ET.SubElement(el, "parent", link=j.parent)
        ET.SubElement(el, "child", link=j.child)
        if j.kind != "fixed":
            ET.SubElement(el, "axis", xyz=_v(j.axis))
            ET.SubElement(
                el, "limit",
                lower=_f(j.lower), upper=_f(j.upper), effort=_f(j.effort), velocity=_f(j.velocity),
            )
            if j.damping or j.friction:
                ET.SubElement(el, "dynamics", damping=_f(j.damping), friction=_f(j.friction))
    ET.indent(root, space="  ")
    return '<?xml version="1.0" encoding="utf-8"?>\n' + ET.tostring(root, encoding="unicode") + "\n"


#: Reflection across the x-z (sagittal) plane of the base frame: y -> -y.
_S = np.diag([1.0, -1.0, 1.0])


def _mirror_rpy(rpy: tuple[float, float, float]) -> tuple[float, float, float]:
    """rpy of :math:`S R S` (the mirror image of a rotation is again a rotation)."""
    R = _S @ pin.rpy.rpyToMatrix(*rpy) @ _S
    return tuple(float(x) for x in pin.rpy.matrixToRpy(R))


def _mirror_xyz(xyz: tuple[float, float, float]) -> tuple[float, float, float]:
    return (xyz[0], -xyz[1], xyz[2])


def mirrored(robot: RobotDescription, name: str | None = None) -> RobotDescription:
    r"""The mirror image of ``robot`` across the x-z plane (a right arm becomes a left arm).

    Points map by :math:`S = \mathrm{diag}(1, -1, 1)`, rotations by
    :math:`R \mapsto S R S`, inertia tensors by :math:`I \mapsto S I S`,
    and each joint axis by :math:`a \mapsto -S a`: an axis is a pseudo-vector,
    so with that sign a joint angle of the mirrored arm produces the mirror
    image of the original motion (flexion stays flexion, pronation stays
    pronation).  Joint limits therefore stay as they are.
    """
    links = []
    for link in robot.links:
        ine = link.inertial
        if ine is not None:
            ine = Inertial.from_matrix(ine.mass_kg, _S @ ine.com, _S @ ine.matrix @ _S, ine.name)
        visuals = tuple(replace(v, xyz_m=_mirror_xyz(v.xyz_m), rpy_rad=_mirror_rpy(v.rpy_rad)) for v in link.visuals)
        links.append(Link(link.name, ine, visuals))
    joints = tuple(
        replace(j, xyz_m=_mirror_xyz(j.xyz_m), rpy_rad=_mirror_rpy(j.rpy_rad),
                axis=(-j.axis[0], j.axis[1], -j.axis[2]))
        for j in robot.joints
    )
    return RobotDescription(name or robot.name, tuple(links), joints)
