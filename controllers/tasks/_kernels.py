r"""Compiled (numba) arithmetic of the shipped tasks' rows.

Each function computes, in one call, what a task of :mod:`controllers.tasks.library` writes with a dozen
small NumPy operations; the equations and their sources are in the task's docstring, and
``tests/test_task_kernels.py`` checks every function against those equations written in NumPy. Like every
kernel of the project, these keep everything they call in this file (numba's cache does not see edits to
functions in other files).
"""

from __future__ import annotations

import numba as nb
import numpy as np

__all__ = ["position_limit_bounds", "velocity_limit_bounds", "wall_rows"]


@nb.njit(cache=True)
def _max0(x):
    """``numpy.maximum(x, 0.0)`` for one float, NaN kept."""
    return x if (x >= 0.0 or x != x) else 0.0


@nb.njit(cache=True)
def _min(a, b):
    """``numpy.minimum(a, b)`` for two floats, NaN kept."""
    return a if (a <= b or a != a) else b


@nb.njit(cache=True)
def position_limit_bounds(q, dq, upper, lower, two_a, dt):
    r"""Right-hand sides (2 nv,) of the joint position limits on q̈, upper bounds then lower bounds.

    With the remaining distance :math:`d = \max(q_{max} - m - q, 0)` (upper side; the lower side mirrors
    it with :math:`d = \max(q - q_{min} - m, 0)` and the velocity :math:`-\dot q`), the bound is
    :math:`\min\big((\sqrt{2 a_{brk} d} - \dot q)/\Delta t,\; (d - \dot q \Delta t)/\Delta t^2\big)`
    (:class:`controllers.tasks.JointPositionLimits`). ``upper`` is :math:`q_{max} - m`, ``lower``
    :math:`-(q_{min} + m)`, ``two_a`` is :math:`2 a_{brk}` [rad/s^2].
    """
    nv = q.shape[0]
    out = np.empty(2 * nv)
    dt2 = dt * dt
    for i in range(nv):
        d = _max0(upper[i] - q[i])
        v = dq[i]
        out[i] = _min((np.sqrt(two_a * d) - v) / dt, (d - v * dt) / dt2)
        d = _max0(lower[i] + q[i])
        v = -dq[i]
        out[nv + i] = _min((np.sqrt(two_a * d) - v) / dt, (d - v * dt) / dt2)
    return out


@nb.njit(cache=True)
def velocity_limit_bounds(dq, vmax, dt):
    r"""Right-hand sides (2 nv,) of :math:`\pm(\dot q + \ddot q \Delta t) \le \dot q_{max}` on q̈: upper, then lower."""
    nv = dq.shape[0]
    out = np.empty(2 * nv)
    for i in range(nv):
        out[i] = (vmax[i] - dq[i]) / dt
        out[nv + i] = (vmax[i] + dq[i]) / dt
    return out


@nb.njit(cache=True)
def wall_rows(normals, pens, R, w, J, drift, Minv, dq, alpha, K, B):
    r"""Rows ``(A (k, 2 nv), b (k,))`` of a wall's k touched faces on :math:`x = [\ddot q; \tau]`.

    Per face with unit normal :math:`n` (into the wall) and penetration :math:`p`
    (:class:`controllers.tasks.WallTask`, Khatib 1987 for the operational-space mass):

    .. math::
        m_n\, n^T J \ddot q = n^T R f - K p - B\, n^T J \dot q - m_n\, n^T \dot J \dot q,
        \qquad m_n = \alpha / (n^T J M^{-1} J^T n)

    with ``R`` (3, 3) the hand sensor's orientation, ``w`` (6,) its wrench (force first) in the sensor
    frame, ``J`` (6, nv) the frame Jacobian and ``drift`` (6,) :math:`\dot J \dot q`, both world-aligned
    (linear part first), ``Minv`` (nv, nv) and ``dq`` (nv,).
    """
    k, nv = normals.shape[0], dq.shape[0]
    A = np.zeros((k, 2 * nv))
    b = np.empty(k)
    f0 = R[0, 0] * w[0] + R[0, 1] * w[1] + R[0, 2] * w[2]  # the force in world axes, R f
    f1 = R[1, 0] * w[0] + R[1, 1] * w[1] + R[1, 2] * w[2]
    f2 = R[2, 0] * w[0] + R[2, 1] * w[1] + R[2, 2] * w[2]
    nJ = np.empty(nv)
    for i in range(k):
        n0, n1, n2 = normals[i, 0], normals[i, 1], normals[i, 2]
        for j in range(nv):
            nJ[j] = n0 * J[0, j] + n1 * J[1, j] + n2 * J[2, j]
        inv_mass = 0.0  # n^T J M^-1 J^T n
        speed = 0.0  # n^T J q'
        for j in range(nv):
            row = 0.0
            for m in range(nv):
                row += Minv[j, m] * nJ[m]
            inv_mass += nJ[j] * row
            speed += nJ[j] * dq[j]
        m_n = alpha / inv_mass
        for j in range(nv):
            A[i, j] = m_n * nJ[j]
        b[i] = ((n0 * f0 + n1 * f1 + n2 * f2) - K * pens[i] - B * speed
                - m_n * (n0 * drift[0] + n1 * drift[1] + n2 * drift[2]))
    return A, b
