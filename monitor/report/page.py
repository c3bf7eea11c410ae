"""``report``: one model's page, a self-contained folder with ``index.html`` and PNG charts.

Loading (one read-only connection), series (:mod:`monitor.report.series`), drawing
(:mod:`monitor.report.charts` and :mod:`monitor.report.row_charts`, each chart with the caption
its drawing code wrote) and the page (a Jinja2 template shipped in ``templates/``, autoescaped,
inline CSS, no scripts or external assets) are kept apart.
"""

from __future__ import annotations

from dataclasses import dataclass
from datetime import UTC, date, datetime, timedelta
from pathlib import Path
from typing import Any

import numpy as np
from sqlalchemy import Connection, Engine

from monitor.config import ModelSettings, Settings, Wording
from monitor.domain.check import DayCheck
from monitor.domain.days import local_day, yesterday
from monitor.domain.model import ModelRecord
from monitor.domain.phrasing import fit_summary, fmt
from monitor.domain.version import Version, VersionState
from monitor.errors import InputError
from monitor.interface.output import to_jsonable
from monitor.interface.versions import VersionView
from monitor.monitoring.window_wording import WindowFinding, window_findings
from monitor.report import charts, row_charts
from monitor.report.files import folder_for, render, unusable, write_files
from monitor.report.marks import Mark, load_marks
from monitor.report.series import (
    CoverageSeries,
    CusumSeries,
    ResidualSeries,
    ScatterSeries,
    ScoredRows,
    coverage_series,
    cusum_series,
    residual_series,
    scatter_series,
    score_rows,
)
from monitor.store.access import database
from monitor.store.checks import last_check, load_checks
from monitor.store.models import get_model
from monitor.store.observations import load_observations
from monitor.store.row_days import last_observed_at
from monitor.store.versions import list_versions

PAGE = "index.html"
_TEMPLATE = "report.html.j2"


@dataclass(frozen=True)
class ReportResult:
    """Where the report was written and what it covers."""

    path: Path  # index.html
    charts: tuple[Path, ...]
    model: str
    version: int | None  # the active version, None when the model has none
    candidate: int | None
    status: str | None  # None: never checked
    first_day: date
    last_day: date

    def as_dict(self) -> dict[str, Any]:
        return to_jsonable(self)

    def sentence(self) -> str:
        version = f"version {self.version}" if self.version is not None else "no active version"
        extra = f", candidate {self.candidate}" if self.candidate is not None else ""
        return (f"report for {self.model} ({version}{extra}; {self.first_day} .. "
                f"{self.last_day}) written to {self.path}")


@dataclass(frozen=True, eq=False)
class ReportData:
    """Everything the page shows, read in one go."""

    model: ModelRecord
    settings: ModelSettings
    active: Version | None
    candidate: Version | None
    last: DayCheck | None  # the model's latest check, possibly before the period
    checks: tuple[DayCheck, ...]
    scatter: ScatterSeries | None  # a model with one predictor: y against x with the lines
    scored: ScoredRows  # the rows of the checked days, scored as the checks scored them
    coverage: CoverageSeries
    cusum: CusumSeries
    residuals: ResidualSeries
    marks: tuple[Mark, ...]  # promotions, rollbacks, acknowledgements, corrections
    first_day: date
    last_day: date

    @property
    def nouns(self) -> charts.Nouns:
        return charts.Nouns(self.settings.words.row, self.settings.words.rows)

    @property
    def y_label(self) -> str:
        unit = self.settings.words.y_unit
        return f"{self.model.response} ({unit})" if unit else self.model.response


def write_report(settings: Settings, name: str, out_dir: Path, *, engine: Engine | None = None,
                 now: datetime | None = None, days: int = 90) -> ReportResult:
    """Write model ``name``'s report for the ``days`` days through its last checked day.

    Without checks the period ends on the day of the last stored row (or yesterday). The folder
    is created when missing; files from an earlier report in it are replaced (each file whole:
    a reader never sees half a file).
    """
    if days < 1:
        raise InputError(f"a report covers at least one day; got days={days}")
    out_dir = Path(out_dir)
    unusable(out_dir, PAGE)
    now = now or datetime.now(UTC)
    with database(settings, engine, sections="warn") as db, db.connect() as conn:
        data = load_report_data(conn, settings, name, now, days)
    return write_model_page(data, folder_for(out_dir, PAGE), now.astimezone(settings.timezone))


def write_model_page(data: ReportData, out_dir: Path, written_at: datetime,
                     back: str | None = None) -> ReportResult:
    """Draw ``data``'s charts and write them and the page into ``out_dir`` (which exists);
    ``back``: the address of the team page, relative to this one, when it has one."""
    pictures = report_charts(data)
    html = render_page(data, written_at, pictures, back)
    write_files(out_dir, {**{c.file: c.png for c in pictures}, PAGE: html.encode("utf-8")})
    return ReportResult(out_dir / PAGE, tuple(out_dir / c.file for c in pictures),
                        data.model.name, data.active.number if data.active else None,
                        data.candidate.number if data.candidate else None,
                        data.last.status if data.last else None, data.first_day, data.last_day)


def report_charts(data: ReportData) -> tuple[charts.Chart, ...]:
    """The page's charts, in page order: rows first (y against x for one predictor, else
    observed against planned and the residuals against each predictor), then the time charts,
    each time chart with the period's marks."""
    nouns, marks = data.nouns, data.marks
    if data.scatter is not None:
        rows = [row_charts.scatter_chart(data.scatter, nouns)]
    else:
        rows = [row_charts.planned_chart(data.scored, data.y_label, nouns),
                row_charts.predictor_residuals_chart(data.scored, data.model.predictors, nouns)]
    scorers = [s.number for s in data.scored.scorers]
    return (*rows,
            charts.coverage_chart(data.coverage, marks, nouns),
            charts.cusum_chart(data.cusum, marks, nouns),
            charts.residuals_chart(data.residuals, marks, nouns, scorers))


def load_report_data(conn: Connection, settings: Settings, name: str, now: datetime,
                     days: int) -> ReportData:
    model = get_model(conn, name)
    own = settings.for_model(name)
    versions = list_versions(conn, model.id)
    active = next((v for v in versions if v.state == VersionState.ACTIVE), None)
    candidate = max((v for v in versions if v.state == VersionState.CANDIDATE),
                    key=lambda v: v.number,
                    default=None)
    last = last_check(conn, model.id, model=name)
    if last is not None:
        last_day = last.day
    else:
        latest = last_observed_at(conn, model)
        zone = settings.timezone
        last_day = local_day(latest, zone) if latest is not None else yesterday(now, zone)
    first_day = last_day - timedelta(days=days - 1)
    checks = tuple(load_checks(conn, model.id, first_day, last_day, model=name))
    rows = load_observations(conn, model, first_day, last_day)
    marks = load_marks(conn, model.id, first_day, last_day)
    words = own.words
    y_label = f"{model.response} ({words.y_unit})" if words.y_unit else model.response
    recent_from = max(first_day, last_day - timedelta(days=own.check.coverage_window_days - 1))
    lines = [v for v in (active, candidate) if v is not None]
    level = active.level if active else own.check.level
    scored = score_rows(rows, checks, versions)
    scatter = (scatter_series(rows, lines, recent_from, model.predictors[0], y_label)
               if model.k == 1 else None)
    return ReportData(
        model=model, settings=own, active=active, candidate=candidate, last=last, checks=checks,
        scatter=scatter, scored=scored,
        coverage=coverage_series(checks, level, own.check.coverage_window_days),
        cusum=cusum_series(checks), residuals=residual_series(scored, checks, versions),
        marks=marks, first_day=first_day, last_day=last_day)


# the page ---------------------------------------------------------------------------------------
def _plus_minus(version: Version, i: int) -> str:
    value = fmt(float(version.coefficients[i]), 4)
    if version.line.std_errors is None or not np.isfinite(version.line.std_errors[i]):
        return value
    return f"{value} ± {fmt(float(version.line.std_errors[i]), 3)}"


def _version_view(version: Version | None, words: Wording) -> dict[str, Any] | None:
    if version is None:
        return None
    return {
        "number": version.number, "state": version.state,
        "coefficients": [{"term": t, "value": _plus_minus(version, i)}
                         for i, t in enumerate(version.terms)],
        "fit": fit_summary(version.line, words.rows, words.y_unit), "n": version.line.n,
        "level": f"{version.level * 100:g} %",
        "fit_window": (f"{version.fit_start} .. {version.fit_end}"
                       if version.fit_start else "not recorded"),
        "active_from": version.active_from,
    }


def _learning(data: ReportData) -> str | None:
    """What the active version has learned from its own days (as ``model show``): the level
    of a self-starting version, and the within-day slope chart's reference."""
    active, last = data.active, data.last
    if active is None:
        return None
    cal = active.baseline.calibration
    learned = last.state.learning if last is not None and last.version_id == active.id \
        else None
    view = VersionView.of(data.model.spec, active, data.settings.words, learned)
    said = []
    if cal is not None and cal.learn_until and active.baseline.fit_days:
        said.append("Self-starting: it keeps learning its level from its own in-control days; "
                    + view.learning_text(active.baseline.fit_days, cal.learn_until) + ".")
    chart = view.slope_chart()
    if chart is not None and chart["reference"] == "learning":
        text = view.slope_learning_text(chart)
        said.append("The within-day slope chart: " + text + ".")
    return " ".join(said) or None


def _window_findings(data: ReportData) -> list[WindowFinding]:
    """The active version's fit-window findings, those found first (as ``model show``)."""
    active = data.active
    if active is None or active.baseline.diagnosis is None:
        return []
    found = window_findings(active.baseline.diagnosis, data.settings.words,
                            data.model.response, data.model.predictors)
    return sorted(found, key=lambda f: not f.found)


def _comparison(active: Version | None,
                candidate: Version | None) -> list[dict[str, str]]:
    if active is None or candidate is None:
        return []
    terms = list(dict.fromkeys((*active.terms, *candidate.terms)))
    rows = []
    for term in terms:
        a = _plus_minus(active, active.terms.index(term)) if term in active.terms else "—"
        c = (_plus_minus(candidate, candidate.terms.index(term))
             if term in candidate.terms else "—")
        rows.append({"term": term, "active": a, "candidate": c})
    rows.append({"term": "typical scatter", "active": fmt(active.line.s, 4),
                 "candidate": fmt(candidate.line.s, 4)})
    return rows


def render_page(data: ReportData, written_at: datetime,
                pictures: tuple[charts.Chart, ...] | None = None,
                back: str | None = None) -> str:
    """The HTML of the report (autoescaped: names and reasons cannot inject markup); the charts
    are drawn here unless given."""
    pictures = report_charts(data) if pictures is None else pictures
    words = data.settings.words
    last = data.last
    drawn = {line.number for line in data.scatter.lines} if data.scatter else set()
    context = {
        "model": data.model.name,
        "formula": f"{data.model.response} ~ {' + '.join(data.model.predictors)}",
        "rows": words.rows, "row": words.row,
        "status": last.status if last else None,
        "since": last.status_since if last else None,
        "reasons": list(last.reasons) if last else [],
        "last_checked_day": last.day if last else None,
        "first_day": data.first_day, "last_day": data.last_day,
        "checked_days": len(data.checks),
        "active": _version_view(data.active, words),
        "window_findings": _window_findings(data),
        "learning": _learning(data),
        "candidate": _version_view(data.candidate, words),
        "candidate_drawn": data.candidate is not None and data.candidate.number in drawn,
        "comparison": _comparison(data.active, data.candidate),
        "marks": data.marks,
        "charts": pictures,
        "back": back,
        "written_at": written_at.strftime("%Y-%m-%d %H:%M %Z"),
    }
    return render(_TEMPLATE, context)
