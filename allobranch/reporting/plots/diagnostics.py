"""Sampler diagnostics drawn by ArviZ: rank plots per parameter and the energy plot."""

from __future__ import annotations

from collections.abc import Sequence

import arviz as az
import numpy as np

from allobranch.reporting.style import SMALL_PT, TEXT_PT, figure, house_style

#: Height of one row of diagnostic panels in millimetres.
PANEL_MM = 38.0


def _n_panels(idata: az.InferenceData, var_names: Sequence[str]) -> int:
    """Number of rank-plot panels ArviZ draws: one per scalar component of each variable."""
    posterior = idata.posterior
    missing = [v for v in var_names if v not in posterior.data_vars]
    if missing:
        raise ValueError(f"variables {missing} are not in the posterior; it has {list(posterior.data_vars)}")
    return int(sum(np.prod(posterior[v].shape[2:], dtype=int) for v in var_names))


def plot_diagnostics(
    idata: az.InferenceData, var_names: Sequence[str], *, width: str | float = "double", ncols: int = 3
):
    """Rank plots of the chosen parameters and the energy plot, in one figure.

    Parameters
    ----------
    idata : arviz.InferenceData
        Result of sampling with a ``posterior`` group (and ``sample_stats.energy`` for the energy panel).
    var_names : sequence of str
        Posterior variables to show; every scalar component gets its own rank plot, so choose the
        hyper-parameters rather than hundreds of latent radii.
    width : {"single", "double"} or float, default "double"
        Figure width (see :func:`allobranch.reporting.style.figure`).
    ncols : int, default 3
        Panels per row.

    Returns
    -------
    numpy.ndarray of matplotlib.axes.Axes
        Flat array: the rank-plot axes in ArviZ's order (``ncols`` per row), then the energy axes, which
        spans the last row. When the sampler recorded no energy the last panel says so instead.

    Notes
    -----
    Ranks are drawn by :func:`arviz.plot_rank` (uniform bars across chains mean the chains mix) and the
    energy by :func:`arviz.plot_energy` (similar marginal and transition energy mean the sampler explored
    the tails; a low BFMI warns otherwise).
    """
    var_names = list(var_names)
    if not var_names:
        raise ValueError("var_names must name at least one posterior variable")
    n_rank = _n_panels(idata, var_names)
    ncols = max(1, min(int(ncols), n_rank))
    nrows = int(np.ceil(n_rank / ncols)) + 1
    with house_style():
        fig, grid = figure(width, height_mm=PANEL_MM * nrows, nrows=nrows, ncols=ncols, squeeze=False)
        for extra in [*grid[:-1].ravel()[n_rank:], *grid[-1]]:
            extra.remove()
        # the energy plot spans the last row so its legend and BFMI values have room
        energy_ax = fig.add_subplot(grid[0, 0].get_subplotspec().get_gridspec()[-1, :])
        axes = np.array([*grid[:-1].ravel()[:n_rank], energy_ax], dtype=object)
        az.plot_rank(idata, var_names=var_names, ax=axes[:n_rank], ref_line=True)
        if "sample_stats" in idata.groups() and "energy" in idata.sample_stats:
            az.plot_energy(idata, ax=energy_ax, textsize=TEXT_PT, legend=True)
            # move ArviZ's legend (densities and BFMI per chain) beside the panel, off the densities
            handles, labels = energy_ax.get_legend_handles_labels()
            energy_ax.legend(
                handles,
                labels,
                loc="upper left",
                bbox_to_anchor=(1.01, 1.0),
                fontsize=SMALL_PT,
                borderaxespad=0.0,
            )
        else:
            energy_ax.text(
                0.5,
                0.5,
                "energy not recorded\nby the sampler",
                ha="center",
                va="center",
                transform=energy_ax.transAxes,
            )
            energy_ax.set_axis_off()
        energy_ax.set_title("energy")
    return axes
