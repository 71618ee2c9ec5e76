"""``allobranch calibrate``: simulation-based calibration of the model on a study design."""

from __future__ import annotations

import argparse
import time

from allobranch.cli import design_options
from allobranch.cli.fit import positive_int, spec_from_args
from allobranch.reporting.outputs import prepare_output_dir

#: Files written into ``--out``.
RANKS_FILE, SUMMARY_FILE = "calibration.csv", "calibration_summary.csv"
REPORT_FILE, FIGURE_FILE = "calibration.md", "calibration.png"
CALIBRATION_FILES: tuple[str, ...] = (RANKS_FILE, SUMMARY_FILE, REPORT_FILE, FIGURE_FILE)


def register(subparsers: argparse._SubParsersAction) -> None:
    """Add the ``calibrate`` sub-command to the top-level parser's ``subparsers``."""
    parser = design_options.add_study_parser(
        subparsers,
        "calibrate",
        help="check the model's calibration on your design by simulation (rank histograms)",
        description="Simulation-based calibration: draw the exponent and spreads from the model's priors, "
        "simulate a table with your design, fit it with your model options, and rank the true values among "
        "the posterior draws; repeat. Flat rank histograms and a non-significant uniformity test say the "
        f"configuration is calibrated. Writes {', '.join(CALIBRATION_FILES)} into --out. All tables are "
        "simulated.",
    )
    parser.add_argument(
        "--replicates", type=positive_int, default=100, metavar="R", help="simulated tables (default 100)"
    )
    design_options.finish_study_parser(parser, run, truth=False)


def run(args: argparse.Namespace) -> int:
    """Run ``allobranch calibrate``: exit code 0 on success (bad input raises
    :class:`~allobranch.errors.AllobranchError`, which the entry point reports with exit code 2)."""
    started = time.perf_counter()
    from allobranch.planning.calibrate import calibrate

    design = design_options.design_from_args(args)
    options = design_options.study_kwargs(args)
    spec = spec_from_args(args)
    folder = prepare_output_dir(args.out, list(CALIBRATION_FILES), force=args.force)
    result = calibrate(design, spec, **options)
    written = design_options.write_study_files(
        folder,
        {
            RANKS_FILE: result.ranks,
            SUMMARY_FILE: result.summary,
            REPORT_FILE: result.to_markdown(),
            FIGURE_FILE: calibration_figure(result.histogram),
        },
    )
    design_options.warn_failed(
        result.ranks.loc[result.ranks["status"] == "failed", "replicate"].nunique(), RANKS_FILE
    )
    print(
        result.summary[["quantity", "n", "chi2_p", "mean_rank_fraction", "coverage"]].to_string(index=False)
    )
    design_options.print_done("calibrate", started, args.out, written)
    return 0


def calibration_figure(histogram):
    """One rank-histogram panel per checked quantity."""
    from allobranch.reporting.plots.calibration import plot_rank_histogram
    from allobranch.reporting.style import figure, house_style

    quantities = list(dict.fromkeys(histogram["quantity"]))
    fig, axes = figure("double", height_mm=55, ncols=len(quantities), squeeze=False)
    for i, (ax, q) in enumerate(zip(axes[0], quantities)):
        plot_rank_histogram(histogram, q, ax=ax)
        if i:
            ax.set_ylabel("")
    with house_style():
        handles, labels = axes[0][0].get_legend_handles_labels()
        fig.legend(handles, labels, loc="outside upper center", frameon=False)
    return fig
