"""Tasks: one job each, rows in x = [q̈; τ], stacked in priority levels by the HQP controller.

Every task, shipped or a user's, implements the public :class:`Task` API (``bind(state)``, ``rows(state)``);
:data:`TASKS` names the shipped ones for scenario files.
"""

from types import MappingProxyType

from .assist import AssistAsNeeded, GuidanceTunnel, adapted_stiffness
from .base import Task, constant_rows, q_rows
from .joints import GravityTorque, JointDamping, JointPositionLimits, JointVelocityLimits, Posture
from .paths import HandPath
from .state import TickState, operational_space
from .transparency import Transparency
from .walls import BoxWall, PlaneWall, SphereWall, WallLaw, WallTask

#: Task classes by the names scenario files use (read-only).
TASKS = MappingProxyType({
    "gravity": GravityTorque,
    "joint_limits": JointPositionLimits,
    "velocity_limits": JointVelocityLimits,
    "transparency": Transparency,
    "damping": JointDamping,
    "posture": Posture,
    "wall_plane": PlaneWall,
    "wall_box": BoxWall,
    "wall_sphere": SphereWall,
    "assist_as_needed": AssistAsNeeded,
    "guidance_tunnel": GuidanceTunnel,
})

__all__ = ["TickState", "Task", "TASKS", "BoxWall", "GravityTorque", "JointDamping", "JointPositionLimits",
           "JointVelocityLimits", "PlaneWall", "Posture", "SphereWall", "Transparency", "WallLaw", "WallTask",
           "q_rows", "constant_rows", "operational_space", "AssistAsNeeded", "GuidanceTunnel", "HandPath",
           "adapted_stiffness"]
