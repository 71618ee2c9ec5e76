"""Where a command's many fits run: ``--workers`` (local processes) and ``--scheduler`` (a Dask cluster).

Shared by ``plan`` and ``calibrate`` (both options) and ``compare`` (``--scheduler``; its ``--workers`` is
defined with the mapping options). The options only choose the place: results do not depend on it, because
every job's seed is derived from the user's seed and the job's place in the study (:mod:`allobranch.engine`).
"""

from __future__ import annotations

import argparse

from allobranch.cli.fit import positive_int
from allobranch.engine import DASK_EXTRA, Engine


def add_engine_arguments(parser: argparse.ArgumentParser, *, workers: bool = True) -> None:
    """Add ``--scheduler ADDRESS`` (and ``--workers N`` unless ``workers`` is false).

    Parameters
    ----------
    parser : argparse.ArgumentParser
        The sub-command's parser.
    workers : bool
        Also add ``--workers`` (a command that already has it passes False).
    """
    group = parser.add_argument_group(
        "where the fits run",
        "Local worker processes by default, or a Dask distributed cluster; the results "
        "do not depend on where they run.",
    )
    if workers:
        group.add_argument(
            "--workers",
            type=positive_int,
            default=None,
            metavar="N",
            help="local worker processes running the fits (default: one per processor core; 1 runs them in "
            "this process)",
        )
    group.add_argument(
        "--scheduler",
        metavar="ADDRESS",
        default=None,
        help="run the fits on a Dask distributed cluster: the scheduler's address, e.g. tcp://10.0.0.5:8786 "
        "(start it with 'dask scheduler' and workers on each machine with 'dask worker ADDRESS'; needs "
        f"{DASK_EXTRA} on every machine)",
    )


def engine_from_args(args: argparse.Namespace) -> Engine:
    """The :class:`~allobranch.engine.Engine` the options ask for (``--workers``, ``--scheduler``)."""
    return Engine(workers=getattr(args, "workers", None), scheduler=getattr(args, "scheduler", None))


def executor_from_args(args: argparse.Namespace) -> str | None:
    """What ``compare_laws(executor=...)`` takes for ``--scheduler``: the scheduler's address, or None.

    The comparison's engine connects to the scheduler for its fits and closes the connection after them
    (:class:`~allobranch.engine.Engine` reads an address given as the executor as ``scheduler``).

    Raises
    ------
    allobranch.errors.InputError
        When ``--workers`` and ``--scheduler`` are both given.
    """
    return engine_from_args(args).scheduler
