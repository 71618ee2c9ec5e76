"""``allobranch check``: read and validate a junction table, report what was found, describe it naively."""

from __future__ import annotations

import argparse
from pathlib import Path

import pandas as pd

from allobranch.cli.network_options import save_recipe, write_network_outputs
from allobranch.cli.options import add_mapping_arguments, input_from_args
from allobranch.conventions import JUNCTIONS_FILE
from allobranch.errors import AllobranchError, OutputExistsError
from allobranch.intake.table import JunctionTable
from allobranch.io import prepare_output_dir


def register(subparsers: argparse._SubParsersAction) -> None:
    """Add the ``check`` sub-command to the top-level parser's ``subparsers``."""
    parser = subparsers.add_parser(
        "check",
        help="validate a junction table and describe it",
        description="Read and validate a junction table, list every flagged and excluded row, and show naive "
        "per-junction exponents by taxon (which ignore measurement error). Exit code 0 when the table "
        "is usable, 2 when it is not.",
    )
    add_mapping_arguments(parser)
    parser.add_argument("--out", metavar="DIR", help=f"write per-junction geometry to DIR/{JUNCTIONS_FILE}")
    parser.add_argument(
        "--save-recipe",
        metavar="FILE",
        dest="save_recipe",
        help="write the column mapping used to a TOML recipe FILE",
    )
    parser.add_argument("--force", action="store_true", help="overwrite existing output files")
    parser.set_defaults(func=run)


def _refuse_overwrite(dest: Path, force: bool, option: str) -> None:
    if dest.exists() and not force:
        raise OutputExistsError(
            f"{dest} already exists; use --force to overwrite it or choose another {option}"
        )


def _error_note(table: JunctionTable) -> str:
    m = table.mapping
    parts = []
    if m.rel_error is not None:
        parts.append(f"relative error {m.rel_error:g}")
    if m.se:
        parts.append(f"standard errors from {', '.join(m.se)}")
    if table.repeats is not None:
        parts.append(f"{len(table.repeats)} repeat readings")
    if not parts:
        return (
            "none given (the model cannot then tell measurement error from biological deviation; "
            "give --rel-error, --se or --repeats if you can)"
        )
    return "; ".join(parts)


def format_check_report(table: JunctionTable, summary: pd.DataFrame) -> str:
    """The text printed by ``allobranch check``.

    Parameters
    ----------
    table : JunctionTable
        The validated table.
    summary : pandas.DataFrame
        :func:`allobranch.geometry.naive_summary` by taxon.

    Returns
    -------
    str
        Counts, every flag and excluded row, and the naive summary.
    """
    d = table.data
    m = table.mapping
    hist = d["n_daughters"].value_counts().sort_index()
    roles = [f"parent '{m.parent}'", "daughters " + ", ".join(f"'{c}'" for c in m.daughters)]
    roles += [
        f"{role} '{col}'"
        for role, col in (("taxon", m.taxon), ("specimen", m.specimen), ("junction", m.junction))
        if col
    ]
    lines = [
        f"Table: {table.source}",
        "  columns: " + "; ".join(roles),
        f"  rows read: {table.report.n_rows_read}; junctions used: {table.n_junctions}; "
        f"taxa: {len(table.taxa)}; specimens: {len(table.specimens)}",
        "  daughters per junction: " + ", ".join(f"{k}: {v}" for k, v in hist.items()),
        f"  sizes: {table.mapping.measure} in {table.unit}; measurement error: {_error_note(table)}",
    ]
    sections = (
        ("Flagged rows (kept)", table.report.flags),
        ("Excluded rows (not used)", table.report.excluded),
    )
    for title, items in sections:
        lines.append(f"{title}: {len(items)}")
        lines.extend(f"  {p.format()}" for p in items)
    from allobranch.geometry import NAIVE_NOTE

    lines.append(f"Naive summary by taxon -- {NAIVE_NOTE}:")
    shown = summary.drop(columns=["method"])
    with pd.option_context("display.width", 200, "display.max_columns", 20):
        lines.extend(
            "  " + s for s in shown.to_string(index=False, float_format=lambda x: f"{x:.3g}").splitlines()
        )
    return "\n".join(lines)


def run(args: argparse.Namespace) -> int:
    """Run ``allobranch check``: exit code 0 when the table is usable (unusable input raises an
    :class:`~allobranch.errors.AllobranchError`, which the entry point reports with exit code 2)."""
    # Check the destinations before doing any work, so a run fails early rather than half-way.
    if args.out:
        prepare_output_dir(args.out, [JUNCTIONS_FILE], force=args.force)
    if args.save_recipe:
        if not Path(args.save_recipe).resolve().parent.is_dir():
            raise AllobranchError(f"{args.save_recipe}: the folder for --save-recipe does not exist")
        _refuse_overwrite(Path(args.save_recipe), args.force, "--save-recipe file")
    table, network = input_from_args(args)
    from allobranch.geometry import junction_geometry, naive_summary
    from allobranch.reporting.junctions import write_junctions

    geometry = junction_geometry(table)
    print(format_check_report(table, naive_summary(geometry, by=("taxon",))))
    if args.save_recipe:
        try:
            path = save_recipe(table, network, args.save_recipe, overwrite=args.force)
        except OSError as exc:
            raise AllobranchError(f"{args.save_recipe}: cannot write the recipe ({exc.strerror})") from None
        print(f"Recipe written to {path}")
    if args.out:
        dest = write_junctions(table, args.out, geometry=geometry, force=args.force)
        print(f"Per-junction geometry written to {dest} (radii in {table.unit})")
        if network is not None:
            for path in write_network_outputs(network, geometry, dest, force=args.force)[1:]:
                print(f"Network figure written to {path}")
            print(f"{dest} also traces every junction to its segments, rows and generation")
    reasons = geometry["no_root_reason"].dropna().value_counts()
    if len(reasons):
        why = ", ".join(f"{reason}: {count}" for reason, count in reasons.items())
        print(
            f"Note: {int(reasons.sum())} junction(s) have no per-junction exponent ({why}); they stay in the "
            "table for the model."
        )
    return 0
