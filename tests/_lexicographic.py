"""An independent reference for hierarchies of levels: cvxpy (Clarabel), one problem per level.

Each level's optimal slacks are frozen for the levels below: the lexicographic formulation of Kanoun,
Lamiraux & Wieber (2011), written directly in cvxpy, with none of the project's solver code.
"""

from __future__ import annotations

import numpy as np


def cvxpy_lexicographic(entries, n, hard=()):
    """The lexicographic optimum (n,) of ``entries``: per level ``(eq, ineq)`` lists of ``(M, v, w)``.

    ``hard`` holds cvxpy-free pairs ``(G, h)`` of rows ``G x <= h`` that every level keeps.
    """
    import cvxpy as cp

    x = cp.Variable(n)
    kept = [G @ x <= h for G, h in hard]
    for eq, ineq in entries:
        if not eq and not ineq:
            continue
        slacks = [cp.Variable(M.shape[0]) for M, _, _ in ineq]
        cost = sum(w * cp.sum_squares(M @ x - v) for M, v, w in eq) + sum(
            w * cp.sum_squares(s) for s, (_, _, w) in zip(slacks, ineq))
        own = [M @ x - v <= s for s, (M, v, _) in zip(slacks, ineq)]
        cp.Problem(cp.Minimize(cost), kept + own).solve(solver="CLARABEL")
        kept += [M @ x - v == M @ x.value - v for M, v, _ in eq]
        kept += [M @ x - v <= np.maximum(s.value, 0.0) + 1e-9 for s, (M, v, _) in zip(slacks, ineq)]
    return x.value
