"""``allobranch compare``: compare branching laws with the free model and write the evidence and verdicts."""

from __future__ import annotations

import argparse
import sys
import time

from allobranch.cli.engine_options import add_engine_arguments, executor_from_args
from allobranch.cli.fit import add_sampler_arguments, print_exponents, sampler_kwargs, spec_from_args
from allobranch.cli.model_options import add_comparative_arguments, comparative_table
from allobranch.cli.options import add_mapping_arguments, add_worker_argument, table_from_args
from allobranch.comparison.laws import CLASSIC_LAWS, resolve_laws
from allobranch.comparison.ranges import check_law_ranges, parse_law_range, range_lines
from allobranch.comparison.rope import DEFAULT_DELTA, check_delta
from allobranch.conventions import COMPARISON_FILES, LAWS_OVER_RANGE_FILE, POPULATION
from allobranch.errors import OPTIONS_ORIGIN, InputError
from allobranch.intake.recipe import recipe_section
from allobranch.io import prepare_output_dir

#: Keys of the recipe's [compare] section and their expected TOML types.
COMPARE_KEYS: dict[str, tuple[type, str]] = {
    "law_range": (dict, "a table of [LOW, HIGH] pairs, e.g. { log_parent_size = [-1, 1] }"),
}


def register(subparsers: argparse._SubParsersAction) -> None:
    """Add the ``compare`` sub-command to the top-level parser's ``subparsers``."""
    classic = ", ".join(f"{law.label} ({law.value:g})" for law in CLASSIC_LAWS)
    parser = subparsers.add_parser(
        "compare",
        help="compare branching laws (Murray, da Vinci, Rall, your own) with the free model",
        description="Fit the free model and each law (exponent fixed, for the population and per taxon), then "
        "report "
        "PSIS-LOO, Savage-Dickey Bayes factors (with prior sensitivity) and the posterior probability near "
        f"each law, and a conservative verdict per scope: the law, 'none' or 'undecided'. Writes "
        f"{', '.join(COMPARISON_FILES)} into --out.",
    )
    add_mapping_arguments(parser)
    add_comparative_arguments(parser)
    parser.add_argument("--out", metavar="DIR", required=True, help="folder for the results")
    parser.add_argument(
        "--law",
        metavar="LAW",
        action="append",
        dest="laws",
        help=f"a law to compare: a classic name or LABEL=VALUE (fractions allowed, e.g. "
        f"turbulent=7/3); repeat for several. Default: {classic}",
    )
    parser.add_argument(
        "--delta",
        type=float,
        default=DEFAULT_DELTA,
        help=f"half-width of each law's region of practical equivalence (default {DEFAULT_DELTA:g}, "
        "half the gap between 3/2 and 2)",
    )
    parser.add_argument(
        "--law-range",
        metavar="NAME=LOW:HIGH",
        action="append",
        dest="law_range",
        help="also check every law over this range of a covariate of the model (e.g. "
        "log_parent_size=-1:1, generation=3:10): per scope, the probability that the exponent stays near "
        f"the law over the whole range, a verdict and the sub-range where it holds; writes "
        f"{LAWS_OVER_RANGE_FILE}. Repeatable; also [compare] law_range in the recipe",
    )
    parser.add_argument(
        "--scope",
        choices=(POPULATION, "taxon", "both"),
        default="both",
        help="all taxa sharing the law, one taxon at a time, or both (default)",
    )
    parser.add_argument(
        "--fit",
        metavar="FIT.nc",
        dest="fit_file",
        help="re-use a saved free-model fit (fit.nc from 'allobranch fit') instead of refitting; "
        "its model options then apply",
    )
    add_sampler_arguments(parser)
    add_worker_argument(parser)
    add_engine_arguments(parser, workers=False)  # --scheduler: the fits on a Dask cluster
    parser.set_defaults(func=run)


def print_verdicts(verdicts) -> None:
    """Print one line per scope of a verdict table: scope, verdict, reason."""
    print("Verdicts (law, 'none' or 'undecided'):")
    for row in verdicts.itertuples():
        print(f"  {row.scope:<24} {row.verdict:<12} {row.reason}")


def law_ranges_from_args(args: argparse.Namespace) -> list[tuple[str, dict]]:
    """The law ranges asked for, each set with its origin: the recipe's ``[compare] law_range``, then
    ``--law-range`` (which overrides the recipe's range of the same covariate); bounds checked later."""
    recipe = getattr(args, "recipe", None)
    section = recipe_section(recipe, "compare", COMPARE_KEYS) if recipe else {}
    given = dict(parse_law_range(text) for text in args.law_range or [])
    return [(str(recipe), section.get("law_range", {})), (OPTIONS_ORIGIN, given)]


def run(args: argparse.Namespace) -> int:
    """Run ``allobranch compare``: exit code 0 on success (bad input raises
    :class:`~allobranch.errors.AllobranchError`, which the entry point reports with exit code 2)."""
    started = time.perf_counter()
    ranges_given = law_ranges_from_args(args)
    names = [*COMPARISON_FILES, *([LAWS_OVER_RANGE_FILE] if any(r for _, r in ranges_given) else [])]
    prepare_output_dir(args.out, names, force=args.force)  # fail before the long fits
    laws = resolve_laws(args.laws)  # and before reading the table
    try:
        check_delta(args.delta)
    except ValueError as exc:
        raise InputError(str(exc)) from None
    table = comparative_table(args, table_from_args(args))
    from allobranch.comparison.compare import compare_laws
    from allobranch.inference.results import FitResult
    from allobranch.reporting.saved_comparison import write_comparison

    free = FitResult.load(args.fit_file) if args.fit_file else None
    spec = None if free else spec_from_args(args)
    covariates = (free.spec if free else spec).covariates
    law_range: dict = {}
    for origin, ranges in ranges_given:
        law_range.update(check_law_ranges(ranges, covariates, origin))
    scopes = (POPULATION, "taxon") if args.scope == "both" else (args.scope,)
    result = compare_laws(
        table,
        laws,
        delta=args.delta,
        scopes=scopes,
        spec=spec,
        progress=not args.quiet,
        fit=free,
        workers=args.workers,
        **sampler_kwargs(args),
        executor=executor_from_args(args),
        law_range=law_range,
    )
    written = write_comparison(result, args.out, force=args.force)
    if result.free_fit.spec.covariates:  # does the exponent depend on each covariate?
        from allobranch.comparison.slopes import compare_covariates, write_slopes

        slopes = compare_covariates(
            result.free_fit, seed=args.seed, draws=args.draws, tune=args.tune, chains=args.chains
        )
        written.append(write_slopes(slopes, args.out, force=args.force))
        for row in slopes.itertuples():
            print(f"Slope of {row.covariate} ({row.group}): {row.verdict} ({row.reason})")
    for w in result.warnings:
        print(f"WARNING: {w}", file=sys.stderr)
    print_exponents(result.free_fit.exponents(args.hdi), "Free-model exponents", diagnostics=False)
    print_verdicts(result.verdicts)
    for line in range_lines(result.over_range):
        print(f"Over a range: {line}")
    print(
        f"{result.settings['n_fits']} fit(s){' (free model re-used from ' + args.fit_file + ')' if free else ''}; "
        f"compare took {time.perf_counter() - started:.1f} s; results in {args.out}/ "
        f"({', '.join(p.name for p in written)})"
    )
    return 0
