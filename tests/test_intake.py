"""Reading, unit conversion, recipes and validation of junction tables."""

from __future__ import annotations

import hashlib
import shutil
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from allobranch import read_junctions
from allobranch.errors import InputError, OutputExistsError, RecipeError
from allobranch.intake import load_recipe, mapping_from_options, write_recipe
from allobranch.intake.mapping import ColumnMapping
from allobranch.intake.units import ALLOWED_UNITS, canonical_unit, to_internal_radius
from allobranch.intake.validate import DEFAULT_TAXON, parse_numbers

DATA = Path(__file__).parent / "data"
BASIC = dict(
    taxon="species",
    specimen="animal",
    junction="node",
    parent="r_parent",
    daughters=["r_d1", "r_d2", "r_d3"],
    unit="um",
    rel_error=0.05,
)


def _frame() -> pd.DataFrame:
    return pd.DataFrame(
        {
            "taxon": ["A", "A", "B"],
            "spec": ["s1", "s1", "s2"],
            "p": [10.0, 12.0, 20.0],
            "d1": [8.0, 9.5, 16.0],
            "d2": [7.0, 9.0, 15.0],
            "d3": [np.nan, np.nan, 5.0],
        }
    )


MAP = dict(taxon="taxon", specimen="spec", parent="p", daughters=["d1", "d2", "d3"], unit="mm")


def _sha(path: Path) -> str:
    return hashlib.sha256(path.read_bytes()).hexdigest()


def _fatal(exc: pytest.ExceptionInfo) -> list:
    return [p for p in exc.value.problems if p.severity == "fatal"]


def _write(tmp_path: Path, text: str, name: str = "t.csv") -> Path:
    path = tmp_path / name
    path.write_text(text, encoding="utf-8")
    return path


# -- units --------------------------------------------------------------------------------------------
@pytest.mark.parametrize(
    "unit, factor",
    [
        ("nm", 1e-6),
        ("um", 1e-3),
        ("µm", 1e-3),
        ("micron", 1e-3),
        ("mm", 1.0),  # exact algebra: SI prefixes
        ("cm", 10.0),
        ("m", 1000.0),
        ("in", 25.4),  # exact algebra: 1 in = 25.4 mm by definition
        ("px", 1.0),  # pixels are not converted
    ],
)
def test_unit_conversion_to_mm(unit, factor):
    np.testing.assert_allclose(
        to_internal_radius(np.array([2.0]), unit, "radius"), [2.0 * factor], rtol=1e-15
    )
    # exact algebra: a radius is half the diameter
    np.testing.assert_allclose(to_internal_radius(np.array([2.0]), unit, "diameter"), [factor], rtol=1e-15)


def test_unknown_unit_lists_allowed():
    with pytest.raises(RecipeError) as exc:
        canonical_unit("furlong")
    for unit in ALLOWED_UNITS:
        assert unit in str(exc.value)


def test_diameter_um_read_as_radius_mm():
    df = pd.DataFrame({"p": [200.0], "a": [160.0], "b": [120.0], "se": [10.0]})
    table = read_junctions(df, parent="p", daughters=["a", "b"], measure="diameter", unit="um", se="se")
    # exact algebra: 200 um diameter = 0.1 mm radius; the SE of d/2 is SE(d)/2
    np.testing.assert_allclose(table.parent, [0.1])
    np.testing.assert_allclose(table.daughters, [[0.08, 0.06]])
    np.testing.assert_allclose(table.se, [[0.005, 0.005, 0.005]])
    assert table.internal_unit == "mm" and table.unit == "um"


def test_pixels_stay_pixels():
    table = read_junctions(
        pd.DataFrame({"p": [8.0], "a": [6.0], "b": [5.0]}), parent="p", daughters="a,b", unit="PX"
    )
    assert table.internal_unit == "px" and table.mapping.unit == "px"
    np.testing.assert_allclose(table.parent, [8.0])


# -- formats -------------------------------------------------------------------------------------------
def _same_content(a, b):
    pd.testing.assert_frame_equal(a.data, b.data)


def test_csv_matches_dataframe(tmp_path):
    path = tmp_path / "t.csv"
    _frame().to_csv(path, index=False)
    _same_content(read_junctions(path, **MAP), read_junctions(_frame(), **MAP))


@pytest.mark.parametrize("name", ["t.tsv", "t.tab", "t.csv", "t.txt"])
def test_tab_separated(tmp_path, name):
    path = tmp_path / name
    _frame().to_csv(path, index=False, sep="\t")
    _same_content(read_junctions(path, **MAP), read_junctions(_frame(), **MAP))


def test_semicolon_decimal_comma(tmp_path):
    path = tmp_path / "t.csv"
    _frame().assign(p=[10.25, 12.0, 20.0]).to_csv(path, index=False, sep=";", decimal=",")
    assert "10,25" in path.read_text()
    table = read_junctions(path, **MAP)
    _same_content(table, read_junctions(_frame().assign(p=[10.25, 12.0, 20.0]), **MAP))


def test_parquet_round_trip(tmp_path):
    path = tmp_path / "t.parquet"
    _frame().to_parquet(path)
    _same_content(read_junctions(path, **MAP), read_junctions(_frame(), **MAP))


def test_excel_round_trip_and_sheet(tmp_path):
    path = tmp_path / "t.xlsx"
    with pd.ExcelWriter(path) as writer:
        pd.DataFrame({"note": ["x"]}).to_excel(writer, sheet_name="notes", index=False)
        _frame().to_excel(writer, sheet_name="junctions", index=False)
    _same_content(read_junctions(path, sheet="junctions", **MAP), read_junctions(_frame(), **MAP))
    with pytest.raises(InputError, match="'junctions'"):
        read_junctions(path, sheet="nope", **MAP)


def test_excel_blank_row_numbering(tmp_path):
    import openpyxl

    path = tmp_path / "t.xlsx"
    _frame().to_excel(path, index=False)
    wb = openpyxl.load_workbook(path)
    wb.active.insert_rows(3)  # a blank sheet row 3 between the first and second junction
    wb.save(path)
    table = read_junctions(path, **MAP)
    assert list(table.data["source_row"]) == [2, 4, 5]
    assert [p.row for p in table.report.excluded] == [3]


# -- unreadable files ---------------------------------------------------------------------------------
def test_png_renamed_csv(tmp_path):
    path = tmp_path / "image.csv"
    path.write_bytes(b"\x89PNG\r\n\x1a\n" + bytes(range(256)))
    with pytest.raises(InputError) as exc:
        read_junctions(path, **MAP)
    assert "image.csv" in str(exc.value) and "PNG image" in str(exc.value)


@pytest.mark.parametrize("name, what", [("t.parquet", "as Parquet"), ("t.xlsx", "as an Excel workbook")])
def test_damaged_binary_table_names_the_file_and_the_way_out(tmp_path, name, what):
    path = tmp_path / name
    path.write_text("p,d1,d2\n1,0.5,0.5\n")  # text under a binary format's extension
    with pytest.raises(InputError) as exc:
        read_junctions(path, parent="p", daughters="d1,d2")
    (problem,) = exc.value.problems
    assert problem.code == "unreadable" and name in problem.file and what in problem.message
    assert problem.hint.endswith("or export the table as CSV (UTF-8)")


def test_nul_bytes(tmp_path):
    path = tmp_path / "t.csv"
    path.write_bytes(b"p,d1,d2\n1,\x00\x00,2\n")
    with pytest.raises(InputError, match="binary data"):
        read_junctions(path, parent="p", daughters="d1,d2")


def test_bad_encoding_names_line(tmp_path):
    path = tmp_path / "t.csv"
    path.write_bytes("p,d1,d2\n1,0.5,0.5\nM\xfcller,1,1\n".encode("latin-1"))
    with pytest.raises(InputError) as exc:
        read_junctions(path, parent="p", daughters="d1,d2")
    assert exc.value.problems[0].row == 3
    assert "UTF-8" in str(exc.value) and "encoding=" in exc.value.problems[0].hint


@pytest.mark.parametrize("text", ["", "   \n\n", "p,d1,d2\n", "p,d1,d2\n\n\n"])
def test_empty_or_header_only(tmp_path, text):
    with pytest.raises(InputError) as exc:
        read_junctions(_write(tmp_path, text), parent="p", daughters="d1,d2")
    assert "t.csv" in str(exc.value)
    assert any(p.code == "empty_table" for p in exc.value.problems)


def test_missing_file():
    with pytest.raises(InputError, match="file not found"):
        read_junctions("/no/such/dir/t.csv", parent="p", daughters="d1,d2")


def test_ragged_rows_are_fatal(tmp_path):
    with pytest.raises(InputError, match="same number"):
        read_junctions(_write(tmp_path, "p,d1,d2\n1,0.5,0.5\n1,0.5,0.5,9,9\n"), parent="p", daughters="d1,d2")


def test_duplicate_header_names(tmp_path):
    with pytest.raises(InputError, match="more than once"):
        read_junctions(_write(tmp_path, "p,d1,d1\n1,0.5,0.5\n"), parent="p", daughters="d1,d1x")


# -- fatal problems in the data -------------------------------------------------------------------------
def test_missing_columns_listed(tmp_path):
    path = _write(tmp_path, "P,d1,d2\n1,0.5,0.5\n")
    with pytest.raises(InputError) as exc:
        read_junctions(path, parent="p", daughters="d1,d2,d3")
    text = str(exc.value)
    assert "'p'" in text and "'d3'" in text and "'P', 'd1', 'd2'" in text
    assert {p.column for p in exc.value.problems} == {"p", "d3"}


@pytest.mark.parametrize(
    "cell, column, code",
    [
        ("12 um", "d1", "not_numeric"),
        ("0", "p", "nonpositive_size"),
        ("-0.4", "d2", "nonpositive_size"),
        ("inf", "d1", "nonfinite_size"),
        ("", "p", "missing_size"),
        ("", "d2", "missing_size"),
        ("-1", "d3", "nonpositive_size"),
        ("?", "d3", "not_numeric"),
        ("NA", "d3", "missing_word"),
        ("1e400", "p", "nonfinite_size"),
    ],
)
def test_bad_size_cell_names_row_column(tmp_path, cell, column, code):
    cells = {"p": "1", "d1": "0.6", "d2": "0.5", "d3": "0.3"}
    cells[column] = cell
    text = "p,d1,d2,d3\n1,0.6,0.5,\n" + ",".join(cells.values()) + "\n"
    with pytest.raises(InputError) as exc:
        read_junctions(_write(tmp_path, text), parent="p", daughters="d1,d2,d3")
    (problem,) = _fatal(exc)
    assert (problem.row, problem.column, problem.code) == (3, column, code)
    assert "row 3" in str(exc.value) and f"column '{column}'" in str(exc.value)
    if code in ("not_numeric", "missing_word", "nonfinite_size"):
        assert repr(cell) in problem.message


def test_all_fatal_problems_collected(tmp_path):
    text = "taxon,spec,j,p,d1,d2\nA,s1,1,1,x,0.5\nA,s1,1,-1,0.5,0.5\nB,s1,2,1,0.5,\n"
    with pytest.raises(InputError) as exc:
        read_junctions(
            _write(tmp_path, text),
            taxon="taxon",
            specimen="spec",
            junction="j",
            parent="p",
            daughters="d1,d2",
        )
    codes = {(p.row, p.code) for p in exc.value.problems}
    assert codes == {
        (2, "not_numeric"),
        (3, "nonpositive_size"),
        (3, "duplicate_junction"),
        (4, "missing_size"),
        (4, "specimen_in_two_taxa"),
    }


def test_se_problems(tmp_path):
    text = "p,d1,d2,se\n1,0.6,0.5,-0.1\n1,0.6,0.5,abc\n1,0.6,0.5,NA\n1,0.6,0.5,inf\n"
    with pytest.raises(InputError) as exc:
        read_junctions(_write(tmp_path, text), parent="p", daughters="d1,d2", se="se")
    assert {(p.row, p.column, p.code) for p in exc.value.problems} == {
        (2, "se", "bad_se"),
        (3, "se", "not_numeric"),
        (4, "se", "missing_word"),
        (5, "se", "nonfinite_se"),
    }


def test_duplicate_junction_in_specimen(tmp_path):
    text = "spec,j,p,d1,d2\ns1,7,1,0.6,0.5\ns2,7,1,0.6,0.5\ns1,7,1,0.6,0.5\n"
    with pytest.raises(InputError) as exc:
        read_junctions(_write(tmp_path, text), specimen="spec", junction="j", parent="p", daughters="d1,d2")
    (problem,) = exc.value.problems
    assert problem.row == 4 and problem.column == "j" and "rows 2, 4" in problem.message


def test_specimen_under_two_taxa(tmp_path):
    text = "t,spec,p,d1,d2\nA,s1,1,0.6,0.5\nB,s1,1,0.6,0.5\n"
    with pytest.raises(InputError) as exc:
        read_junctions(_write(tmp_path, text), taxon="t", specimen="spec", parent="p", daughters="d1,d2")
    (problem,) = exc.value.problems
    assert (
        problem.row == 3
        and problem.column == "spec"
        and "'A'" in problem.message
        and "'B'" in problem.message
    )


def test_missing_label_is_fatal(tmp_path):
    with pytest.raises(InputError) as exc:
        read_junctions(
            _write(tmp_path, "t,p,d1,d2\nA,1,0.6,0.5\n,1,0.6,0.5\n"), taxon="t", parent="p", daughters="d1,d2"
        )
    assert [(p.row, p.column, p.code) for p in exc.value.problems] == [(3, "t", "missing_label")]


@pytest.mark.parametrize("rel_error", [0.0, 1.0, -0.1, 1.5, float("nan")])
def test_rel_error_outside_unit_interval(rel_error):
    with pytest.raises(RecipeError, match="rel_error|relative error"):
        read_junctions(_frame(), rel_error=rel_error, **MAP)


def test_fewer_than_two_daughter_columns():
    with pytest.raises(RecipeError, match="at least two daughters"):
        read_junctions(_frame(), parent="p", daughters=["d1"])


def test_no_parent_or_daughters_given():
    with pytest.raises(RecipeError, match="--parent"):
        read_junctions(_frame())


def test_column_used_twice():
    with pytest.raises(RecipeError, match="more than one role"):
        read_junctions(_frame(), parent="p", daughters=["d1", "p"])


def test_se_column_count():
    with pytest.raises(RecipeError, match="standard-error columns"):
        read_junctions(_frame().assign(s1=0.1, s2=0.1), parent="p", daughters=["d1", "d2"], se=["s1", "s2"])


# -- what is kept, flagged, excluded ---------------------------------------------------------------------
def test_blank_row_excluded_and_reported(tmp_path):
    text = "p,d1,d2\n1,0.6,0.5\n\n , ,\n1,0.7,0.6\n"
    table = read_junctions(_write(tmp_path, text), parent="p", daughters="d1,d2")
    assert list(table.data["source_row"]) == [2, 5]
    assert [(p.row, p.code) for p in table.report.excluded] == [(3, "blank_row"), (4, "blank_row")]
    assert table.report.n_rows_read == 4


def test_blank_only_is_fatal(tmp_path):
    with pytest.raises(InputError, match="no data rows"):
        read_junctions(_write(tmp_path, "p,d1,d2\n,,\n"), parent="p", daughters="d1,d2")


def test_daughter_ge_parent_flagged_but_kept():
    df = pd.DataFrame({"p": [1.0, 1.0], "a": [1.0, 0.6], "b": [0.5, 0.5]})
    table = read_junctions(df, parent="p", daughters=["a", "b"])
    assert table.n_junctions == 2
    (flag,) = table.report.flags
    assert (flag.row, flag.column, flag.code) == (2, "a", "daughter_ge_parent")


def test_extreme_ratios_flagged_but_kept():
    # below 0.05 of the parent; and a sibling more than 10 times smaller than the largest daughter
    df = pd.DataFrame({"p": [1.0, 1.0, 1.0], "a": [0.8, 0.8, 0.8], "b": [0.04, 0.07, 0.5]})
    table = read_junctions(df, parent="p", daughters=["a", "b"])
    assert table.n_junctions == 3
    flagged = sorted({(p.row, p.code) for p in table.report.flags})
    assert flagged == [(2, "extreme_ratio"), (3, "extreme_ratio")]


def test_fewer_daughters_and_compaction():
    df = pd.DataFrame(
        {
            "p": [1.0, 1.0, 1.0],
            "a": [0.6, 0.6, 0.6],
            "b": [0.5, 0.5, 0.5],
            "c": [np.nan, np.nan, 0.3],
            "d": [np.nan, 0.4, 0.2],
        }
    )
    table = read_junctions(df, parent="p", daughters=["a", "b", "c", "d"])
    assert list(table.data["n_daughters"]) == [2, 3, 4]
    np.testing.assert_array_equal(table.daughters[1], [0.6, 0.5, 0.4, np.nan])
    assert not table.report.problems


def test_defaults_without_group_columns():
    table = read_junctions(_frame(), parent="p", daughters=["d1", "d2", "d3"])
    # one taxon of the documented default name, one specimen named after it
    assert set(table.data["taxon"]) == {DEFAULT_TAXON} and set(table.data["specimen"]) == {DEFAULT_TAXON}
    assert list(table.data["junction"]) == ["2", "3", "4"]
    by_taxon = read_junctions(_frame(), taxon="taxon", parent="p", daughters=["d1", "d2", "d3"])
    assert list(by_taxon.data["specimen"]) == ["A", "A", "B"]


def test_se_columns_per_reading():
    df = _frame().assign(sp=0.1, s1=0.2, s2=0.3, s3=[np.nan, np.nan, 0.4])
    table = read_junctions(df, se=["sp", "s1", "s2", "s3"], **MAP)
    np.testing.assert_allclose(table.se[2], [0.1, 0.2, 0.3, 0.4])
    np.testing.assert_allclose(table.se[0], [0.1, 0.2, 0.3, np.nan])


def test_parse_numbers_keeps_text_visible():
    values, bad = parse_numbers(pd.Series(["1,5", " 2 ", "", "1.000,5", "1_0", None]), decimal=",")
    np.testing.assert_array_equal(bad, [False, False, False, True, True, False])
    np.testing.assert_array_equal(values[:3], [1.5, 2.0, np.nan])


def test_inputs_not_modified(tmp_path):
    path = tmp_path / "junctions_basic.csv"
    shutil.copy(DATA / "junctions_basic.csv", path)
    before = _sha(path)
    read_junctions(path, **BASIC)
    assert _sha(path) == before
    df = _frame()
    snapshot = df.copy()
    read_junctions(df, **MAP)
    pd.testing.assert_frame_equal(df, snapshot)


# -- recipes --------------------------------------------------------------------------------------------
def test_recipe_equals_flags():
    by_recipe = read_junctions(DATA / "junctions_basic.csv", recipe=DATA / "recipe_basic.toml")
    by_flags = read_junctions(DATA / "junctions_basic.csv", repeats="repeats_basic.csv", **BASIC)
    pd.testing.assert_frame_equal(by_recipe.data, by_flags.data)
    pd.testing.assert_frame_equal(by_recipe.repeats, by_flags.repeats)
    assert by_recipe.digest() == by_flags.digest()


def test_recipe_round_trip(tmp_path):
    mapping = load_recipe(DATA / "recipe_basic.toml")
    assert (
        mapping.unit == "um" and mapping.rel_error == 0.05 and mapping.daughters == ("r_d1", "r_d2", "r_d3")
    )
    assert Path(mapping.repeats).is_absolute()
    out = write_recipe(mapping, tmp_path / "copy.toml")
    assert load_recipe(out) == mapping
    with pytest.raises(OutputExistsError):
        write_recipe(mapping, out)


def test_recipe_se_list_and_sheet(tmp_path):
    path = _write(
        tmp_path,
        '[columns]\nparent = "p"\ndaughters = ["a", "b"]\n[measurement]\nse = ["s0", "s1", "s2"]\n'
        'unit = "µm"\n[input]\nsheet = "data"\n',
        "r.toml",
    )
    mapping = load_recipe(path)
    assert mapping.se == ("s0", "s1", "s2") and mapping.unit == "um" and mapping.sheet == "data"
    assert load_recipe(write_recipe(mapping, tmp_path / "again.toml")) == mapping


@pytest.mark.parametrize(
    "text, key",
    [
        ('[columns]\nparent = "p"\ndaughters = ["a", "b"]\ncolour = "x"\n', "[columns] colour"),
        ('[columns]\nparent = "p"\ndaughters = "a"\n', "[columns] daughters"),
        ('[columns]\nparent = 3\ndaughters = ["a", "b"]\n', "[columns] parent"),
        ('[columns]\ndaughters = ["a", "b"]\n', "[columns] parent"),
        (
            '[columns]\nparent = "p"\ndaughters = ["a", "b"]\n[measurement]\nrel_error = "5%"\n',
            "[measurement] rel_error",
        ),
        (
            '[columns]\nparent = "p"\ndaughters = ["a", "b"]\n[measurement]\nrel_error = 5\n',
            "[measurement] rel_error",
        ),
        (
            '[columns]\nparent = "p"\ndaughters = ["a", "b"]\n[measurement]\nunit = "furlong"\n',
            "[measurement] unit",
        ),
        ('[colums]\nparent = "p"\n', "[colums]"),
        ('[columns]\nparent = "p"\ndaughters = ["a", "b"\n', "not a valid TOML"),
    ],
)
def test_bad_recipes(tmp_path, text, key):
    path = _write(tmp_path, text, "bad.toml")
    with pytest.raises(RecipeError) as exc:
        load_recipe(path)
    assert "bad.toml" in str(exc.value)
    assert key in str(exc.value)


def test_missing_recipe():
    with pytest.raises(RecipeError, match="not found"):
        load_recipe("/no/such/recipe.toml")


def test_options_override_base():
    base = ColumnMapping(parent="p", daughters=("a", "b"), unit="mm")
    assert mapping_from_options(base=base, unit="cm", daughters="a, b ,c").daughters == ("a", "b", "c")
    assert mapping_from_options(base=base, unit="cm").unit == "cm"


# -- repeat readings --------------------------------------------------------------------------------------
def test_repeats_converted_and_mapped():
    table = read_junctions(DATA / "junctions_basic.csv", recipe=DATA / "recipe_basic.toml")
    rep = table.repeats
    assert list(rep.columns) == ["specimen", "junction", "segment", "value"]
    assert list(rep["segment"]) == ["parent", "parent", "d2", "d3"]
    # exact algebra: 10.2 um = 0.0102 mm
    np.testing.assert_allclose(rep["value"], [0.0102, 0.0099, 0.0071, 0.0006])


def test_repeats_segment_follows_compaction(tmp_path):
    main = _write(tmp_path, "s,j,p,a,b,c,d\nx,1,1,0.6,0.5,,0.2\n")
    _write(tmp_path, "specimen,junction,segment,value\nx,1,d,0.21\n", "rep.csv")
    table = read_junctions(
        main, specimen="s", junction="j", parent="p", daughters="a,b,c,d", repeats="rep.csv"
    )
    assert list(table.repeats["segment"]) == ["d3"]


def test_repeats_problems(tmp_path):
    main = _write(tmp_path, "s,j,p,a,b,c\nx,1,1,0.6,0.5,\n")
    _write(
        tmp_path, "specimen,junction,segment,value\nx,2,a,0.6\nx,1,zz,0.6\nx,1,a,-1\nx,1,c,0.3\n", "rep.csv"
    )
    with pytest.raises(InputError) as exc:
        read_junctions(main, specimen="s", junction="j", parent="p", daughters="a,b,c", repeats="rep.csv")
    got = {(p.file.endswith("rep.csv"), p.row, p.column, p.code) for p in exc.value.problems}
    assert got == {
        (True, 2, "junction", "unknown_junction"),
        (True, 3, "segment", "unknown_segment"),
        (True, 4, "value", "bad_repeat"),
        (True, 5, "segment", "unknown_segment"),
    }


def test_repeats_missing_file_and_columns(tmp_path):
    main = _write(tmp_path, "p,a,b\n1,0.6,0.5\n")
    with pytest.raises(InputError, match="not found"):
        read_junctions(main, parent="p", daughters="a,b", repeats="nope.csv")
    _write(tmp_path, "junc,segment,value\n2,p,1\n", "rep.csv")
    with pytest.raises(InputError, match="no 'junction' column"):
        read_junctions(main, parent="p", daughters="a,b", repeats="rep.csv")


def test_repeats_from_excel_sheet(tmp_path):
    path = tmp_path / "t.xlsx"
    with pd.ExcelWriter(path) as writer:
        _frame().to_excel(writer, sheet_name="junctions", index=False)
        pd.DataFrame({"specimen": ["s2"], "junction": [4], "segment": ["d3"], "value": [5.1]}).to_excel(
            writer, sheet_name="repeats", index=False
        )
    table = read_junctions(path, sheet="junctions", repeats="repeats", **MAP)
    assert list(table.repeats["junction"]) == ["4"] and list(table.repeats["segment"]) == ["d3"]
    np.testing.assert_allclose(table.repeats["value"], [5.1])
