"""Alembic environment for fitwatch.

``fitwatch init`` (``monitor.store.migrate.upgrade_database``) passes its open connection in
``config.attributes["connection"]``. Run by hand (``alembic -c migrations/alembic.ini ...``), the
database URL comes from ``-x url=...`` or else from the fitwatch settings (``--config`` order:
``$FITWATCH_CONFIG``, ``./fitwatch.toml``, defaults).
"""

from __future__ import annotations

from alembic import context
from sqlalchemy import Connection

from monitor.store.schema import metadata

config = context.config
target_metadata = metadata


def run_with(connection: Connection) -> None:
    context.configure(
        connection=connection,
        target_metadata=target_metadata,
        render_as_batch=connection.dialect.name == "sqlite",  # SQLite cannot ALTER most things
        compare_type=True,
    )
    with context.begin_transaction():
        context.run_migrations()


def run_offline() -> None:
    url = context.get_x_argument(as_dictionary=True).get("url", "sqlite:///fitwatch.db")
    context.configure(url=url, target_metadata=target_metadata, literal_binds=True,
                      render_as_batch=url.startswith("sqlite"))
    with context.begin_transaction():
        context.run_migrations()


def run_online() -> None:
    connection = config.attributes.get("connection")
    if connection is not None:
        run_with(connection)
        return
    from monitor.config import load_settings
    from monitor.store.engine import open_engine

    url = context.get_x_argument(as_dictionary=True).get("url")
    engine = open_engine(url or load_settings().database_url)
    try:
        with engine.connect() as conn:
            run_with(conn)
            conn.commit()
    finally:
        engine.dispose()


if context.is_offline_mode():
    run_offline()
else:
    run_online()
