"""Model building: every form and option builds with the expected variables; the PyMC log density equals an
independent sum of scipy densities; the gradients PyTensor sees match finite differences; the spec rejects
invalid settings.

References: ``scipy.stats`` (prior and likelihood densities), ``scipy.special.logsumexp`` (the law),
``scipy.optimize.approx_fprime`` (gradients), exact algebra (the hierarchy and the chi-square law of
within-segment sums of squares of normal readings).
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd
import pytensor.tensor as pt
import pytest
from scipy import stats
from scipy.optimize import approx_fprime
from scipy.special import logsumexp

import allobranch as ab
from allobranch.model import kernel
from allobranch.model.build import A_FLOOR, build_model, model_form, resolve_levels
from allobranch.model.data import model_data
from allobranch.model.spec import ASYMMETRY, DEVIATIONS, LIKELIHOODS, PARAMETRIZATIONS, ModelSpec, Priors


# -- data ------------------------------------------------------------------------------------------------
def _table(seed: int = 0, **kwargs) -> ab.JunctionTable:
    """A small simulated junction table (3 taxa x 2 specimens x 15 junctions unless overridden)."""
    opts = {"taxa": 3, "specimens_per_taxon": 2, "junctions_per_specimen": 15, "seed": seed}
    sim = ab.simulate_junctions(**{**opts, **kwargs})
    return ab.read_junctions(sim.frame, sim.mapping)


@pytest.fixture(scope="module")
def data():
    """Model arrays of a small table with 30 % trifurcations and 5 % relative error."""
    return model_data(_table(seed=1, trifurcation_share=0.3))


def _repeat_table(tmp_path: Path, seed: int = 2) -> ab.JunctionTable:
    """A table without a stated error but with three repeat readings of some parents and daughters."""
    sim = ab.simulate_junctions(
        taxa=2, specimens_per_taxon=2, junctions_per_specimen=8, rel_error=0.05, seed=seed
    )
    main = tmp_path / "junctions.csv"
    sim.frame.to_csv(main, index=False)
    rng = np.random.default_rng(seed)
    rows = []
    for rec in sim.true_radii.head(10).itertuples():
        for segment in ("parent", "d1", "d2"):
            for _ in range(3):
                value = getattr(rec, segment) * np.exp(0.05 * rng.standard_normal())
                rows.append(
                    {"specimen": rec.specimen, "junction": rec.junction, "segment": segment, "value": value}
                )
    pd.DataFrame(rows).to_csv(tmp_path / "rep.csv", index=False)
    m = sim.mapping
    return ab.read_junctions(
        main,
        parent=m.parent,
        daughters=list(m.daughters),
        taxon="taxon",
        specimen="specimen",
        junction="junction",
        unit="mm",
        repeats="rep.csv",
    )


def _names(built) -> dict[str, set[str]]:
    m = built.model
    return {
        "free": {v.name for v in m.free_RVs},
        "deterministic": {v.name for v in m.deterministics},
        "potential": {v.name for v in m.potentials},
        "observed": {v.name for v in m.observed_RVs},
    }


# -- forms and options -----------------------------------------------------------------------------------------
HIERARCHY_NC = {"mu", "tau_taxon", "r_taxon", "tau_specimen", "r_specimen", "sigma_dev"}


def test_fast_form_variables(data) -> None:
    built = build_model(data, ModelSpec(parametrization="noncentered"))
    names = _names(built)
    assert built.form == "fast"
    assert names["free"] == HIERARCHY_NC
    assert names["deterministic"] == {"a_taxon", "a_specimen"}
    assert names["potential"] == {"junction_loglik"}
    assert names["observed"] == set()
    assert built.sigma_asym is not None and built.sigma_asym.shape == (len(data.taxa),)
    assert built.model.named_vars_to_dims["a_taxon"] == ("taxon",)
    assert built.model.named_vars_to_dims["a_specimen"] == ("specimen",)
    assert list(built.model.coords["specimen"]) == data.specimens


def test_full_form_samples_the_asymmetry(data) -> None:
    built = build_model(data, ModelSpec(asymmetry="sampled", parametrization="noncentered"))
    assert built.form == "full"
    assert _names(built)["free"] == HIERARCHY_NC | {"sigma_asym"}
    assert built.sigma_asym is None


def test_latent_form_has_every_true_daughter(data) -> None:
    built = build_model(data, ModelSpec(likelihood="latent", parametrization="noncentered"))
    names = _names(built)
    assert built.form == "latent"
    assert names["free"] == HIERARCHY_NC | {"sigma_asym", "u_daughters"}
    assert names["observed"] == {"log_daughters", "log_parent"}
    assert names["potential"] == {"asymmetry"}
    n_daughters = int(data.mask.sum())
    assert built.model.initial_point()["u_daughters"].shape == (n_daughters,)


@pytest.mark.parametrize(
    ("levels", "expected_free"),
    [
        ({"taxon_level": False, "specimen_level": False}, {"mu", "sigma_dev"}),
        ({"taxon_level": True, "specimen_level": False}, {"mu", "tau_taxon", "r_taxon", "sigma_dev"}),
        ({"taxon_level": False, "specimen_level": True}, {"mu", "tau_specimen", "r_specimen", "sigma_dev"}),
        ({}, HIERARCHY_NC),
    ],
    ids=["none", "taxon", "specimen", "auto"],
)
def test_hierarchy_levels(data, levels: dict, expected_free: set[str]) -> None:
    spec = ModelSpec(parametrization="noncentered", **levels)
    built = build_model(data, spec)
    assert _names(built)["free"] == expected_free
    assert resolve_levels(data, spec) == ("tau_taxon" in expected_free, "tau_specimen" in expected_free)


def test_automatic_levels_follow_the_design() -> None:
    one_taxon = model_data(_table(taxa=1, specimens_per_taxon=1, junctions_per_specimen=10))
    assert resolve_levels(one_taxon, ModelSpec()) == (False, False)
    assert _names(build_model(one_taxon))["free"] == {"mu", "sigma_dev"}


def test_fixed_exponent_fixes_every_junction(data) -> None:
    # A point law for the whole data set: no exponent is free at any level.
    built = build_model(data, ModelSpec(fixed_exponent=3.0, parametrization="noncentered"))
    names = _names(built)
    assert names["free"] == {"sigma_dev"}
    assert "mu" in names["deterministic"]
    m = built.model
    fn = m.compile_fn([m["mu"], m["a_taxon"], m["a_specimen"]], inputs=[], on_unused_input="ignore")
    mu, a_taxon, a_specimen = fn({})
    assert float(mu) == 3.0
    np.testing.assert_array_equal(a_taxon, 3.0)
    np.testing.assert_array_equal(a_specimen, 3.0)


def test_fixed_taxa_fix_only_the_named_taxa(data) -> None:
    built = build_model(data, ModelSpec(fixed_taxa={"T2": 2.0}, parametrization="noncentered"))
    model = built.model
    (a_taxon_values,) = model.replace_rvs_by_values([model["a_taxon"]])
    fn = model.compile_fn(a_taxon_values, inputs=model.value_vars, on_unused_input="ignore")
    point = model.initial_point()
    point["r_taxon"] = np.array([1.0, -1.0, 0.5])
    a_taxon = fn(point)
    assert a_taxon[1] == 2.0
    tau = np.exp(point["tau_taxon_log__"])
    np.testing.assert_allclose(a_taxon[[0, 2]], point["mu"] + tau * np.array([1.0, 0.5]))  # exact algebra
    # the fixed taxon's specimens are pinned to the law as well; the others vary
    (a_specimen_values,) = model.replace_rvs_by_values([model["a_specimen"]])
    point["r_specimen"] = np.linspace(-1.0, 1.0, len(point["r_specimen"]))
    a_specimen = model.compile_fn(a_specimen_values, inputs=model.value_vars, on_unused_input="ignore")(point)
    in_t2 = data.specimen_taxon_idx == 1
    np.testing.assert_array_equal(a_specimen[in_t2], 2.0)
    assert np.all(a_specimen[~in_t2] != 2.0)


def test_fixed_taxa_must_name_known_taxa(data) -> None:
    with pytest.raises(ValueError, match="unknown taxa"):
        build_model(data, ModelSpec(fixed_taxa={"nope": 2.0}))


def test_student_t_adds_degrees_of_freedom(data) -> None:
    built = build_model(data, ModelSpec(deviation="student_t", parametrization="noncentered"))
    assert _names(built)["free"] == HIERARCHY_NC | {"nu"}
    assert built.student


def test_repeat_readings_estimate_the_measurement_error(tmp_path: Path) -> None:
    table = _repeat_table(tmp_path)
    d = model_data(table)
    assert d.error_mode == "repeats" and d.rel_error is None
    assert d.repeat_df == 10 * 3 * 2  # ten junctions, three segments, three readings each: 2 df per segment
    built = build_model(d, ModelSpec(parametrization="noncentered"))
    names = _names(built)
    assert built.form == "full"
    assert names["free"] == HIERARCHY_NC | {"rel_error", "sigma_asym"}
    assert names["potential"] == {"junction_loglik", "repeat_readings"}


def test_absolute_error_only_uses_the_fast_form() -> None:
    table = _table(
        taxa=2,
        specimens_per_taxon=2,
        junctions_per_specimen=10,
        rel_error=0.0,
        abs_error=0.01,
        parent_range=(0.5, 2.0),
    )
    d = model_data(table)
    assert d.error_mode == "absolute_only" and d.rel_error == 0.0
    # (se / y)^2 is the log-scale variance of each reading (delta method).
    np.testing.assert_allclose(d.var_abs_parent, (0.01 / table.parent) ** 2)
    built = build_model(d, ModelSpec(parametrization="noncentered"))
    assert built.form == "fast"
    assert _names(built)["free"] == HIERARCHY_NC
    assert "rel_error" not in _names(built)["free"]


def test_no_error_information_estimates_sigma_meas_from_its_prior() -> None:
    table = _table(taxa=2, specimens_per_taxon=1, junctions_per_specimen=10, rel_error=0.0)
    d = model_data(table)
    assert d.error_mode == "unknown"
    built = build_model(d)
    assert built.form == "full" and "rel_error" in _names(built)["free"]


def test_auto_parametrization_weights_follow_information() -> None:
    # Partial centring (Papaspiliopoulos, Roberts & Skold 2007): a group's weight tau^2 / (tau^2 + s^2) grows
    # as its own data pin it down, so 1 % error must give larger weights than 20 % error on the same design.
    from allobranch.model.structure import group_layout

    sharp = group_layout(model_data(_table(rel_error=0.01)), ModelSpec())
    blurred = group_layout(model_data(_table(rel_error=0.20)), ModelSpec())
    assert np.median(sharp.pilot.w_specimen) > np.median(blurred.pilot.w_specimen) + 0.2
    assert np.all(sharp.pilot.sd_specimen < blurred.pilot.sd_specimen)
    assert sharp.whiten and blurred.whiten  # auto samples the whitened hierarchy on the fast route
    # explicit choices give the extremes at every free group, and the PyMC model has the raw variables
    assert np.all(group_layout(model_data(_table()), ModelSpec(parametrization="centered")).w_specimen == 1.0)
    nc = _names(build_model(model_data(_table()), ModelSpec(parametrization="noncentered")))
    assert {"r_taxon", "r_specimen"} <= nc["free"]


def test_model_form_choice(data) -> None:
    assert model_form(data, ModelSpec()) == "fast"
    assert model_form(data, ModelSpec(asymmetry="sampled")) == "full"
    assert model_form(data, ModelSpec(likelihood="latent")) == "latent"


# -- the log density against scipy -------------------------------------------------------------------------------
def _value_point(model, natural: dict[str, np.ndarray]) -> dict[str, np.ndarray]:
    """Map natural-scale values of the free variables to the model's (transformed) value variables."""
    out = {}
    for rv in model.free_RVs:
        value = np.asarray(natural[rv.name], dtype=float)
        vv = model.rvs_to_values[rv]
        tr = model.rvs_to_transforms.get(rv)
        out[vv.name] = value if tr is None else tr.forward(pt.as_tensor_variable(value)).eval()
    return out


def _hierarchy_point(data, rng: np.random.Generator) -> dict[str, np.ndarray]:
    return {
        "mu": 2.6,
        "tau_taxon": 0.3,
        "r_taxon": rng.standard_normal(len(data.taxa)),
        "tau_specimen": 0.12,
        "r_specimen": rng.standard_normal(len(data.specimens)),
        "sigma_dev": 0.05,
        "sigma_asym": 0.22,
        "nu": 7.0,
        "rel_error": 0.06,
    }


def _specimen_exponents(data, p: dict) -> np.ndarray:
    """Exact algebra of the non-centred hierarchy."""
    a_taxon = p["mu"] + p["tau_taxon"] * p["r_taxon"]
    return a_taxon[data.specimen_taxon_idx] + p["tau_specimen"] * p["r_specimen"]


def _prior_logp(p: dict, priors: Priors, extra: tuple[str, ...] = ()) -> float:
    """Log prior density of the hierarchy (scipy.stats), plus the optional scale parameters in ``extra``."""
    total = (
        stats.norm.logpdf(p["mu"], priors.mu_mean, priors.mu_sd)
        + stats.halfnorm.logpdf(p["tau_taxon"], scale=priors.tau_taxon)
        + stats.norm.logpdf(p["r_taxon"]).sum()
        + stats.halfnorm.logpdf(p["tau_specimen"], scale=priors.tau_specimen)
        + stats.norm.logpdf(p["r_specimen"]).sum()
        + stats.halfnorm.logpdf(p["sigma_dev"], scale=priors.sigma_dev)
    )
    if "sigma_asym" in extra:
        total += stats.halfnorm.logpdf(p["sigma_asym"], scale=priors.sigma_asym)
    if "rel_error" in extra:
        total += stats.halfnorm.logpdf(p["rel_error"], scale=priors.rel_error)
    if "nu" in extra:
        total += stats.gamma.logpdf(p["nu"], a=priors.nu_alpha, scale=1.0 / priors.nu_beta)
    return float(total)


@pytest.mark.parametrize("deviation", DEVIATIONS)
def test_fast_logp_is_pointwise_plus_priors(data, deviation: str) -> None:
    # Reference: scipy.stats densities of the priors (normal, half-normal, gamma) plus the junction
    # log-likelihoods of BuiltModel.pointwise (themselves checked against scipy in test_kernel.py).
    priors = Priors(mu_mean=2.4, mu_sd=0.8, tau_taxon=0.4, tau_specimen=0.2, sigma_dev=0.08)
    spec = ModelSpec(parametrization="noncentered", deviation=deviation, priors=priors)
    built = build_model(data, spec)
    rng = np.random.default_rng(3)
    p = _hierarchy_point(data, rng)
    student = deviation == "student_t"
    logp = built.model.compile_logp(jacobian=False)(_value_point(built.model, p))
    ll, _, _ = built.pointwise(_specimen_exponents(data, p), p["sigma_dev"], nu=p["nu"])
    expected = ll.sum() + _prior_logp(p, priors, ("nu",) if student else ())
    np.testing.assert_allclose(logp, expected, rtol=1e-10)


def test_full_logp_is_pointwise_plus_priors(data) -> None:
    # Reference: scipy.stats prior densities plus pointwise junction log-likelihoods at the sampled
    # asymmetry scale.
    spec = ModelSpec(parametrization="noncentered", asymmetry="sampled")
    built = build_model(data, spec)
    p = _hierarchy_point(data, np.random.default_rng(4))
    logp = built.model.compile_logp(jacobian=False)(_value_point(built.model, p))
    ll, _, _ = built.pointwise(_specimen_exponents(data, p), p["sigma_dev"], sigma_asym=p["sigma_asym"])
    expected = ll.sum() + _prior_logp(p, spec.priors, ("sigma_asym",))
    np.testing.assert_allclose(logp, expected, rtol=1e-10)


def test_repeat_readings_term_is_the_chi_square_density(tmp_path: Path) -> None:
    # Reference: for normal log readings, the within-segment sum of squares SS satisfies
    # SS / sigma^2 ~ chi2(df) (exact algebra), so its density is scipy.stats.chi2.pdf(SS / sigma^2, df) /
    # sigma^2. The model keeps this up to a sigma-free constant: compare differences between two points.
    table = _repeat_table(tmp_path)
    d = model_data(table)
    built = build_model(d, ModelSpec(parametrization="noncentered"))
    rep = table.repeats.assign(logv=np.log(table.repeats["value"]))
    grouped = rep.groupby(["specimen", "junction", "segment"])["logv"]
    ss = float(grouped.apply(lambda s: ((s - s.mean()) ** 2).sum()).sum())
    df = float((grouped.size() - 1).sum())
    logp_fn = built.model.compile_logp(jacobian=False)

    def reference(p: dict) -> float:
        ll, _, _ = built.pointwise(
            _specimen_exponents(d, p), p["sigma_dev"], rel_error=p["rel_error"], sigma_asym=p["sigma_asym"]
        )
        s = p["rel_error"]
        chi2 = stats.chi2.logpdf(ss / s**2, df) - np.log(s**2)
        return ll.sum() + chi2 + _prior_logp(p, built.spec.priors, ("sigma_asym", "rel_error"))

    p1 = _hierarchy_point(d, np.random.default_rng(5))
    p2 = {**p1, "rel_error": 0.03, "mu": 2.4, "sigma_asym": 0.3}
    got = logp_fn(_value_point(built.model, p1)) - logp_fn(_value_point(built.model, p2))
    np.testing.assert_allclose(got, reference(p1) - reference(p2), rtol=1e-9)


def test_latent_logp_matches_scipy_densities(data) -> None:
    # Reference: scipy.stats densities of every term of the textbook latent form, with the law by
    # scipy.special.logsumexp. The asymmetry prior is the (k-1)-dimensional normal density of each
    # junction's contrasts, up to the constant (2 pi)^(-(k-1)/2): compare differences between two points.
    spec = ModelSpec(likelihood="latent", parametrization="noncentered")
    built = build_model(data, spec)
    model = built.model
    rows, cols = np.nonzero(data.mask)
    obs = data.log_daughters[rows, cols]
    k = data.mask.sum(axis=1)
    rel_error = float(data.rel_error)

    def reference(p: dict) -> float:
        a_specimen = np.maximum(_specimen_exponents(data, p), A_FLOOR)
        u = p["u_daughters"]
        U = np.full(data.mask.shape, np.nan)
        U[rows, cols] = u
        total = _prior_logp(p, spec.priors, ("sigma_asym",))
        total += stats.norm.logpdf(u, loc=obs.mean(), scale=3.0).sum()
        total += stats.norm.logpdf(obs, loc=u, scale=np.sqrt(rel_error**2 + kernel.S2_FLOOR)).sum()
        for j in range(data.n_junctions):
            uj = U[j, data.mask[j]]
            a = a_specimen[data.specimen_idx[j]]
            contrasts = uj - uj.mean()
            total += -(k[j] - 1) * np.log(p["sigma_asym"]) - np.sum(contrasts**2) / (2 * p["sigma_asym"] ** 2)
            law = logsumexp(a * uj) / a
            sd = np.sqrt(p["sigma_dev"] ** 2 + rel_error**2 + kernel.S2_FLOOR)
            total += stats.norm.logpdf(data.log_parent[j], loc=law, scale=sd)
        return float(total)

    logp_fn = model.compile_logp(jacobian=False)
    rng = np.random.default_rng(6)
    points = []
    for _ in range(2):
        p = _hierarchy_point(data, rng)
        p["u_daughters"] = obs + 0.04 * rng.standard_normal(obs.shape)
        p["sigma_asym"] = float(rng.uniform(0.1, 0.4))
        points.append(p)
    got = logp_fn(_value_point(model, points[0])) - logp_fn(_value_point(model, points[1]))
    np.testing.assert_allclose(got, reference(points[0]) - reference(points[1]), rtol=1e-9)


# -- gradients seen by the sampler ------------------------------------------------------------------------------
def _flat_functions(model):
    """logp and its gradient as functions of one flat vector of value variables (jacobian included)."""
    point = model.initial_point()
    names = [v.name for v in model.value_vars]
    shapes = [np.shape(point[n]) for n in names]
    sizes = [int(np.prod(s)) if s else 1 for s in shapes]
    logp_fn, dlogp_fn = model.compile_logp(), model.compile_dlogp()

    def unflatten(x: np.ndarray) -> dict:
        out, start = {}, 0
        for n, shape, size in zip(names, shapes, sizes):
            out[n] = x[start : start + size].reshape(shape)
            start += size
        return out

    x0 = np.concatenate([np.ravel(point[n]) for n in names])
    return (lambda x: float(logp_fn(unflatten(x)))), (lambda x: np.asarray(dlogp_fn(unflatten(x)))), x0


@pytest.mark.parametrize(
    "spec_kwargs",
    [
        {},
        {"deviation": "student_t"},
        {"asymmetry": "sampled"},
        {"asymmetry": "sampled", "deviation": "student_t"},
        {"fixed_taxa": {"T1": 2.2}},
    ],
    ids=["fast", "fast-student_t", "full", "full-student_t", "fast-fixed_taxa"],
)
def test_model_gradient_matches_finite_differences(data, spec_kwargs: dict) -> None:
    # Reference: scipy.optimize.approx_fprime of the compiled log density; checks the Op's gradient
    # wiring (parameter order, chain rule through the hierarchy and the log transforms).
    built = build_model(data, ModelSpec(parametrization="noncentered", **spec_kwargs))
    logp, dlogp, x0 = _flat_functions(built.model)
    x = x0 + 0.3 * np.random.default_rng(7).standard_normal(x0.shape)
    numeric = approx_fprime(x, logp, 1e-7)
    np.testing.assert_allclose(dlogp(x), numeric, rtol=1e-4, atol=1e-3)


def test_repeats_model_gradient_matches_finite_differences(tmp_path: Path) -> None:
    # Reference: scipy.optimize.approx_fprime; here the measurement error is a parameter (complex-step
    # derivative in the kernel, chi-square term in PyTensor).
    built = build_model(model_data(_repeat_table(tmp_path)), ModelSpec(parametrization="noncentered"))
    logp, dlogp, x0 = _flat_functions(built.model)
    x = x0 + 0.2 * np.random.default_rng(8).standard_normal(x0.shape)
    np.testing.assert_allclose(dlogp(x), approx_fprime(x, logp, 1e-7), rtol=1e-4, atol=1e-3)


# -- specification checks ---------------------------------------------------------------------------------------
@pytest.mark.parametrize(
    ("field", "allowed"),
    [
        ("deviation", DEVIATIONS),
        ("likelihood", LIKELIHOODS),
        ("parametrization", PARAMETRIZATIONS),
        ("asymmetry", ASYMMETRY),
    ],
)
def test_spec_rejects_unknown_options(field: str, allowed: tuple[str, ...]) -> None:
    with pytest.raises(ValueError, match=field) as info:
        ModelSpec(**{field: "bogus"})
    for option in allowed:
        assert option in str(info.value)


def test_spec_rejects_fixed_exponent_with_fixed_taxa() -> None:
    with pytest.raises(ValueError, match="not both"):
        ModelSpec(fixed_exponent=3.0, fixed_taxa={"T1": 2.0})


@pytest.mark.parametrize("value", [0.0, -1.0, 25.0])
def test_spec_rejects_exponents_outside_the_range(value: float) -> None:
    with pytest.raises(ValueError, match=r"\(0, 20\)"):
        ModelSpec(fixed_exponent=value)
    with pytest.raises(ValueError, match="T1"):
        ModelSpec(fixed_taxa={"T1": value})


@pytest.mark.parametrize("name", ["mu_sd", "tau_taxon", "sigma_dev", "nu_beta"])
def test_priors_must_be_positive(name: str) -> None:
    with pytest.raises(ValueError, match=name):
        Priors(**{name: 0.0})
    Priors(mu_mean=-1.0)  # a negative prior mean is allowed


def test_spec_round_trips_through_a_dict() -> None:
    spec = ModelSpec(deviation="student_t", fixed_taxa={"A": 2}, priors=Priors(mu_sd=0.5))
    again = ModelSpec.from_dict(spec.to_dict())
    assert again == spec
    assert again.fixed_taxa == {"A": 2.0}
    assert spec.with_(deviation="normal").deviation == "normal" and spec.deviation == "student_t"


def test_sampler_defaults_switch_only_for_large_tables_with_many_junctions_per_specimen() -> None:
    # The rule as documented in allobranch.model.spec (a project choice measured in
    # benchmarks/results/large_defaults.md, not a published value): 300 tuning steps at target acceptance
    # 0.8 from 20,000 junctions with at least 100 per specimen on average; otherwise 1000 at 0.9.
    from allobranch.model.spec import sampler_defaults

    small = sampler_defaults(19_999, 10)
    assert (small["tune"], small["target_accept"]) == (1000, 0.9)
    large = sampler_defaults(20_000, 200)
    assert (large["tune"], large["target_accept"], large["draws"], large["chains"]) == (300, 0.8, 1000, 4)
    many_small_specimens = sampler_defaults(50_000, 5_000)  # 10 junctions per specimen: not large
    assert (many_small_specimens["tune"], many_small_specimens["target_accept"]) == (1000, 0.9)
