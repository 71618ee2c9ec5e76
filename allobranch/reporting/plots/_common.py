"""Helpers shared by the figure modules: input checks, law reference lines and legends."""

from __future__ import annotations

from collections.abc import Callable, Iterable, Mapping

import numpy as np
import pandas as pd
from matplotlib.layout_engine import ConstrainedLayoutEngine
from matplotlib.patches import Patch

from allobranch.conventions import LEVELS, hdi_label
from allobranch.reporting.style import law_styles

#: Laws given as the comparison stage's table or as ``{label: exponent}``.
LawsLike = pd.DataFrame | Mapping[str, float]


def require_columns(table: pd.DataFrame, columns: Iterable[str], name: str) -> None:
    """Raise ``ValueError`` naming every column ``table`` lacks.

    Parameters
    ----------
    table : pandas.DataFrame
        The table handed to a plot function.
    columns : iterable of str
        Required column names.
    name : str
        What the table is called in the message (e.g. ``"exponents"``).
    """
    if not isinstance(table, pd.DataFrame):
        raise TypeError(f"{name} must be a pandas DataFrame; got {type(table).__name__}")
    missing = [c for c in columns if c not in table.columns]
    if missing:
        raise ValueError(f"the {name} table lacks column(s) {missing}; it has {list(table.columns)}")
    if table.empty:
        raise ValueError(f"the {name} table has no rows")


def check_levels(exponents: pd.DataFrame) -> None:
    """Raise ``ValueError`` if ``level`` holds a value outside :data:`LEVELS`."""
    bad = sorted(set(exponents["level"].astype(str)) - set(LEVELS))
    if bad:
        raise ValueError(f"the exponents table's level column must hold {LEVELS}; found {bad}")


def hdi_percent(table: pd.DataFrame) -> str:
    """The HDI probability of a table as a label such as ``"90% HDI"`` (``"HDI"`` when not recorded)."""
    return hdi_label(table.attrs.get("hdi_prob"))


def law_values(laws: LawsLike | None) -> list[tuple[str, float]]:
    """Distinct ``(label, exponent)`` pairs of the point laws, in increasing order of exponent.

    Parameters
    ----------
    laws : pandas.DataFrame, mapping or None
        A laws table (columns ``law`` and ``value``; rows with NaN ``value``, the free model, are skipped)
        or a mapping from label to exponent.

    Returns
    -------
    list of (str, float)
    """
    if laws is None:
        return []
    if isinstance(laws, pd.DataFrame):
        require_columns(laws, ("law", "value"), "laws")
        pairs = laws[["law", "value"]].drop_duplicates().itertuples(index=False)
        items = [(str(label), float(value)) for label, value in pairs]
    else:
        items = [(str(label), float(value)) for label, value in laws.items()]
    items = [(label, value) for label, value in items if np.isfinite(value)]
    bad = [label for label, value in items if value <= 0]
    if bad:
        raise ValueError(f"law exponents must be positive; check {bad}")
    seen: dict[float, str] = {}
    for label, value in items:
        if value in seen and seen[value] != label:
            raise ValueError(f"laws {seen[value]!r} and {label!r} have the same exponent {value:g}")
        seen.setdefault(value, label)
    return sorted(((label, value) for value, label in seen.items()), key=lambda pair: pair[1])


def draw_laws(draw: Callable[..., object], laws: list[tuple[str, float]], kind: str, **kwargs) -> None:
    """Draw every law in its house style (:func:`~allobranch.reporting.style.law_styles`), labelled, with
    the gid ``"law-<kind>:<exponent>"`` that :func:`legend_above` sorts the laws' legend entries by.

    Parameters
    ----------
    draw : callable
        ``draw(exponent, **style)`` drawing one law (a line, a curve).
    laws : list of (str, float)
        Output of :func:`law_values`.
    kind : str
        What is drawn, in the gid (``"line"``, ``"curve"``).
    **kwargs
        Passed to every ``draw`` beside the law's colour, line style, label and gid.
    """
    styles = law_styles([v for _, v in laws])
    for label, value in laws:
        st = styles[value]
        draw(
            value, color=st.color, linestyle=st.linestyle, label=label, gid=f"law-{kind}:{value!r}", **kwargs
        )


def draw_law_lines(ax, laws: list[tuple[str, float]], *, horizontal: bool = False) -> None:
    """Draw a labelled reference line at each law's exponent (vertical; horizontal when the exponent is on
    the y axis).

    Parameters
    ----------
    ax : matplotlib.axes.Axes
        Target axes.
    laws : list of (str, float)
        Output of :func:`law_values`.
    horizontal : bool
        Draw horizontal lines.
    """
    draw_laws(ax.axhline if horizontal else ax.axvline, laws, "line", linewidth=1.0, zorder=1)


def legend_above(ax, ncol: int | None = None, *, figure_level: bool | None = None, **kwargs):
    """Place the Axes legend above the plot, where it cannot cover data or the axis label.

    Parameters
    ----------
    ax : matplotlib.axes.Axes
        Axes whose labelled artists go into the legend.
    ncol : int, optional
        Columns when no law is drawn (entries then read row by row); by default one for at most two
        entries, else two. When laws are drawn the legend has two columns: the data on the left, the laws
        (artists whose gid starts with ``"law-"``) on the right.
    figure_level : bool, optional
        Centre the legend over the whole figure instead of over the Axes. By default this is done when
        ``ax`` is its figure's only Axes and the figure uses the constrained layout, which makes room for
        a figure legend; otherwise the legend sits just above the Axes.
    **kwargs
        Passed to :meth:`matplotlib.axes.Axes.legend`.

    Returns
    -------
    matplotlib.legend.Legend or None
        None when nothing is labelled.
    """
    handles, labels = ax.get_legend_handles_labels()
    if not handles:
        return None
    is_law = [(getattr(h, "get_gid", lambda: None)() or "").startswith("law-") for h in handles]
    data = [(h, lab) for (h, lab), law in zip(zip(handles, labels), is_law) if not law]
    laws = [(h, lab) for (h, lab), law in zip(zip(handles, labels), is_law) if law]
    if data and laws:
        nrows = max(len(data), len(laws))
        blank = (Patch(visible=False), "")
        entries = data + [blank] * (nrows - len(data)) + laws + [blank] * (nrows - len(laws))
        ncol = 2
    else:
        entries = data or laws
        if ncol is None:
            ncol = 1 if len(entries) <= 2 else 2
        # matplotlib fills columns top to bottom; reorder so the entries read left to right by rows
        nrows = -(-len(entries) // ncol)
        entries = [
            entries[r * ncol + c] for c in range(ncol) for r in range(nrows) if r * ncol + c < len(entries)
        ]
    args = ([h for h, _ in entries], [lab for _, lab in entries])
    if figure_level is None:
        fig = ax.figure
        figure_level = len(fig.axes) == 1 and isinstance(fig.get_layout_engine(), ConstrainedLayoutEngine)
    if figure_level:
        return ax.figure.legend(*args, loc="outside upper center", ncols=ncol, columnspacing=1.2, **kwargs)
    kwargs.setdefault("loc", "lower center")
    kwargs.setdefault("bbox_to_anchor", (0.5, 1.02))
    return ax.legend(*args, ncols=ncol, borderaxespad=0.0, columnspacing=1.2, **kwargs)


def padded_limits(values: Iterable[float], pad: float = 0.05) -> tuple[float, float]:
    """Limits covering every finite value with a relative margin on both sides."""
    arr = np.asarray([v for v in values if np.isfinite(v)], dtype=float)
    if arr.size == 0:
        return 0.0, 1.0
    lo, hi = float(arr.min()), float(arr.max())
    span = hi - lo if hi > lo else max(abs(hi), 1.0)
    return lo - pad * span, hi + pad * span
