"""Robustness of default fits over simulated designs the defaults were not tuned to.

Every design varies one or two things from a base table (3 taxa x 4 specimens x 60 junctions, 5 % relative
error, taxon spread 0.3, specimen spread 0.1, Dirichlet(4) splits): the specimen spread (0, 0.02, 0.3), the
number of taxa (1, 20), junctions per specimen (10, 1000), the error (1 %, 20 %), trifurcations, an
unbalanced design, the way daughters split (uniform fraction, log-normal, one-sided side branches), one
specimen, and a funnel-prone design (many specimens with nearly equal exponents). Each design is fitted
with ``allobranch.fit`` at its defaults for several seeds.

Reported per fit: attempts used, divergences and the worst R-hat of the kept attempt, lowest bulk ESS,
wall time, and for every taxon exponent and the population exponent the truth's position in its posterior
(z = (mean - truth) / sd) and whether the 90 % HDI covers it.

Target (the issue's): every design ends with zero divergences and R-hat <= 1.01 under defaults, and no
exponent is more than 2 posterior SDs from its truth on average over seeds.

Usage::

    python benchmarks/robustness.py                 # all designs, 3 seeds (about 30-40 min on 2 cores)
    python benchmarks/robustness.py --seeds 1 --designs base,spread_0
"""

from __future__ import annotations

import argparse
import sys
import time
from pathlib import Path

import arviz as az
import numpy as np
import pandas as pd
from common import chosen_designs, run_designs  # benchmarks/common.py

import allobranch as ab

RESULTS = Path(__file__).resolve().parent / "results"
BASE = dict(
    taxa=3,
    specimens_per_taxon=4,
    junctions_per_specimen=60,
    mu=2.5,
    tau_taxon=0.3,
    tau_specimen=0.1,
    rel_error=0.05,
    split="dirichlet",
    split_concentration=4.0,
)
#: name -> (what changes, simulator arguments changed from BASE)
DESIGNS: dict[str, tuple[str, dict]] = {
    "base": ("the base table", {}),
    "spread_0": ("specimen spread 0", {"tau_specimen": 0.0}),
    "spread_0.02": ("specimen spread 0.02", {"tau_specimen": 0.02}),
    "spread_0.3": ("specimen spread 0.3", {"tau_specimen": 0.3}),
    "one_taxon": ("1 taxon", {"taxa": 1}),
    "twenty_taxa": (
        "20 taxa x 5 specimens x 100 junctions (10,000)",
        {"taxa": 20, "specimens_per_taxon": 5, "junctions_per_specimen": 100},
    ),
    "junctions_10": ("10 junctions per specimen", {"junctions_per_specimen": 10}),
    "junctions_1000": ("1000 junctions per specimen (12,000)", {"junctions_per_specimen": 1000}),
    "error_1pct": ("1 % error", {"rel_error": 0.01}),
    "error_20pct": ("20 % error", {"rel_error": 0.20}),
    "trifurcations": ("30 % trifurcations", {"trifurcation_share": 0.3}),
    "unbalanced": (
        "unbalanced: 1, 3 and 6 specimens of 10-200 junctions",
        {
            "specimens_per_taxon": [1, 3, 6],
            "junctions_per_specimen": [200, 15, 60, 120, 10, 40, 80, 25, 150, 30],
        },
    ),
    "split_uniform": ("uniform split fraction", {"split": "uniform"}),
    "split_lognormal": ("log-normal daughters (SD 0.3)", {"split": "lognormal", "split_concentration": 0.3}),
    "split_side": ("one-sided side branches", {"split": "side_branch"}),
    "one_specimen": (
        "1 taxon x 1 specimen x 100 junctions",
        {"taxa": 1, "specimens_per_taxon": 1, "junctions_per_specimen": 100},
    ),
    "funnel": (
        "1 taxon x 12 specimens x 40 junctions, spread 0.01",
        {"taxa": 1, "specimens_per_taxon": 12, "junctions_per_specimen": 40, "tau_specimen": 0.01},
    ),
    "reported_720": (
        "3 x 4 x 60, 4 % error, spread 0.04, uniform split, laws 3 / 2 / 1.5",
        {
            "rel_error": 0.04,
            "tau_specimen": 0.04,
            "split": "uniform",
            "taxon_exponents": {"T1": 3.0, "T2": 2.0, "T3": 1.5},
        },
    ),
}


def simulate(name: str, seed: int):
    """The table of one design and seed."""
    return ab.simulate_junctions(**{**BASE, **DESIGNS[name][1]}, seed=seed)


def run_one(name: str, seed: int) -> list[dict]:
    """Fit one design and seed with defaults; one row per checked exponent."""
    sim = simulate(name, seed)
    table = ab.read_junctions(sim.frame, sim.mapping)
    started = time.perf_counter()
    result = ab.fit(table, seed=seed, progress=False)
    wall = time.perf_counter() - started
    kept = next(a for a in result.settings["attempts"] if a["kept"])
    diag = result.diagnostics()
    post = result.idata.posterior
    base = {
        "design": name,
        "seed": seed,
        "junctions": table.n_junctions,
        "attempts": len(result.settings["attempts"]),
        "divergences": kept["divergences"],
        "max_r_hat": float(diag["r_hat"].max()),
        "min_ess_bulk": float(diag["ess_bulk"].min()),
        "seconds": round(wall, 1),
        "first_divergences": result.settings["attempts"][0]["divergences"],
        "first_max_r_hat": result.settings["attempts"][0]["max_r_hat"],
    }
    if len(sim.truth["a_taxon"]) == 1:  # one taxon: the population exponent is that taxon's
        truths = {("population", "all"): next(iter(sim.truth["a_taxon"].values()))}
    else:
        truths = {
            ("population", "all"): sim.truth["mu"],
            **{("taxon", t): v for t, v in sim.truth["a_taxon"].items()},
        }
    rows = []
    for (level, group), truth in truths.items():
        draws = (
            post["mu"].values.ravel()
            if level == "population"
            else post["a_taxon"].sel(taxon=group).values.ravel()
        )
        lo, hi = az.hdi(draws, hdi_prob=0.9)
        sd = float(draws.std(ddof=1))
        rows.append(
            {
                **base,
                "level": level,
                "group": group,
                "truth": truth,
                "mean": float(draws.mean()),
                "sd": sd,
                "z": (float(draws.mean()) - truth) / sd,
                "covered_90": bool(lo <= truth <= hi),
            }
        )
    return rows


def summarise(frame: pd.DataFrame) -> pd.DataFrame:
    """One row per design: worst diagnostics over seeds and the truth's mean position."""
    fits = frame.drop_duplicates(["design", "seed"])
    per_exponent = frame.groupby(["design", "level", "group"])["z"].mean().abs().groupby("design").max()
    out = fits.groupby("design", sort=False).agg(
        junctions=("junctions", "first"),
        seeds=("seed", "nunique"),
        max_attempts=("attempts", "max"),
        first_divergences=("first_divergences", "max"),
        divergences=("divergences", "max"),
        max_r_hat=("max_r_hat", "max"),
        min_ess_bulk=("min_ess_bulk", "min"),
        median_seconds=("seconds", "median"),
        max_seconds=("seconds", "max"),
    )
    out["worst_mean_abs_z"] = per_exponent.reindex(out.index)
    out["coverage_90"] = frame.groupby("design")["covered_90"].mean().reindex(out.index)
    out["clean"] = (out["divergences"] == 0) & (out["max_r_hat"] <= 1.01)
    out["within_2sd"] = out["worst_mean_abs_z"] <= 2.0
    out.insert(0, "what", [DESIGNS[d][0] for d in out.index])
    return out.reset_index()


def figure(summary: pd.DataFrame, frame: pd.DataFrame, path: Path) -> None:
    """Truth's position (z) per design and the diagnostics, one panel each."""
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    fig, axes = plt.subplots(
        1, 3, figsize=(12, 0.32 * len(summary) + 1.5), sharey=True, constrained_layout=True
    )
    order = list(summary["design"])
    ypos = {d: i for i, d in enumerate(order)}
    jitter = np.random.default_rng(0).uniform(-0.2, 0.2, len(frame))
    axes[0].scatter(frame["z"], frame["design"].map(ypos) + jitter, s=8, alpha=0.6)
    axes[0].axvline(0, color="k", lw=0.8)
    for x in (-2, 2):
        axes[0].axvline(x, color="grey", ls="--", lw=0.8)
    axes[0].set_xlabel("(posterior mean - truth) / posterior sd")
    axes[0].set_yticks(range(len(order)), order)
    axes[0].invert_yaxis()
    axes[1].barh(
        range(len(order)), summary["max_r_hat"] - 1, color=np.where(summary["max_r_hat"] > 1.01, "C3", "C2")
    )
    axes[1].axvline(0.01, color="grey", ls="--", lw=0.8)
    axes[1].set_xlabel("worst R-hat - 1 (kept attempt)")
    axes[2].barh(range(len(order)), summary["median_seconds"], color="C0")
    axes[2].set_xlabel("median wall time per fit (s)")
    fig.suptitle("Default fits over simulated designs (simulated data)")
    fig.savefig(path, dpi=120)
    plt.close(fig)


def _progress_line(name: str, seed: int, got: list[dict]) -> str:
    r = got[0]
    return (
        f"{name:16s} seed {seed}: {r['junctions']:6d} junctions, attempts {r['attempts']}, "
        f"divergences {r['divergences']} (first {r['first_divergences']}), R-hat {r['max_r_hat']:.3f}, "
        f"ESS {r['min_ess_bulk']:.0f}, {r['seconds']:.1f} s, "
        f"|z| max {max(abs(x['z']) for x in got):.2f}"
    )


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    parser.add_argument("--seeds", type=int, default=3)
    parser.add_argument("--designs", default=",".join(DESIGNS))
    parser.add_argument("--out", type=Path, default=RESULTS)
    args = parser.parse_args(argv)
    names = chosen_designs(parser, args.designs, DESIGNS)
    rows = run_designs(names, args.seeds, run_one, _progress_line)
    frame = pd.DataFrame(rows)
    summary = summarise(frame)
    args.out.mkdir(parents=True, exist_ok=True)
    frame.to_csv(args.out / "robustness_fits.csv", index=False)
    summary.to_csv(args.out / "robustness.csv", index=False)
    figure(summary, frame, args.out / "robustness.png")
    with pd.option_context("display.width", 200, "display.max_columns", 30):
        print(summary.drop(columns=["what"]).round(3).to_string(index=False))
    print(
        f"clean designs: {int(summary['clean'].sum())}/{len(summary)}; within 2 sd: "
        f"{int(summary['within_2sd'].sum())}/{len(summary)}"
    )
    return 0


if __name__ == "__main__":
    sys.exit(main())
