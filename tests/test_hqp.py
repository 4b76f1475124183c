"""The strict-priority hierarchical QP against independent references.

References used below, each named beside its check:

* the recursive null-space projection of Siciliano & Slotine (1991),
  written here with ``numpy.linalg.pinv``;
* an independent level-by-level solution with the frozen-slack formulation of
  Kanoun, Lamiraux & Wieber (2011), with cvxpy + Clarabel (``sim/experiments/lexicographic.py``);
* numpy closed forms (weighted least squares, ``numpy.linalg.lstsq``);
* the strict-priority property of the frozen-slack formulation (Kanoun 2011): adding a
  lower-priority task leaves every higher-level residual unchanged.

Siciliano B., Slotine J.-J.E. (1991), A general framework for managing multiple tasks in highly
redundant robotic systems, Proc. 5th International Conference on Advanced Robotics (ICAR), Pisa,
1211-1216 (pages from memory). Kanoun O., Lamiraux F., Wieber P.-B. (2011), Kinematic control of
redundant manipulators: generalizing the task-priority framework to inequality tasks, IEEE
Transactions on Robotics 27(4):785-792.
"""

from __future__ import annotations

import functools

import cvxpy as cp
import numpy as np
import pytest

from controllers.hqp import HQPInfeasibleError, HQPParams, Level, QPSolveError, solve_hierarchy
from controllers.qp_backends import available_backends
from models.errors import ParameterError
from sim.experiments.lexicographic import cvxpy_lexicographic

BACKENDS = available_backends()
# (closed form, working-set step, backend): every level through the compiled closed form where it applies,
# through the compiled, checked working-set step where it applies, or through each backend
PATHS = [(True, True, None), (False, True, None)] + [(False, False, b) for b in BACKENDS]
PATH_IDS = ["closed-form", "working-set"] + [f"qp-{b}" for b in BACKENDS]


def _solve(levels, n, path, **kw):
    closed_form, working_set, backend = path
    params = HQPParams(closed_form=closed_form, working_set_step=working_set)
    return solve_hierarchy(levels, n, backend, params=params, **kw)


# ------------------------------------------------------------------------------------------
# Reference 1: recursive null-space projection (Siciliano & Slotine 1991), numpy pinv


def _pinv(M, scale):
    """numpy pinv with singular values below 1e-10 * scale treated as zero (scale: the task's own norm)."""
    smax = np.linalg.norm(M, 2) if M.size else 0.0
    if smax <= 1e-10 * scale:
        return np.zeros(M.T.shape)
    return np.linalg.pinv(M, rcond=1e-10 * scale / smax)


def projection_solution(tasks, n):
    """q_k = q_{k-1} + (J_k P_{k-1})^+ (xd_k - J_k q_{k-1}),  P_k = I - (J^A_k)^+ J^A_k."""
    q, P, JA = np.zeros(n), np.eye(n), np.zeros((0, n))
    for J, xd in tasks:
        q = q + _pinv(J @ P, np.linalg.norm(J, 2)) @ (xd - J @ q)
        JA = np.vstack([JA, J])
        P = np.eye(n) - np.linalg.pinv(JA, rcond=1e-10) @ JA
    return q, P


def _equality_stack(seed, n=14):
    """Random tasks with a rank-deficient level, a level asking the opposite of a higher one,
    a level partly inside a higher one's row space, and freedom left at the end."""
    rng = np.random.default_rng(seed)
    J1, x1 = rng.standard_normal((3, n)), rng.standard_normal(3)
    J2 = rng.standard_normal((4, 2)) @ rng.standard_normal((2, n))  # 4 rows, rank 2
    x2 = rng.standard_normal(4)
    J3, x3 = J1[:2].copy(), -x1[:2]  # asks the opposite of level 1
    J4 = np.vstack([J1[2] + J2[0], rng.standard_normal((2, n))])  # first row in the span of levels 1-2
    x4 = rng.standard_normal(3)
    return [(J1, x1), (J2, x2), (J3, x3), (J4, x4)]


def _overdetermined_stack(seed, n=7):
    rng = np.random.default_rng(seed)
    return [(rng.standard_normal((m, n)), rng.standard_normal(m)) for m in (3, 3, 4)]


@pytest.mark.parametrize("path", PATHS, ids=PATH_IDS)
@pytest.mark.parametrize("seed", [0, 1, 2])
def test_equality_stack_equals_recursive_projection_and_is_minimum_norm(seed, path):
    n = 14
    tasks = _equality_stack(seed, n)
    res = _solve([Level(eq=[t]) for t in tasks], n, path)
    q_ref, P_final = projection_solution(tasks, n)
    # reference: Siciliano & Slotine (1991) recursion with numpy pinv, to 1e-6
    np.testing.assert_allclose(res.x, q_ref, atol=1e-6)
    # the projection gives the minimum-norm solution: no component in the null space of all tasks
    assert np.linalg.norm(P_final) > 1.0  # freedom is left, so the check below is not empty
    assert np.linalg.norm(P_final @ res.x) < 1e-6
    ref_res = [float(np.sum((J @ q_ref - xd) ** 2)) for J, xd in tasks]
    np.testing.assert_allclose(res.level_residuals, ref_res, rtol=1e-6, atol=1e-9)
    assert res.level_residuals[2] > 0.1  # the conflicting level really is left unmet


@pytest.mark.parametrize("path", PATHS, ids=PATH_IDS)
def test_overdetermined_equality_stack_equals_recursive_projection(path):
    tasks = _overdetermined_stack(7)
    res = _solve([Level(eq=[t]) for t in tasks], 7, path)
    q_ref, _ = projection_solution(tasks, 7)  # reference: Siciliano & Slotine (1991)
    np.testing.assert_allclose(res.x, q_ref, atol=1e-6)
    assert res.free_dims[-1] == 0


# ------------------------------------------------------------------------------------------
# Reference 2: level-by-level cvxpy solution with frozen slacks (Kanoun et al. 2011)


def cvxpy_hierarchy(levels, n, hard=None, lb=None, ub=None):
    """Independent level-by-level solution (the suite's one cvxpy reference, ``sim/experiments/lexicographic.py``):
    min sum w||Ax-b||^2 + sum w||v||^2, Cx - d <= v, higher levels frozen at A_l x - b_l = e_l*,
    C_l x <= d_l + v_l*, then min ||x||^2. Returns (x, per-level optimal cost)."""
    entries = [(list(level.eq), list(level.ineq)) for level in levels]
    hard_eq = [(A, b) for A, b, _ in hard.eq] if hard is not None else []
    hard_in = [(C, d) for C, d, _ in hard.ineq] if hard is not None else []
    return cvxpy_lexicographic(entries, n, hard_in, hard_eq=hard_eq, lb=lb, ub=ub, min_norm=True, objectives=True)


def _exo_like_stack(seed):
    """x = [qdd; tau] of a 7-DOF arm: hard dynamics M qdd - tau = -h and torque bounds, then
    acceleration limits, an end-point task with weights and a torque inequality, posture."""
    rng = np.random.default_rng(seed)
    nq, n = 7, 14
    L = rng.standard_normal((nq, nq))
    M = L @ L.T + nq * np.eye(nq)
    h = 5.0 * rng.standard_normal(nq)
    hard = Level(eq=[(np.hstack([M, -np.eye(nq)]), -h)], name="dynamics")
    tau_max = np.full(nq, 40.0)
    lb = np.concatenate([np.full(nq, -np.inf), -tau_max])
    ub = np.concatenate([np.full(nq, np.inf), tau_max])
    S = np.hstack([np.eye(nq), np.zeros((nq, nq))])
    qdd_max = 2.0
    limits = Level(ineq=[(np.vstack([S, -S]), np.full(2 * nq, qdd_max))], name="acceleration limits")
    J = rng.standard_normal((6, nq))
    task = Level(eq=[(J @ S, 10.0 * rng.standard_normal(6), 1.0), (S[:2], rng.standard_normal(2), 0.1)],
                 ineq=[(np.hstack([np.zeros((1, nq)), rng.standard_normal((1, nq))]), np.array([-1.0]), 2.0)],
                 name="task")
    posture = Level(eq=[(S, rng.standard_normal(nq))], name="posture")
    return [limits, task, posture], n, hard, lb, ub


def _random_stack(seed):
    """Random mixed levels with hard inequalities and bounds, n = 10."""
    rng = np.random.default_rng(seed)
    n = 10
    hard = Level(ineq=[(rng.standard_normal((4, n)), np.abs(rng.standard_normal(4)))], name="limits")
    lb, ub = -np.full(n, 1.5), np.full(n, 1.5)
    levels = []
    for k in range(4):
        eq = [(rng.standard_normal((3, n)), 3.0 * rng.standard_normal(3), float(rng.uniform(0.5, 2.0)))]
        ineq = [(rng.standard_normal((4, n)), rng.standard_normal(4) - 1.0, float(rng.uniform(0.5, 2.0)))]
        levels.append(Level(eq=eq if k != 1 else [], ineq=ineq if k != 3 else [], name=f"L{k}"))
    return levels, n, hard, lb, ub


def _degenerate_stack(seed):
    """Duplicated and conflicting inequality rows in one level, a rank-deficient equality level,
    an inequality row that a hard equality makes constant, and a level repeating a higher one."""
    rng = np.random.default_rng(seed)
    n = 8
    e0 = np.eye(n)[0]
    hard = Level(eq=[(np.eye(n)[7], np.array([0.3]))], name="pin x7")
    conflict = Level(ineq=[(np.vstack([e0, e0, -e0]), np.array([-1.0, -1.0, -1.0]))], name="x0<=-1 twice, x0>=1")
    rankdef = Level(eq=[(rng.standard_normal((4, 2)) @ rng.standard_normal((2, n)), rng.standard_normal(4))],
                    ineq=[(np.eye(n)[7], np.array([0.0]))], name="rank 2 + constant row")
    repeat = Level(ineq=[(np.vstack([e0, -e0]), np.array([-2.0, 2.0]))], eq=[(rankdef.A, -rankdef.b)], name="repeat")
    last = Level(eq=[(rng.standard_normal((3, n)), rng.standard_normal(3))], name="last")
    return [conflict, rankdef, repeat, last], n, hard, None, np.full(n, 2.0)


def _random_levels(rng, n, count):
    """count random levels with 0-3 equality and 0-3 inequality rows each."""
    levels = []
    for _ in range(count):
        m_e, m_i = rng.integers(0, 4, size=2)
        eq = [(rng.standard_normal((m_e, n)), 2.0 * rng.standard_normal(m_e))] if m_e else []
        ineq = [(rng.standard_normal((m_i, n)), rng.standard_normal(m_i) - 0.5)] if m_i else []
        levels.append(Level(eq=eq, ineq=ineq))
    return levels


def _saturating_stack(seed):
    """Five random levels on 6 variables inside a box that most of them push against."""
    n = 6
    return _random_levels(np.random.default_rng(seed), n, 5), n, None, np.full(n, -2.0), np.full(n, 2.0)


def _bounds_as_hard_rows(make, seed):
    """The same stack with its box bounds written as hard inequality rows by the caller (no lb/ub)."""
    levels, n, hard, lb, ub = make(seed)
    rows, rhs = [], []
    for sign, bound in ((1.0, ub), (-1.0, lb)):
        if bound is not None:
            idx = np.flatnonzero(np.isfinite(bound))
            rows.append(sign * np.eye(n)[idx])
            rhs.append(sign * bound[idx])
    eq = hard.eq if hard is not None else []
    ineq = list(hard.ineq if hard is not None else []) + [(np.vstack(rows), np.concatenate(rhs))]
    return levels, n, Level(eq=eq, ineq=ineq, name="hard and box"), None, None


STACKS = {
    **{f"exo-{s}": functools.partial(_exo_like_stack, s) for s in (0, 1)},
    **{f"exo-rows-{s}": functools.partial(_bounds_as_hard_rows, _exo_like_stack, s) for s in (0, 1)},
    **{f"saturating-rows-{s}": functools.partial(_bounds_as_hard_rows, _saturating_stack, s) for s in (75, 77)},
    **{f"random-rows-{s}": functools.partial(_bounds_as_hard_rows, _random_stack, s) for s in (10, 11)},
    **{f"saturating-{s}": functools.partial(_saturating_stack, s) for s in (75, 77, 79)},
    **{f"random-{s}": functools.partial(_random_stack, s) for s in (10, 11, 12)},
    **{f"degenerate-{s}": functools.partial(_degenerate_stack, s) for s in (20, 21)},
}


@functools.cache
def _stack_and_reference(name):
    levels, n, hard, lb, ub = STACKS[name]()
    return (levels, n, hard, lb, ub), cvxpy_hierarchy(levels, n, hard, lb, ub)


@pytest.mark.parametrize("path", PATHS, ids=PATH_IDS)
@pytest.mark.parametrize("stack", sorted(STACKS))
def test_inequality_stack_equals_level_by_level_cvxpy_solution(stack, path):
    (levels, n, hard, lb, ub), (x_ref, objectives) = _stack_and_reference(stack)
    res = _solve(levels, n, path, hard=hard, lb=lb, ub=ub)
    # reference: cvxpy + Clarabel, level by level with frozen slacks (Kanoun et al. 2011), to 1e-5
    np.testing.assert_allclose(res.x, x_ref, atol=1e-5)
    np.testing.assert_allclose(res.level_residuals, objectives, rtol=1e-5, atol=1e-6)
    if hard is not None:
        for A, b, _ in hard.eq:
            np.testing.assert_allclose(A @ res.x, b, atol=1e-8)
        for C, d, _ in hard.ineq:
            assert np.all(C @ res.x <= d + 1e-8)


@pytest.mark.parametrize("whole", [True, False], ids=["all-levels-per-call", "one-level-per-call"])
@pytest.mark.parametrize("stack", sorted(k for k in STACKS if "-rows-" in k))
def test_compiled_levels_reach_the_cvxpy_point_whether_called_for_all_levels_or_one_at_a_time(stack, whole,
                                                                                               monkeypatch):
    from controllers.hqp import kernels

    monkeypatch.setattr(kernels, "HAVE_CLOCK", whole and kernels.HAVE_CLOCK)
    calls = []
    kernel = kernels.solve_levels_fast
    monkeypatch.setattr(kernels, "solve_levels_fast", lambda *a: calls.append(a[:2]) or kernel(*a))
    (levels, n, hard, lb, ub), (x_ref, objectives) = _stack_and_reference(stack)
    res = solve_hierarchy(levels, n, hard=hard)
    assert calls  # the kernel ran
    if not whole:  # one level per call
        assert all(end == start + 1 for start, end in calls if start < len(levels))
    # reference: cvxpy + Clarabel, level by level with frozen slacks (Kanoun et al. 2011), to 1e-5
    np.testing.assert_allclose(res.x, x_ref, atol=1e-5)
    np.testing.assert_allclose(res.level_residuals, objectives, rtol=1e-5, atol=1e-6)


@pytest.mark.parametrize("case", ["drop", "add"])
def test_working_set_iterations_reach_the_constrained_optimum(case):
    """min ||x - t||^2 under two hard rows, where the rows violated at t are not the active set at the optimum:
    one must be dropped (negative multiplier), or one satisfied at t must be added (crossed by the first step)."""
    if case == "drop":  # both rows violated at t = (2, 2); at the optimum (1, 1) only x1 + x2 <= 2 is active
        t, G, h = np.array([2.0, 2.0]), np.array([[1.0, 1.0], [1.0, 0.0]]), np.array([2.0, 1.5])
    else:  # only x1 <= 1 violated at t = (3, 0); its projection (1, 0) breaks x1 + x2 >= 1.5
        t, G, h = np.array([3.0, 0.0]), np.array([[1.0, 0.0], [-1.0, -1.0]]), np.array([1.0, -1.5])
    res = solve_hierarchy([Level(eq=[(np.eye(2), t)])], 2, hard=Level(ineq=[(G, h)]))
    x = cp.Variable(2)  # reference: cvxpy + Clarabel on the same QP
    cp.Problem(cp.Minimize(cp.sum_squares(x - t)), [G @ x <= h]).solve(solver=cp.CLARABEL)
    np.testing.assert_allclose(res.x, x.value, atol=1e-7)
    # closed form of the KKT point (projection onto the active row): (1, 1) and (1, 0.5)
    np.testing.assert_allclose(res.x, [1.0, 1.0] if case == "drop" else [1.0, 0.5], atol=1e-9)
    assert res.level_methods[0] == "working-set" and res.qp_solves == 0


#: One level, min ||x - t||^2 + w max(c x - d, 0)^2, above the hard rows G x <= h (none: G is None). Each case:
#: (t, G, h, c, d, w, the optimum in closed form), the optimum worked out by hand from the KKT conditions.
MIXED_LEVELS = {
    # the projection (1, 1) of t onto x1 + x2 = 2 satisfies x2 <= 5: the inequality's slack is zero there
    "inequality-inactive": ((2, 2), [[1, 1]], [2], [0, 1], 5, 1, (1, 1)),
    # x = (1 + s, 1 - s) on the hard row, cost (s - 1)^2 + (1 + s)^2 + (0.5 - s)^2, least at s = 1/6
    "inequality-binding": ((2, 2), [[1, 1]], [2], [0, 1], 0.5, 1, (7 / 6, 5 / 6)),
    # the same with weight 4 on the slack: (s - 1)^2 + (1 + s)^2 + 4 (0.5 - s)^2, least at s = 1/3
    "inequality-binding-weighted": ((2, 2), [[1, 1]], [2], [0, 1], 0.5, 4, (4 / 3, 2 / 3)),
    # no hard row: x1 = 2, and x2 least of (x2 - 2)^2 + (x2 - 0.5)^2, 1.25
    "inequality-binding-no-hard-row": ((2, 2), None, None, [0, 1], 0.5, 1, (2, 1.25)),
    # x1 >= 1.5 holds at t = (2, 0) but not at its projection (1, 0) onto x1 <= 1: it joins the cost there,
    # and (x1 - 2)^2 + (1.5 - x1)^2 still falls as x1 rises to the hard bound: (1, 0)
    "inequality-joins": ((2, 0), [[1, 0]], [1], [-1, 0], -1.5, 1, (1, 0)),
    # x1 <= 1.9 is violated at t = (2, 2); with it in the cost the point on x1 + x2 = 2 is (1.3, 0.7), where it
    # holds: it leaves the cost, and the optimum is the projection (1, 1)
    "inequality-leaves": ((2, 2), [[1, 1]], [2], [1, 0], 1.9, 1, (1, 1)),
}


@pytest.mark.parametrize("case", sorted(MIXED_LEVELS))
def test_a_level_with_both_kinds_of_rows_is_solved_by_the_working_set_step(case):
    """A level with equality and inequality rows whose least-squares point breaks a row: the working-set step,
    with the level's violated inequality rows in its cost, reaches the level's optimum with no QP. Checked
    against the KKT closed form (MIXED_LEVELS) and against cvxpy + Clarabel on the level's QP with its slack
    (the frozen-slack formulation, Kanoun, Lamiraux & Wieber 2011)."""
    t, G, h, c, d, w, expected = MIXED_LEVELS[case]
    t, C, d = np.array(t, dtype=float), np.array([c], dtype=float), np.array([d], dtype=float)
    hard = None if G is None else Level(ineq=[(np.array(G, dtype=float), np.array(h, dtype=float))])
    res = solve_hierarchy([Level(eq=[(np.eye(2), t)], ineq=[(C, d, float(w))])], 2, hard=hard,
                          regularization=0.0)
    x, v = cp.Variable(2), cp.Variable(1, nonneg=True)
    rows = [C @ x - v <= d] + ([] if G is None else [np.array(G, dtype=float) @ x <= np.array(h, dtype=float)])
    cp.Problem(cp.Minimize(cp.sum_squares(x - t) + w * cp.sum_squares(v)), rows).solve(solver=cp.CLARABEL)
    np.testing.assert_allclose(res.x, x.value, atol=1e-6)
    np.testing.assert_allclose(res.x, expected, atol=1e-9)
    assert res.level_methods[0] == "working-set" and res.qp_solves == 0


# ------------------------------------------------------------------------------------------
# Strict priority (Kanoun 2011)


@pytest.mark.parametrize("backend", BACKENDS)
def test_adding_or_changing_a_lower_level_never_increases_a_higher_residual(backend):
    rng = np.random.default_rng(30)
    n = 6
    bounds = dict(lb=np.full(n, -2.0), ub=np.full(n, 2.0))
    for _ in range(6):
        levels = _random_levels(rng, n, 3)
        base = solve_hierarchy(levels, n, backend, **bounds).level_residuals
        for extra in _random_levels(rng, n, 2):
            added = solve_hierarchy([*levels, extra], n, backend, **bounds).level_residuals
            changed = solve_hierarchy([*levels[:2], extra], n, backend, **bounds).level_residuals
            # strict priority: a higher level's residual does not grow (Kanoun 2011)
            assert np.all(added[:3] <= base + 1e-7 * (1.0 + base))
            assert np.all(changed[:2] <= base[:2] + 1e-7 * (1.0 + base[:2]))


@pytest.mark.parametrize("path", PATHS, ids=PATH_IDS)
def test_unattainable_lower_task_leaves_higher_levels_and_gets_its_least_squares_residual(path):
    rng = np.random.default_rng(40)
    n = 7
    J1, J2, J3 = rng.standard_normal((3, n)), rng.standard_normal((2, n)), rng.standard_normal((5, n))
    b1, b2, b3 = rng.standard_normal(3), rng.standard_normal(2), 5.0 * rng.standard_normal(5)
    upper = [Level(eq=[(J1, b1)]), Level(eq=[(J2, b2)])]
    without = _solve(upper, n, path)
    res = _solve([*upper, Level(eq=[(J3, b3)])], n, path)
    np.testing.assert_allclose(res.level_residuals[:2], without.level_residuals, atol=1e-9)
    # reference: numpy lstsq of level 3 in the null space of levels 1-2 (2 free dimensions)
    _, _, Vt = np.linalg.svd(np.vstack([J1, J2]))
    N = Vt[5:].T
    x12 = projection_solution([(J1, b1), (J2, b2)], n)[0]
    z, *_ = np.linalg.lstsq(J3 @ N, b3 - J3 @ x12, rcond=None)
    ref = float(np.sum((J3 @ (x12 + N @ z) - b3) ** 2))
    assert ref > 1.0  # the task really cannot be met
    np.testing.assert_allclose(res.level_residuals[2], ref, rtol=1e-7)
    e3, _ = res.slack(2)
    np.testing.assert_allclose(e3 @ e3, ref, rtol=1e-7)


@pytest.mark.parametrize("path", PATHS, ids=PATH_IDS)
def test_rows_tight_at_every_higher_optimum_stay_tight_below(path):
    # closed forms on x in R^2:
    # a bound pushed by a higher level keeps its value: ub x0 = 1, level 0 wants x0 = 2, level 1 wants x0 = 0
    res = _solve([Level(eq=[([1.0, 0.0], 2.0)]), Level(eq=[([1.0, 0.0], 0.0)])], 2, path, ub=np.array([1.0, 5.0]))
    np.testing.assert_allclose(res.x, [1.0, 0.0], atol=1e-7)
    np.testing.assert_allclose(res.level_residuals, [1.0, 1.0], atol=1e-7)
    # conflicting rows x0 <= -1, x0 >= 1 settle at x0 = 0 (slack 1 each) and a lower x0 = 5 cannot move it
    e0 = np.array([1.0, 0.0])
    conflict = Level(ineq=[(np.vstack([e0, -e0]), [-1.0, -1.0])])
    res = _solve([conflict, Level(eq=[(e0, 5.0), ([0.0, 1.0], 3.0)])], 2, path)
    np.testing.assert_allclose(res.x, [0.0, 3.0], atol=1e-7)
    np.testing.assert_allclose(res.slack(0)[1], [1.0, 1.0], atol=1e-7)
    np.testing.assert_allclose(res.level_residuals, [2.0, 25.0], atol=1e-6)


@pytest.mark.parametrize("path", [(True, True, None)] + [(False, False, b) for b in BACKENDS if b != "daqp"],
                         ids=["closed-form"] + [f"qp-{b}" for b in BACKENDS if b != "daqp"])
def test_without_regularization_every_level_keeps_its_optimum(path):
    tasks = _equality_stack(3)
    res = _solve([Level(eq=[t]) for t in tasks], 14, path, regularization=0.0)
    q_ref, _ = projection_solution(tasks, 14)  # reference: Siciliano & Slotine (1991) residuals
    ref_res = [float(np.sum((J @ q_ref - xd) ** 2)) for J, xd in tasks]
    np.testing.assert_allclose(res.level_residuals, ref_res, rtol=1e-6, atol=1e-9)


@pytest.mark.parametrize("backend", BACKENDS)
def test_lower_task_blocked_by_a_higher_inequality_keeps_the_inequality(backend):
    # level 1: x0 <= 0, level 2: x0 = 1 -> x0 = 0 and level 2's residual is 1 (closed form)
    levels = [Level(ineq=[(np.array([1.0, 0.0]), 0.0)]), Level(eq=[(np.array([1.0, 0.0]), 1.0)])]
    res = solve_hierarchy(levels, 2, backend)
    np.testing.assert_allclose(res.x, [0.0, 0.0], atol=1e-7)
    np.testing.assert_allclose(res.level_residuals, [0.0, 1.0], atol=1e-7)


# ------------------------------------------------------------------------------------------
# Hard constraints


@pytest.mark.parametrize("backend", BACKENDS)
def test_inconsistent_hard_equalities_raise_naming_the_rows(backend):
    # x0 + x1 = 1 and x0 + x1 = 2 cannot both hold (closed form)
    hard = Level(eq=[(np.array([[1.0, 1.0, 0.0]]), [1.0]), (np.array([[1.0, 1.0, 0.0]]), [2.0])])
    with pytest.raises(HQPInfeasibleError, match=r"hard equality.*hard\.eq\[0\] row 0.*hard\.eq\[1\] row 0"):
        solve_hierarchy([Level(eq=[(np.eye(3), np.ones(3))])], 3, backend, hard=hard)


@pytest.mark.parametrize("backend", BACKENDS)
def test_hard_inequality_against_a_bound_raises_naming_both(backend):
    # x0 <= -1 with lb[0] = 0 cannot hold (closed form)
    hard = Level(ineq=[(np.array([[1.0, 0.0]]), [-1.0])], name="limit")
    with pytest.raises(HQPInfeasibleError, match=r"hard \('limit'\)\.ineq\[0\] row 0.*lb\[0\]"):
        solve_hierarchy([Level(eq=[(np.eye(2), np.ones(2))])], 2, backend, hard=hard, lb=np.zeros(2))


@pytest.mark.parametrize("backend", BACKENDS)
def test_hard_equality_needing_more_than_the_torque_bound_raises_naming_the_bound(backend):
    # dynamics-like rows fix tau1 = 5 while |tau| <= 1 (closed form); no level needed to detect it
    n = 4
    hard = Level(eq=[(np.array([[0.0, 0.0, 0.0, 1.0]]), [5.0])], name="dynamics")
    with pytest.raises(HQPInfeasibleError, match=r"given hard \('dynamics'\) equalities.*ub\[3\]"):
        solve_hierarchy([], n, backend, hard=hard, lb=-np.ones(n), ub=np.ones(n))


def test_backend_failure_raises_qpsolveerror_with_the_backend_status():
    if "daqp" not in BACKENDS:
        pytest.skip("daqp not installed")
    # DAQP without proximal iterations rejects a singular Hessian (exit flag -5, DAQP's daqp.h)
    levels = [Level(ineq=[(np.array([[1.0, 1.0]]), [-1.0])])]
    with pytest.raises(QPSolveError, match=r"level 0.*nonconvex.*exitflag -5"):
        solve_hierarchy(levels, 2, "daqp", regularization=0.0, params=HQPParams(working_set_step=False))


# ------------------------------------------------------------------------------------------
# Weights and residuals


@pytest.mark.parametrize("path", PATHS, ids=PATH_IDS)
def test_weights_within_a_level_give_the_weighted_least_squares_solution(path):
    rng = np.random.default_rng(50)
    n = 6
    A1, A2 = rng.standard_normal((5, n)), rng.standard_normal((5, n))
    b1, b2 = rng.standard_normal(5), rng.standard_normal(5)
    w1, w2 = 0.2, 5.0
    res = _solve([Level(eq=[(A1, b1, w1), (A2, b2, w2)])], n, path)
    # reference: numpy closed form x = (A^T W A)^-1 A^T W b
    A, b = np.vstack([A1, A2]), np.concatenate([b1, b2])
    W = np.diag(np.repeat([w1, w2], 5))
    x_ref = np.linalg.solve(A.T @ W @ A, A.T @ W @ b)
    np.testing.assert_allclose(res.x, x_ref, atol=1e-6)


@pytest.mark.parametrize("backend", BACKENDS)
def test_weights_on_conflicting_inequalities_split_the_violation(backend):
    # x0 <= -1 (weight 1) and x0 >= 1 (weight 3): min (x+1)^2 + 3(1-x)^2 gives x0 = (3-1)/(1+3) = 0.5
    e0 = np.array([1.0, 0.0])
    level = Level(ineq=[(e0, -1.0, 1.0), (-e0, -1.0, 3.0)])
    res = solve_hierarchy([level], 2, backend)
    np.testing.assert_allclose(res.x, [0.5, 0.0], atol=1e-6)
    np.testing.assert_allclose(res.level_residuals, [1.5**2 + 3 * 0.5**2], rtol=1e-6)


@pytest.mark.parametrize("backend", BACKENDS)
def test_level_residuals_are_the_weighted_squared_errors_at_x(backend):
    levels, n, hard, lb, ub = _random_stack(60)
    res = solve_hierarchy(levels, n, backend, hard=hard, lb=lb, ub=ub)
    x = res.x
    for k, level in enumerate(levels):
        # definition, recomputed with numpy from the entries
        ref = sum(w * np.sum((A @ x - b) ** 2) for A, b, w in level.eq)
        ref += sum(w * np.sum(np.maximum(C @ x - d, 0.0) ** 2) for C, d, w in level.ineq)
        np.testing.assert_allclose(res.level_residuals[k], ref, rtol=1e-12, atol=1e-15)
        e, v = res.slack(k)
        np.testing.assert_allclose(e, level.A @ x - level.b, atol=1e-7)
        np.testing.assert_allclose(v, np.maximum(level.C @ x - level.d, 0.0), atol=1e-7)
    assert np.any(res.level_residuals > 1e-3)  # not all levels met, so the check is not trivial


# ------------------------------------------------------------------------------------------
# Warm start, result fields, validation


@pytest.mark.parametrize("backend", BACKENDS)
def test_warm_start_from_the_previous_tick_gives_the_same_answer(backend):
    (levels, n, hard, lb, ub), _ = _stack_and_reference("exo-0")
    params = HQPParams(closed_form=False)
    prev = solve_hierarchy(levels, n, backend, hard=hard, lb=lb, ub=ub, params=params)
    # next tick: slightly different targets
    nxt = [Level(eq=[(A, b + 0.01, w) for A, b, w in lv.eq], ineq=list(lv.ineq), name=lv.name) for lv in levels]
    cold = solve_hierarchy(nxt, n, backend, hard=hard, lb=lb, ub=ub, params=params)
    for warm_start in (prev, prev.x):
        warm = solve_hierarchy(nxt, n, backend, hard=hard, lb=lb, ub=ub, params=params, warm_start=warm_start)
        np.testing.assert_allclose(warm.x, cold.x, atol=1e-6)  # reference: the cold solve
    assert "qp" in cold.level_methods  # the backend was used, so the warm start reached it


def test_result_reports_solver_times_and_methods():
    levels, n, hard, lb, ub = _random_stack(61)
    res = solve_hierarchy(levels, n, hard=hard, lb=lb, ub=ub)
    assert res.found and res.solver == BACKENDS[0]
    assert res.level_times_s.shape == (len(levels),) and np.all(res.level_times_s >= 0)
    assert res.solve_time_s >= res.level_times_s.sum()
    # box bounds are hard rows, so a level may also end in the compiled working-set step
    assert set(res.level_methods) <= {"closed-form", "working-set", "qp", "no freedom"}
    assert res.x.shape == (n,) and not res.x.flags.writeable


@pytest.mark.parametrize(
    ("make", "match"),
    [
        (lambda: Level(eq=[(np.ones((2, 3)), np.ones(3))], name="task"),
         r"Level 'task': eq\[0\] vector must have shape \(2,\)"),
        (lambda: Level(ineq=[(np.ones((1, 3)), [0.0]), (np.ones((1, 4)), [0.0])]),
         r"Level \(unnamed\): ineq\[1\] matrix has 4 columns"),
        (lambda: Level(eq=[(np.array([[1.0, np.nan]]), [0.0])], name="t"), r"eq\[0\] matrix must be finite, got nan"),
        (lambda: Level(eq=[(np.eye(2), np.zeros(2), -1.0)], name="t"), r"eq\[0\] weight must be a finite scalar > 0"),
        (lambda: Level(eq=[(np.eye(2), np.zeros(2))], ineq=[(np.eye(3), np.zeros(3))], name="t"),
         r"ineq matrices have 3 columns, eq matrices have 2"),
        (lambda: Level(eq=[np.eye(2)], name="t"), r"eq\[0\] must be a pair"),
    ],
)
def test_level_validation_names_the_level_the_entry_and_the_culprit(make, match):
    # reference: the Level contract (controllers.hqp.Level docstring)
    with pytest.raises(ParameterError, match=match):
        make()


def test_solve_hierarchy_validation_names_the_argument():
    good = Level(eq=[(np.eye(3), np.ones(3))], name="posture")
    with pytest.raises(ParameterError, match=r"level 0 \('posture'\) has 3 columns, expected n = 4"):
        solve_hierarchy([good], 4)
    with pytest.raises(ParameterError, match=r"ub must have shape \(3,\)"):
        solve_hierarchy([good], 3, ub=np.ones(2))
    with pytest.raises(ParameterError, match="hard .* must not carry weights"):
        solve_hierarchy([good], 3, hard=Level(eq=[(np.eye(3), np.ones(3), 2.0)]))
    with pytest.raises(ParameterError, match="regularization must be a finite float >= 0"):
        solve_hierarchy([good], 3, regularization=-1.0)
    with pytest.raises(HQPInfeasibleError, match=r"lb\[1\] = 2.0 > ub\[1\]"):
        solve_hierarchy([good], 3, lb=np.array([0.0, 2.0, 0.0]), ub=np.ones(3))
