"""Step 3 -- which branching law do the data support: Murray (a = 3), da Vinci (a = 2), Rall (a = 1.5)?

DATA ARE SIMULATED. data_demo/simulated_saurovena_casts.csv describes four invented lizard species (genus
*Saurovena*, which does not exist), simulated with known exponents: S. alta and S. borealis 3.0 (cube law),
S. caldera 2.0 (square law), S. dunensis 2.5 (none of the classic laws). No animal was measured.

What this script does
---------------------
1. Re-uses the free-model fit saved by step 2 (analyses/output/02_fit_and_report/fit.nc) when it exists and
   was made from this very table; otherwise fits the model again with step 2's settings.
2. Runs the law comparison with a fixed seed, for all species together ("population": every species shares
   the law's exponent) and for each species in turn (that species' exponent fixed at the law's value).
   Every law is refitted with its exponent fixed; the evidence is PSIS-LOO (ELPD differences, stacking
   weights), Savage-Dickey Bayes factors against the free model (default, narrower and wider prior) and
   the posterior probability that the exponent lies within +/- 0.25 of each law (P(ROPE)).
3. Prints the evidence tables, the verdict per scope with its reason, the decision rule behind the
   verdicts, and every warning.
4. Saves the evidence (CSV/Markdown/LaTeX), the comparison's own files (the tables 'allobranch compare'
   writes, warnings included, and its Markdown report), the law-comparison figure
   (single column, PDF and PNG) and the one-file HTML report of the whole analysis.

Run from the repository root (after step 2, or it refits first):

    python analyses/03_compare_laws.py                     # results in analyses/output/03_compare_laws/
    python analyses/03_compare_laws.py --fit other/fit.nc --out DIR --draws 1000 --tune 1000

Runtime: 15 extra fits (3 laws x (population + 4 species)). With step 2's sampler settings (4 chains x 1500
draws, 1000 tuning steps) that is roughly 20 minutes on an idle 2-core machine (53 minutes when other jobs
share the cores); --draws/--tune lower it, at the price of noisier LOO estimates.
"""

from __future__ import annotations

import argparse
import time
from pathlib import Path

import matplotlib

matplotlib.use("Agg")  # no display needed; figures go to files

import matplotlib.pyplot as plt  # noqa: E402
import pandas as pd  # noqa: E402

import allobranch as ab  # noqa: E402

HERE = Path(__file__).resolve().parent
REPO = HERE.parent
DATA = REPO / "data_demo" / "simulated_saurovena_casts.csv"
RECIPE = REPO / "data_demo" / "simulated_saurovena_casts.toml"
DEFAULT_FIT = HERE / "output" / "02_fit_and_report" / "fit.nc"
DEFAULT_OUT = HERE / "output" / "03_compare_laws"

#: Step 2's sampler settings, used when the saved fit is missing and the free model must be refitted.
SEED, DRAWS, TUNE, CHAINS, TARGET_ACCEPT = 20240611, 1500, 1000, 4, 0.95
#: The laws compared (classic names understood by compare_laws).
LAWS = ["rall", "da_vinci", "murray"]
#: Half-width of each law's region of practical equivalence.
DELTA = 0.25

SIMULATED_BANNER = (
    "NOTE: these are SIMULATED data -- four invented Saurovena lizard species, made up for demonstration;\n"
    "      no real animal was measured. True exponents: alta 3.0, borealis 3.0, caldera 2.0, dunensis 2.5."
)


def rule(title: str) -> None:
    print(f"\n{'=' * 100}\n{title}\n{'=' * 100}")


def show(frame: pd.DataFrame, floatfmt: str = "{:.3g}") -> None:
    with pd.option_context("display.width", 220, "display.max_columns", 30, "display.max_colwidth", 110):
        print(frame.to_string(index=False, float_format=floatfmt.format))


def free_model_fit(table: ab.JunctionTable, path: Path) -> tuple[ab.FitResult, str]:
    """The saved free-model fit if it belongs to this table, else a new fit with step 2's settings."""
    if path.is_file():
        saved = ab.FitResult.load(path)
        made_from = saved.provenance.get("input_sha256")
        if made_from == table.digest() and saved.spec.fixed_exponent is None and not saved.spec.fixed_taxa:
            return saved, f"re-using the saved fit {path}"
        why = "it was made from other data" if made_from != table.digest() else "it is not the free model"
        print(f"the saved fit {path} cannot be used ({why}); refitting")
    else:
        print(
            f"no saved fit at {path} (run analyses/02_fit_and_report.py to make one); fitting now ...",
            flush=True,
        )
    fitted = ab.fit(
        table, seed=SEED, draws=DRAWS, tune=TUNE, chains=CHAINS, target_accept=TARGET_ACCEPT, progress=False
    )
    return fitted, f"fitted the free model here ({fitted.settings.get('seconds', float('nan')):.0f} s)"


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument(
        "--out", type=Path, default=DEFAULT_OUT, help=f"output folder (default {DEFAULT_OUT})"
    )
    parser.add_argument(
        "--fit", type=Path, default=DEFAULT_FIT, help=f"saved free-model fit (default {DEFAULT_FIT})"
    )
    parser.add_argument(
        "--seed", type=int, default=SEED, help="seed of the comparison (each law's fit derives its own)"
    )
    parser.add_argument(
        "--draws", type=int, default=None, help="draws per chain of each law's fit (default: the free fit's)"
    )
    parser.add_argument(
        "--tune", type=int, default=None, help="tuning steps of each law's fit (default: the free fit's)"
    )
    args = parser.parse_args(argv)
    out: Path = args.out
    out.mkdir(parents=True, exist_ok=True)
    started = time.perf_counter()

    print(SIMULATED_BANNER)
    table = ab.read_junctions(DATA, recipe=RECIPE)
    free, how = free_model_fit(table, args.fit)
    print(how)
    if free.warnings:
        print("the free fit has diagnostic warnings (they are repeated below):")
        for w in free.warnings:
            print(f"  - {w}")

    s = free.settings
    draws, tune = args.draws or s.get("draws"), args.tune or s.get("tune")
    print(
        f"\ncomparing {', '.join(LAWS)} with the free model, for the population and per species: 15 fits of "
        f"{s.get('chains')} chains x {draws} draws (tune {tune}), seed {args.seed}. This takes a while ...",
        flush=True,
    )
    laws = ab.compare_laws(
        table,
        LAWS,
        fit=free,
        delta=DELTA,
        scopes=("population", "taxon"),
        seed=args.seed,
        draws=draws,
        tune=tune,
    )
    print(f"comparison took {laws.settings['seconds']:.0f} s ({laws.settings['n_fits']} fits)")

    # -- evidence ---------------------------------------------------------------------------------------
    cols = [
        "law",
        "value",
        "elpd_diff",
        "dse",
        "weight",
        "n_high_k",
        "log10_bf",
        "log10_bf_narrow",
        "log10_bf_wide",
        "p_rope",
    ]
    rule("1. Evidence, all species together (population: every species shares the law's exponent)")
    show(laws.population[cols])
    rule("2. Evidence per species (that species' exponent fixed at the law, the others free)")
    for taxon in laws.settings["taxa"]:
        print(f"\n{taxon}:")
        show(laws.evidence.loc[laws.evidence["scope"] == taxon, cols])
    print(
        "\nelpd_diff: ELPD loss against the best hypothesis of the scope (0 = best), dse its SE; weight: stacking "
        "weight;\nlog10_bf: log10 Bayes factor of the law against the free model (> 0 favours the law), also under "
        f"a narrower\nand a wider prior; p_rope: posterior probability that the exponent is within +/- {DELTA:g} "
        "of the law."
    )

    # -- verdicts ---------------------------------------------------------------------------------------
    rule("3. Verdicts")
    show(laws.verdicts)
    print(f"\nDecision rule: {ab.VERDICT_RULE}")
    rule("4. Warnings")
    for w in laws.warnings or ["none"]:
        print(f"  - {w}")

    # -- files ------------------------------------------------------------------------------------------
    rule("5. Files")
    written = []
    written += ab.export_table(laws.evidence, out / "law_evidence")
    written += ab.export_table(laws.verdicts, out / "law_verdicts")
    # the comparison's own files (laws.csv, laws_by_taxon.csv, laws_verdicts.csv, laws_warnings.csv, laws.md),
    # which 'allobranch report' and ab.SavedComparison read back
    written += ab.write_comparison(laws, out, force=True)
    laws.laws_table().to_csv(out / "laws_long.csv", index=False)
    written.append(out / "laws_long.csv")

    axes = ab.plot_law_comparison(laws.laws_table())
    fig = axes[0].figure
    written += ab.save_figure(fig, out / "law_comparison", formats=("pdf", "png"))
    plt.close(fig)
    written.append(ab.build_report(free, out / "report.html", laws=laws, width="single"))
    for path in written:
        print(f"  wrote {path}")

    print(
        f"\nDone in {time.perf_counter() - started:.0f} s. Reminder: the data are SIMULATED (invented species)."
    )
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
