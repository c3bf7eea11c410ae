"""Child process for test_giant_records.py: ingest a file and print its counts and memory.

Usage: python -m tests.ingest.memory_child DATABASE_URL MODEL FILE

Prints one JSON line: accepted, rejected, reasons, ``start_mb`` (peak resident memory, VmHWM,
once everything is imported and the database opened) and ``peak_mb`` (VmHWM after the ingest).
"""

from __future__ import annotations

import json
import sys
from datetime import UTC, datetime, timedelta
from pathlib import Path
from zoneinfo import ZoneInfo

from monitor.ingest.service import IngestOptions, ingest_file
from monitor.store.engine import open_engine
from monitor.store.models import get_model


def peak_mb() -> float:
    for line in Path("/proc/self/status").read_text().splitlines():
        if line.startswith("VmHWM:"):
            return int(line.split()[1]) / 1024
    raise RuntimeError("no VmHWM in /proc/self/status")


def main() -> None:
    url, name, path = sys.argv[1:4]
    engine = open_engine(url)
    with engine.connect() as conn:
        model = get_model(conn, name)
    options = IngestOptions(ZoneInfo("Europe/Berlin"), {"pallets": (0.0, 60.0)}, False,
                            datetime(2026, 4, 1, 12, tzinfo=UTC), timedelta(minutes=5),
                            200_000, False)
    start = peak_mb()
    summary = ingest_file(engine, model, path, options)
    engine.dispose()
    print(json.dumps({"accepted": summary.accepted, "rejected": summary.rejected,
                      "reasons": dict(summary.reasons), "start_mb": start,
                      "peak_mb": peak_mb()}))


if __name__ == "__main__":
    main()
