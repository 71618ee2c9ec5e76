"""``allobranch compare``: compare branching laws with the free model and write the evidence and verdicts."""

from __future__ import annotations

import argparse
import sys
import time
from pathlib import Path
from typing import TYPE_CHECKING

from allobranch.cli.fit import add_sampler_arguments, spec_from_args
from allobranch.cli.options import add_mapping_arguments, add_worker_argument, table_from_args
from allobranch.comparison.laws import CLASSIC_LAWS, resolve_laws
from allobranch.comparison.rope import DEFAULT_DELTA, check_delta
from allobranch.errors import InputError
from allobranch.reporting.outputs import prepare_output_dir, write_files

if TYPE_CHECKING:  # the comparison loads ArviZ; only when it runs
    from allobranch.comparison.compare import LawComparison

#: Files written into ``--out``.
LAWS_FILE, BY_TAXON_FILE, REPORT_FILE = "laws.csv", "laws_by_taxon.csv", "laws.md"
VERDICTS_FILE = "laws_verdicts.csv"
COMPARE_FILES: tuple[str, ...] = (LAWS_FILE, BY_TAXON_FILE, VERDICTS_FILE, REPORT_FILE)


def register(subparsers: argparse._SubParsersAction) -> None:
    """Add the ``compare`` sub-command.

    Parameters
    ----------
    subparsers : argparse._SubParsersAction
        The top-level parser's sub-command collection.
    """
    classic = ", ".join(f"{law.label} ({law.value:g})" for law in CLASSIC_LAWS)
    parser = subparsers.add_parser(
        "compare",
        help="compare branching laws (Murray, da Vinci, Rall, your own) with the free model",
        description="Fit the free model and each law (exponent fixed, overall and per taxon), then report "
        "PSIS-LOO, Savage-Dickey Bayes factors (with prior sensitivity) and the posterior probability near "
        f"each law, and a conservative verdict per scope: the law, 'none' or 'undecided'. Writes "
        f"{', '.join(COMPARE_FILES)} into --out.",
    )
    add_mapping_arguments(parser)
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
        "--scope",
        choices=("overall", "taxon", "both"),
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
    parser.set_defaults(func=run)


def write_outputs(result: LawComparison, out: str | Path, *, force: bool = False) -> list[Path]:
    """Write ``laws.csv`` (every scope and hypothesis), ``laws_by_taxon.csv``, ``laws_verdicts.csv`` (scope,
    verdict, reason) and ``laws.md`` atomically.

    Parameters
    ----------
    result : LawComparison
    out : str or Path
        Output folder (created if missing).
    force : bool
        Replace existing files of the same names.

    Returns
    -------
    list of Path
        The files written.
    """
    folder = prepare_output_dir(out, list(COMPARE_FILES), force=force)
    return write_files(
        folder,
        {
            LAWS_FILE: lambda p: result.evidence.to_csv(p, index=False),
            BY_TAXON_FILE: lambda p: result.by_taxon.to_csv(p, index=False),
            VERDICTS_FILE: lambda p: result.verdicts.to_csv(p, index=False),
            REPORT_FILE: lambda p: p.write_text(result.to_markdown(), encoding="utf-8"),
        },
    )


def run(args: argparse.Namespace) -> int:
    """Run ``allobranch compare``.

    Parameters
    ----------
    args : argparse.Namespace
        Parsed arguments.

    Returns
    -------
    int
        0 on success; bad input raises :class:`~allobranch.errors.AllobranchError` (exit code 2).
    """
    started = time.perf_counter()
    prepare_output_dir(args.out, list(COMPARE_FILES), force=args.force)  # fail before the long fits
    laws = resolve_laws(args.laws)  # and before reading the table
    try:
        check_delta(args.delta)
    except ValueError as exc:
        raise InputError(str(exc)) from None
    table = table_from_args(args)
    from allobranch.comparison.compare import compare_laws
    from allobranch.inference.results import FitResult

    free = FitResult.load(args.fit_file) if args.fit_file else None
    scopes = ("overall", "taxon") if args.scope == "both" else (args.scope,)
    result = compare_laws(
        table,
        laws,
        delta=args.delta,
        scopes=scopes,
        seed=args.seed,
        draws=args.draws,
        tune=args.tune,
        chains=args.chains,
        sampler=args.sampler,
        target_accept=args.target_accept,
        spec=None if free else spec_from_args(args),
        progress=not args.quiet,
        fit=free,
        escalate=args.escalate,
        workers=args.workers,
    )
    written = write_outputs(result, args.out, force=args.force)
    for w in result.warnings:
        print(f"WARNING: {w}", file=sys.stderr)
    exps = result.free_fit.exponents(args.hdi)
    print(f"Free-model exponents ({args.hdi * 100:g} % HDI):")
    for row in exps[exps["level"] != "specimen"].itertuples():
        print(f"  {row.level:<10} {row.group:<24} {row.mean:6.3f}  [{row.hdi_low:.3f}, {row.hdi_high:.3f}]")
    print("Verdicts (law, 'none' or 'undecided'):")
    for row in result.verdicts.itertuples():
        print(f"  {row.scope:<24} {row.verdict:<12} {row.reason}")
    print(
        f"{result.settings['n_fits']} fit(s){' (free model re-used from ' + args.fit_file + ')' if free else ''}; "
        f"compare took {time.perf_counter() - started:.1f} s; results in {args.out}/ "
        f"({', '.join(p.name for p in written)})"
    )
    return 0
