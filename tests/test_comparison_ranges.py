"""Laws over a covariate range (joint ROPE probability per draw, supported sub-ranges) and per-taxon slope
verdicts: hand-made draws with exact counts, simulated data with a known exponent curve, files, CLI."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from scipy import integrate, stats

import allobranch as ab
from allobranch.cli import main
from allobranch.comparison.laws import resolve_laws
from allobranch.comparison.ranges import (
    GRID_POINTS,
    HOLDS,
    REJECTED,
    check_law_ranges,
    curve_draws,
    joint_rope_probability,
    laws_over_range,
    parse_law_range,
    range_verdict,
    supported_subrange,
)
from allobranch.comparison.rope import p_rope
from allobranch.comparison.slopes import CONSTANT, DEPENDS, compare_covariates, log_prior_taxon_slope_at_zero
from allobranch.comparison.verdict import P_ROPE_DECLARE, P_ROPE_REJECT, UNDECIDED
from allobranch.conventions import LAWS_OVER_RANGE_FILE, POPULATION
from allobranch.errors import InputError

FAST = dict(draws=200, tune=200, chains=2, progress=False)
SIZE = "log_parent_size"
#: The flat fit's range, inside its observed log10 parent sizes (about -1.4 to 0.4).
FLAT_RANGE = (-1.0, 0.0)
#: The sloped fit's range, inside its observed log10 parent sizes (about -2.0 to 0.0).
SLOPED_RANGE = (-1.9, -0.1)


@pytest.fixture(scope="module")
def flat():
    # One taxon whose exponent is 3 at every size (no slope): 200 junctions, 2 % reading error.
    sim = ab.simulate_junctions(
        taxa=["A"],
        specimens_per_taxon=1,
        junctions_per_specimen=200,
        taxon_exponents={"A": 3.0},
        tau_specimen=0.0,
        parent_range=(0.05, 3.0),
        rel_error=0.02,
        seed=5,
    )
    table = ab.read_junctions(sim.frame, sim.mapping)
    return sim, ab.fit(table, ab.ModelSpec(covariates=(SIZE,)), seed=3, **FAST)


@pytest.fixture(scope="module")
def sloped():
    # Taxon A: exponent 3 at every size. Taxon B: 2.5 at 0.1 mm (log10 = -1), falling by 0.6 per tenfold
    # larger parent, so 3.04 at log10 size -1.9 and 1.96 at -0.1: B's true exponent is within 0.25 of 3
    # for log10 sizes below -1.417 and within 0.25 of 2 above -0.583 (exact algebra). Slopes by taxon.
    sim = ab.simulate_junctions(
        taxa=["A", "B"],
        specimens_per_taxon=1,
        junctions_per_specimen=150,
        taxon_exponents={"A": 3.0, "B": 2.5},
        tau_specimen=0.0,
        exponent_slope={"B": -0.6},
        slope_reference=0.1,
        parent_range=(0.01, 1.0),
        rel_error=0.02,
        seed=8,
    )
    table = ab.read_junctions(sim.frame, sim.mapping)
    spec = ab.ModelSpec(covariates=(SIZE,), covariate_ref={SIZE: -1.0}, covariates_by_taxon=True)
    return ab.fit(table, spec, seed=3, **FAST)


# -- hand-made draws: exact counts -------------------------------------------------------------------------

GRID = np.array([0.0, 1.0, 2.0])
#: Four draws of the exponent at GRID. With law 3 and delta 0.25 (exact counting): A and D stay inside;
#: B is outside at 0 (2.6), C outside at 2 (3.4). Pointwise P(ROPE) is 3/4, 4/4, 3/4 (smallest 0.75), the
#: joint probability over [0, 2] is 2/4, over [0, 1] and [1, 2] it is 3/4, at 1 alone 4/4.
CURVES = np.array([[3.0, 3.0, 3.0], [2.6, 2.8, 3.0], [3.0, 3.2, 3.4], [3.1, 3.1, 3.1]])


def test_joint_probability_counts_whole_curves_not_points() -> None:
    assert joint_rope_probability(CURVES, 3.0, 0.25) == 0.5
    pointwise = [p_rope(CURVES[:, j], 3.0, 0.25) for j in range(3)]
    assert min(pointwise) == 0.75  # a pointwise rule would have said 0.75


def test_supported_subrange_is_the_widest_run_reaching_the_threshold() -> None:
    # threshold 0.9: only the middle point qualifies (4/4)
    assert supported_subrange(GRID, CURVES, 3.0, 0.25, 0.9) == (1.0, 1.0, 1.0)
    # threshold 0.75: [0, 1] and [1, 2] both reach 3/4 (the whole range only 2/4); the lower start wins
    assert supported_subrange(GRID, CURVES, 3.0, 0.25, 0.75) == (0.0, 1.0, 0.75)
    # no point reaches it: no sub-range, and the best pointwise probability is reported
    low, high, p = supported_subrange(GRID, CURVES, 2.0, 0.25, 0.9)
    assert np.isnan(low) and np.isnan(high) and p == 0.0


@pytest.mark.parametrize(
    ("p", "expected"),
    [
        (P_ROPE_DECLARE, HOLDS),  # thresholds of allobranch.comparison.verdict, inclusive
        (1.0, HOLDS),
        (P_ROPE_DECLARE - 0.01, UNDECIDED),
        (P_ROPE_REJECT + 0.01, UNDECIDED),
        (P_ROPE_REJECT, REJECTED),
        (0.0, REJECTED),
    ],
)
def test_range_verdict_uses_the_rope_thresholds(p, expected) -> None:
    assert range_verdict(p, 3.0, 0.25)[0] == expected


def test_law_range_parsing_and_checks() -> None:
    assert parse_law_range("log_parent_size=-1.5:0.25") == ("log_parent_size", (-1.5, 0.25))
    for bad in ("generation", "generation=3", "generation=a:4", "=1:2"):
        with pytest.raises(InputError, match="NAME=LOW:HIGH"):
            parse_law_range(bad)
    assert check_law_ranges({"generation": [3, 10]}, ["generation"]) == {"generation": (3.0, 10.0)}
    with pytest.raises(InputError, match="not a covariate of the model"):
        check_law_ranges({"order": (1, 2)}, ["generation"])
    for bounds in ((10, 3), (1, 1), (0, np.inf), (1, 2, 3), "ab", 5):
        with pytest.raises(InputError, match="two finite numbers"):
            check_law_ranges({"generation": bounds}, ["generation"], origin="recipe.toml")


# -- simulated data ----------------------------------------------------------------------------------------


def test_curve_at_the_reference_is_the_level_and_moves_with_the_slope(flat) -> None:
    # exact algebra: a(x) = mu + beta (x - ref) per draw
    _, fit = flat
    post = fit.idata.posterior
    ref = fit.settings["linear_reference"][SIZE]
    curves = curve_draws(post, SIZE, ref, np.array([ref, ref + 1.0]))
    mu, beta = post["mu"].values.ravel(), post["beta"].values[..., 0].ravel()
    np.testing.assert_allclose(curves[:, 0], mu)
    np.testing.assert_allclose(curves[:, 1] - curves[:, 0], beta)


def test_flat_exponent_holds_for_the_true_law_and_is_rejected_one_away(flat) -> None:
    sim, fit = flat
    laws = resolve_laws(["murray", "da_vinci", "off=4"])  # truth 3; 2 and 4 are 1.0 away
    table, warnings = laws_over_range(fit, laws, {SIZE: FLAT_RANGE}, delta=0.25, scopes=[POPULATION, "A"])
    assert warnings == []  # the range lies inside the data
    assert len(table) == 6
    for _, row in table.iterrows():
        if row["law"] == "murray":
            assert row["verdict"] == HOLDS
            assert (row["supported_low"], row["supported_high"]) == FLAT_RANGE  # the whole range
        else:
            assert row["verdict"] == REJECTED and row["p_rope_range"] == 0.0
            assert np.isnan(row["supported_low"])
    # joint <= every pointwise P(ROPE) on the grid (pointwise from rope.p_rope at each grid value)
    grid = np.linspace(*FLAT_RANGE, GRID_POINTS)
    ref = fit.settings["linear_reference"][SIZE]
    curves = curve_draws(fit.idata.posterior, SIZE, ref, grid)
    pointwise = min(p_rope(curves[:, j], 3.0, 0.25) for j in range(GRID_POINTS))
    murray = table[(table["scope"] == POPULATION) & (table["law"] == "murray")].iloc[0]
    assert murray["p_rope_range"] <= pointwise


def test_sloped_exponent_gives_each_law_its_sub_range(sloped) -> None:
    laws = resolve_laws(None)
    table, _ = laws_over_range(sloped, laws, {SIZE: SLOPED_RANGE}, delta=0.25, scopes=["A", "B"])
    rows = {(r.scope, r.law): r for r in table.itertuples()}
    low, high = SLOPED_RANGE
    murray, da_vinci, rall = rows[("B", "murray")], rows[("B", "da_vinci")], rows[("B", "rall")]
    # over the whole range B's exponent leaves each law's region
    assert murray.verdict == da_vinci.verdict == rall.verdict == REJECTED
    # Murray's law at the small end, da Vinci's at the large end, each inside the region where the truth
    # is within 0.25 of the law (below -1.417 and above -0.583; 0.2 of slack for the posterior's spread)
    assert murray.supported_low == low and low < murray.supported_high <= -1.417 + 0.2
    assert da_vinci.supported_high == high and high > da_vinci.supported_low >= -0.583 - 0.2
    assert murray.p_rope_supported >= P_ROPE_DECLARE and da_vinci.p_rope_supported >= P_ROPE_DECLARE
    assert np.isnan(rall.supported_low)
    # A has no slope: da Vinci and Rall are rejected everywhere
    assert rows[("A", "da_vinci")].verdict == rows[("A", "rall")].verdict == REJECTED


def test_per_taxon_slopes_get_their_own_verdicts(sloped) -> None:
    slopes = compare_covariates(sloped, seed=1, refit=False)
    assert list(slopes["group"]) == ["all taxa", "A", "B"]
    by = slopes.set_index("group")
    assert by.at["B", "verdict"] == DEPENDS  # simulated -0.6
    assert by.at["A", "verdict"] == CONSTANT  # simulated 0
    assert np.isnan(by.at["B", "elpd_gain"]) and "no per-taxon LOO" in by.at["B", "reason"]
    # the interval is ArviZ's HDI of the taxon's slope draws
    draws = sloped.idata.posterior["beta_taxon"].sel(taxon="B").values[..., 0].ravel()
    lo, hi = ab_hdi(draws)
    assert (by.at["B", "hdi_low"], by.at["B", "hdi_high"]) == pytest.approx((lo, hi))


def ab_hdi(draws: np.ndarray) -> tuple[float, float]:
    import arviz as az

    lo, hi = az.hdi(draws, hdi_prob=0.9)
    return float(lo), float(hi)


@pytest.mark.parametrize(("slope_sd", "spread"), [(0.3, 0.2), (0.87, 0.43), (0.1, 1.0), (2.0, 0.05)])
def test_taxon_slope_prior_density_at_zero_matches_quadrature(slope_sd, spread) -> None:
    # Reference: scipy.integrate.quad of Normal(0; 0, sqrt(s^2 + t^2)) HalfNormal(t; c) over t, the marginal
    # prior of beta + tau_beta z at 0 (beta ~ N(0, s), tau_beta ~ HalfNormal(c), z ~ N(0, 1)).
    def integrand(t):
        return stats.norm.pdf(0.0, 0.0, np.sqrt(slope_sd**2 + t**2)) * stats.halfnorm.pdf(t, scale=spread)

    exact, _ = integrate.quad(integrand, 0, np.inf, epsabs=1e-12, epsrel=1e-10)
    assert log_prior_taxon_slope_at_zero(slope_sd, spread) == pytest.approx(np.log(exact), abs=1e-8)


# -- the comparison, its files and the command line --------------------------------------------------------


def test_compare_laws_over_a_range_writes_and_reads_the_table(flat, tmp_path) -> None:
    _, fit = flat
    with pytest.raises(InputError, match="not a covariate"):  # refused before any fit
        ab.compare_laws(fit, ["murray"], scopes=[POPULATION], law_range={"generation": (3, 10)})
    result = ab.compare_laws(
        fit,
        ["murray", "da_vinci"],
        scopes=[POPULATION],
        seed=2,
        law_range={SIZE: (-1.5, 0.0)},
        workers=1,
        **FAST,
    )
    direct, _ = laws_over_range(fit, result.laws, {SIZE: (-1.5, 0.0)}, delta=0.25, scopes=[POPULATION])
    pd.testing.assert_frame_equal(result.over_range, direct)
    assert any("beyond the observed values" in w for w in result.warnings)  # -1.5 is below the data
    assert "## Laws over a covariate range" in result.to_markdown()
    written = ab.write_comparison(result, tmp_path)
    assert tmp_path / LAWS_OVER_RANGE_FILE in written
    saved = ab.SavedComparison.read(tmp_path)
    pd.testing.assert_frame_equal(saved.over_range, result.over_range, check_dtype=False)
    report = ab.build_report(fit, tmp_path / "report.html", laws=saved)
    assert "Laws over a covariate range" in report.read_text(encoding="utf-8")


def test_cli_law_range_and_recipe_section(flat, tmp_path, capsys) -> None:
    sim, fit = flat
    csv = tmp_path / "junctions.csv"
    sim.frame.to_csv(csv, index=False)
    fit_file = fit.save(tmp_path / "fit.nc")
    flags = ["--parent", "parent", "--daughters", "d1,d2", "--taxon", "taxon", "--specimen", "specimen"]
    flags += ["--junction", "junction", "--rel-error", "0.02", "--covariate", SIZE]
    short = ["--draws", "200", "--tune", "200", "--chains", "2", "--quiet"]
    base = ["compare", str(csv), *flags, "--law", "murray", "--scope", POPULATION, *short]
    # a range of a covariate the model does not have: exit 2 before any fit, the option named
    assert main([*base, "--out", str(tmp_path / "x"), "--law-range", "generation=3:10"]) == 2
    assert "'generation' is not a covariate of the model" in capsys.readouterr().err
    # a recipe's [compare] law_range with unusable bounds: exit 2 naming the recipe
    recipe = tmp_path / "recipe.toml"
    recipe.write_text(
        '[columns]\nparent = "parent"\ndaughters = ["d1", "d2"]\ntaxon = "taxon"\nspecimen = "specimen"\n'
        'junction = "junction"\n[measurement]\nrel_error = 0.02\n'
        f'[compare]\nlaw_range = {{ {SIZE} = [0, "x"] }}\n'
    )
    via_recipe = ["compare", str(csv), "--recipe", str(recipe), "--covariate", SIZE, "--law", "murray"]
    assert main([*via_recipe, "--out", str(tmp_path / "y")]) == 2
    err = capsys.readouterr().err
    assert str(recipe) in err and "two finite numbers" in err
    # the range from the command line: the table is written and a line printed per scope
    out = tmp_path / "laws"
    code = main([*base, "--out", str(out), "--fit", str(fit_file), "--law-range", f"{SIZE}=-1:0"])
    assert code == 0
    assert "Over a range: log_parent_size from -1 to 0, population: murray holds" in capsys.readouterr().out
    table = pd.read_csv(out / LAWS_OVER_RANGE_FILE)
    assert list(table["verdict"]) == [HOLDS]
