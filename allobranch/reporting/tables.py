"""Export tidy result tables to CSV, Markdown and LaTeX, and the fit's Markdown summary."""

from __future__ import annotations

from pathlib import Path

import pandas as pd

from allobranch.reporting.attempts import attempts_sentence, attempts_table, parametrization_note
from allobranch.reporting.html import CAUTION

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


def export_table(
    df: pd.DataFrame, stem: str | Path, formats: tuple[str, ...] = ("csv", "md", "tex")
) -> list[Path]:
    """Write ``df`` as ``stem.csv``, ``stem.md`` and/or ``stem.tex``."""
    stem = Path(stem)
    paths = []
    for fmt in formats:
        path = stem.with_suffix(f".{fmt}")
        if fmt == "csv":
            df.to_csv(path, index=False)
        elif fmt == "md":
            path.write_text(to_markdown(df) + "\n", encoding="utf-8")
        elif fmt == "tex":
            path.write_text(to_latex(df), encoding="utf-8")
        else:
            raise ValueError(f"unknown table format {fmt!r}; use csv, md or tex")
        paths.append(path)
    return paths


def fit_summary_markdown(result, hdi_prob: float = 0.9) -> str:
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
            "All convergence diagnostics passed (R-hat <= 1.01, bulk and tail ESS >= 400, "
            "no divergences, E-BFMI >= 0.3).",
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
        f"## Exponents (mean, SD, {int(hdi_prob * 100)} % HDI)",
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
        to_markdown(
            result.naive_vs_model(hdi_prob)[
                [
                    "taxon",
                    "mean",
                    "hdi_low",
                    "hdi_high",
                    "naive_median",
                    "naive_q25",
                    "naive_q75",
                    "n_junctions",
                    "n_no_root",
                ]
            ]
        ),
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
