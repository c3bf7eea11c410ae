"""The database schema (SQLAlchemy Core). Changes only through Alembic revisions in migrations/.

Conventions: instants are stored in UTC (``UtcDateTime`` returns aware datetimes); observation
times are UTC epoch microseconds (compact and fast to bulk-insert); calendar days are ``Date``
in the configured time zone; arrays and small documents are JSON.
"""

from __future__ import annotations

from datetime import UTC, datetime
from typing import Any

from sqlalchemy import (
    JSON,
    BigInteger,
    Boolean,
    Column,
    Date,
    DateTime,
    Dialect,
    Float,
    ForeignKey,
    Index,
    Integer,
    LargeBinary,
    MetaData,
    String,
    Table,
    Text,
    UniqueConstraint,
)
from sqlalchemy.engine import CursorResult
from sqlalchemy.types import TypeDecorator

from monitor.config import MAX_PREDICTORS


class UtcDateTime(TypeDecorator[datetime]):
    """An aware datetime stored as UTC; naive values are refused rather than guessed."""

    impl = DateTime(timezone=True)
    cache_ok = True

    def process_bind_param(self, value: datetime | None, dialect: Dialect) -> datetime | None:
        if value is None:
            return None
        if value.tzinfo is None:
            raise ValueError("naive datetime given to the database; pass an aware one")
        value = value.astimezone(UTC)
        return value.replace(tzinfo=None) if dialect.name == "sqlite" else value

    def process_result_value(self, value: datetime | None, dialect: Dialect) -> datetime | None:
        if value is None:
            return None
        return value.replace(tzinfo=UTC) if value.tzinfo is None else value.astimezone(UTC)


naming = {
    "ix": "ix_%(column_0_label)s",
    "uq": "uq_%(table_name)s_%(column_0_name)s",
    "ck": "ck_%(table_name)s_%(constraint_name)s",
    "fk": "fk_%(table_name)s_%(column_0_name)s_%(referred_table_name)s",
    "pk": "pk_%(table_name)s",
}
metadata = MetaData(naming_convention=naming)

BigId = BigInteger().with_variant(Integer(), "sqlite")

models = Table(
    "models", metadata,
    Column("id", Integer, primary_key=True),
    Column("name", String(100), nullable=False, unique=True),
    Column("response", String(200), nullable=False),
    Column("predictors", JSON, nullable=False),
    Column("time_column", String(200), nullable=False),
    Column("id_column", String(200)),
    Column("created_at", UtcDateTime, nullable=False),
)

versions = Table(
    "versions", metadata,
    Column("id", Integer, primary_key=True),
    Column("model_id", ForeignKey("models.id", ondelete="CASCADE"), nullable=False),
    Column("number", Integer, nullable=False),
    Column("state", String(10), nullable=False),  # active | candidate | retired
    Column("source", String(10), nullable=False),  # fit | import
    Column("fit_start", Date),
    Column("fit_end", Date),
    Column("active_from", Date),  # first day scored against this version
    Column("active_until", Date),  # last day scored against it (None while active)
    Column("level", Float, nullable=False),
    Column("n", Integer),
    Column("dof", Integer, nullable=False),
    Column("s", Float, nullable=False),
    Column("r_squared", Float),
    Column("adj_r_squared", Float),
    Column("condition_number", Float),
    Column("terms", JSON, nullable=False),
    Column("coefficients", JSON, nullable=False),
    Column("std_errors", JSON),
    Column("covariance", JSON),
    Column("xmean", JSON),
    Column("slope_inverse", JSON),
    Column("x_min", JSON),
    Column("x_max", JSON),
    Column("tau2", Float),
    Column("sigma_w2", Float),
    Column("dispersion", Float),
    Column("cusum_k", Float),
    Column("cusum_h", Float),
    Column("reference", JSON),  # the fit window's day statistics (DayMoments.to_dict())
    Column("diagnostics", JSON),  # everything else the fit reports
    Column("created_at", UtcDateTime, nullable=False),
    Column("created_by", String(100)),
    Column("note", Text),
    UniqueConstraint("model_id", "number", name="uq_versions_model_number"),
)

batches = Table(
    "batches", metadata,
    Column("id", Integer, primary_key=True),
    Column("model_id", ForeignKey("models.id", ondelete="CASCADE"), nullable=False),
    Column("source", Text, nullable=False),
    Column("file_hash", String(64)),
    Column("file_size", BigInteger),
    Column("strict", Boolean, nullable=False),
    Column("status", String(10), nullable=False),  # complete | rejected
    Column("read", Integer, nullable=False),
    Column("accepted", Integer, nullable=False),
    Column("duplicates", Integer, nullable=False),
    Column("rejected", Integer, nullable=False),
    Column("reasons", JSON, nullable=False),  # {reason code: count}
    Column("first_day", Date),
    Column("last_day", Date),
    Column("started_at", UtcDateTime, nullable=False),
    Column("finished_at", UtcDateTime),
    Index("ix_batches_model_hash", "model_id", "file_hash"),
)

rejected_rows = Table(
    "rejected_rows", metadata,
    Column("id", BigId, primary_key=True),
    Column("batch_id", ForeignKey("batches.id", ondelete="CASCADE"), nullable=False, index=True),
    Column("line", Integer, nullable=False),
    Column("raw", Text, nullable=False),
    Column("reason", String(40), nullable=False),
    Column("detail", Text, nullable=False),
)

# No foreign keys: PostgreSQL would check both references of every row stored (half of an
# ingest's time on the server). An ingest holds the model's row and writes its own batch's id;
# ``model delete`` locks the model's row, then deletes its rows (migration 0007).
observations = Table(
    "observations", metadata,
    Column("id", BigId, primary_key=True),
    Column("model_id", Integer, nullable=False),
    Column("batch_id", Integer, nullable=False),
    Column("obs_key", String(200), nullable=False),
    Column("observed_at_us", BigInteger, nullable=False),  # UTC epoch microseconds
    Column("day", Date, nullable=False),
    Column("y", Float, nullable=False),
    *(Column(f"x{i}", Float) for i in range(1, MAX_PREDICTORS + 1)),
    UniqueConstraint("model_id", "obs_key", name="uq_observations_model_key"),
    Index("ix_observations_model_day", "model_id", "day"),
)

# Rows an explicit correction (``ingest --replace``) replaced: the values as they were stored,
# kept for the audit trail, with the batch that replaced them.
replaced_rows = Table(
    "replaced_rows", metadata,
    Column("id", BigId, primary_key=True),
    Column("model_id", ForeignKey("models.id", ondelete="CASCADE"), nullable=False),
    Column("batch_id", ForeignKey("batches.id", ondelete="CASCADE"), nullable=False, index=True),
    Column("old_batch_id", Integer, nullable=False),  # the batch that had stored them
    Column("obs_key", String(200), nullable=False),
    Column("observed_at_us", BigInteger, nullable=False),
    Column("day", Date, nullable=False),
    Column("y", Float, nullable=False),
    *(Column(f"x{i}", Float) for i in range(1, MAX_PREDICTORS + 1)),
    Column("replaced_at", UtcDateTime, nullable=False),
    Index("ix_replaced_rows_model_key", "model_id", "obs_key"),
)

day_stats = Table(
    "day_stats", metadata,
    Column("model_id", ForeignKey("models.id", ondelete="CASCADE"), primary_key=True),
    Column("day", Date, primary_key=True),
    Column("n", Integer, nullable=False),
    Column("moments", JSON, nullable=False),  # monitor.stats.moments.Moments.to_dict()
    Column("revision", Integer, nullable=False),  # grows whenever rows are added to the day
    Column("updated_at", UtcDateTime, nullable=False),
)

day_checks = Table(
    "day_checks", metadata,
    Column("model_id", ForeignKey("models.id", ondelete="CASCADE"), primary_key=True),
    Column("day", Date, primary_key=True),
    Column("version_id", ForeignKey("versions.id"), nullable=False),
    Column("stats_revision", Integer, nullable=False),  # day_stats.revision that was checked
    Column("n", Integer, nullable=False),
    Column("covered", Integer, nullable=False),
    Column("extrapolated", Integer, nullable=False),
    Column("coverage", Float),
    Column("mean_residual", Float),
    Column("window_n", Integer, nullable=False),
    Column("window_covered", Integer, nullable=False),
    Column("window_coverage", Float),
    Column("wilson_low", Float),
    Column("wilson_high", Float),
    Column("coverage_p_low", Float),
    Column("coverage_p_high", Float),
    Column("cusum_u", Float),
    Column("cusum_upper", Float, nullable=False),
    Column("cusum_lower", Float, nullable=False),
    Column("cusum_upper_run", Integer, nullable=False),
    Column("cusum_lower_run", Integer, nullable=False),
    Column("cusum_h", Float, nullable=False),
    Column("cusum_signal", Boolean, nullable=False),
    Column("cusum_onset", Date),
    Column("cusum_shift", Float),
    Column("slope_statistic", Float),
    Column("slope_pvalue", Float),
    Column("slope_method", String(12)),
    Column("chow_statistic", Float),
    Column("chow_pvalue", Float),
    Column("change_day", Date),
    Column("supf_statistic", Float),
    Column("supf_pvalue", Float),
    Column("spread_ratio", Float),
    Column("spread_pvalue", Float),
    Column("status", String(6), nullable=False),
    Column("status_since", Date, nullable=False),
    Column("reasons", JSON, nullable=False),
    Column("details", JSON, nullable=False),
    Column("state", JSON, nullable=False),  # monitor.domain.check.CheckState, for the next day
    Column("checked_at", UtcDateTime, nullable=False),
)

outbox = Table(
    "outbox", metadata,
    Column("id", Integer, primary_key=True),
    Column("dedupe_key", String(200), nullable=False, unique=True),
    Column("recipient", String(320), nullable=False),
    Column("subject", Text, nullable=False),
    Column("body_text", Text, nullable=False),
    Column("body_html", Text),
    Column("chart_png", LargeBinary),
    Column("status", String(10), nullable=False),  # pending | sent | failed
    Column("attempts", Integer, nullable=False),
    Column("last_error", Text),
    Column("created_at", UtcDateTime, nullable=False),
    Column("next_attempt_at", UtcDateTime, nullable=False),
    Column("sent_at", UtcDateTime),
    # the retry horizon counts from here: queueing, or the last 'alerts --retry-failed'
    Column("retry_since", UtcDateTime),
)

# which (model, night) checks the alerts have considered: a check without a row here is news
# not yet queued, whatever process made it (rows are kept when late rows recheck the day)
queued_nights = Table(
    "queued_nights", metadata,
    Column("model_id", ForeignKey("models.id", ondelete="CASCADE"), primary_key=True),
    Column("day", Date, primary_key=True),
    Column("queued_at", UtcDateTime, nullable=False),
)

audit_log = Table(
    "audit_log", metadata,
    Column("id", Integer, primary_key=True),
    Column("at", UtcDateTime, nullable=False),
    Column("model_id", ForeignKey("models.id", ondelete="CASCADE")),
    # fit | import | promote | rollback | ack | failure
    Column("action", String(20), nullable=False),
    Column("actor", String(100), nullable=False),
    Column("reason", Text),
    Column("version_id", ForeignKey("versions.id")),
    Column("effective_day", Date),
    Column("details", JSON),
)

scheduler_lease = Table(
    "scheduler_lease", metadata,
    Column("name", String(50), primary_key=True),
    Column("holder", String(200)),
    Column("acquired_at", UtcDateTime),
    Column("expires_at", UtcDateTime),
    Column("heartbeat_at", UtcDateTime),
    Column("last_run_started_at", UtcDateTime),
    Column("last_run_finished_at", UtcDateTime),
    Column("last_run_status", String(20)),
)


# several workers share a night: a round per (night, run), a claim per (round, model)
night_rounds = Table(
    "night_rounds", metadata,
    Column("id", Integer, primary_key=True),
    Column("through", Date, nullable=False),  # the night: checks run through this day
    Column("seq", Integer, nullable=False),  # 1 for the night's first round, then 2, ...
    Column("opened_at", UtcDateTime, nullable=False),
    Column("opened_by", String(200), nullable=False),
    Column("wrap_holder", String(200)),  # the worker composing the digest, pruning, ...
    Column("wrap_expires_at", UtcDateTime),
    Column("wrapped_at", UtcDateTime),
    UniqueConstraint("through", "seq", name="uq_night_rounds_through_seq"),
)

night_claims = Table(
    "night_claims", metadata,
    Column("round_id", ForeignKey("night_rounds.id", ondelete="CASCADE"), primary_key=True),
    Column("model_id", ForeignKey("models.id", ondelete="CASCADE"), primary_key=True),
    Column("holder", String(200)),  # host:pid:tag of the worker checking it
    Column("claimed_at", UtcDateTime),
    Column("expires_at", UtcDateTime),  # renewed by the holder's heartbeat
    Column("done_at", UtcDateTime),
    Column("outcome", String(20)),  # checked | failed
    Column("takes", Integer, nullable=False, default=0),  # 2 or more: taken over
    # the claims still to do (done_at IS NULL), in the order workers take them: a seek, not a
    # scan of the round's done claims (a dialect's partial-index option would load that
    # dialect's module in every command, whatever the database)
    Index("ix_night_claims_open", "round_id", "done_at", "model_id"),
)


def utcnow() -> datetime:
    return datetime.now(UTC)


def predictor_columns(k: int) -> list[str]:
    """Storage columns for a model with ``k`` predictors, in order."""
    return [f"x{i}" for i in range(1, k + 1)]


def jsonable(value: Any) -> Any:
    """Floats as plain Python floats (NaN/inf as None) for JSON columns."""
    if isinstance(value, dict):
        return {str(k): jsonable(v) for k, v in value.items()}
    if isinstance(value, list | tuple):
        return [jsonable(v) for v in value]
    if hasattr(value, "tolist"):
        return jsonable(value.tolist())
    if isinstance(value, float) and (value != value or value in (float("inf"), float("-inf"))):
        return None
    return value


def inserted_id(result: CursorResult[Any]) -> int:
    """The primary key of the one row an INSERT just wrote."""
    key = result.inserted_primary_key
    assert key is not None, "not the result of a single-row INSERT"
    return int(key[0])
