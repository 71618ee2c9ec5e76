"""``allobranch report FIT_DIR``: one self-contained HTML report of a result folder."""

from __future__ import annotations

import argparse
from pathlib import Path

from allobranch.cli.result_options import add_result_arguments
from allobranch.conventions import FIT_FILE, REPORT_FILE
from allobranch.io import prepare_output_dir


def run(args: argparse.Namespace) -> int:
    """Run ``allobranch report``."""
    import allobranch as ab

    fit_dir = Path(args.fit_dir)
    result = ab.FitResult.load(fit_dir / FIT_FILE)
    prepare_output_dir(fit_dir, [REPORT_FILE], force=args.force)
    laws = ab.SavedComparison.read(fit_dir)
    path = ab.build_report(result, fit_dir / REPORT_FILE, laws=laws, width=args.width)
    print(
        f"Report written to {path}"
        + (
            ""
            if laws
            else " (no law comparison in this folder: run "
            "'allobranch compare ... --out FIT_DIR --fit FIT_DIR/fit.nc' first)"
        )
    )
    return 0


def register(subparsers: argparse._SubParsersAction) -> None:
    """Add the ``report`` sub-command."""
    parser = subparsers.add_parser(
        "report",
        help="write a self-contained HTML report of a result folder",
        description=f"Write FIT_DIR/{REPORT_FILE}: the answer first (exponent per taxon with its interval and, "
        "when 'allobranch compare' wrote into the same folder, the law verdict beside the forest figure), then "
        "the evidence, diagnostics and grouped warnings, the data and its validation flags, the model and "
        "priors in plain words, a methods paragraph and the research-use caution. Opens offline.",
    )
    add_result_arguments(parser, width_help="figure width")
    parser.add_argument("--force", action="store_true", help=f"replace an existing {REPORT_FILE}")
    parser.set_defaults(func=run)
