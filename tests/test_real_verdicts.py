"""Real (short) fits with known truth: the law comparison reaches the right verdict, and a fit of the
demo data recovers the simulator's truth.

Data come from ``ab.simulate_junctions`` with fixed seeds; each seed was checked to give a data set whose
free-model estimate lies within about one posterior SD of the truth, so that the verdicts do not hinge on
Monte Carlo noise or on an unlucky draw of the data. The verdict rule is the package's
(allobranch/comparison/verdict.py): a law needs P(ROPE) >= 0.9 and a Bayes factor >= 3 under every prior;
'none' needs every law at P(ROPE) <= 0.05 and Bayes factor <= 1/10.
"""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

import allobranch as ab
from allobranch.comparison import verdict as vm
from allobranch.demo import DEMO_FILES

REPO = Path(__file__).resolve().parents[1]
#: Sampler settings of every fit here: short chains, enough for these well-identified tables.
SHORT = {"draws": 300, "tune": 300, "chains": 2}


def _one_taxon(truth: float, junctions: int, rel_error: float, seed: int) -> ab.JunctionTable:
    """One taxon, one specimen (its exponent is the taxon's: tau_specimen = 0)."""
    sim = ab.simulate_junctions(
        taxa=1,
        specimens_per_taxon=1,
        junctions_per_specimen=junctions,
        rel_error=rel_error,
        taxon_exponents={"T1": truth},
        tau_specimen=0.0,
        seed=seed,
    )
    return ab.read_junctions(sim.frame, sim.mapping)


@pytest.mark.parametrize("truth, expected", [(3.0, "murray"), (2.0, "da_vinci")])
def test_a_classic_law_that_holds_is_declared(truth, expected):
    # 200 junctions at 5 % error pin the exponent to about +/- 0.03 (a = 2) to +/- 0.08 (a = 3): the true
    # law's region holds essentially all the posterior mass and its Bayes factor is about 10 (checked at
    # seed 1: estimates 3.02 +/- 0.08 and 2.01 +/- 0.03).
    result = ab.compare_laws(_one_taxon(truth, 200, 0.05, seed=1), seed=1, **SHORT)
    assert dict(zip(result.verdicts["scope"], result.verdicts["verdict"])) == {
        "population": expected,
        "T1": expected,
    }
    population = result.population.set_index("law")
    assert population.loc[expected, "p_rope"] >= vm.P_ROPE_DECLARE
    others = [law for law in ("rall", "da_vinci", "murray") if law != expected]
    assert (population.loc[others, "p_rope"] == 0).all()  # the other laws' regions are far away
    assert (population.loc[others, "log10_bf"] < -10).all()  # and decisively rejected by the Bayes factor
    est = result.free_fit.exponents().set_index("level").loc["population"]
    assert abs(est["mean"] - truth) < 3 * est["sd"]


def test_two_taxa_each_get_their_own_law():
    # The taxon scope of a hierarchical fit: a cube-law taxon (200 junctions; a junction says less about a
    # larger exponent) and a square-law taxon (120 junctions), 5 % error. Checked at seed 2: estimates
    # 3.04 +/- 0.07 and 2.01 +/- 0.04. The population exponent lies between them, with a between-taxon SD
    # estimated from two taxa only: no verdict on the population scope.
    truth = {"cube": 3.0, "square": 2.0}
    sim = ab.simulate_junctions(
        taxa=list(truth),
        specimens_per_taxon=1,
        junctions_per_specimen=[200, 120],
        rel_error=0.05,
        taxon_exponents=truth,
        tau_specimen=0.0,
        seed=2,
    )
    result = ab.compare_laws(ab.read_junctions(sim.frame, sim.mapping), seed=2, **SHORT)
    verdicts = dict(zip(result.verdicts["scope"], result.verdicts["verdict"]))
    assert verdicts == {"population": "undecided", "cube": "murray", "square": "da_vinci"}
    assert result.settings["n_fits"] == 1 + 3 + 2 * 3  # free model, 3 laws population, 3 laws per taxon


def test_a_truth_between_the_laws_is_none_of_them():
    # a = 2.5 is half-way between the square and the cube law. With 200 junctions at 5 % error the
    # posterior (checked at seed 1: 2.51 +/- 0.05) puts no mass within 0.25 of 2 or 3 and the Bayes factors
    # reject every classic law: the verdict is 'none', not merely 'undecided'.
    result = ab.compare_laws(_one_taxon(2.5, 200, 0.05, seed=1), seed=1, **SHORT)
    assert set(result.verdicts["verdict"]) == {"none"}
    laws = result.population[result.population["law"] != "free"]
    assert (laws["p_rope"] <= vm.P_ROPE_REJECT).all()
    assert (laws[["log10_bf", "log10_bf_narrow", "log10_bf_wide"]].to_numpy() <= np.log10(vm.BF_REJECT)).all()
    est = result.free_fit.exponents().set_index("level").loc["population"]
    assert abs(est["mean"] - 2.5) < 3 * est["sd"] and est["sd"] < 0.1


def test_a_dozen_noisy_junctions_decide_nothing():
    # 12 junctions at 20 % error (truth a = 3): the posterior SD of the exponent is about 0.6, so no law's
    # region can hold 90 % of the mass and no law can be rejected either.
    result = ab.compare_laws(_one_taxon(3.0, 12, 0.20, seed=2), seed=2, **SHORT)
    assert set(result.verdicts["verdict"]) == {"undecided"}
    est = result.free_fit.exponents().set_index("level").loc["population"]
    assert est["sd"] > 0.3
    laws = result.population[result.population["law"] != "free"]
    assert (laws["p_rope"] < vm.P_ROPE_DECLARE).all()
    assert not all(vm.law_rejected(row) for _, row in laws.iterrows())


# ------------------------------------------------------------------------------- the demo's known truth
@pytest.fixture(scope="module")
def demo_fit() -> tuple[ab.FitResult, dict]:
    table = ab.read_junctions(
        REPO / "data_demo" / DEMO_FILES["table"], recipe=REPO / "data_demo" / DEMO_FILES["recipe"]
    )
    truth = json.loads((REPO / "data_demo" / DEMO_FILES["truth"]).read_text())
    return ab.fit(table, seed=1, progress=False, **SHORT), truth


def test_demo_fit_recovers_the_simulated_truth(demo_fit):
    result, truth = demo_fit
    # the truth the simulator used (data_demo/simulated_truth.json, written by allobranch/demo.py)
    true = {**truth["exponent_by_species"], **truth["exponent_by_animal"]}
    exps = result.exponents()
    exps = exps[exps["level"].isin(["taxon", "specimen"])].set_index("group")
    assert set(exps.index) == set(true)  # 4 species, 13 animals
    z = (exps["mean"] - pd.Series(true)) / exps["sd"]
    # every estimate within 3.5 posterior SDs of its truth (17 estimates: a calibrated posterior exceeds
    # 3.5 SD with probability 17 * 4.7e-4 < 1 %, normal tail)
    assert (z.abs() < 3.5).all(), z.round(2).to_dict()
    for species, a in truth["exponent_by_species"].items():
        assert abs(exps.loc[species, "mean"] - a) < 0.15, species
    # the variance components the simulator used: between-animal SD 0.08, biological deviation 0.03
    var = result.variance_components().set_index("component")
    for name, value in (("tau_specimen", truth["tau_specimen"]), ("sigma_dev", truth["sigma_dev"])):
        assert abs(var.loc[name, "mean"] - value) < 3 * var.loc[name, "sd"], name


def test_demo_fit_beats_the_naive_average(demo_fit):
    # Averaging per-junction exponents is biased upwards by measurement error (a heavy right tail: the
    # root of a junction whose daughters read close to the parent is huge). On the demo the naive mean is
    # off by about 0.5 for the cube-law species; the model's species estimates must be closer to the truth
    # on average.
    result, truth = demo_fit
    naive = ab.naive_summary(ab.junction_geometry(result.table), by=("taxon",)).set_index("taxon")["mean"]
    est = result.exponents().set_index("group")["mean"]
    true = pd.Series(truth["exponent_by_species"])
    model_error = (est[true.index] - true).abs().mean()
    naive_error = (naive[true.index] - true).abs().mean()
    assert model_error < naive_error / 2, (model_error, naive_error)
