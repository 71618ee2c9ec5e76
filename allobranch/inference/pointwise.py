"""Junction-by-junction quantities of a fit, recomputed from its posterior and its table, in chunks.

A fit's pointwise log-likelihood has one value per draw and junction: 4 chains x 1000 draws x 10^5 junctions
are 3.2 GB in memory and on disk, 10^6 junctions ten times that. Everything needed to recompute it exactly is
small: the posterior draws, the validated table (whose digest the fit records), the model specification
and the empirical asymmetry scales in the fit's settings. So saved fits keep those, not the log-likelihood
(:meth:`allobranch.inference.results.FitResult.save`), and whoever needs it -- PSIS-LOO in the law
comparison -- recomputes it here, a block of junctions at a time, each block holding every draw of at most
:data:`CHUNK_BYTES` bytes. Junctions are independent given the parameters, so a block's values are the
same numbers the whole-table evaluation gives.

:func:`add_predictive` adds a fit's posterior-predictive draws (at most :data:`PREDICTIVE_DRAWS`) and the
observed data without any log-likelihood group, for a fitting route that should not hold the full
log-likelihood in memory.
"""

from __future__ import annotations

from collections.abc import Iterator
from dataclasses import fields, is_dataclass, replace
from typing import Any

import numpy as np
import xarray as xr

from allobranch.errors import InputError
from allobranch.inference.results import FitResult
from allobranch.model.data import model_data
from allobranch.model.linear import build_linear_terms
from allobranch.model.structure import BuiltModel, data_arrays, model_form

#: Bytes of log-likelihood values held at once: a block of junctions times every draw (256 MiB).
CHUNK_BYTES = 2**28
#: Posterior-predictive draws kept by :func:`add_predictive` (all chains together).
PREDICTIVE_DRAWS = 50
#: Fields of the model data (and of its linear terms) that belong to taxa or specimens, not junctions:
#: never sliced, even when a table has as many junctions as groups.
GROUP_FIELDS: frozenset[str] = frozenset(
    {"specimen_taxon_idx", "taxa", "specimens", "traits", "eig_vectors", "eig_values", "trait_names"}
)


def evaluator(result: FitResult) -> BuiltModel:
    """The fitted model's junction-by-junction evaluator, rebuilt from the fit's table, spec and settings.

    Parameters
    ----------
    result : FitResult

    Returns
    -------
    BuiltModel
        With ``model=None`` (no PyMC model is needed to evaluate junctions).

    Raises
    ------
    InputError
        When the table is not the one the fit was made from (its digest differs from the provenance's).
    """
    recorded = result.provenance.get("input_sha256")
    if recorded is not None and recorded != result.table.digest():
        raise InputError(
            "the fit's junction table does not match the table it was fitted to (content hash differs): the "
            "pointwise log-likelihood cannot be recomputed; refit, or load the fit.nc that the fit wrote"
        )
    data = model_data(result.table)
    data = replace(data, linear=build_linear_terms(result.table, data, result.spec))  # as the fit built it
    form = result.settings.get("form") or model_form(data, result.spec)
    sigma_asym = None
    if form == "fast":
        stored = result.settings.get("sigma_asym_empirical") or {}
        if all(t in stored for t in data.taxa):
            sigma_asym = np.array([float(stored[t]) for t in data.taxa])
        else:  # an older fit without the scales: the same maximum-likelihood estimate the fit made
            from allobranch.model.asymmetry import estimate_sigma_asym

            sigma_asym = estimate_sigma_asym(data, float(data.rel_error or 0.0))
    return BuiltModel(
        model=None,
        data=data,
        spec=result.spec,
        form=form,
        sigma_asym=sigma_asym,
        arrays=data_arrays(data, form, sigma_asym),
    )


def slice_junctions(data: Any, rows: slice, n: int | None = None) -> Any:
    """The model data of a block of junctions (group labels, indices and group-level terms unchanged).

    Every field whose first dimension runs over the table's ``n`` junctions is sliced, also inside nested
    dataclasses (the linear predictor's junction covariates); the groups' fields (:data:`GROUP_FIELDS`)
    and scalars are kept.
    """
    n = data.n_junctions if n is None else n
    changes = {}
    for f in fields(data):
        value = getattr(data, f.name)
        if f.name in GROUP_FIELDS:
            continue
        if isinstance(value, np.ndarray) and value.ndim >= 1 and value.shape[0] == n:
            changes[f.name] = value[rows]
        elif isinstance(value, list) and len(value) == n:
            changes[f.name] = value[rows]
        elif is_dataclass(value) and not isinstance(value, type):
            changes[f.name] = slice_junctions(value, rows, n)
    return replace(data, **changes)


def junction_blocks(n_junctions: int, n_draws: int, chunk_bytes: int = CHUNK_BYTES) -> list[slice]:
    """Consecutive blocks of junctions whose float64 values for ``n_draws`` draws fit in ``chunk_bytes``."""
    size = max(1, int(chunk_bytes) // (8 * max(1, int(n_draws))))
    return [slice(i, min(i + size, n_junctions)) for i in range(0, n_junctions, size)]


def _block(built: BuiltModel, rows: slice) -> BuiltModel:
    data = slice_junctions(built.data, rows)
    return replace(built, data=data, arrays=data_arrays(data, built.form, built.sigma_asym))


def _draws(result: FitResult, built: BuiltModel) -> list[dict]:
    """The parameters of every draw, chain by chain, as :meth:`BuiltModel.pointwise` takes them."""
    from allobranch.inference.fit import _draw_params

    post = result.idata.posterior
    return [
        _draw_params(post, c, d, built) for c in range(post.sizes["chain"]) for d in range(post.sizes["draw"])
    ]


def loglik_blocks(result: FitResult, chunk_bytes: int = CHUNK_BYTES) -> Iterator[tuple[slice, xr.DataArray]]:
    """The junction log-likelihood of every draw, a block of junctions at a time.

    Parameters
    ----------
    result : FitResult
    chunk_bytes : int
        Largest block in bytes (every draw of a block of junctions).

    Yields
    ------
    (slice, xarray.DataArray)
        The block's junction positions and its values (dims chain, draw, junction; junction labels as
        coordinates), equal to the log-likelihood the fit computes for those junctions.
    """
    built = evaluator(result)
    post = result.idata.posterior
    n_chain, n_draw = post.sizes["chain"], post.sizes["draw"]
    params = _draws(result, built)
    for rows in junction_blocks(built.data.n_junctions, n_chain * n_draw, chunk_bytes):
        block = _block(built, rows)
        ll = np.empty((n_chain * n_draw, block.data.n_junctions))
        for i, p in enumerate(params):
            ll[i] = block.pointwise(**p)[0]
        yield (
            rows,
            xr.DataArray(
                ll.reshape(n_chain, n_draw, -1),
                dims=("chain", "draw", "junction"),
                coords={
                    "chain": post["chain"].values,
                    "draw": post["draw"].values,
                    "junction": block.data.junctions,
                },
            ),
        )


def log_likelihood(result: FitResult, var_name: str = "loglik") -> xr.DataArray:
    """The fit's junction log-likelihood: the stored one, else recomputed for every junction at once.

    For large tables prefer :func:`loglik_blocks`, which holds one block at a time.
    """
    if "log_likelihood" in result.idata.groups() and var_name in result.idata.log_likelihood:
        return result.idata.log_likelihood[var_name]
    return xr.concat([block for _, block in loglik_blocks(result)], dim="junction")


def add_predictive(idata, built: BuiltModel, seed: int, n_draws: int = PREDICTIVE_DRAWS):
    """Add posterior-predictive log parent radii (at most ``n_draws`` draws) and the observed data.

    The draws are spread evenly over all chains; each is the model's predictive normal (or Student-t) of the
    log parent radius given that draw's parameters, with noise from a generator seeded by ``seed``. No
    log-likelihood group is added (recompute it with :func:`loglik_blocks`).

    Parameters
    ----------
    idata : arviz.InferenceData
        With a ``posterior`` group.
    built : BuiltModel
        The fitted model's evaluator.
    seed : int
    n_draws : int

    Returns
    -------
    arviz.InferenceData
        ``idata`` with ``posterior_predictive`` (one chain of the kept draws, variable ``log_parent``) and
        ``observed_data``.
    """
    from allobranch.inference.fit import _draw_params

    post = idata.posterior
    n_chain, n_draw = post.sizes["chain"], post.sizes["draw"]
    total = n_chain * n_draw
    keep = np.unique(np.linspace(0, total - 1, min(total, int(n_draws))).round().astype(int))
    rng = np.random.default_rng(seed)
    n = built.data.n_junctions
    pred = np.empty((1, len(keep), n))
    for k, flat in enumerate(keep):
        p = _draw_params(post, int(flat // n_draw), int(flat % n_draw), built)
        _, mean, var = built.pointwise(**p)
        noise = rng.standard_t(p["nu"], size=n) if built.student else rng.standard_normal(n)
        pred[0, k] = mean + np.sqrt(var) * noise
    junctions = {"junction": built.data.junctions}
    idata.add_groups(
        posterior_predictive=xr.Dataset(
            {"log_parent": (("chain", "draw", "junction"), pred)},
            coords={"chain": [0], "draw": keep, **junctions},
        ),
        observed_data=xr.Dataset({"log_parent": (("junction",), built.data.log_parent)}, coords=junctions),
    )
    return idata
