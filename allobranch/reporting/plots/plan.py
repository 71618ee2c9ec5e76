"""A study plan's figures: verdict probabilities and interval width across design points."""

from __future__ import annotations

import numpy as np
import pandas as pd

from allobranch.reporting.plots._common import require_columns
from allobranch.reporting.style import LIGHT_GREY, OKABE_ITO, house_style, new_axes

#: Columns of the plan table (``plan.csv``) the verdict figure reads.
PLAN_COLUMNS: tuple[str, ...] = (
    "point",
    "variable",
    "value",
    "n_junctions",
    "p_right",
    "p_right_low",
    "p_right_high",
    "p_other",
    "p_none",
    "p_undecided",
)
#: Colour, marker and legend text of each verdict class.
OUTCOME_STYLES: dict[str, tuple[str, str, str]] = {
    "right": (OKABE_ITO["bluish_green"], "o", "right law"),
    "other": (OKABE_ITO["vermillion"], "s", "other law"),
    "none": (OKABE_ITO["reddish_purple"], "^", "none"),
    "undecided": ("#4D4D4D", "D", "undecided"),
}


#: Axis label of each swept design variable.
AXIS_LABELS: dict[str, str] = {
    "taxa": "taxa",
    "specimens": "specimens per taxon",
    "junctions": "junctions per specimen",
    "error": "measurement error",
}


def _x(points: pd.DataFrame) -> tuple[np.ndarray, str]:
    """The x values (the swept variable, else junctions per table) and the axis label."""
    variable = points["variable"].iloc[0]
    if isinstance(variable, str) and variable:
        return points["value"].to_numpy(dtype=float), AXIS_LABELS.get(variable, variable)
    return points["n_junctions"].to_numpy(dtype=float), "junctions per table"


def _x_axis(ax, x: np.ndarray) -> None:
    """A log axis for values spanning a factor of 10 or more; ticks at the values themselves."""
    if len(x) > 1 and np.all(x > 0) and x.max() / x.min() >= 10:
        ax.set_xscale("log")
    ax.set_xticks(x, [f"{v:g}" for v in x])
    ax.minorticks_off()


def plot_verdict_probabilities(points: pd.DataFrame, *, target: float | None = None, ax=None):
    """Probability of each verdict against the swept design variable.

    Parameters
    ----------
    points : pandas.DataFrame
        The plan table (:attr:`allobranch.planning.plan.PlanResult.points`, ``plan.csv``), columns
        :data:`PLAN_COLUMNS`.
    target : float, optional
        The probability of a right verdict the study should reach, drawn as a dashed line.
    ax : matplotlib.axes.Axes, optional
        Axes to draw on (default: a new single-column figure).

    Returns
    -------
    matplotlib.axes.Axes
    """
    require_columns(points, PLAN_COLUMNS, "plan")
    x, label = _x(points)
    with house_style():
        ax = new_axes(ax)
        low = points["p_right"] - points["p_right_low"]
        high = points["p_right_high"] - points["p_right"]
        for outcome, (color, marker, text) in OUTCOME_STYLES.items():
            y = points[f"p_{outcome}"].to_numpy(dtype=float)
            kw = {"yerr": np.vstack([low, high]), "capsize": 2} if outcome == "right" else {}
            ax.errorbar(x, y, color=color, marker=marker, markersize=3.5, linewidth=1.0, label=text, **kw)
        if target is not None:
            ax.axhline(target, color=LIGHT_GREY, linestyle="--", linewidth=0.8, label=f"target {target:g}")
        ax.set_ylim(-0.03, 1.03)
        ax.set_xlabel(label)
        ax.set_ylabel("probability of the verdict")
        _x_axis(ax, x)
        ax.legend(loc="best", frameon=False)
    return ax


def plot_interval_width(points: pd.DataFrame, *, ax=None):
    """Mean width of the population exponent's interval against the swept design variable.

    Parameters
    ----------
    points : pandas.DataFrame
        The plan table, with columns ``variable``, ``value``, ``n_junctions`` and ``mean_width``.
    ax : matplotlib.axes.Axes, optional

    Returns
    -------
    matplotlib.axes.Axes
    """
    require_columns(points, ("variable", "value", "n_junctions", "mean_width"), "plan")
    x, label = _x(points)
    with house_style():
        ax = new_axes(ax)
        ax.plot(
            x, points["mean_width"].to_numpy(dtype=float), color=OKABE_ITO["blue"], marker="o", markersize=3.5
        )
        ax.set_xlabel(label)
        ax.set_ylabel("mean interval width of the exponent")
        ax.set_ylim(bottom=0)
        _x_axis(ax, x)
    return ax
