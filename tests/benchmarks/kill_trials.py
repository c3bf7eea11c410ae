"""Kill trials: a nightly run (inbox sweep, checks, alerts over a real SMTP server) killed with
SIGKILL at named and random points, then rerun to completion. Counted per trial: messages
expected / received / doubled / lost, rows in / out, and whether the stored checks equal those
of an uninterrupted run. SQLite and (when a server answers) PostgreSQL.

    python tests/benchmarks/kill_trials.py [--random 6] [--backends sqlite,postgresql]

The named points are those of ``tests/support/crash_night.py`` (after the first check block
commits, before queueing, after the k-th night is queued, after the server accepted the k-th
message and before it is marked sent). Random kills land at a uniform moment of an
uninterrupted run's duration. Expected messages are the digests the stored checks call for
(``tests/support/night_child.expected_keys``); received ones are matched by Message-ID.
A kill after the server accepted a message and before it is marked sent is the one window
SMTP itself leaves (RFC 5321 §6.1): that message arrives twice, with the same Message-ID.
Results go to ``tests/benchmarks/results/kill_trials.txt``.
"""

from __future__ import annotations

import argparse
import os
import random
import secrets
import signal
import subprocess
import sys
import tempfile
import time
from collections import Counter
from dataclasses import dataclass
from datetime import date, timedelta
from email import policy
from email.parser import BytesParser
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parents[2]))

from aiosmtpd.controller import Controller
from sqlalchemy import func, select

from monitor.alerts.compose import message_id
from monitor.config import load_settings
from monitor.store.engine import open_engine
from monitor.store.migrate import upgrade_database
from monitor.store.schema import day_checks, observations, outbox, queued_nights
from tests.support.mail import Handler, free_port
from tests.support.night_child import ROOT, expected_keys, night_config
from tests.support.world import CHANGED, MODEL, World, loads_between, night_after, write_csv

FIRST, LAST = date(2026, 3, 9), date(2026, 4, 5)  # the inbox file's days
NOW = night_after(LAST)
LATER = NOW + timedelta(minutes=15)  # reruns: past the claim of a row killed mid-send
SENDER = "fitwatch@localhost"
RESULTS = Path(__file__).resolve().parent / "results" / "kill_trials.txt"


@dataclass
class Trial:
    backend: str
    phase: str
    killed: bool
    expected: int
    received: int
    doubled: int
    lost: int
    rows_in: int
    rows_out: int
    checks_equal: bool
    reruns: int


def _pg_admin():
    import psycopg

    user = os.environ.get("FITWATCH_TEST_PGUSER") or os.environ.get("PGUSER") or "postgres"
    try:
        return psycopg.connect(host="127.0.0.1", port=5432, user=user, dbname="test",
                               connect_timeout=3, autocommit=True), user
    except psycopg.Error:
        return None, user


class Databases:
    """A fresh database per trial: an SQLite file, or a new PostgreSQL database."""

    def __init__(self, backend: str, tmp: Path):
        self.backend, self.tmp, self.made = backend, tmp, []
        self.admin, self.user = _pg_admin() if backend == "postgresql" else (None, "")

    def fresh(self, name: str) -> str:
        if self.backend == "sqlite":
            return f"sqlite:///{self.tmp / name / 'fitwatch.db'}"
        db = f"fitwatch_kill_{secrets.token_hex(5)}"
        assert self.admin is not None
        self.admin.execute(f'CREATE DATABASE "{db}"')
        self.made.append(db)
        return f"postgresql://{self.user}@127.0.0.1:5432/{db}"

    def close(self) -> None:
        for db in self.made:
            assert self.admin is not None
            self.admin.execute(f'DROP DATABASE IF EXISTS "{db}" WITH (FORCE)')


def _prepare(url: str, folder: Path, port: int) -> tuple[Path, int]:
    folder.mkdir(parents=True, exist_ok=True)
    engine = open_engine(url)
    try:
        upgrade_database(engine)
        config = night_config(folder, url, smtp_port=port)
        text = config.read_text().replace("[alerts]\n", f'[alerts]\nsender = "{SENDER}"\n')
        config.write_text(text)
        World(engine, load_settings(config), folder, scenario=CHANGED, seed=5)
    finally:
        engine.dispose()
    inbox = folder / "inbox" / MODEL
    inbox.mkdir(parents=True)
    frame = loads_between(CHANGED, FIRST, LAST, 22)
    write_csv(frame, inbox / "weeks.csv")
    return config, len(frame)


def _child(point: str, config: Path, now) -> subprocess.Popen[str]:
    env = {**os.environ, "PYTHONPATH": str(ROOT)}
    return subprocess.Popen([sys.executable, "-m", "tests.support.crash_night", point,
                             str(config), now.isoformat()], cwd=ROOT, env=env,
                            stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)


def _finish(config: Path) -> tuple[int, float]:
    """Rerun until a run completes; the number of reruns and the seconds of the last."""
    for rerun in range(1, 6):
        started = time.monotonic()
        child = _child("none", config, LATER)
        _, err = child.communicate(timeout=600)
        if child.returncode == 0:
            return rerun, time.monotonic() - started
        print(err[-2000:], file=sys.stderr)
    raise RuntimeError("no rerun completed")


def _verdicts(url: str) -> list[tuple]:
    engine = open_engine(url)
    try:
        with engine.connect() as conn:
            return [tuple(r) for r in conn.execute(
                select(day_checks.c.day, day_checks.c.n, day_checks.c.covered,
                       day_checks.c.status, day_checks.c.status_since, day_checks.c.reasons,
                       func.round(day_checks.c.cusum_upper * 1e6))
                .order_by(day_checks.c.day))]
    finally:
        engine.dispose()


def _stage(url: str) -> str:
    """Where a run died, read from what it left committed."""
    engine = open_engine(url)
    try:
        with engine.connect() as conn:
            rows = conn.execute(select(func.count()).select_from(observations)
                                .where(observations.c.day >= FIRST)).scalar_one()
            checked = conn.execute(select(func.max(day_checks.c.day))).scalar()
            queued = conn.execute(select(func.count()).select_from(queued_nights)).scalar_one()
            total = conn.execute(select(func.count()).select_from(day_checks)).scalar_one()
            pending = conn.execute(select(func.count()).select_from(outbox)
                                   .where(outbox.c.status != "sent")).scalar_one()
    finally:
        engine.dispose()
    if rows == 0:
        return "inbox sweep / ingest"
    if checked != LAST:
        return "checks"
    if queued < total:
        return "queueing alerts"
    return "sending alerts" if pending else "after the last commit"


def _trial(dbs: Databases, backend: str, phase: str, point: str, delay: float | None,
           handler: Handler, port: int, reference: list[tuple] | None,
           index: int) -> tuple[Trial, list[tuple], float]:
    folder = dbs.tmp / f"{backend}-{index}"
    url = dbs.fresh(f"{backend}-{index}")
    config, rows_in = _prepare(url, folder, port)
    handler.received.clear()
    killed = False
    if point != "none" or delay is not None:
        child = _child(point, config, NOW)
        if delay is not None:
            time.sleep(delay)
            if child.poll() is None:
                os.kill(child.pid, signal.SIGKILL)
        child.communicate(timeout=600)
        killed = child.returncode == -signal.SIGKILL
        if killed and delay is not None:
            phase = f"random: {_stage(url)}"
    reruns, seconds = _finish(config)
    settings = load_settings(config)
    engine = open_engine(url)
    try:
        wanted = expected_keys(settings, engine)
        with engine.connect() as conn:
            rows_out = conn.execute(select(func.count()).select_from(observations)
                                    .where(observations.c.day >= FIRST)).scalar_one()
    finally:
        engine.dispose()
    by_id = {message_id(key, SENDER): key for key in wanted}
    got = Counter(by_id.get(str(BytesParser(policy=policy.default).parsebytes(r.data)
                                ["Message-ID"]), "?") for r in handler.received)
    received = sum(1 for key in wanted if got[key])
    doubled = sum(max(0, n - 1) for key, n in got.items())
    verdicts = _verdicts(url)
    equal = reference is None or verdicts == reference
    return Trial(backend, phase, killed, len(wanted), received, doubled,
                 len(wanted) - received, rows_in, rows_out, equal, reruns), verdicts, seconds


def main() -> None:
    parser = argparse.ArgumentParser()
    parser.add_argument("--random", type=int, default=6, help="random kills per backend")
    parser.add_argument("--backends", default="sqlite,postgresql")
    parser.add_argument("--seed", type=int, default=11)
    args = parser.parse_args()
    rng = random.Random(args.seed)
    handler = Handler()
    port = free_port()
    controller = Controller(handler, hostname="127.0.0.1", port=port)
    controller.start()
    trials: list[Trial] = []
    try:
        for backend in args.backends.split(","):
            with tempfile.TemporaryDirectory() as tmp:
                dbs = Databases(backend, Path(tmp))
                if backend == "postgresql" and dbs.admin is None:
                    print("no PostgreSQL at 127.0.0.1:5432; skipped", file=sys.stderr)
                    continue
                try:
                    ref, reference, duration = _trial(dbs, backend, "none (reference)",
                                                      "none", None, handler, port, None, 0)
                    trials.append(ref)
                    plan = [("after first check block", "after_block", None),
                            ("before queueing", "before_queue", None),
                            ("after 1st night queued", "after_queue:1", None),
                            ("after 5th night queued", "after_queue:5", None),
                            ("server accepted, not marked sent", "accepted:1", None),
                            ("server accepted, not marked sent", "accepted:3", None)]
                    plan += [("random moment", "none", rng.uniform(0.3, duration))
                             for _ in range(args.random)]
                    for i, (phase, point, delay) in enumerate(plan, start=1):
                        trial, _, _ = _trial(dbs, backend, phase, point, delay, handler,
                                             port, reference, i)
                        trials.append(trial)
                        print(trial, flush=True)
                finally:
                    dbs.close()
    finally:
        controller.stop()
    _report(trials)


def _report(trials: list[Trial]) -> None:
    head = (f"{'backend':<11}{'phase':<34}{'kills':>6}{'msgs exp':>9}{'recv':>6}{'doubled':>8}"
            f"{'lost':>6}{'rows in':>8}{'rows out':>9}  checks = uninterrupted")
    lines = [head, "-" * len(head)]
    groups: dict[tuple[str, str], list[Trial]] = {}
    for t in trials:
        groups.setdefault((t.backend, t.phase), []).append(t)
    for (backend, phase), group in groups.items():
        lines.append(
            f"{backend:<11}{phase:<34}{sum(t.killed for t in group):>6}"
            f"{sum(t.expected for t in group):>9}{sum(t.received for t in group):>6}"
            f"{sum(t.doubled for t in group):>8}{sum(t.lost for t in group):>6}"
            f"{sum(t.rows_in for t in group):>8}{sum(t.rows_out for t in group):>9}  "
            f"{sum(t.checks_equal for t in group)}/{len(group)}")
    text = "\n".join(lines)
    print(text)
    RESULTS.parent.mkdir(parents=True, exist_ok=True)
    RESULTS.write_text(text + "\n")


if __name__ == "__main__":
    main()
