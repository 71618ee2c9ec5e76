"""The one-file HTML report of a result folder: data, model in words, diagnostics, exponents, laws."""

from __future__ import annotations

import os
from dataclasses import asdict, dataclass, field
from pathlib import Path

import matplotlib.pyplot as plt
import pandas as pd

from allobranch.reporting.figures import make_figures
from allobranch.reporting.html import write_html_report
from allobranch.reporting.tables import rounded

#: File name of the report inside the result folder.
REPORT_FILE = "report.html"

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


def methods_paragraph(result) -> str:
    """A methods paragraph for a manuscript, filled in from the fit's settings."""
    s = result.settings
    t = result.table
    v = result.provenance.get("versions", {})
    return (
        f"Branching exponents were estimated with allobranch {v.get('allobranch', '')} from {t.n_junctions} "
        f"junctions of {len(t.specimens)} specimens in {len(t.taxa)} taxa. Radii were analysed on the log "
        f"scale with an errors-in-variables hierarchical model in which the parent radius follows "
        f"r0^a = sum ri^a up to a junction-level deviation, the true daughter radii are latent and integrated "
        f"out, measurement error is {ERROR_WORDS.get(s.get('error_mode'), '')}, and exponents are partially "
        f"pooled across taxa and specimens. The posterior was sampled with the No-U-Turn sampler "
        f"({s.get('sampler')}; {s.get('chains')} chains, {s.get('draws')} draws after {s.get('tune')} "
        f"tuning steps); convergence was checked with rank-normalised R-hat (<= 1.01), bulk and tail "
        f"effective sample sizes (>= 400) and divergences (PyMC {v.get('pymc', '')}, ArviZ "
        f"{v.get('arviz', '')}). We report posterior means with 90% highest-density intervals."
    )


@dataclass
class SavedComparison:
    """A law comparison read back from the files ``allobranch compare`` wrote (for the report)."""

    evidence: pd.DataFrame
    by_taxon: pd.DataFrame
    verdicts: pd.DataFrame
    warnings: list[str] = field(default_factory=list)

    @property
    def overall(self) -> pd.DataFrame:
        """Rows of the overall scope."""
        return self.evidence[self.evidence["scope"] == "overall"].reset_index(drop=True)

    def laws_table(self) -> pd.DataFrame:
        """The long evidence table (every scope)."""
        return self.evidence

    @classmethod
    def read(cls, folder: str | os.PathLike) -> "SavedComparison | None":
        """Read ``laws.csv``, ``laws_by_taxon.csv`` and ``laws_verdicts.csv`` from ``folder`` (None if absent)."""
        folder = Path(folder)
        names = ("laws.csv", "laws_by_taxon.csv", "laws_verdicts.csv")
        if not all((folder / n).is_file() for n in names):
            return None
        evidence, by_taxon, verdicts = (pd.read_csv(folder / n) for n in names)
        warnings = []
        md = folder / "laws.md"
        if md.is_file():
            text = md.read_text(encoding="utf-8").split("## Warnings", 1)
            if len(text) == 2:
                warnings = [line[2:] for line in text[1].splitlines() if line.startswith("- ") and line != "- none"]
        return cls(evidence=evidence, by_taxon=by_taxon, verdicts=verdicts, warnings=warnings)


def build_report(result, path: str | os.PathLike, *, laws=None, width: str = "single",
                 title: str = "Branching-exponent analysis") -> Path:
    """Write the HTML report of ``result`` (a FitResult) to ``path``.

    Parameters
    ----------
    result : FitResult
    path : path-like
        Output HTML file.
    laws : LawComparison, optional
        The law comparison; when given, its tables, verdicts and figure are included.
    width : {"single", "double"}
        Figure width.
    title : str
        Report title (say here when the data are simulated).
    """
    laws_long = laws.laws_table() if laws is not None else None
    figs = make_figures(result, laws_long, width=width)
    t = result.table
    s = result.settings
    warnings = list(result.warnings) + (list(laws.warnings) if laws is not None else [])
    n_flags = len(t.report.flags)
    if n_flags:
        warnings.append(f"{n_flags} junction(s) were flagged during validation (kept in the model); see the "
                        "data section.")
    data_summary = {
        "source": t.source, "junctions": t.n_junctions, "taxa": len(t.taxa), "specimens": len(t.specimens),
        "daughters per junction": ", ".join(f"{k}: {v}" for k, v in t.data["n_daughters"].value_counts().sort_index().items()),
        "sizes": f"{t.mapping.measure} in {t.unit}", "measurement error": ERROR_WORDS.get(s.get("error_mode"), ""),
    }
    priors = pd.DataFrame([{"parameter": k, "scale": v} for k, v in asdict(result.spec.priors).items()])
    checks = result.sampler_checks()
    diag = result.diagnostics()
    diag_table = pd.concat([diag, pd.DataFrame([{"parameter": f"sampler: {k}", "r_hat": v}
                                               for k, v in checks.items()])], ignore_index=True)
    try:
        path = write_html_report(
            path,
            title=title,
            warnings=warnings,
            data_summary=data_summary,
            validation_flags=t.report.to_frame(),
            data_figures={"Junction ratios with iso-exponent curves": figs["ratio_plane"],
                          "Posterior predictive check of the parent radius": figs["ppc_parent"]},
            model_description=MODEL_WORDS.format(error=ERROR_WORDS.get(s.get("error_mode"), ""),
                                                 deviation=result.spec.deviation, sampler=s.get("sampler"),
                                                 chains=s.get("chains"), draws=s.get("draws"),
                                                 tune=s.get("tune"), seed=s.get("seed")),
            priors=priors,
            assumptions=ASSUMPTIONS,
            diagnostics=rounded(diag_table),
            diagnostic_figures={"Rank plots and energy": figs["diagnostics"]},
            exponents=rounded(result.exponents()),
            naive=rounded(result.naive_vs_model()),
            exponent_figures={"Exponents with 90% HDIs": figs["exponents"],
                              "Naive per-junction exponents beside the model": figs["naive_vs_model"]},
            laws=None if laws is None else laws.overall,
            verdicts=() if laws is None else laws.verdicts,
            law_figures=None if laws is None else {"Law comparison": figs["law_comparison"]},
            methods=methods_paragraph(result),
            provenance={k: v for k, v in result.provenance.items() if k != "command"},
        )
    finally:
        for fig in figs.values():
            plt.close(fig)
    return Path(path)
