"""The result of a network conversion: the derived frame, the validated junction table and what was done."""

from __future__ import annotations

import dataclasses
import re
from dataclasses import dataclass, field
from typing import Any

import pandas as pd

from allobranch import errors
from allobranch.errors import InputError, Problem, RecipeError
from allobranch.intake import read_junctions
from allobranch.intake.table import JunctionTable
from allobranch.networks.assemble import DAUGHTER_SEP, daughter_columns

#: How many network-level problems of one kind :meth:`NetworkJunctions.describe` prints before a count.
SHOWN_PROBLEMS = 10

#: Columns of :attr:`NetworkJunctions.continuations`.
CONTINUATION_COLUMNS: tuple[str, ...] = ("taxon", "specimen", "segment", "child", "source", "row")


def check_rule(option: str, value: object, allowed: tuple[str, ...]) -> str:
    """Return ``value`` if it is one of ``allowed``; otherwise raise a :class:`RecipeError` naming ``option``.

    Examples
    --------
    >>> check_rule("continuations", "merge", ("merge", "keep"))
    'merge'
    """
    if value in allowed:
        return str(value)
    raise option_error(f"{option}: unknown value {value!r}", f"use one of: {', '.join(allowed)}")


def option_error(message: str, hint: str) -> RecipeError:
    """A :class:`RecipeError` with one fatal ``bad_option`` problem about the options (no file or row).

    Parameters
    ----------
    message : str
        What is wrong.
    hint : str
        What to do.

    Returns
    -------
    RecipeError
        The error to raise.
    """
    return errors.option_error(message, hint, "bad_option")


@dataclass
class NetworkJunctions:
    """Junctions derived from a network, with everything needed to trace them back.

    Attributes
    ----------
    frame : pandas.DataFrame
        One row per junction: ``taxon, specimen, junction, parent, d1 .. dK`` (sizes in the user's unit and
        measure, daughters largest first) and the tracing columns ``parent_segment``,
        ``daughter_segments`` (``;``-separated), ``generation`` (branch points between the root and the
        junction's parent segment; 0 at the root segment's end), ``strahler_order``, ``n_tips`` (tips
        downstream), ``parent_rows``, ``daughter_rows`` (the user's row or line numbers) and ``source``.
    table : JunctionTable
        ``frame`` validated by :func:`allobranch.intake.read_junctions`; its flags point at the user's file.
    kind : str
        ``"segments"``, ``"edges"`` or ``"swc"``.
    rules : dict
        Every choice that changes the numbers (continuation rule, radius rule, loop rule, ...), for reports.
    notes : list of str
        What the conversion did, in words (counts of continuations, loops broken, soma stems, ...).
    problems : list of Problem
        Network-level findings that did not stop the conversion (e.g. edges removed to break loops).
    continuations : pandas.DataFrame
        Segments with exactly one child (columns :data:`CONTINUATION_COLUMNS`).
    mapping : ColumnMapping or None
        The user's mapping (grouping columns of the network table, unit, ...) when the conversion came from
        :func:`allobranch.networks.options.junctions_from_options`; ``table.mapping`` names the derived
        frame's columns instead.
    options : NetworkOptions or None
        The network options used, likewise.
    """

    frame: pd.DataFrame
    table: JunctionTable
    kind: str
    rules: dict[str, Any] = field(default_factory=dict)
    notes: list[str] = field(default_factory=list)
    problems: list[Problem] = field(default_factory=list)
    continuations: pd.DataFrame = field(default_factory=lambda: pd.DataFrame(columns=CONTINUATION_COLUMNS))
    mapping: Any = None
    options: Any = None

    def describe(self) -> list[str]:
        """Lines telling the user how the junctions were derived (rules, notes, network-level problems).

        At most :data:`SHOWN_PROBLEMS` problems of each kind (code) are printed, then how many more there are;
        :attr:`problems` holds them all.
        """
        rules = "; ".join(f"{k} = {v}" for k, v in self.rules.items())
        lines = [f"Network ({self.kind}): {len(self.frame)} junctions derived; rules: {rules}"]
        lines += [f"  {note}" for note in self.notes]
        shown: dict[str, int] = {}
        for p in self.problems:
            shown[p.code] = shown.get(p.code, 0) + 1
            if shown[p.code] <= SHOWN_PROBLEMS:
                lines.append(f"  {p.format()}")
        lines += [
            f"  ... and {count - SHOWN_PROBLEMS} more '{code}' problem(s) like these"
            for code, count in shown.items()
            if count > SHOWN_PROBLEMS
        ]
        return lines


def first_row(rows: str) -> int | None:
    """The first row number in a ``parent_rows``/``daughter_rows`` entry (``"12+15"`` gives 12)."""
    match = re.match(r"\s*(\d+)", str(rows))
    return int(match.group(1)) if match else None


def _trace(problem: Problem, frame: pd.DataFrame, size_column: str) -> Problem:
    """Point a problem found in the derived frame at the segment row of the user's file it concerns."""
    if problem.row is None or not 2 <= problem.row < len(frame) + 2:
        return problem
    j = frame.iloc[problem.row - 2]
    column = problem.column or ""
    if column == "parent":
        role, segment, rows = "parent", j["parent_segment"], j["parent_rows"]
    elif column[:1] == "d" and column[1:].isdigit():
        k = int(column[1:]) - 1
        role = f"daughter {k + 1}"
        segment = str(j["daughter_segments"]).split(DAUGHTER_SEP)[k]
        rows = str(j["daughter_rows"]).split(DAUGHTER_SEP)[k]
    else:
        return dataclasses.replace(
            problem,
            file=str(j["source"]),
            row=first_row(j["parent_rows"]),
            message=f"junction {j['junction']} (specimen {j['specimen']}): {problem.message}",
        )
    return dataclasses.replace(
        problem,
        file=str(j["source"]),
        row=first_row(rows),
        column=size_column,
        message=f"junction {j['junction']} (specimen {j['specimen']}), {role} segment {segment}: "
        f"{problem.message}",
    )


def validate_frame(
    frame: pd.DataFrame, size_column: str, label: str = "<input>", **mapping_kwargs: Any
) -> JunctionTable:
    """Validate a derived junction frame with :func:`allobranch.intake.read_junctions`.

    Parameters
    ----------
    frame : pandas.DataFrame
        A frame from :func:`allobranch.networks.assemble.assemble_junctions`.
    size_column : str
        The user's size column (or SWC field), named in messages instead of ``parent``/``d1``...
    label : str
        The user's file, named when the network has no junction.
    **mapping_kwargs
        Passed to :func:`~allobranch.intake.read_junctions` (``unit``, ``measure``, ``rel_error``, ...);
        the size, grouping and junction columns are the frame's own.

    Returns
    -------
    JunctionTable
        Its flags point at the user's file, row and size column (the message names the junction and
        segment); its ``source`` names the file(s) the network came from. ``frame`` gains a ``flags``
        column: the codes of each junction's validation flags joined with ``;`` (empty when none).

    Raises
    ------
    InputError
        If the frame is empty (the network has no junction) or validation finds a fatal problem (traced
        back to the user's rows the same way).
    """
    if not len(frame):
        raise InputError(
            [
                Problem(
                    "fatal",
                    label,
                    None,
                    None,
                    "no junction found: no segment has two or more children",
                    "check the parent ids (or the from/to columns); a junction is a segment with two or more children",
                    "no_junction",
                )
            ]
        )
    sources = list(dict.fromkeys(frame["source"].astype(str)))
    try:
        covariates = mapping_kwargs.get("covariates") or []
        used = ["taxon", "specimen", "junction", "parent", *daughter_columns(frame)]
        used += [
            c for c in ([covariates] if isinstance(covariates, str) else covariates) if c in frame.columns
        ]
        table = read_junctions(
            frame[used],  # the tracing columns are not validated (and would only cost time)
            **{
                **mapping_kwargs,
                "parent": "parent",
                "daughters": daughter_columns(frame),
                "taxon": "taxon",
                "specimen": "specimen",
                "junction": "junction",
            },
        )
    except InputError as exc:
        raise InputError([_trace(p, frame, size_column) for p in exc.problems]) from None
    codes: dict[int, list[str]] = {}
    for p in table.report.problems:
        if p.row is not None:
            codes.setdefault(p.row - 2, []).append(p.code)
    frame["flags"] = [DAUGHTER_SEP.join(dict.fromkeys(codes.get(i, []))) for i in range(len(frame))]
    table.report.problems = [_trace(p, frame, size_column) for p in table.report.problems]
    table.source = sources[0] if len(sources) == 1 else f"{len(sources)} files ({sources[0]}, ...)"
    return table
