"""Comparative analysis: taxon traits and the taxa's tree, attached to a junction table for the model's
linear predictor (:class:`allobranch.ModelSpec` ``covariates=``, ``traits=``, ``phylogeny=``)."""

from allobranch.comparative.phylogeny import (
    Phylogeny,
    attach_tree,
    parse_tree,
    read_tree,
    restore_attachments,
)
from allobranch.comparative.traits import attach_traits, read_traits

__all__ = [
    "Phylogeny",
    "attach_traits",
    "attach_tree",
    "parse_tree",
    "read_traits",
    "read_tree",
    "restore_attachments",
]
