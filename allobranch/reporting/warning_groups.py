"""Group the warnings of a fit and a law comparison by kind, so a report shows one line per kind.

The warnings come from the structured results (``FitResult.warnings``, ``LawComparison.warnings``, the
posterior predictive checks); each message starts with, or contains, the words that name its kind, which
:data:`WARNING_KINDS` matches. A message of no known kind is kept under "other warnings": nothing is dropped.
"""

from __future__ import annotations

import re
from collections.abc import Iterable
from dataclasses import dataclass

#: Kinds of warning, in the order they are shown: label and the pattern that recognises a message.
#: Law-fit messages ("fit of murray (population): R-hat ...") come before the sampler kinds they contain.
WARNING_KINDS: tuple[tuple[str, str], ...] = (
    ("law fits with convergence problems", r"^fit of (?!the free model)"),
    ("R-hat above threshold (chains disagree)", r"R-hat above"),
    ("effective sample size too low", r"effective sample size below"),
    ("divergent transitions", r"divergent transition"),
    ("low E-BFMI", r"E-BFMI"),
    ("measurement error not given", r"^no measurement error was given"),
    ("Pagel's lambda poorly determined", r"Pagel's lambda is poorly determined"),
    ("posterior predictive check fails", r"^posterior predictive check"),
    ("unreliable LOO (high Pareto k)", r"^LOO UNRELIABLE"),
    ("Bayes factors from a normal approximation", r"normal approximation"),
    ("prior sensitivity by reweighting unreliable", r"^prior sensitivity"),
    ("overlapping law regions (ROPE)", r"regions of practical equivalence overlap"),
    ("one taxon only", r"^one taxon"),
    ("flagged junctions", r"flagged during validation"),
)
#: Label of messages that match no kind.
OTHER = "other warnings"


@dataclass(frozen=True)
class WarningGroup:
    """Warnings of one kind.

    Attributes
    ----------
    kind : str
        A label of :data:`WARNING_KINDS` or :data:`OTHER`.
    messages : tuple of str
        The messages, in the order they were raised.
    """

    kind: str
    messages: tuple[str, ...]

    @property
    def count(self) -> int:
        """Number of messages."""
        return len(self.messages)


def warning_kind(message: str) -> str:
    """The kind of one warning message (:data:`OTHER` when none matches)."""
    return next((kind for kind, pattern in WARNING_KINDS if re.search(pattern, message)), OTHER)


def group_warnings(messages: Iterable[str]) -> list[WarningGroup]:
    """Group warnings by kind, dropping exact repeats.

    Parameters
    ----------
    messages : iterable of str

    Returns
    -------
    list of WarningGroup
        One group per kind present, in the order of :data:`WARNING_KINDS` (:data:`OTHER` last).

    Examples
    --------
    >>> groups = group_warnings(["3 divergent transition(s): ...", "R-hat above 1.01 for 2 parameter(s)",
    ...                          "fit of murray (population): R-hat above 1.01 ...", "something new"])
    >>> [(g.kind, g.count) for g in groups]  # doctest: +NORMALIZE_WHITESPACE
    [('law fits with convergence problems', 1), ('R-hat above threshold (chains disagree)', 1),
     ('divergent transitions', 1), ('other warnings', 1)]
    """
    by_kind: dict[str, list[str]] = {}
    for message in dict.fromkeys(str(m) for m in messages):
        by_kind.setdefault(warning_kind(message), []).append(message)
    order = [kind for kind, _ in WARNING_KINDS] + [OTHER]
    return [WarningGroup(kind, tuple(by_kind[kind])) for kind in order if kind in by_kind]


def merge_fit_and_comparison(fit_warnings: Iterable[str], comparison_warnings: Iterable[str]) -> list[str]:
    """The fit's warnings followed by the comparison's, without the comparison's copies of the free fit's.

    A law comparison repeats the free model's warnings as ``"fit of the free model: <warning>"``; when the
    report shows that same fit, the copy is dropped.

    Parameters
    ----------
    fit_warnings, comparison_warnings : iterable of str

    Returns
    -------
    list of str
    """
    fit_warnings = [str(w) for w in fit_warnings]
    prefix = "fit of the free model: "
    own = set(fit_warnings)
    rest = [
        str(w)
        for w in comparison_warnings
        if not (str(w).startswith(prefix) and str(w)[len(prefix) :] in own)
    ]
    return fit_warnings + rest
