"""A generic serial chain of revolute joints, for scaling studies (any number of joints).

The chain hangs from a fixed base along -z.  Joint i rotates about the local
axis ``axes[i % len(axes)]`` (by default y, x, z in turn, so that every
direction of motion appears); each link is a solid cylinder of the same mass
and length, its joint at the top end, the next joint at the bottom end.  The
last link carries a massless ``chain_tip`` frame at its bottom end, used as the
hand point.  The model is emitted as URDF through :mod:`models.urdf` and
loaded with :func:`models.arm.load_arm`, like every built-in arm.

The default link numbers are common practice for a light research arm, not
the data of a device: 0.1 m and 0.4 kg per link, limits of ±2.5 rad, 3 rad/s
and 40 N m, rotor inertia 0.01 kg m^2 per joint.
"""

from __future__ import annotations

import operator
from dataclasses import dataclass

from .arm import ArmModel, load_arm
from .checks import nonnegative, positive
from .errors import ParameterError
from .inertia import solid_cylinder
from .urdf import Joint, Link, RobotDescription, to_urdf

__all__ = ["ChainParams", "chain_description", "chain_urdf", "build_chain", "CHAIN_TIP"]

#: Name of the frame at the free end of the chain.
CHAIN_TIP = "chain_tip"


@dataclass(frozen=True)
class ChainParams:
    """A serial chain of identical revolute links.

    Attributes
    ----------
    n_joints : int
        Number of revolute joints, >= 1.
    link_length_m, link_mass_kg, link_radius_m : float
        Length, mass and radius of each link (a solid cylinder along -z).
    position_limit_rad, velocity_limit_rad_s, torque_limit_Nm : float
        Symmetric limits of every joint.
    armature_kg_m2 : float
        Reflected rotor inertia of every joint (>= 0).
    axes : tuple of (3,) tuples
        Joint axes in turn, in the link frame (non-zero).
    """

    n_joints: int = 7
    link_length_m: float = 0.1
    link_mass_kg: float = 0.4
    link_radius_m: float = 0.02
    position_limit_rad: float = 2.5
    velocity_limit_rad_s: float = 3.0
    torque_limit_Nm: float = 40.0
    armature_kg_m2: float = 0.01
    axes: tuple = ((0.0, 1.0, 0.0), (1.0, 0.0, 0.0), (0.0, 0.0, 1.0))

    def __post_init__(self) -> None:
        o = "ChainParams"
        try:
            n = operator.index(self.n_joints)
        except TypeError as e:
            raise ParameterError(f"{o}.n_joints must be an integer >= 1, got {self.n_joints!r}") from e
        if n < 1 or isinstance(self.n_joints, bool):
            raise ParameterError(f"{o}.n_joints must be an integer >= 1, got {self.n_joints!r}")
        object.__setattr__(self, "n_joints", n)
        for name, unit in (("link_length_m", "m"), ("link_mass_kg", "kg"), ("link_radius_m", "m"),
                           ("position_limit_rad", "rad"), ("velocity_limit_rad_s", "rad/s"),
                           ("torque_limit_Nm", "N m")):
            object.__setattr__(self, name, positive(o, name, getattr(self, name), unit))
        object.__setattr__(self, "armature_kg_m2", nonnegative(o, "armature_kg_m2", self.armature_kg_m2, "kg m^2"))
        if not self.axes:
            raise ParameterError(f"{o}.axes must hold at least one axis")
        axes = []
        for i, ax in enumerate(self.axes):
            v = tuple(float(x) for x in ax)
            if len(v) != 3 or not any(v):
                raise ParameterError(f"{o}.axes[{i}] must be a non-zero 3-vector, got {ax!r}")
            axes.append(v)
        object.__setattr__(self, "axes", tuple(axes))


def _joint_names(p: ChainParams) -> tuple[str, ...]:
    return tuple(f"chain_j{i}" for i in range(p.n_joints))


def chain_description(p: ChainParams | None = None) -> RobotDescription:
    """The chain as a :class:`~models.urdf.RobotDescription`."""
    p = ChainParams() if p is None else p
    L = p.link_length_m
    links = [Link("chain_base")]
    joints = []
    parent = "chain_base"
    for i, name in enumerate(_joint_names(p)):
        child = f"chain_link{i}"
        inertial = solid_cylinder(p.link_mass_kg, p.link_radius_m, L, "z", (0.0, 0.0, -L / 2), name=child)
        links.append(Link(child, inertial))
        joints.append(Joint(
            name=name, kind="revolute", parent=parent, child=child,
            xyz_m=(0.0, 0.0, 0.0 if i == 0 else -L), axis=p.axes[i % len(p.axes)],
            lower=-p.position_limit_rad, upper=p.position_limit_rad,
            effort=p.torque_limit_Nm, velocity=p.velocity_limit_rad_s,
        ))
        parent = child
    links.append(Link(CHAIN_TIP))
    joints.append(Joint(f"{CHAIN_TIP}_mount", "fixed", parent, CHAIN_TIP, (0.0, 0.0, -L)))
    return RobotDescription(f"exosandbox_chain{p.n_joints}", tuple(links), tuple(joints))


def chain_urdf(p: ChainParams | None = None) -> str:
    """URDF text of the chain."""
    return to_urdf(chain_description(p))


def build_chain(p: ChainParams | None = None) -> ArmModel:
    """Pinocchio model of the chain (limits and rotor inertia set), hand point at :data:`CHAIN_TIP`."""
    p = ChainParams() if p is None else p
    return load_arm(chain_urdf(p), hand_frame=CHAIN_TIP, joint_names=_joint_names(p),
                    armature_kg_m2=[p.armature_kg_m2] * p.n_joints, source=f"exosandbox_chain{p.n_joints}")
