"""Iso-exponent curves in the daughter-ratio plane of a bifurcation.

A bifurcation with parent radius ``r0`` and daughters ``r_large >= r_small`` is a point
``(x, y) = (r_large / r0, r_small / r0)``. It obeys the branching law with exponent ``a`` exactly when

    x ** a + y ** a = 1,

so for every exponent the law is a curve from the symmetric junction ``x = y = 2 ** (-1 / a)`` to the
extreme asymmetric one ``(x, y) = (1, 0)``. Points inside a curve (towards the origin) have a smaller
per-junction exponent, points outside it a larger one. Everything here is exact algebra.
"""

from __future__ import annotations

import numpy as np


def _check_exponent(a: float) -> float:
    a = float(a)
    if not np.isfinite(a) or a <= 0:
        raise ValueError(f"the exponent must be a positive finite number; got {a!r}")
    return a


def symmetric_ratio(a: float) -> float:
    """Daughter/parent radius ratio of a symmetric bifurcation that obeys exponent ``a``.

    Parameters
    ----------
    a : float
        Branching exponent, positive.

    Returns
    -------
    float
        ``2 ** (-1 / a)``, the point where the iso-exponent curve meets the diagonal ``x = y``.

    Examples
    --------
    >>> round(symmetric_ratio(2.0), 6)
    0.707107
    """
    return 2.0 ** (-1.0 / _check_exponent(a))


def smaller_ratio(x: np.ndarray | float, a: float) -> np.ndarray:
    """Smaller daughter ratio ``y`` that balances a junction with larger daughter ratio ``x``.

    Parameters
    ----------
    x : array_like
        Larger daughter/parent ratio(s), in ``[0, 1]``.
    a : float
        Branching exponent, positive.

    Returns
    -------
    numpy.ndarray
        ``(1 - x ** a) ** (1 / a)``.

    Raises
    ------
    ValueError
        If a ratio lies outside ``[0, 1]`` (no daughter can balance the junction there).
    """
    a = _check_exponent(a)
    x = np.asarray(x, dtype=float)
    if np.any((x < 0) | (x > 1) | ~np.isfinite(x)):
        raise ValueError("larger daughter ratios must lie in [0, 1]")
    return (1.0 - x**a) ** (1.0 / a)


def iso_exponent_curve(a: float, n: int = 200) -> tuple[np.ndarray, np.ndarray]:
    """Points of the curve ``x ** a + y ** a = 1`` with ``x >= y`` (larger vs smaller daughter ratio).

    Parameters
    ----------
    a : float
        Branching exponent, positive.
    n : int, default 200
        Number of points; at least 2.

    Returns
    -------
    x, y : numpy.ndarray
        Larger and smaller daughter ratios, from the extreme asymmetric point ``(1, 0)`` to the symmetric
        point ``(2 ** (-1 / a), 2 ** (-1 / a))``. The curve is parametrised by
        ``x = cos(t) ** (2 / a)``, ``y = sin(t) ** (2 / a)`` for ``t`` in ``[0, pi / 4]``, which satisfies
        the law identically and spaces the points evenly along the curve's turn.

    Examples
    --------
    >>> x, y = iso_exponent_curve(3.0, n=5)
    >>> bool(np.allclose(x**3 + y**3, 1.0))
    True
    """
    a = _check_exponent(a)
    if int(n) < 2:
        raise ValueError(f"n must be at least 2; got {n!r}")
    t = np.linspace(0.0, np.pi / 4, int(n))
    x = np.cos(t) ** (2.0 / a)
    y = np.sin(t) ** (2.0 / a)
    # make the symmetric end exact rather than equal up to rounding of cos and sin at pi / 4
    x[-1] = y[-1] = symmetric_ratio(a)
    return x, y


def iso_exponent_band(a_low: float, a_high: float, n: int = 200) -> tuple[np.ndarray, np.ndarray]:
    """Closed outline of the region between two iso-exponent curves.

    Parameters
    ----------
    a_low, a_high : float
        Exponents bounding the band (for example the ends of a credible interval); positive.
    n : int, default 200
        Points per bounding curve.

    Returns
    -------
    x, y : numpy.ndarray
        Polygon vertices: the ``a_low`` curve from ``(1, 0)`` to its symmetric point, then the ``a_high``
        curve back from its symmetric point to ``(1, 0)``. Both curves meet at ``(1, 0)`` and end on the
        diagonal, so the polygon is closed by a piece of the diagonal ``x = y``.
    """
    x_low, y_low = iso_exponent_curve(a_low, n)
    x_high, y_high = iso_exponent_curve(a_high, n)
    return np.concatenate([x_low, x_high[::-1]]), np.concatenate([y_low, y_high[::-1]])
