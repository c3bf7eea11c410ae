"""Several workers share a night: ``night_rounds`` and ``night_claims``.

Each nightly run joins (or opens) a round for its night; every model of the round is claimed by
one worker at a time (PostgreSQL's ``FOR UPDATE SKIP LOCKED``), with an expiry the holder's
heartbeat renews, so a killed worker's models are taken over; the worker that finds the round
done composes the night's digest, once.

Revision ID: 0006
Revises: 0005
Create Date: 2026-12-03
"""

from __future__ import annotations

from collections.abc import Sequence

import sqlalchemy as sa
from alembic import op

from monitor.store.schema import UtcDateTime

revision: str = "0006"
down_revision: str | None = "0005"
branch_labels: str | Sequence[str] | None = None
depends_on: str | Sequence[str] | None = None


def upgrade() -> None:
    op.create_table(
        "night_rounds",
        sa.Column("id", sa.Integer(), nullable=False),
        sa.Column("through", sa.Date(), nullable=False),
        sa.Column("seq", sa.Integer(), nullable=False),
        sa.Column("opened_at", UtcDateTime(timezone=True), nullable=False),
        sa.Column("opened_by", sa.String(200), nullable=False),
        sa.Column("wrap_holder", sa.String(200)),
        sa.Column("wrap_expires_at", UtcDateTime(timezone=True)),
        sa.Column("wrapped_at", UtcDateTime(timezone=True)),
        sa.PrimaryKeyConstraint("id", name=op.f("pk_night_rounds")),
        sa.UniqueConstraint("through", "seq", name="uq_night_rounds_through_seq"),
    )
    op.create_table(
        "night_claims",
        sa.Column("round_id", sa.Integer(), nullable=False),
        sa.Column("model_id", sa.Integer(), nullable=False),
        sa.Column("holder", sa.String(200)),
        sa.Column("claimed_at", UtcDateTime(timezone=True)),
        sa.Column("expires_at", UtcDateTime(timezone=True)),
        sa.Column("done_at", UtcDateTime(timezone=True)),
        sa.Column("outcome", sa.String(20)),
        sa.Column("takes", sa.Integer(), nullable=False),
        sa.ForeignKeyConstraint(["round_id"], ["night_rounds.id"],
                                name=op.f("fk_night_claims_round_id_night_rounds"),
                                ondelete="CASCADE"),
        sa.ForeignKeyConstraint(["model_id"], ["models.id"],
                                name=op.f("fk_night_claims_model_id_models"),
                                ondelete="CASCADE"),
        sa.PrimaryKeyConstraint("round_id", "model_id", name=op.f("pk_night_claims")),
    )
    op.create_index("ix_night_claims_open", "night_claims",
                    ["round_id", "done_at", "model_id"])


def downgrade() -> None:
    op.drop_index("ix_night_claims_open", table_name="night_claims")
    op.drop_table("night_claims")
    op.drop_table("night_rounds")
