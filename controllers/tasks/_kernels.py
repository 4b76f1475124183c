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

__all__ = ["position_limit_bounds", "velocity_limit_bounds", "wall_rows", "hand_point", "plane_faces", "box_faces",
           "sphere_faces", "fill_program"]


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
    out = np.empty(2 * q.shape[0])
    _position_limits_into(q, dq, upper, lower, two_a, dt, out, 0)
    return out


@nb.njit(cache=True)
def _position_limits_into(q, dq, upper, lower, two_a, dt, out, o):
    """:func:`position_limit_bounds` written into ``out[o:o + 2 nv]``."""
    nv = q.shape[0]
    dt2 = dt * dt
    for i in range(nv):
        d = _max0(upper[i] - q[i])
        v = dq[i]
        out[o + i] = _min((np.sqrt(two_a * d) - v) / dt, (d - v * dt) / dt2)
        d = _max0(lower[i] + q[i])
        v = -dq[i]
        out[o + nv + i] = _min((np.sqrt(two_a * d) - v) / dt, (d - v * dt) / dt2)


@nb.njit(cache=True)
def velocity_limit_bounds(dq, vmax, dt):
    r"""Right-hand sides (2 nv,) of :math:`\pm(\dot q + \ddot q \Delta t) \le \dot q_{max}` on q̈: upper, then lower."""
    out = np.empty(2 * dq.shape[0])
    _velocity_limits_into(dq, vmax, dt, out, 0)
    return out


@nb.njit(cache=True)
def _velocity_limits_into(dq, vmax, dt, out, o):
    """:func:`velocity_limit_bounds` written into ``out[o:o + 2 nv]``."""
    nv = dq.shape[0]
    for i in range(nv):
        out[o + i] = (vmax[i] - dq[i]) / dt
        out[o + nv + i] = (vmax[i] + dq[i]) / dt


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
    _wall_rows_into(normals, pens, k, R, w, J, drift, Minv, dq, alpha, K, B, A, b, 0)
    return A, b


@nb.njit(cache=True)
def _wall_rows_into(normals, pens, k, R, w, J, drift, Minv, dq, alpha, K, B, A, b, o):
    """:func:`wall_rows` of the first ``k`` faces written into ``A[o:o + k, :nv]`` and ``b[o:o + k]``."""
    nv = dq.shape[0]
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
            A[o + i, j] = m_n * nJ[j]
        b[o + i] = ((n0 * f0 + n1 * f1 + n2 * f2) - K * pens[i] - B * speed
                    - m_n * (n0 * drift[0] + n1 * drift[1] + n2 * drift[2]))


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


# -- a whole stack in one call (shipped tasks computed, others copied) --------------------
#: task codes of a program (:mod:`controllers.tasks._program`)
GRAVITY, POSITION_LIMITS, VELOCITY_LIMITS, TRANSPARENCY, DAMPING, POSTURE, WALL, EXTERNAL = range(8)
#: wall shapes of a WALL entry
PLANE, BOX, SPHERE = range(3)
#: per wall frame, the layout of a row of ``frames``: R (9, row-major), p (3), w (6), drift (6), J (6 nv)
FRAME_R, FRAME_P, FRAME_W, FRAME_DRIFT, FRAME_J = 0, 9, 12, 18, 24
#: columns of a program's rows
CODE, LEVEL, IS_EQ, PARAMS, FRAME = range(5)


@nb.njit(cache=True)
def _limit_rows_into(C, o, nv):
    """The rows :math:`[I; -I]` (upper bounds, then lower bounds on q̈) into ``C[o:o + 2 nv]``."""
    for i in range(2 * nv):
        for j in range(nv):
            C[o + i, j] = 0.0
    for i in range(nv):
        C[o + i, i] = 1.0
        C[o + nv + i, i] = -1.0


@nb.njit(cache=True)
def fill_program(prog, fp, q, dq, M, Minv, g, cuff_force, c, dt, frames, ext_rows, ext_rhs, ext_spans, A, b, sw, C, d,
                 wi, eq_off, in_off, unit_eq, spans):
    r"""Every level's rows of a stack, with the torque eliminated, in one call.

    What :class:`controllers.hqp_controller.HQPController` writes task by task (each task's ``rows``, then
    :math:`(A_q + A_\tau M)\ddot q = b - A_\tau c`), for a program of the shipped tasks
    (:class:`controllers.tasks._program.TaskProgram`): ``prog`` (T, 5) holds per task, in stack order, its
    code, level, whether it is an equality task, where its parameters start in ``fp`` (weight, square root
    of the weight, then the task's own) and its row of ``frames`` (walls). The state is the tick's
    ``q``, ``dq``, ``M``, ``Minv``, gravity ``g``, the cuff force :math:`\sum_c J_c^T w_c`, and
    :math:`c = h - \sum_c J_c^T w_c`. The equations are those of the tasks' docstrings; every row is
    computed by the same functions as the tasks' own ``rows``.

    Writes the rows into ``A, b, sw`` / ``C, d, wi`` (big enough for every task's largest row count plus
    the final minimum-norm level :math:`[I; M]\ddot q \approx [0; -c]`), the level offsets ``eq_off``,
    ``in_off``, ``unit_eq`` (levels of the program plus the final one) and ``spans`` (T, 2) the rows of
    each task (-1 when it had none this tick). Returns ``(m_e, m_i, rows, finite)``: the equality and
    inequality rows written (the minimum-norm level's included), the task rows among them, and whether every
    row written is finite.

    An ``EXTERNAL`` entry is a task the program cannot compute (a user's task, or a subclass of a shipped
    one): its rows of this tick, already in q̈ (``ext_rows`` (R, nv), ``ext_rhs`` (R,), written by
    :meth:`controllers.hqp_controller.HQPController._external_rows`), are rows ``ext_spans[e]`` of those
    buffers, ``e`` its parameter; they are copied into place as they are.
    """
    nv = q.shape[0]
    n_levels = unit_eq.shape[0] - 1  # the program's levels; the last entry is the minimum-norm level
    normals = np.empty((6, 3))
    pens = np.empty(6)
    m_e = 0
    m_i = 0
    level = 0
    unit = True
    eq_off[0] = 0
    in_off[0] = 0
    for t in range(prog.shape[0]):
        code, lev, is_eq, o = prog[t, CODE], prog[t, LEVEL], prog[t, IS_EQ], prog[t, PARAMS]
        while level < lev:  # close the levels before this task's
            eq_off[level + 1], in_off[level + 1], unit_eq[level] = m_e, m_i, unit
            unit = True
            level += 1
        start = m_e if is_eq else m_i
        m = 0
        if code == GRAVITY:  # tau = g: rows M, right-hand side g - c
            for i in range(nv):
                for j in range(nv):
                    A[start + i, j] = M[i, j]
                b[start + i] = g[i] - c[i]
            m = nv
        elif code == POSITION_LIMITS:  # fp: upper (nv), lower (nv), 2 a_brk
            _limit_rows_into(C, start, nv)
            _position_limits_into(q, dq, fp[o + 2: o + 2 + nv], fp[o + 2 + nv: o + 2 + 2 * nv], fp[o + 2 + 2 * nv],
                                  dt, d, start)
            m = 2 * nv
        elif code == VELOCITY_LIMITS:  # fp: vmax (nv)
            _limit_rows_into(C, start, nv)
            _velocity_limits_into(dq, fp[o + 2: o + 2 + nv], dt, d, start)
            m = 2 * nv
        elif code == TRANSPARENCY:  # fp: 1 - c_inertia
            s = fp[o + 2]
            for i in range(nv):
                for j in range(nv):
                    A[start + i, j] = s * M[i, j]
                b[start + i] = cuff_force[i]
            m = nv
        elif code == DAMPING or code == POSTURE:  # rows I; fp: T, or omega^2, 2 zeta omega, q* (nv)
            for i in range(nv):
                for j in range(nv):
                    A[start + i, j] = 0.0
                A[start + i, i] = 1.0
            if code == DAMPING:
                T = fp[o + 2]
                for i in range(nv):
                    b[start + i] = -dq[i] / T
            else:
                w2, k2 = fp[o + 2], fp[o + 3]
                for i in range(nv):
                    b[start + i] = w2 * (fp[o + 4 + i] - q[i]) - k2 * dq[i]
            m = nv
        elif code == WALL:  # fp: alpha, K, B, has compliance, compliance (3), shape, the shape's parameters
            fr = frames[prog[t, FRAME]]
            R = fr[FRAME_R: FRAME_R + 9].reshape((3, 3))
            p = fr[FRAME_P: FRAME_P + 3]
            w = fr[FRAME_W: FRAME_W + 6]
            if fp[o + 5] != 0.0:
                p = hand_point(p, R, w, fp[o + 6: o + 9])
            shape, gp = fp[o + 9], o + 10
            if shape == PLANE:
                k = plane_faces(fp[gp: gp + 3], fp[gp + 3: gp + 6], p, normals, pens)
            elif shape == BOX:
                k = box_faces(fp[gp: gp + 3], fp[gp + 3: gp + 6], p, normals, pens)
            else:
                k = sphere_faces(fp[gp: gp + 3], fp[gp + 3], fp[gp + 4] != 0.0, p, normals, pens)
            if k:
                _wall_rows_into(normals, pens, k, R, w, fr[FRAME_J: FRAME_J + 6 * nv].reshape((6, nv)),
                                fr[FRAME_DRIFT: FRAME_DRIFT + 6], Minv, dq, fp[o + 2], fp[o + 3], fp[o + 4], A, b,
                                start)
            m = k
        elif code == EXTERNAL:  # fp: the entry's index e among the external tasks; its rows are copied
            e = int(fp[o + 2])
            s0 = ext_spans[e, 0]
            if s0 >= 0:
                m = ext_spans[e, 1] - s0
                rows_out = A if is_eq else C
                rhs_out = b if is_eq else d
                for i in range(m):
                    for j in range(nv):
                        rows_out[start + i, j] = ext_rows[s0 + i, j]
                    rhs_out[start + i] = ext_rhs[s0 + i]
        if m == 0:
            spans[t, 0] = spans[t, 1] = -1
            continue
        spans[t, 0], spans[t, 1] = start, start + m
        if is_eq:
            for i in range(start, start + m):
                sw[i] = fp[o + 1]
            if fp[o] != 1.0:
                unit = False
            m_e += m
        else:
            for i in range(start, start + m):
                wi[i] = fp[o]
            m_i += m
    while level < n_levels:
        eq_off[level + 1], in_off[level + 1], unit_eq[level] = m_e, m_i, unit
        unit = True
        level += 1
    rows = m_e + m_i
    # the minimum-norm level [I; M] qdd ~ [0; -c]: 1/2 ||qdd||^2 + 1/2 ||tau||^2
    for i in range(nv):
        for j in range(nv):
            A[m_e + i, j] = 0.0
            A[m_e + nv + i, j] = M[i, j]
        A[m_e + i, i] = 1.0
        b[m_e + i] = 0.0
        b[m_e + nv + i] = -c[i]
        sw[m_e + i] = sw[m_e + nv + i] = 1.0
    m_e += 2 * nv
    eq_off[n_levels + 1], in_off[n_levels + 1], unit_eq[n_levels] = m_e, m_i, True
    finite = True
    for i in range(m_e):
        for j in range(nv):
            finite = finite and np.isfinite(A[i, j])
        finite = finite and np.isfinite(b[i])
    for i in range(m_i):
        for j in range(nv):
            finite = finite and np.isfinite(C[i, j])
        finite = finite and np.isfinite(d[i])
    return m_e, m_i, rows, finite


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
