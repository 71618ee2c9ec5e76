"""Tables of the linear predictor's terms: slopes of the covariates and traits, their spread over taxa,
and the reference values at which the exponents are reported."""

from __future__ import annotations

import numpy as np
import pandas as pd

from allobranch.conventions import COVARIATE_COLUMNS, SUMMARY_STATS

#: Group label of slopes shared by all taxa.
ALL_TAXA = "all taxa"


def _summary(draws: np.ndarray, hdi_prob: float) -> dict[str, float]:
    from allobranch.inference.results import _summ

    s = _summ(np.asarray(draws), hdi_prob)
    return {k: s[k] for k in SUMMARY_STATS}


def covariate_summary(result, hdi_prob: float = 0.9) -> pd.DataFrame:
    """One row per slope: overall covariate slopes, per-taxon slopes and their spread, trait slopes.

    Parameters
    ----------
    result : FitResult
    hdi_prob : float
        Probability of the highest-density intervals (ArviZ HDI).

    Returns
    -------
    pandas.DataFrame
        Columns :data:`~allobranch.conventions.COVARIATE_COLUMNS`; empty when the model has no covariate or trait. ``reference`` is
        the covariate's value at which the specimen, taxon and population exponents are reported (a trait's
        mean over taxa for a trait).
    """
    post = result.idata.posterior
    refs = reference_values(result)
    rows = []
    if "beta" in post:
        for k, name in enumerate(post["covariate"].values):
            ref = refs.get(str(name), np.nan)
            rows.append(
                {
                    "term": str(name),
                    "group": ALL_TAXA,
                    **_summary(post["beta"].values[..., k], hdi_prob),
                    "reference": ref,
                    "meaning": f"change in exponent per unit of {name}"
                    + (" (per tenfold larger parent)" if str(name).startswith("log_parent") else ""),
                }
            )
            if "beta_taxon" in post:
                rows.append(
                    {
                        "term": str(name),
                        "group": "spread over taxa",
                        **_summary(post["tau_beta"].values[..., k], hdi_prob),
                        "reference": ref,
                        "meaning": f"between-taxon SD of the slope of {name}",
                    }
                )
                for t, taxon in enumerate(post["taxon"].values):
                    rows.append(
                        {
                            "term": str(name),
                            "group": str(taxon),
                            **_summary(post["beta_taxon"].values[..., t, k], hdi_prob),
                            "reference": ref,
                            "meaning": f"slope of {name} in taxon {taxon}",
                        }
                    )
    if "gamma" in post:
        for m, name in enumerate(post["trait"].values):
            rows.append(
                {
                    "term": str(name),
                    "group": "taxon level",
                    **_summary(post["gamma"].values[..., m], hdi_prob),
                    "reference": refs.get(f"trait:{name}", np.nan),
                    "meaning": f"change in taxon exponent per unit of the trait {name}",
                }
            )
    out = pd.DataFrame(rows, columns=list(COVARIATE_COLUMNS))
    out.attrs["hdi_prob"] = hdi_prob
    return out


def reference_values(result) -> dict[str, float]:
    """Reference value of every covariate (and ``trait:<name>`` of every trait), as recorded by the fit."""
    return {str(k): float(v) for k, v in (result.settings.get("linear_reference") or {}).items()}


def reference_text(result) -> str:
    """``"log_parent_size = -0.52"``-style statement of where the exponents are reported ('' without
    covariates)."""
    refs = {k: v for k, v in reference_values(result).items() if not k.startswith("trait:")}
    return ", ".join(f"{k} = {v:.4g}" for k, v in refs.items())


def curve_draws(
    post, covariate: str, reference: float, grid: np.ndarray, taxon: str | None = None
) -> np.ndarray:
    """The exponent of every posterior draw along one covariate, other covariates at their reference.

    Parameters
    ----------
    post : xarray.Dataset
        Posterior with ``mu``, ``a_taxon``, ``beta`` (and ``beta_taxon`` when slopes vary by taxon).
    covariate : str
    reference : float
        The covariate's reference value (where ``mu`` and ``a_taxon`` hold).
    grid : numpy.ndarray (points,)
    taxon : str, optional
        The taxon's curve (its own slope when slopes vary by taxon); the population's otherwise.

    Returns
    -------
    numpy.ndarray (draws, points)
    """
    k = [str(c) for c in post["covariate"].values].index(covariate)
    if taxon is None:
        level, slope = post["mu"], post["beta"]
    else:
        level = post["a_taxon"].sel(taxon=taxon)
        slope = post["beta_taxon"].sel(taxon=taxon) if "beta_taxon" in post else post["beta"]
    level = np.asarray(level.values, dtype=float).reshape(-1)
    slope = np.asarray(slope.values, dtype=float)[..., k].reshape(-1)
    return level[:, None] + slope[:, None] * (np.asarray(grid, dtype=float)[None, :] - reference)


def exponent_curve(
    result, covariate: str, *, taxon: str | None = None, n_grid: int = 60, hdi_prob: float = 0.9
) -> pd.DataFrame:
    """The exponent along one covariate, other covariates at their reference values, with its HDI band.

    Parameters
    ----------
    result : FitResult
        A fit with the covariate.
    covariate : str
    taxon : str, optional
        Draw that taxon's exponent (its own slope when slopes vary by taxon); the population exponent
        otherwise.
    n_grid : int
        Points along the observed range of the covariate.
    hdi_prob : float
        Probability of the band (ArviZ HDI at every grid point).

    Returns
    -------
    pandas.DataFrame
        Columns ``x``, ``mean``, ``hdi_low``, ``hdi_high``; ``attrs`` hold ``covariate``, ``reference``,
        ``group`` and ``hdi_prob``.
    """
    import arviz as az

    from allobranch.model.linear import covariate_values

    ref = reference_values(result)[covariate]
    values = covariate_values(result.table, covariate)
    grid = np.linspace(values.min(), values.max(), n_grid)
    draws = curve_draws(result.idata.posterior, covariate, ref, grid, taxon)
    band = np.array([az.hdi(draws[:, i], hdi_prob=hdi_prob) for i in range(n_grid)])
    out = pd.DataFrame({"x": grid, "mean": draws.mean(axis=0), "hdi_low": band[:, 0], "hdi_high": band[:, 1]})
    out.attrs.update(covariate=covariate, reference=ref, group=taxon or "population", hdi_prob=hdi_prob)
    return out


def junction_points(result, covariate: str) -> pd.DataFrame:
    """Every junction's covariate value and naive exponent (the root of ``r0^a = sum ri^a`` from the
    readings alone), for plotting beside the model's curve.

    Returns
    -------
    pandas.DataFrame
        Columns ``taxon``, ``x``, ``naive_exponent`` (NaN where the readings have no root).
    """
    from allobranch.geometry.exponent import junction_geometry
    from allobranch.model.linear import covariate_values

    geo = junction_geometry(result.table)
    return pd.DataFrame(
        {
            "taxon": geo["taxon"].astype(str).to_numpy(),
            "x": covariate_values(result.table, covariate),
            "naive_exponent": geo["exponent"].to_numpy(dtype=float),
        }
    )
