"""``Level.unchecked`` (the controller's per-tick constructor) builds the same level as the checked one.

Same stacked rows, weights and row labels, and :func:`controllers.hqp.solve_hierarchy`
gives the same answer, which is checked against an independent QP solver
(scipy's SLSQP on the single weighted least-squares level with its inequalities).
"""

from __future__ import annotations

import numpy as np
import pytest

from controllers.hqp import Level, solve_hierarchy


def _entries(rng, n):
    eq = [(rng.normal(size=(3, n)), rng.normal(size=3), 2.0), (rng.normal(size=(4, n)), rng.normal(size=4), 0.5)]
    ineq = [(rng.normal(size=(4, n)), rng.normal(size=4) - 1.0, 1.0)]
    return eq, ineq


def test_unchecked_level_equals_the_checked_level():
    rng = np.random.default_rng(5)
    eq, ineq = _entries(rng, 6)
    a, b = Level(eq=eq, ineq=ineq, name="x"), Level.unchecked(eq=eq, ineq=ineq, name="x")
    for f in ("A", "b", "weights_eq", "C", "d", "weights_ineq"):
        np.testing.assert_array_equal(getattr(a, f), getattr(b, f))
    assert a.n_cols == b.n_cols == 6 and a._weighted == b._weighted and a._unit_eq == b._unit_eq
    assert b.row_label("eq", 4) == a.row_label("eq", 4) == "eq[1] row 1"
    empty = Level.unchecked(name="none")
    assert empty.n_cols is None and empty.A.shape == (0, 0)


def test_unchecked_level_solves_like_the_checked_one_and_like_scipy():
    scipy_opt = pytest.importorskip("scipy.optimize")
    rng = np.random.default_rng(9)
    n = 6
    eq, ineq = _entries(rng, n)
    x_checked = solve_hierarchy([Level(eq=eq, ineq=ineq)], n, regularization=0.0).x
    x_fast = solve_hierarchy([Level.unchecked(eq=eq, ineq=ineq)], n, regularization=0.0).x
    np.testing.assert_allclose(x_fast, x_checked, atol=1e-12)
    # reference: the same level with explicit slacks, min 1/2 sum w ||A x - b||^2 + 1/2 ||v||^2 s.t. C x - d <= v
    A = np.vstack([e[0] * np.sqrt(e[2]) for e in eq])
    b = np.concatenate([e[1] * np.sqrt(e[2]) for e in eq])
    C, d = ineq[0][0], ineq[0][1]
    m = len(d)

    def cost(y):
        r = A @ y[:n] - b
        return 0.5 * r @ r + 0.5 * y[n:] @ y[n:]

    def grad(y):
        return np.concatenate([A.T @ (A @ y[:n] - b), y[n:]])

    res = scipy_opt.minimize(cost, np.zeros(n + m), jac=grad, method="SLSQP", options={"ftol": 1e-15, "maxiter": 1000},
                             constraints=[{"type": "ineq", "fun": lambda y: y[n:] - (C @ y[:n] - d),
                                           "jac": lambda y: np.hstack([-C, np.eye(m)])}])
    assert res.success
    np.testing.assert_allclose(x_fast, res.x[:n], atol=1e-6)
