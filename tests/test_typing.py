"""The package type-checks: ``mypy monitor`` with the settings in pyproject.toml finds nothing.

The package ships ``py.typed``, so its annotations are a promise to the code that imports it.
"""

from __future__ import annotations

import importlib.util
import subprocess
import sys
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]


def test_mypy_finds_nothing() -> None:
    if importlib.util.find_spec("mypy") is None:
        pytest.skip("mypy is not installed (pip install -e '.[test]' brings it and the stubs)")
    result = subprocess.run([sys.executable, "-m", "mypy", "monitor"], cwd=ROOT,
                            capture_output=True, text=True, check=False, timeout=600)
    assert result.returncode == 0, result.stdout + result.stderr
