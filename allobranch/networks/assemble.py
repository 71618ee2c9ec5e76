"""From a forest with sized runs to the wide junction frame: one row per branch point.

The converters describe their network as a :class:`~allobranch.networks.tree.Topology` over nodes plus, for
every run (unbranched stretch, see :mod:`allobranch.networks.tree`), a label, the user's rows it came from and
its size. A run may have two sizes: the one read where it ends (used when it is the parent of a junction)
and the one read where it starts (used when it is a daughter); most radius rules give the same number.

Row order is canonical, so that the order of the user's rows never matters: specimens sorted by taxon and
specimen label, then each specimen's junctions in depth-first order from its root(s), daughters visited
largest first (ties by label). Within a junction the daughters are ``d1, d2, ...`` from largest to smallest.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

from allobranch.networks.tree import Topology

#: Columns that trace every junction back to the user's network, in output order (after the sizes).
TRACING_COLUMNS: tuple[str, ...] = (
    "parent_segment",
    "daughter_segments",
    "generation",
    "strahler_order",
    "n_tips",
    "parent_rows",
    "daughter_rows",
    "source",
)

#: Columns added after the tracing columns when the converter read each size from several samples (SWC):
#: how many samples the parent's size and each daughter's size (``;``-separated) were read from.
SAMPLE_COLUMNS: tuple[str, ...] = ("parent_samples", "daughter_samples")

#: Separator between the daughters of one junction in ``daughter_segments`` and ``daughter_rows``.
DAUGHTER_SEP = ";"


@dataclass(frozen=True)
class Runs:
    """What the converter knows about every run, indexed by the run's first node.

    Attributes
    ----------
    label : numpy.ndarray of object
        Segment name(s) as the user wrote them (only entries at run starts are read).
    rows : numpy.ndarray of object
        The user's row or line numbers of the run, as text.
    size_end : numpy.ndarray of float
        Size read at the run's far end, in the user's unit and measure (used when it is a parent).
    size_start : numpy.ndarray of float
        Size read at the run's near end (used when it is a daughter).
    samples_end, samples_start : numpy.ndarray of int, optional
        How many samples each of the two sizes was read from (SWC); gives the :data:`SAMPLE_COLUMNS`.
    """

    label: np.ndarray
    rows: np.ndarray
    size_end: np.ndarray
    size_start: np.ndarray
    samples_end: np.ndarray | None = None
    samples_start: np.ndarray | None = None


def _ordered_runs(topology: Topology, taxon: np.ndarray, specimen: np.ndarray, runs: Runs) -> np.ndarray:
    """Every run start in canonical depth-first order (see the module notes)."""
    heads = np.flatnonzero(topology.run == np.arange(len(topology.run)))
    parent_node = topology.parent[heads]
    up = np.where(parent_node >= 0, topology.run[np.maximum(parent_node, 0)], -1)
    frame = pd.DataFrame(
        {
            "head": heads,
            "up": up,
            "taxon": taxon[heads].astype(str),
            "specimen": specimen[heads].astype(str),
            "size": -runs.size_start[heads],
            "label": runs.label[heads].astype(str),
        }
    )
    frame = frame.sort_values(["up", "taxon", "specimen", "size", "label", "head"], kind="stable")
    roots = frame.loc[frame["up"] < 0, "head"].tolist()
    inner = frame[frame["up"] >= 0]
    children: dict[int, list[int]] = {}
    for up_run, head in zip(inner["up"].tolist(), inner["head"].tolist()):
        children.setdefault(up_run, []).append(head)
    out: list[int] = []
    stack = roots[::-1]
    while stack:
        node = stack.pop()
        out.append(node)
        stack.extend(children.get(node, ())[::-1])
    return np.asarray(out, dtype=np.int64)


def assemble_junctions(
    topology: Topology,
    eligible: np.ndarray,
    *,
    taxon: np.ndarray,
    specimen: np.ndarray,
    junction: np.ndarray,
    runs: Runs,
    source: np.ndarray,
) -> pd.DataFrame:
    """The wide junction frame of a forest.

    Parameters
    ----------
    topology : Topology
        The forest.
    eligible : numpy.ndarray of bool
        Nodes that may be junctions; every eligible node with two or more children becomes one.
    taxon, specimen : numpy.ndarray of object
        Labels of every node.
    junction : numpy.ndarray of object
        Label of the junction at every node (unique within a specimen).
    runs : Runs
        Labels, rows and sizes of the runs.
    source : numpy.ndarray of object
        File each node was read from.

    Returns
    -------
    pandas.DataFrame
        Columns ``taxon, specimen, junction, parent, d1 .. dK`` (sizes in the user's unit and measure),
        the :data:`TRACING_COLUMNS` and, when the runs carry sample counts, the :data:`SAMPLE_COLUMNS`;
        one row per junction in canonical order.
    """
    is_junction = np.asarray(eligible, dtype=bool) & (topology.n_children >= 2)
    rank = np.full(len(topology.run), -1, dtype=np.int64)
    ordered = _ordered_runs(topology, taxon, specimen, runs)
    rank[ordered] = np.arange(len(ordered))
    nodes = np.flatnonzero(is_junction)
    nodes = nodes[np.argsort(rank[topology.run[nodes]], kind="stable")]
    up = topology.run[nodes]

    pos = np.full(len(topology.run), -1, dtype=np.int64)
    pos[nodes] = np.arange(len(nodes))
    kids = np.flatnonzero((topology.parent >= 0) & (pos[np.maximum(topology.parent, 0)] >= 0))
    long = pd.DataFrame(
        {
            "pos": pos[topology.parent[kids]],
            "size": runs.size_start[kids],
            "label": runs.label[kids].astype(object),
            "rows": runs.rows[kids].astype(object),
            "samples": runs.samples_start[kids] if runs.samples_start is not None else 0,
        }
    ).sort_values(["pos", "size", "label"], ascending=[True, False, True], kind="stable")
    long["k"] = long.groupby("pos").cumcount() + 1
    wide = long.pivot(index="pos", columns="k", values="size").reindex(np.arange(len(nodes)))
    keys = long["pos"].to_numpy()
    _, daughter_segments = join_groups(keys, [str(x) for x in long["label"].tolist()], DAUGHTER_SEP)
    _, daughter_rows = join_groups(keys, [str(x) for x in long["rows"].tolist()], DAUGHTER_SEP)

    out = pd.DataFrame(
        {
            "taxon": taxon[nodes].astype(str),
            "specimen": specimen[nodes].astype(str),
            "junction": junction[nodes].astype(str),
            "parent": runs.size_end[up].astype(float),
        }
    )
    for k in wide.columns:
        out[f"d{k}"] = wide[k].to_numpy(dtype=float)
    out["parent_segment"] = runs.label[up].astype(str)
    out["daughter_segments"] = daughter_segments
    out["generation"] = topology.generation[nodes]
    out["strahler_order"] = topology.strahler[nodes]
    out["n_tips"] = topology.n_tips[nodes]
    out["parent_rows"] = runs.rows[up].astype(str)
    out["daughter_rows"] = daughter_rows
    out["source"] = source[nodes].astype(str)
    if runs.samples_end is not None:
        out["parent_samples"] = runs.samples_end[up].astype(np.int64)
        _, daughter_samples = join_groups(keys, [str(x) for x in long["samples"].tolist()], DAUGHTER_SEP)
        out["daughter_samples"] = daughter_samples
    return out.reset_index(drop=True)


def join_groups(keys: np.ndarray, texts: list[str], sep: str) -> tuple[np.ndarray, list[str]]:
    """Join consecutive texts that share a key (``keys`` sorted so that equal keys are adjacent).

    Returns
    -------
    unique_keys : numpy.ndarray
        Each key once, in order.
    joined : list of str
        The texts of each key joined with ``sep``.

    Examples
    --------
    >>> join_groups(np.array([1, 1, 4]), ["a", "b", "c"], "+")
    (array([1, 4]), ['a+b', 'c'])
    """
    keys = np.asarray(keys)
    if not len(keys):
        return keys, []
    starts = np.concatenate([[0], np.flatnonzero(keys[1:] != keys[:-1]) + 1, [len(keys)]])
    joined = [sep.join(texts[a:b]) for a, b in zip(starts[:-1].tolist(), starts[1:].tolist())]
    return keys[starts[:-1]], joined


def daughter_columns(frame: pd.DataFrame) -> list[str]:
    """The ``d1 .. dK`` columns of a junction frame, in order."""
    cols = [c for c in frame.columns if isinstance(c, str) and c[:1] == "d" and c[1:].isdigit()]
    return sorted(cols, key=lambda c: int(c[1:]))
