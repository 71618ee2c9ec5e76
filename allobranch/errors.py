"""Exceptions raised by allobranch.

Every problem with user input is raised as :class:`InputError` (or a subclass) carrying a list of
:class:`Problem` records, each naming the file, the row as the user sees it in the file, the column and
what to do. The command-line tool turns these into a readable message and a non-zero exit code.
"""

from __future__ import annotations

from dataclasses import dataclass


@dataclass(frozen=True)
class Problem:
    """One problem found in the user's input.

    Parameters
    ----------
    severity : {"fatal", "flag", "excluded"}
        ``fatal`` stops the analysis; ``flag`` keeps the row but reports it; ``excluded`` means the row is
        not used (for example a completely blank line) and is listed so nothing disappears silently.
    file : str
        The file (or ``"<DataFrame>"``) the problem was found in.
    row : int or None
        Row number as the user sees it in the file (header is row 1 for text files and spreadsheets);
        ``None`` when the problem concerns the whole table.
    column : str or None
        The user's column name, or ``None``.
    message : str
        What is wrong.
    hint : str
        What to do about it.
    code : str
        A short machine-readable code (e.g. ``"daughter_ge_parent"``).
    """

    severity: str
    file: str
    row: int | None
    column: str | None
    message: str
    hint: str = ""
    code: str = ""

    def format(self) -> str:
        """Return the problem as one human-readable line."""
        where = [self.file]
        if self.row is not None:
            where.append(f"row {self.row}")
        if self.column is not None:
            where.append(f"column '{self.column}'")
        text = f"{', '.join(where)}: {self.message}"
        if self.hint:
            text += f" -> {self.hint}"
        return text


class AllobranchError(Exception):
    """Base class for errors that the CLI reports without a traceback."""


class InputError(AllobranchError, ValueError):
    """User input cannot be used; ``problems`` lists every reason found."""

    def __init__(self, problems: list[Problem] | str, *, max_shown: int = 25) -> None:
        if isinstance(problems, str):
            problems = [Problem("fatal", "<input>", None, None, problems)]
        self.problems = list(problems)
        shown = [p.format() for p in self.problems[:max_shown]]
        more = len(self.problems) - len(shown)
        if more > 0:
            shown.append(f"... and {more} more problem(s) of the same kinds")
        super().__init__("\n".join(shown))


class RecipeError(InputError):
    """A recipe (TOML mapping file) or a set of mapping options is wrong."""


#: Where a problem with a command-line option or a keyword argument comes from, in messages.
OPTIONS_ORIGIN = "<options>"


def option_error(message: str, hint: str, code: str, origin: str = OPTIONS_ORIGIN) -> RecipeError:
    """The error for one unusable option or recipe value (no row or column to name).

    Parameters
    ----------
    message, hint : str
        What is wrong and what to do.
    code : str
        The problem's code.
    origin : str
        Recipe file, or :data:`OPTIONS_ORIGIN` for command-line options and keyword arguments.

    Returns
    -------
    RecipeError
        To be raised by the caller.
    """
    return RecipeError([Problem("fatal", origin, None, None, message, hint, code)])


class OutputExistsError(AllobranchError):
    """An output directory or file already exists and would be overwritten."""
