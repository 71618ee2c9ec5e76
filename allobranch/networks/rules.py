"""The stated rules of the network converters: every allowed option value, in one light module.

The command line builds its parser from these constants without importing the converters (and their
graph and statistics libraries).
"""

from __future__ import annotations

#: Continuation handling: merge a run of single-child segments into one segment, or keep the pieces
#: (then a junction's parent is the piece just above the branch point and its daughters the pieces just
#: below). A continuation is never a junction in either case.
CONTINUATION_RULES: tuple[str, ...] = ("merge", "keep")

#: How many roots a specimen may have: exactly one, or any number (a forest of separate trees).
ROOT_RULES: tuple[str, ...] = ("one", "many")

#: Loop handling of edge lists: keep the widest spanning tree (each removed edge the thinnest of its
#: loop), or refuse.
LOOP_RULES: tuple[str, ...] = ("break_thinnest", "error")

#: SWC section radius rules (see :mod:`allobranch.networks.swc`).
RADIUS_RULES: tuple[str, ...] = ("trimmed_median", "near_branch", "median")

#: ``trimmed_median``: default trim at each end of a section, in radii of the section's sample at that end
#: (the reasons are in :mod:`allobranch.networks.swc`).
TRIM_RADII = 4.0

#: SWC sections made of one sample that is a branch point: leave out the junctions they belong to (listed),
#: or keep them with the branch point's own radius (see :mod:`allobranch.networks.swc`).
BRANCH_POINT_SECTION_RULES: tuple[str, ...] = ("exclude", "keep")

#: ``near_branch``: default number of samples read next to a junction.
NEAR_POINTS = 2

#: SWC type codes.
SOMA, AXON, BASAL, APICAL = 1, 2, 3, 4

#: SWC type selections and the type codes of the branch points they keep (``None``: every non-soma type).
NEURITE_TYPES: dict[str, tuple[int, ...] | None] = {
    "all": None,
    "dendrite": (BASAL, APICAL),
    "basal": (BASAL,),
    "apical": (APICAL,),
    "axon": (AXON,),
}

#: Allowed values of the options that take one of a few words, by option name.
CHOICES: dict[str, tuple[str, ...]] = {
    "continuations": CONTINUATION_RULES,
    "roots": ROOT_RULES,
    "loops": LOOP_RULES,
    "radius_rule": RADIUS_RULES,
    "branch_point_sections": BRANCH_POINT_SECTION_RULES,
    "neurite_types": tuple(NEURITE_TYPES),
}
