"""The exponent's linear predictor beyond the hierarchy: junction covariates, taxon traits and a phylogeny.

A junction's exponent is its specimen's exponent at the covariates' reference values plus
``sum_k (x_jk - ref_k) beta_k`` (slopes overall, optionally varying by taxon); a taxon's exponent is the
population exponent plus ``sum_m (g_tm - ref_m) gamma_m`` plus its deviation, independent across taxa or
correlated along a tree (Pagel's lambda). This module holds the data and prior scales of those terms
(:class:`LinearTerms`); :mod:`allobranch.model.density_white` samples them.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

#: Name of the built-in covariate: log10 of the parent's size in the table's unit.
LOG_PARENT_SIZE = "log_parent_size"
#: Prior SD of a slope, as the change in exponent per one SD of its covariate (weakly informative: a
#: change of 1 in the exponent across two SDs of a covariate is already extreme for branching data;
#: common practice, no single source).
SLOPE_PRIOR_PER_SD = 0.5
#: Half-normal scale of the taxa's spread in a slope, per one SD of its covariate.
SLOPE_SPREAD_PRIOR_PER_SD = 0.25


@dataclass
class LinearTerms:
    """Data and prior scales of the covariate, trait and phylogeny terms.

    Attributes
    ----------
    covariates : ndarray (n, p)
        Junction covariates minus their reference values.
    covariate_names : list of str
    covariate_ref : ndarray (p,)
        Reference value of every covariate: exponents are reported there.
    by_taxon : bool
        Slopes vary by taxon about the overall slope.
    traits : ndarray (n_taxa, q)
        Taxon traits minus their reference values (the mean over taxa).
    trait_names : list of str
    trait_ref : ndarray (q,)
    eig_vectors, eig_values : ndarray or None
        Eigen-decomposition of the phylogenetic correlation ``C`` (taxa in the table's order), or ``None``
        without a tree.
    beta_sd, tau_beta_scale, gamma_sd : ndarray
        Prior SD of each slope, half-normal scale of its spread over taxa, prior SD of each trait slope.
    """

    covariates: np.ndarray
    covariate_names: list[str] = field(default_factory=list)
    covariate_ref: np.ndarray = field(default_factory=lambda: np.zeros(0))
    by_taxon: bool = False
    traits: np.ndarray = field(default_factory=lambda: np.zeros((0, 0)))
    trait_names: list[str] = field(default_factory=list)
    trait_ref: np.ndarray = field(default_factory=lambda: np.zeros(0))
    eig_vectors: np.ndarray | None = None
    eig_values: np.ndarray | None = None
    beta_sd: np.ndarray = field(default_factory=lambda: np.zeros(0))
    tau_beta_scale: np.ndarray = field(default_factory=lambda: np.zeros(0))
    gamma_sd: np.ndarray = field(default_factory=lambda: np.zeros(0))

    @property
    def p(self) -> int:
        """Number of junction covariates."""
        return len(self.covariate_names)

    @property
    def q(self) -> int:
        """Number of taxon traits."""
        return len(self.trait_names)

    @property
    def phylo(self) -> bool:
        """Taxa are correlated along a tree."""
        return self.eig_vectors is not None

    @property
    def empty(self) -> bool:
        """No covariate, trait or tree."""
        return self.p == 0 and self.q == 0 and not self.phylo


def slope_prior_scales(values: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Prior SD of each column's slope and half-normal scale of its spread over taxa.

    Both are stated per one SD of the column (:data:`SLOPE_PRIOR_PER_SD`,
    :data:`SLOPE_SPREAD_PRIOR_PER_SD`), so the prior means the same for a covariate in generations or in
    log10 units. A constant column gets unit scale (its slope is not identified; the caller refuses it).
    """
    values = np.asarray(values, dtype=float)
    if values.ndim == 1:
        values = values[:, None]
    sd = values.std(axis=0) if len(values) else np.ones(values.shape[1])
    sd = np.where(sd > 0, sd, 1.0)
    return SLOPE_PRIOR_PER_SD / sd, SLOPE_SPREAD_PRIOR_PER_SD / sd
