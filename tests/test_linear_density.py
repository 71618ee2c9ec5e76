"""The whitened density with covariates, traits and a phylogeny, checked against the model written directly.

The whitened coordinates are a change of variables of the natural parameters (exponents, slopes, spreads).
So, exactly (change-of-variables formula), at every point ``x``:

    log p_white(x) = log p_natural(y(x)) + log |det dy/dx| + constant

where ``log p_natural`` is written here independently, with scipy.stats densities for every prior and the
multivariate normal of the taxa, and the junction likelihood at each junction's exponent
``a_specimen + x_j . beta_taxon``. The Jacobian is taken by central finite differences of the stored values.
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy import stats
from scipy.optimize import approx_fprime

import allobranch as ab
from allobranch.model import density as D
from allobranch.model import kernel
from allobranch.model.asymmetry import estimate_sigma_asym
from allobranch.model.data import model_data
from allobranch.model.linear import LinearTerms, slope_prior_scales
from allobranch.model.structure import data_arrays


@pytest.fixture(scope="module")
def setting():
    sim = ab.simulate_junctions(taxa=4, specimens_per_taxon=2, junctions_per_specimen=10, seed=8)
    data = model_data(ab.read_junctions(sim.frame, sim.mapping))
    arrays = data_arrays(data, "fast", estimate_sigma_asym(data, data.rel_error))
    return data, arrays


def _tree_correlation(nt: int) -> np.ndarray:
    # A small ultrametric tree ((0,1),(2,3)) of unit height, inner edges 0.6: shared path lengths.
    C = np.eye(nt)
    C[0, 1] = C[1, 0] = C[2, 3] = C[3, 2] = 0.6
    return C


def _linear(
    data, p: int, q: int, by_taxon: bool, phylo: bool, seed: int = 0, pagel_lambda: float | None = None
) -> LinearTerms:
    rng = np.random.default_rng(seed)
    n, nt = data.n_junctions, len(data.taxa)
    X = rng.normal(size=(n, p))
    X -= X.mean(axis=0)
    Gm = rng.normal(size=(nt, q))
    Gm -= Gm.mean(axis=0)
    bsd, tbs = slope_prior_scales(X)
    gsd, _ = slope_prior_scales(Gm)
    vals, vecs = np.linalg.eigh(_tree_correlation(nt)) if phylo else (None, None)
    return LinearTerms(
        covariates=X,
        covariate_names=[f"x{k}" for k in range(p)],
        covariate_ref=np.zeros(p),
        by_taxon=by_taxon,
        traits=Gm,
        trait_names=[f"g{m}" for m in range(q)],
        trait_ref=np.zeros(q),
        eig_vectors=vecs,
        eig_values=vals,
        pagel_lambda=pagel_lambda,
        beta_sd=bsd,
        tau_beta_scale=tbs,
        gamma_sd=gsd,
    )


def _pack(data, arrays, lin, *, fixed_exponent=None, pilot=None, student=False):
    ns, nt = len(data.specimens), len(data.taxa)
    mu_free = fixed_exponent is None
    if pilot is None:
        rng = np.random.default_rng(3)
        pilot = (2.7 + 0.1 * rng.standard_normal(ns), rng.uniform(20, 200, ns))
    return D.pack(
        arrays,
        specimen_taxon_idx=data.specimen_taxon_idx,
        n_taxa=nt,
        taxon_level=mu_free,
        specimen_level=mu_free,
        student=student,
        priors=ab.ModelSpec().priors,
        fixed_exponent=fixed_exponent,
        fixed_taxa_mask=np.zeros(nt, bool),
        fixed_taxa_values=np.zeros(nt),
        w_taxon=np.ones(nt),
        w_specimen=np.ones(ns),
        whiten=pilot,
        linear=lin,
    )


def _natural_vector(dens, x: np.ndarray) -> np.ndarray:
    """The natural parameters at ``x``: what the whitened coordinates stand for, in the same order."""
    lay = dens.layout
    vals = dens.expand(x)
    pos = dict(zip(lay.names, lay.slices))
    y = x.copy()
    if "mu_z" in pos:
        y[pos["mu_z"]] = vals["mu"]
    if "r_taxon" in pos:
        y[pos["r_taxon"]] = vals["a_taxon"]
    if "r_specimen" in pos:
        y[pos["r_specimen"]] = vals["a_specimen"]
    return y


def _natural_logp(dens, data, arrays, lin, y: np.ndarray, fixed_exponent=None) -> float:
    """log p of the model written out directly with scipy.stats, at natural parameters ``y``."""
    pr = ab.ModelSpec().priors
    lay = dens.layout
    pos = dict(zip(lay.names, lay.slices))
    nt = len(data.taxa)
    lp = 0.0
    mu = y[pos["mu_z"]][0] if "mu_z" in pos else fixed_exponent
    if "mu_z" in pos:
        lp += stats.norm.logpdf(mu, pr.mu_mean, pr.mu_sd)
    gamma = y[pos["gamma"]] if "gamma" in pos else np.zeros(0)
    lp += stats.norm.logpdf(gamma, 0, lin.gamma_sd).sum()
    beta = y[pos["beta"]] if "beta" in pos else np.zeros(0)
    lp += stats.norm.logpdf(beta, 0, lin.beta_sd).sum()
    beta_t = np.tile(beta, (nt, 1))
    if "tau_beta_log__" in pos:
        ltb = y[pos["tau_beta_log__"]]
        lp += (stats.halfnorm.logpdf(np.exp(ltb), scale=lin.tau_beta_scale) + ltb).sum()
        z = y[pos["z_beta_taxon"]].reshape(nt, -1)
        lp += stats.norm.logpdf(z).sum()
        beta_t = beta + np.exp(ltb) * z
    a_t = mu + lin.traits @ gamma if lin.q else np.full(nt, mu)
    if "r_taxon" in pos:
        lt = y[pos["tau_taxon_log__"]][0]
        lp += stats.halfnorm.logpdf(np.exp(lt), scale=pr.tau_taxon) + lt
        cov = np.eye(nt)
        if "lambda_logit__" in pos:
            eta = y[pos["lambda_logit__"]][0]
            lam = 1 / (1 + np.exp(-eta))
            lp += stats.uniform.logpdf(lam) + np.log(lam * (1 - lam))  # uniform prior, logit Jacobian
            C = lin.eig_vectors @ np.diag(lin.eig_values) @ lin.eig_vectors.T
            cov = lam * C + (1 - lam) * np.eye(nt)
        elif lin.phylo:  # lambda fixed: no prior term, the given value
            C = lin.eig_vectors @ np.diag(lin.eig_values) @ lin.eig_vectors.T
            cov = lin.pagel_lambda * C + (1 - lin.pagel_lambda) * np.eye(nt)
        a_taxon = y[pos["r_taxon"]]
        lp += stats.multivariate_normal.logpdf(a_taxon, a_t, np.exp(2 * lt) * cov)
        a_t = a_taxon
    a_s = a_t[data.specimen_taxon_idx]
    if "r_specimen" in pos:
        ls = y[pos["tau_specimen_log__"]][0]
        lp += stats.halfnorm.logpdf(np.exp(ls), scale=pr.tau_specimen) + ls
        a_spec = y[pos["r_specimen"]]
        lp += stats.norm.logpdf(a_spec, a_s, np.exp(ls)).sum()
        a_s = a_spec
    lsd = y[pos["sigma_dev_log__"]][0]
    lp += stats.halfnorm.logpdf(np.exp(lsd), scale=pr.sigma_dev) + lsd
    a_j = a_s[data.specimen_idx] + np.einsum(
        "jk,jk->j", lin.covariates, beta_t[data.taxon_idx] if lin.p else np.zeros((data.n_junctions, 0))
    )
    A = arrays
    ll, _, _, _ = kernel.fast_terms(
        A["log_parent_obs"],
        A["mu_post"],
        A["g_post"],
        A["c_post"],
        A["ybar"],
        A["daughter_mask"],
        A["s0sq"],
        A["ll_daughters"],
        a_j,
        float(np.exp(lsd)),
        30.0,
        False,
    )
    return lp + ll.sum()


def _log_jacobian(dens, x: np.ndarray, h: float = 1e-6) -> float:
    J = np.empty((x.size, x.size))
    for i in range(x.size):
        e = np.zeros_like(x)
        e[i] = h
        J[:, i] = (_natural_vector(dens, x + e) - _natural_vector(dens, x - e)) / (2 * h)
    return float(np.linalg.slogdet(J)[1])


CASES = {
    "covariate": dict(p=1, q=0, by_taxon=False, phylo=False),
    "two covariates by taxon": dict(p=2, q=0, by_taxon=True, phylo=False),
    "trait": dict(p=0, q=1, by_taxon=False, phylo=False),
    "tree": dict(p=0, q=0, by_taxon=False, phylo=True),
    "tree, trait and covariate": dict(p=1, q=1, by_taxon=False, phylo=True),
    "tree with lambda fixed at 0.7": dict(p=0, q=0, by_taxon=False, phylo=True, pagel_lambda=0.7),
    "tree with lambda fixed at 1 and a covariate": dict(
        p=1, q=0, by_taxon=False, phylo=True, pagel_lambda=1.0
    ),
    "tree, trait and two covariates by taxon": dict(p=2, q=1, by_taxon=True, phylo=True),
}


#: Every case, and the tree cases both with the exact conditional of the taxon deviations and with its
#: diagonal approximation (the path above ``TREE_EXACT_MAX_TAXA`` taxa).
PATHS = [(c, "exact") for c in CASES] + [(c, "diagonal") for c, k in CASES.items() if k["phylo"]]


@pytest.fixture
def tree_path(request, monkeypatch):
    if request.param == "diagonal":
        monkeypatch.setattr(D, "TREE_EXACT_MAX_TAXA", 0)
    return request.param


@pytest.mark.parametrize(("case", "tree_path"), PATHS, indirect=["tree_path"])
def test_whitened_density_is_the_model_after_a_change_of_variables(setting, case, tree_path) -> None:
    data, arrays = setting
    lin = _linear(data, **CASES[case])
    dens = _pack(data, arrays, lin)
    rng = np.random.default_rng(1)
    diffs = []
    for _ in range(3):
        x = 0.5 * rng.standard_normal(dens.layout.ndim)
        x[dens.layout.slices[dens.layout.names.index("sigma_dev_log__")]] = np.log(0.05)
        lp, _ = dens.logp(x)
        nat = _natural_logp(dens, data, arrays, lin, _natural_vector(dens, x))
        diffs.append(lp - nat - _log_jacobian(dens, x))
    # the same constant at every point (normalising constants may be dropped), to finite-difference accuracy
    assert np.ptp(diffs) < 1e-5, diffs


@pytest.mark.parametrize(("case", "tree_path"), PATHS, indirect=["tree_path"])
def test_whitened_gradient_matches_finite_differences(setting, case, tree_path) -> None:
    # Reference: scipy.optimize.approx_fprime (forward differences) of the same compiled log density.
    data, arrays = setting
    lin = _linear(data, **CASES[case])
    dens = _pack(data, arrays, lin, student=True)
    x = 0.3 * np.random.default_rng(2).standard_normal(dens.layout.ndim)
    _, grad = dens.logp(x)
    fd = approx_fprime(x, lambda v: dens.logp(v)[0], 1e-7)
    np.testing.assert_allclose(grad, fd, rtol=1e-4, atol=1e-4 * (1 + np.abs(fd).max()))


def test_fixed_exponent_with_a_covariate_keeps_the_slope_free(setting) -> None:
    # A law fit with a covariate: the exponent at the reference value is pinned, the slope is not.
    data, arrays = setting
    lin = _linear(data, p=1, q=0, by_taxon=False, phylo=False)
    dens = _pack(data, arrays, lin, fixed_exponent=3.0)
    assert dens.layout.names == ["beta", "sigma_dev_log__"]
    x = np.array([0.2, np.log(0.05)])
    vals = dens.expand(x)
    assert vals["mu"] == 3.0 and np.all(vals["a_specimen"] == 3.0) and vals["beta"][0] == 0.2
    nat = _natural_logp(dens, data, arrays, lin, x, fixed_exponent=3.0)
    lp, _ = dens.logp(x)
    lp2, _ = dens.logp(x + np.array([0.1, 0.0]))
    nat2 = _natural_logp(dens, data, arrays, lin, x + np.array([0.1, 0.0]), fixed_exponent=3.0)
    np.testing.assert_allclose(lp - nat, lp2 - nat2, atol=1e-8)


def test_the_exact_tree_conditional_is_used_up_to_the_threshold(setting, monkeypatch) -> None:
    # The header bit that selects the exact conditional follows TREE_EXACT_MAX_TAXA; both paths are the
    # same model (the change-of-variables test above checks each against scipy), so their log densities
    # differ only through the coordinates: at the same natural parameters they agree.
    data, arrays = setting
    lin = _linear(data, p=0, q=0, by_taxon=False, phylo=True)
    exact = _pack(data, arrays, lin)
    monkeypatch.setattr(D, "TREE_EXACT_MAX_TAXA", 0)
    diag = _pack(data, arrays, lin)
    assert exact.ints[D._PHYLO] & D.PHYLO_EXACT and not diag.ints[D._PHYLO] & D.PHYLO_EXACT
    assert exact.layout.names == diag.layout.names


def test_no_linear_terms_gives_the_same_density_as_before(setting) -> None:
    # An empty LinearTerms must leave the whitened hierarchy exactly as without it.
    data, arrays = setting
    empty = LinearTerms(covariates=np.zeros((data.n_junctions, 0)))
    a = _pack(data, arrays, None)
    b = _pack(data, arrays, empty)
    x = 0.4 * np.random.default_rng(5).standard_normal(a.layout.ndim)
    assert a.layout.names == b.layout.names
    np.testing.assert_allclose(a.logp(x)[0], b.logp(x)[0], rtol=1e-12)
