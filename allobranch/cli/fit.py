"""``allobranch fit``: fit the hierarchical model and write the result folder."""

from __future__ import annotations

import argparse
import sys

from allobranch.cli.model_options import add_comparative_arguments, comparative_table, spec_fields
from allobranch.cli.options import add_mapping_arguments, table_from_args
from allobranch.conventions import FIT_FILES, HDI_PROB, hdi_label
from allobranch.io import prepare_output_dir
from allobranch.model.spec import (
    DEVIATIONS,
    LARGE_PER_SPECIMEN,
    LARGE_TABLE,
    LARGE_TABLE_DEFAULTS,
    PARAMETRIZATIONS,
    SAMPLER_DEFAULTS,
    SAMPLERS,
    ModelSpec,
)


def positive_int(text: str) -> int:
    """argparse type: a whole number of at least 1."""
    try:
        value = int(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"expected a whole number, got {text!r}") from None
    if value < 1:
        raise argparse.ArgumentTypeError(f"must be at least 1, got {value}")
    return value


def probability(text: str) -> float:
    """argparse type: a number strictly between 0 and 1."""
    try:
        value = float(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"expected a number between 0 and 1, got {text!r}") from None
    if not 0 < value < 1:
        raise argparse.ArgumentTypeError(f"must lie strictly between 0 and 1, got {value}")
    return value


def add_sampler_arguments(parser: argparse.ArgumentParser) -> None:
    """Sampler and model options shared by ``fit`` and ``demo``."""
    g = parser.add_argument_group("sampling")
    g.add_argument("--seed", type=int, default=0, help="random seed (same seed, same tables; default 0)")
    d = SAMPLER_DEFAULTS
    g.add_argument(
        "--draws",
        type=positive_int,
        default=d["draws"],
        help=f"posterior draws per chain (default {d['draws']})",
    )
    big = f"{LARGE_TABLE:,} junctions and {LARGE_PER_SPECIMEN} per specimen"
    g.add_argument(
        "--tune",
        type=positive_int,
        default=None,
        help=f"tuning steps per chain (default {d['tune']}; {LARGE_TABLE_DEFAULTS['tune']} from {big} on)",
    )
    g.add_argument(
        "--chains", type=positive_int, default=d["chains"], help=f"number of chains (default {d['chains']})"
    )
    g.add_argument(
        "--sampler",
        choices=SAMPLERS,
        default=d["sampler"],
        help="NUTS implementation (default nutpie; falls back to pymc if nutpie fails)",
    )
    g.add_argument(
        "--target-accept",
        type=probability,
        default=None,
        dest="target_accept",
        help=f"NUTS target acceptance of the first attempt (default {d['target_accept']}; "
        f"{LARGE_TABLE_DEFAULTS['target_accept']} from {big} on; a fit that "
        "fails its checks is refitted automatically with higher values)",
    )
    g.add_argument(
        "--parametrization",
        choices=PARAMETRIZATIONS,
        default="auto",
        help="how the hierarchy's groups are sampled: auto (whitened from a pilot, default), "
        "centered or noncentered",
    )
    g.add_argument(
        "--no-taxon-level",
        action="store_false",
        dest="taxon_level",
        default=None,
        help="one exponent shared by all taxa (no taxon level in the hierarchy)",
    )
    g.add_argument(
        "--no-specimen-level",
        action="store_false",
        dest="specimen_level",
        default=None,
        help="specimens share their taxon's exponent (no specimen level in the hierarchy)",
    )
    g.add_argument(
        "--no-escalate",
        action="store_false",
        dest="escalate",
        help="do not refit automatically when the first attempt has divergences or a high R-hat",
    )
    g.add_argument(
        "--deviation",
        choices=DEVIATIONS,
        default="normal",
        help="junction deviation from the law: normal, or student_t for outlying junctions",
    )
    g.add_argument(
        "--hdi",
        type=probability,
        default=HDI_PROB,
        help=f"probability of the highest-density intervals in the tables (default {HDI_PROB:g})",
    )
    g.add_argument("--quiet", action="store_true", help="no progress display")
    g.add_argument("--force", action="store_true", help="replace existing result files in --out")


def sampler_kwargs(args: argparse.Namespace) -> dict:
    """The sampler options of :func:`add_sampler_arguments` as keyword arguments of ``fit`` and
    ``compare_laws`` (seed, draws, tune, chains, sampler, target_accept, escalate)."""
    names = ("seed", "draws", "tune", "chains", "sampler", "target_accept", "escalate")
    return {name: getattr(args, name) for name in names}


def print_exponents(exponents, title: str, *, diagnostics: bool = True) -> None:
    """Print the population and taxon rows of an exponents table under ``title`` (with the HDI level).

    Parameters
    ----------
    exponents : pandas.DataFrame
        ``FitResult.exponents()``.
    title : str
        First line, followed by the interval's name, e.g. ``"Exponents (90% HDI):"``.
    diagnostics : bool
        Add each row's R-hat and bulk ESS.
    """
    print(f"{title} ({hdi_label(exponents.attrs.get('hdi_prob'))}):")
    for row in exponents[exponents["level"] != "specimen"].itertuples():
        line = f"  {row.level:<10} {row.group:<24} {row.mean:6.3f}  [{row.hdi_low:.3f}, {row.hdi_high:.3f}]"
        print(line + (f"  r_hat {row.r_hat:.3f}  ess {row.ess_bulk:.0f}" if diagnostics else ""))


def spec_from_args(args: argparse.Namespace) -> ModelSpec:
    """Model specification from the command-line options."""
    return ModelSpec(
        deviation=args.deviation,
        parametrization=args.parametrization,
        taxon_level=args.taxon_level,
        specimen_level=args.specimen_level,
        **(spec_fields(args) if hasattr(args, "covariate") else {}),
    )


def fit_and_write(table, args: argparse.Namespace, out) -> object:
    """Fit ``table`` with the options in ``args`` and write the result folder ``out``; print a digest."""
    import allobranch as ab
    from allobranch.reporting.fit_outputs import write_fit_outputs

    prepare_output_dir(out, list(FIT_FILES), force=args.force)  # fail before the long fit, not after
    result = ab.fit(table, spec_from_args(args), **sampler_kwargs(args), progress=not args.quiet)
    for note in result.notes:
        print(f"NOTE: {note}", file=sys.stderr)
    write_fit_outputs(result, out, hdi_prob=args.hdi, force=True)
    for w in result.warnings:
        print(f"WARNING: {w}", file=sys.stderr)
    print_exponents(result.exponents(args.hdi), "Exponents")
    print(f"Fit took {result.settings['seconds']} s; results in {out}/ ({', '.join(FIT_FILES)})")
    return result


def run(args: argparse.Namespace) -> int:
    """Run ``allobranch fit``."""
    table = comparative_table(args, table_from_args(args))
    fit_and_write(table, args, args.out)
    return 0


def register(subparsers: argparse._SubParsersAction) -> None:
    """Add the ``fit`` sub-command."""
    parser = subparsers.add_parser(
        "fit",
        help="fit the hierarchical exponent model",
        description="Fit the errors-in-variables hierarchical model (population -> taxon -> specimen) and "
        f"write {', '.join(FIT_FILES)} into --out.",
    )
    add_mapping_arguments(parser)
    parser.add_argument("--out", metavar="DIR", required=True, help="folder for the results")
    add_comparative_arguments(parser)
    add_sampler_arguments(parser)
    parser.set_defaults(func=run)
