"""Worlds built once per backend and copied into each test's own empty database.

Several tests start from the same world (the same scenario, seed, days and actions). Building it
takes seconds (fits calibrate their chart by bootstrap), so the first test to need it builds it
step by step in its own database and keeps a snapshot of every table after each step; later
tests get a copy of the rows in their own fresh database. Each test still owns its database, so
what one test does never reaches another.

A snapshot is the rows of every table of the schema, in dependency order. Restoring inserts them
into an empty database at the same schema revision and, on PostgreSQL, moves each id sequence
past the restored ids.
"""

from __future__ import annotations

from collections.abc import Callable, Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from sqlalchemy import Engine, Table, func, select, text

from monitor.config import Settings
from monitor.demo.scenario import Scenario
from monitor.store.schema import metadata
from tests.support.world import World

Rows = list[tuple[Table, list[dict[str, Any]]]]
Step = tuple[str, Callable[[World], object]]


def take(engine: Engine) -> Rows:
    with engine.connect() as conn:
        return [(table, [dict(row) for row in conn.execute(select(table)).mappings()])
                for table in metadata.sorted_tables]


def restore(engine: Engine, rows: Rows) -> None:
    with engine.begin() as conn:
        for table, records in rows:
            if conn.execute(select(func.count()).select_from(table)).scalar_one():
                raise AssertionError(f"restore needs an empty database; {table.name} has rows")
            if records:
                conn.execute(table.insert(), records)
        if conn.dialect.name == "postgresql":
            for table, records in rows:
                column = table.autoincrement_column
                if column is None or not records:
                    continue
                conn.execute(text(
                    f"SELECT setval(pg_get_serial_sequence('\"{table.name}\"', '{column.name}'),"
                    f" (SELECT MAX(\"{column.name}\") FROM \"{table.name}\"))"))


def fingerprint(settings: Settings) -> str:
    """What of the settings shapes a stored world: the check settings, the zone that decides
    calendar days, the ingest rules and each model's checks, ranges and words (the reasons are
    worded with them). The database URL, alerts, schedule and inbox do not."""
    models = {name: (m.check, sorted(m.ranges.items()), m.words)
              for name, m in sorted(settings.models.items())}
    return repr((settings.check, str(settings.schedule.timezone),
                 settings.ingest.future_tolerance, models))


@dataclass
class WorldCache:
    """Snapshots by (backend, settings, scenario, seed, steps so far); one per test session."""

    snapshots: dict[tuple[Any, ...], Rows] = field(default_factory=dict)

    def world(self, engine: Engine, settings: Settings, tmp: Path, scenario: Scenario,
              seed: int, steps: Sequence[Step] = ()) -> World:
        """The world after ``steps`` (named actions applied in order) in ``engine``'s database,
        which must be empty at the newest schema revision. A step's name stands for what it
        does: two callers that name a step alike must do the same thing."""
        names = tuple(name for name, _ in steps)
        base = (engine.dialect.name, fingerprint(settings), scenario, seed)
        done = next((n for n in range(len(names), -1, -1)
                     if (*base, names[:n]) in self.snapshots), None)
        if done is None:
            world = World(engine, settings, tmp, scenario, seed)
            self.snapshots[(*base, ())] = take(engine)
            done = 0
        else:
            restore(engine, self.snapshots[(*base, names[:done])])
            world = World.attach(engine, settings, tmp, scenario, seed)
        for n in range(done, len(steps)):
            steps[n][1](world)
            self.snapshots[(*base, names[:n + 1])] = take(engine)
        return world
