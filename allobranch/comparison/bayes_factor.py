"""Savage–Dickey Bayes factors of point laws against the free model, from the free fit alone.

For a point value ``v`` of a parameter ``theta`` nested in the free model, the Savage–Dickey density ratio
gives the Bayes factor of ``theta = v`` against the free model as ``p(v | data) / p(v)``: the posterior
density over the prior density at ``v`` (Dickey 1971; Wagenmakers et al. 2010, *Cogn. Psychol.* 60:158).
Here ``theta`` is the population exponent ``mu`` (scope ``population``) or one taxon's exponent ``a_taxon``
(scope ``taxon``).

Prior density
    of ``mu``: the Normal prior's density, exactly. Of ``a_taxon`` (more than one taxon):
    ``a_taxon ~ Normal(mu, tau_taxon)`` with ``mu ~ Normal(m, s)``, ``tau_taxon ~ HalfNormal(t)``, so its
    prior is a mixture. Integrating ``mu`` out exactly gives ``Normal(v; m, sqrt(s^2 + tau^2))``, which is
    averaged over :data:`PRIOR_DRAWS` Monte-Carlo draws of ``tau_taxon`` from its prior (no density
    estimate; the integrand is bounded, so the Monte-Carlo error is tiny). With one taxon
    ``a_taxon = mu``.
Posterior density
    a Gaussian kernel density estimate (:class:`scipy.stats.gaussian_kde`, Scott's bandwidth) when at
    least :data:`MIN_NEAR_DRAWS` (effective) draws lie within one bandwidth of ``v``; otherwise ``v`` is in
    the far tail where a kernel estimate has nothing to work with, and a normal approximation to the
    posterior (its mean and SD) is used instead, marked ``bf_method = "normal_approx"``. Such factors are
    extreme either way; only their order of magnitude means anything.
Prior sensitivity
    the factor is recomputed under a narrower and a wider prior (:data:`SENSITIVITY`: the prior scales
    ``mu_sd`` and ``tau_taxon`` both times 0.5 and times 2) without refitting, by importance reweighting
    the free fit's draws: the posterior under a changed prior is proportional to the posterior times
    ``new prior / old prior``. The weights are Pareto-smoothed (:func:`arviz.psislw`); when their Pareto
    ``k`` exceeds ArviZ's reliability threshold the reweighted factor is flagged as unreliable.

Caveats: a Bayes factor depends on the prior of the free model (a wider prior favours the point law:
Lindley's paradox), hence the sensitivity columns. The population factor tests ``mu = v`` -- the
population mean exponent -- and lets taxa scatter around it, which is not the same hypothesis as the
``population`` model in the LOO comparison (every taxon exactly ``v``). A taxon's factor tests ``a_taxon = v`` inside
the hierarchical model, where the other taxa's prior is conditioned on that value; the ``taxon`` model in
the LOO comparison keeps their prior unconditioned. With one taxon both coincide.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass, replace

import arviz as az
import numpy as np
import pandas as pd
from scipy import stats
from scipy.special import logsumexp

from allobranch.comparison.laws import Law
from allobranch.conventions import POPULATION
from allobranch.model.spec import Priors

#: Monte-Carlo draws of ``tau_taxon`` behind the prior density of a taxon exponent.
PRIOR_DRAWS = 200_000
#: Effective posterior draws needed within one kernel bandwidth of the law for a kernel density estimate.
MIN_NEAR_DRAWS = 10.0
#: Factors applied to the prior scales ``mu_sd`` and ``tau_taxon`` for the sensitivity columns.
SENSITIVITY: dict[str, float] = {"narrow": 0.5, "wide": 2.0}
#: Columns of :func:`bayes_factor_table`.
BF_COLUMNS: tuple[str, ...] = (
    "scope",
    "law",
    "value",
    "log10_bf",
    "bf_method",
    "log10_bf_narrow",
    "log10_bf_wide",
)
#: One-line caveat shown beside the numbers.
CAVEAT = (
    "Savage-Dickey Bayes factors (posterior / prior density at the law, from the free fit) depend on the "
    "prior: log10_bf_narrow / log10_bf_wide repeat them with the prior scales of mu and tau_taxon halved / "
    "doubled (by reweighting the draws). 'normal_approx' marks laws in the far tail of the posterior, where "
    "only the order of magnitude is meaningful. The population factor tests the population exponent mu = value "
    "(taxa may scatter around it)."
)


@dataclass(frozen=True)
class TaxonPrior:
    """What a taxon's marginal prior needs beyond the priors' scales: the prior variance its traits add
    (``sum_k g_k^2 c_k^2``), its diagonal of the scaled tree covariance, whether a tree is used, and
    Pagel's lambda when it is fixed (``None``: estimated, uniform prior)."""

    trait_var: float = 0.0
    tree_diag: float = 1.0
    phylo: bool = False
    pagel_lambda: float | None = None


@dataclass(frozen=True)
class SavageDickey:
    """One Savage–Dickey Bayes factor.

    Attributes
    ----------
    log10_bf : float
        log10 of the Bayes factor of the point value against the free model (> 0 favours the point value).
    method : {"kde", "normal_approx"}
        How the posterior density at the value was estimated.
    near_draws : float
        Effective number of posterior draws within one kernel bandwidth of the value.
    """

    log10_bf: float
    method: str
    near_draws: float


def scaled_priors(priors: Priors, factor: float) -> Priors:
    """The priors with the exponent's prior scales ``mu_sd`` and ``tau_taxon`` multiplied by ``factor``."""
    return replace(priors, mu_sd=priors.mu_sd * factor, tau_taxon=priors.tau_taxon * factor)


def log_prior_mu(value: float, priors: Priors) -> float:
    """Log prior density of the population exponent ``mu ~ Normal(mu_mean, mu_sd)`` at ``value``."""
    return float(stats.norm.logpdf(value, priors.mu_mean, priors.mu_sd))


def log_prior_taxon(
    value: float,
    priors: Priors,
    *,
    seed: int = 0,
    n_draws: int = PRIOR_DRAWS,
    terms: TaxonPrior | None = None,
) -> float:
    """Log prior density of one taxon's exponent at ``value`` in the hierarchical model.

    ``a_taxon = mu + g . gamma + u``, ``mu ~ Normal(m, s)``, trait slopes ``gamma_k ~ Normal(0, c_k)`` (the
    taxon's centred traits ``g``), and ``u ~ Normal(0, tau^2 (lambda C_tt + 1 - lambda))`` with
    ``tau ~ HalfNormal(t)``, ``lambda ~ Uniform(0, 1)`` or fixed under a tree (``C_tt``: the taxon's diagonal of the
    scaled tree covariance) and ``lambda = 0`` without one. Given ``tau`` and ``lambda`` the sum is normal
    (exact: independent normal terms), ``Normal(m, s^2 + sum g_k^2 c_k^2 + tau^2 (lambda C_tt + 1 -
    lambda))``; ``tau`` and ``lambda`` are integrated by Monte Carlo from their priors. The marginal prior of
    one taxon is all the Savage-Dickey ratio needs: the tree correlates taxa, but each taxon's own prior is
    this mixture.

    Parameters
    ----------
    value : float
    priors : Priors
    seed : int
        Seed of the ``tau`` (and ``lambda``) draws.
    n_draws : int
        Number of draws.
    terms : TaxonPrior, optional
        The taxon's trait variance and tree diagonal (none: independent taxa, no traits).

    Returns
    -------
    float
    """
    terms = terms or TaxonPrior()
    rng = np.random.default_rng(seed)
    tau = np.abs(rng.standard_normal(n_draws)) * priors.tau_taxon
    if not terms.phylo:
        lam = np.zeros(n_draws)
    elif terms.pagel_lambda is None:
        lam = rng.uniform(size=n_draws)
    else:
        lam = np.full(n_draws, terms.pagel_lambda)
    var = priors.mu_sd**2 + terms.trait_var + tau**2 * (lam * terms.tree_diag + 1.0 - lam)
    logs = stats.norm.logpdf(value, priors.mu_mean, np.sqrt(var))
    return float(logsumexp(logs) - np.log(n_draws))


def log_posterior_density(
    draws: np.ndarray, value: float, log_weights: np.ndarray | None = None
) -> tuple[float, str, float]:
    """Log posterior density at ``value`` from (optionally weighted) draws.

    Parameters
    ----------
    draws : numpy.ndarray
        Posterior draws (flattened).
    value : float
    log_weights : numpy.ndarray, optional
        Log importance weights of the draws (need not be normalised).

    Returns
    -------
    (log_density, method, near_draws) : tuple
        ``method`` is ``"kde"`` or ``"normal_approx"`` (see the module notes).
    """
    x = np.asarray(draws, dtype=float).ravel()
    if log_weights is None:
        w = np.full(x.size, 1.0 / x.size)
    else:
        lw = np.asarray(log_weights, dtype=float).ravel()
        w = np.exp(lw - logsumexp(lw))
    ess = 1.0 / np.sum(w**2)
    mean = float(np.sum(w * x))
    sd = float(np.sqrt(np.sum(w * (x - mean) ** 2)))
    if sd == 0:
        raise ValueError("posterior draws have no spread; the parameter looks fixed, not estimated")
    bandwidth = sd * ess ** (-1.0 / 5.0)  # Scott's rule, as scipy's gaussian_kde uses
    near = float(ess * np.sum(w[np.abs(x - value) <= bandwidth]))
    if near >= MIN_NEAR_DRAWS:
        kde = stats.gaussian_kde(x, bw_method="scott", weights=None if log_weights is None else w)
        return float(kde.logpdf(value)[0]), "kde", near
    return float(stats.norm.logpdf(value, mean, sd)), "normal_approx", near


def savage_dickey(
    draws: np.ndarray, value: float, log_prior: float, log_weights: np.ndarray | None = None
) -> SavageDickey:
    """Savage–Dickey Bayes factor of ``theta = value`` against the free model.

    Parameters
    ----------
    draws : numpy.ndarray
        Posterior draws of ``theta`` from the free model.
    value : float
        The point value.
    log_prior : float
        Log prior density of ``theta`` at ``value`` (under the prior the draws are weighted to).
    log_weights : numpy.ndarray, optional
        Log importance weights turning the draws into draws from the posterior under another prior.

    Returns
    -------
    SavageDickey
    """
    log_post, method, near = log_posterior_density(draws, value, log_weights)
    return SavageDickey((log_post - log_prior) / np.log(10.0), method, near)


def prior_log_ratio(posterior, old: Priors, new: Priors) -> np.ndarray:
    """Log of ``new prior / old prior`` of the exponent hyper-parameters at every posterior draw.

    Parameters
    ----------
    posterior : xarray.Dataset
        Posterior group of the free fit (``mu`` and, with several taxa, ``tau_taxon``).
    old, new : Priors

    Returns
    -------
    numpy.ndarray
        One value per draw (chains concatenated).
    """
    mu = posterior["mu"].values.ravel()
    out = stats.norm.logpdf(mu, new.mu_mean, new.mu_sd) - stats.norm.logpdf(mu, old.mu_mean, old.mu_sd)
    if "tau_taxon" in posterior:
        tau = posterior["tau_taxon"].values.ravel()
        out = (
            out
            + stats.halfnorm.logpdf(tau, scale=new.tau_taxon)
            - stats.halfnorm.logpdf(tau, scale=old.tau_taxon)
        )
    return out


def _parameter_draws(posterior, taxon: str | None) -> np.ndarray:
    if taxon is None:
        return posterior["mu"].values.ravel()
    return posterior["a_taxon"].sel(taxon=taxon).values.ravel()


def _log_prior(
    value: float, priors: Priors, taxon: str | None, hierarchical: bool, seed: int, terms: TaxonPrior | None
) -> float:
    if taxon is None or not hierarchical:
        return log_prior_mu(value, priors)
    return log_prior_taxon(value, priors, seed=seed, terms=terms)


def bayes_factor_table(
    idata: az.InferenceData,
    priors: Priors,
    laws: Sequence[Law],
    taxa: Sequence[str] | None = None,
    *,
    include_population: bool = True,
    seed: int = 0,
    taxon_priors: dict[str, TaxonPrior] | None = None,
) -> tuple[pd.DataFrame, list[str]]:
    """Savage–Dickey Bayes factors of every law, per scope, with their prior sensitivity.

    Parameters
    ----------
    idata : arviz.InferenceData
        The free fit's draws (``mu``, ``a_taxon``; ``tau_taxon`` when there are several taxa).
    priors : Priors
        The priors the free model was fitted with.
    laws : sequence of Law
    taxa : sequence of str, optional
        Taxa whose exponent is tested (scope = taxon label); ``None`` for none.
    include_population : bool
        Test the population exponent ``mu`` (scope ``"population"``).
    seed : int
        Seed of the prior Monte-Carlo draws.
    taxon_priors : dict, optional
        Each taxon's :class:`TaxonPrior` when the model has traits or a tree.

    Returns
    -------
    (table, warnings) : (pandas.DataFrame, list of str)
        Columns :data:`BF_COLUMNS`, one row per scope and law; warnings about unreliable reweighting.
    """
    post = idata.posterior
    hierarchical = "tau_taxon" in post
    n_draws = post.sizes["chain"] * post.sizes["draw"]
    good_k = min(1.0 - 1.0 / np.log10(n_draws), 0.7)  # ArviZ's sample-size-dependent PSIS threshold
    weights, warnings = {}, []
    for key, factor in SENSITIVITY.items():
        new = scaled_priors(priors, factor)
        with np.errstate(over="ignore"):  # ArviZ's Pareto fit overflows harmlessly on near-constant weights
            lw, k = az.psislw(prior_log_ratio(post, priors, new))
        weights[key] = (new, np.asarray(lw))
        if float(k) > good_k:
            warnings.append(
                f"prior sensitivity ({key} prior, scales x{factor:g}) by reweighting is unreliable "
                f"(Pareto k = {float(k):.2f} > {good_k:.2f}); refit with that prior to check"
            )
    scopes = ([None] if include_population else []) + list(taxa or [])
    rows = []
    for taxon in scopes:
        draws = _parameter_draws(post, taxon)
        terms = (taxon_priors or {}).get(str(taxon)) if taxon is not None else None
        for law in laws:
            base = savage_dickey(
                draws, law.value, _log_prior(law.value, priors, taxon, hierarchical, seed, terms)
            )
            row = {
                "scope": POPULATION if taxon is None else str(taxon),
                "law": law.label,
                "value": law.value,
                "log10_bf": base.log10_bf,
                "bf_method": base.method,
            }
            for key, (new, lw) in weights.items():
                alt = savage_dickey(
                    draws, law.value, _log_prior(law.value, new, taxon, hierarchical, seed, terms), lw
                )
                row[f"log10_bf_{key}"] = alt.log10_bf
            rows.append(row)
    return pd.DataFrame(rows, columns=list(BF_COLUMNS)), warnings
