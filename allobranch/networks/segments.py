"""Segment tables to junctions: one row per segment with its id, its parent's id and its size.

A **junction** is a segment with two or more children: its size is the parent, its children's sizes are
the daughters. A segment with exactly one child is a **continuation**; it is never a junction. With
``continuations="merge"`` a run of continuations and the segment they lead to become one segment whose
size is the mean of the pieces (weighted by length when a length column is given) and whose name joins
the pieces' ids with ``+`` (root to tip); with ``"keep"`` the pieces stay separate, so a junction's parent
is the piece just above the branch point. Either way every continuation is listed in the result.
"""

from __future__ import annotations

import os
from dataclasses import dataclass, field
from typing import Any

import numpy as np
import pandas as pd

from allobranch.errors import Problem
from allobranch.intake.validate import _Collector
from allobranch.networks.assemble import Runs, assemble_junctions, join_groups
from allobranch.networks.cells import TableSettings, raise_fatal, read_network_rows
from allobranch.networks.result import (
    CONTINUATION_COLUMNS,
    NetworkJunctions,
    check_rule,
    validate_frame,
)
from allobranch.networks.rules import CONTINUATION_RULES
from allobranch.networks.tree import build_topology, cycles, unreachable

#: Separator between the pieces of a merged segment in its name and rows.
PIECE_SEP = "+"

#: How many rows a message lists before "...".
SHOWN_ROWS = 8


@dataclass
class SegmentForest:
    """Segments of one or more specimens as a checked forest (parents by position).

    Attributes
    ----------
    taxon, specimen, ids : numpy.ndarray of object
        Labels of every segment (ids unique within a specimen).
    parent : numpy.ndarray of int
        Position of every segment's parent, ``-1`` for roots.
    size : numpy.ndarray of float
        Sizes in the user's unit and measure.
    length : numpy.ndarray of float or None
        Segment lengths, when known.
    rows : numpy.ndarray of int
        The user's row (or line) of every segment.
    source : str
        The file (or ``"<DataFrame>"``).
    size_column : str
        The user's size column, named in messages.
    junction : numpy.ndarray of object
        The label of the junction at the far end of every segment (the segment id by default).
    problems : list of Problem
        Findings that did not stop the conversion (blank rows, loops broken, ...).
    notes : list of str
        What was done, in words.
    """

    taxon: np.ndarray
    specimen: np.ndarray
    ids: np.ndarray
    parent: np.ndarray
    size: np.ndarray
    length: np.ndarray | None
    rows: np.ndarray
    source: str
    size_column: str
    junction: np.ndarray | None = None
    problems: list[Problem] = field(default_factory=list)
    notes: list[str] = field(default_factory=list)


def rows_text(rows: list[int]) -> str:
    shown = ", ".join(map(str, rows[:SHOWN_ROWS]))
    return shown + (", ..." if len(rows) > SHOWN_ROWS else "")


def link_parents(
    specimen: np.ndarray,
    ids: np.ndarray,
    parent_ids: list[str | None],
    rows: np.ndarray,
    columns: tuple[str, str],
    out: _Collector,
) -> np.ndarray:
    """Positions of the parents, reporting duplicate ids and parent ids that are not segment ids.

    Parameters
    ----------
    specimen, ids : numpy.ndarray of object
        Specimen and segment id of every row.
    parent_ids : list of str or None
        Parent id of every row; ``None`` for a root.
    rows : numpy.ndarray
        The user's rows.
    columns : (str, str)
        The id column and the parent-id column, for messages.
    out : _Collector
        Collects the problems.

    Returns
    -------
    numpy.ndarray of int
        Parent positions; ``-1`` for roots and for unknown parents (reported).
    """
    id_col, parent_col = columns
    keys = pd.MultiIndex.from_arrays([specimen, ids])
    dup = keys.duplicated(keep=False)
    if dup.any():
        seen = pd.DataFrame({"specimen": specimen[dup], "id": ids[dup], "row": rows[dup]})
        for (spec, seg), group in seen.groupby(["specimen", "id"], sort=False):
            rs = group["row"].tolist()
            out.add(
                "fatal",
                rs[1],
                id_col,
                f"segment id '{seg}' appears more than once in specimen '{spec}' (rows {rows_text(rs)})",
                "segment ids must be unique within a specimen; correct the id or remove the duplicate row",
                "duplicate_segment",
            )
        keys = pd.MultiIndex.from_arrays(
            [specimen, np.where(dup, np.arange(len(ids)).astype(str) + "\0", ids)]
        )
    has_parent = np.array([p is not None for p in parent_ids], dtype=bool)
    lookup = pd.MultiIndex.from_arrays(
        [specimen, np.array([p if p is not None else "" for p in parent_ids], dtype=object)]
    )
    parent = keys.get_indexer(lookup)
    parent[~has_parent] = -1
    for i in np.flatnonzero(has_parent & (parent < 0)):
        out.add(
            "fatal",
            rows[i],
            parent_col,
            f"parent id '{parent_ids[i]}' is not the id of any segment in specimen '{specimen[i]}'",
            "give the id of the segment this one branches from, or leave the cell empty for a root segment",
            "unknown_parent",
        )
    return parent.astype(np.int64)


def check_forest(
    forest_parent: np.ndarray,
    specimen: np.ndarray,
    ids: np.ndarray,
    rows: np.ndarray,
    parent_col: str | None,
    roots: str,
    out: _Collector,
) -> None:
    """Report cycles (with their ids and rows) and specimens with several roots when one is expected.

    Parameters
    ----------
    forest_parent : numpy.ndarray of int
        Parent positions (``-1`` for roots).
    specimen, ids : numpy.ndarray of object
        Labels of every row.
    rows : numpy.ndarray
        The user's rows.
    parent_col : str or None
        The parent-id column, for messages.
    roots : {"one", "many"}
        Whether a specimen may have several roots.
    out : _Collector
        Collects the problems.
    """
    lost = unreachable(forest_parent)
    reported: set[int] = set()
    for cycle in cycles(forest_parent, lost):
        reported.update(cycle)
        names = " -> ".join(f"'{ids[i]}' (row {rows[i]})" for i in cycle[:SHOWN_ROWS])
        out.add(
            "fatal",
            int(min(rows[i] for i in cycle)),
            parent_col,
            f"following parent ids, segments form a cycle in specimen '{specimen[cycle[0]]}': {names}"
            f"{' -> ...' if len(cycle) > SHOWN_ROWS else ''} -> back to '{ids[cycle[0]]}'",
            "a segment cannot descend from itself; correct one of these parent ids (a root has an empty parent id)",
            "cycle",
        )
    below = sorted(set(lost.tolist()) - reported)
    if below:
        out.add(
            "fatal",
            int(rows[below[0]]),
            parent_col,
            f"{len(below)} segment(s) descend from a cycle (rows {rows_text(sorted(rows[below].tolist()))})",
            "they are reached once the cycle above them is corrected",
            "below_cycle",
        )
    if roots == "one":
        is_root = forest_parent < 0
        frame = pd.DataFrame({"specimen": specimen[is_root], "row": rows[is_root], "id": ids[is_root]})
        for spec, group in frame.groupby("specimen", sort=False):
            if len(group) > 1:
                listed = ", ".join(
                    f"'{s}' (row {r})" for s, r in zip(group["id"][:SHOWN_ROWS], group["row"][:SHOWN_ROWS])
                )
                out.add(
                    "fatal",
                    int(group["row"].iloc[1]),
                    parent_col,
                    f"specimen '{spec}' has {len(group)} root segments (no parent): {listed}"
                    f"{', ...' if len(group) > SHOWN_ROWS else ''}",
                    "give each root its parent id, give separate trees separate specimen labels, or allow a forest "
                    "per specimen (roots='many', --roots many)",
                    "several_roots",
                )


def read_segment_forest(
    source: str | os.PathLike | pd.DataFrame, *, segment_id: str, parent_id: str, settings: TableSettings
) -> SegmentForest:
    """Read and check a segment table.

    Parameters
    ----------
    source : str, path-like or pandas.DataFrame
        Any table :func:`allobranch.intake.readers.read_table` reads (CSV, TSV, Parquet, Excel, DataFrame).
    segment_id, parent_id : str
        Columns with the segment's id and its parent's id (empty for a root).
    settings : TableSettings
        Size, length and grouping columns, the roots rule, sheet and encoding.

    Returns
    -------
    SegmentForest

    Raises
    ------
    InputError
        Listing every problem with file, row and column: missing columns, missing or repeated ids, parent
        ids that are not segment ids, cycles, several roots, missing/unusable/non-positive sizes.
    """
    cells = read_network_rows(
        source, ids=[(segment_id, "segment id", True), (parent_id, "parent id", False)], settings=settings
    )
    out, rows, (ids, parent_ids) = cells.out, cells.rows, cells.ids
    spec_arr = cells.specimen
    id_arr = np.array([s or "" for s in ids], dtype=object)
    parent = link_parents(spec_arr, id_arr, parent_ids, rows, (segment_id, parent_id), out)
    raise_fatal(out)
    check_forest(parent, spec_arr, id_arr, rows, parent_id, settings.roots, out)
    raise_fatal(out)
    return SegmentForest(
        taxon=cells.taxon,
        specimen=spec_arr,
        ids=id_arr,
        parent=parent,
        size=cells.size,
        length=cells.length,
        rows=rows.astype(np.int64),
        source=cells.raw.label,
        size_column=settings.size,
        problems=list(out.other),
    )


def _join_runs(run: np.ndarray, depth: np.ndarray, text: np.ndarray) -> np.ndarray:
    """Per run start, the members' texts joined with :data:`PIECE_SEP` from root to tip."""
    out = text.astype(object).copy()
    multi = np.flatnonzero(run != np.arange(len(run)))
    if len(multi):
        members = np.unique(np.concatenate([run[multi], multi]))
        members = members[np.lexsort((depth[members], run[members]))]
        heads, joined = join_groups(run[members], [str(x) for x in text[members].tolist()], PIECE_SEP)
        out[heads] = joined
    return out


def _continuations(forest: SegmentForest, n_children: np.ndarray) -> pd.DataFrame:
    cont = np.flatnonzero(n_children == 1)
    child = np.full(len(forest.parent), -1, dtype=np.int64)
    has = forest.parent >= 0
    child[forest.parent[has]] = np.flatnonzero(has)  # exact for single-child parents
    return pd.DataFrame(
        {
            "taxon": forest.taxon[cont],
            "specimen": forest.specimen[cont],
            "segment": forest.ids[cont],
            "child": forest.ids[child[cont]],
            "source": forest.source,
            "row": forest.rows[cont],
        },
        columns=list(CONTINUATION_COLUMNS),
    )


def derive_from_forest(
    forest: SegmentForest, *, kind: str, continuations: str, rules: dict[str, Any], **mapping_kwargs: Any
) -> NetworkJunctions:
    """Junctions of a checked forest of segments.

    Parameters
    ----------
    forest : SegmentForest
        From :func:`read_segment_forest` or :func:`allobranch.networks.graph.read_edge_forest`.
    kind : str
        ``"segments"`` or ``"edges"``, recorded in the result.
    continuations : {"merge", "keep"}
        See the module notes.
    rules : dict
        Rules already applied (recorded in the result, with the continuation rule added).
    **mapping_kwargs
        Passed to :func:`allobranch.intake.read_junctions` (``unit``, ``measure``, ``rel_error``, ...).

    Returns
    -------
    NetworkJunctions
    """
    check_rule("continuations", continuations, CONTINUATION_RULES)
    n = len(forest.parent)
    keep = continuations == "keep"
    topo = build_topology(forest.parent, breaks=np.ones(n, dtype=bool) if keep else None)
    rows_text = forest.rows.astype(str).astype(object)
    if keep:
        size, label, rows = forest.size, forest.ids, rows_text
    else:
        weight = forest.length if forest.length is not None else np.ones(n)
        size = np.bincount(topo.run, weights=forest.size * weight, minlength=n) / np.maximum(
            np.bincount(topo.run, weights=weight, minlength=n), np.finfo(float).tiny
        )
        label = _join_runs(topo.run, topo.depth, forest.ids)
        rows = _join_runs(topo.run, topo.depth, rows_text)
    frame = assemble_junctions(
        topo,
        np.ones(n, dtype=bool),
        taxon=forest.taxon,
        specimen=forest.specimen,
        junction=forest.junction if forest.junction is not None else forest.ids,
        runs=Runs(label=label, rows=rows, size_end=size, size_start=size),
        source=np.full(n, forest.source, dtype=object),
    )
    cont = _continuations(forest, topo.n_children)
    merged = "merged with the segment below them" + (
        " (size: length-weighted mean of the pieces)"
        if forest.length is not None
        else " (size: mean of the pieces)"
    )
    notes = [
        *forest.notes,
        f"{n} segments in {len(np.unique(forest.specimen))} specimen(s); {int((topo.n_children >= 2).sum())} branch "
        f"points, {int((topo.n_children == 0).sum())} tips",
        f"{len(cont)} continuation segment(s) (exactly one child; never junctions): "
        + (
            merged if not keep else "kept as separate pieces (a junction's parent is the piece just above it)"
        ),
    ]
    table = validate_frame(frame, forest.size_column, forest.source, **mapping_kwargs)
    return NetworkJunctions(
        frame=frame,
        table=table,
        kind=kind,
        rules={**rules, "continuations": continuations},
        notes=notes,
        problems=list(forest.problems),
        continuations=cont,
    )


def junctions_from_segments(
    source: str | os.PathLike | pd.DataFrame, *, segment_id: str, parent_id: str, size: str, **options: Any
) -> NetworkJunctions:
    """Junctions of a segment table (one row per segment with its parent's id).

    Parameters
    ----------
    source : str, path-like or pandas.DataFrame
        The segment table (CSV, TSV, Parquet, Excel or a DataFrame, which is not changed).
    segment_id, parent_id, size : str
        Columns with the segment's id, its parent's id (empty for a root) and its size.
    **options
        The fields of :class:`~allobranch.networks.cells.TableSettings` (``length``, ``taxon``,
        ``specimen``, ``continuations``, ``roots``, ``sheet``, ``encoding``), then the measurement
        conventions passed to :func:`allobranch.read_junctions` (``unit``, ``measure``, ``rel_error``).

    Returns
    -------
    NetworkJunctions
        ``.frame`` (derived junctions with tracing columns) and ``.table`` (the validated junction table).

    Raises
    ------
    InputError
        Naming the file, row and column of every problem (see :func:`read_segment_forest`).

    Examples
    --------
    >>> import pandas as pd
    >>> seg = pd.DataFrame({"id": [1, 2, 3], "up": [None, 1, 1], "r": [1.0, 0.8, 0.7]})
    >>> res = junctions_from_segments(seg, segment_id="id", parent_id="up", size="r")
    >>> res.frame[["junction", "parent", "d1", "d2", "daughter_segments"]].to_dict("records")
    [{'junction': '1', 'parent': 1.0, 'd1': 0.8, 'd2': 0.7, 'daughter_segments': '2;3'}]
    """
    settings, measurement = TableSettings.split(size, options)
    forest = read_segment_forest(source, segment_id=segment_id, parent_id=parent_id, settings=settings)
    return derive_from_forest(
        forest,
        kind="segments",
        continuations=settings.continuations,
        rules={"roots": settings.roots},
        **measurement,
    )
