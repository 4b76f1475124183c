r"""Compiled (numba) arithmetic of the shipped tasks' rows and of the tick's shared terms.

Each function computes, in one call, what a task of :mod:`controllers.tasks` would write with a dozen
small NumPy operations (the task calls it from its ``rows``, as a user's task may call any helper); the
equations and their sources are in the task's docstring, and ``tests/test_task_kernels.py`` checks
every function against those equations written in NumPy. Like every kernel of the project, these keep
everything they call in this file (numba's cache does not see edits to functions in other files).
"""

from __future__ import annotations

import numba as nb
import numpy as np

__all__ = ["position_limit_bounds", "velocity_limit_bounds", "wall_rows", "hand_point", "plane_faces", "box_faces",
           "sphere_faces", "tick_terms"]


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


# -- the faces a point touches, for the shipped wall shapes --------------------------------
@nb.njit(cache=True)
def hand_point(p, R, w, compliance):
    r"""The wearer's hand point :math:`p + R\,(K_c^{-1} f)` [m]: ``p`` moved by the hand cuff's deflection.

    ``R`` (3, 3) is the hand sensor's orientation, ``w`` (6,) its wrench (force first, in the sensor frame)
    and ``compliance`` (3,) :math:`K_c^{-1}` [m/N] per sensor axis (:class:`controllers.tasks.WallTask`).
    """
    out = np.empty(3)
    c0, c1, c2 = compliance[0] * w[0], compliance[1] * w[1], compliance[2] * w[2]
    for i in range(3):
        out[i] = p[i] + (R[i, 0] * c0 + R[i, 1] * c1 + R[i, 2] * c2)
    return out


@nb.njit(cache=True)
def plane_faces(normal, point, p, normals, pens):
    """Touched faces of :class:`~controllers.tasks.PlaneWall` at ``p``, written into ``normals``/``pens``; their count.

    Penetration :math:`n^T (p - x_0)`, touched when > 0.
    """
    pen = normal[0] * (p[0] - point[0]) + normal[1] * (p[1] - point[1]) + normal[2] * (p[2] - point[2])
    if pen > 0.0:
        normals[0, 0], normals[0, 1], normals[0, 2] = normal[0], normal[1], normal[2]
        pens[0] = pen
        return 1
    return 0


@nb.njit(cache=True)
def box_faces(lower, upper, p, normals, pens):
    """Touched faces of :class:`~controllers.tasks.BoxWall` at ``p`` (at most 3), axis by axis, upper side first."""
    k = 0
    for ax in range(3):
        if p[ax] > upper[ax]:
            normals[k, 0] = normals[k, 1] = normals[k, 2] = 0.0
            normals[k, ax] = 1.0
            pens[k] = p[ax] - upper[ax]
            k += 1
        if p[ax] < lower[ax]:
            normals[k, 0] = normals[k, 1] = normals[k, 2] = 0.0
            normals[k, ax] = -1.0
            pens[k] = lower[ax] - p[ax]
            k += 1
    return k


@nb.njit(cache=True)
def sphere_faces(center, radius, inside, p, normals, pens):
    """The touched face of :class:`~controllers.tasks.SphereWall` at ``p`` (0 or 1).

    Outside-keeping: normal :math:`-u`, penetration :math:`r - |p - c|` when the point is within the sphere;
    inside-keeping: normal :math:`u`, penetration :math:`|p - c| - r` when it is beyond; :math:`u` the unit
    vector from the centre. No face at the centre itself (|p - c| < 1e-12 m).
    """
    d0, d1, d2 = p[0] - center[0], p[1] - center[1], p[2] - center[2]
    dist = np.sqrt(d0 * d0 + d1 * d1 + d2 * d2)
    if dist < 1e-12:
        return 0
    sign = 1.0 if inside else -1.0
    pen = (dist - radius) if inside else (radius - dist)
    if pen > 0.0:
        normals[0, 0], normals[0, 1], normals[0, 2] = sign * (d0 / dist), sign * (d1 / dist), sign * (d2 / dist)
        pens[0] = pen
        return 1
    return 0


# -- the tick's shared terms ---------------------------------------------------------------
@nb.njit(cache=True)
def tick_terms(U, Minv, nle, g, jacobians, wrenches, k):
    r"""The :class:`~controllers.tasks.TickState` terms of one tick as new arrays, from pinocchio's outputs.

    ``U`` (nv, nv) holds the joint-space inertia in its upper triangle (``pinocchio.crba``): returns
    ``(M, Minv, h, g, f)`` with ``M`` its symmetric whole, copies of ``Minv``, ``nle`` (h) and ``g``, and
    the generalized force of the measured cuff wrenches :math:`f = \sum_c J_c^T w_c` over the first ``k``
    rows of ``jacobians`` (k, 6, nv) (each in its sensor's LOCAL frame) and ``wrenches`` (k, 6).
    """
    nv = U.shape[0]
    M = np.empty((nv, nv))
    for i in range(nv):
        for j in range(i, nv):
            M[i, j] = M[j, i] = U[i, j]
    f = np.zeros(nv)
    for c in range(k):
        for r in range(6):
            w = wrenches[c, r]
            for j in range(nv):
                f[j] += jacobians[c, r, j] * w
    return M, Minv.copy(), nle.copy(), g.copy(), f
