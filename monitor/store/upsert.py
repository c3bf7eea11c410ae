"""The dialect's own ``INSERT`` (with ``ON CONFLICT``) for the connection at hand.

The PostgreSQL dialect module is imported here, on first use, and never by SQLite users: its
import alone costs a noticeable share of a short command's start-up.
"""

from __future__ import annotations

from typing import Any

from sqlalchemy import Connection, Table


def insert_for(conn: Connection, table: Table) -> Any:
    """``INSERT INTO table`` built by the connection's dialect (it offers ``on_conflict_*``)."""
    if conn.dialect.name == "postgresql":
        from sqlalchemy.dialects import postgresql

        return postgresql.insert(table)
    from sqlalchemy.dialects import sqlite

    return sqlite.insert(table)
