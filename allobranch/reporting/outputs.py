"""Write result files atomically, never clobbering what the user already has."""

from __future__ import annotations

import os
import shutil
import tempfile
from collections.abc import Callable, Mapping
from pathlib import Path

from allobranch.errors import OutputExistsError


def prepare_output_dir(out: str | os.PathLike, names: list[str], *, force: bool = False) -> Path:
    """Check that ``out`` can receive the files ``names``.

    Raises
    ------
    OutputExistsError
        If any of the files already exists and ``force`` is false.
    """
    out = Path(out)
    if out.exists() and not out.is_dir():
        raise OutputExistsError(f"{out}: exists and is not a folder -> choose another --out")
    clash = [n for n in names if (out / n).exists()]
    if clash and not force:
        raise OutputExistsError(
            f"{out}: already holds {', '.join(clash)} -> choose a new --out folder, or add --force to "
            "replace these files (nothing else in the folder is touched)"
        )
    out.mkdir(parents=True, exist_ok=True)
    return out


def write_files(out: Path, writers: Mapping[str, Callable[[Path], object]]) -> list[Path]:
    """Write every file into a temporary folder beside ``out``, then move each into place.

    Each writer receives a temporary path to write to. If any writer fails, nothing is moved, so no
    half-written set of results is left behind.
    """
    tmp = Path(tempfile.mkdtemp(dir=out, prefix=".allobranch-tmp-"))
    try:
        for name, writer in writers.items():
            writer(tmp / name)
        written = []
        for name in writers:
            os.replace(tmp / name, out / name)
            written.append(out / name)
        return written
    finally:
        shutil.rmtree(tmp, ignore_errors=True)
