"""The offline HTML report: order, embedding, escaping, grouped warnings, flags, sampling attempts, and the
report rendered in headless Chromium (DevTools protocol over a small websocket client)."""

from __future__ import annotations

import base64
import json
import os
import shutil
import socket
import struct
import subprocess
import time
import urllib.parse
from html.parser import HTMLParser
from pathlib import Path

import arviz as az
import numpy as np
import pandas as pd
import pytest
from matplotlib.image import imread
from test_plots import LAWS, fake_exponents, fake_fit, fake_laws

from allobranch.comparison.compare import LawComparison
from allobranch.comparison.laws import CLASSIC_LAWS
from allobranch.conventions import COMPARISON_FILES, LAWS_WARNINGS_FILE, POPULATION
from allobranch.reporting.attempts import attempts_sentence, attempts_table
from allobranch.reporting.html import CAUTION, write_html_report
from allobranch.reporting.plots import plot_exponents, plot_law_comparison
from allobranch.reporting.report import answer_table, build_report
from allobranch.reporting.saved_comparison import SavedComparison, write_comparison
from allobranch.reporting.style import figure, save_figure
from allobranch.reporting.tables import fit_summary_markdown
from allobranch.reporting.warning_groups import group_warnings, merge_fit_and_comparison

HOSTILE = '<script>alert("x")</script> & "quotes"'
#: How long the browser check waits for Chromium (start, socket, page events): generous, so that a loaded
#: 2-core machine never fails the check by being slow; only a hung browser reaches it.
BROWSER_PATIENCE_S = 1800.0

ATTEMPTS = [
    {
        "parametrization": "non-centred",
        "target_accept": 0.9,
        "divergences": 14,
        "max_r_hat": 1.031,
        "min_ess_bulk": 120.0,
        "seconds": 6.1,
        "kept": False,
    },
    {
        "parametrization": "centred specimen level",
        "target_accept": 0.95,
        "divergences": 0,
        "max_r_hat": 1.004,
        "min_ess_bulk": 450.0,
        "seconds": 8.4,
        "kept": True,
    },
]


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


def _text(path: Path) -> str:
    return " ".join("".join(_parse(path).text).split())


def _small_figure():
    fig, ax = figure("single", aspect=0.5)
    ax.plot([0, 1], [0, 1])
    return fig


WARNINGS = [
    "R-hat above 1.01 for 2 parameter(s) (worst 1.03: mu, tau_taxon): chains disagree.",
    "fit of murray (population): R-hat above 1.01 for 1 parameter(s) -> its LOO terms are less trustworthy",
    "fit of rall (population): effective sample size below 400 -> its LOO terms are less trustworthy",
    "fit of rall (taxon T1): effective sample size below 400 -> its LOO terms are less trustworthy",
    "3 divergent transition(s): the posterior may be biased.",
    f"user note {HOSTILE}",
]


@pytest.fixture(scope="module")
def report(tmp_path_factory):
    """A report with every section filled, figures from a Figure, a PNG file and an SVG file."""
    tmp_path = tmp_path_factory.mktemp("report")
    png_fig = plot_exponents(fake_exponents(), laws=LAWS).figure
    png, svg = save_figure(png_fig, tmp_path / "forest", formats=("png", "svg"), dpi=60)
    exponents = fake_exponents()
    exponents.loc[1, "group"] = HOSTILE
    flags = pd.DataFrame(
        {
            "severity": ["flag", "flag"],
            "file": ["casts.csv", "casts.csv"],
            "row": [4, 9],
            "column": ["d1", HOSTILE],
            "code": ["daughter_ge_parent", "ratio"],
            "message": ["daughter >= parent " * 8, "blank"],
            "hint": ["check the reading", ""],
        }
    )
    verdicts = pd.DataFrame(
        {"scope": ["population"], "verdict": ["undecided"], "reason": ["closest law murray"]}
    )
    path = write_html_report(
        tmp_path / "report.html",
        title=f"Study {HOSTILE}",
        answer=answer_table(exponents, verdicts, fake_laws()),
        answer_figure={"Forest plot (PNG file)": png},
        answer_heading="Branching exponent per taxon (90% HDI)",
        laws=fake_laws(),
        verdicts=verdicts,
        verdict_rule="A law is declared when ...",
        law_figures={"Law comparison": plot_law_comparison(fake_laws())[0].figure},
        exponents=exponents,
        exponent_figures={f"Forest plot (SVG file) {HOSTILE}": svg},
        warnings=WARNINGS,
        attempts=attempts_table({"attempts": ATTEMPTS}),
        attempts_sentence=attempts_sentence({"attempts": ATTEMPTS}),
        diagnostics=pd.DataFrame({"parameter": ["mu"], "r_hat": [1.02], "ess_bulk": [350.0]}),
        diagnostic_figures={"Rank plots": _small_figure()},
        data_summary={"junctions": 120, "taxa": 3, "specimens": 9, "unit": "mm", HOSTILE: HOSTILE},
        validation_flags=flags,
        model_description="Radii carry relative error.\n\nThe parent follows the law up to a deviation.",
        priors={"mu": "Normal(2.5, 0.75)", "rel_error": "HalfNormal(0.1)"},
        assumptions=["radii were measured mid-segment"],
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
    srcs = [attrs["src"] for tag, attrs in _parse(report).tags if tag == "img"]
    kinds = [src.split(";")[0] for src in srcs]
    assert kinds.count("data:image/png") == 3 and kinds.count("data:image/svg+xml") == 1
    for src in srcs:
        payload = base64.b64decode(src.split(",", 1)[1])
        if src.startswith("data:image/png"):
            assert payload.startswith(b"\x89PNG\r\n\x1a\n")  # PNG signature (PNG specification)
        else:
            assert b"<svg" in payload


def test_answer_comes_first_then_evidence_diagnostics_data_methods_caution(report):
    parsed = _parse(report)
    sections = [a["id"] for t, a in parsed.tags if t == "section"]
    assert sections == ["answer", "evidence", "diagnostics", "data", "methods", "caution"]
    first_img = next(a for t, a in parsed.tags if t == "img")
    assert first_img["alt"] == "Forest plot (PNG file)"  # the forest figure sits beside the answer
    text = _text(report)
    assert text.index("Branching exponent per taxon (90% HDI)") < text.index("Law comparison")
    assert text.index("Law comparison") < text.index("Warnings (6, 4 kinds)") < text.index("Validation flags")
    assert text.index("Validation flags") < text.index("Methods paragraph") < text.index(CAUTION)
    status = next(a for t, a in parsed.tags if t == "p" and a.get("id") == "status")
    assert "warn" in status["class"] and status["role"] == "alert"
    assert text.index("6 warnings of 4 kinds") < text.index("Branching exponent per taxon")


def test_answer_table_reads_interval_and_verdict_from_results():
    ex = fake_exponents()
    ex.attrs["hdi_prob"] = 0.95
    verdicts = pd.DataFrame(
        {
            "scope": ["population", "Rattus"],
            "verdict": ["undecided", "Murray (a=3)"],
            "reason": ["closest law ...", "all conditions hold"],
        }
    )
    table = answer_table(ex, verdicts, fake_laws(), {"Rattus": 40, "Sus": 25, "Quercus": 61})
    assert list(table.columns) == ["estimate", "junctions", "exponent a", "95% HDI", "verdict", "reason"]
    assert list(table["estimate"]) == ["all taxa (population)", "Rattus", "Sus", "Quercus"]
    row = ex[ex["group"] == "Rattus"].iloc[0]
    assert table.loc[1, "95% HDI"] == f"[{row['hdi_low']:.2f}, {row['hdi_high']:.2f}]"
    assert table.loc[0, "junctions"] == 126 and table.loc[2, "verdict"] == "—"
    assert list(answer_table(ex).columns) == ["estimate", "junctions", "exponent a", "95% HDI"]


def test_warnings_grouped_one_line_per_kind(report):
    doc = report.read_text(encoding="utf-8")
    parsed = _parse(report)
    summaries = [a for t, a in parsed.tags if t == "summary"]
    assert len(summaries) == 4  # one folded group per kind
    text = _text(report)
    assert "3 law fits with convergence problems" in text and "1 divergent transitions" in text
    assert doc.count("<details><summary>") >= 4
    groups = group_warnings(WARNINGS)
    assert [(g.kind, g.count) for g in groups] == [
        ("law fits with convergence problems", 3),
        ("R-hat above threshold (chains disagree)", 1),
        ("divergent transitions", 1),
        ("other warnings", 1),
    ]


def test_free_fit_copies_are_dropped_once():
    fit = ["R-hat above 1.01 for mu"]
    comparison = [
        "fit of the free model: R-hat above 1.01 for mu",
        "fit of the free model: something else",
        "LOO UNRELIABLE in scope population: ...",
    ]
    assert merge_fit_and_comparison(fit, comparison) == [
        "R-hat above 1.01 for mu",
        "fit of the free model: something else",
        "LOO UNRELIABLE in scope population: ...",
    ]


def test_flags_table_drops_single_file_and_wraps(report, tmp_path):
    parsed = _parse(report)
    table = next(a for t, a in parsed.tags if t == "table" and a.get("id") == "flags")
    assert "wide" in table["class"]
    doc = report.read_text(encoding="utf-8")
    flags_html = doc[doc.index('id="flags"') :].split("</table>", 1)[0]
    assert "<th>file</th>" not in flags_html and "<th>message</th>" in flags_html
    assert 'class="long"' in flags_html  # long text wraps
    assert "All refer to casts.csv" in _text(report)
    two = pd.DataFrame({"file": ["a.csv", "b.csv"], "row": [1, 2], "message": ["x", "y"]})
    path = write_html_report(tmp_path / "two.html", validation_flags=two)
    assert "<th>file</th>" in path.read_text(encoding="utf-8")


def test_attempts_shown_as_table_and_sentence(report):
    text = _text(report)
    assert (
        "First attempt (non-centred at target_accept 0.9) had 14 divergences, max R-hat 1.031, min bulk ESS "
        "120; refitted with centred specimen level at target_accept 0.95 (0 divergences, max R-hat 1.004, "
        "min bulk ESS 450); kept attempt 2."
    ) in text
    table = attempts_table({"attempts": ATTEMPTS})
    assert list(table["attempt"]) == [1, 2] and list(table["kept"]) == [False, True]
    assert attempts_table({}) is None and attempts_sentence({"attempts": []}) == ""


def test_summary_markdown_lists_attempts_only_when_recorded():
    with_attempts = fake_fit(settings={"attempts": ATTEMPTS, "parametrization": "centred specimen level"})
    md = fit_summary_markdown(with_attempts)
    assert "## Sampling attempts" in md and "kept attempt 2" in md
    assert "| attempt | parametrization" in md.replace("|   attempt", "| attempt")
    assert "Parametrization of the kept attempt: centred specimen level" in md
    assert "Sampling attempts" not in fit_summary_markdown(fake_fit())  # old fits: nothing shown


def test_caution_present(report):
    text = _text(report)
    assert CAUTION in text
    assert (
        "research tool" in text and "not clinical measurements" in text and "qualified professionals" in text
    )


def test_user_text_escaped(report):
    doc = report.read_text(encoding="utf-8")
    parsed = _parse(report)
    assert not any(tag == "script" for tag, _ in parsed.tags)
    assert "<script>" not in doc
    escaped = "&lt;script&gt;alert(&#34;x&#34;)&lt;/script&gt; &amp; &#34;quotes&#34;"
    # title (twice), warning, summary key and value, flag cell, exponent group (twice), methods, caption + alt
    assert doc.count(escaped) >= 10
    assert HOSTILE in "".join(parsed.text)  # and the reader sees the text as typed


def test_empty_report_and_bad_figures(tmp_path):
    path = write_html_report(tmp_path / "empty.html")
    text = _text(path)
    assert "No warnings were raised." in text and "No warnings: every diagnostic passed." in text
    assert text.count("Not provided.") == 7
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
# a report built from a (fake) fit and a law comparison read back from its CSV files


def _write_comparison(folder: Path, *, warnings_file: bool, scope: str = POPULATION) -> None:
    """A comparison's files as an older version wrote them (``scope`` names the population scope)."""
    evidence = fake_laws().replace({"scope": {POPULATION: scope}})
    evidence["law"] = evidence["law"].map(
        {"free": "free", "Rall (a=1.5)": "rall", "da Vinci (a=2)": "da_vinci", "Murray (a=3)": "murray"}
    )
    evidence["scope"] = evidence["scope"].replace({"Rattus": "T1"})
    evidence["n_high_k"] = [0, 0, 0, 2, 0, 0, 0, 0]
    evidence["bf_method"] = np.where(
        evidence["value"].isna(), "", ["", "normal_approx", "", "", "", "", "", ""]
    )
    evidence.to_csv(folder / "laws.csv", index=False)
    pd.DataFrame({"taxon": ["T1"], "verdict": ["murray"]}).to_csv(folder / "laws_by_taxon.csv", index=False)
    pd.DataFrame(
        {
            "scope": [scope, "T1"],
            "verdict": ["undecided", "murray"],
            "reason": ["closest law murray: P(ROPE) 0.33 < 0.9", "murray: P(ROPE) 0.95, BF 4.1"],
        }
    ).to_csv(folder / "laws_verdicts.csv", index=False)
    (folder / "laws.md").write_text("## Warnings\n\n- A WARNING ONLY IN MARKDOWN\n", encoding="utf-8")
    if warnings_file:
        pd.DataFrame({"message": ["fit of murray (population): R-hat above 1.01"]}).to_csv(
            folder / LAWS_WARNINGS_FILE, index=False
        )


def test_saved_comparison_reads_tables_not_markdown(tmp_path):
    # a folder written before laws_warnings.csv existed, with the population scope still called "overall"
    _write_comparison(tmp_path, warnings_file=False, scope="overall")
    saved = SavedComparison.read(tmp_path)
    assert not any("MARKDOWN" in w for w in saved.warnings)
    assert any(
        w.startswith("LOO UNRELIABLE in scope population") and "murray (2)" in w for w in saved.warnings
    )
    assert any(w.startswith("1 Bayes factor(s) use a normal approximation") for w in saved.warnings)
    assert saved.notes and LAWS_WARNINGS_FILE in saved.notes[0]
    assert list(saved.verdicts["scope"]) == [POPULATION, "T1"] and len(saved.population) == 4
    _write_comparison(tmp_path, warnings_file=True)
    assert SavedComparison.read(tmp_path).warnings == ["fit of murray (population): R-hat above 1.01"]
    assert SavedComparison.read(tmp_path / "nothing") is None


def test_comparison_files_round_trip_with_structured_warnings(tmp_path):
    laws = fake_laws()
    warnings = [
        "3 divergent transition(s): the posterior may be biased.",
        "fit of murray (population): R-hat above 1.01 for 1 parameter(s)",
        "something no kind describes",
    ]
    verdicts = pd.DataFrame(
        {"scope": [POPULATION], "verdict": ["undecided"], "reason": ["closest law murray"]}
    )
    result = LawComparison(
        evidence=laws, verdicts=verdicts, laws=CLASSIC_LAWS, delta=0.25, warnings=warnings, settings={}
    )
    written = write_comparison(result, tmp_path)
    assert sorted(p.name for p in written) == sorted(COMPARISON_FILES)
    table = pd.read_csv(tmp_path / LAWS_WARNINGS_FILE)
    assert list(table["message"]) == warnings
    assert list(table["kind"]) == [
        "divergent transitions",
        "law fits with convergence problems",
        "other warnings",
    ]
    saved = SavedComparison.read(tmp_path)
    assert saved.warnings == warnings and saved.notes == []  # nothing rebuilt, nothing read from laws.md
    pd.testing.assert_frame_equal(saved.verdicts, verdicts)


@pytest.fixture(scope="module")
def fit_report(tmp_path_factory) -> Path:
    """A report from a fake fit (no sampling) and a saved comparison: seconds, for the browser check."""
    folder = tmp_path_factory.mktemp("fit_report")
    _write_comparison(folder, warnings_file=False)
    fit = fake_fit(settings={"attempts": ATTEMPTS, "parametrization": "centred specimen level"})
    return build_report(
        fit, folder / "report.html", laws=SavedComparison.read(folder), title="Report of SIMULATED data"
    )


def test_report_from_fit_answers_first(fit_report):
    text = _text(fit_report)
    assert "Branching exponent per taxon (90% HDI)" in text
    start = text.index("Branching exponent per taxon")
    answer = text[start : text.index("Law comparison", start)]
    assert "T1" in answer and "T2" in answer and "Murray (a=3)" in answer and "murray: P(ROPE) 0.95" in answer
    assert "undecided" in answer
    assert "kept attempt 2" in text and "Law residual" in text
    assert "clipped at an ELPD loss of 20" in text  # the caption states the limits
    assert "A WARNING ONLY IN MARKDOWN" not in text
    images = [a for t, a in _parse(fit_report).tags if t == "img"]
    assert len(images) == 7 and images[0]["alt"].startswith("Exponents with 90% HDIs")


def test_report_prints_the_hdi_level_the_fit_recorded(tmp_path):
    fit = fake_fit(settings={"hdi_prob": 0.8})
    path = build_report(fit, tmp_path / "report.html", title="Report of SIMULATED data")
    text = _text(path)
    assert "Branching exponent per taxon (80% HDI)" in text and "90% HDI" not in text
    assert "with 80% highest-density intervals" in text  # the methods paragraph
    # the answer's population interval is ArviZ's 80 % HDI of the draws of mu
    lo, hi = az.hdi(fit.idata.posterior["mu"].values.ravel(), hdi_prob=0.8)
    assert f"[{lo:.2f}, {hi:.2f}]" in text


# ---------------------------------------------------------------------------------------------------------
# rendering in a real browser: headless Chromium driven through the DevTools protocol


def _chromium() -> str | None:
    """Debian's chromium, if installed (``.ci/run`` installs it; tests never download a browser)."""
    found = shutil.which("chromium") or shutil.which("chromium-browser")
    return found or ("/usr/bin/chromium" if Path("/usr/bin/chromium").exists() else None)


class _WebSocket:
    """The smallest websocket client the DevTools protocol needs (RFC 6455: text frames, client masking)."""

    def __init__(self, url: str, timeout: float = BROWSER_PATIENCE_S) -> None:
        parts = urllib.parse.urlsplit(url)
        self.sock = socket.create_connection((parts.hostname, parts.port), timeout=timeout)
        key = base64.b64encode(os.urandom(16)).decode()
        request = (
            f"GET {parts.path} HTTP/1.1\r\nHost: {parts.hostname}:{parts.port}\r\nUpgrade: websocket\r\n"
            f"Connection: Upgrade\r\nSec-WebSocket-Key: {key}\r\nSec-WebSocket-Version: 13\r\n\r\n"
        )
        self.sock.sendall(request.encode())
        head = b""
        while b"\r\n\r\n" not in head:
            chunk = self.sock.recv(1)
            if not chunk:
                raise ConnectionError("DevTools closed the connection during the handshake")
            head += chunk
        if b" 101 " not in head.split(b"\r\n", 1)[0]:
            raise ConnectionError(head.decode(errors="replace"))

    def _read(self, n: int) -> bytes:
        data = b""
        while len(data) < n:
            chunk = self.sock.recv(n - len(data))
            if not chunk:
                raise ConnectionError("DevTools closed the connection")
            data += chunk
        return data

    def send(self, text: str) -> None:
        payload = text.encode()
        n = len(payload)
        header = bytes([0x81]) + (
            bytes([0x80 | n])
            if n < 126
            else bytes([0x80 | 126]) + struct.pack(">H", n)
            if n < 65536
            else bytes([0x80 | 127]) + struct.pack(">Q", n)
        )
        mask = os.urandom(4)
        self.sock.sendall(header + mask + bytes(b ^ mask[i % 4] for i, b in enumerate(payload)))

    def recv(self) -> str:
        message = b""
        while True:
            b0, b1 = self._read(2)
            n = b1 & 0x7F
            if n == 126:
                n = struct.unpack(">H", self._read(2))[0]
            elif n == 127:
                n = struct.unpack(">Q", self._read(8))[0]
            payload = self._read(n)
            opcode = b0 & 0x0F
            if opcode == 0x8:
                raise ConnectionError("DevTools closed the websocket")
            if opcode in (0x9, 0xA):  # ping / pong: not used by DevTools
                continue
            message += payload
            if b0 & 0x80:
                return message.decode()

    def close(self) -> None:
        self.sock.close()


class _DevTools:
    """One page of a headless Chromium: send commands, collect console errors and exceptions."""

    def __init__(self, ws: _WebSocket) -> None:
        self.ws, self.next_id, self.session = ws, 0, None
        self.errors: list[str] = []
        self.events: list[str] = []

    def call(self, method: str, session: bool = True, **params):
        self.next_id += 1
        message = {"id": self.next_id, "method": method, "params": params}
        if session and self.session:
            message["sessionId"] = self.session
        self.ws.send(json.dumps(message))
        while True:
            reply = json.loads(self.ws.recv())
            if reply.get("id") == self.next_id:
                if "error" in reply:
                    raise RuntimeError(f"{method}: {reply['error']}")
                return reply.get("result", {})
            self._event(reply)

    def _event(self, event: dict) -> None:
        method, params = event.get("method", ""), event.get("params", {})
        self.events.append(method)
        if method == "Runtime.exceptionThrown":
            self.errors.append(f"exception: {params['exceptionDetails'].get('text')}")
        elif method == "Runtime.consoleAPICalled" and params.get("type") in ("error", "assert"):
            self.errors.append(
                f"console.{params['type']}: {[a.get('value') for a in params.get('args', [])]}"
            )
        elif method == "Log.entryAdded" and params["entry"].get("level") == "error":
            self.errors.append(f"log: {params['entry'].get('text')} {params['entry'].get('url', '')}")

    def wait_for(self, method: str, timeout: float = BROWSER_PATIENCE_S) -> None:
        deadline = time.monotonic() + timeout
        while method not in self.events:
            if time.monotonic() > deadline:
                raise TimeoutError(f"no {method} within {timeout} s")
            self._event(json.loads(self.ws.recv()))


@pytest.fixture
def browser(tmp_path):
    """A headless Chromium with a fresh profile and no network features, and its DevTools session."""
    exe = _chromium()
    if exe is None:
        pytest.skip("no Chromium installed (Debian: apt-get install chromium; .ci/run installs it)")
    profile = tmp_path / "profile"
    proc = subprocess.Popen(
        [
            exe,
            "--headless",
            "--no-sandbox",
            "--disable-gpu",
            "--disable-background-networking",
            "--disable-component-update",
            "--disable-sync",
            "--no-first-run",
            "--hide-scrollbars",
            f"--user-data-dir={profile}",
            "--remote-debugging-port=0",
            "--remote-debugging-address=127.0.0.1",
            "about:blank",
        ],
        stdout=subprocess.DEVNULL,
        stderr=subprocess.DEVNULL,
    )
    try:
        port_file = profile / "DevToolsActivePort"  # written by Chromium: port, then the browser's path
        deadline = time.monotonic() + BROWSER_PATIENCE_S
        while not (port_file.is_file() and len(port_file.read_text().split("\n")) >= 2):
            if proc.poll() is not None or time.monotonic() > deadline:
                pytest.fail("Chromium did not start its DevTools endpoint")
            time.sleep(0.1)
        port, path = port_file.read_text().split("\n")[:2]
        ws = _WebSocket(f"ws://127.0.0.1:{port.strip()}{path.strip()}")
        tools = _DevTools(ws)
        target = tools.call("Target.createTarget", url="about:blank")["targetId"]
        tools.session = tools.call("Target.attachToTarget", targetId=target, flatten=True)["sessionId"]
        for domain in ("Page", "Runtime", "Log"):
            tools.call(f"{domain}.enable")
        # a laptop screen: 1280 x 800 CSS pixels
        tools.call(
            "Emulation.setDeviceMetricsOverride", width=1280, height=800, deviceScaleFactor=1, mobile=False
        )
        yield tools
        ws.close()
    finally:
        proc.terminate()
        try:
            proc.wait(timeout=20)
        except subprocess.TimeoutExpired:
            proc.kill()


_IMAGES_JS = """
Promise.all(Array.from(document.images).map(img => img.decode().then(
    () => ({ok: img.naturalWidth > 0, alt: img.alt}), e => ({ok: false, alt: img.alt, error: String(e)}))))
"""

_LAYOUT_JS = """
(() => {
  const box = id => { const r = document.getElementById(id).getBoundingClientRect();
                      return {top: r.top, bottom: r.bottom, left: r.left, right: r.right}; };
  const forest = document.querySelector('#answer img').getBoundingClientRect();
  return {answer: box('answer-table'), forest: {top: forest.top, bottom: forest.bottom, right: forest.right},
          flags: box('flags'), pageWidth: document.documentElement.scrollWidth,
          viewport: window.innerWidth};
})()
"""


def _evaluate(tools: _DevTools, expression: str):
    result = tools.call("Runtime.evaluate", expression=expression, awaitPromise=True, returnByValue=True)
    if "exceptionDetails" in result:
        raise AssertionError(result["exceptionDetails"])
    return result["result"]["value"]


def test_report_renders_in_headless_chromium(browser, fit_report, tmp_path):
    browser.call("Page.navigate", url=fit_report.as_uri())
    browser.wait_for("Page.loadEventFired")
    images = _evaluate(browser, _IMAGES_JS)
    assert len(images) == 7
    assert all(img["ok"] for img in images), [img for img in images if not img["ok"]]  # every image decodes
    assert browser.errors == []  # no console errors, exceptions or failed loads

    layout = _evaluate(browser, _LAYOUT_JS)
    # at a laptop's 1280 x 800 the first screen shows the answer table and the forest figure beside it
    assert 0 <= layout["answer"]["top"] and layout["answer"]["bottom"] <= 800
    assert layout["forest"]["top"] < 800 and layout["forest"]["right"] <= 1280
    assert layout["forest"]["top"] < layout["answer"]["bottom"]  # beside it, not below
    # nothing (the flags table included) is wider than the window
    assert layout["pageWidth"] <= layout["viewport"] and layout["flags"]["right"] <= 1280

    shot = tmp_path / "first_screen.png"
    shot.write_bytes(base64.b64decode(browser.call("Page.captureScreenshot", format="png")["data"]))
    pixels = imread(shot)[..., :3]
    assert pixels.shape[:2] == (800, 1280)
    non_white = np.mean(np.any(pixels < 0.9, axis=-1))
    assert 0.02 < non_white < 0.9  # text, table and figure drawn; not a blank or solid page


def test_browser_check_catches_broken_images_and_console_errors(browser, tmp_path):
    # controls for the test above: an image whose bytes do not decode, a console error and an uncaught
    # exception are all reported
    page = tmp_path / "broken.html"
    page.write_text(
        '<!DOCTYPE html><html><body><img alt="broken" src="data:image/png;base64,'
        + base64.b64encode(b"not a png").decode()
        + '"><script>console.error("seen");'
        "null.missing;</script></body></html>",
        encoding="utf-8",
    )
    browser.call("Page.navigate", url=page.as_uri())
    browser.wait_for("Page.loadEventFired")
    images = _evaluate(browser, _IMAGES_JS)
    assert images == [{"ok": False, "alt": "broken", "error": images[0]["error"]}]
    assert any("seen" in e for e in browser.errors) and any(e.startswith("exception") for e in browser.errors)
