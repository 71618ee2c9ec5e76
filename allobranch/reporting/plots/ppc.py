"""Posterior predictive checks: observed against replicated distributions of a check, one panel per taxon."""

from __future__ import annotations

import textwrap

import numpy as np
import pandas as pd

from allobranch.reporting.plots._common import legend_above, require_columns
from allobranch.reporting.style import OKABE_ITO, SMALL_PT, TEXT_PT, figure, house_style

#: Columns of the checks table this plot reads (see :func:`allobranch.reporting.checks.ppc_checks`).
PPC_COLUMNS: tuple[str, ...] = ("check", "taxon", "source", "draw", "value")
SOURCES: tuple[str, ...] = ("observed", "replicated")
REPLICATED_COLOR = OKABE_ITO["sky_blue"]
OBSERVED_COLOR = "#000000"
#: Axis label of each check.
CHECK_AXIS_LABELS: dict[str, str] = {
    "law_residual": "Law residual: log parent − law's\nprediction from the daughters",
    "split": "Smaller / larger daughter radius",
}
#: Height of one row of panels in millimetres when the figure is created here.
PANEL_MM = 36.0
#: Characters per line of a panel title before the taxon name wraps.
TITLE_WIDTH = 24


def _check_table(checks: pd.DataFrame, check: str) -> pd.DataFrame:
    require_columns(checks, PPC_COLUMNS, "posterior predictive checks")
    if check not in CHECK_AXIS_LABELS:
        raise ValueError(f"check must be one of {tuple(CHECK_AXIS_LABELS)}; got {check!r}")
    bad = sorted(set(checks["source"].astype(str)) - set(SOURCES))
    if bad:
        raise ValueError(f"the checks table's source column must hold {SOURCES}; found {bad}")
    table = checks[checks["check"].astype(str) == check]
    if table.empty:
        raise ValueError(f"the checks table has no rows for check {check!r}")
    if not np.all(np.isfinite(table["value"].to_numpy(dtype=float))):
        raise ValueError(f"the {check!r} values must be finite")
    return table


#: Short names of the statistics in the p-value note.
STAT_SHORT: dict[str, str] = {"mean": "mean", "sd": "SD", "corr_split": "r(split)"}


#: Height of one line of the p-value note above the curves, as a share of the cumulative-proportion axis.
NOTE_LINE = 0.13


def _pvalue_note(ax, taxon: str, pvalues: pd.DataFrame | None, check: str) -> None:
    """The panel's p-values above the curves (which end at 1), in head room added to the y axis."""
    ax.set_ylim(0, 1.0)
    if pvalues is None:
        return
    rows = pvalues[(pvalues["check"] == check) & (pvalues["taxon"].astype(str) == taxon)]
    if rows.empty:
        return
    lines = [
        f"{STAT_SHORT.get(s, s)}: p = {p:.2f}{' (fails)' if bad else ''}"
        for s, p, bad in zip(rows["statistic"], rows["p_value"], rows["fails"])
    ]
    ax.set_ylim(0, 1.0 + NOTE_LINE * (len(lines) + 0.5))
    ax.spines["left"].set_bounds(0.0, 1.0)
    ax.set_yticks([0.0, 0.25, 0.5, 0.75, 1.0])
    ax.text(
        0.02,
        1.0 + 0.4 * NOTE_LINE,
        "\n".join(lines),
        transform=ax.get_yaxis_transform(),
        ha="left",
        va="bottom",
        fontsize=SMALL_PT,
        color="#333333",
        linespacing=1.2,
        gid=f"pvalues:{taxon}",
    )


def plot_ppc_check(
    checks: pd.DataFrame, check: str, axes=None, *, pvalues: pd.DataFrame | None = None, max_draws: int = 50
):
    """Empirical CDFs of a check's observed values over those of replicated data, one panel per taxon.

    Parameters
    ----------
    checks : pandas.DataFrame
        Long table (:func:`allobranch.reporting.checks.ppc_checks`) with ``check``, ``taxon``, ``source``
        (``"observed"`` or ``"replicated"``), ``draw`` (posterior draw; -1 for observed values that do not
        depend on the draw) and ``value``.
    check : {"law_residual", "split"}
        Which check to draw.
    axes : matplotlib.axes.Axes or sequence of Axes, optional
        One Axes per taxon, in order of first appearance in the table; a single-column figure with a grid
        of panels is created when omitted.
    pvalues : pandas.DataFrame, optional
        Posterior predictive p-values (:func:`allobranch.reporting.checks.ppc_pvalues`), printed under each
        panel above the curves ("fails" marks a p-value in either tail).
    max_draws : int, default 50
        Draws drawn per taxon: the ones with the lowest draw numbers.

    Returns
    -------
    numpy.ndarray of matplotlib.axes.Axes
        One Axes per taxon (titled with the taxon and its number of junctions; the x label is shared below
        the panels when the figure is created here): a thin line per replicated
        data set, and for the data a thick line, or one thin dark line per draw when the observed values
        depend on the draw (the law residual depends on the draw's exponent). The legend sits above the
        panels when the figure is created here, otherwise in the first Axes.
    """
    table = _check_table(checks, check)
    if int(max_draws) < 1:
        raise ValueError(f"max_draws must be at least 1; got {max_draws!r}")
    taxa = list(dict.fromkeys(table["taxon"].astype(str)))
    with house_style():
        created = axes is None
        if created:
            ncols = min(len(taxa), 2)
            nrows = int(np.ceil(len(taxa) / ncols))
            _, grid = figure(
                "single",
                height_mm=PANEL_MM * nrows + 16,
                nrows=nrows,
                ncols=ncols,
                squeeze=False,
                sharey=True,
            )
            grid = grid.ravel()
            for extra in grid[len(taxa) :]:
                extra.remove()
            axes = grid[: len(taxa)]
        axes = np.atleast_1d(np.asarray(axes, dtype=object)).ravel()
        if axes.size != len(taxa):
            raise ValueError(f"axes must hold one Axes per taxon ({len(taxa)}); got {axes.size}")
        taxon_col = table["taxon"].astype(str)
        for ax, taxon in zip(axes, taxa):
            sub = table[taxon_col == taxon]
            n = _draw_source(ax, sub, "replicated", taxon, max_draws)
            _draw_source(ax, sub, "observed", taxon, max_draws)
            ax.set_title(f"{textwrap.fill(taxon, TITLE_WIDTH)} (n = {n})", fontsize=TEXT_PT)
            _pvalue_note(ax, taxon, pvalues, check)
            if not created:
                ax.set_xlabel(CHECK_AXIS_LABELS[check])
            if _first_column(ax):
                ax.set_ylabel("Cumulative proportion")
        if created:
            axes[0].figure.supxlabel(CHECK_AXIS_LABELS[check].replace("\n", " "), fontsize=TEXT_PT)
            legend_above(axes[0], ncol=2, figure_level=True)
        else:
            axes[0].legend(loc="best", fontsize=SMALL_PT, handlelength=1.5)
    return axes


def _draw_source(ax, sub: pd.DataFrame, source: str, taxon: str, max_draws: int) -> int:
    """Draw one source's ECDFs; returns the number of junctions per curve."""
    rows = sub[sub["source"] == source]
    draws = np.sort(rows["draw"].unique())[:max_draws]
    observed = source == "observed"
    single = observed and len(draws) == 1
    n = 0
    for j, d in enumerate(draws):
        values = rows.loc[rows["draw"] == d, "value"].to_numpy(dtype=float)
        n = values.size
        if observed:
            label = (
                ("observed" if single else f"observed, at each\ndraw's exponent ({len(draws)})")
                if j == 0
                else None
            )
            ax.ecdf(
                values,
                color=OBSERVED_COLOR,
                lw=1.1 if single else 0.5,
                alpha=1.0 if single else 0.6,
                zorder=3,
                gid=f"observed:{taxon}:{d}",
                label=label,
            )
        else:
            ax.ecdf(
                values,
                color=REPLICATED_COLOR,
                lw=0.5,
                alpha=0.5,
                zorder=2,
                gid=f"replicated:{taxon}:{d}",
                label=f"replicated ({len(draws)} draws)" if j == 0 else None,
            )
    return n


def _first_column(ax) -> bool:
    """Whether an Axes sits in the first column of its grid (True for a free-standing Axes)."""
    spec = ax.get_subplotspec()
    return spec is None or spec.is_first_col()
