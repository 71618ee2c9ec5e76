"""Moved: the writers live in :mod:`allobranch.io` (the package's one atomic writer).

This module only re-exports them so that imports written before the move keep working; new code imports
from :mod:`allobranch.io`.
"""

from __future__ import annotations

from allobranch.io import prepare_output_dir, write_files

__all__ = ["prepare_output_dir", "write_files"]
