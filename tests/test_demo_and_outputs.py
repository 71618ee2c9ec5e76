"""Demo data reproducibility, result-folder writing (atomic, no clobbering) and table export."""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from scipy import stats

import allobranch as ab
from allobranch.demo import DEMO_EXPONENTS, DEMO_FILES, DEMO_SPECIMENS, make_demo, write_demo
from allobranch.errors import OutputExistsError
from allobranch.io import atomic_write, prepare_output_dir, write_files
from allobranch.reporting.tables import export_table, to_latex, to_markdown

REPO = Path(__file__).resolve().parent.parent


def test_committed_demo_equals_seeded_generator(tmp_path):
    # The committed files must be exactly what the seeded generator writes (reproducibility).
    paths = write_demo(tmp_path)
    for kind, name in DEMO_FILES.items():
        assert (REPO / "data_demo" / name).read_bytes() == paths[kind].read_bytes(), name


def test_demo_reads_cleanly_and_matches_truth():
    table = ab.read_junctions(
        REPO / "data_demo" / DEMO_FILES["table"], recipe=REPO / "data_demo" / DEMO_FILES["recipe"]
    )
    raw = pd.read_csv(REPO / "data_demo" / DEMO_FILES["table"])
    assert set(table.taxa) == set(DEMO_EXPONENTS)
    # every row of the file is a junction (nothing dropped); 25-60 junctions per animal (allobranch/demo.py)
    assert table.n_junctions == len(raw)
    assert 25 * sum(DEMO_SPECIMENS) <= table.n_junctions <= 60 * sum(DEMO_SPECIMENS)
    per_taxon = table.specimens.groupby("taxon").size()
    assert [per_taxon[t] for t in DEMO_EXPONENTS] == list(DEMO_SPECIMENS)
    # trifurcations at the simulated share of 12 %: an exact binomial test (scipy.stats.binomtest) must
    # not reject it at the 0.001 level
    n_tri = int((table.data["n_daughters"] == 3).sum())
    assert n_tri > 0 and stats.binomtest(n_tri, table.n_junctions, 0.12).pvalue > 1e-3
    # measurement noise makes some daughters reach their parent; exactly those rows are flagged (file rows
    # as the user sees them: header = row 1), and none is dropped
    daughters = raw[["D_daughter1_um", "D_daughter2_um", "D_daughter3_um"]].max(axis=1)
    reach = {int(i) + 2 for i in raw.index[daughters >= raw["D_parent_um"]]}
    flagged = {p.row for p in table.report.flags if p.code == "daughter_ge_parent"}
    assert reach and flagged == reach
    assert not table.report.excluded
    truth = json.loads((REPO / "data_demo" / DEMO_FILES["truth"]).read_text())
    assert truth["exponent_by_species"] == DEMO_EXPONENTS
    assert "SIMULATED" in truth["note"]
    # diameters in micrometres -> radii in mm: every internal parent is half the file value / 1000 (exact)
    np.testing.assert_allclose(table.parent, raw["D_parent_um"].to_numpy() / 2000.0, rtol=1e-12)


def test_make_demo_same_seed_same_table():
    a, _ = make_demo(5)
    b, _ = make_demo(5)
    c, _ = make_demo(6)
    pd.testing.assert_frame_equal(a, b)
    assert not a.equals(c)


def test_output_dir_refuses_to_clobber(tmp_path):
    (tmp_path / "a.csv").write_text("user data\n")
    with pytest.raises(OutputExistsError, match="--force"):
        prepare_output_dir(tmp_path, ["a.csv", "b.csv"])
    assert (tmp_path / "a.csv").read_text() == "user data\n"
    # with force the folder is accepted (the clash is allowed) but nothing is written or removed yet
    assert prepare_output_dir(tmp_path, ["a.csv"], force=True) == tmp_path
    assert (tmp_path / "a.csv").read_text() == "user data\n"
    # a file standing where the folder should be is refused even with force
    (tmp_path / "file").write_text("x")
    with pytest.raises(OutputExistsError, match="not a folder"):
        prepare_output_dir(tmp_path / "file", ["a.csv"], force=True)


def test_write_files_is_all_or_nothing(tmp_path):
    def fail(path):
        raise RuntimeError("disk full")

    with pytest.raises(RuntimeError):
        write_files(tmp_path, {"one.txt": lambda p: p.write_text("1"), "two.txt": fail})
    assert not (tmp_path / "one.txt").exists()  # nothing half-written is left behind
    assert [p.name for p in tmp_path.iterdir()] == []
    # when every writer succeeds, every file lands with its content and no temporary folder stays
    written = write_files(
        tmp_path, {"one.txt": lambda p: p.write_text("1"), "two.txt": lambda p: p.write_text("2")}
    )
    assert written == [tmp_path / "one.txt", tmp_path / "two.txt"]
    assert sorted(p.name for p in tmp_path.iterdir()) == ["one.txt", "two.txt"]
    assert (tmp_path / "two.txt").read_text() == "2"


def test_atomic_write_keeps_the_old_file_when_writing_fails(tmp_path):
    dest = tmp_path / "fit.nc"
    dest.write_text("the user's earlier result")

    def fail(path):
        path.write_text("half of a new fi")
        raise RuntimeError("disk full")

    with pytest.raises(RuntimeError):
        atomic_write(dest, fail)
    assert dest.read_text() == "the user's earlier result"  # untouched, not half-replaced
    assert [p.name for p in tmp_path.iterdir()] == ["fit.nc"]  # and no temporary file left behind
    # the writer sees a path with the destination's suffix (writers may choose the format from it)
    seen = []
    atomic_write(dest, lambda p: (seen.append(p.suffix), p.write_text("new")))
    assert seen == [".nc"] and dest.read_text() == "new"


def test_table_exports(tmp_path):
    df = pd.DataFrame(
        {
            "level": ["taxon"],
            "group": ["T1"],
            "mean": [2.98765],
            "sd": [0.1],
            "hdi_low": [2.8],
            "hdi_high": [3.1],
            "r_hat": [1.0012],
            "ess_bulk": [812.4],
        }
    )
    md = to_markdown(df)
    lines = md.splitlines()
    assert len(lines) == 3  # header, separator, one row
    assert [c.strip() for c in lines[0].strip("|").split("|")] == list(df.columns)
    assert "2.988" in lines[2] and "2.98765" not in md  # rounded for display
    tex = to_latex(df, caption="Exponents", label="tab:exp")
    assert "\\begin{table}" in tex and "2.988" in tex and "\\label{tab:exp}" in tex
    paths = export_table(df, tmp_path / "exponents")
    assert sorted(p.suffix for p in paths) == [".csv", ".md", ".tex"]
    pd.testing.assert_frame_equal(pd.read_csv(tmp_path / "exponents.csv"), df)  # CSV keeps full precision
    assert (tmp_path / "exponents.md").read_text(encoding="utf-8") == md + "\n"
    assert (tmp_path / "exponents.tex").read_text(encoding="utf-8") == to_latex(df)
    with pytest.raises(ValueError, match="unknown table format"):
        export_table(df, tmp_path / "x", formats=("docx",))
