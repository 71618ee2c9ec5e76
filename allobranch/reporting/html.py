"""A one-file, offline HTML report rendered from a jinja2 template and plain data (tables, text, figures).

The report depends on nothing but its inputs: DataFrames, strings, warnings and figures (matplotlib Figures
or image files). Figures are embedded as base64 ``data:`` URIs and the CSS is inline, so the file opens
anywhere without a network connection. The template (``templates/report.html``) escapes every piece of
text (jinja2 autoescaping).

Order: the answer first (exponent per taxon with its interval and the law verdict, beside the forest
figure), then the evidence, the diagnostics and warnings, the data and its validation flags, the methods and
the research-use caution.
"""

from __future__ import annotations

import base64
import io
import math
import numbers
import os
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from pathlib import Path

import jinja2
import pandas as pd
from matplotlib.figure import Figure

from allobranch.io import atomic_write
from allobranch.reporting.style import house_style
from allobranch.reporting.warning_groups import WarningGroup, group_warnings

#: Shown in every report; not optional.
CAUTION = (
    "allobranch is a research tool. Branching exponents estimated from casts, scans or images are not "
    "clinical measurements: do not use them to diagnose, treat or make any decision about a patient, and "
    "defer to qualified professionals for such decisions. Results depend on where along each segment the "
    "radii were measured, on segmentation quality and on the model's assumptions stated under Methods."
)
#: One line under the title pointing at the caution.
CAUTION_SHORT = "Research tool: not for clinical decisions."

#: Sentence placed above the methods paragraph.
METHODS_NOTE = (
    "A starting point for a manuscript's methods section: adapt it, and check every number against the "
    "tables above."
)

#: Image types accepted as figure files, by suffix.
IMAGE_TYPES: dict[str, str] = {
    ".png": "image/png",
    ".jpg": "image/jpeg",
    ".jpeg": "image/jpeg",
    ".gif": "image/gif",
    ".svg": "image/svg+xml",
    ".webp": "image/webp",
}

#: Resolution of matplotlib figures rendered into the report.
REPORT_DPI = 150
#: Figures at least this wide (inches) span the page instead of sharing a row.
WIDE_FIGURE_IN = 5.0

#: Report sections: anchor and heading, in order (the contents line).
SECTIONS: tuple[tuple[str, str], ...] = (
    ("answer", "Answer"),
    ("evidence", "Evidence"),
    ("diagnostics", "Diagnostics and warnings"),
    ("data", "Data and flags"),
    ("methods", "Methods"),
    ("caution", "Caution"),
)
#: Columns that may hold sentences: their text cells get room to wrap.
LONG_TEXT_COLUMNS: tuple[str, ...] = ("message", "hint", "reason", "meaning", "value")

#: A figure for the report: a matplotlib Figure or the path of an image file.
FigureLike = Figure | str | os.PathLike
#: A table for the report: a DataFrame, or a mapping shown as two columns (item, value).
Table = pd.DataFrame | Mapping[str, object]

_ENV = jinja2.Environment(
    loader=jinja2.PackageLoader("allobranch.reporting", "templates"),
    autoescape=True,
    undefined=jinja2.StrictUndefined,
    keep_trailing_newline=True,
)


@dataclass(frozen=True)
class Cell:
    """One table cell: its text (escaped by the template) and CSS class."""

    text: str
    cls: str = ""


@dataclass
class TableView:
    """A table ready for the template."""

    columns: list[str]
    rows: list[list[Cell]]
    scroll: bool = False
    wide: bool = False
    id: str = ""


@dataclass(frozen=True)
class FigureView:
    """An embedded figure: ``data:`` URI, caption (also the alt text) and whether it spans the page."""

    uri: str
    caption: str
    wide: bool = False


def format_cell(value: object) -> tuple[str, bool]:
    """Cell text (not escaped) and whether it is numeric.

    Parameters
    ----------
    value : object

    Returns
    -------
    (str, bool)
        Missing values give an em dash; booleans "yes"/"no"; reals four significant digits.
    """
    if value is None or value is pd.NA or (isinstance(value, float) and math.isnan(value)):
        return "—", False
    if isinstance(value, bool):
        return ("yes" if value else "no"), False
    if isinstance(value, numbers.Integral):
        return f"{int(value):d}", True
    if isinstance(value, numbers.Real):
        return f"{float(value):.4g}", True
    return str(value), False


def table_view(
    table: Table | None, *, scroll: bool = False, wide: bool = False, id: str = ""
) -> TableView | None:
    """A :class:`TableView` of a DataFrame, or of a mapping as two columns (item, value); None for None.

    Parameters
    ----------
    table : pandas.DataFrame, mapping or None
    scroll : bool
        Put the table in a box with a vertical scroll bar (long tables).
    wide : bool
        Let the table take the page's width, so long text wraps.
    id : str
        HTML id of the table.

    Returns
    -------
    TableView or None
    """
    if table is None:
        return None
    if not isinstance(table, pd.DataFrame):
        table = pd.DataFrame({"item": list(table.keys()), "value": list(table.values())})
    long = [str(c) in LONG_TEXT_COLUMNS for c in table.columns]
    rows = []
    for values in table.itertuples(index=False, name=None):
        cells = []
        for v, is_long in zip(values, long):
            text, numeric = format_cell(v)
            cells.append(Cell(text, "num" if numeric else "long" if is_long else ""))
        rows.append(cells)
    return TableView([str(c) for c in table.columns], rows, scroll=scroll, wide=wide, id=id)


def _figure_bytes(fig: FigureLike) -> tuple[bytes, str, float]:
    """Bytes, MIME type and width in inches (0 when unknown) of a figure."""
    if isinstance(fig, Figure):
        buf = io.BytesIO()
        with house_style():
            fig.savefig(buf, format="png", dpi=REPORT_DPI)
        return buf.getvalue(), "image/png", float(fig.get_figwidth())
    if isinstance(fig, (str, os.PathLike)):
        path = Path(fig)
        mime = IMAGE_TYPES.get(path.suffix.lower())
        if mime is None:
            raise ValueError(f"figure file {str(path)!r} must be one of {sorted(IMAGE_TYPES)}")
        if not path.is_file():
            raise FileNotFoundError(f"figure file {str(path)!r} does not exist")
        return path.read_bytes(), mime, 0.0
    raise TypeError(f"a figure must be a matplotlib Figure or an image path; got {type(fig).__name__}")


def figure_views(figures: Mapping[str, FigureLike] | None) -> list[FigureView]:
    """Embedded figures, by caption: matplotlib Figures become PNG, image files are embedded as they are.

    Parameters
    ----------
    figures : mapping of str to figure, optional

    Returns
    -------
    list of FigureView
    """
    out = []
    for caption, fig in (figures or {}).items():
        data, mime, width_in = _figure_bytes(fig)
        uri = f"data:{mime};base64,{base64.b64encode(data).decode('ascii')}"
        out.append(FigureView(uri, str(caption), wide=width_in >= WIDE_FIGURE_IN))
    return out


def _paragraphs(text: str | Sequence[str]) -> list[str]:
    """Paragraphs: a string is split at blank lines, a sequence gives one paragraph per item."""
    items = text.split("\n\n") if isinstance(text, str) else [str(t) for t in text]
    return [" ".join(p.split()) for p in items if p.strip()]


def flags_view(flags: pd.DataFrame | None) -> tuple[TableView | None, list[str]]:
    """The validation-flags table and the sentences above it.

    The ``file`` column is dropped (and named in a sentence) when every flag comes from one file; message and
    hint columns wrap.

    Parameters
    ----------
    flags : pandas.DataFrame, optional
        One row per validation problem (:meth:`allobranch.ValidationReport.to_frame`).

    Returns
    -------
    (TableView or None, list of str)
    """
    if flags is None:
        return None, ["Not provided."]
    if flags.empty:
        return None, ["No rows were flagged or excluded."]
    notes = [f"{len(flags)} row(s) flagged or excluded; flagged junctions are kept in the model."]
    if "file" in flags and flags["file"].nunique(dropna=False) == 1:
        notes.append(f"All refer to {flags['file'].iloc[0]}; row numbers are as you see them in that file.")
        flags = flags.drop(columns="file")
    flags = flags.dropna(axis=1, how="all")
    return table_view(flags, scroll=len(flags) > 15, wide=True, id="flags"), notes


def status_line(groups: Sequence[WarningGroup]) -> dict[str, object]:
    """The line under the title: whether all is well, or how many warnings of which kinds."""
    if not groups:
        return {"ok": True, "text": "No warnings: every diagnostic passed."}
    n = sum(g.count for g in groups)
    kinds = ", ".join(g.kind for g in groups[:4]) + (", ..." if len(groups) > 4 else "")
    return {
        "ok": False,
        "text": f"{n} warning{'s' if n != 1 else ''} of {len(groups)} kind"
        f"{'s' if len(groups) != 1 else ''} ({kinds}).",
    }


@dataclass
class ReportParts:
    """Everything a report shows, as plain data; see :func:`write_html_report` for each field."""

    title: str = "Branching-exponent analysis"
    answer: pd.DataFrame | None = None
    answer_figure: Mapping[str, FigureLike] | None = None
    answer_notes: Sequence[str] = ()
    answer_heading: str = "Branching exponent per taxon"
    laws: pd.DataFrame | None = None
    laws_all_scopes: pd.DataFrame | None = None
    verdicts: pd.DataFrame | None = None
    verdict_rule: str = ""
    law_ranges: str | Sequence[str] = ""
    law_figures: Mapping[str, FigureLike] | None = None
    no_laws: str = "No law comparison was run."
    checks: pd.DataFrame | None = None
    checks_text: str | Sequence[str] = ""
    check_figures: Mapping[str, FigureLike] | None = None
    exponents: pd.DataFrame | None = None
    naive: pd.DataFrame | None = None
    covariates: pd.DataFrame | None = None
    covariates_text: str = ""
    exponent_figures: Mapping[str, FigureLike] | None = None
    warnings: Sequence[str | WarningGroup] = ()
    warning_notes: Sequence[str] = ()
    attempts: pd.DataFrame | None = None
    attempts_sentence: str = ""
    parametrization: str = ""
    diagnostics: pd.DataFrame | None = None
    diagnostic_figures: Mapping[str, FigureLike] | None = None
    data_summary: Table | None = None
    validation_flags: pd.DataFrame | None = None
    data_figures: Mapping[str, FigureLike] | None = None
    model_description: str | Sequence[str] = ""
    priors: Table | None = None
    assumptions: Sequence[str] = ()
    methods: str | Sequence[str] = ""
    provenance: Mapping[str, object] = field(default_factory=dict)


def _groups(warnings: Sequence[str | WarningGroup]) -> list[WarningGroup]:
    if all(isinstance(w, WarningGroup) for w in warnings):
        return list(warnings)
    return group_warnings(str(w) for w in warnings)


def render_report(parts: ReportParts) -> str:
    """The report's HTML text.

    Parameters
    ----------
    parts : ReportParts

    Returns
    -------
    str
    """
    from allobranch import __version__

    groups = _groups(parts.warnings)
    flags, flag_notes = flags_view(parts.validation_flags)
    context = {
        "title": parts.title,
        "status": status_line(groups),
        "caution_short": CAUTION_SHORT,
        "toc": SECTIONS,
        "answer": {
            "heading": parts.answer_heading,
            "table": table_view(parts.answer, id="answer-table"),
            "notes": _paragraphs(parts.answer_notes),
            "figure": next(iter(figure_views(parts.answer_figure)), None),
        },
        "evidence": {
            "laws": table_view(parts.laws),
            "all_scopes": table_view(parts.laws_all_scopes, scroll=True),
            "verdicts": table_view(parts.verdicts, wide=True),
            "rule": parts.verdict_rule,
            "law_ranges": _paragraphs(parts.law_ranges),
            "law_figures": figure_views(parts.law_figures),
            "no_laws": parts.no_laws,
            "checks": table_view(parts.checks),
            "checks_text": _paragraphs(parts.checks_text),
            "check_figures": figure_views(parts.check_figures),
            "exponents": table_view(parts.exponents, scroll=True),
            "naive": table_view(parts.naive, scroll=True),
            "covariates": table_view(parts.covariates, scroll=True),
            "covariates_text": parts.covariates_text,
            "exponent_figures": figure_views(parts.exponent_figures),
        },
        "warning_groups": groups,
        "warning_notes": _paragraphs(parts.warning_notes),
        "attempts": {
            "sentence": parts.attempts_sentence,
            "parametrization": parts.parametrization,
            "table": table_view(parts.attempts),
        },
        "diagnostics": {
            "table": table_view(parts.diagnostics, scroll=True),
            "figures": figure_views(parts.diagnostic_figures),
        },
        "data": {
            "summary": table_view(parts.data_summary),
            "flags": flags,
            "flags_notes": flag_notes,
            "figures": figure_views(parts.data_figures),
        },
        "methods": {
            "model": _paragraphs(parts.model_description),
            "priors": table_view(parts.priors),
            "assumptions": [str(a) for a in parts.assumptions],
            "paragraphs": _paragraphs(parts.methods),
            "note": METHODS_NOTE,
        },
        "caution": CAUTION,
        "provenance": table_view({"allobranch version": __version__, **dict(parts.provenance)}),
    }
    return _ENV.get_template("report.html").render(**context)


def write_html_report(path: str | os.PathLike, parts: ReportParts | None = None, **fields) -> Path:
    """Write a self-contained HTML report of an analysis.

    Parameters
    ----------
    path : str or os.PathLike
        Output file; written atomically (complete or not at all). Its directory must exist.
    parts : ReportParts, optional
        What the report shows; alternatively give its fields as keywords:

        ``title``; ``answer`` (the answer table: one row per estimate with its interval and verdict),
        ``answer_figure`` (``{caption: figure}``, shown beside it), ``answer_notes``, ``answer_heading``;
        ``laws`` (law comparison of the population scope), ``laws_all_scopes`` (every scope, folded),
        ``verdicts`` (scope, verdict, reason), ``verdict_rule``, ``law_ranges`` (the laws over covariate
        ranges, in words), ``law_figures``, ``no_laws`` (shown when
        there is no comparison); ``checks`` (posterior predictive p-values), ``checks_text``,
        ``check_figures``; ``exponents``, ``naive``, ``exponent_figures``; ``warnings`` (strings, grouped by
        kind with :func:`~allobranch.reporting.warning_groups.group_warnings`, or ready
        :class:`~allobranch.reporting.warning_groups.WarningGroup` objects), ``warning_notes``;
        ``attempts`` (sampling attempts table), ``attempts_sentence``, ``parametrization``;
        ``diagnostics``, ``diagnostic_figures``; ``data_summary``, ``validation_flags`` (e.g.
        :meth:`allobranch.ValidationReport.to_frame`), ``data_figures``; ``model_description``, ``priors``,
        ``assumptions``, ``methods``; ``provenance`` (the allobranch version is added).

        Figures are mappings from caption to a :class:`matplotlib.figure.Figure` (embedded as PNG) or the
        path of an image file (PNG, JPEG, GIF, SVG or WebP; embedded as it is).
    **fields
        Fields of :class:`ReportParts` (only when ``parts`` is not given).

    Returns
    -------
    pathlib.Path
        The file written.

    Notes
    -----
    The report always contains the research-use caution (:data:`CAUTION`). It makes no network requests:
    no external style sheets, fonts, scripts or images.

    Examples
    --------
    >>> import tempfile, pathlib
    >>> out = pathlib.Path(tempfile.mkdtemp()) / "report.html"
    >>> write_html_report(out, warnings=["2 divergent transition(s)"]).name
    'report.html'
    """
    if parts is not None and fields:
        raise TypeError("give either parts or keyword fields, not both")
    parts = parts if parts is not None else ReportParts(**fields)
    document = render_report(parts)
    return atomic_write(path, lambda p: p.write_bytes(document.encode("utf-8")))
