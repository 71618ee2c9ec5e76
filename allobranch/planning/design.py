"""A study design and :func:`simulate`, which draws junction tables from it with known truth.

The tables come from the package's one generator, :func:`allobranch.model.simulate.simulate_junctions`
(the one the benchmarks use): exponents drawn down the hierarchy (population, taxon, specimen), true
daughters from a split of the parent's ``a``-th power (:data:`~allobranch.model.simulate.SPLITS`), the true
parent deviating from the law on the log scale, and readings with relative (log-normal) or absolute
(normal) error. :class:`Design` names those choices in the words of a study plan and checks them.
"""

from __future__ import annotations

from dataclasses import asdict, dataclass, field, fields, replace
from typing import Any

import pandas as pd

from allobranch.errors import InputError
from allobranch.intake.mapping import ColumnMapping
from allobranch.intake.table import JunctionTable
from allobranch.model.simulate import SPLITS, simulate_junctions

#: Kinds of measurement error a design can have: ``relative`` (log-normal, ``error`` is the log-scale SD,
#: e.g. 0.05 for 5 %) or ``absolute`` (normal, ``error`` is the SD in mm; the table gets an SE column).
ERROR_KINDS: tuple[str, ...] = ("relative", "absolute")
#: Design variables a plan can sweep, and whether a larger value costs more (``True``) or less.
SWEEP_VARIABLES: dict[str, bool] = {"taxa": True, "specimens": True, "junctions": True, "error": False}


@dataclass(frozen=True)
class Design:
    """What a simulated study looks like.

    Parameters
    ----------
    taxa : int
        Number of taxa (named ``T1``, ``T2``, ...).
    specimens : int
        Specimens per taxon.
    junctions : int
        Junctions per specimen.
    exponent : float
        True population exponent (``mu``).
    tau_taxon, tau_specimen : float
        True standard deviations of the taxon exponents about ``exponent`` and of the specimen exponents
        about their taxon's.
    sigma_dev : float
        True junction-level deviation of the log parent radius from the law.
    error_kind : {"relative", "absolute"}
        Kind of measurement error (:data:`ERROR_KINDS`); the table states it, so fits treat it as known.
    error : float
        Its size: log-scale SD for ``relative`` (0.05 is 5 %), SD in mm for ``absolute``.
    trifurcations : float
        Share of junctions with three daughters (the rest have two).
    split : str
        How the parent's ``a``-th power is shared among daughters (:data:`~allobranch.model.simulate.SPLITS`).
    split_concentration : float
        Dirichlet concentration of the split (larger is more symmetric), or the SD of the log daughters for
        ``split="lognormal"``.
    size_range : (float, float)
        Range of the parents' radii in mm (drawn log-uniformly).
    """

    taxa: int = 1
    specimens: int = 3
    junctions: int = 30
    exponent: float = 3.0
    tau_taxon: float = 0.0
    tau_specimen: float = 0.05
    sigma_dev: float = 0.03
    error_kind: str = "relative"
    error: float = 0.05
    trifurcations: float = 0.0
    split: str = "dirichlet"
    split_concentration: float = 4.0
    size_range: tuple[float, float] = field(default=(0.05, 2.0))

    def __post_init__(self) -> None:
        object.__setattr__(self, "size_range", tuple(float(v) for v in self.size_range))
        problems = []
        for name in ("taxa", "specimens", "junctions"):
            value = getattr(self, name)
            if isinstance(value, bool) or not float(value).is_integer() or int(value) < 1:
                problems.append(f"{name} must be a whole number of at least 1, got {value!r}")
            else:
                object.__setattr__(self, name, int(value))
        if not 0 < float(self.exponent) < 20:
            problems.append(f"exponent must lie between 0 and 20, got {self.exponent!r}")
        for name in ("tau_taxon", "tau_specimen", "sigma_dev"):
            if not float(getattr(self, name)) >= 0:
                problems.append(f"{name} must be 0 or more, got {getattr(self, name)!r}")
        if self.error_kind not in ERROR_KINDS:
            problems.append(f"error_kind must be one of {', '.join(ERROR_KINDS)}, got {self.error_kind!r}")
        if not float(self.error) > 0:
            problems.append(f"error must be positive (e.g. 0.05 for 5 % relative error), got {self.error!r}")
        if not 0 <= float(self.trifurcations) <= 1:
            problems.append(f"trifurcations is a share between 0 and 1, got {self.trifurcations!r}")
        if self.split not in SPLITS:
            problems.append(f"split must be one of {', '.join(SPLITS)}, got {self.split!r}")
        if not float(self.split_concentration) > 0:
            problems.append(f"split_concentration must be positive, got {self.split_concentration!r}")
        lo, hi = self.size_range if len(self.size_range) == 2 else (0.0, 0.0)
        if not 0 < lo < hi:
            problems.append(f"size_range must be two radii 0 < low < high (mm), got {self.size_range!r}")
        if problems:
            raise InputError("design: " + "; ".join(problems))

    @property
    def n_junctions(self) -> int:
        """Junctions in one simulated table."""
        return self.taxa * self.specimens * self.junctions

    def describe(self) -> str:
        """The design's shape in words, e.g. ``"1 taxon x 3 specimens x 30 junctions"``."""
        words = [
            (self.taxa, "taxon", "taxa"),
            (self.specimens, "specimen", "specimens"),
            (self.junctions, "junction", "junctions"),
        ]
        return " x ".join(f"{n} {one if n == 1 else many}" for n, one, many in words)

    def with_(self, **changes: Any) -> Design:
        """A copy with some fields changed (checked again)."""
        unknown = sorted(set(changes) - {f.name for f in fields(self)})
        if unknown:
            raise InputError(f"design: no field named {', '.join(unknown)}")
        return replace(self, **changes)

    def to_dict(self) -> dict[str, Any]:
        """Plain-dict form (for tables and provenance)."""
        out = asdict(self)
        out["size_range"] = list(self.size_range)
        return out


@dataclass
class Simulation:
    """A table simulated from a design, and the truth behind it.

    Attributes
    ----------
    table : JunctionTable
        The validated table, ready for :func:`allobranch.fit` or :func:`allobranch.compare_laws`.
    truth : dict
        ``mu``, ``tau_taxon``, ``tau_specimen``, ``sigma_dev``, ``rel_error``, ``abs_error`` and
        ``a_taxon`` / ``a_specimen`` (label -> exponent).
    frame : pandas.DataFrame
        The readings as a user's file would hold them (radii in mm; labelled simulated).
    mapping : ColumnMapping
        The mapping that reads ``frame``.
    design : Design
    seed : int
    """

    table: JunctionTable
    truth: dict
    frame: pd.DataFrame
    mapping: ColumnMapping
    design: Design
    seed: int


def simulate(design: Design | None = None, seed: int = 0) -> Simulation:
    """Draw a junction table from a design (simulated data with known truth).

    Parameters
    ----------
    design : Design, optional
        The study design (default ``Design()``: 1 taxon x 3 specimens x 30 junctions, exponent 3, 5 %
        relative error).
    seed : int
        Seed of the random generator: the same design and seed give the same table.

    Returns
    -------
    Simulation
        ``.table`` (validated), ``.truth``, ``.frame``, ``.mapping``.

    Examples
    --------
    >>> import allobranch as ab
    >>> sim = ab.simulate(ab.Design(taxa=2, specimens=2, junctions=10, exponent=2.5), seed=1)
    >>> sim.table.n_junctions
    40
    """
    from allobranch.intake import read_junctions

    design = design if design is not None else Design()
    relative = design.error_kind == "relative"
    data = simulate_junctions(
        taxa=design.taxa,
        specimens_per_taxon=design.specimens,
        junctions_per_specimen=design.junctions,
        mu=float(design.exponent),
        tau_taxon=float(design.tau_taxon),
        tau_specimen=float(design.tau_specimen),
        sigma_dev=float(design.sigma_dev),
        rel_error=float(design.error) if relative else 0.0,
        abs_error=0.0 if relative else float(design.error),
        trifurcation_share=float(design.trifurcations),
        parent_range=design.size_range,
        split_concentration=float(design.split_concentration),
        split=design.split,
        seed=int(seed),
    )
    table = read_junctions(data.frame, data.mapping)
    return Simulation(table, data.truth, data.frame, data.mapping, design, int(seed))
