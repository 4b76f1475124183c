r"""Compiled (numba) per-level status of a solved tick, for the HQP controller's diagnostics.

After a tick's hierarchy is solved, :func:`level_status` tells for every priority level whether it had rows
(*active*) and whether it is *binding*: an equality row it could not meet,

.. math:: |a_i^T x - b_i| > \epsilon\,(1 + |b_i|),

or an inequality row at (or past) its bound,

.. math:: c_i^T x - d_i \ge -\epsilon\,(1 + |d_i|),

with :math:`\epsilon` the controller's ``binding_tol`` (relative to the row's right-hand side, as the solver's
own ``slack_tol`` is, :class:`~controllers.hqp.HQPParams`). A binding level is one whose rows shape the answer:
an equality level the levels above keep from being met, or an inequality level whose bound the answer sits on
(its bound then limits every level below). One pass over the stacked rows, no temporaries.
"""

from __future__ import annotations

import numba as nb

__all__ = ["level_status"]


@nb.njit(cache=True)
def level_status(x, A, b, eq_off, C, d, in_off, tol, active, binding):
    """Write, for each of the ``active.shape[0]`` first levels of a stack, 1.0 or 0.0 into ``active[k]`` (the
    level has rows) and ``binding[k]`` (module docstring) at the solution ``x``.

    The rows as :class:`~controllers.hqp.LevelStack` stacks them: level k's equality rows ``A[eq_off[k]:eq_off[k +
    1]] x ~ b``, its inequality rows ``C[in_off[k]:in_off[k + 1]] x <= d``; ``tol`` is the relative tolerance.
    """
    n = x.shape[0]
    for k in range(active.shape[0]):
        e0, e1, i0, i1 = eq_off[k], eq_off[k + 1], in_off[k], in_off[k + 1]
        active[k] = 1.0 if e1 > e0 or i1 > i0 else 0.0
        bind = False
        for i in range(e0, e1):
            r = -b[i]
            for j in range(n):
                r += A[i, j] * x[j]
            if abs(r) > tol * (1.0 + abs(b[i])):
                bind = True
                break
        if not bind:
            for i in range(i0, i1):
                r = -d[i]
                for j in range(n):
                    r += C[i, j] * x[j]
                if r >= -tol * (1.0 + abs(d[i])):
                    bind = True
                    break
        binding[k] = 1.0 if bind else 0.0
