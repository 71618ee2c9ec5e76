"""Parameter recovery on simulated data with known truth, and the fast form against the exact latent form.

Part 1, recovery. For every setting, a few replicate tables are simulated with
:func:`allobranch.simulate_junctions` (known taxon exponents 2.0, 2.5, 3.0 and 2.7; between-specimen SD
0.1; biological deviation 0.03), each is fitted with the default fast form, and the taxon exponents are
scored against the truth: bias and RMSE of the posterior means, and how often the 90 % HDI covers the
true value. Beside them, on the same tables, the naive estimate: the median of the per-junction roots per
taxon (:func:`allobranch.junction_geometry` / :func:`allobranch.naive_summary`), with the share of
junctions that have no root.

Settings: 1, 5, 10, 20 % relative error (30 junctions per specimen); few (10) and many (60) junctions per
specimen; 30 % trifurcations; an unbalanced design (1 to 4 specimens per taxon, 5 to 60 junctions per
specimen); absolute error only (an SE column of 0.01 mm, no relative error).

Part 2, fast vs exact. On three small tables the fast form (marginal, delta method, empirical asymmetry)
and the textbook latent form (every true daughter a parameter, asymmetry sampled) are fitted with long
chains; their posterior means and SDs of the taxon exponents are shown side by side.

Writes ``benchmarks/results/recovery.md``, ``recovery.csv`` (one row per fitted taxon) and
``recovery_latent.csv``. Run::

    /work/venv/bin/python benchmarks/recovery.py            # about 15-20 min on 2 cores
    /work/venv/bin/python benchmarks/recovery.py --quick    # one replicate, two settings
"""

from __future__ import annotations

import argparse
import os
import sys
import time
import warnings
from pathlib import Path

import numpy as np
import pandas as pd
from scipy import stats

import allobranch as ab
from allobranch.model.simulate import SimulatedData

RESULTS = Path(__file__).resolve().parent / "results"
#: True taxon exponents of every recovery table.
TAXON_EXPONENTS = {"T1": 2.0, "T2": 2.5, "T3": 3.0, "T4": 2.7}
#: Simulation settings shared by every recovery table unless a setting overrides them.
BASE = {
    "taxa": list(TAXON_EXPONENTS),
    "taxon_exponents": TAXON_EXPONENTS,
    "specimens_per_taxon": 3,
    "junctions_per_specimen": 30,
    "tau_specimen": 0.1,
    "sigma_dev": 0.03,
    "rel_error": 0.05,
}
#: name -> (description, overrides of BASE).
SETTINGS: dict[str, tuple[str, dict]] = {
    "rel_01": ("1 % relative error", {"rel_error": 0.01}),
    "rel_05": ("5 % relative error (baseline)", {}),
    "rel_10": ("10 % relative error", {"rel_error": 0.10}),
    "rel_20": ("20 % relative error", {"rel_error": 0.20}),
    "few": ("few junctions: 10 per specimen", {"junctions_per_specimen": 10}),
    "many": ("many junctions: 60 per specimen", {"junctions_per_specimen": 60}),
    "trifurcations": ("30 % trifurcations", {"trifurcation_share": 0.3}),
    "unbalanced": (
        "unbalanced: 1/2/4/3 specimens per taxon, 5-60 junctions per specimen",
        {
            "specimens_per_taxon": [1, 2, 4, 3],
            "junctions_per_specimen": [60, 8, 40, 5, 12, 30, 20, 10, 6, 45],
        },
    ),
    "absolute": (
        "absolute error only: SE 0.01 mm, parents 0.3-2 mm",
        {"rel_error": 0.0, "abs_error": 0.01, "parent_range": (0.3, 2.0)},
    ),
}
REPLICATES = 3
SAMPLER = {"draws": 400, "tune": 400, "chains": 2}
HDI_PROB = 0.9
#: Small tables on which the fast form is compared with the exact latent form.
LATENT_CASES: dict[str, tuple[str, dict]] = {
    "small_5pct": ("2 taxa x 2 specimens x 12 junctions, 5 % error", {"rel_error": 0.05}),
    "small_15pct": ("2 taxa x 2 specimens x 12 junctions, 15 % error", {"rel_error": 0.15}),
    "small_trif": (
        "2 taxa x 2 specimens x 12 junctions, 10 % error, 30 % trifurcations",
        {"rel_error": 0.10, "trifurcation_share": 0.3},
    ),
}
LATENT_BASE = {
    "taxa": ["A", "B"],
    "taxon_exponents": {"A": 2.2, "B": 3.0},
    "specimens_per_taxon": 2,
    "junctions_per_specimen": 12,
    "tau_specimen": 0.1,
    "sigma_dev": 0.03,
}
LATENT_SAMPLER = {"draws": 1000, "tune": 1000, "chains": 2}


def simulate(overrides: dict, seed: int) -> SimulatedData:
    """One recovery table."""
    return ab.simulate_junctions(**{**BASE, **overrides, "seed": seed})


def score_table(name: str, replicate: int, sim: SimulatedData, seed: int) -> pd.DataFrame:
    """Fit one table with the fast form and score its taxon exponents; add the naive medians."""
    table = ab.read_junctions(sim.frame, sim.mapping)
    start = time.perf_counter()
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        result = ab.fit(table, seed=seed, progress=False, **SAMPLER)
    seconds = time.perf_counter() - start
    exps = result.exponents(HDI_PROB)
    exps = exps[exps["level"] == "taxon"].set_index("group")
    naive = ab.naive_summary(ab.junction_geometry(table), by=("taxon",)).set_index("taxon")
    checks = result.sampler_checks()
    diag = result.diagnostics()
    rows = []
    for taxon, truth in sim.truth["a_taxon"].items():
        e = exps.loc[taxon]
        rows.append(
            {
                "setting": name,
                "replicate": replicate,
                "taxon": taxon,
                "truth": truth,
                "mean": e["mean"],
                "sd": e["sd"],
                "hdi_low": e["hdi_low"],
                "hdi_high": e["hdi_high"],
                "covered": bool(e["hdi_low"] <= truth <= e["hdi_high"]),
                "naive_median": naive.loc[taxon, "median"],
                "naive_share_no_root": naive.loc[taxon, "share_no_root"],
                "n_junctions": int(naive.loc[taxon, "n_junctions"]),
                "max_rhat": float(diag["r_hat"].max()),
                "min_ess_bulk": float(diag["ess_bulk"].min()),
                "divergences": int(checks["divergences"]),
                "seconds": seconds,
            }
        )
    return pd.DataFrame(rows)


def summarise(per_taxon: pd.DataFrame) -> pd.DataFrame:
    """Bias, RMSE and coverage per setting, model and naive side by side."""
    out = []
    for name, g in per_taxon.groupby("setting", sort=False):
        err = g["mean"] - g["truth"]
        naive_err = g["naive_median"] - g["truth"]
        out.append(
            {
                "setting": name,
                "description": SETTINGS[name][0],
                "fits": g["replicate"].nunique(),
                "intervals": len(g),
                "model_bias": err.mean(),
                "model_rmse": float(np.sqrt((err**2).mean())),
                "coverage_90": g["covered"].mean(),
                "covered": int(g["covered"].sum()),
                "mean_sd": g["sd"].mean(),
                "naive_bias": naive_err.mean(),
                "naive_rmse": float(np.sqrt((naive_err**2).mean())),
                "naive_no_root": g["naive_share_no_root"].mean(),
                "max_rhat": g["max_rhat"].max(),
                "divergences": int(g.drop_duplicates("replicate")["divergences"].sum()),
                "seconds_per_fit": g.drop_duplicates("replicate")["seconds"].mean(),
            }
        )
    return pd.DataFrame(out)


def fast_vs_latent(quick: bool) -> pd.DataFrame:
    """Posterior means and SDs of taxon exponents from the fast and the latent form on small tables."""
    rows = []
    cases = list(LATENT_CASES.items())[: 1 if quick else None]
    sampler = {"draws": 300, "tune": 300, "chains": 2} if quick else LATENT_SAMPLER
    for i, (name, (description, overrides)) in enumerate(cases):
        sim = ab.simulate_junctions(**{**LATENT_BASE, **overrides, "seed": 500 + i})
        table = ab.read_junctions(sim.frame, sim.mapping)
        fits = {}
        for form, spec in (("fast", ab.ModelSpec()), ("latent", ab.ModelSpec(likelihood="latent"))):
            start = time.perf_counter()
            with warnings.catch_warnings():
                warnings.simplefilter("ignore")
                fits[form] = ab.fit(table, spec, seed=9, progress=False, **sampler)
            print(f"[latent check] {name}: {form} form {time.perf_counter() - start:.0f} s", flush=True)
        tabs = {f: r.exponents().set_index(["level", "group"]) for f, r in fits.items()}
        for key in tabs["fast"].index:
            if key[0] == "specimen":
                continue
            fa, la = tabs["fast"].loc[key], tabs["latent"].loc[key]
            truth = sim.truth["a_taxon"].get(key[1], np.nan) if key[0] == "taxon" else np.nan
            rows.append(
                {
                    "case": name,
                    "description": description,
                    "level": key[0],
                    "group": key[1],
                    "truth": truth,
                    "fast_mean": fa["mean"],
                    "fast_sd": fa["sd"],
                    "latent_mean": la["mean"],
                    "latent_sd": la["sd"],
                    "diff_in_latent_sd": (fa["mean"] - la["mean"]) / la["sd"],
                    "sd_ratio": fa["sd"] / la["sd"],
                    "fast_max_rhat": float(fits["fast"].diagnostics()["r_hat"].max()),
                    "latent_max_rhat": float(fits["latent"].diagnostics()["r_hat"].max()),
                    "latent_divergences": int(fits["latent"].sampler_checks()["divergences"]),
                }
            )
    return pd.DataFrame(rows)


def _fmt(x: float, digits: int = 3) -> str:
    return f"{x:+.{digits}f}" if np.isfinite(x) else "-"


def write_markdown(summary: pd.DataFrame, latent: pd.DataFrame, minutes: float | None) -> str:
    """Markdown report: recovery table, then fast vs latent."""
    n = int(summary["intervals"].max())
    lo = int(stats.binom.ppf(0.025, n, HDI_PROB))
    lines = [
        "# Parameter recovery (fast form) and the naive per-junction estimate",
        "",
        f"Truth: taxon exponents {', '.join(f'{k} = {v}' for k, v in TAXON_EXPONENTS.items())}; between-specimen "
        f"SD {BASE['tau_specimen']}; biological deviation {BASE['sigma_dev']} (log scale); "
        f"{BASE['specimens_per_taxon']} specimens per taxon and {BASE['junctions_per_specimen']} junctions per "
        f"specimen unless the setting says otherwise. {REPLICATES} replicate tables per setting, each fitted "
        f"with the default fast form ({SAMPLER['chains']} chains, tune {SAMPLER['tune']}, draws "
        f"{SAMPLER['draws']}). Bias and RMSE are over all taxa and replicates of a setting; coverage counts "
        f"the {int(HDI_PROB * 100)} % HDIs of the taxon exponents that contain the truth (with {n} intervals "
        f"per setting, {lo}-{n} covered is in line with {HDI_PROB:.0%}: central 95 % range of "
        f"Binomial({n}, {HDI_PROB}), scipy.stats.binom).",
        "The naive column is the median of per-junction roots per taxon on the same tables (junctions without a "
        "root are left out of it, as the naive practice does; their share is shown).",
        "",
        "| setting | model bias | model RMSE | 90 % HDI coverage | mean posterior SD | naive bias | naive RMSE "
        "| no-root share | max R-hat | divergences | s per fit |",
        "|---|---|---|---|---|---|---|---|---|---|---|",
    ]
    for r in summary.itertuples():
        lines.append(
            f"| {r.description} | {_fmt(r.model_bias)} | {r.model_rmse:.3f} | {r.covered}/{r.intervals} | "
            f"{r.mean_sd:.3f} | {_fmt(r.naive_bias)} | {r.naive_rmse:.3f} | {r.naive_no_root:.1%} | "
            f"{r.max_rhat:.3f} | {r.divergences} | {r.seconds_per_fit:.0f} |"
        )
    total_cov = summary["covered"].sum() / summary["intervals"].sum()
    lines += [
        "",
        f"Overall coverage: {summary['covered'].sum()}/{summary['intervals'].sum()} = {total_cov:.1%}.",
        "",
    ]
    if len(latent):
        lines += [
            "## Fast (marginal, delta method) vs exact latent form",
            "",
            f"Same tables, {LATENT_SAMPLER['chains']} chains x {LATENT_SAMPLER['draws']} draws (tune "
            f"{LATENT_SAMPLER['tune']}) each. The latent form keeps every true daughter radius as a parameter and "
            "samples the asymmetry scale; the fast form integrates the daughters out and plugs in the empirical "
            "asymmetry scale. `diff / SD` is (fast mean - latent mean) / latent SD.",
            "",
            "| table | level | group | truth | fast mean | fast SD | latent mean | latent SD | diff / SD | SD ratio |",
            "|---|---|---|---|---|---|---|---|---|---|",
        ]
        for r in latent.itertuples():
            truth = f"{r.truth:.2f}" if np.isfinite(r.truth) else "-"
            lines.append(
                f"| {r.description} | {r.level} | {r.group} | {truth} | {r.fast_mean:.3f} | {r.fast_sd:.3f} | "
                f"{r.latent_mean:.3f} | {r.latent_sd:.3f} | {r.diff_in_latent_sd:+.2f} | {r.sd_ratio:.2f} |"
            )
        lines += [
            "",
            f"Largest |diff / SD|: {latent['diff_in_latent_sd'].abs().max():.2f}; SD ratios "
            f"{latent['sd_ratio'].min():.2f}-{latent['sd_ratio'].max():.2f}; latent max R-hat "
            f"{latent['latent_max_rhat'].max():.3f}, divergences {latent.drop_duplicates('case')['latent_divergences'].sum()}.",
            "",
        ]
    run_time = f" Total run time {minutes:.1f} min." if minutes is not None else ""
    lines += [f"Load average when written: {os.getloadavg()[0]:.1f} on {os.cpu_count()} cores.{run_time}", ""]
    return "\n".join(lines)


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description="Recovery on simulated data; fast vs latent form.")
    parser.add_argument("--quick", action="store_true", help="one replicate of two settings (pipeline check)")
    parser.add_argument("--replicates", type=int, default=REPLICATES)
    parser.add_argument(
        "--report-only",
        action="store_true",
        help="rewrite recovery.md from the saved CSV files without fitting",
    )
    args = parser.parse_args(argv)
    if args.report_only:
        per_taxon = pd.read_csv(RESULTS / "recovery.csv")
        minutes = float(per_taxon["minutes"].iloc[0]) if "minutes" in per_taxon else None
        text = write_markdown(summarise(per_taxon), pd.read_csv(RESULTS / "recovery_latent.csv"), minutes)
        (RESULTS / "recovery.md").write_text(text, encoding="utf-8")
        print(text)
        return 0
    start = time.perf_counter()
    settings = list(SETTINGS.items())[:2] if args.quick else list(SETTINGS.items())
    reps = 1 if args.quick else args.replicates
    frames = []
    for s, (name, (_description, overrides)) in enumerate(settings):
        for r in range(reps):
            seed = 1000 * (s + 1) + r
            sim = simulate(overrides, seed)
            frames.append(score_table(name, r, sim, seed))
            last = frames[-1]
            print(
                f"[recovery] {name} rep {r + 1}/{reps}: bias {np.mean(last['mean'] - last['truth']):+.3f}, "
                f"covered {int(last['covered'].sum())}/{len(last)}, naive bias "
                f"{np.mean(last['naive_median'] - last['truth']):+.3f}, {last['seconds'].iloc[0]:.0f} s "
                f"[{(time.perf_counter() - start) / 60:.1f} min]",
                flush=True,
            )
    per_taxon = pd.concat(frames, ignore_index=True)
    summary = summarise(per_taxon)
    print(summary.to_string(index=False), flush=True)
    latent = fast_vs_latent(args.quick)
    if len(latent):
        print(
            latent[["case", "level", "group", "fast_mean", "fast_sd", "latent_mean", "latent_sd"]].to_string(
                index=False
            )
        )
    minutes = (time.perf_counter() - start) / 60
    if args.quick:
        print(f"[recovery] quick run done in {minutes:.1f} min; results not written", flush=True)
        return 0
    RESULTS.mkdir(parents=True, exist_ok=True)
    per_taxon["minutes"] = minutes
    per_taxon.to_csv(RESULTS / "recovery.csv", index=False)
    latent.to_csv(RESULTS / "recovery_latent.csv", index=False)
    text = write_markdown(summary, latent, minutes)
    (RESULTS / "recovery.md").write_text(text, encoding="utf-8")
    print(text)
    return 0


if __name__ == "__main__":
    sys.exit(main())
