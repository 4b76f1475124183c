"""Every installed QP backend against independent references on named shared problems.

References: ``scipy.optimize.lsq_linear`` (bounded-variable least squares,
method "bvls", an active-set method that is exact up to rounding) and cvxpy
with the Clarabel interior-point solver; the degenerate problem also has a
closed-form optimum. The backends are every solver of
``qpsolvers.available_solvers`` (qpsolvers, https://github.com/qpsolvers/qpsolvers).
"""

from __future__ import annotations

import subprocess
import sys
from pathlib import Path

import cvxpy as cp
import numpy as np
import pytest
import qpsolvers
from scipy.optimize import lsq_linear

from controllers import qp_backends
from controllers.qp_backends import (
    DEFAULT_BACKEND,
    SOLVER_SETTINGS,
    BackendNotFound,
    QPTolerances,
    available_backends,
    get_backend,
)
from models.errors import ParameterError

TOL = QPTolerances()
#: Agreement required between a backend (tolerance 1e-9) and a reference (about 1e-8 for Clarabel).
X_TOL = 1e-6


def _box_ls():
    """Box-constrained least squares ½‖R y − s‖², lb ≤ y ≤ ub, with several bounds active."""
    rng = np.random.default_rng(3)
    R = rng.standard_normal((12, 6))
    s = 3.0 * rng.standard_normal(12)
    lb, ub = np.full(6, -0.3), np.full(6, 0.4)
    ref = lsq_linear(R, s, bounds=(lb, ub), method="bvls", tol=1e-14).x  # reference: scipy BVLS
    return dict(P=R.T @ R, q=-R.T @ s, lb=lb, ub=ub), ref


def _eq_ineq():
    """Strictly convex QP with two equalities and ten inequalities, three of them active."""
    rng = np.random.default_rng(4)
    n = 8
    M = rng.standard_normal((n, n))
    P = M.T @ M + 0.1 * np.eye(n)
    q = rng.standard_normal(n)
    A = rng.standard_normal((2, n))
    b = rng.standard_normal(2)
    G = rng.standard_normal((10, n))
    y_free = np.linalg.solve(np.block([[P, A.T], [A, np.zeros((2, 2))]]), np.concatenate([-q, b]))[:n]
    h = G @ y_free + np.where(np.arange(10) < 3, -0.5, 0.5)  # the first three rows cut off the free optimum
    y = cp.Variable(n)
    cp.Problem(cp.Minimize(0.5 * cp.quad_form(y, P) + q @ y), [A @ y == b, G @ y <= h]).solve(solver="CLARABEL")
    return dict(P=P, q=q, G=G, h=h, A=A, b=b), y.value  # reference: cvxpy + Clarabel


def _degenerate():
    """Singular P, duplicated rows and six constraints active at a vertex of R^3.

    min ½ y0² − y1 − y2 s.t. y1 ≤ 1 (twice), y0 + y1 ≤ 1, y2 ≤ 2, y1 + y2 ≤ 3, y0 ≥ 0:
    the optimum is (0, 1, 2) (closed form: y0 = 0 minimises ½y0² + y0 on y0 ≥ 0 once y1 = 1 − y0).
    """
    P = np.diag([1.0, 0.0, 0.0])
    q = np.array([0.0, -1.0, -1.0])
    G = np.array([[0, 1, 0], [0, 1, 0], [1, 1, 0], [0, 0, 1], [0, 1, 1]], dtype=float)
    h = np.array([1.0, 1.0, 1.0, 2.0, 3.0])
    lb = np.array([0.0, -np.inf, -np.inf])
    y = cp.Variable(3)
    cp.Problem(cp.Minimize(0.5 * cp.square(y[0]) + q @ y), [G @ y <= h, y[0] >= 0]).solve(solver="CLARABEL")
    assert np.allclose(y.value, [0.0, 1.0, 2.0], atol=1e-6)  # cvxpy agrees with the closed form
    return dict(P=P, q=q, G=G, h=h, lb=lb), np.array([0.0, 1.0, 2.0])


PROBLEMS = {"box_ls": _box_ls, "eq_ineq": _eq_ineq, "degenerate": _degenerate}
BACKENDS = available_backends()


@pytest.fixture(scope="module", params=sorted(PROBLEMS))
def problem(request):
    data, ref = PROBLEMS[request.param]()
    return request.param, data, ref


@pytest.mark.parametrize("backend", BACKENDS)
def test_backend_matches_independent_reference_on_shared_problems(backend, problem):
    name, data, ref = problem
    res = get_backend(backend)(**data, tolerances=TOL, regularization=1e-8)
    assert res.found, f"{backend} on {name}: {res.status}"
    np.testing.assert_allclose(res.x, ref, atol=X_TOL, err_msg=f"{backend} on {name}")
    # KKT residuals at the returned point (qpsolvers' definitions), within the agreement asked of x
    assert res.primal_residual <= X_TOL and res.dual_residual <= X_TOL, (res.primal_residual, res.dual_residual)


@pytest.mark.parametrize("backend", BACKENDS)
def test_warm_start_gives_the_same_answer(backend, problem):
    name, data, ref = problem
    solve = get_backend(backend)
    cold = solve(**data, tolerances=TOL, regularization=1e-8)
    rng = np.random.default_rng(5)
    for guess in (cold.x, cold.x + 0.1 * rng.standard_normal(cold.x.size)):
        warm = solve(**data, warm_start=guess, tolerances=TOL, regularization=1e-8)
        assert warm.found, f"{backend} on {name}: {warm.status}"
        np.testing.assert_allclose(warm.x, ref, atol=X_TOL, err_msg=f"{backend} on {name}, warm")


@pytest.mark.parametrize("backend", BACKENDS)
def test_read_only_inputs_give_the_same_answer(backend):
    data, ref = _box_ls()
    for arr in data.values():
        arr.flags.writeable = False
    guess = ref.copy()
    guess.flags.writeable = False
    res = get_backend(backend)(**data, warm_start=guess, tolerances=TOL, regularization=1e-8)
    assert res.found, res.status
    np.testing.assert_allclose(res.x, ref, atol=X_TOL)  # reference: scipy BVLS


@pytest.mark.parametrize("backend", BACKENDS)
def test_infeasible_problem_is_reported_with_the_solver_status_and_no_point(backend):
    # y0 <= -1 and -y0 <= -1 (y0 >= 1) cannot both hold (closed form)
    res = get_backend(backend)(
        np.eye(2), np.zeros(2), np.array([[1.0, 0.0], [-1.0, 0.0]]), np.array([-1.0, -1.0]),
        tolerances=TOL, regularization=1e-8,
    )
    assert not res.found
    assert res.x is None
    assert res.primal_residual is None
    if backend in ("daqp", "osqp"):
        assert "infeasible" in res.status
    elif backend in ("clarabel", "scs"):  # their status as qpsolvers passes it: "PrimalInfeasible", "infeasible"
        assert "infeasible" in res.status.lower()
    else:  # qpsolvers' interface of this solver reports no status
        assert res.status.startswith("not found")


def test_unknown_backend_raises_listing_the_installed_ones():
    with pytest.raises(BackendNotFound, match=f"installed backends: {', '.join(BACKENDS)}") as info:
        get_backend("no-such-solver")
    assert isinstance(info.value, LookupError)
    assert "to add one" in str(info.value)
    assert "'no-such-solver'" in str(info.value) and "\n" not in str(info.value)


def test_a_solver_qpsolvers_knows_but_not_installed_names_its_package():
    if "proxqp" in qpsolvers.available_solvers:
        pytest.skip("proxqp is installed")
    with pytest.raises(BackendNotFound) as info:
        get_backend("proxqp")
    msg = str(info.value)
    # qpsolvers' extra "proxqp" installs the package proxsuite (qpsolvers' package metadata)
    assert "'proxqp' is known to qpsolvers but not installed" in msg and "pip install proxsuite" in msg
    assert f"installed backends: {', '.join(BACKENDS)}" in msg and "\n" not in msg


def test_available_backends_are_qpsolvers_available_solvers_default_first():
    assert sorted(BACKENDS) == sorted(qpsolvers.available_solvers)
    assert BACKENDS[0] == DEFAULT_BACKEND and list(BACKENDS[1:]) == sorted(BACKENDS[1:])


@pytest.mark.skipif("clarabel" not in BACKENDS, reason="clarabel not installed")
def test_a_solver_without_a_tolerance_entry_runs_with_its_own_defaults(monkeypatch, caplog):
    # Clarabel's own defaults (tolerances 1e-8) suffice for X_TOL; the entry is removed for this test only
    monkeypatch.setattr(qp_backends, "SOLVER_SETTINGS", {k: v for k, v in SOLVER_SETTINGS.items() if k != "clarabel"})
    data, ref = _box_ls()
    with caplog.at_level("INFO", logger="controllers.qp_backends"):
        res = get_backend("clarabel")(**data, tolerances=TOL)
        assert qp_backends.solver_settings("clarabel", TOL) == {}
    assert res.found, res.status
    # said once per solver and process, not once per call
    assert sum("'clarabel' has no entry in" in r.getMessage() for r in caplog.records) == 1
    np.testing.assert_allclose(res.x, ref, atol=X_TOL)  # reference: scipy BVLS


def test_the_tolerance_table_uses_the_solvers_own_keyword_names():
    # OSQP, SCS and Clarabel reject an unknown keyword (ValueError, TypeError, AttributeError), so the shared
    # problems above check their entries; DAQP's keywords are parameters of daqp.solve, and HiGHS only
    # reports an unknown option or an out-of-range value through the status of setOptionValue
    settings = {name: SOLVER_SETTINGS[name](TOL, 1e-8) for name in BACKENDS if name in SOLVER_SETTINGS}
    assert settings, "no installed solver has a tolerance entry"
    if "daqp" in settings:
        import inspect

        import daqp

        assert set(settings["daqp"]) <= set(inspect.signature(daqp.solve).parameters)
    if "highs" in settings:
        import highspy

        h = highspy.Highs()
        h.setOptionValue("output_flag", False)
        for k, v in settings["highs"].items():
            assert h.setOptionValue(k, v) == highspy.HighsStatus.kOk, k


@pytest.mark.skipif("osqp" not in BACKENDS, reason="osqp not installed")
def test_a_missing_solver_leaves_the_others_importable_and_osqp_the_default():
    # in a fresh interpreter where `import daqp` fails (sys.modules entry None, Python's import protocol)
    code = (
        "import sys; sys.modules['daqp'] = None\n"
        "from controllers import qp_backends as qb\n"
        "print(qb.available_backends(), qb.DEFAULT_BACKEND)\n"
        "try:\n    qb.get_backend('daqp')\nexcept qb.BackendNotFound as e:\n    print(e)\n"
    )
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True,
                         cwd=Path(__file__).resolve().parents[1]).stdout.splitlines()
    others = sorted(s for s in qpsolvers.available_solvers if s not in ("daqp", "osqp"))
    assert out[0] == f"{('osqp', *others)} osqp"
    assert f"installed backends: {', '.join(('osqp', *others))}" in out[1] and "pip install daqp" in out[1]


def test_default_backend_is_daqp_when_installed_else_osqp():
    # the design card: daqp if installed, else osqp
    expected = "daqp" if "daqp" in BACKENDS else "osqp"
    assert DEFAULT_BACKEND == expected
    assert get_backend() is get_backend(expected)


@pytest.mark.parametrize("backend", BACKENDS)
def test_bad_qp_data_raise_parameter_error_naming_the_vector(backend):
    solve = get_backend(backend)
    with pytest.raises(ParameterError, match="QP vector q must have shape"):
        solve(np.eye(2), np.zeros(3), tolerances=TOL)
    with pytest.raises(ParameterError, match=r"lb\[0\] = 1.0 > ub\[0\]"):
        solve(np.eye(2), np.zeros(2), lb=np.ones(2), ub=np.zeros(2), tolerances=TOL)


def test_tolerances_are_validated():
    with pytest.raises(ParameterError, match="QPTolerances.eps_abs"):
        QPTolerances(eps_abs=0.0)


@pytest.mark.skipif("osqp" not in BACKENDS, reason="osqp not installed")
def test_osqp_adapter_prints_nothing_when_no_constraint_is_active(capfd):
    # OSQP 1.x's C polish step prints to stdout when no constraint is active; the project forbids prints
    res = get_backend("osqp")(
        np.eye(2), np.ones(2), np.array([[1.0, 0.0]]), np.array([5.0]), tolerances=TOL
    )
    np.testing.assert_allclose(res.x, [-1.0, -1.0], atol=1e-9)  # closed form: y = -q, constraint inactive
    out, _ = capfd.readouterr()
    assert out == ""
