"""Corrections (``ingest --replace``): a corrected file's values win over the stored ones, the
old values stay in the audit trail, the changed days get statistics recomputed from their rows
and a new revision (so the next check checks them again from the earliest), and nothing else
moves. Before, a corrected file was refused row by row as "conflicts with a stored row"."""

from __future__ import annotations

import dataclasses
from datetime import UTC, date, datetime

import numpy as np
import pandas as pd
import pytest
from sqlalchemy import func, select

from monitor.errors import UsageError
from monitor.ingest.service import IngestOptions, ingest_paths, options_for
from monitor.stats.moments import DayMoments
from monitor.store import audit
from monitor.store.checks import earliest_stale_day
from monitor.store.models import get_model
from monitor.store.observations import load_day_stats, load_observations
from monitor.store.schema import replaced_rows
from tests.support.ingest import NOW, Store, csv_text
from tests.support.world import CALM, MODEL, night_after, settings_for, write_csv

LATER = datetime(2026, 4, 2, 9, tzinfo=UTC)

NIGHT = csv_text("L1,2026-03-02 08:00,10,30,D1", "L2,2026-03-02 09:00,12,35,D1",
                 "L3,2026-03-02 10:00,20,51,D2", "L4,2026-03-03 08:00,8,26,D1",
                 "L5,2026-03-03 09:30,15,41,D2")
# L2's minutes were mistyped (35 -> 53); L4 was booked on the wrong day (3 -> 4 March)
FIXED = csv_text("L1,2026-03-02 08:00,10,30,D1", "L2,2026-03-02 09:00,12,53,D1",
                 "L3,2026-03-02 10:00,20,51,D2", "L4,2026-03-04 08:00,8,26,D1",
                 "L5,2026-03-03 09:30,15,41,D2")


def _stats_match_the_rows(store: Store) -> None:
    with store.engine.connect() as conn:
        obs = load_observations(conn, store.loads)
        stored = load_day_stats(conn, store.loads)
    direct = DayMoments.from_rows(obs.days, np.column_stack([obs.x, obs.y]))
    np.testing.assert_array_equal(stored.moments.days, direct.days)
    np.testing.assert_array_equal(stored.moments.n, direct.n)
    np.testing.assert_allclose(stored.moments.mean, direct.mean, rtol=1e-12)
    np.testing.assert_allclose(stored.moments.comoment, direct.comoment, rtol=1e-9, atol=1e-9)


def test_a_corrected_file_replaces_the_stored_values_and_keeps_the_old_ones(
        store: Store) -> None:
    night, fixed = store.write("night.csv", NIGHT), store.write("fixed.csv", FIXED)
    ingest_paths(store.settings, "loads", [night], now=NOW)
    with store.engine.connect() as conn:
        before = load_day_stats(conn, store.loads).revisions
    # without --replace the corrections are conflicts, and nothing changes
    (refused,) = ingest_paths(store.settings, "loads", [fixed], now=LATER)
    assert (refused.accepted, refused.rejected, refused.reasons) == (0, 2, {"conflict": 2})
    (done,) = ingest_paths(store.settings, "loads", [fixed], now=LATER, replace=True,
                           actor="lead")
    assert (done.read, done.accepted, done.replaced, done.duplicates, done.rejected) == (
        5, 2, 2, 3, 0)
    assert done.affected_days == (date(2026, 3, 2), date(2026, 3, 3), date(2026, 3, 4))
    assert "2 stored (2 replacing stored values, kept in the audit trail)" in done.sentence()
    with store.engine.connect() as conn:
        obs = load_observations(conn, store.loads)
        after = load_day_stats(conn, store.loads).revisions
        old = conn.execute(select(replaced_rows.c.obs_key, replaced_rows.c.day,
                                  replaced_rows.c.y, replaced_rows.c.old_batch_id)
                           .order_by(replaced_rows.c.obs_key)).all()
        entries = audit.entries(conn, store.loads.id, ("correct",))
    # the stored rows now hold the corrected values: 53 minutes, and L4 on 4 March
    got = sorted(zip(obs.days.astype(str).tolist(), obs.x[:, 0].tolist(), obs.y.tolist(),
                     strict=True))
    assert got == [("2026-03-02", 10.0, 30.0), ("2026-03-02", 12.0, 53.0),
                   ("2026-03-02", 20.0, 51.0), ("2026-03-03", 15.0, 41.0),
                   ("2026-03-04", 8.0, 26.0)]
    _stats_match_the_rows(store)
    # the old values are kept, with the batch that had stored them
    assert [(k, str(d), y) for k, d, y, _ in old] == [("L2", "2026-03-02", 35.0),
                                                     ("L4", "2026-03-03", 26.0)]
    assert {b for *_, b in old} == {refused.batch_id - 1}
    # every changed day has a new revision; the new day starts at 1
    assert after[date(2026, 3, 2)] == before[date(2026, 3, 2)] + 1
    assert after[date(2026, 3, 3)] == before[date(2026, 3, 3)] + 1
    assert after[date(2026, 3, 4)] == 1
    (entry,) = entries
    assert entry.actor == "lead" and entry.effective_day == date(2026, 3, 2)
    assert entry.details["replaced"] == 2 and entry.details["batch"] == done.batch_id
    # the same corrected file again changes nothing
    (again,) = ingest_paths(store.settings, "loads", [fixed], now=LATER, replace=True)
    assert again.already_ingested and (again.accepted, again.replaced) == (0, 0)


def test_the_next_check_checks_again_from_the_earliest_corrected_day(
        engine, make_settings, tmp_path, worlds) -> None:
    # the demo scenario's model (invented data from the project's generator), checked through
    # 15 March; then 11 March gets a corrected value and every row of 13 March moves to the 14th
    world = worlds.world(engine, settings_for(make_settings, engine), tmp_path, CALM, 7)
    night = world.add_days(date(2026, 3, 9), date(2026, 3, 15), 11, "nights.csv")
    assert world.check(date(2026, 3, 15)).results[0].last_day == date(2026, 3, 15)
    rows = pd.read_csv(night)
    day = rows["docked_at"].str[:10]
    fixed = rows[day.isin(["2026-03-11", "2026-03-13"])].copy()
    first = fixed.index[0]
    fixed.loc[first, "load_minutes"] = fixed.loc[first, "load_minutes"] + 25
    moved = fixed["docked_at"].str.startswith("2026-03-13")
    fixed.loc[moved, "docked_at"] = fixed.loc[moved, "docked_at"].str.replace(
        "2026-03-13", "2026-03-14")
    (done,) = ingest_paths(world.settings, MODEL, [write_csv(fixed, tmp_path / "fixed.csv")],
                           now=night_after(date(2026, 3, 16)), replace=True)
    assert done.replaced == 1 + int(moved.sum()) and done.rejected == 0
    with engine.connect() as conn:
        model = get_model(conn, MODEL)
        assert earliest_stale_day(conn, model.id) == date(2026, 3, 11)
        assert date(2026, 3, 13) not in load_day_stats(conn, model).revisions
    again = world.check(date(2026, 3, 15)).results[0]
    assert again.recomputed_from == date(2026, 3, 11)
    by_day = {c.day: c for c in again.checks}
    assert by_day[date(2026, 3, 13)].n == 0
    assert by_day[date(2026, 3, 14)].n == int((day == "2026-03-14").sum() + moved.sum())
    with engine.connect() as conn:
        assert earliest_stale_day(conn, model.id) is None


def test_strict_rejection_of_a_correction_puts_the_old_values_back(store: Store) -> None:
    ingest_paths(store.settings, "loads", [store.write("night.csv", NIGHT)], now=NOW)
    with store.engine.connect() as conn:
        before = (load_observations(conn, store.loads).y.tolist(),
                  load_day_stats(conn, store.loads).revisions)
    bad = FIXED + "L6,2026-03-03 11:00,many,40,D1\n"
    (summary,) = ingest_paths(store.settings, "loads", [store.write("bad.csv", bad)], now=LATER,
                              replace=True, strict=True)
    assert summary.status == "rejected" and summary.replaced == 0 and summary.accepted == 0
    with store.engine.connect() as conn:
        assert (load_observations(conn, store.loads).y.tolist(),
                load_day_stats(conn, store.loads).revisions) == before
        assert conn.execute(select(func.count()).select_from(replaced_rows)).scalar_one() == 0
        assert not audit.entries(conn, store.loads.id, ("correct",))


@pytest.mark.parametrize("chunk_rows", [1, 2, 1000])
def test_a_key_twice_in_a_corrected_file_is_a_duplicate_or_a_conflict(
        store: Store, chunk_rows: int) -> None:
    ingest_paths(store.settings, "loads", [store.write("night.csv", NIGHT)], now=NOW)
    twice = csv_text("L2,2026-03-02 09:00,12,53,D1", "L3,2026-03-02 10:00,20,52,D2",
                     "L2,2026-03-02 09:00,12,53,D1", "L3,2026-03-02 10:00,20,57,D2")
    options: IngestOptions = dataclasses.replace(
        options_for(store.settings, "loads", now=LATER, replace=True), chunk_rows=chunk_rows)
    from monitor.ingest.service import ingest_file

    summary = ingest_file(store.engine, store.loads, store.write("twice.csv", twice), options)
    # the first L2 and L3 replace; the second L2 repeats it; the second L3 contradicts it
    assert (summary.replaced, summary.duplicates, summary.rejected) == (2, 1, 1)
    assert summary.reasons == {"conflict": 1} and summary.examples[0].line == 5
    with store.engine.connect() as conn:
        assert sorted(load_observations(conn, store.loads).y.tolist()) == [26, 30, 41, 52, 53]
    _stats_match_the_rows(store)


def test_replace_needs_an_id_column(store: Store) -> None:
    with pytest.raises(UsageError, match=r"no id column.*--replace needs a model fitted with"):
        ingest_paths(store.settings, "hashed", [store.write("h.csv", NIGHT)], now=NOW,
                     replace=True)
