"""What we command: controllers that read only what a real exoskeleton senses.

Nothing in this package may import ``sim`` or ``scenarios``: a controller here
must be able to run on hardware unchanged.
"""

from .base import Controller, ControllerContext
from .basic import GravityCompensation, ZeroTorque
from .registry import CONTROLLERS, make_controller

__all__ = ["Controller", "ControllerContext", "GravityCompensation", "ZeroTorque", "CONTROLLERS", "make_controller"]
