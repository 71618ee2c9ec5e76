"""Column-mapping options shared by the sub-commands that read a junction table (check, fit, compare)."""

from __future__ import annotations

import argparse
from pathlib import Path
from typing import TYPE_CHECKING

from allobranch.cli.model_options import covariate_columns
from allobranch.cli.network_options import add_network_arguments, network_from_args
from allobranch.errors import option_error
from allobranch.intake import read_junctions
from allobranch.intake.mapping import MEASURES, ColumnMapping
from allobranch.intake.recipe import load_recipe, mapping_from_options
from allobranch.intake.table import JunctionTable
from allobranch.intake.units import ALLOWED_UNITS
from allobranch.intake.validate import DEFAULT_TAXON

if TYPE_CHECKING:
    from allobranch.networks import NetworkJunctions


def add_mapping_arguments(parser: argparse.ArgumentParser, *, with_table: bool = True) -> None:
    """Add the junction-table argument and the column-mapping options to a sub-command parser.

    Parameters
    ----------
    parser : argparse.ArgumentParser
        The sub-command's parser.
    with_table : bool
        Also add the positional ``TABLE`` argument (stored as ``args.table``).
    """
    if with_table:
        parser.add_argument(
            "table",
            metavar="TABLE",
            nargs="?",
            help="junction table: .csv, .tsv, semicolon-separated text (decimal comma), .parquet "
            "or .xlsx; one row per junction (or a segment table, see 'network input'; none with --edges "
            "or --swc)",
        )
    group = parser.add_argument_group(
        "column mapping",
        "Name the columns of TABLE, or give a recipe file with --recipe. Options given beside --recipe "
        "override the recipe's values.",
    )
    group.add_argument("--recipe", metavar="FILE", help="TOML recipe holding the column mapping")
    group.add_argument("--parent", metavar="COL", help="column with the parent segment's size")
    group.add_argument(
        "--daughters",
        metavar="COL,COL[,COL...]",
        help="daughter size columns, comma-separated; third and later may be empty in a row",
    )
    group.add_argument(
        "--taxon", metavar="COL", help=f"taxon column (default: one taxon named '{DEFAULT_TAXON}')"
    )
    group.add_argument("--specimen", metavar="COL", help="specimen column (default: one specimen per taxon)")
    group.add_argument("--junction", metavar="COL", help="junction label column (default: the row number)")
    group.add_argument("--measure", choices=MEASURES, help="sizes are radii or diameters (default: radius)")
    group.add_argument(
        "--unit",
        metavar="UNIT",
        help=f"length unit of the sizes, one of {', '.join(ALLOWED_UNITS)} (default: mm)",
    )
    group.add_argument(
        "--rel-error",
        metavar="FRACTION",
        type=float,
        dest="rel_error",
        help="known relative measurement error of every reading, e.g. 0.05 for 5%%",
    )
    group.add_argument(
        "--se",
        metavar="COL[,COL...]",
        help="absolute standard-error column: one for every reading of a row, or one per size "
        "column (parent first)",
    )
    group.add_argument(
        "--repeats",
        metavar="FILE",
        help="table of repeat readings (columns specimen, junction, segment, value); for an "
        "Excel TABLE also a sheet name",
    )
    group.add_argument(
        "--sheet", metavar="NAME", help="Excel sheet holding the junctions (default: the first)"
    )
    group.add_argument(
        "--encoding",
        metavar="NAME",
        help="text encoding of a CSV/TSV TABLE and repeat-readings file, e.g. cp1252, latin-1, "
        "utf-16 (default: UTF-8)",
    )
    if with_table:
        add_network_arguments(parser)


def mapping_from_args(args: argparse.Namespace, *, default: ColumnMapping | None = None) -> ColumnMapping:
    """Build the column mapping from parsed options (recipe first, then the options over it).

    Parameters
    ----------
    args : argparse.Namespace
        Parsed arguments from a parser prepared with :func:`add_mapping_arguments`.
    default : ColumnMapping, optional
        The base mapping when no recipe is given (a network's derived size columns).

    Returns
    -------
    ColumnMapping
        The checked mapping.
    """
    base = load_recipe(args.recipe) if args.recipe else default
    have = tuple(base.covariates) if base is not None else ()
    extra = tuple(c for c in covariate_columns(args) if c not in have)
    repeats = args.repeats
    if repeats is not None and Path(repeats).is_file():
        repeats = str(Path(repeats).resolve())  # a path typed on the command line is relative to here
    return mapping_from_options(
        base=base,
        parent=args.parent,
        daughters=args.daughters,
        taxon=args.taxon,
        specimen=args.specimen,
        junction=args.junction,
        measure=args.measure,
        unit=args.unit,
        rel_error=args.rel_error,
        se=args.se,
        repeats=repeats,
        sheet=args.sheet,
        encoding=args.encoding,
        covariates=have + extra if extra else None,
    )


def add_worker_argument(parser: argparse.ArgumentParser) -> None:
    """``--workers``: local processes running a comparison's fits."""
    parser.add_argument(
        "--workers",
        type=int,
        default=None,
        metavar="N",
        help="worker processes running the law fits (default: one per processor core); the "
        "results do not depend on it",
    )


def input_from_args(args: argparse.Namespace) -> tuple[JunctionTable, NetworkJunctions | None]:
    """The junction table the options describe: ``args.table`` read directly, or derived from a network.

    Parameters
    ----------
    args : argparse.Namespace
        Parsed arguments from a parser prepared with :func:`add_mapping_arguments`.

    Returns
    -------
    table : JunctionTable
        The validated junction table.
    network : NetworkJunctions or None
        The derived frame and the rules used, when the input is a network (see
        :mod:`allobranch.cli.network_options`).

    Raises
    ------
    allobranch.errors.InputError
        When the input or the options cannot be used (the CLI prints the message and exits with code 2).
    """
    network = network_from_args(args)
    if network is not None:
        return network.table, network
    if args.table is None:
        raise option_error(
            "no junction table given",
            "give TABLE, or a network: --edges FILE --root ID, or --swc FILE|DIR",
            "no_table",
        )
    return read_junctions(args.table, mapping_from_args(args)), None


def table_from_args(args: argparse.Namespace) -> JunctionTable:
    """The validated junction table of :func:`input_from_args` (read from ``args.table`` or derived from a
    network), without the network; raises :class:`~allobranch.errors.InputError` as it does."""
    return input_from_args(args)[0]
