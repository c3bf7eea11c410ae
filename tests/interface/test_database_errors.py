"""Failures of the database itself: one DatabaseError, a message that says what to do, exit 1.

Locked, read-only and full are produced for real (another connection holding ``BEGIN
EXCLUSIVE``, a ``mode=ro`` URI, ``PRAGMA max_page_count``, a PostgreSQL session that defaults
to read-only); the SQLite behaviours relied on are those the SQLite documentation describes
for BEGIN EXCLUSIVE, URI filenames (``mode=ro``) and ``PRAGMA max_page_count``.
"""

from __future__ import annotations

import os
import sqlite3
import subprocess
import sys
import time
from datetime import UTC, datetime
from pathlib import Path
from urllib.parse import quote

import pytest
from sqlalchemy import insert

from monitor.errors import DatabaseError, ExitCode
from monitor.interface.cli import main
from monitor.store.batches import add_rejected_rows
from monitor.store.engine import open_engine, write_transaction
from monitor.store.schema import audit_log

ROOT = Path(__file__).resolve().parents[2]
HISTORY = ROOT / "demo_data" / "history.csv"
FIT = ["model", "fit", "dock_loading", "--data", str(HISTORY), "--y", "load_minutes",
       "--x", "pallets", "--time", "docked_at"]
NOW = datetime(2026, 4, 1, tzinfo=UTC)
BUSY_MS = 200
# the real command line, with the busy timeout shortened (30 s in use) so a test can wait it out
CLI = ("import sys, monitor.store.engine as engine; "
       f"engine.SQLITE_BUSY_TIMEOUT_MS = {BUSY_MS}; "
       "from monitor.interface.cli import main; sys.exit(main(sys.argv[1:]))")


def run_cli(*argv: str, cwd: Path) -> subprocess.CompletedProcess[str]:
    env = {**os.environ, "PYTHONPATH": str(ROOT)}
    env.pop("FITWATCH_CONFIG", None)
    return subprocess.run([sys.executable, "-c", CLI, *argv], cwd=cwd, env=env,
                          capture_output=True, text=True, timeout=120)


@pytest.fixture
def db(tmp_path: Path) -> Path:
    path = tmp_path / "fitwatch.db"
    assert main(["--db", f"sqlite:///{path}", "init"]) == 0
    return path


def one_line(stderr: str) -> str:
    assert "Traceback" not in stderr and stderr.count("\n") == 1, stderr
    assert stderr.startswith("fitwatch: ")
    return stderr


def test_a_locked_sqlite_database_is_a_database_error_not_a_traceback(
        db: Path, tmp_path: Path) -> None:
    holder = sqlite3.connect(db, isolation_level=None)
    try:
        holder.execute("BEGIN EXCLUSIVE")  # no other connection may write until it ends
        started = time.monotonic()
        result = run_cli("--db", f"sqlite:///{db}", *FIT, cwd=tmp_path)
        waited = time.monotonic() - started
    finally:
        holder.close()
    assert result.returncode == DatabaseError.exit_code == ExitCode.INPUT
    message = one_line(result.stderr)
    assert f"the database (sqlite file {db}) is locked" in message
    assert "run the command again when it is done" in message
    assert waited < 20  # it gave up after the short busy timeout, not the default 30 s
    # and it was right to say so: once the lock is gone the same command works
    again = run_cli("--db", f"sqlite:///{db}", *FIT, cwd=tmp_path)
    assert again.returncode == 0, again.stderr


def test_a_read_only_uri_reads_but_refuses_writes_with_the_read_only_message(
        db: Path, tmp_path: Path) -> None:
    url = f"sqlite:///file:{db}?mode=ro&uri=true"
    listed = run_cli("--db", url, "model", "list", cwd=tmp_path)
    assert listed.returncode == 0 and listed.stdout.startswith("no models yet"), listed.stderr
    result = run_cli("--db", url, *FIT, cwd=tmp_path)
    assert result.returncode == DatabaseError.exit_code
    message = one_line(result.stderr)
    assert f"the database (sqlite file {db}) is read-only" in message
    assert "write access" in message
    # the URI's options are options, not part of a new file's name (as they once were)
    assert sorted(p.name for p in tmp_path.iterdir() if "?" in p.name) == []
    assert run_cli("--db", f"sqlite:///{db}", "model", "list", cwd=tmp_path).stdout \
        .startswith("no models yet")


def test_unreachable_postgresql_says_to_check_the_server_and_the_url(tmp_path: Path) -> None:
    # nothing listens on TCP port 1 of this machine (common practice, no source)
    url = "postgresql://nobody@127.0.0.1:1/none?connect_timeout=2"
    result = run_cli("--db", url, "model", "list", cwd=tmp_path)
    assert result.returncode == DatabaseError.exit_code
    message = one_line(result.stderr)
    assert "cannot reach the database (postgresql database none on 127.0.0.1:1 as nobody)" \
        in message
    assert "check that the server is running" in message


@pytest.mark.postgres
def test_a_read_only_postgresql_session_gets_the_read_only_message(
        postgres_url: str, capsys: pytest.CaptureFixture[str]) -> None:
    assert main(["--db", postgres_url, "init"]) == 0
    # PostgreSQL documents default_transaction_read_only; writes then fail with SQLSTATE 25006
    read_only = postgres_url + "?options=" + quote("-c default_transaction_read_only=on")
    capsys.readouterr()
    assert main(["--db", read_only, *FIT]) == DatabaseError.exit_code
    err = capsys.readouterr().err
    assert "is read-only" in err and "as a user that may write" in err


def test_a_full_sqlite_database_is_a_database_error_on_both_write_paths(db: Path) -> None:
    engine = open_engine(f"sqlite:///{db}", create=False)
    try:
        # through SQLAlchemy (the engine's handle_error hook)
        with pytest.raises(DatabaseError, match=r"is full; .*free some space"), \
                write_transaction(engine) as conn:
            conn.exec_driver_sql("PRAGMA max_page_count = 1")  # no more pages than now
            conn.execute(insert(audit_log), [
                {"action": "ack", "actor": "test", "at": NOW, "details": {"pad": "x" * 4000}}
                for _ in range(50)])
        # through the driver's own cursor (the bulk paths)
        with pytest.raises(DatabaseError, match=r"is full; .*free some space"), \
                write_transaction(engine, foreign_keys=False) as conn:
            conn.exec_driver_sql("PRAGMA max_page_count = 1")
            add_rejected_rows(conn, 1, [(i, "x" * 4000, "bad", "") for i in range(50)])
    finally:
        engine.dispose()
