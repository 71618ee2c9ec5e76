"""Small helpers shared by the benchmark scripts: choosing designs from the command line and writing a
result table as CSV and Markdown."""

from __future__ import annotations

import argparse
from collections.abc import Callable
from pathlib import Path

import pandas as pd


def chosen_designs(parser: argparse.ArgumentParser, requested: str, known) -> list[str]:
    """The comma-separated design names of ``requested``, or a usage error naming the known ones."""
    names = [d for d in requested.split(",") if d]
    unknown = set(names) - set(known)
    if unknown:
        parser.error(f"unknown designs {sorted(unknown)}; known: {', '.join(known)}")
    return names


def write_table(frame: pd.DataFrame, text: str, out: Path, stem: str, write: bool = True) -> None:
    """Print the Markdown ``text`` and, with ``write``, save it as ``<stem>.md`` beside ``<stem>.csv``."""
    print(text)
    if write:
        out.mkdir(parents=True, exist_ok=True)
        frame.to_csv(out / f"{stem}.csv", index=False)
        (out / f"{stem}.md").write_text(text, encoding="utf-8")


def run_designs(names: list[str], seeds: int, run_one: Callable, line: Callable) -> list[dict]:
    """``run_one(name, seed)`` (a row or a list of rows) for every design and seeds 1..``seeds``, printing
    ``line(name, seed, rows)`` after each; all rows in order."""
    rows: list[dict] = []
    for name in names:
        for seed in range(1, seeds + 1):
            got = run_one(name, seed)
            got = got if isinstance(got, list) else [got]
            rows += got
            print(line(name, seed, got), flush=True)
    return rows
