"""Recipes: the column mapping as a small TOML file, from command-line options, and written back out.

A recipe looks like::

    [columns]
    taxon = "species"
    specimen = "animal"
    junction = "node"
    parent = "r_parent"
    daughters = ["r_d1", "r_d2", "r_d3"]
    covariates = ["generation"]   # numeric columns kept as covariates of the exponent

    [measurement]
    measure = "radius"        # or "diameter"
    unit = "um"
    rel_error = 0.05          # known relative error of every reading, and/or
    se = "se_px"              # absolute standard errors: one column, or one per size column
    repeats = "repeats.csv"   # repeat readings; a path relative to the recipe file

    [input]
    sheet = "junctions"       # Excel sheet holding the table
    encoding = "latin-1"      # text encoding of CSV/TSV files (default UTF-8); any Python codec name

Every key is optional except ``parent`` and ``daughters``. ``[input] encoding`` is the recipe form of the
``encoding=`` keyword of :func:`allobranch.read_junctions`.
"""

from __future__ import annotations

import dataclasses
import json
import os
import tomllib
from collections.abc import Mapping, Sequence
from pathlib import Path
from typing import Any

from allobranch.errors import OPTIONS_ORIGIN, OutputExistsError, Problem, RecipeError
from allobranch.intake.mapping import MEASURES, ColumnMapping
from allobranch.intake.readers import check_encoding
from allobranch.intake.units import canonical_unit
from allobranch.io import atomic_write

#: Recipe sections and the mapping fields each may hold; used by the reader, the writer and messages.
RECIPE_SECTIONS: dict[str, tuple[str, ...]] = {
    "columns": ("taxon", "specimen", "junction", "parent", "daughters", "covariates"),
    "measurement": ("measure", "unit", "rel_error", "se", "repeats"),
    "input": ("sheet", "encoding"),
}

#: Recipe sections read elsewhere (the model's options: :func:`allobranch.cli.model_options.recipe_model_options`;
#: a network to derive the junctions from: :func:`allobranch.networks.options.load_network_recipe`; the
#: law comparison's options: ``allobranch compare`` through :func:`recipe_section`); the mapping reader passes
#: over them.
OTHER_SECTIONS: tuple[str, ...] = ("model", "network", "compare")

#: Size columns of a junction table derived from a network (:mod:`allobranch.networks`); a recipe with a
#: [network] section names no parent or daughter columns of its own.
NETWORK_SIZE_COLUMNS: dict[str, Any] = {"parent": "parent", "daughters": ("d1", "d2")}

#: The recipe section of every mapping field.
FIELD_SECTION: dict[str, str] = {key: section for section, keys in RECIPE_SECTIONS.items() for key in keys}


def _problem(origin: str, key: str | None, message: str, hint: str) -> Problem:
    """A fatal recipe/option problem; ``key`` is shown at the start of the message."""
    return Problem("fatal", origin, None, None, f"{key}: {message}" if key else message, hint, "bad_recipe")


def _not_a_section(origin: str, section: str) -> Problem:
    return _problem(
        origin,
        section,
        f"'{section}' must be a section [{section}], not a value",
        f"write [{section}] on its own line followed by its keys",
    )


def _unknown_key(origin: str, section: str, key: str, allowed: Sequence[str]) -> Problem:
    return _problem(
        origin, f"[{section}] {key}", "unknown key", f"allowed keys in [{section}]: {', '.join(allowed)}"
    )


def _key(field: str, in_recipe: bool) -> str:
    return f"[{FIELD_SECTION[field]}] {field}" if in_recipe else field


def check_mapping(
    mapping: ColumnMapping, origin: str = OPTIONS_ORIGIN, *, in_recipe: bool = False
) -> ColumnMapping:
    """Check a mapping for internal consistency and return it with canonical unit and measure spellings.

    Parameters
    ----------
    mapping : ColumnMapping
        The mapping to check.
    origin : str
        Recipe file name or ``"<options>"``, used in messages.
    in_recipe : bool
        Name keys as recipe keys (``[measurement] rel_error``) rather than field names in messages.

    Returns
    -------
    ColumnMapping
        The same mapping with ``unit`` and ``measure`` in canonical spelling (e.g. ``"µm"`` -> ``"um"``).

    Raises
    ------
    RecipeError
        Listing every problem: fewer than two daughter columns, a column used twice, a wrong number of
        standard-error columns, a relative error outside (0, 1), an unknown measure, unit or text encoding.
    """
    problems: list[Problem] = []

    def add(field: str | None, message: str, hint: str) -> None:
        problems.append(_problem(origin, field and _key(field, in_recipe), message, hint))

    roles = {
        "parent": (mapping.parent,),
        "daughters": mapping.daughters,
        "taxon": (mapping.taxon,),
        "specimen": (mapping.specimen,),
        "junction": (mapping.junction,),
        "se": mapping.se,
        "covariates": mapping.covariates,
    }
    for field, names in roles.items():
        for name in names:
            if name is not None and (not isinstance(name, str) or not name.strip()):
                add(
                    field,
                    f"column name {name!r} is not a non-empty text",
                    "write the column name as it appears in the header",
                )
    if not mapping.parent:
        add("parent", "no parent column given", "name the column holding the parent segment's size")
    if len(mapping.daughters) < 2:
        add(
            "daughters",
            f"{len(mapping.daughters)} daughter column(s) given; a junction has at least two daughters",
            "list two or more daughter columns, e.g. d1,d2 (a third column may be empty where a junction has two)",
        )
    used = [
        c
        for c in (
            mapping.parent,
            *mapping.daughters,
            mapping.taxon,
            mapping.specimen,
            mapping.junction,
            *mapping.se,
            *mapping.covariates,
        )
        if c
    ]
    twice = sorted({c for c in used if used.count(c) > 1})
    if twice:
        add(
            None,
            f"column(s) {', '.join(repr(c) for c in twice)} used for more than one role",
            "map each column to one role only (parent, daughters, taxon, specimen, junction, se)",
        )
    if mapping.se and len(mapping.se) not in (1, 1 + len(mapping.daughters)):
        add(
            "se",
            f"{len(mapping.se)} standard-error columns given for {1 + len(mapping.daughters)} size columns",
            "give one SE column for all readings of a row, or one per size column (parent first, then the "
            "daughters in order)",
        )
    r = mapping.rel_error
    if r is not None and (isinstance(r, bool) or not isinstance(r, (int, float)) or not 0 < r < 1):
        add(
            "rel_error",
            f"relative error {r!r} is not a fraction between 0 and 1",
            "give it as a fraction, e.g. 0.05 for 5 %",
        )
    measure = mapping.measure.strip().lower() if isinstance(mapping.measure, str) else mapping.measure
    if measure not in MEASURES:
        add("measure", f"unknown measure {mapping.measure!r}", f"use one of: {', '.join(MEASURES)}")
    unit = mapping.unit
    try:
        unit = canonical_unit(mapping.unit, origin=origin, key=_key("unit", in_recipe))
    except RecipeError as exc:
        problems.extend(exc.problems)
    if mapping.sheet is not None and (
        isinstance(mapping.sheet, bool) or not isinstance(mapping.sheet, (str, int))
    ):
        add("sheet", f"sheet {mapping.sheet!r} is neither a name nor a position", "give the sheet's name")
    encoding = mapping.encoding
    try:
        encoding = check_encoding(mapping.encoding, origin=origin, key=_key("encoding", in_recipe))
    except RecipeError as exc:
        problems.extend(exc.problems)
    if problems:
        raise RecipeError(problems)
    return dataclasses.replace(mapping, unit=unit, measure=measure, encoding=encoding)


def load_recipe(path: str | os.PathLike) -> ColumnMapping:
    """Read a TOML recipe into a :class:`ColumnMapping`.

    Parameters
    ----------
    path : str or path-like
        The recipe file (see the module docstring for its layout). A relative ``repeats`` path is taken
        relative to the recipe file's folder when such a file exists there; otherwise it is kept as written
        (it may name an Excel sheet, or a file beside the table).

    Returns
    -------
    ColumnMapping
        The recipe's mapping, checked.

    Raises
    ------
    RecipeError
        If the file is missing or not valid TOML, has unknown sections or keys, values of the wrong type,
        or an inconsistent mapping; every problem is listed with the recipe file and key.
    """
    origin = str(path)
    p = Path(path)
    try:
        with p.open("rb") as fh:
            doc = tomllib.load(fh)
    except FileNotFoundError:
        raise RecipeError([_problem(origin, None, "recipe file not found", "check the path")]) from None
    except (tomllib.TOMLDecodeError, UnicodeDecodeError) as exc:
        raise RecipeError(
            [
                _problem(
                    origin,
                    None,
                    f"not a valid TOML file ({exc})",
                    "compare with the example recipe in the documentation",
                )
            ]
        ) from None
    except OSError as exc:
        raise RecipeError(
            [
                _problem(
                    origin, None, f"cannot read the recipe ({exc.strerror})", "check the path and permissions"
                )
            ]
        ) from None

    problems: list[Problem] = []
    values: dict[str, Any] = {}
    wrong_type: set[str] = set()
    sections = ", ".join(f"[{s}]" for s in (*RECIPE_SECTIONS, *OTHER_SECTIONS))
    for section, content in doc.items():
        if section in OTHER_SECTIONS:
            continue
        if section not in RECIPE_SECTIONS:
            problems.append(
                _problem(origin, f"[{section}]", "unknown section", f"use the sections {sections}")
            )
            continue
        if not isinstance(content, dict):
            problems.append(_not_a_section(origin, section))
            continue
        for key, value in content.items():
            if key not in RECIPE_SECTIONS[section]:
                problems.append(_unknown_key(origin, section, key, RECIPE_SECTIONS[section]))
                continue
            problem = _check_type(origin, key, value)
            if problem is None:
                values[key] = value
            else:
                problems.append(problem)
                wrong_type.add(key)
    if isinstance(doc.get("network"), dict):
        problems += [
            _problem(
                origin,
                _key(key, True),
                "not used with a [network] section",
                "remove it: the network gives the parent and daughters of every junction",
            )
            for key in NETWORK_SIZE_COLUMNS
            if key in values
        ]
        values.update(NETWORK_SIZE_COLUMNS)
    for key in ("parent", "daughters"):
        if key not in values and key not in wrong_type:
            problems.append(
                _problem(
                    origin,
                    _key(key, True),
                    "missing",
                    f"add '{key} = ...' under [columns] naming the {key} column(s)",
                )
            )
    if isinstance(values.get("rel_error"), int):
        values["rel_error"] = float(values["rel_error"])
    repeats = values.get("repeats")
    if repeats is not None and not Path(repeats).is_absolute() and (p.parent / repeats).exists():
        values["repeats"] = str((p.parent / repeats).resolve())
    # Check the rest of the mapping even when parent/daughters are unusable, so every problem is listed.
    placeholders = {"parent": "\0parent", "daughters": ("\0d1", "\0d2")}
    try:
        mapping = check_mapping(ColumnMapping(**{**placeholders, **values}), origin, in_recipe=True)
    except RecipeError as exc:
        problems.extend(exc.problems)
    if problems:
        raise RecipeError(problems)
    return mapping


#: Expected TOML type of every recipe key, as (check, description for the message).
_EXPECTED: dict[str, tuple[Any, str]] = {
    "daughters": (
        lambda v: isinstance(v, list) and all(isinstance(x, str) for x in v),
        'a list of column names, e.g. ["d1", "d2"]',
    ),
    "se": (
        lambda v: isinstance(v, str) or (isinstance(v, list) and all(isinstance(x, str) for x in v)),
        "a column name or a list of column names",
    ),
    "covariates": (
        lambda v: isinstance(v, list) and all(isinstance(x, str) for x in v),
        'a list of column names, e.g. ["generation"]',
    ),
    "rel_error": (lambda v: isinstance(v, (int, float)) and not isinstance(v, bool), "a number, e.g. 0.05"),
    "sheet": (lambda v: isinstance(v, (str, int)) and not isinstance(v, bool), "a sheet name"),
}
_TEXT = (lambda v: isinstance(v, str), "text in quotes")


def _check_type(origin: str, key: str, value: Any) -> Problem | None:
    ok, expected = _EXPECTED.get(key, _TEXT)
    if ok(value):
        return None
    return _problem(
        origin, _key(key, True), f"wrong type ({type(value).__name__}: {value!r})", f"give {expected}"
    )


def recipe_section(
    path: str | os.PathLike, section: str, keys: Mapping[str, tuple[type | tuple[type, ...], str]]
) -> dict[str, Any]:
    """One of the :data:`OTHER_SECTIONS` of a recipe, its keys and their TOML types checked.

    Parameters
    ----------
    path : str or path-like
        The recipe file.
    section : str
        The section's name (e.g. ``"compare"``).
    keys : mapping of str to (type, str)
        Allowed keys with their TOML type(s) and a description of the expected value for messages.

    Returns
    -------
    dict
        The section's values (empty when the recipe has no such section, or cannot be read: the mapping
        reader :func:`load_recipe` reports unreadable recipes).

    Raises
    ------
    RecipeError
        Naming the recipe file and ``[section] key`` of every unknown key or value of the wrong type.
    """
    origin = str(path)
    try:
        content = tomllib.loads(Path(path).read_text(encoding="utf-8")).get(section, {})
    except (OSError, UnicodeDecodeError, tomllib.TOMLDecodeError):
        return {}
    if not isinstance(content, dict):
        raise RecipeError([_not_a_section(origin, section)])
    problems = [
        _unknown_key(origin, section, key, keys)
        if key not in keys
        else _problem(
            origin,
            f"[{section}] {key}",
            f"wrong type ({type(value).__name__}: {value!r})",
            f"give {keys[key][1]}",
        )
        for key, value in content.items()
        if key not in keys or not isinstance(value, keys[key][0])
    ]
    if problems:
        raise RecipeError(problems)
    return dict(content)


def _split(value: str | Sequence[str] | None) -> tuple[str, ...] | None:
    if value is None:
        return None
    if isinstance(value, str):
        return tuple(v.strip() for v in value.split(",") if v.strip())
    return tuple(value)


def mapping_from_options(
    *,
    base: ColumnMapping | None = None,
    parent: str | None = None,
    daughters: str | Sequence[str] | None = None,
    taxon: str | None = None,
    specimen: str | None = None,
    junction: str | None = None,
    measure: str | None = None,
    unit: str | None = None,
    rel_error: float | None = None,
    se: str | Sequence[str] | None = None,
    repeats: str | None = None,
    sheet: str | int | None = None,
    encoding: str | None = None,
    covariates: str | Sequence[str] | None = None,
) -> ColumnMapping:
    """Build a mapping from option values, on top of an optional base mapping (e.g. a recipe).

    Parameters
    ----------
    base : ColumnMapping, optional
        Starting mapping; every option that is not ``None`` overrides its value.
    parent, taxon, specimen, junction : str, optional
        Column names.
    daughters, se : str or sequence of str, optional
        Column names, as a sequence or one comma-separated text (``"d1,d2,d3"``).
    measure : {"radius", "diameter"}, optional
        Whether sizes are radii or diameters.
    unit : str, optional
        Length unit (see :data:`allobranch.intake.units.ALLOWED_UNITS`).
    rel_error : float, optional
        Known relative error of every reading, a fraction in (0, 1).
    repeats : str, optional
        Repeat-readings file (or Excel sheet name).
    sheet : str or int, optional
        Excel sheet holding the junction table.
    encoding : str, optional
        Text encoding of text tables, any Python codec name (e.g. ``"latin-1"``); UTF-8 when not given.
    covariates : str or sequence of str, optional
        Numeric columns to keep as covariates of the exponent, as a sequence or comma-separated text.

    Returns
    -------
    ColumnMapping
        The base mapping with the options over it, checked.

    Raises
    ------
    RecipeError
        If neither the base nor the options name the parent and daughter columns, or the mapping is
        inconsistent (see :func:`check_mapping`).

    Examples
    --------
    >>> mapping_from_options(parent="p", daughters="a,b", unit="µm").unit
    'um'
    """
    updates: dict[str, Any] = {
        "parent": parent,
        "daughters": _split(daughters),
        "taxon": taxon,
        "specimen": specimen,
        "junction": junction,
        "measure": measure,
        "unit": unit,
        "rel_error": rel_error,
        "se": _split(se),
        "repeats": repeats,
        "sheet": sheet,
        "encoding": encoding,
        "covariates": _split(covariates),
    }
    updates = {k: v for k, v in updates.items() if v is not None}
    if base is None:
        missing = [k for k in ("parent", "daughters") if k not in updates]
        if missing:
            raise RecipeError(
                [
                    _problem(
                        OPTIONS_ORIGIN,
                        k,
                        f"no '{k}' column given",
                        "give --parent and --daughters (or a recipe with --recipe)",
                    )
                    for k in missing
                ]
            )
        mapping = ColumnMapping(**updates)
    else:
        mapping = dataclasses.replace(base, **updates)
    return check_mapping(mapping, OPTIONS_ORIGIN)


def _toml_value(value: Any) -> str:
    if isinstance(value, (list, tuple)):
        return "[" + ", ".join(_toml_value(v) for v in value) + "]"
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, (int, float)):
        return repr(value)
    # JSON string escapes are valid TOML basic-string escapes.
    return json.dumps(str(value), ensure_ascii=False)


def write_recipe(mapping: ColumnMapping, path: str | os.PathLike, *, overwrite: bool = False) -> Path:
    """Write a mapping as a TOML recipe that :func:`load_recipe` reads back to the same mapping.

    Parameters
    ----------
    mapping : ColumnMapping
        The mapping to write.
    path : str or path-like
        Destination file. A ``repeats`` file path is written relative to the recipe's folder.
    overwrite : bool
        Replace an existing file; by default an existing file is never overwritten.

    Returns
    -------
    pathlib.Path
        ``path``, now holding the recipe (written atomically).

    Raises
    ------
    OutputExistsError
        When ``path`` is already there and ``overwrite`` is not set.
    """
    dest = Path(path)
    if dest.exists() and not overwrite:
        raise OutputExistsError(
            f"{dest}: the recipe file already exists; choose another name or remove it first"
        )
    values = mapping.to_dict()
    if "repeats" in values and Path(values["repeats"]).is_file():
        values["repeats"] = os.path.relpath(Path(values["repeats"]).resolve(), dest.resolve().parent)
    lines = ["# allobranch recipe: how the table's columns map onto junctions", ""]
    for section, keys in RECIPE_SECTIONS.items():
        present = [k for k in keys if k in values]
        if not present:
            continue
        lines.append(f"[{section}]")
        lines.extend(f"{k} = {_toml_value(values[k])}" for k in present)
        lines.append("")
    text = "\n".join(lines)
    return atomic_write(dest, lambda p: p.write_text(text, encoding="utf-8"))
