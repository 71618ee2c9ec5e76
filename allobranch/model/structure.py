"""The parts of a model that do not need PyMC: which levels and form a table gets, the arrays of each form,
and junction-by-junction evaluation after sampling.

Kept apart from :mod:`allobranch.model.build` so that the fast route, the command line's light commands and
the worker processes of a comparison do not import PyMC.
"""

from __future__ import annotations

from dataclasses import dataclass, field, replace
from typing import Any

import numpy as np
from scipy.special import gammaln

from allobranch.model import kernel
from allobranch.model.data import ModelData
from allobranch.model.density import fast_arrays
from allobranch.model.density_parts import A_FLOOR
from allobranch.model.partial_centering import PilotEstimate, pilot
from allobranch.model.spec import ModelSpec

#: Mean partial-centring weight of the groups under the population exponent from which ``auto`` centres
#: them and samples the population exponent given them (:mod:`allobranch.model.density`).
CONDITION_MU_ABOVE = 0.5
#: Relative error assumed by the pilot when the table's error is not known (it only sets sampling weights).
PILOT_REL_ERROR = 0.05


@dataclass(frozen=True)
class GroupLayout:
    """Which hierarchy levels a model has, which groups are fixed, and how each group is parametrised.

    Attributes
    ----------
    taxon_level, specimen_level : bool
    fixed_taxa : ndarray of bool (n_taxa,)
        Taxa whose exponent is fixed at a law's value (``fixed_values``).
    pinned : ndarray of bool (n_specimens,)
        Specimens of fixed taxa (they take their taxon's value).
    w_taxon, w_specimen : ndarray
        Partial-centring weights, 1 centred, 0 non-centred (:mod:`allobranch.model.partial_centering`).
    parametrization : str
        The spec's choice (``auto``, ``centered``, ``noncentered``).
    pilot : PilotEstimate or None
        The pilot behind ``auto`` weights and the sampler's starting point.
    """

    taxon_level: bool
    specimen_level: bool
    fixed_taxa: np.ndarray
    fixed_values: np.ndarray
    pinned: np.ndarray
    w_taxon: np.ndarray
    w_specimen: np.ndarray
    parametrization: str
    pilot: PilotEstimate | None = None
    condition_mu: bool = False
    whiten: bool = False

    def describe(self) -> str:
        """One line for provenance, ``summary.md`` and the report."""
        if self.whiten:
            return (
                "whitened hierarchy: every exponent sampled as its conditional mean plus a standardised "
                "deviation given the spreads, from the pilot's normal approximation of each specimen"
            )
        cond = "; population exponent sampled given the groups under it" if self.condition_mu else ""
        if self.parametrization == "auto" and self.pilot is not None:
            return self.pilot.describe(self.w_taxon, self.w_specimen) + cond
        kind = {"centered": "centred", "noncentered": "non-centred"}.get(
            self.parametrization, self.parametrization
        )
        return f"{kind} at every level{cond}"

    def with_weights(self, parametrization: str) -> GroupLayout:
        """The same layout with every free group centred or non-centred (fixed groups stay non-centred)."""
        value = {"centered": 1.0, "noncentered": 0.0}[parametrization]
        return GroupLayout(
            self.taxon_level,
            self.specimen_level,
            self.fixed_taxa,
            self.fixed_values,
            self.pinned,
            np.where(self.fixed_taxa, 0.0, value) if self.taxon_level else np.zeros(0),
            np.where(self.pinned, 0.0, value) if self.specimen_level else np.zeros(0),
            parametrization,
            self.pilot,
            condition_mu=value == 1.0 and self.has_top_groups,
        )

    @property
    def has_top_groups(self) -> bool:
        """Whether free groups sit directly under a free population exponent (then ``mu`` can be
        conditioned on them)."""
        if self.fixed_values is None or (self.taxon_level and (~self.fixed_taxa).any()):
            return self.taxon_level or self.specimen_level
        return self.specimen_level and bool((~self.pinned).any())

    def top_weights(self) -> np.ndarray:
        """Weights of the free groups directly under the population exponent."""
        if self.taxon_level:
            return self.w_taxon[~self.fixed_taxa]
        return self.w_specimen[~self.pinned] if self.specimen_level else np.zeros(0)


def group_layout(data: ModelData, spec: ModelSpec, arrays: dict | None = None) -> GroupLayout:
    """Decide levels, fixed groups and partial-centring weights for a table and a spec.

    Parameters
    ----------
    data : ModelData
    spec : ModelSpec
    arrays : dict, optional
        Fast-form arrays (:func:`allobranch.model.density.fast_arrays`); computed for the pilot when needed
        (with the table's relative error, or :data:`PILOT_REL_ERROR` when it is not known).

    Returns
    -------
    GroupLayout
    """
    unknown = set(spec.fixed_taxa) - set(data.taxa)
    if unknown:
        raise ValueError(f"fixed_taxa names unknown taxa {sorted(unknown)}; taxa are {data.taxa}")
    taxon_level, specimen_level = resolve_levels(data, spec)
    fixed = np.array([t in spec.fixed_taxa for t in data.taxa], dtype=bool)
    values = np.array([spec.fixed_taxa.get(t, 0.0) for t in data.taxa], dtype=float)
    pinned = fixed[data.specimen_taxon_idx] if specimen_level else np.zeros(len(data.specimens), dtype=bool)
    est = None
    if spec.parametrization == "auto" or arrays is not None:
        if arrays is None:
            from allobranch.model.asymmetry import estimate_sigma_asym

            rel_error = float(data.rel_error) if data.rel_error else PILOT_REL_ERROR
            probe = replace(data, rel_error=rel_error)
            arrays = fast_arrays(probe, estimate_sigma_asym(probe, rel_error))
        est = pilot(
            arrays,
            data.specimen_idx,
            data.specimen_taxon_idx,
            len(data.taxa),
            spec.priors.tau_taxon,
            spec.priors.tau_specimen,
            taxon_level,
            specimen_level,
        )
    layout = GroupLayout(
        taxon_level,
        specimen_level,
        fixed,
        values,
        pinned,
        est.w_taxon if (est is not None and taxon_level) else np.zeros(len(data.taxa) * taxon_level),
        est.w_specimen
        if (est is not None and specimen_level)
        else np.zeros(len(data.specimens) * specimen_level),
        spec.parametrization,
        est,
    )
    if spec.parametrization != "auto":
        return layout.with_weights(spec.parametrization)
    w_t = np.where(fixed, 0.0, layout.w_taxon) if taxon_level else layout.w_taxon
    w_s = np.where(pinned, 0.0, layout.w_specimen) if specimen_level else layout.w_specimen
    auto = GroupLayout(
        taxon_level,
        specimen_level,
        fixed,
        values,
        pinned,
        w_t,
        w_s,
        "auto",
        est,
        whiten=spec.fixed_exponent is None and (taxon_level or specimen_level),
    )
    if (
        spec.fixed_exponent is None
        and auto.has_top_groups
        and auto.top_weights().size
        and float(np.mean(auto.top_weights())) >= CONDITION_MU_ABOVE
    ):
        # well-measured groups under mu: centre them and condition mu on them (removes the mu-tau funnel)
        if taxon_level:
            w_t = np.where(fixed, 0.0, 1.0)
        else:
            w_s = np.where(pinned, 0.0, 1.0)
        return GroupLayout(
            taxon_level, specimen_level, fixed, values, pinned, w_t, w_s, "auto", est, True, auto.whiten
        )
    return auto


#: Hyper-parameters (besides exponents) that diagnostics always report when present.
HYPER_PARAMETERS: tuple[str, ...] = (
    "mu",
    "tau_taxon",
    "tau_specimen",
    "pagel_lambda",
    "beta",
    "tau_beta",
    "gamma",
    "sigma_dev",
    "rel_error",
    "sigma_asym",
    "nu",
)


@dataclass
class BuiltModel:
    """A PyMC model plus what is needed to evaluate it junction by junction after sampling.

    Attributes
    ----------
    model : pymc.Model or None
        The PyMC model (None when the fit used the compiled fast density directly).
    data : ModelData
    spec : ModelSpec
    form : {"fast", "full", "latent"}
        ``fast``: marginal likelihood with measurement error and asymmetry fixed; ``full``: marginal with
        them sampled; ``latent``: true daughters as parameters.
    sigma_asym : ndarray or None
        Empirical asymmetry scale per taxon (``fast`` form).
    arrays : dict
        The data arrays of the form by name (see :func:`data_arrays`).
    """

    model: Any
    data: ModelData
    spec: ModelSpec
    form: str
    sigma_asym: np.ndarray | None = None
    arrays: dict = field(default_factory=dict)
    layout: GroupLayout | None = None

    @property
    def student(self) -> bool:
        """Whether the parent deviation is Student-t."""
        return self.spec.deviation == "student_t"

    def pointwise(
        self,
        a_specimen: np.ndarray,
        sigma_dev: float,
        rel_error: float | None = None,
        sigma_asym: float | None = None,
        nu: float = 30.0,
        beta_taxon: np.ndarray | None = None,
    ) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """Per-junction log-likelihood and the log parent's predictive mean and variance for one draw.

        The log-likelihood includes the Student-t normalising terms, so it is the full log density of
        the junction's readings (parent given daughters, and the daughters' contrasts). ``beta_taxon``
        (n_taxa, n_covariates) are the slopes of the covariates, when the model has any.
        """
        d = self.data
        a_j = np.asarray(a_specimen, dtype=float)[d.specimen_idx]
        if beta_taxon is not None and d.linear is not None and d.linear.p:
            a_j = a_j + np.einsum("jk,jk->j", d.linear.covariates, np.asarray(beta_taxon)[d.taxon_idx])
        a_j = np.maximum(a_j, A_FLOOR)
        if self.form == "fast":
            A = self.arrays
            ll, _, mean, var = kernel.fast_terms(
                A["log_parent_obs"],
                A["mu_post"],
                A["g_post"],
                A["c_post"],
                A["ybar"],
                A["daughter_mask"],
                A["s0sq"],
                A["ll_daughters"],
                a_j,
                float(sigma_dev),
                float(nu),
                self.student,
            )
        else:
            rel_error = float(d.rel_error or 0.0) if rel_error is None else float(rel_error)
            skip = np.ones(5, dtype=bool)
            ll, _, mean, var = kernel.junction_terms(
                d.log_parent,
                d.log_daughters,
                d.mask.astype(float),
                d.var_abs_parent,
                d.var_abs_daughters,
                a_j,
                float(sigma_dev),
                rel_error,
                float(sigma_asym),
                float(nu),
                self.student,
                skip,
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


def data_arrays(data: ModelData, form: str, sigma_asym_taxa: np.ndarray | None = None) -> dict:
    """Arrays a model form reads (recomputed to swap data without recompiling)."""
    if form == "fast":
        return fast_arrays(data, np.asarray(sigma_asym_taxa))
    return {
        "log_parent_obs": data.log_parent,
        "daughter_mask": data.mask.astype(float),
        "specimen_idx": data.specimen_idx.astype(np.int64),
        "log_daughters_obs": data.log_daughters,
        "var_abs_parent": data.var_abs_parent,
        "var_abs_daughters": data.var_abs_daughters,
    }
