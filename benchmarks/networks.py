"""Networks to junctions: exponent recovery through SWC tracing, and conversion time of 10^5-segment networks.

1. Recovery. Simulated binary trees (:func:`allobranch.networks.simulate.simulate_segments`, invented data)
   whose junctions obey ``r0^a = r1^a + r2^a`` with ``a = 2.5`` up to a 3 % biological scatter of each
   daughter, traced into SWC sample points (:func:`~allobranch.networks.simulate.trace_swc`): samples
   every 0.25 um, radii flaring from the parent's size at a section's start and swelling 30 % towards
   each branch point (both over one local radius), times 5 % log-normal noise. Each radius rule then gives
   the junctions; reported are the median and mean of the naive per-junction exponents (which ignore
   measurement error) against the truth, over three trees, and a short model fit (one tree, every rule).
   The true segment radii give the reference row.
2. Speed. Conversion time (read, check, orient, derive, validate) of networks with 10^5 segments:
   a segment table (CSV file; half the rows continuations), the same network as an edge list with
   100 extra edges closing loops, and an SWC file of a tree with 10^5 sections.

Writes ``benchmarks/results/networks.md``, ``networks_recovery.csv`` and ``networks_timing.csv``.

Run::

    /work/main/.venv/bin/python benchmarks/networks.py            # about 3-5 minutes on 2 cores
    /work/main/.venv/bin/python benchmarks/networks.py --no-fit   # skip the model fits
"""

from __future__ import annotations

import argparse
import os
import platform
import tempfile
import time
from pathlib import Path

import numpy as np
import pandas as pd

import allobranch as ab
from allobranch.networks import junctions_from_edges, junctions_from_segments, junctions_from_swc, write_swc
from allobranch.networks.simulate import SIMULATED_NOTE, simulate_segments, trace_swc

RESULTS = Path(__file__).resolve().parent / "results"
TRUE_EXPONENT = 2.5
#: Simulation and tracing design of the recovery study.
RECOVERY = {
    "junctions_per_tree": 1000,
    "trees": 3,
    "scatter": 0.03,
    "spacing_um": 0.25,
    "noise": 0.05,
    "swelling": 0.3,
    "decay_radii": 1.0,
}
#: Radius rules compared: (label, keyword arguments of junctions_from_swc).
RULES: tuple[tuple[str, dict], ...] = (
    ("trimmed_median (default: trim two end radii)", {"radius_rule": "trimmed_median"}),
    ("trimmed_median, trim 1 um", {"radius_rule": "trimmed_median", "trim": 1.0}),
    ("median (all samples)", {"radius_rule": "median"}),
    ("near_branch, 2 samples", {"radius_rule": "near_branch", "near_points": 2}),
    ("near_branch, 1 sample", {"radius_rule": "near_branch", "near_points": 1}),
)
SEED = 2025
FIT = {"draws": 300, "tune": 300, "chains": 2, "rel_error": 0.03}
SPEED_SEGMENTS = 100_000
SPEED_REPEATS = 3


def _naive(table: ab.JunctionTable) -> tuple[float, float, float]:
    exp = ab.junction_geometry(table)["exponent"].to_numpy()
    return float(np.nanmedian(exp)), float(np.nanmean(exp)), float(np.isnan(exp).mean())


def recovery(folder: Path, fit: bool) -> pd.DataFrame:
    """Naive (and model) exponents by radius rule, three simulated trees."""
    rows = []
    for tree in range(RECOVERY["trees"]):
        seg = simulate_segments(
            RECOVERY["junctions_per_tree"],
            exponent=TRUE_EXPONENT,
            seed=SEED + tree,
            scatter=RECOVERY["scatter"],
        )
        error = {"rel_error": FIT["rel_error"]}  # used by the model only; naive exponents ignore it
        truth = junctions_from_segments(
            seg, segment_id="segment", parent_id="parent", size="radius", unit="um", **error
        )
        samples = trace_swc(
            seg,
            seed=SEED + 100 + tree,
            spacing=RECOVERY["spacing_um"],
            noise=RECOVERY["noise"],
            swelling=RECOVERY["swelling"],
            decay_radii=RECOVERY["decay_radii"],
        )
        path = write_swc(samples, folder / f"tree{tree}.swc", SIMULATED_NOTE)
        sources = [("true segment radii", truth)]
        sources += [(label, junctions_from_swc(path, **kw, **error)) for label, kw in RULES]
        for label, res in sources:
            med, mean, no_root = _naive(res.table)
            row = {
                "rule": label,
                "tree": tree,
                "junctions": res.table.n_junctions,
                "samples": len(samples),
                "naive_median": med,
                "naive_mean": mean,
                "no_root_share": no_root,
            }
            if fit and tree == 0:
                result = ab.fit(
                    res.table,
                    draws=FIT["draws"],
                    tune=FIT["tune"],
                    chains=FIT["chains"],
                    seed=SEED,
                    progress=False,
                )
                pop = result.exponents(0.9).query("level == 'population'").iloc[0]
                row.update(
                    model_mean=pop["mean"], model_hdi_low=pop["hdi_low"], model_hdi_high=pop["hdi_high"]
                )
            rows.append(row)
            print(f"tree {tree}  {label:<46} median {med:.3f}  mean {mean:.3f}  no root {no_root:.1%}")
    return pd.DataFrame(rows)


def _timed(fn) -> tuple[float, float, object]:
    times, out = [], None
    for _ in range(SPEED_REPEATS):
        t0 = time.perf_counter()
        out = fn()
        times.append(time.perf_counter() - t0)
    return min(times), float(np.median(times)), out


def speed(folder: Path) -> pd.DataFrame:
    """Conversion times of 10^5-segment networks."""
    rng = np.random.default_rng(SEED)
    base = simulate_segments(SPEED_SEGMENTS // 4, exponent=TRUE_EXPONENT, seed=SEED)  # 50,001 segments
    # every segment cut into two pieces (upper piece a continuation): 100,002 rows
    n = len(base)
    ids = base["segment"].to_numpy()
    up = base["parent"].to_numpy(dtype=float)
    upper = pd.DataFrame(
        {"segment": [f"{i}a" for i in ids], "parent": [None if np.isnan(p) else f"{int(p)}b" for p in up]}
    )
    lower = pd.DataFrame({"segment": [f"{i}b" for i in ids], "parent": [f"{i}a" for i in ids]})
    pieces = pd.concat([upper, lower], ignore_index=True)
    pieces["radius"] = np.tile(base["radius"].to_numpy(), 2) * np.exp(rng.normal(0, 0.02, 2 * n))
    pieces["length"] = np.tile(base["length"].to_numpy() / 2, 2)
    pieces = pieces.sample(frac=1.0, random_state=SEED).reset_index(drop=True)
    seg_csv = folder / "segments.csv"
    pieces.to_csv(seg_csv, index=False)

    # the same network as an edge list: a piece runs from node <parent piece> to node <piece>; 100 extra thin
    # edges between random nodes close loops
    edges = pd.DataFrame(
        {
            "from": ["root" if pd.isna(p) else f"n{p}" for p in pieces["parent"]],
            "to": [f"n{s}" for s in pieces["segment"]],
            "radius": pieces["radius"],
        }
    )
    nodes = edges["to"].to_numpy()
    extra = pd.DataFrame(
        {"from": rng.choice(nodes, 100), "to": rng.choice(nodes, 100), "radius": np.full(100, 1e-4)}
    )
    edge_csv = folder / "edges.csv"
    pd.concat([edges, extra], ignore_index=True).to_csv(edge_csv, index=False)

    big = simulate_segments(SPEED_SEGMENTS // 2, exponent=TRUE_EXPONENT, seed=SEED + 1)  # 100,001 sections
    samples = trace_swc(big, seed=SEED + 2, spacing=2.0)
    swc_path = write_swc(samples, folder / "big.swc", SIMULATED_NOTE)

    cases = [
        (
            "segment table, CSV, continuations merged",
            len(pieces),
            lambda: junctions_from_segments(
                seg_csv, segment_id="segment", parent_id="parent", size="radius", length="length"
            ),
        ),
        (
            "segment table, CSV, continuations kept",
            len(pieces),
            lambda: junctions_from_segments(
                seg_csv, segment_id="segment", parent_id="parent", size="radius", continuations="keep"
            ),
        ),
        (
            "segment table, in-memory DataFrame, merged",
            len(pieces),
            lambda: junctions_from_segments(pieces, segment_id="segment", parent_id="parent", size="radius"),
        ),
        (
            "edge list, CSV, 100 loops broken, merged",
            len(edges) + 100,
            lambda: junctions_from_edges(edge_csv, size="radius", root="root"),
        ),
    ]
    cases += [
        (
            f"SWC file, {len(big):,} sections, {len(samples):,} samples, {rule}",
            len(big),
            lambda rule=rule: junctions_from_swc(swc_path, radius_rule=rule),
        )
        for rule in ("trimmed_median", "near_branch", "median")
    ]
    rows = []
    for label, size, fn in cases:
        best, median, res = _timed(fn)
        rows.append(
            {
                "network": label,
                "segments": size,
                "junctions": res.table.n_junctions,
                "best_s": best,
                "median_s": median,
            }
        )
        print(f"{label:<70} {res.table.n_junctions:>7} junctions  best {best:.2f} s  median {median:.2f} s")
    return pd.DataFrame(rows)


def _markdown(rec: pd.DataFrame, timing: pd.DataFrame, load: tuple[float, float, float]) -> str:
    agg = rec.groupby("rule", sort=False).agg(
        junctions=("junctions", "mean"),
        median_mean=("naive_median", "mean"),
        median_sd=("naive_median", "std"),
        mean_mean=("naive_mean", "mean"),
        no_root=("no_root_share", "mean"),
    )
    lines = [
        "# Networks to junctions: recovery through SWC tracing and conversion speed",
        "",
        f"Generated by `benchmarks/networks.py` (seed {SEED}) on {platform.machine()} with "
        f"{os.cpu_count()} cores; load average at the end {load[0]:.1f} / {load[1]:.1f} / {load[2]:.1f}. "
        "All networks are simulated (invented data).",
        "",
        "## Recovery of a known exponent (a = 2.5) by radius rule",
        "",
        f"{RECOVERY['trees']} simulated trees of {RECOVERY['junctions_per_tree']} junctions (biological scatter "
        f"{RECOVERY['scatter']:.0%} per daughter), traced into SWC: a sample every {RECOVERY['spacing_um']} um, "
        f"flare from the parent's radius at each section's start and {RECOVERY['swelling']:.0%} swelling towards "
        f"each branch point (over {RECOVERY['decay_radii']:g} local radius), {RECOVERY['noise']:.0%} log-normal "
        "noise per sample. Naive per-junction exponents ignore measurement error (median over junctions, then "
        "mean +- SD over trees).",
        "",
        "| radius rule | naive median exponent | shift from 2.5 | naive mean exponent | junctions without a root |",
        "|---|---|---|---|---|",
    ]
    for rule, r in agg.iterrows():
        lines.append(
            f"| {rule} | {r['median_mean']:.3f} +- {r['median_sd']:.3f} | {r['median_mean'] - TRUE_EXPONENT:+.3f} | "
            f"{r['mean_mean']:.3f} | {r['no_root']:.1%} |"
        )
    if "model_mean" in rec.columns:
        fits = rec.dropna(subset=["model_mean"])
        lines += [
            "",
            f"Model fit on tree 0 (population exponent, 90 % HDI; draws = tune = {FIT['draws']}, "
            f"{FIT['chains']} chains, relative error {FIT['rel_error']}):",
            "",
            "| radius rule | model exponent | 90 % HDI |",
            "|---|---|---|",
        ]
        lines += [
            f"| {r['rule']} | {r['model_mean']:.3f} | [{r['model_hdi_low']:.3f}, {r['model_hdi_high']:.3f}] |"
            for _, r in fits.iterrows()
        ]
    lines += [
        "",
        "## Conversion time of 10^5-segment networks",
        "",
        f"Best and median of {SPEED_REPEATS} runs, one process; includes reading the file, every check, "
        "orientation, the junction frame and its validation.",
        "",
        "| network | segments | junctions | best (s) | median (s) |",
        "|---|---|---|---|---|",
    ]
    lines += [
        f"| {r['network']} | {r['segments']:,} | {r['junctions']:,} | {r['best_s']:.2f} | {r['median_s']:.2f} |"
        for _, r in timing.iterrows()
    ]
    return "\n".join(lines) + "\n"


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--no-fit", action="store_true", help="skip the model fits")
    parser.add_argument("--no-write", action="store_true", help="print only")
    args = parser.parse_args()
    with tempfile.TemporaryDirectory() as tmp:
        rec = recovery(Path(tmp), fit=not args.no_fit)
        timing = speed(Path(tmp))
    text = _markdown(rec, timing, os.getloadavg())
    print(text)
    if not args.no_write:
        RESULTS.mkdir(exist_ok=True)
        rec.to_csv(RESULTS / "networks_recovery.csv", index=False)
        timing.to_csv(RESULTS / "networks_timing.csv", index=False)
        (RESULTS / "networks.md").write_text(text, encoding="utf-8")


if __name__ == "__main__":
    main()
