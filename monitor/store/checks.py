"""Day checks: one row per model and day, every figure of the check plus the CUSUM state."""

from __future__ import annotations

from dataclasses import asdict, dataclass, field, fields
from datetime import date, datetime
from typing import Any

from sqlalchemy import Connection, and_, delete, func, insert, select

from monitor.store.schema import day_checks, day_stats, jsonable


@dataclass(frozen=True)
class DayCheck:
    """The stored result of checking one model on one day."""

    model_id: int
    day: date
    version_id: int
    stats_revision: int
    n: int
    covered: int
    extrapolated: int
    coverage: float | None
    mean_residual: float | None
    window_n: int
    window_covered: int
    window_coverage: float | None
    wilson_low: float | None
    wilson_high: float | None
    coverage_p_low: float | None
    coverage_p_high: float | None
    cusum_u: float | None
    cusum_upper: float
    cusum_lower: float
    cusum_upper_run: int
    cusum_lower_run: int
    cusum_h: float
    cusum_signal: bool
    cusum_onset: date | None
    cusum_shift: float | None
    slope_statistic: float | None
    slope_pvalue: float | None
    slope_method: str | None
    chow_statistic: float | None
    chow_pvalue: float | None
    change_day: date | None
    supf_statistic: float | None
    supf_pvalue: float | None
    spread_ratio: float | None
    spread_pvalue: float | None
    status: str
    status_since: date
    reasons: list[str]
    details: dict[str, Any]
    checked_at: datetime
    model: str = field(default="", compare=False)

    def row(self) -> dict[str, Any]:
        values = {f.name: getattr(self, f.name) for f in fields(self) if f.name != "model"}
        values["reasons"] = list(self.reasons)
        values["details"] = jsonable(self.details)
        for key, value in values.items():
            if isinstance(value, float) and value != value:
                values[key] = None
        return values

    def as_dict(self) -> dict[str, Any]:
        return asdict(self)


_COLUMNS = [f.name for f in fields(DayCheck) if f.name != "model"]


def _record(row: Any, model: str = "") -> DayCheck:
    m = row._mapping
    return DayCheck(**{name: m[name] for name in _COLUMNS}, model=model)


def insert_checks(conn: Connection, checks: list[DayCheck]) -> None:
    if checks:
        conn.execute(insert(day_checks), [c.row() for c in checks])


def delete_checks_from(conn: Connection, model_id: int, first_day: date) -> int:
    result = conn.execute(delete(day_checks).where(day_checks.c.model_id == model_id,
                                                   day_checks.c.day >= first_day))
    return int(result.rowcount or 0)


def load_checks(conn: Connection, model_id: int, first_day: date | None = None,
                last_day: date | None = None, model: str = "") -> list[DayCheck]:
    query = select(day_checks).where(day_checks.c.model_id == model_id)
    if first_day is not None:
        query = query.where(day_checks.c.day >= first_day)
    if last_day is not None:
        query = query.where(day_checks.c.day <= last_day)
    return [_record(r, model) for r in conn.execute(query.order_by(day_checks.c.day))]


def last_check(conn: Connection, model_id: int, before: date | None = None,
               model: str = "") -> DayCheck | None:
    query = select(day_checks).where(day_checks.c.model_id == model_id)
    if before is not None:
        query = query.where(day_checks.c.day < before)
    row = conn.execute(query.order_by(day_checks.c.day.desc()).limit(1)).first()
    return _record(row, model) if row is not None else None


def earliest_stale_day(conn: Connection, model_id: int) -> date | None:
    """The first checked day whose observations changed after it was checked.

    A day is stale when rows arrived for it later: its ``day_stats.revision`` no longer equals
    the revision the check saw (a day checked empty saw revision 0).
    """
    joined = day_stats.join(day_checks, and_(day_checks.c.model_id == day_stats.c.model_id,
                                             day_checks.c.day == day_stats.c.day))
    query = (select(func.min(day_stats.c.day)).select_from(joined)
             .where(day_stats.c.model_id == model_id,
                    day_checks.c.stats_revision != day_stats.c.revision))
    return conn.execute(query).scalar()
