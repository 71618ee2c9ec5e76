"""Law comparison: predictive accuracy (ELPD differences) beside Bayes factors, per scope."""

from __future__ import annotations

import numpy as np
import pandas as pd

from allobranch.conventions import LAWS_TABLE_COLUMNS, POPULATION
from allobranch.reporting.plots._common import padded_limits, require_columns
from allobranch.reporting.style import SMALL_PT, TEXT_PT, figure, house_style, law_styles

#: Columns of the laws table (:data:`~allobranch.conventions.LAWS_TABLE_COLUMNS`) this plot reads.
LAWS_COLUMNS: tuple[str, ...] = tuple(c for c in LAWS_TABLE_COLUMNS if c != "elpd")
#: Height of one law row and of a scope heading, in millimetres, when the figure is created here.
ROW_MM = 8.0
FRAME_MM = 28.0
#: Bayes-factor guide lines: |log10 BF| = 1 is a factor of 10 either way.
BF_GUIDES = (-1.0, 1.0)
#: The log10 Bayes-factor axis stops here: beyond a factor of 10^4 either way the evidence is decisive on
#: any published scale, and a single law at -100 would squeeze the region around 0 that decides verdicts.
LOG10_BF_LIMITS: tuple[float, float] = (-4.0, 4.0)
#: The ELPD-difference axis stops here: a loss of 20 is five times the verdict rule's "clearly worse"
#: threshold (4), so larger losses only need to be seen as "far worse".
ELPD_DIFF_MAX = 20.0
#: Arrows beside a clipped point, pointing to where the true value lies.
CLIP_ARROWS = {-1: "\u2190", 1: "\u2192"}


def clip_note() -> str:
    """One sentence stating the axis limits of :func:`plot_law_comparison` (for captions)."""
    lo, hi = LOG10_BF_LIMITS
    return (
        f"Axes are clipped at an ELPD loss of {ELPD_DIFF_MAX:g} and at log10 BF {lo:g} and {hi:g}; a "
        "clipped point is drawn hollow at the edge with an arrow and its value."
    )


def _clip(value: float, lo: float, hi: float) -> tuple[float, int]:
    """The value drawn (inside ``[lo, hi]``) and the side it was clipped on (-1, 0 or 1)."""
    if value < lo:
        return lo, -1
    if value > hi:
        return hi, 1
    return value, 0


def _rows(laws_table: pd.DataFrame) -> tuple[list[tuple[int, float]], list[tuple[str, float]]]:
    """Law rows ``(index, y)`` and scope headings ``(scope, y)``; the population first, then by appearance."""
    scopes = list(dict.fromkeys(laws_table["scope"].astype(str)))
    if POPULATION in scopes:
        scopes.remove(POPULATION)
        scopes.insert(0, POPULATION)
    rows, headings = [], []
    y = 0.0
    for scope in scopes:
        headings.append((scope, y))
        y += 0.8
        for i in laws_table.index[laws_table["scope"].astype(str) == scope]:
            rows.append((i, y))
            y += 1.0
        y += 0.2
    return rows, headings


def _annotate(ax, x: float, y: float, text: str, gid: str) -> None:
    """Small text just above a row's marker."""
    ax.text(x, y - 0.3, text, ha="center", va="bottom", fontsize=SMALL_PT, color="#333333", gid=gid)


def _mark_clipped(ax, x: float, y: float, side: int, value: float, gid: str) -> None:
    """An arrow and the true value beside a point drawn at the axis limit."""
    text = f"{CLIP_ARROWS[-1]} {value:.3g}" if side < 0 else f"{value:.3g} {CLIP_ARROWS[1]}"
    ax.annotate(
        text,
        (x, y),
        xytext=(-side * 5, 0),
        textcoords="offset points",
        va="center",
        ha="left" if side < 0 else "right",
        fontsize=SMALL_PT,
        color="#333333",
        gid=gid,
    )


def _draw_row(ax_elpd, ax_bf, row: pd.Series, y: float, styles: dict) -> None:
    """One hypothesis: ELPD difference with its SE and weight; Bayes factor with P(ROPE)."""
    key = f"{row['scope']}:{row['law']}"
    free = not np.isfinite(row["value"])
    color, marker = (
        ("#000000", "o") if free else (styles[float(row["value"])].color, styles[float(row["value"])].marker)
    )
    diff, dse = float(row["elpd_diff"]), float(row["dse"])
    shown, side = _clip(diff, -np.inf, ELPD_DIFF_MAX)
    # a point inside the limit keeps its whole lower bar; its upper bar stops at the limit
    lo_err, hi_err = (dse, min(dse, ELPD_DIFF_MAX - shown)) if side == 0 else (0.0, 0.0)
    ax_elpd.errorbar(
        [shown],
        [y],
        xerr=[[lo_err], [hi_err]],
        fmt=marker,
        ms=4.5,
        color=color,
        mfc="white" if free or side else color,
        elinewidth=1.1,
        zorder=3,
        gid=f"elpd:{key}",
    )
    if side:
        _mark_clipped(ax_elpd, shown, y, side, diff, f"elpd-clipped:{key}")
    if np.isfinite(row["weight"]):
        _annotate(ax_elpd, shown, y, f"w {row['weight']:.2f}", f"weight:{key}")
    if free:
        ax_bf.text(
            0.0,
            y,
            "reference",
            ha="center",
            va="center",
            fontsize=SMALL_PT,
            color="#555555",
            zorder=4,
            bbox={"facecolor": "white", "edgecolor": "none", "pad": 0.5},
            gid=f"bf-reference:{row['scope']}",
        )
    elif np.isfinite(row["log10_bf"]):
        bf, side = _clip(float(row["log10_bf"]), *LOG10_BF_LIMITS)
        ax_bf.plot(
            [bf],
            [y],
            marker=marker,
            ms=4.5,
            color=color,
            mfc="white" if side else color,
            linestyle="none",
            zorder=3,
            gid=f"bf:{key}",
        )
        if side:
            _mark_clipped(ax_bf, bf, y, side, float(row["log10_bf"]), f"bf-clipped:{key}")
        if np.isfinite(row["p_rope"]):
            _annotate(ax_bf, bf, y, f"P {row['p_rope']:.2f}", f"p_rope:{key}")


def plot_law_comparison(laws_table: pd.DataFrame, axes=None):
    """ELPD differences with their standard errors and log10 Bayes factors, one row per hypothesis.

    Parameters
    ----------
    laws_table : pandas.DataFrame
        One row per hypothesis with ``scope`` (``"population"`` or a taxon label), ``law`` (label),
        ``value`` (exponent; NaN for the free model), ``elpd``, ``elpd_diff`` (difference to the best model
        of the same scope as reported by :func:`arviz.compare`: 0 for the best, positive for worse),
        ``dse`` (standard error of that difference), ``weight`` (stacking weight), ``log10_bf`` (log10
        Bayes factor of the law against the free model; NaN for the free model) and ``p_rope`` (posterior
        probability that the exponent lies within the region of practical equivalence of the law).
    axes : sequence of two matplotlib.axes.Axes, optional
        Left axes for ELPD differences, right axes for Bayes factors (sharing the y axis is advisable);
        a single-column figure with two panels is created when omitted.

    Returns
    -------
    numpy.ndarray of matplotlib.axes.Axes
        The two axes. Rows are grouped by scope (``"population"`` first) under a heading; each ELPD point is
        annotated with its stacking weight (``w``) and each Bayes factor with ``P(ROPE)`` (``P``). The
        free model has no Bayes factor against itself and is marked "reference". ELPD losses above
        :data:`ELPD_DIFF_MAX` and log10 Bayes factors outside :data:`LOG10_BF_LIMITS` are drawn hollow at
        the axis limit with an arrow and their value (the axis labels state the limits).
    """
    require_columns(laws_table, LAWS_COLUMNS, "laws")
    table = laws_table.reset_index(drop=True)
    rows, headings = _rows(table)
    styles = law_styles([v for v in table["value"] if np.isfinite(v)])
    with house_style():
        if axes is None:
            _, axes = figure(
                "single",
                height_mm=FRAME_MM + ROW_MM * (len(rows) + 0.8 * len(headings)),
                ncols=2,
                sharey=True,
                gridspec_kw={"wspace": 0.08},
            )
        axes = np.asarray(axes, dtype=object).ravel()
        if axes.size != 2:
            raise ValueError(f"axes must hold exactly two Axes; got {axes.size}")
        ax_elpd, ax_bf = axes
        for i, y in rows:
            _draw_row(ax_elpd, ax_bf, table.loc[i], y, styles)
        for scope, y in headings:
            # in the tick-label column, right-aligned like the labels, on a row of its own
            ax_elpd.text(
                -0.02,
                y,
                scope,
                transform=ax_elpd.get_yaxis_transform(),
                ha="right",
                va="center",
                fontweight="bold",
                fontsize=TEXT_PT,
                gid=f"scope:{scope}",
            )
        ax_elpd.axvline(0.0, color="#888888", lw=0.6, zorder=1)
        ax_bf.axvline(0.0, color="#888888", lw=0.6, zorder=1)
        for g in BF_GUIDES:
            ax_bf.axvline(g, color="#BBBBBB", lw=0.6, linestyle=":", zorder=1)
        ax_elpd.set_yticks([y for _, y in rows], [str(table.at[i, "law"]) for i, _ in rows])
        ax_elpd.tick_params(axis="y", length=0)
        ax_bf.tick_params(axis="y", length=0, labelleft=False)
        bottom = rows[-1][1] + 0.6 if rows else 1.0
        ax_elpd.set_ylim(bottom, -0.6)
        diffs = np.minimum(table["elpd_diff"].to_numpy(dtype=float), ELPD_DIFF_MAX)
        dses = table["dse"].to_numpy(dtype=float)
        spans = [*(diffs - dses), *np.minimum(diffs + dses, ELPD_DIFF_MAX), 0.0]
        lo, hi = padded_limits(spans, pad=0.1)
        ax_elpd.set_xlim(min(lo, -0.05 * (hi - lo)), hi)
        bfs = np.clip(table["log10_bf"].to_numpy(dtype=float), *LOG10_BF_LIMITS)
        ax_bf.set_xlim(*padded_limits([*bfs, *BF_GUIDES], pad=0.12))
        lo_bf, hi_bf = LOG10_BF_LIMITS
        ax_elpd.set_xlabel(
            f"ΔELPD to best ± SE\n(0 = best)\nw = stacking weight\nclipped at {ELPD_DIFF_MAX:g}"
        )
        ax_bf.set_xlabel(
            f"log₁₀ BF vs free\n(> 0 favours law)\nP = P(within ROPE)\nclipped at {lo_bf:g} and {hi_bf:g}"
        )
    return axes
