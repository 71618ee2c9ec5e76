"""Read a user's table from disk (CSV, TSV, semicolon/decimal-comma text, Parquet, Excel) or a DataFrame.

The reader does no interpretation of values: text files are read as text so that validation can quote the
user's own cell content in its messages, and every data row keeps the row number the user sees in the file
(header = row 1). Blank lines are kept so that numbering stays right; validation reports them.
"""

from __future__ import annotations

import csv
import io
import os
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd

from allobranch.errors import InputError, Problem

#: File extensions read as each kind of table.
TEXT_EXTENSIONS: tuple[str, ...] = (".csv", ".txt", ".tsv", ".tab", "")
TAB_EXTENSIONS: tuple[str, ...] = (".tsv", ".tab")
EXCEL_EXTENSIONS: tuple[str, ...] = (".xlsx", ".xlsm")
PARQUET_EXTENSIONS: tuple[str, ...] = (".parquet", ".pq")

#: Label used in messages when the table came from a pandas DataFrame.
DATAFRAME_LABEL = "<DataFrame>"

# Leading bytes of common non-table files, so the user is told what the file really is.
_MAGIC: tuple[tuple[bytes, str], ...] = (
    (b"\x89PNG", "a PNG image"),
    (b"\xff\xd8\xff", "a JPEG image"),
    (b"GIF8", "a GIF image"),
    (b"%PDF", "a PDF document"),
    (b"PK\x03\x04", "a zip archive (an Excel .xlsx workbook is one)"),
    (b"PAR1", "a Parquet file"),
    (b"\xd0\xcf\x11\xe0", "an old-style Excel .xls / Office document"),
    (b"\xff\xfe", "UTF-16 text"),
    (b"\xfe\xff", "UTF-16 text"),
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


def read_table(source: str | os.PathLike | pd.DataFrame, *, sheet: str | int | None = None) -> RawTable:
    """Read a table without interpreting its values.

    Parameters
    ----------
    source : str, path-like or pandas.DataFrame
        A ``.csv``/``.txt`` (comma, tab or semicolon separated; sniffed from the header line),
        ``.tsv``/``.tab``, ``.parquet``/``.pq`` or ``.xlsx``/``.xlsm`` file, or a DataFrame.
        A semicolon-separated text file is read with decimal commas.
    sheet : str or int, optional
        Excel sheet name or 0-based position; the first sheet when ``None``. Ignored for other kinds.

    Returns
    -------
    RawTable
        The cells and the user's row numbers.

    Raises
    ------
    InputError
        If the file is missing, unreadable, binary, not UTF-8 text, empty or has only a header.
    """
    if isinstance(source, pd.DataFrame):
        frame = source.reset_index(drop=True)  # a new object: the caller's DataFrame is never changed
        frame.columns = [str(c) for c in frame.columns]
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
            raise _fatal(label, "this is a folder, not a table file", "give the path of a table file", "not_a_file")
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
            raw = _read_text(path, label)
    if raw.frame.shape[1] == 0 or len(raw.frame) == 0:
        what = "has no columns" if raw.frame.shape[1] == 0 else "has a header but no data rows"
        raise _fatal(raw.label, f"the table {what}", "add one row per junction below the header", "empty_table")
    return raw


# -- text files ---------------------------------------------------------------------------------------
def _decode(path: Path, label: str) -> str:
    try:
        data = path.read_bytes()
    except OSError as exc:
        raise _fatal(label, f"cannot read the file ({exc.strerror})", "check the file's permissions",
                     "unreadable") from None
    if not data.strip():
        raise _fatal(label, "the file is empty", "export the table again, with a header row", "empty_table")
    for magic, what in _MAGIC:
        if data.startswith(magic):
            raise _fatal(
                label,
                f"this file is {what}, not a text table",
                "give a CSV/TSV text file (UTF-8), or an .xlsx / .parquet file with the right extension",
                "binary_file",
            )
    if b"\x00" in data[:65536]:
        raise _fatal(
            label,
            "the file contains binary data (NUL bytes), not text",
            "export the table as CSV (UTF-8) from your spreadsheet or analysis program",
            "binary_file",
        )
    try:
        return data.decode("utf-8-sig")
    except UnicodeDecodeError as exc:
        line = data[: exc.start].count(b"\n") + 1
        raise _fatal(
            label,
            f"the file is not UTF-8 text (undecodable byte 0x{data[exc.start]:02x} on line {line})",
            "save the file again as 'CSV UTF-8' (most spreadsheet programs offer this)",
            "bad_encoding",
            row=line,
        ) from None


def _sniff_separator(header: str, suffix: str) -> tuple[str, str, str]:
    """Return (separator, decimal mark, kind) from the header line and the file extension."""
    if suffix in TAB_EXTENSIONS or header.count("\t") > header.count(","):
        return "\t", ".", "tsv"
    if ";" in header and header.count(";") > header.count(","):
        return ";", ",", "semicolon"
    return ",", ".", "csv"


def _read_text(path: Path, label: str) -> RawTable:
    text = _decode(path, label)
    lines = text.splitlines(keepends=True)
    n_leading_blank = 0
    while n_leading_blank < len(lines) and not lines[n_leading_blank].strip():
        n_leading_blank += 1
    header_line = n_leading_blank + 1
    body = "".join(lines[n_leading_blank:])
    sep, decimal, kind = _sniff_separator(lines[n_leading_blank], path.suffix.lower())
    names = next(csv.reader([lines[n_leading_blank].rstrip("\r\n")], delimiter=sep))
    seen: set[str] = set()
    dupes = [n for n in names if n in seen or seen.add(n)]  # type: ignore[func-returns-value]
    if dupes:
        raise _fatal(
            label,
            f"column name(s) {', '.join(repr(d) for d in dict.fromkeys(dupes))} appear more than once in the header",
            "give every column a distinct name",
            "duplicate_column",
            row=header_line,
        )
    try:
        frame = pd.read_csv(
            io.StringIO(body),
            sep=sep,
            dtype=str,
            skip_blank_lines=False,
            keep_default_na=True,
        )
    except pd.errors.ParserError as exc:
        raise _fatal(
            label,
            f"the file cannot be parsed as a table ({exc})",
            f"check that every row has the same number of '{'TAB' if sep == chr(9) else sep}'-separated fields "
            "and that quotes are closed (line numbers count from the header line)",
            "parse_error",
        ) from None
    except pd.errors.EmptyDataError:
        raise _fatal(label, "the file has no header row", "put the column names on the first line",
                     "empty_table") from None
    rows = np.arange(len(frame)) + header_line + 1
    return RawTable(frame=frame, label=label, rows=rows, decimal=decimal, kind=kind, path=path.resolve())


# -- binary formats -----------------------------------------------------------------------------------
def _read_parquet(path: Path, label: str) -> RawTable:
    try:
        frame = pd.read_parquet(path)
    except Exception as exc:  # pyarrow raises several unrelated types for damaged files
        raise _fatal(
            label,
            f"cannot read this file as Parquet ({type(exc).__name__}: {exc})",
            "check that the file is a Parquet file, or export the table as CSV (UTF-8)",
            "unreadable",
        ) from None
    frame = frame.reset_index(drop=True)
    frame.columns = [str(c) for c in frame.columns]
    return RawTable(frame=frame, label=label, rows=np.arange(len(frame)) + 2, kind="parquet", path=path.resolve())


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
        raise _fatal(
            label,
            f"cannot open this file as an Excel workbook ({type(exc).__name__})",
            "check that it is an .xlsx workbook, or export the table as CSV (UTF-8)",
            "unreadable",
        ) from None
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
        raise _fatal(f"{label} [sheet {chosen!r}]", "the sheet is empty", "put a header row and data on it",
                     "empty_table")
    # Trailing empty rows are invisible in a spreadsheet (often just formatting), so they are not data rows.
    last = max(i for i, r in enumerate(cells) if not blank(r))
    header = cells[first]
    width = max(i for i, v in enumerate(header) if v is not None and str(v).strip()) + 1
    columns = [str(v) if v is not None else f"(column {i + 1})" for i, v in enumerate(header[:width])]
    sheet_label = f"{label} [sheet {chosen!r}]"
    dupes = [c for i, c in enumerate(columns) if c in columns[:i]]
    if dupes:
        raise _fatal(
            sheet_label,
            f"column name(s) {', '.join(repr(d) for d in dict.fromkeys(dupes))} appear more than once in the header",
            "give every column a distinct name",
            "duplicate_column",
            row=first + 1,
        )
    body = [(r + [None] * width)[:width] for r in cells[first + 1 : last + 1]]
    frame = pd.DataFrame(body, columns=columns, dtype=object)
    rows = np.arange(len(frame)) + first + 2
    return RawTable(
        frame=frame, label=sheet_label, rows=rows, kind="excel", path=path.resolve(), sheet_names=names
    )
