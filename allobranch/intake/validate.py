"""Turn a raw table (and optional repeat readings) into a validated :class:`JunctionTable`.

All fatal problems are collected before anything is raised, so the user can fix the whole file at once.
Rows that are kept but look suspicious are flagged, and blank rows are reported as excluded; nothing is
dropped or changed silently. Row numbers are those the user sees in the file (header = row 1).
"""

from __future__ import annotations

import math
import numbers
from collections import defaultdict
from collections.abc import Hashable

import numpy as np
import pandas as pd

from allobranch.errors import InputError, Problem
from allobranch.intake.mapping import ColumnMapping
from allobranch.intake.readers import RawTable
from allobranch.intake.table import COVARIATE_PREFIX, JunctionTable, ValidationReport
from allobranch.intake.units import radius_factor

#: Taxon label used when no taxon column is mapped: every junction then belongs to this one taxon (and,
#: without a specimen column, to one specimen of the same name). It names a taxon, not the population (the
#: top level of the hierarchy, :data:`allobranch.conventions.POPULATION`); tables read before this label was
#: introduced called it "all".
DEFAULT_TAXON = "single taxon"

#: Cell texts that stand for "no value" in common exports (compared case-insensitively after trimming spaces).
#: In number columns they are refused, so that no reading is taken as absent by accident (an absent
#: reading is an empty cell); in label columns they count as a missing label.
MISSING_WORDS: frozenset[str] = frozenset({"na", "n/a", "nan", "-nan", "null", "none", "#n/a", "#na", "<na>"})

#: Why a number cell cannot be used, as found by :func:`parse_numbers` (kind -> what is said about the cell).
UNUSABLE_NUMBER: dict[str, str] = {
    "missing_word": "is a missing-value word, not a number",
    "nonfinite": "is not a finite number",
    "overflow": "is too large to be a number (it overflows to infinity)",
    "not_numeric": "is not a number",
}

#: Columns of a repeat-readings table; ``specimen`` may be left out when specimens are not mapped.
REPEAT_COLUMNS: tuple[str, ...] = ("specimen", "junction", "segment", "value")

# Thresholds for flagging (not excluding) extreme junctions. They are common screening practice for
# segmentation errors, not taken from any published source.
MIN_DAUGHTER_PARENT_RATIO = 0.05
MIN_SIBLING_RATIO = 0.1


# -- cell parsing --------------------------------------------------------------------------------------
def _is_empty(value: object) -> bool:
    """An empty cell: nothing, a native missing value, or only spaces."""
    if value is None or value is pd.NA:
        return True
    if isinstance(value, float) and math.isnan(value):
        return True
    return isinstance(value, str) and not value.strip()


def _is_missing_word(value: object) -> bool:
    return isinstance(value, str) and value.strip().lower() in MISSING_WORDS


def _parse_cell(value: object, decimal: str) -> tuple[float, str | None]:
    """One cell as ``(number, None)``; ``(nan, None)`` when empty; ``(nan, kind)`` when unusable."""
    if _is_empty(value):
        return math.nan, None
    if _is_missing_word(value):
        return math.nan, "missing_word"
    if isinstance(value, bool | np.bool_) or not isinstance(value, numbers.Real | str):
        return math.nan, "not_numeric"
    text = value.strip() if isinstance(value, str) else None
    if text is not None:
        if "_" in text:
            return math.nan, "not_numeric"
        if decimal == "," and "," in text:
            if "." in text or text.count(",") > 1:
                return math.nan, "not_numeric"
            text = text.replace(",", ".")
    try:
        number = float(value if text is None else text)
    except OverflowError:  # a Python int beyond the float range
        return math.nan, "overflow"
    except ValueError:
        return math.nan, "not_numeric"
    if math.isfinite(number):
        return number, None
    if math.isinf(number) and text is not None and "inf" not in text.lower():  # "1e400"
        return math.nan, "overflow"
    return math.nan, "nonfinite"


def parse_numbers(cells: pd.Series, decimal: str = ".") -> tuple[np.ndarray, np.ndarray]:
    """Parse a column of cells as numbers without altering them.

    Parameters
    ----------
    cells : pandas.Series
        Cells as read (text or native values).
    decimal : {".", ","}
        Decimal mark of numbers written as text.

    Returns
    -------
    values : numpy.ndarray
        Finite floats; NaN for empty cells and for cells that are not usable numbers.
    not_number : numpy.ndarray of bool
        True where a cell holds something other than a finite number or nothing: text such as ``"12 um"``
        or ``"?"``, a word in :data:`MISSING_WORDS`, an infinite value, or a number too large to represent
        (``"1e400"``). :func:`describe_unusable` says which.

    Examples
    --------
    >>> import pandas as pd
    >>> parse_numbers(pd.Series(["1,5", "", "x", "NA"]), decimal=",")
    (array([1.5, nan, nan, nan]), array([False, False,  True,  True]))
    """
    parsed = [_parse_cell(v, decimal) for v in cells.tolist()]
    values = np.array([number for number, _ in parsed], dtype=float)
    bad = np.array([kind is not None for _, kind in parsed], dtype=bool)
    return values, bad


def describe_unusable(cell: object, decimal: str = ".") -> tuple[str, str]:
    """Say why :func:`parse_numbers` refused a cell.

    Parameters
    ----------
    cell : object
        The cell as read.
    decimal : {".", ","}
        Decimal mark of numbers written as text.

    Returns
    -------
    message : str
        What is wrong, quoting the cell.
    kind : str
        A key of :data:`UNUSABLE_NUMBER`.

    Examples
    --------
    >>> describe_unusable(" n/a ")
    ("' n/a ' is a missing-value word, not a number", 'missing_word')
    >>> describe_unusable("1e400")[1], describe_unusable("-inf")[1], describe_unusable("12 um")[1]
    ('overflow', 'nonfinite', 'not_numeric')
    """
    kind = _parse_cell(cell, decimal)[1]
    if kind is None:
        raise ValueError(f"{cell!r} is empty or a usable number")
    return f"{cell!r} {UNUSABLE_NUMBER[kind]}", kind


def _label(value: object) -> str | None:
    """A grouping label as trimmed text; ``None`` when empty or a missing-value word; ``2.0`` gives ``"2"``."""
    if _is_empty(value) or _is_missing_word(value):
        return None
    if isinstance(value, float) and value.is_integer():
        return str(int(value))
    return str(value).strip()


def _blank_rows(raw: RawTable, out: _Collector) -> np.ndarray:
    """Which rows of ``raw`` are blank; each is recorded in ``out`` as excluded (never dropped silently)."""
    frame = raw.frame
    blank = np.ones(len(frame), dtype=bool) if frame.shape[1] else np.zeros(len(frame), dtype=bool)
    for col in frame.columns:
        blank &= np.array([_is_empty(v) for v in frame[col].tolist()], dtype=bool)
    for r in raw.rows[blank]:
        out.add(
            "excluded",
            r,
            None,
            "blank row",
            "not used; delete it if the row was meant to be empty",
            "blank_row",
        )
    return blank


def _fmt(value: float) -> str:
    return f"{value:g}"


class _Collector:
    """Accumulates problems for one file."""

    def __init__(self, label: str) -> None:
        self.label = label
        self.fatal: list[Problem] = []
        self.other: list[Problem] = []

    def add(
        self, severity: str, row: int | None, column: Hashable | None, message: str, hint: str, code: str
    ) -> None:
        problem = Problem(
            severity,
            self.label,
            None if row is None else int(row),
            None if column is None else str(column),
            message,
            hint,
            code,
        )
        (self.fatal if severity == "fatal" else self.other).append(problem)


# -- the junction table ---------------------------------------------------------------------------------
def _check_columns(raw: RawTable, mapping: ColumnMapping) -> None:
    roles: list[tuple[str, str]] = [(mapping.parent, "parent"), *((d, "daughter") for d in mapping.daughters)]
    roles += [
        (c, r)
        for c, r in ((mapping.taxon, "taxon"), (mapping.specimen, "specimen"), (mapping.junction, "junction"))
        if c is not None
    ]
    roles += [(c, "standard error") for c in mapping.se]
    roles += [(c, "covariate") for c in mapping.covariates]
    present = [str(c) for c in raw.frame.columns]
    missing = [(c, r) for c, r in roles if c not in present]
    if missing:
        have = ", ".join(repr(c) for c in present)
        raise InputError(
            [
                Problem(
                    "fatal",
                    raw.label,
                    1,
                    c,
                    f"the {role} column '{c}' is not in the file; its columns are: {have}",
                    "check the spelling and capitals of the column name in your options or recipe",
                    "missing_column",
                )
                for c, role in missing
            ]
        )


#: What to do about an unusable number cell, by the column's role and by the kind of problem (see
#: :data:`UNUSABLE_NUMBER`; an overflow gets the non-finite hint); ``{decimal}`` becomes the decimal mark.
_NUMBER_HINTS: dict[str, dict[str, str]] = {
    "size": {
        "missing_word": "write the measured size; leave the cell empty only where a third or later daughter is "
        "absent, and remove the row if the junction was not measured",
        "nonfinite": "write a finite positive size",
        "not_numeric": "write sizes as plain numbers (decimal {decimal}), or leave the cell empty for no value",
    },
    "se": {
        "missing_word": "write the standard error as a number, or leave the cell empty if it is not known (the "
        "row is then kept with that reading's absolute error unknown)",
        "nonfinite": "write standard errors as finite non-negative numbers",
        "not_numeric": "write standard errors as plain non-negative numbers (decimal {decimal})",
    },
    "covariate": {
        "missing_word": "write the covariate's value for every junction, or remove the row (a junction without "
        "it cannot enter a model that uses it)",
        "nonfinite": "write covariates as finite numbers",
        "not_numeric": "write covariates as plain numbers (decimal {decimal})",
    },
    "repeat": {
        "missing_word": "write the reading as a number, or remove the row if it was not taken",
        "nonfinite": "write repeat readings as finite positive numbers",
        "not_numeric": "write repeat readings as plain numbers (decimal {decimal})",
    },
}


def _parse_column(
    cells: pd.Series, rows: np.ndarray, column: str, role: str, decimal: str, out: _Collector
) -> tuple[np.ndarray, np.ndarray]:
    """Parse a number column, reporting every unusable cell as fatal; as :func:`parse_numbers`."""
    values, bad = parse_numbers(cells, decimal)
    mark = "comma" if decimal == "," else "point"
    for i in np.flatnonzero(bad):
        message, kind = describe_unusable(cells.iloc[i], decimal)
        if kind in ("nonfinite", "overflow"):
            kind, code = "nonfinite", f"nonfinite_{role}"
        else:
            code = kind
        out.add("fatal", rows[i], column, message, _NUMBER_HINTS[role][kind].format(decimal=mark), code)
    return values, bad


def _parse_covariates(
    raw: RawTable, sub: pd.DataFrame, rows: np.ndarray, mapping: ColumnMapping, out: _Collector
) -> dict[str, np.ndarray]:
    """Covariate columns as floats; an empty or unusable cell is fatal (with its row and column)."""
    found = {}
    for col in mapping.covariates:
        values, bad = _parse_column(sub[col], rows, col, "covariate", raw.decimal, out)
        for i in np.flatnonzero(np.isnan(values) & ~bad):
            out.add(
                "fatal",
                rows[i],
                col,
                "the covariate value is missing",
                _NUMBER_HINTS["covariate"]["missing_word"],
                "missing_covariate",
            )
        found[col] = values
    return found


def _parse_sizes(
    raw: RawTable, sub: pd.DataFrame, rows: np.ndarray, mapping: ColumnMapping, out: _Collector
) -> np.ndarray:
    """Sizes as floats, shape (n, 1 + K): parent first, then daughter columns in the user's order."""
    sizes = np.empty((len(sub), len(mapping.size_columns)))
    for j, col in enumerate(mapping.size_columns):
        role = "parent" if j == 0 else f"daughter {j}"
        values, bad = _parse_column(sub[col], rows, col, "size", raw.decimal, out)
        if j <= 2:
            for i in np.flatnonzero(np.isnan(values) & ~bad):
                out.add(
                    "fatal",
                    rows[i],
                    col,
                    f"the {role} size is missing",
                    "fill it in, or remove the row: every junction needs a parent and at least two daughters"
                    " (the first two daughter columns)",
                    "missing_size",
                )
        for i in np.flatnonzero(values <= 0):
            out.add(
                "fatal",
                rows[i],
                col,
                f"the {role} size is {_fmt(values[i])}; sizes must be positive",
                "correct the value, or leave a third or later daughter cell empty if that daughter is absent",
                "nonpositive_size",
            )
        sizes[:, j] = values
    return sizes


def _parse_se(
    raw: RawTable,
    sub: pd.DataFrame,
    rows: np.ndarray,
    mapping: ColumnMapping,
    sizes: np.ndarray,
    out: _Collector,
) -> np.ndarray:
    """Standard errors aligned with ``sizes`` (NaN where not given or where the size is absent)."""
    se = np.full(sizes.shape, np.nan)
    if not mapping.se:
        return se
    for j, col in enumerate(mapping.se):
        values, _ = _parse_column(sub[col], rows, col, "se", raw.decimal, out)
        for i in np.flatnonzero(values < 0):
            out.add(
                "fatal",
                rows[i],
                col,
                f"standard error {_fmt(values[i])} is negative",
                "write standard errors as finite non-negative numbers",
                "bad_se",
            )
        if len(mapping.se) == 1:
            se[:] = values[:, None]
        else:
            se[:, j] = values
    present = ~np.isnan(sizes)
    for i, j in zip(*np.nonzero(present & np.isnan(se)), strict=True):
        col = mapping.se[0] if len(mapping.se) == 1 else mapping.se[j]
        out.add(
            "flag",
            rows[i],
            col,
            f"no standard error for {mapping.size_columns[j]!r}",
            "kept; the model will treat this reading's absolute error as unknown",
            "se_missing",
        )
    if len(mapping.se) > 1:
        for i, j in zip(*np.nonzero(~present & ~np.isnan(se)), strict=True):
            out.add(
                "flag",
                rows[i],
                mapping.se[j],
                f"a standard error is given but {mapping.size_columns[j]!r} is empty",
                "kept, but this standard error is not used; check the row",
                "se_without_size",
            )
    se[~present] = np.nan
    return se


def _labels(
    sub: pd.DataFrame, col: str | None, rows: np.ndarray, default: list[str], role: str, out: _Collector
) -> list[str]:
    """Labels of a grouping column as text, or ``default`` when the column is not mapped."""
    if col is None:
        return default
    labels = [_label(v) for v in sub[col].tolist()]
    for i, lab in enumerate(labels):
        if lab is None:
            out.add(
                "fatal",
                rows[i],
                col,
                f"the {role} label is missing",
                f"fill in the {role} for this row",
                "missing_label",
            )
    return [lab if lab is not None else "" for lab in labels]


def _check_groups(
    taxon: list[str],
    specimen: list[str],
    junction: list[str],
    rows: np.ndarray,
    mapping: ColumnMapping,
    out: _Collector,
) -> None:
    if mapping.specimen is not None:
        taxa_of: dict[str, dict[str, list[int]]] = defaultdict(lambda: defaultdict(list))
        for t, s, r in zip(taxon, specimen, rows, strict=True):
            if s:
                taxa_of[s][t].append(int(r))
        for s, by_taxon in taxa_of.items():
            if len(by_taxon) > 1:
                where = "; ".join(
                    f"'{t}' (rows {', '.join(map(str, rs[:5]))}{', ...' if len(rs) > 5 else ''})"
                    for t, rs in by_taxon.items()
                )
                second = list(by_taxon.values())[1][0]
                out.add(
                    "fatal",
                    second,
                    mapping.specimen,
                    f"specimen '{s}' is listed under more than one taxon: {where}",
                    "a specimen belongs to one taxon; correct the taxon or give the specimens distinct labels",
                    "specimen_in_two_taxa",
                )
    if mapping.junction is not None:
        seen: dict[tuple[str, str, str], list[int]] = defaultdict(list)
        for t, s, j, r in zip(taxon, specimen, junction, rows, strict=True):
            if j:
                seen[(t, s, j)].append(int(r))
        for (_, s, j), rs in seen.items():
            if len(rs) > 1:
                out.add(
                    "fatal",
                    rs[1],
                    mapping.junction,
                    f"junction '{j}' appears more than once in specimen '{s}' (rows {', '.join(map(str, rs))})",
                    "junction labels must be unique within a specimen; correct the label or remove the duplicate",
                    "duplicate_junction",
                )


def _flag_geometry(
    radii: np.ndarray, raw_sizes: np.ndarray, rows: np.ndarray, mapping: ColumnMapping, out: _Collector
) -> None:
    """Flag daughters at least as large as the parent, and extreme size ratios (rows kept)."""
    parent = radii[:, 0]
    daughters = radii[:, 1:]
    with np.errstate(invalid="ignore", divide="ignore"):
        ratio = daughters / parent[:, None]
        sibling = np.nanmin(daughters, axis=1) / np.nanmax(daughters, axis=1)
    for i, k in zip(*np.nonzero(ratio >= 1), strict=True):
        out.add(
            "flag",
            rows[i],
            mapping.daughters[k],
            f"daughter size {_fmt(raw_sizes[i, k + 1])} is not smaller than the parent's {_fmt(raw_sizes[i, 0])}",
            "kept; no branching exponent exists for this junction on its own (check the measurement)",
            "daughter_ge_parent",
        )
    for i, k in zip(*np.nonzero(ratio < MIN_DAUGHTER_PARENT_RATIO), strict=True):
        out.add(
            "flag",
            rows[i],
            mapping.daughters[k],
            f"daughter/parent ratio {ratio[i, k]:.3g} is below {MIN_DAUGHTER_PARENT_RATIO:g}",
            "kept; check the measurement or that this is a true daughter of the parent",
            "extreme_ratio",
        )
    for i in np.flatnonzero(sibling < MIN_SIBLING_RATIO):
        k = int(np.nanargmin(daughters[i]))
        out.add(
            "flag",
            rows[i],
            mapping.daughters[k],
            f"smallest daughter is {1 / sibling[i]:.3g} times smaller than its largest sibling",
            "kept; check the measurement or that this is a true daughter of the parent",
            "extreme_ratio",
        )


def _compact(values: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Move present daughters left, keeping their order; return the order used."""
    order = np.argsort(np.isnan(values), axis=1, kind="stable")
    return np.take_along_axis(values, order, axis=1), order


def build_junction_table(
    raw: RawTable, mapping: ColumnMapping, repeats: RawTable | None = None
) -> JunctionTable:
    """Validate a raw table against a mapping and build the junction table.

    Parameters
    ----------
    raw : RawTable
        The table as read by :func:`allobranch.intake.readers.read_table`.
    mapping : ColumnMapping
        The checked mapping (see :func:`allobranch.intake.recipe.check_mapping`).
    repeats : RawTable, optional
        Repeat readings with columns ``specimen`` (optional when specimens are not mapped), ``junction``,
        ``segment`` (``"parent"`` or one of the daughter column names) and ``value``.

    Returns
    -------
    JunctionTable
        Radii in mm (px for pixel units), one row per junction, with a report of flags and excluded rows.

    Raises
    ------
    InputError
        Listing every fatal problem in the table and the repeat readings.
    """
    _check_columns(raw, mapping)
    out = _Collector(raw.label)
    blank = _blank_rows(raw, out)
    if blank.all():
        out.add(
            "fatal",
            None,
            None,
            "the table has no data rows (only blank rows)",
            "add one row per junction below the header",
            "empty_table",
        )
        raise InputError(out.fatal + out.other)
    sub = raw.frame.loc[~blank]
    rows = raw.rows[~blank]

    raw_sizes = _parse_sizes(raw, sub, rows, mapping, out)
    raw_se = _parse_se(raw, sub, rows, mapping, raw_sizes, out)
    covariates = _parse_covariates(raw, sub, rows, mapping, out)
    taxon = _labels(sub, mapping.taxon, rows, [DEFAULT_TAXON] * len(sub), "taxon", out)
    specimen = _labels(sub, mapping.specimen, rows, list(taxon), "specimen", out)
    junction = _labels(sub, mapping.junction, rows, [str(r) for r in rows], "junction", out)
    _check_groups(taxon, specimen, junction, rows, mapping, out)

    factor = radius_factor(mapping.unit, mapping.measure)
    radii = raw_sizes * factor
    se = raw_se * factor
    valid = np.all(np.isfinite(radii[:, :3]) & (radii[:, :3] > 0), axis=1)
    _flag_geometry(radii[valid], raw_sizes[valid], rows[valid], mapping, out)

    daughters, order = _compact(radii[:, 1:])
    se_daughters = np.take_along_axis(se[:, 1:], order, axis=1)
    n_daughters = (~np.isnan(daughters)).sum(axis=1)
    k_max = int(n_daughters.max())
    data = pd.DataFrame(
        {
            "taxon": taxon,
            "specimen": specimen,
            "junction": junction,
            "source_row": rows.astype(int),
            "n_daughters": n_daughters.astype(int),
            "parent": radii[:, 0],
        }
    )
    for k in range(k_max):
        data[f"d{k + 1}"] = daughters[:, k]
    data["se_parent"] = se[:, 0]
    for k in range(k_max):
        data[f"se_d{k + 1}"] = se_daughters[:, k]
    for name, values in covariates.items():
        data[COVARIATE_PREFIX + name] = values

    repeat_frame = None
    if repeats is not None:
        slot = np.argsort(order, axis=1)  # slot[i, user_daughter] = position after compaction
        repeat_frame, rep_out = _build_repeats(repeats, mapping, data, slot, ~np.isnan(radii[:, 1:]), factor)
        out.fatal += rep_out.fatal
        out.other += rep_out.other

    def order_key(p: Problem) -> tuple[bool, int]:
        return (p.file != raw.label, p.row or 0)

    if out.fatal:
        raise InputError(sorted(out.fatal, key=order_key))
    report = ValidationReport(problems=sorted(out.other, key=order_key), n_rows_read=len(raw.frame))
    return JunctionTable(data=data, mapping=mapping, report=report, source=raw.label, repeats=repeat_frame)


# -- repeat readings ---------------------------------------------------------------------------------------
def _build_repeats(
    raw: RawTable,
    mapping: ColumnMapping,
    data: pd.DataFrame,
    slot: np.ndarray,
    present: np.ndarray,
    factor: float,
) -> tuple[pd.DataFrame, _Collector]:
    out = _Collector(raw.label)
    columns = [str(c) for c in raw.frame.columns]
    needed = [c for c in REPEAT_COLUMNS if not (c == "specimen" and mapping.specimen is None)]
    missing = [c for c in needed if c not in columns]
    if missing:
        for c in missing:
            out.add(
                "fatal",
                1,
                c,
                f"the repeat-readings table has no '{c}' column; its columns are: "
                + ", ".join(repr(c) for c in columns),
                f"name the columns {', '.join(REPEAT_COLUMNS)} (one row per repeat reading)",
                "missing_column",
            )
        return pd.DataFrame(columns=list(REPEAT_COLUMNS)), out
    blank = _blank_rows(raw, out)
    sub = raw.frame.loc[~blank]
    rows = raw.rows[~blank]

    index: dict[tuple[str, str], int] = {}
    by_junction: dict[str, list[int]] = defaultdict(list)
    for i, (s, j) in enumerate(zip(data["specimen"], data["junction"], strict=True)):
        index[(s, j)] = i
        by_junction[j].append(i)
    has_specimen = "specimen" in columns
    daughters_named = {name: k for k, name in enumerate(mapping.daughters)}
    allowed = ", ".join(repr(n) for n in ("parent", *mapping.daughters))

    values, bad = _parse_column(sub["value"], rows, "value", "repeat", raw.decimal, out)
    out_rows: list[dict[str, object]] = []
    specimens = [_label(v) for v in sub["specimen"].tolist()] if has_specimen else [None] * len(sub)
    junctions = [_label(v) for v in sub["junction"].tolist()]
    segments = [_label(v) for v in sub["segment"].tolist()]
    for i, row in enumerate(rows):
        value = values[i]
        if not bad[i] and not value > 0:
            what = "missing" if np.isnan(value) else f"{_fmt(value)}"
            out.add(
                "fatal",
                row,
                "value",
                f"the repeat reading is {what}; readings must be positive numbers",
                "correct the value or remove the row",
                "bad_repeat",
            )
        s, j, seg = specimens[i], junctions[i], segments[i]
        if j is None or (has_specimen and s is None):
            out.add(
                "fatal",
                row,
                "junction" if j is None else "specimen",
                "the label is missing",
                "fill in which junction this reading belongs to",
                "missing_label",
            )
            continue
        if has_specimen:
            target = index.get((s, j))
            if target is None:
                out.add(
                    "fatal",
                    row,
                    "junction",
                    f"there is no junction '{j}' in specimen '{s}' in the junction table",
                    "check the specimen and junction labels against the junction table",
                    "unknown_junction",
                )
                continue
        else:
            matches = by_junction.get(j, [])
            if len(matches) != 1:
                problem = "no" if not matches else "more than one"
                out.add(
                    "fatal",
                    row,
                    "junction",
                    f"{problem} junction '{j}' in the junction table",
                    "check the label; add a 'specimen' column when junction labels repeat across specimens",
                    "unknown_junction",
                )
                continue
            target = matches[0]
        if seg is None:
            out.add(
                "fatal", row, "segment", "the segment is missing", f"use one of: {allowed}", "missing_label"
            )
            continue
        if seg in ("parent", mapping.parent):
            segment = "parent"
        elif seg in daughters_named:
            k = daughters_named[seg]
            if not present[target, k]:
                out.add(
                    "fatal",
                    row,
                    "segment",
                    f"junction '{j}' has no value in column '{seg}'",
                    "a repeat reading must refer to a segment measured in the junction table",
                    "unknown_segment",
                )
                continue
            segment = f"d{slot[target, k] + 1}"
        else:
            out.add(
                "fatal",
                row,
                "segment",
                f"unknown segment {seg!r}",
                f"use one of: {allowed}",
                "unknown_segment",
            )
            continue
        out_rows.append(
            {
                "specimen": data["specimen"].iat[target],
                "junction": j,
                "segment": segment,
                "value": value * factor,
            }
        )
    return pd.DataFrame(out_rows, columns=list(REPEAT_COLUMNS)), out
