"""The taxa's tree: read from Newick with DendroPy, matched to the taxa, turned into a Brownian-motion
covariance, and laid out for drawing.

Under Brownian motion along the branches, the covariance of two tips' values is the length of the path they
share from the root (exact algebra: the shared length is ``(d_i + d_j - D_ij) / 2`` with ``d`` the
root-to-tip distances and ``D`` the patristic distance). The model uses it scaled to a unit mean diagonal,
so the taxon spread keeps its meaning, and mixes it with independence by Pagel's lambda.
"""

from __future__ import annotations

import dataclasses
import hashlib
import os
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from allobranch.errors import InputError, Problem
from allobranch.intake.table import JunctionTable


def _key(label: str) -> str:
    """Tip and taxon names are matched with underscores read as spaces (the Newick convention)."""
    return " ".join(str(label).replace("_", " ").split())


@dataclass
class Phylogeny:
    """A tree over the taxa with data.

    Attributes
    ----------
    tips : list of str
        The table's taxon labels, in the tree's tip order (top to bottom when drawn).
    shared : ndarray (n_tips, n_tips)
        Shared root-to-ancestor path length of every pair of tips (the Brownian-motion covariance).
    pruned : list of str
        Tips of the file without junctions, removed from the tree.
    source : str
        File the tree was read from.
    newick : str
        The tree after pruning, as Newick.
    segments : ndarray (m, 4)
        Line segments ``x0, y0, x1, y1`` drawing the tree (x: distance from the root; y: tip order).
    """

    tips: list[str]
    shared: np.ndarray
    pruned: list[str] = field(default_factory=list)
    source: str = "<tree>"
    newick: str = ""
    segments: np.ndarray = field(default_factory=lambda: np.zeros((0, 4)))

    def correlation(self, taxa: list[str]) -> np.ndarray:
        """The tips' covariance in the order of ``taxa``, scaled to a unit mean diagonal."""
        pos = {t: i for i, t in enumerate(self.tips)}
        idx = [pos[str(t)] for t in taxa]
        C = self.shared[np.ix_(idx, idx)]
        return C / np.mean(np.diag(C))

    def tip_y(self) -> dict[str, float]:
        """Vertical position of every tip in the drawing."""
        return {t: float(i) for i, t in enumerate(self.tips)}

    def digest(self) -> str:
        """SHA-256 of the pruned tree (for provenance)."""
        return hashlib.sha256(self.newick.encode()).hexdigest()


def _fatal(source: str, message: str, hint: str, code: str) -> InputError:
    return InputError([Problem("fatal", source, None, None, message, hint, code)])


def read_tree(path: str | os.PathLike, taxa: list[str]) -> Phylogeny:
    """Read a Newick tree and match its tips to ``taxa``.

    Parameters
    ----------
    path : str or path-like
        A Newick file with a length on every branch.
    taxa : list of str
        Taxon labels of the junction table. Tips are matched by name, reading underscores as spaces.

    Returns
    -------
    Phylogeny
        Tips without junctions are pruned (listed in ``pruned``).

    Raises
    ------
    InputError
        If the file cannot be read or parsed, a branch has no or a negative length, two tips share a name,
        or a taxon is not in the tree.
    """
    source = str(path)
    try:
        text = Path(path).read_text(encoding="utf-8-sig")
    except FileNotFoundError:
        raise _fatal(
            source, "the tree file does not exist", "check the path given to --tree", "missing_file"
        ) from None
    except (OSError, UnicodeDecodeError) as exc:
        raise _fatal(
            source, f"cannot read the tree file ({exc})", "give a Newick text file", "unreadable"
        ) from None
    return parse_tree(text, taxa, source=source)


def parse_tree(text: str, taxa: list[str], *, source: str = "<tree>") -> Phylogeny:
    """:func:`read_tree` on Newick text (``source`` names it in messages)."""
    import dendropy

    try:
        tree = dendropy.Tree.get(data=text, schema="newick", preserve_underscores=True)
    except Exception as exc:  # noqa: BLE001 - DendroPy's parse errors have several types
        if "Duplicate taxon labels" in str(exc):
            dup = str(exc).split("Duplicate taxon labels:")[-1].strip()
            raise _fatal(
                source, f"tips named more than once: {dup}", "give every tip a unique name", "duplicate_tip"
            ) from None
        raise _fatal(
            source,
            f"not a readable Newick tree ({type(exc).__name__}: {exc})",
            "the file must hold one tree in Newick format, ending with ';'",
            "bad_newick",
        ) from None
    leaves = list(tree.leaf_node_iter())
    labels = [leaf.taxon.label if leaf.taxon is not None else None for leaf in leaves]
    if any(lab is None or not str(lab).strip() for lab in labels):
        raise _fatal(source, "a tip of the tree has no name", "name every tip with its taxon", "unnamed_tip")
    keys = [_key(lab) for lab in labels]
    dups = sorted({k for k in keys if keys.count(k) > 1})
    if dups:
        raise _fatal(
            source,
            f"tips named more than once: {', '.join(dups)}",
            "give every tip a unique name",
            "duplicate_tip",
        )
    for node in tree.preorder_node_iter():
        if node is tree.seed_node:
            continue
        if node.edge.length is None:
            raise _fatal(
                source,
                "a branch of the tree has no length",
                "write a length after every name and every closing bracket (e.g. (A:1.2,B:1.2):0.5)",
                "no_branch_length",
            )
        if node.edge.length < 0:
            raise _fatal(
                source,
                f"a branch has a negative length ({node.edge.length})",
                "correct the tree",
                "negative_length",
            )
    want = {_key(t): str(t) for t in taxa}
    missing = [t for k, t in want.items() if k not in keys]
    if missing:
        raise InputError(
            [
                Problem(
                    "fatal",
                    source,
                    None,
                    None,
                    f"the taxon '{t}' is not a tip of the tree",
                    "add it to the tree or correct its name (underscores in the tree are read as spaces)",
                    "taxon_not_in_tree",
                )
                for t in missing
            ]
        )
    pruned = [lab for lab, k in zip(labels, keys) if k not in want]
    if pruned:
        tree.prune_taxa_with_labels(pruned)
    leaves = list(tree.leaf_node_iter())
    names = [want[_key(leaf.taxon.label)] for leaf in leaves]
    depth = np.array([leaf.distance_from_root() for leaf in leaves])
    pdm = tree.phylogenetic_distance_matrix()
    n = len(leaves)
    shared = np.empty((n, n))
    for i in range(n):
        shared[i, i] = depth[i]
        for j in range(i + 1, n):
            d = pdm.patristic_distance(leaves[i].taxon, leaves[j].taxon)
            shared[i, j] = shared[j, i] = 0.5 * (depth[i] + depth[j] - d)
    if np.any(depth <= 0):
        raise _fatal(
            source,
            "a tip sits at the root (zero distance)",
            "give every tip a positive branch length",
            "zero_depth",
        )
    return Phylogeny(
        tips=names,
        shared=shared,
        pruned=pruned,
        source=source,
        newick=tree.as_string(schema="newick").strip(),
        segments=_segments(tree, {id(leaf): i for i, leaf in enumerate(leaves)}),
    )


def _segments(tree, tip_index: dict[int, int]) -> np.ndarray:
    """Rectangular layout: each node at its distance from the root, tips at their order, inner nodes at
    the mean height of their children."""
    y: dict[int, float] = {}
    x: dict[int, float] = {}
    for node in tree.preorder_node_iter():
        x[id(node)] = 0.0 if node.parent_node is None else x[id(node.parent_node)] + (node.edge.length or 0.0)
    for node in tree.postorder_node_iter():
        kids = node.child_nodes()
        y[id(node)] = float(tip_index[id(node)]) if not kids else float(np.mean([y[id(k)] for k in kids]))
    segs = []
    for node in tree.preorder_node_iter():
        kids = node.child_nodes()
        if not kids:
            continue
        ys = [y[id(k)] for k in kids]
        segs.append((x[id(node)], min(ys), x[id(node)], max(ys)))  # vertical bar
        for k in kids:
            segs.append((x[id(node)], y[id(k)], x[id(k)], y[id(k)]))  # horizontal branch
    return np.asarray(segs, dtype=float).reshape(-1, 4)


def attach_tree(table: JunctionTable, tree: str | os.PathLike | Phylogeny) -> JunctionTable:
    """A copy of ``table`` carrying the taxa's tree (a Newick file or a :class:`Phylogeny`).

    Pruned tips are listed as flags in the table's validation report.
    """
    phylo = tree if isinstance(tree, Phylogeny) else read_tree(tree, [str(t) for t in table.taxa])
    report = dataclasses.replace(table.report, problems=list(table.report.problems))
    for tip in phylo.pruned:
        report.problems.append(
            Problem(
                "flag",
                phylo.source,
                None,
                None,
                f"the tree's tip '{tip}' has no junctions and was pruned",
                "nothing to do if intended; otherwise check the spelling against the table's taxa",
                "tip_pruned",
            )
        )
    return dataclasses.replace(table, phylogeny=phylo, report=report)


def restore_attachments(table: JunctionTable, settings: dict) -> JunctionTable:
    """Re-attach the tree and trait values a fit recorded in its settings to a table rebuilt from a saved
    fit (no-op for what is already attached or was not used)."""
    import pandas as pd

    tree = settings.get("phylogeny")
    if tree and table.phylogeny is None:
        phylo = parse_tree(tree["newick"], [str(t) for t in table.taxa], source=tree.get("source", "<tree>"))
        phylo.pruned = list(tree.get("pruned", []))
        table = dataclasses.replace(table, phylogeny=phylo)
    traits = settings.get("trait_values")
    if traits and table.taxon_traits is None:
        frame = pd.DataFrame(traits)
        frame.index.name = "taxon"
        table = dataclasses.replace(table, taxon_traits=frame)
    return table
