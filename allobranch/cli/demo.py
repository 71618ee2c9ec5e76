"""``allobranch demo``: the whole path on the bundled SIMULATED demo data."""

from __future__ import annotations

import argparse
from pathlib import Path

from allobranch.cli.compare import print_verdicts
from allobranch.cli.fit import add_sampler_arguments, fit_and_write, sampler_kwargs
from allobranch.cli.options import add_worker_argument
from allobranch.conventions import FIGURES_DIR, REPORT_FILE
from allobranch.demo import DEMO_FILES, demo_folder, write_demo
from allobranch.io import prepare_output_dir


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
    result = fit_and_write(table, args, out)
    laws = ab.compare_laws(
        table, fit=result, workers=args.workers, progress=not args.quiet, **sampler_kwargs(args)
    )
    ab.write_comparison(laws, out, force=args.force)
    print_verdicts(laws.verdicts)
    print(
        f"Law comparison took {laws.settings.get('seconds', float('nan')):.0f} s "
        f"({laws.settings.get('n_fits')} fits)"
    )
    figures = ab.write_figures(result, out / FIGURES_DIR, laws_table=laws.laws_table())
    print(f"{len(figures)} figure files in {out / FIGURES_DIR}/")
    prepare_output_dir(out, [REPORT_FILE], force=args.force)
    report = ab.build_report(
        result,
        out / REPORT_FILE,
        laws=laws,
        title="Branching-exponent analysis of SIMULATED demo data (invented species)",
        hdi_prob=args.hdi,
    )
    print(f"Report: {report}")
    return 0


def register(subparsers: argparse._SubParsersAction) -> None:
    """Add the ``demo`` sub-command."""
    parser = subparsers.add_parser(
        "demo",
        help="run the whole analysis on the bundled simulated demo data",
        description="Check, fit, compare laws, draw figures and write the report for the bundled SIMULATED "
        "demo data (four invented lizard species).",
    )
    parser.add_argument(
        "--out", metavar="DIR", default="allobranch_demo", help="results folder (default allobranch_demo)"
    )
    add_sampler_arguments(parser)
    add_worker_argument(parser)
    # shorter chains than 'fit' so that the demo's 16 fits (free model and every law) finish in minutes;
    # 4 x 800 draws keep every ESS above 400 on these data (the species with a size trend, which the
    # demo's constant-exponent model does not describe, slows the deviation scale's mixing)
    parser.set_defaults(func=run, draws=800, tune=800)
