"""Do the laws hold over a range of a covariate? The ROPE check along the exponent curve, jointly per draw.

When the exponent depends on a covariate, a law can hold at one covariate value and fail at another. For a
range ``[low, high]`` of one covariate, the exponent curve of a scope -- the population's
``mu + beta (x - ref)``, a taxon's ``a_taxon + beta_taxon (x - ref)`` (its own slope when slopes vary by
taxon), every other covariate at its reference value -- is evaluated for every posterior draw at
:data:`GRID_POINTS` evenly spaced values of the covariate, both ends included.

Joint probability
    ``P(|a(x) - value| <= delta for every x in the range | data)``: the share of draws whose *whole* curve
    lies within the law's region of practical equivalence (ROPE). It is never larger than the smallest
    pointwise P(ROPE), and usually smaller: one draw may leave the region at one end and another draw at
    the other end, and both then count against the law over the range. The curve is linear in the
    covariate and the region is an interval, so over the whole range the two ends decide and the grid
    is exact; the grid sets the resolution of the sub-ranges.
Verdict over the range
    the ROPE thresholds of :mod:`allobranch.comparison.verdict`: the law **holds** over the range when
    the joint probability is at least :data:`~allobranch.comparison.verdict.P_ROPE_DECLARE`; it is
    **rejected** over the range when the joint probability is at most
    :data:`~allobranch.comparison.verdict.P_ROPE_REJECT` (the exponent very probably leaves the region
    somewhere in the range); **undecided** otherwise.
Supported sub-range
    the widest run of grid points over which the joint probability reaches
    :data:`~allobranch.comparison.verdict.P_ROPE_DECLARE` (ties: the higher probability, then the lower
    start); empty (NaN) when not even one grid point reaches it.

Caveat: only the ROPE part of the decision rule is applied over a range; the Bayes-factor and LOO
conditions of a point verdict are not. Range values beyond the observed covariate are extrapolations of
the linear trend (the comparison warns).
"""

from __future__ import annotations

from collections.abc import Iterable, Mapping, Sequence

import numpy as np
import pandas as pd

from allobranch.comparative.summaries import curve_draws
from allobranch.comparison.laws import Law
from allobranch.comparison.rope import check_delta
from allobranch.comparison.verdict import P_ROPE_DECLARE, P_ROPE_REJECT, UNDECIDED
from allobranch.conventions import POPULATION
from allobranch.errors import OPTIONS_ORIGIN, option_error

#: Evenly spaced covariate values, both ends included, at which the exponent curve is evaluated.
GRID_POINTS = 41
#: Verdicts over a range besides :data:`~allobranch.comparison.verdict.UNDECIDED`.
HOLDS, REJECTED = "holds", "rejected"
#: Columns of ``laws_over_range.csv`` (:attr:`LawComparison.over_range`).
RANGE_COLUMNS: tuple[str, ...] = (
    "scope",
    "law",
    "value",
    "covariate",
    "range_low",
    "range_high",
    "reference",
    "p_rope_range",
    "verdict",
    "supported_low",
    "supported_high",
    "p_rope_supported",
    "reason",
)
#: The rule in one sentence, for reports.
RANGE_RULE = (
    f"Over a covariate range a law holds when P(exponent within +/- delta of the law at every value of the "
    f"range) >= {P_ROPE_DECLARE:g} (the share of posterior draws whose whole curve stays within), is rejected "
    f"when that probability is <= {P_ROPE_REJECT:g}, and is undecided otherwise; the supported sub-range is "
    f"the widest part of the range over which it reaches {P_ROPE_DECLARE:g}. Only the ROPE condition of the "
    "decision rule applies over a range (no Bayes factor or LOO)."
)


def parse_law_range(text: str, origin: str = OPTIONS_ORIGIN) -> tuple[str, tuple[float, float]]:
    """Parse ``NAME=LOW:HIGH`` (e.g. ``log_parent_size=-1:1``).

    Parameters
    ----------
    text : str
    origin : str
        Where the text came from, for messages.

    Returns
    -------
    (name, (low, high)) : tuple

    Raises
    ------
    RecipeError
        When the text is not of that form or the numbers are unusable.

    Examples
    --------
    >>> parse_law_range("generation=3:10")
    ('generation', (3.0, 10.0))
    """
    name, sep, bounds = str(text).partition("=")
    low, colon, high = bounds.partition(":")
    try:
        if not (sep and colon and name.strip()):
            raise ValueError
        values = (float(low), float(high))
    except ValueError:
        raise option_error(
            f"law range {text!r} is not of the form NAME=LOW:HIGH",
            "write e.g. --law-range log_parent_size=-1:1 (a covariate of the model and two numbers)",
            "bad_law_range",
            origin,
        ) from None
    return name.strip(), values


def check_law_ranges(
    ranges: Mapping[str, Sequence[float]] | None, covariates: Iterable[str], origin: str = OPTIONS_ORIGIN
) -> dict[str, tuple[float, float]]:
    """The ranges checked: each names a covariate of the model and two finite numbers, low < high.

    Parameters
    ----------
    ranges : mapping of covariate name to (low, high), or None
    covariates : iterable of str
        The model's covariates.
    origin : str
        Where the ranges came from, for messages.

    Returns
    -------
    dict
        ``{name: (low, high)}`` (empty for ``None``).

    Raises
    ------
    RecipeError
        For a name that is not a covariate of the model, or unusable bounds.
    """
    covariates = [str(c) for c in covariates]
    out: dict[str, tuple[float, float]] = {}
    for name, bounds in (ranges or {}).items():
        if str(name) not in covariates:
            have = ", ".join(covariates) or "none"
            raise option_error(
                f"law range: '{name}' is not a covariate of the model (its covariates: {have})",
                f"add it with --covariate {name} (covariates in the recipe's [model] section), or drop the range",
                "bad_law_range",
                origin,
            )
        try:
            low, high = (float(v) for v in bounds)
            ok = np.isfinite(low) and np.isfinite(high) and low < high
        except (TypeError, ValueError):
            ok = False
        if not ok:
            raise option_error(
                f"law range of '{name}': {bounds!r} is not two finite numbers LOW < HIGH",
                f"give e.g. {name}=-1:1 on the command line or {name} = [-1, 1] in the recipe",
                "bad_law_range",
                origin,
            )
        out[str(name)] = (low, high)
    return out


def joint_rope_probability(curves: np.ndarray, value: float, delta: float) -> float:
    """Share of draws whose whole curve lies within ``value +/- delta``.

    Parameters
    ----------
    curves : numpy.ndarray (draws, points)
        The exponent of every draw at every grid point.
    value, delta : float
        The law's exponent and the ROPE half-width.

    Returns
    -------
    float
    """
    inside = np.abs(np.asarray(curves, dtype=float) - float(value)) <= check_delta(delta)
    return float(np.mean(np.all(inside, axis=1)))


def supported_subrange(
    grid: np.ndarray, curves: np.ndarray, value: float, delta: float, threshold: float = P_ROPE_DECLARE
) -> tuple[float, float, float]:
    """The widest run of grid points over which the joint ROPE probability reaches ``threshold``.

    Parameters
    ----------
    grid : numpy.ndarray (points,)
        Increasing covariate values.
    curves : numpy.ndarray (draws, points)
    value, delta : float
    threshold : float

    Returns
    -------
    (low, high, probability) : tuple of float
        The sub-range's ends and its joint probability; NaN, NaN and the largest pointwise probability
        when no grid point reaches ``threshold``.
    """
    inside = np.abs(np.asarray(curves, dtype=float) - float(value)) <= check_delta(delta)
    # outside[:, j] - outside[:, i] = number of grid points in [i, j) where a draw leaves the region
    outside = np.concatenate([np.zeros((len(inside), 1), int), np.cumsum(~inside, axis=1)], axis=1)
    best: tuple[int, float, int] | None = None  # (run length - 1, probability, -start): larger is better
    for start in range(inside.shape[1]):
        # p[m]: share of draws inside over the grid points start .. start + m
        p = np.mean(outside[:, start + 1 :] == outside[:, [start]], axis=0)
        ok = np.flatnonzero(p >= threshold)
        if len(ok):
            m = int(ok[-1])  # p falls as the run grows, so the last qualifying length is the longest
            best = max(best or (m, float(p[m]), -start), (m, float(p[m]), -start))
    if best is None:
        return np.nan, np.nan, float(inside.mean(axis=0).max())
    m, p_best, start = best[0], best[1], -best[2]
    return float(grid[start]), float(grid[start + m]), p_best


def range_verdict(p: float, value: float, delta: float) -> tuple[str, str]:
    """The verdict over a range from its joint probability; returns ``(verdict, reason)``."""
    said = f"P(within {value:g} +/- {delta:g} over the whole range) {p:.2f}"
    if p >= P_ROPE_DECLARE:
        return HOLDS, f"{said} >= {P_ROPE_DECLARE:g}"
    if p <= P_ROPE_REJECT:
        return REJECTED, f"{said} <= {P_ROPE_REJECT:g}"
    return UNDECIDED, f"{said}, between {P_ROPE_REJECT:g} and {P_ROPE_DECLARE:g}"


def laws_over_range(
    fit,
    laws: Sequence[Law],
    ranges: Mapping[str, tuple[float, float]],
    *,
    delta: float,
    scopes: Sequence[str],
) -> tuple[pd.DataFrame, list[str]]:
    """Every law's ROPE check over every covariate range, per scope (see the module notes).

    Parameters
    ----------
    fit : FitResult
        The free model's fit, with the covariates of ``ranges``.
    laws : sequence of Law
    ranges : mapping of covariate name to (low, high)
        Checked ranges (:func:`check_law_ranges`).
    delta : float
        ROPE half-width.
    scopes : sequence of str
        ``"population"`` and/or taxon labels.

    Returns
    -------
    (table, warnings) : (pandas.DataFrame, list of str)
        Columns :data:`RANGE_COLUMNS`, one row per covariate, scope and law; warnings for ranges reaching
        beyond the observed covariate values.
    """
    from allobranch.comparative.summaries import reference_values
    from allobranch.model.linear import covariate_values

    delta = check_delta(delta)
    post = fit.idata.posterior
    refs = reference_values(fit)
    rows, warnings = [], []
    for name, (low, high) in ranges.items():
        seen = covariate_values(fit.table, name)
        if low < seen.min() or high > seen.max():
            warnings.append(
                f"law range of {name} [{low:g}, {high:g}] reaches beyond the observed values "
                f"[{seen.min():.4g}, {seen.max():.4g}]: the exponent there is the fitted linear trend "
                "extrapolated, not something the data show"
            )
        grid = np.linspace(low, high, GRID_POINTS)
        for scope in scopes:
            curves = curve_draws(post, name, refs[name], grid, None if scope == POPULATION else scope)
            for law in laws:
                p = joint_rope_probability(curves, law.value, delta)
                verdict, reason = range_verdict(p, law.value, delta)
                sub_low, sub_high, p_sub = supported_subrange(grid, curves, law.value, delta)
                rows.append(
                    {
                        "scope": scope,
                        "law": law.label,
                        "value": law.value,
                        "covariate": name,
                        "range_low": low,
                        "range_high": high,
                        "reference": refs[name],
                        "p_rope_range": p,
                        "verdict": verdict,
                        "supported_low": sub_low,
                        "supported_high": sub_high,
                        "p_rope_supported": p_sub,
                        "reason": reason,
                    }
                )
    return pd.DataFrame(rows, columns=list(RANGE_COLUMNS)), warnings


def range_lines(table: pd.DataFrame) -> list[str]:
    """One sentence per covariate range and scope: each law's verdict over the range and where it is
    supported (for reports).

    Parameters
    ----------
    table : pandas.DataFrame
        Columns :data:`RANGE_COLUMNS` (``laws_over_range.csv``).

    Returns
    -------
    list of str
    """
    out = []
    if table is None or table.empty:
        return out
    keys = ["covariate", "range_low", "range_high", "scope"]
    for (name, low, high, scope), group in table.groupby(keys, sort=False):
        parts = []
        for row in group.itertuples():
            text = f"{row.law} {row.verdict} (P {row.p_rope_range:.2f})"
            if np.isfinite(row.supported_low) and row.verdict != HOLDS:
                text += f", supported over [{row.supported_low:.3g}, {row.supported_high:.3g}]"
            parts.append(text)
        out.append(f"{name} from {low:g} to {high:g}, {scope}: " + "; ".join(parts) + ".")
    return out
