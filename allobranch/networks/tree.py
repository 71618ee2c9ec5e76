"""Topology of a rooted forest given as parent pointers: order, generation, Strahler order, tips, runs.

Every converter (segment tables, edge lists, SWC files) reduces its input to one array ``parent`` in which
``parent[i]`` is the index of node ``i``'s parent and ``-1`` marks a root. This module knows nothing about
files, labels or sizes; it works on integer arrays so that networks of 10^5-10^6 nodes take well under a
second. Breadth-first order comes from :func:`scipy.sparse.csgraph.breadth_first_order`.

Definitions used throughout the package:

* a **branch point** is a node with two or more children; a **continuation** is a node with exactly one
  child; a **tip** has none;
* a **run** is a maximal unbranched path: it starts at a root, at a child of a branch point, or wherever the
  caller asks (``breaks``), and continues through single children; it ends at a branch point or a tip;
* the **generation** of a node is the number of counted branch points strictly upstream of it (continuations
  never count, so it is the same whether continuations are merged or kept);
* the **Strahler order** of a tip is 1; at a branch point it is the largest order among the children, plus
  one if two or more children share that largest order; a continuation passes its child's order on
  (Strahler 1957, as used for vascular and bronchial trees; definition from memory);
* **tips** counts the tips downstream of (and including) a node.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy.sparse import csr_matrix
from scipy.sparse.csgraph import breadth_first_order


@dataclass(frozen=True)
class Topology:
    """Order and per-node properties of a forest.

    Attributes
    ----------
    parent : numpy.ndarray
        Parent index of every node, ``-1`` for roots.
    order : numpy.ndarray
        Every node once, parents before children (breadth first from the roots, roots in index order).
    n_children : numpy.ndarray
        Number of children of every node.
    depth : numpy.ndarray
        Number of edges from the node's root.
    generation : numpy.ndarray
        Counted branch points strictly upstream (see the module notes).
    strahler : numpy.ndarray
        Strahler order.
    n_tips : numpy.ndarray
        Tips downstream of the node, itself included.
    run : numpy.ndarray
        Index of the first node of the run each node belongs to.
    run_end : numpy.ndarray
        For a run's first node, the index of the run's last node (a branch point or a tip); ``-1`` for
        nodes that do not start a run.
    """

    parent: np.ndarray
    order: np.ndarray
    n_children: np.ndarray
    depth: np.ndarray
    generation: np.ndarray
    strahler: np.ndarray
    n_tips: np.ndarray
    run: np.ndarray
    run_end: np.ndarray

    def children(self) -> tuple[np.ndarray, np.ndarray]:
        """Children of every node in compressed form.

        Returns
        -------
        indptr, indices : numpy.ndarray
            The children of node ``i`` are ``indices[indptr[i]:indptr[i + 1]]`` (in index order).
        """
        return children_csr(self.parent)


def children_csr(parent: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Children of every node as ``(indptr, indices)``; see :meth:`Topology.children`."""
    parent = np.asarray(parent, dtype=np.int64)
    has = np.flatnonzero(parent >= 0)
    order = has[np.argsort(parent[has], kind="stable")]
    counts = np.bincount(parent[has], minlength=len(parent))
    indptr = np.concatenate([[0], np.cumsum(counts)])
    return indptr, order


def unreachable(parent: np.ndarray) -> np.ndarray:
    """Nodes that cannot be reached from any root: the members of cycles and everything below them.

    Parameters
    ----------
    parent : numpy.ndarray
        Parent index of every node, ``-1`` for roots; every other value must be a valid index.

    Returns
    -------
    numpy.ndarray
        Sorted indices of the unreachable nodes (empty for a forest).
    """
    return np.setdiff1d(np.arange(len(parent)), _bfs(np.asarray(parent, dtype=np.int64)), assume_unique=True)


def _bfs(parent: np.ndarray) -> np.ndarray:
    """Breadth-first order from a virtual node joined to every root (the virtual node left out)."""
    n = len(parent)
    src = np.where(parent < 0, n, parent)
    graph = csr_matrix((np.ones(n, dtype=np.int8), (src, np.arange(n))), shape=(n + 1, n + 1))
    order = breadth_first_order(graph, n, directed=True, return_predecessors=False)
    return order[1:].astype(np.int64)


def cycles(parent: np.ndarray, nodes: np.ndarray) -> list[list[int]]:
    """Every distinct cycle reached by following parents from ``nodes`` (the unreachable nodes).

    Parameters
    ----------
    parent : numpy.ndarray
        Parent index of every node.
    nodes : numpy.ndarray
        Nodes from :func:`unreachable`; each walk stops where an earlier walk passed, so the work is linear.

    Returns
    -------
    list of list of int
        Each cycle's nodes in parent-following order, starting where the walk entered it.

    Examples
    --------
    >>> cycles(np.array([-1, 2, 1, 1]), np.array([1, 2, 3]))
    [[1, 2]]
    """
    walk_of: dict[int, int] = {}
    found: list[list[int]] = []
    for start in np.asarray(nodes).tolist():
        if start in walk_of:
            continue
        path: list[int] = []
        node = start
        while node not in walk_of:
            if node < 0:
                raise ValueError(f"node {start} reaches a root; it is not on or below a cycle")
            walk_of[node] = start
            path.append(node)
            node = int(parent[node])
        if walk_of[node] == start:
            found.append(path[path.index(node) :])
    return found


def build_topology(
    parent: np.ndarray, *, counted: np.ndarray | None = None, breaks: np.ndarray | None = None
) -> Topology:
    """Order a forest and compute generation, Strahler order, tips and unbranched runs.

    Parameters
    ----------
    parent : numpy.ndarray
        Parent index of every node, ``-1`` for roots. Must be a forest (see :func:`unreachable`).
    counted : numpy.ndarray of bool, optional
        Branch points that count towards the generation of the nodes below them; by default every branch
        point. (An SWC soma, for instance, branches but is not a junction.)
    breaks : numpy.ndarray of bool, optional
        Nodes that start a new run even though their parent has a single child.

    Returns
    -------
    Topology

    Raises
    ------
    ValueError
        If ``parent`` has a cycle (a programming error: callers check with :func:`unreachable` first and
        report the cycle to the user).

    Examples
    --------
    >>> t = build_topology(np.array([-1, 0, 1, 1]))  # root 0 -> 1 (a branch point) -> tips 2 and 3
    >>> t.generation.tolist(), t.strahler.tolist(), t.n_tips.tolist(), t.run.tolist()
    ([0, 0, 1, 1], [2, 2, 1, 1], [2, 2, 1, 1], [0, 0, 2, 3])
    """
    parent = np.asarray(parent, dtype=np.int64)
    n = len(parent)
    order = _bfs(parent)
    if len(order) != n:
        raise ValueError(f"{n - len(order)} node(s) are on or below a cycle; check with unreachable() first")
    n_children = np.bincount(parent[parent >= 0], minlength=n)
    branch = n_children >= 2
    counts_gen = branch if counted is None else branch & np.asarray(counted, dtype=bool)
    starts = parent < 0
    starts[~starts] = n_children[parent[~starts]] != 1
    if breaks is not None:
        starts |= np.asarray(breaks, dtype=bool)

    par = parent.tolist()
    gen_step = counts_gen.astype(np.int64).tolist()
    start_list = starts.tolist()
    depth = [0] * n
    generation = [0] * n
    run = list(range(n))
    for i in order.tolist():
        p = par[i]
        if p >= 0:
            depth[i] = depth[p] + 1
            generation[i] = generation[p] + gen_step[p]
            if not start_list[i]:
                run[i] = run[p]

    strahler = [1] * n
    top = [0] * n  # largest order among the children seen so far
    n_top = [0] * n  # how many children have it
    tips = (n_children == 0).astype(np.int64).tolist()
    n_ch = n_children.tolist()
    for i in order[::-1].tolist():
        if n_ch[i]:
            strahler[i] = top[i] + 1 if n_top[i] >= 2 else top[i]
        p = par[i]
        if p >= 0:
            tips[p] += tips[i]
            s = strahler[i]
            if s > top[p]:
                top[p], n_top[p] = s, 1
            elif s == top[p]:
                n_top[p] += 1

    run_arr = np.asarray(run, dtype=np.int64)
    ends = np.flatnonzero(n_children != 1)  # every run ends at a branch point or a tip...
    run_end = np.full(n, -1, dtype=np.int64)
    run_end[run_arr[ends]] = ends
    # ...unless a break cuts it before one: then it ends at the node above the break.
    cut = np.flatnonzero(starts & (parent >= 0))
    cut = cut[n_children[parent[cut]] == 1]
    run_end[run_arr[parent[cut]]] = parent[cut]
    return Topology(
        parent=parent,
        order=order,
        n_children=n_children,
        depth=np.asarray(depth, dtype=np.int64),
        generation=np.asarray(generation, dtype=np.int64),
        strahler=np.asarray(strahler, dtype=np.int64),
        n_tips=np.asarray(tips, dtype=np.int64),
        run=run_arr,
        run_end=run_end,
    )
