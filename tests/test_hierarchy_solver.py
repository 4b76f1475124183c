"""``HierarchySolver`` (the per-tick form of ``solve_hierarchy``) gives ``solve_hierarchy``'s result.

Every case is compared to the bit with :func:`controllers.hqp.solve_hierarchy` (the same arithmetic, which
the other HQP tests check against references), and the point with an independent level-by-level solution:
the frozen-slack formulation of Kanoun, Lamiraux & Wieber (2011), written here with cvxpy + Clarabel.
"""

from __future__ import annotations

import dataclasses

import numpy as np
import pytest

from controllers.hqp import (
    HierarchySolver,
    HQPInfeasibleError,
    HQPParams,
    Level,
    LevelStack,
    kernels,
    solve_hierarchy,
    solver,
)
from models.errors import ParameterError
from sim.experiments.lexicographic import cvxpy_lexicographic


def _torque_like_stack(rng, n, *, mixed=False, full_rank_last=True):
    """Limits, then weighted tasks, then (optionally) a full-rank last level that leaves no freedom.

    Without ``mixed`` every level's least-squares point satisfies every row (closed form throughout);
    ``mixed`` puts equality and inequality rows in one level whose least-squares point violates the
    inequality: the working-set step solves it, or the QP backend when that step is off.
    """
    top = ([], [(rng.normal(size=(6, n)), np.abs(rng.normal(size=6)) + 1.0, 1.0)])
    mid = ([(rng.normal(size=(3, n)), 0.01 * rng.normal(size=3), 2.0),
            (rng.normal(size=(2, n)), 0.01 * rng.normal(size=2), 0.5)], [])
    if mixed:
        a = rng.normal(size=(1, n))
        mid = (mid[0], [(a, np.array([-5.0 - np.abs(a).sum()]), 1.0)])
    levels = [top, mid]
    if full_rank_last:
        levels.append(([(np.eye(n), np.zeros(n), 1.0)], []))
    G = rng.normal(size=(2 * n, n))
    h = np.abs(rng.normal(size=2 * n)) + 1.0  # x = 0 is strictly inside: the hard rows can hold
    return levels, G, h


def _assert_same_result(a, b):
    np.testing.assert_array_equal(a.x, b.x)
    np.testing.assert_array_equal(a.level_residuals, b.level_residuals)
    assert a.level_methods == b.level_methods and a.free_dims == b.free_dims and a.qp_solves == b.qp_solves
    for (ea, va), (eb, vb) in zip(a.level_slacks, b.level_slacks):
        np.testing.assert_array_equal(ea, eb)
        np.testing.assert_array_equal(va, vb)
    for xa, xb in zip(a.level_x, b.level_x):
        np.testing.assert_array_equal(xa, xb)


@pytest.mark.parametrize("case", ["closed-form", "working-set-level", "qp-level", "freedom-left"])
def test_hierarchy_solver_gives_the_result_of_solve_hierarchy_and_the_cvxpy_point(case, monkeypatch):
    # the same stack with its mixed level through the working-set step, then through the QP backend
    rng = np.random.default_rng({"closed-form": 1, "working-set-level": 2, "qp-level": 2, "freedom-left": 3}[case])
    n = 7
    entries, G, h = _torque_like_stack(rng, n, mixed=case.endswith("-level"), full_rank_last=case != "freedom-left")
    names = tuple(f"level {k}" for k in range(len(entries)))
    stack = LevelStack.from_entries(entries, n, names)
    params = HQPParams(working_set_step=case != "qp-level")
    calls = []

    def counted(*args, **kw):
        calls.append(1)
        return solve_hierarchy(*args, **kw)

    monkeypatch.setattr(solver, "solve_hierarchy", counted)
    ours = HierarchySolver(n, params=params).solve(stack, G, h, name="limits")
    ref = solve_hierarchy(stack, n, hard=Level(ineq=[(G, h)], name="limits"), params=params)
    _assert_same_result(ours, ref)
    assert (ours.qp_solves > 0) == (case == "qp-level")
    assert ("working-set" in ours.level_methods) == (case == "working-set-level")
    # the compiled kernel's result is used as it is only when it solved every level and left no freedom
    fast = kernels.HAVE_CLOCK and case in ("closed-form", "working-set-level")
    assert len(calls) == (0 if fast else 1)
    if case != "freedom-left":  # with freedom left, the minimum-norm level picks one of the optima
        pytest.importorskip("cvxpy")
        np.testing.assert_allclose(ours.x, cvxpy_lexicographic(entries, n, hard=[(G, h)]), atol=1e-5)
    assert not ours.x.flags.writeable and not any(xk.flags.writeable for xk in ours.level_x)
    # a result record like any other: its fields, repr and dataclasses.replace
    again = dataclasses.replace(ours, qp_solves=ours.qp_solves + 1)
    assert again.qp_solves == ours.qp_solves + 1 and again.level_methods == ours.level_methods
    assert dataclasses.asdict(ours).keys() == dataclasses.asdict(ref).keys() and "level_slacks" in repr(ours)


def test_hierarchy_solver_reports_infeasible_hard_rows_by_name():
    n = 3
    stack = LevelStack.from_entries([([(np.eye(n), np.ones(n), 1.0)], [])], n, ("posture",))
    G = np.array([[1.0, 0.0, 0.0], [-1.0, 0.0, 0.0]])
    h = np.array([-1.0, -1.0])  # x0 <= -1 and x0 >= 1: no point holds both
    with pytest.raises(HQPInfeasibleError, match="cannot all hold"):
        HierarchySolver(n).solve(stack, G, h, name="limits")


def test_hierarchy_solver_rejects_bad_arguments_naming_them():
    with pytest.raises(ParameterError, match="n must be an int >= 1, got 0"):
        HierarchySolver(0)
    with pytest.raises(ParameterError, match="params must be an HQPParams"):
        HierarchySolver(3, params="fast")
    with pytest.raises(ParameterError, match="regularization must be a finite float >= 0"):
        HierarchySolver(3, regularization=float("nan"))
    stack = LevelStack.from_entries([([(np.eye(3), np.zeros(3), 1.0)], [])], 3, ("three",))
    with pytest.raises(ParameterError, match="the level stack has 3 columns, expected n = 4"):
        HierarchySolver(4).solve(stack, np.zeros((0, 4)), np.zeros(0))
    with pytest.raises(ParameterError, match=r"G must be an \(m, 3\) array and h an \(m,\) array, got \(2, 3\) and "
                                             r"\(3,\)"):
        HierarchySolver(3).solve(stack, np.zeros((2, 3)), np.zeros(3))
    with pytest.raises(ParameterError, match="stack must be a LevelStack, got list"):
        HierarchySolver(3).solve([Level(eq=[(np.eye(3), np.zeros(3))])], np.zeros((0, 3)), np.zeros(0))


def test_hierarchy_solver_takes_read_only_and_fortran_ordered_rows():
    # the kernel takes C-ordered writable rows: other arrays are copied, never changed; reference: solve_hierarchy
    rng = np.random.default_rng(7)
    n = 7
    entries, G, h = _torque_like_stack(rng, n)
    names = tuple(f"level {k}" for k in range(len(entries)))
    stack = LevelStack.from_entries(entries, n, names)
    ref = solve_hierarchy(stack, n, hard=Level(ineq=[(G, h)], name="limits"))
    A, C = stack.A, np.asfortranarray(stack.C)
    A.flags.writeable = False
    odd = LevelStack.from_arrays(A, stack.b, stack.sw, stack.eq_off, stack.unit_eq, C, stack.d, stack.wi,
                                 stack.in_off, n, names, stack.layout)
    Gf = np.asfortranarray(G)
    ours = HierarchySolver(n).solve(odd, Gf, h, name="limits")
    _assert_same_result(ours, ref)
    assert odd.A is A and odd.C is C and not A.flags.writeable  # the caller's stack is left as it was
