"""Network input options shared by check, fit and compare: segment tables, edge lists and SWC files."""

from __future__ import annotations

import argparse
import dataclasses
import sys
import tomllib
from pathlib import Path
from typing import Any

from allobranch.intake.mapping import ColumnMapping
from allobranch.networks.rules import CHOICES, NEAR_POINTS, TRIM_RADII

#: Every network option by ``dest`` (the recipe key), with its argparse keywords; a ``choices`` entry names
#: its list in :data:`allobranch.networks.rules.CHOICES`.
NETWORK_ARGUMENTS: dict[str, dict[str, Any]] = {
    "segment_id": {"metavar": "COL", "help": "segment id column"},
    "parent_id": {"metavar": "COL", "help": "parent segment's id column (empty for a root)"},
    "size": {"metavar": "COL", "help": "segment (or edge) size column"},
    "length": {"metavar": "COL", "help": "segment length column (weights merged continuations)"},
    "continuations": {
        "choices": "continuations",
        "help": "segments with one child: merge them with the segment below (default) or keep the pieces "
        "(a junction's parent is then the piece just above it); never junctions",
    },
    "roots": {
        "choices": "roots",
        "help": "roots per specimen: one (default for tables) or many (default for SWC files)",
    },
    "edges": {"metavar": "FILE", "help": "edge list, one row per edge"},
    "node_from": {"metavar": "COL", "help": "first node column (default from)"},
    "node_to": {"metavar": "COL", "help": "second node column (default to)"},
    "root": {
        "metavar": "ID|SPEC=ID,...",
        "help": "root (inlet) node of the edge list: one id, or one per specimen",
    },
    "loops": {
        "choices": "loops",
        "help": "loops in an edge list: remove the thinnest edge of each (default, listed) or stop with an "
        "error",
    },
    "swc": {"metavar": "FILE|DIR", "help": "SWC file, or folder of SWC files"},
    "radius_rule": {
        "choices": "radius_rule",
        "help": "section radius from its samples: median leaving out --trim-radii (or --trim) at both ends "
        "(default), next to the branch point, or median of all",
    },
    "trim": {
        "type": float,
        "metavar": "DIST",
        "help": "trimmed_median: one distance left out at each section end (instead of --trim-radii)",
    },
    "trim_radii": {
        "type": float,
        "metavar": "K",
        "help": f"trimmed_median: leave out K radii of the end sample at each section end (default "
        f"{TRIM_RADII:g})",
    },
    "near_points": {
        "type": int,
        "metavar": "N",
        "help": f"near_branch: samples read on each side of a junction (default {NEAR_POINTS})",
    },
    "neurite_types": {
        "choices": "neurite_types",
        "help": "SWC junctions kept by the type of their branch point (default all)",
    },
    "branch_point_sections": {
        "choices": "branch_point_sections",
        "help": "SWC junctions with a parent or daughter section of one branch-point sample (no radius apart "
        "from the branch point's own): leave them out, listed (default), or keep them",
    },
}

#: Command-line spelling of every network option (``dest`` is the recipe key).
NETWORK_FLAGS: dict[str, str] = {key: "--" + key.replace("_", "-") for key in NETWORK_ARGUMENTS}

#: Unit of SWC files when neither the options nor the recipe name one (the SWC convention).
SWC_DEFAULT_UNIT = "um"


def add_network_arguments(parser: argparse.ArgumentParser) -> None:
    """Add the network input options (segment tables, edge lists, SWC files) to a sub-command parser.

    Parameters
    ----------
    parser : argparse.ArgumentParser
        The sub-command's parser (which also has the column-mapping options).
    """
    group = parser.add_argument_group(
        "network input",
        "Derive the junctions from a network instead of a junction table: a segment table (TABLE with "
        "--segment-id, --parent-id, --size), an edge list (--edges FILE --root ID --size COL, no TABLE) or "
        "SWC morphologies (--swc FILE|DIR, no TABLE). --taxon/--specimen name the network table's columns. "
        "The same keys go under [network] in a recipe.",
    )
    for key, keywords in NETWORK_ARGUMENTS.items():
        if "choices" in keywords:
            keywords = {**keywords, "choices": CHOICES[keywords["choices"]]}
        group.add_argument(NETWORK_FLAGS[key], dest=key, **keywords)


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
        ``generation``, ``strahler_order``, ``n_tips``, ``parent_rows``, ``daughter_rows``, ``source``,
        (for SWC files) ``parent_samples`` and ``daughter_samples``, and ``flags`` added, so every number
        can be traced to the user's file.
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
    from allobranch.networks.assemble import SAMPLE_COLUMNS, TRACING_COLUMNS
    from allobranch.reporting.plots.network import plot_network
    from allobranch.reporting.style import figure, save_figure

    dest = Path(junctions_csv)
    written = pd.read_csv(dest, dtype={"taxon": str, "specimen": str, "junction": str}, keep_default_na=False)
    frame = network.frame
    if len(written) != len(frame) or (written["junction"].to_numpy() != frame["junction"].to_numpy()).any():
        raise ValueError(f"{dest} does not hold the network's junctions in order")
    samples = [c for c in SAMPLE_COLUMNS if c in frame.columns]
    extra = frame[[*TRACING_COLUMNS, *samples, "flags"]].reset_index(drop=True)
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
