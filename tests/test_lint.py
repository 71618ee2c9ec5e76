"""The code stays clean under the linter and formatter configured in pyproject.toml ([tool.ruff])."""

from __future__ import annotations

import shutil
import subprocess
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]
RUFF = shutil.which("ruff")

pytestmark = pytest.mark.skipif(
    RUFF is None, reason="ruff not installed; `pip install -e '.[test]'` brings it"
)


def test_ruff_lint_is_clean():
    proc = subprocess.run([RUFF, "check", "."], cwd=ROOT, capture_output=True, text=True)
    assert proc.returncode == 0, proc.stdout + proc.stderr


def test_ruff_format_is_clean():
    proc = subprocess.run([RUFF, "format", "--check", "."], cwd=ROOT, capture_output=True, text=True)
    assert proc.returncode == 0, "run `ruff format .`\n" + proc.stdout + proc.stderr
