"""The package type-checks: ``mypy monitor`` with the settings in pyproject.toml finds nothing.

The package ships ``py.typed``, so its annotations are a promise to the code that imports it.
"""

from __future__ import annotations

import importlib.util
import os
import subprocess
import sys
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]
# mypy's incremental cache outside the checkout, so a fresh clone on a machine that checked the
# package before rechecks only what changed (mypy's own invalidation: sources, options, its
# version). A cold run costs about 40 s of one core, a warm one about 1 s.
CACHE = Path(os.environ.get("XDG_CACHE_HOME") or Path.home() / ".cache") / "fitwatch-mypy"


def test_mypy_finds_nothing(tmp_path: Path) -> None:
    if importlib.util.find_spec("mypy") is None:
        pytest.skip("mypy is not installed (pip install -e '.[test]' brings it and the stubs)")
    cache = CACHE
    try:
        cache.mkdir(parents=True, exist_ok=True)
    except OSError:  # a home that cannot be written: a cold check in the test's own folder
        cache = tmp_path / "mypy-cache"
    result = subprocess.run([sys.executable, "-m", "mypy", "--cache-dir", str(cache), "monitor"],
                            cwd=ROOT, capture_output=True, text=True, check=False, timeout=600)
    assert result.returncode == 0, result.stdout + result.stderr
