"""Step 1 -- check the cast measurements and describe them before any model is fitted.

DATA ARE SIMULATED. The table analysed here, data_demo/simulated_saurovena_casts.csv, is an invented
scenario: resin casts of the arterial tree of four made-up lizard species (genus *Saurovena*, which does
not exist), produced by a simulator with known exponents. No animal was measured.

What this script does
---------------------
1. Reads the junction table with its TOML recipe (diameters in micrometres, 6 % relative error) and prints
   the validation report: every flagged row (kept) and every excluded row (not used).
2. Solves each junction on its own for the exponent a in r_parent^a = sum r_daughter^a and summarises these
   naive per-junction exponents by species and by animal. They ignore measurement error (and junctions
   whose daughter is measured as large as the parent have no such exponent at all), so they are a first
   look at the data, not an estimate -- that is step 2.
3. Saves the per-junction geometry (with the original diameters and the validation flags) and the naive
   summaries as CSV, and draws the daughter-ratio plane with the iso-exponent curves of the classic laws
   (Rall a = 1.5, da Vinci a = 2, Murray a = 3) at single-column width, as PDF and PNG.

Run from the repository root:

    python analyses/01_check_and_describe.py                # results in analyses/output/01_check_and_describe/
    python analyses/01_check_and_describe.py --out somewhere/else

Takes a few seconds.
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
DEFAULT_OUT = HERE / "output" / "01_check_and_describe"

#: The classic laws drawn as iso-exponent curves (label -> exponent a).
CLASSIC_LAWS = {"Rall (a=1.5)": 1.5, "da Vinci (a=2)": 2.0, "Murray (a=3)": 3.0}

SIMULATED_BANNER = (
    "NOTE: these are SIMULATED data -- four invented Saurovena lizard species, made up for demonstration;\n"
    "      no real animal was measured. The true exponents are known (data_demo/simulated_truth.json)."
)


def rule(title: str) -> None:
    print(f"\n{'=' * 100}\n{title}\n{'=' * 100}")


def show(frame: pd.DataFrame, floatfmt: str = "{:.3f}") -> None:
    with pd.option_context("display.width", 200, "display.max_columns", 30, "display.max_colwidth", 60):
        print(frame.to_string(index=False, float_format=floatfmt.format))


def flagged_rows(table: ab.JunctionTable) -> set[int]:
    """File rows (as the user sees them) that validation flagged."""
    return {p.row for p in table.report.flags if p.row is not None}


def group_by_code(problems: list[ab.Problem]) -> dict[str, list[ab.Problem]]:
    """Problems grouped by their code, in order of first appearance."""
    groups: dict[str, list[ab.Problem]] = {}
    for p in problems:
        groups.setdefault(p.code or "other", []).append(p)
    return groups


def geometry_with_flags(table: ab.JunctionTable) -> pd.DataFrame:
    """Per-junction geometry plus a boolean ``flagged`` column and the flag codes of each junction."""
    geo = ab.junction_geometry(table)
    flags = table.report.to_frame()
    flags = flags[flags["severity"] == "flag"]
    codes = flags.groupby("row")["code"].agg(lambda s: ";".join(sorted(set(s))))
    geo["flagged"] = geo["source_row"].isin(flagged_rows(table)).astype(bool)
    geo["flag_codes"] = geo["source_row"].map(codes).fillna("")
    return geo


def attach_original_columns(geo: pd.DataFrame, path: Path) -> pd.DataFrame:
    """Put the measurements exactly as they are in the file beside each junction's geometry.

    ``source_row`` is the row number as seen in the file, with the header on row 1, so data row k of
    ``pandas.read_csv`` (0-based) is file row k + 2.
    """
    raw = pd.read_csv(path)
    raw.insert(0, "source_row", raw.index + 2)
    size_cols = [c for c in raw.columns if c.startswith("D_")]
    return geo.merge(raw[["source_row", *size_cols]], on="source_row", how="left", validate="one_to_one")


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument(
        "--out", type=Path, default=DEFAULT_OUT, help=f"output folder (default {DEFAULT_OUT})"
    )
    args = parser.parse_args(argv)
    out: Path = args.out
    out.mkdir(parents=True, exist_ok=True)
    started = time.perf_counter()

    print(SIMULATED_BANNER)

    # -- 1. read and validate ---------------------------------------------------------------------
    table = ab.read_junctions(DATA, recipe=RECIPE)
    report = table.report
    n_d = table.data["n_daughters"].value_counts().sort_index()
    rule("1. Validation report")
    print(f"file:       {DATA.relative_to(REPO)}  (recipe {RECIPE.name})")
    print(
        f"rows read:  {report.n_rows_read}; junctions used: {table.n_junctions}; "
        f"species: {len(table.taxa)}; animals: {len(table.specimens)}"
    )
    print("daughters:  " + ", ".join(f"{k} daughters: {v} junctions" for k, v in n_d.items()))
    print(
        f"sizes:      {table.mapping.measure} in {table.unit}; relative measurement error {table.rel_error:g}"
    )
    geo = geometry_with_flags(table)
    where = geo.set_index("source_row")[["specimen", "junction"]]
    print(f"\nflagged rows (kept in the analysis): {len(report.flags)}")
    for code, problems in group_by_code(report.flags).items():
        print(f"  [{code}] {problems[0].hint}")
        for p in problems:
            animal, node = where.loc[p.row] if p.row in where.index else ("?", "?")
            print(f"    file row {p.row:>4} ({animal} {node}), column {p.column}: {p.message}")
    print(f"excluded rows (not used): {len(report.excluded)}")
    for p in report.excluded:
        print(f"  {p.format()}")

    per_animal_flags = (
        geo.groupby(["taxon", "specimen"], sort=False)["flagged"]
        .agg(["sum", "size"])
        .rename(columns={"sum": "flagged", "size": "junctions"})
        .reset_index()
    )
    print(
        "\nflagged junctions per animal (all kept: under 6 % measurement error a daughter can look as large as\n"
        "its parent, so these are legal data, not mistakes to delete):"
    )
    show(per_animal_flags)

    # -- 2. naive per-junction exponents ------------------------------------------------------------
    by_taxon = ab.naive_summary(geo, by=("taxon",))
    by_animal = ab.naive_summary(geo, by=("taxon", "specimen"))
    rule("2. Naive per-junction exponents (descriptive only)")
    print(f"caution: {by_taxon.attrs['note']}.")
    reasons = geo["no_root_reason"].dropna().value_counts()
    if len(reasons):
        print(
            "junctions without a per-junction exponent: "
            + ", ".join(f"{why}: {n}" for why, n in reasons.items())
        )
    cols = ["n_junctions", "n_no_root", "median", "q25", "q75", "mean"]
    print("\nby species:")
    show(by_taxon[["taxon", *cols]])
    print("\nby animal:")
    show(by_animal[["taxon", "specimen", *cols]])

    # -- 3. save tables and the ratio-plane figure --------------------------------------------------
    rule("3. Files")
    junctions = attach_original_columns(geo, DATA)
    written = []
    for name, frame in (
        ("junction_geometry.csv", junctions),
        ("naive_by_species.csv", by_taxon),
        ("naive_by_animal.csv", by_animal),
    ):
        frame.to_csv(out / name, index=False)
        written.append(out / name)

    fig, ax = ab.figure(width="single", aspect=1.1)
    ab.plot_ratio_plane(geo, CLASSIC_LAWS, exponents=None, ax=ax)
    written += ab.save_figure(fig, out / "ratio_plane", formats=("pdf", "png"))
    plt.close(fig)
    for path in written:
        print(f"  wrote {path}")

    print(
        f"\nDone in {time.perf_counter() - started:.1f} s. Reminder: the data are SIMULATED (invented species)."
    )
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
