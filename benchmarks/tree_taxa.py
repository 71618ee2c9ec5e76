"""Default fits under a tree as the number of taxa grows: the exact conditional of the taxon deviations
against its diagonal approximation.

Under a tree the compiled density samples the taxon deviations in the tree's eigenbasis, from their
conditional given the spreads. Up to :data:`allobranch.model.density.TREE_EXACT_MAX_TAXA` taxa it uses the
exact conditional (one Cholesky factor of the full data precision per density evaluation, O(taxa^3));
above, the conditional with that precision's diagonal (O(taxa^2)). This script fits simulated tables
(simulated data) on pure-birth (Yule) trees of 16 to a few hundred taxa with both paths and reports what
each costs and buys.

Design: taxon exponents from ``MVN(2.5, 0.3^2 (lambda C + (1 - lambda) I))`` at lambda 0 and 1, 2
specimens x 30 junctions per taxon, specimen spread 0.05, 5 % error (the phylogeny study of
``benchmarks/comparative.py`` on other trees). Default fit (4 chains, tune and draws by the size rule,
retries as ``allobranch.fit`` decides), Pagel's lambda estimated.

Reported per fit: attempts, whether the first attempt was clean, divergences, worst R-hat, lowest bulk ESS
(and which variable), bulk ESS of mu and lambda, mean leapfrog steps per draw, wall time, milliseconds per
log-density-and-gradient evaluation (timed on the fit's own compiled density), and whether mu's 90 % HDI
holds 2.5.

Usage::

    python benchmarks/tree_taxa.py                      # 16, 64, 200 taxa x lambda 0, 1 x both paths
    python benchmarks/tree_taxa.py --taxa 16 --lambdas 1 --paths exact
    python benchmarks/tree_taxa.py --taxa 200,400 --lambdas 1 --paths exact \
        --timing-only 400:diagonal,600:exact,600:diagonal --append
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
from common import write_table  # benchmarks/common.py
from comparative import yule_newick  # benchmarks/comparative.py (run from this folder's scripts)

import allobranch as ab
import allobranch.model.density as density_module
from allobranch.comparative import attach_tree, read_tree

RESULTS = Path(__file__).resolve().parent / "results"
MU, TAU = 2.5, 0.3
DESIGN = dict(specimens_per_taxon=2, junctions_per_specimen=30, tau_specimen=0.05, rel_error=0.05)


_PACKED: list = []


def _recording_pack(*args, **kwargs):
    """``allobranch.model.density.pack`` that keeps the last density it built (for timing)."""
    density = _ORIGINAL_PACK(*args, **kwargs)
    _PACKED[:] = [density]
    return density


_ORIGINAL_PACK = density_module.pack
density_module.pack = _recording_pack


def gradient_ms(repeats: int = 200) -> float:
    """Milliseconds per log density and gradient of the last compiled density a fit built (at x = 0)."""
    if not _PACKED:
        return float("nan")
    dens = _PACKED[0]
    x = np.zeros(dens.layout.ndim)
    dens.logp(x)
    started = time.perf_counter()
    for _ in range(repeats):
        dens.logp(x)
    return 1000 * (time.perf_counter() - started) / repeats


def run(
    n_taxa: int, lam: float, path: str, seed: int, timing_only: bool = False, by_taxon: bool = False
) -> dict:
    newick, names = yule_newick(n_taxa, seed)
    with tempfile.TemporaryDirectory() as tmp:
        tree_path = Path(tmp) / "yule.nwk"
        tree_path.write_text(newick + "\n", encoding="utf-8")
        C = read_tree(tree_path, names).correlation(names)
        cov = TAU**2 * (lam * C + (1.0 - lam) * np.eye(n_taxa))
        a_taxon = np.random.default_rng(seed + 1).multivariate_normal(np.full(n_taxa, MU), cov)
        sim = ab.simulate_junctions(
            taxa=names, taxon_exponents=dict(zip(names, a_taxon)), **DESIGN, seed=seed
        )
        table = attach_tree(ab.read_junctions(sim.frame, sim.mapping), tree_path)
    saved = density_module.TREE_EXACT_MAX_TAXA
    density_module.TREE_EXACT_MAX_TAXA = 10**9 if path == "exact" else 0
    # timing only: a short fit builds the density, whose gradient is then timed; no sampling figures
    short = dict(draws=30, tune=30, chains=1, escalate=False) if timing_only else {}
    try:
        started = time.perf_counter()
        spec = (
            ab.ModelSpec(covariates=("log_parent_size",), covariates_by_taxon=True)
            if by_taxon
            else ab.ModelSpec()
        )
        res = ab.fit(table, spec, seed=seed, progress=False, **short)
        wall = time.perf_counter() - started
        ms = gradient_ms()
    finally:
        density_module.TREE_EXACT_MAX_TAXA = saved
    model = "log_parent_size slope by taxon" if by_taxon else "no covariate"
    if timing_only:
        return {
            "taxa": n_taxa,
            "lambda_true": lam,
            "path": path,
            "model": model,
            "junctions": len(sim.frame),
            "ms_per_gradient": ms,
        }
    post = res.idata.posterior
    diag = res.diagnostics()
    worst = diag.loc[diag["ess_bulk"].idxmin()]
    attempts = res.settings.get("attempts") or [{}]
    first = attempts[0]
    steps = res.idata.sample_stats.get("n_steps")
    hdi = az.hdi(post["mu"].values.ravel(), hdi_prob=0.9)
    return {
        "taxa": n_taxa,
        "lambda_true": lam,
        "path": path,
        "model": model,
        "junctions": len(sim.frame),
        "attempts": len(attempts),
        "first_clean": bool(first.get("divergences", 1) == 0 and first.get("max_r_hat", 2.0) <= 1.01),
        "divergences": int(res.sampler_checks().get("divergences", 0)),
        "max_r_hat": float(diag["r_hat"].max()),
        "min_ess_bulk": float(worst["ess_bulk"]),
        "min_ess_variable": str(worst["parameter"]),
        "ess_mu": float(az.ess(post["mu"]).to_array().min()),
        "ess_lambda": float(az.ess(post["pagel_lambda"]).to_array().min()),
        "lambda_mean": float(post["pagel_lambda"].mean()),
        "steps_per_draw": float(steps.mean()) if steps is not None else float("nan"),
        "seconds": round(wall, 1),
        "ms_per_gradient": ms,
        "mu_covered": bool(hdi[0] <= MU <= hdi[1]),
    }


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    parser.add_argument("--taxa", default="16,64,200", help="comma-separated numbers of taxa")
    parser.add_argument("--lambdas", default="0,1")
    parser.add_argument("--paths", default="exact,diagonal")
    parser.add_argument("--seed", type=int, default=7)
    parser.add_argument(
        "--timing-only",
        default="200:exact",
        help="TAXA:PATH[,TAXA:PATH] fitted only long enough to time one gradient (a full fit would take "
        "too long); '' for none",
    )
    parser.add_argument(
        "--slope-by-taxon",
        action="store_true",
        help="fit the built-in covariate log_parent_size with a slope per taxon (true slope 0)",
    )
    parser.add_argument("--out", type=Path, default=RESULTS)
    parser.add_argument("--no-write", action="store_true")
    parser.add_argument(
        "--append", action="store_true", help="add the rows to those of an earlier run (tree_taxa.csv)"
    )
    parser.add_argument(
        "--note", default="", help="a sentence added to tree_taxa.md (e.g. how loaded the machine was)"
    )
    parser.add_argument(
        "--report-only", action="store_true", help="no fits: rewrite tree_taxa.md from tree_taxa.csv"
    )
    args = parser.parse_args(argv)
    rows = []
    if args.report_only:
        args.append, args.taxa, args.timing_only = True, "", ""
    for n in (int(v) for v in filter(None, args.taxa.split(","))):
        for lam in (float(v) for v in args.lambdas.split(",")):
            for path in args.paths.split(","):
                if f"{n}:{path}" in args.timing_only.split(","):
                    continue
                row = run(n, lam, path, args.seed, by_taxon=args.slope_by_taxon)
                rows.append(row)
                print(" ".join(f"{k}={v}" for k, v in row.items()), flush=True)
    for item in filter(None, args.timing_only.split(",")):
        n, path = item.split(":")
        row = run(int(n), 1.0, path, args.seed, timing_only=True, by_taxon=args.slope_by_taxon)
        rows.append(row)
        print(" ".join(f"{k}={v}" for k, v in row.items()), flush=True)
    frame = pd.DataFrame(rows)
    if args.append and (args.out / "tree_taxa.csv").exists():
        earlier = pd.read_csv(args.out / "tree_taxa.csv")
        if "model" not in earlier:  # rows written before the option existed
            earlier.insert(3, "model", "no covariate")
        frame = pd.concat([earlier, frame], ignore_index=True)
    text = "\n".join(
        [
            "# Fits under a tree as the number of taxa grows: exact vs diagonal conditional",
            "",
            "Generated by `benchmarks/tree_taxa.py` (simulated data): Yule trees, taxon exponents "
            f"MVN({MU}, {TAU}^2 (lambda C + (1 - lambda) I)), 2 specimens x 30 junctions per taxon, specimen "
            "spread 0.05, 5 % error; default fit with Pagel's lambda estimated. `exact`: the taxon deviations' "
            "exact conditional (the default up to "
            f"{density_module.TREE_EXACT_MAX_TAXA} taxa); `diagonal`: the diagonal approximation (the "
            "default above). ms per gradient: one log density and gradient of the fit's compiled density. "
            "Rows with only a time: fitted for 30 draws to build the density and time it (a full fit would "
            "take too long).",
            "",
            frame.to_markdown(index=False, floatfmt=".3g"),
            "",
            args.note or f"Load average when written: {os.getloadavg()[0]:.1f} on {os.cpu_count()} cores.",
            "",
        ]
    )
    write_table(frame, text, args.out, "tree_taxa", write=not args.no_write)
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
