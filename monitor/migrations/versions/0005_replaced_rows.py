"""Corrections: ``ingest --replace`` lets a corrected file's values win over stored ones; the
values it replaced are kept here, with the batch that replaced them, for the audit trail.

Revision ID: 0005
Revises: 0004
Create Date: 2026-12-03
"""

from __future__ import annotations

from collections.abc import Sequence

import sqlalchemy as sa
from alembic import op

from monitor.store.schema import MAX_PREDICTORS, BigId, UtcDateTime

revision: str = "0005"
down_revision: str | None = "0004"
branch_labels: str | Sequence[str] | None = None
depends_on: str | Sequence[str] | None = None


def upgrade() -> None:
    op.create_table(
        "replaced_rows",
        sa.Column("id", BigId, nullable=False),
        sa.Column("model_id", sa.Integer(), nullable=False),
        sa.Column("batch_id", sa.Integer(), nullable=False),
        sa.Column("old_batch_id", sa.Integer(), nullable=False),
        sa.Column("obs_key", sa.String(200), nullable=False),
        sa.Column("observed_at_us", sa.BigInteger(), nullable=False),
        sa.Column("day", sa.Date(), nullable=False),
        sa.Column("y", sa.Float(), nullable=False),
        *(sa.Column(f"x{i}", sa.Float()) for i in range(1, MAX_PREDICTORS + 1)),
        sa.Column("replaced_at", UtcDateTime(timezone=True), nullable=False),
        sa.ForeignKeyConstraint(["model_id"], ["models.id"],
                                name=op.f("fk_replaced_rows_model_id_models"),
                                ondelete="CASCADE"),
        sa.ForeignKeyConstraint(["batch_id"], ["batches.id"],
                                name=op.f("fk_replaced_rows_batch_id_batches"),
                                ondelete="CASCADE"),
        sa.PrimaryKeyConstraint("id", name=op.f("pk_replaced_rows")),
    )
    op.create_index(op.f("ix_replaced_rows_batch_id"), "replaced_rows", ["batch_id"])
    op.create_index("ix_replaced_rows_model_key", "replaced_rows", ["model_id", "obs_key"])


def downgrade() -> None:
    op.drop_index("ix_replaced_rows_model_key", table_name="replaced_rows")
    op.drop_index(op.f("ix_replaced_rows_batch_id"), table_name="replaced_rows")
    op.drop_table("replaced_rows")
