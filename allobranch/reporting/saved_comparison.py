"""A law comparison's files: written by :func:`write_comparison`, read back by :meth:`SavedComparison.read`.

Files (:data:`~allobranch.conventions.COMPARISON_FILES`): the evidence (``laws.csv``), the per-taxon view
(``laws_by_taxon.csv``), the verdicts (``laws_verdicts.csv``), the warnings (``laws_warnings.csv``: one
row per warning with its ``kind`` and ``message``) and a Markdown report for reading (``laws.md``). A
report is made from the tables only, never from the Markdown.

Folders written before ``laws_warnings.csv`` existed are still read: the warnings that the evidence table
itself records are rebuilt from it (junctions with high Pareto k, Bayes factors from a normal
approximation), and a note says that the rest are in ``laws.md``. Their scope ``"overall"`` is read as
``"population"``.
"""

from __future__ import annotations

import os
from dataclasses import dataclass, field
from pathlib import Path

import pandas as pd

from allobranch.conventions import (
    LAWS_BY_TAXON_FILE,
    LAWS_FILE,
    LAWS_OVER_RANGE_FILE,
    LAWS_REPORT_FILE,
    LAWS_TABLE_COLUMNS,
    LAWS_VERDICTS_FILE,
    LAWS_WARNINGS_FILE,
    OLD_POPULATION_SCOPE,
    POPULATION,
    WARNING_COLUMNS,
)
from allobranch.io import prepare_output_dir, write_files
from allobranch.reporting.warning_groups import warning_kind

__all__ = ["SavedComparison", "warnings_frame", "warnings_from_evidence", "write_comparison"]


def warnings_frame(warnings: list[str]) -> pd.DataFrame:
    """The comparison's warnings as a table: columns :data:`~allobranch.conventions.WARNING_COLUMNS`.

    Parameters
    ----------
    warnings : list of str

    Returns
    -------
    pandas.DataFrame
        ``kind`` (:func:`~allobranch.reporting.warning_groups.warning_kind`) and ``message``, one row each.
    """
    rows = [{"kind": warning_kind(str(w)), "message": str(w)} for w in warnings]
    return pd.DataFrame(rows, columns=list(WARNING_COLUMNS))


def write_comparison(result, out: str | os.PathLike, *, force: bool = False) -> list[Path]:
    """Write a law comparison's files into the folder ``out``, all or nothing.

    Parameters
    ----------
    result : LawComparison
    out : str or os.PathLike
        Output folder (created if missing).
    force : bool
        Replace existing files of the same names (nothing else in the folder is touched).

    Returns
    -------
    list of pathlib.Path
        The files written (:data:`~allobranch.conventions.COMPARISON_FILES`, and
        :data:`~allobranch.conventions.LAWS_OVER_RANGE_FILE` when the laws were checked over a range).

    Raises
    ------
    OutputExistsError
        If one of the files exists and ``force`` is false.
    """
    writers = {
        LAWS_FILE: lambda p: result.evidence.to_csv(p, index=False),
        LAWS_BY_TAXON_FILE: lambda p: result.by_taxon.to_csv(p, index=False),
        LAWS_VERDICTS_FILE: lambda p: result.verdicts.to_csv(p, index=False),
        LAWS_WARNINGS_FILE: lambda p: warnings_frame(result.warnings).to_csv(p, index=False),
        LAWS_REPORT_FILE: lambda p: p.write_text(result.to_markdown(), encoding="utf-8"),
    }
    if len(result.over_range):
        writers[LAWS_OVER_RANGE_FILE] = lambda p: result.over_range.to_csv(p, index=False)
    folder = prepare_output_dir(out, list(writers), force=force)
    return write_files(folder, writers)


def warnings_from_evidence(evidence: pd.DataFrame) -> list[str]:
    """The warnings the evidence table records in its columns (``n_high_k``, ``bf_method``).

    Parameters
    ----------
    evidence : pandas.DataFrame
        The long evidence table (``laws.csv``).

    Returns
    -------
    list of str
    """
    out = []
    if "n_high_k" in evidence:
        high = evidence[pd.to_numeric(evidence["n_high_k"], errors="coerce").fillna(0) > 0]
        for scope, group in high.groupby("scope", sort=False):
            which = ", ".join(f"{law} ({int(n)})" for law, n in zip(group["law"], group["n_high_k"]))
            out.append(
                f"LOO UNRELIABLE in scope {scope}: junctions with high Pareto k in hypotheses {which}; "
                f"their ELPD terms are not trustworthy (the junctions are named in {LAWS_REPORT_FILE})"
            )
    if "bf_method" in evidence:
        n = int((evidence["bf_method"] == "normal_approx").sum())
        if n:
            out.append(
                f"{n} Bayes factor(s) use a normal approximation to the posterior (the law lies in the far "
                "tail of the draws): only their order of magnitude is meaningful"
            )
    return out


def _read_scoped(path: Path) -> pd.DataFrame:
    """A table with a ``scope`` column, the older scope name read as :data:`POPULATION`."""
    frame = pd.read_csv(path)
    if "scope" in frame:
        frame["scope"] = frame["scope"].replace(OLD_POPULATION_SCOPE, POPULATION)
    return frame


@dataclass
class SavedComparison:
    """A law comparison read back from a result folder (the parts a report needs).

    Attributes
    ----------
    evidence : pandas.DataFrame
        Long evidence table, one row per scope and hypothesis.
    by_taxon : pandas.DataFrame
    verdicts : pandas.DataFrame
        Columns ``scope``, ``verdict``, ``reason``.
    warnings : list of str
    notes : list of str
        What the files could not tell (shown with the warnings).
    over_range : pandas.DataFrame or None
        The laws over covariate ranges (``laws_over_range.csv``), when the comparison checked any.
    """

    evidence: pd.DataFrame
    by_taxon: pd.DataFrame
    verdicts: pd.DataFrame
    warnings: list[str] = field(default_factory=list)
    notes: list[str] = field(default_factory=list)
    over_range: pd.DataFrame | None = None

    @property
    def population(self) -> pd.DataFrame:
        """Rows of the population scope."""
        return self.evidence[self.evidence["scope"] == POPULATION].reset_index(drop=True)

    def laws_table(self) -> pd.DataFrame:
        """The long form the law-comparison figure draws (every scope)."""
        return self.evidence[[c for c in LAWS_TABLE_COLUMNS if c in self.evidence]].reset_index(drop=True)

    @classmethod
    def read(cls, folder: str | os.PathLike) -> SavedComparison | None:
        """Read the comparison's CSV files from ``folder``; None when they are absent.

        Parameters
        ----------
        folder : str or os.PathLike

        Returns
        -------
        SavedComparison or None
        """
        folder = Path(folder)
        names = (LAWS_FILE, LAWS_BY_TAXON_FILE, LAWS_VERDICTS_FILE)
        if not all((folder / n).is_file() for n in names):
            return None
        evidence, by_taxon, verdicts = (_read_scoped(folder / n) for n in names)
        notes = []
        if (folder / LAWS_WARNINGS_FILE).is_file():
            messages = pd.read_csv(folder / LAWS_WARNINGS_FILE)
            warnings = [str(m) for m in messages.get("message", pd.Series(dtype=str)).dropna()]
        else:
            warnings = warnings_from_evidence(evidence)
            notes.append(
                f"The comparison's other warnings (e.g. diagnostics of the law fits) were not saved as a "
                f"table ({LAWS_WARNINGS_FILE}); read them in {LAWS_REPORT_FILE}."
            )
        over_range = (
            _read_scoped(folder / LAWS_OVER_RANGE_FILE) if (folder / LAWS_OVER_RANGE_FILE).is_file() else None
        )
        return cls(
            evidence=evidence,
            by_taxon=by_taxon,
            verdicts=verdicts,
            warnings=warnings,
            notes=notes,
            over_range=over_range,
        )
