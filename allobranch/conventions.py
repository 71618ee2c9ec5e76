"""One home for the names and numbers the package shares: vocabulary, defaults, column sets, file names.

Everything here is a plain constant or a one-line formatter (no imports), so the command line's light
commands can use it. A module that needs one of these values imports it from here; it never writes the
literal again. Thresholds that come with a source live beside the code that applies them and say where
they come from: the convergence thresholds in :mod:`allobranch.inference.diagnostics`, the verdict rule's in
:mod:`allobranch.comparison.verdict`, the sampler's defaults in :data:`allobranch.model.spec.SAMPLER_DEFAULTS`.

Vocabulary
----------
``population``
    The top level of the hierarchy (the exponent ``mu`` shared by all taxa): the ``level`` of its row in the
    exponents table and the ``scope`` of the law comparison in which every taxon shares the law's exponent
    (:data:`POPULATION`). Not to be confused with :data:`allobranch.intake.validate.DEFAULT_TAXON`, the
    label of the one taxon of a table without a taxon column.
``specimen``
    One animal, plant or cast (a group of junctions within a taxon). ``spec`` always means a model
    specification (:class:`~allobranch.model.spec.ModelSpec`), never a specimen.
``rel_error``
    The relative measurement error (SD of a reading on the log scale).
``tau_taxon``, ``tau_specimen``
    Standard deviations (never variances) of the taxon and specimen exponents about their parent level.
"""

from __future__ import annotations

# -- vocabulary ------------------------------------------------------------------------------------------
#: The top level of the hierarchy: the exponents table's ``level`` of the shared exponent ``mu`` and the
#: law comparison's scope in which every taxon shares the law's exponent.
POPULATION = "population"
#: Levels of the exponent hierarchy, top to bottom (the exponents table's ``level`` column).
LEVELS: tuple[str, ...] = (POPULATION, "taxon", "specimen")
#: Scope label that older result folders (``laws.csv``, ``laws_verdicts.csv``) used for :data:`POPULATION`;
#: read as :data:`POPULATION`.
OLD_POPULATION_SCOPE = "overall"

# -- defaults --------------------------------------------------------------------------------------------
#: Default probability of the highest-density intervals of every table, figure and report. A fit records
#: the level its tables use in ``settings["hdi_prob"]``; reports read it from there.
HDI_PROB = 0.9


def hdi_label(hdi_prob: float | None) -> str:
    """How every table, figure and report names an interval: ``"90% HDI"`` (``"HDI"`` when unknown).

    Examples
    --------
    >>> hdi_label(0.9), hdi_label(0.95), hdi_label(None)
    ('90% HDI', '95% HDI', 'HDI')
    """
    return "HDI" if hdi_prob is None else f"{100 * float(hdi_prob):.4g}% HDI"


# -- column sets of the output tables --------------------------------------------------------------------
#: The tidy summary of one estimated quantity, and the columns of the exponents table
#: (:meth:`FitResult.exponents`, ``exponents.csv``), in order: the tidy summary first (level, group, mean, sd, interval, R-hat, bulk ESS), then the rest.
SUMMARY_STATS: tuple[str, ...] = ("mean", "sd", "hdi_low", "hdi_high", "r_hat", "ess_bulk")
EXPONENT_COLUMNS: tuple[str, ...] = ("level", "group", *SUMMARY_STATS, "taxon", "ess_tail", "fixed")
#: Columns of ``covariates.csv``: slopes of covariates and traits, and the covariates' reference values.
COVARIATE_COLUMNS: tuple[str, ...] = ("term", "group", *SUMMARY_STATS, "reference", "meaning")
#: Columns a figure needs from an exponents table.
EXPONENT_FIGURE_COLUMNS: tuple[str, ...] = tuple(
    c for c in EXPONENT_COLUMNS if c not in ("ess_tail", "fixed")
)
#: Columns of the naive-versus-model table shown in summaries and reports.
NAIVE_VS_MODEL_COLUMNS: tuple[str, ...] = (
    "taxon",
    "mean",
    "hdi_low",
    "hdi_high",
    "naive_median",
    "naive_q25",
    "naive_q75",
    "n_junctions",
    "n_no_root",
)
#: Columns of the long law-evidence table (``LawComparison.evidence``, ``laws.csv``).
EVIDENCE_COLUMNS: tuple[str, ...] = (
    "scope",
    "law",
    "value",
    "elpd",
    "elpd_se",
    "elpd_diff",
    "dse",
    "weight",
    "p_loo",
    "n_high_k",
    "log10_bf",
    "bf_method",
    "log10_bf_narrow",
    "log10_bf_wide",
    "p_rope",
)
#: Columns of ``LawComparison.laws_table()`` (what the law-comparison figure draws).
LAWS_TABLE_COLUMNS: tuple[str, ...] = (
    "scope",
    "law",
    "value",
    "elpd",
    "elpd_diff",
    "dse",
    "weight",
    "log10_bf",
    "p_rope",
)
#: Per-law evidence columns of ``LawComparison.by_taxon``, each suffixed ``_<label>``.
BY_TAXON_LAW_COLUMNS: tuple[str, ...] = (
    "p_rope",
    "log10_bf",
    "log10_bf_narrow",
    "log10_bf_wide",
    "bf_method",
    "elpd_diff",
    "dse",
    "weight",
)
#: Columns of the verdict table (``LawComparison.verdicts``, ``laws_verdicts.csv``).
VERDICT_COLUMNS: tuple[str, ...] = ("scope", "verdict", "reason")
#: Columns of the comparison's warnings table (``laws_warnings.csv``): the kind a report groups it under
#: and the message itself.
WARNING_COLUMNS: tuple[str, ...] = ("kind", "message")

# -- output file names -----------------------------------------------------------------------------------
#: The saved fit (NetCDF) in a result folder.
FIT_FILE = "fit.nc"
#: Tables and summary of a fit's result folder.
EXPONENTS_FILE, VARIANCE_FILE, DIAGNOSTICS_FILE, SUMMARY_FILE = (
    "exponents.csv",
    "variance.csv",
    "diagnostics.csv",
    "summary.md",
)
#: Every file of a fit's result folder.
FIT_FILES: tuple[str, ...] = (EXPONENTS_FILE, VARIANCE_FILE, DIAGNOSTICS_FILE, SUMMARY_FILE, FIT_FILE)
#: Written beside them when the model has covariates or traits (:data:`COVARIATE_COLUMNS`), and by
#: ``compare`` when it has covariates (each slope against zero).
COVARIATES_FILE, SLOPES_FILE = "covariates.csv", "slopes.csv"
#: Files of a law comparison: evidence, per-taxon view, verdicts, warnings and the Markdown report.
LAWS_FILE, LAWS_BY_TAXON_FILE, LAWS_VERDICTS_FILE, LAWS_WARNINGS_FILE, LAWS_REPORT_FILE = (
    "laws.csv",
    "laws_by_taxon.csv",
    "laws_verdicts.csv",
    "laws_warnings.csv",
    "laws.md",
)
#: Every file of a law comparison.
COMPARISON_FILES: tuple[str, ...] = (
    LAWS_FILE,
    LAWS_BY_TAXON_FILE,
    LAWS_VERDICTS_FILE,
    LAWS_WARNINGS_FILE,
    LAWS_REPORT_FILE,
)
#: Written beside them when the comparison checks the laws over a covariate range (``law_range``,
#: ``--law-range``).
LAWS_OVER_RANGE_FILE = "laws_over_range.csv"
#: The one-file HTML report in a result folder.
REPORT_FILE = "report.html"
#: Folder of the figure files inside a result folder.
FIGURES_DIR = "figures"
#: Per-junction geometry written by ``allobranch check --out``.
JUNCTIONS_FILE = "junctions.csv"
#: Figure file formats the figure writers accept.
FIGURE_FORMATS: tuple[str, ...] = ("pdf", "svg", "png", "eps", "tiff", "jpg")
