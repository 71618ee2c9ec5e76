"""A conservative verdict per scope: one law, ``none`` of the laws, or ``undecided``.

Rule (applied to each scope -- ``population`` and every taxon -- separately):

* **law L** is declared when all of these hold, and for exactly one law:

  1. ``P(ROPE) >= 0.9``: the exponent very probably lies within ``+/- delta`` of L;
  2. the Savage–Dickey Bayes factor of L against the free model is ``>= 3`` under the default prior *and*
     under the narrower and the wider prior (the verdict must not hinge on the prior);
  3. LOO does not clearly prefer another hypothesis: L's ELPD is not worse than the scope's best by more
     than 4 *and* more than 2 standard errors of the difference.

* **none** is declared when *every* law has ``P(ROPE) <= 0.05`` *and* a Bayes factor ``<= 1/10`` under every
  prior: strong evidence against each law, not merely the absence of evidence for one. "none" speaks only
  of the laws compared; the free model's estimate says where the exponent lies.
* **undecided** otherwise -- the usual outcome with few or noisy junctions, and the right one.

Thresholds. A Bayes factor of 3 is where "substantial" (Jeffreys 1961) or "positive" (Kass & Raftery 1995,
*JASA* 90:773) evidence begins, and 10 is Jeffreys' "strong" (both scales from memory; common practice).
0.9 and 0.05 for the ROPE probability are our choices: with the default ``delta`` (half the gap between
neighbouring classic laws) a posterior centred between two laws -- e.g. at 2.5 -- puts little mass in
either region, so it can never reach 0.9 for the cube or the square law. The LOO condition follows the
common practice that ELPD differences below about 4 or 2 standard errors are noise (from memory). Each
condition is necessary; none is sufficient alone, because each piece of evidence has its own blind spot
(the ROPE probability and the Bayes factor depend on the prior, LOO barely separates nearby exponents).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

from allobranch.comparison.laws import FREE
from allobranch.conventions import VERDICT_COLUMNS

#: Least ROPE probability of a declared law.
P_ROPE_DECLARE = 0.9
#: Least Bayes factor (law vs free) of a declared law, under every prior.
BF_DECLARE = 3.0
#: Greatest ROPE probability of a law rejected in a ``none`` verdict.
P_ROPE_REJECT = 0.05
#: Greatest Bayes factor (law vs free) of a law rejected in a ``none`` verdict, under every prior.
BF_REJECT = 0.1
#: A law is clearly worse by LOO when its ELPD loss exceeds this ...
LOO_CLEAR_ELPD = 4.0
#: ... and this many standard errors of the difference.
LOO_CLEAR_SE = 2.0
#: Verdict labels besides a law's label.
NONE, UNDECIDED = "none", "undecided"
#: Columns of the evidence table a verdict reads.
EVIDENCE_COLUMNS: tuple[str, ...] = (
    "law",
    "p_rope",
    "log10_bf",
    "log10_bf_narrow",
    "log10_bf_wide",
    "elpd_diff",
    "dse",
)
#: The rule in one paragraph, for reports.
VERDICT_RULE = (
    f"A law is declared when P(ROPE) >= {P_ROPE_DECLARE:g}, its Bayes factor against the free model is >= "
    f"{BF_DECLARE:g} under the default, narrower and wider priors, and LOO does not clearly prefer another "
    f"hypothesis (ELPD loss > {LOO_CLEAR_ELPD:g} and > {LOO_CLEAR_SE:g} SE), for exactly one law. 'none' "
    f"(of the laws compared) needs every law at P(ROPE) <= {P_ROPE_REJECT:g} and Bayes factor <= 1/{1 / BF_REJECT:g} under every "
    "prior. Anything else is 'undecided'. Bayes-factor thresholds follow the Jeffreys / Kass-Raftery scales "
    "(common practice)."
)


@dataclass(frozen=True)
class Verdict:
    """The verdict of one scope.

    Attributes
    ----------
    scope : str
        ``"population"`` or a taxon label.
    verdict : str
        A law's label, ``"none"`` or ``"undecided"``.
    reason : str
        Why, in one line.
    """

    scope: str
    verdict: str
    reason: str


def _log10_bfs(row: pd.Series) -> np.ndarray:
    """The law's log10 Bayes factors under the default and (where given) the changed priors."""
    values = [row.get(c, np.nan) for c in ("log10_bf", "log10_bf_narrow", "log10_bf_wide")]
    values = np.asarray(values, dtype=float)
    if not np.isfinite(values[0]):
        return np.array([np.nan])
    return values[np.isfinite(values)]


def _loo_clearly_worse(row: pd.Series) -> bool:
    diff, dse = float(row.get("elpd_diff", np.nan)), float(row.get("dse", np.nan))
    if not np.isfinite(diff):
        return False
    return diff > LOO_CLEAR_ELPD and diff > LOO_CLEAR_SE * (dse if np.isfinite(dse) else 0.0)


def law_failures(row: pd.Series) -> list[str]:
    """The conditions for declaring this law that fail (empty when it qualifies).

    Parameters
    ----------
    row : pandas.Series
        One law's evidence (:data:`EVIDENCE_COLUMNS`).

    Returns
    -------
    list of str
    """
    out = []
    p = float(row.get("p_rope", np.nan))
    if not p >= P_ROPE_DECLARE:
        out.append(f"P(ROPE) {p:.2f} < {P_ROPE_DECLARE:g}")
    bfs = _log10_bfs(row)
    if not np.all(bfs >= np.log10(BF_DECLARE)):
        out.append(f"BF {10 ** np.nanmin(bfs):.3g} < {BF_DECLARE:g} (lowest over priors)")
    if _loo_clearly_worse(row):
        out.append(f"LOO clearly worse (ELPD loss {float(row['elpd_diff']):.1f} +/- {float(row['dse']):.1f})")
    return out


def law_rejected(row: pd.Series) -> bool:
    """Whether the evidence is strongly against this law (both ROPE and Bayes factor, every prior)."""
    p = float(row.get("p_rope", np.nan))
    bfs = _log10_bfs(row)
    return bool(p <= P_ROPE_REJECT and np.all(bfs <= np.log10(BF_REJECT)))


def decide(evidence: pd.DataFrame, scope: str) -> Verdict:
    """Apply the rule to one scope's evidence.

    Parameters
    ----------
    evidence : pandas.DataFrame
        One row per hypothesis of the scope with :data:`EVIDENCE_COLUMNS` (a row whose ``law`` is ``"free"``
        is ignored).
    scope : str

    Returns
    -------
    Verdict
    """
    laws = evidence[evidence["law"] != FREE]
    if laws.empty:
        return Verdict(scope, UNDECIDED, "no law was compared")
    passing = [row["law"] for _, row in laws.iterrows() if not law_failures(row)]
    if len(passing) == 1:
        row = laws[laws["law"] == passing[0]].iloc[0]
        return Verdict(
            scope,
            str(passing[0]),
            f"{passing[0]}: P(ROPE) {row['p_rope']:.2f}, BF {10 ** _log10_bfs(row).min():.3g} "
            "(lowest over priors), not clearly worse by LOO",
        )
    if len(passing) > 1:
        return Verdict(
            scope, UNDECIDED, f"laws {', '.join(map(str, passing))} all qualify (overlapping regions)"
        )
    if all(law_rejected(row) for _, row in laws.iterrows()):
        return Verdict(
            scope, NONE, f"every law has P(ROPE) <= {P_ROPE_REJECT:g} and BF <= 1/{1 / BF_REJECT:g}"
        )
    best = laws.sort_values("p_rope", ascending=False).iloc[0]
    return Verdict(scope, UNDECIDED, f"closest law {best['law']}: {'; '.join(law_failures(best))}")


def verdict_table(evidence: pd.DataFrame) -> pd.DataFrame:
    """Verdicts of every scope in a long evidence table.

    Parameters
    ----------
    evidence : pandas.DataFrame
        Columns ``scope`` and :data:`EVIDENCE_COLUMNS`.

    Returns
    -------
    pandas.DataFrame
        Columns :data:`~allobranch.conventions.VERDICT_COLUMNS` (``scope``, ``verdict``, ``reason``);
        scopes in order of first appearance.
    """
    scopes = list(dict.fromkeys(evidence["scope"].astype(str)))
    rows = [decide(evidence[evidence["scope"].astype(str) == s], s) for s in scopes]
    return pd.DataFrame([vars(v) for v in rows], columns=list(VERDICT_COLUMNS))
