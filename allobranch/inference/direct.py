"""nutpie on the compiled fast-form density (:mod:`allobranch.model.density`), without PyMC in the loop.

nutpie's sampler takes a C callback for the log density and one for the stored values; its PyMC route
builds them by compiling the whole PyMC graph with numba (tens of seconds per model). The fast form is
already one compiled function of a flat data buffer, so here the two callbacks are handed to nutpie
directly through its PyMC model container (``nutpie.compile_pymc.CompiledPyMCModel``, a semi-private API
pinned in ``pyproject.toml``; the test suite exercises this route). Chains then run in nutpie's threads
with no Python call per gradient.
"""

from __future__ import annotations

import os
from typing import Any

import arviz as az
import numpy as np

from allobranch.inference.nuts_run import NutsRun
from allobranch.model.density import FastDensity, expand_callback, logp_callback

#: Jitter of the starting points about the pilot point, on the unconstrained scale (uniform half-width).
INIT_JITTER = 0.3


def compiled_model(density: FastDensity, init: np.ndarray, coords: dict[str, list[str]]) -> Any:
    """A nutpie model for a packed fast-form density.

    Parameters
    ----------
    density : FastDensity
    init : ndarray (ndim,)
        Centre of the chains' starting points (unconstrained scale).
    coords : dict
        ``taxon`` and ``specimen`` labels.

    Returns
    -------
    nutpie compiled model
        Accepted by :func:`nutpie.sample`.
    """
    from nutpie.compile_pymc import CompiledPyMCModel

    layout = density.layout
    init = np.asarray(init, dtype=np.float64)
    if init.shape != (layout.ndim,):
        raise ValueError(f"init has shape {init.shape}, expected ({layout.ndim},)")

    def initial_point(seed: int | None) -> np.ndarray:
        rng = np.random.default_rng(seed)
        return init + rng.uniform(-INIT_JITTER, INIT_JITTER, size=init.shape)

    slices, pos = [], 0
    for shape in layout.out_shapes:
        size = int(np.prod(shape)) if shape else 1
        slices.append(slice(pos, pos + size))
        pos += size
    shape_info = (list(layout.out_names), slices, [tuple(s) for s in layout.out_shapes])
    all_coords = {k: list(v) for k, v in coords.items()}
    return CompiledPyMCModel(
        _n_dim=layout.ndim,
        dims={k: v for k, v in layout.out_dims.items() if k in layout.out_names},
        _coords=all_coords,
        _shapes={name: tuple(shape) for name, shape in zip(layout.out_names, layout.out_shapes)},
        compiled_logp_func=logp_callback,
        compiled_expand_func=expand_callback,
        initial_point_func=initial_point,
        shared_data={"ints": density.ints, "floats": density.floats},  # keeps the buffers alive
        user_data=density.pointers,
        n_expanded=layout.n_expanded,
        shape_info=shape_info,
        logp_func=None,
        expand_func=None,
    )


def sample_direct(
    density: FastDensity,
    init: np.ndarray,
    coords: dict[str, list[str]],
    settings: NutsRun,
    *,
    cores: int | None = None,
) -> az.InferenceData:
    """Sample a packed fast-form density with nutpie; returns ``posterior`` and ``sample_stats``."""
    model = compiled_model(density, init, coords)
    if cores is None:
        cores = min(settings.chains, os.cpu_count() or 1)
    return run_nutpie(model, settings, cores=cores)


def run_nutpie(
    compiled: Any,
    settings: NutsRun,
    *,
    cores: int,
) -> az.InferenceData:
    """Sample a compiled nutpie model; returns only the ``posterior`` and ``sample_stats`` groups."""
    import nutpie

    idata = nutpie.sample(
        compiled,
        draws=settings.draws,
        tune=settings.tune,
        chains=settings.chains,
        seed=settings.seed,
        progress_bar=settings.progress,
        target_accept=settings.target_accept,
        cores=max(1, int(cores)),
    )
    keep = [g for g in ("posterior", "sample_stats") if g in idata.groups()]
    return az.InferenceData(**{g: idata[g] for g in keep})
