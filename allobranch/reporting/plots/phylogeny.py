"""Taxon exponents laid out beside the taxa's tree."""

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


def plot_tree_exponents(
    segments: np.ndarray, tips: list[str], exponents: pd.DataFrame, laws: LawsLike | None = None, *, axes=None
):
    """The tree on the left, each taxon's exponent and interval on the right, on the tips' rows.

    Parameters
    ----------
    segments : ndarray (m, 4)
        Line segments ``x0, y0, x1, y1`` of the tree, tips at ``y = 0, 1, ...`` in the order of ``tips``
        (:attr:`allobranch.comparative.Phylogeny.segments`).
    tips : list of str
        Taxon labels in the tree's tip order.
    exponents : pandas.DataFrame
        Rows with ``level == "taxon"``: columns ``group``, ``mean``, ``hdi_low``, ``hdi_high``.
    laws : mapping or laws table, optional
        Vertical reference lines on the exponent panel.
    axes : (Axes, Axes), optional
        Tree and exponent axes sharing the vertical axis; created when omitted.

    Returns
    -------
    (Axes, Axes)
    """
    import matplotlib.pyplot as plt

    require_columns(exponents, ("level", "group", "mean", "hdi_low", "hdi_high"), "exponents")
    if axes is None:
        fig, axes = plt.subplots(
            1,
            2,
            figsize=(7.0, 0.6 + 0.25 * len(tips)),
            sharey=True,
            layout="constrained",
            gridspec_kw={"width_ratios": [1, 1.4]},
        )
    ax_tree, ax_exp = axes
    for x0, y0, x1, y1 in np.asarray(segments, dtype=float).reshape(-1, 4):
        ax_tree.plot([x0, x1], [y0, y1], color="0.2", lw=0.9, solid_capstyle="butt")
    ax_tree.set_yticks(range(len(tips)), labels=tips)
    ax_tree.set_xlabel("distance from the root")
    for side in ("top", "right", "left"):
        ax_tree.spines[side].set_visible(False)
    taxa = exponents[exponents["level"] == "taxon"].set_index("group")
    for y, tip in enumerate(tips):
        if tip in taxa.index:
            row = taxa.loc[tip]
            ax_exp.plot([row["hdi_low"], row["hdi_high"]], [y, y], color="C0", lw=1.4)
            ax_exp.plot(row["mean"], y, "o", color="C0", ms=3.5)
    draw_law_lines(ax_exp, law_values(laws))
    if laws:
        legend_above(ax_exp)
    ax_exp.set_xlabel("taxon exponent a")
    ax_exp.tick_params(axis="y", left=False)
    ax_tree.set_ylim(-0.7, len(tips) - 0.3)
    ax_tree.invert_yaxis()
    return ax_tree, ax_exp
