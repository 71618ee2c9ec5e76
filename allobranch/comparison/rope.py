"""Posterior probability that the exponent lies within a region of practical equivalence (ROPE) of a law.

``p_rope = P(|a - value| <= delta | data)``, estimated as the share of posterior draws inside the region.
The default half-width ``delta = 0.25`` is half the smallest gap between the classic laws (3/2 and 2 are
0.5 apart), so the regions of neighbouring classic laws touch but never overlap and a draw counts for at
most one of them.

Caveat: ``p_rope`` depends on ``delta``, which is a choice about what difference in the exponent matters, not
a property of the data; and like every posterior probability it depends on the prior when data are few.
"""

from __future__ import annotations

from collections.abc import Sequence
from itertools import combinations

import numpy as np

from allobranch.comparison.laws import Law

#: Default ROPE half-width: half the smallest gap between the classic laws (2 - 3/2 = 0.5).
DEFAULT_DELTA = 0.25
#: One-line statement of what ``p_rope`` means, shown beside the numbers.
CAVEAT = (
    "P(ROPE) is the posterior probability that the exponent lies within +/- delta of the law; delta is a "
    "judgement of what difference matters (default 0.25, half the gap between 3/2 and 2, so the classic "
    "laws' regions never overlap), and with few data the probability still reflects the prior."
)


def check_delta(delta: float) -> float:
    """Return ``delta`` as a float, or raise ``ValueError`` when it is not positive and finite."""
    delta = float(delta)
    if not (np.isfinite(delta) and delta > 0):
        raise ValueError(f"delta (the ROPE half-width) must be a positive number, got {delta!r}")
    return delta


def p_rope(draws: np.ndarray, value: float, delta: float = DEFAULT_DELTA) -> float:
    """Posterior probability that the exponent lies within ``value +/- delta``.

    Parameters
    ----------
    draws : numpy.ndarray
        Posterior draws of the exponent (any shape; flattened).
    value : float
        The law's exponent.
    delta : float
        Half-width of the region.

    Returns
    -------
    float
        Share of draws with ``|draw - value| <= delta``.
    """
    x = np.asarray(draws, dtype=float).ravel()
    return float(np.mean(np.abs(x - float(value)) <= check_delta(delta)))


def overlapping_laws(laws: Sequence[Law], delta: float) -> list[str]:
    """Warnings for pairs of laws closer than ``2 * delta``, whose regions overlap.

    Parameters
    ----------
    laws : sequence of Law
    delta : float
        ROPE half-width.

    Returns
    -------
    list of str
        One message per overlapping pair (empty when none overlap).
    """
    delta = check_delta(delta)
    out = []
    for a, b in combinations(sorted(laws, key=lambda law: law.value), 2):
        gap = abs(b.value - a.value)
        if gap < 2 * delta - 1e-12:
            out.append(
                f"laws {a.label!r} ({a.value:g}) and {b.label!r} ({b.value:g}) are {gap:.3g} apart, less than "
                f"2 x delta = {2 * delta:g}: their regions of practical equivalence overlap, so one posterior "
                "draw can count for both and a verdict between them is not possible; choose a smaller --delta "
                f"(at most {gap / 2:.3g}) to separate them"
            )
    return out
