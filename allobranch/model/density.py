"""The fast model's log density and gradient in one compiled function, for nutpie without PyMC in the loop.

The same model as :func:`allobranch.model.build.build_model` builds for the ``fast`` form (measurement error
known, daughters' asymmetry scale estimated beforehand), written directly: priors, the partially centred
hierarchy (:mod:`allobranch.model.partial_centering`), log transforms of the scales with their Jacobians,
and the junction likelihood of :func:`allobranch.model.kernel.fast_terms` with analytic derivatives. The
test suite checks the log density and its gradient against the PyMC model's at random points.

Everything the density needs is packed into two flat arrays (integers and floats), so one compiled C
callback serves every table and every law: fixing an exponent is a change of data, not a recompilation.
nutpie calls the callback from its own threads without the Python interpreter, so chains run in parallel.

Unconstrained parameters, in order: ``mu`` (unless fixed), ``log tau_taxon`` and ``r_taxon`` (taxon
level), ``log tau_specimen`` and ``r_specimen`` (specimen level), ``log sigma_dev``, ``log nu`` (Student-t).

Conditioned population exponent (``condition_mu``): with few, well-measured groups under it, the population
exponent's conditional spread grows with the groups' spread (``mu`` given the groups has SD about
``tau / sqrt(n)``), a funnel that no fixed weighting removes. When the groups directly under ``mu`` are
centred, ``mu`` given them and their spread is exactly normal (prior times normal terms, exact algebra:
precision ``P = 1/s0^2 + n/tau^2``, mean ``(m0/s0^2 + sum r/tau^2)/P``), so it is sampled as
``mu = mean + z / sqrt(P)`` with ``z`` standard normal a posteriori, whatever ``tau`` is; the log density
gains the Jacobian ``-log(P)/2``.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field, replace

import numba as nb
import numpy as np
from numba import types
from numba.core import cgutils
from numba.extending import intrinsic

from allobranch.model import kernel
from allobranch.model.density_parts import (
    _BYTAXON,
    _FHEAD,
    _HEAD,
    _K,
    _LOG2PI,
    _MU_COND,
    _MU_FIXED,
    _MU_FREE,
    _MU_MEAN,
    _MU_SD,
    _N,
    _NDIM,
    _NEXP,
    _NFLOAT,
    _NINT,
    _NS,
    _NT,
    _NU_A,
    _NU_B,
    _P,
    _PHYLO,
    _Q,
    _SD_SCALE,
    _SPEC,
    _STUDENT,
    _TAXON,
    _TS_SCALE,
    _TT_SCALE,
    _WHITE,
    PHYLO_EXACT,
    PHYLO_LAMBDA_FIXED,
    PHYLO_TREE,
    _deviation_terms,
    _half_normal_log,
    _junction_likelihood,
    _views,
)
from allobranch.model.density_white import expand_white, logp_grad_white
from allobranch.model.linear import LinearTerms

#: Up to this many taxa under a tree, the taxon deviations are sampled from their exact conditional given the
#: spreads (one real Cholesky factor of the full data precision in the tree's eigenbasis per density,
#: O(taxa^3); :mod:`allobranch.model.tree_algebra`); above it, from the conditional with that precision's
#: diagonal (O(taxa^2), rounder than no whitening but coupled to the specimen spread when the taxa's data
#: precisions differ). Measured on Yule trees (benchmarks/results/tree_taxa.md): at 200 taxa the diagonal
#: path needed three attempts and left a tenth of the exact path's effective samples; per gradient the
#: exact path costs 3.3 ms at 200 taxa, 20 ms at 400 and 57 ms at 600 (the diagonal 1.7, 6.6 and 11 ms).
TREE_EXACT_MAX_TAXA = 512

#: Floor on the phylogeny's eigenvalues (a tree with zero-length tips has a singular covariance).
EIGEN_FLOOR = 1e-6


def fast_arrays(data, sigma_asym_taxa: np.ndarray) -> dict[str, np.ndarray]:
    """Per-junction arrays of the fast form: the daughters' posterior given the known error and asymmetry.

    Parameters
    ----------
    data : ModelData
    sigma_asym_taxa : ndarray (n_taxa,)
        Asymmetry scale per taxon.

    Returns
    -------
    dict
        ``log_parent_obs``, ``daughter_mask``, ``specimen_idx``, ``mu_post``, ``g_post``, ``c_post``,
        ``ybar``, ``s0sq``, ``ll_daughters``.
    """
    rel_error = float(data.rel_error or 0.0)
    tau_j = np.asarray(sigma_asym_taxa)[data.taxon_idx] ** 2
    mu, g, c, ybar, lld = kernel.precompute(
        data.log_daughters, data.mask, data.var_abs_daughters, rel_error, tau_j
    )
    return {
        "log_parent_obs": data.log_parent,
        "daughter_mask": data.mask.astype(float),
        "specimen_idx": data.specimen_idx.astype(np.int64),
        "mu_post": mu,
        "g_post": g,
        "c_post": c,
        "ybar": ybar,
        "s0sq": rel_error**2 + data.var_abs_parent + kernel.S2_FLOOR,
        "ll_daughters": lld,
    }


@dataclass
class DensityLayout:
    """Names, positions and shapes of the unconstrained parameters and of the stored (expanded) values."""

    names: list[str]
    slices: list[slice]
    shapes: list[tuple[int, ...]]
    out_names: list[str]
    out_shapes: list[tuple[int, ...]]
    out_dims: dict[str, tuple[str, ...]] = field(default_factory=dict)

    @property
    def ndim(self) -> int:
        return self.slices[-1].stop if self.slices else 0

    @property
    def n_expanded(self) -> int:
        return int(sum(int(np.prod(s)) if s else 1 for s in self.out_shapes))


@dataclass
class FastDensity:
    """A packed fast-form model: data, layout, and Python access to the compiled density.

    Build it with :func:`pack`. ``ints`` and ``floats`` hold everything the compiled function reads;
    ``pointers`` holds their addresses (the callback's user data).
    """

    ints: np.ndarray
    floats: np.ndarray
    layout: DensityLayout
    pointers: np.ndarray = field(init=False)

    def __post_init__(self) -> None:
        self.ints = np.ascontiguousarray(self.ints, dtype=np.int64)
        self.floats = np.ascontiguousarray(self.floats, dtype=np.float64)
        self.pointers = np.array([self.ints.ctypes.data, self.floats.ctypes.data], dtype=np.uint64)

    def logp(self, x: np.ndarray) -> tuple[float, np.ndarray]:
        """Log density (up to a constant that does not depend on the parameters) and its gradient."""
        grad = np.zeros(self.layout.ndim)
        lp = _logp_grad(np.asarray(x, dtype=float), self.ints, self.floats, grad)
        return float(lp), grad

    def expand(self, x: np.ndarray) -> dict[str, np.ndarray]:
        """The stored values (exponents, spreads, deviation) at an unconstrained point."""
        out = np.zeros(self.layout.n_expanded)
        _expand(np.asarray(x, dtype=float), self.ints, self.floats, out)
        values, pos = {}, 0
        for name, shape in zip(self.layout.out_names, self.layout.out_shapes):
            size = int(np.prod(shape)) if shape else 1
            values[name] = out[pos : pos + size].reshape(shape)
            pos += size
        return values


def pack(
    arrays: dict,
    *,
    specimen_taxon_idx: np.ndarray,
    n_taxa: int,
    taxon_level: bool,
    specimen_level: bool,
    student: bool,
    priors,
    fixed_exponent: float | None,
    fixed_taxa_mask: np.ndarray,
    fixed_taxa_values: np.ndarray,
    w_taxon: np.ndarray,
    w_specimen: np.ndarray,
    condition_mu: bool = False,
    whiten: tuple | None = None,
    linear: LinearTerms | None = None,
) -> FastDensity:
    """Pack a fast-form model for the compiled density.

    Parameters
    ----------
    arrays : dict
        Output of :func:`fast_arrays`.
    specimen_taxon_idx : ndarray of int (n_specimens,)
    n_taxa : int
    taxon_level, specimen_level, student : bool
        Hierarchy levels present; Student-t deviation.
    priors : Priors
    fixed_exponent : float or None
        One exponent for every junction (no levels then).
    fixed_taxa_mask, fixed_taxa_values : ndarray (n_taxa,)
        Taxa whose exponent (and their specimens') is fixed, and the values.
    w_taxon, w_specimen : ndarray
        Partial-centring weights (1 centred, 0 non-centred). Fixed groups are always non-centred.
    condition_mu : bool
        Sample the population exponent conditioned on the groups directly under it (see the module
        docstring); those groups are then centred (their weights set to 1).
    whiten : (ndarray, ndarray) or None
        Pilot exponent and precision of every specimen (precision 0 where its likelihood is flat): sample
        the whole hierarchy whitened given the spreads (:mod:`allobranch.model.density_white`); overrides
        the weights and ``condition_mu``.
    linear : LinearTerms, optional
        Covariates, taxon traits and phylogeny of the linear predictor; any of them implies the whitened
        form (without a pilot, every specimen's likelihood counts as flat in the whitening).

    Returns
    -------
    FastDensity
    """
    n, K = arrays["mu_post"].shape
    specimen_taxon = np.asarray(specimen_taxon_idx, dtype=np.int64)
    n_specimens = len(specimen_taxon)
    mu_free = fixed_exponent is None
    if not mu_free:
        taxon_level = specimen_level = False
    fixed_t = np.asarray(fixed_taxa_mask, dtype=bool) if len(fixed_taxa_mask) else np.zeros(n_taxa, bool)
    pinned = fixed_t[specimen_taxon]
    w_t = np.where(fixed_t, 0.0, np.clip(np.broadcast_to(w_taxon, n_taxa) if taxon_level else 0.0, 0, 1))
    w_s = np.where(
        pinned, 0.0, np.clip(np.broadcast_to(w_specimen, n_specimens) if specimen_level else 0.0, 0, 1)
    )
    lin = linear if linear is not None and not linear.empty else None
    if lin is not None and lin.phylo and not taxon_level:  # no taxon deviations to correlate
        lin = replace(lin, eig_vectors=None, eig_values=None)
        lin = None if lin.empty else lin
    if lin is not None and lin.phylo and fixed_t.any():
        raise ValueError("under a tree no taxon's exponent can be fixed on its own")
    white = (whiten is not None and mu_free and (taxon_level or specimen_level)) or lin is not None
    if white and whiten is None:
        whiten = (np.zeros(n_specimens), np.zeros(n_specimens))
    condition_mu = bool(condition_mu and mu_free and (taxon_level or specimen_level)) and not white
    if condition_mu and taxon_level:
        w_t = np.where(fixed_t, 0.0, 1.0)
    elif condition_mu:
        w_s = np.where(pinned, 0.0, 1.0)

    p_cov = lin.p if lin is not None else 0
    q_tr = lin.q if lin is not None else 0
    by_taxon = bool(lin is not None and lin.by_taxon and p_cov)
    phylo = bool(lin is not None and lin.phylo)
    lambda_free = phylo and lin.pagel_lambda is None
    names, shapes = [], []
    if mu_free:
        names.append("mu_z" if (condition_mu or white) else "mu")
        shapes.append(())
    if q_tr:
        names.append("gamma")
        shapes.append((q_tr,))
    if p_cov:
        names.append("beta")
        shapes.append((p_cov,))
    if by_taxon:
        names += ["tau_beta_log__", "z_beta_taxon"]
        shapes += [(p_cov,), (n_taxa, p_cov)]
    if taxon_level:
        names.append("tau_taxon_log__")
        shapes.append(())
        if lambda_free:
            names.append("lambda_logit__")
            shapes.append(())
        names.append("r_taxon")
        shapes.append((n_taxa,))
    if specimen_level:
        names += ["tau_specimen_log__", "r_specimen"]
        shapes += [(), (n_specimens,)]
    names.append("sigma_dev_log__")
    shapes.append(())
    if student:
        names.append("nu_log__")
        shapes.append(())
    slices, pos = [], 0
    for shp in shapes:
        size = int(np.prod(shp)) if shp else 1
        slices.append(slice(pos, pos + size))
        pos += size
    out_names = (
        ["mu"]
        + (["tau_taxon"] if taxon_level else [])
        + (["pagel_lambda"] if lambda_free else [])
        + ["a_taxon"]
        + (["tau_specimen"] if specimen_level else [])
        + ["a_specimen"]
        + (["beta"] if p_cov else [])
        + (["tau_beta", "beta_taxon"] if by_taxon else [])
        + (["gamma"] if q_tr else [])
        + ["sigma_dev"]
        + (["nu"] if student else [])
    )
    out_shape_of = {
        "a_taxon": (n_taxa,),
        "a_specimen": (n_specimens,),
        "beta": (p_cov,),
        "tau_beta": (p_cov,),
        "beta_taxon": (n_taxa, p_cov),
        "gamma": (q_tr,),
    }
    out_shapes = [out_shape_of.get(name, ()) for name in out_names]
    out_dims = {
        "a_taxon": ("taxon",),
        "a_specimen": ("specimen",),
        "beta": ("covariate",),
        "tau_beta": ("covariate",),
        "beta_taxon": ("taxon", "covariate"),
        "gamma": ("trait",),
    }
    layout = DensityLayout(names, slices, shapes, out_names, out_shapes, out_dims)

    head = np.zeros(_HEAD, dtype=np.int64)
    head[[_N, _K, _NT, _NS, _MU_FREE, _TAXON, _SPEC, _STUDENT, _NDIM, _NEXP, _MU_COND, _WHITE]] = [
        n,
        K,
        n_taxa,
        n_specimens,
        mu_free,
        taxon_level,
        specimen_level,
        student,
        layout.ndim,
        layout.n_expanded,
        condition_mu,
        white,
    ]
    phylo_bits = 0
    if phylo:
        phylo_bits = PHYLO_TREE | (0 if lambda_free else PHYLO_LAMBDA_FIXED)
        phylo_bits |= PHYLO_EXACT if n_taxa <= TREE_EXACT_MAX_TAXA else 0
    head[[_P, _BYTAXON, _Q, _PHYLO]] = [p_cov, by_taxon, q_tr, phylo_bits]
    ints = np.concatenate(
        [
            head,
            np.asarray(arrays["specimen_idx"], dtype=np.int64),
            specimen_taxon,
            fixed_t.astype(np.int64),
            pinned.astype(np.int64),
        ]
    )
    fhead = np.zeros(_FHEAD)
    fhead[[_MU_MEAN, _MU_SD, _TT_SCALE, _TS_SCALE, _SD_SCALE, _NU_A, _NU_B, _MU_FIXED]] = [
        priors.mu_mean,
        priors.mu_sd,
        priors.tau_taxon,
        priors.tau_specimen,
        priors.sigma_dev,
        priors.nu_alpha,
        priors.nu_beta,
        0.0 if mu_free else float(fixed_exponent),
    ]
    fixed_vals = np.where(
        fixed_t, np.asarray(fixed_taxa_values, dtype=float) if len(fixed_taxa_values) else 0.0, 0.0
    )
    floats = np.concatenate(
        [
            fhead,
            arrays["log_parent_obs"],
            arrays["mu_post"].ravel(),
            arrays["g_post"].ravel(),
            arrays["c_post"],
            arrays["ybar"],
            arrays["daughter_mask"].ravel(),
            arrays["s0sq"],
            arrays["ll_daughters"],
            w_t,
            w_s,
            fixed_vals,
            np.nan_to_num(np.asarray(whiten[0], dtype=float)) if white else np.zeros(n_specimens),
            np.nan_to_num(np.asarray(whiten[1], dtype=float)) if white else np.zeros(n_specimens),
            *_linear_buffers(lin, arrays["specimen_idx"], n_specimens, n_taxa, n),
        ]
    )
    ints[_NINT], ints[_NFLOAT] = len(ints), len(floats)
    return FastDensity(ints=ints, floats=floats, layout=layout)


def _linear_buffers(lin: LinearTerms | None, specimen_idx: np.ndarray, n_specimens: int, n_taxa: int, n: int):
    """The float blocks read by :func:`allobranch.model.density_parts._linear_views`."""
    if lin is None:
        return [np.zeros(n_taxa)]  # eigenvalues only (unused)
    X = np.asarray(lin.covariates, dtype=float).reshape(n, lin.p)
    counts = np.bincount(specimen_idx, minlength=n_specimens).astype(float)
    xbar = np.zeros((n_specimens, lin.p))
    for k in range(lin.p):
        xbar[:, k] = np.bincount(specimen_idx, X[:, k], minlength=n_specimens) / np.maximum(counts, 1.0)
    V = np.asarray(lin.eig_vectors, dtype=float) if lin.phylo else np.zeros((0, 0))
    lam = np.maximum(np.asarray(lin.eig_values, dtype=float), EIGEN_FLOOR) if lin.phylo else np.zeros(n_taxa)
    if lin.phylo and lin.pagel_lambda is not None:
        # lambda fixed: the eigenvalues of lambda C + (1 - lambda) I, which the density uses at lambda = 1
        lam = lin.pagel_lambda * lam + (1.0 - lin.pagel_lambda)
    return [
        X.ravel(),
        xbar.ravel(),
        np.asarray(lin.traits, dtype=float).reshape(n_taxa, lin.q).ravel(),
        V.ravel(),
        lam,
        np.asarray(lin.beta_sd, dtype=float).reshape(lin.p),
        np.asarray(lin.tau_beta_scale, dtype=float).reshape(lin.p),
        np.asarray(lin.gamma_sd, dtype=float).reshape(lin.q),
    ]


@nb.njit(cache=True, nogil=True, error_model="numpy")
def _group_level(r, parent, log_tau, w, fixed, fixed_vals, use_fixed):
    """Partially centred group exponents: values, prior log density of the raw values, and the pieces of
    the chain rule (d a / d r, d a / d parent, d a / d log tau, and the prior's derivatives)."""
    m = r.shape[0]
    math.exp(log_tau)
    a = np.empty(m)
    da_dr = np.empty(m)
    da_dp = np.empty(m)
    da_dlt = np.empty(m)
    dlp_dr = np.empty(m)
    dlp_dp = np.empty(m)
    dlp_dlt = 0.0
    lp = 0.0
    for i in range(m):
        wi = w[i]
        scale = math.exp((1.0 - wi) * log_tau)  # tau^(1-w)
        sd = math.exp(wi * log_tau)  # tau^w
        z = (r[i] - wi * parent[i]) / sd
        lp += -0.5 * _LOG2PI - wi * log_tau - 0.5 * z * z
        dlp_dr[i] = -z / sd
        dlp_dp[i] = wi * z / sd
        dlp_dlt += -wi + wi * z * z
        if use_fixed and fixed[i]:
            a[i] = fixed_vals[i]
            da_dr[i] = 0.0
            da_dp[i] = 0.0
            da_dlt[i] = 0.0
        else:
            a[i] = parent[i] + scale * (r[i] - wi * parent[i])
            da_dr[i] = scale
            da_dp[i] = 1.0 - wi * scale
            da_dlt[i] = (1.0 - wi) * (a[i] - parent[i])
    return a, lp, da_dr, da_dp, da_dlt, dlp_dr, dlp_dp, dlp_dlt


@nb.njit(cache=True, nogil=True, error_model="numpy")
def _hierarchy(x, ints, floats, w_t, w_s, fixed_t, fixed_vals, pinned, specimen_taxon):
    """Exponents of every level from the unconstrained vector, with what the gradient needs."""
    nt, ns = ints[_NT], ints[_NS]
    p = 0
    if ints[_MU_FREE]:
        mu = x[0]
        p = 1
    else:
        mu = floats[_MU_FIXED]
    if ints[_TAXON]:
        lt_t = x[p]
        r_t = x[p + 1 : p + 1 + nt]
        p += 1 + nt
        par = np.full(nt, mu)
        a_t, lp_t, t_dr, t_dp, t_dlt, t_lpr, t_lpp, t_lplt = _group_level(
            r_t, par, lt_t, w_t, fixed_t, fixed_vals, True
        )
    else:
        lt_t = 0.0
        a_t = np.empty(nt)
        for i in range(nt):
            a_t[i] = fixed_vals[i] if fixed_t[i] else mu
        lp_t = 0.0
        t_dr = np.zeros(nt)
        t_lpr = np.zeros(nt)
        t_lplt = 0.0  # noqa: E702
        t_dlt = np.zeros(nt)
        t_lpp = np.zeros(nt)  # noqa: E702
        t_dp = np.empty(nt)
        for i in range(nt):
            t_dp[i] = 0.0 if fixed_t[i] else 1.0
    par_s = np.empty(ns)
    for s in range(ns):
        par_s[s] = a_t[specimen_taxon[s]]
    if ints[_SPEC]:
        lt_s = x[p]
        r_s = x[p + 1 : p + 1 + ns]
        p += 1 + ns
        a_s, lp_s, s_dr, s_dp, s_dlt, s_lpr, s_lpp, s_lplt = _group_level(
            r_s, par_s, lt_s, w_s, pinned, par_s, True
        )
        for s in range(ns):  # a pinned specimen follows its (fixed) taxon
            if pinned[s]:
                s_dp[s] = 1.0
    else:
        lt_s = 0.0
        a_s = par_s.copy()
        lp_s = 0.0
        s_dr = np.zeros(ns)
        s_lpr = np.zeros(ns)
        s_lplt = 0.0  # noqa: E702
        s_dlt = np.zeros(ns)
        s_lpp = np.zeros(ns)  # noqa: E702
        s_dp = np.ones(ns)
    taxon = (lt_t, a_t, lp_t, t_dr, t_dp, t_dlt, t_lpr, t_lpp, t_lplt)
    specimen = (lt_s, a_s, lp_s, s_dr, s_dp, s_dlt, s_lpr, s_lpp, s_lplt)
    return mu, taxon, specimen, p


@nb.njit(cache=True, nogil=True, error_model="numpy")
def _conditioned_mu(x, ints, floats):
    """``mu`` from its standardised value ``x[0]`` given the groups under it (``x[1]`` their log spread,
    ``x[2:]`` their raw values; fixed groups excluded), with the pieces of the chain rule."""
    nt, ns = ints[_NT], ints[_NS]
    p = _HEAD + ints[_N] + ns
    if ints[_TAXON]:
        m, skip = nt, ints[p : p + nt]  # fixed taxa
    else:
        m, skip = ns, ints[p + nt : p + nt + ns]  # pinned specimens
    T = math.exp(2.0 * x[1])
    s0sq = floats[_MU_SD] ** 2
    n = 0
    total = 0.0
    for i in range(m):
        if not skip[i]:
            n += 1
            total += x[2 + i]
    P = 1.0 / s0sq + n / T
    mean = (floats[_MU_MEAN] / s0sq + total / T) / P
    sd = 1.0 / math.sqrt(P)
    mu = mean + sd * x[0]
    dmean_dr = (1.0 / T) / P
    # derivatives in log tau (d/dlog tau = 2 T d/dT)
    dmean_dlt = 2.0 * T * (n * mean - total) / (T * T * P)
    dsd_dlt = 2.0 * T * 0.5 * P**-1.5 * n / (T * T)
    dlogsd_dlt = 2.0 * T * n / (2.0 * T * T * P)
    return mu, sd, dmean_dr, dmean_dlt, dsd_dlt, dlogsd_dlt, m, skip


@nb.njit(cache=True, nogil=True, error_model="numpy")
def _logp_grad(x, ints, floats, grad):
    """Log density and gradient (written into ``grad``) at the unconstrained point ``x``."""
    if ints[_WHITE]:
        return logp_grad_white(x, ints, floats, grad)
    if not ints[_MU_COND]:
        return _logp_grad_plain(x, ints, floats, grad)
    mu, sd, dmean_dr, dmean_dlt, dsd_dlt, dlogsd_dlt, m, skip = _conditioned_mu(x, ints, floats)
    x2 = x.copy()
    x2[0] = mu
    lp = _logp_grad_plain(x2, ints, floats, grad) + math.log(sd)
    g_mu = grad[0]
    grad[0] = g_mu * sd
    grad[1] += g_mu * (dmean_dlt + x[0] * dsd_dlt) + dlogsd_dlt
    for i in range(m):
        if not skip[i]:
            grad[2 + i] += g_mu * dmean_dr
    return lp


@nb.njit(cache=True, nogil=True, error_model="numpy")
def _hierarchy_at(x, ints, floats):
    """:func:`_hierarchy` with its data read from the packed buffers."""
    views = _views(ints, floats)
    specimen_taxon, fixed_t, pinned = views[1], views[2], views[3]
    w_t, w_s, fixed_vals = views[12], views[13], views[14]
    return _hierarchy(x, ints, floats, w_t, w_s, fixed_t, fixed_vals, pinned, specimen_taxon)


@nb.njit(cache=True, nogil=True, error_model="numpy")
def _logp_grad_plain(x, ints, floats, grad):
    """Log density and gradient with ``x[0]`` the population exponent itself (when it is free)."""
    _n, nt, ns = ints[_N], ints[_NT], ints[_NS]
    student = ints[_STUDENT] != 0
    mu, taxon, specimen, p = _hierarchy_at(x, ints, floats)
    (lt_t, a_t, lp_t, t_dr, t_dp, t_dlt, t_lpr, t_lpp, t_lplt) = taxon
    (lt_s, a_s, lp_s, s_dr, s_dp, s_dlt, s_lpr, s_lpp, s_lplt) = specimen
    sdev = math.exp(x[p])
    nu = math.exp(x[p + 1]) if student else 30.0
    total, d_as, d_sdev, d_nu = _junction_likelihood(ints, floats, a_s, sdev, nu)

    lp = total + lp_t + lp_s
    for i in range(grad.shape[0]):
        grad[i] = 0.0
    q = 0
    # population exponent
    d_mu = 0.0
    if ints[_MU_FREE]:
        z = (mu - floats[_MU_MEAN]) / floats[_MU_SD]
        lp += -0.5 * _LOG2PI - math.log(floats[_MU_SD]) - 0.5 * z * z
        d_mu = -z / floats[_MU_SD]
        q = 1
    # specimen level -> taxon exponents
    d_at = np.zeros(nt)
    specimen_taxon = _views(ints, floats)[1]
    for s in range(ns):
        d_at[specimen_taxon[s]] += d_as[s] * s_dp[s] + s_lpp[s]
    if ints[_TAXON]:
        hn, dhn = _half_normal_log(lt_t, floats[_TT_SCALE])
        lp += hn
        g_lt = dhn + t_lplt
        for i in range(nt):
            g_lt += d_at[i] * t_dlt[i]
            grad[q + 1 + i] = d_at[i] * t_dr[i] + t_lpr[i]
            d_mu += d_at[i] * t_dp[i] + t_lpp[i]
        grad[q] = g_lt
        q += 1 + nt
    else:
        for i in range(nt):
            d_mu += d_at[i] * t_dp[i]
    if ints[_SPEC]:
        hn, dhn = _half_normal_log(lt_s, floats[_TS_SCALE])
        lp += hn
        g_ls = dhn + s_lplt
        for s in range(ns):
            g_ls += d_as[s] * s_dlt[s]
            grad[q + 1 + s] = d_as[s] * s_dr[s] + s_lpr[s]
        grad[q] = g_ls
        q += 1 + ns
    if ints[_MU_FREE]:
        grad[0] = d_mu
    lp += _deviation_terms(x, q, ints, floats, d_sdev, d_nu, grad)
    return lp


@nb.njit(cache=True, nogil=True, error_model="numpy")
def _expand(x, ints, floats, out):
    """Stored values: mu, [tau_taxon], a_taxon, [tau_specimen], a_specimen, sigma_dev, [nu]."""
    nt, ns = ints[_NT], ints[_NS]
    if ints[_WHITE]:
        expand_white(x, ints, floats, out)
        return
    if ints[_MU_COND]:
        x = x.copy()
        x[0] = _conditioned_mu(x, ints, floats)[0]
    mu, taxon, specimen, p = _hierarchy_at(x, ints, floats)
    lt_t, a_t, lt_s, a_s = taxon[0], taxon[1], specimen[0], specimen[1]
    k = 0
    out[k] = mu
    k += 1
    if ints[_TAXON]:
        out[k] = math.exp(lt_t)
        k += 1
    for i in range(nt):
        out[k + i] = a_t[i]
    k += nt
    if ints[_SPEC]:
        out[k] = math.exp(lt_s)
        k += 1
    for s in range(ns):
        out[k + s] = a_s[s]
    k += ns
    out[k] = math.exp(x[p])
    if ints[_STUDENT]:
        out[k + 1] = math.exp(x[p + 1])


@intrinsic
def _as_pointer(typingctx, address):
    """An integer address as a ``void *`` (for the callback's user data)."""
    sig = types.voidptr(address)

    def codegen(context, builder, signature, args):
        return builder.inttoptr(args[0], cgutils.voidptr_t)

    return sig, codegen


@nb.njit(cache=True, nogil=True, error_model="numpy")
def _unpack(user_data):
    ptrs = nb.carray(user_data, (2,), np.uint64)
    head = nb.carray(_as_pointer(ptrs[0]), (_HEAD,), np.int64)
    ints = nb.carray(_as_pointer(ptrs[0]), (head[_NINT],), np.int64)
    floats = nb.carray(_as_pointer(ptrs[1]), (head[_NFLOAT],), np.float64)
    return ints, floats


_LOGP_SIG = types.int64(
    types.uint64,
    types.CPointer(types.double),
    types.CPointer(types.double),
    types.CPointer(types.double),
    types.voidptr,
)
_EXPAND_SIG = types.int64(
    types.uint64, types.uint64, types.CPointer(types.double), types.CPointer(types.double), types.voidptr
)


@nb.cfunc(_LOGP_SIG, cache=True, nogil=True, error_model="numpy")
def logp_callback(dim, x_, grad_, logp_, user_data):  # pragma: no cover - called from nutpie's threads
    """C callback in nutpie's layout: returns 0 on success, 3/4 for a non-finite gradient / density."""
    ints, floats = _unpack(user_data)
    if dim != ints[_NDIM]:
        return -1
    x = nb.carray(x_, (dim,))
    grad = nb.carray(grad_, (dim,))
    out = nb.carray(logp_, (1,))
    lp = _logp_grad(x, ints, floats, grad)
    out[0] = lp
    for i in range(dim):
        if not np.isfinite(grad[i]):
            return 3
    if not np.isfinite(lp):
        return 4
    return 0


@nb.cfunc(_EXPAND_SIG, cache=True, nogil=True, error_model="numpy")
def expand_callback(dim, n_expanded, x_, out_, user_data):  # pragma: no cover - called from nutpie
    """C callback writing the stored values of one draw."""
    ints, floats = _unpack(user_data)
    if dim != ints[_NDIM] or n_expanded != ints[_NEXP]:
        return -1
    _expand(nb.carray(x_, (dim,)), ints, floats, nb.carray(out_, (n_expanded,)))
    return 0
