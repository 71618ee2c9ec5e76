"""Network input options shared by check, fit and compare: segment tables, edge lists and SWC files."""

from __future__ import annotations

import argparse
import dataclasses
import sys
import tomllib
from pathlib import Path
from typing import Any

from allobranch.intake.mapping import ColumnMapping

#: Command-line spelling of every network option (``dest`` is the recipe key).
NETWORK_FLAGS: dict[str, str] = {
    "segment_id": "--segment-id",
    "parent_id": "--parent-id",
    "size": "--size",
    "length": "--length",
    "continuations": "--continuations",
    "roots": "--roots",
    "edges": "--edges",
    "node_from": "--node-from",
    "node_to": "--node-to",
    "root": "--root",
    "loops": "--loops",
    "swc": "--swc",
    "radius_rule": "--radius-rule",
    "trim": "--trim",
    "near_points": "--near-points",
    "neurite_types": "--neurite-types",
}

#: Unit of SWC files when neither the options nor the recipe name one (the SWC convention).
SWC_DEFAULT_UNIT = "um"


def add_network_arguments(parser: argparse.ArgumentParser) -> None:
    """Add the network input options (segment tables, edge lists, SWC files) to a sub-command parser.

    Parameters
    ----------
    parser : argparse.ArgumentParser
        The sub-command's parser (which also has the column-mapping options).
    """
    from allobranch.networks.rules import CHOICES

    group = parser.add_argument_group(
        "network input",
        "Derive the junctions from a network instead of a junction table: a segment table (TABLE with "
        "--segment-id, --parent-id, --size), an edge list (--edges FILE --root ID --size COL, no TABLE) or "
        "SWC morphologies (--swc FILE|DIR, no TABLE). --taxon/--specimen name the network table's columns. "
        "The same keys go under [network] in a recipe.",
    )
    flag = NETWORK_FLAGS
    group.add_argument(flag["segment_id"], dest="segment_id", metavar="COL", help="segment id column")
    group.add_argument(
        flag["parent_id"],
        dest="parent_id",
        metavar="COL",
        help="parent segment's id column (empty for a root)",
    )
    group.add_argument(flag["size"], dest="size", metavar="COL", help="segment (or edge) size column")
    group.add_argument(
        flag["length"],
        dest="length",
        metavar="COL",
        help="segment length column (weights merged continuations)",
    )
    group.add_argument(
        flag["continuations"],
        dest="continuations",
        choices=CHOICES["continuations"],
        help="segments with one child: merge them with the segment below (default) or keep the pieces "
        "(a junction's parent is then the piece just above it); never junctions",
    )
    group.add_argument(
        flag["roots"],
        dest="roots",
        choices=CHOICES["roots"],
        help="roots per specimen: one (default for tables) or many (default for SWC files)",
    )
    group.add_argument(flag["edges"], dest="edges", metavar="FILE", help="edge list, one row per edge")
    group.add_argument(
        flag["node_from"], dest="node_from", metavar="COL", help="first node column (default from)"
    )
    group.add_argument(flag["node_to"], dest="node_to", metavar="COL", help="second node column (default to)")
    group.add_argument(
        flag["root"],
        dest="root",
        metavar="ID|SPEC=ID,...",
        help="root (inlet) node of the edge list: one id, or one per specimen",
    )
    group.add_argument(
        flag["loops"],
        dest="loops",
        choices=CHOICES["loops"],
        help="loops in an edge list: remove the thinnest edge of each (default, listed) or stop with an error",
    )
    group.add_argument(flag["swc"], dest="swc", metavar="FILE|DIR", help="SWC file, or folder of SWC files")
    group.add_argument(
        flag["radius_rule"],
        dest="radius_rule",
        choices=CHOICES["radius_rule"],
        help="section radius from its samples: median leaving out --trim at both ends (default), "
        "next to the branch point, or median of all",
    )
    group.add_argument(
        flag["trim"],
        dest="trim",
        type=float,
        metavar="DIST",
        help="trimmed_median: distance left out at each section end (default: two radii of the end sample)",
    )
    group.add_argument(
        flag["near_points"],
        dest="near_points",
        type=int,
        metavar="N",
        help="near_branch: samples read on each side of a junction (default 2)",
    )
    group.add_argument(
        flag["neurite_types"],
        dest="neurite_types",
        choices=CHOICES["neurite_types"],
        help="SWC junctions kept by the type of their branch point (default all)",
    )


def _root_value(text: str | None) -> str | dict[str, str] | None:
    """``--root``: one id, or ``SPEC=ID,SPEC=ID``."""
    if text is None or "=" not in text:
        return text
    pairs = [part.split("=", 1) for part in text.split(",") if part.strip()]
    return {spec.strip(): node.strip() for spec, node in pairs}


def _recipe_names_unit(recipe: str | None) -> bool:
    if recipe is None:
        return False
    with Path(recipe).open("rb") as fh:
        return "unit" in tomllib.load(fh).get("measurement", {})


def network_options_from_args(args: argparse.Namespace):
    """The network options of a recipe's ``[network]`` section with the command-line options over them.

    Returns
    -------
    allobranch.networks.options.NetworkOptions or None
        ``None`` when neither names a network.
    """
    from allobranch.networks.options import load_network_recipe, network_options

    values: dict[str, Any] = load_network_recipe(args.recipe) if args.recipe else {}
    flags = {key: getattr(args, key, None) for key in NETWORK_FLAGS}
    flags["root"] = _root_value(flags["root"])
    for key in ("edges", "swc"):
        if flags[key] is not None:
            flags[key] = str(Path(flags[key]).resolve())  # typed paths are relative to here
    values.update({k: v for k, v in flags.items() if v is not None})
    origin = "<options>" if not args.recipe else f"{args.recipe} / options"
    return network_options(values, origin)


def network_from_args(args: argparse.Namespace):
    """Derive the junctions from the network the options describe, if any.

    Parameters
    ----------
    args : argparse.Namespace
        Parsed arguments of a parser with the mapping and network options.

    Returns
    -------
    allobranch.networks.NetworkJunctions or None
        ``None`` when no network option is given. The rules and notes are printed to standard error.

    Raises
    ------
    RecipeError
        When junction-table options (--parent, --daughters) are given with a network, or the network
        options are inconsistent.
    InputError
        From the conversion, naming file, row and column.
    """
    options = network_options_from_args(args)
    if options is None:
        return None
    from allobranch.cli.options import mapping_from_args
    from allobranch.intake.recipe import NETWORK_SIZE_COLUMNS
    from allobranch.networks.options import junctions_from_options
    from allobranch.networks.result import option_error

    clash = [f"--{k}" for k in ("parent", "daughters") if getattr(args, k, None)]
    if clash:
        raise option_error(
            f"{' and '.join(clash)} {'names' if len(clash) == 1 else 'name'} a junction table's columns, "
            "but a network was given",
            "leave them out: the network gives every junction's parent and daughters",
        )
    mapping = mapping_from_args(args, default=ColumnMapping(**NETWORK_SIZE_COLUMNS))
    if options.kind == "swc" and args.unit is None and not _recipe_names_unit(args.recipe):
        mapping = dataclasses.replace(mapping, unit=SWC_DEFAULT_UNIT)
    result = junctions_from_options(options, mapping, args.table)
    for line in result.describe():
        print(line, file=sys.stderr)
    return result


#: Network figures ``check --out`` draws at most (one per specimen, in the table's order).
MAX_NETWORK_FIGURES = 12


def _file_label(text: str) -> str:
    """A specimen label as a file-name part (letters, digits, ``-``, ``_`` and ``.``)."""
    return "".join(c if c.isalnum() or c in "-_." else "_" for c in text) or "specimen"


def write_network_outputs(network, geometry, junctions_csv: str | Path, *, force: bool = False) -> list[Path]:
    """Add the tracing columns to ``junctions.csv`` and draw each specimen's network beside it.

    Parameters
    ----------
    network : allobranch.networks.NetworkJunctions
        The derived junctions.
    geometry : pandas.DataFrame
        :func:`allobranch.junction_geometry` of ``network.table`` (same rows as ``network.frame``).
    junctions_csv : str or path-like
        The per-junction geometry ``check`` has just written; its rows are the network's junctions in
        order. It is rewritten (atomically) with the columns ``parent_segment``, ``daughter_segments``,
        ``generation``, ``strahler_order``, ``n_tips``, ``parent_rows``, ``daughter_rows``, ``source`` and
        ``flags`` added, so every number can be traced to the user's file.
    force : bool
        Replace existing figure files.

    Returns
    -------
    list of pathlib.Path
        ``junctions.csv`` and the figures (``network_<specimen>.png``, at most :data:`MAX_NETWORK_FIGURES`).

    Raises
    ------
    OutputExistsError
        If a figure file exists and ``force`` is false.
    """
    import pandas as pd

    from allobranch.io import atomic_write, prepare_output_dir
    from allobranch.networks.assemble import TRACING_COLUMNS
    from allobranch.reporting.plots.network import plot_network
    from allobranch.reporting.style import figure, save_figure

    dest = Path(junctions_csv)
    written = pd.read_csv(dest, dtype={"taxon": str, "specimen": str, "junction": str}, keep_default_na=False)
    frame = network.frame
    if len(written) != len(frame) or (written["junction"].to_numpy() != frame["junction"].to_numpy()).any():
        raise ValueError(f"{dest} does not hold the network's junctions in order")
    extra = frame[[*TRACING_COLUMNS, "flags"]].reset_index(drop=True)
    merged = pd.concat(
        [written.drop(columns=[c for c in extra.columns if c in written.columns]), extra], axis=1
    )
    out = [atomic_write(dest, lambda p: merged.to_csv(p, index=False))]
    specimens = list(dict.fromkeys(frame["specimen"]))[:MAX_NETWORK_FIGURES]
    names = [f"network_{_file_label(s)}" for s in specimens]
    prepare_output_dir(dest.parent, [f"{n}.png" for n in names], force=force)
    for specimen, name in zip(specimens, names):
        fig, ax = figure("double", 0.6)
        plot_network(frame, geometry, specimen=specimen, ax=ax)
        out += save_figure(fig, dest.parent / name, formats=("png",))
        fig.clf()
    return out


def save_recipe(table, network, path: str | Path, *, overwrite: bool = False) -> Path:
    """Write the recipe of this input: the table's mapping, or for a network the user's mapping and [network].

    Parameters
    ----------
    table : JunctionTable
        The validated table.
    network : allobranch.networks.NetworkJunctions or None
        The network it was derived from, if any.
    path : str or path-like
        The recipe file.
    overwrite : bool
        Replace an existing file.

    Returns
    -------
    pathlib.Path
        The file written.
    """
    if network is None:
        from allobranch.intake.recipe import write_recipe

        return write_recipe(table.mapping, path, overwrite=overwrite)
    from allobranch.networks.options import write_network_recipe

    return write_network_recipe(network.mapping, network.options, path, overwrite=overwrite)
