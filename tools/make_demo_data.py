"""Regenerate demo_data/ from the project's seeded scenario generator.

    python tools/make_demo_data.py

The files are invented (a distribution centre's dock loads); `fitwatch demo` writes the same
files into its own folder, and tests/test_demo.py checks that the committed copy matches.
"""

from __future__ import annotations

import shutil
from pathlib import Path

from monitor.demo.scenario import generate_demo

ROOT = Path(__file__).resolve().parents[1]

if __name__ == "__main__":
    target = ROOT / "demo_data"
    shutil.rmtree(target / "nights", ignore_errors=True)
    files = generate_demo(target)
    print(f"wrote {files.history.relative_to(ROOT)} and {len(files.nights)} nightly files")
