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
from dataclasses import dataclass, field

import numba as nb
import numpy as np
from numba import types
from numba.core import cgutils
from numba.extending import intrinsic

from allobranch.model import kernel

#: Smallest exponent used inside the law (keeps prior draws with a <= 0 finite; far from any posterior).
A_FLOOR = 0.05

# integer header slots
_N, _K, _NT, _NS, _MU_FREE, _TAXON, _SPEC, _STUDENT, _NDIM, _NEXP, _MU_COND, _WHITE = range(12)
_HEAD = 12
# float header slots
_MU_MEAN, _MU_SD, _TT_SCALE, _TS_SCALE, _SD_SCALE, _NU_A, _NU_B, _MU_FIXED = range(8)
_FHEAD = 8
_LOG_HALF_NORMAL_CONST = 0.5 * math.log(2.0 / math.pi)
_LOG2PI = math.log(2.0 * math.pi)


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
        the whole hierarchy whitened given the spreads (see :func:`_white_hierarchy`); overrides the
        weights and ``condition_mu``.

    Returns
    -------
    FastDensity
    """
    n, K = arrays["mu_post"].shape
    spec_taxon = np.asarray(specimen_taxon_idx, dtype=np.int64)
    n_spec = len(spec_taxon)
    mu_free = fixed_exponent is None
    if not mu_free:
        taxon_level = specimen_level = False
    fixed_t = np.asarray(fixed_taxa_mask, dtype=bool) if len(fixed_taxa_mask) else np.zeros(n_taxa, bool)
    pinned = fixed_t[spec_taxon]
    w_t = np.where(fixed_t, 0.0, np.clip(np.broadcast_to(w_taxon, n_taxa) if taxon_level else 0.0, 0, 1))
    w_s = np.where(pinned, 0.0, np.clip(np.broadcast_to(w_specimen, n_spec) if specimen_level else 0.0, 0, 1))
    white = whiten is not None and mu_free and (taxon_level or specimen_level)
    condition_mu = bool(condition_mu and mu_free and (taxon_level or specimen_level)) and not white
    if condition_mu and taxon_level:
        w_t = np.where(fixed_t, 0.0, 1.0)
    elif condition_mu:
        w_s = np.where(pinned, 0.0, 1.0)

    names, shapes = [], []
    if mu_free:
        names.append("mu_z" if (condition_mu or white) else "mu")
        shapes.append(())  # noqa: E702
    if taxon_level:
        names += ["tau_taxon_log__", "r_taxon"]
        shapes += [(), (n_taxa,)]  # noqa: E702
    if specimen_level:
        names += ["tau_specimen_log__", "r_specimen"]
        shapes += [(), (n_spec,)]  # noqa: E702
    names.append("sigma_dev_log__")
    shapes.append(())  # noqa: E702
    if student:
        names.append("nu_log__")
        shapes.append(())  # noqa: E702
    slices, pos = [], 0
    for s in shapes:
        size = int(np.prod(s)) if s else 1
        slices.append(slice(pos, pos + size))
        pos += size
    out_names = (
        ["mu"]
        + (["tau_taxon"] if taxon_level else [])
        + ["a_taxon"]
        + (["tau_specimen"] if specimen_level else [])
        + ["a_specimen", "sigma_dev"]
        + (["nu"] if student else [])
    )
    out_shapes = [{"a_taxon": (n_taxa,), "a_specimen": (n_spec,)}.get(name, ()) for name in out_names]
    layout = DensityLayout(
        names, slices, shapes, out_names, out_shapes, {"a_taxon": ("taxon",), "a_specimen": ("specimen",)}
    )

    head = np.zeros(_HEAD, dtype=np.int64)
    head[[_N, _K, _NT, _NS, _MU_FREE, _TAXON, _SPEC, _STUDENT, _NDIM, _NEXP, _MU_COND, _WHITE]] = [
        n,
        K,
        n_taxa,
        n_spec,
        mu_free,
        taxon_level,
        specimen_level,
        student,
        layout.ndim,
        layout.n_expanded,
        condition_mu,
        white,
    ]
    ints = np.concatenate(
        [
            head,
            np.asarray(arrays["specimen_idx"], dtype=np.int64),
            spec_taxon,
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
            np.nan_to_num(np.asarray(whiten[0], dtype=float)) if white else np.zeros(n_spec),
            np.nan_to_num(np.asarray(whiten[1], dtype=float)) if white else np.zeros(n_spec),
        ]
    )
    return FastDensity(ints=ints, floats=floats, layout=layout)


@nb.njit(cache=True, nogil=True)
def _views(ints, floats):
    n, K, nt, ns = ints[_N], ints[_K], ints[_NT], ints[_NS]
    p = _HEAD
    spec_idx = ints[p : p + n]
    p += n  # noqa: E702
    spec_taxon = ints[p : p + ns]
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
    return spec_idx, spec_taxon, fixed_t, pinned, y0, mu, g, c, ybar, M, s0sq, lld, w_t, w_s, fixed_vals


@nb.njit(cache=True, nogil=True)
def _pilot_views(ints, floats):
    n, K, nt, ns = ints[_N], ints[_K], ints[_NT], ints[_NS]
    q = _FHEAD + n * (5 + 3 * K) + 2 * nt + ns
    return floats[q : q + ns], floats[q + ns : q + 2 * ns]


@nb.njit(cache=True, nogil=True)
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


@nb.njit(cache=True, nogil=True)
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


@nb.njit(cache=True, nogil=True)
def _half_normal_log(log_x, scale):
    """Half-normal log density of x = exp(log_x) plus the log-transform Jacobian, and its derivative."""
    x = math.exp(log_x)
    lp = _LOG_HALF_NORMAL_CONST - math.log(scale) - 0.5 * (x / scale) ** 2 + log_x
    return lp, 1.0 - (x / scale) ** 2


@nb.njit(cache=True, nogil=True)
def _hierarchy(x, ints, floats, w_t, w_s, fixed_t, fixed_vals, pinned, spec_taxon):
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
        par_s[s] = a_t[spec_taxon[s]]
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
    return (
        mu,
        lt_t,
        a_t,
        lp_t,
        t_dr,
        t_dp,
        t_dlt,
        t_lpr,
        t_lpp,
        t_lplt,
        lt_s,
        a_s,
        lp_s,
        s_dr,
        s_dp,
        s_dlt,
        s_lpr,
        s_lpp,
        s_lplt,
        p,
    )


@nb.njit(cache=True, nogil=True)
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


@nb.njit(cache=True, nogil=True)
def _junction_likelihood(ints, floats, a_s, sdev, nu):
    """Summed junction log-likelihood at real specimen exponents ``a_s`` (floored at :data:`A_FLOOR`),
    with its derivatives in the specimen exponents, the deviation scale and ``nu``."""
    n, ns = ints[_N], ints[_NS]
    student = ints[_STUDENT] != 0
    (spec_idx, spec_taxon, fixed_t, pinned, y0, mu_post, g, c, ybar, M, s0sq, lld, w_t, w_s, fixed_vals) = (
        _views(ints, floats)
    )
    a_eff = np.empty(ns)
    for s in range(ns):
        a_eff[s] = a_s[s] if a_s[s] > A_FLOOR else A_FLOOR
    ll, dll, _, _ = kernel.fast_terms(
        y0, mu_post, g, c, ybar, M, s0sq, lld, a_eff[spec_idx], sdev, nu, student
    )
    total = 0.0
    d_as = np.zeros(ns)
    d_sdev = 0.0
    d_nu = 0.0
    for j in range(n):
        total += ll[j]
        d_as[spec_idx[j]] += dll[j, 0]
        d_sdev += dll[j, 1]
        d_nu += dll[j, 4]
    for s in range(ns):
        if a_s[s] <= A_FLOOR:
            d_as[s] = 0.0
    return total, d_as, d_sdev, d_nu


@nb.njit(cache=True, nogil=True)
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


@nb.njit(cache=True, nogil=True)
def _white_hierarchy(x, ints, floats):
    """Whitened hierarchy (complex arithmetic, for complex-step derivatives).

    With the pilot's Gaussian approximation of every specimen's likelihood, ``N(ahat_s, 1/prec_s)``, the
    exponents given the spreads are jointly normal; messages passed up the tree (specimens -> taxa -> mu)
    give each node's conditional normal given its parent, and each node is sampled as its conditional
    mean plus ``z`` times its conditional SD, top down. This is an exact change of variables for any
    spreads (the Jacobian is added), and under the approximation every ``z`` is standard normal a posteriori
    and independent of the spreads, so no funnel remains at any spread.

    Returns the specimen exponents, the log prior of all exponents and spreads plus the Jacobians, the
    population exponent and the taxon exponents.
    """
    nt, ns = ints[_NT], ints[_NS]
    (spec_idx, spec_taxon, fixed_t, pinned, y0, mu_post, g, c, ybar, M, s0sq, lld, w_t, w_s, fixed_vals) = (
        _views(ints, floats)
    )
    ahat, prec = _pilot_views(ints, floats)
    taxon_level = ints[_TAXON] != 0
    spec_level = ints[_SPEC] != 0
    m0, s0 = floats[_MU_MEAN], floats[_MU_SD]
    zmu = x[0]
    p = 1
    lp = 0.0 + 0.0j
    if taxon_level:
        lt_t = x[p]
        z_t = x[p + 1 : p + 1 + nt]
        p += 1 + nt
        T_t = np.exp(2.0 * lt_t)
        lp += _LOG_HALF_NORMAL_CONST - math.log(floats[_TT_SCALE]) - 0.5 * T_t / floats[_TT_SCALE] ** 2 + lt_t
    if spec_level:
        lt_s = x[p]
        z_s = x[p + 1 : p + 1 + ns]
        T_s = np.exp(2.0 * lt_s)
        lp += _LOG_HALF_NORMAL_CONST - math.log(floats[_TS_SCALE]) - 0.5 * T_s / floats[_TS_SCALE] ** 2 + lt_s
    # messages up: each free specimen's marginal about its parent
    up_prec_t = np.zeros(nt, dtype=np.complex128)  # into taxon t (or into mu when no taxon level)
    up_mean_t = np.zeros(nt, dtype=np.complex128)
    for s in range(ns):
        if pinned[s] or prec[s] <= 0.0:
            continue
        if spec_level:
            v = T_s + 1.0 / prec[s]
        else:
            v = (1.0 + 0.0j) / prec[s]
        up_prec_t[spec_taxon[s]] += 1.0 / v
        up_mean_t[spec_taxon[s]] += ahat[s] / v
    up_prec_mu = 0.0 + 0.0j
    up_mean_mu = 0.0 + 0.0j
    for t in range(nt):
        if fixed_t[t] or up_prec_t[t].real <= 0.0:
            continue
        if taxon_level:
            v = T_t + 1.0 / up_prec_t[t]
            up_prec_mu += 1.0 / v
            up_mean_mu += (up_mean_t[t] / up_prec_t[t]) / v
        else:
            up_prec_mu += up_prec_t[t]
            up_mean_mu += up_mean_t[t]
    # top down: mu
    P = 1.0 / (s0 * s0) + up_prec_mu
    sd = 1.0 / np.sqrt(P)
    mu = (m0 / (s0 * s0) + up_mean_mu) / P + sd * zmu
    lp += -0.5 * _LOG2PI - math.log(s0) - 0.5 * ((mu - m0) / s0) ** 2 + np.log(sd)
    a_t = np.empty(nt, dtype=np.complex128)
    for t in range(nt):
        if fixed_t[t]:
            a_t[t] = fixed_vals[t]
            if taxon_level:
                lp += -0.5 * _LOG2PI - 0.5 * z_t[t] * z_t[t]
        elif taxon_level:
            Pt = 1.0 / T_t + up_prec_t[t]
            sdt = 1.0 / np.sqrt(Pt)
            a_t[t] = (mu / T_t + up_mean_t[t]) / Pt + sdt * z_t[t]
            lp += -0.5 * _LOG2PI - 0.5 * np.log(T_t) - 0.5 * (a_t[t] - mu) ** 2 / T_t + np.log(sdt)
        else:
            a_t[t] = mu
    a_s = np.empty(ns, dtype=np.complex128)
    for s in range(ns):
        parent = a_t[spec_taxon[s]]
        if not spec_level:
            a_s[s] = parent
        elif pinned[s]:
            a_s[s] = parent
            lp += -0.5 * _LOG2PI - 0.5 * z_s[s] * z_s[s]
        else:
            Ps = 1.0 / T_s + prec[s]
            sds = 1.0 / np.sqrt(Ps)
            a_s[s] = (parent / T_s + prec[s] * ahat[s]) / Ps + sds * z_s[s]
            lp += -0.5 * _LOG2PI - 0.5 * np.log(T_s) - 0.5 * (a_s[s] - parent) ** 2 / T_s + np.log(sds)
    return a_s, lp, mu, a_t


@nb.njit(cache=True, nogil=True)
def _logp_grad_white(x, ints, floats, grad):
    """Log density and gradient of the whitened form: complex-step derivatives of the hierarchy (exact
    to rounding, Squire & Trapp 1998) chained with the kernel's analytic derivatives."""
    _n, ns = ints[_N], ints[_NS]
    student = ints[_STUDENT] != 0
    (spec_idx, spec_taxon, fixed_t, pinned, y0, mu_post, g, c, ybar, M, s0sq, lld, w_t, w_s, fixed_vals) = (
        _views(ints, floats)
    )
    ndim = x.shape[0]
    n_h = ndim - (2 if student else 1)  # hierarchy coordinates come first
    xc = x[:n_h].astype(np.complex128)
    a_s, lp_h, _, _ = _white_hierarchy(xc, ints, floats)
    sdev = math.exp(x[n_h])
    nu = math.exp(x[n_h + 1]) if student else 30.0
    a_real = np.empty(ns)
    for s in range(ns):
        a_real[s] = a_s[s].real
    total, d_as, d_sdev, d_nu = _junction_likelihood(ints, floats, a_real, sdev, nu)
    # specimen deviations touch only their own specimen: analytic (a_s = mean + sd_s z_s); every other
    # hierarchy coordinate by complex step
    z0 = n_h
    if ints[_SPEC]:
        z0 = n_h - ns
        lt_s = x[z0 - 1]
        T_s = math.exp(2.0 * lt_s)
        ahat, prec = _pilot_views(ints, floats)
        _, _, _, a_t = _white_hierarchy(xc, ints, floats)
        for s in range(ns):
            if pinned[s]:
                grad[z0 + s] = -x[z0 + s]
            else:
                sds = 1.0 / math.sqrt(1.0 / T_s + prec[s])
                grad[z0 + s] = (d_as[s] - (a_s[s].real - a_t[spec_taxon[s]].real) / T_s) * sds
    for i in range(z0):
        xc[i] += 1j * kernel.H
        a_i, lp_i, _, _ = _white_hierarchy(xc, ints, floats)
        xc[i] -= 1j * kernel.H
        gi = lp_i.imag / kernel.H
        for s in range(ns):
            gi += d_as[s] * a_i[s].imag / kernel.H
        grad[i] = gi
    lp = total + lp_h.real + _deviation_terms(x, n_h, ints, floats, d_sdev, d_nu, grad)
    return lp


@nb.njit(cache=True, nogil=True)
def _logp_grad(x, ints, floats, grad):
    """Log density and gradient (written into ``grad``) at the unconstrained point ``x``."""
    if ints[_WHITE]:
        return _logp_grad_white(x, ints, floats, grad)
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


@nb.njit(cache=True, nogil=True)
def _logp_grad_plain(x, ints, floats, grad):
    """Log density and gradient with ``x[0]`` the population exponent itself (when it is free)."""
    _n, nt, ns = ints[_N], ints[_NT], ints[_NS]
    student = ints[_STUDENT] != 0
    (spec_idx, spec_taxon, fixed_t, pinned, y0, mu_post, g, c, ybar, M, s0sq, lld, w_t, w_s, fixed_vals) = (
        _views(ints, floats)
    )
    (
        mu,
        lt_t,
        a_t,
        lp_t,
        t_dr,
        t_dp,
        t_dlt,
        t_lpr,
        t_lpp,
        t_lplt,
        lt_s,
        a_s,
        lp_s,
        s_dr,
        s_dp,
        s_dlt,
        s_lpr,
        s_lpp,
        s_lplt,
        p,
    ) = _hierarchy(x, ints, floats, w_t, w_s, fixed_t, fixed_vals, pinned, spec_taxon)
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
    for s in range(ns):
        d_at[spec_taxon[s]] += d_as[s] * s_dp[s] + s_lpp[s]
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


@nb.njit(cache=True, nogil=True)
def _expand(x, ints, floats, out):
    """Stored values: mu, [tau_taxon], a_taxon, [tau_specimen], a_specimen, sigma_dev, [nu]."""
    nt, ns = ints[_NT], ints[_NS]
    if ints[_WHITE]:
        n_h = x.shape[0] - (2 if ints[_STUDENT] else 1)
        a_s_c, _, mu_c, a_t_c = _white_hierarchy(x[:n_h].astype(np.complex128), ints, floats)
        k = 0
        out[k] = mu_c.real
        k += 1
        if ints[_TAXON]:
            out[k] = math.exp(x[1])
            k += 1
        for i in range(nt):
            out[k + i] = a_t_c[i].real
        k += nt
        if ints[_SPEC]:
            out[k] = math.exp(x[1 + (1 + nt if ints[_TAXON] else 0)])
            k += 1
        for s in range(ns):
            out[k + s] = a_s_c[s].real
        k += ns
        out[k] = math.exp(x[n_h])
        if ints[_STUDENT]:
            out[k + 1] = math.exp(x[n_h + 1])
        return
    if ints[_MU_COND]:
        x = x.copy()
        x[0] = _conditioned_mu(x, ints, floats)[0]
    (spec_idx, spec_taxon, fixed_t, pinned, y0, mu_post, g, c, ybar, M, s0sq, lld, w_t, w_s, fixed_vals) = (
        _views(ints, floats)
    )
    (
        mu,
        lt_t,
        a_t,
        lp_t,
        t_dr,
        t_dp,
        t_dlt,
        t_lpr,
        t_lpp,
        t_lplt,
        lt_s,
        a_s,
        lp_s,
        s_dr,
        s_dp,
        s_dlt,
        s_lpr,
        s_lpp,
        s_lplt,
        p,
    ) = _hierarchy(x, ints, floats, w_t, w_s, fixed_t, fixed_vals, pinned, spec_taxon)
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


@nb.njit(cache=True, nogil=True)
def _unpack(user_data):
    ptrs = nb.carray(user_data, (2,), np.uint64)
    head = nb.carray(_as_pointer(ptrs[0]), (_HEAD,), np.int64)
    n, K, nt, ns = head[_N], head[_K], head[_NT], head[_NS]
    n_int = _HEAD + n + 2 * ns + nt
    n_float = _FHEAD + n * (5 + 3 * K) + 2 * nt + 3 * ns
    ints = nb.carray(_as_pointer(ptrs[0]), (n_int,), np.int64)
    floats = nb.carray(_as_pointer(ptrs[1]), (n_float,), np.float64)
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


@nb.cfunc(_LOGP_SIG, cache=True, nogil=True)
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


@nb.cfunc(_EXPAND_SIG, cache=True, nogil=True)
def expand_callback(dim, n_expanded, x_, out_, user_data):  # pragma: no cover - called from nutpie
    """C callback writing the stored values of one draw."""
    ints, floats = _unpack(user_data)
    if dim != ints[_NDIM] or n_expanded != ints[_NEXP]:
        return -1
    _expand(nb.carray(x_, (dim,)), ints, floats, nb.carray(out_, (n_expanded,)))
    return 0
