"""The inbox the nightly run sweeps: ``<inbox>/<model name>/*.csv|*.csv.gz|*.parquet``.

Each file is ingested in its own transaction (as ``ingest`` would), then moved beside it into
``archive/`` (stored, possibly with some rows rejected and recorded; a header without rows is
an empty night) or ``rejected/`` (refused whole: unreadable, a missing column, or every row bad;
the reason is written next to it as ``NAME.reason.txt``). A file refused whole, or one that lost
more than ``check.rejected_file_share`` of its rows, is logged as a warning (and is a data
health finding: ``monitor.monitoring.data_health``).
A crash between the ingest's commit and the move leaves the file in the inbox; the next sweep
ingests it again, which changes nothing (the batch is recognised by its content hash), and then
moves it. A database error stops the sweep and leaves the file where it is. Files whose names
start with ``.`` or end in ``.part``/``.partial``/``.tmp`` are being written and are left
alone; writers should write under such a name and rename when done.
"""

from __future__ import annotations

import logging
import os
from collections.abc import Callable
from dataclasses import dataclass, field
from datetime import datetime
from pathlib import Path
from typing import Any

from sqlalchemy import Engine

from monitor.config import Settings
from monitor.domain.data_health import mostly_rejected
from monitor.domain.model import check_model_section
from monitor.errors import ConfigError, InputError
from monitor.ingest.service import ingest_file, options_for
from monitor.ingest.summary import IngestSummary
from monitor.store.models import find_model

log = logging.getLogger(__name__)

SUFFIXES = (".csv", ".csv.gz", ".parquet", ".pq")
ARCHIVE, REJECTED = "archive", "rejected"


@dataclass(frozen=True)
class SweptFile:
    model: str
    path: Path  # where the file is now
    outcome: str  # archived | rejected | left (the settings must be fixed first)
    summary: IngestSummary | None
    reason: str | None = None

    def as_dict(self) -> dict[str, Any]:
        return {"model": self.model, "file": str(self.path), "outcome": self.outcome,
                "ingest": self.summary.as_dict() if self.summary else None,
                "reason": self.reason}


@dataclass(frozen=True)
class Sweep:
    files: tuple[SweptFile, ...] = ()
    unknown_folders: tuple[str, ...] = field(default=())  # folders named after no model

    def sentence(self) -> str:
        if not self.files and not self.unknown_folders:
            return "inbox: nothing new"
        kept = sum(f.outcome == "archived" for f in self.files)
        text = f"inbox: {kept} file(s) stored, {len(self.files) - kept} rejected"
        if self.unknown_folders:
            text += "; no model named " + ", ".join(repr(n) for n in self.unknown_folders)
        return text


def waiting_files(folder: Path) -> list[Path]:
    """Complete data files in one model's folder, oldest first (then by name)."""
    found = [p for p in folder.iterdir()
             if p.is_file() and p.name.lower().endswith(SUFFIXES) and not p.name.startswith(".")
             and not p.name.endswith((".part", ".partial", ".tmp"))]
    return sorted(found, key=lambda p: (p.stat().st_mtime_ns, p.name))


def sweep_inbox(engine: Engine, settings: Settings, now: datetime, *,
                should_stop: Callable[[], bool] = lambda: False) -> Sweep:
    """Ingest and file away everything waiting in the configured inbox."""
    if not settings.ingest.inbox:
        return Sweep()
    root = Path(settings.ingest.inbox)
    if not root.is_dir():
        log.warning("the inbox %s does not exist or is not a folder; nothing swept", root)
        return Sweep()
    swept: list[SweptFile] = []
    unknown: list[str] = []
    for folder in sorted(p for p in root.iterdir() if p.is_dir()):
        with engine.connect() as conn:
            model = find_model(conn, folder.name)
        if model is None:
            if waiting_files(folder):
                unknown.append(folder.name)
                log.warning("inbox folder %s names no model; its files are left alone", folder)
            continue
        for path in waiting_files(folder):
            if should_stop():
                return Sweep(tuple(swept), tuple(unknown))
            swept.append(_take(engine, settings, model, path, now))
    return Sweep(tuple(swept), tuple(unknown))


def _take(engine: Engine, settings: Settings, model: Any, path: Path,
          now: datetime) -> SweptFile:
    try:
        check_model_section(settings, model)
    except ConfigError as exc:  # the settings are wrong, not the file: it waits where it is
        log.error("inbox file %s left in place: %s", path, exc)
        return SweptFile(model.name, path, "left", None, str(exc))
    try:
        summary = ingest_file(engine, model, path, options_for(settings, model.name, now=now))
    except InputError as exc:  # the file itself is bad; anything else leaves it in place
        log.warning("inbox file %s refused: %s", path, exc)
        moved = _move(path, REJECTED)
        moved.with_name(moved.name + ".reason.txt").write_text(f"{exc}\n", encoding="utf-8")
        return SweptFile(model.name, moved, "rejected", None, str(exc))
    if summary.rejected_whole:
        moved = _move(path, REJECTED)
        moved.with_name(moved.name + ".reason.txt").write_text(summary.sentence() + "\n",
                                                               encoding="utf-8")
        log.warning("inbox file %s moved to %s: %s", path, moved.parent, summary.sentence())
        return SweptFile(model.name, moved, "rejected", summary, summary.sentence())
    moved = _move(path, ARCHIVE)
    share = settings.for_model(model.name).check.rejected_file_share
    if mostly_rejected(summary.rejected, summary.read, share):
        log.warning("inbox file %s lost most of its rows: %s", path, summary.sentence())
    return SweptFile(model.name, moved, "archived", summary)


def _move(path: Path, where: str) -> Path:
    """Move ``path`` into ``where/`` beside it, never overwriting an earlier file there."""
    target_dir = path.parent / where
    target_dir.mkdir(exist_ok=True)
    target = target_dir / path.name
    n = 1
    while target.exists():
        n += 1
        target = target_dir / f"{path.stem}-{n}{path.suffix}"
    os.replace(path, target)
    return target
