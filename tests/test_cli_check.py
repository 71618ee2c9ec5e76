"""The ``allobranch check`` command."""

from __future__ import annotations

import hashlib
import shutil
import subprocess
import sys
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from allobranch.cli import main

DATA = Path(__file__).parent / "data"
FLAGS = [
    "--taxon",
    "species",
    "--specimen",
    "animal",
    "--junction",
    "node",
    "--parent",
    "r_parent",
    "--daughters",
    "r_d1,r_d2,r_d3",
    "--unit",
    "um",
    "--rel-error",
    "0.05",
]


@pytest.fixture
def table(tmp_path) -> Path:
    for name in ("junctions_basic.csv", "repeats_basic.csv", "recipe_basic.toml"):
        shutil.copy(DATA / name, tmp_path / name)
    return tmp_path / "junctions_basic.csv"


def test_check_reports_counts_flags_and_naive_summary(table, capsys):
    assert main(["check", str(table), *FLAGS]) == 0
    out = capsys.readouterr().out
    assert "junctions used: 6; taxa: 2; specimens: 4" in out
    assert "daughters per junction: 2: 4, 3: 2" in out
    assert "row 6, column 'r_d1'" in out and "not smaller than the parent" in out  # daughter_ge_parent
    assert "row 7, column 'r_d3'" in out  # extreme ratio
    assert "row 5: blank row" in out
    assert "ignore measurement error" in out
    assert "mouse" in out and "rat" in out


def test_check_writes_junctions_in_user_unit(tmp_path, capsys):
    df = pd.DataFrame({"p": [200.0, 300.0], "a": [160.0, 240.0], "b": [150.0, 200.0]})
    src = tmp_path / "diam.csv"
    df.to_csv(src, index=False)
    out_dir = tmp_path / "out"
    args = [
        "check",
        str(src),
        "--parent",
        "p",
        "--daughters",
        "a,b",
        "--measure",
        "diameter",
        "--unit",
        "um",
        "--out",
        str(out_dir),
    ]
    assert main(args) == 0
    written = pd.read_csv(out_dir / "junctions.csv")
    # exact algebra: radii in the user's unit are half the diameters
    np.testing.assert_allclose(written["parent_radius_um"], [100.0, 150.0])
    np.testing.assert_allclose(written["d2_radius_um"], [75.0, 100.0])
    np.testing.assert_allclose(written["ratio_large"], [0.8, 0.8])
    assert list(written["source_row"]) == [2, 3]
    before = (out_dir / "junctions.csv").read_bytes()
    assert main(args) == 2
    assert "--force" in capsys.readouterr().err
    assert (out_dir / "junctions.csv").read_bytes() == before
    assert main([*args, "--force"]) == 0


def test_save_recipe_then_recipe_gives_same_output(table, tmp_path, capsys):
    recipe = tmp_path / "saved.toml"
    assert (
        main(["check", str(table), *FLAGS, "--out", str(tmp_path / "a"), "--save-recipe", str(recipe)]) == 0
    )
    assert main(["check", str(table), "--recipe", str(recipe), "--out", str(tmp_path / "b")]) == 0
    assert (tmp_path / "a" / "junctions.csv").read_bytes() == (tmp_path / "b" / "junctions.csv").read_bytes()
    assert main(["check", str(table), *FLAGS, "--save-recipe", str(recipe)]) == 2
    assert "already exists" in capsys.readouterr().err


def test_flags_override_recipe(table, tmp_path, capsys):
    recipe = table.parent / "recipe_basic.toml"
    assert main(["check", str(table), "--recipe", str(recipe), "--out", str(tmp_path / "um")]) == 0
    assert (
        main(["check", str(table), "--recipe", str(recipe), "--unit", "mm", "--out", str(tmp_path / "mm")])
        == 0
    )
    assert "repeat readings" in capsys.readouterr().out
    um = pd.read_csv(tmp_path / "um" / "junctions.csv")
    mm = pd.read_csv(tmp_path / "mm" / "junctions.csv")
    # the same numbers, now read as mm; geometry is unit-free
    np.testing.assert_allclose(um["parent_radius_um"], mm["parent_radius_mm"])
    np.testing.assert_allclose(um["exponent"], mm["exponent"])


def test_bad_table_exit_code_and_message(tmp_path, capsys):
    src = tmp_path / "bad.csv"
    src.write_text("p,d1,d2\n1,0.6,0.5\n1,abc,0.5\n-2,0.6,0.5\n", encoding="utf-8")
    digest = hashlib.sha256(src.read_bytes()).hexdigest()
    assert main(["check", str(src), "--parent", "p", "--daughters", "d1,d2"]) == 2
    err = capsys.readouterr().err
    assert "row 3, column 'd1': 'abc' is not a number" in err
    assert "row 4, column 'p'" in err
    assert "Traceback" not in err
    assert hashlib.sha256(src.read_bytes()).hexdigest() == digest  # input file unchanged


def test_missing_mapping_and_missing_file(table, capsys):
    assert main(["check", str(table)]) == 2
    assert "--parent" in capsys.readouterr().err
    assert main(["check", str(table.parent / "nope.csv"), "--parent", "p", "--daughters", "a,b"]) == 2
    assert "file not found" in capsys.readouterr().err


def test_unknown_unit_lists_allowed(table, capsys):
    assert main(["check", str(table), *FLAGS, "--unit", "furlong"]) == 2
    err = capsys.readouterr().err
    assert "furlong" in err and "um" in err and "px" in err


@pytest.mark.parametrize(
    "content, expected",
    [
        (b"p,d1,d2\n1,abc,0.5\n", "row 2, column 'd1'"),
        (b"\x89PNG\r\n\x1a\n\x00\x00binary", "PNG image"),
    ],
)
def test_subprocess_no_traceback(tmp_path, content, expected):
    src = tmp_path / "bad.csv"
    src.write_bytes(content)
    proc = subprocess.run(
        [sys.executable, "-m", "allobranch.cli", "check", str(src), "--parent", "p", "--daughters", "d1,d2"],
        capture_output=True,
        text=True,
    )
    assert proc.returncode == 2
    assert expected in proc.stderr
    assert "Traceback" not in proc.stderr


def test_subprocess_success(table):
    proc = subprocess.run(
        [sys.executable, "-m", "allobranch.cli", "check", str(table), *FLAGS],
        capture_output=True,
        text=True,
    )
    assert proc.returncode == 0, proc.stderr
    assert "junctions used: 6" in proc.stdout


def test_bad_destinations_fail_before_work(table, tmp_path, capsys):
    a_file = tmp_path / "a_file"
    a_file.write_text("x")
    assert main(["check", str(table), *FLAGS, "--out", str(a_file)]) == 2
    captured = capsys.readouterr()
    assert "must be a folder" in captured.err and captured.out == ""
    assert main(["check", str(table), *FLAGS, "--save-recipe", str(tmp_path / "nodir" / "r.toml")]) == 2
    assert "does not exist" in capsys.readouterr().err


def test_no_root_reasons_reported(table, capsys):
    assert main(["check", str(table), *FLAGS]) == 0
    assert "daughter_ge_parent: 1" in capsys.readouterr().out
