"""Shared pieces of the compiled fast-form density: the packed buffers' layout, views into them, the junction
likelihood at per-junction exponents and the deviation scale's prior terms.

:mod:`allobranch.model.density` packs the buffers and holds the weighted (partially centred) hierarchy;
:mod:`allobranch.model.density_white` holds the whitened hierarchy with the linear predictor.
"""

from __future__ import annotations

import math

import numba as nb
import numpy as np

from allobranch.model import kernel

#: Smallest exponent used inside the law (keeps prior draws with a <= 0 finite; far from any posterior).
A_FLOOR = 0.05

# integer header slots
(_N, _K, _NT, _NS, _MU_FREE, _TAXON, _SPEC, _STUDENT, _NDIM, _NEXP, _MU_COND, _WHITE) = range(12)
(_P, _BYTAXON, _Q, _PHYLO, _NINT, _NFLOAT) = range(12, 18)
_HEAD = 18
# bits of the _PHYLO slot: a tree; Pagel's lambda fixed (eigenvalues passed already mixed, so the density
# uses lambda = 1); the taxon deviations' exact conditional (full data precision in the eigenbasis) rather
# than its diagonal approximation
PHYLO_TREE, PHYLO_LAMBDA_FIXED, PHYLO_EXACT = 1, 2, 4
# float header slots
_MU_MEAN, _MU_SD, _TT_SCALE, _TS_SCALE, _SD_SCALE, _NU_A, _NU_B, _MU_FIXED = range(8)
_FHEAD = 8
_LOG_HALF_NORMAL_CONST = 0.5 * math.log(2.0 / math.pi)
_LOG2PI = math.log(2.0 * math.pi)


@nb.njit(cache=True, nogil=True, error_model="numpy")
def _views(ints, floats):
    n, K, nt, ns = ints[_N], ints[_K], ints[_NT], ints[_NS]
    p = _HEAD
    specimen_idx = ints[p : p + n]
    p += n  # noqa: E702
    specimen_taxon = ints[p : p + ns]
    p += ns  # noqa: E702
    fixed_t = ints[p : p + nt]
    p += nt  # noqa: E702
    pinned = ints[p : p + ns]
    q = _FHEAD
    y0 = floats[q : q + n]
    q += n  # noqa: E702
    mu = floats[q : q + n * K].reshape((n, K))
    q += n * K  # noqa: E702
    g = floats[q : q + n * K].reshape((n, K))
    q += n * K  # noqa: E702
    c = floats[q : q + n]
    q += n  # noqa: E702
    ybar = floats[q : q + n]
    q += n  # noqa: E702
    M = floats[q : q + n * K].reshape((n, K))
    q += n * K  # noqa: E702
    s0sq = floats[q : q + n]
    q += n  # noqa: E702
    lld = floats[q : q + n]
    q += n  # noqa: E702
    w_t = floats[q : q + nt]
    q += nt  # noqa: E702
    w_s = floats[q : q + ns]
    q += ns  # noqa: E702
    fixed_vals = floats[q : q + nt]
    return (
        specimen_idx,
        specimen_taxon,
        fixed_t,
        pinned,
        y0,
        mu,
        g,
        c,
        ybar,
        M,
        s0sq,
        lld,
        w_t,
        w_s,
        fixed_vals,
    )


@nb.njit(cache=True, nogil=True, error_model="numpy")
def _pilot_views(ints, floats):
    """The pilot's specimen exponents and precisions (whitened form)."""
    n, K, nt, ns = ints[_N], ints[_K], ints[_NT], ints[_NS]
    q = _FHEAD + n * (5 + 3 * K) + 2 * nt + ns
    return floats[q : q + ns], floats[q + ns : q + 2 * ns]


@nb.njit(cache=True, nogil=True, error_model="numpy")
def _linear_views(ints, floats):
    """The linear predictor's data: junction covariates ``X`` (n, p), each specimen's mean covariates
    (ns, p), taxon traits (nt, q), the phylogeny's eigenvectors (nt, nt; empty without a tree) and
    eigenvalues (nt), and the prior scales of the slopes, of their spread over taxa and of the trait
    slopes."""
    n, K, nt, ns = ints[_N], ints[_K], ints[_NT], ints[_NS]
    p, q = ints[_P], ints[_Q]
    o = _FHEAD + n * (5 + 3 * K) + 2 * nt + 3 * ns
    X = floats[o : o + n * p].reshape((n, p))
    o += n * p
    xbar = floats[o : o + ns * p].reshape((ns, p))
    o += ns * p
    G = floats[o : o + nt * q].reshape((nt, q))
    o += nt * q
    nv = nt if ints[_PHYLO] else 0
    V = floats[o : o + nv * nv].reshape((nv, nv))
    o += nv * nv
    lam = floats[o : o + nt]
    o += nt
    beta_sd = floats[o : o + p]
    o += p
    tb_scale = floats[o : o + p]
    o += p
    gamma_sd = floats[o : o + q]
    return X, xbar, G, V, lam, beta_sd, tb_scale, gamma_sd


@nb.njit(cache=True, nogil=True, error_model="numpy")
def _digamma(x):
    """Digamma by upward recurrence and the asymptotic series (error below 1e-13 for x > 0)."""
    acc = 0.0
    while x < 6.0:
        acc -= 1.0 / x
        x += 1.0
    inv = 1.0 / x
    inv2 = inv * inv
    return (
        acc
        + math.log(x)
        - 0.5 * inv
        - inv2
        * (1.0 / 12 - inv2 * (1.0 / 120 - inv2 * (1.0 / 252 - inv2 * (1.0 / 240 - inv2 * (1.0 / 132)))))
    )


@nb.njit(cache=True, nogil=True, error_model="numpy")
def _half_normal_log(log_x, scale):
    """Half-normal log density of x = exp(log_x) plus the log-transform Jacobian, and its derivative."""
    x = math.exp(log_x)
    lp = _LOG_HALF_NORMAL_CONST - math.log(scale) - 0.5 * (x / scale) ** 2 + log_x
    return lp, 1.0 - (x / scale) ** 2


@nb.njit(cache=True, nogil=True, error_model="numpy")
def _junction_likelihood_j(ints, floats, a_j, sdev, nu):
    """Summed junction log-likelihood at real per-junction exponents ``a_j`` (floored at :data:`A_FLOOR`),
    with its derivatives in every junction's exponent, the deviation scale and ``nu``."""
    n = ints[_N]
    student = ints[_STUDENT] != 0
    views = _views(ints, floats)
    y0, mu_post, g, c, ybar, M, s0sq, lld = (
        views[4],
        views[5],
        views[6],
        views[7],
        views[8],
        views[9],
        views[10],
        views[11],
    )
    d_aj = np.empty(n)
    total, d_sdev, d_nu = kernel.fast_loglik(
        y0, mu_post, g, c, ybar, M, s0sq, lld, a_j, A_FLOOR, sdev, nu, student, d_aj
    )
    return total, d_aj, d_sdev, d_nu


@nb.njit(cache=True, nogil=True, error_model="numpy")
def _junction_likelihood(ints, floats, a_s, sdev, nu):
    """:func:`_junction_likelihood_j` when every junction takes its specimen's exponent ``a_s``; the
    derivatives are summed by specimen."""
    ns = ints[_NS]
    specimen_idx = _views(ints, floats)[0]
    total, d_aj, d_sdev, d_nu = _junction_likelihood_j(ints, floats, a_s[specimen_idx], sdev, nu)
    d_as = np.zeros(ns)
    for j in range(specimen_idx.shape[0]):
        d_as[specimen_idx[j]] += d_aj[j]
    return total, d_as, d_sdev, d_nu


@nb.njit(cache=True, nogil=True, error_model="numpy")
def _deviation_terms(x, k, ints, floats, d_sdev, d_nu, grad):
    """Prior, Jacobian and gradient of ``log sigma_dev`` at ``x[k]`` (and ``log nu`` at ``x[k + 1]`` for the
    Student-t), given the likelihood's derivatives in ``sigma_dev`` and ``nu``; returns their log density."""
    log_sdev = x[k]
    sdev = math.exp(log_sdev)
    lp, dhn = _half_normal_log(log_sdev, floats[_SD_SCALE])
    grad[k] = dhn + sdev * d_sdev
    if ints[_STUDENT]:
        n = ints[_N]
        nu = math.exp(x[k + 1])
        alpha, beta = floats[_NU_A], floats[_NU_B]
        const = n * (math.lgamma((nu + 1.0) / 2.0) - math.lgamma(nu / 2.0) - 0.5 * math.log(nu * math.pi))
        d_const = n * (0.5 * _digamma((nu + 1.0) / 2.0) - 0.5 * _digamma(nu / 2.0) - 0.5 / nu)
        lp += const + alpha * math.log(beta) - math.lgamma(alpha) + (alpha - 1.0) * math.log(nu) - beta * nu
        lp += math.log(nu)  # Jacobian of the log transform
        grad[k + 1] = nu * (d_nu + d_const + (alpha - 1.0) / nu - beta) + 1.0
    return lp
