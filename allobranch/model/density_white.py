"""The whitened hierarchy of the compiled density, with the exponent as a linear predictor.

Every junction's exponent is ``a_j = a_specimen[s(j)] + x_j . beta_taxon[t(j)]``: its specimen's exponent
(at the reference value of every covariate) plus covariate terms whose slopes are shared (``beta``) or vary
by taxon (``beta + tau_beta * z``). Specimens sit under their taxon, ``a_specimen ~ Normal(a_taxon,
tau_specimen)``; taxa under the population, ``a_taxon = mu + g_t . gamma + u_t`` with trait slopes ``gamma``
and deviations ``u ~ MVN(0, tau_taxon^2 (lambda C + (1 - lambda) I))``: independent without a tree
(``C = 0``), Brownian motion on a tree scaled by Pagel's lambda with one (``C`` the shared branch length of
two tips, scaled to a unit mean diagonal).

Sampling coordinates. With the pilot's Gaussian approximation of each specimen's likelihood, messages
passed up the tree give each node's conditional normal given its parent and the spreads; each node is
sampled as that conditional mean plus a standardised deviation times the conditional SD, top down. Under a
tree the taxon deviations are written in the eigenbasis of ``C`` (``C = V diag(l) V'``, so the prior is
independent across eigen-coordinates with variances ``tau^2 (lambda l_i + 1 - lambda)``) and the data's
precision is taken in full (a Cholesky factor per density, up to
:data:`allobranch.model.density.TREE_EXACT_MAX_TAXA` taxa) or by its diagonal in that basis (above; the
diagonal alone couples the deviations to the specimen spread when the taxa's data precisions differ,
which costs effective samples). Whatever the approximation, the map from the
standardised coordinates to the natural parameters is an exact change of variables (its log Jacobian, the
sum of the conditional log SDs, is added), so the posterior is exact; the approximation only decides how
round the geometry is.

Derivatives: analytic for the specimen and taxon deviations (each moves one node, or one eigen-coordinate,
given everything above it) and for the taxon slope deviations (one per taxon and covariate: reverse mode
through the pilot exponents they move, :func:`_pilot_adjoint`); complex step (Squire & Trapp 1998) for the
few coordinates above them. On the exact path the complex steps reuse the real Cholesky factor of the point
itself, taking the factor's imaginary parts to first order (:mod:`allobranch.model.tree_algebra`), so a
density costs one factor whatever the number of coordinates above the deviations.
"""

from __future__ import annotations

import math

import numba as nb
import numpy as np

from allobranch.model import kernel
from allobranch.model import tree_algebra as ta
from allobranch.model.density_parts import (
    _BYTAXON,
    _LOG2PI,
    _LOG_HALF_NORMAL_CONST,
    _MU_FIXED,
    _MU_FREE,
    _MU_MEAN,
    _MU_SD,
    _N,
    _NS,
    _NT,
    _P,
    _PHYLO,
    _Q,
    _SPEC,
    _STUDENT,
    _TAXON,
    _TS_SCALE,
    _TT_SCALE,
    PHYLO_EXACT,
    PHYLO_LAMBDA_FIXED,
    _deviation_terms,
    _junction_likelihood_j,
    _linear_views,
    _pilot_views,
    _views,
)


@nb.njit(cache=True, nogil=True, error_model="numpy")
def _lambda_free(ints):
    """A tree with Pagel's lambda sampled."""
    return ints[_PHYLO] != 0 and not (ints[_PHYLO] & PHYLO_LAMBDA_FIXED)


@nb.njit(cache=True, nogil=True, error_model="numpy")
def white_blocks(ints):
    """Start of each block of the whitened coordinates: ``gamma``, ``beta``, ``tau_beta`` (then the taxon
    slope deviations), ``log tau_taxon`` (then ``logit lambda`` under a tree, unless lambda is fixed), the taxon deviations,
    ``log tau_specimen``, the specimen deviations, and the number of hierarchy coordinates. ``mu``'s
    deviation, when it is free, is coordinate 0."""
    nt, ns, p, q = ints[_NT], ints[_NS], ints[_P], ints[_Q]
    k = 1 if ints[_MU_FREE] else 0
    k_gamma = k
    k += q
    k_beta = k
    k += p
    k_tb = k
    if ints[_BYTAXON]:
        k += p + nt * p
    k_tt = k
    if ints[_TAXON]:
        k += 2 if _lambda_free(ints) else 1
    k_zt = k
    if ints[_TAXON]:
        k += nt
    k_ts = k
    if ints[_SPEC]:
        k += 1
    k_zs = k
    if ints[_SPEC]:
        k += ns
    return k_gamma, k_beta, k_tb, k_tt, k_zt, k_ts, k_zs, k


@nb.njit(cache=True, nogil=True, error_model="numpy")
def _no_factor():
    """Empty ``L_known`` and ``context`` for :func:`_forward`: factor afresh at a real point."""
    no_L = np.zeros((0, 0))
    return no_L, (np.zeros(0), np.zeros(0), no_L, no_L)


@nb.njit(cache=True, nogil=True, error_model="numpy")
def _forward(x, ints, floats, L_known, context):
    """Natural parameters and their log prior plus log Jacobian from the whitened coordinates ``x``
    (complex, for complex-step derivatives).

    Returns the specimen exponents, the taxon slopes (nt, p), the log density, ``mu``, the taxon
    exponents, the eigen-coordinates of the taxon deviations, their conditional SDs and prior variances,
    the real Cholesky factor of their exact conditional precision (empty unless that is used), and the
    real parts of what :func:`_pilot_adjoint` needs (``c_e``, ``q_e``, ``d``, ``A^-1 c_e``, mu's
    conditional precision, the two spreads squared).
    ``L_known`` is that factor from the call at the real point and ``context`` its
    :func:`allobranch.model.tree_algebra.factor_context` (for a complex step: the step's imaginary parts
    are then taken to first order from them); pass empty arrays to factor afresh at a real point.
    """
    nt, ns = ints[_NT], ints[_NS]
    p, q = ints[_P], ints[_Q]
    taxon_level = ints[_TAXON] != 0
    specimen_level = ints[_SPEC] != 0
    phylo = ints[_PHYLO] != 0
    views = _views(ints, floats)
    specimen_taxon, fixed_t, pinned, fixed_vals = views[1], views[2], views[3], views[14]
    ahat, prec = _pilot_views(ints, floats)
    X, xbar, G, V, lam_eig, beta_sd, tb_scale, gamma_sd = _linear_views(ints, floats)
    k_gamma, k_beta, k_tb, k_tt, k_zt, k_ts, k_zs, n_h = white_blocks(ints)
    lp = 0.0 + 0.0j
    # trait and covariate slopes
    gam = x[k_gamma : k_gamma + q]
    for m in range(q):
        lp += -0.5 * _LOG2PI - math.log(gamma_sd[m]) - 0.5 * (gam[m] / gamma_sd[m]) ** 2
    beta = x[k_beta : k_beta + p]
    for kk in range(p):
        lp += -0.5 * _LOG2PI - math.log(beta_sd[kk]) - 0.5 * (beta[kk] / beta_sd[kk]) ** 2
    beta_t = np.empty((nt, p), dtype=np.complex128)
    for t in range(nt):
        for kk in range(p):
            beta_t[t, kk] = beta[kk]
    if ints[_BYTAXON]:
        for kk in range(p):
            ltb = x[k_tb + kk]
            tb = np.exp(ltb)
            lp += _LOG_HALF_NORMAL_CONST - math.log(tb_scale[kk]) - 0.5 * (tb / tb_scale[kk]) ** 2 + ltb
            for t in range(nt):
                z = x[k_tb + p + t * p + kk]
                beta_t[t, kk] = beta[kk] + tb * z
                lp += -0.5 * _LOG2PI - 0.5 * z * z
    # spreads
    T_t = 0.0 + 0.0j
    lam = 0.0 + 0.0j
    if taxon_level:
        lt_t = x[k_tt]
        T_t = np.exp(2.0 * lt_t)
        lp += _LOG_HALF_NORMAL_CONST - math.log(floats[_TT_SCALE]) - 0.5 * T_t / floats[_TT_SCALE] ** 2 + lt_t
        if _lambda_free(ints):  # uniform prior on lambda, sampled on the logit scale
            lam = 1.0 / (1.0 + np.exp(-x[k_tt + 1]))
            lp += np.log(lam) + np.log(1.0 - lam)
        elif phylo:  # lambda fixed: the eigenvalues come mixed, lambda C + (1 - lambda) I
            lam = 1.0 + 0.0j
    T_s = 0.0 + 0.0j
    if specimen_level:
        lt_s = x[k_ts]
        T_s = np.exp(2.0 * lt_s)
        lp += _LOG_HALF_NORMAL_CONST - math.log(floats[_TS_SCALE]) - 0.5 * T_s / floats[_TS_SCALE] ** 2 + lt_s
    # each specimen's pilot exponent moved to the reference covariate values at the current slopes
    ah = np.empty(ns, dtype=np.complex128)
    for s in range(ns):
        v = ahat[s] + 0.0j
        for kk in range(p):
            v -= xbar[s, kk] * beta_t[specimen_taxon[s], kk]
        ah[s] = v
    # messages up: each free specimen's marginal about its taxon
    upP = np.zeros(nt, dtype=np.complex128)
    upM = np.zeros(nt, dtype=np.complex128)
    for s in range(ns):
        if pinned[s] or prec[s] <= 0.0:
            continue
        v = T_s + 1.0 / prec[s] if specimen_level else (1.0 + 0.0j) / prec[s]
        upP[specimen_taxon[s]] += 1.0 / v
        upM[specimen_taxon[s]] += ah[s] / v
    gt = np.zeros(nt, dtype=np.complex128)
    for t in range(nt):
        for m in range(q):
            gt[t] += G[t, m] * gam[m]
    # the taxon deviations' data in eigen-coordinates (identity without a tree): precision q_e, the
    # projection c_e of the population exponent, and the projected evidence h0 at mu = 0
    d = np.ones(nt, dtype=np.complex128)
    c_e = np.zeros(nt, dtype=np.complex128)
    q_e = np.zeros(nt, dtype=np.complex128)
    h0 = np.zeros(nt, dtype=np.complex128)
    if phylo:
        for i in range(nt):
            d[i] = lam * lam_eig[i] + (1.0 - lam)
            for t in range(nt):
                vt = V[t, i]
                c_e[i] += vt * upP[t]
                q_e[i] += vt * vt * upP[t]
                h0[i] += vt * (upM[t] - upP[t] * gt[t])
    else:
        for t in range(nt):
            if not fixed_t[t]:
                c_e[t] = upP[t]
                q_e[t] = upP[t]
                h0[t] = upM[t] - upP[t] * gt[t]
    # message up to mu, then mu
    Pmu = 0.0 + 0.0j
    Mmu = 0.0 + 0.0j
    exact = taxon_level and phylo and (ints[_PHYLO] & PHYLO_EXACT) != 0
    L = np.zeros((0, 0))
    b_c = np.zeros(nt, dtype=np.complex128)
    b_h = np.zeros(nt, dtype=np.complex128)
    e_im = np.zeros(nt)
    f_im = np.zeros(nt)
    if exact:
        # the deviations' full conditional precision in the eigenbasis, A = diag(1/(T d)) + V' diag(upP) V
        # = L L' (real; complex steps enter to first order, see tree_algebra), and mu's message by the
        # Schur complement: 1'D1 - c'A^-1 c and sum r - c'A^-1 h0
        e0 = 1.0 / (T_t * d)
        e_im = e0.imag.copy()
        f_im = upP.imag.copy()
        if L_known.shape[0] == nt:
            L = L_known
        else:
            A = ta.data_precision(V, np.ascontiguousarray(upP.real))
            for i in range(nt):
                A[i, i] += e0[i].real
            L = ta.cholesky(A)
        b_c = ta.a_solve(L, V, e_im, f_im, c_e)
        b_h = ta.a_solve(L, V, e_im, f_im, h0)
        for t in range(nt):
            Pmu += upP[t]
            Mmu += upM[t] - upP[t] * gt[t]
        for i in range(nt):
            Pmu -= c_e[i] * b_c[i]
            Mmu -= c_e[i] * b_h[i]
    else:
        for i in range(nt):
            if q_e[i].real <= 0.0:
                continue
            v = T_t * d[i] + 1.0 / q_e[i]
            r = c_e[i] / q_e[i]
            Pmu += r * r / v
            Mmu += r * (h0[i] / q_e[i]) / v
    P = 1.0 + 0.0j
    if ints[_MU_FREE]:
        m0, s0 = floats[_MU_MEAN], floats[_MU_SD]
        P = 1.0 / (s0 * s0) + Pmu
        sd = 1.0 / np.sqrt(P)
        mu = (m0 / (s0 * s0) + Mmu) / P + sd * x[0]
        lp += -0.5 * _LOG2PI - math.log(s0) - 0.5 * ((mu - m0) / s0) ** 2 + np.log(sd)
    else:
        mu = floats[_MU_FIXED] + 0.0j
    # taxa
    w = np.zeros(nt, dtype=np.complex128)
    sdw = np.zeros(nt, dtype=np.complex128)
    Td = np.ones(nt, dtype=np.complex128)
    u = np.zeros(nt, dtype=np.complex128)
    if exact:  # w = A^-1 (h0 - mu c) + L'^-1 z, log Jacobian -sum log L_ii
        dinv, ddata, S_e, S_f = context
        z = np.ascontiguousarray(x[k_zt : k_zt + nt].real)
        w = b_h - mu * b_c + ta.upper_t_solve_z(L, z, e_im, f_im, S_e, S_f)
        for i in range(nt):
            Td[i] = T_t * d[i]
            sdw[i] = 1.0 / L[i, i]
            lp += -0.5 * _LOG2PI - 0.5 * np.log(Td[i]) - 0.5 * w[i] * w[i] / Td[i]
        lp -= ta.half_log_det(L, e_im, f_im, dinv, ddata)
    elif taxon_level:
        for i in range(nt):
            if not phylo and fixed_t[i]:
                lp += -0.5 * _LOG2PI - 0.5 * x[k_zt + i] ** 2
                continue
            Td[i] = T_t * d[i]
            h = h0[i] - mu * c_e[i]
            Pi = 1.0 / Td[i] + q_e[i]
            sdw[i] = 1.0 / np.sqrt(Pi)
            w[i] = h / Pi + sdw[i] * x[k_zt + i]
            lp += -0.5 * _LOG2PI - 0.5 * np.log(Td[i]) - 0.5 * w[i] * w[i] / Td[i] + np.log(sdw[i])
    if taxon_level:
        if phylo:
            for t in range(nt):
                for i in range(nt):
                    u[t] += V[t, i] * w[i]
        else:
            for t in range(nt):
                u[t] = w[t]
    a_t = np.empty(nt, dtype=np.complex128)
    for t in range(nt):
        a_t[t] = fixed_vals[t] if fixed_t[t] else mu + gt[t] + u[t]
    # specimens
    a_s = np.empty(ns, dtype=np.complex128)
    for s in range(ns):
        parent = a_t[specimen_taxon[s]]
        if not specimen_level:
            a_s[s] = parent
        elif pinned[s]:
            a_s[s] = parent
            lp += -0.5 * _LOG2PI - 0.5 * x[k_zs + s] ** 2
        else:
            Ps = 1.0 / T_s + prec[s]
            sds = 1.0 / np.sqrt(Ps)
            a_s[s] = (parent / T_s + prec[s] * ah[s]) / Ps + sds * x[k_zs + s]
            lp += -0.5 * _LOG2PI - 0.5 * np.log(T_s) - 0.5 * (a_s[s] - parent) ** 2 / T_s + np.log(sds)
    messages = (c_e.real.copy(), q_e.real.copy(), d.real.copy(), b_c.real.copy(), P.real, T_t.real, T_s.real)
    return a_s, beta_t, lp, mu, a_t, w, sdw, Td, L, messages


@nb.njit(cache=True, nogil=True, error_model="numpy")
def junction_exponents(ints, floats, a_s, beta_t):
    """Every junction's exponent: its specimen's plus the covariate terms with its taxon's slopes."""
    n, p = ints[_N], ints[_P]
    specimen_idx, specimen_taxon = _views(ints, floats)[:2]
    X = _linear_views(ints, floats)[0]
    a_j = np.empty(n)
    for j in range(n):
        s = specimen_idx[j]
        v = a_s[s]
        for kk in range(p):
            v += X[j, kk] * beta_t[specimen_taxon[s], kk]
        a_j[j] = v
    return a_j


@nb.njit(cache=True, nogil=True, error_model="numpy")
def _pilot_adjoint(ints, floats, a_s, a_t, w, Td, d_as, G_t, L, messages, mu):
    """Derivative of the log density in each specimen's pilot exponent (at the reference covariate values),
    everything else held: reverse mode through the messages up the hierarchy and the conditional means
    down it (see :func:`_forward`). ``G_t`` is each taxon exponent's total derivative through its
    specimens, ``messages`` :func:`_forward`'s last output."""
    nt, ns = ints[_NT], ints[_NS]
    taxon_level = ints[_TAXON] != 0
    specimen_level = ints[_SPEC] != 0
    phylo = ints[_PHYLO] != 0
    specimen_taxon, fixed_t, pinned = _views(ints, floats)[1:4]
    prec = _pilot_views(ints, floats)[1]
    V = _linear_views(ints, floats)[3]
    c_e, q_e, d, b_c, P_mu, T_t, T_s = messages
    d_ah = np.zeros(ns)
    # each specimen's conditional mean (a_t / T_s + prec ah) / (1 / T_s + prec)
    if specimen_level:
        for s in range(ns):
            if not pinned[s]:
                Ps = 1.0 / T_s + prec[s]
                d_ah[s] = (d_as[s] - (a_s[s] - a_t[specimen_taxon[s]]) / T_s) * prec[s] / Ps
    # the taxon exponents mu + g.gamma + u, u = V w (w without a tree)
    d_mu = 0.0
    for t in range(nt):
        if not fixed_t[t]:
            d_mu += G_t[t]
    d_h0 = np.zeros(nt)
    d_bh = np.zeros(nt)
    exact = L.shape[0] > 0
    if taxon_level:
        d_w = np.zeros(nt)
        for i in range(nt):
            if not phylo and fixed_t[i]:
                continue
            if phylo:
                for t in range(nt):
                    d_w[i] += V[t, i] * G_t[t]
            else:
                d_w[i] = G_t[i]
            d_w[i] -= w[i] / Td[i]
        for i in range(nt):
            if exact:  # w = A^-1 (h0 - mu c) + L'^-1 z
                d_bh[i] += d_w[i]
                d_mu -= b_c[i] * d_w[i]
            elif phylo or not fixed_t[i]:  # w_i = (h0_i - mu c_i) / (1 / Td_i + q_i) + sd_i z_i
                Pi = 1.0 / Td[i] + q_e[i]
                d_h0[i] += d_w[i] / Pi
                d_mu -= c_e[i] * d_w[i] / Pi
    # mu = (m0 / s0^2 + Mmu) / P + sd z with its prior; Mmu collects the messages
    d_M = 0.0
    if ints[_MU_FREE]:
        m0, s0 = floats[_MU_MEAN], floats[_MU_SD]
        d_mu -= (mu - m0) / (s0 * s0)
        d_M = d_mu / P_mu
    d_upM = np.zeros(nt)
    if exact:  # Mmu = sum(upM - upP g) - c'A^-1 h0
        for t in range(nt):
            d_upM[t] += d_M
            d_bh[t] -= d_M * c_e[t]
        d_h0 = ta.solve_upper_t(L, ta.solve_lower(L, d_bh))
    else:
        for i in range(nt):
            if q_e[i] > 0.0:
                v = T_t * d[i] + 1.0 / q_e[i]
                d_h0[i] += d_M * (c_e[i] / q_e[i]) / (q_e[i] * v)
    for t in range(nt):  # h0 = V'(upM - upP g) (the identity without a tree)
        if phylo:
            for i in range(nt):
                d_upM[t] += V[t, i] * d_h0[i]
        elif not fixed_t[t]:
            d_upM[t] += d_h0[t]
    for s in range(ns):  # upM_t = sum of ah_s / (T_s + 1 / prec_s)
        if pinned[s] or prec[s] <= 0.0:
            continue
        v = T_s + 1.0 / prec[s] if specimen_level else 1.0 / prec[s]
        d_ah[s] += d_upM[specimen_taxon[s]] / v
    return d_ah


@nb.njit(cache=True, nogil=True, error_model="numpy")
def logp_grad_white(x, ints, floats, grad):
    """Log density and gradient of the whitened form (see the module docstring)."""
    n, nt, ns, p = ints[_N], ints[_NT], ints[_NS], ints[_P]
    student = ints[_STUDENT] != 0
    taxon_level = ints[_TAXON] != 0
    specimen_level = ints[_SPEC] != 0
    phylo = ints[_PHYLO] != 0
    specimen_idx, specimen_taxon, fixed_t, pinned = _views(ints, floats)[:4]
    ahat, prec = _pilot_views(ints, floats)
    X, xbar, G, V = _linear_views(ints, floats)[:4]
    k_gamma, k_beta, k_tb, k_tt, k_zt, k_ts, k_zs, n_h = white_blocks(ints)
    xc = x[:n_h].astype(np.complex128)
    no_L, no_context = _no_factor()
    a_s_c, beta_t_c, lp_h, mu, a_t_c, w, sdw, Td, L, messages = _forward(xc, ints, floats, no_L, no_context)
    context = no_context
    if L.shape[0]:
        z = np.ascontiguousarray(x[k_zt : k_zt + nt])
        context = ta.factor_context(L, V, z, specimen_level)
    a_s = a_s_c.real.copy()
    beta_t = beta_t_c.real.copy()
    a_t = a_t_c.real.copy()
    a_j = junction_exponents(ints, floats, a_s, beta_t)
    sdev = math.exp(x[n_h])
    nu = math.exp(x[n_h + 1]) if student else 30.0
    total, d_aj, d_sdev, d_nu = _junction_likelihood_j(ints, floats, a_j, sdev, nu)
    d_as = np.zeros(ns)
    dB = np.zeros((nt, p))
    for j in range(n):
        s = specimen_idx[j]
        d_as[s] += d_aj[j]
        for kk in range(p):
            dB[specimen_taxon[s], kk] += X[j, kk] * d_aj[j]
    for i in range(grad.shape[0]):
        grad[i] = 0.0
    # specimen deviations (analytic), and each taxon exponent's total derivative through its specimens
    G_t = np.zeros(nt)
    if specimen_level:
        T_s = math.exp(2.0 * x[k_ts])
        for s in range(ns):
            t = specimen_taxon[s]
            if pinned[s]:
                grad[k_zs + s] = -x[k_zs + s]
                G_t[t] += d_as[s]
                continue
            Ps = 1.0 / T_s + prec[s]
            sds = 1.0 / math.sqrt(Ps)
            ks = 1.0 / (T_s * Ps)
            dev = (a_s[s] - a_t[t]) / T_s
            grad[k_zs + s] = (d_as[s] - dev) * sds
            G_t[t] += d_as[s] * ks - dev * (ks - 1.0)
    else:
        for s in range(ns):
            G_t[specimen_taxon[s]] += d_as[s]
    # taxon deviations (analytic): each moves one eigen-coordinate w_i = mean_i + sd_i z_i
    if taxon_level and L.shape[0]:  # exact conditional: d lp / d z = L^-1 d lp / d w
        g = np.zeros(nt)
        for i in range(nt):
            for t in range(nt):
                g[i] += V[t, i] * G_t[t]
            g[i] -= w[i].real / Td[i].real
        gz = ta.solve_lower(L, g)
        for i in range(nt):
            grad[k_zt + i] = gz[i]
    elif taxon_level:
        for i in range(nt):
            if not phylo and fixed_t[i]:
                grad[k_zt + i] = -x[k_zt + i]
                continue
            gw = 0.0
            if phylo:
                for t in range(nt):
                    gw += V[t, i] * G_t[t]
            else:
                gw = G_t[i]
            grad[k_zt + i] = sdw[i].real * (gw - w[i].real / Td[i].real)
    # the taxon slope deviations (analytic): a taxon's slopes move its junctions' exponents and, through the
    # pilot exponents moved to the reference covariate values, its specimens' messages
    by_taxon = ints[_BYTAXON] != 0
    if by_taxon:
        d_ah = _pilot_adjoint(
            ints, floats, a_s, a_t, w.real.copy(), Td.real.copy(), d_as, G_t, L, messages, mu.real
        )
        dbeta = dB.copy()
        for s in range(ns):
            for kk in range(p):
                dbeta[specimen_taxon[s], kk] -= xbar[s, kk] * d_ah[s]
        for kk in range(p):
            tb = math.exp(x[k_tb + kk])
            for t in range(nt):
                k = k_tb + p + t * p + kk
                grad[k] = tb * dbeta[t, kk] - x[k]
    # everything above them by complex step
    for i in range(n_h):
        if taxon_level and k_zt <= i < k_zt + nt:
            continue
        if specimen_level and k_zs <= i < k_zs + ns:
            continue
        if by_taxon and k_tb + p <= i < k_tb + p + nt * p:
            continue
        xc[i] += 1j * kernel.H
        # the exact conditional's factor is reused: the step's imaginary parts enter to first order
        a_si, bt_i, lp_i, _, _, _, _, _, _, _ = _forward(xc, ints, floats, L, context)
        xc[i] -= 1j * kernel.H
        gi = lp_i.imag / kernel.H
        for s in range(ns):
            gi += d_as[s] * a_si[s].imag / kernel.H
        for t in range(nt):
            for kk in range(p):
                gi += dB[t, kk] * bt_i[t, kk].imag / kernel.H
        grad[i] = gi
    return total + lp_h.real + _deviation_terms(x, n_h, ints, floats, d_sdev, d_nu, grad)


@nb.njit(cache=True, nogil=True, error_model="numpy")
def expand_white(x, ints, floats, out):
    """Stored values: mu, [tau_taxon, [lambda]], a_taxon, [tau_specimen], a_specimen, [beta, [tau_beta,
    beta_taxon]], [gamma], sigma_dev, [nu]."""
    nt, ns, p, q = ints[_NT], ints[_NS], ints[_P], ints[_Q]
    k_gamma, k_beta, k_tb, k_tt, k_zt, k_ts, k_zs, n_h = white_blocks(ints)
    no_L, no_context = _no_factor()
    a_s, beta_t, _, mu, a_t, _, _, _, _, _ = _forward(
        x[:n_h].astype(np.complex128), ints, floats, no_L, no_context
    )
    k = 0
    out[k] = mu.real
    k += 1
    if ints[_TAXON]:
        out[k] = math.exp(x[k_tt])
        k += 1
        if _lambda_free(ints):
            out[k] = 1.0 / (1.0 + math.exp(-x[k_tt + 1]))
            k += 1
    for i in range(nt):
        out[k + i] = a_t[i].real
    k += nt
    if ints[_SPEC]:
        out[k] = math.exp(x[k_ts])
        k += 1
    for s in range(ns):
        out[k + s] = a_s[s].real
    k += ns
    for kk in range(p):
        out[k + kk] = x[k_beta + kk]
    k += p
    if ints[_BYTAXON]:
        for kk in range(p):
            out[k + kk] = math.exp(x[k_tb + kk])
        k += p
        for t in range(nt):
            for kk in range(p):
                out[k + t * p + kk] = beta_t[t, kk].real
        k += nt * p
    for m in range(q):
        out[k + m] = x[k_gamma + m]
    k += q
    out[k] = math.exp(x[n_h])
    if ints[_STUDENT]:
        out[k + 1] = math.exp(x[n_h + 1])
