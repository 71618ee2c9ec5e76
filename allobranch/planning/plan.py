"""How often a study design reaches each verdict: repeated simulate -> fit -> compare.

For every design point (one design, or one value of a swept design variable) and every replicate, a table
is simulated from the design (:func:`allobranch.planning.design.simulate`), the free model and the point
laws -- the design's true exponent and one or more alternatives -- are fitted and compared with
:func:`allobranch.compare_laws`, and the verdict of the population scope (every taxon shares the law's
exponent) is classed as

``right``
    the law at the true exponent;
``other``
    an alternative law;
``none``
    none of the laws (strong evidence against each);
``undecided``
    anything else.

The verdict is the comparison's own rule (:mod:`allobranch.comparison.verdict`); the plan only counts. The
interval width is that of the free model's HDI of the population exponent. Replicate ``r`` has the same
seed at every design point (common random numbers), so differences between points are not blurred by
different random draws more than the designs themselves require.

ROPE half-width: unless given, half the gap between the true exponent and the nearest alternative (at
most the comparison's default), so the laws' regions of practical equivalence touch but never overlap and a
verdict between them is possible (:mod:`allobranch.comparison.rope`).
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass, field
from typing import Any

import numpy as np
import pandas as pd

from allobranch.comparison.jobs import POPULATION_SCOPE
from allobranch.comparison.laws import Law
from allobranch.comparison.rope import DEFAULT_DELTA, check_delta
from allobranch.comparison.verdict import NONE, UNDECIDED
from allobranch.conventions import HDI_PROB
from allobranch.engine import Engine, derived_seed
from allobranch.errors import InputError
from allobranch.model.spec import ModelSpec
from allobranch.planning.design import SWEEP_VARIABLES, Design, simulate
from allobranch.planning.replicates import failed_section, run_replicates
from allobranch.planning.settings import StudyFits, describe_fits, study_options

#: Classes of a replicate's verdict, in the order of the tables.
OUTCOMES: tuple[str, ...] = ("right", "other", "none", "undecided")
#: Label of the law at the design's true exponent in each replicate's comparison.
TRUE_LAW = "truth"
#: Default probability of a right verdict a design should reach.
DEFAULT_TARGET = 0.8
#: Confidence level of the intervals of the estimated probabilities (Clopper-Pearson, scipy).
CI_LEVEL = 0.95
#: Columns of :attr:`PlanResult.replicates`.
REPLICATE_COLUMNS: tuple[str, ...] = (
    "point",
    "replicate",
    "seed",
    "status",
    "verdict",
    "outcome",
    "mean",
    "sd",
    "hdi_low",
    "hdi_high",
    "width",
    "covered",
    "p_rope_truth",
    "divergences",
    "max_r_hat",
    "error",
)


@dataclass(frozen=True)
class Sweep:
    """One design variable and the values a plan tries.

    Parameters
    ----------
    variable : str
        One of :data:`~allobranch.planning.design.SWEEP_VARIABLES`.
    values : sequence of number
        Values to try; they are sorted from the cheapest design to the dearest (fewer taxa, specimens or
        junctions; more error).
    """

    variable: str
    values: tuple[float, ...]

    def __post_init__(self) -> None:
        if self.variable not in SWEEP_VARIABLES:
            raise InputError(
                f"cannot sweep {self.variable!r}: choose one of {', '.join(SWEEP_VARIABLES)} "
                "(e.g. junctions=10,30,100)"
            )
        values = sorted({float(v) for v in self.values}, reverse=not SWEEP_VARIABLES[self.variable])
        if not values:
            raise InputError(f"sweep of {self.variable}: give at least one value")
        object.__setattr__(self, "values", tuple(values))


def parse_sweep(text: str) -> Sweep:
    """Parse ``VARIABLE=V1,V2,...`` (e.g. ``junctions=10,30,100``).

    Raises
    ------
    InputError
        When the text is not of that form or a value is not a number.
    """
    name, sep, rest = text.partition("=")
    try:
        values = [float(v) for v in rest.split(",") if v.strip()]
    except ValueError:
        values = []
    if not sep or not values:
        raise InputError(
            f"sweep {text!r}: write VARIABLE=V1,V2,... with VARIABLE one of {', '.join(SWEEP_VARIABLES)} "
            "(e.g. junctions=10,30,100)"
        )
    return Sweep(name.strip(), tuple(values))


@dataclass(frozen=True)
class PlanJob:
    """One replicate of one design point: a plain, picklable description (see :mod:`allobranch.engine`)."""

    point: int
    replicate: int
    seed: int
    design: Design
    laws: tuple[Law, ...]
    delta: float
    fits: StudyFits

    @property
    def key(self) -> tuple[int, int]:
        return (self.point, self.replicate)


def alternative_laws(exponent: float, alternatives: Sequence[float]) -> tuple[Law, ...]:
    """The compared laws: the true exponent (:data:`TRUE_LAW`) and each alternative.

    Raises
    ------
    InputError
        When no alternative is given or one equals the true exponent.
    """
    alternatives = [float(a) for a in alternatives]
    if not alternatives:
        raise InputError("give at least one alternative exponent to tell the true one from (e.g. 2.7)")
    if any(np.isclose(a, exponent) for a in alternatives):
        raise InputError(f"an alternative equals the true exponent {exponent:g}; give a different value")
    labels = (
        ["alternative"]
        if len(alternatives) == 1
        else [f"alternative{i + 1}" for i in range(len(alternatives))]
    )
    return (Law(TRUE_LAW, float(exponent)), *(Law(label, a) for label, a in zip(labels, alternatives)))


def default_delta(exponent: float, alternatives: Sequence[float]) -> float:
    """Half the gap to the nearest alternative, at most the comparison's default ROPE half-width."""
    gap = min(abs(float(a) - float(exponent)) for a in alternatives)
    return min(DEFAULT_DELTA, gap / 2)


def outcome_of(verdict: str) -> str:
    """The class (:data:`OUTCOMES`) of a population-scope verdict."""
    if verdict == TRUE_LAW:
        return "right"
    if verdict in (NONE, UNDECIDED):
        return verdict
    return "other"


def run_replicate(job: PlanJob) -> list[dict]:
    """Simulate, fit and compare one replicate (a top-level function, so workers can receive it).

    Returns
    -------
    list of dict
        The replicate's row of :attr:`PlanResult.replicates` (one).
    """
    from allobranch.comparison.compare import compare_laws

    sim = simulate(job.design, job.seed)
    result = compare_laws(
        sim.table,
        job.laws,
        delta=job.delta,
        scopes=(POPULATION_SCOPE,),
        seed=job.seed,
        spec=job.fits.spec,
        workers=1,
        progress=False,
        **job.fits.fit_kw,
    )
    verdicts = result.verdicts.set_index("scope")
    verdict = str(verdicts.at[POPULATION_SCOPE, "verdict"])
    free = result.free_fit
    pop = free.exponents(job.fits.hdi_prob).iloc[0]
    truth = float(job.design.exponent)
    evidence = result.evidence
    p_rope = evidence.loc[(evidence["scope"] == POPULATION_SCOPE) & (evidence["law"] == TRUE_LAW), "p_rope"]
    diag = free.diagnostics()
    row = {
        "point": job.point,
        "replicate": job.replicate,
        "seed": job.seed,
        "status": "ok",
        "verdict": verdict,
        "outcome": outcome_of(verdict),
        "mean": float(pop["mean"]),
        "sd": float(pop["sd"]),
        "hdi_low": float(pop["hdi_low"]),
        "hdi_high": float(pop["hdi_high"]),
        "width": float(pop["hdi_high"] - pop["hdi_low"]),
        "covered": bool(pop["hdi_low"] <= truth <= pop["hdi_high"]),
        "p_rope_truth": float(p_rope.iloc[0]),
        "divergences": int(free.sampler_checks()["divergences"]),
        "max_r_hat": float(np.nanmax(diag["r_hat"].to_numpy(dtype=float))) if len(diag) else np.nan,
        "error": "",
    }
    return [row]


def _rate(k: int, n: int) -> tuple[float, float, float]:
    """Share ``k / n`` with its Clopper-Pearson interval (:func:`scipy.stats.binomtest`)."""
    if n == 0:
        return np.nan, np.nan, np.nan
    from scipy import stats

    ci = stats.binomtest(k, n).proportion_ci(confidence_level=CI_LEVEL, method="exact")
    return k / n, float(ci.low), float(ci.high)


def summarise(
    replicates: pd.DataFrame,
    designs: Sequence[Design],
    alternatives: Sequence[float],
    variable: str | None,
    target: float,
) -> pd.DataFrame:
    """One row per design point: verdict probabilities, interval width and whether the target is reached.

    Parameters
    ----------
    replicates : pandas.DataFrame
        :attr:`PlanResult.replicates`.
    designs : sequence of Design
        The design of each point, in order.
    alternatives : sequence of float
    variable : str or None
        The swept variable (None without a sweep).
    target : float
        Probability of a right verdict to reach.

    Returns
    -------
    pandas.DataFrame
        Columns ``point``, ``variable``, ``value``, the design (``taxa``, ``specimens``, ``junctions``,
        ``n_junctions``, ``exponent``, ``alternatives``, ``error_kind``, ``error``), ``replicates``, ``ok``,
        ``failed``, ``p_<outcome>`` for every outcome with ``p_right_low`` / ``p_right_high``
        (Clopper-Pearson), ``mean_width``, ``mean_sd`` (posterior SD of the population exponent),
        ``coverage`` (share of HDIs covering the truth), ``reaches_target`` and ``smallest`` (the cheapest
        point that reaches the target).
    """
    rows = []
    for point, design in enumerate(designs):
        reps = replicates[replicates["point"] == point]
        ok = reps[reps["status"] == "ok"]
        n = len(ok)
        counts = {o: int((ok["outcome"] == o).sum()) for o in OUTCOMES}
        p_right, low, high = _rate(counts["right"], n)
        row = {
            "point": point,
            "variable": variable or "",
            "value": float(getattr(design, variable)) if variable else np.nan,
            "taxa": design.taxa,
            "specimens": design.specimens,
            "junctions": design.junctions,
            "n_junctions": design.n_junctions,
            "exponent": design.exponent,
            "alternatives": ";".join(f"{a:g}" for a in alternatives),
            "error_kind": design.error_kind,
            "error": design.error,
            "replicates": len(reps),
            "ok": n,
            "failed": int((reps["status"] == "failed").sum()),
            "p_right": p_right,
            "p_right_low": low,
            "p_right_high": high,
        }
        row.update({f"p_{o}": counts[o] / n if n else np.nan for o in OUTCOMES[1:]})
        row.update(
            mean_width=float(ok["width"].mean()) if n else np.nan,
            mean_sd=float(ok["sd"].mean()) if n else np.nan,
            coverage=float(ok["covered"].astype(bool).mean()) if n else np.nan,
            reaches_target=bool(n and p_right >= target),
        )
        rows.append(row)
    out = pd.DataFrame(rows)
    reached = out.index[out["reaches_target"]]
    out["smallest"] = False
    if len(reached):
        out.loc[reached[0], "smallest"] = True
    return out


@dataclass
class PlanResult:
    """Verdict probabilities of one or more designs.

    Attributes
    ----------
    points : pandas.DataFrame
        One row per design point (:func:`summarise`); written as ``plan.csv``.
    replicates : pandas.DataFrame
        One row per replicate (:data:`REPLICATE_COLUMNS`); failed replicates have ``status`` ``failed``,
        their seed and the error.
    target : float
    delta : float
        ROPE half-width used.
    settings : dict
        Seed, replicates, sampler settings, laws, sweep.
    """

    points: pd.DataFrame
    replicates: pd.DataFrame
    target: float
    delta: float
    settings: dict = field(default_factory=dict)

    @property
    def smallest(self) -> pd.Series | None:
        """The cheapest design point reaching the target, or None."""
        hit = self.points[self.points["smallest"]]
        return None if hit.empty else hit.iloc[0]

    def to_markdown(self) -> str:
        """A summary: the design, the probabilities per point, the answer and how it was reached."""
        s = self.settings
        d = s["design"]
        laws = ", ".join(f"{lab} (a = {v:g})" for lab, v in s["laws"])
        unit = "log-scale SD" if d["error_kind"] == "relative" else "mm"
        lines = [
            "# Study plan (simulated designs)",
            "",
            f"Design: {Design(**d).describe()}, true "
            f"exponent {d['exponent']:g} (taxon spread {d['tau_taxon']:g}, specimen spread "
            f"{d['tau_specimen']:g}, junction deviation {d['sigma_dev']:g}), {d['error_kind']} error "
            f"{d['error']:g} ({unit}), {d['split']} daughter split, trifurcation share {d['trifurcations']:g}.",
            f"Laws compared in each replicate: {laws}; ROPE half-width {self.delta:g}. {s['replicates']} "
            f"replicates per design point, seed {s['seed']}; {describe_fits(s['sampler'])}.",
            "",
            "## Probability of each verdict (population scope)",
            "",
        ]
        cols = ["value"] if s.get("sweep") else []
        cols += ["n_junctions", "ok", "failed", "p_right", "p_right_low", "p_right_high", "p_other"]
        cols += ["p_none", "p_undecided", "mean_width", "mean_sd", "coverage", "reaches_target"]
        shown = self.points[cols].rename(columns={"value": s["sweep"] or "value"})
        lines += [shown.to_markdown(index=False, floatfmt=".3g"), ""]
        best = self.smallest
        if best is None:
            lines.append(
                f"No design point reached P(right verdict) >= {self.target:g}; try larger designs or less error."
            )
        elif s.get("sweep"):
            lines.append(
                f"Smallest design reaching P(right verdict) >= {self.target:g}: {s['sweep']} = {best['value']:g} "
                f"(P = {best['p_right']:.2f}, {CI_LEVEL:.0%} CI {best['p_right_low']:.2f}-{best['p_right_high']:.2f})."
            )
        else:
            lines.append(
                f"The design reaches P(right verdict) >= {self.target:g} (P = {best['p_right']:.2f})."
            )
        failed = self.replicates[self.replicates["status"] == "failed"]
        lines += [
            "",
            "## How to read it",
            "",
            f"- right: the law at the true exponent was declared; other: an alternative was; none / undecided: "
            f"as in the comparison's rule. Probabilities are shares of the replicates that ran, with "
            f"{CI_LEVEL:.0%} Clopper-Pearson intervals for the right verdict (scipy).",
            "- mean_width: mean width of the free model's "
            f"{s['hdi_prob']:.0%} HDI of the population exponent; mean_sd: its mean posterior SD; coverage: "
            "share of those intervals that contain the true exponent.",
            "- Every replicate's verdict is the law comparison's own conservative rule "
            "(allobranch.comparison.verdict; see `allobranch compare --help` and laws.md of a comparison).",
        ]
        lines += failed_section(failed, lambda r: f"point {int(r.point)}, replicate {int(r.replicate)}")
        return "\n".join(lines) + "\n"


@study_options
def plan_study(
    design: Design,
    alternatives: float | Sequence[float],
    *,
    replicates: int = 20,
    seed: int = 0,
    sweep: Sweep | None = None,
    target: float = DEFAULT_TARGET,
    delta: float | None = None,
    spec: ModelSpec | None = None,
    hdi_prob: float = HDI_PROB,
    engine: Engine | None = None,
    progress: bool = True,
    **fit_kw: Any,
) -> PlanResult:
    """Estimate how often a design (or each point of a sweep) reaches each verdict.

    Parameters
    ----------
    design : Design
        The study design; ``design.exponent`` is the true exponent.
    alternatives : float or sequence of float
        Exponent(s) to tell the true one from (e.g. 2.7 against 3).
    replicates : int
        Simulated tables per design point.
    seed : int
        Seed of the study: replicate ``r`` uses a seed derived from it and ``r``.
    sweep : Sweep, optional
        One design variable and the values to try (:func:`parse_sweep`); without it, only ``design``.
        Replicate ``r`` has the same seed at every value (common random numbers).
    target : float
        Probability of a right verdict a design should reach (between 0 and 1).
    delta : float, optional
        ROPE half-width (default :func:`default_delta`).
    spec : ModelSpec, optional
        The free model's specification (default ``ModelSpec()``).
    hdi_prob : float
        Probability of the reported intervals.
    {study_options}

    Returns
    -------
    PlanResult
        ``.points`` (one row per design point), ``.replicates``, ``.smallest``, ``.to_markdown()``.

    Examples
    --------
    >>> import allobranch as ab                                               # doctest: +SKIP
    >>> from allobranch.planning.plan import plan_study, Sweep
    >>> res = plan_study(ab.Design(specimens=3, junctions=30), 2.7, sweep=Sweep("junctions", (30, 100)))
    >>> res.points[["value", "p_right", "p_undecided"]]
    """
    alternatives = [alternatives] if np.isscalar(alternatives) else list(alternatives)
    laws = alternative_laws(design.exponent, alternatives)
    try:
        delta = check_delta(default_delta(design.exponent, alternatives) if delta is None else delta)
    except ValueError as exc:
        raise InputError(str(exc)) from None
    if int(replicates) < 1:
        raise InputError(f"replicates must be at least 1, got {replicates!r}")
    if not 0 < float(target) < 1:
        raise InputError(f"target must lie strictly between 0 and 1, got {target!r}")
    spec = spec or ModelSpec()
    if spec.fixed_exponent is not None or spec.fixed_taxa:
        raise InputError("spec must describe the free model: leave fixed_exponent and fixed_taxa empty")
    if sweep is not None:
        cast = float if sweep.variable == "error" else int
        designs = [design.with_(**{sweep.variable: cast(v)}) for v in sweep.values]
    else:
        designs = [design]
    fits = StudyFits.of(spec, hdi_prob, fit_kw)
    jobs = [
        PlanJob(p, r, derived_seed(seed, r), d, laws, delta, fits)
        for p, d in enumerate(designs)
        for r in range(int(replicates))
    ]
    table, _ = run_replicates(
        run_replicate,
        jobs,
        engine,
        REPLICATE_COLUMNS,
        key_columns=("point", "replicate"),
        blank=("verdict", "outcome"),
        label="plan",
        progress=progress,
        describe=lambda job: f"point {job.point + 1}/{len(designs)}, replicate {job.replicate + 1}",
    )
    variable = sweep.variable if sweep is not None else None
    points = summarise(table, designs, alternatives, variable, float(target))
    settings = {
        "design": design.to_dict(),
        "laws": [(law.label, law.value) for law in laws],
        "replicates": int(replicates),
        "seed": int(seed),
        "sweep": variable,
        **fits.to_dict(),
    }
    return PlanResult(points=points, replicates=table, target=float(target), delta=delta, settings=settings)
