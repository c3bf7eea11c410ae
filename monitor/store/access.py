"""Opening the configured database for one service call, and closing it again."""

from __future__ import annotations

import logging
from collections.abc import Iterator
from contextlib import contextmanager
from typing import Literal

from sqlalchemy import Engine

from monitor.config import Settings
from monitor.domain.model import unknown_sections
from monitor.store.engine import open_engine, require_current, warn_if_shared
from monitor.store.models import list_models

log = logging.getLogger(__name__)

# What a ``[models.NAME]`` section naming no stored model does when the settings meet the
# database: "refuse" (a ConfigError, exit 1) for commands that store, check, mail, prune or change
# versions, whose work the misspelt section was meant to shape; "warn" (logged on stderr) for
# views and for the commands that change which models exist (fit, import, rename, delete), which
# are also the way to make the names meet; "own" for a caller that compares them itself, at its
# own moment (the daemon: after the checks of its command line).
SectionPolicy = Literal["refuse", "warn", "own"]


@contextmanager
def database(settings: Settings, engine: Engine | None = None, *,
             sections: SectionPolicy = "refuse", creating: str | None = None
             ) -> Iterator[Engine]:
    """The caller's engine as it is, or one opened on ``settings.database_url`` (which must
    exist and be at the current schema revision, its models all named rightly by the settings'
    ``[models.NAME]`` sections, see ``sections``) and disposed afterwards. ``creating`` is a
    model the command is about to create, whose section may come first."""
    if engine is not None:
        yield engine
        return
    opened = open_engine(settings.database_url, create=False)
    try:
        require_current(opened)
        warn_if_shared(opened)
        _meet(opened, settings, sections, creating)
        yield opened
    finally:
        opened.dispose()


def _meet(engine: Engine, settings: Settings, sections: SectionPolicy,
          creating: str | None) -> None:
    if not settings.models or sections == "own":
        return
    with engine.connect() as conn:
        error = unknown_sections(settings, (m.name for m in list_models(conn)),
                                 creating=creating)
    if error is None:
        return
    if sections == "refuse":
        raise error
    log.warning("%s", error)
