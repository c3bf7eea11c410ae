"""Opening the configured database for one service call, and closing it again."""

from __future__ import annotations

from collections.abc import Iterator
from contextlib import contextmanager

from sqlalchemy import Engine

from monitor.config import Settings
from monitor.store.engine import open_engine, require_current, warn_if_shared


@contextmanager
def database(settings: Settings, engine: Engine | None = None) -> Iterator[Engine]:
    """The caller's engine as it is, or one opened on ``settings.database_url`` (which must
    exist and be at the current schema revision) and disposed afterwards."""
    if engine is not None:
        yield engine
        return
    opened = open_engine(settings.database_url, create=False)
    try:
        require_current(opened)
        warn_if_shared(opened)
        yield opened
    finally:
        opened.dispose()
