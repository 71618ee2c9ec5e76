"""Write files atomically and never clobber what the user already has: the package's one writer.

Every file allobranch writes (result tables, the saved fit, figures, the report, per-junction geometry)
goes through :func:`atomic_write` (one file) or :func:`write_files` (a set of files, all or nothing). A
file is written under a hidden temporary name in its destination folder and moved into place with
:func:`os.replace`, so an interrupted run leaves either the complete file or none, never half of one.
:func:`prepare_output_dir` checks a destination before any long computation, so a run fails early rather
than after the work.
"""

from __future__ import annotations

import contextlib
import os
import tempfile
from collections.abc import Callable, Mapping, Sequence
from pathlib import Path

from allobranch.errors import AllobranchError, OutputExistsError

#: A writer receives the temporary path to write to (e.g. ``lambda p: frame.to_csv(p, index=False)``).
Writer = Callable[[Path], object]


def _temporary_path(dest: Path) -> Path:
    """A new, empty hidden file beside ``dest`` that keeps its suffix (writers may infer the format from it)."""
    try:
        fd, tmp = tempfile.mkstemp(dir=dest.parent, prefix=f".{dest.stem}-", suffix=f".tmp{dest.suffix}")
    except OSError as exc:
        raise AllobranchError(
            f"{dest.parent}: cannot write into this folder ({exc.strerror}); choose another output folder"
        ) from None
    os.close(fd)
    return Path(tmp)


def _discard(paths: Sequence[Path]) -> None:
    for path in paths:
        with contextlib.suppress(FileNotFoundError):
            os.unlink(path)


def atomic_write(path: str | os.PathLike, write: Writer) -> Path:
    """Write one file so that it appears complete or not at all.

    Parameters
    ----------
    path : str or os.PathLike
        Destination; its folder must exist. An existing file there is replaced (check with
        :func:`prepare_output_dir` first when it must not be).
    write : callable
        Called with a temporary path in the destination folder (same suffix as ``path``); it writes the
        whole file there.

    Returns
    -------
    pathlib.Path
        The destination.

    Raises
    ------
    FileNotFoundError
        If the destination folder does not exist.
    AllobranchError
        If the folder cannot be written to.

    Examples
    --------
    >>> import tempfile, pathlib
    >>> folder = pathlib.Path(tempfile.mkdtemp())
    >>> atomic_write(folder / "note.txt", lambda p: p.write_text("done")).read_text()
    'done'
    """
    return write_files(Path(path).parent, {Path(path).name: write})[0]


def write_files(out: str | os.PathLike, writers: Mapping[str, Writer]) -> list[Path]:
    """Write several files into the folder ``out``, all or nothing.

    Every writer writes to its own temporary file first; only when all have succeeded are the files moved
    into place, so a failing writer leaves no half-written set of results behind.

    Parameters
    ----------
    out : str or os.PathLike
        Existing destination folder.
    writers : mapping of str to callable
        File name -> writer (called with the temporary path to write to).

    Returns
    -------
    list of pathlib.Path
        The files written, in the order given.
    """
    out = Path(out)
    if not out.is_dir():
        raise FileNotFoundError(f"the output folder {str(out)!r} does not exist")
    temporary: list[Path] = []
    try:
        for name, writer in writers.items():
            temporary.append(_temporary_path(out / name))
            writer(temporary[-1])
        written = []
        for name, tmp in zip(writers, temporary):
            os.replace(tmp, out / name)
            written.append(out / name)
        return written
    finally:
        _discard(temporary)


def prepare_output_dir(out: str | os.PathLike, names: Sequence[str], *, force: bool = False) -> Path:
    """Check that the folder ``out`` can receive the files ``names``, and create it when missing.

    Parameters
    ----------
    out : str or os.PathLike
        Output folder.
    names : sequence of str
        Names of the files that will be written into it.
    force : bool
        Allow replacing existing files of these names (nothing else in the folder is touched).

    Returns
    -------
    pathlib.Path
        The folder.

    Raises
    ------
    OutputExistsError
        If ``out`` is a file, or any of the files already exists and ``force`` is false.
    AllobranchError
        If the folder cannot be created.
    """
    out = Path(out)
    if out.exists() and not out.is_dir():
        raise OutputExistsError(
            f"{out}: the output must be a folder, but this is a file (not a folder) -> choose another output "
            "folder"
        )
    clash = [n for n in names if (out / n).exists()]
    if clash and not force:
        raise OutputExistsError(
            f"{out}: already holds {', '.join(clash)} -> choose a new output folder, or add --force "
            "(force=True in Python) to replace these files (nothing else in the folder is touched)"
        )
    try:
        out.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise AllobranchError(f"{out}: cannot create the output folder ({exc.strerror})") from None
    return out
