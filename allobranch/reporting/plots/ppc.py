"""Posterior predictive check of parent radii: observed against predicted distributions, per taxon."""

from __future__ import annotations

import textwrap

import numpy as np
import pandas as pd
from matplotlib.ticker import FuncFormatter, LogLocator, NullFormatter

from allobranch.reporting.plots._common import legend_above, require_columns
from allobranch.reporting.style import OKABE_ITO, figure, house_style

#: Columns of the posterior predictive table.
PPC_COLUMNS: tuple[str, ...] = ("taxon", "source", "value", "draw")
SOURCES: tuple[str, ...] = ("observed", "predicted")
PREDICTED_COLOR = OKABE_ITO["sky_blue"]
OBSERVED_COLOR = "#000000"
#: Height of one row of panels in millimetres when the figure is created here.
PANEL_MM = 38.0
#: How canonical unit codes are printed in axis labels.
UNIT_LABELS: dict[str, str] = {"um": "µm"}
#: Characters per line of a panel title before the taxon name wraps.
TITLE_WIDTH = 24


def _check(ppc_table: pd.DataFrame) -> None:
    require_columns(ppc_table, PPC_COLUMNS, "posterior predictive")
    bad = sorted(set(ppc_table["source"].astype(str)) - set(SOURCES))
    if bad:
        raise ValueError(f"the posterior predictive table's source column must hold {SOURCES}; found {bad}")
    values = ppc_table["value"].to_numpy(dtype=float)
    if np.any(~np.isfinite(values) | (values <= 0)):
        raise ValueError("parent radii in the posterior predictive table must be positive and finite (log scale)")


def plot_ppc_parent(ppc_table: pd.DataFrame, axes=None, *, max_draws: int = 50, unit: str | None = None):
    """Empirical CDFs of observed parent radii over those of posterior predictive draws, one panel per taxon.

    Parameters
    ----------
    ppc_table : pandas.DataFrame
        Long table with ``taxon``, ``source`` (``"observed"`` or ``"predicted"``), ``value`` (parent radius
        in the user's unit) and ``draw`` (draw number; -1 for observed rows).
    axes : matplotlib.axes.Axes or sequence of Axes, optional
        One Axes per taxon, in order of first appearance in the table; a single-column figure with a grid
        of panels is created when omitted.
    max_draws : int, default 50
        Number of predictive draws drawn per taxon: the ones with the lowest draw numbers.
    unit : str, optional
        Unit shown in the axis label; defaults to ``ppc_table.attrs["unit"]`` when present.

    Returns
    -------
    numpy.ndarray of matplotlib.axes.Axes
        One Axes per taxon (titled with the taxon and, below, its number of observed junctions) with a log
        radius axis: a thin line per predictive draw and a thick line for the observed radii. The legend
        sits above the panels when the figure is created here, otherwise in the first Axes.
    """
    _check(ppc_table)
    if int(max_draws) < 1:
        raise ValueError(f"max_draws must be at least 1; got {max_draws!r}")
    taxa = list(dict.fromkeys(ppc_table["taxon"].astype(str)))
    unit = unit if unit is not None else ppc_table.attrs.get("unit")
    xlabel = f"Parent radius ({UNIT_LABELS.get(unit, unit)})" if unit else "Parent radius"
    with house_style():
        created = axes is None
        if created:
            ncols = min(len(taxa), 2)
            nrows = int(np.ceil(len(taxa) / ncols))
            _, grid = figure("single", height_mm=PANEL_MM * nrows + 14, nrows=nrows, ncols=ncols,
                             squeeze=False, sharey=True)
            grid = grid.ravel()
            for extra in grid[len(taxa):]:
                extra.remove()
            axes = grid[: len(taxa)]
        axes = np.atleast_1d(np.asarray(axes, dtype=object)).ravel()
        if axes.size != len(taxa):
            raise ValueError(f"axes must hold one Axes per taxon ({len(taxa)}); got {axes.size}")
        taxon_col = ppc_table["taxon"].astype(str)
        for ax, taxon in zip(axes, taxa):
            sub = ppc_table[taxon_col == taxon]
            predicted = sub[sub["source"] == "predicted"]
            draws = np.sort(predicted["draw"].unique())[:max_draws]
            for j, d in enumerate(draws):
                ax.ecdf(predicted.loc[predicted["draw"] == d, "value"].to_numpy(dtype=float),
                        color=PREDICTED_COLOR, lw=0.5, alpha=0.5, zorder=2, gid=f"predicted:{taxon}:{d}",
                        label=f"predicted ({len(draws)} draws)" if j == 0 else None)
            observed = sub.loc[sub["source"] == "observed", "value"].to_numpy(dtype=float)
            if observed.size:
                ax.ecdf(observed, color=OBSERVED_COLOR, lw=1.1, zorder=3, gid=f"observed:{taxon}",
                        label="observed")
            _log_radius_axis(ax, sub["value"].to_numpy(dtype=float))
            ax.set_ylim(0, 1.0)
            ax.set_title(f"{textwrap.fill(taxon, TITLE_WIDTH)}\n(n = {observed.size})", fontsize=8)
            ax.set_xlabel(xlabel)
            if _first_column(ax):
                ax.set_ylabel("Cumulative proportion")
        if created:
            legend_above(axes[0], ncol=2, figure_level=True)
        else:
            axes[0].legend(loc="best", fontsize=6, handlelength=1.5)
    return axes


def _log_radius_axis(ax, values: np.ndarray) -> None:
    """Logarithmic x axis labelled with plain numbers; 1-2-5 steps when the values span little."""
    ax.set_xscale("log")
    decades = np.log10(values.max() / values.min())
    subs = (1.0, 2.0, 5.0) if decades <= 1.5 else (1.0, 3.0) if decades <= 3 else (1.0,)
    ax.xaxis.set_major_locator(LogLocator(base=10, subs=subs))
    ax.xaxis.set_major_formatter(FuncFormatter(lambda v, _: f"{v:g}"))
    ax.xaxis.set_minor_formatter(NullFormatter())


def _first_column(ax) -> bool:
    """Whether an Axes sits in the first column of its grid (True for a free-standing Axes)."""
    spec = ax.get_subplotspec()
    return spec is None or spec.is_first_col()
