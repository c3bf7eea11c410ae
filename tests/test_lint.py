"""The code base stays ruff clean (DEVELOPERS.md, tests): a lint failure fails the suite."""

from __future__ import annotations

import shutil
import subprocess
import sys
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]


def test_ruff_finds_nothing() -> None:
    ruff = shutil.which("ruff")
    if ruff is None:
        pytest.skip("ruff is not installed (pip install -e '.[test]' brings it)")
    result = subprocess.run([ruff, "check", "--no-cache", str(ROOT)], capture_output=True,
                            text=True, check=False)
    assert result.returncode == 0, result.stdout + result.stderr


def test_python_m_monitor_runs() -> None:
    result = subprocess.run([sys.executable, "-m", "monitor", "--version"], capture_output=True,
                            text=True, check=False, cwd=ROOT)
    assert result.returncode == 0 and result.stdout.startswith("fitwatch ")
