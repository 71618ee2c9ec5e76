"""allobranch: comparative allometry of branching exponents.

Pipeline: read and validate (:mod:`allobranch.intake`) -> junction geometry (:mod:`allobranch.geometry`)
-> model (:mod:`allobranch.model`) -> inference (:mod:`allobranch.inference`) -> law comparison
(:mod:`allobranch.comparison`) -> summaries, figures and reports (:mod:`allobranch.reporting`).
"""

from __future__ import annotations

__version__ = "0.1.0"

from allobranch.errors import AllobranchError, InputError, Problem  # noqa: E402
from allobranch.intake.mapping import ColumnMapping  # noqa: E402
from allobranch.intake.table import JunctionTable, ValidationReport  # noqa: E402
from allobranch.intake import read_junctions  # noqa: E402
from allobranch.geometry import junction_geometry, naive_summary  # noqa: E402
from allobranch.model.spec import ModelSpec, Priors  # noqa: E402
from allobranch.model.simulate import simulate_junctions  # noqa: E402
from allobranch.inference.results import FitResult  # noqa: E402
from allobranch.inference.fit import fit  # noqa: E402
from allobranch.comparison import compare_laws  # noqa: E402

__all__ = [
    "__version__",
    "AllobranchError",
    "InputError",
    "Problem",
    "ColumnMapping",
    "JunctionTable",
    "ValidationReport",
    "read_junctions",
    "junction_geometry",
    "naive_summary",
    "ModelSpec",
    "Priors",
    "simulate_junctions",
    "FitResult",
    "fit",
    "compare_laws",
]
