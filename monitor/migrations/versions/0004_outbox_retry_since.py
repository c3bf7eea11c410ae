"""The outbox measures its retry horizon from ``retry_since``, which a resend restarts.

Before, a row was given up after 10 failed attempts (about a day of backoff), so a weekend
outage of the mail server dropped the alerts; now a row is retried for days (RFC 5321
§4.5.4.1: a give-up time of at least 4-5 days) counted from when it was queued or last sent
back to the queue by ``fitwatch alerts --retry-failed``. Existing rows count from their
``created_at``.

Revision ID: 0004
Revises: 0003
Create Date: 2026-12-03
"""

from __future__ import annotations

from collections.abc import Sequence

import sqlalchemy as sa
from alembic import op

from monitor.store.schema import UtcDateTime

revision: str = "0004"
down_revision: str | None = "0003"
branch_labels: str | Sequence[str] | None = None
depends_on: str | Sequence[str] | None = None


def upgrade() -> None:
    with op.batch_alter_table("outbox") as batch:
        batch.add_column(sa.Column("retry_since", UtcDateTime(timezone=True), nullable=True))
    rows = sa.table("outbox", sa.column("retry_since", UtcDateTime()),
                    sa.column("created_at", UtcDateTime()))
    op.execute(rows.update().values(retry_since=rows.c.created_at))


def downgrade() -> None:
    with op.batch_alter_table("outbox") as batch:
        batch.drop_column("retry_since")
