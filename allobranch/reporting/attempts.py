"""Sampling provenance: the attempts a fit made (refits with another parametrization or target acceptance).

A fit records, in ``result.settings["attempts"]``, one dict per sampling attempt with the keys of
:data:`ATTEMPT_KEYS`, and in ``result.settings["parametrization"]`` a short description of the
parametrization of the kept attempt. Fits made before this was recorded have neither key; then nothing is
shown.
"""

from __future__ import annotations

from collections.abc import Mapping

import pandas as pd

#: Keys of one attempt, in the order of the table's columns (after ``attempt``).
ATTEMPT_KEYS: tuple[str, ...] = (
    "parametrization",
    "target_accept",
    "divergences",
    "max_r_hat",
    "min_ess_bulk",
    "seconds",
    "kept",
)
#: Decimals shown for the numeric keys (R-hat to the third decimal, as its 1.01 threshold needs).
DECIMALS: dict[str, int] = {"max_r_hat": 3, "min_ess_bulk": 0, "seconds": 2}


def _attempts(settings: Mapping) -> list[Mapping]:
    attempts = settings.get("attempts") if isinstance(settings, Mapping) else None
    if not attempts:
        return []
    return [a for a in attempts if isinstance(a, Mapping)]


def attempts_table(settings: Mapping) -> pd.DataFrame | None:
    """One row per sampling attempt, numbered from 1; None when the fit recorded no attempts.

    Parameters
    ----------
    settings : mapping
        A fit's settings (``FitResult.settings``).

    Returns
    -------
    pandas.DataFrame or None
        Columns ``attempt`` and :data:`ATTEMPT_KEYS` (a key an attempt lacks is left empty), rounded as
        :data:`DECIMALS` says.

    Examples
    --------
    >>> attempts_table({"attempts": [{"parametrization": "non-centred", "target_accept": 0.9,
    ...                               "divergences": 3, "max_r_hat": 1.02, "min_ess_bulk": 310.0,
    ...                               "seconds": 4.2, "kept": True}]})["divergences"].tolist()
    [3]
    >>> attempts_table({}) is None
    True
    """
    attempts = _attempts(settings)
    if not attempts:
        return None
    rows = [{"attempt": i, **{k: a.get(k) for k in ATTEMPT_KEYS}} for i, a in enumerate(attempts, start=1)]
    table = pd.DataFrame(rows, columns=["attempt", *ATTEMPT_KEYS])
    for key, digits in DECIMALS.items():
        table[key] = pd.to_numeric(table[key], errors="coerce").round(digits)
    return table


def _how(attempt: Mapping) -> str:
    parts = [str(attempt.get("parametrization") or "the same parametrization")]
    if attempt.get("target_accept") is not None:
        parts.append(f"target_accept {float(attempt['target_accept']):g}")
    return " at ".join(parts)


def _outcome(attempt: Mapping) -> str:
    div = attempt.get("divergences")
    text = (
        f"{int(div)} divergence{'' if int(div) == 1 else 's'}" if div is not None else "no divergence count"
    )
    if attempt.get("max_r_hat") is not None:
        text += f", max R-hat {float(attempt['max_r_hat']):.3f}"
    if attempt.get("min_ess_bulk") is not None:
        text += f", min bulk ESS {float(attempt['min_ess_bulk']):.0f}"
    return text


def attempts_sentence(settings: Mapping) -> str:
    """One sentence telling how the posterior was sampled; "" when the fit recorded no attempts.

    Parameters
    ----------
    settings : mapping
        ``FitResult.settings``, whose ``attempts`` list it reads.

    Returns
    -------
    str
        E.g. "First attempt (non-centred at target_accept 0.9) had 12 divergences, max R-hat 1.021; refitted
        with centred at target_accept 0.95 (0 divergences, max R-hat 1.004); kept attempt 2."

    Examples
    --------
    >>> attempts_sentence({"attempts": [{"parametrization": "centred", "target_accept": 0.9,
    ...                                  "divergences": 0, "kept": True}]})
    'Sampled in one attempt (centred at target_accept 0.9): 0 divergences; kept.'
    """
    attempts = _attempts(settings)
    if not attempts:
        return ""
    kept = [i for i, a in enumerate(attempts, start=1) if a.get("kept")]
    kept_text = f"kept attempt {kept[-1]}" if kept else "no attempt was marked as kept"
    if len(attempts) == 1:
        return f"Sampled in one attempt ({_how(attempts[0])}): {_outcome(attempts[0])}; {'kept' if kept else kept_text}."
    first = f"First attempt ({_how(attempts[0])}) had {_outcome(attempts[0])}"
    refits = "; then ".join(f"{_how(a)} ({_outcome(a)})" for a in attempts[1:])
    return f"{first}; refitted with {refits}; {kept_text}."


def parametrization_note(settings: Mapping) -> str:
    """The kept attempt's parametrization as recorded by the fit ("" when not recorded)."""
    value = settings.get("parametrization") if isinstance(settings, Mapping) else None
    return str(value) if value else ""
