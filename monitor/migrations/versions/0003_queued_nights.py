"""Alerts follow from the stored checks: ``queued_nights`` records which checks were queued.

Before, a run queued the nights it had itself just checked, so a process killed between a
check's commit and the queueing lost those nights' alerts for good. Now every stored check
without a ``queued_nights`` row is news not yet queued. Checks stored before this revision are
taken as already reported (they were, or the night passed long ago).

Revision ID: 0003
Revises: 0002
Create Date: 2026-12-03
"""

from __future__ import annotations

from collections.abc import Sequence
from datetime import UTC, datetime

import sqlalchemy as sa
from alembic import op

from monitor.store.schema import UtcDateTime

revision: str = "0003"
down_revision: str | None = "0002"
branch_labels: str | Sequence[str] | None = None
depends_on: str | Sequence[str] | None = None


def upgrade() -> None:
    op.create_table(
        "queued_nights",
        sa.Column("model_id", sa.Integer(), nullable=False),
        sa.Column("day", sa.Date(), nullable=False),
        sa.Column("queued_at", UtcDateTime(timezone=True), nullable=False),
        sa.ForeignKeyConstraint(["model_id"], ["models.id"],
                                name=op.f("fk_queued_nights_model_id_models"),
                                ondelete="CASCADE"),
        sa.PrimaryKeyConstraint("model_id", "day", name=op.f("pk_queued_nights")),
    )
    marks = sa.table("queued_nights", sa.column("model_id", sa.Integer),
                     sa.column("day", sa.Date), sa.column("queued_at", UtcDateTime()))
    checks = sa.table("day_checks", sa.column("model_id", sa.Integer), sa.column("day", sa.Date))
    now = sa.literal(datetime.now(UTC), UtcDateTime())
    op.execute(marks.insert().from_select(["model_id", "day", "queued_at"],
                                          sa.select(checks.c.model_id, checks.c.day, now)))


def downgrade() -> None:
    op.drop_table("queued_nights")
