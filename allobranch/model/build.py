"""Build the PyMC model: the one place where a :class:`ModelSpec` becomes a probability model.

The model, on natural-log radii (``y`` observed, ``u`` true):

* measurement: ``y = u + e``, ``e ~ Normal(0, s)`` with ``s^2 = sigma_rel^2 + (se / radius)^2``; the
  relative error is known, estimated from repeat readings (within-segment sums of squares, an exact
  chi-square likelihood on the log scale), or estimated from its prior alone (then it is confounded with
  the biological deviation, and the fit says so);
* daughters' asymmetry: each true log daughter deviates from its junction's mean log daughter by
  ``Normal(0, sigma_asym)``; the junction's level itself is unrestricted (flat);
* law: ``u_0 = (1/a_j) * logsumexp(a_j * u_daughters) + eps_j``, ``eps_j ~ Normal(0, sigma_dev)`` or
  Student-t;
* hierarchy: ``a_specimen ~ Normal(a_taxon, tau_specimen)``, ``a_taxon ~ Normal(mu, tau_taxon)``, each
  level optional, non-centred or centred.

``likelihood="marginal"`` (default) integrates the true radii out per junction (see
:mod:`allobranch.model.kernel`), leaving one log-likelihood term per junction and no per-junction
parameters. ``likelihood="latent"`` keeps every true daughter radius as a parameter: exact, slow, the
textbook form used to validate the fast one.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import pymc as pm
import pytensor.tensor as pt
from scipy.special import gammaln

from allobranch.model import kernel
from allobranch.model.asymmetry import estimate_sigma_asym
from allobranch.model.data import ModelData
from allobranch.model.ops import JunctionLoglik
from allobranch.model.spec import CENTERED_ABOVE, ModelSpec

#: Smallest exponent used inside the law (keeps prior draws with a <= 0 finite; far from any posterior).
A_FLOOR = 0.05
#: Stand-in for log(0) in the log-sum-exp over absent daughters (latent form).
NEG_LARGE = -1e6
#: Hyper-parameters (besides exponents) that diagnostics always report when present.
HYPER_PARAMETERS: tuple[str, ...] = (
    "mu", "tau_taxon", "tau_specimen", "sigma_dev", "sigma_meas", "sigma_asym", "nu",
)


@dataclass
class BuiltModel:
    """A PyMC model plus what is needed to evaluate it junction by junction after sampling.

    Attributes
    ----------
    model : pymc.Model
    data : ModelData
    spec : ModelSpec
    form : {"fast", "full", "latent"}
        ``fast``: marginal likelihood with measurement error and asymmetry fixed; ``full``: marginal with
        them sampled; ``latent``: true daughters as parameters.
    sigma_asym : ndarray or None
        Empirical asymmetry scale per taxon (``fast`` form).
    arrays : dict
        The ``pm.Data`` arrays by name (see :meth:`data_arrays`).
    """

    model: pm.Model
    data: ModelData
    spec: ModelSpec
    form: str
    sigma_asym: np.ndarray | None = None
    arrays: dict = field(default_factory=dict)

    @property
    def student(self) -> bool:
        """Whether the parent deviation is Student-t."""
        return self.spec.deviation == "student_t"

    def pointwise(
        self, a_spec: np.ndarray, sigma_dev: float, sigma_rel: float | None = None,
        sigma_asym: float | None = None, nu: float = 30.0,
    ) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """Per-junction log-likelihood and the log parent's predictive mean and variance for one draw.

        The log-likelihood includes the Student-t normalising terms, so it is the full log density of
        the junction's readings (parent given daughters, and the daughters' contrasts).
        """
        d = self.data
        a_spec = np.maximum(np.asarray(a_spec, dtype=float), A_FLOOR)
        if self.form == "fast":
            A = self.arrays
            ll, _, mean, var = kernel.fast_terms(
                A["log_parent_obs"], A["mu_post"], A["g_post"], A["c_post"], A["ybar"],
                A["daughter_mask"], A["s0sq"], A["ll_daughters"], d.specimen_idx, a_spec,
                float(sigma_dev), float(nu), self.student,
            )
        else:
            srel = float(d.rel_error or 0.0) if sigma_rel is None else float(sigma_rel)
            skip = np.ones(5, dtype=bool)
            ll, _, mean, var = kernel.junction_terms(
                d.log_parent, d.log_daughters, d.mask.astype(float), d.var_abs_parent,
                d.var_abs_daughters, d.specimen_idx, a_spec, float(sigma_dev), srel,
                float(sigma_asym), float(nu), self.student, skip,
            )
        if self.student:
            ll = ll + (gammaln((nu + 1) / 2) - gammaln(nu / 2) - 0.5 * np.log(nu * np.pi))
        return ll, mean, var


def resolve_levels(data: ModelData, spec: ModelSpec) -> tuple[bool, bool]:
    """Decide which hierarchy levels are in the model.

    Returns
    -------
    (taxon_level, specimen_level) : tuple of bool
    """
    taxon_level = spec.taxon_level if spec.taxon_level is not None else len(data.taxa) > 1
    specimen_level = (
        spec.specimen_level if spec.specimen_level is not None else len(data.specimens) > len(data.taxa)
    )
    if spec.fixed_exponent is not None:  # a point law for every junction: no exponent varies
        taxon_level = specimen_level = False
    return bool(taxon_level), bool(specimen_level)


def model_form(data: ModelData, spec: ModelSpec) -> str:
    """``fast``, ``full`` or ``latent`` (see :class:`BuiltModel`)."""
    if spec.likelihood == "latent":
        return "latent"
    if data.error_mode in ("known", "absolute_only") and spec.asymmetry == "empirical":
        return "fast"
    return "full"


def _centered(data: ModelData, spec: ModelSpec, group_idx: np.ndarray, n_groups: int) -> bool:
    """Whether a hierarchy level is centred: by the spec, or (``auto``) when its median group holds more
    than :data:`CENTERED_ABOVE` junctions' worth of information at 5 % error (junctions scaled by
    ``(0.05 / relative error)^2``; the data then dominate each group)."""
    if spec.parametrization == "centered":
        return True
    if spec.parametrization == "noncentered":
        return False
    rel = data.rel_error if data.rel_error else 0.05
    counts = np.bincount(group_idx, minlength=n_groups)
    return float(np.median(counts)) * (0.05 / max(rel, 1e-3)) ** 2 > CENTERED_ABOVE


def _exponents(data: ModelData, spec: ModelSpec) -> pt.TensorVariable:
    """Population, taxon and specimen exponents; returns the specimen exponents."""
    p = spec.priors
    taxon_level, specimen_level = resolve_levels(data, spec)
    if spec.fixed_exponent is not None:
        mu = pm.Deterministic("mu", pt.as_tensor_variable(float(spec.fixed_exponent)))
    else:
        mu = pm.Normal("mu", p.mu_mean, p.mu_sd)
    if taxon_level:
        tau_t = pm.HalfNormal("tau_taxon", p.tau_taxon)
        if _centered(data, spec, data.taxon_idx, len(data.taxa)) and not spec.fixed_taxa:
            a_taxon = pm.Normal("a_taxon_free", mu, tau_t, dims="taxon")
        else:
            z_t = pm.Normal("z_taxon", 0.0, 1.0, dims="taxon")
            a_taxon = mu + tau_t * z_t
    else:
        a_taxon = pt.ones(len(data.taxa)) * mu
    if spec.fixed_taxa:
        unknown = set(spec.fixed_taxa) - set(data.taxa)
        if unknown:
            raise ValueError(f"fixed_taxa names unknown taxa {sorted(unknown)}; taxa are {data.taxa}")
        fixed_mask = np.array([t in spec.fixed_taxa for t in data.taxa])
        fixed_vals = np.array([spec.fixed_taxa.get(t, 0.0) for t in data.taxa])
        a_taxon = pt.where(fixed_mask, fixed_vals, a_taxon)
    a_taxon = pm.Deterministic("a_taxon", a_taxon, dims="taxon")
    parent_a = a_taxon[data.specimen_taxon_idx]
    if specimen_level:
        tau_s = pm.HalfNormal("tau_specimen", p.tau_specimen)
        if _centered(data, spec, data.specimen_idx, len(data.specimens)):
            a_free = pm.Normal("a_specimen_free", parent_a, tau_s, dims="specimen")
        else:
            z_s = pm.Normal("z_specimen", 0.0, 1.0, dims="specimen")
            a_free = parent_a + tau_s * z_s
        if spec.fixed_taxa:
            # a point law for a taxon holds for every junction of that taxon, so its specimens are pinned
            # too (their unused free values have no likelihood and do not affect the rest)
            pinned = np.array([data.taxa[t] in spec.fixed_taxa for t in data.specimen_taxon_idx])
            a_free = pt.where(pinned, parent_a, a_free)
        a_spec = pm.Deterministic("a_specimen", a_free, dims="specimen")
    else:
        a_spec = pm.Deterministic("a_specimen", parent_a, dims="specimen")
    return a_spec


def _measurement_sd(data: ModelData, spec: ModelSpec) -> pt.TensorVariable | float:
    """Relative (log-scale) measurement error: a known constant or a parameter."""
    if data.error_mode in ("known", "absolute_only"):
        return float(data.rel_error or 0.0)
    sigma = pm.HalfNormal("sigma_meas", spec.priors.sigma_meas)
    if data.error_mode == "repeats":
        # SS / sigma^2 ~ chi^2(df) for normal errors on the log scale (exact algebra); its log density in
        # sigma, up to a constant:
        pm.Potential("repeat_readings", -data.repeat_df * pt.log(sigma) - data.repeat_ss / (2.0 * sigma**2))
    return sigma


def _nu(spec: ModelSpec):
    if spec.deviation == "student_t":
        return pm.Gamma("nu", alpha=spec.priors.nu_alpha, beta=spec.priors.nu_beta)
    return pt.as_tensor_variable(30.0)


def _student_constant(nu, n: int):
    return n * (pt.gammaln((nu + 1) / 2) - pt.gammaln(nu / 2) - 0.5 * pt.log(nu * np.pi))


def data_arrays(data: ModelData, form: str, sigma_asym_taxa: np.ndarray | None = None) -> dict:
    """Arrays held as ``pm.Data`` for a model form (recomputed to swap data without recompiling)."""
    base = {
        "log_parent_obs": data.log_parent,
        "daughter_mask": data.mask.astype(float),
        "specimen_idx": data.specimen_idx.astype(np.int64),
    }
    if form == "fast":
        srel = float(data.rel_error or 0.0)
        tau_j = np.asarray(sigma_asym_taxa)[data.taxon_idx] ** 2
        mu, g, c, ybar, lld = kernel.precompute(
            data.log_daughters, data.mask, data.var_abs_daughters, srel, tau_j
        )
        s0sq = srel**2 + data.var_abs_parent + kernel.S2_FLOOR
        return {**base, "mu_post": mu, "g_post": g, "c_post": c, "ybar": ybar, "s0sq": s0sq,
                "ll_daughters": lld}
    return {
        **base,
        "log_daughters_obs": data.log_daughters,
        "var_abs_parent": data.var_abs_parent,
        "var_abs_daughters": data.var_abs_daughters,
    }


def build_model(data: ModelData, spec: ModelSpec | None = None) -> BuiltModel:
    """Build the PyMC model for a junction table.

    Parameters
    ----------
    data : ModelData
        Arrays from :func:`allobranch.model.data.model_data`.
    spec : ModelSpec, optional
        What to fit; defaults to ``ModelSpec()``.

    Returns
    -------
    BuiltModel
        Holds the ``pymc.Model``, whose variables are ``mu``, ``tau_taxon``, ``z_taxon``, ``a_taxon``,
        ``tau_specimen``, ``a_specimen``, ``sigma_dev``, ``sigma_meas`` (when estimated), ``sigma_asym``
        (when sampled), ``nu`` (Student-t) and the junction log-likelihood.
    """
    spec = spec or ModelSpec()
    form = model_form(data, spec)
    coords = {"taxon": data.taxa, "specimen": data.specimens, "junction": data.junctions}
    sigma_asym_taxa = None
    if form == "fast":
        sigma_asym_taxa = estimate_sigma_asym(data, float(data.rel_error or 0.0))
    arrays = data_arrays(data, form, sigma_asym_taxa)
    with pm.Model(coords=coords) as model:
        sh = {name: pm.Data(name, value) for name, value in arrays.items()}
        a_spec = pt.maximum(_exponents(data, spec), A_FLOOR)
        sigma_rel = _measurement_sd(data, spec)
        sigma_dev = pm.HalfNormal("sigma_dev", spec.priors.sigma_dev)
        nu = _nu(spec)
        student = spec.deviation == "student_t"
        if form == "fast":
            ll, _ = JunctionLoglik("fast", student)(
                a_spec, sigma_dev, nu, sh["log_parent_obs"], sh["mu_post"], sh["g_post"], sh["c_post"],
                sh["ybar"], sh["daughter_mask"], sh["s0sq"], sh["ll_daughters"], sh["specimen_idx"],
            )
        elif form == "full":
            sigma_asym = pm.HalfNormal("sigma_asym", spec.priors.sigma_asym)
            ll, _ = JunctionLoglik("full", student, srel_free=not isinstance(sigma_rel, float))(
                a_spec, sigma_dev, pt.as_tensor_variable(sigma_rel), sigma_asym, nu, sh["log_parent_obs"],
                sh["log_daughters_obs"], sh["daughter_mask"], sh["var_abs_parent"],
                sh["var_abs_daughters"], sh["specimen_idx"],
            )
        if form in ("fast", "full"):
            total = ll
            if student:
                total = total + _student_constant(nu, data.n_junctions)
            pm.Potential("junction_loglik", total)
        else:
            _latent_likelihood(data, spec, sh, a_spec, sigma_rel, sigma_dev, nu)
    return BuiltModel(model=model, data=data, spec=spec, form=form, sigma_asym=sigma_asym_taxa, arrays=arrays)


def _latent_likelihood(data, spec, sh, a_spec, sigma_rel, sigma_dev, nu) -> None:
    """Textbook form: every true daughter radius is a parameter."""
    rows, cols = np.nonzero(data.mask)
    obs = data.log_daughters[rows, cols]
    k = data.mask.sum(axis=1)
    center = float(np.mean(obs))
    sigma_asym = pm.HalfNormal("sigma_asym", spec.priors.sigma_asym)
    u = pm.Normal("u_daughters", center, 3.0, shape=len(rows), initval=obs)
    U = pt.set_subtensor(pt.zeros(data.log_daughters.shape)[rows, cols], u)
    Ubar = pt.sum(U, axis=1) / k
    dev = (U - Ubar[:, None]) * data.mask
    # Asymmetry prior: each true log daughter about its junction mean, flat along the common level:
    # density ~ sigma^-(k-1) exp(-sum dev^2 / (2 sigma^2)) (exact algebra for the (k-1)-dim contrast).
    pm.Potential(
        "asymmetry", -float(np.sum(k - 1)) * pt.log(sigma_asym) - pt.sum(dev**2) / (2 * sigma_asym**2)
    )
    s2 = sigma_rel**2 + data.var_abs_daughters[rows, cols] + kernel.S2_FLOOR
    pm.Normal("log_daughters", mu=u, sigma=pt.sqrt(s2), observed=obs)
    a_j = a_spec[data.specimen_idx][:, None]
    t = pt.where(data.mask, a_j * U, NEG_LARGE)
    law = (pt.logsumexp(t, axis=1, keepdims=True) / a_j)[:, 0]
    sd = pt.sqrt(sigma_dev**2 + sigma_rel**2 + data.var_abs_parent + kernel.S2_FLOOR)
    if spec.deviation == "student_t":
        pm.StudentT("log_parent", nu=nu, mu=law, sigma=sd, observed=data.log_parent, dims="junction")
    else:
        pm.Normal("log_parent", mu=law, sigma=sd, observed=data.log_parent, dims="junction")
