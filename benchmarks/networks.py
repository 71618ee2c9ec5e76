"""Networks to junctions: exponent recovery through SWC tracing, and conversion time of 10^5-segment networks.

1. Recovery. Simulated binary trees (:func:`allobranch.networks.simulate.simulate_segments`, invented data)
   whose junctions obey ``r0^a = r1^a + r2^a`` with ``a = 2.5`` up to a 3 % biological scatter of each
   daughter, traced into SWC sample points (:func:`~allobranch.networks.simulate.trace_swc`): samples
   every 0.25 um, radii flaring from the parent's size at a section's start and swelling towards each
   branch point, times 5 % log-normal noise. The standard profile swells 30 % over one local radius; the
   other profiles change the swelling's height (15 %, 50 %) and reach (0.5 and 2 radii), remove the
   swelling and the flare (a control), and lengthen the sections (24-48 instead of 8-16 radii) under the
   long swelling, so that no one simulator setting decides the default rule. Each radius rule then gives
   the junctions; reported are the median of the naive per-junction exponents (which ignore measurement
   error) and a short model fit, each on three trees per profile, against the truth. The true segment
   radii give the reference row.
2. Speed. Conversion time (read, check, orient, derive, validate) of networks with 10^5 segments:
   a segment table (CSV file; half the rows continuations), the same network as an edge list with
   100 extra edges closing loops, and an SWC file of a tree with 10^5 sections.

Writes ``benchmarks/results/networks.md``, ``networks_recovery.csv`` and ``networks_timing.csv``.

Run::

    /work/main/.venv/bin/python benchmarks/networks.py            # about 10 minutes on a quiet 2-core machine
    /work/main/.venv/bin/python benchmarks/networks.py --no-fit   # skip the model fits (a few minutes)
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
from allobranch.networks.rules import TRIM_RADII
from allobranch.networks.simulate import SIMULATED_NOTE, simulate_segments, trace_swc

RESULTS = Path(__file__).resolve().parent / "results"
TRUE_EXPONENT = 2.5
#: Simulation and tracing design shared by every profile.
RECOVERY = {
    "junctions_per_tree": 1000,
    "trees": 3,
    "scatter": 0.03,
    "spacing_um": 0.25,
    "noise": 0.05,
}
#: Swelling profiles, "height/reach in local radii": (label, trace_swc keywords, simulate_segments keywords).
#: The first is the standard case; the control has neither swelling nor flare; "long sections" are 24-48
#: instead of 8-16 radii long.
PROFILES: tuple[tuple[str, dict, dict], ...] = (
    ("30 %/1 r (standard)", {"swelling": 0.3, "decay_radii": 1.0}, {}),
    ("30 %/0.5 r", {"swelling": 0.3, "decay_radii": 0.5}, {}),
    ("30 %/2 r", {"swelling": 0.3, "decay_radii": 2.0}, {}),
    ("15 %/1 r", {"swelling": 0.15, "decay_radii": 1.0}, {}),
    ("50 %/1 r", {"swelling": 0.5, "decay_radii": 1.0}, {}),
    ("none (control)", {"swelling": 0.0, "decay_radii": 1e-9}, {}),
    ("30 %/2 r, long sections", {"swelling": 0.3, "decay_radii": 2.0}, {"length_radii": (24.0, 48.0)}),
)
TRUTH = "true segment radii"
DEFAULT_RULE = f"trimmed_median, {TRIM_RADII:g} end radii (default)"
#: Radius rules compared: (label, keyword arguments of junctions_from_swc).
RULES: tuple[tuple[str, dict], ...] = (
    (DEFAULT_RULE, {}),
    (
        f"trimmed_median, {TRIM_RADII:g} end radii, branch-point sections kept",
        {"branch_point_sections": "keep"},
    ),
    (
        "trimmed_median, 2 end radii, branch-point sections kept (previous default)",
        {"trim_radii": 2.0, "branch_point_sections": "keep"},
    ),
    ("trimmed_median, trim 1 um", {"trim": 1.0}),
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


def _model(table: ab.JunctionTable) -> dict[str, float]:
    result = ab.fit(
        table, draws=FIT["draws"], tune=FIT["tune"], chains=FIT["chains"], seed=SEED, progress=False
    )
    pop = result.exponents(0.9).query("level == 'population'").iloc[0]
    return {"model_mean": pop["mean"], "model_hdi_low": pop["hdi_low"], "model_hdi_high": pop["hdi_high"]}


def recovery(folder: Path, fit: bool) -> pd.DataFrame:
    """Naive (and model) exponents by radius rule and swelling profile, three simulated trees each."""
    rows = []
    for number, (profile, tracing, shape) in enumerate(PROFILES):
        for tree in range(RECOVERY["trees"]):
            seg = simulate_segments(
                RECOVERY["junctions_per_tree"],
                exponent=TRUE_EXPONENT,
                seed=SEED + tree,
                scatter=RECOVERY["scatter"],
                **shape,
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
                **tracing,
            )
            path = write_swc(samples, folder / f"profile{number}_tree{tree}.swc", SIMULATED_NOTE)
            sources = [(TRUTH, truth)]
            sources += [(label, junctions_from_swc(path, **kw, **error)) for label, kw in RULES]
            for label, res in sources:
                med, mean, no_root = _naive(res.table)
                row = {
                    "profile": profile,
                    "rule": label,
                    "tree": tree,
                    "junctions": res.table.n_junctions,
                    "samples": len(samples),
                    "naive_median": med,
                    "naive_mean": mean,
                    "no_root_share": no_root,
                }
                if fit:
                    row.update(_model(res.table))
                rows.append(row)
                model = f"  model {row['model_mean']:.3f}" if fit else ""
                print(f"{profile:<42} tree {tree}  {label:<70} median {med:.3f}{model}", flush=True)
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
    # sampled every 2 um, most of this tree's thin sections are one sample: the default leaves out (and
    # lists) the junctions at sections of one branch-point sample; the other rows keep them
    swc_cases = (
        ("trimmed_median (default; junctions at one-sample branch-point sections left out)", {}),
        ("trimmed_median, branch-point sections kept", {"branch_point_sections": "keep"}),
        (
            "near_branch, branch-point sections kept",
            {"radius_rule": "near_branch", "branch_point_sections": "keep"},
        ),
        ("median, branch-point sections kept", {"radius_rule": "median", "branch_point_sections": "keep"}),
    )
    cases += [
        (
            f"SWC file, {len(big):,} sections, {len(samples):,} samples, {label}",
            len(big),
            lambda kw=kw: junctions_from_swc(swc_path, **kw),
        )
        for label, kw in swc_cases
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


def _cells(rec: pd.DataFrame, fmt) -> pd.DataFrame:
    """One cell per rule and profile, formatted by ``fmt`` from that cell's rows (all trees)."""
    rules = list(dict.fromkeys(rec["rule"]))
    profiles = list(dict.fromkeys(rec["profile"]))
    grouped = rec.groupby(["rule", "profile"], sort=False)
    return pd.DataFrame(
        [[fmt(grouped.get_group((r, p))) for p in profiles] for r in rules], index=rules, columns=profiles
    )


def _table(cells: pd.DataFrame, corner: str) -> list[str]:
    lines = [f"| {corner} | " + " | ".join(cells.columns) + " |", "|---" * (len(cells.columns) + 1) + "|"]
    lines += [f"| {rule} | " + " | ".join(row) + " |" for rule, row in cells.iterrows()]
    return lines


def _covers(group: pd.DataFrame) -> int:
    return int(((group["model_hdi_low"] <= TRUE_EXPONENT) & (TRUE_EXPONENT <= group["model_hdi_high"])).sum())


def _recovery_markdown(rec: pd.DataFrame) -> list[str]:
    trees = RECOVERY["trees"]
    standard = PROFILES[0][0]
    lines = [
        "## Recovery of a known exponent (a = 2.5) by radius rule and swelling profile",
        "",
        f"{trees} simulated trees of {RECOVERY['junctions_per_tree']} junctions per profile (biological scatter "
        f"{RECOVERY['scatter']:.0%} per daughter; sections 8-16 radii long unless said), traced into SWC: a "
        f"sample every {RECOVERY['spacing_um']} um, flare from the parent's radius at each section's start "
        "and swelling towards each branch point, both decaying over the profile's reach, "
        f"{RECOVERY['noise']:.0%} log-normal noise per sample. Profiles are the swelling's height / reach in "
        "local radii; the control has neither swelling nor flare. Every rule leaves out the junctions at "
        "sections of one branch-point sample unless the rule's label says they are kept. The radii span "
        "10 um down to below 0.01 um, so a third of the sections are thinner than the sample spacing and a "
        "few are a single sample. On 8-16-radius sections a swelling that reaches 2 radii leaves no sample "
        "more than two reaches from a branch point, so every rule reads some of it there; the long-sections "
        "profile is the same swelling on sections three times longer.",
        "",
        f"### Naive median exponent: shift from 2.5 (mean over {trees} trees)",
        "",
        "Naive per-junction exponents ignore measurement error; the median over junctions is taken per tree.",
        "",
    ]
    lines += _table(
        _cells(rec, lambda g: f"{g['naive_median'].mean() - TRUE_EXPONENT:+.3f}"),
        "radius rule",
    )
    if "model_mean" in rec.columns:
        lines += [
            "",
            f"### Model: population exponent, shift from 2.5 (mean over {trees} trees) and trees whose 90 % HDI "
            "holds 2.5",
            "",
            f"draws = tune = {FIT['draws']}, {FIT['chains']} chains, relative error {FIT['rel_error']} (the model "
            "integrates the sample noise out; what is left is the bias of each rule).",
            "",
        ]
        lines += _table(
            _cells(
                rec,
                lambda g: f"{g['model_mean'].mean() - TRUE_EXPONENT:+.3f} ({_covers(g)}/{len(g)})",
            ),
            "radius rule",
        )
        std = rec[rec["profile"] == standard]
        lines += [
            "",
            f"### Standard case ({standard}), every tree: model exponent [90 % HDI] and junctions used",
            "",
            "| radius rule | " + " | ".join(f"tree {t}" for t in range(trees)) + " | junctions used |",
            "|---" * (trees + 2) + "|",
        ]
        for rule, group in std.groupby("rule", sort=False):
            cells = [
                f"{r['model_mean']:.3f} [{r['model_hdi_low']:.3f}, {r['model_hdi_high']:.3f}]"
                for _, r in group.iterrows()
            ]
            used = " / ".join(str(int(n)) for n in group["junctions"])
            lines.append(f"| {rule} | " + " | ".join(cells) + f" | {used} |")
    return lines


def _markdown(rec: pd.DataFrame, timing: pd.DataFrame, load: tuple[float, float, float]) -> str:
    lines = [
        "# Networks to junctions: recovery through SWC tracing and conversion speed",
        "",
        f"Generated by `benchmarks/networks.py` (seed {SEED}) on {platform.machine()} with "
        f"{os.cpu_count()} cores; load average at the end {load[0]:.1f} / {load[1]:.1f} / {load[2]:.1f}. "
        "All networks are simulated (invented data).",
        "",
        *_recovery_markdown(rec),
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
    parser.add_argument("--no-speed", action="store_true", help="skip the conversion times (with --no-write)")
    args = parser.parse_args()
    if args.no_speed and not args.no_write:
        parser.error("--no-speed leaves the results incomplete; give --no-write with it")
    with tempfile.TemporaryDirectory() as tmp:
        rec = recovery(Path(tmp), fit=not args.no_fit)
        timing = speed(Path(tmp)) if not args.no_speed else pd.DataFrame(columns=["network"])
    text = _markdown(rec, timing, os.getloadavg())
    print(text)
    if not args.no_write:
        RESULTS.mkdir(exist_ok=True)
        rec.to_csv(RESULTS / "networks_recovery.csv", index=False)
        timing.to_csv(RESULTS / "networks_timing.csv", index=False)
        (RESULTS / "networks.md").write_text(text, encoding="utf-8")


if __name__ == "__main__":
    main()
