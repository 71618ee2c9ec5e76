"""Taxon traits: a table with one row per taxon, joined to the junction table by taxon name."""

from __future__ import annotations

import dataclasses
import os
from collections.abc import Sequence

import numpy as np
import pandas as pd

from allobranch.errors import InputError, Problem
from allobranch.intake.readers import read_table
from allobranch.intake.table import JunctionTable
from allobranch.intake.validate import describe_unusable, parse_numbers


def read_traits(
    source: str | os.PathLike | pd.DataFrame,
    columns: Sequence[str],
    *,
    taxon_column: str = "taxon",
    encoding: str | None = None,
) -> pd.DataFrame:
    """Read numeric traits per taxon.

    Parameters
    ----------
    source : str, path-like or pandas.DataFrame
        A table (CSV, TSV, Excel, Parquet, or a DataFrame) with one row per taxon.
    columns : sequence of str
        The trait columns to read (e.g. ``["log_body_mass"]``); every cell must be a finite number.
    taxon_column : str
        The column naming the taxon (matched to the junction table's taxon labels).
    encoding : str, optional
        Text encoding of a text file.

    Returns
    -------
    pandas.DataFrame
        Index: taxon label; one float column per trait.

    Raises
    ------
    InputError
        Naming the file, row and column of every missing column, duplicate taxon and unusable value.
    """
    raw = read_table(source, encoding=encoding)
    problems: list[Problem] = []
    present = list(raw.frame.columns)
    for col in [taxon_column, *columns]:
        if col not in present:
            problems.append(
                Problem(
                    "fatal",
                    raw.label,
                    1,
                    col,
                    f"the column '{col}' is not in the trait table; its columns are {', '.join(map(repr, present))}",
                    "check the spelling of --trait / --traits-taxon, or the header of the trait file",
                    "missing_column",
                )
            )
    if problems:
        raise InputError(problems)
    names = raw.frame[taxon_column].astype(str).str.strip()
    for row, name in zip(raw.rows, names):
        if not name or name.lower() in ("nan", "none"):
            problems.append(
                Problem(
                    "fatal",
                    raw.label,
                    int(row),
                    taxon_column,
                    "the taxon name is empty",
                    "fill it in or remove the row",
                    "missing_label",
                )
            )
    dup = names[names.duplicated(keep=False)]
    for i in dup.index:
        problems.append(
            Problem(
                "fatal",
                raw.label,
                int(raw.rows[i]),
                taxon_column,
                f"the taxon '{names[i]}' has more than one row",
                "keep one row per taxon (average repeated values yourself if that is what you mean)",
                "duplicate_taxon",
            )
        )
    values = {}
    for col in columns:
        vals, bad = parse_numbers(raw.frame[col], raw.decimal)
        for i in np.flatnonzero(bad | np.isnan(vals)):
            message = (
                describe_unusable(raw.frame[col].iloc[i], raw.decimal)[0]
                if bad[i]
                else "the value is missing"
            )
            problems.append(
                Problem(
                    "fatal",
                    raw.label,
                    int(raw.rows[i]),
                    col,
                    message,
                    "write every trait as a finite number; a taxon without a value cannot enter a model with "
                    "this trait",
                    "bad_trait",
                )
            )
        values[col] = vals
    if problems:
        raise InputError(problems)
    out = pd.DataFrame(values, index=pd.Index(names.to_numpy(), name="taxon"))
    out.attrs["source"] = raw.label
    return out


def attach_traits(
    table: JunctionTable,
    traits: str | os.PathLike | pd.DataFrame,
    columns: Sequence[str],
    *,
    taxon_column: str = "taxon",
    encoding: str | None = None,
) -> JunctionTable:
    """A copy of ``table`` carrying taxon traits for the model's ``traits=`` (see :class:`ModelSpec`).

    Every taxon of the junction table needs a row; taxa of the trait table without junctions are not
    used and are listed as flags in the table's validation report (nothing is dropped silently).

    Raises
    ------
    InputError
        For taxa without a trait row, naming the trait file and the taxa.
    """
    tt = read_traits(traits, columns, taxon_column=taxon_column, encoding=encoding)
    label = tt.attrs.get("source", "<DataFrame>")
    missing = [t for t in table.taxa if str(t) not in tt.index]
    if missing:
        raise InputError(
            [
                Problem(
                    "fatal",
                    label,
                    None,
                    taxon_column,
                    f"the taxon '{t}' of {table.source} has no row in the trait table",
                    "add a row for it (names must match the junction table's taxon labels exactly)",
                    "taxon_without_trait",
                )
                for t in missing
            ]
        )
    unused = [t for t in tt.index if t not in set(map(str, table.taxa))]
    report = dataclasses.replace(table.report, problems=list(table.report.problems))
    for t in unused:
        report.problems.append(
            Problem(
                "flag",
                label,
                None,
                taxon_column,
                f"the trait table's taxon '{t}' has no junctions and is not used",
                "nothing to do if intended; otherwise check the spelling against the junction table",
                "trait_taxon_unused",
            )
        )
    kept = tt.loc[[str(t) for t in table.taxa]]
    kept.attrs["source"] = label
    return dataclasses.replace(table, taxon_traits=kept, report=report)
