"""The exponent against a covariate: the model's curve with its band, the junctions' naive exponents, and
the classic laws."""

from __future__ import annotations

import numpy as np
import pandas as pd

from allobranch.reporting.plots._common import (
    LawsLike,
    draw_law_lines,
    law_values,
    legend_above,
    require_columns,
)


def plot_exponent_curve(
    curve: pd.DataFrame,
    points: pd.DataFrame | None = None,
    laws: LawsLike | None = None,
    *,
    y_limits: tuple[float, float] = (0.5, 5.0),
    ax=None,
):
    """Draw the exponent along a covariate.

    Parameters
    ----------
    curve : pandas.DataFrame
        Columns ``x``, ``mean``, ``hdi_low``, ``hdi_high``
        (:func:`allobranch.comparative.summaries.exponent_curve`); ``attrs`` ``covariate``, ``reference``,
        ``group`` and ``hdi_prob`` label the axes.
    points : pandas.DataFrame, optional
        Columns ``x`` and ``naive_exponent`` (:func:`~allobranch.comparative.summaries.junction_points`):
        one grey dot per junction (values outside ``y_limits`` are not shown; their count is noted).
    laws : mapping or laws table, optional
        Horizontal reference lines.
    y_limits : (float, float)
        Range of the exponent axis.
    ax : matplotlib.axes.Axes, optional

    Returns
    -------
    matplotlib.axes.Axes
    """
    import matplotlib.pyplot as plt

    require_columns(curve, ("x", "mean", "hdi_low", "hdi_high"), "curve")
    if ax is None:
        _, ax = plt.subplots(figsize=(3.5, 2.6), layout="constrained")
    hidden = 0
    if points is not None and len(points):
        require_columns(points, ("x", "naive_exponent"), "points")
        y = points["naive_exponent"].to_numpy(dtype=float)
        shown = np.isfinite(y) & (y >= y_limits[0]) & (y <= y_limits[1])
        hidden = int((~shown).sum())
        ax.scatter(
            points["x"][shown],
            y[shown],
            s=4,
            color="0.65",
            alpha=0.6,
            lw=0,
            label="junctions (naive)",
            zorder=1,
        )
    pct = f"{100 * float(curve.attrs.get('hdi_prob', 0.9)):g}%"
    ax.fill_between(
        curve["x"],
        curve["hdi_low"],
        curve["hdi_high"],
        color="C0",
        alpha=0.25,
        lw=0,
        label=f"{pct} HDI",
        zorder=2,
    )
    ax.plot(
        curve["x"],
        curve["mean"],
        color="C0",
        lw=1.5,
        label=f"{curve.attrs.get('group', 'population')} exponent",
        zorder=3,
    )
    draw_law_lines(ax, law_values(laws), horizontal=True)
    ref = curve.attrs.get("reference")
    if ref is not None and np.isfinite(ref):
        ax.axvline(ref, color="0.3", lw=0.6, ls=":", zorder=0)
    ax.set_ylim(*y_limits)
    ax.set_xlabel(str(curve.attrs.get("covariate", "covariate")))
    ax.set_ylabel("exponent a")
    if hidden:
        ax.annotate(
            f"{hidden} junction(s) outside the axis",
            xy=(0.99, 0.02),
            xycoords="axes fraction",
            ha="right",
            va="bottom",
            fontsize="small",
            color="0.4",
        )
    legend_above(ax)
    return ax
