"""Turn a validated junction table into the arrays the model needs."""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any

import numpy as np
import pandas as pd

from allobranch.intake.table import JunctionTable

#: How the measurement error enters the model.
ERROR_MODES: tuple[str, ...] = ("known", "repeats", "absolute_only", "unknown")


@dataclass
class ModelData:
    """Numeric arrays for the model, all on the natural-log radius scale.

    Attributes
    ----------
    log_parent : ndarray, shape (n,)
        Log observed parent radius.
    log_daughters : ndarray, shape (n, K)
        Log observed daughter radii; 0 where a junction has fewer daughters (see ``mask``).
    mask : ndarray of bool, shape (n, K)
        True where a daughter is present.
    var_abs_parent, var_abs_daughters : ndarray
        Log-scale variance contributed by absolute standard errors, ``(se / y)^2`` (delta method); 0 when
        no standard error was given.
    rel_error : float or None
        Known relative error (log-scale standard deviation); ``None`` when it is estimated or absent.
    error_mode : str
        One of :data:`ERROR_MODES`: ``known`` (relative error given), ``repeats`` (relative error
        estimated from repeat readings), ``absolute_only`` (only absolute SEs given), ``unknown`` (nothing
        given: the relative error is estimated from its prior alone and is confounded with the
        biological deviation).
    repeat_df, repeat_ss : float
        Degrees of freedom and within-segment sum of squares of log repeat readings (0 when none).
    taxon_idx, specimen_idx : ndarray of int, shape (n,)
        Group index of every junction.
    specimen_taxon_idx : ndarray of int, shape (n_specimens,)
        Taxon index of every specimen.
    taxa, specimens, junctions : list of str
        Labels (coordinates).
    linear : LinearTerms or None
        Covariate, trait and phylogeny terms of the exponent (set by the fit from its spec;
        :func:`allobranch.model.linear.build_linear_terms`).
    """

    log_parent: np.ndarray
    log_daughters: np.ndarray
    mask: np.ndarray
    var_abs_parent: np.ndarray
    var_abs_daughters: np.ndarray
    rel_error: float | None
    error_mode: str
    repeat_df: float
    repeat_ss: float
    taxon_idx: np.ndarray
    specimen_idx: np.ndarray
    specimen_taxon_idx: np.ndarray
    taxa: list[str]
    specimens: list[str]
    junctions: list[str] = field(default_factory=list)
    linear: Any = None

    @property
    def n_junctions(self) -> int:
        """Number of junctions."""
        return int(self.log_parent.shape[0])

    @property
    def junctions_per_specimen(self) -> np.ndarray:
        """Junction count of every specimen."""
        return np.bincount(self.specimen_idx, minlength=len(self.specimens))

    def shared_arrays(self) -> dict[str, np.ndarray]:
        """The arrays held as ``pm.Data`` in the model, by name (used to swap data without recompiling)."""
        return {
            "log_parent_obs": self.log_parent,
            "log_daughters_obs": self.log_daughters,
            "daughter_mask": self.mask.astype(float),
            "var_abs_parent": self.var_abs_parent,
            "var_abs_daughters": self.var_abs_daughters,
        }


def _repeat_sums(table: JunctionTable) -> tuple[float, float]:
    """Degrees of freedom and sum of squares of log repeat readings within segments."""
    rep = table.repeats
    if rep is None or len(rep) == 0:
        return 0.0, 0.0
    logv = np.log(rep["value"].to_numpy(dtype=float))
    keys = rep[["specimen", "junction", "segment"]].astype(str).agg("\x1f".join, axis=1)
    frame = pd.DataFrame({"key": keys.to_numpy(), "logv": logv})
    grouped = frame.groupby("key")["logv"]
    ss = float((frame["logv"] - grouped.transform("mean")).pow(2).sum())
    df = float((grouped.size() - 1).clip(lower=0).sum())
    return df, ss


def model_data(table: JunctionTable) -> ModelData:
    """Build :class:`ModelData` from a validated :class:`~allobranch.intake.table.JunctionTable`.

    Parameters
    ----------
    table : JunctionTable
        Output of :func:`allobranch.read_junctions`.

    Returns
    -------
    ModelData
    """
    d = table.data
    parent = table.parent
    daughters = table.daughters
    mask = np.isfinite(daughters)
    log_d = np.where(mask, np.log(np.where(mask, daughters, 1.0)), 0.0)
    se = table.se
    with np.errstate(invalid="ignore"):
        rel_abs = np.where(
            np.isfinite(se), se / np.column_stack([parent, np.where(mask, daughters, 1.0)]), 0.0
        )
    var_abs = rel_abs**2
    var_abs[:, 1:] = np.where(mask, var_abs[:, 1:], 0.0)

    repeat_df, repeat_ss = _repeat_sums(table)
    has_abs = bool(np.any(var_abs > 0))
    if repeat_df > 0:
        mode, rel = "repeats", None
    elif table.rel_error is not None:
        mode, rel = "known", float(table.rel_error)  # log-scale SD ~ relative error
    elif has_abs:
        mode, rel = "absolute_only", 0.0
    else:
        mode, rel = "unknown", None

    taxa = list(pd.unique(d["taxon"].astype(str)))
    specimens = list(pd.unique(d["specimen"].astype(str)))
    taxon_pos = {t: i for i, t in enumerate(taxa)}
    specimen_pos = {s: i for i, s in enumerate(specimens)}
    taxon_idx = d["taxon"].astype(str).map(taxon_pos).to_numpy(dtype=int)
    specimen_idx = d["specimen"].astype(str).map(specimen_pos).to_numpy(dtype=int)
    specimen_taxon = np.zeros(len(specimens), dtype=int)
    specimen_taxon[specimen_idx] = taxon_idx
    junction_labels = (d["specimen"].astype(str) + "/" + d["junction"].astype(str)).tolist()
    return ModelData(
        log_parent=np.log(parent),
        log_daughters=log_d,
        mask=mask,
        var_abs_parent=var_abs[:, 0].copy(),
        var_abs_daughters=var_abs[:, 1:].copy(),
        rel_error=rel,
        error_mode=mode,
        repeat_df=repeat_df,
        repeat_ss=repeat_ss,
        taxon_idx=taxon_idx,
        specimen_idx=specimen_idx,
        specimen_taxon_idx=specimen_taxon,
        taxa=taxa,
        specimens=specimens,
        junctions=junction_labels,
    )
