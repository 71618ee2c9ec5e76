"""The one-file HTML report of a fit and its law comparison: the answer first, then evidence and checks.

Everything is read from the structured results: the :class:`~allobranch.inference.results.FitResult`
(exponents, diagnostics, warnings, settings with the sampling attempts) and a law comparison
(:class:`~allobranch.comparison.compare.LawComparison`, or
:class:`~allobranch.reporting.saved_comparison.SavedComparison` read from its CSV files).
"""

from __future__ import annotations

import os
from dataclasses import asdict
from pathlib import Path

import matplotlib.pyplot as plt
import pandas as pd

from allobranch.comparative.summaries import covariate_summary, reference_text
from allobranch.comparison.ranges import range_lines
from allobranch.comparison.verdict import VERDICT_RULE
from allobranch.conventions import LAWS_OVER_RANGE_FILE, NAIVE_VS_MODEL_COLUMNS, POPULATION, hdi_label
from allobranch.inference.diagnostics import ESS_MIN, RHAT_MAX
from allobranch.reporting.attempts import attempts_sentence, attempts_table, parametrization_note
from allobranch.reporting.checks import CHECKS, PPP_TAIL, ppc_checks, ppc_pvalues, ppc_warnings
from allobranch.reporting.figures import law_display, make_figures
from allobranch.reporting.fit_outputs import diagnostics_with_sampler, hdi_prob_of
from allobranch.reporting.html import write_html_report
from allobranch.reporting.plots._common import hdi_percent
from allobranch.reporting.plots.laws import clip_note
from allobranch.reporting.saved_comparison import SavedComparison
from allobranch.reporting.tables import rounded
from allobranch.reporting.warning_groups import merge_fit_and_comparison

__all__ = ["SavedComparison", "answer_table", "build_report", "methods_paragraph"]

MODEL_WORDS = """\
Each reading is modelled on the log scale as its true radius plus measurement error ({error}). The true
daughter radii of a junction vary about their common level with an asymmetry scale sigma_asym; the true
parent radius follows the branching law r0 = (sum ri^a)^(1/a) up to a junction-level biological deviation
sigma_dev ({deviation}).

The exponent a is partially pooled: a population mean mu, taxon exponents around it (SD tau_taxon) and
specimen exponents around their taxon's (SD tau_specimen). The true radii are integrated out junction by
junction (exact Gaussian algebra plus a second-order expansion of the law), leaving one likelihood term per
junction, which is also the unit of leave-one-out cross-validation.

Sampling: {sampler} NUTS, {chains} chains of {draws} draws after {tune} tuning steps, seed {seed}."""

ERROR_WORDS = {
    "known": "relative error given by the user",
    "repeats": "relative error estimated from repeat readings",
    "absolute_only": "absolute standard errors given per reading",
    "unknown": "not given, so it cannot be told apart from biological deviation",
}

ASSUMPTIONS = (
    "Radii are measured consistently along each segment (e.g. mid-segment), and segmentation is unbiased.",
    "Measurement errors are independent between readings and normal on the log scale (relative error) or on "
    "the radius scale (absolute error).",
    "The law holds for each junction up to a junction-level deviation; junctions are independent given the "
    "exponents.",
    "Exponents vary between taxa and specimens but not along the tree (no size or generation covariate).",
)

#: Columns of the law-evidence tables shown in the report.
EVIDENCE_SHOWN: tuple[str, ...] = (
    "scope",
    "law",
    "elpd_diff",
    "dse",
    "weight",
    "log10_bf",
    "p_rope",
    "n_high_k",
)


def covariates_sentence(result) -> str:
    """What the covariate and tree terms mean, for the report ('' without them)."""
    parts = []
    at = reference_text(result)
    if at:
        parts.append(
            f"Each junction's exponent is its specimen's exponent plus a slope times the covariate's distance "
            f"from its reference value; the specimen, taxon and population exponents hold at {at}."
        )
    tree = result.settings.get("phylogeny")
    if tree:
        pruned = f"; tips without junctions pruned: {', '.join(tree['pruned'])}" if tree.get("pruned") else ""
        parts.append(
            f"Taxon exponents are correlated along the tree in {tree['source']} (Brownian motion scaled by "
            f"Pagel's lambda, estimated; see the variance table){pruned}."
        )
    return " ".join(parts)


def methods_paragraph(result, hdi_prob: float | None = None) -> str:
    """A methods paragraph for a manuscript, filled in from the fit's settings.

    Parameters
    ----------
    result : FitResult
    hdi_prob : float, optional
        Probability of the intervals reported; default: the one the fit recorded, else 0.9.

    Returns
    -------
    str
    """
    s = result.settings
    t = result.table
    v = result.provenance.get("versions", {})
    level = hdi_label(hdi_prob_of(result, hdi_prob)).replace(" HDI", "")
    return (
        f"Branching exponents were estimated with allobranch {v.get('allobranch', '')} from {t.n_junctions} "
        f"junctions of {len(t.specimens)} specimens in {len(t.taxa)} taxa. Radii were analysed on the log "
        f"scale with an errors-in-variables hierarchical model in which the parent radius follows "
        f"r0^a = sum ri^a up to a junction-level deviation, the true daughter radii are latent and integrated "
        f"out, measurement error is {ERROR_WORDS.get(s.get('error_mode'), '')}, and exponents are partially "
        f"pooled across taxa and specimens. The posterior was sampled with the No-U-Turn sampler "
        f"({s.get('sampler')}; {s.get('chains')} chains, {s.get('draws')} draws after {s.get('tune')} "
        f"tuning steps); convergence was checked with rank-normalised R-hat (<= {RHAT_MAX}), bulk and tail "
        f"effective sample sizes (>= {ESS_MIN}) and divergences (PyMC {v.get('pymc', '')}, ArviZ "
        f"{v.get('arviz', '')}). We report posterior means with {level} highest-density intervals."
    )


def _law_values(evidence: pd.DataFrame | None) -> dict[str, float]:
    if evidence is None or evidence.empty:
        return {}
    return {
        str(k): float(v) for k, v in evidence[["law", "value"]].drop_duplicates("law").itertuples(index=False)
    }


def _verdict_label(verdict: str, values: dict[str, float]) -> str:
    return law_display(verdict, values[verdict]) if verdict in values else str(verdict)


def answer_table(
    exponents: pd.DataFrame,
    verdicts: pd.DataFrame | None = None,
    evidence: pd.DataFrame | None = None,
    junctions: dict[str, int] | None = None,
) -> pd.DataFrame:
    """The report's answer: population and taxon exponents with their interval and law verdict.

    Parameters
    ----------
    exponents : pandas.DataFrame
        ``FitResult.exponents()`` (``attrs["hdi_prob"]`` names the interval's column).
    verdicts : pandas.DataFrame, optional
        Columns ``scope`` (``"population"`` or a taxon), ``verdict`` and ``reason``.
    evidence : pandas.DataFrame, optional
        The law evidence (columns ``law``, ``value``), for the laws' display names.
    junctions : dict of str to int, optional
        Junctions per taxon.

    Returns
    -------
    pandas.DataFrame
        One row per population and taxon estimate: ``estimate``, ``junctions``, ``exponent a`` (posterior
        mean), the interval (e.g. ``"90% HDI"``), and with verdicts ``verdict`` and ``reason``.
    """
    label = hdi_percent(exponents)
    rows = exponents[exponents["level"].isin([POPULATION, "taxon"])]
    by_scope = (
        {}
        if verdicts is None
        else {str(s): (v, r) for s, v, r in verdicts[["scope", "verdict", "reason"]].itertuples(index=False)}
    )
    values = _law_values(evidence)
    junctions = junctions or {}
    out = []
    for row in rows.itertuples(index=False):
        population = row.level == POPULATION
        scope = POPULATION if population else str(row.group)
        entry = {
            "estimate": "all taxa (population)" if population else str(row.group),
            "junctions": sum(junctions.values()) if population else junctions.get(str(row.group)),
            "exponent a": f"{row.mean:.2f}",
            label: f"[{row.hdi_low:.2f}, {row.hdi_high:.2f}]",
        }
        if verdicts is not None:
            verdict, reason = by_scope.get(scope, ("—", "not compared"))
            entry.update({"verdict": _verdict_label(str(verdict), values), "reason": str(reason)})
        out.append(entry)
    return pd.DataFrame(out)


def _evidence_tables(laws) -> dict:
    """The law-comparison tables of the report (display names, rounded)."""
    evidence = laws.evidence.copy()
    values = _law_values(evidence)
    evidence["law"] = [law_display(law, value) for law, value in zip(evidence["law"], evidence["value"])]
    shown = evidence[[c for c in EVIDENCE_SHOWN if c in evidence]].round(3)
    population = shown[shown["scope"] == POPULATION].drop(columns="scope")
    verdicts = laws.verdicts.copy()
    verdicts["verdict"] = [_verdict_label(str(v), values) for v in verdicts["verdict"]]
    return {
        "laws": population if len(population) else shown,
        "laws_all_scopes": shown if shown["scope"].nunique() > 1 else None,
        "verdicts": verdicts,
    }


def _law_range_text(laws) -> str:
    """One paragraph on the laws over covariate ranges ('' when the comparison checked none)."""
    lines = range_lines(getattr(laws, "over_range", None))
    return (
        f"Laws over a covariate range (ROPE only; {LAWS_OVER_RANGE_FILE}): {' '.join(lines)}" if lines else ""
    )


def _checks_table(pvalues: pd.DataFrame) -> pd.DataFrame:
    out = pvalues.copy()
    out["check"] = out["check"].map(CHECKS)
    return out.round(3)


def build_report(
    result,
    path: str | os.PathLike,
    *,
    laws=None,
    width: str = "single",
    title: str = "Branching-exponent analysis",
    hdi_prob: float | None = None,
    seed: int | None = None,
) -> Path:
    """Write the HTML report of ``result`` (a FitResult) to ``path``.

    Parameters
    ----------
    result : FitResult
    path : path-like
        Output HTML file.
    laws : LawComparison or SavedComparison, optional
        The law comparison; when given, its verdicts, evidence, warnings and figure are included.
    width : {"single", "double"}
        Figure width.
    title : str
        Report title (say here when the data are simulated).
    hdi_prob : float, optional
        Probability of the intervals; default: the one the fit recorded (``settings["hdi_prob"]``), else
        :data:`~allobranch.conventions.HDI_PROB`.
    seed : int, optional
        Seed of the posterior predictive replicates; default: the fit's seed.

    Returns
    -------
    pathlib.Path
    """
    s = result.settings
    hdi_prob = hdi_prob_of(result, hdi_prob)
    seed = int(seed if seed is not None else s.get("seed", 0))
    exponents = result.exponents(hdi_prob)
    label = hdi_percent(exponents)
    checks = ppc_checks(result, seed=seed)
    pvalues = ppc_pvalues(checks)
    figs = make_figures(
        result, laws.laws_table() if laws is not None else None, width=width, checks=checks, pvalues=pvalues
    )
    t = result.table
    n_flags = len(t.report.flags)
    warnings = merge_fit_and_comparison(result.warnings, laws.warnings if laws is not None else ())
    warnings += ppc_warnings(pvalues)
    if n_flags:
        warnings.append(
            f"{n_flags} junction(s) were flagged during validation (kept in the model); see the data section."
        )
    junctions = t.data["taxon"].astype(str).value_counts().to_dict()
    evidence = _evidence_tables(laws) if laws is not None else {}
    n_draws = checks.attrs.get("n_draws")
    answer_notes = [
        f"Exponent a: posterior mean and {label} (highest-density interval) of the hierarchical "
        "model, which accounts for measurement error."
        + (f" Exponents hold at {reference_text(result)}." if reference_text(result) else "")
    ]
    covs = covariate_summary(result, hdi_prob_of(result, None))
    answer_notes.append(
        "Verdict: a law, 'none' (of the laws compared) or 'undecided', by the decision rule under Evidence."
        if laws is not None
        else "No law comparison was given: run 'allobranch compare ... --fit FIT_DIR/fit.nc' into the "
        "same folder for verdicts."
    )
    try:
        path = write_html_report(
            path,
            title=title,
            answer=answer_table(
                exponents,
                laws.verdicts if laws is not None else None,
                laws.evidence if laws is not None else None,
                junctions,
            ),
            answer_figure={
                f"Exponents with {label}s, population, taxa and specimens, and the laws compared": figs[
                    "exponents"
                ]
            },
            answer_notes=answer_notes,
            answer_heading=f"Branching exponent per taxon ({label})",
            **evidence,
            verdict_rule=VERDICT_RULE if laws is not None else "",
            law_ranges=_law_range_text(laws),
            law_figures=None if laws is None else {f"Law comparison. {clip_note()}": figs["law_comparison"]},
            no_laws="No law comparison in this result folder.",
            checks=_checks_table(pvalues),
            checks_text=(
                f"Replicated data drawn from the fitted model at {n_draws} posterior draws (seed {seed}) "
                "are compared with the data: the law's residual (observed log parent minus the law's "
                "prediction from the observed daughters, at each draw's exponent) and the split "
                "(smaller over larger daughter). p is the share of replicates whose statistic is at "
                f"least the observed one; outside [{PPP_TAIL:g}, {1 - PPP_TAIL:g}] the check fails."
            ),
            check_figures={
                "Law residual: observed (black) against replicated (blue), by taxon": figs["ppc_residual"],
                "Split of the daughters: observed against replicated, by taxon": figs["ppc_split"],
            },
            exponents=rounded(exponents),
            naive=rounded(result.naive_vs_model(hdi_prob)[list(NAIVE_VS_MODEL_COLUMNS)]),
            covariates=rounded(covs) if len(covs) else None,
            covariates_text=covariates_sentence(result),
            exponent_figures={
                "Naive per-junction exponents beside the model": figs["naive_vs_model"],
                **{
                    f"Exponent along {name[len('covariate_') :]}: population curve with its interval, "
                    "junctions' naive exponents (grey), classic laws; dotted line: the reference value": fig
                    for name, fig in figs.items()
                    if name.startswith("covariate_")
                },
                **(
                    {"Taxon exponents beside the taxa's tree": figs["tree_exponents"]}
                    if "tree_exponents" in figs
                    else {}
                ),
            },
            warnings=warnings,
            warning_notes=[*result.notes, *getattr(laws, "notes", [])],
            attempts=attempts_table(s),
            attempts_sentence=attempts_sentence(s),
            parametrization=parametrization_note(s),
            diagnostics=rounded(diagnostics_with_sampler(result)),
            diagnostic_figures={"Rank plots and energy": figs["diagnostics"]},
            data_summary=_data_summary(result),
            validation_flags=t.report.to_frame(),
            data_figures={"Junction ratios with iso-exponent curves": figs["ratio_plane"]},
            model_description=MODEL_WORDS.format(
                error=ERROR_WORDS.get(s.get("error_mode"), ""),
                deviation=result.spec.deviation,
                sampler=s.get("sampler"),
                chains=s.get("chains"),
                draws=s.get("draws"),
                tune=s.get("tune"),
                seed=s.get("seed"),
            ),
            priors=pd.DataFrame(
                [{"parameter": k, "scale": v} for k, v in asdict(result.spec.priors).items()]
            ),
            assumptions=ASSUMPTIONS,
            methods=methods_paragraph(result, hdi_prob),
            provenance={k: v for k, v in result.provenance.items() if k != "command"},
        )
    finally:
        for fig in figs.values():
            plt.close(fig)
    return Path(path)


def _data_summary(result) -> dict:
    t = result.table
    counts = t.data["n_daughters"].value_counts().sort_index()
    return {
        "source": t.source,
        "junctions": t.n_junctions,
        "taxa": len(t.taxa),
        "specimens": len(t.specimens),
        "daughters per junction": ", ".join(f"{k}: {v}" for k, v in counts.items()),
        "sizes": f"{t.mapping.measure} in {t.unit}",
        "measurement error": ERROR_WORDS.get(result.settings.get("error_mode"), ""),
        "flagged / excluded rows": f"{len(t.report.flags)} / {len(t.report.excluded)}",
    }
