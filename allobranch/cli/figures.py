"""``allobranch figures FIT_DIR``: every figure of a fit, for print."""

from __future__ import annotations

import argparse
from pathlib import Path

from allobranch.cli.result_options import add_result_arguments
from allobranch.conventions import FIGURE_FORMATS, FIGURES_DIR, FIT_FILE
from allobranch.errors import InputError


def _formats(text: str) -> tuple[str, ...]:
    formats = tuple(f.strip().lower() for f in text.split(",") if f.strip())
    bad = [f for f in formats if f not in FIGURE_FORMATS]
    if bad or not formats:
        raise InputError(f"--format {text!r}: use a comma-separated list of {', '.join(FIGURE_FORMATS)}")
    return formats


def run(args: argparse.Namespace) -> int:
    """Run ``allobranch figures``."""
    import allobranch as ab

    fit_dir = Path(args.fit_dir)
    result = ab.FitResult.load(fit_dir / FIT_FILE)
    laws = ab.SavedComparison.read(fit_dir)
    written = ab.write_figures(
        result,
        fit_dir / FIGURES_DIR,
        laws_table=laws.laws_table() if laws is not None else None,
        formats=_formats(args.format),
        width=args.width,
    )
    print(f"{len(written)} figure files written to {fit_dir / FIGURES_DIR}/")
    return 0


def register(subparsers: argparse._SubParsersAction) -> None:
    """Add the ``figures`` sub-command."""
    parser = subparsers.add_parser(
        "figures",
        help="draw every figure of a fit",
        description="Draw the exponent forest plot, ratio plane, naive-vs-model, posterior predictive check, "
        "law comparison (when 'allobranch compare' wrote into the same folder) and sampler diagnostics into "
        f"FIT_DIR/{FIGURES_DIR}/ (existing figure files there are replaced).",
    )
    parser.add_argument(
        "--format", default="pdf,png,svg", help="comma-separated formats (default pdf,png,svg)"
    )
    add_result_arguments(parser, width_help="journal column width: single (~85 mm) or double (~180 mm)")
    parser.set_defaults(func=run)
