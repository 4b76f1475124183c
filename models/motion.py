"""Minimum-jerk point-to-point motion (Flash & Hogan 1985): the polynomial, checked and unchecked.

Generic arithmetic of a rest-to-rest move of any number of coordinates: joint angles
(:class:`sim.physics.intent.JointIntent`, the wearer's intent) or a hand point's Cartesian position
(:class:`controllers.tasks.HandPath`, a therapist's reference path).  Both layers import it from here.

References
----------
.. [1] Flash T., Hogan N. (1985), "The coordination of arm movements: an
   experimentally confirmed mathematical model", *J. Neurosci.* 5(7):1688-1703.
"""

from __future__ import annotations

from collections.abc import Sequence

import numba
import numpy as np

from models.checks import positive
from models.errors import ParameterError

__all__ = ["minimum_jerk", "minimum_jerk_profile", "minimum_jerk_at"]


def minimum_jerk_profile(
    q0: np.ndarray, D: np.ndarray, T: float, t: np.ndarray | float
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Minimum-jerk polynomial without input checks (:func:`minimum_jerk` after its checks).

    ``t`` is a scalar or an (m,) array; outputs have shape ``np.shape(t) + q0.shape``.
    """
    if np.ndim(t) == 0:  # scalar fast path: Python floats, three array operations
        tau = min(max(float(t) / T, 0.0), 1.0)
    else:
        tau = np.clip(np.asarray(t, dtype=float) / T, 0.0, 1.0)[:, None]
    t2 = tau * tau
    s = t2 * tau * (10.0 + tau * (-15.0 + 6.0 * tau))  # 10 tau^3 - 15 tau^4 + 6 tau^5
    ds = 30.0 * t2 * (1.0 - tau) ** 2  # 30 tau^2 - 60 tau^3 + 30 tau^4
    dds = 60.0 * tau * (1.0 - tau) * (1.0 - 2.0 * tau)  # 60 tau - 180 tau^2 + 120 tau^3
    q = q0 + D * s
    dq = D * (ds / T)
    ddq = D * (dds / (T * T))
    return q, dq, ddq


@numba.njit(cache=True)
def _rows(q0, D, s, ds_per_T, dds_per_T2, out):
    """The vector part of :func:`minimum_jerk_profile` at one time, into the rows of ``out`` (3, n).

    ``out[0] = q0 + D s``, ``out[1] = D (ds / T)``, ``out[2] = D (dds / T^2)``: the same operations in the same
    order as the Python reference :func:`minimum_jerk_profile`, so the values are the same bit for bit.
    """
    for i in range(D.shape[0]):
        out[0, i] = q0[i] + D[i] * s
        out[1, i] = D[i] * ds_per_T
        out[2, i] = D[i] * dds_per_T2


def minimum_jerk_at(q0: np.ndarray, D: np.ndarray, T: float, t: float) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """:func:`minimum_jerk_profile` at one time ``t`` [s] (a float): the scalar profile in Python, the rows compiled.

    Returns three rows of one new (3, n) array; bit-identical to :func:`minimum_jerk_profile` (tests compare them).
    """
    tau = min(max(t / T, 0.0), 1.0)
    t2 = tau * tau
    s = t2 * tau * (10.0 + tau * (-15.0 + 6.0 * tau))  # 10 tau^3 - 15 tau^4 + 6 tau^5
    ds = 30.0 * t2 * (1.0 - tau) ** 2  # 30 tau^2 - 60 tau^3 + 30 tau^4
    dds = 60.0 * tau * (1.0 - tau) * (1.0 - 2.0 * tau)  # 60 tau - 180 tau^2 + 120 tau^3
    out = np.empty((3, D.shape[0]))
    _rows(q0, D, s, ds / T, dds / (T * T), out)
    return out[0], out[1], out[2]


def minimum_jerk(
    q0: Sequence[float] | np.ndarray,
    q1: Sequence[float] | np.ndarray,
    duration_s: float,
    t_s: float | np.ndarray,
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Position, velocity and acceleration of a minimum-jerk move from ``q0`` to ``q1``.

    With :math:`\\tau = t / T` and :math:`D = q_1 - q_0`,

    .. math::
        x(t) = q_0 + D \\, (10 \\tau^3 - 15 \\tau^4 + 6 \\tau^5), \\qquad
        \\dot x = \\frac{D}{T} 30 \\tau^2 (1 - \\tau)^2, \\qquad
        \\ddot x = \\frac{D}{T^2} 60 \\tau (1 - \\tau)(1 - 2 \\tau),

    the movement that minimises the integrated squared jerk between two rest
    postures (Flash & Hogan 1985, *J. Neurosci.* 5(7):1688-1703).  Outside
    :math:`[0, T]` the time is clamped: the output is the nearer end posture
    with zero velocity and acceleration.

    Parameters
    ----------
    q0, q1 : (n,) array_like [rad]
        Start and end postures (a scalar counts as n = 1).
    duration_s : float [s]
        Movement time T, > 0.
    t_s : float or (m,) array_like [s]
        Time since the start of the move.

    Returns
    -------
    q, dq, ddq : (n,) ndarray, or (m, n) for an (m,) ``t_s``
        Position [rad], velocity [rad/s] and acceleration [rad/s^2].

    Raises
    ------
    ParameterError
        If the postures differ in length or are not finite, if ``duration_s``
        is not > 0, or if a time is not finite.
    """
    owner = "minimum_jerk"
    a = np.atleast_1d(np.asarray(q0, dtype=float))
    b = np.atleast_1d(np.asarray(q1, dtype=float))
    if a.ndim != 1 or a.shape != b.shape:
        raise ParameterError(f"{owner}.q1 must have the shape of q0 {a.shape}, got {b.shape}")
    if not (np.all(np.isfinite(a)) and np.all(np.isfinite(b))):
        raise ParameterError(f"{owner}.q0 and q1 must be finite, got {q0!r} and {q1!r}")
    T = positive(owner, "duration_s", duration_s, "s")
    t = np.asarray(t_s, dtype=float)
    if t.ndim > 1 or not np.all(np.isfinite(t)):
        raise ParameterError(f"{owner}.t_s must be a finite scalar or 1-D array [s], got {t_s!r}")
    return minimum_jerk_profile(a, b - a, T, t if t.ndim else float(t))
