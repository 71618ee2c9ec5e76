"""Write a fit's result folder: exponents, variance, diagnostics, Markdown summary and the NetCDF fit."""

from __future__ import annotations

import dataclasses
import os
from pathlib import Path

import pandas as pd

from allobranch.comparative.summaries import covariate_summary, reference_text
from allobranch.conventions import (
    COVARIATES_FILE,
    DIAGNOSTICS_FILE,
    EXPONENT_COLUMNS,
    EXPONENTS_FILE,
    FIT_FILE,
    FIT_FILES,
    HDI_PROB,
    SUMMARY_FILE,
    VARIANCE_FILE,
)
from allobranch.io import prepare_output_dir, write_files
from allobranch.reporting.tables import fit_summary_markdown

__all__ = ["FIT_FILES", "hdi_prob_of", "write_fit_outputs"]


def hdi_prob_of(result, hdi_prob: float | None = None) -> float:
    """The HDI probability to use for ``result``: ``hdi_prob`` when given, else the one the fit recorded
    (``settings["hdi_prob"]``), else :data:`~allobranch.conventions.HDI_PROB`."""
    return float(hdi_prob if hdi_prob is not None else result.settings.get("hdi_prob", HDI_PROB))


def diagnostics_with_sampler(result) -> pd.DataFrame:
    """The per-parameter diagnostics table followed by one ``sampler:<check>`` row per sampler-level check
    (divergences, E-BFMI, chains, draws) with its ``value``."""
    extra = [
        {
            "parameter": f"sampler:{k}",
            "r_hat": None,
            "ess_bulk": None,
            "ess_tail": None,
            "ok": None,
            "value": v,
        }
        for k, v in result.sampler_checks().items()
    ]
    return pd.concat([result.diagnostics(), pd.DataFrame(extra)], ignore_index=True)


def write_fit_outputs(
    result, out: str | os.PathLike, *, hdi_prob: float | None = None, force: bool = False
) -> list[Path]:
    """Write the result files of ``result`` (a :class:`~allobranch.inference.results.FitResult`) into ``out``.

    Files (:data:`~allobranch.conventions.FIT_FILES`): ``exponents.csv`` (columns
    :data:`~allobranch.conventions.EXPONENT_COLUMNS`), ``variance.csv``, ``diagnostics.csv`` (per parameter,
    plus sampler-level rows), ``summary.md`` and ``fit.nc``. All are written to temporary files first and
    moved into place together.

    Parameters
    ----------
    result : FitResult
    out : str or os.PathLike
        Output folder (created when missing).
    hdi_prob : float, optional
        Probability of the intervals in the tables; default: the one the fit recorded, else 0.9. The saved
        fit records the level used (``settings["hdi_prob"]``), so a report made from it uses the same.
    force : bool
        Replace existing files of the same names.

    Returns
    -------
    list of pathlib.Path
        The files written.
    """
    hdi_prob = hdi_prob_of(result, hdi_prob)
    covs = covariate_summary(result, hdi_prob)
    out = prepare_output_dir(out, list(FIT_FILES) + ([COVARIATES_FILE] if len(covs) else []), force=force)
    saved = dataclasses.replace(result, settings={**result.settings, "hdi_prob": hdi_prob})
    exps = result.exponents(hdi_prob)[list(EXPONENT_COLUMNS)]
    at = reference_text(result)
    if at:  # where the exponents hold when the model has covariates
        exps["covariates_at"] = at
    diag = diagnostics_with_sampler(result)
    extra = {COVARIATES_FILE: lambda p: covs.to_csv(p, index=False)} if len(covs) else {}
    return write_files(
        out,
        {
            **extra,
            EXPONENTS_FILE: lambda p: exps.to_csv(p, index=False),
            VARIANCE_FILE: lambda p: result.variance_components(hdi_prob).to_csv(p, index=False),
            DIAGNOSTICS_FILE: lambda p: diag.to_csv(p, index=False),
            SUMMARY_FILE: lambda p: p.write_text(fit_summary_markdown(result, hdi_prob), encoding="utf-8"),
            FIT_FILE: lambda p: saved.save(p),
        },
    )
