"""A simulated study's replicates: run them, gather their rows into one table, list the failed ones.

Shared by :func:`~allobranch.planning.plan.plan_study` and :func:`~allobranch.planning.calibrate.calibrate`.
A replicate that raises does not stop the others (:mod:`allobranch.engine`): it keeps one row in the table,
with ``status`` ``failed``, its seed (to rerun it alone) and its error.
"""

from __future__ import annotations

from collections.abc import Callable, Sequence
from typing import Any

import numpy as np
import pandas as pd

from allobranch.engine import Engine, Job, JobFailure, failures, run


def failed_row(
    failure: JobFailure, columns: Sequence[str], key_columns: Sequence[str], blank: Sequence[str] = ()
) -> dict:
    """The table row of a replicate that failed.

    Parameters
    ----------
    failure : JobFailure
    columns : sequence of str
        The table's columns (NaN unless set here).
    key_columns : sequence of str
        The columns that hold the parts of the failed job's key, in order.
    blank : sequence of str
        Text columns left empty.

    Returns
    -------
    dict
        The key, ``seed``, ``status`` ``failed``, ``error``, ``covered`` False, ``""`` in ``blank`` and NaN
        in every other column.

    Examples
    --------
    >>> row = failed_row(JobFailure((1, 2), 7, "boom"), ["point", "replicate", "seed", "status", "verdict",
    ...     "covered", "error", "mean"], ["point", "replicate"], ["verdict"])
    >>> row["point"], row["replicate"], row["seed"], row["status"], row["verdict"], row["error"]
    (1, 2, 7, 'failed', '', 'boom')
    """
    row = {c: np.nan for c in columns}
    row.update(zip(key_columns, failure.key))
    row.update({c: "" for c in blank})
    row.update(seed=failure.seed, status="failed", covered=False, error=failure.error)
    return row


def run_replicates(
    fn: Callable[[Any], list[dict]],
    jobs: Sequence[Job],
    engine: Engine | None,
    columns: Sequence[str],
    *,
    key_columns: Sequence[str],
    blank: Sequence[str] = (),
    label: str,
    progress: bool,
    describe: Callable[[Any], str],
) -> tuple[pd.DataFrame, list[JobFailure]]:
    """Run every replicate (:func:`allobranch.engine.run`) and gather their rows, in the jobs' order.

    Parameters
    ----------
    fn : callable
        ``fn(job) -> list of dict``: a replicate's rows (a top-level function, so that workers receive it).
    jobs : sequence of Job
    engine : Engine or None
        Where the replicates run (default: local processes).
    columns : sequence of str
        The table's columns.
    key_columns, blank : sequence of str
        As in :func:`failed_row`, for the row of a failed replicate.
    label : str
        Name shown in the progress lines.
    progress : bool
        Show a progress line per finished replicate.
    describe : callable
        Short text for a job in the progress line.

    Returns
    -------
    table : pandas.DataFrame
        Every replicate's rows (one :func:`failed_row` for each that failed), in the order of ``jobs``.
    failed : list of JobFailure
        The replicates that failed.
    """
    results = run(fn, jobs, engine, label=label, progress=progress, describe=describe)
    rows: list[dict] = []
    for job in jobs:
        result = results[job.key]
        failed = isinstance(result, JobFailure)
        rows += [failed_row(result, columns, key_columns, blank)] if failed else result
    return pd.DataFrame(rows, columns=list(columns)), failures(results)


def failed_section(failed: pd.DataFrame, name: Callable[[Any], str]) -> list[str]:
    """Markdown lines listing failed replicates with their seeds and errors (``- none`` when none failed).

    Parameters
    ----------
    failed : pandas.DataFrame
        The failed replicates' rows, with ``seed`` and ``error`` columns.
    name : callable
        ``name(row) -> str`` naming a replicate (``row`` from :meth:`pandas.DataFrame.itertuples`).

    Returns
    -------
    list of str
        The section's lines, starting with a blank line and the heading.

    Examples
    --------
    >>> failed_section(pd.DataFrame({"replicate": [3], "seed": [7], "error": ["boom"]}), lambda r: f"replicate {r.replicate}")
    ['', '## Failed replicates', '', '- replicate 3, seed 7: boom']
    """
    items = [f"- {name(r)}, seed {int(r.seed)}: {r.error}" for r in failed.itertuples()]
    return ["", "## Failed replicates", "", *(items or ["- none"])]
