"""House style for figures: journal widths, print-size fonts, a colour-blind-safe palette, atomic saving.

The style is applied only inside allobranch's own functions through :func:`house_style`, a
:func:`matplotlib.rc_context`; the user's global ``matplotlib.rcParams`` are never changed.

Colours are the Okabe–Ito palette (Okabe & Ito 2008, "Color Universal Design"), which stays distinct for
the common colour-vision deficiencies. Every law also has its own line style and marker so that figures
still read in greyscale.
"""

from __future__ import annotations

import contextlib
import os
from collections.abc import Sequence
from dataclasses import dataclass
from pathlib import Path

import matplotlib
import numpy as np

from allobranch.conventions import FIGURE_FORMATS  # noqa: F401 - re-exported: the formats' home
from allobranch.io import atomic_write

#: Millimetres per inch, for converting journal widths.
MM_PER_INCH = 25.4

#: Figure widths in millimetres: one journal column and the full page width. 85 mm fits the single
#: columns of Nature (89 mm) and Elsevier journals (90 mm); 180 mm fits their full widths (183 and 190 mm).
#: See ``tests/test_plots.py`` for the sources.
WIDTHS_MM: dict[str, float] = {"single": 85.0, "double": 180.0}

#: Text sizes in points at final print size: ordinary text (labels, ticks, legends, titles) and the
#: smallest annotation. Nature asks for 5-7 pt, Elsevier for 7 pt text and nothing below 6 pt, so ordinary
#: text is 7 pt and nothing is smaller than 6 pt (sources in ``tests/test_plots.py``).
TEXT_PT = 7.0
SMALL_PT = 6.0

#: Okabe–Ito colours by name.
OKABE_ITO: dict[str, str] = {
    "black": "#000000",
    "orange": "#E69F00",
    "sky_blue": "#56B4E9",
    "bluish_green": "#009E73",
    "yellow": "#F0E442",
    "blue": "#0072B2",
    "vermillion": "#D55E00",
    "reddish_purple": "#CC79A7",
}

#: Order in which colours are cycled (yellow last: it is faint on white).
PALETTE: tuple[str, ...] = tuple(
    OKABE_ITO[k]
    for k in ("blue", "orange", "bluish_green", "vermillion", "reddish_purple", "sky_blue", "black", "yellow")
)

#: Neutral colours for data that is not a law or a model estimate.
DATA_COLOR = "#4D4D4D"
LIGHT_GREY = "#BBBBBB"
#: Colour and marker of junctions flagged by validation.
FLAG_COLOR = OKABE_ITO["vermillion"]
FLAG_MARKER = "X"

#: Formats :func:`save_figure` writes.

#: matplotlib settings of the house style (used only inside :func:`house_style`).
HOUSE_RC: dict[str, object] = {
    "font.family": "sans-serif",
    "font.sans-serif": ["DejaVu Sans", "Arial", "Helvetica", "Liberation Sans"],
    "font.size": TEXT_PT,
    "axes.titlesize": TEXT_PT,
    "axes.labelsize": TEXT_PT,
    "xtick.labelsize": TEXT_PT,
    "ytick.labelsize": TEXT_PT,
    "legend.fontsize": TEXT_PT,
    "legend.title_fontsize": TEXT_PT,
    "figure.titlesize": TEXT_PT,
    "legend.frameon": False,
    "legend.handlelength": 2.6,
    "axes.linewidth": 0.6,
    "axes.spines.top": False,
    "axes.spines.right": False,
    "axes.prop_cycle": matplotlib.cycler(color=list(PALETTE)),
    "lines.linewidth": 1.0,
    "lines.markersize": 4,
    "xtick.major.width": 0.6,
    "ytick.major.width": 0.6,
    "xtick.major.size": 3,
    "ytick.major.size": 3,
    "xtick.minor.width": 0.4,
    "ytick.minor.width": 0.4,
    "errorbar.capsize": 0,
    "figure.dpi": 100,
    "savefig.dpi": 300,
    "pdf.fonttype": 42,
    "ps.fonttype": 42,
    "svg.fonttype": "none",
}


@dataclass(frozen=True)
class LawStyle:
    """How one law is drawn wherever it appears.

    Attributes
    ----------
    color : str
        Line and marker colour.
    linestyle : str or tuple
        Matplotlib line style.
    marker : str
        Matplotlib marker.
    """

    color: str
    linestyle: str | tuple
    marker: str


#: Fixed styles for the classic laws, keyed by exponent, so each law looks the same in every figure.
CLASSIC_LAW_STYLES: dict[float, LawStyle] = {
    3.0: LawStyle(OKABE_ITO["blue"], "-", "s"),
    2.0: LawStyle(OKABE_ITO["orange"], (0, (5, 2)), "^"),
    1.5: LawStyle(OKABE_ITO["bluish_green"], (0, (5, 1.5, 1, 1.5)), "v"),
    7.0 / 3.0: LawStyle(OKABE_ITO["reddish_purple"], (0, (1, 1.2)), "D"),
}

#: Styles handed out, in order, to other exponents (sorted by value).
CUSTOM_LAW_STYLES: tuple[LawStyle, ...] = (
    LawStyle(OKABE_ITO["vermillion"], (0, (3, 1, 1, 1, 1, 1)), "P"),
    LawStyle(OKABE_ITO["sky_blue"], (0, (8, 2)), "h"),
    LawStyle(OKABE_ITO["black"], (0, (2, 2)), "*"),
    LawStyle(OKABE_ITO["yellow"], (0, (6, 1, 2, 1)), "p"),
)


def law_styles(values: Sequence[float]) -> dict[float, LawStyle]:
    """Assign a :class:`LawStyle` to each law exponent.

    Parameters
    ----------
    values : sequence of float
        Exponents of the laws drawn in one figure.

    Returns
    -------
    dict of float to LawStyle
        Classic laws (3, 2, 3/2, 7/3) always get their fixed style; other values get the custom styles in
        increasing order of value (cycling when there are more values than styles).
    """
    out: dict[float, LawStyle] = {}
    custom = sorted({float(v) for v in values} - set(CLASSIC_LAW_STYLES), key=float)
    for v in values:
        v = float(v)
        classic = next((k for k in CLASSIC_LAW_STYLES if np.isclose(k, v, rtol=0, atol=1e-9)), None)
        if classic is not None:
            out[v] = CLASSIC_LAW_STYLES[classic]
    custom = [v for v in custom if v not in out]
    for i, v in enumerate(custom):
        out[v] = CUSTOM_LAW_STYLES[i % len(CUSTOM_LAW_STYLES)]
    return out


def house_style() -> contextlib.AbstractContextManager:
    """Context manager applying the house style to figures created (and saved) inside it.

    Returns
    -------
    contextlib.AbstractContextManager
        A :func:`matplotlib.rc_context`; the previous settings come back when it exits.

    Examples
    --------
    >>> import matplotlib
    >>> before = matplotlib.rcParams["font.size"]
    >>> with house_style():
    ...     inside = matplotlib.rcParams["font.size"]
    >>> inside, matplotlib.rcParams["font.size"] == before
    (7.0, True)
    """
    return matplotlib.rc_context(HOUSE_RC)


def figure_width_mm(width: str | float) -> float:
    """Width in millimetres for ``"single"``, ``"double"`` or a number of millimetres.

    Parameters
    ----------
    width : {"single", "double"} or float
        Journal column width name or millimetres.

    Returns
    -------
    float
        Width in millimetres.
    """
    if isinstance(width, str):
        if width not in WIDTHS_MM:
            raise ValueError(
                f"width must be one of {tuple(WIDTHS_MM)} or a number of millimetres; got {width!r}"
            )
        return WIDTHS_MM[width]
    width = float(width)
    if not np.isfinite(width) or width <= 0:
        raise ValueError(f"width must be a positive number of millimetres; got {width!r}")
    return width


def figure(
    width: str | float = "single",
    aspect: float = 0.75,
    *,
    height_mm: float | None = None,
    nrows: int = 1,
    ncols: int = 1,
    **subplots_kw,
):
    """Create a figure of journal width in the house style.

    Parameters
    ----------
    width : {"single", "double"} or float, default "single"
        ``"single"`` (85 mm), ``"double"`` (180 mm) or a width in millimetres.
    aspect : float, default 0.75
        Height over width; ignored when ``height_mm`` is given.
    height_mm : float, optional
        Height in millimetres.
    nrows, ncols : int, default 1
        Grid of axes, as in :func:`matplotlib.pyplot.subplots`.
    **subplots_kw
        Passed to :func:`matplotlib.pyplot.subplots` (for example ``sharey=True``).

    Returns
    -------
    fig : matplotlib.figure.Figure
        The figure, with the constrained layout engine.
    axes : matplotlib.axes.Axes or numpy.ndarray of Axes
        As returned by :func:`matplotlib.pyplot.subplots` (``squeeze`` applies).
    """
    import matplotlib.pyplot as plt

    w = figure_width_mm(width)
    h = float(height_mm) if height_mm is not None else w * float(aspect)
    if not np.isfinite(h) or h <= 0:
        raise ValueError(f"the figure height must be positive; got {h!r} mm")
    subplots_kw.setdefault("layout", "constrained")
    with house_style():
        return plt.subplots(nrows, ncols, figsize=(w / MM_PER_INCH, h / MM_PER_INCH), **subplots_kw)


def _metadata(fmt: str) -> dict | None:
    """File metadata without creation dates, so the same figure gives the same file."""
    if fmt == "pdf":
        return {"CreationDate": None, "Creator": "allobranch"}
    if fmt == "svg":
        return {"Date": None, "Creator": "allobranch"}
    if fmt == "png":
        return {"Software": "allobranch"}
    return None


def save_figure(
    fig,
    path_stem: str | os.PathLike,
    formats: Sequence[str] = ("pdf", "svg", "png"),
    dpi: int = 300,
) -> list[Path]:
    """Save a figure in several formats with embedded fonts, each file written atomically.

    Parameters
    ----------
    fig : matplotlib.figure.Figure
        The figure to save.
    path_stem : str or os.PathLike
        Destination without suffix; ``"out/fig1"`` gives ``out/fig1.pdf``, ``out/fig1.svg``, ...
    formats : sequence of str, default ("pdf", "svg", "png")
        Any of :data:`FIGURE_FORMATS`.
    dpi : int, default 300
        Resolution of raster formats.

    Returns
    -------
    list of pathlib.Path
        The files written, in the order of ``formats``.

    Notes
    -----
    Fonts are embedded as TrueType (``pdf.fonttype = 42``) so text stays editable in vector editors; SVG
    keeps text as text. The figure is saved at its own size (no tight bounding box), so a PNG is exactly
    ``width_in * dpi`` by ``height_in * dpi`` pixels.
    """
    formats = [str(f).lower().lstrip(".") for f in formats]
    bad = [f for f in formats if f not in FIGURE_FORMATS]
    if bad or not formats:
        raise ValueError(f"formats must be a non-empty selection of {FIGURE_FORMATS}; got {tuple(formats)}")
    stem = Path(path_stem)
    if stem.suffix.lstrip(".").lower() in FIGURE_FORMATS:
        raise ValueError(f"path_stem must not carry a file suffix (got {str(stem)!r}); formats adds them")
    written = []
    with house_style():
        for fmt in formats:
            dest = stem.with_name(f"{stem.name}.{fmt}")
            written.append(
                atomic_write(
                    dest, lambda p, fmt=fmt: fig.savefig(p, format=fmt, dpi=dpi, metadata=_metadata(fmt))
                )
            )
    return written


def new_axes(ax, *, width: str | float = "single", aspect: float = 0.75, height_mm: float | None = None):
    """Return ``ax`` if given, otherwise a new house-style figure's single Axes.

    Parameters
    ----------
    ax : matplotlib.axes.Axes or None
        Axes supplied by the caller.
    width, aspect, height_mm
        As in :func:`figure`, used only when ``ax`` is None.

    Returns
    -------
    matplotlib.axes.Axes
    """
    if ax is not None:
        return ax
    _, ax = figure(width, aspect, height_mm=height_mm)
    return ax
