"""Several workers share one night: claims, take-over of a killed worker, one digest.

The claims are checked on both backends; the races and the processes on PostgreSQL, the one
backend that takes several workers (SQLite refuses ``--workers`` above 1 with a message).
"""

from __future__ import annotations

import json
import os
import signal
import socket
import subprocess
import sys
import threading
import time
from collections import Counter
from datetime import UTC, date, datetime, timedelta
from pathlib import Path

import pytest
from sqlalchemy import Engine, func, select

from monitor.config import load_settings
from monitor.domain.model import ModelSpec
from monitor.interface.cli import main
from monitor.lifecycle.fit import FitRequest, fit_model
from monitor.runtime.holder import gone_from_this_host
from monitor.runtime.schedule import nightly_state
from monitor.runtime.workers import run_with_workers
from monitor.store import claims, lease
from monitor.store.engine import write_transaction
from monitor.store.models import create_model
from monitor.store.schema import day_checks, night_claims, night_rounds
from tests.support.night_child import ROOT, expected_keys, night_config, outbox_rows
from tests.support.world import (
    CALM,
    CHANGED,
    HISTORY,
    World,
    loads_between,
    night_after,
    write_csv,
)

T0 = datetime(2026, 4, 1, 1, 0, tzinfo=UTC)
# the engine fixture on PostgreSQL only (it skips, with the reason, where there is none)
POSTGRES_ONLY = pytest.mark.parametrize(
    "backend", [pytest.param("postgresql", marks=pytest.mark.postgres)])
TTL = timedelta(minutes=5)
NIGHT = date(2026, 3, 31)
LAST = date(2026, 3, 22)  # the rows run to here; the nights check through LAST
OTHERS = ("dock_b", "dock_c", "dock_d", "dock_e")


def _models(engine: Engine, count: int) -> list[int]:
    with write_transaction(engine) as conn:
        return [create_model(conn, ModelSpec(f"m{i:03d}", "y", ("x",), "t"), T0).id
                for i in range(count)]


# the claims, on both backends -------------------------------------------------------------------
def test_workers_join_one_round_and_a_wrapped_round_closes_the_night(engine: Engine) -> None:
    _models(engine, 3)
    first = claims.join_round(engine, NIGHT, "a", T0)
    assert claims.join_round(engine, NIGHT, "b", T0) == first  # the same round, not a second
    assert claims.join_round(engine, NIGHT + timedelta(days=1), "a", T0) != first
    taken = [claims.take(engine, first, h, T0, TTL) for h in ("a", "b", "a")]
    assert sorted(c.model for c in taken if c) == ["m000", "m001", "m002"]
    assert claims.take(engine, first, "b", T0, TTL) is None  # nothing left to take
    assert not claims.try_wrap(engine, first, "a", T0, TTL)  # three unfinished
    for claim, holder in zip(taken, ("a", "b", "a"), strict=True):
        assert claim is not None and claims.finish(engine, claim, holder, T0, "checked")
    assert claims.try_wrap(engine, first, "b", T0, TTL)
    assert not claims.try_wrap(engine, first, "a", T0, TTL)  # one wrapper
    claims.wrapped(engine, first, "b", T0)
    again = claims.join_round(engine, NIGHT, "a", T0)  # a later run of the night: a new round
    assert again != first
    with engine.connect() as conn:
        assert conn.execute(select(night_rounds.c.seq).where(night_rounds.c.id == again)
                            ).scalar() == 2
    assert claims.progress(engine, again, T0).unfinished == 3


def test_a_claim_not_renewed_is_taken_over_and_its_late_holder_cannot_finish_it(
        engine: Engine) -> None:
    _models(engine, 2)
    round_id = claims.join_round(engine, NIGHT, "a", T0)
    mine = claims.take(engine, round_id, "a", T0, TTL)
    assert mine is not None and mine.takes == 1
    later = T0 + timedelta(minutes=4)
    assert claims.renew(engine, "a", later, TTL) == 1  # now held to T0 + 9 min
    other = claims.take(engine, round_id, "b", later, TTL)
    assert other is not None and other.model_id != mine.model_id  # the free one
    assert claims.take(engine, round_id, "c", T0 + timedelta(minutes=8), TTL) is None
    stolen = claims.take(engine, round_id, "c", T0 + timedelta(minutes=10), TTL)
    assert stolen is not None and stolen.model_id == mine.model_id and stolen.takes == 2
    assert not claims.finish(engine, mine, "a", T0 + timedelta(minutes=11), "checked")
    assert claims.finish(engine, stolen, "c", T0 + timedelta(minutes=11), "checked")
    state = claims.progress(engine, round_id, T0 + timedelta(minutes=11))
    assert (state.done, state.holders) == (1, ("b",))


def test_taking_the_next_model_marks_the_previous_one_done(engine: Engine) -> None:
    _models(engine, 2)
    round_id = claims.join_round(engine, NIGHT, "a", T0)
    first = claims.take(engine, round_id, "a", T0, TTL)
    assert first is not None
    second = claims.take(engine, round_id, "a", T0, TTL, done=(first, "failed"))
    assert second is not None and second.model_id != first.model_id
    assert claims.take(engine, round_id, "a", T0, TTL, done=(second, "checked")) is None
    with engine.connect() as conn:
        outcomes = {model: outcome for model, outcome in conn.execute(
            select(night_claims.c.model_id, night_claims.c.outcome))}
    assert outcomes == {first.model_id: "failed", second.model_id: "checked"}
    assert claims.try_wrap(engine, round_id, "a", T0, TTL)


def test_the_claims_of_a_dead_holder_are_freed_at_once(engine: Engine) -> None:
    _models(engine, 1)
    round_id = claims.join_round(engine, NIGHT, "a", T0)
    assert claims.take(engine, round_id, "a", T0, TTL) is not None
    assert claims.take(engine, round_id, "b", T0, TTL) is None
    assert claims.release_holder(engine, round_id, "a") == 1
    again = claims.take(engine, round_id, "b", T0, TTL)
    assert again is not None and again.takes == 2


def test_rounds_older_than_five_weeks_are_forgotten_when_a_round_wraps(engine: Engine) -> None:
    _models(engine, 1)
    old = claims.join_round(engine, NIGHT - timedelta(days=40), "a", T0)
    new = claims.join_round(engine, NIGHT, "a", T0)
    claim = claims.take(engine, new, "a", T0, TTL)
    assert claim is not None and claims.finish(engine, claim, "a", T0, "checked")
    assert claims.try_wrap(engine, new, "a", T0, TTL)
    claims.wrapped(engine, new, "a", T0)
    with engine.connect() as conn:
        assert conn.execute(select(night_rounds.c.id)).scalars().all() == [new]
        assert conn.execute(select(func.count()).select_from(night_claims)
                            .where(night_claims.c.round_id == old)).scalar() == 0


@POSTGRES_ONLY
def test_racing_workers_take_every_model_exactly_once_and_one_wraps(engine: Engine) -> None:
    ids = _models(engine, 300)
    taken: list[tuple[str, int]] = []
    wraps: list[str] = []
    start = threading.Barrier(6)

    def worker(holder: str) -> None:
        start.wait()
        round_id = claims.join_round(engine, NIGHT, holder, T0)
        while (claim := claims.take(engine, round_id, holder, T0, TTL)) is not None:
            taken.append((holder, claim.model_id))
            assert claims.finish(engine, claim, holder, T0, "checked")
        if claims.try_wrap(engine, round_id, holder, T0, TTL):
            wraps.append(holder)

    threads = [threading.Thread(target=worker, args=(f"w{i}",)) for i in range(6)]
    for t in threads:
        t.start()
    for t in threads:
        t.join()
    counts = Counter(model for _, model in taken)
    assert sorted(counts) == sorted(ids) and set(counts.values()) == {1}
    assert len({holder for holder, _ in taken}) > 1  # the work was shared
    with engine.connect() as conn:
        (round_id,) = conn.execute(select(night_rounds.c.id)).scalars().all()  # one round
    # a worker whose last look came before the last claim was done did not wrap; then one
    # looking again does: one wrapper in all, never two
    late = claims.try_wrap(engine, round_id, "late", T0, TTL)
    assert len(wraps) + late == 1


# the night, on PostgreSQL with worker processes ---------------------------------------------
def _world(engine: Engine, tmp: Path) -> World:
    """Five models: the dock-loading one changes slope on 16 March (news for the digest)."""
    config = night_config(tmp, engine.url.render_as_string(hide_password=False))
    world = World(engine, load_settings(config), tmp, scenario=CHANGED, seed=5)
    history = write_csv(loads_between(CALM, *HISTORY, 9), tmp / "others.csv")
    for name in OTHERS:
        fit_model(world.settings, FitRequest(name, history, "load_minutes", ("pallets",),
                                             "docked_at", "load_id"),
                  now=night_after(HISTORY[1]), engine=engine, actor="test")
    world.add_days(date(2026, 3, 9), LAST, 22, "weeks.csv")
    return world


def _checked(engine: Engine) -> Counter[int]:
    """Day checks per model; each must cover its days once, through ``LAST``."""
    with engine.connect() as conn:
        spans = conn.execute(select(day_checks.c.model_id, func.min(day_checks.c.day),
                                    func.max(day_checks.c.day), func.count())
                             .group_by(day_checks.c.model_id)).all()
    assert all(last == LAST and n == (last - first).days + 1 for _, first, last, n in spans)
    return Counter({model: n for model, _, _, n in spans})


@POSTGRES_ONLY
def test_two_worker_processes_share_a_night_and_send_its_digest_once(
        engine: Engine, tmp_path: Path) -> None:
    world = _world(engine, tmp_path)
    run = run_with_workers(world.settings, engine, 2, now=night_after(LAST))
    assert run.status == "ok", run.sentence()
    days = (LAST - HISTORY[1]).days + 1  # the window's last day is checked first
    assert _checked(engine) == Counter({i: days for i in range(1, 6)})
    assert run.days == 5 * days  # no model-day checked twice
    assert run.wrapped and len(run.checks.results) == 5
    keys = [key for key, _ in outbox_rows(engine)]
    assert keys and sorted(keys) == sorted(expected_keys(world.settings, engine))
    with engine.connect() as conn:
        holders = set(conn.execute(select(night_claims.c.holder)).scalars())
        assert conn.execute(select(func.count()).select_from(night_claims)
                            .where(night_claims.c.done_at.is_(None))).scalar() == 0
    assert len(holders) == 2  # both workers took models


def _held(engine: Engine) -> bool:
    with engine.connect() as conn:
        return conn.execute(select(func.count()).select_from(night_claims)
                            .where(night_claims.c.holder.is_not(None))).scalar() > 0


def _worker(config: Path, now: datetime, *extra: str) -> subprocess.Popen[str]:
    env = {**os.environ, "PYTHONPATH": str(ROOT)}
    return subprocess.Popen([sys.executable, "-m", "tests.support.night_worker", str(config),
                             now.isoformat(), *extra], cwd=ROOT, env=env,
                            stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)


@pytest.mark.slow
@POSTGRES_ONLY
def test_a_worker_killed_mid_night_leaves_every_model_checked_once(
        engine: Engine, tmp_path: Path) -> None:
    """kill -9 of one worker inside its second model (the check committed, the claim not yet
    done): its sibling on this host sees the process is gone, takes the model over (finding
    nothing left to check), finishes the night and sends the digest, once."""
    world = _world(engine, tmp_path)
    config, now = tmp_path / "fitwatch.toml", night_after(LAST)
    doomed = _worker(config, now, "--pause", "1.5", "--die-in", "2")
    deadline = time.monotonic() + 120
    while not _held(engine):  # the survivor starts once the doomed worker is at work
        assert time.monotonic() < deadline and doomed.poll() is None, doomed.communicate()
        time.sleep(0.1)
    survivor = _worker(config, now, "--pause", "1.5")
    _, err = doomed.communicate(timeout=300)
    assert doomed.returncode == -signal.SIGKILL, err
    out, err = survivor.communicate(timeout=300)
    assert survivor.returncode == 0 and "DONE" in out, err
    share = json.loads(next(line for line in out.splitlines()
                            if line.startswith("SHARE "))[6:])
    days = (LAST - HISTORY[1]).days + 1  # the window's last day is checked first
    assert _checked(engine) == Counter({i: days for i in range(1, 6)})
    with engine.connect() as conn:
        rows = conn.execute(select(night_claims.c.model_id, night_claims.c.takes,
                                   night_claims.c.done_at)).all()
    assert all(done is not None for _, _, done in rows)
    assert sorted(takes for _, takes, _ in rows)[-1] == 2  # one model was taken over
    assert share["wrapped"]
    assert len(share["models"]) >= 3  # its own and the dead worker's unfinished one
    keys = [key for key, _ in outbox_rows(engine)]
    assert keys and sorted(keys) == sorted(expected_keys(world.settings, engine))


def test_sqlite_keeps_one_worker_and_says_so(sqlite_url: str, tmp_path: Path, capsys) -> None:
    config = night_config(tmp_path, sqlite_url)
    assert main(["--config", str(config), "init"]) == 0
    assert main(["--config", str(config), "daemon", "--once", "--workers", "2"]) == 1
    err = capsys.readouterr().err
    assert "SQLite" in err and "PostgreSQL" in err and "Traceback" not in err


def test_status_names_the_daemons_of_other_hosts(engine: Engine, make_settings) -> None:
    """On PostgreSQL each host's daemon has its own lease row; status reads them all."""
    settings = make_settings(engine.url.render_as_string(hide_password=False))
    now = datetime.now(UTC)
    for host in ("alpha", "beta"):
        assert lease.try_acquire(engine, f"{host}:1:t", now, TTL, f"nightly@{host}")
    lease.run_started(engine, "beta:1:t", now + timedelta(seconds=1), "nightly@beta")
    with engine.connect() as conn:
        states = lease.read_all(conn)
    assert [s.holder for s in states] == ["beta:1:t", "alpha:1:t"]  # the latest first
    state = nightly_state(settings, states[0], now, states[1:])
    assert state.others == ("alpha:1:t",)
    assert state.sentence().endswith("daemon running (beta:1:t, lease until "
                                     f"{state.lease_expires:%Y-%m-%d %H:%M %Z}); 1 more on "
                                     "other hosts (alpha:1:t)")
    lease.release(engine, "alpha:1:t", "nightly@alpha")
    with engine.connect() as conn:
        states = lease.read_all(conn)
    assert nightly_state(settings, states[0], now, states[1:]).others == ()


def test_a_worker_that_ended_unreaped_counts_as_gone() -> None:
    """A killed child its parent has not collected yet (a zombie) still answers signal 0;
    its claims must be freed at once all the same."""
    child = subprocess.Popen([sys.executable, "-c", "pass"])
    holder = f"{socket.gethostname()}:{child.pid}:t"
    deadline = time.monotonic() + 30
    while not gone_from_this_host(holder):  # ended, not yet waited for: a zombie
        assert time.monotonic() < deadline
        time.sleep(0.05)
    assert Path(f"/proc/{child.pid}").exists()  # it is still in the process table
    child.wait()
    assert gone_from_this_host(holder)
    assert not gone_from_this_host(f"{socket.gethostname()}:{os.getpid()}:t")


def test_a_worker_that_joins_a_round_another_has_just_wrapped_stops(
        engine: Engine, make_settings, monkeypatch) -> None:
    """Its wrapper may be a process that has exited since (``daemon --once``): the round is
    done, not a round whose wrapper died mid-way."""
    import monitor.runtime.nightly as nightly

    settings = make_settings(engine.url.render_as_string(hide_password=False))
    dead = subprocess.Popen([sys.executable, "-c", "pass"])
    dead.wait()
    gone = f"{socket.gethostname()}:{dead.pid}:t"
    real_join = claims.join_round

    def join_then_wrapped_by_the_dead(*args, **kwargs):  # the other worker wraps in between
        round_id = real_join(*args, **kwargs)
        assert claims.try_wrap(engine, round_id, gone, T0, TTL)
        claims.wrapped(engine, round_id, gone, T0)
        return round_id
    monkeypatch.setattr(nightly.claims, "join_round", join_then_wrapped_by_the_dead)
    finished = threading.Event()
    run = []
    thread = threading.Thread(target=lambda: (run.append(nightly.work_round(
        settings, engine, now=night_after(NIGHT), poll_seconds=0.05)), finished.set()))
    thread.daemon = True
    thread.start()
    assert finished.wait(30), "the worker kept waiting on a round that was done"
    assert not run[0].wrapped and not run[0].stopped
