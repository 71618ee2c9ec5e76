"""Two samplers, and two forms of the likelihood, must give the same posterior on the same table.

(a) PyMC's NUTS and nutpie sample the same model: their posterior means agree within Monte Carlo error.
(b) The exact latent form (every true daughter radius a parameter) and the fast junction-marginal form agree
    within the accuracy of the fast form's approximation (see the tolerance below).

Monte Carlo standard errors come from ArviZ (``az.mcse``, Vehtari et al. 2021, Bayesian Analysis 16:667);
two independent estimates differ by more than 4 combined standard errors with probability < 1e-4 (normal
tail, scipy.stats.norm.sf(4) * 2 = 6.3e-5).
"""

from __future__ import annotations

import arviz as az
import numpy as np
import pytest

import allobranch as ab

#: Combined Monte Carlo standard errors allowed between two independent runs (normal tail, see above).
Z_MC = 4.0


def _mcse_mean(draws: np.ndarray) -> float:
    """ArviZ's MCSE of the posterior mean of draws shaped (chain, draw)."""
    return float(np.asarray(az.mcse(draws)).item())


def _mcse_sd(draws: np.ndarray) -> float:
    """MCSE of the posterior SD by the delta method: SD = sqrt(mean of (x - m)^2), so its MCSE is the MCSE
    of that mean over 2 SD (az.mcse(method="sd") fails with numpy 2.4 in this ArviZ version)."""
    return float(np.asarray(az.mcse((draws - draws.mean()) ** 2)).item()) / (2 * draws.std())


def _per_element(result: ab.FitResult, var: str) -> list[np.ndarray]:
    """The draws of each element of a posterior variable, each shaped (chain, draw)."""
    values = result.idata.posterior[var].values
    return [values] if values.ndim == 2 else [values[..., i] for i in range(values.shape[-1])]


# ---------------------------------------------------------------------------- (a) PyMC NUTS vs nutpie
@pytest.fixture(scope="module")
def two_samplers() -> dict[str, ab.FitResult]:
    """One taxon, two specimens of 20 junctions at 5 % error (specimen level present), fitted twice."""
    sim = ab.simulate_junctions(
        taxa=1,
        specimens_per_taxon=2,
        junctions_per_specimen=20,
        rel_error=0.05,
        taxon_exponents={"T1": 2.6},
        tau_specimen=0.1,
        seed=1,
    )
    table = ab.read_junctions(sim.frame, sim.mapping)
    return {
        s: ab.fit(table, draws=1000, tune=1000, chains=2, seed=7, sampler=s, progress=False)
        for s in ("nutpie", "pymc")
    }


def test_each_sampler_really_ran(two_samplers):
    # nutpie falls back to PyMC when it cannot start; the comparison would then compare PyMC with itself
    assert {s: r.settings["sampler"] for s, r in two_samplers.items()} == {"nutpie": "nutpie", "pymc": "pymc"}
    assert "tau_specimen" in two_samplers["nutpie"].idata.posterior  # the hierarchy is in the model


@pytest.mark.parametrize("var", ["mu", "a_specimen", "sigma_dev"])
def test_pymc_and_nutpie_posterior_means_agree(two_samplers, var):
    for x, y in zip(
        _per_element(two_samplers["nutpie"], var), _per_element(two_samplers["pymc"], var), strict=True
    ):
        se = np.hypot(_mcse_mean(x), _mcse_mean(y))
        # 4 combined MCSE (ArviZ) plus 1e-3 for rounding-level differences of two compiled codes
        assert abs(x.mean() - y.mean()) < Z_MC * se + 1e-3, (var, x.mean(), y.mean(), se)


def test_pymc_and_nutpie_posterior_sds_agree(two_samplers):
    for x, y in zip(
        _per_element(two_samplers["nutpie"], "a_specimen"),
        _per_element(two_samplers["pymc"], "a_specimen"),
        strict=True,
    ):
        se = np.hypot(_mcse_sd(x), _mcse_sd(y))
        assert abs(x.std() - y.std()) < Z_MC * se + 1e-3, (x.std(), y.std(), se)


# ----------------------------------------------------------------------- (b) exact latent vs fast form
@pytest.fixture(scope="module")
def two_forms() -> dict[str, ab.FitResult]:
    """One taxon, one specimen, 40 junctions at 5 % error, fitted in the fast and in the exact form."""
    sim = ab.simulate_junctions(
        taxa=1,
        specimens_per_taxon=1,
        junctions_per_specimen=40,
        rel_error=0.05,
        taxon_exponents={"T1": 2.6},
        tau_specimen=0.0,
        seed=2,
    )
    table = ab.read_junctions(sim.frame, sim.mapping)
    return {
        name: ab.fit(table, spec, draws=1000, tune=1000, chains=2, seed=5, progress=False)
        for name, spec in (("fast", ab.ModelSpec()), ("latent", ab.ModelSpec(likelihood="latent")))
    }


def test_latent_form_keeps_the_true_radii(two_forms):
    # the exact form really samples every true daughter radius (40 junctions x 2 daughters) and the
    # asymmetry scale; the fast form has neither
    latent, fast = two_forms["latent"].idata.posterior, two_forms["fast"].idata.posterior

    def per_draw(post) -> int:
        return sum(int(np.prod(v.shape[2:])) for v in post.data_vars.values())

    assert per_draw(latent) >= per_draw(fast) + 80
    assert "sigma_asym" in latent and "sigma_asym" not in fast


def test_fast_form_matches_the_exact_latent_form(two_forms):
    # Tolerance. The fast form differs from the exact one in two ways: (1) the law is expanded to second
    # order about the posterior mean of the true log daughters; the neglected terms are of fourth order in
    # their posterior SD (at most the 5 % error): about a^2 s^4 / 8 = 7 * 6e-6 / 8 < 1e-5 on the log
    # parent, against a parent residual SD of about 0.06 -- negligible; (2) the daughters' asymmetry scale
    # is plugged in (maximum marginal likelihood) instead of sampled, which ignores its uncertainty (40
    # junctions pin it to about +/- 11 %) and so moves the exponent by a small fraction of its posterior
    # SD. 0.1 posterior SD covers both with room; Monte Carlo error is allowed on top.
    x = two_forms["fast"].idata.posterior["mu"].values
    y = two_forms["latent"].idata.posterior["mu"].values
    sd = y.std()
    assert abs(x.mean() - y.mean()) < 0.1 * sd + Z_MC * np.hypot(_mcse_mean(x), _mcse_mean(y)), (
        x.mean(),
        y.mean(),
        sd,
    )
    assert abs(x.std() - sd) < 0.1 * sd + Z_MC * np.hypot(_mcse_sd(x), _mcse_sd(y)), (x.std(), sd)
    # the same check on the deviation scale, whose posterior the approximation could also distort
    x = two_forms["fast"].idata.posterior["sigma_dev"].values
    y = two_forms["latent"].idata.posterior["sigma_dev"].values
    assert abs(x.mean() - y.mean()) < 0.1 * y.std() + Z_MC * np.hypot(_mcse_mean(x), _mcse_mean(y))
