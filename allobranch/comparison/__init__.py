"""Comparing branching laws: point hypotheses for the exponent against the free model.

:mod:`~allobranch.comparison.laws` (the hypotheses), :mod:`~allobranch.comparison.loo` (PSIS-LOO),
:mod:`~allobranch.comparison.bayes_factor` (Savage–Dickey), :mod:`~allobranch.comparison.rope` (posterior
probability near each law), :mod:`~allobranch.comparison.verdict` (the decision rule) and
:mod:`~allobranch.comparison.compare` (:func:`compare_laws`, which runs them all).
"""

from __future__ import annotations

from allobranch.comparison.compare import LawComparison, compare_laws
from allobranch.comparison.laws import CLASSIC_LAWS, Law, parse_law, resolve_laws
from allobranch.comparison.rope import DEFAULT_DELTA

__all__ = ["CLASSIC_LAWS", "DEFAULT_DELTA", "Law", "LawComparison", "compare_laws", "parse_law", "resolve_laws"]
