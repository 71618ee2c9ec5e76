"""Assemble every figure of a fit (and, when present, its law comparison) from the results' tables."""

from __future__ import annotations

import os
from pathlib import Path

import matplotlib.pyplot as plt
import pandas as pd

from allobranch.comparison.laws import CLASSIC_LAWS
from allobranch.reporting.checks import ppc_checks, ppc_pvalues
from allobranch.reporting.plots import (
    plot_diagnostics,
    plot_exponents,
    plot_law_comparison,
    plot_naive_vs_model,
    plot_ppc_check,
    plot_ratio_plane,
)
from allobranch.reporting.style import figure, house_style, save_figure

#: Figure files written by :func:`write_figures`, by name (without suffix).
FIGURE_NAMES = (
    "exponents",
    "ratio_plane",
    "naive_vs_model",
    "ppc_residual",
    "ppc_split",
    "law_comparison",
    "diagnostics",
)


#: Short display names of the classic laws in figures.
SHORT_NAMES = {"rall": "Rall", "da_vinci": "da Vinci", "murray": "Murray"}


def default_laws() -> dict[str, float]:
    """The classic laws as short figure labels, e.g. ``"Murray (a=3)" -> 3.0``."""
    return {f"{SHORT_NAMES.get(law.label, law.label)} (a={law.value:g})": law.value for law in CLASSIC_LAWS}


def law_display(label: str, value: float) -> str:
    """A law's figure and report label: ``"Murray (a=3)"``, ``"turbulent (a=2.333)"``; the label alone when
    ``value`` is not finite (the free model)."""
    if not pd.notna(value):
        return str(label)
    return f"{SHORT_NAMES.get(str(label), str(label))} (a={float(value):.4g})"


def display_names(laws_table: pd.DataFrame) -> pd.DataFrame:
    """The laws table with figure labels (``"Murray (a=3)"``, ``"turbulent (a=2.333)"``; ``free`` kept)."""
    out = laws_table.copy()
    out["law"] = [law_display(law, value) for law, value in zip(out["law"], out["value"])]
    return out


def make_figures(
    result,
    laws_table: pd.DataFrame | None = None,
    *,
    width: str = "single",
    checks: pd.DataFrame | None = None,
    pvalues: pd.DataFrame | None = None,
) -> dict:
    """Draw every figure for ``result`` (a FitResult); returns name -> matplotlib Figure.

    Parameters
    ----------
    result : FitResult
    laws_table : pandas.DataFrame, optional
        Long-form law comparison (columns :data:`~allobranch.conventions.LAWS_TABLE_COLUMNS`); without it the law-comparison figure is skipped and reference lines show the classic laws.
    width : {"single", "double"}
        Journal column width.
    checks, pvalues : pandas.DataFrame, optional
        Posterior predictive checks and their p-values (:func:`~allobranch.reporting.checks.ppc_checks`,
        :func:`~allobranch.reporting.checks.ppc_pvalues`); computed here, seeded with the fit's seed, when
        not given.

    Returns
    -------
    dict of str to matplotlib.figure.Figure
        Keys :data:`FIGURE_NAMES` (``law_comparison`` only with a laws table).
    """
    if laws_table is not None:
        laws_table = display_names(laws_table)
    laws = laws_table if laws_table is not None else default_laws()
    exps = result.exponents()
    figs = {}
    with house_style():
        fig, ax = figure(width=width, aspect=max(0.6, 0.12 * len(exps)))
        plot_exponents(exps, laws=laws, ax=ax)
        figs["exponents"] = fig
        fig, ax = figure(width=width, aspect=0.9)
        plot_ratio_plane(result.geometry(), laws, exponents=exps, ax=ax)
        figs["ratio_plane"] = fig
        fig, ax = figure(width=width, aspect=0.75)
        plot_naive_vs_model(result.naive_vs_model(), laws=laws, ax=ax)
        figs["naive_vs_model"] = fig
        figs.update(comparative_figures(result, laws, width=width))
    if checks is None:
        checks = ppc_checks(result, seed=int(result.settings.get("seed", 0)))
    if pvalues is None:
        pvalues = ppc_pvalues(checks)
    for name, check in (("ppc_residual", "law_residual"), ("ppc_split", "split")):
        figs[name] = _figure_of(plot_ppc_check(checks, check, pvalues=pvalues))
    if laws_table is not None:
        figs["law_comparison"] = _figure_of(plot_law_comparison(laws_table))
    figs["diagnostics"] = _figure_of(plot_diagnostics(result.idata, result.checked_parameters()[:4]))
    return figs


def comparative_figures(result, laws, *, width: str = "single") -> dict:
    """``covariate_<name>`` (the exponent along each covariate, with the junctions and the laws) and
    ``tree_exponents`` (taxon exponents beside the tree) when the fit has covariates or a tree."""
    from allobranch.comparative.summaries import exponent_curve, junction_points
    from allobranch.reporting.plots.covariate import plot_exponent_curve
    from allobranch.reporting.plots.phylogeny import plot_tree_exponents

    figs = {}
    post = result.idata.posterior
    hdi_prob = float(result.settings.get("hdi_prob", 0.9))
    if "beta" in post:
        for name in map(str, post["covariate"].values):
            fig, ax = figure(width=width, aspect=0.8)
            curve = exponent_curve(result, name, hdi_prob=hdi_prob)
            plot_exponent_curve(curve, junction_points(result, name), laws, ax=ax)
            figs[f"covariate_{name}"] = fig
    tree = result.settings.get("phylogeny")
    if tree:
        tips = list(tree["tips"])
        fig = plt.figure(figsize=(7.0, 1.0 + 0.22 * len(tips)), layout="constrained")
        axes = fig.subplots(1, 2, sharey=True, gridspec_kw={"width_ratios": [1, 1.4]})
        plot_tree_exponents(tree["segments"], tips, result.exponents(hdi_prob), laws, axes=axes)
        figs["tree_exponents"] = fig
    return figs


def _figure_of(axes):
    import numpy as np

    first = np.ravel(np.asarray(axes, dtype=object))[0]
    return first.figure


def write_figures(
    result,
    folder: str | os.PathLike,
    *,
    laws_table: pd.DataFrame | None = None,
    formats: tuple[str, ...] = ("pdf", "svg", "png"),
    width: str = "single",
) -> list[Path]:
    """Draw and save every figure into ``folder`` (created if needed).

    Parameters
    ----------
    result : FitResult
    folder : str or os.PathLike
        Folder of the figure files; existing files of the same names are replaced.
    laws_table : pandas.DataFrame, optional
        ``LawComparison.laws_table()`` (or ``SavedComparison.laws_table()``); adds the law-comparison figure.
    formats : tuple of str
        File formats, any of :data:`~allobranch.reporting.style.FIGURE_FORMATS`.
    width : {"single", "double"}
        Journal column width.

    Returns
    -------
    list of pathlib.Path
        The files written (one per figure of :data:`FIGURE_NAMES` and format).
    """
    folder = Path(folder)
    folder.mkdir(parents=True, exist_ok=True)
    written = []
    for name, fig in make_figures(result, laws_table, width=width).items():
        written += save_figure(fig, folder / name, formats=formats)
        plt.close(fig)
    return written
