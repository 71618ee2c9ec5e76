"""Intake: read the user's table, map its columns, convert units and validate.

The entry point is :func:`read_junctions`; the pieces live in :mod:`~allobranch.intake.readers` (file
formats), :mod:`~allobranch.intake.recipe` (the column mapping), :mod:`~allobranch.intake.units` (units and
diameters) and :mod:`~allobranch.intake.validate` (checks and the junction table).
"""

from __future__ import annotations

import os
from pathlib import Path
from typing import Any

import pandas as pd

from allobranch.errors import InputError, Problem, RecipeError
from allobranch.intake.mapping import ColumnMapping
from allobranch.intake.readers import RawTable, read_table
from allobranch.intake.recipe import load_recipe, mapping_from_options, write_recipe
from allobranch.intake.table import JunctionTable, ValidationReport
from allobranch.intake.validate import build_junction_table

__all__ = [
    "ColumnMapping",
    "JunctionTable",
    "ValidationReport",
    "load_recipe",
    "mapping_from_options",
    "read_junctions",
    "resolve_mapping",
    "write_recipe",
]


def resolve_mapping(
    mapping: ColumnMapping | None = None, *, recipe: str | os.PathLike | None = None, **mapping_kwargs: Any
) -> ColumnMapping:
    """Combine a mapping or a recipe file with keyword overrides into one checked mapping.

    Parameters
    ----------
    mapping : ColumnMapping, optional
        A mapping built in Python.
    recipe : str or path-like, optional
        A TOML recipe file (see :func:`allobranch.intake.recipe.load_recipe`); not together with ``mapping``.
    **mapping_kwargs
        Field overrides accepted by :func:`allobranch.intake.recipe.mapping_from_options` (``parent``,
        ``daughters``, ``unit``, ...). Without a mapping or recipe, ``parent`` and ``daughters`` are needed.

    Returns
    -------
    ColumnMapping
        The mapping given, read from the recipe or built from the keywords; checked.

    Raises
    ------
    RecipeError
        If both a mapping and a recipe are given, or the result is inconsistent.
    """
    if mapping is not None and recipe is not None:
        raise RecipeError(
            [
                Problem(
                    "fatal",
                    str(recipe),
                    None,
                    None,
                    "both a mapping and a recipe were given",
                    "give one of them; use keyword arguments to override single fields",
                )
            ]
        )
    base = load_recipe(recipe) if recipe is not None else mapping
    return mapping_from_options(base=base, **mapping_kwargs)


def _read_repeats(spec: str, main: RawTable, encoding: str | None) -> RawTable:
    """Find and read the repeat readings: a file (relative paths beside the main file) or an Excel sheet."""
    path = Path(spec)
    if not path.is_absolute() and main.path is not None:
        path = main.path.parent / path
    if path.is_file():
        return read_table(path, encoding=encoding)
    if main.kind == "excel" and spec in main.sheet_names:
        return read_table(main.path, sheet=spec)
    where = f" (looked in {path.parent})" if main.path is not None else ""
    sheets = f", nor a sheet of {main.label}" if main.kind == "excel" else ""
    raise InputError(
        [
            Problem(
                "fatal",
                spec,
                None,
                None,
                f"repeat-readings file not found{where}{sheets}",
                "give the path of the repeat-readings file (relative paths are taken beside the "
                "junction table)",
                "file_not_found",
            )
        ]
    )


def read_junctions(
    source: str | os.PathLike | pd.DataFrame,
    mapping: ColumnMapping | None = None,
    *,
    recipe: str | os.PathLike | None = None,
    **mapping_kwargs: Any,
) -> JunctionTable:
    """Read, convert and validate a table of branching junctions.

    Parameters
    ----------
    source : str, path-like or pandas.DataFrame
        CSV, TSV, semicolon-separated (decimal comma), Parquet or Excel (.xlsx) file, or a DataFrame (which
        is not changed). Row numbers in messages count the header as row 1. Text files may start with a
        byte-order mark, use CRLF line ends and quote fields (RFC 4180); spaces around column names are
        ignored.
    mapping : ColumnMapping, optional
        How the columns map onto junctions.
    recipe : str or path-like, optional
        A TOML recipe file instead of ``mapping``.
    **mapping_kwargs
        Mapping fields given directly or overriding the mapping/recipe, e.g. ``parent="r0"``,
        ``daughters=["r1", "r2"]``, ``unit="um"``, ``measure="diameter"``, ``rel_error=0.05``.
        ``encoding="latin-1"`` (any Python codec name; recipe key ``encoding`` under ``[input]``) reads text
        files in that encoding instead of UTF-8; it applies to a repeat-readings text file too.

    Notes
    -----
    Size and standard-error cells must be numbers or empty. Words that stand for a missing value
    (:data:`allobranch.intake.validate.MISSING_WORDS`, e.g. ``NA``, ``n/a``, ``#N/A``), infinite values and
    numbers too large to represent are refused with the row and column, so that no reading is treated as
    absent by accident. An empty cell in the third or later daughter column means that junction has fewer
    daughters; an empty standard-error cell is kept and flagged.

    Returns
    -------
    JunctionTable
        One row per junction with radii in mm (px stays px); flags and excluded rows in ``.report``.

    Raises
    ------
    InputError
        Listing every problem (file, row, column, what to do) when the table cannot be used.
    RecipeError
        When the mapping is incomplete or inconsistent.

    Examples
    --------
    >>> import pandas as pd
    >>> df = pd.DataFrame({"p": [1.0], "a": [0.8], "b": [0.7]})
    >>> read_junctions(df, parent="p", daughters=["a", "b"], unit="mm").n_junctions
    1
    """
    checked = resolve_mapping(mapping, recipe=recipe, **mapping_kwargs)
    raw = read_table(source, sheet=checked.sheet, encoding=checked.encoding)
    repeats = _read_repeats(checked.repeats, raw, checked.encoding) if checked.repeats else None
    return build_junction_table(raw, checked, repeats)
