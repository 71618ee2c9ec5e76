"""Study planning (verdict probabilities over simulated designs) and simulation-based calibration."""

from __future__ import annotations

import inspect
import re
from pathlib import Path

import matplotlib.pyplot as plt
import numpy as np
import pandas as pd
import pytest
from scipy import stats

import allobranch as ab
from allobranch.cli import main
from allobranch.comparison.laws import Law
from allobranch.comparison.rope import overlapping_laws
from allobranch.engine import Engine, derived_seed
from allobranch.errors import InputError
from allobranch.planning import calibrate as cal
from allobranch.planning import plan
from allobranch.planning.design import Design, simulate
from allobranch.planning.settings import FIT_SETTINGS
from allobranch.reporting.plots.calibration import plot_rank_histogram
from allobranch.reporting.plots.plan import plot_interval_width, plot_verdict_probabilities

SHORT = {"draws": 100, "tune": 100, "chains": 2}
HERE = Engine(workers=1)


# -- verdict classes, ROPE half-width and sweeps ---------------------------------------------------------------
def test_outcomes_follow_the_comparisons_verdict_labels() -> None:
    laws = plan.alternative_laws(3.0, [2.7, 2.0])
    assert [law.label for law in laws] == [plan.TRUE_LAW, "alternative1", "alternative2"]
    assert [plan.outcome_of(v) for v in ("truth", "alternative2", "none", "undecided")] == list(plan.OUTCOMES)
    with pytest.raises(InputError, match="equals the true exponent"):
        plan.alternative_laws(3.0, [3.0])


@pytest.mark.parametrize("alternative, delta", [(2.7, 0.15), (2.0, 0.25), (3.2, 0.1)])
def test_default_delta_lets_the_regions_touch_but_not_overlap(alternative, delta) -> None:
    # exact algebra: regions +/- delta of two laws a gap g apart touch when delta = g / 2; the comparison's own
    # overlap check (allobranch.comparison.rope) must find no overlap; capped at the default 0.25
    got = plan.default_delta(3.0, [alternative])
    assert got == pytest.approx(delta)
    assert overlapping_laws([Law("a", 3.0), Law("b", alternative)], got) == []


def test_sweeps_are_sorted_from_the_cheapest_design() -> None:
    assert plan.parse_sweep("junctions=100, 10,30").values == (10, 30, 100)
    assert plan.parse_sweep("error=0.02,0.1,0.05").values == (0.1, 0.05, 0.02)  # more error is cheaper
    for bad in ("junctions", "colour=1,2", "junctions=a,b"):
        with pytest.raises(InputError, match="junctions=10,30,100"):
            plan.parse_sweep(bad)


def _replicates(outcomes_by_point: list[list[str]]) -> pd.DataFrame:
    rows = []
    for point, outcomes in enumerate(outcomes_by_point):
        for r, outcome in enumerate(outcomes):
            failed = outcome == "failed"
            rows.append(
                {
                    "point": point,
                    "replicate": r,
                    "status": "failed" if failed else "ok",
                    "outcome": "" if failed else outcome,
                    "width": np.nan if failed else 0.1 * (r + 1),
                    "sd": np.nan if failed else 0.05,
                    "covered": not failed,
                }
            )
    return pd.DataFrame(rows)


def test_summary_counts_shares_with_clopper_pearson_intervals() -> None:
    reps = _replicates([["right", "undecided", "failed", "other"], ["right"] * 9 + ["none"]])
    designs = [Design(junctions=10), Design(junctions=30)]
    points = plan.summarise(reps, designs, [2.7], "junctions", target=0.8)
    first, second = points.iloc[0], points.iloc[1]
    # failed replicates are counted apart and left out of the shares (exact arithmetic)
    assert (first["replicates"], first["ok"], first["failed"]) == (4, 3, 1)
    assert first[["p_right", "p_other", "p_undecided", "p_none"]].tolist() == pytest.approx(
        [1 / 3, 1 / 3, 1 / 3, 0]
    )
    assert first["mean_width"] == pytest.approx(np.mean([0.1, 0.2, 0.4]))
    # the interval is scipy's exact (Clopper-Pearson) interval of 9 successes in 10
    ci = stats.binomtest(9, 10).proportion_ci(confidence_level=0.95, method="exact")
    assert (second["p_right_low"], second["p_right_high"]) == pytest.approx((ci.low, ci.high))
    assert points["reaches_target"].tolist() == [False, True] and points["smallest"].tolist() == [False, True]
    assert points["value"].tolist() == [10, 30] and points["n_junctions"].tolist() == [30, 90]


# -- a real small plan -----------------------------------------------------------------------------------------
@pytest.fixture(scope="module")
def small_plan() -> plan.PlanResult:
    return plan.plan_study(
        Design(specimens=2, junctions=8),
        2.7,
        replicates=2,
        seed=3,
        sweep=plan.Sweep("junctions", (12, 6)),
        engine=HERE,
        progress=False,
        **SHORT,
    )


def test_plan_tables_are_consistent(small_plan) -> None:
    points, reps = small_plan.points, small_plan.replicates
    assert points["value"].tolist() == [6, 12] and len(reps) == 4
    shares = points[[f"p_{o}" for o in plan.OUTCOMES]].sum(axis=1)
    np.testing.assert_allclose(shares, 1.0)  # every replicate has exactly one outcome
    # common random numbers: replicate r has the same seed at every design point
    seeds = reps.pivot(index="replicate", columns="point", values="seed")
    assert (seeds[0] == seeds[1]).all()
    ok = reps[reps["status"] == "ok"]
    assert np.all(ok["hdi_low"] < ok["mean"]) and np.all(ok["mean"] < ok["hdi_high"])
    np.testing.assert_allclose(ok["width"], ok["hdi_high"] - ok["hdi_low"])
    # each replicate is the same table and fit as simulating and comparing it by hand
    first = ok.iloc[0]
    design = Design(specimens=2, junctions=int(points.loc[int(first["point"]), "junctions"]))
    table = simulate(design, int(first["seed"])).table
    fit = ab.fit(table, seed=int(first["seed"]), progress=False, **SHORT)
    assert fit.exponents().iloc[0]["mean"] == pytest.approx(first["mean"])
    assert small_plan.delta == pytest.approx(0.15)
    text = small_plan.to_markdown()
    assert "Probability of each verdict" in text and "Failed replicates" in text
    assert "Design: 1 taxon x 2 specimens x 8 junctions" in text


def test_plan_figures_take_an_axes_and_return_it(small_plan) -> None:
    fig, (left, right) = plt.subplots(1, 2)
    assert plot_verdict_probabilities(small_plan.points, target=0.8, ax=left) is left
    assert plot_interval_width(small_plan.points, ax=right) is right
    assert len(left.get_lines()) >= 5  # four verdict classes and the target line
    np.testing.assert_allclose(right.get_lines()[0].get_ydata(), small_plan.points["mean_width"])


@pytest.mark.parametrize("func", [plan.plan_study, cal.calibrate])
def test_study_functions_document_every_parameter(func) -> None:
    # the options both study functions take are documented once and filled into each docstring: every
    # parameter of the signature (inspect.signature, standard library) has its numpydoc entry, in order,
    # and names each fit setting it passes on, every one a parameter of allobranch.fit
    doc = inspect.getdoc(func)
    section = doc.split("Parameters\n----------\n")[1].split("\n\n")[0]
    entries = re.findall(r"^(\*\*\w+|\w+)(?: :|$)", section, flags=re.M)
    names = [
        ("**" if p.kind is p.VAR_KEYWORD else "") + p.name
        for p in inspect.signature(func).parameters.values()
    ]
    assert entries == names and "{study_options}" not in doc
    for name in FIT_SETTINGS:
        assert f"``{name}``" in section and name in inspect.signature(ab.fit).parameters


def test_plan_refuses_bad_requests_before_fitting() -> None:
    with pytest.raises(InputError, match="target"):
        plan.plan_study(Design(), 2.7, target=1.5, engine=HERE)
    with pytest.raises(InputError, match="replicates"):
        plan.plan_study(Design(), 2.7, replicates=0, engine=HERE)
    with pytest.raises(InputError, match="free model"):
        plan.plan_study(Design(), 2.7, spec=ab.ModelSpec(fixed_exponent=3.0), engine=HERE)


def test_plan_cli_bad_options_exit_2(tmp_path: Path, capsys) -> None:
    code = main(["plan", "--alternative", "2.7", "--junctions", "5", "--split", "dirichlet", "--trifurcations", "2",
                 "--out", str(tmp_path / "p")])  # fmt: skip
    assert code == 2 and "trifurcations" in capsys.readouterr().err
    code = main(["plan", "--alternative", "2.7", "--sweep", "colour=1", "--out", str(tmp_path / "p")])
    assert code == 2 and "cannot sweep 'colour'" in capsys.readouterr().err
    code = main(
        ["plan", "--alternative", "2.7", "--workers", "2", "--scheduler", "tcp://x:1", "--out", str(tmp_path)]
    )
    assert code == 2 and "exclude each other" in capsys.readouterr().err


# -- calibration -----------------------------------------------------------------------------------------------
def test_bins_give_at_least_five_expected_ranks_each() -> None:
    # common practice, no single source: at least 5 expected counts per chi-square bin; bins divide the
    # 100 possible ranks evenly
    assert [cal.n_bins(n) for n in (100, 99, 30, 12, 8)] == [20, 10, 5, 2, 2]
    assert all((cal.RANK_DRAWS + 1) % b == 0 for b in cal.BIN_CHOICES)


def _ranks(values: list[int], quantity: str = "mu") -> pd.DataFrame:
    n = len(values)
    return pd.DataFrame(
        {
            "replicate": range(n),
            "status": "ok",
            "quantity": quantity,
            "rank": values,
            "n_draws": cal.RANK_DRAWS,
            "covered": [i % 10 != 0 for i in range(n)],
        }
    )


def test_uniformity_matches_scipy_on_known_ranks() -> None:
    flat = _ranks(list(range(100)))  # every rank once: a perfectly flat histogram
    row = cal.uniformity(flat, 0.9).iloc[0]
    assert row["bins"] == 20 and row["chi2"] == 0 and row["chi2_p"] == pytest.approx(1.0)
    assert row["mean_rank_fraction"] == pytest.approx(0.5)  # exact: mean of 0..99 over 99
    assert row["covered"] == 90 and row["coverage_p"] == pytest.approx(stats.binomtest(90, 100, 0.9).pvalue)
    piled = _ranks([0] * 50 + [99] * 50)  # all truths outside the draws: a U shape
    hist = cal.rank_histogram(piled)
    assert hist["count"].tolist() == [50] + [0] * 18 + [50]
    expected = stats.chisquare([50] + [0] * 18 + [50]).pvalue  # scipy.stats.chisquare
    assert cal.uniformity(piled, 0.9).iloc[0]["chi2_p"] == pytest.approx(expected) and expected < 1e-10
    lo, hi = stats.binom.ppf([0.005, 0.995], 100, 1 / 20)  # the 99 % band of a flat bin (scipy)
    assert (hist["band_low"].iloc[0], hist["band_high"].iloc[0]) == (lo, hi)


def test_thinned_draws_and_ranks() -> None:
    draws = np.arange(2 * 400, dtype=float).reshape(2, 400)
    kept = cal.thinned(draws)
    assert kept.size == cal.RANK_DRAWS and kept[0] == 0 and kept[-1] == 799
    assert np.all(np.diff(kept) > 0)


def failing_generator(design: Design, seed: int):
    """Simulate, except for one seed (a stand-in for a replicate that breaks)."""
    if seed == derived_seed(4, 1):
        raise RuntimeError("simulated tree degenerate")
    return simulate(design, seed)


def test_calibration_survives_a_failed_replicate() -> None:
    result = cal.calibrate(
        Design(taxa=2, specimens=2, junctions=6),
        replicates=3,
        seed=4,
        generator=failing_generator,
        engine=HERE,
        progress=False,
        **SHORT,
    )
    ranks = result.ranks
    failed = ranks[ranks["status"] == "failed"]
    assert failed["replicate"].tolist() == [1] and failed["seed"].tolist() == [derived_seed(4, 1)]
    assert "simulated tree degenerate" in failed["error"].iloc[0]
    ok = ranks[ranks["status"] == "ok"]
    assert set(ok["replicate"]) == {0, 2}
    assert {"mu", "a_taxon", "tau_taxon", "tau_specimen", "sigma_dev"} == set(ok["quantity"])
    assert ok["rank"].between(0, cal.RANK_DRAWS).all() and (ok["n_draws"] == cal.RANK_DRAWS).all()
    assert set(result.summary["n"]) == {2, 4}  # four taxon exponents, two of everything else
    assert "replicate 1, seed" in result.to_markdown()
    ax = plot_rank_histogram(result.histogram, "mu")
    assert len(ax.containers[0]) == 2 and ax.get_title() == "population exponent"


def test_calibration_truth_is_drawn_from_the_priors() -> None:
    # draws follow the priors: mu ~ Normal(2.5, 1), spreads half-normal (checked with scipy's KS test over
    # many draws); a spread without its level is 0
    rng = np.random.default_rng(0)
    priors = ab.Priors()
    draws = pd.DataFrame([cal.draw_truth(priors, (True, False), rng) for _ in range(2000)])
    assert stats.kstest(draws["mu"], stats.norm(2.5, 1.0).cdf).pvalue > 0.001
    assert stats.kstest(draws["tau_taxon"], stats.halfnorm(scale=0.5).cdf).pvalue > 0.001
    assert (draws["tau_specimen"] == 0).all()
    assert cal.model_levels(Design(taxa=1, specimens=3), ab.ModelSpec()) == (False, True)


def test_calibrate_cli_writes_its_files(tmp_path: Path) -> None:
    out = tmp_path / "c"
    args = ["calibrate", "--taxa", "1", "--specimens", "2", "--junctions", "6", "--replicates", "2",
            "--draws", "60", "--tune", "60", "--chains", "2", "--workers", "1", "--quiet", "--out", str(out)]  # fmt: skip
    assert main(args) == 0
    for name in ("calibration.csv", "calibration_summary.csv", "calibration.md", "calibration.png"):
        assert (out / name).stat().st_size > 0
    summary = pd.read_csv(out / "calibration_summary.csv")
    assert set(summary["quantity"]) == {"mu", "tau_specimen", "sigma_dev"}
    assert main(args) == 2  # files exist: no clobbering without --force
