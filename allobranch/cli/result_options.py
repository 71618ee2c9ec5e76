"""Options of the sub-commands that read a fit's result folder (``figures``, ``report``)."""

from __future__ import annotations

import argparse

from allobranch.conventions import FIT_FILE


def add_result_arguments(parser: argparse.ArgumentParser, *, width_help: str) -> None:
    """Add the positional ``FIT_DIR`` (stored as ``args.fit_dir``) and ``--width`` (``single``/``double``).

    Parameters
    ----------
    parser : argparse.ArgumentParser
        The sub-command's parser.
    width_help : str
        What ``--width`` sets, in the sub-command's words.
    """
    parser.add_argument(
        "fit_dir", metavar="FIT_DIR", help=f"folder written by 'allobranch fit' (holds {FIT_FILE})"
    )
    parser.add_argument("--width", choices=("single", "double"), default="single", help=width_help)
