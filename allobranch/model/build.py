"""Build the PyMC model: the one place where a :class:`ModelSpec` becomes a probability model.

The model, on natural-log radii (``y`` observed, ``u`` true):

* measurement: ``y = u + e``, ``e ~ Normal(0, s)`` with ``s^2 = rel_error^2 + (se / radius)^2``; the
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

import numpy as np
import pymc as pm
import pytensor.tensor as pt

from allobranch.model import kernel
from allobranch.model.asymmetry import estimate_sigma_asym
from allobranch.model.data import ModelData
from allobranch.model.ops import JunctionLoglik
from allobranch.model.spec import ModelSpec
from allobranch.model.structure import (  # noqa: F401 - re-exported for callers of this module
    A_FLOOR,
    HYPER_PARAMETERS,
    BuiltModel,
    GroupLayout,
    data_arrays,
    group_layout,
    model_form,
    resolve_levels,
)

#: Stand-in for log(0) in the log-sum-exp over absent daughters (latent form).
NEG_LARGE = -1e6


def _partially_centred(name: str, parent, tau, w: np.ndarray, dims: str):
    """Group exponents ``a = parent + tau^(1-w) (r - w parent)`` with ``r ~ Normal(w parent, tau^w)``
    (see :mod:`allobranch.model.partial_centering`): ``a ~ Normal(parent, tau)`` whatever ``w``."""
    r = pm.Normal(name, w * parent, tau**w, dims=dims)
    return parent + tau ** (1.0 - w) * (r - w * parent)


def _exponents(data: ModelData, spec: ModelSpec, layout: GroupLayout) -> pt.TensorVariable:
    """Population, taxon and specimen exponents; returns the specimen exponents."""
    p = spec.priors
    if spec.fixed_exponent is not None:
        mu = pm.Deterministic("mu", pt.as_tensor_variable(float(spec.fixed_exponent)))
    else:
        mu = pm.Normal("mu", p.mu_mean, p.mu_sd)
    if layout.taxon_level:
        tau_t = pm.HalfNormal("tau_taxon", p.tau_taxon)
        a_taxon = _partially_centred("r_taxon", mu, tau_t, layout.w_taxon, "taxon")
    else:
        a_taxon = pt.ones(len(data.taxa)) * mu
    if layout.fixed_taxa.any():
        a_taxon = pt.where(layout.fixed_taxa, layout.fixed_values, a_taxon)
    a_taxon = pm.Deterministic("a_taxon", a_taxon, dims="taxon")
    parent_a = a_taxon[data.specimen_taxon_idx]
    if layout.specimen_level:
        tau_s = pm.HalfNormal("tau_specimen", p.tau_specimen)
        a_free = _partially_centred("r_specimen", parent_a, tau_s, layout.w_specimen, "specimen")
        if layout.pinned.any():
            # a point law for a taxon holds for every junction of that taxon, so its specimens are pinned
            # too (their unused raw values are non-centred, have no likelihood and do not affect the rest)
            a_free = pt.where(layout.pinned, parent_a, a_free)
        a_specimen = pm.Deterministic("a_specimen", a_free, dims="specimen")
    else:
        a_specimen = pm.Deterministic("a_specimen", parent_a, dims="specimen")
    return a_specimen


def _measurement_sd(data: ModelData, spec: ModelSpec) -> pt.TensorVariable | float:
    """Relative (log-scale) measurement error: a known constant or a parameter."""
    if data.error_mode in ("known", "absolute_only"):
        return float(data.rel_error or 0.0)
    sigma = pm.HalfNormal("rel_error", spec.priors.rel_error)
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


def build_model(
    data: ModelData, spec: ModelSpec | None = None, layout: GroupLayout | None = None
) -> BuiltModel:
    """Build the PyMC model for a junction table.

    Parameters
    ----------
    data : ModelData
        Arrays from :func:`allobranch.model.data.model_data`.
    spec : ModelSpec, optional
        What to fit; defaults to ``ModelSpec()``.
    layout : GroupLayout, optional
        Levels, fixed groups and partial-centring weights (:func:`allobranch.model.structure.group_layout`);
        computed from ``spec`` (with the pilot when ``parametrization="auto"``) when not given.

    Returns
    -------
    BuiltModel
        Holds the ``pymc.Model``, whose variables are ``mu``, ``tau_taxon``, ``r_taxon``, ``a_taxon``,
        ``tau_specimen``, ``r_specimen``, ``a_specimen``, ``sigma_dev``, ``rel_error`` (when estimated), ``sigma_asym``
        (when sampled), ``nu`` (Student-t) and the junction log-likelihood.
    """
    spec = spec or ModelSpec()
    form = model_form(data, spec)
    coords = {"taxon": data.taxa, "specimen": data.specimens, "junction": data.junctions}
    sigma_asym_taxa = None
    if form == "fast":
        sigma_asym_taxa = estimate_sigma_asym(data, float(data.rel_error or 0.0))
    arrays = data_arrays(data, form, sigma_asym_taxa)
    if layout is None:
        layout = group_layout(data, spec, arrays if form == "fast" else None)
    with pm.Model(coords=coords) as model:
        sh = {name: pm.Data(name, value) for name, value in arrays.items()}
        a_specimen = pt.maximum(_exponents(data, spec, layout), A_FLOOR)
        rel_error = _measurement_sd(data, spec)
        sigma_dev = pm.HalfNormal("sigma_dev", spec.priors.sigma_dev)
        nu = _nu(spec)
        student = spec.deviation == "student_t"
        if form == "fast":
            ll, _ = JunctionLoglik("fast", student)(
                a_specimen,
                sigma_dev,
                nu,
                sh["log_parent_obs"],
                sh["mu_post"],
                sh["g_post"],
                sh["c_post"],
                sh["ybar"],
                sh["daughter_mask"],
                sh["s0sq"],
                sh["ll_daughters"],
                sh["specimen_idx"],
            )
        elif form == "full":
            sigma_asym = pm.HalfNormal("sigma_asym", spec.priors.sigma_asym)
            ll, _ = JunctionLoglik("full", student, rel_error_free=not isinstance(rel_error, float))(
                a_specimen,
                sigma_dev,
                pt.as_tensor_variable(rel_error),
                sigma_asym,
                nu,
                sh["log_parent_obs"],
                sh["log_daughters_obs"],
                sh["daughter_mask"],
                sh["var_abs_parent"],
                sh["var_abs_daughters"],
                sh["specimen_idx"],
            )
        if form in ("fast", "full"):
            total = ll
            if student:
                total = total + _student_constant(nu, data.n_junctions)
            pm.Potential("junction_loglik", total)
        else:
            _latent_likelihood(data, spec, sh, a_specimen, rel_error, sigma_dev, nu)
    return BuiltModel(
        model=model, data=data, spec=spec, form=form, sigma_asym=sigma_asym_taxa, arrays=arrays, layout=layout
    )


def _latent_likelihood(data, spec, sh, a_specimen, rel_error, sigma_dev, nu) -> None:
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
    s2 = rel_error**2 + data.var_abs_daughters[rows, cols] + kernel.S2_FLOOR
    pm.Normal("log_daughters", mu=u, sigma=pt.sqrt(s2), observed=obs)
    a_j = a_specimen[data.specimen_idx][:, None]
    t = pt.where(data.mask, a_j * U, NEG_LARGE)
    law = (pt.logsumexp(t, axis=1, keepdims=True) / a_j)[:, 0]
    sd = pt.sqrt(sigma_dev**2 + rel_error**2 + data.var_abs_parent + kernel.S2_FLOOR)
    if spec.deviation == "student_t":
        pm.StudentT("log_parent", nu=nu, mu=law, sigma=sd, observed=data.log_parent, dims="junction")
    else:
        pm.Normal("log_parent", mu=law, sigma=sd, observed=data.log_parent, dims="junction")
