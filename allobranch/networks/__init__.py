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

from importlib import import_module

#: Public names and the module each comes from; imported on first use, so that building the command-line
#: parser (which reads :mod:`allobranch.networks.rules`) does not import the converters' libraries.
_LAZY: dict[str, str] = {
    "AVERAGED_CAVEAT": "allobranch.networks.generations",
    "GenerationExponents": "allobranch.networks.generations",
    "generation_exponents": "allobranch.networks.generations",
    "junctions_from_edges": "allobranch.networks.graph",
    "DendrogramLayout": "allobranch.networks.layout",
    "dendrogram_layout": "allobranch.networks.layout",
    "NetworkJunctions": "allobranch.networks.result",
    "junctions_from_segments": "allobranch.networks.segments",
    "junctions_from_swc": "allobranch.networks.swc",
    "RadiusRule": "allobranch.networks.swc",
    "TableSettings": "allobranch.networks.cells",
    "read_swc": "allobranch.networks.swc",
    "write_swc": "allobranch.networks.swc",
    "BRANCH_POINT_SECTION_RULES": "allobranch.networks.rules",
    "CONTINUATION_RULES": "allobranch.networks.rules",
    "LOOP_RULES": "allobranch.networks.rules",
    "NEURITE_TYPES": "allobranch.networks.rules",
    "RADIUS_RULES": "allobranch.networks.rules",
    "ROOT_RULES": "allobranch.networks.rules",
    "TRIM_RADII": "allobranch.networks.rules",
}

__all__ = sorted(_LAZY)


def __getattr__(name: str):
    if name in _LAZY:
        value = getattr(import_module(_LAZY[name]), name)
        globals()[name] = value
        return value
    raise AttributeError(f"module 'allobranch.networks' has no attribute {name!r}")


def __dir__() -> list[str]:
    return sorted(set(globals()) | set(_LAZY))
