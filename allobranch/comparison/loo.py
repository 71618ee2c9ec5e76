"""PSIS-LOO comparison of the free model and the point laws on the junction log-likelihood.

Every fit has one log-likelihood term per junction (variable ``loglik``): all of the junction's readings
together, with its latent true daughter radii integrated out, so the same observed quantities enter every
model and leaving one junction out leaves out no parameter of its own. :func:`arviz.loo` estimates each
model's expected log pointwise predictive density (ELPD) and :func:`arviz.compare` ranks the models
(``elpd_diff`` to the best with its standard error ``dse``) and computes stacking weights. A saved fit does
not keep the log-likelihood (it is as large as draws x junctions); it is recomputed from the posterior and
the table in blocks of junctions when LOO needs it (:func:`elpd_loo`).

High Pareto k. Where a junction's Pareto ``k`` exceeds ArviZ's threshold (``min(1 - 1/log10(S), 0.7)``
for ``S`` draws; 0.7 from about 2,200 draws on), importance sampling cannot stand in for refitting without
that junction and its ELPD contribution is unreliable. This module does **not** refit: a K-fold
cross-validation by specimen would need one refit per fold for every hypothesis in every scope (for
10 specimens, 3 laws and 3 taxa about 130 fits), too costly to run by default. Instead the comparison
counts such junctions (``n_high_k``) and warns loudly, naming up to :data:`MAX_NAMED_JUNCTIONS` of them, so
the user can look at those junctions, refit without them, or run a K-fold check. With the
junction-marginal log-likelihood such junctions are rare in practice; they are usually outliers.

Caveat: an ELPD difference smaller than about 4, or than twice its standard error, is too small to rank the
models (common practice: Sivula, Magnusson & Vehtari 2020, arXiv:2008.10296 -- from memory); LOO judges
predictive accuracy, not which exponent is true, and a point law that is close to the estimate predicts
about as well as the free model.
"""

from __future__ import annotations

import warnings
from collections.abc import Mapping
from dataclasses import dataclass, field

import arviz as az
import numpy as np
import pandas as pd
import xarray as xr
from arviz.stats.stats_utils import ELPDData

from allobranch.inference.results import FitResult

#: Columns of :attr:`LooComparison.table`.
LOO_COLUMNS: tuple[str, ...] = ("elpd", "elpd_se", "elpd_diff", "dse", "weight", "p_loo", "n_high_k")
#: Junctions named at most in a high-k warning.
MAX_NAMED_JUNCTIONS = 10
#: One-line caveat shown beside the numbers.
CAVEAT = (
    "PSIS-LOO compares predictive accuracy per junction (latent daughters integrated out): elpd_diff is the "
    "loss against the best hypothesis of the scope with its standard error dse; differences below about 4 "
    "or below 2 dse do not rank the hypotheses. Junctions with high Pareto k make the ELPD unreliable; they "
    "are counted (n_high_k) and named in the warnings (no K-fold refit is run)."
)


@dataclass
class LooComparison:
    """PSIS-LOO results of several hypotheses fitted to the same junctions.

    Attributes
    ----------
    table : pandas.DataFrame
        Indexed by hypothesis label, in the order given; columns :data:`LOO_COLUMNS`.
    high_k : dict of str to list of str
        Hypothesis label -> labels of junctions whose Pareto k exceeds the threshold.
    k_threshold : float
        The Pareto-k threshold used.
    """

    table: pd.DataFrame
    high_k: dict[str, list[str]] = field(default_factory=dict)
    k_threshold: float = 0.7


def reff(posterior, n_samples: int) -> float:
    """Relative effective sample size of the draws, as :func:`arviz.loo` computes it.

    The mean ESS (``az.ess(method="mean")``) over every posterior variable and element, divided by the
    number of draws; 1 with a single chain (ArviZ 0.23, ``arviz.stats.stats.loo``).
    """
    if posterior.sizes["chain"] == 1:
        return 1.0
    ess = az.ess(posterior, method="mean")
    return float(np.hstack([ess[v].values.flatten() for v in ess.data_vars]).mean() / n_samples)


def elpd_loo(source: FitResult | az.InferenceData, var_name: str = "loglik") -> ELPDData:
    """PSIS-LOO of one fit, with pointwise values (:func:`arviz.loo`, ``pointwise=True``).

    A fit that holds its log-likelihood (``source.idata`` or an InferenceData with a ``log_likelihood``
    group) is passed to ArviZ as it is. A fit without it (a saved and reloaded fit) has it recomputed from
    its posterior and table a block of junctions at a time
    (:func:`allobranch.inference.pointwise.loglik_blocks`); each block is smoothed by :func:`arviz.loo` with
    the whole fit's relative efficiency (:func:`reff`) and the blocks are summed as ArviZ sums junctions:
    ``elpd = sum(loo_i)``, ``se = sqrt(n var(loo_i))``, ``p_loo = sum`` of the blocks' ``p_loo``.

    Parameters
    ----------
    source : FitResult or arviz.InferenceData
    var_name : str
        The log-likelihood variable.

    Returns
    -------
    arviz.ELPDData
    """
    idata = source.idata if isinstance(source, FitResult) else source
    if "log_likelihood" in idata.groups() and var_name in idata.log_likelihood:
        return az.loo(idata, pointwise=True, var_name=var_name)
    if not isinstance(source, FitResult):
        raise ValueError(
            f"the fit has no log-likelihood variable {var_name!r}; pass the FitResult to recompute it"
        )
    cache = source.__dict__.setdefault("_elpd_loo", {})  # one recomputation per fit, whatever the scopes
    if var_name not in cache:
        cache[var_name] = _blocked_loo(source, var_name)
    return cache[var_name]


def _blocked_loo(source: FitResult, var_name: str) -> ELPDData:
    """:func:`elpd_loo` of a fit whose log-likelihood is recomputed block by block."""
    from allobranch.inference.pointwise import loglik_blocks

    post = source.idata.posterior
    n_samples = post.sizes["chain"] * post.sizes["draw"]
    r_eff = reff(post, n_samples)
    parts = [
        az.loo(
            az.InferenceData(log_likelihood=block.to_dataset(name=var_name)),
            pointwise=True,
            var_name=var_name,
            reff=r_eff,
        )
        for _, block in loglik_blocks(source)
    ]
    loo_i = xr.concat([part.loo_i for part in parts], dim="junction")
    n = int(loo_i.size)
    return ELPDData(
        data=[
            float(loo_i.values.sum()),
            float((n * np.var(loo_i.values)) ** 0.5),
            float(sum(part.p_loo for part in parts)),
            n_samples,
            n,
            any(bool(part.warning) for part in parts),
            loo_i.rename("loo_i"),
            xr.concat([part.pareto_k for part in parts], dim="junction"),
            "log",
            parts[0].good_k,
        ],
        index=[
            "elpd_loo",
            "se",
            "p_loo",
            "n_samples",
            "n_data_points",
            "warning",
            "loo_i",
            "pareto_k",
            "scale",
            "good_k",
        ],
    )


def compare_loo(fits: Mapping[str, FitResult | az.InferenceData], var_name: str = "loglik") -> LooComparison:
    """Run PSIS-LOO on each fit (:func:`elpd_loo`) and :func:`arviz.compare` (stacking) on all of them.

    Parameters
    ----------
    fits : mapping of str to FitResult or arviz.InferenceData
        Hypothesis label -> fit. An InferenceData must have a ``log_likelihood`` group holding
        ``var_name`` (dims chain, draw, junction); a FitResult without one has it recomputed in blocks
        from its posterior and table. At least two.
    var_name : str
        The log-likelihood variable.

    Returns
    -------
    LooComparison
    """
    if len(fits) < 2:
        raise ValueError("comparing needs at least two fitted hypotheses")
    with warnings.catch_warnings():  # high Pareto k is reported by the caller, in its own words
        warnings.simplefilter("ignore", UserWarning)
        loos = {label: elpd_loo(fit, var_name) for label, fit in fits.items()}
        ranked = az.compare(loos, method="stacking", scale="log")
    k_threshold = float(min(getattr(loo, "good_k", 0.7) for loo in loos.values()))
    rows, high_k = [], {}
    for label, loo in loos.items():
        k = loo.pareto_k
        bad = np.asarray(k.values) > k_threshold
        high_k[label] = (
            [str(j) for j in np.asarray(k["junction"].values)[bad]] if "junction" in k.dims else []
        )
        rows.append(
            {
                "elpd": float(ranked.at[label, "elpd_loo"]),
                "elpd_se": float(ranked.at[label, "se"]),
                "elpd_diff": float(ranked.at[label, "elpd_diff"]),
                "dse": float(ranked.at[label, "dse"]),
                "weight": float(ranked.at[label, "weight"]),
                "p_loo": float(ranked.at[label, "p_loo"]),
                "n_high_k": int(bad.sum()),
            }
        )
    table = pd.DataFrame(rows, index=pd.Index(list(loos), name="law"), columns=list(LOO_COLUMNS))
    return LooComparison(table=table, high_k=high_k, k_threshold=k_threshold)


def high_k_warning(scope: str, result: LooComparison) -> str | None:
    """A loud warning naming the junctions with high Pareto k in one scope, or ``None`` when there are none.

    Parameters
    ----------
    scope : str
        ``"overall"`` or a taxon label, for the message.
    result : LooComparison

    Returns
    -------
    str or None
    """
    affected = {label: js for label, js in result.high_k.items() if js}
    if not affected:
        return None
    junctions = sorted({j for js in affected.values() for j in js})
    shown = ", ".join(junctions[:MAX_NAMED_JUNCTIONS])
    more = f" and {len(junctions) - MAX_NAMED_JUNCTIONS} more" if len(junctions) > MAX_NAMED_JUNCTIONS else ""
    which = ", ".join(f"{label} ({len(js)})" for label, js in affected.items())
    return (
        f"LOO UNRELIABLE in scope {scope}: Pareto k > {result.k_threshold:.2f} for {len(junctions)} "
        f"junction(s) ({shown}{more}) in hypotheses {which}. Their ELPD terms are not trustworthy: inspect "
        "these junctions (outliers?), refit without them, or check with a K-fold cross-validation by "
        "specimen; the Bayes factors and P(ROPE) are not affected."
    )
