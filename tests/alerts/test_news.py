"""What a night has to say, decided from day checks and audit entries (no database).

The rules under test (README, "Running it every night"): mail on entering watch (configurable)
and refit, a reminder every N days while unresolved, a note when a promotion or acknowledgement
takes effect, one digest per recipient per night; reminders count from the status_since day.
"""

from __future__ import annotations

from datetime import date, timedelta

import pytest

from monitor.alerts.news import (
    ENTERED,
    REMINDER,
    RESTART,
    SETTLED,
    Action,
    digests,
    mailed_statuses,
    model_news,
)
from monitor.config import AlertSettings
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
