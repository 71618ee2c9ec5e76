"""Simulation-based calibration (SBC) and interval coverage of the default fast form.

Procedure (Talts et al. 2018, arXiv:1804.06788): draw the hyper-parameters from the prior, simulate a
table from them, fit it, and record the rank of every true value among thinned posterior draws. If the
model, its approximations and the sampler are right, ranks are uniform and 90 % intervals cover the truth
90 % of the time. The loop is the library's own (:func:`allobranch.planning.calibrate.calibrate`, also
behind ``allobranch calibrate``): every replicate is an ordinary :func:`allobranch.fit` on the default
sampling route, and the replicates run on local worker processes (or a Dask cluster with ``--scheduler``).

Design, and why:

* Priors. The package defaults (``mu ~ Normal(2.5, 1)``, ``tau_taxon ~ HalfNormal(0.5)``, ...) put real
  mass on exponents below 1 and near 0, where simulated trees degenerate (daughters vanishingly small).
  The calibration therefore uses narrower priors, **both to draw the truth and to fit**:
  :data:`SBC_PRIORS` (``mu ~ Normal(2.5, 0.4)``, ``tau_taxon ~ HalfNormal(0.3)``, ``tau_specimen ~
  HalfNormal(0.1)``, ``sigma_dev ~ HalfNormal(0.05)``). SBC stays exact: prior and generator agree.
* Generator ``simulate`` (the realistic one): :func:`allobranch.simulate` with the package generator --
  exponents down the hierarchy as in the model, true parents deviating from the law by
  ``Normal(0, sigma_dev)`` on the log scale, readings with the known 5 % log-normal error, and the
  daughters' asymmetry a Dirichlet split of the parent's ``a``-th power, which the model's Gaussian
  asymmetry only approximates. This is SBC of the practical pipeline, where uniform ranks are expected to
  good approximation, not exactly.
* Generator ``exact`` (:func:`simulate_exact`) draws tables exactly from the model's own assumptions
  (Gaussian daughter asymmetry about a flat level), so that any remaining miscalibration is the fast form's
  own (delta method, plug-in asymmetry scale) rather than the simulator's.
* Tables are tiny (3 taxa x 2 specimens x 10 junctions). Ranks among 99 draws spread evenly over 2 chains
  x 400 draws; coverage of the 90 % HDI (ArviZ) of all draws.

Outputs: ``benchmarks/results/calibration.md``, ``calibration.csv`` / ``calibration_exact.csv`` (one row
per dataset and quantity) and ``calibration_ranks.png`` / ``calibration_ranks_exact.png``. Run::

    python benchmarks/calibration.py --generator simulate --datasets 200   # the realistic simulator
    python benchmarks/calibration.py                                        # both generators, 100 each
    python benchmarks/calibration.py --datasets 8 --no-write                # a quick look
"""

from __future__ import annotations

import argparse
import os
import sys
import time
from pathlib import Path

import numpy as np
import pandas as pd
from scipy.special import logsumexp

import allobranch as ab
from allobranch.engine import Engine
from allobranch.planning.calibrate import calibrate, rank_histogram, uniformity
from allobranch.planning.design import Design, Simulation

RESULTS = Path(__file__).resolve().parent / "results"
#: Priors used both to draw the truth and to fit (see the module docstring).
SBC_PRIORS = ab.Priors(mu_mean=2.5, mu_sd=0.4, tau_taxon=0.3, tau_specimen=0.1, sigma_dev=0.05)
REL_ERROR = 0.05
#: Shape, error and split of every simulated table.
DESIGN = Design(taxa=3, specimens=2, junctions=10, error=REL_ERROR, split="dirichlet")
SAMPLER = {"draws": 400, "tune": 300, "chains": 2, "target_accept": 0.9}
HDI_PROB = 0.9
#: Asymmetry scale (log-radius SD about the junction mean) of the ``exact`` generator.
EXACT_SIGMA_ASYM = 0.2


def simulate_exact(design: Design, seed: int) -> Simulation:
    """A table drawn exactly from the model's own generative assumptions.

    Exponents down the hierarchy from the design's (drawn) exponent and spreads; every junction's true log
    daughters are a level (log-uniform over the design's size range, standing in for the flat level) plus
    Gaussian deviations with covariance ``sigma_asym^2 (I - 11'/k)`` (``sigma_asym`` =
    :data:`EXACT_SIGMA_ASYM`); the true log parent is ``logsumexp(a u) / a + Normal(0, sigma_dev)``;
    readings add ``Normal(0, error)`` on the log scale.
    """
    rng = np.random.default_rng([seed, 2])
    a_taxon = {
        f"T{t + 1}": design.exponent + design.tau_taxon * rng.standard_normal() for t in range(design.taxa)
    }
    rows, a_spec = [], {}
    lo, hi = np.log(design.size_range[0]), np.log(design.size_range[1])
    for taxon, a_t in a_taxon.items():
        for s in range(design.specimens):
            spec = f"{taxon}-S{s + 1}"
            a = a_spec[spec] = a_t + design.tau_specimen * rng.standard_normal()
            for j in range(design.junctions):
                level = rng.uniform(lo, hi)
                z = rng.standard_normal(2)
                u = level + EXACT_SIGMA_ASYM * (z - z.mean())
                u0 = logsumexp(a * u) / a + design.sigma_dev * rng.standard_normal()
                obs = np.exp(np.concatenate([[u0], u]) + design.error * rng.standard_normal(3))
                rows.append(
                    {
                        "taxon": taxon,
                        "specimen": spec,
                        "junction": f"J{j + 1:03d}",
                        "parent": obs[0],
                        "d1": obs[1],
                        "d2": obs[2],
                    }
                )
    mapping = ab.ColumnMapping(
        parent="parent",
        daughters=("d1", "d2"),
        taxon="taxon",
        specimen="specimen",
        junction="junction",
        measure="radius",
        unit="mm",
        rel_error=design.error,
    )
    frame = pd.DataFrame(rows)
    truth = {
        "mu": design.exponent,
        "tau_taxon": design.tau_taxon,
        "tau_specimen": design.tau_specimen,
        "sigma_dev": design.sigma_dev,
        "rel_error": design.error,
        "abs_error": 0.0,
        "a_taxon": a_taxon,
        "a_specimen": a_spec,
    }
    return Simulation(ab.read_junctions(frame, mapping), truth, frame, mapping, design, seed)


#: Table generators: the package simulator (``None``: :func:`allobranch.simulate`) or the model's own
#: generative assumptions.
GENERATORS = {"simulate": None, "exact": simulate_exact}


def run(
    n_datasets: int,
    base_seed: int = 7000,
    *,
    generator: str = "simulate",
    engine: Engine | None = None,
    progress: bool = True,
) -> pd.DataFrame:
    """Run the calibration; returns one row per dataset and quantity (``calibrate``'s ranks table).

    Parameters
    ----------
    n_datasets : int
        Number of simulated datasets.
    base_seed : int
        Seed of the study (dataset ``i`` uses a seed derived from it and ``i``).
    generator : {"simulate", "exact"}
        Table generator (see :data:`GENERATORS`).
    engine : Engine, optional
        Where the fits run (default: local processes; the ``exact`` generator needs a picklable module,
        so give ``Engine(workers=1)`` when this file was loaded other than as a script).
    progress : bool
        Show a progress line per dataset.
    """
    result = calibrate(
        DESIGN,
        ab.ModelSpec(priors=SBC_PRIORS),
        replicates=n_datasets,
        seed=base_seed,
        hdi_prob=HDI_PROB,
        generator=GENERATORS[generator],
        engine=engine,
        progress=progress,
        **SAMPLER,
    )
    return result.ranks.rename(columns={"replicate": "dataset"})


def summary(frame: pd.DataFrame) -> pd.DataFrame:
    """Uniformity and coverage per quantity (the library's :func:`~allobranch.planning.calibrate.uniformity`)."""
    return uniformity(frame.rename(columns={"dataset": "replicate"}), HDI_PROB)


def rank_histograms(frame: pd.DataFrame, path: Path) -> None:
    """One rank-histogram panel per quantity (the library's figure), saved as PNG."""
    import matplotlib

    matplotlib.use("Agg")
    from allobranch.cli.calibrate import calibration_figure

    fig = calibration_figure(rank_histogram(frame.rename(columns={"dataset": "replicate"})))
    fig.savefig(path, dpi=200)


#: Output names and descriptions per generator.
OUTPUTS = {
    "simulate": (
        "calibration.csv",
        "calibration_ranks.png",
        "Tables from `allobranch.simulate` (Dirichlet split of the daughters: the practical pipeline, model "
        "assumptions met only approximately)",
    ),
    "exact": (
        "calibration_exact.csv",
        "calibration_ranks_exact.png",
        f"Tables drawn exactly from the model's assumptions (Gaussian daughter asymmetry, sigma_asym = "
        f"{EXACT_SIGMA_ASYM}; isolates the fast form's own approximations: delta method and plug-in "
        "asymmetry scale)",
    ),
}


def _section(frame: pd.DataFrame, generator: str) -> list[str]:
    """Markdown section of one generator's calibration run."""
    table = summary(frame)
    ok = frame[frame["status"] == "ok"]
    n = ok["dataset"].nunique()
    _, png, title = OUTPUTS[generator]
    lines = [
        f"## {title}",
        "",
        f"| quantity | covered / n | {int(HDI_PROB * 100)} % HDI coverage | 95 % CI (Clopper-Pearson) | binomial test p "
        f"(H0: {HDI_PROB:.2f}) | rank uniformity chi-square p (bins) | mean rank / draws |",
        "|---|---|---|---|---|---|---|",
    ]
    for r in table.itertuples():
        lines.append(
            f"| {r.quantity} | {r.covered}/{r.n} | {r.coverage:.1%} | {r.coverage_low:.1%}-{r.coverage_high:.1%} | "
            f"{r.coverage_p:.3f} | {r.chi2_p:.3f} ({r.bins}) | {r.mean_rank_fraction:.3f} |"
        )
    per_dataset = ok.drop_duplicates("dataset")
    failed = frame.loc[frame["status"] == "failed", "dataset"].nunique()
    lines += [
        "",
        f"{n} datasets fitted ({failed} failed). Divergent transitions: {int(per_dataset['divergences'].sum())} in "
        f"total, in {int((per_dataset['divergences'] > 0).sum())} of {n} fits. Largest R-hat of a checked "
        f"quantity: {ok['r_hat'].max():.3f}; smallest bulk ESS: {ok['ess_bulk'].min():.0f}. Run time "
        f"{frame['minutes'].iloc[0]:.1f} min.",
        "",
        f"![rank histograms]({png})",
        "",
    ]
    return lines


def write_markdown(frames: dict[str, pd.DataFrame]) -> str:
    """Markdown report over the generators that have results."""
    d = DESIGN
    lines = [
        "# Simulation-based calibration of the fast form",
        "",
        f"Each dataset: {d.taxa} taxa x {d.specimens} specimens x {d.junctions} junctions with {REL_ERROR:.0%} "
        f"known relative error; hyper-parameters drawn from the fitting priors mu ~ Normal({SBC_PRIORS.mu_mean}, "
        f"{SBC_PRIORS.mu_sd}), tau_taxon ~ HalfNormal({SBC_PRIORS.tau_taxon}), tau_specimen ~ "
        f"HalfNormal({SBC_PRIORS.tau_specimen}), sigma_dev ~ HalfNormal({SBC_PRIORS.sigma_dev}) (narrower than "
        "the package defaults so that simulated trees stay sensible; SBC needs only that generator and fit share "
        f"them). Each fitted with `allobranch.fit` (default route: compiled fast density sampled by nutpie, "
        f"automatic escalation), {SAMPLER['chains']} chains x {SAMPLER['draws']} draws (tune {SAMPLER['tune']}); "
        "ranks among 99 draws spread evenly over the chains; coverage of the "
        f"{int(HDI_PROB * 100)} % HDI (ArviZ) of all draws. The loop is `allobranch.planning.calibrate` (the "
        "same code as `allobranch calibrate`).",
        "",
        "Target coverage 85-95 %. The taxon exponents of one dataset share mu and tau_taxon, so their "
        "coverage events are not independent and the binomial CI for them is somewhat optimistic. A mean rank "
        "fraction below 0.5 means the posterior tends to sit above the truth (and vice versa).",
        "",
    ]
    for generator, frame in frames.items():
        lines += _section(frame, generator)
    lines += [f"Load average when written: {os.getloadavg()[0]:.1f} on {os.cpu_count()} cores.", ""]
    return "\n".join(lines)


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description="Simulation-based calibration of the fast form.")
    parser.add_argument("--datasets", type=int, default=100)
    parser.add_argument("--seed", type=int, default=7000, help="seed of the study")
    parser.add_argument(
        "--generator",
        choices=(*GENERATORS, "both"),
        default="both",
        help="table generator (default: both, one after the other)",
    )
    parser.add_argument(
        "--workers", type=int, default=None, help="local worker processes (default: one per core)"
    )
    parser.add_argument("--scheduler", default=None, help="address of a Dask scheduler to run the fits on")
    parser.add_argument("--no-write", action="store_true", help="print only")
    args = parser.parse_args(argv)
    engine = Engine(workers=args.workers, scheduler=args.scheduler)
    generators = list(GENERATORS) if args.generator == "both" else [args.generator]
    for generator in generators:
        start = time.perf_counter()
        print(f"[calibration] generator {generator!r}", flush=True)
        frame = run(args.datasets, args.seed, generator=generator, engine=engine)
        frame["minutes"] = (time.perf_counter() - start) / 60
        print(summary(frame).to_string(index=False), flush=True)
        if args.no_write:
            continue
        RESULTS.mkdir(parents=True, exist_ok=True)
        csv, png, _ = OUTPUTS[generator]
        frame.to_csv(RESULTS / csv, index=False)
        rank_histograms(frame, RESULTS / png)
    if args.no_write:
        return 0
    frames = {}
    for g in GENERATORS:
        path = RESULTS / OUTPUTS[g][0]
        if path.is_file():
            frame = pd.read_csv(path, dtype={"group": str, "error": str})
            if "status" in frame.columns:  # results of this version of the loop
                frames[g] = frame
    text = write_markdown(frames)
    (RESULTS / "calibration.md").write_text(text, encoding="utf-8")
    print(text)
    return 0


if __name__ == "__main__":
    sys.exit(main())
