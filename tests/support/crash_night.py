"""Child process for the kill tests of a nightly run: run one night, die by SIGKILL at a point.

Usage: ``python -m tests.support.crash_night POINT[:N] CONFIG NOW_ISO``

The fault points, named here and nowhere else (test-only: nothing in ``monitor/`` knows them):

- ``after_block``: the N-th check block's transaction has just committed;
- ``before_queue``: every check of the run has committed, nothing of it is queued yet;
- ``after_queue``: the N-th night's messages (and their ``queued_nights`` rows) committed;
- ``accepted``: the mail transport took the N-th message, its outbox row is not yet ``sent``
  (the one window SMTP itself leaves open: the message arrives a second time after the rerun);
- ``none``: no fault; the run completes.

The process kills itself with SIGKILL (no cleanup, no atexit, like a power cut for the
process). It prints ``DONE`` when the run completes without reaching the point.
"""

from __future__ import annotations

import contextlib
import os
import signal
import sys
from collections.abc import Callable, Iterator
from datetime import datetime
from typing import Any

import monitor.alerts.service as alert_service
import monitor.monitoring.check as check
import monitor.runtime.nightly as nightly
from monitor.config import load_settings
from monitor.store.engine import open_engine

POINTS = ("after_block", "before_queue", "after_queue", "accepted", "none")


def die() -> None:
    os.kill(os.getpid(), signal.SIGKILL)


def _count(calls: int) -> Callable[[], None]:
    seen = {"n": 0}

    def hit() -> None:
        seen["n"] += 1
        if seen["n"] == calls:
            die()
    return hit


def arm(point: str, calls: int = 1) -> None:
    """Patch the code under test so that reaching ``point`` the ``calls``-th time kills us."""
    if point not in POINTS:
        raise SystemExit(f"unknown fault point {point!r}; one of {POINTS}")
    hit = _count(calls)
    if point == "after_block":
        real_transaction = check.write_transaction

        @contextlib.contextmanager
        def transaction(*args: Any, **kwargs: Any) -> Iterator[Any]:
            with real_transaction(*args, **kwargs) as conn:
                yield conn
            hit()  # after the commit
        check.write_transaction = transaction  # type: ignore[assignment]
    elif point == "before_queue":
        real_queue = nightly.queue_pending

        def queue_pending(*args: Any, **kwargs: Any) -> Any:
            hit()
            return real_queue(*args, **kwargs)
        nightly.queue_pending = queue_pending
    elif point == "after_queue":
        real_night = alert_service.queue_night

        def queue_night(*args: Any, **kwargs: Any) -> int:
            done = real_night(*args, **kwargs)
            hit()
            return done
        alert_service.queue_night = queue_night
    elif point == "accepted":
        real_mark = alert_service.box.mark_sent

        def mark_sent(*args: Any, **kwargs: Any) -> None:
            hit()
            real_mark(*args, **kwargs)
        alert_service.box.mark_sent = mark_sent  # type: ignore[attr-defined]


def main() -> None:
    spec, config, now = sys.argv[1:4]
    point, _, calls = spec.partition(":")
    arm(point, int(calls or 1))
    settings = load_settings(config)
    engine = open_engine(settings.database_url)
    try:
        nightly.run_night(settings, engine, now=datetime.fromisoformat(now))
    finally:
        engine.dispose()
    print("DONE", flush=True)


if __name__ == "__main__":
    main()
