"""Initial schema: every table of the first release.

Revision ID: 0001
Revises:
Create Date: 2026-12-02
"""

from __future__ import annotations

from collections.abc import Sequence

import sqlalchemy as sa
from alembic import op

from monitor.store.schema import UtcDateTime

revision: str = "0001"
down_revision: str | None = None
branch_labels: str | Sequence[str] | None = None
depends_on: str | Sequence[str] | None = None

BIG_ID = sa.BigInteger().with_variant(sa.Integer(), "sqlite")


def upgrade() -> None:
    op.create_table(
        "models",
        sa.Column("id", sa.Integer(), nullable=False),
        sa.Column("name", sa.String(length=100), nullable=False),
        sa.Column("response", sa.String(length=200), nullable=False),
        sa.Column("predictors", sa.JSON(), nullable=False),
        sa.Column("time_column", sa.String(length=200), nullable=False),
        sa.Column("id_column", sa.String(length=200), nullable=True),
        sa.Column("created_at", UtcDateTime(timezone=True), nullable=False),
        sa.PrimaryKeyConstraint("id", name=op.f("pk_models")),
        sa.UniqueConstraint("name", name=op.f("uq_models_name")),
    )
    op.create_table(
        "outbox",
        sa.Column("id", sa.Integer(), nullable=False),
        sa.Column("dedupe_key", sa.String(length=200), nullable=False),
        sa.Column("recipient", sa.String(length=320), nullable=False),
        sa.Column("subject", sa.Text(), nullable=False),
        sa.Column("body_text", sa.Text(), nullable=False),
        sa.Column("body_html", sa.Text(), nullable=True),
        sa.Column("chart_png", sa.LargeBinary(), nullable=True),
        sa.Column("status", sa.String(length=10), nullable=False),
        sa.Column("attempts", sa.Integer(), nullable=False),
        sa.Column("last_error", sa.Text(), nullable=True),
        sa.Column("created_at", UtcDateTime(timezone=True), nullable=False),
        sa.Column("next_attempt_at", UtcDateTime(timezone=True), nullable=False),
        sa.Column("sent_at", UtcDateTime(timezone=True), nullable=True),
        sa.PrimaryKeyConstraint("id", name=op.f("pk_outbox")),
        sa.UniqueConstraint("dedupe_key", name=op.f("uq_outbox_dedupe_key")),
    )
    op.create_table(
        "scheduler_lease",
        sa.Column("name", sa.String(length=50), nullable=False),
        sa.Column("holder", sa.String(length=200), nullable=True),
        sa.Column("acquired_at", UtcDateTime(timezone=True), nullable=True),
        sa.Column("expires_at", UtcDateTime(timezone=True), nullable=True),
        sa.Column("heartbeat_at", UtcDateTime(timezone=True), nullable=True),
        sa.Column("last_run_started_at", UtcDateTime(timezone=True), nullable=True),
        sa.Column("last_run_finished_at", UtcDateTime(timezone=True), nullable=True),
        sa.Column("last_run_status", sa.String(length=20), nullable=True),
        sa.PrimaryKeyConstraint("name", name=op.f("pk_scheduler_lease")),
    )
    op.create_table(
        "batches",
        sa.Column("id", sa.Integer(), nullable=False),
        sa.Column("model_id", sa.Integer(), nullable=False),
        sa.Column("source", sa.Text(), nullable=False),
        sa.Column("file_hash", sa.String(length=64), nullable=True),
        sa.Column("file_size", sa.BigInteger(), nullable=True),
        sa.Column("strict", sa.Boolean(), nullable=False),
        sa.Column("status", sa.String(length=10), nullable=False),
        sa.Column("read", sa.Integer(), nullable=False),
        sa.Column("accepted", sa.Integer(), nullable=False),
        sa.Column("duplicates", sa.Integer(), nullable=False),
        sa.Column("rejected", sa.Integer(), nullable=False),
        sa.Column("reasons", sa.JSON(), nullable=False),
        sa.Column("first_day", sa.Date(), nullable=True),
        sa.Column("last_day", sa.Date(), nullable=True),
        sa.Column("started_at", UtcDateTime(timezone=True), nullable=False),
        sa.Column("finished_at", UtcDateTime(timezone=True), nullable=True),
        sa.ForeignKeyConstraint(
            ["model_id"], ["models.id"], name=op.f("fk_batches_model_id_models"), ondelete="CASCADE"
        ),
        sa.PrimaryKeyConstraint("id", name=op.f("pk_batches")),
    )
    op.create_index(op.f("ix_batches_model_hash"), "batches", ["model_id", "file_hash"])
    op.create_table(
        "day_stats",
        sa.Column("model_id", sa.Integer(), nullable=False),
        sa.Column("day", sa.Date(), nullable=False),
        sa.Column("n", sa.Integer(), nullable=False),
        sa.Column("moments", sa.JSON(), nullable=False),
        sa.Column("revision", sa.Integer(), nullable=False),
        sa.Column("updated_at", UtcDateTime(timezone=True), nullable=False),
        sa.ForeignKeyConstraint(
            ["model_id"],
            ["models.id"],
            name=op.f("fk_day_stats_model_id_models"),
            ondelete="CASCADE",
        ),
        sa.PrimaryKeyConstraint("model_id", "day", name=op.f("pk_day_stats")),
    )
    op.create_table(
        "versions",
        sa.Column("id", sa.Integer(), nullable=False),
        sa.Column("model_id", sa.Integer(), nullable=False),
        sa.Column("number", sa.Integer(), nullable=False),
        sa.Column("state", sa.String(length=10), nullable=False),
        sa.Column("source", sa.String(length=10), nullable=False),
        sa.Column("fit_start", sa.Date(), nullable=True),
        sa.Column("fit_end", sa.Date(), nullable=True),
        sa.Column("active_from", sa.Date(), nullable=True),
        sa.Column("active_until", sa.Date(), nullable=True),
        sa.Column("level", sa.Float(), nullable=False),
        sa.Column("n", sa.Integer(), nullable=True),
        sa.Column("dof", sa.Integer(), nullable=False),
        sa.Column("s", sa.Float(), nullable=False),
        sa.Column("r_squared", sa.Float(), nullable=True),
        sa.Column("adj_r_squared", sa.Float(), nullable=True),
        sa.Column("condition_number", sa.Float(), nullable=True),
        sa.Column("terms", sa.JSON(), nullable=False),
        sa.Column("coefficients", sa.JSON(), nullable=False),
        sa.Column("std_errors", sa.JSON(), nullable=True),
        sa.Column("covariance", sa.JSON(), nullable=True),
        sa.Column("xmean", sa.JSON(), nullable=True),
        sa.Column("slope_inverse", sa.JSON(), nullable=True),
        sa.Column("x_min", sa.JSON(), nullable=True),
        sa.Column("x_max", sa.JSON(), nullable=True),
        sa.Column("tau2", sa.Float(), nullable=True),
        sa.Column("sigma_w2", sa.Float(), nullable=True),
        sa.Column("dispersion", sa.Float(), nullable=True),
        sa.Column("cusum_k", sa.Float(), nullable=True),
        sa.Column("cusum_h", sa.Float(), nullable=True),
        sa.Column("reference", sa.JSON(), nullable=True),
        sa.Column("diagnostics", sa.JSON(), nullable=True),
        sa.Column("created_at", UtcDateTime(timezone=True), nullable=False),
        sa.Column("created_by", sa.String(length=100), nullable=True),
        sa.Column("note", sa.Text(), nullable=True),
        sa.ForeignKeyConstraint(
            ["model_id"],
            ["models.id"],
            name=op.f("fk_versions_model_id_models"),
            ondelete="CASCADE",
        ),
        sa.PrimaryKeyConstraint("id", name=op.f("pk_versions")),
        sa.UniqueConstraint("model_id", "number", name="uq_versions_model_number"),
    )
    op.create_table(
        "audit_log",
        sa.Column("id", sa.Integer(), nullable=False),
        sa.Column("at", UtcDateTime(timezone=True), nullable=False),
        sa.Column("model_id", sa.Integer(), nullable=True),
        sa.Column("action", sa.String(length=20), nullable=False),
        sa.Column("actor", sa.String(length=100), nullable=False),
        sa.Column("reason", sa.Text(), nullable=True),
        sa.Column("version_id", sa.Integer(), nullable=True),
        sa.Column("effective_day", sa.Date(), nullable=True),
        sa.Column("details", sa.JSON(), nullable=True),
        sa.ForeignKeyConstraint(
            ["model_id"],
            ["models.id"],
            name=op.f("fk_audit_log_model_id_models"),
            ondelete="CASCADE",
        ),
        sa.ForeignKeyConstraint(
            ["version_id"], ["versions.id"], name=op.f("fk_audit_log_version_id_versions")
        ),
        sa.PrimaryKeyConstraint("id", name=op.f("pk_audit_log")),
    )
    op.create_table(
        "day_checks",
        sa.Column("model_id", sa.Integer(), nullable=False),
        sa.Column("day", sa.Date(), nullable=False),
        sa.Column("version_id", sa.Integer(), nullable=False),
        sa.Column("stats_revision", sa.Integer(), nullable=False),
        sa.Column("n", sa.Integer(), nullable=False),
        sa.Column("covered", sa.Integer(), nullable=False),
        sa.Column("extrapolated", sa.Integer(), nullable=False),
        sa.Column("coverage", sa.Float(), nullable=True),
        sa.Column("mean_residual", sa.Float(), nullable=True),
        sa.Column("window_n", sa.Integer(), nullable=False),
        sa.Column("window_covered", sa.Integer(), nullable=False),
        sa.Column("window_coverage", sa.Float(), nullable=True),
        sa.Column("wilson_low", sa.Float(), nullable=True),
        sa.Column("wilson_high", sa.Float(), nullable=True),
        sa.Column("coverage_p_low", sa.Float(), nullable=True),
        sa.Column("coverage_p_high", sa.Float(), nullable=True),
        sa.Column("cusum_u", sa.Float(), nullable=True),
        sa.Column("cusum_upper", sa.Float(), nullable=False),
        sa.Column("cusum_lower", sa.Float(), nullable=False),
        sa.Column("cusum_upper_run", sa.Integer(), nullable=False),
        sa.Column("cusum_lower_run", sa.Integer(), nullable=False),
        sa.Column("cusum_h", sa.Float(), nullable=False),
        sa.Column("cusum_signal", sa.Boolean(), nullable=False),
        sa.Column("cusum_onset", sa.Date(), nullable=True),
        sa.Column("cusum_shift", sa.Float(), nullable=True),
        sa.Column("slope_statistic", sa.Float(), nullable=True),
        sa.Column("slope_pvalue", sa.Float(), nullable=True),
        sa.Column("slope_method", sa.String(length=12), nullable=True),
        sa.Column("chow_statistic", sa.Float(), nullable=True),
        sa.Column("chow_pvalue", sa.Float(), nullable=True),
        sa.Column("change_day", sa.Date(), nullable=True),
        sa.Column("supf_statistic", sa.Float(), nullable=True),
        sa.Column("supf_pvalue", sa.Float(), nullable=True),
        sa.Column("spread_ratio", sa.Float(), nullable=True),
        sa.Column("spread_pvalue", sa.Float(), nullable=True),
        sa.Column("status", sa.String(length=6), nullable=False),
        sa.Column("status_since", sa.Date(), nullable=False),
        sa.Column("reasons", sa.JSON(), nullable=False),
        sa.Column("details", sa.JSON(), nullable=False),
        sa.Column("checked_at", UtcDateTime(timezone=True), nullable=False),
        sa.ForeignKeyConstraint(
            ["model_id"],
            ["models.id"],
            name=op.f("fk_day_checks_model_id_models"),
            ondelete="CASCADE",
        ),
        sa.ForeignKeyConstraint(
            ["version_id"], ["versions.id"], name=op.f("fk_day_checks_version_id_versions")
        ),
        sa.PrimaryKeyConstraint("model_id", "day", name=op.f("pk_day_checks")),
    )
    op.create_table(
        "observations",
        sa.Column("id", BIG_ID, nullable=False),
        sa.Column("model_id", sa.Integer(), nullable=False),
        sa.Column("batch_id", sa.Integer(), nullable=False),
        sa.Column("obs_key", sa.String(length=200), nullable=False),
        sa.Column("observed_at_us", sa.BigInteger(), nullable=False),
        sa.Column("day", sa.Date(), nullable=False),
        sa.Column("y", sa.Float(), nullable=False),
        sa.Column("x1", sa.Float(), nullable=True),
        sa.Column("x2", sa.Float(), nullable=True),
        sa.Column("x3", sa.Float(), nullable=True),
        sa.Column("x4", sa.Float(), nullable=True),
        sa.Column("x5", sa.Float(), nullable=True),
        sa.Column("x6", sa.Float(), nullable=True),
        sa.Column("x7", sa.Float(), nullable=True),
        sa.Column("x8", sa.Float(), nullable=True),
        sa.ForeignKeyConstraint(
            ["batch_id"], ["batches.id"], name=op.f("fk_observations_batch_id_batches")
        ),
        sa.ForeignKeyConstraint(
            ["model_id"],
            ["models.id"],
            name=op.f("fk_observations_model_id_models"),
            ondelete="CASCADE",
        ),
        sa.PrimaryKeyConstraint("id", name=op.f("pk_observations")),
        sa.UniqueConstraint("model_id", "obs_key", name="uq_observations_model_key"),
    )
    op.create_index(op.f("ix_observations_model_day"), "observations", ["model_id", "day"])
    op.create_table(
        "rejected_rows",
        sa.Column("id", BIG_ID, nullable=False),
        sa.Column("batch_id", sa.Integer(), nullable=False),
        sa.Column("line", sa.Integer(), nullable=False),
        sa.Column("raw", sa.Text(), nullable=False),
        sa.Column("reason", sa.String(length=40), nullable=False),
        sa.Column("detail", sa.Text(), nullable=False),
        sa.ForeignKeyConstraint(
            ["batch_id"],
            ["batches.id"],
            name=op.f("fk_rejected_rows_batch_id_batches"),
            ondelete="CASCADE",
        ),
        sa.PrimaryKeyConstraint("id", name=op.f("pk_rejected_rows")),
    )
    op.create_index(op.f("ix_rejected_rows_batch_id"), "rejected_rows", ["batch_id"])


def downgrade() -> None:
    op.drop_index(op.f("ix_rejected_rows_batch_id"), table_name="rejected_rows")
    op.drop_table("rejected_rows")
    op.drop_index(op.f("ix_observations_model_day"), table_name="observations")
    op.drop_table("observations")
    op.drop_table("day_checks")
    op.drop_table("audit_log")
    op.drop_table("versions")
    op.drop_table("day_stats")
    op.drop_index(op.f("ix_batches_model_hash"), table_name="batches")
    op.drop_table("batches")
    op.drop_table("scheduler_lease")
    op.drop_table("outbox")
    op.drop_table("models")
