"""Samplers: nutpie (default) driving a PyTensor-compiled log density, and PyMC's own NUTS (fallback).

nutpie's usual route compiles the whole model with numba, which costs tens of seconds per model on a small
machine. The heavy part of our models is already one fused numba kernel, so here PyTensor compiles the
light remainder with its C backend (cached between runs) and nutpie calls it through
:func:`nutpie.from_pyfunc`. The kernel releases the GIL, so chains still run in parallel.
"""

from __future__ import annotations

import threading
from typing import Any

import arviz as az
import numpy as np
import pymc as pm
import pytensor
import pytensor.tensor as pt
from pymc.initial_point import make_initial_point_fn
from pymc.pytensorf import compile as compile_pymc

from allobranch.inference.nuts_run import NutsRun
from allobranch.model.spec import SAMPLERS  # noqa: F401,E402 - the one list of sampler names


def _flat_layout(model: pm.Model) -> tuple[list, list[str], list[slice], list[tuple[int, ...]], int]:
    value_vars = [model.rvs_to_values[v] for v in model.free_RVs]
    point = model.initial_point()
    names, slices, shapes = [], [], []
    start = 0
    for vv in value_vars:
        shape = tuple(np.shape(point[vv.name]))
        size = int(np.prod(shape)) if shape else 1
        names.append(vv.name)
        slices.append(slice(start, start + size))
        shapes.append(shape)
        start += size
    return value_vars, names, slices, shapes, start


def compile_nutpie(model: pm.Model, var_names: list[str] | None = None) -> Any:
    """Compile a PyMC model for nutpie with PyTensor's C backend.

    Parameters
    ----------
    model : pymc.Model
    var_names : list of str, optional
        Variables to store (default: every free variable and deterministic).

    Returns
    -------
    nutpie compiled model
        Accepted by :func:`nutpie.sample`.
    """

    value_vars, names, slices, shapes, ndim = _flat_layout(model)
    joined = pt.dvector("__joined")
    replace = {vv: joined[sl].reshape(sh) for vv, sl, sh in zip(value_vars, slices, shapes)}
    logp = model.logp()
    grad = pt.concatenate([pt.flatten(g) for g in pytensor.gradient.grad(logp, value_vars)])
    logp_j, grad_j = pytensor.graph.replace.graph_replace([logp, grad], replace, strict=False)
    logp_fn = compile_pymc([joined], [logp_j, grad_j], mode="FAST_RUN")

    outputs = [v for v in model.unobserved_value_vars if var_names is None or v.name in var_names]
    out_names = [v.name for v in outputs]
    expand_outs = pytensor.graph.replace.graph_replace(outputs, replace, strict=False)
    expand_fn = compile_pymc([joined], expand_outs, mode="FAST_RUN", on_unused_input="ignore")
    init_fn = make_initial_point_fn(model=model, jitter_rvs=set(model.free_RVs), return_transformed=True)
    x0 = np.concatenate([np.ravel(model.initial_point()[n]) for n in names])
    out_shapes = [tuple(np.shape(v)) for v in expand_fn(x0)]
    lock = threading.Lock()

    def make_logp_fn():
        with lock:
            fn = logp_fn.copy()

        def logp(x, **_):
            lp, g = fn(x)
            return float(lp), np.asarray(g, dtype="float64", order="C")

        return logp

    def make_expand_fn(seed1, seed2, chain):
        with lock:
            fn = expand_fn.copy()

        def expand(x, **_):
            return {n: np.asarray(v, dtype="float64", order="C") for n, v in zip(out_names, fn(x))}

        return expand

    def make_initial_point(seed):
        with lock:
            point = init_fn(seed)
        return np.concatenate([np.ravel(point[n]) for n in names]).astype("float64")

    coords = {k: list(v) for k, v in model.coords.items()}
    dims = {name: tuple(model.named_vars_to_dims.get(name, ())) for name in out_names}
    dims = {k: v for k, v in dims.items() if v}
    from nutpie.compiled_pyfunc import from_pyfunc

    return from_pyfunc(
        ndim=ndim,
        make_logp_fn=make_logp_fn,
        make_expand_fn=make_expand_fn,
        expanded_dtypes=[np.dtype("float64")] * len(out_names),
        expanded_shapes=out_shapes,
        expanded_names=out_names,
        coords=coords,
        dims=dims,
        make_initial_point_fn=make_initial_point,
    )


def sample_nutpie(model: pm.Model, settings: NutsRun) -> az.InferenceData:
    """Sample with nutpie; returns InferenceData with ``posterior`` and ``sample_stats``."""
    from allobranch.inference.direct import run_nutpie

    return run_nutpie(compile_nutpie(model), settings, cores=min(settings.chains, 2))


def sample_pymc(model: pm.Model, settings: NutsRun) -> az.InferenceData:
    """Sample with PyMC's own NUTS."""
    with model:
        idata = pm.sample(
            draws=settings.draws,
            tune=settings.tune,
            chains=settings.chains,
            random_seed=settings.seed,
            progressbar=settings.progress,
            target_accept=settings.target_accept,
            cores=min(settings.chains, 2),
            compute_convergence_checks=False,
            idata_kwargs={"log_likelihood": False},
        )
    keep = [g for g in ("posterior", "sample_stats") if g in idata.groups()]
    return az.InferenceData(**{g: idata[g] for g in keep})
