"""A law comparison read back from the CSV files ``allobranch compare`` writes (for the report).

Everything is read from the tables: the evidence (``laws.csv``), the per-taxon view (``laws_by_taxon.csv``)
and the verdicts (``laws_verdicts.csv``). The comparison's warnings are read from ``laws_warnings.csv``
(one ``message`` per row) when that file exists; otherwise the warnings that the evidence table itself
records are rebuilt from it (junctions with high Pareto k, Bayes factors from a normal approximation), and
a note says that the rest (e.g. the law fits' own diagnostics) are in ``laws.md``.
"""

from __future__ import annotations

import os
from dataclasses import dataclass, field
from pathlib import Path

import pandas as pd

from allobranch.comparison.compare import LAWS_TABLE_COLUMNS

#: Files read from a result folder.
EVIDENCE_FILE, BY_TAXON_FILE, VERDICTS_FILE = "laws.csv", "laws_by_taxon.csv", "laws_verdicts.csv"
#: Optional file with the comparison's warnings (column ``message``).
WARNINGS_FILE = "laws_warnings.csv"


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
                "their ELPD terms are not trustworthy (the junctions are named in laws.md)"
            )
    if "bf_method" in evidence:
        n = int((evidence["bf_method"] == "normal_approx").sum())
        if n:
            out.append(
                f"{n} Bayes factor(s) use a normal approximation to the posterior (the law lies in the far "
                "tail of the draws): only their order of magnitude is meaningful"
            )
    return out


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
    """

    evidence: pd.DataFrame
    by_taxon: pd.DataFrame
    verdicts: pd.DataFrame
    warnings: list[str] = field(default_factory=list)
    notes: list[str] = field(default_factory=list)

    @property
    def overall(self) -> pd.DataFrame:
        """Rows of the overall scope."""
        return self.evidence[self.evidence["scope"] == "overall"].reset_index(drop=True)

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
        names = (EVIDENCE_FILE, BY_TAXON_FILE, VERDICTS_FILE)
        if not all((folder / n).is_file() for n in names):
            return None
        evidence, by_taxon, verdicts = (pd.read_csv(folder / n) for n in names)
        notes = []
        if (folder / WARNINGS_FILE).is_file():
            messages = pd.read_csv(folder / WARNINGS_FILE)
            warnings = [str(m) for m in messages.get("message", pd.Series(dtype=str)).dropna()]
        else:
            warnings = warnings_from_evidence(evidence)
            notes.append(
                f"The comparison's other warnings (e.g. diagnostics of the law fits) were not saved as a "
                f"table ({WARNINGS_FILE}); read them in laws.md."
            )
        return cls(evidence=evidence, by_taxon=by_taxon, verdicts=verdicts, warnings=warnings, notes=notes)
