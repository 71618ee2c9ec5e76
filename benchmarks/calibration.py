"""Simulation-based calibration (SBC) and interval coverage of the default fast form.

Procedure (Talts et al. 2018, arXiv:1804.06788): draw the hyper-parameters from the prior, simulate a
table from them, fit it, and record the rank of every true value among (thinned) posterior draws. If the
model, its approximations and the sampler are right, ranks are uniform and 90 % intervals cover the truth
90 % of the time.

Design, and why:

* Priors. The package defaults (``mu ~ Normal(2.5, 1)``, ``tau_taxon ~ HalfNormal(0.5)``, ...) put real
  mass on exponents below 1 and near 0, where simulated trees degenerate (daughters vanishingly small).
  The calibration therefore uses narrower priors, **both to draw the truth and to fit**:
  :data:`SBC_PRIORS` (``mu ~ Normal(2.5, 0.4)``, ``tau_taxon ~ HalfNormal(0.3)``, ``tau_specimen ~
  HalfNormal(0.1)``, ``sigma_dev ~ HalfNormal(0.05)``). SBC stays exact: prior and generator agree.
* Generator. :func:`allobranch.simulate_junctions` draws taxon and specimen exponents down the hierarchy
  exactly as the model does, true parents deviate from the law by ``Normal(0, sigma_dev)`` on the log scale,
  and readings carry the known 5 % log-normal error. The daughters' asymmetry is a Dirichlet split of the
  parent's ``a``-th power, which the model's Gaussian asymmetry prior only approximates, and the fast form
  integrates the true daughters out with a second-order delta method and a plug-in asymmetry scale; so
  this is SBC of the practical pipeline, where uniform ranks are expected to good approximation, not
  exactly.
* Tables are tiny (3 taxa x 2 specimens x 10 junctions) and all have the same shape, so the model is
  built and compiled once and every new table is swapped in through the model's data arrays
  (:func:`allobranch.model.build.data_arrays`); the first table is also fitted with
  :func:`allobranch.fit` and must give identical draws, which proves the swap.
* Ranks use every ``THIN``-th draw (100 draws from 2 chains x 400), which keeps autocorrelation from
  distorting them; coverage uses the 90 % HDI (ArviZ) of all draws.

``simuk`` (SBC for PyMC models) was considered; it simulates data through the PyMC model's observed
variables, which the fast form does not have (its likelihood is a potential), so the loop is written here.

* A second generator, ``exact`` (:func:`simulate_exact`), draws tables exactly from the model's own
  assumptions (Gaussian daughter asymmetry about a flat level), so that any remaining miscalibration is
  the fast form's own (delta method, plug-in asymmetry scale) rather than the simulator's.

Outputs: ``benchmarks/results/calibration.md``, ``calibration.csv`` / ``calibration_exact.csv`` (one row
per dataset and quantity) and ``calibration_ranks.png`` / ``calibration_ranks_exact.png``. Run::

    /work/venv/bin/python benchmarks/calibration.py                        # both generators, 100 datasets each
    /work/venv/bin/python benchmarks/calibration.py --generator exact      # one generator (about 15-30 min)
    /work/venv/bin/python benchmarks/calibration.py --datasets 8 --no-write  # a quick look
"""

from __future__ import annotations

import argparse
import os
import sys
import time
import warnings
from dataclasses import dataclass
from pathlib import Path

import arviz as az
import numpy as np
import pandas as pd
from scipy import stats
from scipy.special import logsumexp

import allobranch as ab
from allobranch.model.asymmetry import estimate_sigma_asym
from allobranch.model.build import BuiltModel, build_model, data_arrays
from allobranch.model.data import model_data
from allobranch.model.simulate import SimulatedData

RESULTS = Path(__file__).resolve().parent / "results"
#: Priors used both to draw the truth and to fit (see the module docstring).
SBC_PRIORS = ab.Priors(mu_mean=2.5, mu_sd=0.4, tau_taxon=0.3, tau_specimen=0.1, sigma_dev=0.05)
#: Shape of every simulated table.
DESIGN = {"taxa": 3, "specimens_per_taxon": 2, "junctions_per_specimen": 10}
REL_ERROR = 0.05
SAMPLER = {"draws": 400, "tune": 300, "chains": 2, "target_accept": 0.9}
THIN = 8
HDI_PROB = 0.9
#: Quantities whose calibration is checked: population exponent, taxon exponents, biological deviation.
QUANTITIES = ("mu", "a_taxon", "sigma_dev")
#: Asymmetry scale (log-radius SD about the junction mean) of the ``exact`` generator.
EXACT_SIGMA_ASYM = 0.2


def draw_truth(rng: np.random.Generator, priors: ab.Priors = SBC_PRIORS) -> dict[str, float]:
    """Hyper-parameters drawn from the priors (half-normal = |normal|)."""
    return {
        "mu": float(rng.normal(priors.mu_mean, priors.mu_sd)),
        "tau_taxon": float(abs(rng.normal(0.0, priors.tau_taxon))),
        "tau_specimen": float(abs(rng.normal(0.0, priors.tau_specimen))),
        "sigma_dev": float(abs(rng.normal(0.0, priors.sigma_dev))),
    }


def simulate(index: int, base_seed: int) -> tuple[SimulatedData, dict[str, float]]:
    """Dataset ``index`` from :func:`allobranch.simulate_junctions`: hyper-parameters from the prior, then a
    table drawn from them (Dirichlet split of the daughters)."""
    seed = base_seed + index
    hyper = draw_truth(np.random.default_rng([seed, 1]))
    sim = ab.simulate_junctions(**DESIGN, **hyper, rel_error=REL_ERROR, seed=seed)
    return sim, hyper


def simulate_exact(index: int, base_seed: int) -> tuple[SimulatedData, dict[str, float]]:
    """Dataset ``index`` drawn exactly from the model's own generative assumptions.

    Exponents down the hierarchy as in :func:`simulate`; every junction's true log daughters are a level
    (log-uniform over 0.05-2 mm, standing in for the flat level) plus Gaussian deviations with covariance
    ``sigma_asym^2 (I - 11'/k)`` (``sigma_asym`` = :data:`EXACT_SIGMA_ASYM`); the true log parent is
    ``logsumexp(a u) / a + Normal(0, sigma_dev)``; readings add ``Normal(0, REL_ERROR)`` on the log scale.
    """
    seed = base_seed + index
    hyper = draw_truth(np.random.default_rng([seed, 1]))
    rng = np.random.default_rng([seed, 2])
    n_taxa, n_spec, n_junc = DESIGN["taxa"], DESIGN["specimens_per_taxon"], DESIGN["junctions_per_specimen"]
    a_taxon = {f"T{t + 1}": hyper["mu"] + hyper["tau_taxon"] * rng.standard_normal() for t in range(n_taxa)}
    rows, a_spec = [], {}
    for taxon, a_t in a_taxon.items():
        for s in range(n_spec):
            spec = f"{taxon}-S{s + 1}"
            a = a_spec[spec] = a_t + hyper["tau_specimen"] * rng.standard_normal()
            for j in range(n_junc):
                level = rng.uniform(np.log(0.05), np.log(2.0))
                z = rng.standard_normal(2)
                u = level + EXACT_SIGMA_ASYM * (z - z.mean())
                u0 = logsumexp(a * u) / a + hyper["sigma_dev"] * rng.standard_normal()
                obs = np.exp(np.concatenate([[u0], u]) + REL_ERROR * rng.standard_normal(3))
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
        rel_error=REL_ERROR,
    )
    truth = {**hyper, "rel_error": REL_ERROR, "abs_error": 0.0, "a_taxon": a_taxon, "a_specimen": a_spec}
    frame = pd.DataFrame(rows)
    return SimulatedData(frame=frame, truth=truth, true_radii=frame.iloc[:0], mapping=mapping), hyper


#: Table generators: the package simulator, or the model's own generative assumptions.
GENERATORS = {"simulate": simulate, "exact": simulate_exact}


@dataclass
class ReusableFit:
    """A model built and compiled once; new tables of the same shape are swapped in as data."""

    built: BuiltModel
    compiled: object

    @classmethod
    def create(cls, table: ab.JunctionTable, spec: ab.ModelSpec) -> ReusableFit:
        from allobranch.inference.backends import compile_nutpie

        built = build_model(model_data(table), spec)
        if built.form != "fast":
            raise ValueError("the calibration swaps data into the fast form only")
        return cls(built=built, compiled=compile_nutpie(built.model))

    def sample(self, table: ab.JunctionTable, seed: int) -> az.InferenceData:
        """Posterior draws for ``table`` (same shape as the template) without recompiling."""
        import nutpie
        import pymc as pm

        data = model_data(table)
        arrays = data_arrays(data, "fast", estimate_sigma_asym(data, float(data.rel_error)))
        for name, value in arrays.items():
            if np.shape(value) != np.shape(self.built.arrays[name]):
                raise ValueError(f"table shape differs from the compiled template in {name!r}")
        with self.built.model:
            pm.set_data(arrays)
        return nutpie.sample(
            self.compiled, seed=seed, progress_bar=False, cores=min(SAMPLER["chains"], 2), **SAMPLER
        )


def ranks_and_coverage(idata: az.InferenceData, truth: dict, hyper: dict, dataset: int) -> list[dict]:
    """Rank of each true value among thinned draws, and whether the 90 % HDI covers it."""
    post = idata.posterior
    rows = []
    targets = [
        ("mu", "all", post["mu"].values, truth["mu"]),
        ("sigma_dev", "all", post["sigma_dev"].values, hyper["sigma_dev"]),
    ]
    for i, taxon in enumerate(post["taxon"].values):
        targets.append(("a_taxon", str(taxon), post["a_taxon"].values[:, :, i], truth["a_taxon"][str(taxon)]))
    for name, group, draws, value in targets:
        thinned = draws[:, ::THIN].reshape(-1)
        lo, hi = az.hdi(draws.reshape(-1), hdi_prob=HDI_PROB)  # ArviZ HDI
        rows.append(
            {
                "dataset": dataset,
                "quantity": name,
                "group": group,
                "truth": value,
                "rank": int(np.sum(thinned < value)),
                "n_draws": thinned.size,
                "mean": float(draws.mean()),
                "hdi_low": float(lo),
                "hdi_high": float(hi),
                "covered": bool(lo <= value <= hi),
                "r_hat": float(az.rhat(draws)),
                "ess_bulk": float(az.ess(draws, method="bulk")),
            }
        )
    return rows


def run(
    n_datasets: int, base_seed: int = 7000, verify: bool = True, log=print, generator: str = "simulate"
) -> pd.DataFrame:
    """Run the calibration loop; returns one row per dataset and quantity.

    Parameters
    ----------
    n_datasets : int
        Number of simulated datasets.
    base_seed : int
        Dataset ``i`` uses seed ``base_seed + i`` for its truth and table and as sampler seed.
    verify : bool
        Also fit the first table with :func:`allobranch.fit` and require identical draws.
    log : callable
        Progress printer.
    generator : {"simulate", "exact"}
        Table generator (see :data:`GENERATORS`).
    """
    spec = ab.ModelSpec(priors=SBC_PRIORS)
    rows = []
    reusable = None
    start = time.perf_counter()
    for i in range(n_datasets):
        sim, hyper = GENERATORS[generator](i, base_seed)
        table = ab.read_junctions(sim.frame, sim.mapping)
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            if reusable is None:
                reusable = ReusableFit.create(table, spec)
            idata = reusable.sample(table, seed=base_seed + i)
            if verify and i == 0:
                direct = ab.fit(table, spec, seed=base_seed + i, progress=False, **SAMPLER)
                if not np.array_equal(direct.idata.posterior["mu"].values, idata.posterior["mu"].values):
                    raise RuntimeError(
                        "swapping data into the compiled model did not reproduce allobranch.fit"
                    )
                log("[calibration] data swap verified: identical draws to allobranch.fit on dataset 0")
        new = ranks_and_coverage(idata, sim.truth, hyper, i)
        div = int(idata.sample_stats["diverging"].sum())
        for r in new:
            r.update({"divergences": div, **{f"true_{k}": v for k, v in hyper.items()}})
        rows.extend(new)
        cov = np.mean([r["covered"] for r in new if r["quantity"] != "sigma_dev"])
        log(
            f"[calibration] dataset {i + 1}/{n_datasets}: mu true {sim.truth['mu']:.2f} rank "
            f"{new[0]['rank']}/{new[0]['n_draws']}, exponents covered {cov:.0%}, divergences {div} "
            f"[{(time.perf_counter() - start) / 60:.1f} min]"
        )
    return pd.DataFrame(rows)


def coverage_table(frame: pd.DataFrame) -> pd.DataFrame:
    """Coverage of the 90 % HDI per quantity with a binomial test and Clopper-Pearson 95 % CI (scipy)."""
    out = []
    groups = [(q, frame[frame["quantity"] == q]) for q in QUANTITIES]
    groups.append(("exponents (mu + a_taxon)", frame[frame["quantity"].isin(["mu", "a_taxon"])]))
    for name, g in groups:
        k, n = int(g["covered"].sum()), len(g)
        test = stats.binomtest(k, n, p=HDI_PROB)
        ci = test.proportion_ci(confidence_level=0.95, method="exact")
        # Uniformity of ranks: chi-square over 10 equal bins (scipy.stats.chisquare).
        edges = np.linspace(0, g["n_draws"].iloc[0] + 1, 11)
        counts, _ = np.histogram(g["rank"], bins=edges)
        chi = stats.chisquare(counts)
        out.append(
            {
                "quantity": name,
                "covered": k,
                "n": n,
                "coverage": k / n,
                "ci_low": ci.low,
                "ci_high": ci.high,
                "binom_p": test.pvalue,
                "rank_chi2_p": chi.pvalue,
                "mean_rank_fraction": float((g["rank"] / g["n_draws"]).mean()),
            }
        )
    return pd.DataFrame(out)


def rank_histograms(frame: pd.DataFrame, path: Path) -> None:
    """Rank histograms with the 99 % band of a uniform histogram (binomial quantiles, scipy)."""
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    fig, axes = plt.subplots(1, len(QUANTITIES), figsize=(10, 3.2), constrained_layout=True)
    n_bins = 10
    for ax, q in zip(axes, QUANTITIES):
        g = frame[frame["quantity"] == q]
        L = int(g["n_draws"].iloc[0])
        edges = np.linspace(0, L + 1, n_bins + 1)
        counts, _ = np.histogram(g["rank"], bins=edges)
        p = 1.0 / n_bins
        lo, hi = stats.binom.ppf([0.005, 0.995], len(g), p)
        ax.axhspan(lo, hi, color="0.85", label="99 % range if uniform")
        ax.axhline(len(g) * p, color="0.4", lw=0.8)
        ax.bar(edges[:-1], counts, width=np.diff(edges), align="edge", color="#0072B2", edgecolor="white")
        ax.set_title(
            {
                "mu": "population exponent mu",
                "a_taxon": "taxon exponents",
                "sigma_dev": "biological deviation",
            }[q],
            fontsize=9,
        )
        ax.set_xlabel(f"rank of truth among {L} draws", fontsize=8)
        ax.tick_params(labelsize=7)
    axes[0].set_ylabel("datasets", fontsize=8)
    axes[0].legend(fontsize=7, loc="lower center")
    fig.savefig(path, dpi=150)
    plt.close(fig)


#: Output names and descriptions per generator.
OUTPUTS = {
    "simulate": (
        "calibration.csv",
        "calibration_ranks.png",
        "Tables from `allobranch.simulate_junctions` (Dirichlet split of the daughters: the practical "
        "pipeline, model assumptions met only approximately)",
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
    cov = coverage_table(frame)
    n = frame["dataset"].nunique()
    _, png, title = OUTPUTS[generator]
    lines = [
        f"## {title}",
        "",
        f"| quantity | covered / n | {int(HDI_PROB * 100)} % HDI coverage | 95 % CI (Clopper-Pearson) | binomial test p "
        "(H0: 0.90) | rank uniformity chi-square p (10 bins) | mean rank / draws |",
        "|---|---|---|---|---|---|---|",
    ]
    for r in cov.itertuples():
        lines.append(
            f"| {r.quantity} | {r.covered}/{r.n} | {r.coverage:.1%} | {r.ci_low:.1%}-{r.ci_high:.1%} | "
            f"{r.binom_p:.3f} | {r.rank_chi2_p:.3f} | {r.mean_rank_fraction:.3f} |"
        )
    per_dataset = frame.drop_duplicates("dataset")
    lines += [
        "",
        f"{n} datasets. Divergent transitions: {int(per_dataset['divergences'].sum())} in total, in "
        f"{int((per_dataset['divergences'] > 0).sum())} of {n} fits. Largest R-hat of a checked quantity: "
        f"{frame['r_hat'].max():.3f}; smallest bulk ESS: {frame['ess_bulk'].min():.0f}. Run time "
        f"{frame['minutes'].iloc[0]:.1f} min.",
        "",
        f"![rank histograms]({png})",
        "",
    ]
    return lines


def write_markdown(frames: dict[str, pd.DataFrame]) -> str:
    """Markdown report over the generators that have results."""
    lines = [
        "# Simulation-based calibration of the fast form",
        "",
        f"Each dataset: {DESIGN['taxa']} taxa x {DESIGN['specimens_per_taxon']} specimens x "
        f"{DESIGN['junctions_per_specimen']} junctions with {REL_ERROR:.0%} known relative error; "
        f"hyper-parameters drawn from the fitting priors mu ~ Normal({SBC_PRIORS.mu_mean}, {SBC_PRIORS.mu_sd}), "
        f"tau_taxon ~ HalfNormal({SBC_PRIORS.tau_taxon}), tau_specimen ~ HalfNormal({SBC_PRIORS.tau_specimen}), "
        f"sigma_dev ~ HalfNormal({SBC_PRIORS.sigma_dev}) (narrower than the package defaults so that simulated "
        "trees stay sensible; SBC needs only that generator and fit share them). Each fitted with the default "
        f"fast form, {SAMPLER['chains']} chains x {SAMPLER['draws']} draws (tune {SAMPLER['tune']}); ranks among "
        f"every {THIN}th draw (100 draws); coverage of the {int(HDI_PROB * 100)} % HDI (ArviZ) of all draws.",
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
    parser.add_argument("--seed", type=int, default=7000, help="base seed (dataset i uses seed + i)")
    parser.add_argument(
        "--generator",
        choices=(*GENERATORS, "both"),
        default="both",
        help="table generator (default: both, one after the other)",
    )
    parser.add_argument("--no-write", action="store_true", help="print only")
    args = parser.parse_args(argv)
    generators = list(GENERATORS) if args.generator == "both" else [args.generator]
    for generator in generators:
        start = time.perf_counter()
        print(f"[calibration] generator {generator!r}", flush=True)
        frame = run(args.datasets, args.seed, log=lambda m: print(m, flush=True), generator=generator)
        frame["minutes"] = (time.perf_counter() - start) / 60
        print(coverage_table(frame).to_string(index=False), flush=True)
        if args.no_write:
            continue
        RESULTS.mkdir(parents=True, exist_ok=True)
        csv, png, _ = OUTPUTS[generator]
        frame.to_csv(RESULTS / csv, index=False)
        rank_histograms(frame, RESULTS / png)
    if args.no_write:
        return 0
    frames = {
        g: pd.read_csv(RESULTS / OUTPUTS[g][0]) for g in GENERATORS if (RESULTS / OUTPUTS[g][0]).is_file()
    }
    text = write_markdown(frames)
    (RESULTS / "calibration.md").write_text(text, encoding="utf-8")
    print(text)
    return 0


if __name__ == "__main__":
    sys.exit(main())
