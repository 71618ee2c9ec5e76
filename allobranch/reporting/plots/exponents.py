"""Forest plots of estimated exponents: by level (population, taxa, specimens) and naive versus model."""

from __future__ import annotations

from collections.abc import Iterable, Sequence

import numpy as np
import pandas as pd

from allobranch.conventions import EXPONENT_FIGURE_COLUMNS, POPULATION
from allobranch.reporting.plots._common import (
    LawsLike,
    check_levels,
    draw_law_lines,
    hdi_percent,
    law_values,
    legend_above,
    padded_limits,
    require_columns,
)
from allobranch.reporting.style import DATA_COLOR, house_style, new_axes

#: Marker, marker size, error-bar width and colour of each level in the forest plot.
LEVEL_STYLE: dict[str, dict] = {
    POPULATION: {"marker": "D", "ms": 5.0, "lw": 1.6, "color": "#000000"},
    "taxon": {"marker": "s", "ms": 4.0, "lw": 1.2, "color": "#333333"},
    "specimen": {"marker": "o", "ms": 3.0, "lw": 0.8, "color": "#777777"},
}
#: Tick-label look of each level: the hierarchy reads from weight and shade.
TICK_STYLE: dict[str, dict] = {
    POPULATION: {"fontweight": "bold", "color": "#000000"},
    "taxon": {"fontweight": "bold", "color": "#333333", "fontstyle": "normal"},
    "specimen": {"fontweight": "normal", "color": "#555555"},
}
#: Vertical gap inserted between blocks (population, each taxon with its specimens).
BLOCK_GAP = 0.6
#: Height of one row in millimetres when the function creates its own figure.
ROW_MM = 4.2
#: Extra height (title, axis label, legend) in millimetres when the function creates its own figure.
FRAME_MM = 32.0


def _forest_order(exponents: pd.DataFrame) -> list[tuple[int, float, str]]:
    """Rows of the forest plot as ``(row index, y position, tick label)``, top to bottom."""
    rows: list[tuple[int, float, str]] = []
    y = 0.0
    level = exponents["level"].astype(str)
    for i in exponents.index[level == POPULATION]:
        rows.append((i, y, str(exponents.at[i, "group"])))
        y += 1
    taxa = list(dict.fromkeys(exponents.loc[level != POPULATION, "taxon"].astype(str)))
    for taxon in taxa:
        y += BLOCK_GAP if rows else 0.0
        in_taxon = exponents["taxon"].astype(str) == taxon
        taxon_rows = exponents.index[in_taxon & (level == "taxon")]
        for i in taxon_rows:
            rows.append((i, y, str(exponents.at[i, "group"])))
            y += 1
        for i in exponents.index[in_taxon & (level == "specimen")]:
            label = str(exponents.at[i, "group"])
            label = label if len(taxon_rows) else f"{label} ({taxon})"
            rows.append((i, y, label))
            y += 1
    return rows


def _finish_forest(
    ax, y: Sequence[float], labels: Sequence[str], values: Iterable[float], xlabel: str, *, margin: float
) -> None:
    """Finish a forest plot: a label per row without tick marks, the first row on top (``margin`` rows
    beyond the outer rows), x limits covering ``values``, a light vertical grid behind the data, the
    legend above."""
    ax.set_yticks(y, labels)
    ax.tick_params(axis="y", length=0)
    ax.set_ylim(max(y) + margin, min(y) - margin)
    ax.set_xlim(*padded_limits(values))
    ax.set_xlabel(xlabel)
    ax.grid(axis="x", color="#E5E5E5", linewidth=0.5, zorder=0)
    ax.set_axisbelow(True)
    legend_above(ax)


def plot_exponents(exponents: pd.DataFrame, laws: LawsLike | None = None, ax=None):
    """Forest plot of the exponent at every level with its credible interval and the tested laws.

    Parameters
    ----------
    exponents : pandas.DataFrame
        Exponents table: one row per estimated exponent with columns ``level`` (``"population"``,
        ``"taxon"`` or ``"specimen"``), ``group`` (label shown), ``taxon`` (taxon the group belongs to;
        not read on the population row), ``mean``, ``sd``, ``hdi_low``, ``hdi_high``, ``r_hat`` and
        ``ess_bulk``; ``attrs["hdi_prob"]`` gives the interval's probability (e.g. 0.9).
    laws : pandas.DataFrame or mapping of str to float, optional
        Laws to mark with labelled vertical reference lines: the comparison stage's laws table (columns
        ``law`` and ``value``; the free model's NaN value is skipped) or ``{label: exponent}``.
    ax : matplotlib.axes.Axes, optional
        Axes to draw in; a single-column figure sized to the number of rows is created when omitted.

    Returns
    -------
    matplotlib.axes.Axes
        One point (posterior mean) and one horizontal interval per row of ``exponents``: the population
        on top, then each taxon (bold) followed by its specimens (grey); specimens without a taxon row are
        labelled ``"specimen (taxon)"``. The legend sits above the plot (centred on the figure when the
        Axes is alone in a constrained-layout figure, such as the one created here).

    Examples
    --------
    >>> import pandas as pd
    >>> table = pd.DataFrame({"level": ["population", "taxon"], "group": ["population", "A"],
    ...                       "taxon": ["population", "A"], "mean: [2.6, 2.7], "sd": [0.1, 0.2],
    ...                       "hdi_low": [2.4, 2.4], "hdi_high": [2.8, 3.0], "r_hat": [1.0, 1.0],
    ...                       "ess_bulk": [900.0, 800.0]})
    >>> ax = plot_exponents(table, laws={"Murray (a=3)": 3.0})
    >>> len(ax.get_yticklabels())
    2
    """
    require_columns(exponents, EXPONENT_FIGURE_COLUMNS, "exponents")
    check_levels(exponents)
    exponents = exponents.reset_index(drop=True)
    pairs = law_values(laws)
    order = _forest_order(exponents)
    with house_style():
        ax = new_axes(ax, height_mm=FRAME_MM + ROW_MM * (order[-1][1] + 1))
        labelled: set[str] = set()
        for i, y, _ in order:
            row = exponents.loc[i]
            level = str(row["level"])
            st = LEVEL_STYLE[level]
            lo, hi = float(row["hdi_low"]), float(row["hdi_high"])
            ax.errorbar(
                [row["mean"]],
                [y],
                xerr=[[row["mean"] - lo], [hi - row["mean"]]],
                fmt=st["marker"],
                ms=st["ms"],
                color=st["color"],
                elinewidth=st["lw"],
                zorder=3,
                label=None if level in labelled else level,
                gid=f"exponent:{level}:{row['group']}",
            )
            labelled.add(level)
        draw_law_lines(ax, pairs)
        _finish_forest(
            ax,
            [y for _, y, _ in order],
            [label for _, _, label in order],
            [*exponents["hdi_low"], *exponents["hdi_high"], *(v for _, v in pairs)],
            f"Branching exponent a\n(posterior mean, {hdi_percent(exponents)})",
            margin=0.7,
        )
        for tick, (i, _, _) in zip(ax.get_yticklabels(), order):
            tick.set(**TICK_STYLE[exponents.at[i, "level"]])
    return ax


#: Columns of the naive-vs-model table beyond the exponents table's.
NAIVE_COLUMNS: tuple[str, ...] = ("naive_median", "naive_q25", "naive_q75", "n_junctions", "n_no_root")
#: Vertical offset of the model (up) and naive (down) estimates within a taxon's row.
DODGE = 0.18
MODEL_COLOR = "#000000"
NAIVE_COLOR = DATA_COLOR


def plot_naive_vs_model(table: pd.DataFrame, laws: LawsLike | None = None, ax=None):
    """Per-taxon naive summary of per-junction exponents beside the model's estimate.

    Parameters
    ----------
    table : pandas.DataFrame
        One row per taxon: the exponents table's taxon-level rows (``group``, ``mean``, ``hdi_low``,
        ``hdi_high``, ...; ``attrs["hdi_prob"]``) plus ``naive_median``, ``naive_q25``, ``naive_q75`` (of
        the per-junction exponents that exist), ``n_junctions`` and ``n_no_root`` (junctions without a
        per-junction exponent).
    laws : pandas.DataFrame or mapping of str to float, optional
        Laws to mark with vertical reference lines (see :func:`plot_exponents`).
    ax : matplotlib.axes.Axes, optional
        Axes to draw in; a single-column figure is created when omitted.

    Returns
    -------
    matplotlib.axes.Axes
        One tick per taxon (labelled with its junction counts); the model's mean and HDI drawn above the
        naive median and inter-quartile range. The legend sits above the plot.

    Notes
    -----
    The naive numbers ignore measurement error and leave out junctions without a root; the legend says so.
    """
    require_columns(table, ("group", "mean", "hdi_low", "hdi_high", *NAIVE_COLUMNS), "naive-vs-model")
    table = table.reset_index(drop=True)
    pairs = law_values(laws)
    n = len(table)
    with house_style():
        ax = new_axes(ax, height_mm=FRAME_MM + 11.0 * n)
        y = np.arange(n, dtype=float)
        col = {
            c: table[c].to_numpy(dtype=float)
            for c in ("mean", "hdi_low", "hdi_high", "naive_median", "naive_q25", "naive_q75")
        }
        ax.errorbar(
            col["mean"],
            y - DODGE,
            xerr=[col["mean"] - col["hdi_low"], col["hdi_high"] - col["mean"]],
            fmt="o",
            ms=4,
            color=MODEL_COLOR,
            elinewidth=1.3,
            zorder=3,
            label=f"model: posterior\nmean, {hdi_percent(table)}",
            gid="model",
        )
        naive = ax.errorbar(
            col["naive_median"],
            y + DODGE,
            xerr=[col["naive_median"] - col["naive_q25"], col["naive_q75"] - col["naive_median"]],
            fmt="s",
            ms=4,
            mfc="white",
            color=NAIVE_COLOR,
            elinewidth=1.0,
            zorder=3,
            label="naive: median and IQR of\nper-junction exponents\n(ignores measurement error)",
            gid="naive",
        )
        naive[-1][0].set_linestyle((0, (3, 1.5)))
        draw_law_lines(ax, pairs)
        labels = [
            f"{g}\nn = {int(nj)} ({int(nn)} no root)"
            for g, nj, nn in zip(table["group"], table["n_junctions"], table["n_no_root"])
        ]
        values = [*table["hdi_low"], *table["hdi_high"], *table["naive_q25"], *table["naive_q75"]]
        _finish_forest(ax, y, labels, [*values, *(v for _, v in pairs)], "Branching exponent a", margin=0.5)
    return ax
