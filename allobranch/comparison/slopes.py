"""Does the exponent depend on a covariate? Each slope tested against zero with the same three kinds of
evidence as the laws: PSIS-LOO of the model with and without the covariate, the Savage-Dickey Bayes factor
of ``slope = 0`` (prior ``Normal(0, c)``, exact density at 0), and the highest-density interval.

Rule (the thresholds of :mod:`allobranch.comparison.verdict`): the exponent **depends** on the covariate
when the interval excludes 0 and either the Bayes factor for ``slope = 0`` is at most
:data:`~allobranch.comparison.verdict.BF_REJECT` or LOO clearly prefers the model with it; it is
**constant** in the covariate when the interval contains 0, the Bayes factor for ``slope = 0`` is at least
:data:`~allobranch.comparison.verdict.BF_DECLARE` and LOO does not clearly prefer the covariate;
otherwise **undecided**.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
from scipy import stats

from allobranch.comparison.bayes_factor import savage_dickey
from allobranch.comparison.loo import compare_loo
from allobranch.comparison.verdict import BF_DECLARE, BF_REJECT, LOO_CLEAR_ELPD, LOO_CLEAR_SE
from allobranch.conventions import SLOPES_FILE
from allobranch.model.data import model_data
from allobranch.model.linear import build_linear_terms

#: Columns of ``slopes.csv``.
SLOPE_COLUMNS: tuple[str, ...] = (
    "covariate",
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
        One row per covariate, columns :data:`SLOPE_COLUMNS`.
    """
    import arviz as az

    from allobranch.inference.fit import fit as run_fit

    spec, table = fit.spec, fit.table
    if not spec.covariates:
        return pd.DataFrame(columns=list(SLOPE_COLUMNS))
    lin = build_linear_terms(table, model_data(table), spec)
    post = fit.idata.posterior
    rows = []
    for k, name in enumerate(spec.covariates):
        draws = post["beta"].values[..., k].ravel()
        lo, hi = az.hdi(draws, hdi_prob=hdi_prob)
        sd = savage_dickey(draws, 0.0, float(stats.norm.logpdf(0.0, 0.0, lin.beta_sd[k])))
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
        verdict, reason = slope_verdict((float(lo), float(hi)), sd.log10_bf, gain, gain_se)
        rows.append(
            {
                "covariate": name,
                "mean": float(draws.mean()),
                "hdi_low": float(lo),
                "hdi_high": float(hi),
                "log10_bf_zero": sd.log10_bf,
                "bf_method": sd.method,
                "elpd_gain": gain,
                "elpd_gain_se": gain_se,
                "verdict": verdict,
                "reason": reason,
            }
        )
    out = pd.DataFrame(rows, columns=list(SLOPE_COLUMNS))
    out.attrs["hdi_prob"] = hdi_prob
    return out


def write_slopes(slopes: pd.DataFrame, out, *, force: bool = False):
    """Write ``slopes.csv`` into the folder ``out`` (refusing to replace an existing one unless ``force``)."""
    from allobranch.io import atomic_write, prepare_output_dir

    folder = prepare_output_dir(out, [SLOPES_FILE], force=force)
    return atomic_write(folder / SLOPES_FILE, lambda p: slopes.to_csv(p, index=False))
