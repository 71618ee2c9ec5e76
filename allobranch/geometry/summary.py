"""Naive descriptive summaries of per-junction exponents, clearly labelled as such."""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np
import pandas as pd

#: Label attached to every naive summary (in ``attrs["note"]`` and the ``method`` column).
NAIVE_NOTE = (
    "naive per-junction exponents: they ignore measurement error, and junctions without a root "
    "are left out of median/quartiles/mean (counted in n_no_root)"
)
NAIVE_METHOD = "naive_per_junction"

#: Grouping columns a naive summary may use.
GROUPING_COLUMNS: tuple[str, ...] = ("taxon", "specimen")


def naive_summary(geometry: pd.DataFrame, by: Sequence[str] = ("taxon",)) -> pd.DataFrame:
    """Summarise per-junction exponents by group, without any error model.

    Parameters
    ----------
    geometry : pandas.DataFrame
        Output of :func:`allobranch.geometry.exponent.junction_geometry`.
    by : sequence of str
        Grouping columns, ``("taxon",)`` or ``("taxon", "specimen")``.

    Returns
    -------
    pandas.DataFrame
        One row per group with ``n_junctions``, ``n_no_root``, ``share_no_root`` and the ``median``,
        ``q25``, ``q75`` and ``mean`` of the exponents that exist, plus ``method = "naive_per_junction"``;
        ``attrs["note"]`` states the limitations (:data:`NAIVE_NOTE`).

    Raises
    ------
    ValueError
        If ``by`` names a column other than ``taxon`` or ``specimen``.

    Notes
    -----
    These numbers are biased when radii carry measurement error, and dropping junctions without a root is
    selective; they are shown for comparison with the model, never as its substitute.
    """
    by = list(by)
    unknown = [c for c in by if c not in GROUPING_COLUMNS]
    if not by or unknown:
        raise ValueError(f"by must be a non-empty subset of {GROUPING_COLUMNS}; got {tuple(by)}")
    grouped = geometry.groupby(by, sort=False)["exponent"]
    out = pd.DataFrame(
        {
            "n_junctions": grouped.size(),
            "n_no_root": grouped.apply(lambda s: int(s.isna().sum())),
            "median": grouped.median(),
            "q25": grouped.quantile(0.25),
            "q75": grouped.quantile(0.75),
            "mean": grouped.mean(),
        }
    )
    out.insert(2, "share_no_root", out["n_no_root"] / out["n_junctions"])
    out = out.reset_index()
    out["n_no_root"] = out["n_no_root"].astype(np.int64)
    out["method"] = NAIVE_METHOD
    out.attrs["note"] = NAIVE_NOTE
    return out
