"""A crash (SIGKILL) at any point of an ingestion leaves the file fully in or fully out; the rerun
then stores every good row exactly once, and the database stays sound (SQLite's
``PRAGMA integrity_check``; day statistics equal a recomputation from the stored rows)."""

from __future__ import annotations

import os
import random
import signal
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from sqlalchemy import func, select, text

from monitor.ingest.service import ingest_paths
from monitor.stats.moments import DayMoments
from monitor.store.observations import load_day_stats, load_observations
from monitor.store.schema import batches, observations
from tests.support.ingest import NOW, Store

ROOT = Path(__file__).resolve().parents[2]
ROWS = 3000


def _file(store: Store, rows: int = ROWS) -> tuple[Path, pd.DataFrame]:
    rng = np.random.default_rng(42)
    when = pd.Timestamp("2026-03-01 06:00") + pd.to_timedelta(
        np.sort(rng.integers(0, 25 * 24 * 60, rows)), unit="min")
    frame = pd.DataFrame({"load_id": [f"L{i}" for i in range(rows)],
                          "docked_at": when.strftime("%Y-%m-%d %H:%M"),
                          "pallets": rng.integers(1, 30, rows).astype(object),
                          "load_minutes": np.round(8 + rng.normal(30, 5, rows), 2)})
    bad = rng.choice(rows, 12, replace=False)
    frame.loc[bad, "pallets"] = "n/a"
    path = store.tmp / "crash.csv"
    frame.to_csv(path, index=False)
    good = frame.drop(index=bad)
    return path, good


def _run_child(store: Store, point: str, path: Path, delay: float | None = None) -> None:
    url = store.engine.url.render_as_string(hide_password=False)
    child = subprocess.Popen([sys.executable, "-m", "tests.ingest.crash_child", point, url,
                              "loads", str(path)], cwd=ROOT, stdout=subprocess.PIPE,
                             stderr=subprocess.PIPE, text=True)
    try:
        line = child.stdout.readline()
        assert line.strip() == "READY", child.stderr.read()
        if delay is not None:
            time.sleep(delay)
    finally:
        os.kill(child.pid, signal.SIGKILL)
        child.wait(timeout=30)
        child.stdout.close()
        child.stderr.close()


def _check(store: Store, good: pd.DataFrame) -> None:
    with store.engine.connect() as conn:
        if conn.dialect.name == "sqlite":
            assert conn.execute(text("PRAGMA integrity_check")).scalar() == "ok"
            assert conn.execute(text("PRAGMA foreign_key_check")).fetchall() == []
        keys = sorted(conn.execute(select(observations.c.obs_key)).scalars())
        obs = load_observations(conn, store.loads)
        stats = load_day_stats(conn, store.loads)
        complete = conn.execute(select(func.count()).select_from(batches)
                                .where(batches.c.status == "complete")).scalar_one()
        open_ = conn.execute(select(func.count()).select_from(batches)
                             .where(batches.c.status == "open")).scalar_one()
    assert keys == sorted(good.load_id)  # every good row, exactly once
    assert complete == 1 and open_ == 0
    assert sorted(obs.y.tolist()) == sorted(good.load_minutes.tolist())
    direct = DayMoments.from_rows(obs.days, np.column_stack([obs.x, obs.y]))
    np.testing.assert_array_equal(stats.moments.n, direct.n)
    np.testing.assert_allclose(stats.moments.mean, direct.mean, rtol=1e-12)
    np.testing.assert_allclose(stats.moments.comoment, direct.comoment, rtol=1e-9, atol=1e-9)


def _stored(store: Store) -> int:
    with store.engine.connect() as conn:
        return conn.execute(select(func.count()).select_from(observations)).scalar_one()


POINTS = ["batch", "chunk1", "chunk3", "rejected", "day_stats", "finish", "committed"]


@pytest.mark.parametrize("point", POINTS)
def test_kill_at_a_point_then_rerun(store: Store, point: str) -> None:
    path, good = _file(store)
    _run_child(store, point, path)
    assert _stored(store) == (len(good) if point == "committed" else 0)  # all or nothing
    (summary,) = ingest_paths(store.settings, "loads", [path], now=NOW)
    assert summary.already_ingested == (point == "committed")
    assert summary.read == ROWS and summary.rejected == 12
    _check(store, good)


def test_kill_at_random_moments(store: Store) -> None:
    path, good = _file(store, 20_000)
    generator = random.Random(3)
    for _ in range(3):
        _run_child(store, "start", path, delay=generator.uniform(0.0, 0.6))
        assert _stored(store) in (0, len(good))
        if store.engine.dialect.name == "sqlite":
            with store.engine.connect() as conn:
                assert conn.execute(text("PRAGMA integrity_check")).scalar() == "ok"
    ingest_paths(store.settings, "loads", [path], now=NOW)
    _check(store, good)
