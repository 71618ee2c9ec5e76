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

#: Name of the built-in covariate: log10 of the parent's size in the table's unit, taken from the daughters
#: (see :func:`covariate_values`).
LOG_PARENT_SIZE = "log_parent_size"
#: Name of the built-in covariate: log10 of the parent's own reading (biased under measurement error; for
#: comparison).
LOG_PARENT_READING = "log_parent_reading"
#: Exponent of the power sum that turns the daughters into a parent size for :data:`LOG_PARENT_SIZE` (the
#: middle of the classic laws' range; a change of this value shifts every junction's covariate by nearly
#: the same amount, which moves the reference, not the slope).
SIZE_FROM_DAUGHTERS_EXPONENT = 2.5
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
    pagel_lambda : float or None
        Pagel's lambda fixed at this value under the tree; ``None``: estimated.
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
    pagel_lambda: float | None = None
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


def covariate_values(table, name: str) -> np.ndarray:
    """A junction covariate's values: a column read with the table, or a built-in size covariate.

    :data:`LOG_PARENT_SIZE` is log10 of the parent's size in the table's unit (and measure) estimated from
    its daughters, ``(sum d_i^2.5)^(1/2.5)``, not from the parent's own reading: the reading's measurement
    error would enter both the covariate and the parent's residual, and the slope would absorb it (a
    simulated slope of -0.35 came out near -0.48 at 5 % error when the reading was used).
    :data:`LOG_PARENT_READING` is that reading, for comparison.

    Raises
    ------
    InputError
        When the covariate is neither read with the table nor built in, or does not vary.
    """
    from allobranch.errors import InputError
    from allobranch.intake.table import COVARIATE_PREFIX
    from allobranch.intake.units import radius_factor

    if name in table.covariate_names:
        values = table.data[COVARIATE_PREFIX + name].to_numpy(dtype=float)
    elif name in (LOG_PARENT_SIZE, LOG_PARENT_READING):
        factor = radius_factor(table.mapping.unit, table.mapping.measure)
        if name == LOG_PARENT_READING:
            size = table.parent / factor
        else:
            d = np.nan_to_num(table.daughters / factor, nan=0.0)
            a0 = SIZE_FROM_DAUGHTERS_EXPONENT
            size = np.sum(d**a0, axis=1) ** (1.0 / a0)
        values = np.log10(size)
    else:
        have = ", ".join([LOG_PARENT_SIZE, LOG_PARENT_READING, *table.covariate_names])
        raise InputError(
            f"{table.source}: the covariate '{name}' was not read with the table (available: {have}); "
            f"name its column with --covariate (or covariates=[...] in read_junctions / [columns] "
            f"covariates in the recipe)"
        )
    if np.ptp(values) == 0:
        raise InputError(
            f"{table.source}: the covariate '{name}' has the same value ({values[0]:g}) in every junction, so "
            "its slope cannot be estimated; leave it out of the model"
        )
    return values


def build_linear_terms(table, data, spec) -> LinearTerms | None:
    """The covariate, trait and phylogeny terms a spec asks for, from a table (``None`` when none).

    Parameters
    ----------
    table : JunctionTable
    data : ModelData
        The model arrays of ``table`` (taxa in their order).
    spec : ModelSpec

    Returns
    -------
    LinearTerms or None
    """
    from allobranch.errors import InputError

    n, nt = data.n_junctions, len(data.taxa)
    cols, refs = [], []
    for name in spec.covariates:
        values = covariate_values(table, name)
        ref = float(spec.covariate_ref.get(name, values.mean()))
        cols.append(values - ref)
        refs.append(ref)
    X = np.column_stack(cols) if cols else np.zeros((n, 0))
    traits = np.zeros((nt, 0))
    trait_ref = np.zeros(0)
    if spec.traits:
        tt = table.taxon_traits
        if tt is None:
            raise InputError(
                f"{table.source}: the model names taxon traits ({', '.join(spec.traits)}) but no trait table is "
                "attached; give one with --traits FILE (allobranch.comparative.attach_traits in Python)"
            )
        missing = [c for c in spec.traits if c not in tt.columns]
        if missing:
            raise InputError(
                f"the trait table has no column {', '.join(repr(c) for c in missing)}; its columns are "
                f"{', '.join(repr(c) for c in tt.columns)}"
            )
        raw = tt.loc[data.taxa, list(spec.traits)].to_numpy(dtype=float)
        for m, name in enumerate(spec.traits):
            if np.ptp(raw[:, m]) == 0:
                raise InputError(f"the trait '{name}' has the same value for every taxon; leave it out")
        trait_ref = raw.mean(axis=0)
        traits = raw - trait_ref
    vecs = vals = None
    if spec.phylogeny and table.phylogeny is not None and nt > 1:
        C = table.phylogeny.correlation(data.taxa)
        vals, vecs = np.linalg.eigh(C)
    lin = LinearTerms(
        covariates=X,
        covariate_names=list(spec.covariates),
        covariate_ref=np.asarray(refs, dtype=float),
        by_taxon=bool(spec.covariates_by_taxon and spec.covariates and nt > 1),
        traits=traits,
        trait_names=list(spec.traits),
        trait_ref=trait_ref,
        eig_vectors=vecs,
        eig_values=vals,
        pagel_lambda=spec.pagel_lambda if vecs is not None else None,
    )
    lin.beta_sd, lin.tau_beta_scale = slope_prior_scales(X + np.asarray(refs)) if cols else (np.zeros(0),) * 2
    lin.gamma_sd = slope_prior_scales(traits)[0] if spec.traits else np.zeros(0)
    return None if lin.empty else lin


def junction_exponents_at(
    post, chain: int, draw: int, specimen_idx: np.ndarray, taxon_idx: np.ndarray, X: np.ndarray | None
) -> np.ndarray:
    """Every junction's exponent at one posterior draw: its specimen's exponent plus the covariate terms.

    Parameters
    ----------
    post : xarray.Dataset
        Posterior with ``a_specimen`` and, with covariates, ``beta`` or ``beta_taxon``.
    chain, draw : int
    specimen_idx, taxon_idx : ndarray of int (n,)
    X : ndarray (n, p) or None
        Covariates minus their reference values (:attr:`LinearTerms.covariates`).
    """
    a = np.asarray(post["a_specimen"].values[chain, draw], dtype=float)[specimen_idx]
    if X is None or X.shape[1] == 0 or "beta" not in post:
        return a
    if "beta_taxon" in post:
        slopes = np.asarray(post["beta_taxon"].values[chain, draw], dtype=float)[taxon_idx]
    else:
        slopes = np.broadcast_to(np.asarray(post["beta"].values[chain, draw], dtype=float), X.shape)
    return a + np.einsum("jk,jk->j", X, slopes)
