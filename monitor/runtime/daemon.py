"""``fitwatch daemon``: the nightly run on a cron schedule, one instance per database.

On start the daemon waits for the database's lease (a second instance waits here until the
first stops or its lease expires), then catches up at once, then runs on the configured cron
schedule in the configured time zone. A heartbeat renews the lease and tells ``status`` that
the daemon is alive; the run's start and end are recorded so ``status`` can say when a run is
late. SIGTERM or SIGINT lets the current model finish, then the daemon releases the lease and
exits cleanly.
"""

from __future__ import annotations

import logging
import signal
import threading
from collections.abc import Callable
from datetime import UTC, datetime, timedelta
from types import FrameType

from apscheduler.schedulers.background import BackgroundScheduler
from sqlalchemy import Engine

from monitor.alerts.mailer import Mailer
from monitor.alerts.service import send_due
from monitor.config import Settings
from monitor.domain.model import check_model_sections
from monitor.errors import StateError
from monitor.runtime.holder import gone_from_this_host, holder_name
from monitor.runtime.nightly import NightRun, run_night
from monitor.runtime.schedule import LATE_GRACE, LEASE_TTL, cron_trigger
from monitor.runtime.workers import check_workers, run_with_workers
from monitor.store import lease
from monitor.store.access import database
from monitor.store.models import list_models

log = logging.getLogger(__name__)

WAIT_POLL_SECONDS = 30.0
MAIL_RETRY_POLL = timedelta(minutes=5)  # the first backoff step; later ones are longer


class NightlyWorker:
    """Runs nights under the lease; one at a time; stops between models when asked."""

    def __init__(self, settings: Settings, engine: Engine, holder: str, *,
                 ttl: timedelta = LEASE_TTL, mailer: Mailer | None = None,
                 clock: Callable[[], datetime] = lambda: datetime.now(UTC), workers: int = 1):
        self.settings, self.engine, self.holder = settings, engine, holder
        self.ttl, self.mailer, self.clock = ttl, mailer, clock
        self.workers = workers
        self.lease = lease.nightly_name(engine)
        self.stop = threading.Event()
        self._one_at_a_time = threading.Lock()
        self.runs: list[NightRun] = []

    def run_once(self) -> NightRun | None:
        with self._one_at_a_time:
            if self.stop.is_set():
                return None
            now = self.clock()
            if not lease.renew(self.engine, self.holder, now, self.ttl, self.lease):
                log.error("the lease was lost (another instance took it); stopping")
                self.stop.set()
                return None
            lease.run_started(self.engine, self.holder, now, self.lease)
            status = "failed"
            try:
                if self.workers > 1:
                    result = run_with_workers(self.settings, self.engine, self.workers,
                                              now=now, should_stop=self.stop.is_set)
                else:
                    result = run_night(self.settings, self.engine, now=now,
                                       mailer=self.mailer, should_stop=self.stop.is_set)
                status = result.status
                self.runs.append(result)
                log.info("nightly run: %s", result.sentence())
                return result
            except Exception:  # recorded and logged; the schedule goes on
                log.exception("the nightly run failed")
                return None
            finally:
                lease.run_finished(self.engine, self.holder, self.clock(), status, self.lease)

    def retry_mail(self) -> None:
        """Between nights: send the outbox rows whose retry is due (backoff of minutes to
        hours), so a mail server that was away gets the night's news the same day."""
        if self.stop.is_set() or not self._one_at_a_time.acquire(blocking=False):
            return  # a night is running; it sends what is due itself
        try:
            send_due(self.settings, now=self.clock(), engine=self.engine, mailer=self.mailer)
        except Exception:  # logged; the rows wait for the next try
            log.exception("retrying the alert messages failed")
        finally:
            self._one_at_a_time.release()

    def heartbeat(self) -> None:
        try:
            alive = lease.renew(self.engine, self.holder, self.clock(), self.ttl, self.lease)
        except Exception:  # a database hiccup; the next beat tries again
            log.exception("heartbeat failed")
            return
        if not alive:
            log.error("the lease was lost (another instance took it); stopping")
            self.stop.set()


def run_daemon(settings: Settings, *, engine: Engine | None = None, once: bool = False,
               holder: str | None = None, ttl: timedelta = LEASE_TTL,
               poll_seconds: float = WAIT_POLL_SECONDS, mailer: Mailer | None = None,
               install_signals: bool = True, workers: int = 1,
               started: Callable[[NightlyWorker], None] | None = None) -> list[NightRun]:
    """Run until stopped (or one catch-up run with ``once``); returns the runs made.

    ``workers`` above 1 checks the night's models in that many processes (PostgreSQL only:
    SQLite takes one writer at a time, so it keeps one worker and says so).
    """
    holder = holder or holder_name()
    cron_trigger(settings)  # a cron the scheduler refuses stops the daemon before anything else
    with database(settings, engine, sections="own") as db:
        check_workers(db, workers)  # the command line's own mistake is named first
        with db.connect() as conn:  # a misspelt [models.NAME] stops the daemon before it starts
            check_model_sections(settings, list_models(conn))
        worker = NightlyWorker(settings, db, holder, ttl=ttl, mailer=mailer, workers=workers)
        if install_signals:
            _stop_on_signals(worker.stop)
        if started is not None:
            started(worker)
        if not _wait_for_lease(worker, once, poll_seconds):
            return worker.runs
        scheduler = BackgroundScheduler(timezone=settings.timezone)
        try:
            scheduler.add_job(worker.heartbeat, "interval",
                              seconds=max(ttl.total_seconds() / 4, 0.05), id="heartbeat")
            if not once:
                scheduler.add_job(worker.retry_mail, "interval",
                                  seconds=MAIL_RETRY_POLL.total_seconds(), id="mail")
                scheduler.add_job(worker.run_once, cron_trigger(settings), id="night",
                                  max_instances=1, coalesce=True,
                                  misfire_grace_time=int(LATE_GRACE.total_seconds()))
            scheduler.start()
            log.info("fitwatch daemon %s holds the lease; catching up", holder)
            worker.run_once()
            if not once:
                job = scheduler.get_job("night")
                log.info("next nightly run at %s", job.next_run_time if job else "never")
                worker.stop.wait()
        finally:
            if scheduler.running:
                scheduler.shutdown(wait=True)
            lease.release(db, holder, worker.lease)
            log.info("fitwatch daemon %s stopped and released the lease", holder)
        return worker.runs


def _wait_for_lease(worker: NightlyWorker, once: bool, poll_seconds: float) -> bool:
    said = None
    while not lease.try_acquire(worker.engine, worker.holder, worker.clock(), worker.ttl,
                                worker.lease):
        with worker.engine.connect() as conn:
            state = lease.read(conn, worker.lease)
        other = state.holder if state else "another instance"
        if state and state.holder and gone_from_this_host(state.holder):
            log.warning("the lease holder %s is no longer running on this host (killed or "
                        "crashed); taking the lease over", state.holder)
            if lease.take_over(worker.engine, state.holder, worker.holder, worker.clock(),
                               worker.ttl, worker.lease):
                return True
            continue  # someone else was quicker; look again
        expires = (f"{state.expires_at:%Y-%m-%d %H:%M:%S} UTC" if state and state.expires_at
                   else "when it is released")
        if once:
            scope = "this database's" if worker.lease == lease.NIGHTLY else "this host's"
            raise StateError(f"another fitwatch daemon ({other}) holds {scope} lease "
                             f"until {expires} and runs the nights; nothing done (stop that "
                             "daemon or let it do the run; a daemon that died on another "
                             "host frees the lease when it expires, one on this host at once)")
        if other != said:
            log.warning("waiting for the lease held by %s (it expires %s unless renewed)",
                        other, expires)
            said = other
        if worker.stop.wait(poll_seconds):
            return False
    return True


def _stop_on_signals(stop: threading.Event) -> None:
    def handler(signum: int, _frame: FrameType | None) -> None:
        log.warning("%s received: finishing the current model, then stopping",
                    signal.Signals(signum).name)
        stop.set()

    for sig in (signal.SIGTERM, signal.SIGINT):
        signal.signal(sig, handler)
