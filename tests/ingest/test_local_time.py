"""Wall-clock times to UTC and UTC instants to local days, checked against Python's zoneinfo.

The reference is the standard library (PEP 495 ``fold``, PEP 615 ``zoneinfo``) applied one value
at a time: a wall-clock time exists once when both folds give the same instant, twice (the
clocks were turned back) when they differ and each reads back as itself, and not at all (the
clocks skipped it) when they differ and do not read back. The zones are chosen for their
awkward rules: half-hour DST (Australia/Lord_Howe), half-hour offsets (America/St_Johns),
a negative DST in winter (Europe/Dublin, since 1971), southern-hemisphere DST that ended
(America/Sao_Paulo), a day skipped at the date line (Pacific/Apia, 2011-12-30).
"""

from __future__ import annotations

from datetime import UTC, datetime, timedelta
from zoneinfo import ZoneInfo

import numpy as np
import pytest

from monitor.ingest.validate import _C, _CODES, _localize, local_days

EPOCH = datetime(1970, 1, 1)
ZONES = ["Europe/Berlin", "Australia/Lord_Howe", "America/St_Johns", "Europe/Dublin",
         "America/Sao_Paulo", "Pacific/Apia", "UTC"]


def _wall_times(start: datetime, days: int, step_minutes: int) -> np.ndarray:
    first = int((start - EPOCH) / timedelta(microseconds=1))
    return first + np.arange(0, days * 24 * 60, step_minutes, dtype=np.int64) * 60_000_000


def _reference(wall_us: int, zone: ZoneInfo) -> tuple[int, str]:
    wall = EPOCH + timedelta(microseconds=wall_us)
    earlier, later = (wall.replace(tzinfo=zone, fold=f).astimezone(UTC) for f in (0, 1))
    us = int((earlier - datetime(1970, 1, 1, tzinfo=UTC)) / timedelta(microseconds=1))
    if earlier == later:
        return us, ""
    reads_back = earlier.astimezone(zone).replace(tzinfo=None) == wall
    return 0, "dst_ambiguous" if reads_back else "dst_gap"


@pytest.mark.parametrize("name", ZONES)
def test_wall_clock_times_resolve_as_zoneinfo_resolves_them(name: str) -> None:
    zone = ZoneInfo(name)
    # two years of half hours around recent transitions, plus the 1980s (other rules)
    wall = np.concatenate([_wall_times(datetime(2011, 1, 1), 731, 30),
                           _wall_times(datetime(1981, 1, 1), 365, 30)])
    us, code = _localize(wall, np.zeros(len(wall), dtype=np.int8), zone)
    expected = [_reference(int(w), zone) for w in wall]
    assert us.tolist() == [e[0] for e in expected]
    assert [_CODES[c] for c in code] == [e[1] for e in expected]
    if name != "UTC":  # every zone here changed its clocks in these years
        assert (code != 0).any()


def test_a_row_already_refused_keeps_its_reason() -> None:
    zone = ZoneInfo("Europe/Berlin")
    gap = _wall_times(datetime(2025, 3, 30, 2, 30), 1, 60 * 24)  # 02:30 does not exist
    code = np.array([_C["bad_time"]], dtype=np.int8)
    us, out = _localize(gap, code, zone)
    assert out.tolist() == [_C["bad_time"]] and us.tolist() == [0]


@pytest.mark.parametrize("name", ZONES)
def test_local_days_match_zoneinfo(name: str) -> None:
    zone = ZoneInfo(name)
    instants = np.concatenate([
        _wall_times(datetime(2011, 1, 1), 731, 37),  # read as UTC instants here
        _wall_times(datetime(1965, 6, 1), 30, 61),  # before 1970: negative microseconds
    ])
    days = local_days(instants, zone)
    expected = [(datetime(1970, 1, 1, tzinfo=UTC) + timedelta(microseconds=int(u)))
                .astimezone(zone).date().isoformat() for u in instants]
    assert [str(d) for d in days] == expected
    assert local_days(np.zeros(0, np.int64), zone).dtype == np.dtype("datetime64[D]")
