"""The offline HTML report: structure, embedding, escaping, and (slow) rendering in headless Chromium."""

from __future__ import annotations

import base64
import os
import shutil
import subprocess
from html.parser import HTMLParser
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from matplotlib.image import imread

from allobranch.reporting.html import CAUTION, write_html_report
from allobranch.reporting.plots import plot_exponents, plot_law_comparison
from allobranch.reporting.style import figure, save_figure
from test_plots import LAWS, fake_exponents, fake_laws

HOSTILE = '<script>alert("x")</script> & "quotes"'


class _Collector(HTMLParser):
    """Every start tag with its attributes, and the text, in document order."""

    def __init__(self) -> None:
        super().__init__()
        self.tags: list[tuple[str, dict[str, str | None]]] = []
        self.text: list[str] = []

    def handle_starttag(self, tag, attrs):
        self.tags.append((tag, dict(attrs)))

    def handle_data(self, data):
        self.text.append(data)


def _parse(path: Path) -> _Collector:
    parser = _Collector()
    parser.feed(path.read_text(encoding="utf-8"))
    return parser


def _small_figure():
    fig, ax = figure("single", aspect=0.5)
    ax.plot([0, 1], [0, 1])
    return fig


@pytest.fixture(scope="module")
def report(tmp_path_factory):
    """A report with every section filled, figures from a Figure, a PNG file and an SVG file."""
    tmp_path = tmp_path_factory.mktemp("report")
    png_fig = plot_exponents(fake_exponents(), laws=LAWS).figure
    png, svg = save_figure(png_fig, tmp_path / "forest", formats=("png", "svg"), dpi=60)
    exponents = fake_exponents()
    exponents.loc[1, "group"] = HOSTILE
    flags = pd.DataFrame({"row": [4, 9], "column": ["d1", HOSTILE], "message": ["daughter >= parent", "blank"]})
    path = write_html_report(
        tmp_path / "report.html",
        title=f"Study {HOSTILE}",
        warnings=["R-hat above 1.01 for mu", f"user note {HOSTILE}"],
        data_summary={"junctions": 120, "taxa": 3, "specimens": 9, "unit": "mm", HOSTILE: HOSTILE},
        validation_flags=flags,
        model_description="Radii carry relative error.\n\nThe parent follows the law up to a deviation.",
        priors={"mu": "Normal(2.5, 0.75)", "sigma_rel": "HalfNormal(0.1)"},
        assumptions=["radii were measured mid-segment"],
        diagnostics=pd.DataFrame({"parameter": ["mu"], "r_hat": [1.02], "ess_bulk": [350.0]}),
        diagnostic_figures={"Rank plots": _small_figure()},
        exponents=exponents,
        exponent_figures={"Forest plot (PNG file)": png, f"Forest plot (SVG file) {HOSTILE}": svg},
        laws=fake_laws(),
        verdicts=["overall: undecided between da Vinci and Murray"],
        law_figures={"Law comparison": plot_law_comparison(fake_laws())[0].figure},
        methods=f"We estimated the exponent with allobranch. {HOSTILE}",
        provenance={"seed": 1, "data sha256": "ab12"},
    )
    return path


def test_report_is_self_contained(report):
    doc = report.read_text(encoding="utf-8")
    parsed = _parse(report)
    images = [attrs for tag, attrs in parsed.tags if tag == "img"]
    assert len(images) == 4
    assert all(img["src"].startswith("data:image/") and ";base64," in img["src"] for img in images)
    assert "http://" not in doc and "https://" not in doc
    for tag, attrs in parsed.tags:
        assert tag not in {"script", "link", "iframe", "object", "embed"}
        for name in ("src", "href"):
            if attrs.get(name):
                assert attrs[name].startswith(("data:", "#")), (tag, attrs[name][:40])
    assert "url(" not in doc.split("</style>")[0]  # no external resources from the style sheet


def test_embedded_images_decode(report):
    parsed = _parse(report)
    srcs = [attrs["src"] for tag, attrs in parsed.tags if tag == "img"]
    kinds = [src.split(";")[0] for src in srcs]
    assert kinds.count("data:image/png") == 3 and kinds.count("data:image/svg+xml") == 1
    for src in srcs:
        payload = base64.b64decode(src.split(",", 1)[1])
        if src.startswith("data:image/png"):
            assert payload.startswith(b"\x89PNG\r\n\x1a\n")  # PNG signature (PNG specification)
        else:
            assert b"<svg" in payload


def test_warnings_box_comes_first(report):
    parsed = _parse(report)
    body = [(t, a) for t, a in parsed.tags if t in {"section", "aside", "table", "img", "nav", "figure", "p"}]
    assert body[0][0] == "section" and body[0][1]["id"] == "warnings"
    assert "warn" in body[0][1]["class"] and body[0][1].get("role") == "alert"
    text = "".join(parsed.text)
    assert text.index("Warnings (2)") < text.index("Data summary and validation")
    assert text.index("R-hat above 1.01 for mu") < text.index("Data summary and validation")
    sections = [a["id"] for t, a in parsed.tags if t == "section"]
    assert sections == ["warnings", "data", "model", "diagnostics", "exponents", "laws", "methods"]


def test_caution_present(report):
    text = " ".join("".join(_parse(report).text).split())
    assert CAUTION in text
    assert "not clinical measurements" in text and "qualified professionals" in text


def test_user_text_escaped(report):
    doc = report.read_text(encoding="utf-8")
    parsed = _parse(report)
    assert not any(tag == "script" for tag, _ in parsed.tags)
    assert "<script>" not in doc
    escaped = "&lt;script&gt;alert(&quot;x&quot;)&lt;/script&gt; &amp; &quot;quotes&quot;"
    # title (twice), warning, summary key and value, flag cell, exponent group, methods, figure caption + alt
    assert doc.count(escaped) >= 9
    assert HOSTILE in "".join(parsed.text)  # and the reader sees the text as typed


def test_tables_hold_every_row(report):
    parsed = _parse(report)
    n_rows = sum(1 for tag, _ in parsed.tags if tag == "tr")
    # header + rows: summary (5), flags (2), priors (2), diagnostics (1), exponents, laws, provenance (3)
    expected = [5, 2, 2, 1, len(fake_exponents()), len(fake_laws()), 3]
    assert n_rows == sum(n + 1 for n in expected)
    text = "".join(parsed.text)
    ex = fake_exponents()
    assert f"{ex.loc[0, 'mean']:.4g}" in text
    assert "allobranch version" in text and "ab12" in text


def test_empty_report_and_bad_figures(tmp_path):
    path = write_html_report(tmp_path / "empty.html")
    text = "".join(_parse(path).text)
    assert "No warnings were raised." in text
    assert text.count("Not provided.") == 6
    with pytest.raises(FileNotFoundError, match="missing.png"):
        write_html_report(tmp_path / "x.html", law_figures={"a": tmp_path / "missing.png"})
    (tmp_path / "notes.txt").write_text("x")
    with pytest.raises(ValueError, match="notes.txt"):
        write_html_report(tmp_path / "x.html", law_figures={"a": tmp_path / "notes.txt"})
    with pytest.raises(TypeError, match="Figure"):
        write_html_report(tmp_path / "x.html", law_figures={"a": 3})
    assert not (tmp_path / "x.html").exists()
    assert not [p for p in tmp_path.iterdir() if p.name.startswith(".")]  # no temporary files left
    with pytest.raises(FileNotFoundError):
        write_html_report(tmp_path / "no" / "dir" / "r.html")


# ---------------------------------------------------------------------------------------------------------
# rendering in a real browser


def _chromium() -> str:
    """Path of Debian's chromium, installing it with apt-get when absent."""
    found = shutil.which("chromium") or ("/usr/bin/chromium" if Path("/usr/bin/chromium").exists() else None)
    if found:
        return found
    env = {**os.environ, "DEBIAN_FRONTEND": "noninteractive"}
    install = ["apt-get", "install", "-y", "--no-install-recommends", "chromium"]
    if subprocess.run(install, env=env, capture_output=True).returncode != 0:
        subprocess.run(["apt-get", "update"], env=env, capture_output=True, check=True)
        subprocess.run(install, env=env, capture_output=True, check=True)
    return "/usr/bin/chromium"


def _chromium_args(tmp_path: Path) -> list[str]:
    return [
        _chromium(), "--headless", "--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run",
        "--disable-background-networking", "--disable-component-update", "--disable-sync",
        f"--user-data-dir={tmp_path / 'profile'}", "--window-size=1200,3000", "--virtual-time-budget=10000",
    ]


@pytest.mark.slow
def test_report_renders_in_headless_chromium(report, tmp_path):
    # count images the browser decoded: a copy of the report with a small script that writes the count
    probe = tmp_path / "probe.html"
    script = ("<script>window.addEventListener('load', function () {var n = 0; for (const i of document.images)"
              " { if (i.complete && i.naturalWidth > 0) n++; } document.body.setAttribute('data-loaded', n);"
              " document.body.setAttribute('data-total', document.images.length);});</script>")
    probe.write_text(report.read_text(encoding="utf-8").replace("</body>", script + "</body>"), encoding="utf-8")
    dom = subprocess.run([*_chromium_args(tmp_path), "--dump-dom", probe.as_uri()], capture_output=True,
                         text=True, timeout=180)
    assert 'data-total="4"' in dom.stdout, dom.stderr[-2000:]
    assert 'data-loaded="4"' in dom.stdout

    shot = tmp_path / "shot.png"
    subprocess.run([*_chromium_args(tmp_path), f"--screenshot={shot}", report.as_uri()], capture_output=True,
                   timeout=180)
    assert shot.exists() and shot.stat().st_size > 10_000
    pixels = imread(shot)[..., :3]
    assert pixels.shape[:2] == (3000, 1200)
    non_white = np.mean(np.any(pixels < 0.9, axis=-1))
    assert 0.02 < non_white < 0.9  # text, boxes and figures drawn; not a blank or solid page
    assert pixels.std() > 0.05
