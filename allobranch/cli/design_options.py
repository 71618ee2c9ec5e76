"""Options describing a simulated study design, shared by ``plan`` and ``calibrate``."""

from __future__ import annotations

import argparse
import sys
import time
from collections.abc import Callable, Mapping
from pathlib import Path
from typing import Any

import pandas as pd

from allobranch.cli.engine_options import add_engine_arguments, engine_from_args
from allobranch.cli.fit import add_sampler_arguments, positive_int, sampler_kwargs
from allobranch.io import write_files
from allobranch.model.simulate import SPLITS
from allobranch.planning.design import Design

#: The design every option defaults to (one taxon, three specimens, 30 junctions, 5 % relative error).
DEFAULT = Design()
#: Numeric design options: flag, design field, type, metavar and help (the default is appended).
SHAPE_OPTIONS: tuple[tuple[str, str, type, str, str], ...] = (
    ("--taxa", "taxa", positive_int, "N", "number of taxa"),
    ("--specimens", "specimens", positive_int, "N", "specimens per taxon"),
    ("--junctions", "junctions", positive_int, "N", "junctions per specimen"),
    ("--trifurcations", "trifurcations", float, "SHARE", "share of junctions with three daughters"),
)
#: The true exponent and spreads (``plan`` only: ``calibrate`` draws them from the priors).
TRUTH_OPTIONS: tuple[tuple[str, str, type, str, str], ...] = (
    ("--exponent", "exponent", float, "A", "true population exponent"),
    ("--tau-taxon", "tau_taxon", float, "SD", "true SD of the taxon exponents"),
    ("--tau-specimen", "tau_specimen", float, "SD", "true SD of the specimen exponents within a taxon"),
    (
        "--sigma-dev",
        "sigma_dev",
        float,
        "SD",
        "true junction deviation of the log parent radius from the law",
    ),
)


def add_design_arguments(parser: argparse.ArgumentParser, *, truth: bool = True) -> None:
    """Add the design options.

    Parameters
    ----------
    parser : argparse.ArgumentParser
    truth : bool
        Also add the true exponent and spreads (``plan``); ``calibrate`` draws them from the priors.
    """
    g = parser.add_argument_group("design (simulated tables)")
    for flag, name, kind, metavar, text in SHAPE_OPTIONS + (TRUTH_OPTIONS if truth else ()):
        default = getattr(DEFAULT, name)
        g.add_argument(
            flag, dest=name, type=kind, default=default, metavar=metavar, help=f"{text} (default {default:g})"
        )
    g.add_argument(
        "--split",
        choices=SPLITS,
        default=DEFAULT.split,
        help="how daughters share the parent (default %(default)s)",
    )
    error = g.add_mutually_exclusive_group()
    error.add_argument(
        "--rel-error",
        type=float,
        dest="rel_error",
        metavar="F",
        help=f"relative measurement error of every reading, e.g. 0.05 for 5%% (default {DEFAULT.error:g})",
    )
    error.add_argument(
        "--abs-error",
        type=float,
        dest="abs_error",
        metavar="MM",
        help="absolute measurement error (SD, mm) instead",
    )


def design_from_args(args: argparse.Namespace) -> Design:
    """The :class:`~allobranch.planning.design.Design` the options describe.

    Raises
    ------
    allobranch.errors.InputError
        When a value is out of range (the message names the option's design field).
    """
    kind, size = ("absolute", args.abs_error) if args.abs_error is not None else ("relative", args.rel_error)
    fields = {
        name: getattr(args, name) for _, name, *_ in SHAPE_OPTIONS + TRUTH_OPTIONS if hasattr(args, name)
    }
    return Design(**fields, split=args.split, error_kind=kind, error=DEFAULT.error if size is None else size)


def add_study_parser(
    subparsers: argparse._SubParsersAction, name: str, *, help: str, description: str
) -> argparse.ArgumentParser:
    """Add a simulation sub-command (``plan``, ``calibrate``) with its ``--out`` option.

    Parameters
    ----------
    subparsers : argparse._SubParsersAction
        The top-level parser's sub-command collection.
    name, help, description : str
        The sub-command's name and texts.

    Returns
    -------
    argparse.ArgumentParser
        The sub-command's parser, for its own options and then :func:`finish_study_parser`.
    """
    parser = subparsers.add_parser(name, help=help, description=description)
    parser.add_argument("--out", metavar="DIR", required=True, help="folder for the results")
    return parser


def finish_study_parser(
    parser: argparse.ArgumentParser, run: Callable[[argparse.Namespace], int], *, truth: bool = True
) -> None:
    """Add the design, sampler and engine options and set the sub-command's ``run`` function.

    Parameters
    ----------
    parser : argparse.ArgumentParser
        The sub-command's parser.
    run : callable
        ``run(args) -> exit code``.
    truth : bool
        As in :func:`add_design_arguments`.
    """
    add_design_arguments(parser, truth=truth)
    add_sampler_arguments(parser)
    add_engine_arguments(parser)
    parser.set_defaults(func=run)


def study_kwargs(args: argparse.Namespace) -> dict[str, Any]:
    """The options every study function takes (``replicates``, ``hdi_prob``, the fits' seed and settings,
    ``engine``, ``progress``), from the parsed options.

    Raises
    ------
    allobranch.errors.InputError
        When ``--workers`` and ``--scheduler`` are both given.
    """
    return {
        "replicates": args.replicates,
        "hdi_prob": args.hdi,
        **sampler_kwargs(args),
        "engine": engine_from_args(args),
        "progress": not args.quiet,
    }


def write_study_files(folder: Path, files: Mapping[str, Any]) -> list[Path]:
    """Write a study's outputs into ``folder``, all or nothing (:func:`allobranch.io.write_files`).

    Parameters
    ----------
    folder : pathlib.Path
        The prepared output folder.
    files : mapping
        File name -> content: a DataFrame (written as CSV without its index), a str (the Markdown report,
        UTF-8) or a matplotlib Figure (PNG, 300 dpi).

    Returns
    -------
    list of pathlib.Path
        The files written.
    """

    def writer(content: Any) -> Callable[[Path], Any]:
        if isinstance(content, pd.DataFrame):
            return lambda p: content.to_csv(p, index=False)
        if isinstance(content, str):
            return lambda p: p.write_text(content, encoding="utf-8")
        return lambda p: content.savefig(p, format="png", dpi=300)

    return write_files(folder, {name: writer(content) for name, content in files.items()})


def warn_failed(failed: int, failed_file: str) -> None:
    """Warn on standard error when replicates failed.

    Parameters
    ----------
    failed : int
        Failed replicates (nothing is printed when 0).
    failed_file : str
        The file that lists them.
    """
    if failed:
        print(
            f"WARNING: {failed} replicate(s) failed; see {failed_file} (status, seed, error)", file=sys.stderr
        )


def print_done(name: str, started: float, out: str, written: list[Path]) -> None:
    """Print a simulation sub-command's closing line: its time and the files it wrote.

    Parameters
    ----------
    name : str
        The sub-command.
    started : float
        :func:`time.perf_counter` at its start.
    out : str
        The ``--out`` folder as given.
    written : list of pathlib.Path
        The files written.
    """
    print(
        f"{name} took {time.perf_counter() - started:.0f} s; results in {out}/ ({', '.join(p.name for p in written)})"
    )
