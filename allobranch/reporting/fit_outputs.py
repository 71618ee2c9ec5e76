"""Write a fit's result folder: exponents, variance, diagnostics, Markdown summary and the NetCDF fit."""

from __future__ import annotations

import os
from pathlib import Path

from allobranch.reporting.outputs import prepare_output_dir, write_files
from allobranch.reporting.tables import fit_summary_markdown

#: Files written by :func:`write_fit_outputs`.
FIT_FILES = ("exponents.csv", "variance.csv", "diagnostics.csv", "summary.md", "fit.nc")
#: Columns of exponents.csv.
EXPONENT_CSV_COLUMNS = [
    "level",
    "group",
    "mean",
    "sd",
    "hdi_low",
    "hdi_high",
    "r_hat",
    "ess_bulk",
    "taxon",
    "ess_tail",
    "fixed",
]


def write_fit_outputs(
    result, out: str | os.PathLike, *, hdi_prob: float = 0.9, force: bool = False
) -> list[Path]:
    """Write the result files of ``result`` (a :class:`~allobranch.inference.results.FitResult`) into ``out``.

    Files: ``exponents.csv`` (level, group, mean, sd, hdi_low, hdi_high, r_hat, ess_bulk, ...),
    ``variance.csv``, ``diagnostics.csv`` (per parameter, plus sampler-level rows), ``summary.md`` and
    ``fit.nc``. All are written to a temporary folder first and moved into place together.
    """
    out = prepare_output_dir(out, list(FIT_FILES), force=force)
    exps = result.exponents(hdi_prob)[EXPONENT_CSV_COLUMNS]
    diag = result.diagnostics()
    checks = result.sampler_checks()
    extra = [
        {
            "parameter": f"sampler:{k}",
            "r_hat": None,
            "ess_bulk": None,
            "ess_tail": None,
            "ok": None,
            "value": v,
        }
        for k, v in checks.items()
    ]
    import pandas as pd

    diag = pd.concat([diag, pd.DataFrame(extra)], ignore_index=True)
    return write_files(
        out,
        {
            "exponents.csv": lambda p: exps.to_csv(p, index=False),
            "variance.csv": lambda p: result.variance_components(hdi_prob).to_csv(p, index=False),
            "diagnostics.csv": lambda p: diag.to_csv(p, index=False),
            "summary.md": lambda p: p.write_text(fit_summary_markdown(result, hdi_prob), encoding="utf-8"),
            "fit.nc": lambda p: result.save(p),
        },
    )
