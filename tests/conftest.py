"""Shared fixtures: fresh databases on SQLite and, when a server answers, on PostgreSQL.

- ``sqlite_url``: a new (not yet created) SQLite file under the test's tmp_path.
- ``postgres_url``: a throwaway PostgreSQL database for the whole session, created with a random
  name from the ``test`` database on 127.0.0.1:5432 (trust auth; user from $FITWATCH_TEST_PGUSER,
  $PGUSER or "postgres") and dropped at the end. Tests needing it skip, with the reason, when no
  server answers.
- ``backend``: "sqlite" and "postgresql" (parametrized; the latter marked ``postgres``).
- ``database_url``: an empty database of that backend (not even the schema).
- ``engine``: an engine on an empty database of that backend at the newest schema revision.
- ``make_settings``: settings for a database URL, in a non-UTC zone, with overrides.
- ``worlds``: the session's cache of prebuilt worlds (``tests/support/snapshots.py``): a world
  several tests start from is built once per backend and copied into each test's own database.
- ``demo``: the demo scenario run end to end once per session (``fitwatch demo``), for the tests
  that read what it printed, stored and mailed.
"""

from __future__ import annotations

import os
import secrets
import shutil
from collections.abc import Callable, Iterator
from pathlib import Path
from typing import Any

import pytest
from sqlalchemy import Engine, text

from monitor.config import Settings, parse_settings
from monitor.store.engine import open_engine
from monitor.store.migrate import upgrade_database
from monitor.store.schema import metadata
from tests.support.demo import DemoRun, leave_an_earlier_run, run_demo_command
from tests.support.snapshots import WorldCache

PG_HOST, PG_PORT = "127.0.0.1", 5432
TEST_ZONE = "Europe/Berlin"  # non-UTC with DST, on purpose (see DEVELOPERS.md, tests)


def _pg_user() -> str:
    return os.environ.get("FITWATCH_TEST_PGUSER") or os.environ.get("PGUSER") or "postgres"


@pytest.fixture
def sqlite_url(tmp_path: Path) -> str:
    return f"sqlite:///{tmp_path / 'fitwatch.db'}"


@pytest.fixture(scope="session")
def postgres_url() -> Iterator[str]:
    import psycopg

    user = _pg_user()
    try:
        admin = psycopg.connect(host=PG_HOST, port=PG_PORT, user=user, dbname="test",
                                connect_timeout=3, autocommit=True)
    except psycopg.Error as exc:
        reason = str(exc).strip().splitlines()[0] if str(exc).strip() else type(exc).__name__
        pytest.skip(f"no PostgreSQL at {PG_HOST}:{PG_PORT} (user {user}, database 'test'): "
                    f"{reason}")
    name = f"fitwatch_test_{secrets.token_hex(6)}"
    with admin:
        admin.execute(f'CREATE DATABASE "{name}"')
        try:
            yield f"postgresql://{user}@{PG_HOST}:{PG_PORT}/{name}"
        finally:
            admin.execute(f'DROP DATABASE IF EXISTS "{name}" WITH (FORCE)')


@pytest.fixture(params=["sqlite", pytest.param("postgresql", marks=pytest.mark.postgres)])
def backend(request: pytest.FixtureRequest) -> str:
    return str(request.param)


@pytest.fixture
def database_url(backend: str, sqlite_url: str, request: pytest.FixtureRequest) -> str:
    """A database with nothing in it, not even the schema."""
    if backend == "sqlite":
        return sqlite_url
    url: str = request.getfixturevalue("postgres_url")
    engine = open_engine(url)
    try:
        with engine.begin() as conn:
            names = [t.name for t in metadata.sorted_tables] + ["alembic_version"]
            conn.execute(text("DROP TABLE IF EXISTS " + ", ".join(f'"{n}"' for n in names)
                              + " CASCADE"))
    finally:
        engine.dispose()
    return url


@pytest.fixture(scope="session")
def _sqlite_template(tmp_path_factory: pytest.TempPathFactory) -> Path:
    path = tmp_path_factory.mktemp("template") / "fitwatch.db"
    engine = open_engine(f"sqlite:///{path}")
    try:
        upgrade_database(engine)
    finally:
        engine.dispose()  # the last connection checkpoints the WAL into the file
    return path


@pytest.fixture
def engine(backend: str, tmp_path: Path, request: pytest.FixtureRequest) -> Iterator[Engine]:
    """An empty database at the newest revision."""
    if backend == "sqlite":
        path = tmp_path / "fitwatch.db"
        shutil.copyfile(request.getfixturevalue("_sqlite_template"), path)
        path.chmod(0o600)
        url = f"sqlite:///{path}"
    else:
        url = request.getfixturevalue("postgres_url")
    eng = open_engine(url)
    try:
        if backend != "sqlite":
            upgrade_database(eng)
            with eng.begin() as conn:
                names = ", ".join(f'"{t.name}"' for t in metadata.sorted_tables)
                conn.execute(text(f"TRUNCATE {names} RESTART IDENTITY CASCADE"))
        yield eng
    finally:
        eng.dispose()


@pytest.fixture
def make_settings() -> Callable[..., Settings]:
    """``make_settings(url, **sections)``: settings in Europe/Berlin for a database URL."""
    def build(url: str, **sections: Any) -> Settings:
        document: dict[str, Any] = {"database": {"url": url},
                                    "schedule": {"timezone": TEST_ZONE}}
        document.update(sections)
        return parse_settings(document, "<test settings>")
    return build


@pytest.fixture(scope="session")
def worlds() -> WorldCache:
    return WorldCache()


@pytest.fixture(scope="session")
def demo(tmp_path_factory: pytest.TempPathFactory) -> DemoRun:
    """``fitwatch demo`` once per session, in a folder holding an earlier run's leftovers."""
    folder = tmp_path_factory.mktemp("demo") / "demo"
    leave_an_earlier_run(folder)
    return run_demo_command(folder)


@pytest.fixture
def cli(engine: Engine, tmp_path: Path, capsys: pytest.CaptureFixture[str]
        ) -> Callable[..., tuple[int, str, str]]:
    """Run the command line against ``engine`` with a settings file in ``tmp_path``; returns
    the exit code, stdout and stderr. ``cli.config`` is the settings file."""
    from monitor.interface.cli import main

    url = engine.url.render_as_string(hide_password=False)
    config = tmp_path / "fitwatch.toml"
    config.write_text(f'[database]\nurl = "{url}"\n[schedule]\ntimezone = "Europe/Berlin"\n')

    def run(*argv: str) -> tuple[int, str, str]:
        code = main(["--config", str(config), *argv])
        captured = capsys.readouterr()
        return code, captured.out, captured.err

    run.config = config  # type: ignore[attr-defined]
    return run
