"""Generation tables: one row per generation of a symmetric branching model, and the exponents they imply.

Airway and vascular models are often published as tables of generations: generation ``g`` has ``N_g``
identical segments of diameter ``d_g``, and every segment of generation ``g`` has ``n_g`` daughters
(the branching factor; 2 for a dichotomy). A step from ``g`` to ``g + 1`` then satisfies
``d_g^a = n_g d_{g+1}^a`` for exactly one exponent,

    a_g = ln(n_g) / ln(d_g / d_{g+1}),

which exists only when ``d_{g+1} < d_g``. Over a range of generations the exponent fitted by least squares
to ``ln d_g = c - L_g / a``, with ``L_g = sum_{k<g} ln n_k`` (``g ln 2`` for dichotomies), summarises the
steps (scipy's ``linregress``).

Caveat: such tables are already averaged over many airways or vessels of each generation. The exponents
they imply describe the averages, not individual junctions (whose exponents scatter, and whose mean is not
the exponent of the mean sizes), and no measurement error can be separated from biological variation. They
cannot stand in for a junction table in the model.
"""

from __future__ import annotations

import os
from dataclasses import dataclass

import numpy as np
import pandas as pd
from scipy import stats

from allobranch.errors import InputError
from allobranch.intake.readers import read_table
from allobranch.intake.validate import _Collector, parse_numbers
from allobranch.networks.cells import check_columns, non_blank, positive_numbers, raise_fatal

#: The caveat printed with every result of :func:`generation_exponents`.
AVERAGED_CAVEAT = (
    "generation tables are already averaged: these exponents describe the mean sizes of each generation, not "
    "individual junctions, and they carry no measurement error; do not use them in place of junction data"
)

#: Columns of :attr:`GenerationExponents.steps`.
STEP_COLUMNS: tuple[str, ...] = (
    "generation",
    "next_generation",
    "size",
    "next_size",
    "branching",
    "ratio",
    "exponent",
    "no_exponent_reason",
)


@dataclass(frozen=True)
class GenerationExponents:
    """Exponents implied by a generation table.

    Attributes
    ----------
    steps : pandas.DataFrame
        One row per step ``g -> g + 1`` (columns :data:`STEP_COLUMNS`): sizes, branching factor,
        ``ratio = next_size / size``, the implied ``exponent`` (NaN where the size does not fall, with the
        reason).
    fit : dict
        ``first`` and ``last`` generation of the range, ``n_generations``, ``exponent`` (``-1 / slope``),
        ``slope`` and ``slope_se`` of ``ln d`` against cumulative ``ln n``, ``exponent_se`` (delta method,
        ``slope_se / slope**2``) and ``r_squared``.
    caveat : str
        :data:`AVERAGED_CAVEAT`.
    """

    steps: pd.DataFrame
    fit: dict[str, float]
    caveat: str = AVERAGED_CAVEAT


def _read(
    source: str | os.PathLike | pd.DataFrame, generation: str, size: str, branching: str | None
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    raw = read_table(source)
    check_columns(raw, [(generation, "generation"), (size, "size"), (branching, "branching factor")])
    out = _Collector(raw.label)
    keep, rows = non_blank(raw, out)
    raise_fatal(out)
    cells = raw.frame[generation].iloc[keep]
    gen_raw, bad = parse_numbers(cells, raw.decimal)
    with np.errstate(invalid="ignore"):
        wrong = bad | np.isnan(gen_raw) | (gen_raw != np.round(gen_raw)) | (gen_raw < 0)
    for i in np.flatnonzero(wrong):
        out.add(
            "fatal",
            rows[i],
            generation,
            f"{cells.iloc[i]!r} is not a generation number",
            "number the generations 0, 1, 2, ...",
            "bad_generation",
        )
    sizes = positive_numbers(raw, keep, rows, size, "size", out)
    factor = positive_numbers(raw, keep, rows, branching, "branching factor", out)
    if factor is None:
        factor = np.full(len(keep), 2.0)
    else:
        for i in np.flatnonzero(factor < 1):
            out.add(
                "fatal",
                rows[i],
                branching,
                f"branching factor {factor[i]:g} is below 1",
                "give daughters per segment",
                "bad_branching",
            )
    raise_fatal(out)
    order = np.argsort(gen_raw, kind="stable")
    g = gen_raw[order]
    checks = (
        (
            np.diff(g) == 0,
            "generation {0:g} appears twice",
            "give one row per generation",
            "duplicate_generation",
        ),
        (
            np.diff(g) > 1,
            "generations {0:g} and {1:g} are not consecutive",
            "give every generation between the first and the last",
            "generation_gap",
        ),
    )
    for where, message, hint, code in checks:
        for i in np.flatnonzero(where):
            out.add("fatal", int(rows[order[i + 1]]), generation, message.format(g[i], g[i + 1]), hint, code)
    raise_fatal(out)
    return g.astype(np.int64), sizes[order], factor[order]


def generation_exponents(
    source: str | os.PathLike | pd.DataFrame,
    *,
    generation: str = "generation",
    size: str = "diameter",
    branching: str | None = None,
    first: int | None = None,
    last: int | None = None,
) -> GenerationExponents:
    """Per-step and fitted exponents of a symmetric generation table.

    Parameters
    ----------
    source : str, path-like or pandas.DataFrame
        One row per generation (any order; consecutive generation numbers).
    generation, size : str
        Columns with the generation number (0, 1, ...) and the size (diameter or radius: only ratios
        matter).
    branching : str, optional
        Column with the branching factor of each generation (daughters per segment); 2 when not given.
        The factor of the last generation is not used.
    first, last : int, optional
        Range of generations for the fitted exponent (default: the whole table). The fit needs at least
        two generations.

    Returns
    -------
    GenerationExponents
        Steps, fit and the caveat that generation tables are already averaged.

    Examples
    --------
    >>> import pandas as pd
    >>> t = pd.DataFrame({"generation": [0, 1, 2], "diameter": [1.0, 2 ** (-1 / 3), 2 ** (-2 / 3)]})
    >>> res = generation_exponents(t)
    >>> res.steps["exponent"].round(10).tolist(), round(res.fit["exponent"], 10)
    ([3.0, 3.0], 3.0)
    """
    g, d, n = _read(source, generation, size, branching)
    ratio = d[1:] / d[:-1]
    with np.errstate(divide="ignore", invalid="ignore"):
        exponent = np.where(ratio < 1, np.log(n[:-1]) / -np.log(ratio), np.nan)
    reason = np.where(ratio < 1, None, "size_does_not_fall")
    reason = np.where((ratio < 1) & (n[:-1] == 1), "branching_factor_1", reason)
    exponent = np.where(n[:-1] == 1, np.nan, exponent)
    steps = pd.DataFrame(
        {
            "generation": g[:-1],
            "next_generation": g[1:],
            "size": d[:-1],
            "next_size": d[1:],
            "branching": n[:-1],
            "ratio": ratio,
            "exponent": exponent,
            "no_exponent_reason": reason,
        },
        columns=list(STEP_COLUMNS),
    )
    lo = int(g[0]) if first is None else int(first)
    hi = int(g[-1]) if last is None else int(last)
    inside = (g >= lo) & (g <= hi)
    if inside.sum() < 2 or lo >= hi:
        raise InputError(
            f"the fit range {lo}..{hi} holds {int(inside.sum())} generation(s) of the table ({g[0]}..{g[-1]}); "
            "give first < last within the table"
        )
    cumulative = np.concatenate([[0.0], np.cumsum(np.log(n[:-1]))])
    reg = stats.linregress(cumulative[inside], np.log(d[inside]))
    slope = float(reg.slope)
    fit = {
        "first": lo,
        "last": hi,
        "n_generations": int(inside.sum()),
        "exponent": -1.0 / slope if slope < 0 else float("nan"),
        "slope": slope,
        "slope_se": float(reg.stderr),
        "exponent_se": float(reg.stderr) / slope**2 if slope < 0 else float("nan"),
        "r_squared": float(reg.rvalue) ** 2,
    }
    return GenerationExponents(steps=steps, fit=fit)
