"""Observation storage and per-day statistics.

References: the merged day statistics are checked against numpy's own mean and covariance of
the raw rows (numpy as the reference library); merging is Chan, Golub & LeVeque (1979).
"""

from __future__ import annotations

from datetime import UTC, date, datetime

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from monitor.domain.model import ModelSpec
from monitor.stats.moments import DayMoments
from monitor.store.batches import start_batch
from monitor.store.models import create_model
from monitor.store.observations import (
    insert_observations,
    load_day_rows,
    load_day_stats,
    load_observations,
    merge_day_stats,
    prepare_rows,
)
from monitor.store.row_days import count_observations, last_observed_at

NOW = datetime(2026, 3, 14, 12, tzinfo=UTC)
DAY_US = 86_400 * 10**6
T0 = int(datetime(2026, 3, 1, tzinfo=UTC).timestamp()) * 10**6


def _setup(engine, k: int = 2):
    spec = ModelSpec("m", "y", tuple(f"p{i}" for i in range(k)), "t", "id")
    with engine.begin() as conn:
        model = create_model(conn, spec, NOW)
        batch = start_batch(conn, model.id, "test", None, None, False, NOW)
    return model, batch


def _rows(n: int, k: int, seed: int, start: int = 0):
    rng = np.random.default_rng(seed)
    us = T0 + np.sort(rng.integers(0, 5 * DAY_US, n))
    days = us.astype("datetime64[us]").astype("datetime64[D]")  # UTC days for this test
    keys = np.array([f"k{start + i}" for i in range(n)], dtype=object)
    return keys, us.astype(np.int64), days, rng.normal(size=(n, k)) * 10, rng.normal(size=n)


def test_insert_load_roundtrip_and_key_reports(engine) -> None:
    model, batch = _setup(engine)
    keys, us, days, x, y = _rows(50, 2, 1)
    with engine.begin() as conn:
        first = insert_observations(conn, model, batch, prepare_rows(keys, us, days, x, y))
        assert first.inserted.all() and len(first.positions) == 0
        # half of the keys again (one with other values), half new
        keys2 = np.concatenate([keys[:25], np.array([f"n{i}" for i in range(5)], object)])
        y2 = np.concatenate([y[:25], np.zeros(5)])
        y2[3] += 1.0
        us2 = np.concatenate([us[:25], us[:5]])
        x2 = np.concatenate([x[:25], x[:5]])
        second = insert_observations(conn, model, batch, prepare_rows(
            keys2, us2, np.concatenate([days[:25], days[:5]]), x2, y2))
    assert second.inserted.tolist() == [False] * 25 + [True] * 5
    assert sorted(second.positions.tolist()) == list(range(25))
    order = np.argsort(second.positions)
    np.testing.assert_array_equal(second.y[order], y[:25])  # the stored values, not the new
    np.testing.assert_array_equal(second.x[order], x[:25])
    np.testing.assert_array_equal(second.observed_us[order], us[:25])
    with engine.connect() as conn:
        obs = load_observations(conn, model)
        assert count_observations(conn, model) == 55 == len(obs)
        window = load_observations(conn, model, date(2026, 3, 2), date(2026, 3, 3))
        assert last_observed_at(conn, model) == datetime.fromtimestamp(
            max(us.max(), us[:5].max()) / 1e6, UTC)
    assert np.all(np.diff(obs.days.astype(np.int64)) >= 0)
    assert obs.x.shape == (55, 2) and obs.observed_us.dtype == np.int64
    assert set(window.days.astype(str)) <= {"2026-03-02", "2026-03-03"}
    every = np.concatenate([days, days[:5]])
    inside = (every >= np.datetime64("2026-03-02")) & (every <= np.datetime64("2026-03-03"))
    assert len(window) == int(inside.sum())


def test_empty_model_loads_empty_arrays(engine) -> None:
    model, _ = _setup(engine, k=3)
    with engine.connect() as conn:
        obs = load_observations(conn, model)
        stats = load_day_stats(conn, model)
        assert last_observed_at(conn, model) is None
    assert obs.x.shape == (0, 3) and len(stats.moments) == 0 and stats.revisions == {}


@settings(max_examples=15, deadline=None,
          suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(sizes=st.lists(st.integers(1, 40), min_size=1, max_size=4), seed=st.integers(0, 10**6))
def test_merged_day_stats_equal_one_pass_over_all_rows(engine, sizes, seed) -> None:
    """Merging day statistics batch by batch equals numpy's mean/covariance of all rows."""
    with engine.begin() as conn:
        conn.exec_driver_sql("DELETE FROM day_stats")
    model, _ = _setup_once(engine)
    all_days, all_rows = [], []
    for part, n in enumerate(sizes):
        _, _, days, x, y = _rows(n, 2, seed + part)
        rows = np.column_stack([x, y])
        with engine.begin() as conn:
            revisions = merge_day_stats(conn, model, DayMoments.from_rows(days, rows), NOW)
        assert set(revisions) == {d.item() for d in np.unique(days)}
        all_days.append(days)
        all_rows.append(rows)
    days, rows = np.concatenate(all_days), np.concatenate(all_rows)
    with engine.connect() as conn:
        stored = load_day_stats(conn, model)
    assert [d.item() for d in stored.moments.days] == sorted({d.item() for d in days})
    for i, day in enumerate(stored.moments.days):
        mine = rows[days == day]
        got = stored.moments.day(i)
        assert got.n == len(mine)
        np.testing.assert_allclose(got.mean, mine.mean(axis=0), rtol=1e-12, atol=1e-12)
        if len(mine) > 1:  # numpy.cov as the reference
            np.testing.assert_allclose(got.comoment / (got.n - 1), np.cov(mine.T), rtol=1e-9,
                                       atol=1e-9)
        np.testing.assert_array_equal(got.minimum, mine.min(axis=0))
        expected_revision = sum(int(np.any(d == day)) for d in all_days)
        assert stored.revisions[day.item()] == expected_revision


_MODELS: dict[int, tuple] = {}


def _setup_once(engine):
    key = id(engine)
    if key not in _MODELS:
        _MODELS.clear()
        _MODELS[key] = _setup(engine)
    return _MODELS[key]


@pytest.mark.parametrize("k", [1, 8])
def test_all_predictor_widths(engine, k: int) -> None:
    model, batch = _setup(engine, k=k)
    keys, us, days, x, y = _rows(10, k, 3)
    with engine.begin() as conn:
        insert_observations(conn, model, batch, prepare_rows(keys, us, days, x, y))
        obs = load_observations(conn, model)
    order = np.argsort(us, kind="stable")
    np.testing.assert_array_equal(obs.x, x[order])
    np.testing.assert_array_equal(obs.y, y[order])


@pytest.mark.parametrize("k", [1, 8])
@pytest.mark.parametrize("rising", [False, True], ids=["keys-unsorted", "keys-rising"])
def test_many_rows_per_statement_store_and_report_every_key(engine, k: int,
                                                            rising: bool) -> None:
    """SQLite stores rows many to an INSERT (1024 rows a statement, then the rest in statements
    of 256, 128, 64 and 4 rows); keys stored before, scattered over every statement and its
    short ones, are reported with their stored values and the rest stored: every row counted
    once, whether the keys come in key order or not (the PostgreSQL path runs the same
    check)."""
    model, batch = _setup(engine, k=k)
    n = 2500
    keys, us, days, x, y = _rows(n, k, 5)
    if rising:
        keys = np.array([f"k{i:05d}" for i in range(n)], dtype=object)
    old = np.arange(0, n, 7)  # stored first, by another batch
    with engine.begin() as conn:
        other = start_batch(conn, model.id, "earlier", None, None, False, NOW)
        first = insert_observations(conn, model, other,
                                    prepare_rows(keys[old], us[old], days[old], x[old], y[old]))
        assert first.inserted.all()
        result = insert_observations(conn, model, batch, prepare_rows(keys, us, days, x, y + 1))
        assert count_observations(conn, model) == n
        stored = load_observations(conn, model)
    fresh = np.ones(n, bool)
    fresh[old] = False
    np.testing.assert_array_equal(result.inserted, fresh)
    assert sorted(result.positions.tolist()) == old.tolist()
    assert set(result.batch_id.tolist()) == {other}
    order = np.argsort(result.positions)
    np.testing.assert_array_equal(result.y[order], y[old])  # the stored values, not the new
    np.testing.assert_array_equal(result.x[order], x[old])
    expected_y = np.where(fresh, y + 1, y)
    np.testing.assert_array_equal(np.sort(stored.y), np.sort(expected_y))


def test_rows_of_equal_times_read_in_key_order_whatever_the_order_stored(engine) -> None:
    """Rows are stored in key order and read by day, time, then key (code point order, also
    on a PostgreSQL database with a locale's collation), so the order of equal times does not
    depend on the order the rows came in nor on the backend."""
    model, batch = _setup(engine, k=1)
    keys = np.array(["b", "B", "a", "_", "a2", "A1"], dtype=object)
    us = np.full(len(keys), T0, dtype=np.int64)
    days = us.astype("datetime64[us]").astype("datetime64[D]")
    x, y = np.arange(6.0).reshape(6, 1), np.arange(6.0)
    with engine.begin() as conn:
        for part in (slice(3, 6), slice(0, 3)):  # later keys first, in two statements
            insert_observations(conn, model, batch,
                                prepare_rows(keys[part], us[part], days[part], x[part], y[part]))
        rows = load_day_rows(conn, model, days[0].item())
        obs = load_observations(conn, model)
    expected = sorted(keys.tolist())  # Python compares str by code point
    assert rows.keys.tolist() == expected == ["A1", "B", "_", "a", "a2", "b"]
    np.testing.assert_array_equal(obs.y, [y[keys.tolist().index(k)] for k in expected])


@pytest.mark.parametrize("limit", [999, 32_766, 250_000])
@pytest.mark.parametrize("width", [5, 12])
def test_statements_cover_every_row_once_in_few_distinct_sizes(limit: int, width: int) -> None:
    """Every row lands in exactly one statement, in order; no statement binds more than the
    build's parameter limit (999 before SQLite 3.32 and 32766 after: SQLite's defaults, from
    memory; 250000 in the build of this machine's Python, read with getlimit) and the sizes
    are powers of two, largest first, so a connection compiles at most 11 statement texts per
    row width."""
    from monitor.store.observations import _statements

    sizes: set[int] = set()
    for n in [0, 1, 2, 1023, 1024, 1025, 2500, 52_631]:
        covered: list[int] = []
        previous = None
        for size, starts in _statements(n, width, limit):
            assert size * width + 2 <= limit and size & (size - 1) == 0
            assert previous is None or size < previous
            previous = size
            sizes.add(size)
            for start in starts:
                covered.extend(range(start, start + size))
        assert covered == list(range(n))
    assert len(sizes) <= 11
