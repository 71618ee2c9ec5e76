"""Fused per-junction likelihood kernel (numba) for the marginal model.

For every junction the true daughter radii are integrated out analytically (Gaussian, second-order
delta method) under a structural prior on the daughters' asymmetry; see :mod:`allobranch.model.build` for
the model in words. On the log scale, with ``y`` the observed log daughters (centred on their junction
mean), ``s_i^2`` their measurement variances and ``asym_var = sigma_asym^2``:

* prior on the true log daughters ``u``: flat along the common level, ``Normal(0, asym_var)`` for each
  daughter's deviation from the junction mean: precision ``Q = (I - 11'/k) / asym_var``;
* posterior ``u | y ~ Normal(mu, Sigma)`` with ``Sigma^{-1} = diag(1/s^2) + Q``. By the Sherman-Morrison
  formula (exact algebra), with ``g_i = 1 / (1/s_i^2 + 1/asym_var)``, ``G = sum g_i`` and ``c = k asym_var - G``:
  ``Sigma = diag(g) + g g' / c`` and ``mu = Sigma (y / s^2)``;
* predicted log parent ``m(u) = logsumexp(a u) / a`` expanded to second order about ``mu``: gradient
  ``w = softmax(a mu)``, Hessian ``a (diag w - w w')``, so ``E[m] = m(mu) + tr(H Sigma) / 2 = m(mu) + (a/2) tr((diag w - w w') Sigma)`` and
  ``Var[m] = w' Sigma w``;
* parent: ``log y_0 ~ Normal(E[m], sigma_dev^2 + s_0^2 + w' Sigma w)`` (or Student-t with that scale);
* daughters: the exact Gaussian marginal density of the daughters' contrasts given ``asym_var`` (the level is
  flat and drops out), which is what identifies ``sigma_asym``.

Derivatives with respect to the exponent and the scalar hyper-parameters are computed by the complex-step
method (Squire & Trapp 1998, SIAM Review 40:110): ``f'(x) = Im f(x + i h) / h`` with ``h = 1e-30``, exact
to rounding for analytic functions, so the kernel is written once, in complex arithmetic, without
non-analytic operations on perturbed quantities.
"""

from __future__ import annotations

import math

import numba as nb
import numpy as np

#: Complex-step size.
H = 1e-30
#: Floor on a reading's log-scale measurement variance (a 0.01 % error), so readings given without any
#: error stay finite.
S2_FLOOR = 1e-8
#: Order of the derivative directions in the kernel's output.
DIRECTIONS: tuple[str, ...] = ("a", "sigma_dev", "rel_error", "sigma_asym", "nu")

_LOG2PI = math.log(2.0 * math.pi)


@nb.njit(cache=True, nogil=True, error_model="numpy")
def _one(y0, y, present, v0, v, a, sdev, rel_error, sasym, nu, student, mu_buf, g_buf, s2_buf):
    """Log-likelihood, predictive mean and variance of one junction (complex arithmetic)."""
    K = y.shape[0]
    k = 0
    ybar = 0.0
    for i in range(K):
        if present[i]:
            k += 1
            ybar += y[i]
    ybar /= k
    asym_var = sasym * sasym
    srel2 = rel_error * rel_error
    G = 0.0 + 0.0j
    B = 0.0 + 0.0j
    sum_log_s2 = 0.0 + 0.0j
    sum_log_g = 0.0 + 0.0j
    yy = 0.0 + 0.0j
    for i in range(K):
        if present[i]:
            s2 = srel2 + max(v[i], 0.0) + S2_FLOOR
            g = s2 * asym_var / (s2 + asym_var)
            s2_buf[i] = s2
            g_buf[i] = g
            yc = y[i] - ybar
            G += g
            B += g * yc / s2
            sum_log_s2 += np.log(s2)
            sum_log_g += np.log(g)
            yy += yc * yc / s2
    c = k * asym_var - G
    tmax = -1e300
    for i in range(K):
        if present[i]:
            yc = y[i] - ybar
            mu_buf[i] = g_buf[i] * yc / s2_buf[i] + g_buf[i] * B / c
            t = (a * mu_buf[i]).real
            if t > tmax:
                tmax = t
    se = 0.0 + 0.0j
    for i in range(K):
        if present[i]:
            se += np.exp(a * mu_buf[i] - tmax)
    L = tmax + np.log(se)
    wg = 0.0 + 0.0j
    wSw_diag = 0.0 + 0.0j
    w2g = 0.0 + 0.0j
    bmu = 0.0 + 0.0j
    for i in range(K):
        if present[i]:
            w = np.exp(a * mu_buf[i] - L)
            g = g_buf[i]
            wg += w * g
            w2g += w * w * g
            wSw_diag += w * (g + g * g / c)
            bmu += (y[i] - ybar) / s2_buf[i] * mu_buf[i]
    wSw = w2g + wg * wg / c
    mean = L / a + 0.5 * a * (wSw_diag - wSw)
    var = sdev * sdev + srel2 + max(v0, 0.0) + S2_FLOOR + wSw
    r = (y0 - ybar) - mean
    if student:
        ll_parent = -0.5 * np.log(var) - 0.5 * (nu + 1.0) * np.log(1.0 + r * r / (nu * var))
    else:
        ll_parent = -0.5 * (_LOG2PI + np.log(var)) - 0.5 * r * r / var
    ll_daughters = (
        -0.5 * sum_log_s2
        - 0.5 * (k - 1) * (_LOG2PI + np.log(asym_var))
        + 0.5 * sum_log_g
        - 0.5 * np.log(c / (k * asym_var))
        - 0.5 * (yy - bmu)
    )
    return ll_parent + ll_daughters, mean + ybar, var


@nb.njit(cache=True, nogil=True, error_model="numpy")
def junction_terms(y0, Y, M, V0, V, a_junction, sdev, rel_error, sasym, nu, student, skip):
    """Per-junction log-likelihood, its derivatives, and the parent's predictive mean and variance.

    Parameters
    ----------
    y0 : (n,) float
        Log observed parent radii.
    Y, M, V : (n, K) float / bool / float
        Log observed daughters, presence mask, absolute-error log-scale variances.
    V0 : (n,) float
        Absolute-error log-scale variance of the parent.
    a_junction : (n,) float
        Each junction's exponent, computed by the caller from the model's linear predictor (population,
        taxon and specimen effects and covariate terms); the kernel knows nothing of the hierarchy.
    sdev, rel_error, sasym, nu : float
        Biological deviation, relative measurement error, asymmetry scale, Student-t degrees of freedom.
    student : bool
        Student-t (True) or normal (False) parent deviation. For Student-t the normalising terms that
        depend on ``nu`` only are left to the caller.
    skip : (5,) bool
        Derivative directions of :data:`DIRECTIONS` not to compute (left at zero).

    Returns
    -------
    ll : (n,) float
    dll : (n, 5) float
        Derivatives of ``ll`` in the order of :data:`DIRECTIONS` (zeros where skipped).
    mean, var : (n,) float
        Predictive mean and variance of the log parent (normal part).
    """
    n, K = Y.shape
    ll = np.empty(n)
    dll = np.zeros((n, 5))
    mean = np.empty(n)
    var = np.empty(n)
    mu_buf = np.empty(K, dtype=np.complex128)
    g_buf = np.empty(K, dtype=np.complex128)
    s2_buf = np.empty(K, dtype=np.complex128)
    n_dirs = skip.shape[0]
    for j in range(n):
        base = (a_junction[j], sdev, rel_error, sasym, nu)
        val, m, v = _one(
            y0[j],
            Y[j],
            M[j],
            V0[j],
            V[j],
            complex(base[0]),
            complex(base[1]),
            complex(base[2]),
            complex(base[3]),
            complex(base[4]),
            student,
            mu_buf,
            g_buf,
            s2_buf,
        )
        ll[j] = val.real
        mean[j] = m.real
        var[j] = v.real
        for d in range(n_dirs):
            if skip[d]:
                continue
            e = np.zeros(5, dtype=np.complex128)
            e[d] = 1j * H
            vd, _, _ = _one(
                y0[j],
                Y[j],
                M[j],
                V0[j],
                V[j],
                base[0] + e[0],
                base[1] + e[1],
                base[2] + e[2],
                base[3] + e[3],
                base[4] + e[4],
                student,
                mu_buf,
                g_buf,
                s2_buf,
            )
            dll[j, d] = vd.imag / H
    return ll, dll, mean, var


@nb.njit(cache=True, nogil=True, error_model="numpy")
def precompute(Y, M, V, rel_error, tau_j):
    """Posterior of the true log daughters for fixed measurement error and asymmetry.

    Returns ``mu`` (n, K) centred posterior means, ``g`` (n, K), ``c`` (n,), ``ybar`` (n,) and the
    daughters' contrast log-density per junction (n,). ``tau_j`` is the asymmetry variance per junction.
    """
    n, K = Y.shape
    mu = np.zeros((n, K))
    g = np.zeros((n, K))
    c = np.zeros(n)
    ybar = np.zeros(n)
    lld = np.zeros(n)
    for j in range(n):
        k = 0
        yb = 0.0
        for i in range(K):
            if M[j, i]:
                k += 1
                yb += Y[j, i]
        yb /= k
        asym_var = tau_j[j]
        G = 0.0
        B = 0.0
        sls2 = 0.0
        slg = 0.0
        yy = 0.0
        for i in range(K):
            if M[j, i]:
                s2 = rel_error * rel_error + max(V[j, i], 0.0) + S2_FLOOR
                gi = s2 * asym_var / (s2 + asym_var)
                g[j, i] = gi
                yc = Y[j, i] - yb
                G += gi
                B += gi * yc / s2
                sls2 += math.log(s2)
                slg += math.log(gi)
                yy += yc * yc / s2
        cj = k * asym_var - G
        bmu = 0.0
        for i in range(K):
            if M[j, i]:
                s2 = rel_error * rel_error + max(V[j, i], 0.0) + S2_FLOOR
                yc = Y[j, i] - yb
                mu[j, i] = g[j, i] * yc / s2 + g[j, i] * B / cj
                bmu += yc / s2 * mu[j, i]
        c[j] = cj
        ybar[j] = yb
        lld[j] = (
            -0.5 * sls2
            - 0.5 * (k - 1) * (_LOG2PI + math.log(asym_var))
            + 0.5 * slg
            - 0.5 * math.log(cj / (k * asym_var))
            - 0.5 * (yy - bmu)
        )
    return mu, g, c, ybar, lld


def daughter_loglik(Y, M, V, rel_error: float, sasym: float) -> float:
    """Sum over junctions of the daughters' contrast log-density (used to estimate the asymmetry scale by
    maximum marginal likelihood)."""
    asym_var = np.full(Y.shape[0], sasym * sasym)
    return float(precompute(Y, M, V, rel_error, asym_var)[4].sum())


@nb.njit(
    cache=True,
    nogil=True,
    error_model="numpy",
    inline="always",
    fastmath={"nsz", "arcp", "contract", "afn", "reassoc"},
)
def _fast_one(y0, mu, g, cj, ybar, m, s0sq, lld, a, sdev, nu, student, w_buf):
    """One junction of :func:`fast_terms`: log-likelihood, its derivatives in the exponent, ``sigma_dev`` and
    ``nu``, and the predicted log parent's mean and variance. ``mu``, ``g``, ``m`` are the junction's rows."""
    K = mu.shape[0]
    tmax = -1e300
    for i in range(K):
        if m[i]:
            t = a * mu[i]
            if t > tmax:
                tmax = t
    se = 0.0
    for i in range(K):
        if m[i]:
            e = math.exp(a * mu[i] - tmax)
            w_buf[i] = e
            se += e
        else:
            w_buf[i] = 0.0
    L = tmax + math.log(se)
    inv_se = 1.0 / se
    inv_c = 1.0 / cj
    mbar = 0.0
    wg = 0.0
    w2g = 0.0
    Dg = 0.0
    for i in range(K):
        w = w_buf[i] * inv_se
        w_buf[i] = w
        gi = g[i]
        mbar += w * mu[i]
        wg += w * gi
        w2g += w * w * gi
        Dg += w * (gi + gi * gi * inv_c)
    S = w2g + wg * wg * inv_c
    dD = 0.0
    dw2g = 0.0
    dwg = 0.0
    for i in range(K):
        w = w_buf[i]
        gi = g[i]
        dw = w * (mu[i] - mbar)
        dD += dw * (gi + gi * gi * inv_c)
        dw2g += 2.0 * w * dw * gi
        dwg += dw * gi
    dS = dw2g + 2.0 * wg * dwg * inv_c
    inv_a = 1.0 / a
    mean = L * inv_a + 0.5 * a * (Dg - S)
    dmean = (mbar - L * inv_a) * inv_a + 0.5 * (Dg - S) + 0.5 * a * (dD - dS)
    var = sdev * sdev + s0sq + S
    inv_var = 1.0 / var
    r = (y0 - ybar) - mean
    if student:
        q = 1.0 + r * r * inv_var / nu
        llp = -0.5 * math.log(var) - 0.5 * (nu + 1.0) * math.log(q)
        d_mean = (nu + 1.0) * r * inv_var / (nu * q)
        d_var = -0.5 * inv_var + 0.5 * (nu + 1.0) * r * r * inv_var * inv_var / (nu * q)
        d_nu = -0.5 * math.log(q) + 0.5 * (nu + 1.0) * r * r * inv_var / (nu * nu * q)
    else:
        llp = -0.5 * (_LOG2PI + math.log(var)) - 0.5 * r * r * inv_var
        d_mean = r * inv_var
        d_var = -0.5 * inv_var + 0.5 * r * r * inv_var * inv_var
        d_nu = 0.0
    return llp + lld, d_mean * dmean + d_var * dS, d_var * 2.0 * sdev, d_nu, mean + ybar, var


@nb.njit(cache=True, nogil=True, error_model="numpy")
def fast_terms(y0, mu, g, c, ybar, M, s0sq, lld, a_junction, sdev, nu, student):
    """Per-junction log-likelihood with analytic derivatives, for fixed measurement error and asymmetry.

    ``s0sq`` (n,) is the parent's log-scale measurement variance; ``a_junction`` (n,) is each junction's
    exponent (the caller's linear predictor). Returns ``ll`` (n,), ``dll`` (n, 5) in
    the order of :data:`DIRECTIONS` (``rel_error`` and ``sigma_asym`` columns are zero), ``mean`` and
    ``var`` (n,) of the predicted log parent.
    """
    n, K = mu.shape
    ll = np.empty(n)
    dll = np.zeros((n, 5))
    mean_out = np.empty(n)
    var_out = np.empty(n)
    w_buf = np.empty(K)
    for j in range(n):
        v, d_a, d_sdev, d_nu, mean, var = _fast_one(
            y0[j], mu[j], g[j], c[j], ybar[j], M[j], s0sq[j], lld[j], a_junction[j], sdev, nu, student, w_buf
        )
        ll[j] = v
        dll[j, 0] = d_a
        dll[j, 1] = d_sdev
        dll[j, 4] = d_nu
        mean_out[j] = mean
        var_out[j] = var
    return ll, dll, mean_out, var_out


@nb.njit(cache=True, nogil=True, error_model="numpy", fastmath={"nsz", "arcp", "contract", "afn", "reassoc"})
def fast_loglik(y0, mu, g, c, ybar, M, s0sq, lld, a_junction, a_floor, sdev, nu, student, d_a):
    """Summed log-likelihood of :func:`fast_terms` without its per-junction tables (the sampler's hot loop).

    Each exponent is floored at ``a_floor`` (its derivative is then 0). Writes each junction's derivative in
    its exponent into ``d_a`` (n,) and returns the total and its derivatives in ``sigma_dev`` and ``nu``.
    """
    n, K = mu.shape
    w_buf = np.empty(K)
    total = 0.0
    d_sdev = 0.0
    d_nu = 0.0
    for j in range(n):
        a = a_junction[j]
        floored = a <= a_floor
        v, da, ds, dn, _, _ = _fast_one(
            y0[j],
            mu[j],
            g[j],
            c[j],
            ybar[j],
            M[j],
            s0sq[j],
            lld[j],
            a_floor if floored else a,
            sdev,
            nu,
            student,
            w_buf,
        )
        total += v
        d_a[j] = 0.0 if floored else da
        d_sdev += ds
        d_nu += dn
    return total, d_sdev, d_nu


@nb.njit(cache=True, nogil=True, error_model="numpy")
def aggregate_gradient(g, dll, specimen_idx, n_specimens):
    """Chain rule: upstream gradient ``g`` (n,) times per-junction derivatives, summed by parameter.

    Returns the gradient for the specimen exponents (n_specimens,) and for the four scalars.
    """
    da = np.zeros(n_specimens)
    ds = np.zeros(4)
    for j in range(g.shape[0]):
        da[specimen_idx[j]] += g[j] * dll[j, 0]
        for d in range(4):
            ds[d] += g[j] * dll[j, d + 1]
    return da, ds
