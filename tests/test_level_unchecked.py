"""``Level.unchecked`` and ``LevelStack`` (the controller's per-tick constructors) build the same levels as the
checked constructor.

Same stacked rows, weights and row labels, and :func:`controllers.hqp.solve_hierarchy`
gives the same answer, which is checked against an independent QP solver
(scipy's SLSQP on the single weighted least-squares level with its inequalities; cvxpy on a three-level
hierarchy solved level by level).
"""

from __future__ import annotations

import numpy as np
import pytest

from controllers.hqp import HQPParams, Level, LevelStack, solve_hierarchy
from sim.experiments.lexicographic import cvxpy_lexicographic


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


def _three_levels(rng, n):
    """Inequalities on top, two weighted equality tasks, then an empty level and a plain equality level."""
    top = ([], [(rng.normal(size=(5, n)), rng.normal(size=5) - 0.5, 1.0)])
    mid = ([(rng.normal(size=(2, n)), rng.normal(size=2), 3.0), (rng.normal(size=(2, n)), rng.normal(size=2), 0.5)],
           [(rng.normal(size=(2, n)), rng.normal(size=2), 2.0)])
    low = ([(np.eye(n), np.zeros(n), 1.0)], [])
    return [top, mid, ([], []), low]


def test_level_stack_holds_the_levels_of_the_checked_constructor():
    rng = np.random.default_rng(21)
    n = 6
    entries = _three_levels(rng, n)
    names = ("limits", "tasks", "nothing", "rest")
    stack = LevelStack.from_entries(entries, n, names)
    levels = [Level(eq=eq, ineq=ineq, name=nm) for (eq, ineq), nm in zip(entries, names)]
    assert len(stack) == 4 and stack.n_cols == n
    for k, level in enumerate(levels):
        lazy = stack[k]
        assert lazy.name == level.name
        for f in ("A", "b", "weights_eq", "C", "d", "weights_ineq"):
            np.testing.assert_array_equal(getattr(lazy, f), getattr(level, f))
        assert stack.unit_eq[k] == level._unit_eq
        np.testing.assert_array_equal(stack.A[stack.eq_off[k]: stack.eq_off[k + 1]], level.A.reshape(-1, n))
        np.testing.assert_array_equal(stack.C[stack.in_off[k]: stack.in_off[k + 1]], level.C.reshape(-1, n))
    np.testing.assert_allclose(stack.sw ** 2, np.concatenate([lv.weights_eq for lv in levels]), rtol=1e-15)
    np.testing.assert_array_equal(stack.wi, np.concatenate([lv.weights_ineq for lv in levels]))
    assert stack[1].row_label("eq", 3) == levels[1].row_label("eq", 3) == "eq[1] row 1"
    other = LevelStack.from_levels(levels, n)
    assert other[2] is levels[2]
    for f in ("A", "b", "sw", "eq_off", "unit_eq", "C", "d", "wi", "in_off"):
        np.testing.assert_array_equal(getattr(other, f), getattr(stack, f))


def test_a_level_stack_solves_like_its_list_of_levels_and_like_cvxpy():
    pytest.importorskip("cvxpy")
    rng = np.random.default_rng(22)
    n = 6
    entries = _three_levels(rng, n)
    params = HQPParams()
    stack = LevelStack.from_entries(entries, n, ("limits", "tasks", "nothing", "rest"))
    levels = [Level(eq=eq, ineq=ineq) for eq, ineq in entries]
    a = solve_hierarchy(stack, n, params=params)
    b = solve_hierarchy(levels, n, params=params)
    np.testing.assert_allclose(a.x, b.x, atol=1e-12)
    np.testing.assert_allclose(a.level_residuals, b.level_residuals, atol=1e-12)
    assert a.level_methods == b.level_methods
    # reference: cvxpy (Clarabel), level by level, each level's optimal slacks frozen for the levels below
    # (the lexicographic formulation of Kanoun, Lamiraux & Wieber 2011)
    np.testing.assert_allclose(a.x, cvxpy_lexicographic(entries, n), atol=1e-5)


def test_solve_hierarchy_rejects_a_stack_of_other_width():
    from models.errors import ParameterError

    stack = LevelStack.from_entries([([(np.eye(3), np.zeros(3), 1.0)], [])], 3, ("three",))
    with pytest.raises(ParameterError, match="the level stack has 3 columns, expected n = 4"):
        solve_hierarchy(stack, 4)
