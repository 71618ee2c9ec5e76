"""allobranch: comparative allometry of branching exponents.

Pipeline: read and validate (:mod:`allobranch.intake`) -> junction geometry (:mod:`allobranch.geometry`)
-> model (:mod:`allobranch.model`) -> inference (:mod:`allobranch.inference`) -> law comparison
(:mod:`allobranch.comparison`) -> summaries, figures and reports (:mod:`allobranch.reporting`).
"""

from __future__ import annotations

__version__ = "0.1.0"

from allobranch.errors import AllobranchError, InputError, Problem  # noqa: E402
from allobranch.lazy import lazy_getattr  # noqa: E402

#: Public names and the module each comes from; imported on first use so that the command line's light
#: commands (``--help``, ``check``) do not import the sampler stack.
_LAZY = {
    # read and validate
    "ColumnMapping": "allobranch.intake.mapping",
    "JunctionTable": "allobranch.intake.table",
    "ValidationReport": "allobranch.intake.table",
    "read_junctions": "allobranch.intake",
    # junction geometry
    "junction_geometry": "allobranch.geometry",
    "naive_summary": "allobranch.geometry",
    "junction_table": "allobranch.reporting.junctions",
    "write_junctions": "allobranch.reporting.junctions",
    # model and inference
    "ModelSpec": "allobranch.model.spec",
    "Priors": "allobranch.model.spec",
    "simulate_junctions": "allobranch.model.simulate",
    "Design": "allobranch.planning.design",
    "simulate": "allobranch.planning.design",
    "plan_study": "allobranch.planning.plan",
    "calibrate": "allobranch.planning.calibrate",
    "Engine": "allobranch.engine",
    "FitResult": "allobranch.inference.results",
    "fit": "allobranch.inference.fit",
    # comparative analysis: covariates, traits, trees
    "attach_traits": "allobranch.comparative",
    "attach_tree": "allobranch.comparative",
    "read_tree": "allobranch.comparative",
    "Phylogeny": "allobranch.comparative",
    "covariate_summary": "allobranch.comparative.summaries",
    "exponent_curve": "allobranch.comparative.summaries",
    "junction_points": "allobranch.comparative.summaries",
    "compare_covariates": "allobranch.comparison.slopes",
    # law comparison
    "compare_laws": "allobranch.comparison",
    "LawComparison": "allobranch.comparison.compare",
    "VERDICT_RULE": "allobranch.comparison.verdict",
    "SavedComparison": "allobranch.reporting.saved_comparison",
    "write_comparison": "allobranch.reporting.saved_comparison",
    # tables, figures and the report
    "write_fit_outputs": "allobranch.reporting.fit_outputs",
    "fit_summary_markdown": "allobranch.reporting.tables",
    "export_table": "allobranch.reporting.tables",
    "figure": "allobranch.reporting.style",
    "save_figure": "allobranch.reporting.style",
    "plot_diagnostics": "allobranch.reporting.plots",
    "plot_exponents": "allobranch.reporting.plots",
    "plot_law_comparison": "allobranch.reporting.plots",
    "plot_naive_vs_model": "allobranch.reporting.plots",
    "plot_ppc_check": "allobranch.reporting.plots",
    "plot_ratio_plane": "allobranch.reporting.plots",
    "plot_exponent_curve": "allobranch.reporting.plots.covariate",
    "plot_tree_exponents": "allobranch.reporting.plots.phylogeny",
    "make_figures": "allobranch.reporting.figures",
    "write_figures": "allobranch.reporting.figures",
    "build_report": "allobranch.reporting.report",
}


__getattr__ = lazy_getattr(__name__, _LAZY, globals())


def __dir__() -> list[str]:
    return sorted(set(globals()) | set(_LAZY))


__all__ = ["__version__", "AllobranchError", "InputError", "Problem", *_LAZY]
