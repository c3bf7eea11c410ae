"""The reads that serve many models at once agree with the one-model reads they replace.

Reference: the one-model functions of the same modules (``load_checks``, ``last_check``,
``version_by_id``, ``list_versions``, ``last_day_with_rows``, ``batches_between``,
``audit.actions``), on both backends; an id with nothing stored is left out.
Records are compared by ``repr``: they hold NaN figures and numpy arrays, which ``==`` does not
take as equal to themselves.
"""

from __future__ import annotations

from datetime import UTC, date, datetime, timedelta
from pathlib import Path

import pytest
from sqlalchemy import Engine

from monitor.domain.version import VersionState
from monitor.store import audit
from monitor.store.batches import batches_between, batches_between_for
from monitor.store.checks import checks_on, last_check, last_checks_before, load_checks
from monitor.store.models import get_model
from monitor.store.row_days import last_day_with_rows, last_days_with_rows
from monitor.store.versions import (
    candidates_by_model,
    list_versions,
    version_by_id,
    versions_by_id,
)
from tests.support.snapshots import WorldCache
from tests.support.world import (
    CHANGED,
    FIT_CANDIDATE,
    LAST_DAY,
    MODEL,
    REACH_REFIT,
    World,
    settings_for,
)

NOBODY = 987_654  # a model id with nothing stored


@pytest.fixture
def world(worlds: WorldCache, engine: Engine, make_settings, tmp_path: Path) -> World:
    return worlds.world(engine, settings_for(make_settings, engine), tmp_path, CHANGED, 71,
                        (REACH_REFIT, FIT_CANDIDATE))


def test_checks_of_a_night_and_the_latest_before_it_agree_with_one_model_reads(
        world: World) -> None:
    with world.engine.connect() as conn:
        model = get_model(conn, MODEL)
        names = {model.id: MODEL, NOBODY: "nobody"}
        stored = load_checks(conn, model.id, model=MODEL)
        first = stored[0].day
        for day in (first - timedelta(days=1), first, first + timedelta(days=9), LAST_DAY,
                    LAST_DAY + timedelta(days=3)):
            tonight = checks_on(conn, day, names)
            expected = load_checks(conn, model.id, day, day, model=MODEL)
            assert repr(list(tonight.values())) == repr(expected) and NOBODY not in tonight
            before = last_checks_before(conn, day, names)
            one = last_check(conn, model.id, before=day, model=MODEL)
            assert repr(before.get(model.id)) == repr(one) and NOBODY not in before
        assert last_checks_before(conn, date(2026, 4, 1), names)[model.id].day == date(2026, 3, 31)


def test_versions_by_id_and_candidates_agree_with_one_model_reads(world: World) -> None:
    with world.engine.connect() as conn:
        model = get_model(conn, MODEL)
        versions = list_versions(conn, model.id)
        assert {v.state for v in versions} == {VersionState.ACTIVE, VersionState.CANDIDATE}
        found = versions_by_id(conn, [v.id for v in versions] + [NOBODY])
        assert repr(found) == repr({v.id: version_by_id(conn, v.id) for v in versions})
        candidates = candidates_by_model(conn, [model.id, NOBODY])
        assert candidates == {model.id: [v.number for v in versions
                                         if v.state == VersionState.CANDIDATE]}


def test_days_with_rows_batches_and_actions_agree_with_one_model_reads(world: World) -> None:
    with world.engine.connect() as conn:
        model = get_model(conn, MODEL)
        ids = [model.id, NOBODY]
        for day in (date(2026, 1, 4), date(2026, 3, 8), date(2026, 3, 15), LAST_DAY):
            one = last_day_with_rows(conn, model, day)
            assert last_days_with_rows(conn, ids, day) == ({model.id: one} if one else {})
        for start, end in ((datetime(2026, 1, 1, tzinfo=UTC), datetime(2026, 5, 1, tzinfo=UTC)),
                           (datetime(2026, 3, 10, tzinfo=UTC), datetime(2026, 3, 20, tzinfo=UTC)),
                           (datetime(2027, 1, 1, tzinfo=UTC), datetime(2027, 2, 1, tzinfo=UTC))):
            one_model = batches_between(conn, model.id, start, end)
            many = batches_between_for(conn, ids, start, end)
            assert repr(many) == repr({model.id: one_model} if one_model else {})
        # a promotion and an acknowledgement, recorded and rolled back
        conn.rollback()  # end the reads' implicit transaction
        trans = conn.begin()
        at = datetime(2026, 4, 12, 20, tzinfo=UTC)
        for action, day in (("promote", LAST_DAY), ("ack", LAST_DAY),
                            ("ack", LAST_DAY + timedelta(days=1))):
            audit.record(conn, action=action, actor="test", at=at, model_id=model.id,
                         effective_day=day, details={"version": 2})
        for day in (LAST_DAY, LAST_DAY + timedelta(days=1), LAST_DAY + timedelta(days=2)):
            expected = [a for a in audit.actions(conn, model.id, day) if a.effective_day == day]
            found = audit.actions_on(conn, ids, day)
            assert found == ({model.id: expected} if expected else {})
        assert [a.action for a in audit.actions_on(conn, ids, LAST_DAY)[model.id]] == [
            "promote", "ack"]
        trans.rollback()
