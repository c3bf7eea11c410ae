"""Settings: one TOML file, read once at the edge, validated into frozen objects in real units.

Where the file comes from: ``--config FILE``, else ``$FITWATCH_CONFIG``, else ``fitwatch.toml``
in the working directory, else built-in defaults. An unknown key or a value of the wrong type is a
:class:`~monitor.errors.ConfigError` naming the key and the file.
"""

from __future__ import annotations

import os
import re
import tomllib
from collections.abc import Callable, Mapping
from dataclasses import dataclass, field, fields, replace
from datetime import date, datetime, timedelta
from functools import lru_cache
from pathlib import Path
from typing import TYPE_CHECKING, Any
from zoneinfo import ZoneInfo, ZoneInfoNotFoundError

from monitor.domain.status import ALERTING
from monitor.errors import ConfigError

if TYPE_CHECKING:
    from apscheduler.triggers.cron import CronTrigger

DEFAULT_FILE = "fitwatch.toml"
ENV_VAR = "FITWATCH_CONFIG"
MAX_PREDICTORS = 8


@dataclass(frozen=True)
class CheckSettings:
    """How a day check scores and decides (README, "What the figures mean")."""

    level: float = 0.95
    coverage_window_days: int = 14
    test_window_days: int = 28
    cusum_k: float = 0.5
    cusum_arl_days: float = 1000.0
    guarantee: float = 0.95
    cusum_unit: str = "day"
    refit_pvalue: float = 0.001
    watch_pvalue: float = 0.002
    watch_cusum_fraction: float = 0.75
    watch_clear_days: int = 3  # days in a row without a finding before watch returns to ok
    day_effects_alpha: float = 0.05
    min_fit_days: int = 5
    slope_chart_step: float = 0.10  # the within-day slope chart is tuned to this share of a slope
    slope_chart_small_step: float = 0.05  # ... and its second lane to this one (0: no such lane)
    slope_chart_reference: str = "learning"  # learns from in-control days, or "fixed"
    slope_chart_arl_days: float = 5000.0  # its in-control run length (false refits add up)
    # a version fitted on fewer than learn_until_days days learns a day's slopes only once this
    # many later days passed below the watch line (0: at once)
    slope_learn_delay_days: int = 14
    learn_until_days: int = 40  # a version fitted on fewer days learns its level until then
    # data health (monitor.monitoring.data_health): a silent feed, bad files, rising rejections
    silence_pvalue: float = 0.001  # a run of days without rows this unlikely by the fit calendar
    rejected_file_share: float = 0.5  # a file with more of its rows rejected is "mostly rejected"
    rejection_pvalue: float = 0.001  # the last week's rejection share tested against the long run


@dataclass(frozen=True)
class SmtpSettings:
    host: str = "localhost"
    port: int = 587
    security: str = "starttls"
    username: str = ""
    password_env: str = "FITWATCH_SMTP_PASSWORD"
    password_file: str = ""
    timeout_seconds: float = 30.0


@dataclass(frozen=True)
class AlertSettings:
    to: tuple[str, ...] = ()
    sender: str = "fitwatch@localhost"
    on: tuple[str, ...] = tuple(ALERTING)
    remind_every_days: int = 3
    eml_dir: str = "outbox"
    smtp: SmtpSettings | None = None
    # A run that finds more nights checked and not yet mailed (a machine off for a while, or
    # history checked by hand before the first nightly run) mails only the last this many;
    # the older ones are recorded as seen and the first digest says so.
    catch_up_nights: int = 14


@dataclass(frozen=True)
class ScheduleSettings:
    """When the daemon runs: a five-field cron expression read in ``timezone``.

    ``trigger`` is the scheduler's own parse of it (:func:`parse_cron`). A schedule other than
    the default is parsed when the settings load, so a typo stops every command at once (a
    :class:`ConfigError` naming the key and the file), not the daemon at night; the default
    is known good and leaves the scheduler library out of the quick commands' start-up.
    """

    cron: str = "30 2 * * *"
    timezone: ZoneInfo = field(default_factory=lambda: ZoneInfo("UTC"))
    source: str = field(default="<settings>", repr=False, compare=False)

    @property
    def trigger(self) -> CronTrigger:
        try:
            return parse_cron(self.cron, self.timezone)
        except ValueError as exc:
            raise ConfigError(str(exc), source=self.source, key="schedule.cron") from exc


@dataclass(frozen=True)
class IngestSettings:
    """Row validation and reading (README, "Using it")."""

    future_tolerance: timedelta = timedelta(minutes=5)
    chunk_rows: int = 200_000
    inbox: str = ""
    # observation times before this local day are refused as implausible (a year 0001 or 1900
    # is a placeholder or a parsing slip, not an operation); set it earlier for older data
    earliest_day: date = date(1990, 1, 1)


# The shortest horizon ``storage.keep_rows_days`` accepts. What needs raw rows: the check of a
# day (unchecked and stale days are never pruned), ``rows --day``, compare's held-out days (at
# most 14 days with rows by default) and a fit's window (``refit`` fits from the estimated change
# day, and the version's diagnosis, spread reference and miss dispersion are computed from rows).
# 60 days keep a refit from the change day possible for about two months after it (detection
# takes a median of 7 days) and let corrections up to two months late go in.
MIN_KEEP_ROWS_DAYS = 60


@dataclass(frozen=True)
class StorageSettings:
    """Retention of raw observations (README, "Retention")."""

    keep_rows_days: int = 0  # 0: keep every row; else the rows of the last N checked days


@dataclass(frozen=True)
class ReportSettings:
    """The team page the nightly run refreshes (``report --all``), when ``dir`` is set."""

    dir: str = ""  # empty: no page; relative paths are taken from the working directory
    days: int = 90  # days shown, through each model's last checked day


@dataclass(frozen=True)
class Wording:
    """How reasons name things: 'each pallet now adds 2.6 min', '71 % of yesterday's loads'."""

    row: str = "row"
    rows: str = "rows"
    y_unit: str = ""
    x_units: Mapping[str, str] = field(default_factory=dict)

    def x_unit(self, column: str) -> str:
        return self.x_units.get(column, f"unit of {column}")


@dataclass(frozen=True)
class SqlSourceSettings:
    """A model's rows in another database: a query run by ``ingest --source`` and each night.

    The query may use ``:since`` (the model's latest stored observation time, UTC). The URL is
    given directly or, when it holds a password, through an environment variable named by
    ``url_env``; it is read when the source is used, never logged.
    """

    query: str
    url: str = ""
    url_env: str = ""
    timeout_seconds: float = 300.0  # the query is cancelled after this long

    def resolved_url(self, environ: Mapping[str, str] | None = None) -> str:
        if self.url:
            return self.url
        value = (os.environ if environ is None else environ).get(self.url_env, "")
        if not value:
            raise ConfigError(f"the environment variable {self.url_env} (named by the model's "
                              "source.url_env) is not set; set it to the source database's URL")
        return value


@dataclass(frozen=True)
class ModelSettings:
    """Settings of one model: the global ones with its ``[models.NAME]`` overrides applied."""

    check: CheckSettings
    alerts: AlertSettings
    ranges: Mapping[str, tuple[float, float]]
    words: Wording
    source: SqlSourceSettings | None = None


@dataclass(frozen=True)
class Settings:
    database_url: str = "sqlite:///fitwatch.db"
    schedule: ScheduleSettings = field(default_factory=ScheduleSettings)
    check: CheckSettings = field(default_factory=CheckSettings)
    alerts: AlertSettings = field(default_factory=AlertSettings)
    ingest: IngestSettings = field(default_factory=IngestSettings)
    report: ReportSettings = field(default_factory=ReportSettings)
    storage: StorageSettings = field(default_factory=StorageSettings)
    models: Mapping[str, ModelSettings] = field(default_factory=dict)
    source: str | None = None

    @property
    def timezone(self) -> ZoneInfo:
        return self.schedule.timezone

    def for_model(self, name: str) -> ModelSettings:
        if name in self.models:
            return self.models[name]
        return ModelSettings(self.check, self.alerts, {}, Wording())

    def with_database(self, url: str | None) -> Settings:
        return self if not url else replace(self, database_url=url)


# loading --------------------------------------------------------------------------------------
def find_config(explicit: str | os.PathLike[str] | None = None,
                environ: Mapping[str, str] | None = None,
                cwd: Path | None = None) -> Path | None:
    """The configuration file to read, by the documented order of precedence, or None."""
    env = os.environ if environ is None else environ
    if explicit:
        path = Path(explicit)
        if not path.is_file():
            raise ConfigError(f"configuration file {path} does not exist")
        return path
    if env.get(ENV_VAR):
        path = Path(env[ENV_VAR])
        if not path.is_file():
            raise ConfigError(f"{ENV_VAR} points at {path}, which does not exist")
        return path
    candidate = (cwd or Path.cwd()) / DEFAULT_FILE
    return candidate if candidate.is_file() else None


def load_settings(explicit: str | os.PathLike[str] | None = None,
                  environ: Mapping[str, str] | None = None,
                  cwd: Path | None = None) -> Settings:
    path = find_config(explicit, environ, cwd)
    if path is None:
        return Settings()
    try:
        with path.open("rb") as fh:
            data = tomllib.load(fh)
    except tomllib.TOMLDecodeError as exc:
        raise ConfigError(f"not valid TOML: {exc}", source=str(path)) from exc
    except OSError as exc:
        raise ConfigError(f"cannot read: {exc.strerror}", source=str(path)) from exc
    return parse_settings(data, str(path))


def parse_settings(data: Mapping[str, Any], source: str = "<settings>") -> Settings:
    """Validate a parsed TOML document into :class:`Settings`."""
    r = _Reader(source)
    top = r.table(data, "", {"database", "schedule", "check", "alerts", "ingest", "report",
                             "storage", "models"})
    db = r.table(top.get("database", {}), "database", {"url"})
    url = r.string(db, "database.url", Settings.database_url, non_empty=True)

    sch = r.table(top.get("schedule", {}), "schedule", {"cron", "timezone"})
    cron = r.string(sch, "schedule.cron", ScheduleSettings.cron, non_empty=True)
    zone = r.zone(sch, "schedule.timezone", "UTC")
    schedule = ScheduleSettings(cron=cron, timezone=zone, source=source)
    if cron != ScheduleSettings.cron:
        schedule.trigger  # noqa: B018 - parsed now for its errors; cached by parse_cron

    check = _check_settings(r, top.get("check", {}), "check", CheckSettings())
    alerts = _alert_settings(r, top.get("alerts", {}), "alerts", AlertSettings())

    ing = r.table(top.get("ingest", {}), "ingest",
                  {"future_tolerance_minutes", "chunk_rows", "inbox", "earliest_day"})
    tolerance = r.number(ing, "ingest.future_tolerance_minutes", 5.0, low=0.0)
    ingest = IngestSettings(
        future_tolerance=timedelta(minutes=tolerance),
        chunk_rows=r.integer(ing, "ingest.chunk_rows", 200_000, low=1000),
        inbox=r.string(ing, "ingest.inbox", ""),
        earliest_day=_day(r, ing, "ingest.earliest_day", IngestSettings.earliest_day),
    )

    rep = r.table(top.get("report", {}), "report", {"dir", "days"})
    report = ReportSettings(dir=r.string(rep, "report.dir", ""),
                            days=r.integer(rep, "report.days", ReportSettings.days, low=1,
                                           high=3660))
    sto = r.table(top.get("storage", {}), "storage", {"keep_rows_days"})
    keep = r.integer(sto, "storage.keep_rows_days", 0, low=0)
    if 0 < keep < MIN_KEEP_ROWS_DAYS:
        raise r.fail("storage.keep_rows_days",
                     f"must be 0 (keep every row) or at least {MIN_KEEP_ROWS_DAYS} days (a refit "
                     f"from the change day and late corrections need the rows); got {keep}")
    storage = StorageSettings(keep_rows_days=keep)

    models: dict[str, ModelSettings] = {}
    for name, section in r.table(top.get("models", {}), "models", None).items():
        key = f"models.{name}"
        sec = r.table(section, key, {"check", "alerts", "ranges", "words", "source"})
        ranges: dict[str, tuple[float, float]] = {}
        for column, bounds in r.table(sec.get("ranges", {}), f"{key}.ranges", None).items():
            ranges[column] = r.bounds(bounds, f"{key}.ranges.{column}")
        wd = r.table(sec.get("words", {}), f"{key}.words", {"row", "rows", "y_unit", "x_units"})
        row = r.string(wd, f"{key}.words.row", "row", non_empty=True)
        units = r.table(wd.get("x_units", {}), f"{key}.words.x_units", None)
        words = Wording(
            row=row,
            rows=r.string(wd, f"{key}.words.rows", row + "s", non_empty=True),
            y_unit=r.string(wd, f"{key}.words.y_unit", ""),
            x_units={c: r.string(units, f"{key}.words.x_units.{c}", "", non_empty=True)
                     for c in units},
        )
        models[name] = ModelSettings(
            check=_check_settings(r, sec.get("check", {}), f"{key}.check", check),
            alerts=_alert_settings(r, sec.get("alerts", {}), f"{key}.alerts", alerts),
            ranges=ranges, words=words,
            source=_source_settings(r, sec["source"], f"{key}.source") if "source" in sec
            else None,
        )
    return Settings(database_url=url, schedule=schedule, check=check, alerts=alerts,
                    ingest=ingest, report=report, storage=storage, models=models,
                    source=source)


def _check_settings(r: _Reader, raw: Any, key: str, base: CheckSettings) -> CheckSettings:
    names = {f.name for f in fields(CheckSettings)}
    sec = r.table(raw, key, names)
    values: dict[str, Any] = {}
    for name in sec:
        default = getattr(base, name)
        full = f"{key}.{name}"
        if name == "cusum_unit":
            values[name] = r.choice(sec, full, default, ("day", "observation"))
        elif name == "slope_chart_reference":
            values[name] = r.choice(sec, full, default, ("learning", "fixed"))
        elif isinstance(default, int) and not isinstance(default, bool):
            values[name] = r.integer(sec, full, default,
                                     low=0 if name == "slope_learn_delay_days" else 1)
        else:
            values[name] = r.number(sec, full, default, low=0.0)
    out = replace(base, **values)
    for name in ("level", "guarantee", "refit_pvalue", "watch_pvalue",
                 "watch_cusum_fraction", "day_effects_alpha", "silence_pvalue",
                 "rejected_file_share", "rejection_pvalue"):
        value = getattr(out, name)
        if not 0.0 < value < 1.0:
            raise ConfigError(f"must lie strictly between 0 and 1; got {value}", source=r.source,
                              key=f"{key}.{name}")
    for name in ("cusum_arl_days", "slope_chart_arl_days"):
        if getattr(out, name) < 10:
            raise ConfigError(f"must be at least 10 days; got {getattr(out, name)}",
                              source=r.source, key=f"{key}.{name}")
    if not 0.0 < out.slope_chart_step <= 10.0:
        raise ConfigError(f"must lie in (0, 10] (a share of the slope); got "
                          f"{out.slope_chart_step}", source=r.source,
                          key=f"{key}.slope_chart_step")
    if not out.slope_chart_small_step < out.slope_chart_step:
        raise ConfigError(f"must be below slope_chart_step ({out.slope_chart_step}), or 0 for "
                          f"no second lane; got {out.slope_chart_small_step}", source=r.source,
                          key=f"{key}.slope_chart_small_step")
    if out.refit_pvalue > out.watch_pvalue:
        raise ConfigError("refit_pvalue must not exceed watch_pvalue (refit is the stronger "
                          "verdict)", source=r.source, key=f"{key}.refit_pvalue")
    if out.coverage_window_days > 366 or out.test_window_days > 366:
        raise ConfigError("windows longer than a year are not supported", source=r.source,
                          key=key)
    return out


# Keys a [models.NAME.alerts] section may set: who hears about the model and when. The
# transport and the sender are global, because one digest per recipient covers every model.
# A model's ``to`` adds to the global recipients; ``only_to`` replaces them for that model.
_MODEL_ALERT_KEYS = {"to", "only_to", "on", "remind_every_days"}


def _alert_settings(r: _Reader, raw: Any, key: str, base: AlertSettings) -> AlertSettings:
    allowed = ({"to", "sender", "on", "remind_every_days", "eml_dir", "smtp", "catch_up_nights"}
               if key == "alerts" else _MODEL_ALERT_KEYS)
    sec = r.table(raw, key, allowed)
    smtp = base.smtp
    if "smtp" in sec:
        if isinstance(sec["smtp"], Mapping) and "password" in sec["smtp"]:
            raise ConfigError("a password is not read from the settings file (the file is "
                              "readable by whoever can read the configuration and ends up in "
                              "backups and version control); remove it and put the password "
                              "in an environment variable named by password_env (default "
                              "FITWATCH_SMTP_PASSWORD) or in a file named by password_file",
                              source=r.source, key=f"{key}.smtp.password")
        s = r.table(sec["smtp"], f"{key}.smtp", {f.name for f in fields(SmtpSettings)})
        d = SmtpSettings()
        host = r.string(s, f"{key}.smtp.host", d.host, non_empty=True)
        security = r.choice(s, f"{key}.smtp.security", d.security, ("starttls", "tls", "none"))
        if security == "none" and host not in ("localhost", "127.0.0.1", "::1"):
            raise ConfigError("security = \"none\" is only allowed for a loopback host "
                              f"(got host {host!r}); use \"starttls\" or \"tls\"",
                              source=r.source, key=f"{key}.smtp.security")
        smtp = SmtpSettings(
            host=host,
            port=r.integer(s, f"{key}.smtp.port", d.port, low=1, high=65535),
            security=security,
            username=r.string(s, f"{key}.smtp.username", d.username),
            password_env=r.string(s, f"{key}.smtp.password_env", d.password_env),
            password_file=r.string(s, f"{key}.smtp.password_file", d.password_file),
            timeout_seconds=r.number(s, f"{key}.smtp.timeout_seconds", d.timeout_seconds,
                                     low=1.0),
        )
    if "to" in sec and "only_to" in sec:
        raise ConfigError("set either to (added to the global recipients) or only_to (instead "
                          "of them), not both", source=r.source, key=f"{key}.only_to")
    added = "to" in sec and key != "alerts"
    which = "only_to" if "only_to" in sec else "to"
    named = r.strings(sec, f"{key}.{which}", () if added else base.to)
    for address in named:
        if not _EMAIL.fullmatch(address):
            raise ConfigError(f"{address!r} is not an e-mail address", source=r.source,
                              key=f"{key}.{which}")
    to = base.to + tuple(a for a in named if a not in base.to) if added else named
    sender = r.string(sec, f"{key}.sender", base.sender, non_empty=True)
    on = r.strings(sec, f"{key}.on", base.on)
    for status in on:
        if status not in ALERTING:
            raise ConfigError(f"unknown status {status!r}; use "
                              + " and/or ".join(f'"{s}"' for s in ALERTING),
                              source=r.source, key=f"{key}.on")
    return AlertSettings(
        to=to, sender=sender, on=on,
        remind_every_days=r.integer(sec, f"{key}.remind_every_days", base.remind_every_days,
                                    low=1),
        eml_dir=r.string(sec, f"{key}.eml_dir", base.eml_dir, non_empty=True), smtp=smtp,
        catch_up_nights=r.integer(sec, f"{key}.catch_up_nights", base.catch_up_nights, low=1))


# RFC 5322 §3.4.1 addr-spec with a dot-atom local part (§3.2.3: atext runs joined by single
# dots, none leading or trailing) and a domain of letter/digit/hyphen labels (RFC 1035 §2.3.1)
_ATEXT = r"[A-Za-z0-9!#$%&'*+/=?^_`{|}~-]+"
_LABEL = r"[A-Za-z0-9](?:[A-Za-z0-9-]{0,61}[A-Za-z0-9])?"
_EMAIL = re.compile(rf"{_ATEXT}(?:\.{_ATEXT})*@{_LABEL}(?:\.{_LABEL})*")


def _day(r: _Reader, t: Mapping[str, Any], key: str, default: date) -> date:
    """A calendar day given as a TOML date or an ISO 8601 string."""
    value = t.get(key.rsplit(".", 1)[-1], default)
    if isinstance(value, date) and not isinstance(value, datetime):
        return value
    if isinstance(value, str):
        try:
            return date.fromisoformat(value)
        except ValueError:
            pass
    raise r.fail(key, f"expected a day such as 1990-01-01; got {value!r}")


def _source_settings(r: _Reader, raw: Any, key: str) -> SqlSourceSettings:
    sec = r.table(raw, key, {"url", "url_env", "query", "timeout_seconds"})
    url = r.string(sec, f"{key}.url", "")
    url_env = r.string(sec, f"{key}.url_env", "")
    if bool(url) == bool(url_env):
        raise ConfigError("give exactly one of url and url_env (an environment variable holding "
                          "the URL, for one with a password)", source=r.source, key=key)
    return SqlSourceSettings(query=r.string(sec, f"{key}.query", "", non_empty=True), url=url,
                             url_env=url_env,
                             timeout_seconds=r.number(sec, f"{key}.timeout_seconds",
                                                      SqlSourceSettings.timeout_seconds,
                                                      low=1.0))


# The five crontab fields, as APScheduler 3.x's CronTrigger names them and as people say them.
_CRON_FIELDS = (("minute", "minute"), ("hour", "hour"), ("day", "day of month"),
                ("month", "month"), ("day_of_week", "weekday"))
_CRON_EPOCH = datetime(2000, 1, 1)  # a fixed start for "does it ever fire" (leap years ahead)


@lru_cache(maxsize=16)
def parse_cron(cron: str, zone: ZoneInfo) -> CronTrigger:
    """The scheduler's trigger for a five-field cron expression; ValueError says what is wrong.

    Weekdays must be names (``mon-fri``): APScheduler 3.x numbers them from Monday = 0 where
    crontab numbers them from Sunday = 0 (the warning in the documentation of
    ``CronTrigger.from_crontab``), so ``1-5`` would silently run Tuesday to Saturday.
    """
    from apscheduler.triggers.cron import CronTrigger  # only where the schedule is used

    parts = cron.split()
    if len(parts) != 5:
        raise ValueError(f"{cron!r} is not a five-field cron expression "
                         "(minute hour day month weekday), e.g. \"30 2 * * *\"")
    if any(ch.isdigit() for ch in parts[4]):
        raise ValueError(f"weekday field {parts[4]!r}: write weekdays as names (mon, tue, wed, "
                         "thu, fri, sat, sun; e.g. \"30 2 * * mon-fri\"); numbers are ambiguous, "
                         "crontab counts from Sunday = 0 and the scheduler from Monday = 0")
    for (name, words), part in zip(_CRON_FIELDS, parts, strict=True):
        try:
            CronTrigger(**{name: part}, timezone=zone)
        except ValueError as exc:
            raise ValueError(f"{words} field {part!r} in {cron!r}: {exc}") from exc
    trigger = CronTrigger.from_crontab(cron, timezone=zone)
    if trigger.get_next_fire_time(None, _CRON_EPOCH.replace(tzinfo=zone)) is None:
        raise ValueError(f"{cron!r} never fires (no date matches its day and month)")
    return trigger


class _Reader:
    """Typed access to a parsed TOML table with messages naming the key and the file."""

    def __init__(self, source: str):
        self.source = source

    def fail(self, key: str, message: str) -> ConfigError:
        return ConfigError(message, source=self.source, key=key)

    def table(self, raw: Any, key: str, allowed: set[str] | None) -> dict[str, Any]:
        if not isinstance(raw, dict):
            raise self.fail(key or "(top level)", f"expected a table, got {_kind(raw)}")
        if allowed is not None:
            unknown = sorted(set(raw) - allowed)
            if unknown:
                where = f"{key}.{unknown[0]}" if key else unknown[0]
                raise self.fail(where, "unknown key; allowed here: " + ", ".join(sorted(allowed)))
        return raw

    def _get(self, table: Mapping[str, Any], key: str, default: Any,
             ok: Callable[[Any], bool], expected: str) -> Any:
        name = key.rsplit(".", 1)[-1]
        if name not in table:
            return default
        value = table[name]
        if not ok(value):
            raise self.fail(key, f"expected {expected}, got {_kind(value)} {value!r}")
        return value

    def string(self, t: Mapping[str, Any], key: str, default: str, non_empty: bool = False) -> str:
        value = self._get(t, key, default, lambda v: isinstance(v, str), "a string")
        if non_empty and not value.strip():
            raise self.fail(key, "must not be empty")
        return value

    def strings(self, t: Mapping[str, Any], key: str, default: tuple[str, ...]) -> tuple[str, ...]:
        def ok(v: Any) -> bool:
            return isinstance(v, list | tuple) and all(isinstance(s, str) for s in v)

        value = self._get(t, key, default, ok, "a list of strings")
        return tuple(value)

    def choice(self, t: Mapping[str, Any], key: str, default: str, options: tuple[str, ...]) -> str:
        value = self.string(t, key, default)
        if value not in options:
            raise self.fail(key, f"must be one of {', '.join(options)}; got {value!r}")
        return value

    def integer(self, t: Mapping[str, Any], key: str, default: int, low: int | None = None,
                high: int | None = None) -> int:
        value = self._get(t, key, default,
                          lambda v: isinstance(v, int) and not isinstance(v, bool), "an integer")
        if low is not None and value < low:
            raise self.fail(key, f"must be at least {low}; got {value}")
        if high is not None and value > high:
            raise self.fail(key, f"must be at most {high}; got {value}")
        return int(value)

    def number(self, t: Mapping[str, Any], key: str, default: float,
               low: float | None = None) -> float:
        value = self._get(t, key, default,
                          lambda v: isinstance(v, int | float) and not isinstance(v, bool),
                          "a number")
        if low is not None and value < low:
            raise self.fail(key, f"must be at least {low:g}; got {value}")
        return float(value)

    def zone(self, t: Mapping[str, Any], key: str, default: str) -> ZoneInfo:
        name = self.string(t, key, default, non_empty=True)
        try:
            return ZoneInfo(name)
        except (ZoneInfoNotFoundError, ValueError) as exc:
            raise self.fail(key, f"unknown time zone {name!r}; use an IANA name such as "
                                 "\"Europe/Berlin\" or \"UTC\"") from exc

    def bounds(self, raw: Any, key: str) -> tuple[float, float]:
        ok = (isinstance(raw, list) and len(raw) == 2
              and all(isinstance(v, int | float) and not isinstance(v, bool) for v in raw))
        if not ok:
            raise self.fail(key, f"expected [low, high], got {_kind(raw)} {raw!r}")
        low, high = float(raw[0]), float(raw[1])
        if not low < high:
            raise self.fail(key, f"low must be below high; got [{low:g}, {high:g}]")
        return low, high


def _kind(value: Any) -> str:
    return {bool: "a boolean", int: "an integer", float: "a number", str: "a string",
            list: "a list", dict: "a table"}.get(type(value), type(value).__name__)
