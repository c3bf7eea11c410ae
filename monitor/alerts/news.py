"""Deciding what to tell whom after one night: pure functions, no database, no clock.

The night is the calendar day that was just checked (in the configured time zone). A model has
news that night when

- it *enters* a status its settings mail about (``alerts.on``; ``refit`` always counts): the
  night's check has ``status_since`` equal to the night;
- a ``watch`` or ``refit`` it mails about is still unresolved and the night is a whole multiple
  of ``remind_every_days`` after ``status_since`` (a *reminder*);
- a promotion, rollback or acknowledgement took effect on the night (a *restart* note, with how
  the first day under it went);
- a status it mailed about ended by itself: ``watch`` back to ``ok`` (a *settled* note, so the
  reminders do not just stop without a word);
- its *data* have something new to say (whatever ``alerts.on`` lists): its feed went silent on
  the night (and a reminder every ``remind_every_days`` while it stays silent), a file rejected
  whole or mostly was ingested since the model's previous digest, or a rising rejection share
  that did not stand then (``monitor.domain.data_health``).

News is grouped into one digest per recipient (recipients can differ per model).
"""

from __future__ import annotations

from collections.abc import Iterable, Sequence
from dataclasses import dataclass
from datetime import date

from monitor.config import AlertSettings
from monitor.domain.action import RESTART_ACTIONS, Action
from monitor.domain.check import DayCheck
from monitor.domain.data_health import DataHealth
from monitor.domain.status import Status

ENTERED, REMINDER, RESTART, SETTLED = "entered", "reminder", "restart", "settled"
DATA = "data"  # a data finding new on the night (or a silent feed's reminder)

__all__ = ["RESTART_ACTIONS", "Action", "Digest", "ModelNews", "digests", "model_news"]


@dataclass(frozen=True)
class ModelNews:
    """What one model has to say after one night."""

    model: str
    night: date
    events: tuple[str, ...]  # among ENTERED, REMINDER, RESTART, SETTLED, DATA
    check: DayCheck
    previous_status: str | None
    actions: tuple[Action, ...]
    recipients: tuple[str, ...]
    data: DataHealth | None = None  # the standing data findings (None: none)

    @property
    def status(self) -> str:
        return self.check.status

    @property
    def days_in_status(self) -> int:
        return (self.night - self.check.status_since).days

    @property
    def weight(self) -> int:
        """Order of importance within a digest: refit, then watch, then data, then the rest."""
        return (Status(self.status).rank * 10 + (5 if ENTERED in self.events else 0)
                + (3 if DATA in self.events else 0))


@dataclass(frozen=True)
class Digest:
    """One recipient's message for one night: every model with news for that recipient."""

    recipient: str
    night: date
    items: tuple[ModelNews, ...]


def mailed_statuses(alerts: AlertSettings) -> frozenset[str]:
    """Statuses this model mails about: the configured ones, and ``refit`` always."""
    return frozenset({*alerts.on, Status.REFIT} & {Status.WATCH, Status.REFIT})


def data_is_news(night: date, data: DataHealth | None, before: DataHealth | None,
                 remind_every_days: int) -> bool:
    """Whether the data findings of ``night`` (``data``) say something that those standing at
    the model's previous digest (``before``; None: there was none) did not."""
    if data is None or not data.stands:
        return False
    if data.silent is not None:
        held = (night - data.silent.flagged_on).days
        if held == 0 or (held > 0 and held % remind_every_days == 0):
            return True
    seen = {f.batch_id for f in before.bad_files} if before is not None else set()
    if any(f.batch_id not in seen for f in data.bad_files):
        return True
    return data.rising is not None and (before is None or before.rising is None)


def model_news(name: str, night: date, check: DayCheck | None, previous: DayCheck | None,
               actions: Sequence[Action], alerts: AlertSettings, *,
               data: DataHealth | None = None,
               data_before: DataHealth | None = None,
               unseen_since: date | None = None) -> ModelNews | None:
    """The news of model ``name`` for ``night``, or None when there is nothing to say.

    ``check`` is the model's check of the night itself (None: the night was not checked, so
    nothing is said), ``previous`` its latest check before the night, ``actions`` the audit
    entries that took effect on the night; ``data`` the model's data findings as of the night,
    ``data_before`` those of its previous digest. ``unseen_since``: the first of the nights a
    catching-up run recorded without a message; a status entered since then was never mailed,
    so it is news as if entered tonight.
    """
    if check is None or check.day != night:
        return None
    mailed = mailed_statuses(alerts)
    taking_effect = tuple(a for a in actions
                          if a.action in RESTART_ACTIONS and a.effective_day == night)
    events: list[str] = []
    if taking_effect:
        events.append(RESTART)
    if check.status in mailed:
        held = (night - check.status_since).days
        if held == 0 or (unseen_since is not None and check.status_since >= unseen_since):
            events.append(ENTERED)
        elif held > 0 and held % alerts.remind_every_days == 0:
            events.append(REMINDER)
    elif (check.status == Status.OK and not taking_effect and previous is not None
          and previous.status in mailed):
        events.append(SETTLED)
    if data_is_news(night, data, data_before, alerts.remind_every_days):
        events.append(DATA)
    if not events or not alerts.to:
        return None
    return ModelNews(name, night, tuple(events), check,
                     previous.status if previous is not None else None, taking_effect,
                     tuple(alerts.to), data if data is not None and data.stands else None)


def digests(news: Iterable[ModelNews]) -> list[Digest]:
    """One digest per recipient, most important model first; recipients in address order."""
    by_recipient: dict[str, list[ModelNews]] = {}
    nights = set()
    for item in news:
        nights.add(item.night)
        for recipient in dict.fromkeys(item.recipients):
            by_recipient.setdefault(recipient, []).append(item)
    if len(nights) > 1:
        raise ValueError(f"news from several nights in one call: {sorted(nights)}")
    return [Digest(recipient, items[0].night,
                   tuple(sorted(items, key=lambda n: (-n.weight, n.model))))
            for recipient, items in sorted(by_recipient.items())]
