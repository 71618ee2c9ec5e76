"""Does the exponent depend on a covariate? Each slope tested against zero with the same three kinds of
evidence as the laws: PSIS-LOO of the model with and without the covariate, the Savage-Dickey Bayes factor
of ``slope = 0`` (prior ``Normal(0, c)``, exact density at 0), and the highest-density interval.

Rule (the thresholds of :mod:`allobranch.comparison.verdict`): the exponent **depends** on the covariate
when the interval excludes 0 and either the Bayes factor for ``slope = 0`` is at most
:data:`~allobranch.comparison.verdict.BF_REJECT` or LOO clearly prefers the model with it; it is
**constant** in the covariate when the interval contains 0, the Bayes factor for ``slope = 0`` is at least
:data:`~allobranch.comparison.verdict.BF_DECLARE` and LOO does not clearly prefer the covariate;
otherwise **undecided**.

Slopes varying by taxon (``covariates_by_taxon``): every taxon's slope ``beta_taxon = beta + tau_beta z``
gets its own row (``group`` = the taxon) with its interval and the Savage-Dickey Bayes factor of
``beta_taxon = 0``, under the same rule without the LOO condition (a model that drops one taxon's slope
is not refitted, so ``elpd_gain`` is empty). The prior density of a taxon's slope at 0 is exact
(:func:`log_prior_taxon_slope_at_zero`). There is no region of practical equivalence for a slope: the rule
reads the interval against 0, as for the overall slope.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
from scipy import special, stats

from allobranch.comparative.summaries import ALL_TAXA
from allobranch.comparison.bayes_factor import savage_dickey
from allobranch.comparison.loo import compare_loo
from allobranch.comparison.verdict import BF_DECLARE, BF_REJECT, LOO_CLEAR_ELPD, LOO_CLEAR_SE
from allobranch.conventions import SLOPES_FILE
from allobranch.model.data import model_data
from allobranch.model.linear import build_linear_terms

#: Columns of ``slopes.csv``.
SLOPE_COLUMNS: tuple[str, ...] = (
    "covariate",
    "group",
    "mean",
    "hdi_low",
    "hdi_high",
    "log10_bf_zero",
    "bf_method",
    "elpd_gain",
    "elpd_gain_se",
    "verdict",
    "reason",
)
DEPENDS, CONSTANT, UNDECIDED = "depends", "constant", "undecided"
#: Said in the reason of a taxon's slope.
NO_TAXON_LOO = "no per-taxon LOO (a model without one taxon's slope is not fitted)"


def log_prior_taxon_slope_at_zero(slope_sd: float, spread_scale: float) -> float:
    """Log prior density at 0 of one taxon's slope ``beta + tau_beta z``.

    ``beta ~ Normal(0, s)``, ``tau_beta ~ HalfNormal(c)``, ``z ~ Normal(0, 1)``: given ``tau_beta`` the
    taxon's slope is ``Normal(0, s^2 + tau_beta^2)``, so its density at 0 is
    ``(1 / (pi c)) int_0^inf exp(-t^2 / (2 c^2)) / sqrt(s^2 + t^2) dt``. With ``t = s sinh u`` and
    ``K_0(w) = int_0^inf exp(-w cosh u) du`` (the integral representation of the modified Bessel function,
    DLMF 10.32.9 with nu = 0) this is ``exp(w) K_0(w) / (2 pi c)`` with ``w = s^2 / (4 c^2)``, i.e.
    ``scipy.special.k0e(w) / (2 pi c)``.

    Parameters
    ----------
    slope_sd : float
        Prior SD ``s`` of the overall slope.
    spread_scale : float
        Half-normal scale ``c`` of the slope's spread over taxa.

    Returns
    -------
    float
    """
    w = slope_sd**2 / (4.0 * spread_scale**2)
    return float(np.log(special.k0e(w)) - np.log(2.0 * np.pi * spread_scale))


def slope_verdict(
    hdi: tuple[float, float], log10_bf_zero: float, elpd_gain: float, elpd_gain_se: float
) -> tuple[str, str]:
    """Apply the module's rule to one slope's evidence; returns ``(verdict, reason)``."""
    excludes = not (hdi[0] <= 0.0 <= hdi[1])
    loo_prefers = (
        np.isfinite(elpd_gain)
        and elpd_gain > LOO_CLEAR_ELPD
        and elpd_gain > LOO_CLEAR_SE * (elpd_gain_se if np.isfinite(elpd_gain_se) else 0.0)
    )
    bf0 = 10.0**log10_bf_zero
    evidence = f"interval [{hdi[0]:.3g}, {hdi[1]:.3g}], BF(slope = 0) {bf0:.3g}"
    if np.isfinite(elpd_gain):
        evidence += f", LOO gain {elpd_gain:.1f} +/- {elpd_gain_se:.1f}"
    if excludes and (bf0 <= BF_REJECT or loo_prefers):
        return DEPENDS, evidence
    if not excludes and bf0 >= BF_DECLARE and not loo_prefers:
        return CONSTANT, evidence
    return UNDECIDED, evidence


def _slope_row(
    name: str,
    group: str,
    draws: np.ndarray,
    log_prior_zero: float,
    hdi_prob: float,
    gain: float,
    gain_se: float,
) -> dict:
    """One row of :data:`SLOPE_COLUMNS`: a slope's interval, Bayes factor for 0 and verdict."""
    import arviz as az

    draws = np.asarray(draws, dtype=float).ravel()
    lo, hi = (float(v) for v in az.hdi(draws, hdi_prob=hdi_prob))
    sd = savage_dickey(draws, 0.0, log_prior_zero)
    verdict, reason = slope_verdict((lo, hi), sd.log10_bf, gain, gain_se)
    return {
        "covariate": name,
        "group": group,
        "mean": float(draws.mean()),
        "hdi_low": lo,
        "hdi_high": hi,
        "log10_bf_zero": sd.log10_bf,
        "bf_method": sd.method,
        "elpd_gain": gain,
        "elpd_gain_se": gain_se,
        "verdict": verdict,
        "reason": reason if group == ALL_TAXA else f"{reason}; {NO_TAXON_LOO}",
    }


def compare_covariates(
    fit, *, seed: int = 0, refit: bool = True, hdi_prob: float = 0.9, **fit_kw
) -> pd.DataFrame:
    """Test every covariate slope of a fitted model against zero.

    Parameters
    ----------
    fit : FitResult
        A fit whose spec has ``covariates``.
    seed : int
        Seed of the refits without each covariate.
    refit : bool
        Fit the model without each covariate for the LOO comparison (otherwise the LOO columns are empty).
    hdi_prob : float
        Probability of the highest-density interval (ArviZ HDI).
    **fit_kw
        Sampler settings of the refits (``draws``, ``tune``, ``chains``, ...), passed to
        :func:`allobranch.fit`.

    Returns
    -------
    pandas.DataFrame
        Columns :data:`SLOPE_COLUMNS`: one row per covariate (``group`` "all taxa"), and with slopes
        varying by taxon one more per covariate and taxon (``group`` the taxon).
    """
    from allobranch.inference.fit import fit as run_fit

    spec, table = fit.spec, fit.table
    if not spec.covariates:
        return pd.DataFrame(columns=list(SLOPE_COLUMNS))
    lin = build_linear_terms(table, model_data(table), spec)
    post = fit.idata.posterior
    rows = []
    for k, name in enumerate(spec.covariates):
        gain = gain_se = np.nan
        if refit:
            rest = tuple(c for c in spec.covariates if c != name)
            reduced = spec.with_(
                covariates=rest,
                covariate_ref={c: v for c, v in spec.covariate_ref.items() if c != name},
                covariates_by_taxon=spec.covariates_by_taxon and bool(rest),
            )
            other = run_fit(table, reduced, seed=seed + 1009 * (k + 1), progress=False, **fit_kw)
            loo = compare_loo({"with": fit, "without": other})
            gain = float(loo.table.at["with", "elpd"] - loo.table.at["without", "elpd"])
            gain_se = float(loo.table["dse"].max())
        log_prior = float(stats.norm.logpdf(0.0, 0.0, lin.beta_sd[k]))
        rows.append(
            _slope_row(name, ALL_TAXA, post["beta"].values[..., k], log_prior, hdi_prob, gain, gain_se)
        )
        if "beta_taxon" in post:
            log_prior = log_prior_taxon_slope_at_zero(lin.beta_sd[k], lin.tau_beta_scale[k])
            for taxon in post["taxon"].values:
                draws = post["beta_taxon"].sel(taxon=taxon).values[..., k]
                rows.append(_slope_row(name, str(taxon), draws, log_prior, hdi_prob, np.nan, np.nan))
    out = pd.DataFrame(rows, columns=list(SLOPE_COLUMNS))
    out.attrs["hdi_prob"] = hdi_prob
    return out


def write_slopes(slopes: pd.DataFrame, out, *, force: bool = False):
    """Write ``slopes.csv`` into the folder ``out`` (refusing to replace an existing one unless ``force``)."""
    from allobranch.io import atomic_write, prepare_output_dir

    folder = prepare_output_dir(out, [SLOPES_FILE], force=force)
    return atomic_write(folder / SLOPES_FILE, lambda p: slopes.to_csv(p, index=False))
