"""Child process for test_giant_records.py: ingest a file and print its counts and memory.

Usage: python -m tests.ingest.memory_child DATABASE_URL MODEL FILE

Prints one JSON line: accepted, rejected, reasons, ``start_mb`` (peak resident memory, VmHWM,
once everything is imported and the database opened) and ``peak_mb`` (VmHWM after the ingest).
"""

from __future__ import annotations

import json
import sys
from pathlib import Path

from monitor.ingest.service import ingest_file
from tests.support.ingest import child_model, child_options


def peak_mb() -> float:
    for line in Path("/proc/self/status").read_text().splitlines():
        if line.startswith("VmHWM:"):
            return int(line.split()[1]) / 1024
    raise RuntimeError("no VmHWM in /proc/self/status")


def main() -> None:
    url, name, path = sys.argv[1:4]
    engine, model = child_model(url, name)
    options = child_options(200_000)
    start = peak_mb()
    summary = ingest_file(engine, model, path, options)
    engine.dispose()
    print(json.dumps({"accepted": summary.accepted, "rejected": summary.rejected,
                      "reasons": dict(summary.reasons), "start_mb": start,
                      "peak_mb": peak_mb()}))


if __name__ == "__main__":
    main()
