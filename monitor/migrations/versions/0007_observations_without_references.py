"""Observations without foreign keys: PostgreSQL checked both references of every stored row.

The two foreign keys of ``observations`` (to ``models`` and ``batches``) made PostgreSQL run two
reference-checking triggers per row, each a look-up and a row lock on the parent: about half of
what the server spent ingesting (1 M rows, ``tests/benchmarks/bench_ingest.py``: 12.9 s with
them, 6.3 s without). SQLite already skipped its checks during ingestion. What they guarded is
kept by the code: every row is written by an ingest that holds the model's row (``FOR KEY
SHARE`` on PostgreSQL, the write lock on SQLite) and belongs to the batch that ingest created;
``model delete`` locks the model's row before it deletes the model's rows, then the model.

On SQLite the table is rebuilt without them (batch mode: a copy of every row, once).

Revision ID: 0007
Revises: 0006
Create Date: 2026-12-05
"""

from __future__ import annotations

from collections.abc import Sequence

from alembic import op

revision: str = "0007"
down_revision: str | None = "0006"
branch_labels: str | Sequence[str] | None = None
depends_on: str | Sequence[str] | None = None

_REFERENCES = (("fk_observations_model_id_models", "models", "model_id", "CASCADE"),
               ("fk_observations_batch_id_batches", "batches", "batch_id", None))


def upgrade() -> None:
    with op.batch_alter_table("observations") as batch:
        for name, _, _, _ in _REFERENCES:
            batch.drop_constraint(name, type_="foreignkey")


def downgrade() -> None:
    with op.batch_alter_table("observations") as batch:
        for name, parent, column, ondelete in _REFERENCES:
            batch.create_foreign_key(name, parent, [column], ["id"], ondelete=ondelete)
