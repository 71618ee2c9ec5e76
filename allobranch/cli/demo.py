"""``allobranch demo``: the whole path on the bundled SIMULATED demo data."""

from __future__ import annotations

import argparse
from pathlib import Path

from allobranch.cli.fit import add_sampler_arguments, fit_and_write
from allobranch.demo import DEMO_FILES, demo_folder, write_demo


def run(args: argparse.Namespace) -> int:
    """Run ``allobranch demo``."""
    import allobranch as ab
    from allobranch.cli.check import format_check_report

    out = Path(args.out)
    folder = demo_folder()
    if folder is None:  # installed without the repository: regenerate the (seeded, identical) demo data
        folder = out / "demo_data"
        write_demo(folder)
    print(f"Demo data (SIMULATED, invented species): {folder / DEMO_FILES['table']}")
    table = ab.read_junctions(folder / DEMO_FILES["table"], recipe=folder / DEMO_FILES["recipe"])
    geometry = ab.junction_geometry(table)
    print(format_check_report(table, ab.naive_summary(geometry, by=("taxon",))))
    fit_and_write(table, args, out)
    return 0


def register(subparsers: argparse._SubParsersAction) -> None:
    """Add the ``demo`` sub-command."""
    parser = subparsers.add_parser(
        "demo", help="run the whole analysis on the bundled simulated demo data",
        description="Check, fit, compare laws, draw figures and write the report for the bundled SIMULATED "
        "demo data (four invented lizard species).",
    )
    parser.add_argument("--out", metavar="DIR", default="allobranch_demo", help="results folder (default allobranch_demo)")
    add_sampler_arguments(parser)
    parser.set_defaults(func=run)
