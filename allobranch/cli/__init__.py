"""Command-line tool: a thin shell over the public Python API.

Each sub-command lives in its own module exposing ``register(subparsers)``, which adds a parser whose
``func`` default takes the parsed arguments and returns an exit code. Errors derived from
:class:`allobranch.errors.AllobranchError` are printed as plain messages (no traceback) with exit code 2.
"""

from __future__ import annotations

import argparse
import importlib
import sys
from collections.abc import Sequence

from allobranch.errors import AllobranchError

#: Sub-command modules, in the order shown by ``--help``.
SUBCOMMANDS: tuple[str, ...] = ("check", "fit", "compare", "figures", "report", "demo", "plan", "calibrate")

EXIT_OK = 0
EXIT_FAILED = 1  # the job ran but its result is not usable (e.g. failed diagnostics when asked to be strict)
EXIT_USAGE = 2  # bad input or options


def build_parser() -> argparse.ArgumentParser:
    """Build the top-level argument parser with every sub-command registered."""
    from allobranch import __version__

    parser = argparse.ArgumentParser(
        prog="allobranch",
        description="Branching exponents (r_parent^a = sum r_daughter^a) by taxon and specimen, "
        "with measurement error handled by a hierarchical Bayesian model.",
    )
    parser.add_argument("--version", action="version", version=f"allobranch {__version__}")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND")
    for name in SUBCOMMANDS:
        importlib.import_module(f"allobranch.cli.{name}").register(sub)
    return parser


def main(argv: Sequence[str] | None = None) -> int:
    """Run the command-line tool and return its exit code."""
    parser = build_parser()
    args = parser.parse_args(argv)
    if getattr(args, "func", None) is None:
        parser.print_help()
        return EXIT_USAGE
    try:
        return int(args.func(args))
    except AllobranchError as exc:
        print(f"allobranch {args.command}: error:\n{exc}", file=sys.stderr)
        return EXIT_USAGE
    except KeyboardInterrupt:
        print("allobranch: interrupted; no partial output was left behind.", file=sys.stderr)
        return 130


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
