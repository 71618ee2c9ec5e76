"""Speed benchmark: the default fast form against the textbook latent form on 10,000 junctions.

The table: 20 taxa x 5 specimens x 100 junctions (bifurcations), 5 % relative error, fixed seed.

1. Fast form (``allobranch.fit`` defaults: marginal likelihood, empirical asymmetry,
   nutpie on the compiled density, whitened hierarchy). Wall time includes building, compiling, sampling and the per-junction
   log-likelihood; sampler settings start at tune = draws = 300 with 4 chains and are doubled until every
   hyper-parameter has R-hat <= 1.01 and bulk ESS >= 400 (thresholds of Vehtari et al. 2021, Bayesian
   Analysis 16:667).
2. Textbook latent form (``ModelSpec(likelihood="latent", parametrization="noncentered")``, every true
   daughter a parameter), compiled the way a user would: ``nutpie.compile_pymc_model`` (numba) and
   ``nutpie.sample`` with the same tune/draws/chains. It runs in a subprocess capped at
   ``--latent-minutes`` (default 15); if it does not finish, the draws done so far are reported. At the
   fast form's settings the latent form does not converge (its ESS is then unreliable), so it is run a
   second time with tune = draws = ``--latent-long`` (default 800), under the same cap; the ratio is
   reported for both runs.

Prints wall times, minimum ESS, ESS per second for ``mu``, the ratio, peak memory, and writes
``benchmarks/results/speed.md`` and ``speed.csv``.

Run::

    /work/venv/bin/python benchmarks/bench_speed.py            # full benchmark (about 25-40 min)
    /work/venv/bin/python benchmarks/bench_speed.py --quick    # 1,000 junctions, to try the pipeline
"""

from __future__ import annotations

import argparse
import json
import os
import platform
import resource
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
import pandas as pd

import allobranch as ab
from allobranch.model.build import HYPER_PARAMETERS, build_model
from allobranch.model.data import model_data

RESULTS = Path(__file__).resolve().parent / "results"
#: Simulation design of the benchmark table.
DESIGN = {
    "taxa": 20,
    "specimens_per_taxon": 5,
    "junctions_per_specimen": 100,
    "rel_error": 0.05,
    "mu": 2.5,
    "tau_taxon": 0.3,
    "tau_specimen": 0.1,
    "sigma_dev": 0.03,
}
QUICK_DESIGN = {**DESIGN, "taxa": 5, "specimens_per_taxon": 2}
DATA_SEED = 20240
SAMPLER_SEED = 7
CHAINS = 4
#: Tune/draws tried in turn until the diagnostics pass.
SETTINGS = (300, 600, 1200)
RHAT_MAX, ESS_MIN = 1.01, 400


def peak_memory_mb(who: int = resource.RUSAGE_SELF) -> float:
    """Peak resident memory (MB) of this process or of its finished children (Linux reports KB)."""
    return resource.getrusage(who).ru_maxrss / 1024.0


def make_table(quick: bool) -> ab.JunctionTable:
    """The benchmark junction table (same seed, same table)."""
    sim = ab.simulate_junctions(**(QUICK_DESIGN if quick else DESIGN), seed=DATA_SEED)
    return ab.read_junctions(sim.frame, sim.mapping)


def hyper_diagnostics(result: ab.FitResult) -> pd.DataFrame:
    """Diagnostics rows of the scalar hyper-parameters."""
    diag = result.diagnostics()
    return diag[diag["parameter"].isin(HYPER_PARAMETERS)]


def run_fast(table: ab.JunctionTable) -> dict:
    """Fit the default fast form, lengthening the run until the hyper-parameters pass the diagnostics."""
    attempts = []
    for n in SETTINGS:
        print(f"[fast] tune = draws = {n}, chains = {CHAINS} ...", flush=True)
        start = time.perf_counter()
        result = ab.fit(table, draws=n, tune=n, chains=CHAINS, seed=SAMPLER_SEED, progress=False)
        wall = time.perf_counter() - start
        hyper = hyper_diagnostics(result)
        full = result.diagnostics()
        mu_ess = float(hyper.set_index("parameter").loc["mu", "ess_bulk"])
        row = {
            "form": "fast (marginal, nutpie on the compiled density)",
            "tune": n,
            "draws": n,
            "chains": CHAINS,
            "wall_s": wall,
            "sampling_s": float(result.settings["seconds"]),
            "min_ess_bulk_hyper": float(hyper["ess_bulk"].min()),
            "max_rhat_hyper": float(hyper["r_hat"].max()),
            "min_ess_bulk_all": float(full["ess_bulk"].min()),
            "max_rhat_all": float(full["r_hat"].max()),
            "ess_mu": mu_ess,
            "ess_per_s_mu": mu_ess / wall,
            "divergences": int(result.sampler_checks()["divergences"]),
            "finished": True,
        }
        print(
            f"[fast] wall {wall:.1f} s; min bulk ESS (hyper) {row['min_ess_bulk_hyper']:.0f}; max R-hat "
            f"(hyper) {row['max_rhat_hyper']:.4f}; ESS/s (mu) {row['ess_per_s_mu']:.2f}",
            flush=True,
        )
        attempts.append(row)
        if row["max_rhat_hyper"] <= RHAT_MAX and row["min_ess_bulk_hyper"] >= ESS_MIN:
            break
    return {"attempts": attempts, "final": attempts[-1]}


# -- latent form, in a subprocess -----------------------------------------------------------------------
def latent_worker(out: Path, tune: int, draws: int, budget_s: float, quick: bool) -> None:
    """Compile the latent form with nutpie's numba backend and sample within a time budget (subprocess)."""
    import arviz as az
    import nutpie

    t0 = time.perf_counter()
    table = make_table(quick)
    built = build_model(model_data(table), ab.ModelSpec(likelihood="latent", parametrization="noncentered"))
    compiled = nutpie.compile_pymc_model(built.model)
    compile_s = time.perf_counter() - t0
    print(f"[latent] compiled in {compile_s:.1f} s; sampling ...", flush=True)
    sampler = nutpie.sample(
        compiled, draws=draws, tune=tune, chains=CHAINS, seed=SAMPLER_SEED, progress_bar=False, blocking=False
    )
    try:
        idata = sampler.wait(timeout=max(budget_s - (time.perf_counter() - t0), 1.0))
        finished = True
    except TimeoutError:  # nutpie raises when the time is up; abort() returns the draws so far
        idata = sampler.abort()
        finished = False
    wall = time.perf_counter() - t0
    report = {
        "compile_s": compile_s,
        "wall_s": wall,
        "finished": finished,
        "tune": tune,
        "draws": draws,
        "chains": CHAINS,
        "n_parameters": int(sum(np.size(v) for v in built.model.initial_point().values())),
    }
    groups = idata.groups()
    done_warmup = (
        int(idata.warmup_sample_stats.sizes.get("draw", 0)) if "warmup_sample_stats" in groups else 0
    )
    done_draws = int(idata.posterior.sizes.get("draw", 0)) if "posterior" in groups else 0
    report.update({"warmup_done": done_warmup, "draws_done": done_draws})
    if finished and done_draws > 3:
        names = [n for n in HYPER_PARAMETERS if n in idata.posterior]
        ess = az.ess(idata, var_names=names, method="bulk")
        rhat = az.rhat(idata, var_names=names)
        report.update(
            {
                "ess_mu": float(ess["mu"]),
                "min_ess_bulk_hyper": float(min(float(ess[n]) for n in names)),
                "max_rhat_hyper": float(max(float(rhat[n]) for n in names)),
                "divergences": int(idata.sample_stats["diverging"].sum()),
                "mean_tree_steps": float(idata.sample_stats["n_steps"].mean()),
            }
        )
    report["peak_memory_mb"] = peak_memory_mb()
    out.write_text(json.dumps(report), encoding="utf-8")


def run_latent(tune: int, draws: int, minutes: float, quick: bool) -> dict:
    """Run :func:`latent_worker` in a subprocess with a hard time limit."""
    out = RESULTS / ".latent_worker.json"
    out.unlink(missing_ok=True)
    budget = minutes * 60.0
    cmd = [
        sys.executable,
        str(Path(__file__).resolve()),
        "--latent-worker",
        str(out),
        "--tune",
        str(tune),
        "--draws",
        str(draws),
        "--budget",
        str(budget),
    ] + (["--quick"] if quick else [])
    print(
        f"[latent] textbook form, tune = draws = {draws}, chains = {CHAINS}, cap {minutes:g} min ...",
        flush=True,
    )
    start = time.perf_counter()
    try:
        subprocess.run(cmd, check=True, timeout=budget + 300)
        report = json.loads(out.read_text(encoding="utf-8"))
    except subprocess.TimeoutExpired:
        report = {
            "finished": False,
            "wall_s": time.perf_counter() - start,
            "note": "killed at the hard limit",
        }
    finally:
        out.unlink(missing_ok=True)
    report["wall_outer_s"] = time.perf_counter() - start
    report["children_peak_memory_mb"] = peak_memory_mb(resource.RUSAGE_CHILDREN)
    return report


# -- report -----------------------------------------------------------------------------------------------
def environment() -> dict:
    cpu = "?"
    try:
        cpu = next(
            line.split(":", 1)[1].strip()
            for line in Path("/proc/cpuinfo").read_text().splitlines()
            if line.startswith("model name")
        )
    except (OSError, StopIteration):
        pass
    return {
        "python": platform.python_version(),
        "cpu": cpu,
        "cores": os.cpu_count(),
        "load_average_1min": os.getloadavg()[0],
        "allobranch": ab.__version__,
    }


def _latent_lines(latent: dict, fast_ess_s: float) -> list[str]:
    """Report lines of one latent run."""
    if latent.get("note") == "skipped":
        return ["Skipped."]
    if latent.get("finished"):
        ess_s = latent["ess_mu"] / latent["wall_s"]
        converged = latent["max_rhat_hyper"] <= RHAT_MAX and latent["min_ess_bulk_hyper"] >= ESS_MIN
        return [
            f"Finished: wall time {latent['wall_s']:.1f} s (compile {latent['compile_s']:.1f} s), "
            f"{latent['n_parameters']:,} parameters, mean {latent['mean_tree_steps']:.0f} leapfrog steps per draw.",
            f"ESS(mu) {latent['ess_mu']:.0f}, ESS/s (mu) {ess_s:.3f}; min bulk ESS (hyper) "
            f"{latent['min_ess_bulk_hyper']:.0f}, max R-hat (hyper) {latent['max_rhat_hyper']:.4f}, "
            f"{latent['divergences']} divergences: diagnostics target {'met' if converged else 'NOT met'}"
            + ("" if converged else " (its ESS estimates are then unreliable, and usually too high)")
            + ".",
            "",
            f"**Ratio of ESS/s for mu, fast / latent: {fast_ess_s / ess_s:.1f}x** (target >= 5x).",
        ]
    total = latent.get("tune", 0) + latent.get("draws", 0)
    done = latent.get("warmup_done", 0) + latent.get("draws_done", 0)
    wall = latent.get("wall_s", float("nan"))
    bound = CHAINS * latent.get("draws", 0) / wall
    return [
        f"**Did not finish in {wall / 60:.1f} min** (compile {latent.get('compile_s', float('nan')):.1f} s; "
        f"{latent.get('n_parameters', 0):,} parameters). Iterations completed per chain when stopped: "
        f"{done} of {total} (tuning + draws).",
        "",
        "A bound on the ratio: even if the latent form had reached a bulk ESS equal to its total number of "
        f"draws ({CHAINS * latent.get('draws', 0)}) the moment the cap was reached, its ESS/s for mu would be "
        f"at most {bound:.3f}, so the fast form is at least **{fast_ess_s / bound:.1f}x** faster in ESS/s for mu "
        "(target >= 5x).",
    ]


def write_report(
    fast: dict,
    latents: list[tuple[str, dict]],
    env_start: dict,
    env_end: dict,
    n_junctions: int,
    fast_mem: float,
    total_s: float,
) -> str:
    """Markdown report of the benchmark."""
    f = fast["final"]
    lines = [
        "# Speed: fast marginal form vs textbook latent form",
        "",
        f"Table: {n_junctions:,} junctions (simulated, seed {DATA_SEED}: {DESIGN['taxa']} taxa x "
        f"{DESIGN['specimens_per_taxon']} specimens x {DESIGN['junctions_per_specimen']} junctions, "
        f"{DESIGN['rel_error']:.0%} relative error). {CHAINS} chains, sampler seed {SAMPLER_SEED}.",
        f"Machine: {env_start['cpu']}, {env_start['cores']} cores; load average (1 min) "
        f"{env_start['load_average_1min']:.1f} at the start and {env_end['load_average_1min']:.1f} at the end "
        "(other jobs shared the machine when it was above the core count, which inflates every time below).",
        "",
        "## Fast form (default)",
        "",
        "| tune = draws | wall time (s) | of which compile + sampling (s) | min bulk ESS (hyper) | max R-hat (hyper) "
        "| min bulk ESS (all) | max R-hat (all) | ESS(mu) | ESS/s (mu) | divergences |",
        "|---|---|---|---|---|---|---|---|---|---|",
    ]
    for a in fast["attempts"]:
        lines.append(
            f"| {a['draws']} | {a['wall_s']:.1f} | {a['sampling_s']:.1f} | {a['min_ess_bulk_hyper']:.0f} | "
            f"{a['max_rhat_hyper']:.4f} | {a['min_ess_bulk_all']:.0f} | {a['max_rhat_all']:.4f} | {a['ess_mu']:.0f} | "
            f"{a['ess_per_s_mu']:.2f} | {a['divergences']} |"
        )
    passed = f["max_rhat_hyper"] <= RHAT_MAX and f["min_ess_bulk_hyper"] >= ESS_MIN
    lines += [
        "",
        f"Diagnostics target (R-hat <= {RHAT_MAX}, bulk ESS >= {ESS_MIN} on every hyper-parameter present among "
        f"{', '.join(n for n in HYPER_PARAMETERS)}): {'met' if passed else 'NOT met'} at tune = draws = "
        f"{f['draws']}. The (all) columns add every taxon and specimen exponent.",
        f"Peak memory of the benchmark process (fast form): {fast_mem:.0f} MB.",
        "",
    ]
    for title, latent in latents:
        lines += [f"## {title}", ""]
        lines += _latent_lines(latent, f["ess_per_s_mu"])
        lines += [
            f"Peak memory of the latent subprocess: {latent.get('peak_memory_mb', float('nan')):.0f} MB.",
            "",
        ]
    lines += [f"Total benchmark time: {total_s / 60:.1f} min.", ""]
    return "\n".join(lines)


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true", help="1,000 junctions instead of 10,000")
    parser.add_argument("--latent-minutes", type=float, default=15.0, help="cap of the latent run (minutes)")
    parser.add_argument("--skip-latent", action="store_true", help="only the fast form")
    parser.add_argument(
        "--latent-long",
        type=int,
        default=800,
        help="also run the latent form with this tune = draws (0: skip; default 800)",
    )
    parser.add_argument("--latent-worker", type=Path, help=argparse.SUPPRESS)
    parser.add_argument("--tune", type=int, default=300, help=argparse.SUPPRESS)
    parser.add_argument("--draws", type=int, default=300, help=argparse.SUPPRESS)
    parser.add_argument("--budget", type=float, default=900.0, help=argparse.SUPPRESS)
    args = parser.parse_args(argv)
    if args.latent_worker is not None:
        latent_worker(args.latent_worker, args.tune, args.draws, args.budget, args.quick)
        return 0

    RESULTS.mkdir(parents=True, exist_ok=True)
    start = time.perf_counter()
    env_start = environment()
    print(f"[speed] {env_start}", flush=True)
    table = make_table(args.quick)
    print(f"[speed] table: {table.n_junctions:,} junctions", flush=True)
    fast = run_fast(table)
    fast_mem = peak_memory_mb()
    print(f"[fast] peak memory {fast_mem:.0f} MB", flush=True)
    f = fast["final"]
    latents: list[tuple[str, dict]] = []
    if args.skip_latent:
        latents.append(("Textbook latent form", {"finished": False, "note": "skipped"}))
    else:
        runs = [(f["tune"], f["draws"], "same tune and draws as the fast form")]
        if args.latent_long and args.latent_long > f["draws"]:
            runs.append((args.latent_long, args.latent_long, "longer run, to see whether it converges"))
        for tune, draws, why in runs:
            latent = run_latent(tune, draws, args.latent_minutes, args.quick)
            title = (
                f"Textbook latent form, tune = draws = {draws} ({why}; nutpie.compile_pymc_model + "
                "nutpie.sample, numba)"
            )
            latents.append((title, latent))
            if latent.get("finished"):
                ess_s = latent["ess_mu"] / latent["wall_s"]
                print(
                    f"[latent] wall {latent['wall_s']:.1f} s (compile {latent['compile_s']:.1f} s); ESS/s (mu) "
                    f"{ess_s:.3f}; max R-hat (hyper) {latent['max_rhat_hyper']:.3f}; ratio fast/latent "
                    f"{f['ess_per_s_mu'] / ess_s:.1f}x",
                    flush=True,
                )
            else:
                print(
                    f"[latent] did not finish in {latent.get('wall_s', float('nan')) / 60:.1f} min "
                    f"(warmup {latent.get('warmup_done')}, draws {latent.get('draws_done')})",
                    flush=True,
                )
            print(f"[latent] peak memory {latent.get('peak_memory_mb', float('nan')):.0f} MB", flush=True)
    env_end = environment()
    total = time.perf_counter() - start
    if args.quick:
        print("[speed] quick run: results not written", flush=True)
        return 0
    rows = list(fast["attempts"])
    for title, latent in latents:
        rows.append({"form": title, **{k: v for k, v in latent.items() if not isinstance(v, dict)}})
    pd.DataFrame(rows).to_csv(RESULTS / "speed.csv", index=False)
    text = write_report(fast, latents, env_start, env_end, table.n_junctions, fast_mem, total)
    (RESULTS / "speed.md").write_text(text, encoding="utf-8")
    print(text)
    return 0


if __name__ == "__main__":
    sys.exit(main())
