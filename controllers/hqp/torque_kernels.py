r"""Compiled (numba) arithmetic of the HQP controller's torque elimination.

With the dynamics :math:`M \ddot q + h = \tau + \sum_c J_c^T w_c` the torque is the affine function
:math:`\tau = M \ddot q + c` of the joint accelerations, :math:`c = h - \sum_c J_c^T w_c`
(:class:`controllers.hqp.HQPController`). These two functions do, in one call each, the few NumPy
operations of a tick that build the torque-limit rows and read the torque back;
``tests/test_torque_kernels.py`` checks them against those NumPy expressions.
"""

from __future__ import annotations

import numba as nb
import numpy as np

__all__ = ["torque_limit_rows", "clipped_torque"]


@nb.njit(cache=True)
def torque_limit_rows(M, h, cuff_force, tau_max, G, g):
    r"""Write :math:`|M \ddot q + c| \le \tau_{max}` as the rows ``G`` (2 nv, nv), ``g`` (2 nv,); return c.

    ``G = [M; -M]`` and ``g = [tau_max - c; tau_max + c]``, with :math:`c = h - \sum_c J_c^T w_c`
    (``cuff_force``) [N m].
    """
    n = M.shape[0]
    c = np.empty(n)
    for i in range(n):
        c[i] = h[i] - cuff_force[i]
        g[i] = tau_max[i] - c[i]
        g[n + i] = tau_max[i] + c[i]
        for j in range(n):
            G[i, j] = M[i, j]
            G[n + i, j] = -M[i, j]
    return c


@nb.njit(cache=True)
def clipped_torque(M, qdd, c, tau_max):
    r"""The torque :math:`\tau = M \ddot q + c` [N m] clipped to :math:`\pm\tau_{max}`, and whether it is finite.

    The clip only removes the rounding of the solver's hard rows (at most its feasibility tolerance).
    """
    n = M.shape[0]
    tau = np.empty(n)
    finite = True
    for i in range(n):
        acc = 0.0
        for j in range(n):
            acc += M[i, j] * qdd[j]
        t = acc + c[i]
        if not np.isfinite(t):
            finite = False
        tau[i] = min(max(t, -tau_max[i]), tau_max[i])
    return tau, finite
