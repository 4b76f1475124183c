"""The linear-algebra building blocks of the compiled HQP kernels against numpy (LAPACK) as reference.

The whole kernel is checked against the Python path and cvxpy in ``tests/test_hqp.py``; here each piece
is checked on its own: the one-sided Jacobi SVD and the LAPACK branch above ``_JACOBI_MAX`` columns
(reference: ``numpy.linalg.svd``), the minimum-norm least squares (reference: ``numpy.linalg.lstsq``
with its default cut-off), the Cholesky solve (reference: ``numpy.linalg.solve``), and the clock read
inside compiled code (reference: ``time.monotonic``, the same POSIX clock on Linux), and the small matrix
products summed in loops (reference: numpy's matmul).
"""

from __future__ import annotations

import time

import numpy as np
import pytest

from controllers.hqp import kernels

SHAPES = [(1, 7), (3, 7), (7, 7), (14, 7), (7, 3), (2, 5), (14, 14), (30, 20), (10, 28)]


def _matrices(seed):
    rng = np.random.default_rng(seed)
    for m, r in SHAPES:
        P = rng.standard_normal((m, r))
        yield P
        if min(m, r) > 2:  # rank deficient: a repeated column and a repeated row
            Q = P.copy()
            Q[:, 0] = Q[:, 1]
            Q[0] = Q[1]
            yield Q


@pytest.mark.parametrize("seed", [0, 1])
def test_svd_right_matches_lapack_singular_values_and_is_orthogonal(seed):
    for P in _matrices(seed):
        m, r = P.shape
        s, V, PV = kernels._svd_right(P)
        ref = np.linalg.svd(P, compute_uv=False)  # reference: LAPACK gesdd through numpy
        s_ref = np.concatenate([ref, np.zeros(r - ref.size)])
        scale = max(ref.max(), 1.0)
        np.testing.assert_allclose(s, s_ref, atol=1e-13 * scale)
        np.testing.assert_allclose(V.T @ V, np.eye(r), atol=1e-13)
        np.testing.assert_allclose(P @ V, PV, atol=1e-13 * scale)
        # the columns of PV are orthogonal: P V = U S
        G = PV.T @ PV
        np.testing.assert_allclose(G - np.diag(np.diag(G)), 0.0, atol=1e-12 * scale**2)


@pytest.mark.parametrize("seed", [0, 1])
def test_least_squares_is_numpys_minimum_norm_solution(seed):
    rng = np.random.default_rng(100 + seed)
    for P in _matrices(seed):
        b = rng.standard_normal(P.shape[0])
        ref = np.linalg.lstsq(P, b, rcond=None)[0]  # reference: numpy (LAPACK gelsd), default cut-off
        np.testing.assert_allclose(kernels._lstsq(P, b), ref, atol=1e-10 * (1.0 + np.abs(ref).max()))


def test_cholesky_solve_matches_numpy_and_refuses_what_is_not_positive_definite():
    rng = np.random.default_rng(7)
    for m in (1, 2, 5, 9):
        L = rng.standard_normal((m, m))
        S = L @ L.T + m * np.eye(m)
        b = rng.standard_normal(m)
        ok, x = kernels._spd_solve(S, b)
        assert ok
        np.testing.assert_allclose(x, np.linalg.solve(S, b), rtol=1e-12, atol=1e-12)  # reference: numpy
    assert not kernels._spd_solve(np.ones((2, 2)), np.ones(2))[0]  # singular
    assert not kernels._spd_solve(np.diag([1.0, -1.0]), np.ones(2))[0]  # indefinite


@pytest.mark.skipif(not kernels.HAVE_CLOCK, reason="no clock_gettime for compiled code on this platform")
def test_the_clock_inside_compiled_code_is_the_monotonic_clock():
    buf = np.zeros(2, dtype=np.int64)
    before = time.monotonic()
    inside = kernels._now_s(buf)
    after = time.monotonic()
    assert before - 1e-6 <= inside <= after + 1e-6  # reference: time.monotonic, CLOCK_MONOTONIC as well
    assert kernels._now_s(buf) >= inside


@pytest.mark.parametrize("bad", [np.nan, np.inf, -np.inf])
def test_stack_finiteness_matches_numpy_for_every_position_of_a_bad_entry(bad):
    # reference: numpy.isfinite over all four arrays
    rng = np.random.default_rng(4)
    arrays = [rng.normal(size=(5, 7)), rng.normal(size=5), rng.normal(size=(3, 7)), rng.normal(size=3)]
    assert kernels.stack_is_finite(*arrays)
    for which, arr in enumerate(arrays):
        for idx in np.ndindex(arr.shape):
            spoilt = [a.copy() for a in arrays]
            spoilt[which][idx] = bad
            assert not all(np.isfinite(a).all() for a in spoilt)
            assert not kernels.stack_is_finite(*spoilt)
    assert kernels.stack_is_finite(np.zeros((0, 7)), np.zeros(0), np.zeros((0, 7)), np.zeros(0))


@pytest.mark.parametrize(("m", "k", "n"), [(0, 7, 7), (7, 0, 3), (1, 7, 1), (7, 7, 7), (14, 7, 6), (28, 28, 28)])
def test_small_products_match_numpy(m, k, n):
    # reference: numpy's matmul (BLAS); 7-by-7 products are summed in loops, 28-by-28 ones go to BLAS
    rng = np.random.default_rng(m * 100 + k * 10 + n)
    A, B, x = rng.standard_normal((m, k)), rng.standard_normal((k, n)), rng.standard_normal(k)
    scale = 1.0 + np.sqrt(k)
    np.testing.assert_allclose(kernels._mm(A, B), A @ B, rtol=0, atol=1e-14 * scale)
    np.testing.assert_allclose(kernels._mv(A, x), A @ x, rtol=0, atol=1e-14 * scale)
    np.testing.assert_allclose(kernels._mv(np.asfortranarray(A), x), A @ x, rtol=0, atol=1e-14 * scale)
    assert kernels._mm(A, B).shape == (m, n) and kernels._mv(A, x).shape == (m,)


@pytest.mark.parametrize(("n", "r"), [(7, 0), (7, 6), (28, 28), (80, 70)])
def test_lift_is_x_plus_n_z_as_numpy_computes_it(n, r):
    # reference: numpy, x + N @ z; the last size is past the loop limit and goes through _mv's BLAS call
    rng = np.random.default_rng(n + r)
    x, N, z = rng.standard_normal(n), rng.standard_normal((n, r)), rng.standard_normal(r)
    np.testing.assert_allclose(kernels._lift(x, z, N, True), x + N @ z, rtol=0, atol=1e-14 * (1.0 + np.sqrt(r)))
    if r == n:  # the whole space free (no basis): x + z
        np.testing.assert_array_equal(kernels._lift(x, z, N, False), x + z)
