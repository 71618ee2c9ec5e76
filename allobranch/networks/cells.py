"""Reading the cells of a network table (segment table or edge list) with the user's row numbers.

Numbers and labels are parsed by the intake stage's cell rules (:mod:`allobranch.intake.validate`), so a
network table accepts exactly what a junction table accepts; the messages here speak of segments.
"""

from __future__ import annotations

import dataclasses
import os
from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np
import pandas as pd

from allobranch.errors import InputError, Problem
from allobranch.intake.readers import RawTable, read_table
from allobranch.intake.validate import (
    DEFAULT_TAXON,
    _blank_rows,
    _Collector,
    _label,
    describe_unusable,
    parse_numbers,
)
from allobranch.networks.result import check_rule
from allobranch.networks.rules import CONTINUATION_RULES, ROOT_RULES


@dataclass(frozen=True)
class TableSettings:
    """How a network table (segment table or edge list) is read and its segments joined: the options the
    segment-table and edge-list converters share.

    Attributes
    ----------
    size : str
        Column with each segment's (or edge's) size.
    length : str, optional
        Column with segment lengths; merged continuations then take the length-weighted mean size.
    taxon, specimen : str, optional
        Grouping columns (default: one taxon; one specimen per taxon); segment ids are unique within a
        specimen.
    continuations : {"merge", "keep"}
        Segments with exactly one child (see :mod:`allobranch.networks.segments`).
    roots : {"one", "many"}
        ``"one"`` refuses a specimen with several trees; ``"many"`` accepts a forest.
    sheet, encoding
        As in :func:`allobranch.read_junctions`.

    Raises
    ------
    RecipeError
        For an unknown ``continuations`` or ``roots`` value.
    """

    size: str
    length: str | None = None
    taxon: str | None = None
    specimen: str | None = None
    continuations: str = "merge"
    roots: str = "one"
    sheet: str | int | None = None
    encoding: str | None = None

    def __post_init__(self) -> None:
        check_rule("continuations", self.continuations, CONTINUATION_RULES)
        check_rule("roots", self.roots, ROOT_RULES)

    @classmethod
    def split(cls, size: str, options: dict[str, Any]) -> tuple[TableSettings, dict[str, Any]]:
        """The settings among keyword arguments, and the rest (measurement conventions).

        Parameters
        ----------
        size : str
            The size column.
        options : dict
            Keyword arguments of a converter: settings (``length``, ``taxon``, ...) and the measurement
            conventions passed on to :func:`allobranch.read_junctions` (``unit``, ``measure``, ...).

        Returns
        -------
        settings : TableSettings
        measurement : dict
            The keyword arguments that are not settings.

        Examples
        --------
        >>> settings, rest = TableSettings.split("r", {"length": "len", "unit": "mm"})
        >>> settings.length, settings.continuations, rest
        ('len', 'merge', {'unit': 'mm'})
        """
        names = {f.name for f in dataclasses.fields(cls)} - {"size"}
        chosen = {k: v for k, v in options.items() if k in names}
        return cls(size=size, **chosen), {k: v for k, v in options.items() if k not in names}


def check_columns(raw: RawTable, roles: Sequence[tuple[str | None, str]], option: str = "options") -> None:
    """Raise if a mapped column is not in the table, or one column is given two roles.

    Parameters
    ----------
    raw : RawTable
        The table as read.
    roles : sequence of (column or None, role)
        Every mapped column with what it is used for; ``None`` columns are not mapped.
    option : str
        Where the names came from, for the hint.
    """
    present = [str(c) for c in raw.frame.columns]
    mapped = [(c, r) for c, r in roles if c is not None]
    problems = [
        Problem(
            "fatal",
            raw.label,
            1,
            c,
            f"the {role} column '{c}' is not in the file; its columns are: {', '.join(map(repr, present))}",
            f"check the spelling and capitals of the column name in your {option}",
            "missing_column",
        )
        for c, role in mapped
        if c not in present
    ]
    names = [c for c, _ in mapped]
    twice = sorted({c for c in names if names.count(c) > 1})
    problems += [
        Problem(
            "fatal",
            raw.label,
            1,
            c,
            f"column '{c}' is used for more than one role ({', '.join(r for n, r in mapped if n == c)})",
            "map each column to one role only",
            "column_twice",
        )
        for c in twice
    ]
    if problems:
        raise InputError(problems)


def non_blank(raw: RawTable, out: _Collector) -> tuple[np.ndarray, np.ndarray]:
    """Positions and user rows of the non-blank rows; blank rows are listed as excluded in ``out``."""
    blank = _blank_rows(raw, out)
    keep = np.flatnonzero(~blank)
    if not len(keep):
        out.add(
            "fatal",
            None,
            None,
            "the table has no data rows (only blank rows)",
            "add one row per segment",
            "empty_table",
        )
    return keep, raw.rows[keep]


def labels(
    raw: RawTable,
    keep: np.ndarray,
    rows: np.ndarray,
    column: str | None,
    what: str,
    out: _Collector,
    *,
    required: bool = True,
) -> list[str | None]:
    """Labels of a column as trimmed text (``2.0`` gives ``"2"``); missing ones reported when required.

    Parameters
    ----------
    raw : RawTable
        The table as read.
    keep, rows : numpy.ndarray
        Positions and user rows of the rows to read (see :func:`non_blank`).
    column : str or None
        The column; ``None`` gives ``None`` for every row.
    what : str
        What the label is, for messages (``"segment id"``).
    out : _Collector
        Collects the problems.
    required : bool
        Report an empty cell as fatal; otherwise it gives ``None``.

    Returns
    -------
    list of str or None
    """
    if column is None:
        return [None] * len(keep)
    values = [_label(v) for v in raw.frame[column].iloc[keep].tolist()]
    if required:
        for i in np.flatnonzero([v is None for v in values]):
            out.add(
                "fatal",
                rows[i],
                column,
                f"the {what} is missing",
                f"fill in the {what} for this row",
                "missing_label",
            )
    return values


def positive_numbers(
    raw: RawTable, keep: np.ndarray, rows: np.ndarray, column: str | None, what: str, out: _Collector
) -> np.ndarray | None:
    """A column of positive numbers; every empty, unusable, zero or negative cell is reported as fatal.

    Parameters
    ----------
    raw : RawTable
        The table as read.
    keep, rows : numpy.ndarray
        Positions and user rows of the rows to read.
    column : str or None
        The column; ``None`` gives ``None``.
    what : str
        What the number is (``"size"``, ``"length"``), for messages.
    out : _Collector
        Collects the problems.

    Returns
    -------
    numpy.ndarray or None
        The numbers (NaN where reported).
    """
    if column is None:
        return None
    cells = raw.frame[column].iloc[keep]
    values, bad = parse_numbers(cells, raw.decimal)
    mark = "comma" if raw.decimal == "," else "point"
    for i in np.flatnonzero(bad):
        message, kind = describe_unusable(cells.iloc[i], raw.decimal)
        out.add(
            "fatal",
            rows[i],
            column,
            message,
            f"write the {what} as a plain positive number (decimal {mark})",
            kind,
        )
    for i in np.flatnonzero(np.isnan(values) & ~bad):
        out.add(
            "fatal",
            rows[i],
            column,
            f"the {what} is missing",
            f"fill in the segment's {what}; every segment needs one (remove a segment that was not measured and "
            "re-attach its children)",
            "missing_size",
        )
    for i in np.flatnonzero(values <= 0):
        out.add(
            "fatal",
            rows[i],
            column,
            f"the {what} is {values[i]:g}; it must be positive",
            f"correct the {what}",
            "nonpositive_size",
        )
    return values


def raise_fatal(out: _Collector) -> None:
    """Raise every fatal problem collected so far (ordered by row), with the other findings after them."""
    if out.fatal:
        raise InputError(sorted(out.fatal, key=lambda p: p.row or 0) + out.other)


def check_specimen_taxa(
    taxon: np.ndarray, specimen: np.ndarray, rows: np.ndarray, column: str, out: _Collector
) -> None:
    pairs = pd.DataFrame({"taxon": taxon, "specimen": specimen, "row": rows}).drop_duplicates(
        ["specimen", "taxon"]
    )
    for spec, group in pairs.groupby("specimen", sort=False):
        if len(group) > 1:
            where = "; ".join(f"'{t}' (row {r})" for t, r in zip(group["taxon"], group["row"]))
            out.add(
                "fatal",
                int(group["row"].iloc[1]),
                column,
                f"specimen '{spec}' is listed under more than one taxon: {where}",
                "a specimen belongs to one taxon; correct the taxon or give the specimens distinct labels",
                "specimen_in_two_taxa",
            )


@dataclass
class NetworkRows:
    """The checked cells of a network table (segment table or edge list).

    Attributes
    ----------
    raw : RawTable
        The table as read.
    out : _Collector
        Problems found so far (none fatal) and more to come.
    rows : numpy.ndarray
        The user's row of every non-blank row.
    ids : list of list of (str or None)
        The id columns' labels, in the order asked for.
    taxon, specimen : numpy.ndarray of object
        Group labels (defaults: one taxon; one specimen per taxon).
    size : numpy.ndarray
        Sizes.
    length : numpy.ndarray or None
        Lengths, when a column is named.
    """

    raw: RawTable
    out: _Collector
    rows: np.ndarray
    ids: list[list[str | None]]
    taxon: np.ndarray
    specimen: np.ndarray
    size: np.ndarray
    length: np.ndarray | None


def read_network_rows(
    source: str | os.PathLike | pd.DataFrame, *, ids: Sequence[tuple[str, str, bool]], settings: TableSettings
) -> NetworkRows:
    """Read a network table and check its id, group, size and length cells.

    Parameters
    ----------
    source : str, path-like or pandas.DataFrame
        The table.
    ids : sequence of (column, what, required)
        Id columns, what they hold (for messages) and whether an empty cell is an error.
    settings : TableSettings
        The size, length and grouping columns, the sheet and the encoding.

    Returns
    -------
    NetworkRows

    Raises
    ------
    InputError
        Naming file, row and column: missing columns, blank tables, missing labels, unusable sizes or
        lengths, a specimen under two taxa.
    """
    size, length, taxon, specimen = settings.size, settings.length, settings.taxon, settings.specimen
    raw = read_table(source, sheet=settings.sheet, encoding=settings.encoding)
    roles = [(c, what) for c, what, _ in ids]
    check_columns(raw, [*roles, (size, "size"), (length, "length"), (taxon, "taxon"), (specimen, "specimen")])
    out = _Collector(raw.label)
    keep, rows = non_blank(raw, out)
    raise_fatal(out)
    id_labels = [labels(raw, keep, rows, c, what, out, required=req) for c, what, req in ids]
    taxa = labels(raw, keep, rows, taxon, "taxon", out) if taxon else [DEFAULT_TAXON] * len(keep)
    specimens = labels(raw, keep, rows, specimen, "specimen", out) if specimen else list(taxa)
    sizes = positive_numbers(raw, keep, rows, size, "size", out)
    lengths = positive_numbers(raw, keep, rows, length, "length", out)
    taxa_arr = np.array([x or "" for x in taxa], dtype=object)
    spec_arr = np.array([x or "" for x in specimens], dtype=object)
    if specimen:
        check_specimen_taxa(taxa_arr, spec_arr, rows, taxon or specimen, out)
    return NetworkRows(raw, out, rows, id_labels, taxa_arr, spec_arr, sizes, lengths)
