"""The ``fitwatch`` command line: parse, call one library function, print, map errors to codes.

Exit codes (:class:`~monitor.errors.ExitCode`): 0 done; 1 bad input, usage, state or database
(message on stderr, no traceback), and ``ingest`` of a file rejected whole; 2 internal error
(traceback in the log); 3 ``check --fail-on`` threshold reached (a data-health finding counts as
``watch``); 130 interrupted. Each error carries its code; :func:`exit_code_for` reads it.
"""

from __future__ import annotations

import argparse
import gc
import logging
import sys
from collections.abc import Callable, Iterator, Sequence
from contextlib import contextmanager
from datetime import UTC, date, datetime
from pathlib import Path
from typing import Any

from monitor import __version__
from monitor.config import Settings, load_settings
from monitor.domain.status import ALERTING
from monitor.errors import ExitCode, FitwatchError, UsageError, exit_code_for
from monitor.interface.output import dumps
from monitor.interface.progress import wants_progress

log = logging.getLogger("monitor")

EXIT_OK, EXIT_THRESHOLD = ExitCode.OK, ExitCode.THRESHOLD


class _Parser(argparse.ArgumentParser):
    """argparse that raises instead of exiting, so usage errors follow the same path."""

    def error(self, message: str) -> None:  # type: ignore[override]
        raise UsageError(f"{message} (see '{self.prog} --help')")


def _day(text: str) -> date:
    try:
        return date.fromisoformat(text)
    except ValueError as exc:
        raise argparse.ArgumentTypeError(f"'{text}' is not a date (YYYY-MM-DD)") from exc


def _level(text: str) -> float:
    try:
        value = float(text)
    except ValueError as exc:
        raise argparse.ArgumentTypeError(f"'{text}' is not a number") from exc
    if not 0 < value < 1:
        raise argparse.ArgumentTypeError(f"the level must lie between 0 and 1, got {text}")
    return value


def build_parser() -> argparse.ArgumentParser:
    p = _Parser(prog="fitwatch", description="Keep a fitted linear planning model honest.")
    p.add_argument("--version", action="version", version=f"fitwatch {__version__}")
    p.add_argument("--config", metavar="FILE", help="settings file (TOML)")
    p.add_argument("--db", metavar="URL", help="database URL (overrides the settings file)")
    p.add_argument("-v", "--verbose", action="count", default=0, help="more log output")
    sub = p.add_subparsers(dest="command", metavar="COMMAND", parser_class=_Parser)
    sub.required = True

    def command(name: str, help_text: str, handler: Callable[..., int],
                parent: Any = sub) -> argparse.ArgumentParser:
        cp = parent.add_parser(name, help=help_text, description=help_text)
        cp.set_defaults(handler=handler)
        return cp

    def json_flag(cp: argparse.ArgumentParser) -> None:
        cp.add_argument("--json", action="store_true", help="print one JSON document")

    def table_flags(cp: argparse.ArgumentParser) -> None:
        form = cp.add_mutually_exclusive_group()
        form.add_argument("--csv", action="store_true", help="print CSV (a header, then rows)")
        form.add_argument("--json", action="store_true", help="print one JSON document")

    command("init", "create or upgrade the database", _cmd_init)

    model = sub.add_parser("model", help="fit, import, list, show, rename or delete models")
    msub = model.add_subparsers(dest="model_command", metavar="ACTION", parser_class=_Parser)
    msub.required = True
    fit = command("fit", "fit a version of a model on stored or given observations",
                  _cmd_model_fit, msub)
    fit.add_argument("name", metavar="NAME")
    fit.add_argument("--data", metavar="FILE", help="CSV or Parquet file: stored, then fitted")
    fit.add_argument("--y", metavar="COL", help="response column (new models)")
    fit.add_argument("--x", metavar="COL", action="append", default=[],
                     help="predictor column; repeat for several (new models)")
    fit.add_argument("--time", metavar="COL", help="time column (new models)")
    fit.add_argument("--id", metavar="COL", help="observation id column (optional)")
    fit.add_argument("--start", metavar="DATE", type=_day, help="first day of the fit window")
    fit.add_argument("--end", metavar="DATE", type=_day, help="last day of the fit window")
    fit.add_argument("--level", metavar="L", type=_level, help="prediction interval level")
    json_flag(fit)
    imp = command("import", "store a model fitted elsewhere (TOML or JSON description)",
                  _cmd_model_import, msub)
    imp.add_argument("name", metavar="NAME")
    imp.add_argument("file", metavar="FILE")
    json_flag(imp)
    json_flag(command("list", "list models", _cmd_model_list, msub))
    rename = command("rename", "give a model a new name (audited)", _cmd_model_rename, msub)
    rename.add_argument("name", metavar="NAME")
    rename.add_argument("new_name", metavar="NEW")
    delete = command("delete", "delete a model with its observations, versions and checks",
                     _cmd_model_delete, msub)
    delete.add_argument("name", metavar="NAME")
    delete.add_argument("--yes", action="store_true", help="confirm: this cannot be undone")
    export = command("export", "write the active (or given) version in the 'model import' "
                     "format", _cmd_model_export, msub)
    export.add_argument("name", metavar="NAME")
    export.add_argument("--version", metavar="N", type=int)
    export.add_argument("--out", metavar="FILE", type=Path,
                        help="write here: TOML for a .toml file, JSON for .json (without "
                        "--out: JSON on standard output)")
    show = command("show", "show a model's active (or given) version", _cmd_model_show, msub)
    show.add_argument("name", metavar="NAME")
    show.add_argument("--version", metavar="N", type=int)
    json_flag(show)

    ing = command("ingest", "store a model's new observations from files or its SQL source",
                  _cmd_ingest)
    ing.add_argument("name", metavar="NAME")
    ing.add_argument("files", metavar="FILE", nargs="*")
    ing.add_argument("--source", action="store_true",
                     help="run the model's SQL source ([models.NAME.source]) instead of files")
    ing.add_argument("--strict", action="store_true",
                     help="reject a whole file when any row is bad")
    ing.add_argument("--replace", action="store_true",
                     help="a corrected file: where a stored row has the same id, the new values "
                          "win (the old ones stay in the audit trail; changed days are checked "
                          "again)")
    json_flag(ing)

    chk = command("check", "check every unchecked day (default: through yesterday)", _cmd_check)
    chk.add_argument("names", metavar="NAME", nargs="*")
    when = chk.add_mutually_exclusive_group()
    when.add_argument("--day", metavar="DATE", type=_day, help="check up to DATE, report DATE")
    when.add_argument("--through", metavar="DATE", type=_day, help="check through DATE")
    chk.add_argument("--fail-on", choices=tuple(ALERTING),
                     help="exit with code 3 when any model reaches this status")
    json_flag(chk)

    st = command("status", "each model's current status and why", _cmd_status)
    st.add_argument("names", metavar="NAME", nargs="*")
    json_flag(st)

    aud = command("audit", "what was done to the models (fits, promotions, rollbacks, "
                  "acknowledgements, corrections, prunes, renames, deletions, failed nights), "
                  "by whom and why", _cmd_audit)
    aud.add_argument("name", metavar="NAME", nargs="?", help="only this model (deleted ones too)")
    aud.add_argument("--since", metavar="DATE", type=_day, help="entries from this day on")
    aud.add_argument("--last", metavar="N", type=int, help="only the latest N entries")
    json_flag(aud)

    ref = command("refit", "fit a candidate on the days since the estimated change and compare "
                  "it with the active version", _cmd_compare)
    ref.add_argument("name", metavar="NAME")
    ref.add_argument("--start", metavar="DATE", type=_day,
                     help="first day of the new window (default: the estimated change day)")
    ref.add_argument("--end", metavar="DATE", type=_day,
                     help="last day of the new window (default: the last checked day)")
    ref.add_argument("--holdout-days", metavar="N", type=int,
                     help="days held out for the comparison (default: a quarter, 3 to 14)")
    json_flag(ref)
    cmp_ = command("compare", "the active version against a candidate on held-out days",
                   _cmd_compare)
    cmp_.add_argument("name", metavar="NAME")
    cmp_.add_argument("--candidate", metavar="N", type=int,
                      help="candidate version (default: the newest)")
    cmp_.add_argument("--holdout-days", metavar="N", type=int,
                      help="days held out for the comparison (default: a quarter, 3 to 14)")
    json_flag(cmp_)

    pro = command("promote", "make a candidate version the active one from the next "
                  "unchecked day", _cmd_transition)
    pro.add_argument("name", metavar="NAME")
    pro.add_argument("number", metavar="N", type=int)
    pro.add_argument("--reason", metavar="TEXT", help="why (kept in the audit log)")
    json_flag(pro)
    back = command("rollback", "bring back the previously active version", _cmd_transition)
    back.add_argument("name", metavar="NAME")
    back.add_argument("--reason", metavar="TEXT", help="why (kept in the audit log)")
    json_flag(back)
    ack = command("ack", "acknowledge the current advice (the bias chart restarts)",
                  _cmd_transition)
    ack.add_argument("name", metavar="NAME")
    ack.add_argument("--reason", metavar="TEXT", help="why (kept in the audit log)")
    json_flag(ack)

    pred = command("predict", "planned values and prediction intervals from the version in "
                   "force: one job (--at) or a file of planned jobs", _cmd_predict)
    pred.add_argument("name", metavar="NAME")
    pred.add_argument("file", metavar="FILE", nargs="?",
                      help="CSV or Parquet file of planned jobs (one per row); a CSV column "
                      "is written back as numbers when every filled cell is one, else as read")
    pred.add_argument("--at", metavar="COL=VALUE", action="append", default=[],
                      help="a predictor's value for one job; repeat for each predictor")
    pred.add_argument("--version", metavar="N", type=int, help="plan with this version")
    pred.add_argument("--level", metavar="L", type=_level, help="interval level")
    pred.add_argument("--out", metavar="FILE", type=Path,
                      help="write the planned rows here (.csv or .parquet)")
    json_flag(pred)
    rows = command("rows", "a day's rows with planned value, prediction interval, residual and "
                   "flags, scored by the version that checked the day; or rejected rows",
                   _cmd_rows)
    rows.add_argument("name", metavar="NAME")
    rows.add_argument("--day", metavar="DATE", type=_day,
                      help="the day's rows (with --rejected: the batches ingested that day)")
    rows.add_argument("--missed", action="store_true",
                      help="only rows outside their prediction interval")
    rows.add_argument("--extrapolated", action="store_true",
                      help="only rows with a predictor outside the fit window's range")
    rows.add_argument("--rejected", action="store_true",
                      help="rejected rows (line, raw text, reason) of --batch N or of the "
                      "batches ingested on --day; alone: the model's batches")
    rows.add_argument("--batch", metavar="N", type=int, help="with --rejected: this batch")
    table_flags(rows)
    figures = command("days", "the stored figures of past checks, one line per model and day "
                      "(--csv: a time series)", _cmd_days)
    figures.add_argument("names", metavar="NAME", nargs="*")
    figures.add_argument("--from", dest="first", metavar="DATE", type=_day,
                         help="first day (default: the first checked day)")
    figures.add_argument("--through", dest="last", metavar="DATE", type=_day,
                         help="last day (default: the last checked day)")
    table_flags(figures)
    prn = command("prune", "delete raw rows past the retention horizon (storage.keep_rows_days"
                  "); day statistics, checks, versions and the audit log are kept", _cmd_prune)
    prn.add_argument("names", metavar="NAME", nargs="*", help="only these models")
    prn.add_argument("--before", metavar="DATE", type=_day,
                     help="delete the rows of days before DATE (checked days only)")
    prn.add_argument("--dry-run", action="store_true", help="say what would go; delete nothing")
    json_flag(prn)
    page = command("report", "write an HTML page with charts for one model, or for every "
                   "model with a team page linking them (--all)", _cmd_report)
    page.add_argument("name", metavar="NAME", nargs="?")
    page.add_argument("--all", action="store_true",
                      help="every model: DIR/index.html lists them, each page under DIR/models/")
    page.add_argument("--out", metavar="DIR", type=Path, required=True,
                      help="folder for index.html and its charts (created when missing)")
    page.add_argument("--days", metavar="N", type=int, default=90,
                      help="days shown, through the last checked day (default 90)")
    json_flag(page)

    rep = command("replay", "run the nightly checks over a history file (nothing is stored)",
                  _cmd_replay)
    rep.add_argument("name", metavar="NAME")
    rep.add_argument("file", metavar="FILE")
    rep.add_argument("--fit-end", metavar="DATE", type=_day,
                     help="last day of the fit window (default: the first 60 days)")
    rep.add_argument("--ack-each", action="store_true",
                     help="acknowledge every refit the next day (to count how often it fires)")
    rep.add_argument("--y", metavar="COL", help="response column (when NAME is not stored)")
    rep.add_argument("--x", metavar="COL", action="append", default=[], help="predictor column")
    rep.add_argument("--time", metavar="COL", help="time column")
    rep.add_argument("--id", metavar="COL", help="observation id column")
    json_flag(rep)

    send = command("alerts", "queue the alert e-mails of every checked night not yet queued "
                   "and send what is due (the daemon does this itself; for cron after 'check')",
                   _cmd_alerts)
    which = send.add_mutually_exclusive_group()
    which.add_argument("--night", metavar="DATE", type=_day,
                       help="only this checked day's news (default: every night not yet queued)")
    which.add_argument("--retry-failed", action="store_true",
                       help="send the messages given up on back to the queue (with a fresh "
                       "retry horizon), then send what is due")
    json_flag(send)
    dmn = command("daemon", "run the scheduled nightly work until stopped (SIGTERM: finish the "
                  "current model, then exit)", _cmd_daemon)
    dmn.add_argument("--once", action="store_true",
                     help="one catch-up run (inbox, checks, alerts), then exit")
    dmn.add_argument("--workers", metavar="N", type=int, default=1,
                     help="check the night's models in N processes (PostgreSQL only; daemons "
                     "on several hosts with one database also share the night)")
    json_flag(dmn)

    demo = command("demo", "run the sample scenario end to end on an embedded SQLite file",
                   _cmd_demo)
    demo.add_argument("--dir", metavar="DIR", default="fitwatch-demo",
                      help="folder for the demo's data, database and outbox")
    return p


# handlers -------------------------------------------------------------------------------------
def _cmd_init(args: argparse.Namespace, settings: Settings) -> int:
    from monitor.store.migrate import init_database

    print(init_database(settings).sentence())
    return EXIT_OK


def _cmd_ingest(args: argparse.Namespace, settings: Settings) -> int:
    from monitor.domain.data_health import mostly_rejected
    from monitor.ingest.service import ingest_configured_source, ingest_paths

    if bool(args.files) == args.source:
        raise UsageError("give either files to ingest or --source (the model's SQL source)")
    if args.source and args.replace:
        raise UsageError("--replace takes corrected files, not the SQL source")
    if args.source:
        summaries = [ingest_configured_source(settings, args.name)]
    else:
        from monitor.lifecycle.fit import actor_name

        summaries = ingest_paths(settings, args.name, args.files, strict=args.strict,
                                 progress=wants_progress() and not args.json,
                                 replace=args.replace,
                                 actor=actor_name() if args.replace else "")
    if args.json:
        print(dumps(summaries[0].as_dict() if len(summaries) == 1
                    else [s.as_dict() for s in summaries]))
    else:
        for summary in summaries:
            print(summary.sentence())
    share = settings.for_model(args.name).check.rejected_file_share
    for summary in summaries:
        if summary.rejected_whole:
            print(f"fitwatch: {summary.source} was rejected whole: nothing of it was stored",
                  file=sys.stderr)
        elif mostly_rejected(summary.rejected, summary.read, share):
            print(f"fitwatch: warning: {summary.source} lost most of its rows "
                  f"({summary.rejected:,} of {summary.read:,} rejected)", file=sys.stderr)
    return ExitCode.INPUT if any(s.rejected_whole for s in summaries) else EXIT_OK


def _cmd_model_fit(args: argparse.Namespace, settings: Settings) -> int:
    from monitor.interface.versions import VersionView
    from monitor.lifecycle.fit import FitRequest, fit_model

    request = FitRequest(args.name, Path(args.data) if args.data else None, args.y,
                         tuple(args.x), args.time, args.id, args.start, args.end, args.level)
    report = fit_model(settings, request, progress=wants_progress() and not args.json)
    view = VersionView.of(report.model, report.version, settings.for_model(args.name).words)
    if args.json:
        doc = view.as_dict()
        if report.ingest is not None:
            doc["ingest"] = report.ingest.as_dict()
        print(dumps(doc))
    else:
        if report.ingest is not None:
            print(report.ingest.sentence())
        print(view.text())
    return EXIT_OK


def _cmd_model_import(args: argparse.Namespace, settings: Settings) -> int:
    from monitor.interface.versions import VersionView
    from monitor.lifecycle.importer import import_model

    report = import_model(settings, args.name, Path(args.file))
    view = VersionView.of(report.model, report.version, settings.for_model(args.name).words)
    if args.json:
        print(dumps({**view.as_dict(), "warnings": list(report.warnings)}))
    else:
        print(report.sentence())
        print(view.text())  # its notes are the import's warnings
    return EXIT_OK


def _cmd_model_list(args: argparse.Namespace, settings: Settings) -> int:
    from monitor.interface.model_list import list_model_lines

    lines = list_model_lines(settings)
    if args.json:
        print(dumps([line.as_dict() for line in lines]))
    elif not lines:
        print("no models yet; create one with 'fitwatch model fit NAME --data FILE ...'")
    else:
        for line in lines:
            print(line.sentence())
    return EXIT_OK


def _cmd_model_rename(args: argparse.Namespace, settings: Settings) -> int:
    from monitor.lifecycle.fit import actor_name
    from monitor.lifecycle.housekeeping import rename

    print(rename(settings, args.name, args.new_name, actor=actor_name()))
    return EXIT_OK


def _cmd_model_delete(args: argparse.Namespace, settings: Settings) -> int:
    from monitor.lifecycle.fit import actor_name
    from monitor.lifecycle.housekeeping import delete

    print(delete(settings, args.name, confirmed=args.yes, actor=actor_name()).sentence())
    return EXIT_OK


def _cmd_model_show(args: argparse.Namespace, settings: Settings) -> int:
    from monitor.interface.versions import show_version

    view = show_version(settings, args.name, args.version)
    print(dumps(view.as_dict()) if args.json else view.text())
    return EXIT_OK


def _cmd_check(args: argparse.Namespace, settings: Settings) -> int:
    from monitor.interface.check_view import check_document, check_text
    from monitor.monitoring.check import run_checks
    from monitor.monitoring.data_health import data_health

    outcome = run_checks(settings, args.names or None, day=args.day, through=args.through,
                         progress=wants_progress() and not args.json)
    # data findings are about now: a report of a past day (--day) is judged on that day alone
    checked = [r.model for r in outcome.results if r.current is not None and not args.day]
    health = [h for h in data_health(settings, checked) if h.stands] if checked else []
    print(dumps(check_document(outcome)) if args.json else check_text(outcome, health))
    failures = [r.failure for r in outcome.results if r.failure]
    if failures:  # an internal failure of one model outranks a bad input of another
        return max(f.exit_code for f in failures)
    if args.fail_on:
        from monitor.alerts.service import undelivered
        from monitor.domain.status import Status

        trouble = undelivered(settings)
        if trouble:  # the planners may not have heard of what the checks found
            print(f"fitwatch: {trouble.sentence()}", file=sys.stderr)
        if trouble.failed:
            return EXIT_THRESHOLD
        for h in health:  # data findings count as "watch": the monitor cannot vouch for these
            print(f"fitwatch: {h.model}: data: {h.headline()}", file=sys.stderr)
        worst = outcome.worst_status()
        if health and Status.WATCH.at_least(args.fail_on):
            return EXIT_THRESHOLD
        if worst is not None and worst.at_least(args.fail_on):
            return EXIT_THRESHOLD
    return EXIT_OK


def _cmd_status(args: argparse.Namespace, settings: Settings) -> int:
    from monitor.interface.status import model_statuses

    statuses = model_statuses(settings, args.names or None)
    if args.json:
        print(dumps([s.as_dict() for s in statuses]))
    elif not statuses:
        print("no models yet")
    else:
        nightly, trouble = statuses[0].nightly, statuses[0].undelivered
        print("\n".join(([nightly.sentence()] if nightly else [])
                        + ([trouble.sentence()] if trouble else [])
                        + [s.sentence() for s in statuses]))
    return EXIT_OK


def _cmd_audit(args: argparse.Namespace, settings: Settings) -> int:
    from monitor.interface.audit_view import audit_listing

    if args.last is not None and args.last < 1:
        raise UsageError("--last takes a positive number of entries")
    listing = audit_listing(settings, args.name, since=args.since, last=args.last)
    print(dumps(listing.as_dict()) if args.json else listing.text())
    return EXIT_OK


def _cmd_compare(args: argparse.Namespace, settings: Settings) -> int:
    from monitor.interface.compare_view import comparison_document, comparison_text
    from monitor.lifecycle.compare import compare
    from monitor.lifecycle.refit import refit

    if args.command == "refit":
        result = refit(settings, args.name, start=args.start, end=args.end,
                       holdout_days=args.holdout_days)
    else:
        result = compare(settings, args.name, candidate=args.candidate,
                         holdout_days=args.holdout_days)
    print(dumps(comparison_document(result)) if args.json else comparison_text(result))
    return EXIT_OK


def _cmd_predict(args: argparse.Namespace, settings: Settings) -> int:
    from monitor.interface.plan_view import plan_text
    from monitor.lifecycle.planning import plan, read_jobs, write_plan

    if bool(args.file) == bool(args.at):
        raise UsageError("give either a FILE of planned jobs or the job's values with --at")
    jobs = None
    if args.file:
        from monitor.store.access import database
        from monitor.store.models import get_model

        with database(settings, sections="warn") as db, db.connect() as conn:
            predictors = get_model(conn, args.name).predictors
        jobs = read_jobs(Path(args.file), predictors)
    result = plan(settings, args.name, jobs, at=args.at, version=args.version, level=args.level)
    if args.out:
        write_plan(result, args.out)
    if args.json:
        print(dumps({"model": result.model.name, "version": result.version.number,
                     "level": result.level, "planned": result.planned,
                     "not_planned": result.reasons(),
                     "rows": result.frame.astype(object).where(result.frame.notna(), None)
                     .to_dict(orient="records")}))
    else:
        print(plan_text(result, settings.for_model(args.name).words, args.out))
    return EXIT_OK


def _cmd_model_export(args: argparse.Namespace, settings: Settings) -> int:
    from monitor.lifecycle.planning import export_description, write_description

    text = write_description(export_description(settings, args.name, version=args.version),
                             args.out)
    print(f"wrote {args.out}" if args.out else text, end="\n" if args.out else "")
    return EXIT_OK


def _cmd_rows(args: argparse.Namespace, settings: Settings) -> int:
    from monitor.interface import rows_view as view

    zone = settings.timezone
    if args.rejected:
        if args.missed or args.extrapolated:
            raise UsageError("--missed and --extrapolated filter a day's rows, not rejected ones")
        if args.batch is not None and args.day is not None:
            raise UsageError("give --batch or --day with --rejected, not both")
        from monitor.ingest.history import model_batches, rejected_rows

        if args.batch is None and args.day is None:
            listed = model_batches(settings, args.name)
            return _show(args, lambda: view.batches_csv(listed, zone),
                         lambda: view.batches_document(listed, zone),
                         lambda: view.batches_text(listed, zone))
        found = rejected_rows(settings, args.name, batch=args.batch, day=args.day)
        return _show(args, lambda: view.rejections_csv(found),
                     lambda: view.rejections_document(found, zone),
                     lambda: view.rejections_text(found, zone))
    if args.batch is not None:
        raise UsageError("--batch goes with --rejected (a batch's rejected rows)")
    if args.day is None:
        raise UsageError("give the day: 'rows NAME --day DATE' (or 'rows NAME --rejected')")
    from monitor.monitoring.day_rows import RowFilter, score_day

    day = score_day(settings, args.name, args.day,
                    only=RowFilter(missed=args.missed, extrapolated=args.extrapolated))
    return _show(args, lambda: view.scored_day_csv(day, zone),
                 lambda: view.scored_day_document(day, zone),
                 lambda: view.scored_day_text(day, settings.for_model(args.name).words, zone))


def _cmd_days(args: argparse.Namespace, settings: Settings) -> int:
    from monitor.interface.check_view import figures_csv, figures_document, figures_text
    from monitor.monitoring.daily_figures import daily_figures

    days = daily_figures(settings, args.names or None, first=args.first, last=args.last)
    zone = settings.timezone
    return _show(args, lambda: figures_csv(days, zone),
                 lambda: [figures_document(d, zone) for d in days], lambda: figures_text(days))


def _show(args: argparse.Namespace, csv: Callable[[], str], document: Callable[[], Any],
          text: Callable[[], str]) -> int:
    """Print ``--csv``, ``--json`` or the text, whichever was asked for."""
    if args.csv:
        sys.stdout.write(csv())
    else:
        print(dumps(document()) if args.json else text())
    return EXIT_OK


def _cmd_prune(args: argparse.Namespace, settings: Settings) -> int:
    from monitor.lifecycle.fit import actor_name
    from monitor.lifecycle.pruning import prune

    done = prune(settings, args.names or None, before=args.before, dry_run=args.dry_run,
                 actor=actor_name())
    if args.json:
        print(dumps([p.as_dict() for p in done]))
    else:
        print("\n".join(p.sentence() for p in done) if done else "no models yet")
    return EXIT_OK


def _cmd_report(args: argparse.Namespace, settings: Settings) -> int:
    if bool(args.name) == args.all:
        raise UsageError("give either a model's NAME or --all (every model and a team page)")
    if args.all:
        from monitor.report.team import write_team_report

        team = write_team_report(settings, args.out, days=args.days)
        print(dumps(team.as_dict()) if args.json else team.sentence())
        return int(ExitCode.INPUT) if team.problems else EXIT_OK
    from monitor.report.page import write_report

    result = write_report(settings, args.name, args.out, days=args.days)
    print(dumps(result.as_dict()) if args.json else result.sentence())
    return EXIT_OK


def _cmd_transition(args: argparse.Namespace, settings: Settings) -> int:
    from monitor.lifecycle.refit import acknowledge, promote, rollback

    if args.command == "promote":
        result = promote(settings, args.name, args.number, reason=args.reason)
    elif args.command == "rollback":
        result = rollback(settings, args.name, reason=args.reason)
    else:
        result = acknowledge(settings, args.name, reason=args.reason)
    print(dumps(result.as_dict()) if args.json else result.sentence())
    return EXIT_OK


def _cmd_alerts(args: argparse.Namespace, settings: Settings) -> int:
    from monitor.alerts.service import retry_failed, send_night_alerts, send_pending_alerts

    now = datetime.now(UTC)
    if args.retry_failed:
        count = retry_failed(settings, now=now)
        if not args.json:
            print(f"{count} failed message(s) sent back to the queue")
    if args.night:
        result = send_night_alerts(settings, args.night, now=now, require_checked=True)
    else:
        result = send_pending_alerts(settings, now=now)
    print(dumps(result.as_dict()) if args.json else result.sentence())
    return EXIT_OK


def _cmd_daemon(args: argparse.Namespace, settings: Settings) -> int:
    from monitor.runtime.daemon import run_daemon

    runs = run_daemon(settings, once=args.once, workers=args.workers)
    if args.json:  # in text the log has said each run's sentence already (once, on stderr)
        print(dumps([r.as_dict() for r in runs]))
    if not args.once:
        return EXIT_OK
    if not runs:  # the run itself failed (logged above)
        print("fitwatch: the nightly run failed (see the log above)", file=sys.stderr)
        return int(ExitCode.INTERNAL)
    return runs[-1].exit_code()


def _cmd_replay(args: argparse.Namespace, settings: Settings) -> int:
    from monitor.domain.model import ModelSpec
    from monitor.interface.replay_view import replay_document, replay_text
    from monitor.monitoring.replay import replay

    columns = None
    if args.y or args.x or args.time:
        if not (args.y and args.x and args.time):
            raise UsageError("give all of --y, --x and --time (or none, to use the stored model)")
        columns = ModelSpec(args.name, args.y, tuple(args.x), args.time, args.id)
    report = replay(settings, args.name, Path(args.file), columns=columns,
                    fit_end=args.fit_end, acknowledge_refits=args.ack_each)
    print(dumps(replay_document(report)) if args.json else replay_text(report))
    return EXIT_OK


def _cmd_demo(args: argparse.Namespace, settings: Settings) -> int:
    from monitor.demo.run import run_demo

    run_demo(Path(args.dir), out=sys.stdout)
    return EXIT_OK


# entry point ----------------------------------------------------------------------------------
_LISTS = ("files", "names")  # the positional lists that may follow options (ingest, check, ...)


def _parse(parser: argparse.ArgumentParser, argv: Sequence[str] | None) -> argparse.Namespace:
    """Parse ``argv``, letting a command's list of files or names continue after its options
    (``ingest NAME --strict FILE``: argparse ends a ``*`` positional at the first option)."""
    args, extra = parser.parse_known_args(argv)
    if extra:
        target = next((name for name in _LISTS if isinstance(getattr(args, name, None), list)),
                      None)
        if target is None or any(item.startswith("-") for item in extra):
            parser.error(f"unrecognized arguments: {' '.join(extra)}")
        getattr(args, target).extend(extra)
    return args


# Views that read a few rows per model, print and exit.
_QUICK_VIEWS: frozenset[Callable[..., int]] = frozenset(
    {_cmd_status, _cmd_model_list, _cmd_model_show})


@contextmanager
def _collector_paused(pause: bool) -> Iterator[None]:
    """Pause Python's cyclic garbage collector for a quick view. While SQLAlchemy, numpy and
    the project's modules load, it runs every few hundred allocations and walks the objects
    already loaded, over and over: about 0.03 s of a 0.35 s ``status`` on the project's
    machine (``tests/benchmarks/bench_startup.py``). A quick view's own work leaves a few
    cycles at most, freed when the process ends; a caller running ``main`` in-process gets
    the collector back as it was."""
    was_enabled = gc.isenabled()
    if pause:
        gc.disable()
    try:
        yield
    finally:
        if pause and was_enabled:
            gc.enable()


def main(argv: Sequence[str] | None = None) -> int:
    parser = build_parser()
    try:
        args = _parse(parser, argv)
        logging.basicConfig(
            level=(logging.INFO if args.command == "daemon" else logging.WARNING)
            - 10 * min(args.verbose, 2),
            format="%(asctime)s %(levelname)s %(name)s: %(message)s")
        if not args.verbose:  # the daemon logs its own runs at INFO; libraries only warnings
            for library in ("alembic", "apscheduler"):
                logging.getLogger(library).setLevel(logging.WARNING)
        with _collector_paused(args.handler in _QUICK_VIEWS):
            settings = load_settings(args.config).with_database(args.db)
            return int(args.handler(args, settings))
    except FitwatchError as exc:
        print(f"fitwatch: {exc}", file=sys.stderr)
        return exit_code_for(exc)
    except KeyboardInterrupt as exc:
        print("fitwatch: interrupted", file=sys.stderr)
        return exit_code_for(exc)
    except BrokenPipeError as exc:
        return exit_code_for(exc)
    except Exception as exc:
        log.exception("internal error")
        print("fitwatch: internal error (details above); please report it", file=sys.stderr)
        return exit_code_for(exc)

