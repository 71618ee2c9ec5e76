"""Comparing branching laws: point hypotheses for the exponent against the free model.

:mod:`~allobranch.comparison.laws` (the hypotheses), :mod:`~allobranch.comparison.loo` (PSIS-LOO),
:mod:`~allobranch.comparison.bayes_factor` (Savage–Dickey), :mod:`~allobranch.comparison.rope` (posterior
probability near each law), :mod:`~allobranch.comparison.verdict` (the decision rule) and
:mod:`~allobranch.comparison.compare` (:func:`compare_laws`, which runs them all).
"""

from __future__ import annotations

from allobranch.comparison.laws import CLASSIC_LAWS, Law, parse_law, resolve_laws
from allobranch.comparison.rope import DEFAULT_DELTA
from allobranch.comparison.verdict import VERDICT_RULE

__all__ = [
    "CLASSIC_LAWS",
    "DEFAULT_DELTA",
    "VERDICT_RULE",
    "Law",
    "LawComparison",
    "compare_laws",
    "parse_law",
    "resolve_laws",
]


def __getattr__(name: str):
    # the comparison itself (ArviZ, sampling) loads on first use, so light imports of laws stay light
    if name in ("LawComparison", "compare_laws"):
        from allobranch.comparison import compare

        return getattr(compare, name)
    raise AttributeError(f"module 'allobranch.comparison' has no attribute {name!r}")
