"""Simulation-based calibration (SBC) of a model specification on a study design.

Procedure (Talts, Betancourt, Simpson, Vehtari & Gelman 2018, arXiv:1804.06788): for each replicate, draw
the hyper-parameters from the model's own priors, simulate a table from them with the design, fit it, and
record the rank of every true value among thinned posterior draws. If the model, its approximations and the
sampler are right, every rank is uniform on ``0 .. L`` (``L`` thinned draws), so rank histograms are flat
and intervals cover the truth as often as their probability says.

What is drawn: the population exponent ``mu ~ Normal(mu_mean, mu_sd)``; the taxon and specimen spreads
from their half-normal priors when the model has those levels (0 otherwise); the junction deviation
``sigma_dev`` from its half-normal prior. The measurement error is the design's, stated in the table (so
the fit treats it as known), and the daughters' split is the design's -- a Dirichlet split, the realistic
default, is *not* the model's Gaussian asymmetry assumption, so this checks the practical pipeline, where
uniform ranks hold to a good approximation rather than exactly.

Ranks use :data:`RANK_DRAWS` draws spread evenly over all chains (thinning keeps autocorrelation from
distorting them; Talts et al., section 5). Uniformity is tested per quantity with a chi-square test over
equal-probability bins (:func:`scipy.stats.chisquare`) with at least :data:`MIN_EXPECTED` replicates
expected per bin (common practice, no single source); interval coverage with an exact binomial test
(:func:`scipy.stats.binomtest`). Taxon exponents of one replicate share ``mu``, so pooling them makes their
tests somewhat optimistic.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass, field
from types import SimpleNamespace
from typing import Any

import numpy as np
import pandas as pd

from allobranch.conventions import HDI_PROB
from allobranch.engine import Engine, JobsFailed, derived_seed
from allobranch.errors import InputError
from allobranch.model.spec import ModelSpec, Priors
from allobranch.model.structure import resolve_levels
from allobranch.planning.design import Design, Simulation, simulate
from allobranch.planning.replicates import failed_section, run_replicates
from allobranch.planning.settings import StudyFits, describe_fits, study_options

#: Thinned posterior draws each true value is ranked among (ranks run 0 .. RANK_DRAWS, so RANK_DRAWS + 1
#: = 100 possible ranks split evenly into 2, 4, 5, 10 or 20 bins).
RANK_DRAWS = 99
#: Bin counts a uniformity test may use (each divides the RANK_DRAWS + 1 possible ranks evenly).
BIN_CHOICES: tuple[int, ...] = (20, 10, 5, 4, 2)
#: Least expected replicates per bin of the chi-square test (common practice, no single source).
MIN_EXPECTED = 5
#: Probability of the band drawn around a flat rank histogram (binomial quantiles, scipy).
BAND = 0.99
#: Quantities whose calibration is checked, in the order of the tables (only those the model has).
QUANTITIES: tuple[str, ...] = ("mu", "a_taxon", "tau_taxon", "tau_specimen", "sigma_dev")
#: Columns of :attr:`CalibrationResult.ranks`.
RANK_COLUMNS: tuple[str, ...] = (
    "replicate",
    "seed",
    "status",
    "quantity",
    "group",
    "truth",
    "rank",
    "n_draws",
    "mean",
    "hdi_low",
    "hdi_high",
    "covered",
    "r_hat",
    "ess_bulk",
    "divergences",
    "error",
)

#: A table generator: ``generator(design, seed) -> Simulation`` (default :func:`simulate`).
Generator = Callable[[Design, int], Simulation]


@dataclass(frozen=True)
class CalibrationJob:
    """One replicate: a plain, picklable description (see :mod:`allobranch.engine`)."""

    replicate: int
    seed: int
    design: Design
    fits: StudyFits
    generator: Generator | None = None

    @property
    def key(self) -> tuple[int]:
        return (self.replicate,)


def model_levels(design: Design, spec: ModelSpec) -> tuple[bool, bool]:
    """Whether the fitted model has a taxon and a specimen level for tables of this design."""
    shape = SimpleNamespace(taxa=range(design.taxa), specimens=range(design.taxa * design.specimens))
    return resolve_levels(shape, spec)


def draw_truth(priors: Priors, levels: tuple[bool, bool], rng: np.random.Generator) -> dict[str, float]:
    """Hyper-parameters drawn from the priors (a half-normal draw is the absolute value of a normal one).

    Parameters
    ----------
    priors : Priors
    levels : (bool, bool)
        Whether the model has a taxon and a specimen level (a spread without its level is 0).
    rng : numpy.random.Generator

    Returns
    -------
    dict
        ``mu``, ``tau_taxon``, ``tau_specimen``, ``sigma_dev``.
    """
    mu = float(rng.normal(priors.mu_mean, priors.mu_sd))
    tau_taxon = float(abs(rng.normal(0.0, priors.tau_taxon)))
    tau_specimen = float(abs(rng.normal(0.0, priors.tau_specimen)))
    sigma_dev = float(abs(rng.normal(0.0, priors.sigma_dev)))
    return {
        "mu": mu,
        "tau_taxon": tau_taxon if levels[0] else 0.0,
        "tau_specimen": tau_specimen if levels[1] else 0.0,
        "sigma_dev": sigma_dev,
    }


def thinned(draws: np.ndarray, n: int = RANK_DRAWS) -> np.ndarray:
    """``n`` draws spread evenly over all chains of ``draws`` (shape chain, draw)."""
    flat = np.asarray(draws, dtype=float).reshape(-1)
    return flat[np.linspace(0, flat.size - 1, n).round().astype(int)]


def _targets(post, truth: dict, hyper: dict) -> list[tuple[str, str, np.ndarray, float]]:
    """(quantity, group, draws, true value) of every checked quantity the posterior has."""
    out = [("mu", "all", post["mu"].values, hyper["mu"])]
    if hyper["tau_taxon"] > 0 and "tau_taxon" in post:
        for i, taxon in enumerate(post["taxon"].values):
            out.append(("a_taxon", str(taxon), post["a_taxon"].values[:, :, i], truth["a_taxon"][str(taxon)]))
    for name in ("tau_taxon", "tau_specimen"):
        if name in post and hyper[name] > 0:
            out.append((name, "all", post[name].values, hyper[name]))
    out.append(("sigma_dev", "all", post["sigma_dev"].values, hyper["sigma_dev"]))
    return out


def run_replicate(job: CalibrationJob) -> list[dict]:
    """Draw the truth, simulate, fit and rank one replicate (a top-level function, so workers receive it).

    Returns
    -------
    list of dict
        One row of :attr:`CalibrationResult.ranks` per checked quantity and group.
    """
    import arviz as az

    from allobranch.inference.fit import fit

    rng = np.random.default_rng([job.seed, 1])
    spec = job.fits.spec
    hyper = draw_truth(spec.priors, model_levels(job.design, spec), rng)
    design = job.design.with_(
        exponent=hyper["mu"],
        tau_taxon=hyper["tau_taxon"],
        tau_specimen=hyper["tau_specimen"],
        sigma_dev=hyper["sigma_dev"],
    )
    sim = (job.generator or simulate)(design, job.seed)
    result = fit(sim.table, spec, seed=job.seed, progress=False, **job.fits.fit_kw)
    post = result.idata.posterior
    divergences = int(result.sampler_checks()["divergences"])
    rows = []
    for name, group, draws, value in _targets(post, sim.truth, hyper):
        kept = thinned(draws)
        lo, hi = az.hdi(draws.reshape(-1), hdi_prob=job.fits.hdi_prob)  # ArviZ HDI
        rows.append(
            {
                "replicate": job.replicate,
                "seed": job.seed,
                "status": "ok",
                "quantity": name,
                "group": group,
                "truth": float(value),
                "rank": int(np.sum(kept < value)),
                "n_draws": kept.size,
                "mean": float(draws.mean()),
                "hdi_low": float(lo),
                "hdi_high": float(hi),
                "covered": bool(lo <= value <= hi),
                "r_hat": float(az.rhat(draws)),
                "ess_bulk": float(az.ess(draws, method="bulk")),
                "divergences": divergences,
                "error": "",
            }
        )
    return rows


def n_bins(n: int) -> int:
    """Bins of the uniformity test for ``n`` ranks: the most of :data:`BIN_CHOICES` with at least
    :data:`MIN_EXPECTED` expected per bin (at least 2)."""
    return next((b for b in BIN_CHOICES if n / b >= MIN_EXPECTED), BIN_CHOICES[-1])


def rank_histogram(ranks: pd.DataFrame) -> pd.DataFrame:
    """Counts of ranks per bin and quantity, with the expected count and the band of a flat histogram.

    Parameters
    ----------
    ranks : pandas.DataFrame
        :attr:`CalibrationResult.ranks`.

    Returns
    -------
    pandas.DataFrame
        Columns ``quantity``, ``bin``, ``rank_low``, ``rank_high`` (ranks in the bin, inclusive), ``count``,
        ``expected``, ``band_low``, ``band_high`` (the central :data:`BAND` range of a bin's count when
        ranks are uniform: binomial quantiles, :func:`scipy.stats.binom.ppf`).
    """
    from scipy import stats

    ok = ranks[ranks["status"] == "ok"]
    rows = []
    for q in [q for q in QUANTITIES if q in set(ok["quantity"])]:
        r = ok.loc[ok["quantity"] == q, "rank"].to_numpy(dtype=int)
        bins = n_bins(len(r))
        width = (RANK_DRAWS + 1) // bins
        counts = np.bincount(r // width, minlength=bins)
        lo, hi = stats.binom.ppf([(1 - BAND) / 2, (1 + BAND) / 2], len(r), 1 / bins)
        for b in range(bins):
            rows.append(
                {
                    "quantity": q,
                    "bin": b,
                    "rank_low": b * width,
                    "rank_high": (b + 1) * width - 1,
                    "count": int(counts[b]),
                    "expected": len(r) / bins,
                    "band_low": float(lo),
                    "band_high": float(hi),
                }
            )
    return pd.DataFrame(
        rows,
        columns=["quantity", "bin", "rank_low", "rank_high", "count", "expected", "band_low", "band_high"],
    )


def uniformity(ranks: pd.DataFrame, hdi_prob: float) -> pd.DataFrame:
    """Per quantity: chi-square test of uniform ranks and coverage of the intervals.

    Parameters
    ----------
    ranks : pandas.DataFrame
        :attr:`CalibrationResult.ranks`.
    hdi_prob : float
        Probability of the intervals (the coverage they should reach).

    Returns
    -------
    pandas.DataFrame
        Columns ``quantity``, ``n``, ``bins``, ``chi2``, ``chi2_p`` (:func:`scipy.stats.chisquare` against
        equal counts), ``mean_rank_fraction`` (0.5 when centred; below 0.5 the posteriors sit above the
        truth), ``covered``, ``coverage``, ``coverage_low`` / ``coverage_high`` (Clopper-Pearson 95 %) and
        ``coverage_p`` (exact binomial test against ``hdi_prob``).
    """
    from scipy import stats

    hist = rank_histogram(ranks)
    ok = ranks[ranks["status"] == "ok"]
    rows = []
    for q, h in hist.groupby("quantity", sort=False):
        g = ok[ok["quantity"] == q]
        chi = stats.chisquare(h["count"].to_numpy())
        k, n = int(g["covered"].astype(bool).sum()), len(g)
        test = stats.binomtest(k, n, p=hdi_prob)
        ci = test.proportion_ci(confidence_level=0.95, method="exact")
        rows.append(
            {
                "quantity": q,
                "n": n,
                "bins": len(h),
                "chi2": float(chi.statistic),
                "chi2_p": float(chi.pvalue),
                "mean_rank_fraction": float((g["rank"] / g["n_draws"]).mean()),
                "covered": k,
                "coverage": k / n,
                "coverage_low": float(ci.low),
                "coverage_high": float(ci.high),
                "coverage_p": float(test.pvalue),
            }
        )
    return pd.DataFrame(rows)


@dataclass
class CalibrationResult:
    """Ranks of the true values, their histograms and the uniformity and coverage tests.

    Attributes
    ----------
    ranks : pandas.DataFrame
        One row per replicate, quantity and group (:data:`RANK_COLUMNS`); a failed replicate has one row
        with ``status`` ``failed``, its seed and the error.
    summary : pandas.DataFrame
        :func:`uniformity`.
    histogram : pandas.DataFrame
        :func:`rank_histogram` (what the rank-histogram figure draws).
    settings : dict
    """

    ranks: pd.DataFrame
    summary: pd.DataFrame
    histogram: pd.DataFrame
    settings: dict = field(default_factory=dict)

    def to_markdown(self) -> str:
        """A report: the design, the tests per quantity, how to read them, failed replicates."""
        s, d = self.settings, self.settings["design"]
        p = s["spec"]["priors"]
        ok = self.ranks[self.ranks["status"] == "ok"]
        per = ok.drop_duplicates("replicate")
        failed = self.ranks[self.ranks["status"] == "failed"]
        lines = [
            "# Simulation-based calibration (simulated designs)",
            "",
            f"Design: {Design(**d).describe()}, "
            f"{d['error_kind']} error {d['error']:g}, {d['split']} daughter split, trifurcation share "
            f"{d['trifurcations']:g}. Truth drawn from the fitting priors: mu ~ Normal({p['mu_mean']:g}, "
            f"{p['mu_sd']:g}), tau_taxon ~ HalfNormal({p['tau_taxon']:g}), tau_specimen ~ "
            f"HalfNormal({p['tau_specimen']:g}), sigma_dev ~ HalfNormal({p['sigma_dev']:g}) (a spread whose "
            "level the model lacks is 0).",
            f"{s['replicates']} replicates, seed {s['seed']}; {describe_fits(s['sampler'])}; ranks among "
            f"{RANK_DRAWS} thinned draws; {s['hdi_prob']:.0%} HDI coverage.",
            "",
            "| quantity | n | chi-square p (bins) | mean rank fraction | coverage | 95 % CI | binomial p |",
            "|---|---|---|---|---|---|---|",
        ]
        for r in self.summary.itertuples():
            lines.append(
                f"| {r.quantity} | {r.n} | {r.chi2_p:.3f} ({r.bins}) | {r.mean_rank_fraction:.3f} | "
                f"{r.covered}/{r.n} ({r.coverage:.1%}) | {r.coverage_low:.1%}-{r.coverage_high:.1%} | "
                f"{r.coverage_p:.3f} |"
            )
        lines += [
            "",
            f"Divergent transitions: {int(per['divergences'].sum())} in total, in "
            f"{int((per['divergences'] > 0).sum())} of {len(per)} fits; largest R-hat of a checked quantity "
            f"{ok['r_hat'].max():.3f}; smallest bulk ESS {ok['ess_bulk'].min():.0f}.",
            "",
            "How to read it: if the model and sampler are calibrated for this design, ranks are uniform (chi-square "
            "p not small; flat histograms within the grey band, which holds 99 % of a flat histogram's bins) and "
            "coverage matches the interval probability. A mean rank fraction below 0.5 means posteriors tend to "
            "sit above the truth (above 0.5: below it); a U shape means intervals too narrow, a hump too wide. "
            "Taxon exponents of one replicate share mu, so their pooled tests are somewhat optimistic.",
        ]
        lines += failed_section(failed, lambda r: f"replicate {int(r.replicate)}")
        return "\n".join(lines) + "\n"


@study_options
def calibrate(
    design: Design,
    spec: ModelSpec | None = None,
    *,
    replicates: int = 100,
    seed: int = 0,
    hdi_prob: float = HDI_PROB,
    generator: Generator | None = None,
    engine: Engine | None = None,
    progress: bool = True,
    **fit_kw: Any,
) -> CalibrationResult:
    """Simulation-based calibration of a model specification on a design.

    Parameters
    ----------
    design : Design
        Shape of the simulated tables, their measurement error and daughter split; its exponent and spreads
        are replaced by draws from the priors.
    spec : ModelSpec, optional
        The model to check (its priors are the ones drawn from); default ``ModelSpec()``.
    replicates : int
        Simulated tables (each fitted once).
    seed : int
        Seed of the study; replicate ``r`` uses a seed derived from it and ``r``.
    hdi_prob : float
        Probability of the intervals whose coverage is checked.
    generator : callable, optional
        ``generator(design, seed) -> Simulation`` drawing each table (default :func:`simulate`); a
        top-level function when the jobs run in other processes.
    {study_options}

    Returns
    -------
    CalibrationResult

    Raises
    ------
    InputError
        For a model with a fixed exponent or other than normal deviations, fewer than 2 replicates, or
        ``chains * draws`` below :data:`RANK_DRAWS` (the draws each truth is ranked among).
    JobsFailed
        When every replicate failed.
    """
    spec = spec or ModelSpec()
    if spec.fixed_exponent is not None or spec.fixed_taxa:
        raise InputError("calibrate checks the free model: leave fixed_exponent and fixed_taxa empty")
    if spec.deviation != "normal":
        raise InputError(
            "calibrate simulates normal junction deviations, so it checks deviation='normal' only; "
            "use --deviation normal"
        )
    if int(replicates) < 2:
        raise InputError(f"replicates must be at least 2, got {replicates!r}")
    fits = StudyFits.of(spec, hdi_prob, fit_kw)
    sampler_kw = fits.fit_kw
    if sampler_kw["chains"] * sampler_kw["draws"] < RANK_DRAWS:
        raise InputError(
            f"calibration ranks each truth among {RANK_DRAWS} posterior draws: give chains x draws >= "
            f"{RANK_DRAWS} (got {sampler_kw['chains']} x {sampler_kw['draws']})"
        )
    jobs = [CalibrationJob(r, derived_seed(seed, r), design, fits, generator) for r in range(int(replicates))]
    ranks, failed = run_replicates(
        run_replicate,
        jobs,
        engine,
        RANK_COLUMNS,
        key_columns=("replicate",),
        blank=("quantity", "group"),
        label="calibrate",
        progress=progress,
        describe=lambda job: f"replicate {job.replicate + 1}",
    )
    if len(failed) == len(jobs):
        raise JobsFailed(failed)
    settings = {
        "design": design.to_dict(),
        "replicates": int(replicates),
        "seed": int(seed),
        **fits.to_dict(),
    }
    return CalibrationResult(
        ranks=ranks,
        summary=uniformity(ranks, float(hdi_prob)),
        histogram=rank_histogram(ranks),
        settings=settings,
    )
