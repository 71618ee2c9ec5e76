"""Robustness of default fits under a tree over simulated designs the defaults were not tuned to.

The tree benchmarks (``comparative.py``, ``tree_taxa.py``) use one design: 2 specimens x 30 junctions per
taxon, specimen spread 0.05, 5 % error. This script varies it one thing at a time on a 24-taxon Yule tree
(simulated data): one specimen per taxon, a taxon spread near zero, no specimen spread, 20 % error, 5
junctions per specimen, an unbalanced design (1-4 specimens of 5-60 junctions), one-sided side-branch
splits, a size trend with a slope per taxon, and a trait; at true Pagel's lambda 1 (and 0.5 for the base).
Each design is fitted with ``allobranch.fit`` at its defaults (lambda estimated) for several seeds.

Reported per fit: attempts, divergences and worst R-hat of the kept attempt, lowest bulk ESS (and which
variable), wall time, mu's z = (mean - truth) / sd and whether its 90 % HDI holds the truth, the oracle's z
(generalised least squares on the true taxon exponents and covariance), the share of
taxon exponents whose 90 % HDI holds theirs, and lambda's posterior mean.

Usage::

    python benchmarks/tree_designs.py                  # all designs, 2 seeds (about 10 min on 2 cores)
    python benchmarks/tree_designs.py --seeds 1 --designs base,one_specimen
"""

from __future__ import annotations

import argparse
import os
import tempfile
import time
from pathlib import Path

import arviz as az
import numpy as np
import pandas as pd
from common import chosen_designs, run_designs, write_table  # benchmarks/common.py
from comparative import yule_newick  # benchmarks/comparative.py (run from this folder's scripts)

import allobranch as ab
from allobranch.comparative import attach_tree, read_tree

RESULTS = Path(__file__).resolve().parent / "results"
N_TAXA, MU, TAU = 24, 2.5, 0.3
TRAIT_SLOPE = 0.2  # change in the taxon exponent per unit of the (standard normal) trait
BASE = dict(specimens_per_taxon=2, junctions_per_specimen=30, tau_specimen=0.05, rel_error=0.05)
_RNG_UNBALANCED = np.random.default_rng(2026)
_SPECIMENS = _RNG_UNBALANCED.integers(1, 5, size=N_TAXA)
_JUNCTIONS = _RNG_UNBALANCED.integers(5, 61, size=int(_SPECIMENS.sum()))
#: name -> (what changes, simulator arguments changed from BASE, options: lambda, taxon spread, model)
DESIGNS: dict[str, tuple[str, dict, dict]] = {
    "base": ("2 specimens x 30 junctions per taxon, lambda 1", {}, {}),
    "base_lambda_0.5": ("the base table at lambda 0.5", {}, {"lam": 0.5}),
    "one_specimen": ("1 specimen per taxon", {"specimens_per_taxon": 1}, {}),
    "taxon_spread_0.02": ("taxon spread 0.02 (near zero)", {}, {"tau": 0.02}),
    "specimen_spread_0": ("specimen spread 0", {"tau_specimen": 0.0}, {}),
    "error_20": ("20 % relative error", {"rel_error": 0.2}, {}),
    "junctions_5": ("5 junctions per specimen", {"junctions_per_specimen": 5}, {}),
    "unbalanced": (
        "1-4 specimens of 5-60 junctions per taxon",
        {"specimens_per_taxon": _SPECIMENS.tolist(), "junctions_per_specimen": _JUNCTIONS.tolist()},
        {},
    ),
    "side_branches": ("one-sided side-branch splits", {"split": "side_branch"}, {}),
    "size_trend": (
        "slope -0.3 per tenfold parent, fitted by taxon",
        {"exponent_slope": -0.3, "slope_reference": 0.3, "parent_range": (0.03, 3.0)},
        {"spec": {"covariates": ("log_parent_size",), "covariates_by_taxon": True}},
    ),
    "trait": (f"a trait with slope {TRAIT_SLOPE} per unit", {}, {"trait_slope": TRAIT_SLOPE}),
}


def simulate(name: str, seed: int, tmp: Path):
    """The table of one design and seed with its tree (and traits) attached, the true taxon exponents, the
    true population exponent (at the traits' mean, where the model reports it) and the model."""
    _, changes, options = DESIGNS[name]
    newick, names = yule_newick(N_TAXA, seed)
    tree_path = tmp / f"yule_{seed}.nwk"
    tree_path.write_text(newick + "\n", encoding="utf-8")
    C = read_tree(tree_path, names).correlation(names)
    lam, tau = options.get("lam", 1.0), options.get("tau", TAU)
    rng = np.random.default_rng(seed + 1)
    a_taxon = rng.multivariate_normal(np.full(N_TAXA, MU), tau**2 * (lam * C + (1.0 - lam) * np.eye(N_TAXA)))
    trait = rng.normal(size=N_TAXA)
    a_taxon = a_taxon + options.get("trait_slope", 0.0) * trait
    sim = ab.simulate_junctions(
        taxa=names, taxon_exponents=dict(zip(names, a_taxon)), **{**BASE, **changes}, seed=seed
    )
    table = attach_tree(ab.read_junctions(sim.frame, sim.mapping), tree_path)
    spec = dict(options.get("spec", {}))
    if name == "size_trend":
        spec["covariate_ref"] = {"log_parent_size": float(np.log10(changes["slope_reference"]))}
    if "trait_slope" in options:
        traits = pd.DataFrame({"taxon": names, "trait": trait})
        table = ab.attach_traits(table, traits, ["trait"])
        spec["traits"] = ("trait",)
    mu_true = MU + options.get("trait_slope", 0.0) * float(trait.mean())
    # the oracle: generalised least squares of mu on the true taxon exponents (trait effect removed) with
    # the true covariance; its z shows how far this tree's draw itself lies from the truth
    cov = tau**2 * (lam * C + (1.0 - lam) * np.eye(N_TAXA))
    solved = np.linalg.solve(
        cov,
        np.column_stack(
            [np.ones(N_TAXA), a_taxon - options.get("trait_slope", 0.0) * (trait - trait.mean())]
        ),
    )
    precision = solved[:, 0].sum()
    oracle_z = (solved[:, 1].sum() / precision - mu_true) * np.sqrt(precision)
    return table, dict(zip(names, a_taxon)), mu_true, float(oracle_z), ab.ModelSpec(**spec)


def run_one(name: str, seed: int) -> dict:
    """Fit one design and seed with defaults."""
    with tempfile.TemporaryDirectory() as tmp:
        table, truth, mu_true, oracle_z, spec = simulate(name, seed, Path(tmp))
    started = time.perf_counter()
    result = ab.fit(table, spec, seed=seed, progress=False)
    wall = time.perf_counter() - started
    attempts = result.settings["attempts"]
    kept = next(a for a in attempts if a["kept"])
    diag = result.diagnostics()
    worst = diag.loc[diag["ess_bulk"].idxmin()]
    post = result.idata.posterior
    mu = post["mu"].values.ravel()
    lo, hi = az.hdi(mu, hdi_prob=0.9)
    slope = {}
    if "gamma" in post:  # the trait's slope
        g = post["gamma"].values[..., 0].ravel()
        g_lo, g_hi = az.hdi(g, hdi_prob=0.9)
        slope = {
            "trait_slope_mean": float(g.mean()),
            "trait_slope_covered": bool(g_lo <= TRAIT_SLOPE <= g_hi),
        }
    covered = []
    for taxon, value in truth.items():
        draws = post["a_taxon"].sel(taxon=taxon).values.ravel()
        t_lo, t_hi = az.hdi(draws, hdi_prob=0.9)
        covered.append(t_lo <= value <= t_hi)
    return {
        "design": name,
        "seed": seed,
        "junctions": table.n_junctions,
        "attempts": len(attempts),
        "divergences": kept["divergences"],
        "max_r_hat": float(diag["r_hat"].max()),
        "min_ess_bulk": float(worst["ess_bulk"]),
        "min_ess_variable": str(worst["parameter"]),
        "seconds": round(wall, 1),
        "mu_z": float((mu.mean() - mu_true) / mu.std(ddof=1)),
        "mu_covered": bool(lo <= mu_true <= hi),
        "oracle_mu_z": oracle_z,
        "taxa_covered": float(np.mean(covered)),
        "lambda_mean": float(post["pagel_lambda"].mean()),
        "warnings": len(result.warnings),
        **slope,
    }


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    parser.add_argument("--seeds", type=int, default=2)
    parser.add_argument("--designs", default=",".join(DESIGNS))
    parser.add_argument("--out", type=Path, default=RESULTS)
    parser.add_argument("--no-write", action="store_true")
    args = parser.parse_args(argv)
    names = chosen_designs(parser, args.designs, DESIGNS)
    rows = run_designs(
        names, args.seeds, run_one, lambda name, seed, got: " ".join(f"{k}={v}" for k, v in got[0].items())
    )
    frame = pd.DataFrame(rows)
    frame.insert(1, "what", [DESIGNS[d][0] for d in frame["design"]])
    text = "\n".join(
        [
            "# Default fits under a tree over designs they were not tuned to",
            "",
            f"Generated by `benchmarks/tree_designs.py` (simulated data): {N_TAXA}-taxon Yule trees (one per "
            f"seed), taxon exponents MVN({MU}, {TAU}^2 (lambda C + (1 - lambda) I)) with lambda 1 unless "
            "stated; base table 2 specimens x 30 junctions per taxon, specimen spread 0.05, 5 % error; each "
            "row changes one thing. Default fit, Pagel's lambda estimated. `mu_z`: (posterior mean - truth) / "
            "posterior SD; `oracle_mu_z`: the same for the generalised least-squares estimate from the true "
            "taxon exponents and covariance (how far the tree's draw itself lies from the truth; the seeds "
            "share it across designs); `taxa_covered`: share of taxon exponents inside their 90 % HDI; "
            "`warnings`: number of warnings the fit carried (the lambda caveat among them).",
            "",
            frame.to_markdown(index=False, floatfmt=".3g"),
            "",
            f"Load average when written: {os.getloadavg()[0]:.1f} on {os.cpu_count()} cores.",
            "",
        ]
    )
    write_table(frame, text, args.out, "tree_designs", write=not args.no_write)
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
