"""Network options in one place: the recipe's ``[network]`` section, checks, and the converter they select.

A recipe may describe a network instead of a junction table::

    [columns]
    specimen = "animal"           # grouping columns of the segment table or edge list

    [measurement]
    measure = "diameter"
    unit = "um"

    [network]
    segment_id = "seg"            # a segment table (the TABLE argument) ...
    parent_id = "parent_seg"
    size = "diam"
    continuations = "merge"       # or "keep"
    # edges = "graph.csv"         # ... or an edge list (path relative to the recipe), with
    # root = "0"                  #     one root node, or a table: root = { lung1 = "0", lung2 = "17" }
    # loops = "break_thinnest"    #     or "error"
    # swc = "cells/"              # ... or SWC file(s), with
    # radius_rule = "trimmed_median"; trim_radii = 4.0 (or trim = 1.5); near_points = 2
    # neurite_types = "dendrite"; branch_point_sections = "exclude"

The keys are the fields of :class:`NetworkOptions`; the command-line options of the same names override them.
"""

from __future__ import annotations

import dataclasses
import os
import tomllib
from collections.abc import Callable
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import pandas as pd

from allobranch.errors import Problem, RecipeError
from allobranch.intake.mapping import ColumnMapping
from allobranch.intake.recipe import NETWORK_SIZE_COLUMNS, RECIPE_SECTIONS, _toml_value
from allobranch.io import atomic_write, prepare_output_dir
from allobranch.networks.graph import junctions_from_edges
from allobranch.networks.result import NetworkJunctions
from allobranch.networks.rules import CHOICES, NEAR_POINTS
from allobranch.networks.segments import junctions_from_segments
from allobranch.networks.swc import RadiusRule, junctions_from_swc

#: The recipe section holding the network options.
NETWORK_SECTION = "network"

#: Kinds of network input.
NETWORK_KINDS: tuple[str, ...] = ("segments", "edges", "swc")

#: Options that only apply to one kind of input.
KIND_OF: dict[str, str] = {
    "segment_id": "segments",
    "parent_id": "segments",
    "edges": "edges",
    "node_from": "edges",
    "node_to": "edges",
    "root": "edges",
    "loops": "edges",
    "swc": "swc",
    "radius_rule": "swc",
    "trim": "swc",
    "trim_radii": "swc",
    "near_points": "swc",
    "neurite_types": "swc",
    "branch_point_sections": "swc",
}

#: Options that segment tables and edge lists share (:class:`~allobranch.networks.cells.TableSettings`).
TABLE_OPTIONS: tuple[str, ...] = ("size", "length", "continuations")

#: The converter of each kind of input.
CONVERTERS: dict[str, Callable[..., NetworkJunctions]] = {
    "segments": junctions_from_segments,
    "edges": junctions_from_edges,
    "swc": junctions_from_swc,
}


def converter_options(kind: str) -> tuple[str, ...]:
    """The :class:`NetworkOptions` fields a kind's converter takes, besides its input and ``roots``.

    Examples
    --------
    >>> converter_options("segments")
    ('segment_id', 'parent_id', 'size', 'length', 'continuations')
    """
    own = tuple(k for k, of in KIND_OF.items() if of == kind and k != kind)  # "edges"/"swc" name the input
    return own + (TABLE_OPTIONS if kind != "swc" else ())


#: Mapping fields that have no meaning for a network (its junctions are derived, one row each).
NOT_FOR_NETWORKS: tuple[str, ...] = ("junction", "se", "repeats")


@dataclass(frozen=True)
class NetworkOptions:
    """Which network to read and how.

    Attributes
    ----------
    kind : {"segments", "edges", "swc"}
        Set from the options given: ``swc`` or ``edges`` name their file; ``segment_id``/``parent_id`` make
        the junction-table argument a segment table.
    segment_id, parent_id : str, optional
        Segment table columns.
    size, length : str, optional
        Size and length columns (segment tables and edge lists).
    continuations : {"merge", "keep"}
        Single-child segments (segment tables and edge lists).
    roots : {"one", "many"}, optional
        Several trees per specimen; default "one" for tables, "many" for SWC files.
    edges : str, optional
        Edge list file.
    node_from, node_to : str
        Edge list node columns.
    root : str or dict, optional
        Root node (one id, or per specimen).
    loops : {"break_thinnest", "error"}
        Loop handling of edge lists.
    swc : str, optional
        SWC file or folder.
    radius_rule, trim, trim_radii, near_points, neurite_types, branch_point_sections
        SWC options (see :func:`allobranch.networks.junctions_from_swc`).
    """

    kind: str
    segment_id: str | None = None
    parent_id: str | None = None
    size: str | None = None
    length: str | None = None
    continuations: str = "merge"
    roots: str | None = None
    edges: str | None = None
    node_from: str = "from"
    node_to: str = "to"
    root: str | dict[str, str] | None = None
    loops: str = "break_thinnest"
    swc: str | None = None
    radius_rule: str = "trimmed_median"
    trim: float | None = None
    trim_radii: float | None = None
    near_points: int = NEAR_POINTS
    neurite_types: str = "all"
    branch_point_sections: str = "exclude"
    given: tuple[str, ...] = field(default_factory=tuple)

    def rule_values(self) -> dict[str, Any]:
        """The options given and every rule in effect for this kind of input, for writing into a recipe."""
        roots = self.roots or ("many" if self.kind == "swc" else "one")
        rules = {
            "segments": {"continuations": self.continuations, "roots": roots},
            "edges": {"continuations": self.continuations, "roots": roots, "loops": self.loops},
            "swc": {
                **self.radius_rule_used().rules(),
                "branch_point_sections": self.branch_point_sections,
                "neurite_types": self.neurite_types,
                "roots": roots,
            },
        }[self.kind]
        return {**{k: getattr(self, k) for k in self.given}, **rules}

    def radius_rule_used(self) -> RadiusRule:
        """The SWC radius rule these options select (checked)."""
        return RadiusRule(self.radius_rule, self.trim, self.trim_radii, self.near_points)


#: The option names (recipe keys and keyword arguments).
NETWORK_KEYS: tuple[str, ...] = tuple(
    f.name for f in dataclasses.fields(NetworkOptions) if f.name not in ("kind", "given")
)


def _bad(origin: str, key: str | None, message: str, hint: str) -> Problem:
    return Problem(
        "fatal", origin, None, None, f"{key}: {message}" if key else message, hint, "bad_network_option"
    )


def _type_problem(origin: str, key: str, value: Any) -> Problem | None:
    if key == "root":
        ok = isinstance(value, str) or (
            isinstance(value, dict) and all(isinstance(v, str) for v in value.values())
        )
        want = 'a node id in quotes, or a table {specimen = "id", ...}'
    elif key in ("trim", "trim_radii"):
        ok = isinstance(value, (int, float)) and not isinstance(value, bool) and value >= 0
        want = "a number of 0 or more"
    elif key == "near_points":
        ok = isinstance(value, int) and not isinstance(value, bool) and value >= 1
        want = "a whole number of 1 or more"
    else:
        ok = isinstance(value, str) and value.strip() != ""
        want = "text in quotes"
    if not ok:
        return _bad(origin, key, f"wrong value {value!r}", f"give {want}")
    if key in CHOICES and value not in CHOICES[key]:
        return _bad(origin, key, f"unknown value {value!r}", f"use one of: {', '.join(CHOICES[key])}")
    return None


def network_options(values: dict[str, Any], origin: str = "<options>") -> NetworkOptions | None:
    """Check network option values and decide the kind of input.

    Parameters
    ----------
    values : dict
        Option values by :data:`NETWORK_KEYS` name; ``None`` values count as not given.
    origin : str
        Where they came from, for messages.

    Returns
    -------
    NetworkOptions or None
        ``None`` when no network option is given (the input is a junction table).

    Raises
    ------
    RecipeError
        Listing unknown keys, wrong values, two kinds of input at once, options of another kind of input,
        and missing required options (``size`` for tables and edge lists, ``root`` for edge lists,
        ``segment_id`` with ``parent_id``).
    """
    given = {k: v for k, v in values.items() if v is not None}
    if not given:
        return None
    problems = [
        _bad(origin, k, "unknown network option", f"use: {', '.join(NETWORK_KEYS)}")
        for k in given
        if k not in NETWORK_KEYS
    ]
    problems += [p for k, v in given.items() if k in NETWORK_KEYS and (p := _type_problem(origin, k, v))]
    kinds = [
        k for k, flag in (("swc", "swc"), ("edges", "edges"), ("segments", "segment_id")) if flag in given
    ]
    if "parent_id" in given and "segments" not in kinds:
        kinds.append("segments")
    if len(kinds) > 1:
        problems.append(
            _bad(origin, None, f"options for {' and '.join(kinds)} given together", "describe one network")
        )
    if not kinds:
        problems.append(
            _bad(
                origin,
                None,
                f"network option(s) {', '.join(sorted(given))} given without a network",
                "give a segment table (segment_id and parent_id), an edge list (edges) or SWC file(s) (swc)",
            )
        )
    if problems:
        raise RecipeError(problems)
    kind = kinds[0]
    foreign = [k for k in given if KIND_OF.get(k, kind) != kind]
    if foreign:
        problems.append(
            _bad(origin, None, f"{', '.join(foreign)} do not apply to {kind} input", "remove them")
        )
    if kind == "segments":
        problems += [
            _bad(origin, k, "missing", f"name the {k.replace('_', ' ')} column")
            for k in ("segment_id", "parent_id", "size")
            if k not in given
        ]
    if kind == "edges":
        problems += [
            _bad(origin, k, "missing", what)
            for k, what in (("size", "name the size column"), ("root", "give the root (inlet) node's id"))
            if k not in given
        ]
    if kind == "swc":
        problems += [
            _bad(
                origin, k, "does not apply to SWC files", "remove it (SWC files hold radii of sample points)"
            )
            for k in ("size", "length", "continuations")
            if k in given
        ]
    if problems:
        raise RecipeError(problems)
    return NetworkOptions(
        kind=kind, given=tuple(k for k in NETWORK_KEYS if k in given), **{k: v for k, v in given.items()}
    )


def load_network_recipe(path: str | os.PathLike) -> dict[str, Any]:
    """The ``[network]`` section of a recipe, with file paths taken relative to the recipe's folder.

    Parameters
    ----------
    path : str or path-like
        The recipe (TOML).

    Returns
    -------
    dict
        The section's keys and values (empty when the recipe has no ``[network]`` section). Check them with
        :func:`network_options`.

    Raises
    ------
    RecipeError
        If the file cannot be read as TOML or ``network`` is not a section.
    """
    origin = str(path)
    try:
        with Path(path).open("rb") as fh:
            doc = tomllib.load(fh)
    except (OSError, tomllib.TOMLDecodeError, UnicodeDecodeError) as exc:
        raise RecipeError(
            [_bad(origin, None, f"cannot read the recipe ({exc})", "check the path and the TOML")]
        ) from None
    section = doc.get(NETWORK_SECTION, {})
    if not isinstance(section, dict):
        raise RecipeError(
            [_bad(origin, NETWORK_SECTION, "must be a section [network]", "write [network] on its own line")]
        )
    values = dict(section)
    for key in ("edges", "swc"):
        rel = values.get(key)
        if isinstance(rel, str) and not Path(rel).is_absolute() and (Path(path).parent / rel).exists():
            values[key] = str((Path(path).parent / rel).resolve())
    return values


def junctions_from_options(
    options: NetworkOptions, mapping: ColumnMapping, table: str | os.PathLike | pd.DataFrame | None = None
) -> NetworkJunctions:
    """Run the converter the options select, with the mapping's grouping columns and measurement fields.

    Parameters
    ----------
    options : NetworkOptions
        From :func:`network_options`.
    mapping : ColumnMapping
        ``taxon``/``specimen`` name columns of the segment table or edge list (the SWC taxon comes from
        sub-folders); ``unit``, ``measure``, ``rel_error``, ``covariates``, ``sheet`` and ``encoding`` apply
        as for a junction table. ``junction``, ``se`` and ``repeats`` must not be set.
    table : str, path-like or pandas.DataFrame, optional
        The segment table (segments only; edge lists and SWC files are named by the options).

    Returns
    -------
    NetworkJunctions

    Raises
    ------
    RecipeError
        If a mapping field has no meaning for networks, or the table argument does not fit the kind.
    InputError
        From the converter.
    """
    problems = [
        _bad("<options>", f, "does not apply to a network", "a network's junctions are derived; remove it")
        for f in NOT_FOR_NETWORKS
        if getattr(mapping, f)
    ]
    if options.kind == "segments" and table is None:
        problems.append(_bad("<options>", None, "no segment table given", "give the segment table as TABLE"))
    if options.kind != "segments" and table is not None:
        problems.append(
            _bad("<options>", None, f"a TABLE was given beside {options.kind} input", "give one input")
        )
    if problems:
        raise RecipeError(problems)
    measurement: dict[str, Any] = {
        "unit": mapping.unit,
        "measure": mapping.measure,
        "rel_error": mapping.rel_error,
    }
    if mapping.covariates:
        measurement["covariates"] = list(mapping.covariates)
    roots = options.roots or ("many" if options.kind == "swc" else "one")
    keywords = {k: getattr(options, k) for k in converter_options(options.kind)}
    if options.kind == "swc":
        source, grouping = options.swc, {"taxon": None}
    else:
        source = table if options.kind == "segments" else options.edges
        grouping = {"taxon": mapping.taxon, "specimen": mapping.specimen, "sheet": mapping.sheet}
    result = CONVERTERS[options.kind](
        source, **keywords, **grouping, roots=roots, encoding=mapping.encoding, **measurement
    )
    result.mapping, result.options = mapping, options
    return result


def write_network_recipe(
    mapping: ColumnMapping, options: NetworkOptions, path: str | os.PathLike, *, overwrite: bool = False
) -> Path:
    """Write :func:`network_recipe_text` to ``path`` (an existing file only with ``overwrite``).

    Returns
    -------
    pathlib.Path
        The file written.

    Raises
    ------
    OutputExistsError
        If the file exists and ``overwrite`` is false.
    """
    dest = Path(path)
    prepare_output_dir(dest.parent, [dest.name], force=overwrite)
    text = network_recipe_text(mapping, options, dest.resolve().parent)
    return atomic_write(dest, lambda p: p.write_text(text, encoding="utf-8"))


def network_recipe_text(mapping: ColumnMapping, options: NetworkOptions, folder: str | os.PathLike) -> str:
    """A recipe that re-derives the same junctions: the mapping's fields (no size columns) and ``[network]``.

    Parameters
    ----------
    mapping : ColumnMapping
        The mapping used (its placeholder size columns are left out).
    options : NetworkOptions
        The network options used.
    folder : str or path-like
        The recipe's folder; file paths are written relative to it.

    Returns
    -------
    str
        TOML text that :func:`allobranch.intake.recipe.load_recipe` and :func:`load_network_recipe` read back.
    """
    values = {k: v for k, v in mapping.to_dict().items() if k not in NETWORK_SIZE_COLUMNS}
    lines = ["# allobranch recipe: junctions derived from a network", ""]
    for section, keys in RECIPE_SECTIONS.items():
        present = [k for k in keys if k in values]
        if present:
            lines += [f"[{section}]", *(f"{k} = {_toml_value(values[k])}" for k in present), ""]
    lines.append(f"[{NETWORK_SECTION}]")
    for key, value in options.rule_values().items():
        if key in ("edges", "swc"):
            value = os.path.relpath(Path(value).resolve(), Path(folder).resolve())
        if isinstance(value, dict):
            inner = ", ".join(f"{_toml_value(str(k))} = {_toml_value(v)}" for k, v in value.items())
            lines.append(f"{key} = {{ {inner} }}")
        else:
            lines.append(f"{key} = {_toml_value(value)}")
    return "\n".join(lines) + "\n"
