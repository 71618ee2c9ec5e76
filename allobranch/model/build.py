"""Build the PyMC model: the one place where a :class:`ModelSpec` becomes a probability model.

The model, on natural-log radii (``y`` observed, ``u`` true):

* measurement: ``log y = u + e``, ``e ~ Normal(0, s)`` with ``s^2 = sigma_rel^2 + (se / y)^2``; the relative
  error is known, estimated from repeat readings (within-segment sums of squares, an exact chi-square
  likelihood on the log scale), or estimated from its prior alone (then it is confounded with the
  biological deviation, and the fit says so);
* law: ``u_0 = (1/a_j) * logsumexp(a_j * u_daughters) + eps_j`` with ``eps_j ~ Normal(0, sigma_dev)`` or
  Student-t;
* hierarchy: ``a_specimen ~ Normal(a_taxon, tau_specimen)``, ``a_taxon ~ Normal(mu, tau_taxon)``, each
  level optional and non-centred or centred.

``likelihood="marginal"`` integrates the true daughters out with a second-order delta method: with flat
priors on the true log radii, ``u_d | y_d ~ Normal(y_d, S)``, and the predicted log parent
``m(u) = logsumexp(a u)/a`` has gradient ``w = softmax(a u)`` and Hessian ``a (diag w - w w^T)``, so

    log y_0 | y_d ~ Normal(m(y_d) + (a/2) sum_i w_i (1 - w_i) s_i^2,
                           sigma_dev^2 + s_0^2 + sum_i w_i^2 s_i^2).

That leaves no per-junction parameters, and one log-likelihood term per junction, the quantity used for
LOO. ``likelihood="latent"`` keeps every true daughter as a parameter (exact, slow).
"""

from __future__ import annotations

import numpy as np
import pymc as pm
import pytensor.tensor as pt

from allobranch.model.data import ModelData
from allobranch.model.spec import CENTERED_ABOVE, ModelSpec

#: Smallest exponent used inside the law (keeps prior draws with a <= 0 finite; far from any posterior).
A_FLOOR = 0.05
#: Stand-in for log(0) in the log-sum-exp over absent daughters.
NEG_LARGE = -1e6


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
    if spec.fixed_exponent is not None:
        taxon_level = False
    return bool(taxon_level), bool(specimen_level)


def _centered_specimens(data: ModelData, spec: ModelSpec) -> bool:
    if spec.parametrization == "centered":
        return True
    if spec.parametrization == "noncentered":
        return False
    return float(np.median(data.junctions_per_specimen)) > CENTERED_ABOVE


def _exponents(data: ModelData, spec: ModelSpec) -> pt.TensorVariable:
    """Population, taxon and specimen exponents; returns the specimen exponents."""
    p = spec.priors
    taxon_level, specimen_level = resolve_levels(data, spec)
    n_taxa, n_spec = len(data.taxa), len(data.specimens)

    if spec.fixed_exponent is not None:
        mu = pm.Deterministic("mu", pt.as_tensor_variable(float(spec.fixed_exponent)))
    else:
        mu = pm.Normal("mu", p.mu_mean, p.mu_sd)

    if taxon_level:
        tau_t = pm.HalfNormal("tau_taxon", p.tau_taxon)
        z_t = pm.Normal("z_taxon", 0.0, 1.0, dims="taxon")
        a_taxon = mu + tau_t * z_t
    else:
        a_taxon = pt.ones(n_taxa) * mu
    if spec.fixed_taxa:
        unknown = set(spec.fixed_taxa) - set(data.taxa)
        if unknown:
            raise ValueError(f"fixed_taxa names unknown taxa {sorted(unknown)}; taxa are {data.taxa}")
        fixed_mask = np.array([t in spec.fixed_taxa for t in data.taxa])
        fixed_vals = np.array([spec.fixed_taxa.get(t, 0.0) for t in data.taxa])
        a_taxon = pt.where(fixed_mask, fixed_vals, a_taxon)
    a_taxon = pm.Deterministic("a_taxon", a_taxon, dims="taxon")

    if specimen_level:
        tau_s = pm.HalfNormal("tau_specimen", p.tau_specimen)
        parent_a = a_taxon[data.specimen_taxon_idx]
        if _centered_specimens(data, spec):
            a_spec = pm.Normal("a_specimen", parent_a, tau_s, dims="specimen")
        else:
            z_s = pm.Normal("z_specimen", 0.0, 1.0, dims="specimen")
            a_spec = pm.Deterministic("a_specimen", parent_a + tau_s * z_s, dims="specimen")
    else:
        a_spec = pm.Deterministic("a_specimen", a_taxon[data.specimen_taxon_idx], dims="specimen")
    del n_spec
    return a_spec


def _measurement_sd(data: ModelData, spec: ModelSpec) -> pt.TensorVariable | float:
    """Relative (log-scale) measurement error: known constant or a parameter."""
    if data.error_mode in ("known", "absolute_only"):
        return float(data.rel_error or 0.0)
    sigma = pm.HalfNormal("sigma_meas", spec.priors.sigma_meas)
    if data.error_mode == "repeats":
        # Within-segment sum of squares of log repeat readings: SS / sigma^2 ~ chi^2(df) (exact algebra
        # for normal errors on the log scale); the log density up to a constant is:
        pm.Potential(
            "repeat_readings", -data.repeat_df * pt.log(sigma) - data.repeat_ss / (2.0 * sigma**2)
        )
    return sigma


def _observe_parent(mean, sd, spec: ModelSpec, observed) -> None:
    if spec.deviation == "student_t":
        nu = pm.Gamma("nu", alpha=spec.priors.nu_alpha, beta=spec.priors.nu_beta)
        pm.StudentT("log_parent", nu=nu, mu=mean, sigma=sd, observed=observed, dims="junction")
    else:
        pm.Normal("log_parent", mu=mean, sigma=sd, observed=observed, dims="junction")


def build_model(data: ModelData, spec: ModelSpec | None = None) -> pm.Model:
    """Build the PyMC model for a junction table.

    Parameters
    ----------
    data : ModelData
        Arrays from :func:`allobranch.model.data.model_data`.
    spec : ModelSpec, optional
        What to fit; defaults to ``ModelSpec()``.

    Returns
    -------
    pymc.Model
        Variables: ``mu``, ``tau_taxon``, ``z_taxon``, ``a_taxon``, ``tau_specimen``, ``a_specimen``,
        ``sigma_dev``, ``sigma_meas`` (when estimated), ``nu`` (Student-t), the observed ``log_parent``
        (one term per junction) and, for the latent form, ``u_daughters`` and ``log_daughters``.
    """
    spec = spec or ModelSpec()
    coords = {"taxon": data.taxa, "specimen": data.specimens, "junction": data.junctions}
    with pm.Model(coords=coords) as model:
        shared = {name: pm.Data(name, value) for name, value in data.shared_arrays().items()}
        a_spec = _exponents(data, spec)
        a_j = pt.maximum(a_spec[data.specimen_idx], A_FLOOR)[:, None]
        sigma_rel = _measurement_sd(data, spec)
        sigma_dev = pm.HalfNormal("sigma_dev", spec.priors.sigma_dev)
        mask = shared["daughter_mask"] > 0.5
        s2_parent = sigma_rel**2 + shared["var_abs_parent"]
        s2_daughters = sigma_rel**2 + shared["var_abs_daughters"]

        if spec.likelihood == "marginal":
            log_d = shared["log_daughters_obs"]
        else:
            rows, cols = np.nonzero(data.mask)
            obs_flat = data.log_daughters[rows, cols]
            center = float(np.mean(obs_flat))
            u = pm.Normal("u_daughters", center, 3.0, shape=len(rows), initval=obs_flat)
            log_d = pt.set_subtensor(pt.zeros(data.log_daughters.shape)[rows, cols], u)
            pm.Normal(
                "log_daughters",
                mu=u,
                sigma=pt.sqrt(s2_daughters[rows, cols]),
                observed=shared["log_daughters_obs"][rows, cols],
            )

        t = pt.where(mask, a_j * log_d, NEG_LARGE)
        lse = pt.logsumexp(t, axis=1, keepdims=True)
        law_mean = (lse / a_j)[:, 0]
        if spec.likelihood == "marginal":
            w = pt.exp(t - lse)
            bias = 0.5 * a_j[:, 0] * pt.sum(w * (1.0 - w) * s2_daughters, axis=1)
            var = sigma_dev**2 + s2_parent + pt.sum(w**2 * s2_daughters, axis=1)
            _observe_parent(law_mean + bias, pt.sqrt(var), spec, shared["log_parent_obs"])
        else:
            _observe_parent(law_mean, pt.sqrt(sigma_dev**2 + s2_parent), spec, shared["log_parent_obs"])
    return model
