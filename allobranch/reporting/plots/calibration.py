"""Simulation-based calibration: histogram of the ranks of the true values of one quantity."""

from __future__ import annotations

import pandas as pd

from allobranch.reporting.plots._common import require_columns
from allobranch.reporting.style import LIGHT_GREY, OKABE_ITO, house_style, new_axes

#: Columns of the rank-histogram table (:func:`allobranch.planning.calibrate.rank_histogram`).
HISTOGRAM_COLUMNS: tuple[str, ...] = (
    "quantity",
    "rank_low",
    "rank_high",
    "count",
    "expected",
    "band_low",
    "band_high",
)
#: Axis titles of the checked quantities.
TITLES: dict[str, str] = {
    "mu": "population exponent",
    "a_taxon": "taxon exponents",
    "tau_taxon": "between-taxon SD",
    "tau_specimen": "between-specimen SD",
    "sigma_dev": "junction deviation",
}


def plot_rank_histogram(histogram: pd.DataFrame, quantity: str, *, ax=None):
    """Bars of the rank counts of one quantity over the band a flat histogram stays in.

    Parameters
    ----------
    histogram : pandas.DataFrame
        Columns :data:`HISTOGRAM_COLUMNS` (counts, expected count and band are computed by
        :func:`allobranch.planning.calibrate.rank_histogram`).
    quantity : str
        Which quantity to draw.
    ax : matplotlib.axes.Axes, optional

    Returns
    -------
    matplotlib.axes.Axes
    """
    require_columns(histogram, HISTOGRAM_COLUMNS, "rank histogram")
    rows = histogram[histogram["quantity"] == quantity]
    if rows.empty:
        raise ValueError(
            f"no rank counts for {quantity!r}; the table has {sorted(set(histogram['quantity']))}"
        )
    with house_style():
        ax = new_axes(ax)
        left = rows["rank_low"].to_numpy(dtype=float)
        width = rows["rank_high"].to_numpy(dtype=float) + 1 - left
        ax.axhspan(
            rows["band_low"].iloc[0],
            rows["band_high"].iloc[0],
            color=LIGHT_GREY,
            alpha=0.45,
            lw=0,
            zorder=3,  # over the bars, so both edges of the band show
            label="99 % range if uniform",
        )
        ax.axhline(rows["expected"].iloc[0], color="#4D4D4D", linewidth=0.8)
        ax.bar(
            left,
            rows["count"],
            width=width,
            align="edge",
            color=OKABE_ITO["blue"],
            edgecolor="white",
            linewidth=0.5,
        )
        ax.set_xlim(left.min(), (left + width).max())
        ax.set_title(TITLES.get(quantity, quantity))
        ax.set_xlabel("rank of truth")
        ax.set_ylabel("replicates")
    return ax
