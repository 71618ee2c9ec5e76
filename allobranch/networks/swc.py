"""SWC morphologies to junctions: sample points grouped into sections, each section's radius by a stated rule.

An SWC file (the open standard for traced neurons and vessels) has one sample point per line,
``id type x y z radius parent`` (parent ``-1`` for a root; lines starting with ``#`` are comments). Types:
1 soma, 2 axon, 3 (basal) dendrite, 4 apical dendrite, others custom. Coordinates and radii are in
micrometres by convention.

**Sections.** The samples form a tree. A section is a maximal unbranched run of samples: it starts just
after a branch point (or at a root, or at a neurite's first sample after the soma) and ends at the next
branch point or tip, which is its last sample. A **junction** is a non-soma branch point; its parent is the
section ending there and its daughters the sections starting there. The soma (type 1) is never a junction
and the neurites leaving it are not daughters of one: each neurite's first section is a root section.
``neurite_types`` keeps the junctions whose branch point has the chosen types (the daughters are kept
whatever their type, since they are the junction's physical daughters).

**Radius rules** (:data:`RADIUS_RULES`); the choice changes the exponent, so it is recorded:

``"trimmed_median"`` (default)
    The median radius of the section's samples, leaving out those within ``trim`` of either end (path
    distance along the section, from the branch point it leaves to the one it reaches), where the taper
    and swelling at branch points are. Default ``trim``: at each end, twice the radius of the section's
    sample at that end (one local diameter; common practice, no single source). A section too short to
    keep any sample uses its sample nearest the middle (counted in the notes).
``"near_branch"``
    Read next to the junction: a daughter's radius is the median of its first ``near_points`` samples
    beyond the branch point, the parent's the median of its last ``near_points`` samples before it (the
    branch point's own sample left out). The same section can then have different radii as a daughter and
    as a parent.
``"median"``
    The median of all the section's samples (no trimming).
"""

from __future__ import annotations

import os
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from allobranch.errors import InputError, Problem
from allobranch.intake.validate import DEFAULT_TAXON, _Collector
from allobranch.networks.assemble import Runs, assemble_junctions
from allobranch.networks.cells import raise_fatal
from allobranch.networks.result import NetworkJunctions, check_rule, validate_frame
from allobranch.networks.rules import NEURITE_TYPES, RADIUS_RULES, ROOT_RULES, SOMA
from allobranch.networks.segments import check_forest, link_parents
from allobranch.networks.tree import Topology, build_topology

#: The seven fields of an SWC line, in order.
SWC_FIELDS: tuple[str, ...] = ("id", "type", "x", "y", "z", "radius", "parent")

#: Default trim at each end of a section, in radii of the section's sample at that end.
TRIM_RADII = 2.0

#: Default number of samples read next to a junction by the ``near_branch`` rule.
NEAR_POINTS = 2

#: The length unit of SWC files by convention.
SWC_UNIT = "um"


@dataclass
class SwcSamples:
    """Sample points of one or more SWC files, checked, as one forest.

    Attributes
    ----------
    frame : pandas.DataFrame
        Columns :data:`SWC_FIELDS` plus ``line`` (line in its file), ``source`` (file), ``taxon`` and
        ``specimen``.
    parent : numpy.ndarray of int
        Position of every sample's parent, ``-1`` for roots.
    notes : list of str
        What was read.
    """

    frame: pd.DataFrame
    parent: np.ndarray
    notes: list[str] = field(default_factory=list)


def _fatal(
    label: str, line: int | None, column: str | None, message: str, hint: str, code: str
) -> InputError:
    return InputError([Problem("fatal", label, line, column, message, hint, code)])


def parse_swc(text: str, label: str = "<text>") -> pd.DataFrame:
    """Parse the text of an SWC file.

    Parameters
    ----------
    text : str
        The file's content.
    label : str
        The file name, for messages.

    Returns
    -------
    pandas.DataFrame
        Columns :data:`SWC_FIELDS` (``id``, ``type`` and ``parent`` as integers) and ``line`` (1-based line
        number in the file).

    Raises
    ------
    InputError
        Naming the line and field of every line without exactly seven fields, every field that is not a
        number (an integer for ``id``, ``type`` and ``parent``), and files without samples.
    """
    out = _Collector(label)
    lines: list[int] = []
    fields: list[list[str]] = []
    for number, line in enumerate(text.splitlines(), start=1):
        stripped = line.strip()
        if not stripped or stripped.startswith("#"):
            continue
        parts = stripped.split()
        if len(parts) != len(SWC_FIELDS):
            out.add(
                "fatal",
                number,
                None,
                f"{len(parts)} fields; an SWC line has {len(SWC_FIELDS)} ({' '.join(SWC_FIELDS)})",
                "correct the line, or start it with '#' if it is a comment",
                "swc_fields",
            )
            continue
        lines.append(number)
        fields.append(parts)
    raise_fatal(out)
    if not fields:
        raise _fatal(
            label,
            None,
            None,
            "no sample lines (only comments or blank lines)",
            "check the file",
            "empty_table",
        )
    raw = pd.DataFrame(fields, columns=list(SWC_FIELDS))
    line_arr = np.asarray(lines, dtype=np.int64)
    frame = pd.DataFrame({"line": line_arr})
    for name in SWC_FIELDS:
        values = pd.to_numeric(raw[name], errors="coerce").to_numpy(dtype=float)
        integer = name in ("id", "type", "parent")
        bad = ~np.isfinite(values) | (integer & (values != np.round(values)))
        for i in np.flatnonzero(bad):
            kind = "an integer" if integer else "a finite number"
            out.add(
                "fatal",
                line_arr[i],
                name,
                f"{raw[name].iat[i]!r} is not {kind}",
                f"write the {name} as {kind}",
                "not_numeric",
            )
        frame[name] = values.astype(np.int64) if integer and not bad.any() else values
    raise_fatal(out)
    return frame[[*SWC_FIELDS, "line"]]


def swc_files(path: str | os.PathLike) -> list[Path]:
    """The SWC file(s) named by ``path``: the file itself, or every ``*.swc`` below a folder (sorted).

    Raises
    ------
    InputError
        If the path does not exist or a folder holds no ``.swc`` file.
    """
    p = Path(path)
    if p.is_file():
        return [p]
    if not p.is_dir():
        raise _fatal(
            str(path), None, None, "file or folder not found", "check the path and spelling", "file_not_found"
        )
    files = sorted(f for f in p.rglob("*") if f.is_file() and f.suffix.lower() == ".swc")
    if not files:
        raise _fatal(
            str(path),
            None,
            None,
            "the folder holds no .swc file",
            "give a folder of .swc files or one file",
            "no_swc",
        )
    return files


def read_swc(
    path: str | os.PathLike, *, taxon: str | None = None, roots: str = "many", encoding: str | None = None
) -> SwcSamples:
    """Read one SWC file or a folder of them (one specimen per file) and check the trees.

    Parameters
    ----------
    path : str or path-like
        An ``.swc`` file, or a folder: every ``.swc`` file below it is read. A file in a sub-folder takes
        the sub-folder's name (the first level below ``path``) as its taxon.
    taxon : str, optional
        Taxon of files directly in ``path`` (or of the single file); default
        :data:`allobranch.intake.validate.DEFAULT_TAXON`.
    roots : {"one", "many"}
        Whether a file may hold several trees (several samples with parent -1).
    encoding : str, optional
        Text encoding (default UTF-8).

    Returns
    -------
    SwcSamples

    Raises
    ------
    InputError
        Naming file, line and field: malformed lines, repeated sample ids, parents that are not sample
        ids, cycles, several roots (with ``roots="one"``), non-positive or missing radii outside the soma,
        two files with the same name (specimen label).
    """
    check_rule("roots", roots, ROOT_RULES)
    base = Path(path)
    files = swc_files(base)
    frames: list[pd.DataFrame] = []
    problems: list[Problem] = []
    for f in files:
        try:
            text = f.read_text(encoding=encoding or "utf-8-sig")
        except (UnicodeDecodeError, LookupError) as exc:
            raise _fatal(
                str(f), None, None, f"cannot be read as text ({exc})", "give the file's encoding", "encoding"
            ) from None
        try:
            frame = parse_swc(text, str(f))
        except InputError as exc:
            problems += exc.problems
            continue
        rel = f.relative_to(base).parts if base.is_dir() else (f.name,)
        frame["source"] = str(f)
        frame["taxon"] = rel[0] if len(rel) > 1 else (taxon or DEFAULT_TAXON)
        frame["specimen"] = f.stem
        frames.append(frame)
    if problems:
        raise InputError(problems)
    by_name: dict[str, list[str]] = {}
    for f in files:
        by_name.setdefault(f.stem, []).append(str(f))
    twice = {k: v for k, v in by_name.items() if len(v) > 1}
    if twice:
        raise InputError(
            [
                Problem(
                    "fatal",
                    v[1],
                    None,
                    None,
                    f"specimen '{k}' is named by more than one file: {', '.join(v)}",
                    "give the files distinct names",
                    "duplicate_specimen",
                )
                for k, v in twice.items()
            ]
        )
    samples = pd.concat(frames, ignore_index=True)
    parent = np.full(len(samples), -1, dtype=np.int64)
    for source, idx in samples.groupby("source", sort=False).indices.items():
        out = _Collector(source)
        sub = samples.iloc[idx]
        spec = sub["specimen"].to_numpy(dtype=object)
        ids = sub["id"].astype(str).to_numpy(dtype=object)
        parents = [None if p < 0 else str(p) for p in sub["parent"].tolist()]
        lines = sub["line"].to_numpy()
        local = link_parents(spec, ids, parents, lines, ("id", "parent"), out)
        raise_fatal(out)
        check_forest(local, spec, ids, lines, "parent", roots, out)
        r = sub["radius"].to_numpy(dtype=float)
        for i in np.flatnonzero((sub["type"].to_numpy() != SOMA) & ~(r > 0)):
            out.add(
                "fatal",
                lines[i],
                "radius",
                f"radius {r[i]:g}; radii outside the soma must be positive",
                "correct the radius",
                "nonpositive_size",
            )
        raise_fatal(out)
        parent[idx] = np.where(local >= 0, idx[np.maximum(local, 0)], -1)
    notes = [f"{len(files)} SWC file(s), {len(samples)} sample points"]
    return SwcSamples(frame=samples, parent=parent, notes=notes)


def _path_from_section_start(topo: Topology, xyz: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Path distance of every sample from its section's start, and every section's length (at run starts)."""
    parent = topo.parent
    step = np.zeros(len(parent))
    has = parent >= 0
    step[has] = np.linalg.norm(xyz[has] - xyz[parent[has]], axis=1)
    total = np.zeros(len(parent))
    tot = total.tolist()
    par = parent.tolist()
    st = step.tolist()
    for i in topo.order.tolist():
        if par[i] >= 0:
            tot[i] = tot[par[i]] + st[i]
    total = np.asarray(tot)
    head_parent = parent[topo.run]
    start = np.where(head_parent >= 0, total[np.maximum(head_parent, 0)], total[topo.run])
    s = total - start
    length = np.zeros(len(parent))
    heads = np.flatnonzero(topo.run_end >= 0)
    length[heads] = s[topo.run_end[heads]]
    return s, length


def _median_by_run(run: np.ndarray, radius: np.ndarray, keep: np.ndarray, n: int) -> np.ndarray:
    out = np.full(n, np.nan)
    med = pd.Series(radius[keep]).groupby(run[keep]).median()
    out[med.index.to_numpy()] = med.to_numpy()
    return out


def section_radii(
    topo: Topology,
    samples: pd.DataFrame,
    rule: str,
    *,
    trim: float | None = None,
    near_points: int = NEAR_POINTS,
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Radius of every section by a rule, as a parent (far end) and as a daughter (near end).

    Parameters
    ----------
    topo : Topology
        Sections are its runs.
    samples : pandas.DataFrame
        Columns ``x, y, z, radius`` in the order of the topology's nodes.
    rule : str
        One of :data:`RADIUS_RULES`.
    trim : float, optional
        ``trimmed_median``: distance left out at both ends; default :data:`TRIM_RADII` radii of the end
        samples.
    near_points : int
        ``near_branch``: samples read next to the junction.

    Returns
    -------
    size_end, size_start : numpy.ndarray
        Radii indexed by the section's first sample (NaN elsewhere).
    fallbacks : numpy.ndarray
        First samples of the sections too short for the trim, read at their sample nearest the middle.
    """
    check_rule("radius_rule", rule, RADIUS_RULES)
    n = len(topo.run)
    radius = samples["radius"].to_numpy(dtype=float)
    run = topo.run
    if rule == "median":
        med = _median_by_run(run, radius, np.ones(n, dtype=bool), n)
        return med, med, np.zeros(0, dtype=np.int64)
    xyz = samples[["x", "y", "z"]].to_numpy(dtype=float)
    s, length = _path_from_section_start(topo, xyz)
    if rule == "trimmed_median":
        ends = topo.run_end[run]
        lo = TRIM_RADII * radius[run] if trim is None else np.full(n, float(trim))
        hi = TRIM_RADII * radius[ends] if trim is None else np.full(n, float(trim))
        keep = (s >= lo) & (length[run] - s >= hi)
        med = _median_by_run(run, radius, keep, n)
        heads = np.flatnonzero(topo.run_end >= 0)
        short = heads[np.isnan(med[heads])]
        if len(short):
            gap = pd.Series(
                np.abs(s - length[run] / 2)[np.isin(run, short)], index=np.flatnonzero(np.isin(run, short))
            )
            nearest = gap.groupby(run[gap.index.to_numpy()]).idxmin()
            med[nearest.index.to_numpy()] = radius[nearest.to_numpy()]
        return med, med, short
    if near_points < 1:
        raise InputError(f"near_points must be a positive whole number; got {near_points}")
    order = pd.DataFrame({"run": run, "s": s, "r": radius}).sort_values(["run", "s"], kind="stable")
    order["from_start"] = order.groupby("run").cumcount()
    order["from_end"] = order.groupby("run").cumcount(ascending=False)
    start = _median_by_run(
        order["run"].to_numpy(), order["r"].to_numpy(), (order["from_start"] < near_points).to_numpy(), n
    )
    before_end = order["from_end"].between(1, near_points).to_numpy()
    end = _median_by_run(order["run"].to_numpy(), order["r"].to_numpy(), before_end, n)
    single = np.isnan(end) & ~np.isnan(start)  # a section of one sample: the branch point itself
    end[single] = start[single]
    return end, start, np.zeros(0, dtype=np.int64)


def junctions_from_swc(
    path: str | os.PathLike,
    *,
    radius_rule: str = "trimmed_median",
    trim: float | None = None,
    near_points: int = NEAR_POINTS,
    neurite_types: str = "all",
    taxon: str | None = None,
    roots: str = "many",
    encoding: str | None = None,
    **mapping_kwargs: Any,
) -> NetworkJunctions:
    """Junctions of one SWC file or a folder of them.

    Parameters
    ----------
    path : str or path-like
        An ``.swc`` file (one specimen, named by the file) or a folder (every ``.swc`` file below it;
        files in a sub-folder take its name as taxon).
    radius_rule : {"trimmed_median", "near_branch", "median"}
        How a section's radius is read (see the module notes).
    trim : float, optional
        ``trimmed_median``: the distance (in the file's unit) left out at each end of a section; default
        :data:`TRIM_RADII` times the radius of the section's sample at that end.
    near_points : int
        ``near_branch``: samples read on each side of a junction.
    neurite_types : {"all", "dendrite", "basal", "apical", "axon"}
        Keep the junctions whose branch point has these types (see :data:`NEURITE_TYPES`).
    taxon : str, optional
        Taxon of files not in a sub-folder.
    roots : {"many", "one"}
        ``"one"`` refuses a file with several trees.
    encoding : str, optional
        Text encoding (default UTF-8).
    **mapping_kwargs
        ``unit`` (default micrometres, the SWC convention) and ``rel_error``, passed to
        :func:`allobranch.read_junctions`. SWC files hold radii, so ``measure`` must be ``"radius"``.

    Returns
    -------
    NetworkJunctions
        Junctions labelled by their branch point's sample id; sections named ``first-last`` sample id,
        their rows ``first-last`` line.

    Raises
    ------
    InputError
        Naming file, line and field (see :func:`read_swc`), or when no junction is left.
    """
    check_rule("radius_rule", radius_rule, RADIUS_RULES)
    check_rule("neurite_types", neurite_types, tuple(NEURITE_TYPES))
    if mapping_kwargs.get("measure", "radius") != "radius":
        raise InputError(
            "SWC files hold radii: leave the measure as 'radius' (no --measure diameter with --swc)"
        )
    if trim is not None and not (np.isfinite(trim) and trim >= 0):
        raise InputError(f"trim must be a distance of 0 or more; got {trim}")
    samples = read_swc(path, taxon=taxon, roots=roots, encoding=encoding)
    frame = samples.frame
    kind = frame["type"].to_numpy()
    soma = kind == SOMA
    parent = samples.parent
    parent_soma = np.where(parent >= 0, soma[np.maximum(parent, 0)], False)
    topo = build_topology(parent, counted=~soma, breaks=soma | parent_soma)
    branch = topo.n_children >= 2
    chosen = NEURITE_TYPES[neurite_types]
    selected = ~soma if chosen is None else np.isin(kind, chosen)
    eligible = ~soma & selected
    size_end, size_start, fallbacks = section_radii(
        topo, frame, radius_rule, trim=trim, near_points=near_points
    )
    ids = frame["id"].astype(str).to_numpy(dtype=object)
    lines = frame["line"].astype(str).to_numpy(dtype=object)
    heads = np.flatnonzero(topo.run_end >= 0)
    label = ids.copy()
    rows = lines.copy()
    ends = topo.run_end[heads]
    label[heads] = [a if a == b else f"{a}-{b}" for a, b in zip(ids[heads], ids[ends])]
    rows[heads] = [a if a == b else f"{a}-{b}" for a, b in zip(lines[heads], lines[ends])]
    junction_frame = assemble_junctions(
        topo,
        eligible,
        taxon=frame["taxon"].to_numpy(dtype=object),
        specimen=frame["specimen"].to_numpy(dtype=object),
        junction=ids,
        runs=Runs(label=label, rows=rows, size_end=size_end, size_start=size_start),
        source=frame["source"].to_numpy(dtype=object),
    )
    n_roots = int((parent < 0).sum())
    notes = [
        *samples.notes,
        f"{int((branch & ~soma).sum())} branch points outside the soma; {int((branch & eligible).sum())} kept as "
        f"junctions (neurite types: {neurite_types}); {int((branch & soma).sum())} soma branch point(s) and "
        f"{int((parent_soma & ~soma).sum())} neurite(s) leaving the soma are not junctions",
        f"{n_roots} tree(s) (samples with parent -1) in {frame['source'].nunique()} file(s)",
        f"{int((~soma[fallbacks]).sum())} section(s) too short for the trim, read at their sample nearest "
        "the middle"
        if radius_rule == "trimmed_median"
        else f"radius rule: {radius_rule}",
    ]
    if not len(junction_frame):
        raise InputError(
            [
                Problem(
                    "fatal",
                    str(path),
                    None,
                    None,
                    f"no junction found ({'; '.join(notes[1:])})",
                    "check the neurite types selected and the files",
                    "no_junction",
                )
            ]
        )
    rules: dict[str, Any] = {"radius_rule": radius_rule, "neurite_types": neurite_types, "roots": roots}
    if radius_rule == "trimmed_median":
        rules["trim"] = trim if trim is not None else f"{TRIM_RADII:g} end radii"
    if radius_rule == "near_branch":
        rules["near_points"] = near_points
    table = validate_frame(junction_frame, "radius", str(path), **{"unit": SWC_UNIT, **mapping_kwargs})
    return NetworkJunctions(frame=junction_frame, table=table, kind="swc", rules=rules, notes=notes)


def swc_text(samples: pd.DataFrame, header: str = "") -> str:
    """SWC text of a sample table (columns :data:`SWC_FIELDS`), with ``header`` as ``#`` comment lines.

    Examples
    --------
    >>> import pandas as pd
    >>> s = pd.DataFrame({"id": [1], "type": [1], "x": [0.0], "y": [0.0], "z": [0.0], "radius": [5.0], "parent": [-1]})
    >>> swc_text(s)
    '1 1 0 0 0 5 -1\\n'
    """
    comments = "".join(f"# {line}\n" for line in header.splitlines())
    cols = [samples[c].to_numpy() for c in SWC_FIELDS]
    body = "".join(
        f"{int(i)} {int(t)} {x:.6g} {y:.6g} {z:.6g} {r:.6g} {int(p)}\n" for i, t, x, y, z, r, p in zip(*cols)
    )
    return comments + body


def write_swc(samples: pd.DataFrame, path: str | os.PathLike, header: str = "") -> Path:
    """Write a sample table as an SWC file (see :func:`swc_text`); an existing file is not overwritten.

    Returns
    -------
    pathlib.Path
        The file written.
    """
    dest = Path(path)
    with dest.open("x", encoding="utf-8") as fh:
        fh.write(swc_text(samples, header))
    return dest
