"""The settings every fit of a simulated study shares (draws, tune, chains, sampler, ...)."""

from __future__ import annotations

from collections.abc import Mapping
from typing import Any

from allobranch.model.spec import SAMPLER_DEFAULTS

#: Settings a study passes to every :func:`allobranch.fit` (the rest of ``fit``'s options are fixed).
FIT_SETTINGS: tuple[str, ...] = ("draws", "tune", "chains", "sampler", "target_accept", "escalate")


def fit_settings(given: Mapping[str, Any]) -> dict[str, Any]:
    """The package's sampler defaults (and automatic escalation), overridden by the given settings.

    Parameters
    ----------
    given : mapping
        Any of :data:`FIT_SETTINGS`.

    Returns
    -------
    dict
        Every one of :data:`FIT_SETTINGS`, with its type.

    Raises
    ------
    TypeError
        For a name that is not one of :data:`FIT_SETTINGS`.
    """
    unknown = sorted(set(given) - set(FIT_SETTINGS))
    if unknown:
        raise TypeError(f"unknown fit setting(s) {unknown}; allowed: {', '.join(FIT_SETTINGS)}")
    out = {**SAMPLER_DEFAULTS, "escalate": True, **given}
    return {
        "draws": int(out["draws"]),
        "tune": int(out["tune"]),
        "chains": int(out["chains"]),
        "sampler": str(out["sampler"]),
        "target_accept": float(out["target_accept"]),
        "escalate": bool(out["escalate"]),
    }
