"""Creating, upgrading and checking the schema with Alembic (``fitwatch init``).

Only ``init``, the demo and a database that is not at :data:`~monitor.migrations.HEAD_REVISION`
load Alembic; everyday commands check the revision with one query in :mod:`monitor.store.engine`.
"""

from __future__ import annotations

import logging
from dataclasses import dataclass

from alembic import command
from alembic.autogenerate import compare_metadata
from alembic.config import Config
from alembic.runtime.migration import MigrationContext
from alembic.script import ScriptDirectory
from alembic.util import CommandError
from sqlalchemy import Engine, func, inspect, select
from sqlalchemy.exc import SQLAlchemyError

from monitor.config import Settings
from monitor.errors import DatabaseError
from monitor.store.engine import (
    current_revision,
    db_error,
    describe_url,
    driver_connection,
    open_engine,
    warn_if_shared,
)
from monitor.store.schema import metadata

log = logging.getLogger(__name__)

SCRIPT_LOCATION = "monitor:migrations"  # a package resource: found wherever monitor is installed
MIGRATION_LOCK = 0x66776D67  # pg_advisory_xact_lock key serialising upgrades ("fwmg")


def alembic_config() -> Config:
    config = Config()
    config.set_main_option("script_location", SCRIPT_LOCATION)
    return config


def head_revision() -> str:
    head = ScriptDirectory.from_config(alembic_config()).get_current_head()
    if head is None:
        raise DatabaseError("the database migrations are missing; reinstall fitwatch")
    return head


def upgrade_database(engine: Engine) -> str:
    """Upgrade the schema to the newest revision (a no-op when current); returns the revision."""
    config = alembic_config()
    try:
        with engine.connect() as conn:
            sqlite = conn.dialect.name == "sqlite"
            if sqlite:  # batch migrations copy tables; cascades must not fire meanwhile
                driver_connection(conn).execute("PRAGMA foreign_keys = OFF")
            try:
                with conn.begin():
                    if not sqlite:  # two inits at once: the second waits, then finds head
                        conn.execute(select(func.pg_advisory_xact_lock(MIGRATION_LOCK)))
                    config.attributes["connection"] = conn
                    command.upgrade(config, "head")
                    if sqlite:
                        broken = conn.exec_driver_sql("PRAGMA foreign_key_check").fetchall()
                        if broken:
                            raise DatabaseError(f"the upgrade left {len(broken)} rows with "
                                                "dangling references; it was rolled back")
            finally:
                if sqlite:
                    driver_connection(conn).execute("PRAGMA foreign_keys = ON")
    except SQLAlchemyError as exc:
        raise db_error(engine, exc) from exc
    except CommandError as exc:  # e.g. a revision this program does not know
        raise DatabaseError(f"cannot upgrade the database ({describe_url(engine.url)}): {exc}; "
                            "was it written by a newer fitwatch?") from exc
    revision = current_revision(engine)
    assert revision is not None
    return revision


def downgrade_database(engine: Engine, revision: str = "base") -> None:
    """Downgrade the schema (used by tests and by people undoing an upgrade)."""
    config = alembic_config()
    with engine.begin() as conn:
        config.attributes["connection"] = conn
        command.downgrade(config, revision)


def explain_not_current(engine: Engine) -> DatabaseError:
    """Why the database is not at the revision this program needs, and what to do."""
    current = current_revision(engine)
    head = head_revision()
    where = describe_url(engine.url)
    if current is None:
        if _has_our_tables(engine):
            return DatabaseError(f"the database ({where}) has fitwatch's tables but no record of "
                                 "their schema revision (the alembic_version table is missing); "
                                 "run 'fitwatch init': it compares the tables with this "
                                 "version's schema and records the revision when they match")
        return DatabaseError(f"the database ({where}) is not set up; run 'fitwatch init'")
    known = {script.revision for script in
             ScriptDirectory.from_config(alembic_config()).walk_revisions()}
    if current in known:
        return DatabaseError(f"the database ({where}) is at revision {current}, this fitwatch "
                             f"needs {head}; run 'fitwatch init' to upgrade it")
    return DatabaseError(f"the database ({where}) is at revision {current}, which this "
                         "fitwatch does not know; it was written by a newer version")


# init -------------------------------------------------------------------------------------------
@dataclass(frozen=True)
class InitResult:
    """What ``fitwatch init`` did."""

    revision: str
    previous: str | None
    location: str
    recorded: bool = False  # the tables were there; only the lost revision record was written

    @property
    def changed(self) -> bool:
        return self.previous != self.revision

    def sentence(self) -> str:
        if self.recorded:
            return (f"database tables match revision {self.revision}; recorded it (the "
                    f"revision record was missing) ({self.location})")
        if self.previous is None:
            return f"database created at revision {self.revision} ({self.location})"
        if self.changed:
            return (f"database upgraded from revision {self.previous} to {self.revision} "
                    f"({self.location})")
        return f"database ready at revision {self.revision} ({self.location})"


def init_database(settings: Settings) -> InitResult:
    """Create the database or upgrade it to the newest revision; safe to run any number of times.

    A database whose tables exist without their revision record (the ``alembic_version``
    table lost, e.g. dropped by hand or left out of a partial restore) is compared with this
    version's schema: when nothing differs the revision is recorded, else the differences are
    named, instead of failing on "table already exists".
    """
    # the schedule is parsed when first used; init is where a new settings file is tried
    # first, so a cron the scheduler refuses is named here
    _ = settings.schedule.trigger
    engine = open_engine(settings.database_url)
    try:
        warn_if_shared(engine)
        previous = current_revision(engine)
        if previous is None and _has_our_tables(engine):
            # Another init may have committed its tables and their revision (one transaction)
            # between the two reads: then the record is there now and nothing is lost.
            now_at = current_revision(engine)
            if now_at is not None:
                return InitResult(now_at, now_at, describe_url(engine.url))
            return _record_lost_revision(engine)
        revision = upgrade_database(engine)
        return InitResult(revision, previous, describe_url(engine.url))
    finally:
        engine.dispose()


def _has_our_tables(engine: Engine) -> bool:
    try:
        names = set(inspect(engine).get_table_names())
    except SQLAlchemyError as exc:
        raise db_error(engine, exc) from exc
    return bool(names & {t.name for t in metadata.sorted_tables})


def _record_lost_revision(engine: Engine) -> InitResult:
    where = describe_url(engine.url)
    try:
        with engine.connect() as conn:
            context = MigrationContext.configure(conn, opts={"compare_type": True})
            differences = compare_metadata(context, metadata)
    except SQLAlchemyError as exc:
        raise db_error(engine, exc) from exc
    if differences:
        shown = "; ".join(str(d) for d in differences[:5])
        raise DatabaseError(f"the database ({where}) has fitwatch tables but no record of their "
                            f"schema revision, and they differ from this version's schema "
                            f"({len(differences)} difference(s): {shown}); restore it from a "
                            "backup, or point --db at another database")
    head = head_revision()
    config = alembic_config()
    with engine.connect() as conn, conn.begin():
        config.attributes["connection"] = conn
        command.stamp(config, head)
    log.warning("recorded schema revision %s for %s (its revision record was missing and the "
                "tables match)", head, where)
    return InitResult(head, None, where, recorded=True)
