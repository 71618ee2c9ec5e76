"""Per-junction geometry as the user's table: radii back in the user's unit beside each junction's exponent."""

from __future__ import annotations

import os
from pathlib import Path

import pandas as pd

from allobranch.conventions import JUNCTIONS_FILE
from allobranch.geometry import junction_geometry
from allobranch.geometry.exponent import JUNCTION_ID_COLUMNS
from allobranch.intake.table import JunctionTable
from allobranch.intake.units import from_internal_radius
from allobranch.io import atomic_write, prepare_output_dir


def junction_table(table: JunctionTable, geometry: pd.DataFrame | None = None) -> pd.DataFrame:
    """Per-junction geometry with the radii converted back to the user's unit.

    Parameters
    ----------
    table : JunctionTable
        The validated table.
    geometry : pandas.DataFrame, optional
        :func:`allobranch.junction_geometry` of ``table`` (computed here when not given).

    Returns
    -------
    pandas.DataFrame
        Identification columns (taxon, specimen, junction, source_row, n_daughters), then
        ``parent_radius_<unit>``, ``d1_radius_<unit>``, ..., then the geometry columns.
    """
    geometry = junction_geometry(table) if geometry is None else geometry
    ident = list(JUNCTION_ID_COLUMNS)
    out = geometry[ident].copy()
    for col in ["parent", *table.daughter_columns]:
        out[f"{col}_radius_{table.unit}"] = from_internal_radius(table.data[col].to_numpy(), table.unit)
    return pd.concat([out, geometry.drop(columns=ident)], axis=1)


def write_junctions(
    table: JunctionTable,
    out: str | os.PathLike,
    *,
    geometry: pd.DataFrame | None = None,
    force: bool = False,
) -> Path:
    """Write :func:`junction_table` as ``junctions.csv`` into the folder ``out``, atomically.

    Parameters
    ----------
    table : JunctionTable
    out : str or os.PathLike
        Output folder (created when missing).
    geometry : pandas.DataFrame, optional
        :func:`allobranch.junction_geometry` of ``table``, when already computed.
    force : bool
        Replace an existing ``junctions.csv``.

    Returns
    -------
    pathlib.Path
        ``out/junctions.csv``.

    Raises
    ------
    OutputExistsError
        When ``junctions.csv`` is already in ``out`` (without ``force``) or ``out`` is a file.
    """
    folder = prepare_output_dir(out, [JUNCTIONS_FILE], force=force)
    frame = junction_table(table, geometry)
    return atomic_write(folder / JUNCTIONS_FILE, lambda p: frame.to_csv(p, index=False))
