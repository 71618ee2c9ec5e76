"""Demo data reproducibility, result-folder writing (atomic, no clobbering) and table export."""

from __future__ import annotations

import json
from pathlib import Path

import pandas as pd
import pytest

import allobranch as ab
from allobranch.demo import DEMO_EXPONENTS, DEMO_FILES, make_demo, write_demo
from allobranch.errors import OutputExistsError
from allobranch.reporting.outputs import prepare_output_dir, write_files
from allobranch.reporting.tables import export_table, to_latex, to_markdown

REPO = Path(__file__).resolve().parent.parent


def test_committed_demo_equals_seeded_generator(tmp_path):
    # The committed files must be exactly what the seeded generator writes (reproducibility).
    paths = write_demo(tmp_path)
    for kind, name in DEMO_FILES.items():
        assert (REPO / "data_demo" / name).read_bytes() == paths[kind].read_bytes(), name


def test_demo_reads_cleanly_and_matches_truth():
    table = ab.read_junctions(REPO / "data_demo" / DEMO_FILES["table"],
                              recipe=REPO / "data_demo" / DEMO_FILES["recipe"])
    assert set(table.taxa) == set(DEMO_EXPONENTS)
    assert table.n_junctions > 400
    assert (table.data["n_daughters"] == 3).any()  # trifurcations present
    # measurement noise makes some daughters reach their parent; they are flagged, never dropped
    assert any(p.code == "daughter_ge_parent" for p in table.report.flags)
    assert not table.report.excluded
    truth = json.loads((REPO / "data_demo" / DEMO_FILES["truth"]).read_text())
    assert truth["exponent_by_species"] == DEMO_EXPONENTS
    assert "SIMULATED" in truth["note"]
    # diameters in micrometres -> radii in mm: the internal parent is half the file value / 1000 (exact)
    raw = pd.read_csv(REPO / "data_demo" / DEMO_FILES["table"])
    assert table.parent[0] == pytest.approx(raw["D_parent_um"].iloc[0] / 2000.0)


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
    prepare_output_dir(tmp_path, ["a.csv"], force=True)  # allowed with force


def test_write_files_is_all_or_nothing(tmp_path):
    def fail(path):
        raise RuntimeError("disk full")

    with pytest.raises(RuntimeError):
        write_files(tmp_path, {"one.txt": lambda p: p.write_text("1"), "two.txt": fail})
    assert not (tmp_path / "one.txt").exists()  # nothing half-written is left behind
    assert [p.name for p in tmp_path.iterdir()] == []


def test_table_exports(tmp_path):
    df = pd.DataFrame({"level": ["taxon"], "group": ["T1"], "mean": [2.98765], "sd": [0.1], "hdi_low": [2.8],
                       "hdi_high": [3.1], "r_hat": [1.0012], "ess_bulk": [812.4]})
    md = to_markdown(df)
    assert "| level" in md and "2.988" in md
    tex = to_latex(df, caption="Exponents", label="tab:exp")
    assert "\\begin{table}" in tex and "2.988" in tex and "\\label{tab:exp}" in tex
    paths = export_table(df, tmp_path / "exponents")
    assert sorted(p.suffix for p in paths) == [".csv", ".md", ".tex"]
    pd.testing.assert_frame_equal(pd.read_csv(tmp_path / "exponents.csv"), df)
