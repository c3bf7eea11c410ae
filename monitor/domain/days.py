"""Calendar days: the one place that turns instants into local calendar days.

Days are ``datetime.date`` for people and ``numpy.datetime64[D]`` in arrays; instants are aware
``datetime`` values, turned into the configured zone's calendar day here and nowhere else.
"""

from __future__ import annotations

from datetime import date, datetime, timedelta
from typing import Any
from zoneinfo import ZoneInfo


def as_date(value: Any) -> date:
    """A ``datetime.date`` from a ``date``, a ``numpy.datetime64`` or an ISO string."""
    if isinstance(value, datetime):
        raise TypeError("an instant is not a day; use local_day(instant, zone)")
    if isinstance(value, date):
        return value
    # numpy is imported here, not with the module: the quick commands deal in dates alone
    import numpy as np

    return date.fromisoformat(str(np.datetime64(value, "D")))


def local_day(instant: datetime, zone: ZoneInfo) -> date:
    """The calendar day ``instant`` falls on in ``zone``."""
    if instant.tzinfo is None:
        raise ValueError("a naive datetime has no day in any zone; pass an aware one")
    return instant.astimezone(zone).date()


def local_time(instant: datetime | None, zone: ZoneInfo) -> datetime | None:
    """``instant`` as wall-clock time in ``zone`` (None stays None)."""
    return None if instant is None else instant.astimezone(zone)


def yesterday(now: datetime, zone: ZoneInfo) -> date:
    """The last complete day in ``zone`` at ``now``."""
    return local_day(now, zone) - timedelta(days=1)
