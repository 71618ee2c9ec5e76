"""One specimen's network as a dendrogram, each junction coloured by its naive per-junction exponent."""

from __future__ import annotations

import numpy as np
import pandas as pd
from matplotlib.collections import LineCollection
from matplotlib.colors import Normalize
from matplotlib.lines import Line2D

from allobranch.networks.layout import dendrogram_layout
from allobranch.reporting.plots._common import require_columns
from allobranch.reporting.style import (
    DATA_COLOR,
    FLAG_COLOR,
    FLAG_MARKER,
    LIGHT_GREY,
    SMALL_PT,
    house_style,
    new_axes,
)

#: Columns of the derived junction frame this plot reads.
NETWORK_PLOT_COLUMNS: tuple[str, ...] = (
    "specimen",
    "junction",
    "parent",
    "parent_segment",
    "daughter_segments",
    "generation",
)
#: Colour map of the exponent (perceptually uniform, readable with colour-vision deficiencies).
EXPONENT_CMAP = "viridis"
#: Line widths (points) of the thinnest and thickest segments drawn.
LINE_WIDTHS = (0.4, 2.4)


def _flagged(frame: pd.DataFrame) -> np.ndarray:
    """The frame's ``flags`` column (validation flag codes; empty when none) as booleans."""
    if "flags" not in frame.columns:
        return np.zeros(len(frame), dtype=bool)
    return frame["flags"].fillna("").astype(str).str.len().to_numpy() > 0


def plot_network(frame: pd.DataFrame, geometry: pd.DataFrame, *, specimen: str | None = None, ax=None):
    """Draw one specimen's junctions as a dendrogram coloured by each junction's naive exponent.

    Parameters
    ----------
    frame : pandas.DataFrame
        Derived junctions (:attr:`allobranch.networks.NetworkJunctions.frame`); a non-empty ``flags`` cell
        marks a junction flagged by validation.
    geometry : pandas.DataFrame
        :func:`allobranch.geometry.junction_geometry` of the same result's table (same rows, same order);
        its ``exponent`` column colours the junctions.
    specimen : str, optional
        Specimen to draw (default: the frame's first).
    ax : matplotlib.axes.Axes, optional
        Axes to draw in; a single-column figure is created when omitted.

    Returns
    -------
    matplotlib.axes.Axes
        Generation on x (the root segment enters from the left), tips stacked on y; line width grows with
        segment size. Junctions without an exponent are hollow grey circles; flagged junctions carry the
        flag marker. A colour bar gives the exponent scale.

    Notes
    -----
    The per-junction exponents ignore measurement error; they are for looking at the network, not for
    inference.
    """
    require_columns(frame, NETWORK_PLOT_COLUMNS, "network junctions")
    require_columns(geometry, ("junction", "exponent"), "junction geometry")
    if (
        len(geometry) != len(frame)
        or not (geometry["junction"].astype(str).to_numpy() == frame["junction"].astype(str).to_numpy()).all()
    ):
        raise ValueError(
            "geometry must be the junction geometry of this frame's table (same junctions, same order)"
        )
    layout = dendrogram_layout(frame, specimen)
    nodes = layout.junctions
    exponent = geometry["exponent"].to_numpy(dtype=float)[nodes["row"]]
    flagged = _flagged(frame)[nodes["row"]]
    lines = layout.lines
    size = lines["size"].to_numpy(dtype=float)
    top = np.nanmax(size) if np.isfinite(size).any() else 1.0
    width = np.where(np.isfinite(size), LINE_WIDTHS[0] + (LINE_WIDTHS[1] - LINE_WIDTHS[0]) * size / top, 0.5)
    finite = np.isfinite(exponent)
    lo, hi = (np.nanmin(exponent), np.nanmax(exponent)) if finite.any() else (0.0, 1.0)
    norm = Normalize(vmin=lo, vmax=hi if hi > lo else lo + 1.0)

    with house_style():
        ax = new_axes(ax, aspect=0.9)
        segs = np.stack([lines[["x0", "y0"]].to_numpy(), lines[["x1", "y1"]].to_numpy()], axis=1)
        ax.add_collection(
            LineCollection(
                segs, linewidths=width, colors=DATA_COLOR, capstyle="butt", zorder=1, gid="network-lines"
            )
        )
        points = ax.scatter(
            nodes["x"][finite],
            nodes["y"][finite],
            c=exponent[finite],
            cmap=EXPONENT_CMAP,
            norm=norm,
            s=14,
            edgecolors="white",
            linewidths=0.3,
            zorder=3,
            gid="junctions",
        )
        if (~finite).any():
            ax.scatter(
                nodes["x"][~finite],
                nodes["y"][~finite],
                s=14,
                facecolors="none",
                edgecolors=LIGHT_GREY,
                linewidths=0.8,
                zorder=3,
                gid="no-exponent",
            )
        if flagged.any():
            ax.scatter(
                nodes["x"][flagged],
                nodes["y"][flagged],
                marker=FLAG_MARKER,
                s=22,
                color=FLAG_COLOR,
                zorder=4,
                gid="flagged",
            )
        ax.figure.colorbar(points, ax=ax, label="naive junction exponent", shrink=0.8)
        ax.autoscale_view()
        ax.set_xlabel("junction generation (branch points above it)")
        ax.set_yticks([])
        for side in ("left", "right", "top"):
            ax.spines[side].set_visible(False)
        ax.set_title(f"specimen {layout.specimen}: {len(nodes)} junctions", loc="left")
        handles = []
        if (~finite).any():
            handles.append(Line2D([], [], marker="o", ls="", mfc="none", mec=LIGHT_GREY, label="no exponent"))
        if flagged.any():
            handles.append(Line2D([], [], marker=FLAG_MARKER, ls="", color=FLAG_COLOR, label="flagged"))
        if handles:
            ax.legend(handles=handles, loc="upper right", fontsize=SMALL_PT, frameon=False)
    return ax
