"""Settings: precedence, defaults, strict keys and types, messages that name key and file."""

from __future__ import annotations

import tomllib
from dataclasses import fields
from datetime import datetime, timedelta
from pathlib import Path

import pytest

from monitor.config import (
    _MODEL_ALERT_KEYS,
    AlertSettings,
    CheckSettings,
    ReportSettings,
    Settings,
    SmtpSettings,
    SqlSourceSettings,
    load_settings,
    parse_settings,
)
from monitor.errors import ConfigError

EXAMPLE = Path(__file__).resolve().parents[1] / "config" / "fitwatch.example.toml"


def test_a_models_recipients_add_to_the_global_ones_unless_it_says_only():
    # Before: a model's `to` replaced the global list, so the lead heard nothing of that model.
    base = {"alerts": {"to": ["lead@example.com", "ops@example.com"]}}
    added = parse_settings({**base, "models": {"a": {"alerts": {
        "to": ["dock@example.com", "ops@example.com"]}}}}, "<test>")
    assert added.for_model("a").alerts.to == ("lead@example.com", "ops@example.com",
                                               "dock@example.com")
    assert added.for_model("b").alerts.to == ("lead@example.com", "ops@example.com")
    only = parse_settings({**base, "models": {"a": {"alerts": {"only_to": ["dock@example.com"]}}}},
                          "<test>")
    assert only.for_model("a").alerts.to == ("dock@example.com",)
    with pytest.raises(ConfigError, match=r"either to .* or only_to"):
        parse_settings({**base, "models": {"a": {"alerts": {"to": ["x@example.com"],
                                                            "only_to": ["y@example.com"]}}}})
    with pytest.raises(ConfigError, match=r"'models\.a\.alerts\.only_to'.*not an e-mail address"):
        parse_settings({"models": {"a": {"alerts": {"only_to": ["nobody"]}}}})
    with pytest.raises(ConfigError, match=r"'alerts\.only_to': unknown key"):  # global: to is it
        parse_settings({"alerts": {"only_to": ["lead@example.com"]}})


def test_the_readme_says_a_models_to_adds_and_only_to_replaces():
    # before: the README named neither, so a reader could only guess from the example file
    readme = " ".join((EXAMPLE.parents[1] / "README.md").read_text().split())
    for key in sorted(_MODEL_ALERT_KEYS):
        assert f"`{key}`" in readme, key
    assert "`to`, which adds to them" in readme
    assert "`only_to`, which replaces them for that model" in readme


def test_example_file_is_valid_and_documents_every_key():
    settings = load_settings(EXAMPLE, environ={})
    assert settings.check == CheckSettings()
    model = settings.for_model("dock_loading")
    assert model.ranges["pallets"] == (1.0, 40.0)
    assert model.words.x_unit("pallets") == "pallet"
    assert model.alerts.to == ("planning.lead@example.com", "dock.planning@example.com")
    assert settings.alerts.smtp == SmtpSettings()
    text = EXAMPLE.read_text()
    for cls in (CheckSettings, SmtpSettings):
        for f in fields(cls):
            assert f"\n{f.name} =" in text, f"{cls.__name__}.{f.name} is not documented"
    for name in ("to", "sender", "on", "remind_every_days", "eml_dir", "catch_up_nights"):
        assert f"\n{name} =" in text
    assert {f.name for f in fields(AlertSettings)} == {"to", "sender", "on", "remind_every_days",
                                                      "eml_dir", "smtp", "catch_up_nights"}
    source = model.source
    assert source is not None and ":since" in source.query
    for f in fields(SqlSourceSettings):
        assert f"\n{f.name} =" in text or f.name == "url", f"source.{f.name} is not documented"
    assert "give the url as url" in text.lower()


def test_precedence_explicit_then_environment_then_working_directory(tmp_path):
    a, b, c = (tmp_path / n for n in ("a.toml", "b.toml", "fitwatch.toml"))
    a.write_text('[database]\nurl = "sqlite:///a.db"\n')
    b.write_text('[database]\nurl = "sqlite:///b.db"\n')
    c.write_text('[database]\nurl = "sqlite:///c.db"\n')
    env = {"FITWATCH_CONFIG": str(b)}
    assert load_settings(a, environ=env, cwd=tmp_path).database_url == "sqlite:///a.db"
    assert load_settings(None, environ=env, cwd=tmp_path).database_url == "sqlite:///b.db"
    assert load_settings(None, environ={}, cwd=tmp_path).database_url == "sqlite:///c.db"
    empty = tmp_path / "empty"
    empty.mkdir()
    assert load_settings(None, environ={}, cwd=empty) == Settings()


def test_per_model_sections_override_the_global_ones():
    s = parse_settings(tomllib.loads("""
[check]
level = 0.9
test_window_days = 21
[models.m.check]
level = 0.8
"""))
    assert s.check.level == 0.9
    assert s.for_model("m").check.level == 0.8
    assert s.for_model("m").check.test_window_days == 21  # inherited
    assert s.for_model("other").check.level == 0.9
    assert s.ingest.future_tolerance == timedelta(minutes=5)


@pytest.mark.parametrize("text,key,words", [
    ("[check]\nlevl = 0.9", "check.levl", "unknown key"),
    ("[chek]\nlevel = 0.9", "chek", "unknown key"),
    ("[check]\nlevel = '0.9'", "check.level", "expected a number, got a string"),
    ("[check]\nlevel = 1.5", "check.level", "strictly between 0 and 1"),
    ("[check]\ncoverage_window_days = 2.5", "check.coverage_window_days", "an integer"),
    ("[check]\ncusum_unit = 'week'", "check.cusum_unit", "one of day, observation"),
    ("[check]\nrefit_pvalue = 0.05", "check.refit_pvalue", "must not exceed"),
    ("[check]\nsilence_pvalue = 0", "check.silence_pvalue", "strictly between 0 and 1"),
    ("[models.m.check]\nrejected_file_share = 1.5", "models.m.check.rejected_file_share",
     "strictly between 0 and 1"),
    ("[schedule]\ntimezone = 'Mars/Olympus'", "schedule.timezone", "unknown time zone"),
    ("[alerts]\nto = 'lead@example.com'", "alerts.to", "a list of strings"),
    ("[alerts]\nto = ['not-an-address']", "alerts.to", "not an e-mail address"),
    ("[alerts]\non = ['ok']", "alerts.on", "unknown status"),
    # a password in the file: refused with the reason and where to put it instead
    ("[alerts.smtp]\npassword = 'x'", "alerts.smtp.password", "not read from the settings "
     "file (the file is readable by whoever can read the configuration"),
    ("[alerts.smtp]\npassword = 'x'", "alerts.smtp.password", "password_env"),
    # RFC 5322 §3.2.3 dot-atom: no leading, trailing or doubled dots in the local part
    ("[alerts]\nto = ['../../x@example.com']", "alerts.to", "not an e-mail address"),
    ("[alerts]\nto = ['lead.@example.com']", "alerts.to", "not an e-mail address"),
    ("[alerts]\nto = ['lead@exa mple.com']", "alerts.to", "not an e-mail address"),
    ("[models.a.alerts]\nsender = 'x@example.com'", "models.a.alerts.sender", "unknown key"),
    ("[models.a.source]\nurl = 'sqlite://'\nurl_env = 'X'\nquery = 'SELECT 1'",
     "models.a.source", "exactly one of url and url_env"),
    ("[models.a.source]\nurl = 'sqlite://'", "models.a.source.query", "must not be empty"),
    ("[alerts.smtp]\nhost = 'mail.example.com'\nsecurity = 'none'", "alerts.smtp.security",
     "loopback"),
    ("[alerts.smtp]\nport = 70000", "alerts.smtp.port", "at most 65535"),
    ("[models.m.ranges]\npallets = [40, 1]", "models.m.ranges.pallets", "low must be below"),
    ("[models.m.ranges]\npallets = 3", "models.m.ranges.pallets", "expected [low, high]"),
    ("[models.m]\ncolour = 'red'", "models.m.colour", "unknown key"),
    ("[ingest]\nchunk_rows = 10", "ingest.chunk_rows", "at least 1000"),
])
def test_bad_settings_name_the_key_and_the_file(tmp_path, text, key, words):
    path = tmp_path / "bad.toml"
    path.write_text(text)
    with pytest.raises(ConfigError) as err:
        load_settings(path, environ={})
    message = str(err.value)
    assert str(path) in message and f"'{key}'" in message and words in message


@pytest.mark.parametrize("cron, words", [
    ("nightly", "five-field cron"),
    # field ranges as in crontab(5): minute 0-59, hour 0-23, day of month 1-31, month 1-12
    ("99 99 * * *", "minute field '99'"),
    ("30 24 * * *", "hour field '24'"),
    ("30 2 * 13 *", "month field '13'"),
    ("30 2 31 2 *", "never fires"),  # no 31 February
    # crontab(5) counts weekdays from Sunday = 0, APScheduler 3.x from Monday = 0 (the warning
    # in the documentation of CronTrigger.from_crontab): a number could mean either day
    ("30 2 * * 1-5", "write weekdays as names"),
])
def test_a_cron_the_scheduler_refuses_names_the_key_and_the_file_when_the_settings_load(
        tmp_path, cron, words):
    # parsed at load: a typo stops every command, not the daemon at night
    path = tmp_path / "bad.toml"
    path.write_text(f"[schedule]\ncron = '{cron}'\n")
    with pytest.raises(ConfigError) as err:
        load_settings(path, environ={})
    message = str(err.value)
    assert str(path) in message and "'schedule.cron'" in message and words in message


def test_cron_weekday_names_mean_the_days_they_name():
    # crontab(5): "mon-fri" is Monday to Friday; Python's date.weekday() counts Monday = 0
    settings = parse_settings({"schedule": {"cron": "30 2 * * mon-fri",
                                            "timezone": "Europe/Berlin"}}, "<test>")
    trigger = settings.schedule.trigger
    fire = trigger.get_next_fire_time(None, datetime(2026, 3, 1, tzinfo=settings.timezone))
    fires = []
    for _ in range(10):
        fires.append(fire)
        fire = trigger.get_next_fire_time(fire, fire + timedelta(seconds=1))
    assert [f.weekday() for f in fires] == [0, 1, 2, 3, 4] * 2
    assert all((f.hour, f.minute) == (2, 30) for f in fires)
    assert fires[0].date().isoformat() == "2026-03-02"  # 1 March 2026 is a Sunday


def test_broken_toml_and_missing_file_are_config_errors(tmp_path):
    path = tmp_path / "broken.toml"
    path.write_text("[check\nlevel = ")
    with pytest.raises(ConfigError, match="not valid TOML"):
        load_settings(path, environ={})
    with pytest.raises(ConfigError, match="does not exist"):
        load_settings(tmp_path / "nope.toml", environ={})
    with pytest.raises(ConfigError, match="FITWATCH_CONFIG"):
        load_settings(None, environ={"FITWATCH_CONFIG": str(tmp_path / "nope.toml")})


def test_report_settings_name_the_team_page_folder():
    assert Settings().report == ReportSettings(dir="", days=90)
    settings = parse_settings({"report": {"dir": "/srv/fitwatch/pages", "days": 30}}, "<test>")
    assert settings.report == ReportSettings(dir="/srv/fitwatch/pages", days=30)
    with pytest.raises(ConfigError, match=r"'report\.folder': unknown key; allowed here: days, "
                                          r"dir"):
        parse_settings({"report": {"folder": "pages"}}, "<test>")
    with pytest.raises(ConfigError, match=r"'report\.days'.*at least 1"):
        parse_settings({"report": {"days": 0}}, "<test>")
    with pytest.raises(ConfigError, match=r"'report\.dir'.*expected a string"):
        parse_settings({"report": {"dir": 1}}, "<test>")
    example = load_settings(EXAMPLE, environ={})
    assert example.report == ReportSettings()
    text = EXAMPLE.read_text()
    assert "\n[report]\n" in text
    for f in fields(ReportSettings):
        assert f"\n{f.name} =" in text, f"report.{f.name} is not documented"


def test_catch_up_nights_is_global_and_at_least_one(tmp_path):
    path = tmp_path / "f.toml"
    path.write_text("[alerts]\ncatch_up_nights = 0\n")
    with pytest.raises(ConfigError) as err:
        load_settings(path, environ={})
    assert "'alerts.catch_up_nights'" in str(err.value)
    path.write_text("[models.m.alerts]\ncatch_up_nights = 5\n")
    with pytest.raises(ConfigError) as err:
        load_settings(path, environ={})
    assert "catch_up_nights" in str(err.value)
