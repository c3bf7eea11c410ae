"""Child process for test_crash.py: ingest a file and stop dead at a chosen point.

Usage: python -m tests.ingest.crash_child POINT DATABASE_URL MODEL FILE

The process prints READY and sleeps at POINT (inside the ingest transaction unless POINT is
"committed"); the test then kills it with SIGKILL. With POINT "start" it prints READY just before
ingesting and carries on, for kills at random moments.
"""

from __future__ import annotations

import sys
import time

import monitor.ingest.service as service
from monitor.ingest.service import ingest_file
from tests.support.ingest import child_model, child_options


def _ready(wait: bool) -> None:
    print("READY", flush=True)
    if wait:
        time.sleep(300)


def _stop_after(name: str, calls: int) -> None:
    original = getattr(service, name)
    seen = {"n": 0}

    def patched(*args, **kwargs):
        result = original(*args, **kwargs)
        seen["n"] += 1
        if seen["n"] == calls:
            _ready(True)
        return result

    setattr(service, name, patched)


def main() -> None:
    point, url, name, path = sys.argv[1:5]
    stops = {"batch": ("start_batch", 1), "chunk1": ("insert_observations", 1),
             "chunk3": ("insert_observations", 3), "rejected": ("add_rejected_rows", 2),
             "day_stats": ("merge_day_stats", 1), "finish": ("finish_batch", 1)}
    if point in stops:
        _stop_after(*stops[point])
    engine, model = child_model(url, name)
    options = child_options(500)
    if point == "start":
        _ready(False)
    ingest_file(engine, model, path, options)
    if point == "committed":
        _ready(True)


if __name__ == "__main__":
    main()
