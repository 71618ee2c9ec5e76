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
    The median radius of the section's samples, leaving out those closer than the trim to either end
    (path distance along the section, from the branch point it leaves to the one it reaches), where the
    flare and the swelling at branch points are. The trim scales with the local radius: at each end,
    ``trim_radii`` (default :data:`TRIM_RADII`, 4) times the radius of the section's sample at that end;
    or one distance ``trim`` in the file's unit for every section. Swelling at a branch point reaches
    about one to two radii along a section; four radii leave e^-4 (2 %) of a swelling that decays over one
    radius and e^-2 (14 %) of one that decays over two. This is our choice, checked against swellings of
    15-50 % over 0.5-2 radii in ``benchmarks/networks.py``, not a published value; the earlier default,
    two radii, is ``trim_radii=2``. A section too short to keep any sample under the trim is read at its
    one sample nearest the middle (by path distance): counted in the notes and visible per junction in
    ``parent_samples``/``daughter_samples`` (1).
``"near_branch"``
    Read next to the junction: a daughter's radius is the median of its first ``near_points`` samples
    beyond the branch point, the parent's the median of its last ``near_points`` samples before it (the
    branch point's own sample left out). The same section can then have different radii as a daughter and
    as a parent.
``"median"``
    The median of all the section's samples (no trimming).

Every rule records how many samples each radius was read from (the junction frame's ``parent_samples``
and ``daughter_samples`` columns).

**Sections that are only a branch point.** A section of one sample that is itself a branch point (two
branch points on neighbouring samples) has no radius apart from that branch point's own, swollen one,
whatever the rule. With ``branch_point_sections="exclude"`` (default) the junctions whose parent or a
daughter is such a section are not used, and each is listed (severity ``excluded``, with its line); with
``"keep"`` they are used with the branch point's radius. No section is dropped either way: the sections
stay in the tree, so generations, orders and tips do not change.
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
from allobranch.networks.result import NetworkJunctions, check_rule, option_error, validate_frame
from allobranch.networks.rules import (
    BRANCH_POINT_SECTION_RULES,
    NEAR_POINTS,
    NEURITE_TYPES,
    RADIUS_RULES,
    ROOT_RULES,
    SOMA,
    TRIM_RADII,
)
from allobranch.networks.segments import check_forest, link_parents
from allobranch.networks.tree import Topology, build_topology

#: The seven fields of an SWC line, in order.
SWC_FIELDS: tuple[str, ...] = ("id", "type", "x", "y", "z", "radius", "parent")

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


@dataclass(frozen=True)
class RadiusRule:
    """How a section's radius is read from its samples (see the module notes): stated, checked, reported.

    Attributes
    ----------
    name : {"trimmed_median", "near_branch", "median"}
        The rule (:data:`RADIUS_RULES`).
    trim : float, optional
        ``trimmed_median``: one distance (in the file's unit) left out at each end of every section.
    trim_radii : float, optional
        ``trimmed_median``: the trim at each end in radii of the section's sample at that end; default
        :data:`TRIM_RADII` when ``trim`` is not given.
    near_points : int
        ``near_branch``: samples read next to the junction.

    Raises
    ------
    RecipeError
        For an unknown rule, a negative or non-finite trim, ``trim`` and ``trim_radii`` given together, or
        ``near_points`` below 1.

    Examples
    --------
    >>> RadiusRule().rules()
    {'radius_rule': 'trimmed_median', 'trim_radii': 4.0}
    >>> RadiusRule("trimmed_median", trim=1.5).rules()
    {'radius_rule': 'trimmed_median', 'trim': 1.5}
    """

    name: str = "trimmed_median"
    trim: float | None = None
    trim_radii: float | None = None
    near_points: int = NEAR_POINTS

    def __post_init__(self) -> None:
        check_rule("radius_rule", self.name, RADIUS_RULES)
        if self.trim is not None and self.trim_radii is not None:
            raise option_error(
                f"trim ({self.trim:g}) and trim_radii ({self.trim_radii:g}) given together",
                "give one: trim (a distance) or trim_radii (radii of the end sample)",
            )
        for key in ("trim", "trim_radii"):
            value = getattr(self, key)
            if value is not None and not (np.isfinite(value) and value >= 0):
                raise option_error(f"{key} must be 0 or more; got {value}", f"give {key} as a number >= 0")
        if not (isinstance(self.near_points, (int, np.integer)) and self.near_points >= 1):
            raise option_error(
                f"near_points must be a whole number of 1 or more; got {self.near_points}",
                "give near_points as 1, 2, ...",
            )

    @property
    def end_radii(self) -> float:
        """``trimmed_median`` without ``trim``: the trim at each end, in radii of the section's sample there."""
        return float(TRIM_RADII if self.trim_radii is None else self.trim_radii)

    def describe(self) -> str:
        """The rule in words.

        Examples
        --------
        >>> RadiusRule(trim=1.5).describe()
        "trimmed_median: median of each section's samples at least 1.5 (the file's unit) from both ends"
        """
        if self.name == "median":
            return "median: median of all of each section's samples"
        if self.name == "near_branch":
            return (
                f"near_branch: median of the {self.near_points} sample(s) next to the junction on each side "
                "(a parent's branch-point sample left out)"
            )
        params = self.rules()
        trim = (
            f"{params['trim']:g} (the file's unit)"
            if "trim" in params
            else f"{params['trim_radii']:g} radii (of the section's sample at that end)"
        )
        return f"trimmed_median: median of each section's samples at least {trim} from both ends"

    def rules(self) -> dict[str, Any]:
        """The rule's name and the parameter in effect (for reports, notes and recipes)."""
        out: dict[str, Any] = {"radius_rule": self.name}
        if self.name == "trimmed_median":
            if self.trim is not None:
                out["trim"] = float(self.trim)
            else:
                out["trim_radii"] = self.end_radii
        elif self.name == "near_branch":
            out["near_points"] = int(self.near_points)
        return out


@dataclass(frozen=True)
class SectionRadii:
    """Every section's radius by a rule and the number of samples behind it.

    Arrays are indexed by the section's first sample (NaN or 0 at the other samples).

    Attributes
    ----------
    size_end, size_start : numpy.ndarray of float
        The radius read as a parent (towards the far end) and as a daughter (at the near end); equal except
        under ``near_branch``.
    used_end, used_start : numpy.ndarray of int
        How many samples each radius was read from.
    fallbacks : numpy.ndarray of int
        First samples of the sections too short for the trim (read at their sample nearest the middle).
    """

    size_end: np.ndarray
    size_start: np.ndarray
    used_end: np.ndarray
    used_start: np.ndarray
    fallbacks: np.ndarray


def _median_by_run(
    run: np.ndarray, radius: np.ndarray, keep: np.ndarray, n: int
) -> tuple[np.ndarray, np.ndarray]:
    """Median of the kept samples of every run, and how many there were (at run starts)."""
    out = np.full(n, np.nan)
    med = pd.Series(radius[keep]).groupby(run[keep]).median()
    out[med.index.to_numpy()] = med.to_numpy()
    return out, np.bincount(run[keep], minlength=n)


def _nearest_middle(run: np.ndarray, s: np.ndarray, length: np.ndarray, short: np.ndarray) -> np.ndarray:
    """For each run start in ``short``, its sample nearest the run's middle (the first such on a tie)."""
    members = np.flatnonzero(np.isin(run, short))
    gap = pd.Series(np.abs(s[members] - length[run[members]] / 2), index=members)
    return gap.groupby(run[members]).idxmin().to_numpy()


def section_radii(topo: Topology, samples: pd.DataFrame, rule: RadiusRule) -> SectionRadii:
    """Radius of every section by a rule, as a parent (far end) and as a daughter (near end).

    Parameters
    ----------
    topo : Topology
        Sections are its runs.
    samples : pandas.DataFrame
        Columns ``x, y, z, radius`` in the order of the topology's nodes.
    rule : RadiusRule
        The rule and its parameter.

    Returns
    -------
    SectionRadii
    """
    n = len(topo.run)
    radius = samples["radius"].to_numpy(dtype=float)
    run = topo.run
    none = np.zeros(0, dtype=np.int64)
    if rule.name == "median":
        med, used = _median_by_run(run, radius, np.ones(n, dtype=bool), n)
        return SectionRadii(med, med, used, used, none)
    xyz = samples[["x", "y", "z"]].to_numpy(dtype=float)
    s, length = _path_from_section_start(topo, xyz)
    if rule.name == "trimmed_median":
        if rule.trim is not None:
            lo = hi = np.full(n, float(rule.trim))
        else:
            lo, hi = rule.end_radii * radius[run], rule.end_radii * radius[topo.run_end[run]]
        keep = (s >= lo) & (length[run] - s >= hi)
        heads = np.flatnonzero(topo.run_end >= 0)
        counts = np.bincount(run[keep], minlength=n)
        short = heads[counts[heads] == 0]
        keep[_nearest_middle(run, s, length, short)] = True
        med, used = _median_by_run(run, radius, keep, n)
        return SectionRadii(med, med, used, used, short)
    order = pd.DataFrame({"run": run, "s": s, "r": radius}).sort_values(["run", "s"], kind="stable")
    order["from_start"] = order.groupby("run").cumcount()
    order["from_end"] = order.groupby("run").cumcount(ascending=False)
    ordered_run, ordered_r = order["run"].to_numpy(), order["r"].to_numpy()
    near = rule.near_points
    start, used_start = _median_by_run(ordered_run, ordered_r, (order["from_start"] < near).to_numpy(), n)
    before_end = order["from_end"].between(1, near).to_numpy()
    end, used_end = _median_by_run(ordered_run, ordered_r, before_end, n)
    single = np.isnan(end) & ~np.isnan(start)  # a section of one sample: the branch point itself
    end[single] = start[single]
    used_end[single] = used_start[single]
    return SectionRadii(end, start, used_end, used_start, none)


def branch_point_section_junctions(topo: Topology, counted: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Sections made of one sample that is a branch point, and the branch points whose junction has one.

    Parameters
    ----------
    topo : Topology
        Sections are its runs.
    counted : numpy.ndarray of bool
        Samples that may be junctions (outside the soma).

    Returns
    -------
    touched : numpy.ndarray of bool
        Branch points whose parent section or a daughter section is such a section.
    point : numpy.ndarray of bool
        The samples that are such a section on their own.

    Examples
    --------
    >>> t = build_topology(np.array([-1, 0, 1, 1, 3, 3]))  # 0-1 branches at 1 into 2 and 3; 3 branches
    >>> [np.flatnonzero(x).tolist() for x in branch_point_section_junctions(t, np.ones(6, dtype=bool))]
    [[1, 3], [3]]
    """
    n = len(topo.run)
    point = (topo.run_end == np.arange(n)) & (topo.n_children >= 2) & np.asarray(counted, dtype=bool)
    touched = point.copy()
    inner = np.flatnonzero(point & (topo.parent >= 0))
    touched[topo.parent[inner]] = True
    return touched & (topo.n_children >= 2), point


def _left_out_problems(
    topo: Topology, frame: pd.DataFrame, point: np.ndarray, nodes: np.ndarray
) -> list[Problem]:
    """One ``excluded`` problem per junction left out for a section of one branch-point sample."""
    ids = frame["id"].astype(str).to_numpy()
    indptr, children = topo.children()
    problems = []
    for j in nodes.tolist():
        kids = [ids[c] for c in children[indptr[j] : indptr[j + 1]] if point[c]]
        which = [f"parent section {ids[j]}"] * bool(point[j])
        which += [f"daughter section{'s' * (len(kids) > 1)} {', '.join(kids)}"] * bool(kids)
        problems.append(
            Problem(
                "excluded",
                str(frame["source"].iat[j]),
                int(frame["line"].iat[j]),
                "radius",
                f"junction {ids[j]} (specimen {frame['specimen'].iat[j]}): {' and '.join(which)} "
                f"{'is' if len(kids) + point[j] == 1 else 'are each'} one branch-point sample (no radius apart from "
                "the branch point's own); junction not used",
                "trace more sample points there, or keep such junctions (branch_point_sections='keep', "
                "--branch-point-sections keep)",
                "branch_point_section",
            )
        )
    return problems


def junctions_from_swc(
    path: str | os.PathLike,
    *,
    radius_rule: str = "trimmed_median",
    trim: float | None = None,
    trim_radii: float | None = None,
    near_points: int = NEAR_POINTS,
    neurite_types: str = "all",
    branch_point_sections: str = "exclude",
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
        ``trimmed_median``: one distance (in the file's unit) left out at each end of every section.
    trim_radii : float, optional
        ``trimmed_median``: the trim at each end in radii of the section's sample at that end (default
        :data:`TRIM_RADII`; not with ``trim``).
    near_points : int
        ``near_branch``: samples read on each side of a junction.
    neurite_types : {"all", "dendrite", "basal", "apical", "axon"}
        Keep the junctions whose branch point has these types (see :data:`NEURITE_TYPES`).
    branch_point_sections : {"exclude", "keep"}
        Junctions whose parent or a daughter is a section of one branch-point sample: not used (listed in
        ``.problems``) or used with that branch point's radius (see the module notes).
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
        their rows ``first-last`` line; ``parent_samples`` and ``daughter_samples`` give how many samples
        each radius was read from. ``.rules`` holds the radius rule and its parameter in effect;
        ``.problems`` lists the junctions left out by ``branch_point_sections="exclude"``.

    Raises
    ------
    InputError
        Naming file, line and field (see :func:`read_swc`), or when no junction is left.
    """
    rule = RadiusRule(radius_rule, trim=trim, trim_radii=trim_radii, near_points=near_points)
    check_rule("neurite_types", neurite_types, tuple(NEURITE_TYPES))
    check_rule("branch_point_sections", branch_point_sections, BRANCH_POINT_SECTION_RULES)
    if mapping_kwargs.get("measure", "radius") != "radius":
        raise InputError(
            "SWC files hold radii: leave the measure as 'radius' (no --measure diameter with --swc)"
        )
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
    radii = section_radii(topo, frame, rule)
    ids = frame["id"].astype(str).to_numpy(dtype=object)
    lines = frame["line"].astype(str).to_numpy(dtype=object)
    heads = np.flatnonzero(topo.run_end >= 0)
    label = ids.copy()
    rows = lines.copy()
    ends = topo.run_end[heads]
    label[heads] = [a if a == b else f"{a}-{b}" for a, b in zip(ids[heads], ids[ends])]
    rows[heads] = [a if a == b else f"{a}-{b}" for a, b in zip(lines[heads], lines[ends])]
    touched, point = branch_point_section_junctions(topo, ~soma)
    left_out = touched & eligible & (branch_point_sections == "exclude")
    problems = _left_out_problems(topo, frame, point, np.flatnonzero(left_out))
    junction_frame = assemble_junctions(
        topo,
        eligible & ~left_out,
        taxon=frame["taxon"].to_numpy(dtype=object),
        specimen=frame["specimen"].to_numpy(dtype=object),
        junction=ids,
        runs=Runs(
            label=label,
            rows=rows,
            size_end=radii.size_end,
            size_start=radii.size_start,
            samples_end=radii.used_end,
            samples_start=radii.used_start,
        ),
        source=frame["source"].to_numpy(dtype=object),
    )
    n_roots = int((parent < 0).sum())
    notes = [
        *samples.notes,
        f"{int((branch & ~soma).sum())} branch points outside the soma; {int((branch & eligible).sum())} kept as "
        f"junctions (neurite types: {neurite_types}); {int((branch & soma).sum())} soma branch point(s) and "
        f"{int((parent_soma & ~soma).sum())} neurite(s) leaving the soma are not junctions",
        f"{n_roots} tree(s) (samples with parent -1) in {frame['source'].nunique()} file(s)",
        f"radius rule: {rule.describe()}",
    ]
    notes.append(
        f"{int((touched & eligible).sum())} junction(s) with a parent or daughter section of one branch-point "
        f"sample: {'left out (listed below)' if branch_point_sections == 'exclude' else 'kept'} "
        f"(branch_point_sections = {branch_point_sections})"
    )
    if rule.name == "trimmed_median":
        sections = int((~soma[heads]).sum())
        notes.append(
            f"{int((~soma[radii.fallbacks]).sum())} of {sections} section(s) too short for the trim: each read "
            "at its one sample nearest the middle (parent_samples/daughter_samples 1); none left out"
        )
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
    rules: dict[str, Any] = {
        **rule.rules(),
        "branch_point_sections": branch_point_sections,
        "neurite_types": neurite_types,
        "roots": roots,
    }
    table = validate_frame(junction_frame, "radius", str(path), **{"unit": SWC_UNIT, **mapping_kwargs})
    return NetworkJunctions(
        frame=junction_frame, table=table, kind="swc", rules=rules, notes=notes, problems=problems
    )


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
