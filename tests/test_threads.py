"""One BLAS thread a process unless the user says otherwise (``monitor/__init__.py``)."""

from __future__ import annotations

import os
import subprocess
import sys

PROBE = ("import monitor, numpy, os; "
         "print(os.environ['OPENBLAS_NUM_THREADS'], os.environ['MKL_NUM_THREADS'])")


def _run(env: dict[str, str]) -> list[str]:
    return subprocess.run([sys.executable, "-c", PROBE], env=env, capture_output=True,
                          text=True, check=True, timeout=120).stdout.split()


def test_the_package_asks_for_one_blas_thread() -> None:
    env = {k: v for k, v in os.environ.items()
           if k not in ("OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS")}
    assert _run(env) == ["1", "1"]


def test_a_thread_count_the_user_exported_wins() -> None:
    env = {**os.environ, "OPENBLAS_NUM_THREADS": "3", "MKL_NUM_THREADS": "2"}
    assert _run(env) == ["3", "2"]
