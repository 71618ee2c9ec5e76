"""Vessel graphs to junctions: an edge list (node, node, size, optional length) oriented from a root node.

Skeletonised casts and micro-CT images give undirected graphs: each row is one edge (a vessel segment)
between two nodes, written in either direction. For every specimen the graph must be connected to the
given root node (the inlet); it is oriented away from the root by breadth-first search (scipy's sparse
graph routines, which keep 10^5-edge graphs within seconds). Each edge becomes a segment whose parent is
the edge arriving at its upstream node; a node with two or more edges leaving it downstream is a junction
(labelled by the node's id).

**Loops** (anastomoses, and edges repeated between the same two nodes) are found by comparing the number of
edges with the number of nodes. With ``loops="break_thinnest"`` (default) the spanning tree that keeps the
widest edges is kept (Kruskal's algorithm, networkx): every edge removed is the thinnest edge of the loop
it closes (the cycle property of maximum spanning trees), and each one is listed with its row. Ties between
equal sizes are broken by the node ids, never by the order of the rows. ``loops="error"`` refuses a graph
with loops and lists the edges that close them.
"""

from __future__ import annotations

import os
from collections.abc import Mapping
from typing import Any

import networkx as nx
import numpy as np
import pandas as pd
from scipy.sparse import csr_matrix
from scipy.sparse.csgraph import breadth_first_order, connected_components

from allobranch.networks.cells import TableSettings, raise_fatal, read_network_rows
from allobranch.networks.result import NetworkJunctions, check_rule
from allobranch.networks.rules import LOOP_RULES
from allobranch.networks.segments import (
    SegmentForest,
    derive_from_forest,
    rows_text,
)

#: Joins the two node ids of an edge in its segment name.
EDGE_SEP = "-"


def _root_of(root: str | Mapping[str, str], specimen: str) -> str | None:
    if isinstance(root, Mapping):
        value = root.get(specimen)
        return None if value is None else str(value).strip()
    return str(root).strip()


def _orient(
    u: np.ndarray, v: np.ndarray, size: np.ndarray, n_nodes: int, root: int
) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """Keep the widest spanning tree of a connected graph and orient it from ``root``.

    Parameters
    ----------
    u, v : numpy.ndarray of int
        Node codes (0 .. n_nodes - 1) of every edge's two ends.
    size : numpy.ndarray
        Edge sizes (the spanning tree keeps the widest).
    n_nodes : int
        Number of nodes.
    root : int
        Code of the root node.

    Returns
    -------
    kept : numpy.ndarray of int
        Edges in the tree (positions in ``u``).
    parent : numpy.ndarray of int
        For each kept edge, the position in ``kept`` of the edge above it (``-1`` at the root).
    lower : numpy.ndarray of int
        For each kept edge, its downstream node.
    removed : numpy.ndarray of int
        Edges left out to break loops.
    """
    keep = np.ones(len(u), dtype=bool)
    if len(u) > n_nodes - 1:  # a connected graph with more edges than a tree has loops
        graph = nx.MultiGraph()
        graph.add_nodes_from(range(n_nodes))
        graph.add_edges_from(
            (int(a), int(b), k, {"size": float(s)}) for k, (a, b, s) in enumerate(zip(u, v, size))
        )
        tree_edges = nx.maximum_spanning_edges(
            graph, algorithm="kruskal", weight="size", keys=True, data=False
        )
        keep[:] = False
        keep[[k for _, _, k in tree_edges]] = True
    kept = np.flatnonzero(keep)
    tu, tv = u[kept], v[kept]
    tree = csr_matrix((np.ones(len(kept)), (tu, tv)), shape=(n_nodes, n_nodes))
    _, pred = breadth_first_order(tree, root, directed=False, return_predecessors=True)
    lower = np.where(pred[tv] == tu, tv, tu)
    upper = np.where(lower == tv, tu, tv)
    into = np.full(n_nodes, -1, dtype=np.int64)
    into[lower] = np.arange(len(kept))
    return kept, into[upper], lower, np.flatnonzero(~keep)


def read_edge_forest(
    source: str | os.PathLike | pd.DataFrame,
    *,
    node_from: str,
    node_to: str,
    root: str | Mapping[str, str],
    loops: str,
    settings: TableSettings,
) -> SegmentForest:
    """Read an edge list, orient it from the root and return it as a forest of segments.

    Parameters
    ----------
    source : str, path-like or pandas.DataFrame
        The edge list (any table :func:`allobranch.intake.readers.read_table` reads).
    node_from, node_to : str
        Columns with the two node ids of each edge (either direction).
    root : str or mapping of str to str
        The root node's id: one id used in every specimen, or ``{specimen: id}``.
    loops : {"break_thinnest", "error"}
        See the module notes.
    settings : TableSettings
        Size, length and grouping columns, sheet and encoding; ``roots="one"`` requires the root node to
        have a single edge (the inlet), ``"many"`` lets several trees leave it.

    Returns
    -------
    SegmentForest
        Segments named ``from-to`` as written in the file; junction labels are the downstream node ids.

    Raises
    ------
    InputError
        Naming file, row and column: missing columns or cells, unusable sizes, a root that is not a node,
        edges not connected to the root, loops (with ``loops="error"``), a root with several edges (with
        ``roots="one"``).
    """
    check_rule("loops", loops, LOOP_RULES)
    cells = read_network_rows(
        source, ids=[(node_from, "from-node id", True), (node_to, "to-node id", True)], settings=settings
    )
    size = settings.size
    out, rows, (a, b) = cells.out, cells.rows, cells.ids
    taxa_arr, spec_arr, sizes, lengths = cells.taxon, cells.specimen, cells.size, cells.length
    raise_fatal(out)

    names = np.array([f"{u}{EDGE_SEP}{v}" for u, v in zip(a, b)], dtype=object)
    lo = np.array([min(u, v) for u, v in zip(a, b)], dtype=object)
    hi = np.array([max(u, v) for u, v in zip(a, b)], dtype=object)
    canonical = pd.DataFrame({"spec": spec_arr, "lo": lo, "hi": hi, "size": -sizes, "row": rows})
    canonical = canonical.sort_values(["spec", "lo", "hi", "size", "row"], kind="stable")
    kept_all: list[int] = []
    parent_all: list[int] = []
    lower_all: list[str] = []
    notes: list[str] = []
    for spec, group in canonical.groupby("spec", sort=True):
        root_id = _root_of(root, spec)
        first = int(group["row"].min())
        positions = group.index.to_numpy()
        codes, nodes = pd.factorize(np.concatenate([lo[positions], hi[positions]]))
        m = len(positions)
        u, v = codes[:m], codes[m:]
        if root_id is None:
            out.add(
                "fatal",
                first,
                None,
                f"no root node given for specimen '{spec}'",
                f"give the root node of every specimen, e.g. --root {spec}=ID",
                "no_root",
            )
            continue
        where = np.flatnonzero(nodes == root_id)
        if not len(where):
            out.add(
                "fatal",
                first,
                None,
                f"the root node '{root_id}' is not a node of specimen '{spec}' (no edge names it)",
                "give the id of the node at the inlet, as written in the from/to columns",
                "unknown_root",
            )
            continue
        r = int(where[0])
        full = csr_matrix((np.ones(m), (u, v)), shape=(len(nodes), len(nodes)))
        _, component = connected_components(full, directed=False)
        apart = np.sort(rows[positions[component[u] != component[r]]])
        if len(apart):
            out.add(
                "fatal",
                int(apart[0]),
                None,
                f"{len(apart)} edge(s) of specimen '{spec}' are not connected to the root node '{root_id}' "
                f"(rows {rows_text(apart.tolist())})",
                "connect them, remove them, or give each separate piece its own specimen label and root",
                "disconnected",
            )
            continue
        kept, parent, lower, removed = _orient(u, v, sizes[positions], len(nodes), r)
        degree = int(((u == r) | (v == r)).sum())
        if settings.roots == "one" and degree > 1:
            out.add(
                "fatal",
                first,
                None,
                f"the root node '{root_id}' of specimen '{spec}' has {degree} edges; one root segment is expected",
                "give the free end of the inlet segment as the root, or allow several trees from the root "
                "(roots='many', --roots many)",
                "several_roots",
            )
            continue
        removed = positions[removed][np.argsort(rows[positions[removed]], kind="stable")]
        if len(removed) and loops == "error":
            listed = sorted(int(rows[i]) for i in removed)
            out.add(
                "fatal",
                listed[0],
                None,
                f"specimen '{spec}' has {len(removed)} loop(s); the edges in rows {rows_text(listed)} each close one",
                "correct the tracing, or let the thinnest edge of every loop be removed (loops='break_thinnest', "
                "--loops break_thinnest)",
                "loop",
            )
            continue
        for i in removed:
            out.add(
                "excluded",
                int(rows[i]),
                size,
                f"edge {names[i]} (size {sizes[i]:g}) is not used: it closes a loop in specimen '{spec}' and is "
                "the thinnest edge of that loop",
                "check the tracing there; loops='error' (--loops error) refuses loops instead",
                "loop_edge",
            )
        if len(removed):
            notes.append(
                f"specimen '{spec}': {len(removed)} loop(s) broken at their thinnest edge (listed below)"
            )
        offset = len(kept_all)
        kept_all.extend(positions[kept].tolist())
        parent_all.extend(np.where(parent >= 0, parent + offset, -1).tolist())
        lower_all.extend(nodes[lower].tolist())
    raise_fatal(out)
    idx = np.asarray(kept_all, dtype=np.int64)
    ids = names[idx]
    if len(pd.unique(pd.Series(list(zip(spec_arr[idx], ids))))) < len(idx):
        ids = np.array([f"row{r}" for r in rows[idx]], dtype=object)  # node ids that run together
        notes.append(f"segments are named by their row ('row12'), since '{EDGE_SEP}'-joined node ids repeat")
    return SegmentForest(
        taxon=taxa_arr[idx],
        specimen=spec_arr[idx],
        ids=ids,
        parent=np.asarray(parent_all, dtype=np.int64),
        size=sizes[idx],
        length=None if lengths is None else lengths[idx],
        rows=rows[idx].astype(np.int64),
        source=cells.raw.label,
        size_column=size,
        junction=np.asarray(lower_all, dtype=object),
        problems=list(out.other),
        notes=notes,
    )


def junctions_from_edges(
    source: str | os.PathLike | pd.DataFrame,
    *,
    size: str,
    root: str | Mapping[str, str],
    node_from: str = "from",
    node_to: str = "to",
    loops: str = "break_thinnest",
    **options: Any,
) -> NetworkJunctions:
    """Junctions of a vessel graph given as an edge list.

    Parameters
    ----------
    source : str, path-like or pandas.DataFrame
        One row per edge.
    size : str
        Column with each edge's size.
    root : str or mapping of str to str
        The root (inlet) node: one id for every specimen, or ``{specimen: id}``.
    node_from, node_to : str
        Columns with the two node ids (default ``"from"`` and ``"to"``; direction does not matter).
    loops : {"break_thinnest", "error"}
        Loop handling (see the module notes).
    **options
        As for :func:`allobranch.networks.segments.junctions_from_segments`: table settings (``roots``
        there is whether the root node may have several edges; ``continuations`` concerns nodes with one
        edge in and one out), then measurement conventions.

    Returns
    -------
    NetworkJunctions
        Junctions labelled by their node id; removed loop edges in ``.problems``.

    Examples
    --------
    >>> import pandas as pd
    >>> edges = pd.DataFrame({"from": [0, 2, 1], "to": [1, 1, 3], "r": [1.0, 0.8, 0.7]})
    >>> res = junctions_from_edges(edges, size="r", root="0")
    >>> res.frame[["junction", "parent_segment", "daughter_segments"]].to_dict("records")
    [{'junction': '1', 'parent_segment': '0-1', 'daughter_segments': '2-1;1-3'}]
    """
    settings, measurement = TableSettings.split(size, options)
    forest = read_edge_forest(
        source, node_from=node_from, node_to=node_to, root=root, loops=loops, settings=settings
    )
    rules = {"root": root if isinstance(root, str) else dict(root), "loops": loops, "roots": settings.roots}
    return derive_from_forest(
        forest, kind="edges", continuations=settings.continuations, rules=rules, **measurement
    )
