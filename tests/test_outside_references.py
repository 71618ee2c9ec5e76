"""Checks against references the project did not compute itself.

Each check names its source beside it: a published paper or table, exact algebra, a reference library
(scipy, numpy), "common practice, no single source", or "value written from memory" where the number or the
citation was not confirmed against the source.
"""

from __future__ import annotations

import math
from pathlib import Path

import arviz as az
import numpy as np
import pandas as pd
import pytest
from scipy import optimize, stats
from scipy.special import logsumexp, softmax

import allobranch as ab
from allobranch.comparison import verdict as vm
from allobranch.comparison.laws import CLASSIC_LAWS, parse_law


def _symmetric_table(parent: np.ndarray, daughter: np.ndarray, **mapping) -> ab.JunctionTable:
    """Junctions with the given parent sizes and two equal daughters each."""
    frame = pd.DataFrame({"p": parent, "d1": daughter, "d2": daughter})
    return ab.read_junctions(frame, parent="p", daughters=["d1", "d2"], **mapping)


# ------------------------------------------------------------------------------------ the classic laws
def test_classic_laws_carry_their_published_values():
    laws = {law.label: law.value for law in CLASSIC_LAWS}
    assert laws["murray"] == 3.0  # Murray 1926, PNAS 12:207 (cube law: flow proportional to r^3)
    assert laws["da_vinci"] == 2.0  # area-preserving branching; e.g. Eloy 2011, Phys. Rev. Lett. 107:258101
    assert laws["rall"] == 1.5  # Rall 1959, the 3/2 power rule for dendrites (citation from memory)
    assert len(laws) == 3
    # the names users type reach the same values
    assert parse_law("murray").value == 3.0 and parse_law("davinci").value == 2.0
    assert parse_law("rall").value == 1.5


@pytest.mark.parametrize("label, ratio", [("murray", 0.7937), ("da_vinci", 0.7071), ("rall", 0.6300)])
def test_symmetric_ratios_of_the_classic_laws(label, ratio):
    # Exact algebra: a symmetric bifurcation obeys r0^a = 2 r^a when r / r0 = 2^(-1/a), which rounds to
    # 0.7937 (a = 3), 0.7071 (a = 2) and 0.6300 (a = 3/2).
    a = next(law.value for law in CLASSIC_LAWS if law.label == label)
    assert round(2.0 ** (-1.0 / a), 4) == ratio
    # The package's per-junction exponent on a table built from the rounded ratios (several parent sizes,
    # in diameters, so scale and unit conversion are exercised): for two equal daughters the root of
    # 2 (r/r0)^a = 1 is ln 2 / ln(r0/r) (exact algebra), which the rounding moves by < 1e-3 relative.
    parent = np.array([0.5, 2.0, 7.5])
    geo = ab.junction_geometry(_symmetric_table(parent, parent * ratio, measure="diameter", unit="mm"))
    expected = math.log(2.0) / math.log(1.0 / ratio)
    np.testing.assert_allclose(geo["exponent"], expected, rtol=1e-9)
    np.testing.assert_allclose(geo["exponent"], a, rtol=1e-3)


# --------------------------------------------------------------------- Poiseuille flow + metabolic cost
ETA = 3.5e-3  # viscosity (Pa s); an illustrative blood-like value (from memory) -- the law does not depend on it
B_COST = 1.0e3  # metabolic cost per unit volume of vessel per unit time (W m^-3); illustrative
LENGTH = 1.0e-2  # segment length (m); illustrative, cancels from the optimum


def _cost(r: float, q: float) -> float:
    """Viscous power of Poiseuille flow, 8 eta L Q^2 / (pi r^4), plus the cost of the volume, b pi r^2 L
    (Murray 1926, PNAS 12:207)."""
    return 8 * ETA * LENGTH * q**2 / (math.pi * r**4) + B_COST * math.pi * r**2 * LENGTH


def _optimal_radius(q: float) -> float:
    """The radius minimising :func:`_cost` for flow ``q``, found numerically (scipy.optimize)."""
    res = optimize.minimize_scalar(
        lambda x: _cost(math.exp(x), q),
        bounds=(math.log(1e-7), math.log(1.0)),
        method="bounded",
        options={"xatol": 1e-12},
    )
    assert res.success
    return math.exp(res.x)


def test_poiseuille_optimum_gives_flow_proportional_to_radius_cubed():
    flows = np.geomspace(1e-12, 1e-5, 8)  # m^3/s, capillary to arteriolar scale
    radii = np.array([_optimal_radius(q) for q in flows])
    # Exact algebra: d cost / dr = 0 gives r^6 = 16 eta Q^2 / (pi^2 b), i.e. Q = (pi/4) sqrt(b/eta) r^3.
    np.testing.assert_allclose(flows / radii**3, math.pi / 4 * math.sqrt(B_COST / ETA), rtol=1e-6)
    slope = np.polyfit(np.log(radii), np.log(flows), 1)[0]  # numpy least squares on the log scale
    assert slope == pytest.approx(3.0, abs=1e-6)


@pytest.mark.parametrize("share", [0.5, 0.3])
def test_optimal_radii_at_a_junction_give_exponent_three(share):
    # Flow is conserved at a junction (Q0 = Q1 + Q2); with each segment at its own optimal radius,
    # Q ~ r^3 makes r0^3 = r1^3 + r2^3 (Murray 1926), for symmetric (share 0.5) and asymmetric splits.
    q0 = np.array([1e-10, 1e-8, 1e-6])
    frame = pd.DataFrame(
        {
            "p": [_optimal_radius(q) for q in q0],
            "d1": [_optimal_radius(q * share) for q in q0],
            "d2": [_optimal_radius(q * (1 - share)) for q in q0],
        }
    )
    table = ab.read_junctions(frame, parent="p", daughters=["d1", "d2"], unit="m")
    np.testing.assert_allclose(ab.junction_geometry(table)["exponent"], 3.0, rtol=1e-6)


# ------------------------------------------------------------------- a published symmetric airway model
#: Airway diameters (cm) of generations 0-6 in Weibel's regular dichotomy model, read from the shared table
#: tests/data/airway_generations.csv (also used by tests/test_networks_generations.py), whose header names the
#: source: Weibel 1963 as tabulated in Tu, Inthavong & Ahmadi, Computational Fluid and Particle Dynamics in
#: the Human Respiratory System, Table 3.2 (values and citation from memory, to be confirmed against it).
AIRWAY_DIAMETERS_CM = pd.read_csv(Path(__file__).parent / "data" / "airway_generations.csv", comment="#")[
    "diameter_cm"
].to_numpy()[:7]


def test_airway_generation_steps_imply_their_exponents():
    d = AIRWAY_DIAMETERS_CM
    # Exact algebra: a symmetric dichotomy from d_z to two daughters d_{z+1} obeys d_z^a = 2 d_{z+1}^a
    # when a = ln 2 / ln(d_z / d_{z+1}) (computed here with numpy, independently of the package):
    implied = np.log(2.0) / np.log(d[:-1] / d[1:])
    # steps 0->1, 1->2, 2->3: 1.7822, 1.7995, 1.7615 (about 1.8); steps 3->4, 4->5, 5->6: 3.1696, 2.7581,
    # 3.1063 (between 2.75 and 3.2) -- the table's large airways branch close to area preservation, the
    # smaller ones close to the cube law.
    np.testing.assert_allclose(implied, [1.7822, 1.7995, 1.7615, 3.1696, 2.7581, 3.1063], atol=5e-5)
    # The package's per-junction exponent on junctions built from consecutive generations (parent d_z,
    # two daughters d_{z+1}), read as diameters in cm, equals them.
    geo = ab.junction_geometry(_symmetric_table(d[:-1], d[1:], measure="diameter", unit="cm"))
    assert geo["no_root_reason"].isna().all()
    np.testing.assert_allclose(geo["exponent"], implied, rtol=1e-9)


# ------------------------------------------------------------------------------ the verdict thresholds
def test_bayes_factor_thresholds_follow_the_published_scales():
    # Kass & Raftery 1995, JASA 90:773, Section 3.2: a Bayes factor of 3 to 20 (2 ln B from 2 to 6) is
    # "positive" evidence; below 3 it is "not worth more than a bare mention" (scale from memory).
    assert vm.BF_DECLARE == 3.0
    assert 2 * math.log(vm.BF_DECLARE) == pytest.approx(2.197, abs=1e-3)  # just above K&R's 2 ln B = 2
    # Jeffreys' scale as quoted by Kass & Raftery 1995: log10 B between 1 and 2 is "strong" evidence (from
    # memory). A 'none' verdict needs every law at B <= 1/10, i.e. log10 B <= -1: strong evidence against.
    assert np.log10(1.0 / vm.BF_REJECT) == pytest.approx(1.0, abs=1e-12)
    # and the rule reads these constants at their boundaries (exact: B = 3 qualifies, just below does not)
    assert vm.law_failures(_law_row(bf=3.0)) == []
    assert vm.law_failures(_law_row(bf=2.99)) != []
    assert vm.law_rejected(_law_row(p_rope=0.0, bf=0.1)) and not vm.law_rejected(
        _law_row(p_rope=0.0, bf=0.11)
    )


def test_loo_rule_is_the_common_practice():
    # ELPD differences below about 4, or below about 2 standard errors of the difference, are treated as
    # noise (common practice, no single source): a law is "clearly worse" only beyond both.
    assert (vm.LOO_CLEAR_ELPD, vm.LOO_CLEAR_SE) == (4.0, 2.0)
    assert [f for f in vm.law_failures(_law_row(elpd_diff=4.01, dse=2.0)) if "LOO" in f]
    for diff, dse in ((4.0, 1.0), (6.0, 3.0)):  # a loss of exactly 4, or of exactly 2 SE: not clearly worse
        assert vm.law_failures(_law_row(elpd_diff=diff, dse=dse)) == []


def _law_row(p_rope: float = 0.95, bf: float = 10.0, elpd_diff: float = 0.0, dse: float = 0.0) -> pd.Series:
    """One law's evidence with the same Bayes factor under every prior."""
    log10_bf = math.log10(bf)
    return pd.Series(
        {
            "law": "murray",
            "p_rope": p_rope,
            "log10_bf": log10_bf,
            "log10_bf_narrow": log10_bf,
            "log10_bf_wide": log10_bf,
            "elpd_diff": elpd_diff,
            "dse": dse,
        }
    )


# ------------------------------------------------- the sampler's posterior against an independent one
#: Settings of the one-specimen table (no hierarchy: the exponent is mu itself).
GRID_TRUTH, GRID_ERROR, GRID_JUNCTIONS = 2.7, 0.08, 30


def _junction_moments(
    a: np.ndarray, y: np.ndarray, s2: float, asym_var: float
) -> tuple[np.ndarray, np.ndarray]:
    """Second-order predictive mean and variance of the log parent, for every exponent in ``a``.

    Written from the model's definition (allobranch/model/kernel.py module docstring), with numpy:
    true log daughters ``u`` have a flat common level and normal deviations from it of variance ``asym_var``
    (``sigma_asym^2``, a variance, not an SD), readings are ``u`` plus normal error of variance ``s2``; the
    posterior of ``u`` has precision ``diag(1/s2) + (I - 11'/k)/asym_var``
    (inverted here explicitly) and mean ``Sigma y / s2``. The law ``m(u) = logsumexp(a u) / a`` has gradient
    ``w = softmax(a u)`` and Hessian ``a (diag w - w w')`` (calculus), so
    ``E[m] = m(mu) + tr(H Sigma) / 2`` and ``Var[m] = w' Sigma w``.
    """
    k = y.shape[1]
    precision = np.eye(k) / s2 + (np.eye(k) - np.ones((k, k)) / k) / asym_var
    sigma = np.linalg.inv(precision)
    mean_u = y @ (sigma / s2).T  # (junctions, k); sigma is symmetric
    au = a[:, None, None] * mean_u[None]  # (grid, junctions, k)
    w = softmax(au, axis=-1)
    law = logsumexp(au, axis=-1) / a[:, None]
    w_sigma_w = np.einsum("gjk,kl,gjl->gj", w, sigma, w)
    half_trace = 0.5 * a[:, None] * (np.einsum("gjk,k->gj", w, np.diag(sigma)) - w_sigma_w)
    return law + half_trace, w_sigma_w


def _grid_log_posterior(a, sdev, y0, y, s2, asym_var):
    """Log posterior of (a, sigma_dev) on a grid, up to a constant: priors a ~ Normal(2.5, 1) and
    sigma_dev ~ HalfNormal(0.1) (allobranch/model/build.py, Priors defaults), parent readings
    log y0 ~ Normal(E[m], sigma_dev^2 + s2 + Var[m]) (scipy.stats). The daughters' contrast density does not
    involve a or sigma_dev when the asymmetry scale is fixed, so it drops out. (The package adds a 1e-8
    floor to every measurement variance; against s2 = 0.0064 it is negligible.)"""
    mean, var_m = _junction_moments(a, y, s2, asym_var)
    scale = np.sqrt(sdev[None, None, :] ** 2 + s2 + var_m[:, :, None])
    loglik = stats.norm.logpdf(y0[None, :, None], mean[:, :, None], scale).sum(axis=1)
    return loglik + stats.norm.logpdf(a, 2.5, 1.0)[:, None] + stats.halfnorm.logpdf(sdev, scale=0.1)[None, :]


def _grid_moments(a, sdev, logpost):
    """Posterior mean and SD of the exponent by trapezoidal integration (numpy) of the grid."""
    dens = np.exp(logpost - logpost.max())
    marginal = np.trapezoid(dens, sdev, axis=1)
    marginal /= np.trapezoid(marginal, a)
    mean = np.trapezoid(a * marginal, a)
    return mean, math.sqrt(np.trapezoid((a - mean) ** 2 * marginal, a))


@pytest.mark.parametrize("seed", [1, 3])
def test_sampled_posterior_equals_grid_integration(seed):
    sim = ab.simulate_junctions(
        taxa=1,
        specimens_per_taxon=1,
        junctions_per_specimen=GRID_JUNCTIONS,
        rel_error=GRID_ERROR,
        taxon_exponents={"T1": GRID_TRUTH},
        tau_specimen=0.0,
        seed=seed,
    )
    table = ab.read_junctions(sim.frame, sim.mapping)
    result = ab.fit(table, draws=1000, tune=1000, chains=4, seed=seed, progress=False)
    asym_var = (
        result.settings["sigma_asym_empirical"]["T1"] ** 2
    )  # the fitted (fixed) asymmetry scale, squared
    y0 = np.log(sim.frame["parent"].to_numpy())
    y = np.log(sim.frame[["d1", "d2"]].to_numpy())
    s2 = GRID_ERROR**2
    # a coarse grid locates the posterior, a fine one (+/- 8 SD, 601 x 501 points) integrates it
    sdev = np.linspace(0.0, 0.5, 501)  # HalfNormal(0.1) leaves < 1e-6 of its mass beyond 0.5
    coarse = np.linspace(0.5, 6.0, 221)
    m0, sd0 = _grid_moments(coarse, sdev, _grid_log_posterior(coarse, sdev, y0, y, s2, asym_var))
    a = np.linspace(m0 - 8 * sd0, m0 + 8 * sd0, 601)
    grid_mean, grid_sd = _grid_moments(a, sdev, _grid_log_posterior(a, sdev, y0, y, s2, asym_var))

    row = result.exponents().set_index("level").loc["population"]
    draws = result.idata.posterior["mu"].values
    # Monte Carlo standard errors (ArviZ): of the mean directly; of the SD by the delta method from the
    # MCSE of the mean of (x - mean)^2, since az.mcse(method="sd") fails with numpy 2.4 in this ArviZ.
    mcse_mean = np.asarray(az.mcse(draws)).item()
    mcse_sd = np.asarray(az.mcse((draws - draws.mean()) ** 2)).item() / (2 * draws.std())
    # 4 MCSE plus the grid's own error (the trapezoid rule on this grid is accurate to far below 1e-3)
    assert abs(row["mean"] - grid_mean) < 4 * mcse_mean + 1e-3, (row["mean"], grid_mean, mcse_mean)
    assert abs(row["sd"] - grid_sd) < 4 * mcse_sd + 1e-3, (row["sd"], grid_sd, mcse_sd)
    # the comparison has teeth: the posterior is far narrower than the prior and the MCSE is small
    assert grid_sd < 0.35 and mcse_mean < 0.02


@pytest.mark.parametrize("n_draws", [400, 2500])
def test_pareto_k_threshold_is_the_published_one(n_draws):
    # Pareto-smoothed importance sampling is reliable for Pareto k below min(1 - 1/log10(S), 0.7) with S
    # draws (Vehtari, Simpson, Gelman, Yao & Gabry 2024, JMLR 25(72); formula from memory): 0.656 for 800
    # draws, 0.7 from about 2,200 on. LOO junctions above it are the ones the comparison reports.
    from allobranch.comparison import loo as loom

    rng = np.random.default_rng(0)
    fits = {
        label: az.from_dict(
            posterior={"mu": rng.normal(size=(2, n_draws))},
            log_likelihood={"loglik": rng.normal(-1 + shift, 0.3, size=(2, n_draws, 6))},
        )
        for label, shift in (("free", 0.0), ("murray", -0.2))
    }
    got = loom.compare_loo(fits)
    assert got.k_threshold == pytest.approx(min(1 - 1 / math.log10(2 * n_draws), 0.7), abs=1e-12)
