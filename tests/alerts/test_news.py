"""What a night has to say, decided from day checks and audit entries (no database).

The rules under test (README, "Running it every night"): mail on entering watch (configurable)
and refit, a reminder every N days while unresolved, a note when a promotion or acknowledgement
takes effect, one digest per recipient per night; reminders count from the status_since day.
"""

from __future__ import annotations

from dataclasses import replace
from datetime import UTC, date, datetime, timedelta

import pytest

from monitor.alerts.news import (
    DATA,
    ENTERED,
    REMINDER,
    RESTART,
    SETTLED,
    Action,
    data_is_news,
    digests,
    mailed_statuses,
    model_news,
)
from monitor.config import AlertSettings
from monitor.domain.data_health import BadFile, DataHealth, RisingRejections, SilentFeed
from tests.support.mail import day_check

START = date(2026, 3, 9)
LEAD = "planning.lead@example.com"
ALERTS = AlertSettings(to=(LEAD,), remind_every_days=3)


def _days(n: int) -> list[date]:
    return [START + timedelta(days=i) for i in range(n)]


def _history() -> list:
    """ok 2 days, watch from day 3, refit from day 8 (held), promotion effective day 16."""
    checks = []
    for i, day in enumerate(_days(20)):
        if i < 2:
            checks.append(day_check(day, "ok"))
        elif i < 7:
            checks.append(day_check(day, "watch", START + timedelta(days=2)))
        elif i < 15:
            checks.append(day_check(day, "refit", START + timedelta(days=7)))
        else:
            checks.append(day_check(day, "ok", START + timedelta(days=15)))
    return checks


PROMOTION = Action("promote", START + timedelta(days=15), "lead", "new layout", 2, 1)


def _events(alerts: AlertSettings) -> dict[int, tuple[str, ...]]:
    checks = _history()
    out = {}
    for i, check in enumerate(checks):
        actions = [PROMOTION] if check.day == PROMOTION.effective_day else []
        news = model_news("dock_loading", check.day, check, checks[i - 1] if i else None,
                          actions, alerts)
        if news is not None:
            out[i] = news.events
    return out


def test_entering_reminders_and_restart_over_a_sequence_of_nights() -> None:
    # watch enters on day 2, reminders on days 5 (2+3); refit enters on day 7, reminders on
    # 10 and 13 (7+3, 7+6); the promotion takes effect on day 15; then silence
    assert _events(ALERTS) == {2: (ENTERED,), 5: (REMINDER,), 7: (ENTERED,), 10: (REMINDER,),
                               13: (REMINDER,), 15: (RESTART,)}


def test_daily_reminders_when_asked_for() -> None:
    events = _events(AlertSettings(to=(LEAD,), remind_every_days=1))
    assert [i for i, e in events.items() if e == (REMINDER,)] == [3, 4, 5, 6, 8, 9, 10, 11,
                                                                 12, 13, 14]


def test_watch_can_be_left_out_but_refit_always_counts() -> None:
    only_refit = _events(AlertSettings(to=(LEAD,), on=("refit",), remind_every_days=3))
    assert only_refit == {7: (ENTERED,), 10: (REMINDER,), 13: (REMINDER,), 15: (RESTART,)}
    assert mailed_statuses(AlertSettings(on=())) == {"refit"}
    assert _events(AlertSettings(to=(LEAD,), on=(), remind_every_days=3)) == only_refit


def test_a_watch_that_ends_by_itself_gets_a_settled_note() -> None:
    day = START + timedelta(days=4)
    before = day_check(day - timedelta(days=1), "watch", START)
    after = day_check(day, "ok")
    news = model_news("dock_loading", day, after, before, [], ALERTS)
    assert news is not None and news.events == (SETTLED,)
    unmailed = AlertSettings(to=(LEAD,), on=("refit",))
    assert model_news("dock_loading", day, after, before, [], unmailed) is None


def test_an_acknowledgement_gives_a_restart_note_with_the_status_that_followed() -> None:
    day = START + timedelta(days=9)
    ack = Action("ack", day, "lead", "training week", None, None)
    news = model_news("dock_loading", day, day_check(day, "watch", day),
                      day_check(day - timedelta(days=1), "refit", START), [ack], ALERTS)
    assert news is not None and news.events == (RESTART, ENTERED)
    assert news.previous_status == "refit"
    # an action that took effect on another day is not this night's news
    other = Action("ack", day - timedelta(days=3), "lead", None, None, None)
    assert model_news("dock_loading", day, day_check(day, "ok"), day_check(day, "ok"),
                      [other], ALERTS) is None


@pytest.mark.parametrize("case", ["not checked that night", "nobody to tell", "all quiet"])
def test_no_news_means_no_message(case: str) -> None:
    night = START + timedelta(days=2)
    if case == "not checked that night":
        news = model_news("dock_loading", night, None, day_check(START, "ok"), [], ALERTS)
    elif case == "nobody to tell":
        news = model_news("dock_loading", night, day_check(night, "refit"), None, [],
                          AlertSettings(to=()))
    else:
        news = model_news("dock_loading", night, day_check(night, "ok", START),
                          day_check(night - timedelta(days=1), "ok", START), [], ALERTS)
    assert news is None
    assert digests([n for n in [news] if n is not None]) == []


def test_one_digest_per_recipient_with_per_model_recipients() -> None:
    night = START + timedelta(days=5)
    ops = "dock.office@example.com"
    dock = model_news("dock_loading", night, day_check(night, "watch"), None, [],
                      AlertSettings(to=(LEAD,)))
    yard = model_news("yard_moves", night, day_check(night, "refit", model_id=2,
                                                     model="yard_moves"), None, [],
                      AlertSettings(to=(ops, LEAD, ops)))
    assert dock is not None and yard is not None
    out = digests([dock, yard])
    assert [(d.recipient, [i.model for i in d.items]) for d in out] == [
        (ops, ["yard_moves"]), (LEAD, ["yard_moves", "dock_loading"])]  # refit first
    with pytest.raises(ValueError, match="several nights"):
        digests([dock, model_news("dock_loading", night + timedelta(days=1),
                                  day_check(night + timedelta(days=1), "watch"), None, [],
                                  ALERTS)])


# data health ------------------------------------------------------------------------------------
def _silent(flagged_on: date) -> SilentFeed:
    return SilentFeed(START, START + timedelta(days=1), flagged_on, 3, 3.0, 1e-4, 0.001,
                      flagged_on, "the fit window")


def _bad(batch_id: int) -> BadFile:
    return BadFile(batch_id, "loads.csv", datetime(2026, 3, 10, 3, tzinfo=UTC), 56, 56, True,
                   (), None)


def _rising() -> RisingRejections:
    return RisingRejections(7, 50, 500, 10, 10_000, 0.001, 1e-20, (), None)


def test_a_silent_feed_is_news_when_flagged_and_every_remind_days_after() -> None:
    flagged = START + timedelta(days=4)
    data = DataHealth("dock_loading", silent=_silent(flagged))
    news = {}
    for i in range(4, 12):
        night = START + timedelta(days=i)
        item = model_news("dock_loading", night, day_check(night, "ok", START),
                          day_check(night - timedelta(days=1), "ok", START), [], ALERTS,
                          data=replace(data, silent=replace(data.silent, through=night)),
                          data_before=data)
        news[i] = item.events if item else None
    assert news == {4: (DATA,), 5: None, 6: None, 7: (DATA,), 8: None, 9: None, 10: (DATA,),
                    11: None}


def test_a_bad_file_is_news_once_and_a_rising_share_on_entering() -> None:
    night = START + timedelta(days=2)
    assert data_is_news(night, DataHealth("m", bad_files=(_bad(3),)), None, 3)
    assert not data_is_news(night, DataHealth("m", bad_files=(_bad(3),)),
                            DataHealth("m", bad_files=(_bad(3),)), 3)
    assert data_is_news(night, DataHealth("m", bad_files=(_bad(3), _bad(4))),
                        DataHealth("m", bad_files=(_bad(3),)), 3)
    assert data_is_news(night, DataHealth("m", rising=_rising()), DataHealth("m"), 3)
    assert not data_is_news(night, DataHealth("m", rising=_rising()),
                            DataHealth("m", rising=_rising()), 3)
    assert not data_is_news(night, DataHealth("m"), None, 3)


def test_data_news_is_sent_whatever_statuses_are_mailed() -> None:
    night = START + timedelta(days=2)
    quiet = AlertSettings(to=(LEAD,), on=())
    item = model_news("dock_loading", night, day_check(night, "ok", START), None, [], quiet,
                      data=DataHealth("dock_loading", bad_files=(_bad(3),)))
    assert item is not None and item.events == (DATA,) and item.data is not None
