"""The "Failed replicates" section shared by the plan and calibration reports."""

from __future__ import annotations

from collections.abc import Callable
from typing import Any

import pandas as pd


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
