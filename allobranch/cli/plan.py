"""``allobranch plan``: how often a simulated study design reaches each verdict, and the smallest design
that reaches a target probability."""

from __future__ import annotations

import argparse
import time

from allobranch.cli import design_options
from allobranch.cli.fit import positive_int, probability, spec_from_args
from allobranch.reporting.outputs import prepare_output_dir

#: Files written into ``--out``.
PLAN_FILE, REPLICATES_FILE, REPORT_FILE, FIGURE_FILE = (
    "plan.csv",
    "plan_replicates.csv",
    "plan.md",
    "plan.png",
)
PLAN_FILES: tuple[str, ...] = (PLAN_FILE, REPLICATES_FILE, REPORT_FILE, FIGURE_FILE)


def register(subparsers: argparse._SubParsersAction) -> None:
    """Add the ``plan`` sub-command to the top-level parser's ``subparsers``."""
    parser = design_options.add_study_parser(
        subparsers,
        "plan",
        help="plan a study: how often a design tells the true exponent from an alternative",
        description="Simulate tables from a study design again and again, fit and compare the law at the "
        "true exponent with the alternative(s) each time, and report how often each verdict comes out "
        "(the right law, another law, none, undecided) and the expected interval width. With --sweep, "
        f"do so for several designs and name the smallest that reaches --target. Writes {', '.join(PLAN_FILES)} "
        "into --out. All tables are simulated.",
    )
    parser.add_argument(
        "--alternative",
        type=float,
        action="append",
        required=True,
        metavar="A2",
        help="an exponent to tell the true one from (e.g. 2.7); repeat for several",
    )
    parser.add_argument(
        "--replicates",
        type=positive_int,
        default=20,
        metavar="R",
        help="simulated tables per design (default 20)",
    )
    parser.add_argument(
        "--sweep",
        metavar="VARIABLE=V1,V2,...",
        help="try several values of one design variable: taxa, specimens, junctions or error "
        "(e.g. junctions=10,30,100)",
    )
    parser.add_argument(
        "--target",
        type=probability,
        default=0.8,
        help="probability of the right verdict a design should reach (default 0.8)",
    )
    parser.add_argument(
        "--delta",
        type=float,
        default=None,
        help="ROPE half-width of the laws (default: half the gap to the nearest alternative, at most 0.25)",
    )
    design_options.finish_study_parser(parser, run)


def run(args: argparse.Namespace) -> int:
    """Run ``allobranch plan``: exit code 0 on success (bad input raises
    :class:`~allobranch.errors.AllobranchError`, which the entry point reports with exit code 2)."""
    started = time.perf_counter()
    from allobranch.planning.plan import parse_sweep, plan_study

    design = design_options.design_from_args(args)  # every check before the long run
    sweep = parse_sweep(args.sweep) if args.sweep else None
    options = design_options.study_kwargs(args)
    folder = prepare_output_dir(args.out, list(PLAN_FILES), force=args.force)
    result = plan_study(
        design,
        args.alternative,
        sweep=sweep,
        target=args.target,
        delta=args.delta,
        spec=spec_from_args(args),
        **options,
    )
    written = design_options.write_study_files(
        folder,
        {
            PLAN_FILE: result.points,
            REPLICATES_FILE: result.replicates,
            REPORT_FILE: result.to_markdown(),
            FIGURE_FILE: plan_figure(result),
        },
    )
    design_options.warn_failed(int(result.points["failed"].sum()), REPLICATES_FILE)
    cols = ["value"] if sweep else []
    cols += ["n_junctions", "p_right", "p_other", "p_none", "p_undecided", "mean_width"]
    print(result.points[cols].to_string(index=False, float_format=lambda v: f"{v:.3g}"))
    best = result.smallest
    if best is None:
        print(f"No design reached P(right verdict) >= {args.target:g}.")
    elif sweep:
        print(
            f"Smallest design reaching P(right verdict) >= {args.target:g}: {sweep.variable} = {best['value']:g}."
        )
    design_options.print_done("plan", started, args.out, written)
    return 0


def plan_figure(result):
    """The plan's figure: verdict probabilities beside the mean interval width."""
    from allobranch.reporting.plots.plan import plot_interval_width, plot_verdict_probabilities
    from allobranch.reporting.style import figure

    fig, (left, right) = figure("double", 0.38, ncols=2)
    plot_verdict_probabilities(result.points, target=result.target, ax=left)
    plot_interval_width(result.points, ax=right)
    return fig
