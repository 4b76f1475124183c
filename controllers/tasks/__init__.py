"""Tasks: one job each, rows in x = [q̈; τ], stacked in priority levels by the HQP controller."""

from ._common import TickState
from .base import Task
from .library import (
    BoxWall,
    GravityTorque,
    JointDamping,
    JointPositionLimits,
    JointVelocityLimits,
    PlaneWall,
    Posture,
    SphereWall,
    Transparency,
    WallLaw,
    WallTask,
)

#: Task classes by the names scenario files use.
TASKS = {
    "gravity": GravityTorque,
    "joint_limits": JointPositionLimits,
    "velocity_limits": JointVelocityLimits,
    "transparency": Transparency,
    "damping": JointDamping,
    "posture": Posture,
    "wall_plane": PlaneWall,
    "wall_box": BoxWall,
    "wall_sphere": SphereWall,
}

__all__ = ["TickState", "Task", "TASKS", "BoxWall", "GravityTorque", "JointDamping", "JointPositionLimits",
           "JointVelocityLimits", "PlaneWall", "Posture", "SphereWall", "Transparency", "WallLaw", "WallTask"]
