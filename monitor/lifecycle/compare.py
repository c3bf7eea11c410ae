"""Side by side: the active version and a candidate on the same held-out days.

The held-out days are the last days with rows in the candidate's data window (by default a
quarter of them, at least three, at most fourteen). A candidate fitted on those very days would
be judged on its own training rows, so for the comparison it is refitted, the same way, on the
window's days before the hold-out (from their merged day statistics: the same least-squares
line, so rows pruned by retention are not needed; the held-out days are scored from their rows
and must be kept); a candidate whose window ends before the hold-out (or one
imported from elsewhere) is scored as stored. The active version is always scored as stored.

The recommendation is ``promote`` when the candidate's intervals do not cover significantly less
than promised and either its day mean squared errors are smaller (one-sided day-blocked test at
5 %), or the active version's intervals do cover significantly less (the scatter changed, not
the line), or it predicts no worse and its bias chart limit is clearly tighter (a version fitted
on a short window after a change, refitted on the longer window since); ``keep`` otherwise;
``wait`` when there are too few days to judge.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from datetime import date, timedelta

import numpy as np
from sqlalchemy import Connection, Engine

from monitor.config import ModelSettings, Settings
from monitor.domain.model import ModelRecord
from monitor.domain.phrasing import fmt, fmt_p, percent
from monitor.domain.version import Version, VersionState
from monitor.errors import StateError, UsageError
from monitor.stats.holdout import HoldoutScore, LossDifference, holdout_score, loss_difference_test
from monitor.stats.ols import fit_moments
from monitor.stats.prediction import PredictionModel
from monitor.store.access import database
from monitor.store.checks import last_check
from monitor.store.models import get_model
from monitor.store.observations import Observations, load_day_stats, load_observations
from monitor.store.retention import kept_from
from monitor.store.row_days import days_with_rows
from monitor.store.versions import active_version, get_version, list_versions

MIN_HOLDOUT_DAYS = 3
MAX_DEFAULT_HOLDOUT_DAYS = 14
PROMOTE_PVALUE = 0.05
SHARPER_RATIO = 2 / 3  # a candidate whose bias chart limit is this much tighter is worth it

PROMOTE, KEEP, WAIT = "promote", "keep", "wait"


@dataclass(frozen=True)
class Recommendation:
    action: str  # promote | keep | wait
    sentence: str
    command: str | None  # the command to run next, if any


@dataclass(frozen=True, eq=False)
class Comparison:
    """Both versions' figures on the held-out days and what to do about them."""

    model: ModelRecord
    active: Version
    candidate: Version
    holdout: tuple[date, date] | None
    evaluated_as: str  # "refitted" (on the days before the hold-out) or "stored"
    evaluation_window: tuple[date, date] | None  # the refit's days, when refitted
    active_score: HoldoutScore | None
    candidate_score: HoldoutScore | None
    loss: LossDifference | None
    recommendation: Recommendation
    unit: str


def compare(settings: Settings, name: str, *, candidate: int | None = None,
            holdout_days: int | None = None, engine: Engine | None = None) -> Comparison:
    """``compare``: the active version against a candidate (default: the newest one)."""
    if holdout_days is not None and holdout_days < 1:
        raise UsageError(f"--holdout-days must be at least 1; got {holdout_days}")
    with database(settings, engine, sections="warn") as db, db.connect() as conn:
        model = get_model(conn, name)
        active = active_version(conn, model.id)
        if active is None:
            raise StateError(f"'{name}' has no active version to compare with")
        chosen = _candidate(conn, model, candidate)
        return _compare(conn, model, active, chosen, settings.for_model(name), holdout_days)


def _candidate(conn: Connection, model: ModelRecord, number: int | None) -> Version:
    if number is not None:
        version = get_version(conn, model.id, number, model_name=model.name)
        if version.state != VersionState.CANDIDATE:
            raise StateError(f"version {number} of '{model.name}' is {version.state}, not a "
                             "candidate")
        return version
    candidates = [v for v in list_versions(conn, model.id) if v.state == VersionState.CANDIDATE]
    if not candidates:
        raise StateError(f"'{model.name}' has no candidate version; fit one with "
                         f"'fitwatch refit {model.name}'")
    return candidates[-1]


def _compare(conn: Connection, model: ModelRecord, active: Version,
             candidate: Version, ms: ModelSettings,
             holdout_days: int | None) -> Comparison:
    unit = ms.words.y_unit
    days = days_with_rows(conn, model, candidate.fit_start)
    wanted = holdout_days or min(MAX_DEFAULT_HOLDOUT_DAYS,
                                 max(MIN_HOLDOUT_DAYS, math.ceil(len(days) / 4)))
    held = days[-wanted:] if len(days) > wanted else []
    refit_needed = candidate.fit_end is not None and bool(held) and candidate.fit_end >= held[0]
    before = [d for d in days if not held or d < held[0]]
    overlaps = candidate.fit_end is not None and bool(days) and candidate.fit_end >= days[-1]
    wait = _too_few(len(days), wanted, len(held), len(before) if refit_needed else None, ms,
                    refit_later=overlaps)
    if wait:
        return Comparison(model, active, candidate, None, "stored", None, None, None, None,
                          Recommendation(WAIT, wait, None), unit)
    holdout = (held[0], held[-1])
    kept = kept_from(conn, model.id)
    if kept is not None and holdout[0] < kept:
        raise StateError(
            f"the held-out days of '{model.name}' ({holdout[0].isoformat()} to "
            f"{holdout[1].isoformat()}) start before {kept.isoformat()}, and the rows before "
            "that day were pruned by retention; compare scores held-out days row by row: hold "
            f"out fewer days (--holdout-days, at least {MIN_HOLDOUT_DAYS})")
    rows = load_observations(conn, model, *holdout)
    candidate_model, window = candidate.prediction_model(), None
    if refit_needed:
        assert candidate.fit_start is not None
        window = (candidate.fit_start, held[0] - timedelta(days=1))
        # the line from the window's merged day statistics: exact, and pruned rows not needed
        train = load_day_stats(conn, model, *window).moments.total()
        candidate_model = PredictionModel.from_fit(fit_moments(train, model.predictors))
    active_model = active.prediction_model()
    a = _score(active, active_model, rows)
    c = _score(candidate, candidate_model, rows)
    loss = loss_difference_test(rows.days, rows.y - active_model.predict(rows.x),
                                rows.y - candidate_model.predict(rows.x))
    advice = _recommend(model, active, candidate, a, c, loss, ms, unit)
    if advice.action == KEEP:
        advice = _against_standing_refit(conn, model, candidate, holdout, advice)
    return Comparison(model, active, candidate, holdout, "refitted" if refit_needed else "stored",
                      window, a, c, loss, advice, unit)


def _against_standing_refit(conn: Connection, model: ModelRecord, candidate: Version,
                            holdout: tuple[date, date], advice: Recommendation) -> Recommendation:
    """A ``keep`` while the monitor still advises a refit says, in the same sentence, why the
    two disagree and what to do."""
    last = last_check(conn, model.id, model=model.name)
    if last is None or last.status != "refit":
        return advice
    since = last.status_since.isoformat() if last.status_since else "—"
    change = last.change_day
    if change is not None and candidate.fit_start is not None and candidate.fit_start < change:
        why = (f"the candidate's window starts on {candidate.fit_start.isoformat()}, before the "
               f"estimated change of {change.isoformat()}, so it mixes both regimes; refit "
               f"with --start {change.isoformat()} and compare again")
    else:
        why = (f"the held-out days ({holdout[0].isoformat()} to {holdout[1].isoformat()}) are "
               "too few to show a change that the daily charts have seen; wait a few days and "
               "compare again, or acknowledge the advice if the active version serves well")
    return Recommendation(
        KEEP, f"The monitor advises a refit (since {since}), yet: {advice.sentence[:-1]}; "
        f"the two disagree because {why}.", advice.command)


def _too_few(days: int, wanted: int, held: int, before: int | None, ms: ModelSettings, *,
             refit_later: bool = False) -> str:
    """Why there is too little to judge and how many more days with rows it takes, or ''
    when there is enough. ``refit_later``: the candidate's window reaches the last day with
    rows, so the held-out days will be cut from it and it is refitted on the days before."""
    fit = ms.check.min_fit_days
    if held < MIN_HOLDOUT_DAYS or held < wanted:
        need = max(wanted, MIN_HOLDOUT_DAYS)
        total = need + (fit if refit_later else 1)
        after = (f" and at least {fit} before them to refit the candidate on" if refit_later
                 else " and one before them")
        return (f"There are {days} days with rows in the candidate's window; holding {need} out "
                f"takes {need}{after}: {total - days} more day(s) with rows. Compare again "
                f"then, or hold out fewer days (--holdout-days, at least {MIN_HOLDOUT_DAYS}).")
    if before is not None and before < fit:
        return (f"Holding out {held} of the {days} days leaves {before} to refit the candidate "
                f"on; at least {fit} are needed: {fit - before} more day(s) with rows. Hold out "
                "fewer days or compare again then.")
    return ""


def _score(version: Version, prediction: PredictionModel,
           rows: Observations) -> HoldoutScore:
    return holdout_score(prediction, rows.x, rows.y, rows.days, version.level,
                         version.baseline.dispersion or 1.0)


def sharper(active: Version, candidate: Version) -> bool:
    """The candidate's bias chart limit is clearly tighter (it was fitted on more days)."""
    if active.cusum_h is None or candidate.cusum_h is None:
        return False
    if any(c is not None and c.learn_until for c in
           (active.baseline.calibration, candidate.baseline.calibration)):
        return False  # a self-starting chart's limit is not tightened by a longer window
    return candidate.cusum_h < SHARPER_RATIO * active.cusum_h


def _recommend(model: ModelRecord, active: Version, candidate: Version,
               a: HoldoutScore, c: HoldoutScore, loss: LossDifference, ms: ModelSettings,
               unit: str) -> Recommendation:
    rmse = f"RMSE {fmt(c.rmse, 3)} against {fmt(a.rmse, 3)}{' ' + unit if unit else ''}"
    cover = (f"its intervals covered {percent(c.coverage.coverage, 1)} of the held-out rows "
             f"(target {percent(candidate.level, 1)}; the active version's "
             f"{percent(a.coverage.coverage, 1)})")
    better = bool(np.isfinite(loss.pvalue) and loss.pvalue < PROMOTE_PVALUE)
    covers = not c.coverage.pvalue_low < ms.check.watch_pvalue
    active_covers = not a.coverage.pvalue_low < ms.check.watch_pvalue
    command = f"fitwatch promote {model.name} {candidate.number} --reason \"...\""
    if covers and better:
        return Recommendation(
            PROMOTE, f"On the {c.days} held-out days the candidate's errors are smaller "
            f"({rmse}, {fmt_p(loss.pvalue)}) and {cover}.", command)
    if covers and not active_covers:
        return Recommendation(
            PROMOTE, f"On the {c.days} held-out days the errors are of similar size ({rmse}, "
            f"{fmt_p(loss.pvalue)}), but the active version's intervals covered only "
            f"{percent(a.coverage.coverage, 1)} of the held-out rows, significantly short of "
            f"{percent(candidate.level, 1)} ({fmt_p(a.coverage.pvalue_low)}), while the "
            f"candidate's covered {percent(c.coverage.coverage, 1)}: the scatter has changed "
            "and the candidate's intervals reflect it.", command)
    worse = bool(np.isfinite(loss.pvalue) and 1.0 - loss.pvalue < PROMOTE_PVALUE)
    if covers and not worse and sharper(active, candidate):
        return Recommendation(
            PROMOTE, f"On the {c.days} held-out days the candidate predicts as well ({rmse}, "
            f"{fmt_p(loss.pvalue)}) and {cover}; fitted on more days, it pins the line down "
            f"better, so its bias chart limit drops from {fmt(active.cusum_h, 3)} to "
            f"{fmt(candidate.cusum_h, 3)} and a future change is caught sooner.", command)
    if better:
        return Recommendation(
            KEEP, f"The candidate's errors are smaller ({rmse}, {fmt_p(loss.pvalue)}) but "
            f"{cover}, significantly short ({fmt_p(c.coverage.pvalue_low)}); refit on a "
            "longer window or wait for more days.", None)
    return Recommendation(
        KEEP, f"On the {c.days} held-out days the candidate is not clearly better ({rmse}, "
        f"{fmt_p(loss.pvalue)}); {cover}.", None)
