"""What the law comparison needs to know of the linear predictor: each taxon's marginal prior terms
(traits, tree) for the Savage-Dickey ratios, and whether taxa are tied by a tree."""

from __future__ import annotations

import numpy as np

from allobranch.comparison.bayes_factor import TaxonPrior
from allobranch.model.data import model_data
from allobranch.model.linear import build_linear_terms


def uses_tree(table, spec) -> bool:
    """Whether a fit of ``spec`` on ``table`` correlates the taxa along a tree."""
    return bool(spec.phylogeny and getattr(table, "phylogeny", None) is not None and len(table.taxa) > 1)


def taxon_prior_terms(table, spec) -> dict[str, TaxonPrior] | None:
    """Every taxon's :class:`~allobranch.comparison.bayes_factor.TaxonPrior` (``None`` without traits or
    a tree)."""
    if not spec.traits and not uses_tree(table, spec):
        return None
    data = model_data(table)
    lin = build_linear_terms(table, data, spec)
    if lin is None:
        return None
    trait_var = (
        (lin.traits**2 * np.asarray(lin.gamma_sd) ** 2).sum(axis=1) if lin.q else np.zeros(len(data.taxa))
    )
    diag = (
        np.einsum("ti,i,ti->t", lin.eig_vectors, lin.eig_values, lin.eig_vectors)
        if lin.phylo
        else np.ones(len(data.taxa))
    )
    return {
        t: TaxonPrior(float(trait_var[i]), float(diag[i]), bool(lin.phylo), lin.pagel_lambda)
        for i, t in enumerate(data.taxa)
    }
