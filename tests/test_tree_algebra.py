"""The exact tree conditional's dense algebra against numpy's LAPACK-backed routines.

Each function of :mod:`allobranch.model.tree_algebra` is checked against ``numpy.linalg`` (Cholesky, inverse,
solve, slogdet) on random symmetric positive definite matrices shaped like the density's
``diag(e0) + V' diag(p) V``. The first-order complex parts are checked against numpy's complex solve and
log determinant (exact complex arithmetic) and, for the factor's own perturbation, against a central finite
difference of numpy's real Cholesky factor.
"""

from __future__ import annotations

import numpy as np
import pytest

from allobranch.model import tree_algebra as ta

H = 1e-30  # the complex step's size (allobranch.model.kernel.H)


def _problem(n: int, seed: int):
    rng = np.random.default_rng(seed)
    V = np.linalg.qr(rng.normal(size=(n, n)))[0]
    p = rng.gamma(2.0, 20.0, size=n)  # data precisions of the taxa
    e0 = 1.0 / rng.gamma(2.0, 0.05, size=n)  # prior precisions of the eigen-coordinates
    A = V.T @ np.diag(p) @ V + np.diag(e0)
    e = rng.normal(size=n)  # directions of the imaginary parts
    f = rng.normal(size=n)
    return rng, V, p, A, e, f


@pytest.mark.parametrize("n", [1, 5, 40])
def test_real_factors_match_numpy(n):
    _, V, p, A, _, _ = _problem(n, 1)
    # numpy.linalg: V' diag(p) V, the Cholesky factor and the triangular inverse
    np.testing.assert_allclose(ta.data_precision(V, p), V.T @ np.diag(p) @ V, rtol=1e-12, atol=1e-10)
    L = ta.cholesky(A)
    np.testing.assert_allclose(L, np.linalg.cholesky(A), rtol=1e-10, atol=1e-12)
    W = ta.lower_inverse(L)
    np.testing.assert_allclose(W, np.linalg.inv(L), rtol=1e-9, atol=1e-12)
    np.testing.assert_allclose(ta.lower_times_vt(W, V), W @ V.T, rtol=1e-9, atol=1e-12)
    b = np.arange(1.0, n + 1.0)
    np.testing.assert_allclose(ta.solve_lower(L, b), np.linalg.solve(L, b), rtol=1e-10)
    np.testing.assert_allclose(ta.solve_upper_t(L, b), np.linalg.solve(L.T, b), rtol=1e-10)


def test_cholesky_of_an_indefinite_matrix_is_nan():
    L = ta.cholesky(np.array([[1.0, 2.0], [2.0, 1.0]]))
    assert np.isnan(L[1, 1])


@pytest.mark.parametrize("which", ["e", "f", "both"])
def test_first_order_complex_parts(which):
    n = 30
    rng, V, p, A, e, f = _problem(n, 2)
    e = e if which in ("e", "both") else np.zeros(n)
    f = f if which in ("f", "both") else np.zeros(n)
    A_i = np.diag(e) + V.T @ np.diag(f) @ V
    A_c = A + 1j * H * A_i
    L = ta.cholesky(A)
    z = rng.normal(size=n)
    dinv, ddata, S_e, S_f = ta.factor_context(L, V, z, True)
    v = rng.normal(size=n) + 1j * H * rng.normal(size=n)
    # A^-1 v: numpy's complex solve
    got = ta.a_solve(L, V, H * e, H * f, v)
    want = np.linalg.solve(A_c, v)
    np.testing.assert_allclose(got.real, want.real, rtol=1e-10)
    np.testing.assert_allclose(got.imag / H, want.imag / H, rtol=1e-8, atol=1e-12)
    # log det A / 2: numpy's slogdet of the real part and the trace identity tr(A^-1 A_i), exact algebra
    hld = ta.half_log_det(L, H * e, H * f, dinv, ddata)
    assert hld.real == pytest.approx(0.5 * np.linalg.slogdet(A)[1], rel=1e-12)
    assert hld.imag / H == pytest.approx(0.5 * np.trace(np.linalg.solve(A, A_i)), rel=1e-9, abs=1e-12)
    # L'^-1 z: the derivative of numpy's Cholesky factor along A_i by central differences
    got = ta.upper_t_solve_z(L, z, H * e, H * f, S_e, S_f)
    np.testing.assert_allclose(got.real, np.linalg.solve(np.linalg.cholesky(A).T, z), rtol=1e-10)
    step = 1e-6
    plus = np.linalg.solve(np.linalg.cholesky(A + step * A_i).T, z)
    minus = np.linalg.solve(np.linalg.cholesky(A - step * A_i).T, z)
    np.testing.assert_allclose(got.imag / H, (plus - minus) / (2 * step), rtol=1e-5, atol=1e-8)


def test_without_the_data_part_the_f_step_is_ignored():
    n = 10
    rng, V, _, A, e, f = _problem(n, 3)
    L = ta.cholesky(A)
    z = rng.normal(size=n)
    dinv, ddata, S_e, S_f = ta.factor_context(L, V, z, False)
    assert ddata.shape == (0,) and S_f.shape == (0, 0)
    with_f = ta.upper_t_solve_z(L, z, H * e, H * f, S_e, S_f)
    without = ta.upper_t_solve_z(L, z, H * e, np.zeros(n), S_e, S_f)
    np.testing.assert_array_equal(with_f, without)
