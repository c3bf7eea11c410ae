"""``daemon --workers N``: one night checked by N worker processes on one host (PostgreSQL).

The daemon sweeps the inbox itself (one sweep per host, so two workers never take the same
file), then starts N processes that each work the night's round (``nightly.work_round``):
they take models through the database's claims, so N processes here and the daemons of other
hosts on the same database share one night, each model checked once; the worker that finds
the round done composes the night's digest. Processes are started fresh (``spawn``): each
opens its own connections. A stop request (SIGTERM, Ctrl-C) is passed to the workers, which
finish their current model. A worker that dies (killed, out of memory) leaves its claim; a
sibling on this host sees the process is gone and takes the model over (within 30 s while it
is busy with models of its own, at once when it has none left to take).
"""

from __future__ import annotations

import logging
import multiprocessing
import os
import queue
import signal
import threading
from collections.abc import Callable
from datetime import datetime
from typing import Any

from sqlalchemy import Engine

from monitor.config import Settings
from monitor.errors import InputError, describe
from monitor.runtime.holder import holder_name
from monitor.runtime.nightly import NightRun, sweep_once, work_round

log = logging.getLogger(__name__)

REPORT_POLL_SECONDS = 0.2


def check_workers(engine: Engine, workers: int) -> None:
    """Refuse a worker count the database cannot serve, before anything starts."""
    if workers < 1:
        raise InputError(f"--workers must be 1 or more, not {workers}")
    if workers > 1 and engine.dialect.name != "postgresql":
        raise InputError(
            f"--workers {workers}: SQLite lets one process write at a time, so fitwatch "
            "checks with one worker on SQLite; several workers need a PostgreSQL database "
            "(database.url = \"postgresql+psycopg://...\")")


def run_with_workers(settings: Settings, engine: Engine, workers: int, *, now: datetime,
                     actor: str = "daemon",
                     should_stop: Callable[[], bool] = lambda: False) -> NightRun:
    """Sweep, then let ``workers`` processes share the night; one run from their shares."""
    check_workers(engine, workers)
    problems: list[str] = []
    sweep = sweep_once(settings, engine, now, actor, problems, should_stop)
    context = multiprocessing.get_context("spawn")
    reports: Any = context.Queue()
    url = engine.url.render_as_string(hide_password=False)
    level = logging.getLogger().getEffectiveLevel()
    procs = [context.Process(target=_worker_main, name=f"fitwatch-worker-{i + 1}",
                             args=(settings, url, now, actor, reports, level))
             for i in range(workers)]
    for proc in procs:
        proc.start()
    log.info("%d workers started (pids %s)", workers, ", ".join(str(p.pid) for p in procs))
    shares: dict[int, NightRun] = {}
    forwarded = False
    while True:
        try:
            pid, share, error = reports.get(timeout=REPORT_POLL_SECONDS)
        except queue.Empty:
            # every process is asked (not up to the first alive one): asking reaps a worker
            # that ended, so its siblings see it gone instead of a zombie holding its claim
            if not any([p.is_alive() for p in procs]):
                break
        else:
            if error is not None:
                problems.append(f"worker {pid}: {error}")
            else:
                shares[pid] = share
        if should_stop() and not forwarded:
            forwarded = True
            for proc in procs:
                if proc.is_alive() and proc.pid is not None:
                    os.kill(proc.pid, signal.SIGTERM)
    for proc in procs:
        proc.join()
        if proc.pid not in shares and not any(p.startswith(f"worker {proc.pid}:")
                                               for p in problems):
            problems.append(f"worker {proc.pid} ended without finishing its share (exit code "
                            f"{proc.exitcode}); its model was taken over by another worker "
                            "or waits for the next run")
            log.error("%s", problems[-1])
    if not shares:
        raise RuntimeError("no worker finished its share of the night: " + "; ".join(problems))
    return NightRun.combine(sweep, list(shares.values()), problems)


def _worker_main(settings: Settings, url: str, now: datetime, actor: str, reports: Any,
                 level: int) -> None:
    """One worker process: its share of the round, reported to the daemon."""
    from monitor.store.engine import open_engine

    logging.basicConfig(level=level,
                        format="%(asctime)s %(levelname)s %(name)s[%(process)d]: %(message)s")
    stop = threading.Event()
    signal.signal(signal.SIGTERM, lambda *_: stop.set())
    signal.signal(signal.SIGINT, signal.SIG_IGN)  # Ctrl-C reaches the daemon, which tells us
    pid = os.getpid()
    try:
        engine = open_engine(url, create=False)
        try:
            share = work_round(settings, engine, now=now, actor=actor,
                               should_stop=stop.is_set, holder=holder_name())
        finally:
            engine.dispose()
        log.info("worker share: %s", share.sentence())
        reports.put((pid, share.slim(), None))
    except Exception as exc:  # reported to the daemon, which records the run as partial
        log.exception("the worker failed")
        reports.put((pid, None, describe(exc)))
