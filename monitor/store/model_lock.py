"""One checker per model at a time on PostgreSQL: a session advisory lock keyed by the model.

Two ``fitwatch check`` runs (or a check and the daemon) on the same model would both start
from the same last check and both insert the same days. On SQLite the write lock of each
block already serialises them; on PostgreSQL the second now waits for the first (then finds
its days checked) and, after :data:`LOCK_WAIT`, gives up with a message instead of a
``UniqueViolation``. The lock belongs to a connection of its own, so it spans the check's
block transactions, and PostgreSQL drops it by itself if the process dies.
"""

from __future__ import annotations

from collections.abc import Iterator
from contextlib import contextmanager
from datetime import timedelta

from sqlalchemy import Engine, func, select
from sqlalchemy.exc import OperationalError

from monitor.errors import StateError

NAMESPACE = 0x6677636B  # the first key of pg_advisory_lock(int, int): "fwck"
LOCK_WAIT = timedelta(minutes=10)
_LOCK_NOT_AVAILABLE = "55P03"  # SQLSTATE lock_not_available (lock_timeout expired)


@contextmanager
def model_lock(engine: Engine, model_id: int, name: str,
               wait: timedelta = LOCK_WAIT) -> Iterator[None]:
    """Hold the check lock of model ``model_id`` (PostgreSQL; a no-op on SQLite)."""
    if engine.dialect.name != "postgresql":
        yield
        return
    with engine.connect() as conn:
        conn = conn.execution_options(isolation_level="AUTOCOMMIT")
        conn.exec_driver_sql(f"SET lock_timeout = {max(1, int(wait.total_seconds() * 1000))}")
        try:
            conn.execute(select(func.pg_advisory_lock(NAMESPACE, model_id)))
        except OperationalError as exc:
            if getattr(exc.orig, "sqlstate", None) != _LOCK_NOT_AVAILABLE:
                raise
            raise StateError(f"another fitwatch process has been checking model '{name}' for "
                             f"more than {wait.total_seconds():g} s (a 'check' or the daemon); "
                             "run this again when it is done") from None
        finally:
            conn.exec_driver_sql("RESET lock_timeout")
        try:
            yield
        finally:
            conn.execute(select(func.pg_advisory_unlock(NAMESPACE, model_id)))
