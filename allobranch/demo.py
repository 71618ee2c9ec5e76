"""The bundled demo data: an invented, SIMULATED scenario.

Scenario (fiction, for demonstration only): resin casts of the arterial tree from four made-up lizard
species of the invented genus *Saurovena*, two to four animals each; at every junction the diameters of the
parent and of its two or three daughters were "measured" in micrometres with about 6 % relative error. The
true exponents are two cube-law species, one square-law species and one with an exponent of 2.5 that fits
none of the classic laws. In that last species the exponent also falls with vessel size (by 0.4 per tenfold
larger parent, 2.5 at a parent radius of 63 um), and the four species hang on an invented tree
(:data:`DEMO_TREE`). Every number comes from :func:`allobranch.simulate_junctions` with a fixed seed.
"""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pandas as pd

from allobranch.model.simulate import simulate_junctions

#: Seed of the demo data.
DEMO_SEED = 20261202
#: True exponents of the invented species.
DEMO_EXPONENTS = {
    "Saurovena alta": 3.0,
    "Saurovena borealis": 3.0,
    "Saurovena caldera": 2.0,
    "Saurovena dunensis": 2.5,
}
DEMO_SPECIMENS = (4, 3, 4, 2)
DEMO_REL_ERROR = 0.06
#: Size trend: change of the exponent per tenfold larger parent, by species (others have none), and the
#: parent radius (mm) at which the species exponents above hold (the middle of the sizes on the log scale).
DEMO_SLOPES = {"Saurovena dunensis": -0.4}
DEMO_SLOPE_REFERENCE_MM = 0.063
#: The invented species tree (Newick; branch lengths in arbitrary time units, ultrametric).
DEMO_TREE = (
    "((Saurovena_alta:2.0,Saurovena_borealis:2.0):3.0,(Saurovena_caldera:3.5,Saurovena_dunensis:3.5):1.5);"
)
#: Files in the demo folder.
DEMO_FILES = {
    "table": "simulated_saurovena_casts.csv",
    "recipe": "simulated_saurovena_casts.toml",
    "truth": "simulated_truth.json",
    "tree": "simulated_saurovena_tree.nwk",
}

RECIPE = """# Column mapping for the SIMULATED Saurovena demo table (allobranch recipe)
[columns]
taxon = "species"
specimen = "animal"
junction = "node"
parent = "D_parent_um"
daughters = ["D_daughter1_um", "D_daughter2_um", "D_daughter3_um"]

[measurement]
measure = "diameter"
unit = "um"
rel_error = 0.06
"""


def make_demo(seed: int = DEMO_SEED) -> tuple[pd.DataFrame, dict]:
    """Build the demo table (diameters in micrometres, the user's column names) and its truth."""
    rng = np.random.default_rng(seed)
    n_specimens = sum(DEMO_SPECIMENS)
    junctions = rng.integers(25, 61, size=n_specimens).tolist()
    sim = simulate_junctions(
        taxa=list(DEMO_EXPONENTS),
        specimens_per_taxon=list(DEMO_SPECIMENS),
        junctions_per_specimen=junctions,
        taxon_exponents=DEMO_EXPONENTS,
        tau_specimen=0.08,
        sigma_dev=0.03,
        rel_error=DEMO_REL_ERROR,
        trifurcation_share=0.12,
        parent_range=(0.01, 0.4),
        exponent_slope=DEMO_SLOPES,
        slope_reference=DEMO_SLOPE_REFERENCE_MM,
        seed=seed,
    )
    f = sim.frame
    table = pd.DataFrame(
        {
            "species": f["taxon"],
            "animal": f["specimen"]
            .str.replace(r"^.*-S", "A", regex=True)
            .radd(f["taxon"].str.split().str[1].str[:3].str.upper() + "-"),
            "node": f["junction"],
        }
    )
    for src, dst in (
        ("parent", "D_parent_um"),
        ("d1", "D_daughter1_um"),
        ("d2", "D_daughter2_um"),
        ("d3", "D_daughter3_um"),
    ):
        table[dst] = (f[src] * 2000.0).round(2)  # radius in mm -> diameter in micrometres
    truth = {
        "note": "SIMULATED demo data; these are the values the simulator used.",
        "seed": seed,
        "exponent_by_species": DEMO_EXPONENTS,
        "exponent_by_animal": {
            a: sim.truth["a_specimen"][s] for a, s in zip(table["animal"].unique(), f["specimen"].unique())
        },
        "tau_specimen": 0.08,
        "sigma_dev": 0.03,
        "relative_error": DEMO_REL_ERROR,
        "trifurcation_share": 0.12,
        "exponent_slope_per_decade_of_parent_size": DEMO_SLOPES,
        "slope_reference_parent_diameter_um": 2000.0 * DEMO_SLOPE_REFERENCE_MM,
        "tree": DEMO_TREE,
        "measure": "diameter",
        "unit": "um",
    }
    return table, truth


def write_demo(folder: str | Path, seed: int = DEMO_SEED) -> dict[str, Path]:
    """Write the demo table, recipe and truth into ``folder``."""
    folder = Path(folder)
    folder.mkdir(parents=True, exist_ok=True)
    table, truth = make_demo(seed)
    paths = {k: folder / v for k, v in DEMO_FILES.items()}
    table.to_csv(paths["table"], index=False)
    paths["recipe"].write_text(RECIPE, encoding="utf-8")
    paths["truth"].write_text(json.dumps(truth, indent=2) + "\n", encoding="utf-8")
    paths["tree"].write_text(DEMO_TREE + "\n", encoding="utf-8")
    return paths


def demo_folder() -> Path | None:
    """The repository's ``data_demo/`` folder, when allobranch runs from a checkout."""
    here = Path(__file__).resolve().parent.parent / "data_demo"
    return here if (here / DEMO_FILES["table"]).is_file() else None
