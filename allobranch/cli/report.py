"""``allobranch report FIT_DIR``: one self-contained HTML report of a result folder."""

from __future__ import annotations

import argparse
from pathlib import Path

from allobranch.reporting.outputs import prepare_output_dir


def run(args: argparse.Namespace) -> int:
    """Run ``allobranch report``."""
    from allobranch.inference.results import FitResult
    from allobranch.reporting.report import REPORT_FILE, SavedComparison, build_report

    fit_dir = Path(args.fit_dir)
    result = FitResult.load(fit_dir / "fit.nc")
    prepare_output_dir(fit_dir, [REPORT_FILE], force=args.force)
    laws = SavedComparison.read(fit_dir)
    path = build_report(result, fit_dir / REPORT_FILE, laws=laws, width=args.width)
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
        description="Write FIT_DIR/report.html: warnings first, data and validation flags, the model and priors "
        "in plain words, diagnostics, exponent tables, law comparison and verdicts (when 'allobranch compare' "
        "wrote into the same folder), a methods paragraph and the research-use caution. Opens offline.",
    )
    parser.add_argument(
        "fit_dir", metavar="FIT_DIR", help="folder written by 'allobranch fit' (holds fit.nc)"
    )
    parser.add_argument("--width", choices=("single", "double"), default="single", help="figure width")
    parser.add_argument("--force", action="store_true", help="replace an existing report.html")
    parser.set_defaults(func=run)
