"""The nightly schedule: when runs are due, and whether the last one is late.

Read by ``status`` (a read-only view) as well as by the daemon, so it imports nothing of the
nightly work itself.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass
from datetime import datetime, timedelta
from typing import TYPE_CHECKING, Any

from monitor.config import Settings
from monitor.domain.days import local_time
from monitor.runtime.holder import gone_from_this_host
from monitor.store import lease

if TYPE_CHECKING:
    from apscheduler.triggers.cron import CronTrigger

LEASE_TTL = timedelta(minutes=10)
LATE_GRACE = timedelta(hours=1)  # a run that has not started this long after its time is late
STALE_HEARTBEATS = 3  # missed heartbeats before a holder counts as gone


def cron_trigger(settings: Settings) -> CronTrigger:
    """The nightly schedule, parsed (and checked, :class:`ConfigError` when the scheduler
    refuses it) on first use."""
    return settings.schedule.trigger


@dataclass(frozen=True)
class NightlyState:
    """What ``status`` says about the nightly runs (from the lease row)."""

    last_started: datetime | None
    last_finished: datetime | None
    last_status: str | None
    due: datetime | None  # the latest scheduled time that has passed
    late: bool
    daemon_alive: bool
    holder: str | None = None  # who holds the lease (host:pid:tag)
    lease_expires: datetime | None = None  # unless the holder renews it
    holder_gone: bool = False  # the holder's process no longer exists on this host
    others: tuple[str, ...] = ()  # daemons of other hosts alive on the same database

    def as_dict(self) -> dict[str, Any]:
        return {"last_run_started_at": self.last_started,
                "last_run_finished_at": self.last_finished,
                "last_run_status": self.last_status, "due": self.due, "late": self.late,
                "daemon_alive": self.daemon_alive, "lease_holder": self.holder,
                "lease_expires_at": self.lease_expires, "lease_holder_gone": self.holder_gone,
                "other_daemons": list(self.others)}

    def _daemon(self) -> str:
        also = (f"; {len(self.others)} more on other hosts ({', '.join(self.others)})"
                if self.others else "")
        return self._this_daemon() + also

    def _this_daemon(self) -> str:
        if self.holder_gone:
            return (f"daemon not running (its process {self.holder} is gone; its lease would "
                    f"expire {self.lease_expires:%Y-%m-%d %H:%M %Z}; a new daemon on this host "
                    "takes it over at once)")
        if self.daemon_alive:
            until = (f", lease until {self.lease_expires:%Y-%m-%d %H:%M %Z}"
                     if self.lease_expires else "")
            return f"daemon running ({self.holder}{until})"
        return "daemon not running"

    def sentence(self) -> str:
        when = (self.last_finished or self.last_started)
        done = (f"last nightly run {when:%Y-%m-%d %H:%M %Z} ({self.last_status})" if when
                else "no nightly run yet")
        if self.late:
            return (f"LATE: the nightly run due {self.due:%Y-%m-%d %H:%M %Z} has not started; "
                    f"{done}; {self._daemon()}")
        return f"{done}; {self._daemon()}"


def nightly_state(settings: Settings, state: lease.LeaseState, now: datetime,
                  others: Sequence[lease.LeaseState] = ()) -> NightlyState:
    """Is the nightly run late? Compares the last start with the schedule's latest time.
    ``state`` is the most recently active lease; ``others`` those of other hosts (PostgreSQL),
    named when their daemon is alive."""
    zone = settings.timezone
    due = last_scheduled(cron_trigger(settings), now - timedelta(days=8), now)
    started = state.last_run_started_at
    late = due is not None and now - due > LATE_GRACE and (started is None or started < due)
    gone = gone_from_this_host(state.holder)
    alive = _alive(state, now)
    held = state.holder is not None and state.expires_at is not None
    return NightlyState(local_time(started, zone), local_time(state.last_run_finished_at, zone),
                        state.last_run_status, local_time(due, zone), late, alive,
                        state.holder, local_time(state.expires_at, zone) if held else None,
                        gone, tuple(o.holder for o in others if o.holder and _alive(o, now)))


def _alive(state: lease.LeaseState, now: datetime) -> bool:
    """The lease's daemon renewed it lately and (on this host) its process exists."""
    beat = state.heartbeat_at
    return state.holder is not None and beat is not None and \
        not gone_from_this_host(state.holder) and \
        now - beat < STALE_HEARTBEATS * LEASE_TTL / 4 + timedelta(minutes=1)


def last_scheduled(trigger: CronTrigger, since: datetime, now: datetime) -> datetime | None:
    """The latest fire time of ``trigger`` in ``(since, now]``."""
    found, fire = None, trigger.get_next_fire_time(None, since)
    for _ in range(100_000):
        if fire is None or fire > now:
            return found
        found = fire
        fire = trigger.get_next_fire_time(fire, fire + timedelta(seconds=1))
    return found
