"""Small validation helpers shared by the parameter dataclasses.

Each helper raises :class:`~models.errors.ParameterError` whose message names
``owner.field``, the offending value and the expected range.
"""

from __future__ import annotations

import math
from collections.abc import Sequence

import numpy as np

from .errors import ParameterError


def finite(owner: str, field: str, value: float) -> float:
    """Return ``value`` as float if it is a finite real number."""
    try:
        x = float(value)
    except (TypeError, ValueError) as e:
        raise ParameterError(f"{owner}.{field} must be a real number, got {value!r}") from e
    if not math.isfinite(x):
        raise ParameterError(f"{owner}.{field} must be finite, got {value!r}")
    return x


def positive(owner: str, field: str, value: float, unit: str = "") -> float:
    """Return ``value`` if it is finite and strictly positive."""
    x = finite(owner, field, value)
    if x <= 0.0:
        raise ParameterError(f"{owner}.{field} must be > 0{_u(unit)}, got {value!r}")
    return x


def nonnegative(owner: str, field: str, value: float, unit: str = "") -> float:
    """Return ``value`` if it is finite and >= 0."""
    x = finite(owner, field, value)
    if x < 0.0:
        raise ParameterError(f"{owner}.{field} must be >= 0{_u(unit)}, got {value!r}")
    return x


def in_range(owner: str, field: str, value: float, lo: float, hi: float, unit: str = "") -> float:
    """Return ``value`` if it is finite and in the closed interval ``[lo, hi]``."""
    x = finite(owner, field, value)
    if not lo <= x <= hi:
        raise ParameterError(f"{owner}.{field} must be in [{lo:g}, {hi:g}]{_u(unit)}, got {value!r}")
    return x


def vector(owner: str, field: str, value: Sequence[float], n: int) -> tuple[float, ...]:
    """Return ``value`` as a tuple of ``n`` finite floats."""
    arr = np.asarray(value, dtype=float) if _is_numeric(value) else None
    if arr is None or arr.shape != (n,):
        raise ParameterError(f"{owner}.{field} must be a sequence of {n} numbers, got {value!r}")
    if not np.all(np.isfinite(arr)):
        raise ParameterError(f"{owner}.{field} must be finite, got {value!r}")
    return tuple(float(v) for v in arr)


def _is_numeric(value: object) -> bool:
    try:
        np.asarray(value, dtype=float)
    except (TypeError, ValueError):
        return False
    return True


def _u(unit: str) -> str:
    return f" {unit}" if unit else ""
