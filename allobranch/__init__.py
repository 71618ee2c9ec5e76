"""allobranch: comparative allometry of branching exponents.

Pipeline: read and validate (:mod:`allobranch.intake`) -> junction geometry (:mod:`allobranch.geometry`)
-> model (:mod:`allobranch.model`) -> inference (:mod:`allobranch.inference`) -> law comparison
(:mod:`allobranch.comparison`) -> summaries, figures and reports (:mod:`allobranch.reporting`).
"""

from __future__ import annotations

__version__ = "0.1.0"

from importlib import import_module

from allobranch.errors import AllobranchError, InputError, Problem  # noqa: E402

#: Public names and the module each comes from; imported on first use so that the command line's light
#: commands (``--help``, ``check``) do not import the sampler stack.
_LAZY = {
    "ColumnMapping": "allobranch.intake.mapping",
    "JunctionTable": "allobranch.intake.table",
    "ValidationReport": "allobranch.intake.table",
    "read_junctions": "allobranch.intake",
    "junction_geometry": "allobranch.geometry",
    "naive_summary": "allobranch.geometry",
    "ModelSpec": "allobranch.model.spec",
    "Priors": "allobranch.model.spec",
    "simulate_junctions": "allobranch.model.simulate",
    "FitResult": "allobranch.inference.results",
    "fit": "allobranch.inference.fit",
    "compare_laws": "allobranch.comparison",
    "LawComparison": "allobranch.comparison.compare",
}


def __getattr__(name: str):
    if name in _LAZY:
        value = getattr(import_module(_LAZY[name]), name)
        globals()[name] = value
        return value
    raise AttributeError(f"module 'allobranch' has no attribute {name!r}")


def __dir__() -> list[str]:
    return sorted(set(globals()) | set(_LAZY))


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
    "LawComparison",
]
