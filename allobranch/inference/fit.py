"""Fit the hierarchical model to a junction table."""

from __future__ import annotations

import json
import platform
import sys
from dataclasses import replace
from datetime import UTC, datetime

import arviz as az
import numpy as np
import xarray as xr

from allobranch.conventions import HDI_PROB
from allobranch.errors import InputError
from allobranch.inference import sampling
from allobranch.inference.pointwise import CHUNK_BYTES, add_predictive
from allobranch.inference.results import FitResult
from allobranch.intake.table import JunctionTable
from allobranch.model.asymmetry import estimate_sigma_asym
from allobranch.model.data import model_data
from allobranch.model.linear import build_linear_terms
from allobranch.model.spec import SAMPLER_DEFAULTS, SAMPLERS, ModelSpec, sampler_defaults
from allobranch.model.structure import BuiltModel, data_arrays, group_layout, model_form

#: Posterior-predictive draws kept per chain (enough for checks, small on disk).
PPC_DRAWS_PER_CHAIN = 100
#: Name of the junction log-likelihood variable in the ``log_likelihood`` group.
LOGLIK_VAR = "loglik"


def _versions() -> dict[str, str]:
    import matplotlib
    import nutpie
    import pandas
    import pymc
    import scipy

    import allobranch

    return {
        "allobranch": allobranch.__version__,
        "python": platform.python_version(),
        "numpy": np.__version__,
        "pandas": pandas.__version__,
        "scipy": scipy.__version__,
        "pymc": pymc.__version__,
        "arviz": az.__version__,
        "nutpie": getattr(nutpie, "__version__", "?"),
        "matplotlib": matplotlib.__version__,
    }


def _draw_params(post: xr.Dataset, c: int, d: int, built: BuiltModel) -> dict:
    get = lambda name, default=None: (  # noqa: E731
        float(post[name].values[c, d]) if name in post else default
    )
    beta = None
    if "beta_taxon" in post:
        beta = post["beta_taxon"].values[c, d]
    elif "beta" in post:
        beta = np.broadcast_to(post["beta"].values[c, d], (post.sizes["taxon"], post.sizes["covariate"]))
    return {
        "a_specimen": post["a_specimen"].values[c, d],
        "beta_taxon": beta,
        "sigma_dev": get("sigma_dev"),
        "rel_error": get("rel_error"),
        "sigma_asym": get("sigma_asym"),
        "nu": get("nu", 30.0),
    }


def linear_settings(lin, table: JunctionTable) -> dict:
    """What a saved fit must remember of its covariates, traits and tree (reference values, the tree)."""
    if lin is None:
        return {}
    refs = {name: float(v) for name, v in zip(lin.covariate_names, lin.covariate_ref)}
    refs.update({f"trait:{name}": float(v) for name, v in zip(lin.trait_names, lin.trait_ref)})
    out: dict = {"linear_reference": refs}
    if lin.q and table.taxon_traits is not None:  # what a saved fit needs to redo its priors
        out["trait_values"] = {c: table.taxon_traits[c].astype(float).to_dict() for c in lin.trait_names}
    if lin.phylo and table.phylogeny is not None:
        ph = table.phylogeny
        out["phylogeny"] = {
            "source": ph.source,
            "tips": list(ph.tips),
            "pruned": list(ph.pruned),
            "newick": ph.newick,
            "segments": np.asarray(ph.segments).round(6).tolist(),
        }
    return out


def add_pointwise(idata: az.InferenceData, built: BuiltModel, seed: int) -> az.InferenceData:
    """Add the junction log-likelihood, posterior-predictive parent radii and observed data.

    One log-likelihood term per junction (all its readings together), evaluated with the daughters
    integrated out, for every draw; predictive draws of the parent radius for a subset of draws.
    """
    post = idata.posterior
    n_chain, n_draw = post.sizes["chain"], post.sizes["draw"]
    n = built.data.n_junctions
    ll = np.empty((n_chain, n_draw, n))
    keep = np.unique(np.linspace(0, n_draw - 1, min(n_draw, PPC_DRAWS_PER_CHAIN)).astype(int))
    pred = np.empty((n_chain, len(keep), n))
    rng = np.random.default_rng(seed)
    for c in range(n_chain):
        k = 0
        for d in range(n_draw):
            p = _draw_params(post, c, d, built)
            ll[c, d], mean, var = built.pointwise(**p)
            if k < len(keep) and keep[k] == d:
                noise = rng.standard_t(p["nu"], size=n) if built.student else rng.standard_normal(n)
                pred[c, k] = mean + np.sqrt(var) * noise
                k += 1
    coords = {"chain": post["chain"].values, "junction": built.data.junctions}
    idata.add_groups(
        log_likelihood=xr.Dataset(
            {LOGLIK_VAR: (("chain", "draw", "junction"), ll)},
            coords={**coords, "draw": post["draw"].values},
        ),
        posterior_predictive=xr.Dataset(
            {"log_parent": (("chain", "draw", "junction"), pred)},
            coords={**coords, "draw": post["draw"].values[keep]},
        ),
        observed_data=xr.Dataset(
            {"log_parent": (("junction",), built.data.log_parent)}, coords={"junction": built.data.junctions}
        ),
    )
    return idata


def fit(
    table: JunctionTable,
    spec: ModelSpec | None = None,
    *,
    draws: int = SAMPLER_DEFAULTS["draws"],
    tune: int | None = None,
    chains: int = SAMPLER_DEFAULTS["chains"],
    seed: int = 0,
    sampler: str = SAMPLER_DEFAULTS["sampler"],
    target_accept: float | None = None,
    escalate: bool = True,
    progress: bool = True,
    cores: int | None = None,
    hdi_prob: float = HDI_PROB,
) -> FitResult:
    """Fit the hierarchical errors-in-variables model.

    Parameters
    ----------
    table : JunctionTable
        Validated junctions (:func:`allobranch.read_junctions`).
    spec : ModelSpec, optional
        What to fit (levels, deviation, fixed exponents, parametrisation, priors); defaults to ``ModelSpec()``.
    draws, tune, chains : int
        Posterior draws and tuning steps per chain, number of chains. ``tune`` defaults to
        :func:`~allobranch.model.spec.sampler_defaults` for the table (1000; 300 for a large table).
    seed : int
        Seed for the sampler and the predictive draws; the same seed gives the same tables.
    sampler : {"nutpie", "pymc"}
        NUTS implementation; if nutpie fails to start, PyMC's NUTS is used and the result says so.
    target_accept : float, optional
        Target acceptance rate of NUTS for the first attempt (higher is slower but more robust); default
        :func:`~allobranch.model.spec.sampler_defaults` for the table (0.9; 0.8 for a large table).
    escalate : bool
        When the first attempt has divergent transitions or an R-hat above the threshold, refit
        automatically with a higher target acceptance and another parametrisation
        (:func:`allobranch.inference.sampling.escalation_plan`). Every attempt is recorded in
        ``result.settings["attempts"]``; the first clean one is kept.
    progress : bool
        Show a progress display.
    cores : int, optional
        Chains run at once (default: as many as there are processor cores, at most ``chains``).
    hdi_prob : float
        Probability of the highest-density intervals the result's tables and report show (recorded in
        ``settings["hdi_prob"]``).

    Returns
    -------
    FitResult

    Examples
    --------
    >>> import allobranch as ab                                   # doctest: +SKIP
    >>> table = ab.read_junctions("vessels.csv", recipe="vessels.toml")
    >>> result = ab.fit(table, seed=1)
    >>> result.exponents()
    """
    if sampler not in SAMPLERS:
        raise ValueError(f"sampler must be one of {', '.join(SAMPLERS)}; got {sampler!r}")
    spec = spec or ModelSpec()
    data = model_data(table)
    defaults = sampler_defaults(data.n_junctions, len(data.specimens))
    tune = defaults["tune"] if tune is None else tune
    target_accept = defaults["target_accept"] if target_accept is None else target_accept
    for name, value in (("draws", draws), ("tune", tune), ("chains", chains)):
        if int(value) < 1:
            raise ValueError(f"{name} must be a positive whole number, got {value!r}")
    data = replace(data, linear=build_linear_terms(table, data, spec))
    form = model_form(data, spec)
    if data.linear is not None and (form != "fast" or sampler != "nutpie"):
        raise InputError(
            "covariates, traits and a tree are fitted by the compiled fast form with nutpie only: give the "
            "relative measurement error (--rel-error / rel_error=) and keep the default sampler"
        )
    sigma_asym = estimate_sigma_asym(data, float(data.rel_error or 0.0)) if form == "fast" else None
    arrays = data_arrays(data, form, sigma_asym)
    started = datetime.now(UTC)
    layout = group_layout(data, spec, arrays if form == "fast" else None)
    notes: list[str] = []
    attempts: list[dict] = []
    kept = None
    plans = sampling.escalation_plan(
        spec, layout, target_accept, escalate, whitened_only=data.linear is not None
    )
    for k, plan in enumerate(plans):
        (idata, used, attempt_notes), seconds = sampling.timed(
            sampling.sample_once,
            data,
            spec,
            form,
            layout,
            arrays,
            sigma_asym,
            plan=plan,
            draws=draws,
            tune=tune,
            chains=chains,
            seed=seed + 7919 * k,
            sampler=sampler,
            progress=progress,
            cores=cores,
        )
        notes += [n for n in attempt_notes if n not in notes]
        record = sampling.attempt_record(idata, plan, layout, seconds)
        record["sampler"] = used
        attempts.append(record)
        if kept is None or sampling.badness(record) < sampling.badness(attempts[kept[0]]):
            kept = (len(attempts) - 1, idata, plan, used)
        if sampling.clean(record):
            break
    index, idata, plan, used = kept
    for i, record in enumerate(attempts):
        record["kept"] = i == index
    if len(attempts) > 1:
        first = attempts[0]
        notes.append(
            f"the first sampling attempt was not clean ({first['divergences']} divergent transitions, max R-hat "
            f"{first['max_r_hat']:.3f}); refitted automatically {len(attempts) - 1} time(s) and kept attempt "
            f"{index + 1} ({plan.parametrization}, target_accept {plan.target_accept})"
            + ("" if sampling.clean(attempts[index]) else "; no attempt was clean")
        )
    seconds = (datetime.now(UTC) - started).total_seconds()
    built = BuiltModel(
        model=None,
        data=data,
        spec=spec,
        form=form,
        sigma_asym=sigma_asym,
        arrays=arrays,
        layout=sampling.attempt_layout(layout, plan),
    )
    post = idata.posterior
    if post.sizes["chain"] * post.sizes["draw"] * data.n_junctions * 8 <= CHUNK_BYTES:
        add_pointwise(idata, built, seed)
    else:  # never hold draws x junctions in memory: LOO recomputes it in blocks when it needs it
        add_predictive(idata, built, seed)
        notes.append(
            f"the junction log-likelihood ({data.n_junctions} junctions) is not kept in memory; LOO "
            "recomputes it from the posterior in blocks"
        )
    settings = {
        "draws": draws,
        "tune": tune,
        "chains": chains,
        "seed": seed,
        "hdi_prob": float(hdi_prob),
        "sampler": used,
        "target_accept": plan.target_accept,
        "seconds": round(seconds, 2),
        "form": built.form,
        "error_mode": data.error_mode,
        "parametrization": sampling.attempt_layout(layout, plan).describe(),
        "attempts": attempts,
        "sigma_asym_empirical": None if sigma_asym is None else dict(zip(data.taxa, map(float, sigma_asym))),
        **linear_settings(data.linear, table),
    }
    provenance = {
        "created": started.isoformat(),
        "input_sha256": table.digest(),
        "source": table.source,
        "mapping": table.mapping.to_dict(),
        "spec": spec.to_dict(),
        "settings": settings,
        "versions": _versions(),
        "command": " ".join(sys.argv),
    }
    idata.attrs["allobranch_provenance"] = json.dumps(provenance, default=str)
    return FitResult(idata=idata, table=table, spec=spec, settings=settings, notes=notes)
