"""Day checks keep the state the next day continues from in a typed ``state`` document.

Before, the CUSUM run onsets and sums and the last restart day sat in ``details`` next to the
figures and were picked apart by hand. Existing rows get their ``state`` from those keys and
the CUSUM columns, so checked days continue exactly where they stood.

Revision ID: 0002
Revises: 0001
Create Date: 2026-12-02
"""

from __future__ import annotations

from collections.abc import Sequence
from typing import Any

import sqlalchemy as sa
from alembic import op

revision: str = "0002"
down_revision: str | None = "0001"
branch_labels: str | Sequence[str] | None = None
depends_on: str | Sequence[str] | None = None

_checks = sa.table(
    "day_checks",
    sa.column("model_id", sa.Integer), sa.column("day", sa.Date),
    sa.column("cusum_upper", sa.Float), sa.column("cusum_lower", sa.Float),
    sa.column("cusum_upper_run", sa.Integer), sa.column("cusum_lower_run", sa.Integer),
    sa.column("details", sa.JSON), sa.column("state", sa.JSON),
)


def state_from_details(row: Any) -> dict[str, Any]:
    """The typed state document of a check stored before this revision."""
    details = dict(row.details or {})
    cusum = details.get("cusum") or {}
    return {
        "cusum": {"upper": row.cusum_upper, "lower": row.cusum_lower,
                  "upper_run": row.cusum_upper_run, "lower_run": row.cusum_lower_run},
        "upper": {"onset": cusum.get("upper_onset"), "resid": cusum.get("upper_resid", 0.0),
                  "rows": cusum.get("upper_rows", 0)},
        "lower": {"onset": cusum.get("lower_onset"), "resid": cusum.get("lower_resid", 0.0),
                  "rows": cusum.get("lower_rows", 0)},
        "fresh_from": details.get("fresh_from"),
    }


def upgrade() -> None:
    with op.batch_alter_table("day_checks") as batch:
        batch.add_column(sa.Column("state", sa.JSON(), nullable=True))
    conn = op.get_bind()
    rows = conn.execute(sa.select(_checks)).fetchall()
    for row in rows:
        conn.execute(_checks.update()
                     .where(_checks.c.model_id == row.model_id, _checks.c.day == row.day)
                     .values(state=state_from_details(row)))
    with op.batch_alter_table("day_checks") as batch:
        batch.alter_column("state", existing_type=sa.JSON(), nullable=False)


def downgrade() -> None:
    conn = op.get_bind()
    rows = conn.execute(sa.select(_checks)).fetchall()
    for row in rows:
        state = dict(row.state or {})
        details = dict(row.details or {})
        upper, lower = state.get("upper") or {}, state.get("lower") or {}
        details["fresh_from"] = state.get("fresh_from")
        details["cusum"] = {**(details.get("cusum") or {}),
                            "upper_onset": upper.get("onset"), "upper_resid": upper.get("resid"),
                            "upper_rows": upper.get("rows"), "lower_onset": lower.get("onset"),
                            "lower_resid": lower.get("resid"), "lower_rows": lower.get("rows")}
        conn.execute(_checks.update()
                     .where(_checks.c.model_id == row.model_id, _checks.c.day == row.day)
                     .values(details=details))
    with op.batch_alter_table("day_checks") as batch:
        batch.drop_column("state")
