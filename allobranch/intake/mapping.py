"""How the user's columns map onto allobranch's junction table (the "recipe").

A :class:`ColumnMapping` can be built in Python, from command-line flags, or read from a small TOML recipe
file (see :func:`allobranch.intake.recipe.load_recipe`).
"""

from __future__ import annotations

from dataclasses import asdict, dataclass, field
from typing import Any

#: Allowed values of ``measure``; used by code and messages alike.
MEASURES: tuple[str, ...] = ("radius", "diameter")


@dataclass(frozen=True)
class ColumnMapping:
    """The user's column names and measurement conventions.

    Parameters
    ----------
    parent : str
        Column holding the parent segment's size.
    daughters : tuple of str
        Two or more columns holding the daughters' sizes. A missing value in the third or later daughter
        column means that junction has fewer daughters.
    taxon, specimen : str or None
        Grouping columns. ``None`` means a single taxon / a single specimen per taxon.
    junction : str or None
        Optional junction identifier, unique within a specimen.
    measure : {"radius", "diameter"}
        Whether sizes are radii or diameters (diameters are halved on reading).
    unit : str
        Length unit of the sizes (``nm``, ``um``, ``mm``, ``cm``, ``m``, ``in`` or ``px``). Results keep this
        unit for output.
    rel_error : float or None
        Known relative (fractional) measurement error of every reading, e.g. ``0.05`` for 5 %.
    se : tuple of str
        Absolute standard-error column(s), in the same unit and measure as the sizes. One column applies to
        every reading of the row; otherwise one column per size column (parent first, then daughters).
    repeats : str or None
        Path (or, for Excel files, sheet name) of a long table of repeat readings with columns
        ``specimen``, ``junction``, ``segment`` (``parent`` or a daughter column name) and ``value``, used by
        the model to estimate the measurement error.
    sheet : str or int or None
        Sheet of an Excel workbook holding the junction table (first sheet when ``None``).
    encoding : str or None
        Text encoding of text tables (the junction table and a repeat-readings file), any Python codec name
        such as ``"latin-1"`` or ``"cp1252"``; ``None`` reads UTF-8 (with or without a byte-order mark).
    covariates : tuple of str
        Numeric columns kept with every junction as candidate covariates of the exponent (e.g. branching
        generation or order); stored in the junction table as ``cov_<name>``. Every cell must be a finite
        number. (The built-in covariate ``log_parent_size`` needs no column.)
    """

    parent: str
    daughters: tuple[str, ...]
    taxon: str | None = None
    specimen: str | None = None
    junction: str | None = None
    measure: str = "radius"
    unit: str = "mm"
    rel_error: float | None = None
    se: tuple[str, ...] = field(default_factory=tuple)
    repeats: str | None = None
    sheet: str | int | None = None
    encoding: str | None = None
    covariates: tuple[str, ...] = field(default_factory=tuple)

    def __post_init__(self) -> None:
        object.__setattr__(self, "daughters", tuple(self.daughters))
        cov = (self.covariates,) if isinstance(self.covariates, str) else tuple(self.covariates)
        object.__setattr__(self, "covariates", cov)
        if isinstance(self.se, str):
            object.__setattr__(self, "se", (self.se,))
        else:
            object.__setattr__(self, "se", tuple(self.se))

    @property
    def size_columns(self) -> tuple[str, ...]:
        """Parent column followed by the daughter columns."""
        return (self.parent, *self.daughters)

    def to_dict(self) -> dict[str, Any]:
        """Plain-dict form (for provenance and recipe writing); ``None`` values are dropped."""
        out = asdict(self)
        out["daughters"] = list(self.daughters)
        out["se"] = list(self.se)
        out["covariates"] = list(self.covariates)
        return {k: v for k, v in out.items() if v not in (None, [], ())}
