"""The linter's rules (``[tool.ruff]`` in pyproject.toml) hold over the package and its tests."""

from __future__ import annotations

import shutil
import subprocess
import sys
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parent.parent


def _ruff() -> list[str] | None:
    exe = shutil.which("ruff", path=str(Path(sys.executable).parent)) or shutil.which("ruff")
    return [exe] if exe else None


def test_ruff_check_passes():
    """``ruff check synthgen tests`` reports nothing (ruff is in the ``test`` extra, so CI runs this)."""
    ruff = _ruff()
    if ruff is None:
        pytest.skip("ruff is not installed (pip install -e '.[test]')")
    res = subprocess.run([*ruff, "check", "--no-cache", "synthgen", "tests"], cwd=ROOT, capture_output=True, text=True)
    assert res.returncode == 0, res.stdout + res.stderr
