"""Read a user's table from disk (CSV, TSV, semicolon/decimal-comma text, Parquet, Excel) or a DataFrame.

The reader does no interpretation of values: text files are read as text, cell by cell exactly as written
(no word such as ``NA`` is turned into a missing value here), so that validation can quote the user's own
cell content in its messages. Every data row keeps the row number the user sees in the file (header = row
1; a quoted field spanning several lines counts from its first line). Blank lines are kept so that
numbering stays right; validation reports them. Column names are trimmed of surrounding spaces.
"""

from __future__ import annotations

import codecs
import csv
import io
import os
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd

from allobranch.errors import OPTIONS_ORIGIN, InputError, Problem, option_error

#: File extensions read as each kind of table.
TEXT_EXTENSIONS: tuple[str, ...] = (".csv", ".txt", ".tsv", ".tab", "")
TAB_EXTENSIONS: tuple[str, ...] = (".tsv", ".tab")
EXCEL_EXTENSIONS: tuple[str, ...] = (".xlsx", ".xlsm")
PARQUET_EXTENSIONS: tuple[str, ...] = (".parquet", ".pq")

#: Label used in messages when the table came from a pandas DataFrame.
DATAFRAME_LABEL = "<DataFrame>"

#: Text encoding of text tables when none is named (a leading byte-order mark is allowed and removed).
DEFAULT_ENCODING = "utf-8"
#: Common encodings offered in messages; any Python text codec name is accepted.
ENCODING_EXAMPLES: tuple[str, ...] = ("utf-8", "cp1252", "latin-1", "utf-16")

# Leading bytes of common non-table files, so the user is told what the file really is.
_MAGIC: tuple[tuple[bytes, str], ...] = (
    (b"\x89PNG", "a PNG image"),
    (b"\xff\xd8\xff", "a JPEG image"),
    (b"GIF8", "a GIF image"),
    (b"%PDF", "a PDF document"),
    (b"PK\x03\x04", "a zip archive (an Excel .xlsx workbook is one)"),
    (b"PAR1", "a Parquet file"),
    (b"\xd0\xcf\x11\xe0", "an old-style Excel .xls / Office document"),
)

# Byte-order marks of wide Unicode encodings (UTF-32 first: its little-endian mark starts like UTF-16's).
_WIDE_BOMS: tuple[tuple[bytes, str], ...] = (
    (codecs.BOM_UTF32_LE, "utf-32"),
    (codecs.BOM_UTF32_BE, "utf-32"),
    (codecs.BOM_UTF16_LE, "utf-16"),
    (codecs.BOM_UTF16_BE, "utf-16"),
)


@dataclass
class RawTable:
    """A table as read, before any validation.

    Attributes
    ----------
    frame : pandas.DataFrame
        The cells as read: text for text files, native values for Parquet, Excel and DataFrames.
        Its index is a plain range; :attr:`rows` gives the user's row numbers.
    label : str
        File path as given by the user, or ``"<DataFrame>"``.
    rows : numpy.ndarray
        Row number of every frame row as the user sees it (header = row 1, first data row = row 2).
    decimal : str
        Decimal mark of numbers written as text (``"."`` or ``","``).
    kind : str
        ``"csv"``, ``"tsv"``, ``"semicolon"``, ``"excel"``, ``"parquet"`` or ``"dataframe"``.
    path : pathlib.Path or None
        Resolved path of the file, ``None`` for a DataFrame.
    sheet_names : tuple of str
        Sheets of an Excel workbook (empty for other kinds).
    """

    frame: pd.DataFrame
    label: str
    rows: np.ndarray
    decimal: str = "."
    kind: str = "csv"
    path: Path | None = None
    sheet_names: tuple[str, ...] = ()


def _fatal(label: str, message: str, hint: str, code: str, row: int | None = None) -> InputError:
    return InputError([Problem("fatal", label, row, None, message, hint, code)])


def _unreadable(label: str, message: str, check: str) -> InputError:
    """A table file the library for its format could not open: what failed, what to check, and the way
    out that always works (CSV)."""
    return _fatal(label, message, f"{check}, or export the table as CSV (UTF-8)", "unreadable")


def check_encoding(
    encoding: str | None, *, origin: str = OPTIONS_ORIGIN, key: str = "encoding"
) -> str | None:
    """Check that a text encoding is one Python can decode with.

    Parameters
    ----------
    encoding : str or None
        A codec name such as ``"latin-1"`` or ``"cp1252"`` (case-insensitive, surrounding spaces ignored);
        ``None`` means :data:`DEFAULT_ENCODING`.
    origin : str
        Where the value came from (recipe file or ``"<options>"``), used in the message.
    key : str
        The recipe key or option name, used in the message.

    Returns
    -------
    str or None
        The name without surrounding spaces, or ``None``.

    Raises
    ------
    RecipeError
        If the name is not text or not a text encoding known to Python.

    Examples
    --------
    >>> check_encoding(" latin-1 ")
    'latin-1'
    """
    if encoding is None:
        return None
    if isinstance(encoding, str) and encoding.strip():
        name = encoding.strip()
        try:
            b"x".decode(
                name, "ignore"
            )  # LookupError for unknown names and for codecs that are not text encodings
        except LookupError:
            pass
        else:
            return name
    raise option_error(
        f"{key}: {encoding!r} is not a text encoding known to Python",
        f"give a Python codec name, e.g. {', '.join(ENCODING_EXAMPLES)}",
        "unknown_encoding",
        origin,
    )


def _encoding_hint(example: str) -> str:
    """How to name a text file's encoding: the Python keyword of ``read_junctions`` and the recipe key."""
    return (
        f'name the file\'s encoding: encoding="{example}" in read_junctions(...), or encoding = "{example}" '
        f"under [input] in the recipe (common ones: {', '.join(ENCODING_EXAMPLES)}); or save the file "
        "again as 'CSV UTF-8'"
    )


def read_table(
    source: str | os.PathLike | pd.DataFrame,
    *,
    sheet: str | int | None = None,
    encoding: str | None = None,
) -> RawTable:
    """Read a table without interpreting its values.

    Parameters
    ----------
    source : str, path-like or pandas.DataFrame
        A ``.csv``/``.txt`` (comma, tab or semicolon separated; sniffed from the header line),
        ``.tsv``/``.tab``, ``.parquet``/``.pq`` or ``.xlsx``/``.xlsm`` file, or a DataFrame.
        A semicolon-separated text file is read with decimal commas. Text follows RFC 4180 quoting:
        fields in double quotes may hold the separator, line breaks and doubled quotes (``""``).
    sheet : str or int, optional
        Excel sheet name or 0-based position; the first sheet when ``None``. Ignored for other kinds.
    encoding : str, optional
        Text encoding of a text file (any Python codec name, e.g. ``"latin-1"``, ``"cp1252"``,
        ``"utf-16"``); :data:`DEFAULT_ENCODING` when ``None``. A leading byte-order mark is removed.
        Ignored for Parquet, Excel and DataFrames, which carry their own encoding.

    Returns
    -------
    RawTable
        The cells and the user's row numbers; column names without surrounding spaces.

    Raises
    ------
    InputError
        If the file is missing, unreadable, binary, not text in the encoding, empty, has only a header,
        repeats a column name, or has rows with more fields than the header.
    RecipeError
        If ``encoding`` is not a text encoding known to Python.
    """
    encoding = check_encoding(encoding)
    if isinstance(source, pd.DataFrame):
        frame = source.reset_index(drop=True)  # a new object: the caller's DataFrame is never changed
        frame.columns = _column_names(list(frame.columns), DATAFRAME_LABEL, None)
        raw = RawTable(
            frame=frame,
            label=DATAFRAME_LABEL,
            rows=np.arange(len(source)) + 2,
            kind="dataframe",
        )
    else:
        path = Path(source)
        label = str(source)
        if not path.exists():
            raise _fatal(label, "file not found", "check the path and spelling", "file_not_found")
        if path.is_dir():
            raise _fatal(
                label, "this is a folder, not a table file", "give the path of a table file", "not_a_file"
            )
        suffix = path.suffix.lower()
        if suffix in EXCEL_EXTENSIONS:
            raw = _read_excel(path, label, sheet)
        elif suffix in PARQUET_EXTENSIONS:
            raw = _read_parquet(path, label)
        elif suffix == ".xls":
            raise _fatal(
                label,
                "old-style Excel .xls workbooks are not read",
                "open it in a spreadsheet program and save it as .xlsx or CSV (UTF-8)",
                "unsupported_format",
            )
        else:
            raw = _read_text(path, label, encoding)
    if raw.frame.shape[1] == 0 or len(raw.frame) == 0:
        what = "has no columns" if raw.frame.shape[1] == 0 else "has a header but no data rows"
        raise _fatal(
            raw.label, f"the table {what}", "add one row per junction below the header", "empty_table"
        )
    return raw


def _column_names(header: list[object], label: str, row: int | None) -> list[str]:
    """Header cells as column names: trimmed of spaces, unnamed ones labelled by position, none twice."""
    names = []
    for i, cell in enumerate(header):
        name = "" if cell is None or (isinstance(cell, float) and np.isnan(cell)) else str(cell).strip()
        names.append(name or f"(column {i + 1})")
    dupes = [n for i, n in enumerate(names) if n in names[:i]]
    if dupes:
        raise _fatal(
            label,
            f"column name(s) {', '.join(repr(d) for d in dict.fromkeys(dupes))} appear more than once in the header"
            " (surrounding spaces are ignored)",
            "give every column a distinct name",
            "duplicate_column",
            row=row,
        )
    return names


# -- text files ---------------------------------------------------------------------------------------
def _binary(label: str) -> InputError:
    return _fatal(
        label,
        "the file contains binary data (NUL bytes), not text",
        "export the table as CSV (UTF-8) from your spreadsheet or analysis program",
        "binary_file",
    )


def _decode(path: Path, label: str, encoding: str | None) -> str:
    try:
        data = path.read_bytes()
    except OSError as exc:
        raise _fatal(
            label, f"cannot read the file ({exc.strerror})", "check the file's permissions", "unreadable"
        ) from None
    for magic, what in _MAGIC:
        if data.startswith(magic):
            raise _fatal(
                label,
                f"this file is {what}, not a text table",
                "give a CSV/TSV text file (UTF-8), or an .xlsx / .parquet file with the right extension",
                "binary_file",
            )
    if encoding is None:
        for bom, wide in _WIDE_BOMS:
            if data.startswith(bom):
                raise _fatal(
                    label,
                    f"the file is {wide.upper()} text, not UTF-8 (it starts with a {wide.upper()} "
                    "byte-order mark)",
                    _encoding_hint(wide),
                    "bad_encoding",
                    row=1,
                )
    codec = encoding or DEFAULT_ENCODING
    try:
        text = data.decode(codec)
    except UnicodeDecodeError as exc:
        if b"\x00" in data[:65536]:
            raise _binary(label) from None
        line = data[: exc.start].count(b"\n") + 1
        byte = f"undecodable byte 0x{data[exc.start]:02x} on line {line}"
        if encoding is None:
            raise _fatal(
                label,
                f"the file is not UTF-8 text ({byte})",
                _encoding_hint(ENCODING_EXAMPLES[1]),
                "bad_encoding",
                row=line,
            ) from None
        raise _fatal(
            label,
            f"the file is not {encoding} text ({byte})",
            f"{encoding!r} does not fit this file; {_encoding_hint(ENCODING_EXAMPLES[0])}",
            "bad_encoding",
            row=line,
        ) from None
    if "\x00" in text[:65536]:
        raise _binary(label)
    text = text.removeprefix("\ufeff")  # Unicode byte-order mark U+FEFF
    if not text.strip():
        raise _fatal(label, "the file is empty", "export the table again, with a header row", "empty_table")
    return text


def _sniff_separator(header: str, suffix: str) -> tuple[str, str, str]:
    """Return (separator, decimal mark, kind) from the header line and the file extension."""
    if suffix in TAB_EXTENSIONS or header.count("\t") > header.count(","):
        return "\t", ".", "tsv"
    if ";" in header and header.count(";") > header.count(","):
        return ";", ",", "semicolon"
    return ",", ".", "csv"


def _read_text(path: Path, label: str, encoding: str | None) -> RawTable:
    # Lines split as the csv module splits them (\n, \r\n or \r), so line numbers agree with the editor's.
    lines = io.StringIO(_decode(path, label, encoding), newline="").readlines()
    skip = next(i for i, line in enumerate(lines) if line.strip())  # _decode refuses an all-blank file
    sep, decimal, kind = _sniff_separator(lines[skip], path.suffix.lower())
    sep_name = "TAB" if sep == "\t" else sep
    reader = csv.reader(lines[skip:], delimiter=sep, strict=True)
    records: list[list[str]] = []
    starts: list[int] = []  # file line on which each record starts (a quoted field may span lines)
    consumed = 0
    try:
        for record in reader:
            starts.append(skip + consumed + 1)
            consumed = reader.line_num
            records.append(record)
    except csv.Error as exc:
        raise _fatal(
            label,
            f"the file cannot be parsed as a table from this row on ({exc})",
            f"check that quotes are closed and that a quoted field is followed by the separator '{sep_name}'",
            "parse_error",
            row=skip + consumed + 1,
        ) from None
    header_row = starts[0]
    names = _column_names(records[0], label, header_row)
    width = len(names)
    body = []
    too_long = []
    for record, row in zip(records[1:], starts[1:], strict=True):
        extra = record[width:]
        if any(cell.strip() for cell in extra):
            too_long.append(
                Problem(
                    "fatal",
                    label,
                    row,
                    None,
                    f"this row has {len(record)} fields but the header has {width}",
                    f"check that every row has the same number of '{sep_name}'-"
                    "separated fields, and quote fields that contain the separator",
                    "parse_error",
                )
            )
        body.append(record[:width] + [""] * (width - len(record)))  # empty trailing fields hold no data
    if too_long:
        raise InputError(too_long)
    frame = pd.DataFrame(body, columns=names, dtype=object)
    return RawTable(
        frame=frame,
        label=label,
        rows=np.array(starts[1:], dtype=int),
        decimal=decimal,
        kind=kind,
        path=path.resolve(),
    )


# -- binary formats -----------------------------------------------------------------------------------
def _read_parquet(path: Path, label: str) -> RawTable:
    try:
        frame = pd.read_parquet(path)
    except Exception as exc:  # pyarrow raises several unrelated types for damaged files
        message = f"cannot read this file as Parquet ({type(exc).__name__}: {exc})"
        raise _unreadable(label, message, "check that the file is a Parquet file") from None
    frame = frame.reset_index(drop=True)
    frame.columns = _column_names(list(frame.columns), label, 1)
    return RawTable(
        frame=frame, label=label, rows=np.arange(len(frame)) + 2, kind="parquet", path=path.resolve()
    )


def excel_sheet_names(path: str | os.PathLike) -> tuple[str, ...]:
    """Return the sheet names of an Excel workbook (empty tuple if it cannot be opened).

    Parameters
    ----------
    path : str or path-like
        The workbook.

    Returns
    -------
    tuple of str
        Sheet names in workbook order.
    """
    import openpyxl

    try:
        workbook = openpyxl.load_workbook(path, read_only=True)
    except Exception:  # any damaged or foreign file: no sheets
        return ()
    try:
        return tuple(workbook.sheetnames)
    finally:
        workbook.close()


def _read_excel(path: Path, label: str, sheet: str | int | None) -> RawTable:
    import openpyxl

    try:
        workbook = openpyxl.load_workbook(path, read_only=True, data_only=True)
    except Exception as exc:  # openpyxl raises several unrelated types for damaged files
        message = f"cannot open this file as an Excel workbook ({type(exc).__name__})"
        raise _unreadable(label, message, "check that it is an .xlsx workbook") from None
    try:
        names = tuple(workbook.sheetnames)
        if sheet is None:
            chosen = names[0]
        elif isinstance(sheet, int) and not isinstance(sheet, bool) and 0 <= sheet < len(names):
            chosen = names[sheet]
        elif isinstance(sheet, str) and sheet in names:
            chosen = sheet
        else:
            raise _fatal(
                label,
                f"there is no sheet {sheet!r} in this workbook",
                f"use one of the sheets: {', '.join(repr(n) for n in names)}",
                "missing_sheet",
            )
        cells = [list(r) for r in workbook[chosen].iter_rows(min_row=1, values_only=True)]
    finally:
        workbook.close()

    def blank(row: list) -> bool:
        return all(v is None or (isinstance(v, str) and not v.strip()) for v in row)

    first = next((i for i, r in enumerate(cells) if not blank(r)), None)
    if first is None:
        raise _fatal(
            f"{label} [sheet {chosen!r}]",
            "the sheet is empty",
            "put a header row and data on it",
            "empty_table",
        )
    # Trailing empty rows are invisible in a spreadsheet (often just formatting), so they are not data rows.
    last = max(i for i, r in enumerate(cells) if not blank(r))
    header = cells[first]
    width = max(i for i, v in enumerate(header) if v is not None and str(v).strip()) + 1
    sheet_label = f"{label} [sheet {chosen!r}]"
    columns = _column_names(header[:width], sheet_label, first + 1)
    body = [(r + [None] * width)[:width] for r in cells[first + 1 : last + 1]]
    frame = pd.DataFrame(body, columns=columns, dtype=object)
    rows = np.arange(len(frame)) + first + 2
    return RawTable(
        frame=frame, label=sheet_label, rows=rows, kind="excel", path=path.resolve(), sheet_names=names
    )
