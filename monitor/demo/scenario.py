"""The demo scenario's seeded generator (invented data; used only for the demo and examples).

A regional distribution centre plans dock-door slots from ``load_minutes ~ pallets`` per
trailer. Sixty working weeks of history are clean; then a layout change makes every pallet
slower, and later a second change widens the spread. Sundays the docks are closed. Times are
local wall-clock times of the centre (Europe/Berlin), as a warehouse system would export them.
"""

from __future__ import annotations

from dataclasses import dataclass
from datetime import date, datetime, time, timedelta
from pathlib import Path

import numpy as np
import pandas as pd

DEFAULT_SEED = 20260105
TIMEZONE = "Europe/Berlin"


@dataclass(frozen=True)
class Scenario:
    """The true process behind the demo data (what the monitor has to discover)."""

    history_start: date = date(2026, 1, 5)
    history_end: date = date(2026, 3, 8)
    monitor_end: date = date(2026, 5, 31)
    layout_change: date = date(2026, 3, 23)
    spread_change: date = date(2026, 5, 4)
    minutes_base: float = 9.0
    minutes_per_pallet: float = 2.10
    minutes_per_pallet_after: float = 2.40
    day_shock_sd: float = 2.5
    noise_sd: float = 5.0
    noise_sd_after: float = 7.5
    weekday_loads: float = 78.0
    saturday_loads: float = 40.0
    doors: int = 12

    def slope_on(self, day: date) -> float:
        if day >= self.layout_change:
            return self.minutes_per_pallet_after
        return self.minutes_per_pallet

    def noise_on(self, day: date) -> float:
        return self.noise_sd_after if day >= self.spread_change else self.noise_sd


@dataclass(frozen=True)
class DemoFiles:
    history: Path
    nights: tuple[Path, ...]


def generate_day(rng: np.random.Generator, day: date, scenario: Scenario) -> pd.DataFrame:
    """One day's completed loads (empty on Sundays)."""
    weekday = day.weekday()
    if weekday == 6:
        return pd.DataFrame(columns=["load_id", "docked_at", "pallets", "load_minutes", "door"])
    count = int(rng.poisson(scenario.weekday_loads if weekday < 5 else scenario.saturday_loads))
    seconds = np.sort(rng.integers(5 * 3600, 22 * 3600, count))
    start = datetime.combine(day, time(0, 0))
    docked = [start + timedelta(seconds=int(s)) for s in seconds]
    pallets = np.clip(np.rint(rng.normal(22.0, 7.0, count)), 4, 33).astype(int)
    shock = rng.normal(0.0, scenario.day_shock_sd)
    noise = rng.normal(0.0, scenario.noise_on(day), count)
    minutes = scenario.minutes_base + scenario.slope_on(day) * pallets + shock + noise
    return pd.DataFrame({
        "load_id": [f"L{day:%y%m%d}-{i + 1:03d}" for i in range(count)],
        "docked_at": [d.strftime("%Y-%m-%d %H:%M:%S") for d in docked],
        "pallets": pallets,
        "load_minutes": np.round(np.maximum(minutes, 1.0), 1),
        "door": [f"D{d:02d}" for d in rng.integers(1, scenario.doors + 1, count)],
    })


def _days(first: date, last: date) -> list[date]:
    return [first + timedelta(days=i) for i in range((last - first).days + 1)]


def _inject_export_faults(frame: pd.DataFrame, rng: np.random.Generator) -> pd.DataFrame:
    """A realistic night: one row typed by hand with a unit, one row exported twice."""
    if len(frame) < 10:
        return frame
    out = frame.astype({"pallets": object})
    out.loc[out.index[3], "pallets"] = f"{out.loc[out.index[3], 'pallets']} plt"
    repeat = out.iloc[[int(rng.integers(5, len(out)))]]
    return pd.concat([out, repeat], ignore_index=True)


def generate_demo(directory: Path, seed: int = DEFAULT_SEED,
                  scenario: Scenario | None = None) -> DemoFiles:
    """Write the history file and one file per monitored night."""
    scenario = scenario or Scenario()
    directory = Path(directory)
    nights_dir = directory / "nights"
    nights_dir.mkdir(parents=True, exist_ok=True)
    rng = np.random.default_rng(seed)
    history = pd.concat([generate_day(rng, d, scenario)
                         for d in _days(scenario.history_start, scenario.history_end)],
                        ignore_index=True)
    history_path = directory / "history.csv"
    history.to_csv(history_path, index=False, lineterminator="\n")
    nights = []
    first = scenario.history_end + timedelta(days=1)
    for day in _days(first, scenario.monitor_end):
        frame = generate_day(rng, day, scenario)
        if frame.empty:
            continue  # the docks are closed: the warehouse system exports nothing
        if day == scenario.layout_change + timedelta(days=9):
            frame = _inject_export_faults(frame, rng)
        path = nights_dir / f"loads_{day:%Y-%m-%d}.csv"
        frame.to_csv(path, index=False, lineterminator="\n")
        nights.append(path)
    return DemoFiles(history_path, tuple(nights))
