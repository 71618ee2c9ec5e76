"""Branching laws as point hypotheses, and the model specification that fixes the exponent at one.

A *law* is a labelled exponent value. The named laws are Murray's cube law (a = 3), da Vinci's
area-preserving rule (a = 2) and Rall's 3/2 rule (a = 3/2); users add their own as ``LABEL=VALUE``
(``VALUE`` may be a fraction such as ``7/3``). Each law is compared with the *free* model, in which the
exponent is estimated, in one of two scopes:

``population``
    every taxon shares the fixed exponent (``ModelSpec(fixed_exponent=value)``);
``taxon``
    one taxon at a time has the fixed exponent, the rest of the model is free
    (``ModelSpec(fixed_taxa={taxon: value})``).
"""

from __future__ import annotations

import re
from collections.abc import Iterable, Mapping
from dataclasses import dataclass
from fractions import Fraction

from allobranch.conventions import POPULATION
from allobranch.errors import InputError
from allobranch.model.spec import ModelSpec

#: Label of the model with a free (estimated) exponent.
FREE = "free"
#: Scopes of a comparison, in the order they are reported.
SCOPES: tuple[str, ...] = (POPULATION, "taxon")
#: Labels that cannot name a law because they are verdicts or the free model.
RESERVED_LABELS: tuple[str, ...] = (FREE, "none", "undecided")
#: Allowed law labels: they become parts of column names such as ``p_rope_<label>``.
LABEL_PATTERN = re.compile(r"^[A-Za-z][A-Za-z0-9_]*$")
#: Exponent values a law may take (the range a model specification accepts).
VALUE_RANGE = (0.0, 20.0)


@dataclass(frozen=True)
class Law:
    """A point hypothesis about the branching exponent.

    Parameters
    ----------
    label : str
        Short identifier (letters, digits, underscores; starts with a letter), used in tables and columns.
    value : float
        The exponent ``a`` in ``r_parent^a = sum r_daughter^a``.
    name : str
        Human-readable name for reports (defaults to the label).
    """

    label: str
    value: float
    name: str = ""

    def __post_init__(self) -> None:
        if not LABEL_PATTERN.match(self.label):
            raise InputError(
                f"law label {self.label!r}: use letters, digits and underscores, starting with a "
                "letter (e.g. turbulent=7/3)"
            )
        if self.label.lower() in RESERVED_LABELS:
            raise InputError(
                f"law label {self.label!r} is reserved ({', '.join(RESERVED_LABELS)}); choose another label"
            )
        lo, hi = VALUE_RANGE
        if not lo < float(self.value) < hi:
            raise InputError(
                f"law {self.label!r}: exponent {self.value!r} must lie between {lo:g} and {hi:g}"
            )
        object.__setattr__(self, "value", float(self.value))
        if not self.name:
            object.__setattr__(self, "name", self.label)


#: The classic laws compared by default.
CLASSIC_LAWS: tuple[Law, ...] = (
    Law("rall", 1.5, "Rall's 3/2 rule"),
    Law("da_vinci", 2.0, "da Vinci's rule (area-preserving)"),
    Law("murray", 3.0, "Murray's law (cube)"),
)
#: Spellings accepted for the classic laws (case-insensitive).
ALIASES: dict[str, Law] = {
    **{law.label: law for law in CLASSIC_LAWS},
    "davinci": CLASSIC_LAWS[1],
    "leonardo": CLASSIC_LAWS[1],
    "cube": CLASSIC_LAWS[2],
}


def parse_value(text: str) -> float:
    """Parse an exponent written as a decimal number or a fraction.

    Parameters
    ----------
    text : str
        For example ``"3"``, ``"2.5"`` or ``"7/3"``.

    Returns
    -------
    float

    Raises
    ------
    InputError
        When ``text`` is not a number or a fraction.

    Examples
    --------
    >>> round(parse_value("7/3"), 4)
    2.3333
    """
    try:
        return float(Fraction(text.strip()))
    except (ValueError, ZeroDivisionError):
        raise InputError(f"exponent {text!r} is not a number or a fraction such as 7/3") from None


def parse_law(text: str) -> Law:
    """Parse a law given as a classic name (``murray``, ``da_vinci``, ``rall``) or as ``LABEL=VALUE``.

    Parameters
    ----------
    text : str
        For example ``"murray"`` or ``"turbulent=7/3"``.

    Returns
    -------
    Law

    Raises
    ------
    InputError
        For an unknown name, a bad label or a bad value.
    """
    if "=" in text:
        label, _, value = text.partition("=")
        return Law(label.strip(), parse_value(value))
    key = text.strip().lower()
    if key in ALIASES:
        return ALIASES[key]
    raise InputError(
        f"unknown law {text!r}: give one of {', '.join(law.label for law in CLASSIC_LAWS)} or "
        "LABEL=VALUE (e.g. turbulent=7/3)"
    )


def resolve_laws(laws: Iterable[str | Law] | Mapping[str, float | str] | None = None) -> tuple[Law, ...]:
    """Turn the user's choice of laws into checked :class:`Law` objects.

    Parameters
    ----------
    laws : iterable of str or Law, mapping of label to value, or None
        ``None`` gives :data:`CLASSIC_LAWS`. Strings are parsed with :func:`parse_law`; a mapping gives
        ``{label: value}`` (values may be fraction strings).

    Returns
    -------
    tuple of Law
        Sorted by exponent value.

    Raises
    ------
    InputError
        When no law is given, or two laws share a label or a value.
    """
    if laws is None:
        return CLASSIC_LAWS
    if isinstance(laws, str):
        laws = [laws]
    if isinstance(laws, Mapping):
        out = [Law(str(k), parse_value(v) if isinstance(v, str) else float(v)) for k, v in laws.items()]
    else:
        out = [law if isinstance(law, Law) else parse_law(str(law)) for law in laws]
    if not out:
        raise InputError("no law to compare: give at least one (e.g. murray or turbulent=7/3)")
    for attr in ("label", "value"):
        seen: dict = {}
        for law in out:
            key = getattr(law, attr)
            if key in seen:
                raise InputError(
                    f"laws {seen[key].label!r} and {law.label!r} share the {attr} {key!r}; give each law once"
                )
            seen[key] = law
    return tuple(sorted(out, key=lambda law: law.value))


def hypothesis_spec(free: ModelSpec, value: float, taxon: str | None = None) -> ModelSpec:
    """The model specification of a point law, derived from the free model's specification.

    Parameters
    ----------
    free : ModelSpec
        Specification of the free model (priors, deviation, likelihood form are kept).
    value : float
        The law's exponent.
    taxon : str, optional
        ``None`` fixes every taxon's exponent (scope ``population``); a taxon label fixes that taxon only.

    Returns
    -------
    ModelSpec
    """
    if taxon is None:
        return free.with_(fixed_exponent=float(value), fixed_taxa={})
    return free.with_(fixed_exponent=None, fixed_taxa={str(taxon): float(value)})
