"""End to end through the command line: fit -> compare -> figures -> report, and the demo command.

Checks content, not only that files exist: figures are counted and their axes inspected, the HTML report is
parsed (every image embedded, warnings first, verdicts and caution present).
"""

from __future__ import annotations

from html.parser import HTMLParser
from pathlib import Path

import matplotlib
import pandas as pd
import pytest

import allobranch as ab
import allobranch.demo  # noqa: F401  (ab.demo below)
from allobranch.cli import main
from allobranch.reporting.figures import FIGURE_NAMES, make_figures

SHORT = ["--draws", "150", "--tune", "150", "--chains", "2", "--quiet"]


class _Images(HTMLParser):
    def __init__(self) -> None:
        super().__init__()
        self.srcs: list[str] = []
        self.text: list[str] = []

    def handle_starttag(self, tag, attrs):
        if tag == "img":
            self.srcs.append(dict(attrs).get("src", ""))

    def handle_data(self, data):
        self.text.append(data)


@pytest.fixture(scope="module")
def fit_dir(tmp_path_factory) -> Path:
    sim = ab.simulate_junctions(taxa=2, specimens_per_taxon=2, junctions_per_specimen=15, rel_error=0.05,
                                seed=11)
    folder = tmp_path_factory.mktemp("pipeline")
    csv = folder / "junctions.csv"
    sim.frame.to_csv(csv, index=False)
    out = folder / "results"
    mapping = ["--taxon", "taxon", "--specimen", "specimen", "--junction", "junction", "--parent", "parent",
               "--daughters", "d1,d2", "--rel-error", "0.05"]
    assert main(["fit", str(csv), *mapping, "--out", str(out), "--seed", "3", *SHORT]) == 0
    assert main(["compare", str(csv), *mapping, "--out", str(out), "--fit", str(out / "fit.nc"),
                 "--scope", "overall", "--seed", "3", *SHORT]) == 0
    return out


def test_figures_command_writes_every_figure(fit_dir):
    assert main(["figures", str(fit_dir), "--format", "png,pdf"]) == 0
    for name in FIGURE_NAMES:
        assert (fit_dir / "figures" / f"{name}.png").stat().st_size > 1000, name
        assert (fit_dir / "figures" / f"{name}.pdf").is_file(), name


def test_figures_from_a_real_fit_show_its_groups(fit_dir):
    matplotlib.use("Agg")
    result = ab.FitResult.load(fit_dir / "fit.nc")
    laws = pd.read_csv(fit_dir / "laws.csv")
    figs = make_figures(result, laws)
    assert set(figs) == set(FIGURE_NAMES)
    forest = figs["exponents"].axes[0]
    labels = [t.get_text() for t in forest.get_yticklabels()]
    exps = result.exponents()
    # one row per population / taxon / specimen estimate (2 taxa x 2 specimens + 2 taxa + population)
    assert len(labels) == len(exps) == 7
    for taxon in result.table.taxa:
        assert taxon in labels
    # reference lines at the three classic laws (Rall 1.5, da Vinci 2, Murray 3)
    xs = {round(line.get_xdata()[0], 6) for line in forest.get_lines() if len(set(line.get_xdata())) == 1}
    assert {1.5, 2.0, 3.0} <= xs


def test_report_command_embeds_everything(fit_dir):
    assert main(["report", str(fit_dir)]) == 0
    html = (fit_dir / "report.html").read_text(encoding="utf-8")
    parser = _Images()
    parser.feed(html)
    assert len(parser.srcs) >= 6 and all(s.startswith("data:image/") for s in parser.srcs)
    text = " ".join(parser.text)
    assert "research tool" in text and "undecided" in text or "murray" in text
    assert "http://" not in html and "https://" not in html
    # an existing report is not clobbered without --force (exit code 2, file unchanged)
    before = (fit_dir / "report.html").read_bytes()
    assert main(["report", str(fit_dir)]) == 2
    assert (fit_dir / "report.html").read_bytes() == before


def test_demo_command_runs_the_whole_path(tmp_path):
    out = tmp_path / "demo"
    assert main(["demo", "--out", str(out), "--draws", "80", "--tune", "80", "--chains", "2", "--quiet"]) == 0
    for name in ("exponents.csv", "variance.csv", "diagnostics.csv", "summary.md", "fit.nc", "laws.csv",
                 "laws_by_taxon.csv", "laws_verdicts.csv", "laws.md", "report.html"):
        assert (out / name).is_file(), name
    exps = pd.read_csv(out / "exponents.csv")
    assert list(exps.columns[:8]) == ["level", "group", "mean", "sd", "hdi_low", "hdi_high", "r_hat", "ess_bulk"]
    assert set(exps.loc[exps["level"] == "taxon", "group"]) == set(ab.demo.DEMO_EXPONENTS)
    by_taxon = pd.read_csv(out / "laws_by_taxon.csv")
    assert set(by_taxon["verdict"]) <= {"rall", "da_vinci", "murray", "none", "undecided"}
    assert (out / "figures" / "ratio_plane.png").is_file()
