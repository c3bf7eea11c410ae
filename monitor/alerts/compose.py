"""Turning a digest into words: subject, plain text and HTML, and the MIME message around them.

Templates are package data (``templates/``), rendered by Jinja2 with autoescaping on for HTML
and ``StrictUndefined`` so a misspelt field fails loudly. The message is a
``multipart/alternative`` of the plain text and a ``multipart/related`` holding the HTML and the
chart it shows by ``cid:`` (RFC 2046 §5.1.4, RFC 2387, RFC 2392).
"""

from __future__ import annotations

import hashlib
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from datetime import date, datetime
from email.message import EmailMessage, MIMEPart
from email.utils import format_datetime

from jinja2 import Environment, PackageLoader, StrictUndefined, select_autoescape

from monitor.alerts.news import (
    DATA,
    ENTERED,
    REMINDER,
    RESTART,
    SETTLED,
    Action,
    Digest,
    ModelNews,
)
from monitor.config import Wording
from monitor.domain.check import coverage_span
from monitor.domain.phrasing import fmt, fmt_p, percent, window_span
from monitor.domain.status import Status

KIND_NIGHT = "night"  # the nightly digest; the kind part of the dedupe key
CHART_DOMAIN = "fitwatch.invalid"  # RFC 2606 reserved: an identifier, never a real host
MAX_KEY = 200  # outbox.dedupe_key is String(200)


@dataclass(frozen=True)
class ModelContext:
    """What composition needs to know about a model beyond its day check."""

    model: str
    response: str
    predictors: tuple[str, ...]
    words: Wording
    level: float
    version: int | None  # the active version's number
    plan_slopes: tuple[float, ...]  # the active version's slopes, one per predictor
    candidate: int | None  # newest candidate version waiting for promotion
    coverage_window_days: int
    version_from: date | None = None  # the day the active version took over


@dataclass(frozen=True)
class Figure:
    label: str
    value: str
    note: str


@dataclass(frozen=True)
class ItemView:
    """One model's part of a digest, as the templates show it."""

    model: str
    status: str
    headline: str
    reasons: tuple[str, ...]
    figures: tuple[Figure, ...]
    command: str | None
    command_note: str
    data: tuple[str, ...] = ()  # the standing data findings, one sentence each


@dataclass(frozen=True)
class Composed:
    subject: str
    text: str
    html: str
    chart_cid: str | None


def dedupe_key(recipient: str, night: date, kind: str = KIND_NIGHT) -> str:
    """Recipient + night + kind; a recipient too long for the column is replaced by its hash."""
    key = f"{kind}/{night.isoformat()}/{recipient}"
    if len(key) <= MAX_KEY:
        return key
    return f"{kind}/{night.isoformat()}/sha256:{hashlib.sha256(recipient.encode()).hexdigest()}"


def chart_cid(key: str) -> str:
    """The chart's Content-ID (without angle brackets), fixed by the dedupe key."""
    return f"chart.{hashlib.sha256(key.encode()).hexdigest()[:20]}@{CHART_DOMAIN}"


# wording --------------------------------------------------------------------------------------
def _status_phrase(status: str) -> str:
    phrases = {Status.REFIT: "needs a refit", Status.WATCH: "is on watch"}
    return phrases.get(Status(status), "is in line with its plan")


def _action_phrase(a: Action) -> str:
    why = f" ({a.reason})" if a.reason else ""
    if a.action == "promote":
        return (f"version {a.version} was promoted by {a.actor}{why} and plans with it from "
                f"{a.effective_day.isoformat()}")
    if a.action == "rollback":
        earlier = f"version {a.copy_of}" if a.copy_of is not None else "the earlier line"
        return (f"{a.actor} rolled back to {earlier}{why}: its line plans again, as version "
                f"{a.version}, from {a.effective_day.isoformat()}")
    return (f"{a.actor} acknowledged the advice{why}; the bias chart restarted on "
            f"{a.effective_day.isoformat()}")


def headline(item: ModelNews) -> str:
    """One sentence saying why this model is in the message."""
    m, c = item.model, item.check
    parts = []
    if RESTART in item.events:
        acted = "; ".join(_action_phrase(a) for a in item.actions)
        first = f"its first day, {item.night.isoformat()}, came out {c.status}"
        parts.append(f"{m}: {acted}; {first}")
    if ENTERED in item.events and c.status_since < item.night:  # entered in unmailed nights
        parts.append(f"{m} {_status_phrase(c.status)} since {c.status_since.isoformat()}")
    elif ENTERED in item.events:
        was = f" (was {item.previous_status})" if item.previous_status else ""
        parts.append(f"{m} {_status_phrase(c.status)} as of {item.night.isoformat()}{was}")
    if REMINDER in item.events:
        parts.append(f"Reminder: {m} still {_status_phrase(c.status).removeprefix('is ')} "
                     f"— {item.days_in_status} days since {c.status_since.isoformat()}, "
                     "no action recorded yet")
    silent = item.data.silent if item.data is not None else None
    if SETTLED in item.events and silent is not None:
        parts.append(f"{m}: {item.previous_status} ended on {item.night.isoformat()} for want "
                     f"of rows, not because the model is back in line ({silent.short()})")
    elif SETTLED in item.events:
        parts.append(f"{m} is back in line: {item.previous_status} ended on "
                     f"{item.night.isoformat()} without a change of version")
    if DATA in item.events and item.data is not None:
        text = f"{m}: the data need a look: {item.data.headline()}"
        if silent is not None:
            days = (f"the days through {silent.last_rows_day.isoformat()}"
                    if silent.last_rows_day else "no day with rows")
            text += f"; its status ({c.status}) judges {days}"
        parts.append(text)
    return ". ".join(parts)


def _figures(item: ModelNews, ctx: ModelContext) -> tuple[Figure, ...]:
    c, words = item.check, ctx.words
    out = []
    if c.window_coverage is not None:
        below = "below" if c.window_coverage < ctx.level else "at or above"
        fresh = c.state.fresh_from
        first, held = coverage_span(c.day, ctx.coverage_window_days, fresh)
        took_over = fresh is not None and fresh == ctx.version_from
        span = window_span(held, ctx.coverage_window_days, first,
                           ctx.version if took_over else None)
        out.append(Figure(
            "Coverage", f"{percent(c.window_coverage)} vs {percent(ctx.level)} planned",
            f"{c.window_covered} of {c.window_n} {words.rows} inside the interval {span}, "
            f"{below} the level (plausible range "
            f"{percent(c.wilson_low)}–{percent(c.wilson_high)}; "
            f"{fmt_p(c.coverage_p_low)} for too few)"))
    lead = max(c.cusum_upper, c.cusum_lower)
    side = "above plan" if c.cusum_upper >= c.cusum_lower else "below plan"
    state = "over" if lead > c.cusum_h else "within"
    note = (f"{words.rows} running {side}" if lead > 0 else "at zero: no sign of bias")
    out.append(Figure("Bias chart", f"{fmt(lead, 3)} vs limit {fmt(c.cusum_h, 3)} ({state})",
                      note))
    if c.slope_pvalue is not None:
        recent = c.details.recent_slopes
        unit = f" {words.y_unit}" if words.y_unit else ""
        if recent and len(recent) == len(ctx.plan_slopes):
            changes = []
            for name, old, new in zip(ctx.predictors, ctx.plan_slopes, recent, strict=True):
                pct = f" ({(new - old) / abs(old) * 100:+.0f} %)" if old else ""
                changes.append(f"each {words.x_unit(name)}: {fmt(new, 3)}{unit} now, "
                               f"{fmt(old, 3)}{unit} in the plan{pct}")
            value = "; ".join(changes)
        else:
            value = "no recent estimate"
        since = f", change since about {c.change_day.isoformat()}" if c.change_day else ""
        out.append(Figure("Slope", value, f"slope change test {fmt_p(c.slope_pvalue)}{since}"))
    return tuple(out)


def next_command(item: ModelNews, ctx: ModelContext) -> tuple[str | None, str]:
    """The exact command to run next, and what it does."""
    m = item.model
    if item.status == Status.REFIT:
        if ctx.candidate is not None:
            return (f"fitwatch promote {m} {ctx.candidate}",
                    f"version {ctx.candidate} is fitted and waiting; promote it once its "
                    "comparison looks right (or run 'fitwatch compare "
                    f"{m}' first)")
        return (f"fitwatch refit {m}",
                "fits a candidate on the days since the change and compares it with the "
                "active line")
    if item.status == Status.WATCH:
        return (f"fitwatch report {m} --out report-{m}",
                "writes the charts and figures to look at before deciding")
    if item.data is not None:
        return (f"fitwatch status {m}",
                "shows the data findings; they clear once rows arrive again and files are "
                "stored cleanly")
    return None, "nothing to do"


def item_view(item: ModelNews, ctx: ModelContext) -> ItemView:
    command, note = next_command(item, ctx)
    return ItemView(item.model, item.status, headline(item), tuple(item.check.reasons),
                    _figures(item, ctx), command, note,
                    tuple(item.data.sentences()) if item.data is not None else ())


def subject(digest: Digest) -> str:
    items = digest.items
    if len(items) == 1:
        item = items[0]
        m = item.model
        if item.status in (Status.REFIT, Status.WATCH):
            lead = "reminder, " if ENTERED not in item.events and REMINDER in item.events else ""
            still = "still " if lead else ""
            what = "needs a refit" if item.status == Status.REFIT else "is on watch"
            if still:
                what = what.removeprefix("is ")
            return f"fitwatch: {lead}{m} {still}{what}"
        if item.data is not None and (DATA in item.events or SETTLED in item.events):
            return f"fitwatch: {m}: {item.data.headline()}"
        if RESTART in item.events:
            return f"fitwatch: {m} restarted, first day {item.status}"
        return f"fitwatch: {m} back in line"
    refit = sum(i.status == Status.REFIT for i in items)
    watch = sum(i.status == Status.WATCH for i in items)
    data = sum(i.status == Status.OK and i.data is not None for i in items)
    rest = len(items) - refit - watch - data
    counts = [f"{n} {word}" for n, word in ((refit, "refit"), (watch, "watch"),
                                            (data, "data to look at"),
                                            (rest, "back in line")) if n]
    return f"fitwatch: news on {len(items)} models ({', '.join(counts)})"


# rendering ------------------------------------------------------------------------------------
_ENV = Environment(
    loader=PackageLoader("monitor.alerts", "templates"),
    autoescape=select_autoescape(enabled_extensions=("html",), default_for_string=True),
    undefined=StrictUndefined,
    trim_blocks=True,
    lstrip_blocks=True,
    keep_trailing_newline=True,
)


def compose(digest: Digest, contexts: Mapping[str, ModelContext], *, key: str,
            chart_models: Sequence[str] = (), notice: str | None = None) -> Composed:
    """Subject, plain text and HTML for one digest; the chart (if any) shows ``chart_models``;
    ``notice``: a sentence on earlier messages that were not delivered."""
    views = [item_view(item, contexts[item.model]) for item in digest.items]
    cid = chart_cid(key) if chart_models else None
    shown = ", ".join(f"{m} (level {percent(contexts[m].level)})" for m in chart_models)
    left_out = [item.model for item in digest.items if item.model not in chart_models]
    values = {"night": digest.night.isoformat(), "items": views, "chart_cid": cid,
              "chart_models": shown, "left_out": ", ".join(left_out), "notice": notice}
    text = _ENV.get_template("digest.txt").render(**values)
    html = _ENV.get_template("digest.html").render(**values)
    return Composed(subject(digest), text, html, cid)


# the message ----------------------------------------------------------------------------------
def message_id(key: str, sender: str) -> str:
    """A Message-ID fixed by the dedupe key (RFC 5322 §3.6.4), so a resend is recognisable."""
    domain = sender.rpartition("@")[2] or "localhost"
    return f"<{hashlib.sha256(key.encode()).hexdigest()[:32]}@{domain}>"


def build_message(*, key: str, sender: str, recipient: str, subject_line: str, text: str,
                  html: str | None, chart_png: bytes | None, created_at: datetime) -> EmailMessage:
    """The RFC 5322 message for one outbox row; the same row always gives the same message."""
    msg = EmailMessage()
    msg["From"] = sender
    msg["To"] = recipient
    msg["Subject"] = subject_line
    msg["Date"] = format_datetime(created_at)
    msg["Message-ID"] = message_id(key, sender)
    msg["Auto-Submitted"] = "auto-generated"  # RFC 3834: no automatic replies, please
    msg.set_content(text)
    if html is not None:
        msg.add_alternative(html, subtype="html")
        if chart_png is not None:
            html_part = msg.get_payload()[1]  # type: ignore[index]
            assert isinstance(html_part, MIMEPart)
            html_part.add_related(chart_png, maintype="image", subtype="png",
                                  cid=f"<{chart_cid(key)}>", disposition="inline",
                                  filename="fitwatch-chart.png")
    return msg
