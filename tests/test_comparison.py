"""Tests of the law comparison: laws, ROPE, Savage–Dickey Bayes factors, LOO, verdict rule, compare_laws.

Reference values come from outside the code under test: exact algebra (fractions), closed-form conjugate
normal marginal likelihoods evaluated with scipy, scipy quadrature, and ArviZ's own ``loo``/``compare``.
"""

from __future__ import annotations

import dataclasses
import math
from fractions import Fraction

import arviz as az
import numpy as np
import pandas as pd
import pytest
from scipy import integrate, stats

import allobranch as ab
from allobranch.comparison import bayes_factor as bfm
from allobranch.comparison import loo as loom
from allobranch.comparison import rope as ropem
from allobranch.comparison import verdict as vm
from allobranch.comparison.laws import CLASSIC_LAWS, Law, hypothesis_spec, parse_law, resolve_laws
from allobranch.errors import InputError
from allobranch.model.spec import ModelSpec, Priors


# ---------------------------------------------------------------------------------------------- laws
def test_classic_laws_are_the_published_exponents():
    # Murray 3, da Vinci 2, Rall 3/2 (the classic laws' defining values)
    assert {law.label: law.value for law in CLASSIC_LAWS} == {"murray": 3.0, "da_vinci": 2.0, "rall": 1.5}


def test_parse_law_fraction_and_names():
    assert parse_law("turbulent=7/3").value == float(Fraction(7, 3))  # exact algebra
    assert parse_law(" Murray ").value == 3.0
    assert parse_law("davinci").label == "da_vinci"
    assert parse_law("x=2.25").value == 2.25


@pytest.mark.parametrize(
    "text", ["kleiber", "a b=3", "free=3", "none=2", "x=abc", "x=1/0", "x=0", "x=25", "1x=2"]
)
def test_parse_law_rejects_bad_input(text):
    with pytest.raises(InputError):
        parse_law(text)


def test_resolve_laws_defaults_sorting_and_duplicates():
    assert resolve_laws(None) == CLASSIC_LAWS
    assert [law.label for law in resolve_laws({"b": "3", "a": 2})] == ["a", "b"]
    with pytest.raises(InputError, match="share the value"):
        resolve_laws(["murray", "cubic=3"])
    with pytest.raises(InputError, match="share the label"):
        resolve_laws(["x=2", "x=3"])
    with pytest.raises(InputError):
        resolve_laws([])


def test_hypothesis_spec_scopes_keep_the_rest_of_the_model():
    free = ModelSpec(deviation="student_t", priors=Priors(mu_sd=0.7))
    population = hypothesis_spec(free, 3.0)
    taxon = hypothesis_spec(free, 2.0, "T2")
    assert population.fixed_exponent == 3.0 and not population.fixed_taxa
    assert taxon.fixed_exponent is None and taxon.fixed_taxa == {"T2": 2.0}
    for spec in (population, taxon):
        assert spec.deviation == "student_t" and spec.priors == free.priors


# ---------------------------------------------------------------------------------------------- ROPE
def test_p_rope_matches_normal_cdf():
    # Exact posterior N(2.2, 0.3): P(|a - 2| <= 0.25) = Phi((2.25-2.2)/0.3) - Phi((1.75-2.2)/0.3) (scipy)
    draws = np.random.default_rng(1).normal(2.2, 0.3, size=400_000)
    exact = stats.norm.cdf(2.25, 2.2, 0.3) - stats.norm.cdf(1.75, 2.2, 0.3)
    assert ropem.p_rope(draws, 2.0, 0.25) == pytest.approx(exact, abs=3e-3)


def test_rope_regions_of_classic_laws_do_not_overlap_at_default_delta():
    # The default is half the smallest gap between classic laws (2 - 3/2): regions touch, never overlap.
    gaps = np.diff(sorted(law.value for law in CLASSIC_LAWS))
    assert ropem.DEFAULT_DELTA == pytest.approx(gaps.min() / 2)
    assert ropem.overlapping_laws(CLASSIC_LAWS, ropem.DEFAULT_DELTA) == []
    msgs = ropem.overlapping_laws((*CLASSIC_LAWS, Law("turbulent", 7 / 3)), ropem.DEFAULT_DELTA)
    assert len(msgs) == 1 and "da_vinci" in msgs[0] and "turbulent" in msgs[0]  # 7/3 - 2 = 1/3 < 0.5
    assert len(ropem.overlapping_laws(CLASSIC_LAWS, 0.26)) == 1  # 1.5 and 2 overlap above 0.25


@pytest.mark.parametrize("sd", [0.02, 0.1, 0.2, 0.3, 0.5, 1.0])
def test_truth_between_laws_never_puts_mass_090_on_cube_or_square(sd):
    # A posterior centred at 2.5: its mass within 0.25 of 2 or of 3 is at most Phi(0.75/sd) - Phi(0.25/sd)
    # (scipy), far below the 0.9 a verdict needs, whatever the posterior SD.
    draws = np.random.default_rng(2).normal(2.5, sd, size=20_000)
    for value in (2.0, 3.0):
        p = ropem.p_rope(draws, value)
        assert p == pytest.approx(stats.norm.cdf(0.75 / sd) - stats.norm.cdf(0.25 / sd), abs=0.01)
        assert p < vm.P_ROPE_DECLARE


@pytest.mark.parametrize("delta", [0, -0.1, np.nan])
def test_delta_must_be_positive(delta):
    with pytest.raises(ValueError):
        ropem.p_rope(np.ones(3), 2.0, delta)


# ------------------------------------------------------------------------------------- Savage–Dickey
def _conjugate(m=2.5, s=1.0, sigma=0.4, n=8, truth=2.9, seed=3):
    """Data y_i ~ N(theta, sigma) with sigma known, prior theta ~ N(m, s)."""
    y = np.random.default_rng(seed).normal(truth, sigma, size=n)
    return y, m, s, sigma


def _exact_log10_bf(y, value, m, s, sigma):
    """BF(theta = value vs free) = p(y | value) / p(y): the marginal is N(m 1, sigma^2 I + s^2 1 1^T)."""
    n = len(y)
    null = stats.norm.logpdf(y, value, sigma).sum()
    marginal = stats.multivariate_normal.logpdf(
        y, np.full(n, m), sigma**2 * np.eye(n) + s**2 * np.ones((n, n))
    )
    return (null - marginal) / np.log(10)


def _conjugate_posterior_draws(y, m, s, sigma, size, seed=4):
    prec = 1 / s**2 + len(y) / sigma**2
    mean = (m / s**2 + y.sum() / sigma**2) / prec
    return np.random.default_rng(seed).normal(mean, prec**-0.5, size=size), mean, prec**-0.5


@pytest.mark.parametrize("value", [2.8, 3.0, 2.6])
def test_savage_dickey_kde_matches_exact_conjugate_bayes_factor(value):
    y, m, s, sigma = _conjugate()
    draws, *_ = _conjugate_posterior_draws(y, m, s, sigma, 40_000)
    got = bfm.savage_dickey(draws, value, stats.norm.logpdf(value, m, s))
    assert got.method == "kde"
    assert got.log10_bf == pytest.approx(_exact_log10_bf(y, value, m, s, sigma), abs=0.02)


def test_savage_dickey_far_tail_uses_normal_approximation():
    y, m, s, sigma = _conjugate()
    draws, mean, sd = _conjugate_posterior_draws(y, m, s, sigma, 4000)
    value = 1.5  # many posterior SDs away: no draws near it
    got = bfm.savage_dickey(draws, value, stats.norm.logpdf(value, m, s))
    exact = _exact_log10_bf(y, value, m, s, sigma)
    assert got.method == "normal_approx" and got.near_draws < bfm.MIN_NEAR_DRAWS
    assert exact < -3  # decisive against, as the marking promises
    assert got.log10_bf == pytest.approx(exact, rel=0.05)  # the posterior is exactly normal here


def test_bayes_factor_table_overall_with_prior_sensitivity_matches_exact():
    # The conjugate posterior as a fit's ``mu``; the narrow/wide columns reweight the draws and must equal
    # the exact factors under prior SDs s/2 and 2s.
    y, m, s, sigma = _conjugate()
    draws, *_ = _conjugate_posterior_draws(y, m, s, sigma, 40_000)
    idata = az.from_dict(posterior={"mu": draws.reshape(2, -1)})
    laws = (Law("x", 2.9), Law("murray", 3.0))
    table, warnings = bfm.bayes_factor_table(idata, Priors(mu_mean=m, mu_sd=s), laws)
    assert warnings == []
    for row in table.itertuples():
        assert row.scope == "population"
        for col, factor in (("log10_bf", 1.0), ("log10_bf_narrow", 0.5), ("log10_bf_wide", 2.0)):
            assert getattr(row, col) == pytest.approx(
                _exact_log10_bf(y, row.value, m, s * factor, sigma), abs=0.03
            )


def _npdf(x: float, m: float, s: float) -> float:
    return math.exp(-0.5 * ((x - m) / s) ** 2) / (s * math.sqrt(2 * math.pi))


def test_prior_density_of_taxon_exponent_matches_quadrature():
    # p(a_taxon = v) = int int N(v; mu, tau) N(mu; m, s) HalfNormal(tau; t) dmu dtau by nested scipy quad
    # (the inner integral over mu spans +/- 12 tau around v, where N(v; mu, tau) lives).
    priors = Priors(mu_mean=2.5, mu_sd=1.0, tau_taxon=0.5)
    for v in (1.5, 4.2):

        def inner(tau, v=v):
            return integrate.quad(
                lambda mu: _npdf(v, mu, tau) * _npdf(mu, 2.5, 1.0), v - 12 * tau, v + 12 * tau, epsabs=1e-13
            )[0]

        exact = integrate.quad(
            lambda tau: inner(tau) * 2 * _npdf(tau, 0.0, 0.5), 0, 6, epsabs=1e-12, limit=200
        )[0]
        assert np.exp(bfm.log_prior_taxon(v, priors, seed=5)) == pytest.approx(exact, rel=2e-3)


def test_bayes_factor_is_one_when_the_data_say_nothing():
    # With no data the posterior is the prior, so every Savage-Dickey factor is 1 (log10 0), for mu and for
    # each taxon exponent, under any prior (the reweighted draws then follow the new prior).
    rng = np.random.default_rng(6)
    priors = Priors()
    n = 40_000
    mu = rng.normal(priors.mu_mean, priors.mu_sd, n)
    tau = np.abs(rng.normal(0, priors.tau_taxon, n))
    a = mu[:, None] + tau[:, None] * rng.standard_normal((n, 2))
    idata = az.from_dict(
        posterior={"mu": mu.reshape(2, -1), "tau_taxon": tau.reshape(2, -1), "a_taxon": a.reshape(2, -1, 2)},
        coords={"taxon": ["A", "B"]},
        dims={"a_taxon": ["taxon"]},
    )
    table, _ = bfm.bayes_factor_table(idata, priors, CLASSIC_LAWS, ["A", "B"], seed=7)
    assert set(table["scope"]) == {"population", "A", "B"}
    assert (table["bf_method"] == "kde").all()
    for col in ("log10_bf", "log10_bf_narrow", "log10_bf_wide"):
        assert np.abs(table[col]).max() < 0.06, col


# ----------------------------------------------------------------------------------------------- LOO
def _fake_fits(seed=8, high_k_junction=None):
    rng = np.random.default_rng(seed)
    junctions = [f"S{i // 4}/j{i}" for i in range(12)]
    fits = {}
    for label, shift in (("free", 0.0), ("murray", -0.3), ("rall", -2.0)):
        ll = rng.normal(-1 + shift, 0.3, size=(2, 400, len(junctions)))
        if high_k_junction is not None and label == "rall":
            ll[..., high_k_junction] = -np.abs(rng.standard_cauchy(size=(2, 400))) * 5
        fits[label] = az.from_dict(
            posterior={"mu": rng.normal(size=(2, 400))},
            log_likelihood={"loglik": ll},
            dims={"loglik": ["junction"]},
            coords={"junction": junctions},
        )
    return fits


def test_compare_loo_equals_arviz_on_the_same_log_likelihood():
    fits = _fake_fits()
    got = loom.compare_loo(fits)
    reference = az.compare(fits, method="stacking", var_name="loglik")  # ArviZ on the InferenceData directly
    for label, idata in fits.items():
        ref = az.loo(idata, var_name="loglik")
        row = got.table.loc[label]
        assert row["elpd"] == pytest.approx(ref.elpd_loo)
        assert row["elpd_se"] == pytest.approx(ref.se)
        assert row["p_loo"] == pytest.approx(ref.p_loo)
        for ours, theirs in (("elpd_diff", "elpd_diff"), ("dse", "dse"), ("weight", "weight")):
            assert row[ours] == pytest.approx(reference.at[label, theirs], abs=1e-9)
    assert got.table["n_high_k"].sum() == 0 and loom.high_k_warning("population", got) is None


def test_high_pareto_k_junctions_are_counted_and_named():
    fits = _fake_fits(high_k_junction=5)
    got = loom.compare_loo(fits)
    assert got.table.loc["rall", "n_high_k"] == 1 and got.high_k["rall"] == ["S1/j5"]
    message = loom.high_k_warning("T1", got)
    assert "UNRELIABLE" in message and "S1/j5" in message and "T1" in message


def test_high_k_warning_names_at_most_ten_junctions():
    result = loom.LooComparison(table=pd.DataFrame(), high_k={"free": [f"j{i:02d}" for i in range(14)]})
    message = loom.high_k_warning("population", result)
    assert "j09" in message and "j10" not in message and "4 more" in message


# ------------------------------------------------------------------------------------------- verdict
def _evidence(*laws):
    """A scope's evidence table: the free model plus one row per (label, p_rope, log10 BF triple, diff, dse)."""
    rows = [
        {
            "scope": "S",
            "law": "free",
            "p_rope": np.nan,
            "log10_bf": np.nan,
            "log10_bf_narrow": np.nan,
            "log10_bf_wide": np.nan,
            "elpd_diff": 0.0,
            "dse": 0.0,
        }
    ]
    for label, p, bfs, diff, dse in laws:
        b = np.log10(bfs) if np.ndim(bfs) else np.log10([bfs] * 3)
        rows.append(
            {
                "scope": "S",
                "law": label,
                "p_rope": p,
                "log10_bf": b[0],
                "log10_bf_narrow": b[1],
                "log10_bf_wide": b[2],
                "elpd_diff": diff,
                "dse": dse,
            }
        )
    return pd.DataFrame(rows)


def _verdict(*laws):
    return vm.decide(_evidence(*laws), "S").verdict


def test_verdict_declares_a_law_at_the_boundaries():
    weak = ("rall", 0.0, 1e-6, 3.0, 1.0)
    assert _verdict(("murray", 0.9, 3.0, 0.0, 0.0), weak) == "murray"  # P = 0.9 and BF = 3 exactly qualify
    assert _verdict(("murray", 0.95, 20.0, 4.0, 0.5), weak) == "murray"  # ELPD loss 4 is not "> 4"
    assert _verdict(("murray", 0.95, 20.0, 6.0, 3.0), weak) == "murray"  # loss 6 is not > 2 x 3 SE


@pytest.mark.parametrize(
    "law",
    [
        ("murray", 0.8999, 20.0, 0.0, 0.0),  # ROPE just short
        ("murray", 0.95, 2.99, 0.0, 0.0),  # Bayes factor just short
        ("murray", 0.95, [20.0, 2.5, 40.0], 0.0, 0.0),  # fails under the narrower prior only
        ("murray", 0.95, 20.0, 4.1, 2.0),  # LOO clearly prefers another hypothesis
    ],
)
def test_verdict_undecided_when_one_condition_fails(law):
    assert _verdict(law, ("rall", 0.0, 1e-6, 3.0, 1.0)) == "undecided"


def test_verdict_none_needs_strong_evidence_against_every_law():
    assert _verdict(("rall", 0.05, 0.1, 0, 0), ("murray", 0.0, 1e-5, 0, 0)) == "none"  # boundaries
    assert _verdict(("rall", 0.06, 0.1, 0, 0), ("murray", 0.0, 1e-5, 0, 0)) == "undecided"
    assert _verdict(("rall", 0.01, 0.11, 0, 0), ("murray", 0.0, 1e-5, 0, 0)) == "undecided"
    assert _verdict(("rall", 0.01, [0.01, 0.01, 0.2], 0, 0), ("murray", 0.0, 1e-5, 0, 0)) == "undecided"


def test_verdict_refuses_two_qualifying_laws_and_empty_scopes():
    assert _verdict(("a", 0.95, 10.0, 0, 0), ("b", 0.92, 10.0, 0, 0)) == "undecided"
    assert _verdict() == "undecided"


def test_verdict_table_one_row_per_scope_in_order():
    ev = pd.concat(
        [
            _evidence(("murray", 0.95, 10.0, 0, 0)).assign(scope="population"),
            _evidence(("murray", 0.0, 1e-4, 9, 1)).assign(scope="T1"),
        ]
    )
    out = vm.verdict_table(ev)
    assert list(out["scope"]) == ["population", "T1"] and list(out["verdict"]) == ["murray", "none"]
    # each reason quotes the evidence behind its verdict
    assert (
        out["reason"].iloc[0] == "murray: P(ROPE) 0.95, BF 10 (lowest over priors), not clearly worse by LOO"
    )
    assert out["reason"].iloc[1] == "every law has P(ROPE) <= 0.05 and BF <= 1/10"


# -------------------------------------------------------------------------------- compare_laws, real
@pytest.fixture(scope="module")
def small_noisy():
    """Twelve junctions with 15 % error (one taxon) compared with short chains."""
    sim = ab.simulate_junctions(
        taxa=1,
        specimens_per_taxon=1,
        junctions_per_specimen=12,
        rel_error=0.15,
        taxon_exponents={"T1": 3.0},
        seed=5,
    )
    table = ab.read_junctions(sim.frame, sim.mapping)
    return table, ab.compare_laws(table, draws=300, tune=300, chains=2, seed=1)


def test_twelve_noisy_junctions_are_undecided(small_noisy):
    _, result = small_noisy
    assert set(result.verdicts["verdict"]) == {"undecided"}
    assert list(result.verdicts["scope"]) == ["population", "T1"]
    assert list(result.by_taxon["verdict"]) == ["undecided"]
    # undecided for the right reason: the data are weak (the posterior SD of the exponent stays above 0.25,
    # half the 0.5 gap between neighbouring classic laws), so no law qualifies and none is rejected --
    # not, say, two laws qualifying at once or the evidence being missing.
    assert result.free_fit.exponents().set_index("level").loc["population", "sd"] > 0.25
    laws = result.population[result.population["law"] != "free"]
    assert np.isfinite(laws[["p_rope", "log10_bf", "elpd_diff"]].to_numpy(float)).all()
    assert all(vm.law_failures(row) for _, row in laws.iterrows())
    assert not all(vm.law_rejected(row) for _, row in laws.iterrows())


def test_compare_laws_tables_are_consistent(small_noisy):
    _, result = small_noisy
    population = result.population
    assert list(population.columns) == list(ab.comparison.compare.EVIDENCE_COLUMNS)
    assert list(population["law"]) == ["free", "rall", "da_vinci", "murray"]
    assert population["weight"].sum() == pytest.approx(1.0, abs=1e-6)
    assert population["elpd_diff"].min() == pytest.approx(0.0)
    assert population["p_rope"].dropna().sum() <= 1.0 + 1e-12  # non-overlapping regions share one posterior
    # The free model's ELPD is ArviZ's own az.loo of the stored junction log-likelihood.
    ref = az.loo(result.free_fit.idata, var_name="loglik")
    assert population.loc[population["law"] == "free", "elpd"].item() == pytest.approx(ref.elpd_loo)
    # P(ROPE) is the share of the free fit's mu draws near each law.
    mu = result.free_fit.idata.posterior["mu"].values.ravel()
    murray = population[population["law"] == "murray"].iloc[0]
    assert murray["p_rope"] == pytest.approx(np.mean(np.abs(mu - 3.0) <= 0.25))
    long = result.laws_table()
    assert list(long.columns) == [
        "scope",
        "law",
        "value",
        "elpd",
        "elpd_diff",
        "dse",
        "weight",
        "log10_bf",
        "p_rope",
    ]
    assert set(long["scope"]) == {"population", "T1"}
    by = result.by_taxon
    assert {"p_rope_murray", "log10_bf_rall", "elpd_diff_da_vinci", "verdict"} <= set(by.columns)
    assert by["p_rope_murray"].item() == pytest.approx(murray["p_rope"])  # one taxon: a_taxon = mu
    text = result.to_markdown()
    for needle in ("## Verdicts", "undecided", "Decision rule", "Savage-Dickey", "PSIS-LOO", "P(ROPE)"):
        assert needle in text
    # the free model and the three laws were fitted, each with the requested sampler settings
    assert result.settings["n_fits"] == 4
    assert (result.settings["draws"], result.settings["tune"], result.settings["chains"]) == (300, 300, 2)
    assert dict(result.free_fit.idata.posterior.sizes)["chain"] == 2
    assert dict(result.free_fit.idata.posterior.sizes)["draw"] == 300


def test_compare_laws_rejects_bad_requests_before_fitting(small_noisy):
    table, result = small_noisy
    free = result.free_fit
    with pytest.raises(InputError, match="delta"):
        ab.compare_laws(free, delta=-1)
    with pytest.raises(InputError, match="scopes"):
        ab.compare_laws(free, scopes=("species",))
    with pytest.raises(InputError, match="fixed exponent"):
        ab.compare_laws(table, fit=dataclasses.replace(free, spec=free.spec.with_(fixed_exponent=3.0)))
    other = ab.read_junctions(
        ab.simulate_junctions(taxa=1, specimens_per_taxon=1, junctions_per_specimen=5, seed=9).frame,
        table.mapping,
    )
    with pytest.raises(InputError, match="other data"):
        ab.compare_laws(other, fit=free)
    with pytest.raises(InputError, match="twice"):
        ab.compare_laws(free, fit=free)
