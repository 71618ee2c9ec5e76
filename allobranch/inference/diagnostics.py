"""Sampler diagnostics that never hide a failed fit.

Thresholds: R-hat <= 1.01 and bulk/tail ESS >= 400 (Vehtari et al. 2021, Bayesian Analysis 16:667, the
rank-normalised R-hat paper's recommendations); zero divergent transitions; E-BFMI >= 0.3 (common practice
in Stan/PyMC workflows, no single source).
"""

from __future__ import annotations

import warnings

import arviz as az
import numpy as np
import pandas as pd

RHAT_MAX = 1.01
ESS_MIN = 400
BFMI_MIN = 0.3

#: What to try, by kind of failure (shown with every warning).
ADVICE = {
    "r_hat": "run longer (--draws/--tune; draws=/tune= in Python) or more chains (--chains); if it persists, "
    "drop a level of the hierarchy (--no-specimen-level or --no-taxon-level; ModelSpec(specimen_level=False))",
    "ess": "run more draws (--draws; draws= in Python); a low ESS with many draws points at a hard posterior "
    "geometry",
    "divergences": "raise the target acceptance (--target-accept 0.99; target_accept= in Python), try "
    "--parametrization noncentered or centered (ModelSpec(parametrization=...)), or --deviation student_t "
    "if a few junctions are outlying",
    "bfmi": "the sampler explores the energy poorly: try --parametrization noncentered or centered "
    "(ModelSpec(parametrization=...)), or tighter scale priors (ModelSpec(priors=Priors(...)) in Python)",
}


def diagnostics_table(idata: az.InferenceData, var_names: list[str]) -> pd.DataFrame:
    """One row per scalar parameter with R-hat, bulk and tail ESS and whether each passes.

    Parameters
    ----------
    idata : arviz.InferenceData
    var_names : list of str
        Variables to check (constants such as fixed exponents are skipped).

    Returns
    -------
    pandas.DataFrame
        Columns ``parameter``, ``r_hat``, ``ess_bulk``, ``ess_tail``, ``ok``.
    """
    post = idata.posterior
    names = [v for v in var_names if v in post and post[v].std() > 0]
    if not names:
        return pd.DataFrame(columns=["parameter", "r_hat", "ess_bulk", "ess_tail", "ok"])
    with warnings.catch_warnings():  # constant elements (fixed exponents) give 0/0 inside ArviZ
        warnings.simplefilter("ignore", RuntimeWarning)
        rhat = az.rhat(idata, var_names=names)
        bulk = az.ess(idata, var_names=names, method="bulk")
        tail = az.ess(idata, var_names=names, method="tail")
    rows = []
    for name in names:
        r, b, t = (np.atleast_1d(ds[name].values).ravel() for ds in (rhat, bulk, tail))
        values = post[name].values.reshape(post.sizes["chain"] * post.sizes["draw"], -1)
        varies = np.ptp(values, axis=0) > 0
        extra_dims = [d for d in post[name].dims if d not in ("chain", "draw")]
        labels = (
            [name]
            if not extra_dims
            else [f"{name}[{c}]" for c in np.asarray(post[name][extra_dims[0]].values).ravel()]
        )
        for label, ri, bi, ti, vi in zip(labels, r, b, t, varies):
            if not vi:  # a fixed value (e.g. a taxon's exponent fixed at a law) has nothing to check
                continue
            rows.append(
                {"parameter": label, "r_hat": float(ri), "ess_bulk": float(bi), "ess_tail": float(ti)}
            )
    out = pd.DataFrame(rows)
    out["ok"] = (out["r_hat"] <= RHAT_MAX) & (out["ess_bulk"] >= ESS_MIN) & (out["ess_tail"] >= ESS_MIN)
    return out


def sampler_checks(idata: az.InferenceData) -> dict[str, float]:
    """Divergences, E-BFMI (minimum over chains), draws and chains."""
    stats = idata.sample_stats
    div = int(stats["diverging"].sum()) if "diverging" in stats else 0
    try:
        bfmi = float(np.min(az.bfmi(idata)))
    except (KeyError, ValueError, TypeError):
        bfmi = float("nan")
    return {
        "divergences": div,
        "bfmi_min": bfmi,
        "chains": int(idata.posterior.sizes["chain"]),
        "draws": int(idata.posterior.sizes["draw"]),
    }


#: Width of Pagel's lambda's 90 % HDI above which the fit says that lambda is poorly determined (our
#: choice, no source: half the unit interval; 16 simulated taxa give widths of about 0.75).
LAMBDA_WIDE = 0.5


def pagel_lambda_caveat(posterior, n_taxa: int, hdi_prob: float = 0.9) -> str | None:
    """A caveat when Pagel's lambda was estimated and its posterior is wide (``None`` otherwise).

    Where lambda is poorly determined, the population exponent's interval mixes the narrow widths of
    small lambda with the wide ones of lambda near 1, and so it can be too narrow when the true signal is
    strong (simulated: ``benchmarks/results/comparative.md``). The remedy named is a refit at lambda = 1.
    """
    if "pagel_lambda" not in posterior:
        return None
    draws = np.asarray(posterior["pagel_lambda"].values, dtype=float)
    low, high = (float(v) for v in az.hdi(draws.ravel(), hdi_prob=hdi_prob))
    if high - low <= LAMBDA_WIDE:
        return None
    return (
        f"Pagel's lambda is poorly determined by these {n_taxa} taxa ({hdi_prob:.0%} HDI [{low:.2f}, "
        f"{high:.2f}]): the population exponent's interval averages over it and can be too narrow when "
        "the true phylogenetic signal is strong. Try: refit with --pagel-lambda 1 (Brownian motion; "
        "ModelSpec(pagel_lambda=1) in Python) and report the wider interval if the two differ."
    )


def diagnostic_warnings(table: pd.DataFrame, checks: dict[str, float]) -> list[str]:
    """Plain-language warnings for every failed check, each with what to try."""
    warnings = []
    bad_r = table[table["r_hat"] > RHAT_MAX]
    if len(bad_r):
        warnings.append(
            f"R-hat above {RHAT_MAX} for {len(bad_r)} parameter(s) (worst {bad_r['r_hat'].max():.3f}: "
            f"{', '.join(bad_r['parameter'].head(5))}): chains disagree. Try: {ADVICE['r_hat']}."
        )
    low = table[(table["ess_bulk"] < ESS_MIN) | (table["ess_tail"] < ESS_MIN)]
    if len(low):
        worst = float(np.minimum(low["ess_bulk"], low["ess_tail"]).min())
        warnings.append(
            f"effective sample size below {ESS_MIN} for {len(low)} parameter(s) (lowest {worst:.0f}: "
            f"{', '.join(low['parameter'].head(5))}). Try: {ADVICE['ess']}."
        )
    if checks.get("divergences", 0) > 0:
        warnings.append(
            f"{checks['divergences']} divergent transition(s): the posterior may be biased. "
            f"Try: {ADVICE['divergences']}."
        )
    bfmi = checks.get("bfmi_min", float("nan"))
    if np.isfinite(bfmi) and bfmi < BFMI_MIN:
        warnings.append(f"E-BFMI {bfmi:.2f} below {BFMI_MIN}. Try: {ADVICE['bfmi']}.")
    return warnings
