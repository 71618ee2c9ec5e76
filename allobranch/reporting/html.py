"""A one-file, offline HTML report built from plain data (tables, strings, figures).

The report depends on nothing but its inputs: DataFrames, strings, lists of warnings and figures (matplotlib
Figures or image files). Figures are embedded as base64 ``data:`` URIs and the CSS is inline, so the file
opens anywhere without a network connection. Every piece of user-provided text is HTML-escaped.
"""

from __future__ import annotations

import base64
import html
import io
import math
import numbers
import os
from collections.abc import Mapping, Sequence
from pathlib import Path

import pandas as pd
from matplotlib.figure import Figure

from allobranch.reporting.style import atomic_write, house_style

#: Shown in every report, near the top; not optional.
CAUTION = (
    "allobranch is a research tool. Branching exponents estimated from casts, scans or images are not "
    "clinical measurements: do not use them to diagnose, treat or make any decision about a patient, and "
    "defer to qualified professionals for such decisions. Results depend on where along each segment the "
    "radii were measured, on segmentation quality and on the model's assumptions stated below."
)

#: Sentence placed above the methods paragraph.
METHODS_NOTE = (
    "A starting point for a manuscript's methods section: adapt it, and check every number against the "
    "tables above."
)

#: Image types accepted as figure files, by suffix.
IMAGE_TYPES: dict[str, str] = {
    ".png": "image/png", ".jpg": "image/jpeg", ".jpeg": "image/jpeg", ".gif": "image/gif",
    ".svg": "image/svg+xml", ".webp": "image/webp",
}

#: Resolution of matplotlib figures rendered into the report.
REPORT_DPI = 150

#: A figure for the report: a matplotlib Figure or the path of an image file.
FigureLike = Figure | str | os.PathLike
#: A table for the report: a DataFrame, or a mapping shown as two columns (item, value).
Table = pd.DataFrame | Mapping[str, object]

_CSS = """
body { font-family: system-ui, -apple-system, "Segoe UI", "DejaVu Sans", Arial, sans-serif; margin: 0;
       color: #1a1a1a; background: #fff; line-height: 1.45; }
main { max-width: 60rem; margin: 0 auto; padding: 1.5rem 1.25rem 3rem; }
h1 { font-size: 1.6rem; margin: 0 0 1rem; }
h2 { font-size: 1.25rem; margin: 2rem 0 0.6rem; border-bottom: 1px solid #ddd; padding-bottom: 0.2rem; }
h3 { font-size: 1.05rem; margin: 1.2rem 0 0.4rem; }
.box { border: 2px solid; border-radius: 6px; padding: 0.6rem 1rem; margin: 0 0 1rem; }
.box h2 { border: none; margin: 0 0 0.3rem; font-size: 1.1rem; }
.warn { border-color: #D55E00; background: #fff3ea; }
.ok { border-color: #009E73; background: #eefaf5; }
.caution { border-color: #444; background: #f4f4f4; }
nav ol { columns: 2; margin: 0.3rem 0 0; }
table { border-collapse: collapse; margin: 0.4rem 0 1rem; font-size: 0.88rem; }
th, td { border: 1px solid #ccc; padding: 0.2rem 0.5rem; text-align: left; vertical-align: top; }
th { background: #f0f0f0; }
td.num { text-align: right; font-variant-numeric: tabular-nums; }
.scroll { max-height: 28rem; overflow: auto; }
figure { margin: 1rem 0; }
figure img { max-width: 100%; height: auto; border: 1px solid #eee; }
figcaption { font-size: 0.9rem; color: #444; }
.methods { border-left: 4px solid #0072B2; background: #f5f9fc; padding: 0.5rem 1rem; }
.muted { color: #666; font-size: 0.9rem; }
footer { margin-top: 2.5rem; font-size: 0.85rem; color: #555; }
@media print { .scroll { max-height: none; overflow: visible; } nav { display: none; } }
"""


def _esc(text: object) -> str:
    return html.escape(str(text), quote=True)


def _format_cell(value: object) -> tuple[str, bool]:
    """Cell text (escaped) and whether it is numeric."""
    if value is None or (isinstance(value, float) and math.isnan(value)) or value is pd.NA:
        return "—", False
    if isinstance(value, bool):
        return ("yes" if value else "no"), False
    if isinstance(value, numbers.Integral):
        return _esc(f"{int(value):d}"), True
    if isinstance(value, numbers.Real):
        return _esc(f"{float(value):.4g}"), True
    return _esc(value), False


def _table(table: Table | None, *, scroll: bool = False) -> str:
    """An HTML table of a DataFrame, or of a mapping as two columns (item, value); "" for None."""
    if table is None:
        return ""
    if not isinstance(table, pd.DataFrame):
        table = pd.DataFrame({"item": list(table.keys()), "value": list(table.values())})
    head = "".join(f"<th>{_esc(c)}</th>" for c in table.columns)
    rows = []
    for values in table.itertuples(index=False, name=None):
        cells = []
        for v in values:
            text, numeric = _format_cell(v)
            cells.append(f'<td class="num">{text}</td>' if numeric else f"<td>{text}</td>")
        rows.append(f"<tr>{''.join(cells)}</tr>")
    body = f"<table><thead><tr>{head}</tr></thead><tbody>{''.join(rows)}</tbody></table>"
    return f'<div class="scroll">{body}</div>' if scroll else body


def _paragraphs(text: str | Sequence[str]) -> str:
    """Escaped paragraphs: a string is split at blank lines, a sequence gives one paragraph per item."""
    items = [p for p in (text.split("\n\n") if isinstance(text, str) else text)]
    return "".join(f"<p>{_esc(p.strip())}</p>" for p in items if str(p).strip())


def _bullets(items: Sequence[str]) -> str:
    """An escaped bullet list; "" when empty."""
    return "<ul>" + "".join(f"<li>{_esc(i)}</li>" for i in items) + "</ul>" if len(items) else ""


def _figure_uri(fig: FigureLike) -> str:
    """A ``data:`` URI of a matplotlib figure (PNG) or of an image file."""
    if isinstance(fig, Figure):
        buf = io.BytesIO()
        with house_style():
            fig.savefig(buf, format="png", dpi=REPORT_DPI)
        data, mime = buf.getvalue(), "image/png"
    elif isinstance(fig, (str, os.PathLike)):
        path = Path(fig)
        mime = IMAGE_TYPES.get(path.suffix.lower())
        if mime is None:
            raise ValueError(f"figure file {str(path)!r} must be one of {sorted(IMAGE_TYPES)}")
        if not path.is_file():
            raise FileNotFoundError(f"figure file {str(path)!r} does not exist")
        data = path.read_bytes()
    else:
        raise TypeError(f"a figure must be a matplotlib Figure or an image path; got {type(fig).__name__}")
    return f"data:{mime};base64,{base64.b64encode(data).decode('ascii')}"


def _figures(figures: Mapping[str, FigureLike] | None) -> str:
    out = []
    for caption, fig in (figures or {}).items():
        out.append(f'<figure><img src="{_figure_uri(fig)}" alt="{_esc(caption)}">'
                   f"<figcaption>{_esc(caption)}</figcaption></figure>")
    return "".join(out)


def _section(anchor: str, heading: str, body: str) -> str:
    if not body:
        body = '<p class="muted">Not provided.</p>'
    return f'<section id="{anchor}"><h2>{_esc(heading)}</h2>{body}</section>'


def _subsection(heading: str, body: str) -> str:
    return f"<h3>{_esc(heading)}</h3>{body}" if body else ""


#: Report sections: anchor and heading, in order.
SECTIONS: tuple[tuple[str, str], ...] = (
    ("data", "Data summary and validation"),
    ("model", "Model and priors"),
    ("diagnostics", "Sampler diagnostics"),
    ("exponents", "Estimated exponents"),
    ("laws", "Law comparison and verdicts"),
    ("methods", "Methods paragraph"),
)


def write_html_report(
    path: str | os.PathLike,
    *,
    title: str = "Branching-exponent analysis",
    warnings: Sequence[str] = (),
    data_summary: Table | None = None,
    validation_flags: pd.DataFrame | None = None,
    data_figures: Mapping[str, FigureLike] | None = None,
    model_description: str | Sequence[str] = "",
    priors: Table | None = None,
    assumptions: Sequence[str] = (),
    diagnostics: pd.DataFrame | None = None,
    diagnostic_figures: Mapping[str, FigureLike] | None = None,
    exponents: pd.DataFrame | None = None,
    naive: pd.DataFrame | None = None,
    exponent_figures: Mapping[str, FigureLike] | None = None,
    laws: pd.DataFrame | None = None,
    verdicts: Sequence[str] | pd.DataFrame = (),
    law_figures: Mapping[str, FigureLike] | None = None,
    methods: str | Sequence[str] = "",
    provenance: Mapping[str, object] | None = None,
) -> Path:
    """Write a self-contained HTML report of an analysis.

    Parameters
    ----------
    path : str or os.PathLike
        Output file; written atomically (complete or not at all). Its directory must exist.
    title : str
        Report title.
    warnings : sequence of str
        Everything the reader must see first (failed diagnostics, high Pareto k, flagged data, ...);
        shown at the top in a coloured box, or a note that there were none.
    data_summary : pandas.DataFrame or mapping, optional
        Counts and description of the data (a mapping becomes a two-column table).
    validation_flags : pandas.DataFrame, optional
        One row per validation problem (e.g. :meth:`allobranch.ValidationReport.to_frame`).
    data_figures, diagnostic_figures, exponent_figures, law_figures : mapping of str to figure, optional
        Figures for each section, by caption: a :class:`matplotlib.figure.Figure` (embedded as PNG) or the
        path of an image file (PNG, JPEG, GIF, SVG or WebP; embedded as it is).
    model_description : str or sequence of str
        The model in plain words; a string is split into paragraphs at blank lines.
    priors : pandas.DataFrame or mapping, optional
        The priors used, one row per parameter.
    assumptions : sequence of str
        Assumptions the results rest on, listed under the model.
    diagnostics : pandas.DataFrame, optional
        Sampler diagnostics (R-hat, ESS, divergences, ...).
    exponents : pandas.DataFrame, optional
        Exponents table (level, group, taxon, mean, sd, HDI, r_hat, ess_bulk).
    naive : pandas.DataFrame, optional
        Naive per-junction summaries, shown beside the model's estimates and labelled as naive.
    laws : pandas.DataFrame, optional
        Law comparison table (one row per hypothesis).
    verdicts : sequence of str or pandas.DataFrame
        The verdict for each scope, as sentences or as a table.
    methods : str or sequence of str
        A methods paragraph the user can adapt.
    provenance : mapping, optional
        Package version, data hash, seed, recipe, ... shown at the end. The allobranch version is added
        when absent.

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
    >>> write_html_report(out, warnings=["2 divergent transitions"]).name
    'report.html'
    """
    from allobranch import __version__

    warnings = [str(w) for w in warnings]
    if warnings:
        warn_box = (f'<section id="warnings" class="box warn" role="alert"><h2>Warnings ({len(warnings)})</h2>'
                    f"{_bullets(warnings)}</section>")
    else:
        warn_box = ('<section id="warnings" class="box ok"><h2>Warnings</h2>'
                    "<p>No warnings were raised.</p></section>")
    caution_box = f'<aside id="caution" class="box caution"><strong>Caution.</strong> {_esc(CAUTION)}</aside>'
    toc = "".join(f'<li><a href="#{a}">{_esc(h)}</a></li>' for a, h in SECTIONS)

    if validation_flags is not None and validation_flags.empty:
        flags = '<p class="muted">No rows were flagged or excluded.</p>'
    else:
        flags = _table(validation_flags, scroll=True)
    verdict_body = _table(verdicts) if isinstance(verdicts, pd.DataFrame) else _bullets([str(v) for v in verdicts])
    methods_body = _paragraphs(methods)
    bodies = {
        "data": _table(data_summary) + _subsection("Validation flags", flags) + _figures(data_figures),
        "model": (_paragraphs(model_description) + _subsection("Priors", _table(priors))
                  + _subsection("Assumptions", _bullets([str(a) for a in assumptions]))),
        "diagnostics": _table(diagnostics, scroll=True) + _figures(diagnostic_figures),
        "exponents": (_table(exponents, scroll=True)
                      + _subsection("Naive per-junction summaries (these ignore measurement error)",
                                    _table(naive, scroll=True))
                      + _figures(exponent_figures)),
        "laws": (_table(laws, scroll=True) + _subsection("Verdicts", verdict_body) + _figures(law_figures)),
        "methods": (f'<p class="muted">{_esc(METHODS_NOTE)}</p><div class="methods">{methods_body}</div>'
                    if methods_body else ""),
    }
    sections = "".join(_section(a, h, bodies[a]) for a, h in SECTIONS)
    prov = {"allobranch version": __version__, **dict(provenance or {})}
    footer = f"<footer><h2>Provenance</h2>{_table(prov)}<p>{_esc(CAUTION)}</p></footer>"

    document = (
        "<!DOCTYPE html>\n"
        '<html lang="en"><head><meta charset="utf-8">'
        '<meta name="viewport" content="width=device-width, initial-scale=1">'
        f"<title>{_esc(title)}</title><style>{_CSS}</style></head>\n"
        f"<body><main><h1>{_esc(title)}</h1>\n{warn_box}\n{caution_box}\n"
        f'<nav aria-label="Contents"><strong>Contents</strong><ol>{toc}</ol></nav>\n'
        f"{sections}\n{footer}</main></body></html>\n"
    )
    return atomic_write(path, lambda fh: fh.write(document.encode("utf-8")))
