"""Checks of the fused junction-likelihood kernels against references outside the project.

References used: finite differences (``scipy.optimize.approx_fprime``) for every derivative; explicit matrix
inversion (``numpy.linalg.inv``) for the Sherman-Morrison posterior; ``scipy.stats.multivariate_normal``,
``scipy.stats.norm`` and ``scipy.stats.t`` for densities; ``scipy.special.logsumexp`` for the law; exact
algebra where two codes implement the same formula.
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy.linalg import helmert
from scipy.optimize import approx_fprime
from scipy.special import gammaln, logsumexp
from scipy.stats import multivariate_normal, norm
from scipy.stats import t as student_t

from allobranch.model import kernel

#: Parameter values at which derivatives are checked (a, sigma_dev, rel_error, sigma_asym, nu).
POINT = {"a": 2.7, "sigma_dev": 0.06, "rel_error": 0.05, "sigma_asym": 0.25, "nu": 6.0}
#: Finite-difference step (forward differences; truncation error ~ step * second derivative).
STEP = 1e-7


def _junctions(n: int = 12, seed: int = 0) -> dict[str, np.ndarray]:
    """Random log-scale junction data: a mix of bifurcations and trifurcations, some readings with an
    absolute standard error, each junction in its own specimen (so d ll_j / d a_specimen is diagonal)."""
    rng = np.random.default_rng(seed)
    K = 3
    M = np.ones((n, K), dtype=bool)
    M[rng.uniform(size=n) < 0.6, 2] = False
    level = rng.uniform(-3.0, 0.5, size=n)
    Y = np.where(M, level[:, None] + 0.25 * rng.standard_normal((n, K)), 0.0)
    a = POINT["a"]
    law = np.array([logsumexp(a * Y[j, M[j]]) / a for j in range(n)])
    y0 = law + 0.08 * rng.standard_normal(n)
    V = np.where(M & (rng.uniform(size=(n, K)) < 0.5), rng.uniform(0.0, 0.01, size=(n, K)), 0.0)
    V0 = np.where(rng.uniform(size=n) < 0.5, rng.uniform(0.0, 0.01, size=n), 0.0)
    a_specimen = a + 0.2 * rng.standard_normal(n)
    return {
        "y0": y0,
        "Y": Y,
        "M": M,
        "V0": V0,
        "V": V,
        "specimen_idx": np.arange(n),
        "a_specimen": a_specimen,
    }


def _full(
    d: dict,
    a_specimen=None,
    sdev=POINT["sigma_dev"],
    rel_error=POINT["rel_error"],
    sasym=POINT["sigma_asym"],
    nu=POINT["nu"],
    student=False,
    skip=None,
):
    """``kernel.junction_terms`` on the test data."""
    skip = np.zeros(5, dtype=bool) if skip is None else skip
    a_specimen = d["a_specimen"] if a_specimen is None else np.asarray(a_specimen, dtype=float)
    return kernel.junction_terms(
        d["y0"],
        d["Y"],
        d["M"],
        d["V0"],
        d["V"],
        a_specimen[d["specimen_idx"]],
        float(sdev),
        float(rel_error),
        float(sasym),
        float(nu),
        student,
        skip,
    )


def _pre(d: dict, rel_error=POINT["rel_error"], sasym=POINT["sigma_asym"]):
    """``kernel.precompute`` plus the parent's measurement variance, as the model builder combines them."""
    asym_var_j = np.full(d["y0"].shape[0], sasym**2)
    mu, g, c, ybar, lld = kernel.precompute(d["Y"], d["M"], d["V"], float(rel_error), asym_var_j)
    s0sq = rel_error**2 + d["V0"] + kernel.S2_FLOOR
    return mu, g, c, ybar, lld, s0sq


def _fast(d: dict, a_specimen=None, sdev=POINT["sigma_dev"], nu=POINT["nu"], student=False, pre=None):
    """``kernel.fast_terms`` on the test data."""
    mu, g, c, ybar, lld, s0sq = _pre(d) if pre is None else pre
    a_specimen = d["a_specimen"] if a_specimen is None else np.asarray(a_specimen, dtype=float)
    return kernel.fast_terms(
        d["y0"],
        mu,
        g,
        c,
        ybar,
        d["M"],
        s0sq,
        lld,
        a_specimen[d["specimen_idx"]],
        float(sdev),
        float(nu),
        student,
    )


def _assert_close_derivative(analytic: np.ndarray, numeric: np.ndarray) -> None:
    """Forward differences are accurate to about ``STEP * |f''|``; allow that, relative and absolute."""
    np.testing.assert_allclose(analytic, numeric, rtol=2e-4, atol=2e-4 * max(1.0, np.abs(numeric).max()))


# -- derivatives ----------------------------------------------------------------------------------------
@pytest.mark.parametrize("student", [False, True], ids=["normal", "student_t"])
@pytest.mark.parametrize("direction", kernel.DIRECTIONS)
def test_junction_terms_derivatives_match_finite_differences(direction: str, student: bool) -> None:
    # Reference: scipy.optimize.approx_fprime (forward finite differences) of the per-junction log-lik.
    d = _junctions(seed=1)
    col = kernel.DIRECTIONS.index(direction)
    _, dll, _, _ = _full(d, student=student)
    if direction == "a":
        # Each junction has its own exponent, so the Jacobian of ll wrt a_specimen is diagonal.
        jac = approx_fprime(d["a_specimen"], lambda a: _full(d, a_specimen=a, student=student)[0], STEP)
        np.testing.assert_allclose(jac - np.diag(np.diag(jac)), 0.0, atol=1e-12)
        numeric = np.diag(jac)
    else:

        def ll_of(x: np.ndarray) -> np.ndarray:
            return _full(d, student=student, **{_kw(direction): x[0]})[0]

        numeric = approx_fprime(np.array([POINT[direction]]), ll_of, STEP)[:, 0]
    if direction == "nu" and not student:
        np.testing.assert_array_equal(dll[:, col], 0.0)  # the normal likelihood does not involve nu
    _assert_close_derivative(dll[:, col], numeric)


def _kw(direction: str) -> str:
    """Keyword of :func:`_full` for a derivative direction."""
    return {"sigma_dev": "sdev", "rel_error": "rel_error", "sigma_asym": "sasym", "nu": "nu"}[direction]


def test_junction_terms_skip_leaves_directions_at_zero() -> None:
    d = _junctions(seed=2)
    skip = np.array([False, True, False, True, True])
    _, dll, _, _ = _full(d, student=True, skip=skip)
    np.testing.assert_array_equal(dll[:, skip], 0.0)
    _, dll_all, _, _ = _full(d, student=True)
    np.testing.assert_array_equal(dll[:, ~skip], dll_all[:, ~skip])


@pytest.mark.parametrize("student", [False, True], ids=["normal", "student_t"])
@pytest.mark.parametrize("direction", ["a", "sigma_dev", "nu"])
def test_fast_terms_derivatives_match_finite_differences(direction: str, student: bool) -> None:
    # Reference: scipy.optimize.approx_fprime. fast_terms holds the measurement error and the asymmetry
    # scale fixed (they enter through kernel.precompute), so only a, sigma_dev and nu are its parameters.
    d = _junctions(seed=3)
    pre = _pre(d)
    col = kernel.DIRECTIONS.index(direction)
    _, dll, _, _ = _fast(d, student=student, pre=pre)
    if direction == "a":
        jac = approx_fprime(
            d["a_specimen"], lambda a: _fast(d, a_specimen=a, student=student, pre=pre)[0], STEP
        )
        np.testing.assert_allclose(jac - np.diag(np.diag(jac)), 0.0, atol=1e-12)
        numeric = np.diag(jac)
    else:
        key = {"sigma_dev": "sdev", "nu": "nu"}[direction]
        numeric = approx_fprime(
            np.array([POINT[direction]]), lambda x: _fast(d, student=student, pre=pre, **{key: x[0]})[0], STEP
        )[:, 0]
    _assert_close_derivative(dll[:, col], numeric)
    # Fixed quantities have no derivative column.
    np.testing.assert_array_equal(
        dll[:, [kernel.DIRECTIONS.index("rel_error"), kernel.DIRECTIONS.index("sigma_asym")]], 0.0
    )


def test_aggregate_gradient_sums_by_specimen() -> None:
    # Exact algebra: the chain rule sums upstream-weighted per-junction derivatives within each specimen.
    rng = np.random.default_rng(4)
    dll = rng.standard_normal((9, 5))
    specimen_idx = np.array([0, 1, 2, 0, 1, 2, 2, 2, 0])
    upstream = rng.standard_normal(9)
    da, ds = kernel.aggregate_gradient(upstream, dll, specimen_idx, 4)
    expected = np.array([np.sum(upstream[specimen_idx == s] * dll[specimen_idx == s, 0]) for s in range(4)])
    np.testing.assert_allclose(da, expected, rtol=1e-12)
    np.testing.assert_allclose(ds, upstream @ dll[:, 1:], rtol=1e-12)


# -- two codes, one formula -----------------------------------------------------------------------------
@pytest.mark.parametrize("student", [False, True], ids=["normal", "student_t"])
def test_fast_terms_equal_junction_terms_at_fixed_asymmetry(student: bool) -> None:
    # Exact algebra: precompute + fast_terms and junction_terms implement the same likelihood.
    d = _junctions(seed=5)
    ll_f, dll_f, mean_f, var_f = _fast(d, student=student)
    ll_j, dll_j, mean_j, var_j = _full(d, student=student)
    np.testing.assert_allclose(ll_f, ll_j, rtol=1e-10, atol=1e-10)
    np.testing.assert_allclose(mean_f, mean_j, rtol=1e-12, atol=1e-12)
    np.testing.assert_allclose(var_f, var_j, rtol=1e-12)
    cols = [kernel.DIRECTIONS.index(x) for x in ("a", "sigma_dev", "nu")]
    np.testing.assert_allclose(dll_f[:, cols], dll_j[:, cols], rtol=1e-8, atol=1e-8)


@pytest.mark.parametrize("student", [False, True], ids=["normal", "student_t"])
def test_fast_loglik_sums_fast_terms_and_floors_the_exponent(student: bool) -> None:
    # Exact algebra: the sampler's loop is the sum of the per-junction terms; an exponent at or below the
    # floor is evaluated at the floor with derivative 0 (the kernel's documented contract).
    d = _junctions(seed=6)
    mu, g, c, ybar, lld, s0sq = _pre(d)
    a_j = d["a_specimen"][d["specimen_idx"]].copy()
    a_j[0] = -1.0  # below the floor
    floor = 0.05
    d_a = np.empty(a_j.shape[0])
    sdev, nu = POINT["sigma_dev"], POINT["nu"]
    total, d_sdev, d_nu = kernel.fast_loglik(
        d["y0"], mu, g, c, ybar, d["M"], s0sq, lld, a_j, floor, sdev, nu, student, d_a
    )
    a_eff = np.maximum(a_j, floor)
    ll, dll, _, _ = kernel.fast_terms(d["y0"], mu, g, c, ybar, d["M"], s0sq, lld, a_eff, sdev, nu, student)
    np.testing.assert_allclose(total, ll.sum(), rtol=1e-10)
    np.testing.assert_allclose(d_a[1:], dll[1:, 0], rtol=1e-8, atol=1e-10)
    assert d_a[0] == 0.0
    np.testing.assert_allclose(d_sdev, dll[:, 1].sum(), rtol=1e-8)
    np.testing.assert_allclose(d_nu, dll[:, 4].sum(), rtol=1e-8, atol=1e-12)


# -- posterior of the true daughters ----------------------------------------------------------------------
def _explicit_posterior(y: np.ndarray, s2: np.ndarray, asym_var: float) -> tuple[np.ndarray, np.ndarray]:
    """Posterior mean and covariance by inverting the precision diag(1/s^2) + (I - 11'/k)/asym_var,
    with asym_var = sigma_asym^2 the variance (not an SD) of a true daughter about its junction mean."""
    k = y.shape[0]
    precision = np.diag(1.0 / s2) + (np.eye(k) - np.ones((k, k)) / k) / asym_var
    cov = np.linalg.inv(precision)
    return cov @ (y / s2), cov


def test_precompute_matches_explicit_matrix_inverse() -> None:
    # Reference: numpy.linalg.inv of the explicit precision matrix (the kernel uses Sherman-Morrison).
    d = _junctions(n=20, seed=6)
    rel_error, sasym = POINT["rel_error"], POINT["sigma_asym"]
    mu, g, c, ybar, _, _ = _pre(d, rel_error, sasym)
    for j in range(d["y0"].shape[0]):
        m = d["M"][j]
        s2 = rel_error**2 + d["V"][j, m] + kernel.S2_FLOOR
        mean, cov = _explicit_posterior(d["Y"][j, m], s2, sasym**2)
        gj = g[j, m]
        np.testing.assert_allclose(np.diag(gj) + np.outer(gj, gj) / c[j], cov, rtol=1e-10, atol=1e-14)
        # The kernel's means are centred on the junction's mean observed log daughter; the flat level
        # makes the uncentred posterior mean exactly ybar larger.
        np.testing.assert_allclose(mu[j, m] + ybar[j], mean, rtol=1e-10, atol=1e-12)
        np.testing.assert_allclose(ybar[j], d["Y"][j, m].mean(), rtol=1e-14)
        np.testing.assert_array_equal(mu[j, ~m], 0.0)


# -- daughters' contrast density ---------------------------------------------------------------------------
def _contrast_logpdf(y: np.ndarray, s2: np.ndarray, asym_var: float, basis: np.ndarray) -> float:
    """Log density of the contrasts ``basis @ y`` (rows orthonormal and orthogonal to 1): the level is flat,
    the true contrasts are Normal(0, asym_var I), the measurement errors add ``basis diag(s2) basis'``."""
    cov = asym_var * np.eye(basis.shape[0]) + basis @ np.diag(s2) @ basis.T
    return float(multivariate_normal(mean=np.zeros(basis.shape[0]), cov=cov).logpdf(basis @ y))


def _random_contrast_basis(k: int, seed: int) -> np.ndarray:
    """A random orthonormal basis of the contrasts (orthogonal complement of the ones vector)."""
    rng = np.random.default_rng(seed)
    q, _ = np.linalg.qr(np.column_stack([np.ones(k), rng.standard_normal((k, k - 1))]))
    return q[:, 1:].T


@pytest.mark.parametrize("basis_kind", ["helmert", "random"])
def test_daughter_loglik_is_the_contrast_density(basis_kind: str) -> None:
    # Reference: scipy.stats.multivariate_normal of the daughters' contrasts. Any orthonormal contrast
    # basis gives the same density (unit Jacobian), and the flat level direction drops out exactly.
    d = _junctions(n=15, seed=7)
    rel_error, sasym = POINT["rel_error"], POINT["sigma_asym"]
    expected = []
    for j in range(d["y0"].shape[0]):
        m = d["M"][j]
        k = int(m.sum())
        basis = helmert(k) if basis_kind == "helmert" else _random_contrast_basis(k, seed=j)
        s2 = rel_error**2 + d["V"][j, m] + kernel.S2_FLOOR
        expected.append(_contrast_logpdf(d["Y"][j, m], s2, sasym**2, basis))
    expected = np.array(expected)
    total = kernel.daughter_loglik(d["Y"], d["M"], d["V"], rel_error, sasym)
    np.testing.assert_allclose(total, expected.sum(), rtol=1e-10)
    lld = _pre(d, rel_error, sasym)[4]
    np.testing.assert_allclose(lld, expected, rtol=1e-10)


def test_daughter_loglik_ignores_the_common_level() -> None:
    # Exact algebra: shifting every daughter of a junction by the same amount leaves the contrasts unchanged.
    d = _junctions(n=10, seed=8)
    shifted = np.where(d["M"], d["Y"] + 1.7, 0.0)
    a = kernel.daughter_loglik(d["Y"], d["M"], d["V"], 0.05, 0.3)
    b = kernel.daughter_loglik(shifted, d["M"], d["V"], 0.05, 0.3)
    np.testing.assert_allclose(a, b, rtol=1e-12)


@pytest.mark.parametrize("student", [False, True], ids=["normal", "student_t"])
def test_junction_loglik_is_parent_density_plus_contrast_density(student: bool) -> None:
    # Reference: scipy.stats.norm / scipy.stats.t for the parent given the predicted mean and variance,
    # scipy.stats.multivariate_normal for the daughters' contrasts. The kernel leaves the nu-only
    # normalising terms of the Student-t to its caller (added here as the caller does).
    d = _junctions(n=10, seed=9)
    nu = POINT["nu"]
    ll, _, mean, var = _full(d, student=student)
    rel_error, sasym = POINT["rel_error"], POINT["sigma_asym"]
    for j in range(d["y0"].shape[0]):
        m = d["M"][j]
        s2 = rel_error**2 + d["V"][j, m] + kernel.S2_FLOOR
        daughters = _contrast_logpdf(d["Y"][j, m], s2, sasym**2, helmert(int(m.sum())))
        if student:
            parent = student_t.logpdf(d["y0"][j], nu, loc=mean[j], scale=np.sqrt(var[j]))
            const = gammaln((nu + 1) / 2) - gammaln(nu / 2) - 0.5 * np.log(nu * np.pi)
            got = ll[j] + const
        else:
            parent = norm.logpdf(d["y0"][j], loc=mean[j], scale=np.sqrt(var[j]))
            got = ll[j]
        np.testing.assert_allclose(got, parent + daughters, rtol=1e-10)


# -- the law itself ------------------------------------------------------------------------------------------
@pytest.mark.parametrize("a", [1.5, 2.0, 3.0, 4.5])
def test_without_measurement_error_the_predicted_parent_is_the_law(a: float) -> None:
    # Exact algebra: with (almost) no measurement error the true daughters are the readings, so the
    # predicted log parent is logsumexp(a * log r) / a (reference: scipy.special.logsumexp) and its
    # variance is sigma_dev^2 plus the floor variances.
    d = _junctions(n=15, seed=10)
    zero = {**d, "V": np.zeros_like(d["V"]), "V0": np.zeros_like(d["V0"])}
    a_specimen = np.full(d["y0"].shape[0], a)
    sdev = 0.07
    for _, _, mean, var in (
        _full(zero, a_specimen=a_specimen, sdev=sdev, rel_error=0.0),
        _fast(zero, a_specimen=a_specimen, sdev=sdev, pre=_pre(zero, rel_error=0.0)),
    ):
        law = np.array([logsumexp(a * zero["Y"][j, zero["M"][j]]) / a for j in range(len(a_specimen))])
        # The floor (a 0.01 % error) moves the mean by O(1e-8 * a) only.
        np.testing.assert_allclose(mean, law, rtol=0, atol=1e-6)
        np.testing.assert_allclose(var, sdev**2, rtol=1e-5)


def test_symmetric_bifurcation_law_checks() -> None:
    # Exact algebra: a symmetric bifurcation obeys the law when r_daughter / r_parent = 2^(-1/a); a parent
    # read exactly on the law has zero residual, so its log-lik is the normal density's peak.
    a = 3.0
    r0 = 1.3
    Y = np.log(np.array([[r0 * 2 ** (-1 / a), r0 * 2 ** (-1 / a)]]))
    M = np.ones_like(Y, dtype=bool)
    ll, _, mean, var = kernel.junction_terms(
        np.array([np.log(r0)]),
        Y,
        M,
        np.zeros(1),
        np.zeros_like(Y),
        np.array([a]),
        0.05,
        0.0,
        0.3,
        30.0,
        False,
        np.ones(5, dtype=bool),
    )
    np.testing.assert_allclose(mean[0], np.log(r0), atol=1e-7)
    parent_peak = norm.logpdf(0.0, scale=np.sqrt(var[0]))
    daughters = _contrast_logpdf(Y[0], np.full(2, kernel.S2_FLOOR), 0.09, helmert(2))
    np.testing.assert_allclose(ll[0], parent_peak + daughters, rtol=1e-6)


# -- the delta method against simulation ------------------------------------------------------------------------
def test_second_order_delta_method_matches_monte_carlo() -> None:
    # Reference: Monte Carlo moments of m(u) = logsumexp(a u) / a with u ~ Normal(posterior mean,
    # posterior covariance) (numpy's generator, 2 million draws). The second-order mean is accurate to
    # O(s^4); its correction term must be visible against the first-order value m(mu).
    rng = np.random.default_rng(11)
    a, rel_error, sasym = 3.0, 0.08, 0.3
    y = np.log(np.array([0.62, 0.41, 0.35]))
    s2 = np.full(3, rel_error**2 + kernel.S2_FLOOR)
    mean_u, cov_u = _explicit_posterior(y, s2, sasym**2)
    u = rng.multivariate_normal(mean_u, cov_u, size=2_000_000)
    m = logsumexp(a * u, axis=1) / a
    M = np.ones((1, 3), dtype=bool)
    _, _, mean, var = kernel.junction_terms(
        np.array([0.0]),
        y[None, :],
        M,
        np.zeros(1),
        np.zeros((1, 3)),
        np.array([a]),
        1e-6,
        rel_error,
        sasym,
        30.0,
        False,
        np.ones(5, dtype=bool),
    )
    mc_se = m.std() / np.sqrt(m.size)
    first_order = logsumexp(a * mean_u) / a
    assert abs(mean[0] - m.mean()) < 5 * mc_se + 1e-4
    assert abs(first_order - m.mean()) > 3 * abs(mean[0] - m.mean())
    # Variance: kernel var = sigma_dev^2 + parent's measurement variance + w' Sigma w.
    delta_var = var[0] - 1e-12 - (rel_error**2 + kernel.S2_FLOOR)
    np.testing.assert_allclose(delta_var, m.var(), rtol=0.03)
