"""Simulate junction tables with known truth (for recovery and calibration studies and the demo data).

The generative process mirrors the model: exponents drawn down the hierarchy, true daughter radii from a
split of the parent's ``a``-th power, the true parent deviating from the law on the log scale, and
readings with relative (log-normal) and/or absolute (normal) error.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from allobranch.intake.mapping import ColumnMapping

#: Kinds of daughter split the simulator knows (see :func:`simulate_junctions`).
SPLITS: tuple[str, ...] = ("dirichlet", "uniform", "lognormal", "side_branch")


@dataclass
class SimulatedData:
    """A simulated junction table and the truth behind it.

    Attributes
    ----------
    frame : pandas.DataFrame
        Columns ``taxon``, ``specimen``, ``junction``, ``parent``, ``d1``, ``d2`` (and ``d3`` when there are
        trifurcations, NaN for bifurcations), plus ``se`` when an absolute error was simulated; radii in mm.
    truth : dict
        ``mu``, ``tau_taxon``, ``tau_specimen``, ``sigma_dev``, ``rel_error``, ``abs_error`` and
        ``a_taxon`` / ``a_specimen`` (dicts label -> exponent).
    true_radii : pandas.DataFrame
        The error-free radii, same layout as ``frame``.
    mapping : ColumnMapping
        A mapping that reads ``frame``.
    """

    frame: pd.DataFrame
    truth: dict
    true_radii: pd.DataFrame
    mapping: ColumnMapping = field(default=None)  # type: ignore[assignment]


def _per_group(value: int | Sequence[int], n: int, what: str) -> list[int]:
    if isinstance(value, (int, np.integer)):
        return [int(value)] * n
    out = [int(v) for v in value]
    if len(out) != n:
        raise ValueError(f"{what}: expected {n} values, got {len(out)}")
    return out


def simulate_junctions(
    *,
    taxa: int | Sequence[str] = 3,
    specimens_per_taxon: int | Sequence[int] = 3,
    junctions_per_specimen: int | Sequence[int] = 30,
    mu: float = 2.5,
    tau_taxon: float = 0.3,
    tau_specimen: float = 0.1,
    taxon_exponents: Mapping[str, float] | None = None,
    sigma_dev: float = 0.03,
    rel_error: float = 0.05,
    abs_error: float = 0.0,
    trifurcation_share: float = 0.0,
    parent_range: tuple[float, float] = (0.05, 2.0),
    split_concentration: float = 4.0,
    split: str = "dirichlet",
    exponent_slope: float | Mapping[str, float] = 0.0,
    slope_reference: float = 1.0,
    seed: int | None = 0,
) -> SimulatedData:
    """Simulate a junction table from the hierarchical branching model.

    Parameters
    ----------
    taxa : int or sequence of str
        Number of taxa (named ``T1``...) or their names.
    specimens_per_taxon : int or sequence of int
        Specimens in each taxon (unbalanced designs: one value per taxon).
    junctions_per_specimen : int or sequence of int
        Junctions in each specimen: one value for all, or one per specimen in taxon order.
    mu, tau_taxon, tau_specimen : float
        Population exponent and the between-taxon / between-specimen standard deviations.
    taxon_exponents : mapping, optional
        Fix the taxon exponents instead of drawing them (``mu`` and ``tau_taxon`` are then ignored).
    sigma_dev : float
        Junction-level biological deviation of the true log parent radius from the law.
    rel_error : float
        Relative measurement error (log-scale standard deviation) of every reading.
    abs_error : float
        Absolute standard error (mm) of every reading; written to column ``se`` when positive.
    trifurcation_share : float
        Share of junctions with three daughters.
    parent_range : (float, float)
        Range of nominal parent radii (mm), drawn log-uniformly.
    split_concentration : float
        Dirichlet concentration of how the parent's ``a``-th power splits among daughters (larger is more
        symmetric; ``split="dirichlet"``), or the SD of the log daughters about their mean
        (``split="lognormal"``, where values near 0.1-0.5 are realistic).
    split : {"dirichlet", "uniform", "lognormal", "side_branch"}
        How the parent's ``a``-th power is shared among the daughters (:data:`SPLITS`): a Dirichlet of the
        given concentration; a uniform fraction (Dirichlet with concentration 1); log-normal daughters
        about their junction mean (the model's own assumption), rescaled to obey the law; or one daughter
        continuing with most of the power (a share from Beta(8, 2)) and the others as side branches.
    exponent_slope : float or mapping of str to float
        Change of a junction's exponent per tenfold larger parent (one value, or one per taxon name; taxa
        not named have none): the exponent at a junction whose true
        parent radius is ``r`` is ``a_specimen + exponent_slope * log10(r / slope_reference)``, so the
        specimen exponents hold at ``slope_reference`` (mm).
    slope_reference : float
        Parent radius (mm) at which the specimen exponents hold when ``exponent_slope`` is not 0.
    seed : int or None
        Seed of the random generator; the same seed gives the same table.

    Returns
    -------
    SimulatedData
    """
    if split not in SPLITS:
        raise ValueError(f"split must be one of {', '.join(SPLITS)}; got {split!r}")
    rng = np.random.default_rng(seed)
    names = (
        [f"T{i + 1}" for i in range(taxa)] if isinstance(taxa, (int, np.integer)) else [str(t) for t in taxa]
    )
    n_specimens = _per_group(specimens_per_taxon, len(names), "specimens_per_taxon")
    if taxon_exponents is not None:
        a_taxon = {t: float(taxon_exponents[t]) for t in names}
    else:
        a_taxon = {t: float(mu + tau_taxon * rng.standard_normal()) for t in names}
    specimen_labels = [(t, f"{t}-S{j + 1}") for t, k in zip(names, n_specimens) for j in range(k)]
    n_junc = _per_group(junctions_per_specimen, len(specimen_labels), "junctions_per_specimen")
    a_specimen = {s: float(a_taxon[t] + tau_specimen * rng.standard_normal()) for t, s in specimen_labels}

    if isinstance(exponent_slope, Mapping):
        unknown = set(map(str, exponent_slope)) - set(names)
        if unknown:
            raise ValueError(f"exponent_slope names unknown taxa: {', '.join(sorted(unknown))}")
        slopes = {t: float(exponent_slope.get(t, 0.0)) for t in names}
    else:
        slopes = dict.fromkeys(names, float(exponent_slope))
    rows, true_rows = [], []
    for (taxon, specimen), n in zip(specimen_labels, n_junc):
        a = a_specimen[specimen]
        lo, hi = np.log(parent_range[0]), np.log(parent_range[1])
        nominal = np.exp(rng.uniform(lo, hi, size=n))
        k = np.where(rng.uniform(size=n) < trifurcation_share, 3, 2)
        for j in range(n):
            a_j = a + slopes[taxon] * np.log10(nominal[j] / slope_reference)
            r_true_d = nominal[j] * _shares(split, int(k[j]), split_concentration, a_j, rng) ** (1.0 / a_j)
            r_true_p = nominal[j] * np.exp(sigma_dev * rng.standard_normal())
            true_vals = np.concatenate([[r_true_p], r_true_d])
            obs = _observe(true_vals, rel_error, abs_error, rng)
            pad = [np.nan] * (3 - k[j]) if trifurcation_share > 0 else []
            base = {"taxon": taxon, "specimen": specimen, "junction": f"J{j + 1:03d}"}
            rows.append({**base, **dict(zip(["parent", "d1", "d2", "d3"], [*obs, *pad]))})
            true_rows.append({**base, **dict(zip(["parent", "d1", "d2", "d3"], [*true_vals, *pad]))})
    frame = pd.DataFrame(rows)
    if abs_error > 0:
        frame["se"] = abs_error
    daughters = ("d1", "d2", "d3") if trifurcation_share > 0 else ("d1", "d2")
    mapping = ColumnMapping(
        parent="parent",
        daughters=daughters,
        taxon="taxon",
        specimen="specimen",
        junction="junction",
        measure="radius",
        unit="mm",
        rel_error=rel_error if rel_error > 0 else None,
        se=("se",) if abs_error > 0 else (),
    )
    truth = {
        "mu": float(mu) if taxon_exponents is None else float(np.mean(list(a_taxon.values()))),
        "tau_taxon": float(tau_taxon),
        "tau_specimen": float(tau_specimen),
        "sigma_dev": float(sigma_dev),
        "rel_error": float(rel_error),
        "abs_error": float(abs_error),
        "a_taxon": a_taxon,
        "a_specimen": a_specimen,
        "exponent_slope": slopes,
        "slope_reference": float(slope_reference),
    }
    return SimulatedData(frame=frame, truth=truth, true_radii=pd.DataFrame(true_rows), mapping=mapping)


def _shares(kind: str, k: int, concentration: float, a: float, rng: np.random.Generator) -> np.ndarray:
    """Shares of the parent's ``a``-th power among ``k`` daughters (they sum to one, exact algebra)."""
    if kind == "dirichlet":
        return rng.dirichlet(np.full(k, concentration))
    if kind == "uniform":
        return rng.dirichlet(np.ones(k))
    if kind == "lognormal":
        powers = np.exp(a * concentration * rng.standard_normal(k))
        return powers / powers.sum()
    main = rng.beta(8.0, 2.0)  # side_branch: one daughter continues with most of the power
    rest = (1.0 - main) * rng.dirichlet(np.full(k - 1, 4.0))
    return rng.permutation(np.concatenate([[main], rest]))


def _observe(
    true_vals: np.ndarray, rel_error: float, abs_error: float, rng: np.random.Generator
) -> np.ndarray:
    """Readings of true radii with relative and absolute error, redrawn until positive."""
    out = true_vals * np.exp(rel_error * rng.standard_normal(true_vals.shape))
    if abs_error > 0:
        clean = out.copy()
        out = clean + abs_error * rng.standard_normal(true_vals.shape)
        for _ in range(100):
            bad = out <= 0
            if not bad.any():
                break
            out[bad] = clean[bad] + abs_error * rng.standard_normal(int(bad.sum()))
        else:  # pragma: no cover - only with absurd abs_error
            raise ValueError("abs_error is too large for the simulated radii")
    return out
