"""Export tidy result tables to CSV, Markdown and LaTeX, and the fit's Markdown summary."""

from __future__ import annotations

from pathlib import Path

import pandas as pd

from allobranch.conventions import HDI_PROB, NAIVE_VS_MODEL_COLUMNS, hdi_label
from allobranch.inference.diagnostics import BFMI_MIN, ESS_MIN, RHAT_MAX
from allobranch.io import write_files
from allobranch.reporting.attempts import attempts_sentence, attempts_table, parametrization_note
from allobranch.reporting.html import CAUTION

#: Table formats :func:`export_table` writes, by suffix.
TABLE_FORMATS: tuple[str, ...] = ("csv", "md", "tex")

#: Columns shown (and their number format) in published tables.
_ROUND = {"mean": 3, "sd": 3, "hdi_low": 3, "hdi_high": 3, "r_hat": 3, "ess_bulk": 0, "ess_tail": 0}


def rounded(df: pd.DataFrame) -> pd.DataFrame:
    """Round the usual summary columns for display."""
    out = df.copy()
    for col, digits in _ROUND.items():
        if col in out:
            out[col] = out[col].astype(float).round(digits)
    return out


def to_markdown(df: pd.DataFrame) -> str:
    """Markdown table (pandas with tabulate)."""
    return rounded(df).to_markdown(index=False)


def to_latex(df: pd.DataFrame, caption: str = "", label: str = "") -> str:
    """LaTeX table (booktabs) ready for a manuscript."""
    return rounded(df).to_latex(
        index=False, caption=caption or None, label=label or None, float_format="%.3f"
    )


def export_table(df: pd.DataFrame, stem: str | Path, formats: tuple[str, ...] = TABLE_FORMATS) -> list[Path]:
    """Write ``df`` as ``stem.csv``, ``stem.md`` and/or ``stem.tex`` (all or nothing, atomically).

    Parameters
    ----------
    df : pandas.DataFrame
    stem : str or Path
        Destination without suffix, in an existing folder.
    formats : tuple of str
        Any of :data:`TABLE_FORMATS`.

    Returns
    -------
    list of pathlib.Path
        The files written, in the order of ``formats``.
    """
    writers = {
        "csv": lambda p: df.to_csv(p, index=False),
        "md": lambda p: p.write_text(to_markdown(df) + "\n", encoding="utf-8"),
        "tex": lambda p: p.write_text(to_latex(df), encoding="utf-8"),
    }
    bad = [fmt for fmt in formats if fmt not in writers]
    if bad:
        raise ValueError(f"unknown table format(s) {bad}; use {', '.join(TABLE_FORMATS)}")
    stem = Path(stem)
    return write_files(stem.parent, {f"{stem.name}.{fmt}": writers[fmt] for fmt in formats})


def fit_summary_markdown(result, hdi_prob: float = HDI_PROB) -> str:
    """The Markdown summary of a fit: warnings first, then data, exponents, variance, naive comparison."""
    t = result.table
    checks = result.sampler_checks()
    lines = ["# allobranch fit summary", ""]
    warnings = result.warnings
    if warnings:
        lines += ["## WARNINGS -- read before using these numbers", ""]
        lines += [f"- {w}" for w in warnings] + [""]
    else:
        lines += [
            f"All convergence diagnostics passed (R-hat <= {RHAT_MAX}, bulk and tail ESS >= {ESS_MIN}, "
            f"no divergences, E-BFMI >= {BFMI_MIN}).",
            "",
        ]
    for note in result.notes:
        lines.append(f"Note: {note}")
    n_d = t.data["n_daughters"].value_counts().sort_index()
    lines += [
        "## Data",
        "",
        f"- source: `{t.source}`; {t.n_junctions} junctions, {len(t.taxa)} taxa, {len(t.specimens)} specimens",
        "- daughters per junction: " + ", ".join(f"{k}: {v}" for k, v in n_d.items()),
        f"- validation flags: {len(t.report.flags)}; excluded rows: {len(t.report.excluded)}",
        f"- measurement error: {result.settings.get('error_mode')}",
        "",
        f"## Exponents (mean, SD, {hdi_label(hdi_prob)})",
        "",
        to_markdown(result.exponents(hdi_prob).drop(columns=["ess_tail"])),
        "",
        "## Variance components",
        "",
        to_markdown(result.variance_components(hdi_prob)),
        "",
        "## Naive per-junction exponents beside the model (naive ignores measurement error and drops "
        "junctions without a root)",
        "",
        to_markdown(result.naive_vs_model(hdi_prob)[list(NAIVE_VS_MODEL_COLUMNS)]),
        "",
        "## Sampler",
        "",
        f"- {result.settings.get('sampler')} NUTS, {checks['chains']} chains x {checks['draws']} draws "
        f"(tune {result.settings.get('tune')}), seed {result.settings.get('seed')}, "
        f"{result.settings.get('seconds')} s; divergences {checks['divergences']}, "
        f"min E-BFMI {checks['bfmi_min']:.2f}",
        f"- input SHA-256 {result.provenance.get('input_sha256', '?')}",
        "",
        *_attempts_markdown(result.settings),
        "## Caution",
        "",
        CAUTION,
        "",
    ]
    return "\n".join(lines)


def _attempts_markdown(settings: dict) -> list[str]:
    """The "Sampling attempts" section of the summary (nothing for fits that did not record attempts)."""
    table = attempts_table(settings)
    if table is None:
        return []
    lines = ["## Sampling attempts", "", attempts_sentence(settings), ""]
    note = parametrization_note(settings)
    if note:
        lines += [f"Parametrization of the kept attempt: {note}", ""]
    return lines + [table.to_markdown(index=False, floatfmt=".4g"), ""]
