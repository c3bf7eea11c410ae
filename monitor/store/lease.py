"""The scheduler's lease and heartbeat: one nightly worker per database, and when it last ran.

A lease is one row of ``scheduler_lease``. Taking it is a single conditional UPDATE (free,
expired, or already ours), so two workers racing on SQLite or PostgreSQL cannot both win; the
holder renews it with each heartbeat and clears it when it stops. A worker that dies without
clearing it loses the lease when it expires, or at once to an instance on the same host that
sees the holder's process is gone (:func:`take_over`).
"""

from __future__ import annotations

import socket
from dataclasses import dataclass
from datetime import UTC, datetime, timedelta
from typing import Any

from sqlalchemy import Connection, Engine, insert, or_, select, update
from sqlalchemy.exc import IntegrityError

from monitor.store.engine import write_transaction
from monitor.store.schema import scheduler_lease

NIGHTLY = "nightly"


@dataclass(frozen=True)
class LeaseState:
    """The row as stored: who holds the lease and what the last run did."""

    holder: str | None
    acquired_at: datetime | None
    expires_at: datetime | None
    heartbeat_at: datetime | None
    last_run_started_at: datetime | None
    last_run_finished_at: datetime | None
    last_run_status: str | None

    def held_at(self, now: datetime) -> bool:
        return self.holder is not None and self.expires_at is not None and self.expires_at > now


def _ensure_row(engine: Engine, name: str) -> None:
    with engine.connect() as conn:
        if conn.execute(select(scheduler_lease.c.name)
                        .where(scheduler_lease.c.name == name)).first():
            return
    try:
        with write_transaction(engine) as conn:
            conn.execute(insert(scheduler_lease).values(name=name))
    except IntegrityError:
        pass  # another worker created it first


def try_acquire(engine: Engine, holder: str, now: datetime, ttl: timedelta,
                name: str = NIGHTLY) -> bool:
    """Take the lease if it is free, expired or already ours; True when we hold it."""
    _ensure_row(engine, name)
    c = scheduler_lease.c
    with write_transaction(engine) as conn:
        taken = conn.execute(
            update(scheduler_lease)
            .where(c.name == name,
                   or_(c.holder.is_(None), c.expires_at.is_(None), c.expires_at <= now,
                       c.holder == holder))
            .values(holder=holder, acquired_at=now, expires_at=now + ttl, heartbeat_at=now))
        return taken.rowcount == 1


def take_over(engine: Engine, gone: str, holder: str, now: datetime, ttl: timedelta,
              name: str = NIGHTLY) -> bool:
    """Take the lease from ``gone`` (a holder known to be dead), if it still holds it."""
    c = scheduler_lease.c
    with write_transaction(engine) as conn:
        taken = conn.execute(
            update(scheduler_lease).where(c.name == name, c.holder == gone)
            .values(holder=holder, acquired_at=now, expires_at=now + ttl, heartbeat_at=now))
        return taken.rowcount == 1


def renew(engine: Engine, holder: str, now: datetime, ttl: timedelta,
          name: str = NIGHTLY) -> bool:
    """Heartbeat: extend our lease; False when it is no longer ours (it expired and was taken)."""
    c = scheduler_lease.c
    with write_transaction(engine) as conn:
        done = conn.execute(update(scheduler_lease).where(c.name == name, c.holder == holder)
                            .values(expires_at=now + ttl, heartbeat_at=now))
        return done.rowcount == 1


def release(engine: Engine, holder: str, name: str = NIGHTLY) -> None:
    c = scheduler_lease.c
    with write_transaction(engine) as conn:
        conn.execute(update(scheduler_lease).where(c.name == name, c.holder == holder)
                     .values(holder=None, expires_at=None))


def run_started(engine: Engine, holder: str, now: datetime, name: str = NIGHTLY) -> None:
    c = scheduler_lease.c
    with write_transaction(engine) as conn:
        conn.execute(update(scheduler_lease).where(c.name == name, c.holder == holder)
                     .values(last_run_started_at=now, last_run_status="running",
                             heartbeat_at=now))


def run_finished(engine: Engine, holder: str, now: datetime, status: str,
                 name: str = NIGHTLY) -> None:
    c = scheduler_lease.c
    with write_transaction(engine) as conn:
        conn.execute(update(scheduler_lease).where(c.name == name, c.holder == holder)
                     .values(last_run_finished_at=now, last_run_status=status,
                             heartbeat_at=now))


def nightly_name(engine: Engine) -> str:
    """The lease a daemon takes: the database's one ``nightly`` on SQLite (one worker per
    database), ``nightly@HOST`` on PostgreSQL, where daemons on several hosts share the nights
    through claims (``store.claims``) and the lease only keeps one daemon per host."""
    if engine.dialect.name != "postgresql":
        return NIGHTLY
    return f"{NIGHTLY}@{socket.gethostname()}"[:50]


def read(conn: Connection, name: str | None = None) -> LeaseState | None:
    """The lease ``name``; without a name, the nightly lease most recently active."""
    states = read_all(conn) if name is None else [
        _state(row) for row in conn.execute(select(scheduler_lease)
                                            .where(scheduler_lease.c.name == name))]
    return states[0] if states else None


def read_all(conn: Connection) -> list[LeaseState]:
    """Every nightly lease (one per host on PostgreSQL), the most recently active first."""
    c = scheduler_lease.c
    rows = conn.execute(select(scheduler_lease).where(
        or_(c.name == NIGHTLY, c.name.like(f"{NIGHTLY}@%"))))
    return sorted((_state(row) for row in rows), key=_activity, reverse=True)


def _activity(state: LeaseState) -> datetime:
    times = [t for t in (state.heartbeat_at, state.last_run_started_at,
                         state.last_run_finished_at, state.acquired_at) if t is not None]
    return max(times, default=datetime.min.replace(tzinfo=UTC))


def _state(row: Any) -> LeaseState:
    m = row._mapping
    return LeaseState(m["holder"], m["acquired_at"], m["expires_at"], m["heartbeat_at"],
                      m["last_run_started_at"], m["last_run_finished_at"],
                      m["last_run_status"])
