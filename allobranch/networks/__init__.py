"""From branching networks to junctions: segment tables, vessel graphs, SWC files and generation tables.

Each converter turns a network into the wide junction frame (one row per junction, sizes in the user's
unit, with the segment ids, rows, generation, Strahler order and downstream tips it came from) and
validates it with :func:`allobranch.read_junctions`:

* :func:`junctions_from_segments` -- one row per segment with its parent's id;
* :func:`junctions_from_edges` -- an edge list oriented from a root node, loops broken by a stated rule;
* :func:`junctions_from_swc` -- SWC morphologies, section radii by a stated rule;
* :func:`generation_exponents` -- per-step and fitted exponents of a published generation table.

The first three return a :class:`NetworkJunctions` (``.frame`` and ``.table``); ``.rules`` and ``.notes``
say what was done so it can be reported.
"""

from __future__ import annotations

from allobranch.networks.generations import AVERAGED_CAVEAT, GenerationExponents, generation_exponents
from allobranch.networks.graph import LOOP_RULES, junctions_from_edges
from allobranch.networks.layout import DendrogramLayout, dendrogram_layout
from allobranch.networks.result import CONTINUATION_RULES, ROOT_RULES, NetworkJunctions
from allobranch.networks.segments import junctions_from_segments
from allobranch.networks.swc import NEURITE_TYPES, RADIUS_RULES, junctions_from_swc, read_swc, write_swc

__all__ = [
    "AVERAGED_CAVEAT",
    "CONTINUATION_RULES",
    "DendrogramLayout",
    "GenerationExponents",
    "LOOP_RULES",
    "NEURITE_TYPES",
    "NetworkJunctions",
    "RADIUS_RULES",
    "ROOT_RULES",
    "dendrogram_layout",
    "generation_exponents",
    "junctions_from_edges",
    "junctions_from_segments",
    "junctions_from_swc",
    "read_swc",
    "write_swc",
]
