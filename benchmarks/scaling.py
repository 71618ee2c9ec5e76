"""How a default fit scales with the number of junctions: wall time, ESS/s, peak memory, saved size.

Tables: 20 taxa x 5 specimens x (n / 100) junctions, 5 % relative error, taxon spread 0.3, specimen spread
0.1, Dirichlet daughters (``allobranch.simulate``; simulated data). Each size runs in its own process, so
its peak memory (``resource.getrusage``, maximum resident set size) is its own:

1. simulate and validate the table;
2. ``allobranch.fit`` with default settings (4 chains x 1000 draws, automatic escalation; the tuning length
   and target acceptance are the fit's own size-aware defaults, :func:`allobranch.model.spec.sampler_defaults`:
   1000 steps at 0.9 below 20,000 junctions, 300 steps at 0.8 from there on), timed;
3. ``FitResult.save`` (the lean saved fit: no pointwise log-likelihood), timed, and the file's size;

then, in a fresh process, ``FitResult.load`` and PSIS-LOO of the saved fit (the pointwise log-likelihood
recomputed in blocks of junctions, :func:`allobranch.comparison.loo.elpd_loo`), timed, with its own peak
memory. The growth exponent is the slope of log wall time against log junctions (least squares,
:func:`numpy.polyfit`); 1 is linear.

Run::

    python benchmarks/scaling.py                          # 10^3 ... 10^6 (about 30 min on 2 quiet cores)
    python benchmarks/scaling.py --sizes 1000 10000 --append
"""

from __future__ import annotations

import argparse
import json
import os
import resource
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np
import pandas as pd

RESULTS = Path(__file__).resolve().parent / "results"
SIZES = (1_000, 10_000, 100_000, 1_000_000)
SEED = 20251
COLUMNS = (
    "junctions",
    "draws",
    "tune",
    "target_accept",
    "escalate",
    "simulate_s",
    "fit_s",
    "sampling_s",
    "attempts",
    "divergences",
    "max_r_hat",
    "min_ess_bulk",
    "steps_per_draw",
    "ess_mu",
    "ess_per_s_mu",
    "fit_peak_gb",
    "save_s",
    "saved_mb",
    "loo_s",
    "loo_peak_gb",
)


def _peak_gb() -> float:
    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024**2  # ru_maxrss is in KiB on Linux


def child_fit(n: int, path: Path, draws: int, tune: int | None, escalate: bool) -> dict:
    """Simulate, fit and save one size (run in its own process)."""
    import allobranch as ab

    started = time.perf_counter()
    design = ab.Design(taxa=20, specimens=5, junctions=n // 100, tau_taxon=0.3, tau_specimen=0.1, error=0.05)
    table = ab.simulate(design, seed=SEED).table
    simulated = time.perf_counter()
    result = ab.fit(table, seed=SEED, progress=False, draws=draws, tune=tune, escalate=escalate)
    fitted = time.perf_counter()
    result.save(path)
    saved = time.perf_counter()
    mu = result.exponents().iloc[0]
    attempts = result.settings["attempts"]
    kept = next(a for a in attempts if a["kept"])
    return {
        "junctions": n,
        "draws": draws,
        "tune": result.settings["tune"],
        "target_accept": attempts[0]["target_accept"],
        "escalate": escalate,
        "simulate_s": simulated - started,
        "fit_s": fitted - simulated,
        "sampling_s": sum(a["seconds"] for a in attempts),
        "attempts": len(attempts),
        "divergences": kept["divergences"],
        "max_r_hat": kept["max_r_hat"],
        "min_ess_bulk": kept["min_ess_bulk"],
        "steps_per_draw": float(result.idata.sample_stats["n_steps"].mean()),
        "ess_mu": float(mu["ess_bulk"]),
        "ess_per_s_mu": float(mu["ess_bulk"]) / (fitted - simulated),
        "fit_peak_gb": _peak_gb(),
        "save_s": saved - fitted,
        "saved_mb": path.stat().st_size / 1e6,
    }


def child_loo(path: Path) -> dict:
    """Load a saved fit and run PSIS-LOO on it (the log-likelihood recomputed in blocks)."""
    import allobranch as ab
    from allobranch.comparison.loo import elpd_loo

    started = time.perf_counter()
    elpd_loo(ab.FitResult.load(path))
    return {"loo_s": time.perf_counter() - started, "loo_peak_gb": _peak_gb()}


def _child(args: list[str]) -> dict:
    out = subprocess.run([sys.executable, __file__, *args], capture_output=True, text=True)
    if out.returncode != 0:
        raise RuntimeError(f"child {args} failed:\n{out.stderr[-3000:]}")
    return json.loads(out.stdout.strip().splitlines()[-1])


def growth_exponent(frame: pd.DataFrame, column: str) -> float:
    """Slope of log(column) against log(junctions) (least squares)."""
    return float(np.polyfit(np.log(frame["junctions"]), np.log(frame[column]), 1)[0])


def per_iteration(frame: pd.DataFrame) -> pd.Series:
    """Sampling seconds per iteration (tuning or draw, all chains): comparable across draw settings."""
    return frame["sampling_s"] / (frame["draws"] + frame["tune"])


def write_markdown(frame: pd.DataFrame) -> str:
    """The results table, the growth exponents and how to read them."""
    shown = frame.copy()
    shown.insert(shown.columns.get_loc("sampling_s") + 1, "s_per_iteration", per_iteration(frame))
    lines = [
        "# Scaling of a default fit with the number of junctions",
        "",
        "Tables: 20 taxa x 5 specimens x (n / 100) junctions, 5 % relative error, taxon spread 0.3, specimen "
        "spread 0.1, Dirichlet daughters (simulated, `allobranch.simulate`, seed "
        f"{SEED}). Fits with default settings (4 chains x 1000 draws, automatic escalation) on {os.cpu_count()} "
        "cores; `tune` and `target_accept` are the fit's size-aware defaults (300 and 0.8 from 20,000 junctions "
        "on). `fit_s` is the whole of `allobranch.fit` (pilot, compiling, sampling, predictive draws, "
        "diagnostics), `sampling_s` the sampling attempts alone, `s_per_iteration` sampling seconds per "
        "iteration of all chains; `min_ess_bulk` the lowest bulk ESS over mu, the spreads, the taxon and "
        "specimen exponents; `ess_per_s_mu` the bulk ESS of mu per second of `fit_s`. Each size in its own "
        "process; peak memory is that process's maximum resident set size. `saved_mb` is the saved `fit.nc` "
        "(no pointwise log-likelihood); `loo_s` / `loo_peak_gb`: loading it and PSIS-LOO with the "
        "log-likelihood recomputed in blocks of junctions, in a fresh process.",
        "",
        shown.to_markdown(index=False, floatfmt=".3g"),
        "",
    ]
    default = frame[frame["draws"] == 1000]
    if len(default) >= 2:
        lines.append(
            "Growth exponent (default 1000 draws; slope of log time vs log junctions, 1 = linear): fit wall "
            f"time {growth_exponent(default, 'fit_s'):.2f}, sampling {growth_exponent(default, 'sampling_s'):.2f}, "
            f"saved size {growth_exponent(default, 'saved_mb'):.2f}, LOO {growth_exponent(default, 'loo_s'):.2f}."
        )
    every = frame.assign(s_per_iteration=per_iteration(frame))
    lines.append(
        f"Growth exponent of the sampling time per iteration over every row: "
        f"{growth_exponent(every, 's_per_iteration'):.2f}."
    )
    lines += ["", f"Load average when written: {os.getloadavg()[0]:.1f} on {os.cpu_count()} cores.", ""]
    return "\n".join(lines)


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--sizes", type=int, nargs="+", default=list(SIZES))
    parser.add_argument(
        "--append", action="store_true", help="add to results/scaling.csv instead of replacing"
    )
    parser.add_argument(
        "--draws", type=int, default=1000, help="draws per chain (default 1000, the fit's default)"
    )
    parser.add_argument("--tune", type=int, help="tuning steps per chain (default: the fit's own)")
    parser.add_argument(
        "--no-escalate", action="store_false", dest="escalate", help="one sampling attempt only"
    )
    parser.add_argument("--skip-loo", action="store_true", help="no LOO from the saved fit")
    parser.add_argument("--report-only", action="store_true", help="rewrite scaling.md from scaling.csv")
    parser.add_argument("--child-fit", type=int, help=argparse.SUPPRESS)
    parser.add_argument("--child-loo", help=argparse.SUPPRESS)
    parser.add_argument("--path", help=argparse.SUPPRESS)
    args = parser.parse_args(argv)
    if args.child_fit:
        print(json.dumps(child_fit(args.child_fit, Path(args.path), args.draws, args.tune, args.escalate)))
        return 0
    if args.child_loo:
        print(json.dumps(child_loo(Path(args.child_loo))))
        return 0
    if args.report_only:
        (RESULTS / "scaling.md").write_text(
            write_markdown(pd.read_csv(RESULTS / "scaling.csv")), encoding="utf-8"
        )
        return 0
    rows = []
    with tempfile.TemporaryDirectory() as tmp:
        for n in args.sizes:
            path = Path(tmp) / f"fit_{n}.nc"
            print(f"[scaling] {n} junctions: fitting", flush=True)
            extra = [
                "--draws",
                str(args.draws),
                *(["--tune", str(args.tune)] if args.tune else []),
                *([] if args.escalate else ["--no-escalate"]),
            ]
            row = _child(["--child-fit", str(n), "--path", str(path), *extra])
            if args.skip_loo:
                row.update(loo_s=float("nan"), loo_peak_gb=float("nan"))
            else:
                print(f"[scaling] {n} junctions: LOO from the saved fit", flush=True)
                row.update(_child(["--child-loo", str(path)]))
            print(f"[scaling] {json.dumps(row)}", flush=True)
            rows.append(row)
            path.unlink()
    frame = pd.DataFrame(rows, columns=list(COLUMNS))
    RESULTS.mkdir(parents=True, exist_ok=True)
    csv = RESULTS / "scaling.csv"
    if args.append and csv.is_file():
        frame = pd.concat([pd.read_csv(csv), frame], ignore_index=True)
    frame.to_csv(csv, index=False)
    text = write_markdown(frame)
    (RESULTS / "scaling.md").write_text(text, encoding="utf-8")
    print(text)
    return 0


if __name__ == "__main__":
    sys.exit(main())
