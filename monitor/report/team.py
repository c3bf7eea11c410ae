"""``report --all``: one page for the whole team, every model's status and a small chart,
linking to each model's own page.

The folder it writes::

    DIR/index.html                      the team page
    DIR/models/NAME/index.html          each model's page (:mod:`monitor.report.page`)
    DIR/models/NAME/*.png               its charts, and glance.png: the team page's small chart

Model names are made of letters, digits, '_', '-' and '.' (``domain.model.NAME_PATTERN``), so
each is a safe folder name; the pages sit under ``models/`` so that no name (``index.html``
included) can clash with the team page. The daemon calls :func:`write_team_report` after each
run when ``[report] dir`` is set. Folders of models deleted since are left as they are, unlinked.
"""

from __future__ import annotations

from dataclasses import dataclass
from datetime import UTC, date, datetime
from pathlib import Path
from typing import Any

from sqlalchemy import Engine

from monitor.config import Settings
from monitor.domain.status import Status
from monitor.errors import FitwatchError, InputError, describe
from monitor.interface.output import to_jsonable
from monitor.report.charts import glance_chart
from monitor.report.files import folder_for, render, unusable, write_files
from monitor.report.page import PAGE, ReportData, load_report_data, write_model_page
from monitor.report.series import limit_share_series
from monitor.store.access import database
from monitor.store.models import list_models

MODELS = "models"
GLANCE = "glance.png"
_TEMPLATE = "team.html.j2"


@dataclass(frozen=True)
class TeamRow:
    """One model on the team page."""

    model: str
    status: str | None  # None: never checked
    since: date | None
    last_checked_day: date | None
    reason: str  # one line: the first reason of the latest check, or why there is none
    page: str | None  # the model's page, relative to the team page (None: not written)
    chart: str | None  # its small chart, likewise
    chart_text: str  # what the small chart shows (its alt text)
    problem: str | None = None  # why the model's page could not be written


@dataclass(frozen=True)
class TeamReport:
    """Where the team page was written and what it lists."""

    path: Path
    rows: tuple[TeamRow, ...]
    written_at: datetime

    @property
    def problems(self) -> tuple[str, ...]:
        return tuple(f"{r.model}: {r.problem}" for r in self.rows if r.problem)

    def as_dict(self) -> dict[str, Any]:
        return {"path": self.path, "written_at": self.written_at,
                "models": [to_jsonable(r) for r in self.rows], "problems": list(self.problems)}

    def sentence(self) -> str:
        pages = sum(r.page is not None for r in self.rows)
        text = (f"team page of {len(self.rows)} model(s) written to {self.path} "
                f"({pages} model page(s) under {self.path.parent / MODELS})")
        return "\n".join([text, *(f"  not written: {p}" for p in self.problems)])


def write_team_report(settings: Settings, out_dir: Path, *, engine: Engine | None = None,
                      now: datetime | None = None, days: int = 90) -> TeamReport:
    """Write the team page and every model's page into ``out_dir`` (created when missing).

    A model whose page cannot be written (its data cannot be read, a file cannot be written)
    is listed with the reason and the others are written; anything else is a bug and raises.
    """
    if days < 1:
        raise InputError(f"a report covers at least one day; got days={days}")
    out_dir = Path(out_dir)
    unusable(out_dir, PAGE)
    now = now or datetime.now(UTC)
    written_at = now.astimezone(settings.timezone)
    with database(settings, engine, sections="warn") as db:
        with db.connect() as conn:
            names = [m.name for m in list_models(conn)]
        folder_for(out_dir, PAGE)
        rows = []
        for name in names:
            try:
                with db.connect() as conn:
                    data = load_report_data(conn, settings, name, now, days)
                rows.append(_model_row(data, out_dir, written_at))
            except FitwatchError as exc:  # e.g. deleted meanwhile, or a file not writable
                rows.append(TeamRow(name, None, None, None, "", None, None, "",
                                    problem=describe(exc)))
    # the most pressing first (the one status ranking), never checked last
    rows.sort(key=lambda r: (-Status(r.status).rank if r.status else 1, r.model))
    report = TeamReport(out_dir / PAGE, tuple(rows), written_at)
    html = render(_TEMPLATE, {"rows": report.rows, "models": MODELS,
                              "written_at": written_at.strftime("%Y-%m-%d %H:%M %Z"),
                              "days": days})
    write_files(out_dir, {PAGE: html.encode("utf-8")})
    return report


def _model_row(data: ReportData, out_dir: Path, written_at: datetime) -> TeamRow:
    name = data.model.name
    folder = folder_for(out_dir / MODELS / name, PAGE)
    write_model_page(data, folder, written_at, back=f"../../{PAGE}")
    glance = glance_chart(GLANCE, limit_share_series(data.checks,
                                                     data.settings.check.watch_cusum_fraction),
                          data.marks, name)
    write_files(folder, {GLANCE: glance.png})
    last = data.last
    return TeamRow(name, last.status if last else None, last.status_since if last else None,
                   last.day if last else None, _one_line(data),
                   f"{MODELS}/{name}/{PAGE}", f"{MODELS}/{name}/{GLANCE}", glance.alt)


def _one_line(data: ReportData) -> str:
    last = data.last
    if last is None:
        return ("not checked yet" if data.active is not None
                else "no active version: fit one with 'fitwatch model fit'")
    return last.reasons[0] if last.reasons else f"{last.status} with no finding"
