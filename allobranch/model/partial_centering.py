"""How to parametrise each group of the exponent hierarchy, decided from the data before sampling.

A group exponent ``a_g`` (a taxon's, or a specimen's) with parent value ``p`` and spread ``tau`` is written
partially non-centred (Papaspiliopoulos, Roberts & Sköld 2007, Statistical Science 22:59):

    r_g ~ Normal(w_g p, tau^w_g),     a_g = p + tau^(1 - w_g) (r_g - w_g p)

so that ``a_g ~ Normal(p, tau)`` for every ``w_g`` in [0, 1] (the model does not change): ``w_g = 1`` is the
centred form, ``w_g = 0`` the non-centred one. In the normal-normal model the posterior of ``r_g`` is
independent of ``p`` when ``w_g = tau^2 / (tau^2 + s_g^2)``, with ``s_g`` the group's posterior SD from its
own data (same source). That ratio depends on the junction count, the error, the exponent and the spread of
sizes, so it is measured, not guessed from counts:

1. a quick pilot fits every specimen's exponent by Newton steps on the fast junction likelihood (the
   biological deviation set to its joint maximum-likelihood value), giving ``a_s`` and its curvature ``s_s``;
2. the spread between specimens of a taxon is integrated on a grid under its half-normal prior with the
   normal approximation ``a_s ~ Normal(a_taxon, tau^2 + s_s^2)``; the grid posterior median of ``tau`` gives
   ``w_s``; the taxon level is treated the same way with the taxa's pooled estimates.

The pilot also gives the sampler a sensible starting point.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy.optimize import minimize_scalar
from scipy.stats import halfnorm, norm

from allobranch.model import kernel

#: Exponent range the pilot searches (every plausible branching exponent lies inside).
PILOT_BOUNDS = (0.3, 8.0)
#: Points of the grid over a spread (tau) used to integrate its approximate posterior.
TAU_GRID_POINTS = 400


@dataclass(frozen=True)
class PilotEstimate:
    """What the pilot learnt: group exponents, their data-only SDs, typical spreads and weights.

    Attributes
    ----------
    a_specimen, sd_specimen : ndarray (n_specimens,)
        Specimen exponents maximising their junctions' likelihood, and the SD from the curvature there
        (``inf`` where the likelihood is flat).
    a_taxon, sd_taxon : ndarray (n_taxa,)
        Taxon exponents pooled from their specimens, and their SDs.
    mu : float
        Population exponent pooled from the taxa.
    sigma_dev : float
        Maximum-likelihood biological deviation with one common exponent.
    tau_specimen, tau_taxon : float
        Posterior medians of the spreads under the normal approximation (NaN when the level is absent).
    w_specimen, w_taxon : ndarray
        Partial-centring weights (1 centred, 0 non-centred).
    """

    a_specimen: np.ndarray
    sd_specimen: np.ndarray
    a_taxon: np.ndarray
    sd_taxon: np.ndarray
    mu: float
    sigma_dev: float
    tau_specimen: float
    tau_taxon: float
    w_specimen: np.ndarray
    w_taxon: np.ndarray

    def describe(self, w_taxon: np.ndarray | None = None, w_specimen: np.ndarray | None = None) -> str:
        """One line for provenance and reports (the weights used, default the pilot's own)."""

        def share(w: np.ndarray) -> str:
            if w.size == 0:
                return "absent"
            return f"weights {np.min(w):.2f}-{np.max(w):.2f} (median {np.median(w):.2f})"

        w_t = self.w_taxon if w_taxon is None else w_taxon
        w_s = self.w_specimen if w_specimen is None else w_specimen
        return (
            f"partial centring from a pilot: taxon level {share(w_t)}, specimen level "
            f"{share(w_s)}; 1 = centred, 0 = non-centred"
        )


def _specimen_loglik(
    arrays: dict,
    specimen_idx: np.ndarray,
    n_specimens: int,
    a_specimen: np.ndarray,
    sdev: float,
    student: bool,
) -> tuple[np.ndarray, np.ndarray]:
    """Per-specimen log-likelihood and its derivative in the specimen's exponent (normal deviation)."""
    a = np.clip(a_specimen, *PILOT_BOUNDS)
    ll, dll, _, _ = kernel.fast_terms(
        arrays["log_parent_obs"],
        arrays["mu_post"],
        arrays["g_post"],
        arrays["c_post"],
        arrays["ybar"],
        arrays["daughter_mask"],
        arrays["s0sq"],
        arrays["ll_daughters"],
        a[specimen_idx],
        float(sdev),
        30.0,
        student,
    )
    return (
        np.bincount(specimen_idx, ll, minlength=n_specimens),
        np.bincount(specimen_idx, dll[:, 0], minlength=n_specimens),
    )


def _pilot_specimens(
    arrays: dict, specimen_idx: np.ndarray, n_specimens: int
) -> tuple[np.ndarray, np.ndarray, float]:
    """Specimen exponents by safeguarded Newton steps, their curvature SDs, and the ML deviation."""
    n = specimen_idx.shape[0]
    one = np.zeros(n, dtype=np.int64)

    def common_negll(params: np.ndarray) -> float:
        a, log_s = params
        ll, _ = _specimen_loglik(arrays, one, 1, np.array([a]), float(np.exp(log_s)), False)
        return -float(ll[0])

    # joint (a, sigma_dev) with one exponent: profile over a on a coarse grid, then refine each
    best = None
    for log_s in np.log([0.01, 0.03, 0.1, 0.3]):
        res = minimize_scalar(
            lambda a, log_s=log_s: common_negll(np.array([a, log_s])),
            bounds=PILOT_BOUNDS,
            method="bounded",
            options={"xatol": 1e-3},
        )
        if best is None or res.fun < best[0]:
            best = (res.fun, res.x, log_s)
    a0 = float(best[1])
    res = minimize_scalar(
        lambda ls: common_negll(np.array([a0, ls])),
        bounds=(np.log(1e-3), np.log(1.0)),
        method="bounded",
        options={"xatol": 1e-3},
    )
    sdev = float(np.exp(res.x))

    a = np.full(n_specimens, a0)
    h = 1e-4
    for _ in range(30):
        _, g = _specimen_loglik(arrays, specimen_idx, n_specimens, a, sdev, False)
        _, g2 = _specimen_loglik(arrays, specimen_idx, n_specimens, a + h, sdev, False)
        curv = (g2 - g) / h
        step = np.where(curv < 0, -g / np.where(curv < 0, curv, -1.0), np.sign(g) * 0.25)
        step = np.clip(step, -0.5, 0.5)
        a = np.clip(a + step, *PILOT_BOUNDS)
        if np.max(np.abs(step)) < 1e-5:
            break
    _, g = _specimen_loglik(arrays, specimen_idx, n_specimens, a, sdev, False)
    _, g2 = _specimen_loglik(arrays, specimen_idx, n_specimens, a + h, sdev, False)
    curv = (g2 - g) / h
    with np.errstate(divide="ignore", invalid="ignore"):
        sd = np.where(curv < 0, 1.0 / np.sqrt(-curv), np.inf)
    return a, sd, sdev


def _spread(estimates: np.ndarray, sds: np.ndarray, groups: np.ndarray, prior_scale: float) -> float:
    """Posterior median of the spread of ``estimates`` about their group means (flat prior on each mean),
    under the normal approximation and a half-normal prior, integrated on a grid."""
    finite = np.isfinite(sds)
    if not finite.any():
        return float(halfnorm(scale=prior_scale).median())
    est, var, grp = estimates[finite], sds[finite] ** 2, groups[finite]
    taus = np.linspace(0.0, 5.0 * prior_scale, TAU_GRID_POINTS)
    logpost = halfnorm(scale=prior_scale).logpdf(taus)
    for i, tau in enumerate(taus):
        total = 0.0
        for g in np.unique(grp):
            sel = grp == g
            v = var[sel] + tau**2
            prec = 1.0 / v
            mean = np.sum(est[sel] * prec) / np.sum(prec)
            # normal marginal likelihood with the group mean integrated out under a flat prior
            total += np.sum(norm.logpdf(est[sel], mean, np.sqrt(v))) - 0.5 * np.log(np.sum(prec))
        logpost[i] += total
    post = np.exp(logpost - np.max(logpost))
    cdf = np.cumsum(post) / np.sum(post)
    return float(np.interp(0.5, cdf, taus))


def _pool(
    estimates: np.ndarray, sds: np.ndarray, tau: float, groups: np.ndarray, n_groups: int
) -> tuple[np.ndarray, np.ndarray]:
    """Precision-weighted group means of ``estimates`` and their SDs given the spread ``tau``."""
    with np.errstate(divide="ignore"):
        prec = np.where(np.isfinite(sds), 1.0 / (sds**2 + tau**2), 0.0)
    total = np.bincount(groups, prec, minlength=n_groups)
    with np.errstate(divide="ignore", invalid="ignore"):
        mean = np.bincount(groups, prec * estimates, minlength=n_groups) / total
        sd = 1.0 / np.sqrt(total)
    fallback = float(np.nanmean(estimates)) if np.isfinite(estimates).any() else 2.5
    return np.where(total > 0, mean, fallback), np.where(total > 0, sd, np.inf)


def weights(tau: float, sds: np.ndarray) -> np.ndarray:
    """Partial-centring weights ``tau^2 / (tau^2 + s^2)`` (0 where a group has no information)."""
    with np.errstate(invalid="ignore"):
        w = tau**2 / (tau**2 + sds**2)
    return np.where(np.isfinite(sds), np.nan_to_num(w, nan=0.0), 0.0)


def pilot(
    arrays: dict,
    specimen_idx: np.ndarray,
    specimen_taxon_idx: np.ndarray,
    n_taxa: int,
    tau_taxon_prior: float,
    tau_specimen_prior: float,
    taxon_level: bool,
    specimen_level: bool,
) -> PilotEstimate:
    """Run the pilot on the fast-form arrays (see :func:`allobranch.model.density.fast_arrays`).

    Parameters
    ----------
    arrays : dict
        Fast-form arrays of the table.
    specimen_idx, specimen_taxon_idx : ndarray of int
        Specimen of each junction; taxon of each specimen.
    n_taxa : int
    tau_taxon_prior, tau_specimen_prior : float
        Half-normal prior scales of the two spreads.
    taxon_level, specimen_level : bool
        Which levels the model has.

    Returns
    -------
    PilotEstimate
    """
    n_specimens = len(specimen_taxon_idx)
    a_s, sd_s, sdev = _pilot_specimens(arrays, np.asarray(specimen_idx, dtype=np.int64), n_specimens)
    tau_s = _spread(a_s, sd_s, specimen_taxon_idx, tau_specimen_prior) if specimen_level else 0.0
    a_t, sd_t = _pool(a_s, sd_s, tau_s, specimen_taxon_idx, n_taxa)
    tau_t = _spread(a_t, sd_t, np.zeros(n_taxa, dtype=int), tau_taxon_prior) if taxon_level else 0.0
    mu, _ = _pool(a_t, sd_t, tau_t, np.zeros(n_taxa, dtype=int), 1)
    return PilotEstimate(
        a_specimen=a_s,
        sd_specimen=sd_s,
        a_taxon=a_t,
        sd_taxon=sd_t,
        mu=float(mu[0]),
        sigma_dev=sdev,
        tau_specimen=tau_s if specimen_level else float("nan"),
        tau_taxon=tau_t if taxon_level else float("nan"),
        w_specimen=weights(tau_s, sd_s) if specimen_level else np.zeros(0),
        w_taxon=weights(tau_t, sd_t) if taxon_level else np.zeros(0),
    )
