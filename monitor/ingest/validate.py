"""Row validation: turn the columns of a chunk into typed arrays and a reason for every bad row.

Everything is done column-wise with pyarrow and numpy; Python runs per row only to write the
detail of a rejected row. Arrow's parsers are the authority on what a number or an ISO 8601
time is: a chunk is cast in one piece, and only when that fails are the failing values found
(a pattern sorts out the plain garbage, a bisection the rest), so a value means the same in a
clean chunk as in a messy one.
"""

from __future__ import annotations

from collections.abc import Callable, Mapping
from dataclasses import dataclass
from datetime import UTC, date, datetime, time, timedelta
from typing import Any
from zoneinfo import ZoneInfo

import numpy as np
import pyarrow as pa
import pyarrow.compute as pc
from numpy.typing import NDArray

from monitor.columnar import from_numpy, to_numpy
from monitor.domain.model import ModelSpec
from monitor.ingest.keys import content_keys
from monitor.ingest.readers import RawChunk
from monitor.ingest.reasons import Rejection, quote_value

KEY_LIMIT = 200  # characters of an id (the width of observations.obs_key)
# The largest magnitude a number may have, whatever the configured ranges. The day statistics
# and every window built from them hold sums of squares and cross products: over N rows whose
# values are at most B in size, each is at most N * B**2 (centred or not), and the tests and
# fits multiply two of them (e.g. Sxx * Syy), up to (N * B**2)**2. With N up to 1e12 rows in
# a window and B = 1e60 that is 1e264, below the largest double (about 1.8e308, IEEE 754
# binary64), so nothing a stored row can do overflows the statistics.
MAGNITUDE_LIMIT = 1e60
MAGNITUDE_ROWS = 1e12  # the row count the limit above is derived for
_NUMBER = r"^[+-]?(([0-9]+[.]?[0-9]*|[.][0-9]+)([eE][+-]?[0-9]+)?|inf|infinity|nan)$"
_ISO_START = r"^[0-9]{4}-[0-9]{2}-[0-9]{2}"
_ZONED = r"[0-9]{2}:[0-9]{2}(:[0-9]{2}([.,][0-9]*)?)?\s*([Zz]|[+-][0-9]{2}(:?[0-9]{2})?)$"
_US = pa.timestamp("us")
_US_UTC = pa.timestamp("us", tz="UTC")
_US_PER_DAY = 86_400_000_000

# reason codes in the order the checks run; a row gets the first that applies
_CODES = ("", "empty_field", "not_a_number", "not_finite", "too_large", "bad_time", "dst_gap",
          "dst_ambiguous", "bad_id", "out_of_range", "future_time", "too_early",
          "before_retention")
_C = {code: i for i, code in enumerate(_CODES)}


@dataclass(frozen=True)
class Rules:
    """What a valid row must satisfy besides its types."""

    zone: ZoneInfo
    ranges: Mapping[str, tuple[float, float]]
    now: datetime
    future_tolerance: timedelta
    earliest_day: date = date(1990, 1, 1)  # settings: ingest.earliest_day
    kept_from: date | None = None  # rows before this day were pruned (retention): refused

    @property
    def latest_us(self) -> int:
        latest = (self.now + self.future_tolerance).astimezone(UTC)
        return (latest - datetime(1970, 1, 1, tzinfo=UTC)) // timedelta(microseconds=1)

    @property
    def earliest_us(self) -> int:
        earliest = datetime.combine(self.earliest_day, time(), self.zone).astimezone(UTC)
        return (earliest - datetime(1970, 1, 1, tzinfo=UTC)) // timedelta(microseconds=1)

    @property
    def kept_from_us(self) -> int | None:
        if self.kept_from is None:
            return None
        start = datetime.combine(self.kept_from, time(), self.zone).astimezone(UTC)
        return (start - datetime(1970, 1, 1, tzinfo=UTC)) // timedelta(microseconds=1)


@dataclass(frozen=True, eq=False)
class CheckedRows:
    """The valid rows of a chunk (typed and keyed) and the rejected ones."""

    lines: NDArray[np.int64]
    keys: NDArray[np.object_]
    observed_us: NDArray[np.int64]
    days: NDArray[np.datetime64]
    x: NDArray[np.float64]
    y: NDArray[np.float64]
    rejected: tuple[Rejection, ...]
    read: int
    positions: NDArray[np.intp]  # each valid row's place in its chunk (for its raw text)
    texts: Callable[[NDArray[np.intp]], list[str]]

    def __len__(self) -> int:
        return len(self.lines)

    def take(self, index: Any) -> CheckedRows:
        """The valid rows picked by ``index`` (a mask or positions), without rejections."""
        return CheckedRows(self.lines[index], self.keys[index], self.observed_us[index],
                           self.days[index], self.x[index], self.y[index], (), 0,
                           self.positions[index], self.texts)

    def raw(self, i: int) -> str:
        """The raw text of valid row ``i``."""
        return self.texts(self.positions[[i]])[0]


def check_rows(chunk: RawChunk, spec: ModelSpec, rules: Rules) -> CheckedRows:
    """Validate every row of ``chunk`` for the model ``spec`` under ``rules``."""
    n = len(chunk.lines)
    code = np.zeros(n, dtype=np.int8)
    culprit = np.full(n, -1, dtype=np.int16)  # which column failed (index into spec.columns)
    columns = list(spec.columns)

    def mark(mask: NDArray[np.bool_], reason: str, column: str) -> None:
        fresh = mask & (code == 0)
        code[fresh] = _C[reason]
        culprit[fresh] = columns.index(column)

    observed_us, time_code = _instants(chunk.columns[spec.time_column], rules.zone)
    for reason in ("empty_field", "bad_time", "dst_gap", "dst_ambiguous"):
        mark(time_code == _C[reason], reason, spec.time_column)
    numeric = [*spec.predictors, spec.response]
    values = np.empty((n, len(numeric)), dtype=np.float64)
    for j, column in enumerate(numeric):
        values[:, j], number_code = _numbers(chunk.columns[column])
        for reason in ("empty_field", "not_a_number", "not_finite"):
            mark(number_code == _C[reason], reason, column)
    ids: NDArray[np.object_] | None = None
    if spec.id_column:
        ids, bad = _ids(chunk.columns[spec.id_column])
        mark(bad, "bad_id", spec.id_column)
    with np.errstate(invalid="ignore"):
        for j, column in enumerate(numeric):
            mark(np.abs(values[:, j]) > MAGNITUDE_LIMIT, "too_large", column)
    for j, column in enumerate(numeric):
        if column in rules.ranges:
            low, high = rules.ranges[column]
            with np.errstate(invalid="ignore"):
                mark((values[:, j] < low) | (values[:, j] > high), "out_of_range", column)
    mark(observed_us > rules.latest_us, "future_time", spec.time_column)
    mark(observed_us < rules.earliest_us, "too_early", spec.time_column)
    if rules.kept_from_us is not None:  # a pruned day: checking it again would need its rows
        mark(observed_us < rules.kept_from_us, "before_retention", spec.time_column)

    good = code == 0
    rejected = _describe(chunk, np.flatnonzero(~good), code, culprit, columns, values, numeric,
                         rules)
    x, y = values[good, :-1] + 0.0, values[good, -1] + 0.0  # + 0.0 turns -0.0 into 0.0
    us = observed_us[good]
    keys = ids[good] if ids is not None else content_keys(us, x, y)
    rejected_all = tuple(sorted((*chunk.malformed, *rejected), key=lambda r: r.line))
    return CheckedRows(chunk.lines[good], keys, us, local_days(us, rules.zone), x, y,
                       rejected_all, chunk.rows, np.flatnonzero(good), chunk.texts)


def local_days(observed_us: NDArray[np.int64], zone: ZoneInfo) -> NDArray[np.datetime64]:
    """The calendar date in ``zone`` of each UTC instant (epoch microseconds).

    One offset per UTC day serves every row of the day when the zone's offset is the same at
    both of its ends; only the rows of a day with a transition are converted one by one.
    """
    if len(observed_us) == 0:
        return np.zeros(0, dtype="datetime64[D]")
    utc = np.asarray(observed_us, dtype=np.int64)
    days, inverse = np.unique(np.floor_divide(utc, _US_PER_DAY), return_inverse=True)
    start = np.array([_offset_at(zone, int(d) * _US_PER_DAY) for d in days], dtype=np.int64)
    end = np.array([_offset_at(zone, (int(d) + 1) * _US_PER_DAY) for d in days],
                   dtype=np.int64)
    wall = utc + start[inverse]
    for i in np.flatnonzero((start != end)[inverse]):
        wall[i] = utc[i] + _offset_at(zone, int(utc[i]))
    return np.floor_divide(wall, _US_PER_DAY).astype("datetime64[D]")


# Python's datetime spans years 1 to 9999; instants beyond take the offset at the nearest end
# (such rows are refused as too early or in the future anyway).
_FIRST_US = -62_135_596_800_000_000 + _US_PER_DAY * 2  # 0001-01-03 UTC
_LAST_US = 253_402_300_799_000_000 - _US_PER_DAY * 2  # 9999-12-29 UTC
_EPOCH = datetime(1970, 1, 1)


def _offset_at(zone: ZoneInfo, utc_us: int) -> int:
    """The UTC offset of ``zone`` at an instant, in microseconds."""
    moment = _EPOCH.replace(tzinfo=UTC) + timedelta(
        microseconds=min(max(utc_us, _FIRST_US), _LAST_US))
    return _us(moment.astimezone(zone).utcoffset())


def _us(delta: timedelta | None) -> int:
    return (delta or timedelta()) // timedelta(microseconds=1)


# columns ----------------------------------------------------------------------------------------
def _numbers(arr: pa.Array) -> tuple[NDArray[np.float64], NDArray[np.int8]]:
    """Floats and a code per value: empty, not a number, or not finite."""
    kind = arr.type
    n = len(arr)
    if pa.types.is_null(kind):
        return np.full(n, np.nan), np.full(n, _C["empty_field"], dtype=np.int8)
    code = np.zeros(n, dtype=np.int8)
    if pa.types.is_integer(kind) or pa.types.is_floating(kind) or pa.types.is_decimal(kind):
        values = _float_array(pc.cast(arr, pa.float64()))
        empty = _mask(arr.is_null())
    else:
        if (pa.types.is_string(kind) or pa.types.is_large_string(kind)) and not arr.null_count:
            try:  # the usual case: every value is a plain number
                values = _to_float(arr)
                code[~np.isfinite(values)] = _C["not_finite"]
                return values, code
            except (pa.ArrowInvalid, pa.ArrowNotImplementedError):
                pass
        text = pc.utf8_trim_whitespace(pc.cast(arr, pa.string()))
        empty = _mask(text.is_null()) | (_int_array(pc.utf8_length(text)) == 0)
        looks = _mask(pc.match_substring_regex(text, _NUMBER, ignore_case=True)) & ~empty
        values = np.full(n, np.nan)
        ok = np.zeros(n, dtype=bool)
        for part in (np.flatnonzero(looks), np.flatnonzero(~looks & ~empty)):
            if len(part):
                part_values, part_ok = _lenient(text.take(from_numpy(part)), _to_float, np.nan)
                values[part] = part_values
                ok[part] = part_ok
        code[~ok & ~empty] = _C["not_a_number"]
    code[empty] = _C["empty_field"]
    code[(code == 0) & ~np.isfinite(values)] = _C["not_finite"]
    return values, code


def _instants(arr: pa.Array, zone: ZoneInfo) -> tuple[NDArray[np.int64], NDArray[np.int8]]:
    """UTC epoch microseconds and a code per value (empty, bad, DST gap, DST overlap)."""
    kind = arr.type
    n = len(arr)
    code = np.zeros(n, dtype=np.int8)
    us = np.zeros(n, dtype=np.int64)
    if pa.types.is_timestamp(kind) or pa.types.is_date(kind):
        empty = _mask(arr.is_null())
        aware = pa.types.is_timestamp(kind) and kind.tz is not None
        values = _int_array(pc.cast(pc.cast(arr, _US_UTC if aware else _US, safe=False),
                                     pa.int64()))
        code[empty] = _C["empty_field"]
        if aware:
            us[:] = values
        else:
            us[:], code[:] = _localize(values, code, zone)
        return us, code
    if (pa.types.is_string(kind) or pa.types.is_large_string(kind)) and not arr.null_count:
        try:  # the usual case: every value is a local time without offset
            return _localize(_caster(_US)(arr), code, zone)
        except (pa.ArrowInvalid, pa.ArrowNotImplementedError):
            pass
    text = pc.utf8_trim_whitespace(pc.cast(arr, pa.string()))
    empty = _mask(text.is_null()) | (_int_array(pc.utf8_length(text)) == 0)
    code[empty] = _C["empty_field"]
    zoned = _mask(pc.match_substring_regex(text, _ZONED)) & ~empty
    iso = _mask(pc.match_substring_regex(text, _ISO_START))
    naive_us = np.zeros(n, dtype=np.int64)
    ok = np.zeros(n, dtype=bool)
    for part, target in ((np.flatnonzero(~zoned & ~empty & iso), _US),
                         (np.flatnonzero(zoned & iso), _US_UTC),
                         (np.flatnonzero(~empty & ~iso), _US)):
        if len(part):
            part_us, part_ok = _lenient(text.take(from_numpy(part)), _caster(target), 0)
            (us if target is _US_UTC else naive_us)[part] = part_us
            ok[part] = part_ok
    code[~ok & ~empty] = _C["bad_time"]
    naive = ok & ~zoned
    if naive.any():
        local_us, local_code = _localize(naive_us[naive], code[naive], zone)
        us[naive], code[naive] = local_us, local_code
    return us, code


def _localize(naive_us: NDArray[np.int64], code: NDArray[np.int8],
              zone: ZoneInfo) -> tuple[NDArray[np.int64], NDArray[np.int8]]:
    """Wall-clock times in ``zone`` to UTC; times in a DST gap or overlap are refused.

    Python's zoneinfo decides (PEP 495): a wall-clock time read with ``fold=0`` and with
    ``fold=1`` gives one instant when it exists once; two instants that each read back as the
    time when it exists twice (the clocks were turned back); two that do not when the clocks
    skipped it. Most days have one offset from midnight to midnight, found at their ends, and
    all their rows are shifted by it at once; the rows of the few days with a transition are
    read one by one. That is exact as long as a zone never changes its offset twice within a
    day and back: no zone of the tz database does (its transitions are months apart, at least
    two days; checked over every zone's transition list).
    """
    code = code.copy()
    wall = np.asarray(naive_us, dtype=np.int64)
    days, inverse = np.unique(np.floor_divide(wall, _US_PER_DAY), return_inverse=True)
    bounds = np.unique(np.concatenate([days, days + 1]))
    folds = np.array([_wall_offsets(zone, int(b) * _US_PER_DAY) for b in bounds],
                     dtype=np.int64).reshape(-1, 2)
    start = folds[np.searchsorted(bounds, days)]
    end = folds[np.searchsorted(bounds, days + 1)]
    steady = (start[:, 0] == start[:, 1]) & (start[:, 0] == end[:, 0]) \
        & (end[:, 0] == end[:, 1])
    us = wall - start[inverse, 0]
    for i in np.flatnonzero(~steady[inverse]):
        early, late = _wall_offsets(zone, int(wall[i]))
        if early == late:
            us[i] = wall[i] - early
            continue
        if code[i] == 0:
            instant = _EPOCH.replace(tzinfo=UTC) + timedelta(microseconds=int(wall[i]) - early)
            back = instant.astimezone(zone).replace(tzinfo=None) - _EPOCH
            code[i] = _C["dst_ambiguous"] if _us(back) == wall[i] else _C["dst_gap"]
        us[i] = 0
    return us, code


def _wall_offsets(zone: ZoneInfo, wall_us: int) -> tuple[int, int]:
    """The UTC offsets (microseconds) of a wall-clock time in ``zone`` read with fold 0 and 1."""
    wall = _EPOCH + timedelta(microseconds=min(max(wall_us, _FIRST_US), _LAST_US))
    return (_us(wall.replace(tzinfo=zone, fold=0).utcoffset()),
            _us(wall.replace(tzinfo=zone, fold=1).utcoffset()))


def _ids(arr: pa.Array) -> tuple[NDArray[np.object_], NDArray[np.bool_]]:
    """Ids as stripped text; integral floats lose their '.0'. Bad: empty or too long."""
    if pa.types.is_floating(arr.type):
        integral = pc.equal(pc.floor(arr), arr)
        as_int = pc.cast(pc.if_else(integral, arr, 0.0), pa.int64(), safe=False)
        text = pc.if_else(integral, pc.cast(as_int, pa.string()), pc.cast(arr, pa.string()))
    else:
        text = pc.utf8_trim_whitespace(pc.cast(arr, pa.string()))
    lengths = _int_array(pc.utf8_length(text))  # a null counts as empty
    keys = np.empty(len(text), dtype=object)
    keys[:] = [value or "" for value in text.to_pylist()]
    nul = _mask(pc.match_substring(text, "\x00"))  # PostgreSQL text cannot hold it
    return keys, (lengths == 0) | (lengths > KEY_LIMIT) | nul


# lenient casting --------------------------------------------------------------------------------
def _lenient(arr: pa.Array, cast: Callable[[pa.Array], NDArray[Any]],
             fill: float) -> tuple[NDArray[Any], NDArray[np.bool_]]:
    """Cast all values that Arrow accepts; find the refused ones by bisection."""
    try:
        return cast(arr), np.ones(len(arr), dtype=bool)
    except (pa.ArrowInvalid, pa.ArrowNotImplementedError):
        if len(arr) == 1:
            return np.full(1, fill), np.zeros(1, dtype=bool)
    mid = len(arr) // 2
    left, left_ok = _lenient(arr.slice(0, mid), cast, fill)
    right, right_ok = _lenient(arr.slice(mid), cast, fill)
    return np.concatenate([left, right]), np.concatenate([left_ok, right_ok])


def _to_float(arr: pa.Array) -> NDArray[np.float64]:
    return _float_array(pc.cast(arr, pa.float64()))


def _caster(target: pa.DataType) -> Callable[[pa.Array], NDArray[np.int64]]:
    def cast(arr: pa.Array) -> NDArray[np.int64]:
        return _int_array(pc.cast(pc.cast(arr, target), pa.int64()))
    return cast


def _float_array(arr: pa.Array) -> NDArray[np.float64]:
    return np.asarray(to_numpy(arr, np.nan), dtype=np.float64)


def _int_array(arr: pa.Array) -> NDArray[np.int64]:
    return np.asarray(to_numpy(arr, 0), dtype=np.int64)


def _mask(arr: pa.Array) -> NDArray[np.bool_]:
    return np.asarray(to_numpy(arr, False), dtype=bool)


# details ----------------------------------------------------------------------------------------
def _describe(chunk: RawChunk, bad: NDArray[np.intp], code: NDArray[np.int8],
              culprit: NDArray[np.int16], columns: list[str], values: NDArray[np.float64],
              numeric: list[str], rules: Rules) -> list[Rejection]:
    """A rejection (line, raw text, code, detail) for each bad row."""
    if len(bad) == 0:
        return []
    texts = chunk.texts(bad)
    shown: dict[str, list[Any]] = {}
    for column in {columns[c] for c in culprit[bad]}:
        shown[column] = chunk.columns[column].take(from_numpy(bad)).to_pylist()
    out = []
    for i, row in enumerate(bad):
        column = columns[culprit[row]]
        reason = _CODES[code[row]]
        value = shown[column][i]
        if reason == "out_of_range":
            low, high = rules.ranges[column]
            number = values[row, numeric.index(column)]
            detail = f"{column} = {number:g} is outside the plausible range [{low:g}, {high:g}]"
        else:
            detail = _DETAILS[reason](column, value, rules)
        out.append(Rejection(int(chunk.lines[row]), texts[i], reason, detail))
    return out


def _when(value: Any) -> str:
    return value.isoformat(sep=" ") if isinstance(value, datetime) else quote_value(value)


_DETAILS: dict[str, Callable[[str, Any, Rules], str]] = {
    "empty_field": lambda c, v, r: f"{c} is empty",
    "not_a_number": lambda c, v, r: f"{c} is {quote_value(v)}, not a number",
    "not_finite": lambda c, v, r: f"{c} is {quote_value(v)}; only finite numbers are allowed",
    "too_large": lambda c, v, r: (f"{c} is {quote_value(v)}; numbers beyond ±{MAGNITUDE_LIMIT:g} "
                                  "are refused, so that sums of squares over up to "
                                  f"{MAGNITUDE_ROWS:g} rows stay finite"),
    "bad_time": lambda c, v, r: (f"{c} is {quote_value(v)}, not an ISO 8601 time such as "
                                 "2026-03-14 08:30 or 2026-03-14T08:30:00+01:00"),
    "dst_gap": lambda c, v, r: (f"{c} {_when(v)} does not exist in {r.zone.key} (the clocks "
                                "skipped it); give the time with its UTC offset"),
    "dst_ambiguous": lambda c, v, r: (f"{c} {_when(v)} happens twice in {r.zone.key} (the "
                                      "clocks were turned back); give it with its UTC offset"),
    "bad_id": lambda c, v, r: (f"{c} is empty" if not str(v or "").strip() else
                               f"{c} contains a NUL character" if "\x00" in str(v) else
                               f"{c} has {len(str(v).strip())} characters; at most "
                               f"{KEY_LIMIT} are allowed"),
    "too_early": lambda c, v, r: (f"{c} {_when(v)} is before {r.earliest_day.isoformat()}, "
                                  "the earliest plausible day (set ingest.earliest_day earlier "
                                  "if the data really are that old)"),
    "before_retention": lambda c, v, r: (
        f"{c} {_when(v)} falls on a day whose rows were pruned (retention keeps rows from "
        f"{r.kept_from.isoformat() if r.kept_from else '?'}); the day's check cannot take "
        "rows any more"),
    "future_time": lambda c, v, r: (f"{c} {_when(v)} is later than now "
                                    f"({r.now.astimezone(r.zone):%Y-%m-%d %H:%M %Z}) plus "
                                    f"{r.future_tolerance / timedelta(minutes=1):g} min"),
}
