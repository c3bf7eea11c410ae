"""``fitwatch demo``: the dock-loading scenario end to end on an embedded SQLite file.

Generates the scenario (:mod:`monitor.demo.scenario`), fits the model on the history, then plays the
monitored weeks night by night: the night's file is ingested and the day checked, with the clock
set to that night, and the planning lead's view is printed. While a refit is advised the lead
runs ``refit`` once a week (the first time a week after the advice) and promotes the candidate
when the comparison recommends it, as the README suggests doing.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass, field
from datetime import date, datetime, time, timedelta
from pathlib import Path
from typing import TextIO
from zoneinfo import ZoneInfo

from sqlalchemy import Engine

from monitor.alerts.service import send_night_alerts
from monitor.config import Settings, load_settings
from monitor.demo.scenario import DEFAULT_SEED, TIMEZONE, DemoFiles, Scenario, generate_demo
from monitor.domain.check import DayCheck
from monitor.errors import DegenerateDataError
from monitor.ingest.service import ingest_file, options_for
from monitor.interface.check_view import day_line
from monitor.interface.compare_view import comparison_text
from monitor.interface.status import model_statuses
from monitor.interface.versions import VersionView
from monitor.lifecycle.compare import Comparison
from monitor.lifecycle.fit import FitRequest, fit_model
from monitor.lifecycle.refit import Transition, promote, refit
from monitor.monitoring.check import run_checks
from monitor.store import outbox
from monitor.store.access import database
from monitor.store.migrate import init_database
from monitor.store.models import get_model

MODEL = "dock_loading"

CONFIG_TEXT = """\
# fitwatch demo settings (invented scenario: dock-door planning at a distribution centre)
[database]
url = "sqlite:///{db}"

[schedule]
timezone = "{tz}"

[alerts]
to = ["planning.lead@example.com"]
sender = "fitwatch@example.com"
eml_dir = "{outbox}"

[report]
dir = "{report}"

[models.{model}.ranges]
pallets = [1, 40]
load_minutes = [1, 400]

[models.{model}.words]
row = "load"
rows = "loads"
y_unit = "min"
x_units = {{ pallets = "pallet" }}
"""


REFIT_AFTER_DAYS = 7  # the lead waits a week after an advice, then tries weekly


@dataclass(frozen=True)
class DemoResult:
    config: Path
    database: Path
    checks: tuple[DayCheck, ...]
    comparisons: tuple[Comparison, ...] = ()
    promotions: tuple[Transition, ...] = ()
    team_page: Path | None = None  # the team page (report --all) written at the end


def write_config(directory: Path) -> Path:
    path = directory / "fitwatch.toml"
    path.write_text(CONFIG_TEXT.format(db=(directory / "fitwatch.db").resolve().as_posix(),
                                       tz=TIMEZONE, outbox=(directory / "outbox").as_posix(),
                                       report=(directory / "report").as_posix(), model=MODEL))
    return path


def _fresh(directory: Path) -> None:
    """Remove what an earlier demo run left (only the demo's own files)."""
    for name in ("fitwatch.db", "fitwatch.db-wal", "fitwatch.db-shm", "fitwatch.toml"):
        (directory / name).unlink(missing_ok=True)
    for mail in directory.joinpath("outbox").glob("*.eml"):
        mail.unlink()


def run_demo(directory: Path, out: TextIO, seed: int = DEFAULT_SEED) -> DemoResult:
    directory.mkdir(parents=True, exist_ok=True)
    _fresh(directory)
    scenario = Scenario()
    files = generate_demo(directory / "data", seed=seed, scenario=scenario)
    config = write_config(directory)
    settings = load_settings(config)
    zone = ZoneInfo(TIMEZONE)
    say = out.write

    say("fitwatch demo: dock-door planning at a regional distribution centre\n")
    say(f"(invented data from a seeded generator; everything lives in {directory})\n\n")
    init_database(settings)
    with database(settings, creating=MODEL) as engine:
        played = _play(engine, settings, files, scenario, zone, say)
        team = _team_page(engine, settings, directory, played)
    _closing(say, config, played, scenario, team)
    return DemoResult(config, directory / "fitwatch.db", tuple(played.checks),
                      tuple(played.comparisons), tuple(played.promotions), team)


@dataclass
class _Played:
    checks: list[DayCheck] = field(default_factory=list)
    comparisons: list[Comparison] = field(default_factory=list)
    promotions: list[Transition] = field(default_factory=list)


def _play(engine: Engine, settings: Settings, files: DemoFiles, scenario: Scenario,
          zone: ZoneInfo, say: Callable[[str], object]) -> _Played:
    fit_now = _night_after(scenario.history_end, zone)
    report = fit_model(settings, FitRequest(MODEL, files.history, "load_minutes", ("pallets",),
                                            "docked_at", "load_id"), now=fit_now, actor="demo",
                       engine=engine)
    if report.ingest is not None:
        say(report.ingest.sentence() + "\n")
    say(VersionView.of(report.model, report.version, settings.for_model(MODEL).words).text()
        + "\n\n")
    say("Night by night (each night: that day's loads arrive, the day is checked):\n")
    with engine.connect() as conn:
        model = get_model(conn, MODEL)
    played = _Played()
    status = None
    for path in files.nights:
        day = date.fromisoformat(path.stem.split("_")[-1])
        now = _night_after(day, zone)
        summary = ingest_file(engine, model, path,
                              options_for(settings, MODEL, strict=False, progress=False, now=now))
        if summary.rejected or summary.duplicates:
            say(f"  {summary.sentence()}\n")
        outcome = run_checks(settings, [MODEL], through=day, now=now, engine=engine)
        mailed = _mail(engine, settings, [c.day for c in outcome.checks], now)
        for check in outcome.checks:
            played.checks.append(check)
            say("  " + day_line(check) + "\n")
            found = tuple((f.signal, f.level) for f in check.details.findings)
            if (check.status, found) != status:
                for reason in check.reasons:
                    say(f"      {reason}\n")
                status = (check.status, found)
        for subject in mailed:
            say(f"      e-mail to the planning lead: \"{subject}\"\n")
        if outcome.checks and _lead_refits(outcome.checks[-1]):
            _respond(engine, settings, now, played, say)
        elif outcome.checks and outcome.checks[-1].status == "ok":
            _sharpen(engine, settings, now, played, say)
    return played


def _mail(engine: Engine, settings: Settings, nights: list[date], now: datetime) -> list[str]:
    """The nights' alert digests, written as .eml files; returns the new messages' subjects."""
    with engine.connect() as conn:
        before = {row.id for row in outbox.rows(conn)}
    for night in nights:
        send_night_alerts(settings, night, now=now, engine=engine)
    with engine.connect() as conn:
        return [row.subject for row in outbox.rows(conn) if row.id not in before]


def _lead_refits(check: DayCheck) -> bool:
    """A refit advised for a whole week, then each further week while it stands."""
    waited = (check.day - check.status_since).days
    return check.status == "refit" and waited >= REFIT_AFTER_DAYS and \
        waited % REFIT_AFTER_DAYS == 0


def _sharpen(engine: Engine, settings: Settings, now: datetime, played: _Played,
             say: Callable[[str], object]) -> None:
    """When status says the active version can be pinned down better, the lead does it."""
    (status,) = model_statuses(settings, [MODEL], now=now, engine=engine)
    if status.sharpen is None:
        return
    say(f"\n  fitwatch status says: {status.sharpen.sentence()}\n")
    _respond(engine, settings, now, played, say, start=status.sharpen.start)


def _respond(engine: Engine, settings: Settings, now: datetime, played: _Played,
             say: Callable[[str], object], start: date | None = None) -> None:
    """What the planning lead does: refit on the days since the change, compare, decide."""
    flag = f" --start {start}" if start else ""
    say(f"\n  The planning lead runs: fitwatch refit {MODEL}{flag}\n")
    try:
        comparison = refit(settings, MODEL, start=start, now=now, actor="planning lead",
                           engine=engine)
    except DegenerateDataError as exc:  # too few days since the change to fit on yet
        say(f"    fitwatch: {exc}\n    (the lead tries again a week later)\n\n")
        return
    played.comparisons.append(comparison)
    say("".join(f"    {line}\n" for line in comparison_text(comparison).splitlines()))
    if comparison.recommendation.action == "promote":
        number = comparison.candidate.number
        reason = f"refit on the days since {comparison.candidate.fit_start}"
        say(f"  The planning lead runs: fitwatch promote {MODEL} {number} --reason \"{reason}\"\n")
        moved = promote(settings, MODEL, number, reason=reason, now=now,
                        actor="planning lead", engine=engine)
        played.promotions.append(moved)
        say(f"    {moved.sentence()}\n")
    say("\n")


def _team_page(engine: Engine, settings: Settings, directory: Path, played: _Played) -> Path:
    """The pages the team would open in the morning (``report --all``), as of the last night."""
    from monitor.report.team import write_team_report  # matplotlib and Jinja2: only here

    last = played.checks[-1].day if played.checks else None
    now = _night_after(last, settings.timezone) if last else None
    return write_team_report(settings, Path(settings.report.dir), engine=engine, now=now).path


def _night_after(day: date, zone: ZoneInfo) -> datetime:
    """03:00 local time on the night after ``day``: when the nightly run would see it."""
    return datetime.combine(day + timedelta(days=1), time(3, 0), tzinfo=zone)


def _closing(say: Callable[[str], object], config: Path, played: _Played,
             scenario: Scenario, team: Path) -> None:
    checks = played.checks
    first_refit = next((c for c in checks if c.status == "refit"), None)
    say("\nWhat happened in the data (the generator's truth, unknown to the monitor):\n")
    say(f"  from {scenario.layout_change} each pallet took "
        f"{scenario.minutes_per_pallet_after:.2f} min instead of "
        f"{scenario.minutes_per_pallet:.2f}; from {scenario.spread_change} the spread grew "
        f"from {scenario.noise_sd:g} to {scenario.noise_sd_after:g} min.\n")
    if first_refit is not None:
        delay = (first_refit.day - scenario.layout_change).days
        say(f"  fitwatch advised a refit on {first_refit.day}, {delay} day(s) after the change.\n")
    for moved in played.promotions:
        say(f"  Version {moved.active} scored the days from {moved.effective_day}.\n")
    mails = sorted(config.parent.joinpath("outbox").glob("*.eml"))
    if mails:
        say(f"\n{len(mails)} e-mail(s) to the planning lead are in {mails[0].parent} "
            "(open them with any mail program).\n")
    say(f"\nThe team's page, with the model's charts one click away: open\n"
        f"  {team.resolve().as_uri()}\nin a browser "
        f"(written by: fitwatch --config {config} report --all --out {team.parent}).\n")
    say(f"\nTry: fitwatch --config {config} status\n")
    say(f"     fitwatch --config {config} model list\n")
    say(f"     fitwatch --config {config} compare {MODEL}\n"
        if any(c.recommendation.action != "promote" for c in played.comparisons[-1:]) else "")
    say(f"     fitwatch --config {config} check --json --day {checks[-1].day}\n"
        if checks else "")
