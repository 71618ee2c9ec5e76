"""Input hardening: missing-value words and non-finite numbers, text-file details, encodings, damaged fits."""

from __future__ import annotations

import hashlib
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from allobranch import read_junctions
from allobranch.errors import InputError, RecipeError
from allobranch.inference.results import FitResult
from allobranch.intake import load_recipe, write_recipe
from allobranch.intake.recipe import FIELD_SECTION
from allobranch.intake.validate import MISSING_WORDS, describe_unusable, parse_numbers

SIZES = dict(parent="p", daughters="d1,d2,d3")
GOOD_ROW = "1,0.6,0.5,"


def _write(tmp_path: Path, text: str, name: str = "t.csv", encoding: str = "utf-8") -> Path:
    path = tmp_path / name
    path.write_bytes(text.encode(encoding))
    return path


def _problems(exc: pytest.ExceptionInfo) -> list[tuple[int | None, str | None, str]]:
    return [(p.row, p.column, p.code) for p in exc.value.problems]


def _sha(path: Path) -> str:
    return hashlib.sha256(path.read_bytes()).hexdigest()


# -- 1. missing-value words and non-finite numbers are refused -------------------------------------------
WORDS = ["NA", "n/a", "N/A", "nan", "NaN", "#N/A", "null", "NULL", "Null", " NA ", "  #n/a", "nan\t", "None"]


@pytest.mark.parametrize("word", WORDS)
@pytest.mark.parametrize("column", ["p", "d1", "d3"])
def test_missing_word_in_size_column_refused(tmp_path, word, column):
    cells = {"p": "1", "d1": "0.6", "d2": "0.5", "d3": "0.3"}
    cells[column] = f'"{word}"' if word != word.strip() else word  # RFC 4180: quotes keep the spaces
    path = _write(tmp_path, f"p,d1,d2,d3\n{GOOD_ROW}\n" + ",".join(cells.values()) + "\n")
    with pytest.raises(InputError) as exc:
        read_junctions(path, **SIZES)
    assert _problems(exc) == [(3, column, "missing_word")]
    (problem,) = exc.value.problems
    assert (
        problem.file == str(path)
        and repr(word) in problem.message
        and "missing-value word" in problem.message
    )
    assert "empty" in problem.hint  # says what to do: a number, or an empty cell where a daughter is absent
    assert f"t.csv, row 3, column '{column}'" in str(exc.value)


@pytest.mark.parametrize(
    "cell, kind",
    [
        ("inf", "nonfinite"),
        ("-inf", "nonfinite"),
        ("Infinity", "nonfinite"),
        ("+nan", "nonfinite"),
        ("1e400", "overflow"),
        ("-1e400", "overflow"),
        ("1E+999", "overflow"),
    ],
)
@pytest.mark.parametrize("column", ["p", "d3"])
def test_nonfinite_size_refused(tmp_path, cell, kind, column):
    # float("1e400") is inf: IEEE 754 double precision tops out near 1.8e308
    cells = {"p": "1", "d1": "0.6", "d2": "0.5", "d3": "0.3"}
    cells[column] = cell
    path = _write(tmp_path, f"p,d1,d2,d3\n{GOOD_ROW}\n" + ",".join(cells.values()) + "\n")
    with pytest.raises(InputError) as exc:
        read_junctions(path, **SIZES)
    assert _problems(exc) == [(3, column, "nonfinite_size")]
    (problem,) = exc.value.problems
    assert repr(cell) in problem.message and "finite" in problem.hint
    assert ("too large" in problem.message) == (kind == "overflow")


@pytest.mark.parametrize(
    "cell, code",
    [
        ("NA", "missing_word"),
        (" n/a ", "missing_word"),
        ("#N/A", "missing_word"),
        ("null", "missing_word"),
        ("inf", "nonfinite_se"),
        ("-inf", "nonfinite_se"),
        ("1e400", "nonfinite_se"),
    ],
)
@pytest.mark.parametrize("per_reading", [False, True])
def test_missing_word_or_nonfinite_se_refused(tmp_path, cell, code, per_reading):
    se_cols = ["sp", "s1", "s2"] if per_reading else ["se"]
    bad = se_cols[-1]
    cells = ["0.01"] * (len(se_cols) - 1) + [f'"{cell}"']
    text = f"p,d1,d2,{','.join(se_cols)}\n1,0.6,0.5,{','.join(['0.01'] * len(se_cols))}\n1,0.6,0.5,{','.join(cells)}\n"
    with pytest.raises(InputError) as exc:
        read_junctions(_write(tmp_path, text), parent="p", daughters="d1,d2", se=se_cols)
    assert _problems(exc) == [(3, bad, code)]
    assert repr(cell) in exc.value.problems[0].message and "standard error" in exc.value.problems[0].hint


def test_empty_cells_stay_legal(tmp_path):
    """An empty third daughter is a junction with two daughters; an empty SE is kept and flagged."""
    text = "p,d1,d2,d3,se\n1,0.6,0.5,,0.01\n1,0.6,0.5,   ,\n1,0.6,0.5,0.3,0.01\n"
    table = read_junctions(_write(tmp_path, text), se="se", **SIZES)
    assert list(table.data["n_daughters"]) == [2, 2, 3]
    assert {(p.row, p.code) for p in table.report.problems} == {(3, "se_missing")}


def test_empty_parent_still_fatal(tmp_path):
    with pytest.raises(InputError) as exc:
        read_junctions(_write(tmp_path, "p,d1,d2,d3\n,0.6,0.5,\n"), **SIZES)
    assert _problems(exc) == [(2, "p", "missing_size")]


def test_every_refused_cell_listed_with_file_rows(tmp_path):
    # a leading blank line and a quoted two-line field: rows are the lines the user sees (RFC 4180 line breaks)
    text = '\np,d1,d2,d3,note\n1,0.6,0.5,,"two\nlines"\nNA,0.6,0.5,inf,x\n1,#N/A,0.5,1e400,y\n'
    with pytest.raises(InputError) as exc:
        read_junctions(_write(tmp_path, text), **SIZES)
    assert sorted(_problems(exc)) == [
        (5, "d3", "nonfinite_size"),
        (5, "p", "missing_word"),
        (6, "d1", "missing_word"),
        (6, "d3", "nonfinite_size"),
    ]


def test_missing_words_refused_in_dataframe_and_excel(tmp_path):
    frame = pd.DataFrame({"p": [1.0, 1.0], "d1": [0.6, 0.6], "d2": [0.5, 0.5], "d3": [np.nan, "N/A"]})
    with pytest.raises(InputError) as exc:
        read_junctions(frame, **SIZES)
    assert _problems(exc) == [(3, "d3", "missing_word")]
    table = read_junctions(frame.iloc[:1], **SIZES)  # a native NaN is an empty cell
    assert list(table.data["n_daughters"]) == [2]
    with pytest.raises(InputError) as exc:
        read_junctions(frame.assign(d3=[np.nan, np.inf]), **SIZES)
    assert _problems(exc) == [(3, "d3", "nonfinite_size")]

    path = tmp_path / "t.xlsx"
    pd.DataFrame({"p": [1.0, 1.0], "d1": [0.6, "#N/A"], "d2": [0.5, 0.5]}).to_excel(path, index=False)
    with pytest.raises(InputError) as exc:
        read_junctions(path, parent="p", daughters="d1,d2")
    assert _problems(exc) == [(3, "d1", "missing_word")]
    assert "[sheet 'Sheet1']" in exc.value.problems[0].file


def test_missing_word_in_semicolon_file_and_repeats(tmp_path):
    main = _write(tmp_path, "s;j;p;a;b\nx;1;1,0;0,6;NA\n")
    with pytest.raises(InputError) as exc:
        read_junctions(main, specimen="s", junction="j", parent="p", daughters="a,b")
    assert _problems(exc) == [(2, "b", "missing_word")]
    main = _write(tmp_path, "s,j,p,a,b\nx,1,1,0.6,0.5\n")
    _write(tmp_path, "specimen,junction,segment,value\nx,1,a,n/a\nx,1,b,1e400\n", "rep.csv")
    with pytest.raises(InputError) as exc:
        read_junctions(main, specimen="s", junction="j", parent="p", daughters="a,b", repeats="rep.csv")
    assert _problems(exc) == [(2, "value", "missing_word"), (3, "value", "nonfinite_repeat")]
    assert all(p.file.endswith("rep.csv") for p in exc.value.problems)


def test_parse_numbers_refuses_words_and_nonfinite():
    cells = pd.Series(["1.5", "", "  ", None, np.nan, "NA", " #n/a ", "inf", "1e400", "12 um", 10**400, True])
    values, bad = parse_numbers(cells)
    np.testing.assert_array_equal(bad, [False] * 5 + [True] * 7)
    assert values[0] == 1.5 and np.isnan(values[1:]).all()
    kinds = [describe_unusable(c)[1] for c in cells[bad]]
    assert kinds == [
        "missing_word",
        "missing_word",
        "nonfinite",
        "overflow",
        "not_numeric",
        "overflow",
        "not_numeric",
    ]
    assert {"na", "n/a", "nan", "#n/a", "null"} <= MISSING_WORDS


# -- 2. text-file details ----------------------------------------------------------------------------------
def _basic(table):
    return table.data[["taxon", "source_row", "parent", "d1", "d2"]].to_dict("list")


def test_utf8_byte_order_mark(tmp_path):
    # Unicode BOM U+FEFF, encoded in UTF-8 as EF BB BF, before the first column name
    path = tmp_path / "bom.csv"
    path.write_bytes(b"\xef\xbb\xbft,p,d1,d2\nA,1,0.6,0.5\n")
    for kwargs in ({}, {"encoding": "utf-8"}, {"encoding": "UTF8"}):
        table = read_junctions(path, taxon="t", parent="p", daughters="d1,d2", **kwargs)
        assert _basic(table) == {"taxon": ["A"], "source_row": [2], "parent": [1.0], "d1": [0.6], "d2": [0.5]}


@pytest.mark.parametrize("newline", ["\r\n", "\r", "\n"])
def test_line_ends(tmp_path, newline):
    # RFC 4180 section 2: records end with CRLF; bare LF (Unix) and CR (old Mac) are read the same
    text = newline.join(["t,p,d1,d2", "A,1,0.6,0.5", "", "B,2,1.2,1.0", ""])
    path = tmp_path / "t.csv"
    path.write_bytes(text.encode())
    table = read_junctions(path, taxon="t", parent="p", daughters="d1,d2")
    assert _basic(table) == {
        "taxon": ["A", "B"],
        "source_row": [2, 4],
        "parent": [1.0, 2.0],
        "d1": [0.6, 1.2],
        "d2": [0.5, 1.0],
    }
    assert [(p.row, p.code) for p in table.report.excluded] == [(3, "blank_row")]


def test_quoted_fields(tmp_path):
    # RFC 4180 section 2 rules 5-7: quoted fields may hold the delimiter, line breaks and doubled quotes
    text = (
        '"t","p",d1,"d2"\r\n'
        '"Mus musculus, lab strain",1,"0.6",0.5\r\n'
        '"the ""wild"" type",1,0.7,"0.5"\r\n'
        '"a note\r\nover two lines",2,1.2,1.0\r\n'
        "C,1,0.6,0.5\r\n"
    )
    table = read_junctions(_write(tmp_path, text), taxon="t", parent="p", daughters="d1,d2")
    assert list(table.data["taxon"]) == [
        "Mus musculus, lab strain",
        'the "wild" type',
        "a note\r\nover two lines",
        "C",
    ]
    assert list(table.data["source_row"]) == [2, 3, 4, 6]  # the two-line record starts on line 4
    np.testing.assert_array_equal(table.parent, [1.0, 1.0, 2.0, 1.0])


def test_quoted_semicolon_and_tab_fields(tmp_path):
    semi = read_junctions(
        _write(tmp_path, 't;p;d1;d2\n"A; B";1;0,6;"0,5"\n'), taxon="t", parent="p", daughters="d1,d2"
    )
    tab = read_junctions(
        _write(tmp_path, 't\tp\td1\td2\n"A\tB"\t1\t0.6\t0.5\n', "t.tsv"),
        taxon="t",
        parent="p",
        daughters="d1,d2",
    )
    assert list(semi.data["taxon"]) == ["A; B"] and list(tab.data["taxon"]) == ["A\tB"]
    np.testing.assert_array_equal(semi.daughters, [[0.6, 0.5]])


def test_unclosed_quote_names_row(tmp_path):
    with pytest.raises(InputError) as exc:
        read_junctions(
            _write(tmp_path, 'p,d1,d2\n1,0.6,0.5\n1,"0.6,0.5\n1,0.6,0.5\n'), parent="p", daughters="d1,d2"
        )
    (problem,) = exc.value.problems
    assert (
        problem.code == "parse_error" and "quotes" in problem.hint and problem.row == 3
    )  # where the quote opens


def test_trailing_separator_does_not_shift_columns(tmp_path):
    # an empty field after the last column holds no data; values stay under their own column names
    table = read_junctions(
        _write(tmp_path, "p,d1,d2\n3,0.6,0.5,\n2,0.7,0.6,\n"), parent="p", daughters="d1,d2"
    )
    np.testing.assert_array_equal(table.parent, [3.0, 2.0])
    np.testing.assert_array_equal(table.daughters, [[0.6, 0.5], [0.7, 0.6]])
    with pytest.raises(InputError) as exc:
        read_junctions(_write(tmp_path, "p,d1,d2\n3,0.6,0.5,\n2,0.7,0.6,9\n"), parent="p", daughters="d1,d2")
    assert _problems(exc) == [(3, None, "parse_error")] and "4 fields" in str(exc.value)


def test_space_padded_headers_match_recipe(tmp_path):
    path = _write(tmp_path, " taxon ,  parent ,d1 ,\td2\n A ,1,0.6,0.5\nA,1,0.7,0.6\n")
    recipe = _write(
        tmp_path, '[columns]\ntaxon = "taxon"\nparent = "parent"\ndaughters = ["d1", "d2"]\n', "r.toml"
    )
    table = read_junctions(path, recipe=recipe)
    assert table.n_junctions == 2 and table.taxa == ["A"]  # label spaces are ignored too
    with pytest.raises(InputError) as exc:
        read_junctions(_write(tmp_path, "p, d1,d1 ,d2\n1,0.6,0.5,0.4\n"), parent="p", daughters="d1,d2")
    assert _problems(exc) == [(1, None, "duplicate_column")] and "'d1'" in str(exc.value)


def test_taxon_with_one_junction(tmp_path):
    text = "t,s,p,d1,d2\nA,a1,1,0.6,0.5\nA,a1,1,0.7,0.6\nA,a2,1,0.6,0.6\nB,b1,2,1.4,1.2\n"
    table = read_junctions(_write(tmp_path, text), taxon="t", specimen="s", parent="p", daughters="d1,d2")
    assert table.taxa == ["A", "B"]
    assert table.data.groupby("taxon").size().to_dict() == {"A": 3, "B": 1}
    assert table.specimens.to_dict("list") == {"taxon": ["A", "A", "B"], "specimen": ["a1", "a2", "b1"]}
    assert not table.report.problems


# -- 3. encodings --------------------------------------------------------------------------------------------
LATIN = "t,p,d1,d2\nA,1,0.6,0.5\nCaño Müller,1,0.7,0.6\n"


def test_latin1_without_encoding_says_how_to_name_it(tmp_path):
    path = _write(tmp_path, LATIN, encoding="latin-1")
    before = _sha(path)
    with pytest.raises(InputError) as exc:
        read_junctions(path, taxon="t", parent="p", daughters="d1,d2")
    (problem,) = exc.value.problems
    assert problem.file == str(path) and problem.row == 3 and problem.code == "bad_encoding"
    assert "not UTF-8" in problem.message
    assert 'encoding="' in problem.hint and "read_junctions" in problem.hint  # the Python keyword
    assert f'encoding = "cp1252" under [{FIELD_SECTION["encoding"]}]' in problem.hint  # the recipe key
    assert _sha(path) == before  # the user's file is never written


@pytest.mark.parametrize("encoding", ["latin-1", "ISO-8859-1", "cp1252"])
def test_encoding_keyword(tmp_path, encoding):
    path = _write(tmp_path, LATIN, encoding="latin-1")
    table = read_junctions(path, taxon="t", parent="p", daughters="d1,d2", encoding=encoding)
    # ISO/IEC 8859-1 and Windows-1252 agree on ñ (0xF1) and ü (0xFC)
    assert table.taxa == ["A", "Caño Müller"]
    assert table.mapping.encoding == encoding


def test_encoding_in_recipe_applies_to_repeats(tmp_path):
    path = _write(tmp_path, "s,j,p,a,b\nMüller,1,1,0.6,0.5\n", encoding="latin-1")
    _write(tmp_path, "specimen,junction,segment,value\nMüller,1,a,0.61\n", "rep.csv", encoding="latin-1")
    recipe = _write(
        tmp_path,
        '[columns]\nspecimen = "s"\njunction = "j"\nparent = "p"\ndaughters = ["a", "b"]\n'
        '[measurement]\nrepeats = "rep.csv"\n[input]\nencoding = "latin-1"\n',
        "r.toml",
    )
    table = read_junctions(path, recipe=recipe)
    assert list(table.data["specimen"]) == ["Müller"] and list(table.repeats["specimen"]) == ["Müller"]
    mapping = load_recipe(recipe)
    assert mapping.encoding == "latin-1"
    assert load_recipe(write_recipe(mapping, tmp_path / "again.toml")) == mapping
    assert 'encoding = "latin-1"' in (tmp_path / "again.toml").read_text(encoding="utf-8")


def test_unknown_encoding_names_key(tmp_path):
    path = _write(tmp_path, LATIN)
    with pytest.raises(RecipeError, match="encoding: 'latin-99' is not a text encoding"):
        read_junctions(path, parent="p", daughters="d1,d2", encoding="latin-99")
    with pytest.raises(RecipeError, match="not a text encoding"):  # a bytes-to-bytes codec
        read_junctions(path, parent="p", daughters="d1,d2", encoding="base64")
    recipe = _write(
        tmp_path,
        '[columns]\nparent = "p"\ndaughters = ["d1", "d2"]\n[input]\nencoding = "klingon"\n',
        "bad.toml",
    )
    with pytest.raises(RecipeError) as exc:
        load_recipe(recipe)
    assert "bad.toml" in str(exc.value) and "[input] encoding" in str(exc.value)


def test_utf16_file(tmp_path):
    # UTF-16 text starts with the byte-order mark U+FEFF (FF FE little-endian)
    path = _write(tmp_path, LATIN, encoding="utf-16")
    with pytest.raises(InputError) as exc:
        read_junctions(path, taxon="t", parent="p", daughters="d1,d2")
    assert "UTF-16" in str(exc.value) and 'encoding="utf-16"' in str(exc.value)
    table = read_junctions(path, taxon="t", parent="p", daughters="d1,d2", encoding="utf-16")
    assert table.taxa == ["A", "Caño Müller"]


def test_wrong_encoding_named(tmp_path):
    path = _write(tmp_path, LATIN, encoding="latin-1")
    with pytest.raises(InputError) as exc:
        read_junctions(path, taxon="t", parent="p", daughters="d1,d2", encoding="ascii")
    (problem,) = exc.value.problems
    assert "not ascii text" in problem.message and "'ascii' does not fit" in problem.hint and problem.row == 3


# -- 4. damaged or foreign saved fits ---------------------------------------------------------------------------
def _assert_not_a_fit(path: Path) -> None:
    with pytest.raises(InputError) as exc:
        FitResult.load(path)
    (problem,) = exc.value.problems
    assert problem.file == str(path) and problem.code == "not_a_fit"
    assert "not a saved allobranch fit or damaged" in problem.message
    assert "refit" in problem.hint and "fit.nc" in problem.hint


def test_load_random_bytes(tmp_path):
    path = tmp_path / "fit.nc"
    path.write_bytes(np.random.default_rng(7).bytes(4096))
    _assert_not_a_fit(path)


def test_load_netcdf_without_provenance(tmp_path):
    import xarray as xr

    path = tmp_path / "other.nc"
    xr.Dataset({"x": ("i", np.arange(5.0))}, attrs={"title": "some other data"}).to_netcdf(
        path, engine="h5netcdf"
    )
    _assert_not_a_fit(path)
    truncated = tmp_path / "truncated.nc"
    truncated.write_bytes(path.read_bytes()[:400])
    _assert_not_a_fit(truncated)


def test_load_netcdf_with_broken_provenance(tmp_path):
    import arviz as az

    idata = az.from_dict(posterior={"mu": np.zeros((1, 4))})
    idata.attrs["allobranch_provenance"] = "{not json"
    path = tmp_path / "fit.nc"
    idata.to_netcdf(path)
    _assert_not_a_fit(path)


def test_load_missing_file(tmp_path):
    with pytest.raises(InputError, match="no saved fit here"):
        FitResult.load(tmp_path / "fit.nc")
