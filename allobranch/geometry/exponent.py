"""Per-junction geometry: the exponent that balances each junction on its own, and size ratios.

For a junction with parent radius ``r0`` and daughters ``r1..rk`` the function
``f(a) = sum_i (ri / r0) ** a`` falls monotonically from ``k`` (at ``a = 0``) towards 0 when every daughter
is smaller than the parent, so ``f(a) = 1`` has exactly one root. It is found on the log scale,
``g(a) = logsumexp(a * log(ri / r0)) = 0``, which stays accurate for large exponents, with a vectorised
bracketing solver over ``a`` in [:data:`EXPONENT_MIN`, :data:`EXPONENT_MAX`] (searched in ``log a``).
"""

from __future__ import annotations

import numpy as np
import pandas as pd
from scipy.optimize import elementwise
from scipy.special import logsumexp

from allobranch.intake.table import JunctionTable

#: Search range of the per-junction exponent.
EXPONENT_MIN = 0.05
EXPONENT_MAX = 100.0

#: Why a junction has no per-junction exponent (value of ``no_root_reason``), with an explanation.
NO_ROOT_REASONS: dict[str, str] = {
    "invalid_sizes": "a size is missing, zero, negative or not finite",
    "fewer_than_two_daughters": "fewer than two daughters",
    "daughter_ge_parent": "a daughter is as large as or larger than the parent, so no exponent balances the junction",
    "exponent_above_100": f"the daughters are so close to the parent that the exponent exceeds {EXPONENT_MAX:g}",
    "exponent_below_0.05": f"the daughters are so small that the exponent is below {EXPONENT_MIN:g}",
    "solver_failed": "the root finder did not converge",
}

#: Columns identifying a junction, leading every per-junction table.
JUNCTION_ID_COLUMNS: tuple[str, ...] = ("taxon", "specimen", "junction", "source_row", "n_daughters")
#: Columns of :func:`junction_geometry`'s result, in order.
GEOMETRY_COLUMNS: tuple[str, ...] = (
    *JUNCTION_ID_COLUMNS,
    "exponent",
    "no_root_reason",
    "ratio_large",
    "ratio_small",
    "asymmetry",
    "area_ratio",
)


def _log_balance(log_a: np.ndarray, *log_ratios: np.ndarray) -> np.ndarray:
    """``log(sum_i (ri/r0) ** a)`` at ``a = exp(log_a)``; absent daughters carry ``-inf``."""
    stacked = np.stack(np.broadcast_arrays(*log_ratios), axis=-1)
    return logsumexp(np.exp(log_a)[..., None] * stacked, axis=-1)


def solve_exponent(parent: np.ndarray, daughters: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Solve ``sum_i (ri / r0) ** a = 1`` for ``a`` at every junction.

    Parameters
    ----------
    parent : numpy.ndarray
        Parent radii, shape ``(n,)``.
    daughters : numpy.ndarray
        Daughter radii, shape ``(n, K)``, NaN where a junction has fewer than ``K`` daughters.
        Any common unit; only ratios matter.

    Returns
    -------
    exponent : numpy.ndarray
        Shape ``(n,)``; NaN where there is no root in the search range.
    reason : numpy.ndarray of object
        Shape ``(n,)``; ``None`` where a root was found, otherwise a key of :data:`NO_ROOT_REASONS`.

    Examples
    --------
    >>> import numpy as np
    >>> a, why = solve_exponent(np.array([1.0]), np.array([[2 ** (-1 / 3), 2 ** (-1 / 3)]]))
    >>> round(float(a[0]), 10), why[0]
    (3.0, None)
    """
    parent = np.asarray(parent, dtype=float).reshape(-1)
    daughters = np.asarray(daughters, dtype=float)
    if daughters.ndim != 2 or daughters.shape[0] != parent.shape[0]:
        raise ValueError(
            f"daughters must have shape (n, K) with n = {parent.shape[0]}; got {daughters.shape}"
        )
    n = parent.shape[0]
    exponent = np.full(n, np.nan)
    reason = np.full(n, None, dtype=object)
    present = ~np.isnan(daughters)
    daughters_ok = np.all(~present | (np.isfinite(daughters) & (daughters > 0)), axis=1)
    sizes_ok = np.isfinite(parent) & (parent > 0) & daughters_ok
    reason[~sizes_ok] = "invalid_sizes"
    two = present.sum(axis=1) >= 2
    reason[sizes_ok & ~two] = "fewer_than_two_daughters"
    with np.errstate(divide="ignore", invalid="ignore"):
        log_ratio = np.where(present & sizes_ok[:, None], np.log(daughters / parent[:, None]), -np.inf)
    ge = sizes_ok & two & np.any(log_ratio >= 0, axis=1)
    reason[ge] = "daughter_ge_parent"
    todo = np.flatnonzero(sizes_ok & two & ~ge)
    if todo.size == 0:
        return exponent, reason

    cols = tuple(log_ratio[todo, k] for k in range(log_ratio.shape[1]))
    lo, hi = np.log(EXPONENT_MIN), np.log(EXPONENT_MAX)
    g_lo = _log_balance(np.full(todo.size, lo), *cols)
    g_hi = _log_balance(np.full(todo.size, hi), *cols)
    reason[todo[g_lo < 0]] = "exponent_below_0.05"
    reason[todo[g_hi > 0]] = "exponent_above_100"
    exponent[todo[g_lo == 0]] = EXPONENT_MIN
    exponent[todo[g_hi == 0]] = EXPONENT_MAX
    inside = (g_lo > 0) & (g_hi < 0)
    if inside.any():
        res = elementwise.find_root(
            _log_balance,
            (np.full(inside.sum(), lo), np.full(inside.sum(), hi)),
            args=tuple(c[inside] for c in cols),
        )
        idx = todo[inside]
        exponent[idx] = np.where(res.success, np.exp(res.x), np.nan)
        reason[idx[~res.success]] = "solver_failed"
    return exponent, reason


def junction_geometry(table: JunctionTable) -> pd.DataFrame:
    """Per-junction exponent and size ratios.

    Parameters
    ----------
    table : JunctionTable
        A validated junction table.

    Returns
    -------
    pandas.DataFrame
        One row per junction with the columns of :data:`GEOMETRY_COLUMNS`: ``taxon``, ``specimen``,
        ``junction``, ``source_row``, ``n_daughters``; ``exponent`` (root of ``sum (ri/r0)^a = 1``, NaN
        without a root) and ``no_root_reason`` (see :data:`NO_ROOT_REASONS`, missing when a root exists);
        ``ratio_large`` and ``ratio_small`` (largest and smallest daughter over the parent), ``asymmetry``
        (smallest over largest daughter) and ``area_ratio`` (``sum ri^2 / r0^2``).

    Notes
    -----
    These per-junction exponents ignore measurement error; use them for description and screening only.
    """
    parent = table.parent
    daughters = table.daughters
    exponent, reason = solve_exponent(parent, daughters)
    largest = np.nanmax(daughters, axis=1)
    smallest = np.nanmin(daughters, axis=1)
    out = table.data[["taxon", "specimen", "junction", "source_row", "n_daughters"]].copy()
    out["exponent"] = exponent
    out["no_root_reason"] = pd.Series(reason, index=out.index, dtype="str")
    out["ratio_large"] = largest / parent
    out["ratio_small"] = smallest / parent
    out["asymmetry"] = smallest / largest
    out["area_ratio"] = np.nansum(daughters**2, axis=1) / parent**2
    return out.reset_index(drop=True)
