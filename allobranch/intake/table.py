"""The validated junction table: the object every later stage works from."""

from __future__ import annotations

import hashlib
from dataclasses import dataclass, field
from typing import Any

import numpy as np
import pandas as pd

from allobranch.errors import Problem
from allobranch.intake.mapping import ColumnMapping

#: Internal length unit for all sizes after conversion (except ``px``, which has no physical length).
INTERNAL_UNIT = "mm"
#: Prefix of the covariate columns in :attr:`JunctionTable.data` (``cov_generation`` for ``generation``).
COVARIATE_PREFIX = "cov_"


@dataclass
class ValidationReport:
    """Everything validation found that did not stop the analysis.

    Attributes
    ----------
    problems : list of Problem
        Flags (rows kept but reported) and exclusions (rows not used, with their reason).
    n_rows_read : int
        Data rows read from the file, blank ones included.
    """

    problems: list[Problem] = field(default_factory=list)
    n_rows_read: int = 0

    @property
    def flags(self) -> list[Problem]:
        """Problems of severity ``flag``."""
        return [p for p in self.problems if p.severity == "flag"]

    @property
    def excluded(self) -> list[Problem]:
        """Problems of severity ``excluded``."""
        return [p for p in self.problems if p.severity == "excluded"]

    def to_frame(self) -> pd.DataFrame:
        """One row per problem with columns severity, file, row, column, code, message, hint."""
        cols = ["severity", "file", "row", "column", "code", "message", "hint"]
        return pd.DataFrame([{c: getattr(p, c) for c in cols} for p in self.problems], columns=cols)


@dataclass
class JunctionTable:
    """A validated table of junctions, one row per junction.

    Attributes
    ----------
    data : pandas.DataFrame
        Tidy junction table with columns ``taxon``, ``specimen``, ``junction`` (str), ``source_row`` (row
        number in the user's file), ``n_daughters`` (int), ``parent`` and ``d1 .. dK`` (radii in
        :attr:`internal_unit`, NaN where a junction has fewer daughters), and ``se_parent``, ``se_d1 ..
        se_dK`` (absolute standard errors of the radii in the internal unit, NaN when not given).
    mapping : ColumnMapping
        The mapping used to read the table.
    report : ValidationReport
        Flags and exclusions found during validation.
    source : str
        File path, or ``"<DataFrame>"``.
    repeats : pandas.DataFrame or None
        Repeat readings (columns ``specimen``, ``junction``, ``segment`` (``parent``, ``d1``...), ``value`` as
        a radius in the internal unit), or ``None``.
    taxon_traits : pandas.DataFrame or None
        Numeric traits per taxon (index: taxon label), joined by :func:`allobranch.comparative.attach_traits`.
    phylogeny : allobranch.comparative.Phylogeny or None
        The taxa's tree, attached by :func:`allobranch.comparative.attach_tree`.

    Covariate columns named in the mapping are kept in :attr:`data` as ``cov_<name>``
    (:data:`COVARIATE_PREFIX`).
    """

    data: pd.DataFrame
    mapping: ColumnMapping
    report: ValidationReport
    source: str = "<DataFrame>"
    repeats: pd.DataFrame | None = None
    taxon_traits: pd.DataFrame | None = None
    phylogeny: Any = None

    # -- convenience views used by the geometry and model stages -------------------------------------
    @property
    def n_junctions(self) -> int:
        """Number of junctions."""
        return len(self.data)

    @property
    def daughter_columns(self) -> list[str]:
        """Internal daughter column names ``d1 .. dK``."""
        return [c for c in self.data.columns if c.startswith("d") and c[1:].isdigit()]

    @property
    def covariate_names(self) -> list[str]:
        """Names of the covariate columns read with the table."""
        return [c[len(COVARIATE_PREFIX) :] for c in self.data.columns if c.startswith(COVARIATE_PREFIX)]

    @property
    def parent(self) -> np.ndarray:
        """Parent radii (internal unit), shape ``(n,)``."""
        return self.data["parent"].to_numpy(dtype=float)

    @property
    def daughters(self) -> np.ndarray:
        """Daughter radii (internal unit), shape ``(n, K)``, NaN-padded."""
        return self.data[self.daughter_columns].to_numpy(dtype=float)

    @property
    def se(self) -> np.ndarray:
        """Absolute standard errors, shape ``(n, 1 + K)`` (parent first), NaN where not given."""
        cols = ["se_parent"] + [f"se_{c}" for c in self.daughter_columns]
        return self.data[cols].to_numpy(dtype=float)

    @property
    def rel_error(self) -> float | None:
        """Known relative measurement error, or ``None``."""
        return self.mapping.rel_error

    @property
    def unit(self) -> str:
        """The user's unit, used for output."""
        return self.mapping.unit

    @property
    def internal_unit(self) -> str:
        """Unit of the radii in :attr:`data`."""
        return "px" if self.mapping.unit == "px" else INTERNAL_UNIT

    @property
    def taxa(self) -> list[str]:
        """Taxon labels in order of first appearance."""
        return list(pd.unique(self.data["taxon"]))

    @property
    def specimens(self) -> pd.DataFrame:
        """One row per specimen with its taxon, in order of first appearance."""
        return self.data[["taxon", "specimen"]].drop_duplicates().reset_index(drop=True)

    def digest(self) -> str:
        """SHA-256 of the validated junctions (for provenance; attached traits and trees are recorded by the
        fit separately)."""
        h = hashlib.sha256(pd.util.hash_pandas_object(self.data, index=False).to_numpy().tobytes())
        if self.repeats is not None:
            h.update(pd.util.hash_pandas_object(self.repeats, index=False).to_numpy().tobytes())
        return h.hexdigest()
