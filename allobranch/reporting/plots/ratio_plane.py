"""The daughter-ratio plane: every junction against the iso-exponent curve of each law."""

from __future__ import annotations

import numpy as np
import pandas as pd

from allobranch.conventions import EXPONENT_FIGURE_COLUMNS, POPULATION
from allobranch.geometry.curves import iso_exponent_band, iso_exponent_curve, symmetric_ratio
from allobranch.reporting.plots._common import (
    LawsLike,
    draw_laws,
    hdi_percent,
    law_values,
    legend_above,
    require_columns,
)
from allobranch.reporting.style import (
    DATA_COLOR,
    FLAG_COLOR,
    FLAG_MARKER,
    LIGHT_GREY,
    OKABE_ITO,
    SMALL_PT,
    house_style,
    new_axes,
)

#: Columns of the junction geometry table this plot reads.
GEOMETRY_PLOT_COLUMNS: tuple[str, ...] = ("ratio_large", "ratio_small", "n_daughters")
#: Fill colour of the population exponent's credible band.
BAND_COLOR = OKABE_ITO["sky_blue"]


def _flags(geometry: pd.DataFrame) -> np.ndarray:
    """The optional boolean ``flagged`` column as an array (all False when absent)."""
    if "flagged" not in geometry.columns:
        return np.zeros(len(geometry), dtype=bool)
    flagged = geometry["flagged"]
    if flagged.isna().any() or not pd.api.types.is_bool_dtype(flagged):
        raise ValueError("the geometry table's 'flagged' column must be boolean without missing values")
    return flagged.to_numpy(dtype=bool)


def _population_hdi(exponents: pd.DataFrame) -> tuple[float, float]:
    require_columns(exponents, EXPONENT_FIGURE_COLUMNS, "exponents")
    pop = exponents[exponents["level"].astype(str) == POPULATION]
    if len(pop) != 1:
        raise ValueError(f"the exponents table must have exactly one population row; it has {len(pop)}")
    lo, hi = float(pop["hdi_low"].iloc[0]), float(pop["hdi_high"].iloc[0])
    if not (0 < lo <= hi):
        raise ValueError(f"the population HDI must satisfy 0 < hdi_low <= hdi_high; got [{lo}, {hi}]")
    return lo, hi


def plot_ratio_plane(geometry: pd.DataFrame, laws: LawsLike, exponents: pd.DataFrame | None = None, ax=None):
    """Each junction's larger and smaller daughter/parent ratio against the laws' iso-exponent curves.

    Parameters
    ----------
    geometry : pandas.DataFrame
        Junction geometry (:func:`allobranch.geometry.junction_geometry`): one row per junction with
        ``ratio_large``, ``ratio_small`` and ``n_daughters``. An optional boolean column ``flagged`` (added
        by the caller, e.g. for junctions with validation flags) draws those junctions with a distinct
        marker on top.
    laws : pandas.DataFrame or mapping of str to float
        Laws whose curves ``x ** a + y ** a = 1`` are drawn: the comparison stage's laws table (columns
        ``law`` and ``value``; the free model's NaN value is skipped) or ``{label: exponent}``.
    exponents : pandas.DataFrame, optional
        Exponents table (see :func:`plot_exponents`); its single ``population`` row's ``hdi_low`` and
        ``hdi_high`` are drawn as two curves with the band between them shaded.
    ax : matplotlib.axes.Axes, optional
        Axes to draw in; a single-column figure is created when omitted.

    Returns
    -------
    matplotlib.axes.Axes
        Axes with equal scales: larger daughter ratio on x, smaller on y.

    Notes
    -----
    The curves are exact for bifurcations. Junctions with three or more daughters are drawn hollow: their
    two extreme daughters do not determine the exponent, so the curves do not apply to them. Junctions
    that cannot be placed (missing or invalid sizes, fewer than two daughters) are counted in a note in
    the lower left corner.
    Points right of ``x = 1`` have a daughter at least as large as the parent, so no exponent balances them.
    """
    require_columns(geometry, GEOMETRY_PLOT_COLUMNS, "junction geometry")
    geometry = geometry.reset_index(drop=True)
    pairs = law_values(laws)
    band = _population_hdi(exponents) if exponents is not None else None
    flagged = _flags(geometry)
    x = geometry["ratio_large"].to_numpy(dtype=float)
    y = geometry["ratio_small"].to_numpy(dtype=float)
    n_daughters = geometry["n_daughters"].to_numpy()
    placed = np.isfinite(x) & np.isfinite(y) & (n_daughters >= 2)
    bifurcation = n_daughters == 2

    with house_style():
        ax = new_axes(ax, aspect=1.1)
        if band is not None:
            bx, by = iso_exponent_band(*band)
            ax.fill(
                bx,
                by,
                color=BAND_COLOR,
                alpha=0.35,
                lw=0,
                zorder=1,
                label=f"population a, {hdi_percent(exponents)}\n[{band[0]:.2f}, {band[1]:.2f}]",
            )
            for a in band:
                ax.plot(*iso_exponent_curve(a), color=BAND_COLOR, lw=0.8, zorder=1, gid=f"hdi-curve:{a!r}")
        draw_laws(
            lambda a, **style: ax.plot(*iso_exponent_curve(a), **style), pairs, "curve", lw=1.2, zorder=2
        )
        ax.scatter(
            x[placed & bifurcation & ~flagged],
            y[placed & bifurcation & ~flagged],
            s=9,
            color=DATA_COLOR,
            alpha=0.75,
            linewidths=0,
            zorder=3,
            label="junction",
            gid="junctions",
        )
        multi = placed & ~bifurcation & ~flagged
        if multi.any():
            ax.scatter(
                x[multi],
                y[multi],
                s=11,
                facecolors="none",
                edgecolors=DATA_COLOR,
                linewidths=0.7,
                zorder=3,
                label="3+ daughters (curves\nfit bifurcations only)",
                gid="multi",
            )
        if (placed & flagged).any():
            ax.scatter(
                x[placed & flagged],
                y[placed & flagged],
                s=22,
                marker=FLAG_MARKER,
                color=FLAG_COLOR,
                linewidths=0.3,
                edgecolors="white",
                zorder=4,
                label="flagged junction",
                gid="flagged",
            )

        sym = [symmetric_ratio(v) for v in [*(v for _, v in pairs), *(band or ())]]
        x_lo = min([*x[placed], *sym, 1.0]) - 0.04
        x_hi = max([*x[placed], 1.0]) + 0.03
        y_hi = max([*y[placed], *sym]) + 0.04
        ax.plot([0, 2], [0, 2], color=LIGHT_GREY, lw=0.6, zorder=0)
        ax.text(
            x_lo + 0.012,
            x_lo + 0.03,
            "symmetric (x = y)",
            rotation=45,
            rotation_mode="anchor",
            fontsize=SMALL_PT,
            color="#888888",
            va="bottom",
            ha="left",
            transform_rotates_text=True,
        )
        if np.any(x[placed] >= 1):
            ax.axvline(
                1.0,
                color="#888888",
                lw=0.8,
                linestyle=":",
                zorder=0,
                gid="parent-line",
                label="daughter = parent",
            )
        ax.set_xlim(x_lo, x_hi)
        ax.set_ylim(0.0, y_hi)
        ax.set_xlabel("Larger daughter / parent radius")
        ax.set_ylabel("Smaller daughter / parent radius")
        n_missing = int((~placed).sum())
        if n_missing:
            ax.text(
                0.02,
                0.02,
                f"{n_missing} junction(s) without valid sizes\nof a parent and two daughters not shown",
                transform=ax.transAxes,
                fontsize=SMALL_PT,
                color="#555555",
                va="bottom",
                gid="missing-note",
            )
        legend_above(ax)
    return ax
