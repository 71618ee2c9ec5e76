"""Fit the hierarchical model to a junction table."""

from __future__ import annotations

import json
import platform
import sys
import warnings
from datetime import datetime, timezone

import arviz as az
import numpy as np
import xarray as xr

from allobranch.inference.backends import SAMPLERS, sample_nutpie, sample_pymc
from allobranch.inference.results import FitResult
from allobranch.intake.table import JunctionTable
from allobranch.model.build import BuiltModel, build_model
from allobranch.model.data import model_data
from allobranch.model.spec import ModelSpec

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
        "allobranch": allobranch.__version__, "python": platform.python_version(), "numpy": np.__version__,
        "pandas": pandas.__version__, "scipy": scipy.__version__, "pymc": pymc.__version__,
        "arviz": az.__version__, "nutpie": getattr(nutpie, "__version__", "?"),
        "matplotlib": matplotlib.__version__,
    }


def _draw_params(post: xr.Dataset, c: int, d: int, built: BuiltModel) -> dict:
    get = lambda name, default=None: (  # noqa: E731
        float(post[name].values[c, d]) if name in post else default
    )
    return {
        "a_spec": post["a_specimen"].values[c, d],
        "sigma_dev": get("sigma_dev"),
        "sigma_rel": get("sigma_meas"),
        "sigma_asym": get("sigma_asym"),
        "nu": get("nu", 30.0),
    }


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
                noise = (
                    rng.standard_t(p["nu"], size=n) if built.student else rng.standard_normal(n)
                )
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
    draws: int = 1000,
    tune: int = 1000,
    chains: int = 4,
    seed: int = 0,
    sampler: str = "nutpie",
    target_accept: float = 0.9,
    progress: bool = True,
) -> FitResult:
    """Fit the hierarchical errors-in-variables model.

    Parameters
    ----------
    table : JunctionTable
        Validated junctions (:func:`allobranch.read_junctions`).
    spec : ModelSpec, optional
        What to fit (levels, deviation, fixed exponents, priors); defaults to ``ModelSpec()``.
    draws, tune, chains : int
        Posterior draws and tuning steps per chain, number of chains.
    seed : int
        Seed for the sampler and the predictive draws; the same seed gives the same tables.
    sampler : {"nutpie", "pymc"}
        NUTS implementation; if nutpie fails to start, PyMC's NUTS is used and the result says so.
    target_accept : float
        Target acceptance rate of NUTS (higher is slower but more robust).
    progress : bool
        Show a progress display.

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
    built = build_model(data, spec)
    kwargs = dict(draws=draws, tune=tune, chains=chains, seed=seed, progress=progress,
                  target_accept=target_accept)
    used = sampler
    notes: list[str] = []
    started = datetime.now(timezone.utc)
    if sampler == "nutpie":
        try:
            idata = sample_nutpie(built.model, **kwargs)
        except Exception as exc:  # noqa: BLE001 - any failure of the fast path falls back, loudly
            warnings.warn(f"nutpie failed ({exc!r}); falling back to PyMC's NUTS", RuntimeWarning, stacklevel=2)
            notes.append(f"nutpie failed ({type(exc).__name__}); sampled with PyMC's NUTS instead")
            used = "pymc"
            idata = sample_pymc(built.model, **kwargs)
    else:
        idata = sample_pymc(built.model, **kwargs)
    seconds = (datetime.now(timezone.utc) - started).total_seconds()
    add_pointwise(idata, built, seed)
    settings = {
        "draws": draws, "tune": tune, "chains": chains, "seed": seed, "sampler": used,
        "target_accept": target_accept, "seconds": round(seconds, 2), "form": built.form,
        "error_mode": data.error_mode,
        "sigma_asym_empirical": None if built.sigma_asym is None else dict(zip(data.taxa, map(float, built.sigma_asym))),
    }
    provenance = {
        "created": started.isoformat(), "input_sha256": table.digest(), "source": table.source,
        "mapping": table.mapping.to_dict(), "spec": spec.to_dict(), "settings": settings,
        "versions": _versions(), "command": " ".join(sys.argv),
    }
    idata.attrs["allobranch_provenance"] = json.dumps(provenance, default=str)
    return FitResult(idata=idata, table=table, spec=spec, settings=settings, notes=notes)
