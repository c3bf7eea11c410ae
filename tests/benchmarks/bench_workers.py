"""How much faster is a night with two worker processes, and what does a killed worker cost?

    python tests/benchmarks/bench_workers.py [--models 2000] [--rows 100] [--fit-days 60]
        [--fit-rows 200] [--per-row 1000,10000,30000] [--kill-models 1000] [--repeats 1]
        [--parts nights,claims,rows,kill] [--skip-in-process] [--quick] [--out FILE]

PostgreSQL only (``--pg-host``/``--pg-user``, database ``test`` for administration; each run
works in throwaway databases ``fwbench_<pid>_*`` that are dropped at the end).

Setup (not timed). One model is fitted through the product (``fit_model`` on ``--fit-days`` x
``--fit-rows`` generated loading-dock rows, the generator of bench_night.py). It is cloned to
``--models`` models in SQL: the ``models`` row, its version, the fit window's ``day_stats`` and
``batches`` rows and the fit's audit entry (the version taking effect on the night); the fit
window's raw rows are not cloned, because a check reads rows of the days it checks only (the
history comes from ``day_stats``). The night's ``--rows`` rows a model: the fitted model's
through ``ingest_file`` (the product's path), every clone's through one multi-model COPY into
``observations`` with one complete batch per model and the day's statistics computed by the
product's ``DayMoments.from_rows`` (the ingest's own computation; checked against the stored
rows of a few models). That database is the template; each timed night runs on a fresh
``CREATE DATABASE ... TEMPLATE`` copy, so every run starts from the same state.

Parts:

- ``nights``: the night (``through`` = the fit's first active day) in-process with
  ``run_night`` (the baseline), then ``run_with_workers`` with 1 and with 2 spawned workers.
  After each: every model has exactly one check of the night (``day_checks``), one claim done,
  the round wrapped once and the digest queued once (``outbox``).
- ``claims``: the claims alone, no checks: ``take`` + ``finish`` over a round of the same
  models in one process; the cost of a take at the start and at the end of the round.
- ``rows``: one model, one night of 1 000, 10 000 and 30 000 rows after its fit window:
  ``ingest_file`` of the night's file and ``run_night``, each per row.
- ``kill``: 2 workers over ``--kill-models`` models; ``--kill-after`` seconds in, SIGKILL of
  the first-started worker (once it holds a claim and has finished one), and in a second run
  of the second-started one. Reported: models
  checked, claims taken over (``takes`` = 2), digests, and how long the survivor took.

Load (``os.getloadavg``) is printed with every figure: other jobs share the 2 cores.
"""

from __future__ import annotations

import argparse
import io
import os
import platform
import resource
import signal
import socket
import sys
import tempfile
import threading
import time
from collections.abc import Callable, Iterator
from contextlib import contextmanager
from dataclasses import dataclass, field
from datetime import UTC, date, datetime, timedelta
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd
import psycopg

sys.path.insert(0, str(Path(__file__).resolve().parents[2]))

from bench_night import frame as night_frame  # the script's own folder

from monitor.config import Settings, parse_settings
from monitor.ingest.service import ingest_file, options_for
from monitor.lifecycle.fit import FitRequest, fit_model
from monitor.runtime.nightly import run_night
from monitor.runtime.workers import run_with_workers
from monitor.stats.moments import DayMoments
from monitor.store import claims
from monitor.store.engine import open_engine
from monitor.store.migrate import upgrade_database
from monitor.store.models import get_model
from monitor.store.observations import load_day_stats, load_observations
from monitor.store.schema import audit_log, batches, day_stats, versions

START = date(2025, 3, 3)
FIRST = "dock_00001"  # the model fitted through the product; the others are its clones


# data ---------------------------------------------------------------------------------------
def frame(rng: np.random.Generator, first: date, days: int, rows: int,
          tag: str = "") -> pd.DataFrame:
    """Loading-dock rows, exactly ``rows`` a day (bench_night.py's generator)."""
    return night_frame(rng, first, days, rows, exact=True, tag=tag)


def at_midnight(day: date) -> datetime:
    return datetime.combine(day, datetime.min.time(), tzinfo=UTC)


def night_now(night: date) -> datetime:
    """The run's ``now``: 03:00 UTC after the night."""
    return at_midnight(night + timedelta(days=1)) + timedelta(hours=3)


def load() -> str:
    return "/".join(f"{v:.1f}" for v in os.getloadavg())


# databases ----------------------------------------------------------------------------------
@dataclass
class Pg:
    host: str
    user: str
    prefix: str
    admin: Any = None
    made: list[str] = field(default_factory=list)

    def __post_init__(self) -> None:
        self.admin = psycopg.connect(host=self.host, user=self.user, dbname="test",
                                     autocommit=True)

    def url(self, name: str) -> str:
        return f"postgresql+psycopg://{self.user}@{self.host}:5432/{name}"

    def create(self, suffix: str, template: str | None = None) -> str:
        name = f"{self.prefix}_{suffix}"
        self.drop(name)
        began = time.perf_counter()
        self.admin.execute(f'CREATE DATABASE "{name}"'
                           + (f' TEMPLATE "{template}"' if template else ""))
        self.made.append(name)
        if template:
            log(f"  copied {template} -> {name} in {time.perf_counter() - began:.1f} s")
        return name

    def drop(self, name: str) -> None:
        self.admin.execute(f'DROP DATABASE IF EXISTS "{name}" WITH (FORCE)')

    def close(self) -> None:
        for name in self.made:
            self.drop(name)
        self.admin.close()


def log(text: str) -> None:
    print(text, file=sys.stderr, flush=True)


def settings_for(url: str, mail: Path) -> Settings:
    return parse_settings({"database": {"url": url}, "schedule": {"timezone": "UTC"},
                           "alerts": {"to": ["dock-lead@example.com"], "eml_dir": str(mail)}})


def columns_but(table: Any, *skip: str) -> list[str]:
    return [c.name for c in table.columns if c.name not in skip]


def build_template(pg: Pg, suffix: str, models: int, rows: int, fit_days: int, fit_rows: int,
                   work: Path, seed: int = 7, shifted: float = 0.1) -> tuple[str, date]:
    """The template database (see the module's docstring); returns (name, night)."""
    name = pg.create(suffix)
    url = pg.url(name)
    engine = open_engine(url)
    upgrade_database(engine)
    settings = settings_for(url, work / "mail")
    rng = np.random.default_rng(seed)
    fit_path = work / f"{suffix}_fit.csv"
    frame(rng, START, fit_days, fit_rows).to_csv(fit_path, index=False)
    night = START + timedelta(days=fit_days)
    began = time.perf_counter()
    fit_model(settings, FitRequest(FIRST, fit_path, "load_minutes", ("pallets",), "docked_at",
                                   "load_id"), now=at_midnight(night), engine=engine,
              actor="bench")
    fitted = time.perf_counter() - began
    with engine.begin() as conn:
        if models > 1:
            _clone(conn, models)
    cloned = time.perf_counter() - began - fitted
    night_file = work / f"{suffix}_night.csv"
    first_night = frame(rng, night, 1, rows, tag="N1-")
    if shifted > 0:  # the fitted model is the first of the shifted ones
        first_night["load_minutes"] += (0.3 * first_night["pallets"]).round(1)
    first_night.to_csv(night_file, index=False)
    with engine.connect() as conn:
        first = get_model(conn, FIRST)
    ingest_file(engine, first, night_file, options_for(settings, FIRST, now=night_now(night)))
    if models > 1:
        _bulk_night(engine, night, rows, rng, shifted)
        _verify_bulk(engine, night, models, rows)
    with engine.connect().execution_options(isolation_level="AUTOCOMMIT") as conn:
        conn.exec_driver_sql("VACUUM ANALYZE")
    engine.dispose()
    log(f"  template {name}: {models} model(s), fit {fitted:.1f} s, clone {cloned:.1f} s, "
        f"all {time.perf_counter() - began:.1f} s (load {load()})")
    return name, night


def _clone(conn: Any, models: int) -> None:
    """Models 2..``models`` as copies of model 1 (its fit window's statistics, not its rows)."""
    conn.exec_driver_sql(
        "INSERT INTO models (name, response, predictors, time_column, id_column, created_at) "
        "SELECT 'dock_' || lpad(g::text, 5, '0'), response, predictors, time_column, "
        "id_column, created_at FROM models, generate_series(2, %(n)s) AS g WHERE id = 1",
        {"n": models})
    for table in (versions, day_stats, batches):
        cols = columns_but(table, "id", "model_id")
        listed = ", ".join(cols)
        picked = ", ".join(f"s.{c}" for c in cols)
        conn.exec_driver_sql(
            f"INSERT INTO {table.name} (model_id, {listed}) SELECT m.id, {picked} "
            f"FROM {table.name} s JOIN models m ON m.id <> 1 WHERE s.model_id = 1")
    cols = columns_but(audit_log, "id", "model_id", "version_id")
    conn.exec_driver_sql(
        f"INSERT INTO audit_log (model_id, version_id, {', '.join(cols)}) "
        f"SELECT v.model_id, v.id, {', '.join(f'a.{c}' for c in cols)} FROM audit_log a "
        "JOIN versions v ON v.model_id <> 1 WHERE a.model_id = 1")


def _bulk_night(engine: Any, night: date, rows: int, rng: np.random.Generator,
                shifted: float) -> None:
    """The night's rows of every clone: one batch each, one COPY for all, the day's stats.
    Every ``1 / shifted``-th model's night comes from a slower process (2.4 minutes a pallet
    instead of 2.1: the demo scenario's layout change), so the night has news to mail."""
    now = night_now(night)
    with engine.begin() as conn:
        made = conn.exec_driver_sql(
            "INSERT INTO batches (model_id, source, strict, status, read, accepted, duplicates, "
            "rejected, reasons, first_day, last_day, started_at, finished_at) "
            "SELECT id, 'bench: night of ' || name, false, 'complete', %(r)s, %(r)s, 0, 0, "
            "'{}', %(d)s, %(d)s, %(t)s, %(t)s FROM models WHERE id <> 1 ORDER BY id "
            "RETURNING model_id, id", {"r": rows, "d": night, "t": now}).all()
        made.sort()
        ids = np.array([m for m, _ in made])
        batch = np.array([b for _, b in made])
        m = len(ids)
        pallets = np.clip(np.rint(rng.normal(22, 7, (m, rows))), 4, 33)
        slope = np.full((m, 1), 2.1)
        if shifted > 0:
            slope[::max(1, round(1 / shifted))] = 2.4
        minutes = np.round(9 + slope * pallets + rng.normal(0, 2.5, (m, 1))
                           + rng.normal(0, 5, (m, rows)), 1)
        seconds = rng.integers(5 * 3600, 22 * 3600, (m, rows))
        epoch_us = int(at_midnight(night).timestamp()) * 1_000_000
        table = pd.DataFrame({
            "model_id": np.repeat(ids, rows), "batch_id": np.repeat(batch, rows),
            "obs_key": [f"N{i}-{night:%y%m%d}-{j}" for i in ids for j in range(rows)],
            "observed_at_us": (epoch_us + seconds * 1_000_000).ravel(),
            "day": night.isoformat(), "y": minutes.ravel(), "x1": pallets.ravel()})
        buffer = io.StringIO()
        table.to_csv(buffer, index=False, header=False)
        raw = conn.connection.driver_connection
        with raw.cursor() as cur, cur.copy(
                "COPY observations (model_id, batch_id, obs_key, observed_at_us, day, y, x1) "
                "FROM STDIN WITH (FORMAT csv)") as copy:
            copy.write(buffer.getvalue())
        days = np.full(rows, np.datetime64(night, "D"))
        stats = []
        for i, model_id in enumerate(ids):
            part = DayMoments.from_rows(days, np.column_stack([pallets[i], minutes[i]])).day(0)
            stats.append({"model_id": int(model_id), "day": night, "n": part.n,
                          "moments": part.to_dict(), "revision": 1, "updated_at": now})
        conn.execute(day_stats.insert(), stats)


def _verify_bulk(engine: Any, night: date, models: int, rows: int) -> None:
    """The bulk night equals what ingest stores: rows per model, and day statistics that the
    product's own computation gives from the stored rows (a few models, first and last)."""
    with engine.connect() as conn:
        counts = conn.exec_driver_sql(
            "SELECT count(*), count(DISTINCT model_id), min(c), max(c) FROM (SELECT model_id, "
            "count(*) c FROM observations WHERE day = %(d)s GROUP BY model_id) t",
            {"d": night}).one()
        assert tuple(counts) == (models, models, rows, rows), counts
        for name in (FIRST, "dock_00002", f"dock_{models:05d}"):
            model = get_model(conn, name)
            obs = load_observations(conn, model, night, night)
            again = DayMoments.from_rows(obs.days, np.column_stack([obs.x, obs.y])).day(0)
            stored = load_day_stats(conn, model, night, night).moments.day(0)
            assert stored.n == again.n == rows
            assert np.allclose(stored.mean, again.mean), name
            assert np.allclose(stored.comoment, again.comoment), name


# verifying a night --------------------------------------------------------------------------
@dataclass(frozen=True)
class NightState:
    checked: int  # models with a check of the night
    checks: int  # checks of the night (one per model expected)
    missing: int  # models without one
    claims_done: int
    taken_over: int  # claims with takes >= 2
    rounds: int
    wrapped: int
    digests: int  # outbox rows
    queued_models: int  # queued_nights rows of the night
    claims_s: float  # first claim taken -> last claim done
    wrap_s: float  # last claim done -> round wrapped

    def ok(self, models: int) -> bool:
        return (self.checked == self.checks == self.claims_done == self.queued_models == models
                and self.missing == 0 and self.rounds == self.wrapped == 1
                and self.digests == 1)

    def sentence(self) -> str:
        return (f"{self.checked} models checked ({self.checks} checks, {self.missing} missing), "
                f"{self.claims_done} claims done, {self.taken_over} taken over, round(s) "
                f"{self.rounds} wrapped {self.wrapped}, digests queued {self.digests} "
                f"(covering {self.queued_models} models)")


def night_state(url: str, night: date) -> NightState:
    with psycopg.connect(url.replace("postgresql+psycopg", "postgresql")) as conn:
        one = conn.execute
        checks, checked = one("SELECT count(*), count(DISTINCT model_id) FROM day_checks "
                              "WHERE day = %s", (night,)).fetchone()
        missing = one("SELECT count(*) FROM models m WHERE NOT EXISTS (SELECT 1 FROM "
                      "day_checks c WHERE c.model_id = m.id AND c.day = %s)",
                      (night,)).fetchone()[0]
        done, over, first, last = one(
            "SELECT count(done_at), count(*) FILTER (WHERE takes >= 2), min(claimed_at), "
            "max(done_at) FROM night_claims").fetchone()
        rounds, wrapped, wrapped_at = one("SELECT count(*), count(wrapped_at), max(wrapped_at) "
                                          "FROM night_rounds WHERE through = %s",
                                          (night,)).fetchone()
        digests = one("SELECT count(*) FROM outbox").fetchone()[0]
        queued = one("SELECT count(*) FROM queued_nights WHERE day = %s", (night,)).fetchone()[0]
    span = (last - first).total_seconds() if first and last else float("nan")
    wrap = (wrapped_at - last).total_seconds() if wrapped_at and last else float("nan")
    return NightState(checked, checks, missing, done, over, rounds, wrapped, digests, queued,
                      span, wrap)


# timing ------------------------------------------------------------------------------------
@dataclass(frozen=True)
class Timed:
    label: str
    seconds: float
    cpu_self: float  # this process
    cpu_children: float  # spawned workers (reaped)
    cpu_db: float | None  # the server's ended backends (other jobs' too)
    load_before: str
    load_after: str
    state: NightState | None = None
    note: str = ""


@contextmanager
def timing(pg: Pg) -> Iterator[dict[str, float | None]]:
    out: dict[str, float | None] = {}
    kids = resource.getrusage(resource.RUSAGE_CHILDREN)
    own = time.process_time()
    began = time.perf_counter()
    yield out
    out["seconds"] = time.perf_counter() - began
    out["self"] = time.process_time() - own
    after = resource.getrusage(resource.RUSAGE_CHILDREN)
    out["children"] = (after.ru_utime - kids.ru_utime) + (after.ru_stime - kids.ru_stime)


class Sampler:
    """Every 0.25 s: the server backends of one database, their CPU (from /proc, the last
    value seen per backend) and what they wait on (``pg_stat_activity``)."""

    def __init__(self, pg: Pg, database: str):
        self.pg, self.database = pg, database
        self.cpu: dict[int, float] = {}
        self.waits: dict[str, int] = {}
        self.samples = 0
        self.stop = threading.Event()
        self.thread = threading.Thread(target=self._run, daemon=True)
        self.visible = True

    def __enter__(self) -> Sampler:
        self.thread.start()
        return self

    def __exit__(self, *_exc: object) -> None:
        self.stop.set()
        self.thread.join()

    def _run(self) -> None:
        with psycopg.connect(host=self.pg.host, user=self.pg.user, dbname="test",
                             autocommit=True) as conn:
            while not self.stop.wait(0.25):
                rows = conn.execute("SELECT pid, state, wait_event_type, wait_event FROM "
                                    "pg_stat_activity WHERE datname = %s",
                                    (self.database,)).fetchall()
                self.samples += 1
                for pid, state, kind, event in rows:
                    if state == "active" and kind in ("Lock", "LWLock", "IO"):
                        key = f"{kind}:{event}"
                        self.waits[key] = self.waits.get(key, 0) + 1
                    try:
                        stat = Path(f"/proc/{pid}/stat").read_text().rsplit(")", 1)[1].split()
                        self.cpu[pid] = (int(stat[11]) + int(stat[12])) / os.sysconf(
                            "SC_CLK_TCK")
                    except (OSError, IndexError, ValueError):
                        self.visible = False

    @property
    def db_cpu(self) -> float | None:
        return sum(self.cpu.values()) if self.visible and self.cpu else None

    def wait_text(self) -> str:
        if not self.waits:
            return "none seen"
        return ", ".join(f"{k} x{v}" for k, v in sorted(self.waits.items(),
                                                        key=lambda kv: -kv[1])[:4])


def timed_night(pg: Pg, template: str, suffix: str, night: date, work: Path, how: str,
                models: int) -> Timed:
    """One night on a fresh copy of ``template``: ``how`` is 'in-process' or 'N workers'."""
    name = pg.create(suffix, template)
    url = pg.url(name)
    settings = settings_for(url, work / f"mail_{suffix}")
    engine = open_engine(url)
    before = load()
    log(f"  {how}: running (load {before})")
    with Sampler(pg, name) as sampler, timing(pg) as t:
        if how == "in-process":
            run = run_night(settings, engine, now=night_now(night), actor="bench")
        else:
            run = run_with_workers(settings, engine, int(how.split()[0]), now=night_now(night),
                                   actor="bench")
    engine.dispose()
    state = night_state(url, night)
    pg.drop(name)
    result = Timed(how, t["seconds"] or 0.0, t["self"] or 0.0, t["children"] or 0.0,
                   sampler.db_cpu, before, load(), state,
                   f"{run.status}; {run.days} model-days; server waits sampled "
                   f"({sampler.samples} samples): {sampler.wait_text()}"
                   + (f"; problems: {'; '.join(run.problems)}" if run.problems else ""))
    log(f"  {how}: {result.seconds:.1f} s; {state.sentence()}; {result.note}")
    if not state.ok(models):
        log(f"  !! {how}: the night is NOT as expected: {state}")
    return result


def part_nights(pg: Pg, args: argparse.Namespace, work: Path, out: list[str]) -> None:
    for m, r in args.sizes:
        log(f"nights: {m} models x {r} rows")
        template, night = build_template(pg, f"t{m}x{r}", m, r, args.fit_days, args.fit_rows,
                                         work, shifted=args.shifted)
        runs: dict[str, list[Timed]] = {}
        for rep in range(args.repeats):
            order = [h for h in ("in-process", "1 workers", "2 workers")
                     if not (args.skip_in_process and h == "in-process")]
            if rep % 2:
                order.reverse()  # a busy spell should not always hit the same one
            for how in order:
                runs.setdefault(how, []).append(
                    timed_night(pg, template, f"n{rep}", night, work, how, m))
        base = min(t.seconds for t in runs.get("in-process") or runs["1 workers"])
        one = min(t.seconds for t in runs["1 workers"])
        out.append(f"\nOne night, {m} models x {r} rows (fit window {args.fit_days} days x "
                   f"{args.fit_rows} rows), best of {args.repeats}:")
        out.append(f"{'run':12s} {'wall s':>8s} {'ms/model':>9s} {'vs in-proc':>10s} "
                   f"{'vs 1 wkr':>9s} {'cpu self':>9s} {'cpu wkrs':>9s} {'cpu db':>8s} "
                   f"{'claims s':>9s} {'wrap s':>7s}  load before->after  verified")
        for how, timed in runs.items():
            for t in sorted(timed, key=lambda t: t.seconds):
                s = t.state
                assert s is not None
                out.append(
                    f"{how:12s} {t.seconds:8.1f} {1000 * t.seconds / m:9.2f} "
                    f"{t.seconds / base:10.2f} {one / t.seconds:9.2f} {t.cpu_self:9.1f} "
                    f"{t.cpu_children:9.1f} "
                    f"{'-' if t.cpu_db is None else f'{t.cpu_db:.1f}':>8s} {s.claims_s:9.1f} "
                    f"{s.wrap_s:7.1f}  {t.load_before:>14s}->{t.load_after:<14s} "
                    f"{'ok' if s.ok(m) else 'NOT OK'}: {s.checked} checked, "
                    f"{s.digests} digest")
                out.append(f"{'':12s} {t.note}")
        out.append("  (vs 1 wkr: speed-up over 1 spawned worker, goal >= 1.7 for 2 workers; "
                   "claims s: first claim taken to last claim done; wrap s: last claim done "
                   "to the round wrapped, i.e. the digest of every model composed and queued "
                   "by one worker; cpu: seconds of CPU of this process, of the spawned workers, "
                   "and of the database's server backends sampled from /proc)")
        if args.profile:
            profile_night(pg, template, night, work, out)
        pg.drop(template)


def profile_night(pg: Pg, template: str, night: date, work: Path, out: list[str]) -> None:
    """cProfile of the in-process night: where a model's time goes."""
    import cProfile
    import pstats

    name = pg.create("prof", template)
    url = pg.url(name)
    engine = open_engine(url)
    settings = settings_for(url, work / "mail_prof")
    profiler = cProfile.Profile()
    began = time.perf_counter()
    profiler.enable()
    run_night(settings, engine, now=night_now(night), actor="bench")
    profiler.disable()
    took = time.perf_counter() - began
    engine.dispose()
    pg.drop(name)
    text = io.StringIO()
    stats = pstats.Stats(profiler, stream=text)
    stats.sort_stats("cumulative").print_stats(45)
    stats.sort_stats("tottime").print_stats(20)
    out.append(f"\ncProfile of the in-process night ({took:.1f} s under the profiler, load "
               f"{load()}):")
    out.extend("  " + line for line in text.getvalue().splitlines()
               if line.strip() and not line.startswith(("   Ordered", "   List reduced")))


# claims alone -------------------------------------------------------------------------------
def part_claims(pg: Pg, args: argparse.Namespace, work: Path, out: list[str]) -> None:
    m = max(s[0] for s in args.sizes)
    log(f"claims: take + finish over {m} models, no checks")
    template, night = build_template(pg, f"c{m}", m, 10, args.fit_days, 20, work)
    name = pg.create("claims", template)
    engine = open_engine(pg.url(name))
    holder = f"{socket.gethostname()}:{os.getpid()}:bench"
    ttl = timedelta(minutes=5)
    now = datetime.now(UTC)
    began = time.perf_counter()
    round_id = claims.join_round(engine, night, holder, now)
    joined = time.perf_counter() - began
    edge = min(500, m // 4)
    laps: list[float] = []
    before = load()
    done = None
    for _ in range(m):  # as a worker does: the next take marks the last claim done
        t0 = time.perf_counter()
        claim = claims.take(engine, round_id, holder, datetime.now(UTC), ttl, done=done)
        assert claim is not None
        done = (claim, "checked")
        laps.append(time.perf_counter() - t0)
    assert claims.take(engine, round_id, holder, datetime.now(UTC), ttl, done=done) is None
    t0 = time.perf_counter()
    claims.progress(engine, round_id, datetime.now(UTC))
    progress_s = time.perf_counter() - t0
    with engine.connect() as conn:
        query = claims.next_claim(round_id, datetime.now(UTC)).compile(dialect=conn.dialect)
        plan = "\n".join(r[0] for r in conn.exec_driver_sql(
            "EXPLAIN (ANALYZE, BUFFERS) " + str(query), query.params))
        size = conn.exec_driver_sql("SELECT pg_total_relation_size('night_claims'), "
                                    "n_dead_tup, n_live_tup FROM pg_stat_user_tables WHERE "
                                    "relname = 'night_claims'").one()
    engine.dispose()
    pg.drop(name)
    pg.drop(template)
    out.append(f"\nClaims alone (one process, no checks), {m} models (load {before} -> "
               f"{load()}):")
    out.append(f"  join_round {joined * 1000:.0f} ms; take + finish: first {edge} "
               f"{1000 * np.mean(laps[:edge]):.2f} ms each, last {edge} "
               f"{1000 * np.mean(laps[-edge:]):.2f} ms each, all {sum(laps):.1f} s; progress() "
               f"after {1000 * progress_s:.1f} ms")
    out.append(f"  night_claims after: {size[0] / 1e6:.1f} MB, {size[2]} live / {size[1]} dead "
               "tuples (statistics collector, approximate)")
    out.append("  plan of take()'s query once every claim is done:")
    out.extend("    " + line for line in plan.splitlines())


# rows a day ---------------------------------------------------------------------------------
def part_rows(pg: Pg, args: argparse.Namespace, work: Path, out: list[str]) -> None:
    log(f"rows: one model, {args.per_row} rows a night")
    template, night = build_template(pg, "r1", 1, 1, args.fit_days, args.fit_rows, work)
    results: dict[int, list[tuple[float, float, str, str]]] = {}
    with psycopg.connect(host=pg.host, user=pg.user, dbname=template) as conn:
        # the template's night has 1 row; the timed nights bring their own: start without it
        conn.execute("DELETE FROM day_stats WHERE day = %s", (night,))
        conn.execute("DELETE FROM observations WHERE day = %s", (night,))
        conn.execute("DELETE FROM batches WHERE first_day = %s AND last_day = %s",
                     (night, night))
    for rep in range(args.repeats):
        for rows in args.per_row:
            name = pg.create(f"r{rows}", template)
            url = pg.url(name)
            settings = settings_for(url, work / f"mail_r{rows}_{rep}")
            engine = open_engine(url)
            path = work / f"night_{rows}.csv"
            rows_night = frame(np.random.default_rng(rows + rep), night, 1, rows, tag="R")
            rows_night["load_minutes"] += (0.3 * rows_night["pallets"]).round(1)  # news to mail
            rows_night.to_csv(path, index=False)
            before = load()
            with engine.connect() as conn:
                model = get_model(conn, FIRST)
            t0 = time.perf_counter()
            summary = ingest_file(engine, model, path,
                                  options_for(settings, FIRST, now=night_now(night)))
            t1 = time.perf_counter()
            run = run_night(settings, engine, now=night_now(night), actor="bench")
            t2 = time.perf_counter()
            engine.dispose()
            state = night_state(url, night)
            assert summary.accepted == rows and state.ok(1), (summary, state)
            results.setdefault(rows, []).append((t1 - t0, t2 - t1, before, load()))
            log(f"  {rows} rows: ingest {t1 - t0:.2f} s, night {t2 - t1:.2f} s "
                f"({run.days} model-days, {state.sentence()})")
            pg.drop(name)
    pg.drop(template)
    out.append(f"\nOne model, one night after a {args.fit_days}-day fit window, best of "
               f"{args.repeats} (ingest_file of the night's file; run_night in-process):")
    out.append(f"{'rows':>7s} {'ingest s':>9s} {'us/row':>7s} {'night s':>8s} {'us/row':>7s} "
               f"{'both us/row':>12s}  load before->after")
    per_row = {}
    for rows, values in results.items():
        ingest = min(v[0] for v in values)
        check = min(v[1] for v in values)
        per_row[rows] = (ingest + check) / rows
        best = min(values, key=lambda v: v[0] + v[1])
        out.append(f"{rows:7d} {ingest:9.3f} {1e6 * ingest / rows:7.1f} {check:8.3f} "
                   f"{1e6 * check / rows:7.1f} {1e6 * per_row[rows]:12.1f}  "
                   f"{best[2]:>14s}->{best[3]}")
    big = max(per_row)
    mid = sorted(per_row)[len(per_row) // 2]
    out.append(f"  per-row cost, ingest + night: {min(per_row)} rows / {big} rows = "
               f"{per_row[min(per_row)] / per_row[big]:.2f}; {mid} / {big} = "
               f"{per_row[mid] / per_row[big]:.2f} (goal: within 1.5; the smallest night "
               "carries the fixed cost of a run)")


# kill -9 ------------------------------------------------------------------------------------
def worker_pids(parent: int) -> list[int]:
    """The spawned workers among ``parent``'s children (not multiprocessing's helpers)."""
    found = []
    for entry in Path("/proc").iterdir():
        if not entry.name.isdigit():
            continue
        try:
            stat = (entry / "stat").read_text()
            cmd = (entry / "cmdline").read_bytes().replace(b"\0", b" ").decode()
        except OSError:
            continue
        ppid = int(stat.rsplit(")", 1)[1].split()[1])
        state = stat.rsplit(")", 1)[1].split()[0]
        if ppid == parent and "spawn_main" in cmd and "resource_tracker" not in cmd \
                and state != "Z":
            found.append(int(entry.name))
    return sorted(found)


def part_kill(pg: Pg, args: argparse.Namespace, work: Path, out: list[str]) -> None:
    m = args.kill_models
    log(f"kill: 2 workers over {m} models, SIGKILL one {args.kill_after} s in")
    template, night = build_template(pg, f"k{m}", m, args.rows, args.fit_days, args.fit_rows,
                                     work, shifted=args.shifted)
    out.append(f"\nkill -9 of one of 2 workers {args.kill_after:.0f} s into a night of {m} "
               f"models x {args.rows} rows:")
    for which in ("first", "second"):
        name = pg.create(f"kill_{which}", template)
        url = pg.url(name)
        settings = settings_for(url, work / f"mail_kill_{which}")
        engine = open_engine(url)
        box: dict[str, Any] = {}

        def night_run(engine: Any = engine, settings: Settings = settings,
                      box: dict[str, Any] = box) -> None:
            try:
                box["run"] = run_with_workers(settings, engine, 2, now=night_now(night),
                                              actor="bench")
            except Exception as exc:  # reported below
                box["error"] = repr(exc)
            box["end"] = time.perf_counter()

        before = load()
        began = time.perf_counter()
        thread = threading.Thread(target=night_run)
        thread.start()
        pids: list[int] = []
        while len(pids) < 2 and time.perf_counter() - began < 60:
            time.sleep(0.05)
            pids = worker_pids(os.getpid())
        victim = pids[0] if which == "first" else pids[-1]
        while time.perf_counter() - began < max(args.kill_after, 120) and not (
                time.perf_counter() - began >= args.kill_after and _holding(url, victim)):
            time.sleep(0.1)  # until the victim holds a claim (a spawned worker starts slowly)
        done_before = _done(url)
        os.kill(victim, signal.SIGKILL)
        killed = time.perf_counter()
        thread.join()
        engine.dispose()
        state = night_state(url, night)
        with psycopg.connect(url.replace("postgresql+psycopg", "postgresql")) as conn:
            over = conn.execute("SELECT min(claimed_at), max(claimed_at), count(*) FROM "
                                "night_claims WHERE takes >= 2").fetchone()
            dead_holder = conn.execute("SELECT count(*) FROM night_claims WHERE holder LIKE "
                                       "%s", (f"%:{victim}:%",)).fetchone()[0]
            kill_wall = datetime.now(UTC) - timedelta(seconds=time.perf_counter() - killed)
        pg.drop(name)
        takeover = ((over[0] - kill_wall).total_seconds() if over[0] is not None
                    else float("nan"))
        run = box.get("run")
        problems = "; ".join(run.problems) if run else box.get("error", "")
        out.append(
            f"  kill the {which}-started worker (pid {victim}, {done_before} models done by "
            f"then): the night ended {box['end'] - killed:.1f} s after the kill "
            f"({box['end'] - began:.1f} s in all; load {before} -> {load()})")
        out.append(f"    {'ok' if state.ok(m) else 'NOT OK'}: {state.sentence()}; claims the "
                   f"killed worker had finished: {dead_holder}; "
                   f"first take-over {takeover:.1f} s after the kill (a survivor frees a "
                   "dead worker's claim once it finds nothing else to take)")
        out.append(f"    the daemon's run: {run.status if run else 'raised'}; {problems}")
        log(out[-3] + "\n" + out[-2])
    pg.drop(template)


def _holding(url: str, pid: int) -> bool:
    """Whether worker ``pid`` holds an unfinished claim and has finished one before."""
    with psycopg.connect(url.replace("postgresql+psycopg", "postgresql")) as conn:
        held, done = conn.execute(
            "SELECT count(*) FILTER (WHERE done_at IS NULL), count(done_at) FROM night_claims "
            "WHERE holder LIKE %s", (f"%:{pid}:%",)).fetchone()
    return bool(held) and bool(done)


def _done(url: str) -> int:
    with psycopg.connect(url.replace("postgresql+psycopg", "postgresql")) as conn:
        return int(conn.execute("SELECT count(done_at) FROM night_claims").fetchone()[0])


# main --------------------------------------------------------------------------------------
def sizes(text: str) -> list[tuple[int, int]]:
    """'2000x100,1000x2000' -> [(2000, 100), (1000, 2000)]."""
    return [(int(a), int(b)) for a, b in (part.split("x") for part in text.split(","))]


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--models", type=int, help="models of the night (with --rows)")
    parser.add_argument("--rows", type=int, default=100, help="rows a model in the night")
    parser.add_argument("--sizes", type=sizes, default=None,
                        help="several nights, e.g. 2000x100,1000x2000 (overrides --models)")
    parser.add_argument("--fit-days", type=int, default=60)
    parser.add_argument("--fit-rows", type=int, default=200, help="rows a day of the fit window")
    parser.add_argument("--per-row", default="1000,10000,30000",
                        help="rows of the one-model nights (part rows)")
    parser.add_argument("--kill-models", type=int, default=1000)
    parser.add_argument("--kill-after", type=float, default=5.0)
    parser.add_argument("--repeats", type=int, default=1)
    parser.add_argument("--profile", action="store_true",
                        help="cProfile the in-process night too (part nights)")
    parser.add_argument("--shifted", type=float, default=0.1,
                        help="share of models whose night is off the plan (news to mail)")
    parser.add_argument("--parts", default="nights,claims,rows,kill")
    parser.add_argument("--skip-in-process", action="store_true",
                        help="nights: leave out the in-process run (large sizes; 'vs in-proc' "
                             "is then against one spawned worker)")
    parser.add_argument("--quick", action="store_true",
                        help="200 models x 100 rows, 30 fit days, nights of 1000/5000 rows, "
                             "kill over 200 models")
    parser.add_argument("--out", type=Path,
                        default=Path(__file__).parent / "results" / "workers.txt")
    parser.add_argument("--pg-host", default="127.0.0.1")
    parser.add_argument("--pg-user", default=os.environ.get("PGUSER", "postgres"))
    args = parser.parse_args()
    if args.quick:
        args.models, args.rows, args.fit_days, args.per_row = 200, 100, 30, "1000,5000"
        args.kill_models, args.kill_after = 200, 2.0
    args.sizes = args.sizes or [(args.models or 2000, args.rows)]
    args.per_row = [int(v) for v in args.per_row.split(",")]
    parts = set(args.parts.split(","))
    command = "python " + " ".join([str(Path(sys.argv[0])), *sys.argv[1:]])
    out = [f"bench_workers, {datetime.now(UTC):%Y-%m-%d %H:%M} UTC, {platform.node()}, "
           f"{os.cpu_count()} cores, Python {platform.python_version()}, load at start "
           f"{load()}", f"command: {command}"]
    pg = Pg(args.pg_host, args.pg_user, f"fwbench_{os.getpid()}")
    out.append("server: " + pg.admin.execute("SELECT version()").fetchone()[0].split(" on ")[0])
    try:
        with tempfile.TemporaryDirectory() as tmp:
            work = Path(tmp)
            steps: list[tuple[str, Callable[..., None]]] = [
                ("nights", part_nights), ("claims", part_claims), ("rows", part_rows),
                ("kill", part_kill)]
            shown = 0
            for name, step in steps:
                if name in parts:
                    step(pg, args, work, out)
                    print("\n".join(out[shown:]), flush=True)
                    shown = len(out)
    finally:
        pg.close()
    out.append(f"load at end {load()}")
    print(out[-1])
    text = "\n".join(out) + "\n"
    args.out.parent.mkdir(parents=True, exist_ok=True)
    with args.out.open("a") as f:
        f.write(text + "\n")


if __name__ == "__main__":
    main()
