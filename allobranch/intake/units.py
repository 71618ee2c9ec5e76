"""Length units and the radius/diameter convention.

Every size is turned into a radius in millimetres on reading (pixels stay pixels, since a pixel has no
physical length until the user supplies the scale). Output converts back to the user's unit.
"""

from __future__ import annotations

import numpy as np

from allobranch.errors import OPTIONS_ORIGIN, option_error
from allobranch.intake.mapping import MEASURES

#: Millimetres per unit for every canonical unit; ``None`` means "no physical length" (pixels).
MM_PER_UNIT: dict[str, float | None] = {
    "nm": 1e-6,
    "um": 1e-3,
    "mm": 1.0,
    "cm": 10.0,
    "m": 1000.0,
    "in": 25.4,
    "px": None,
}

#: Other spellings accepted for a canonical unit.
UNIT_ALIASES: dict[str, str] = {
    "µm": "um",  # micro sign U+00B5
    "μm": "um",  # Greek small letter mu U+03BC
    "micron": "um",
    "microns": "um",
    "micrometre": "um",
    "micrometer": "um",
    "inch": "in",
    "pixel": "px",
    "pixels": "px",
}

#: Every unit spelling the user may give; used by code and messages alike.
ALLOWED_UNITS: tuple[str, ...] = (*MM_PER_UNIT, *UNIT_ALIASES)


def canonical_unit(unit: str, *, origin: str = OPTIONS_ORIGIN, key: str = "unit") -> str:
    """Return the canonical spelling of a length unit.

    Parameters
    ----------
    unit : str
        A unit as the user wrote it (case-insensitive, surrounding spaces ignored), e.g. ``"µm"``.
    origin : str
        Where the unit came from (recipe file or ``"<options>"``), used in the error message.
    key : str
        The recipe key or option name, used in the error message.

    Returns
    -------
    str
        One of the keys of :data:`MM_PER_UNIT`.

    Raises
    ------
    RecipeError
        If the unit is not known; the message lists :data:`ALLOWED_UNITS`.

    Examples
    --------
    >>> canonical_unit("µm")
    'um'
    """
    if isinstance(unit, str):
        text = unit.strip()
        lowered = text.lower()
        for candidate in (text, lowered):
            if candidate in MM_PER_UNIT:
                return candidate
            if candidate in UNIT_ALIASES:
                return UNIT_ALIASES[candidate]
    raise option_error(
        f"unknown length unit {unit!r} for '{key}'",
        f"use one of: {', '.join(ALLOWED_UNITS)}",
        "unknown_unit",
        origin,
    )


def radius_factor(unit: str, measure: str) -> float:
    """Factor turning a size in the user's unit and measure into a radius in the internal unit.

    Parameters
    ----------
    unit : str
        Canonical or alias unit (see :data:`ALLOWED_UNITS`); pixels give a factor of 1 (or 1/2).
    measure : {"radius", "diameter"}
        Whether the sizes are radii or diameters (diameters are halved).

    Returns
    -------
    float
        Multiply user sizes (and their absolute standard errors) by this factor.

    Examples
    --------
    >>> radius_factor("um", "diameter")
    0.0005
    """
    if measure not in MEASURES:
        raise option_error(
            f"unknown measure {measure!r}", f"use one of: {', '.join(MEASURES)}", "unknown_measure"
        )
    mm = MM_PER_UNIT[canonical_unit(unit)]
    scale = 1.0 if mm is None else mm
    return scale / 2.0 if measure == "diameter" else scale


def to_internal_radius(values: np.ndarray, unit: str, measure: str) -> np.ndarray:
    """Convert user sizes to radii in the internal unit (mm, or px for pixels).

    Parameters
    ----------
    values : numpy.ndarray
        Sizes (or absolute standard errors of sizes) in the user's unit and measure.
    unit : str
        The user's unit.
    measure : {"radius", "diameter"}
        Whether the values are radii or diameters.

    Returns
    -------
    numpy.ndarray
        Radii in mm (px stays px); a new array, the input is not changed.
    """
    return np.asarray(values, dtype=float) * radius_factor(unit, measure)


def from_internal_radius(values: np.ndarray, unit: str) -> np.ndarray:
    """Convert internal radii (mm, or px) back to radii in the user's unit.

    Parameters
    ----------
    values : numpy.ndarray
        Radii in the internal unit.
    unit : str
        The user's unit.

    Returns
    -------
    numpy.ndarray
        Radii in the user's unit (still radii, whatever the user's measure was).
    """
    return np.asarray(values, dtype=float) / radius_factor(unit, "radius")
