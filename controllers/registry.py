"""Controllers by name, as the command line and scenario files refer to them."""

from __future__ import annotations

from collections.abc import Callable

from models.errors import UnknownNameError

from .base import Controller
from .basic import GravityCompensation, ZeroTorque

__all__ = ["CONTROLLERS", "make_controller"]

#: Name -> factory of a fresh controller.
CONTROLLERS: dict[str, Callable[[], Controller]] = {
    "zero": ZeroTorque,
    "gravity": GravityCompensation,
}


def make_controller(name: str) -> Controller:
    """A new controller by name; an unknown name lists the known ones."""
    try:
        factory = CONTROLLERS[name]
    except KeyError as e:
        raise UnknownNameError(f"unknown controller {name!r}; controllers are {', '.join(CONTROLLERS)}") from e
    return factory()
