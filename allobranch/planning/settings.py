"""The settings every fit of a simulated study shares (draws, tune, chains, sampler, ...), and the
documentation of the options every study function takes."""

from __future__ import annotations

import textwrap
from collections.abc import Callable, Mapping
from dataclasses import dataclass
from typing import Any, TypeVar

from allobranch.model.spec import SAMPLER_DEFAULTS, ModelSpec

#: Settings a study passes to every :func:`allobranch.fit` (the rest of ``fit``'s options are fixed).
FIT_SETTINGS: tuple[str, ...] = ("draws", "tune", "chains", "sampler", "target_accept", "escalate")

#: The numpydoc entries of the options that close the signature of every study function
#: (:func:`~allobranch.planning.plan.plan_study`, :func:`~allobranch.planning.calibrate.calibrate`);
#: :func:`study_options` puts them into a docstring.
STUDY_OPTIONS_DOC = "\n".join(
    [
        "engine : Engine, optional",
        "    Where the replicates run (default: local processes; see :mod:`allobranch.engine`).",
        "progress : bool",
        "    Show a progress line per finished replicate on standard error.",
        "**fit_kw",
        textwrap.fill(
            f"Settings of every fit: any of {', '.join(f'``{name}``' for name in FIT_SETTINGS)} (as in "
            ":func:`allobranch.fit`; default: its defaults).",
            width=102,
            initial_indent="    ",
            subsequent_indent="    ",
        ),
    ]
)
#: The docstring line :func:`study_options` replaces.
STUDY_OPTIONS_MARK = "{study_options}"

F = TypeVar("F", bound=Callable[..., Any])


def describe_fits(sampler: Mapping[str, Any]) -> str:
    """A study's fit settings in words for its report, e.g. ``"fits with draws 1000, tune 1000, chains 4"``.

    Parameters
    ----------
    sampler : mapping
        :func:`fit_settings` (a study's ``settings["sampler"]``).
    """
    tune = "the fit's default for the table's size" if sampler["tune"] is None else sampler["tune"]
    return f"fits with draws {sampler['draws']}, tune {tune}, chains {sampler['chains']}"


def study_options(func: F) -> F:
    """Decorator: put :data:`STUDY_OPTIONS_DOC` into ``func``'s docstring, at the line
    :data:`STUDY_OPTIONS_MARK` and with that line's indent.

    Raises
    ------
    ValueError
        When the docstring has no such line (a docstring stripped by ``python -OO`` is left alone).
    """
    doc = func.__doc__
    if doc is None:
        return func
    lines = doc.splitlines()
    at = [i for i, line in enumerate(lines) if line.strip() == STUDY_OPTIONS_MARK]
    if len(at) != 1:
        raise ValueError(f"{func.__qualname__}: write {STUDY_OPTIONS_MARK} on one line of the docstring")
    indent = lines[at[0]][: len(lines[at[0]]) - len(lines[at[0]].lstrip())]
    lines[at[0]] = textwrap.indent(STUDY_OPTIONS_DOC, indent)
    func.__doc__ = "\n".join(lines) + ("\n" if doc.endswith("\n") else "")
    return func


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
    # tune and target_accept left unset (None) are the fit's own size-aware defaults (sampler_defaults)
    given = {k: v for k, v in given.items() if v is not None}
    out = {**SAMPLER_DEFAULTS, "tune": None, "target_accept": None, "escalate": True, **given}
    return {
        "draws": int(out["draws"]),
        "tune": None if out["tune"] is None else int(out["tune"]),
        "chains": int(out["chains"]),
        "sampler": str(out["sampler"]),
        "target_accept": None if out["target_accept"] is None else float(out["target_accept"]),
        "escalate": bool(out["escalate"]),
    }


@dataclass(frozen=True)
class StudyFits:
    """How every replicate of a study is fitted and summarised (a plain, picklable part of each job).

    Attributes
    ----------
    spec : ModelSpec
        The fitted model.
    sampler : tuple of (str, value)
        :func:`fit_settings` as pairs.
    hdi_prob : float
        Probability of the intervals a replicate reports.
    """

    spec: ModelSpec
    sampler: tuple[tuple[str, Any], ...]
    hdi_prob: float

    @classmethod
    def of(cls, spec: ModelSpec, hdi_prob: float, fit_kw: Mapping[str, Any]) -> StudyFits:
        """From a study function's ``spec``, ``hdi_prob`` and ``**fit_kw`` (checked by :func:`fit_settings`)."""
        return cls(spec, tuple(fit_settings(fit_kw).items()), float(hdi_prob))

    @property
    def fit_kw(self) -> dict[str, Any]:
        """The fit settings as keyword arguments of :func:`allobranch.fit`."""
        return dict(self.sampler)

    def to_dict(self) -> dict[str, Any]:
        """The study's settings entries ``spec``, ``sampler`` and ``hdi_prob``."""
        return {"spec": self.spec.to_dict(), "sampler": self.fit_kw, "hdi_prob": self.hdi_prob}
