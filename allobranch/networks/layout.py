"""Dendrogram layout of one specimen's derived junctions (positions only; drawing is in reporting)."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

from allobranch.networks.assemble import DAUGHTER_SEP, daughter_columns

#: Columns of :attr:`DendrogramLayout.lines`.
LINE_COLUMNS: tuple[str, ...] = ("x0", "y0", "x1", "y1", "size", "kind")
#: Columns of :attr:`DendrogramLayout.junctions`.
NODE_COLUMNS: tuple[str, ...] = ("row", "junction", "x", "y")


@dataclass(frozen=True)
class DendrogramLayout:
    """Where to draw a specimen's network.

    Attributes
    ----------
    lines : pandas.DataFrame
        One row per line: ``kind`` ``"segment"`` (horizontal, from a junction to a daughter's junction or
        tip, or into a root junction; ``size`` is the segment's size) or ``"bar"`` (vertical, joining a
        junction's daughters; ``size`` NaN).
    junctions : pandas.DataFrame
        One row per junction: ``row`` (position in the derived frame), ``junction`` label, ``x`` (its
        generation; the root segment enters from ``x - 1``) and ``y``.
    specimen : str
        The specimen drawn.
    """

    lines: pd.DataFrame
    junctions: pd.DataFrame
    specimen: str


def dendrogram_layout(frame: pd.DataFrame, specimen: str | None = None) -> DendrogramLayout:
    """Lay out one specimen's junctions as a dendrogram: generation to the right, tips stacked vertically.

    Parameters
    ----------
    frame : pandas.DataFrame
        A derived junction frame (:attr:`allobranch.networks.NetworkJunctions.frame`).
    specimen : str, optional
        The specimen to draw (default: the first in the frame).

    Returns
    -------
    DendrogramLayout
        Tips get ``y = 0, 1, 2, ...`` in the frame's depth-first order; a junction sits at the mean height
        of its daughters. A daughter segment that is not the parent of a junction in the frame (a tip, or a
        junction left out, e.g. by a type selection) ends one unit to the right.

    Raises
    ------
    ValueError
        If the specimen is not in the frame.
    """
    labels = frame["specimen"].astype(str)
    if specimen is None:
        specimen = str(labels.iloc[0])
    rows = np.flatnonzero(labels.to_numpy() == str(specimen))
    if not len(rows):
        raise ValueError(f"specimen {specimen!r} is not in the frame; it has {sorted(labels.unique())}")
    sub = frame.iloc[rows]
    by_parent = {str(seg): i for i, seg in enumerate(sub["parent_segment"].astype(str))}
    daughters = [str(d).split(DAUGHTER_SEP) for d in sub["daughter_segments"]]
    sizes = sub[daughter_columns(sub)].to_numpy(dtype=float)
    is_child = {by_parent[d] for ds in daughters for d in ds if d in by_parent}
    xs = sub["generation"].to_numpy(dtype=float)
    ys = np.full(len(sub), np.nan)
    lines: list[tuple[float, float, float, float, float, str]] = []
    next_tip = 0.0

    def place(root: int) -> float:
        """Depth-first, daughters in order: tips numbered as met, a junction at its daughters' mean."""
        nonlocal next_tip
        stack = [root]
        step = {root: 0}
        heights: dict[int, list[float]] = {root: []}
        via: dict[int, int] = {}
        while stack:
            j = stack[-1]
            k = step[j]
            if k < len(daughters[j]):
                step[j] = k + 1
                child = by_parent.get(daughters[j][k])
                if child is None:
                    lines.append((xs[j], next_tip, xs[j] + 1.0, next_tip, sizes[j, k], "segment"))
                    heights[j].append(next_tip)
                    next_tip += 1.0
                else:
                    stack.append(child)
                    step[child], heights[child], via[child] = 0, [], k
                continue
            stack.pop()
            ys[j] = float(np.mean(heights[j]))
            lines.append((xs[j], min(heights[j]), xs[j], max(heights[j]), np.nan, "bar"))
            if stack:
                up = stack[-1]
                heights[up].append(ys[j])
                lines.append((xs[up], ys[j], xs[j], ys[j], sizes[up, via[j]], "segment"))
        return ys[root]

    for i in range(len(sub)):
        if i not in is_child:
            y = place(i)
            lines.append((xs[i] - 1.0, y, xs[i], y, float(sub["parent"].iloc[i]), "segment"))
    return DendrogramLayout(
        lines=pd.DataFrame(lines, columns=list(LINE_COLUMNS)),
        junctions=pd.DataFrame(
            {"row": rows, "junction": sub["junction"].astype(str).to_numpy(), "x": xs, "y": ys},
            columns=list(NODE_COLUMNS),
        ),
        specimen=str(specimen),
    )
