"""The project's error types.

Every error raised on purpose by exosandbox derives from :class:`SandboxError`
and from the builtin exception a caller would expect, so ``except ValueError``
keeps working.  Messages name the culprit (field, element, value) and say what
was expected, e.g. ``ExoParams.upper_arm_length_m must be in [0.22, 0.4] m,
got 0.1``.
"""

from __future__ import annotations

__all__ = [
    "SandboxError",
    "ParameterError",
    "ModelError",
    "UnknownNameError",
]


class SandboxError(Exception):
    """Base class of every error that exosandbox raises on purpose."""


class ParameterError(SandboxError, ValueError):
    """A parameter is out of range, non-finite or inconsistent with another."""


class ModelError(SandboxError, ValueError):
    """A robot or human description (URDF) is malformed or not physical."""


class UnknownNameError(SandboxError, LookupError):
    """A name (subject, frame, joint, ...) is not among the known ones."""
