"""Composition: subject, plain text, HTML and the MIME structure, parsed back by the stdlib.

References: RFC 2046 §5.1.4 (multipart/alternative, richest part last), RFC 2387
(multipart/related), RFC 2392 (a ``cid:`` URL names the Content-ID without its angle
brackets), RFC 5322 §2.1.1 (lines at most 998 characters, CRLF) and §3.6.4 (Message-ID),
RFC 3834 (Auto-Submitted); the Python stdlib ``email`` parser with ``policy.default`` as the
reference reader; the PNG signature from the PNG specification (ISO/IEC 15948, §5.2).
"""

from __future__ import annotations

import re
from dataclasses import replace
from datetime import UTC, date, datetime, timedelta
from email import policy
from email.message import EmailMessage
from email.parser import BytesParser

from monitor.alerts.compose import (
    ModelContext,
    build_message,
    compose,
    dedupe_key,
    next_command,
    subject,
)
from monitor.alerts.news import Action, Digest, model_news
from monitor.config import AlertSettings, Wording
from monitor.domain.check import CheckDetails, CheckState
from monitor.report.charts import alert_chart_png
from tests.support.mail import day_check
from tests.support.png import PNG_SIGNATURE

NIGHT = date(2026, 4, 12)
LEAD = "planning.lead@example.com"
SENDER = "fitwatch@dc-north.example"
WORDS = Wording(row="load", rows="loads", y_unit="min", x_units={"pallets": "pallet"})


def _context(model: str = "dock_loading", candidate: int | None = None) -> ModelContext:
    return ModelContext(model=model, response="load_minutes", predictors=("pallets",),
                        words=WORDS, level=0.95, version=1, plan_slopes=(2.09,),
                        candidate=candidate, coverage_window_days=14)


def _refit_check(reasons: list[str] | None = None):
    return day_check(NIGHT, "refit", NIGHT, reasons=reasons or [
        "Each pallet now adds 2.62 min instead of 2.09 (+25 %) since about 2026-03-16"],
        window_n=839, window_covered=365, window_coverage=365 / 839, wilson_low=0.39,
        wilson_high=0.48, coverage_p_low=1e-9, cusum_upper=14.2, cusum_h=10.9,
        cusum_signal=True, cusum_onset=date(2026, 3, 16), slope_statistic=449.0,
        slope_pvalue=1e-12, change_day=date(2026, 3, 16),
        details=CheckDetails(recent_slopes=(2.62,)))


def _digest(*checks, recipients=(LEAD,)) -> Digest:
    items = []
    for c in checks:
        news = model_news(c.model, NIGHT, c, None, [], AlertSettings(to=tuple(recipients)))
        assert news is not None
        items.append(news)
    return Digest(LEAD, NIGHT, tuple(items))


def _chart() -> bytes:
    checks = [day_check(NIGHT - timedelta(days=i), "ok") for i in range(10, -1, -1)]
    return alert_chart_png(checks, 0.95)


def _message(digest: Digest, contexts: dict[str, ModelContext]) -> tuple[EmailMessage, str]:
    key = dedupe_key(LEAD, NIGHT)
    composed = compose(digest, contexts, key=key, chart_models=(digest.items[0].model,))
    msg = build_message(key=key, sender=SENDER, recipient=LEAD, subject_line=composed.subject,
                        text=composed.text, html=composed.html, chart_png=_chart(),
                        created_at=datetime(2026, 4, 13, 1, 30, tzinfo=UTC))
    return msg, key


def _parse(msg: EmailMessage) -> EmailMessage:
    raw = msg.as_bytes(policy=policy.SMTP)
    return BytesParser(policy=policy.default).parsebytes(raw)  # type: ignore[return-value]


def test_structure_parts_and_cid_as_the_stdlib_parser_reads_them() -> None:
    msg, _ = _message(_digest(_refit_check()), {"dock_loading": _context()})
    parsed = _parse(msg)
    tree = [(p.get_content_type(), p.get_content_disposition()) for p in parsed.walk()]
    assert tree == [("multipart/alternative", None), ("text/plain", None),
                    ("multipart/related", None), ("text/html", None), ("image/png", "inline")]
    text = parsed.get_body(("plain",))
    html = parsed.get_body(("html",))
    assert text is not None and html is not None
    assert "fitwatch refit dock_loading" in text.get_content()
    image = next(p for p in parsed.walk() if p.get_content_type() == "image/png")
    assert image.get_content().startswith(PNG_SIGNATURE)
    cids = re.findall(r'src="cid:([^"]+)"', html.get_content())
    assert cids == [image["Content-ID"].strip("<>")]  # RFC 2392
    assert parsed["To"] == LEAD and parsed["From"] == SENDER
    assert parsed["Auto-Submitted"] == "auto-generated"
    assert parsed["Date"].datetime == datetime(2026, 4, 13, 1, 30, tzinfo=UTC)


def test_lines_are_crlf_and_short_enough_for_rfc5322() -> None:
    long_reason = "Loads ran late " + "and later " * 300
    msg, _ = _message(_digest(_refit_check([long_reason])), {"dock_loading": _context()})
    raw = msg.as_bytes(policy=policy.SMTP)
    lines = raw.split(b"\r\n")
    assert b"\n" not in b"".join(lines)  # every line ends in CRLF
    assert max(len(line) for line in lines) <= 998  # RFC 5322 §2.1.1
    body = _parse(msg).get_body(("plain",))
    assert body is not None and long_reason.strip() in body.get_content()


def test_same_row_same_message_id_and_cid() -> None:
    first, _ = _message(_digest(_refit_check()), {"dock_loading": _context()})
    again, _ = _message(_digest(_refit_check()), {"dock_loading": _context()})
    assert first["Message-ID"] == again["Message-ID"]
    cids = [next(p["Content-ID"] for p in m.walk() if p.get_content_type() == "image/png")
            for m in (first, again)]
    assert cids[0] == cids[1]
    assert re.fullmatch(r"<[0-9a-f]{32}@dc-north\.example>", first["Message-ID"])  # §3.6.4
    other = build_message(key=dedupe_key("ops@example.com", NIGHT), sender=SENDER,
                          recipient="ops@example.com", subject_line="s", text="t", html=None,
                          chart_png=None, created_at=datetime(2026, 4, 13, tzinfo=UTC))
    assert other["Message-ID"] != first["Message-ID"]
    assert other.get_content_type() == "text/plain"  # no HTML: a plain message


def test_html_escapes_reason_text_and_plain_text_keeps_it() -> None:
    hostile = 'Door 7 note: <script>alert("x")</script> & <b>bold</b>'
    msg, _ = _message(_digest(_refit_check([hostile])), {"dock_loading": _context()})
    parsed = _parse(msg)
    html = parsed.get_body(("html",)).get_content()  # type: ignore[union-attr]
    assert "<script>" not in html and "<b>bold</b>" not in html
    assert "&lt;script&gt;alert(&#34;x&#34;)&lt;/script&gt; &amp; &lt;b&gt;bold&lt;/b&gt;" in html
    assert hostile in parsed.get_body(("plain",)).get_content()  # type: ignore[union-attr]


def test_key_figures_and_wording_are_in_the_model_units() -> None:
    msg, _ = _message(_digest(_refit_check()), {"dock_loading": _context()})
    text = _parse(msg).get_body(("plain",)).get_content()  # type: ignore[union-attr]
    assert "Coverage: 44 % vs 95 % planned" in text
    assert "365 of 839 loads inside the interval over the last 14 days" in text
    assert "Bias chart: 14.2 vs limit 10.9 (over)" in text
    assert "each pallet: 2.62 min now, 2.09 min in the plan (+25 %)" in text
    # no bare test statistic: the p-value says how sure, the figures above say how much
    assert "slope change test p < 0.001, change since about 2026-03-16" in text
    assert "F = " not in text


def test_subjects_and_next_commands() -> None:
    refit = _digest(_refit_check())
    assert subject(refit) == "fitwatch: dock_loading needs a refit"
    assert next_command(refit.items[0], _context())[0] == "fitwatch refit dock_loading"
    assert next_command(refit.items[0], _context(candidate=2))[0] == \
        "fitwatch promote dock_loading 2"
    watch = _digest(day_check(NIGHT, "watch", NIGHT, model="yard_moves", model_id=2))
    assert subject(watch) == "fitwatch: yard_moves is on watch"
    assert next_command(watch.items[0], _context("yard_moves"))[0] == \
        "fitwatch report yard_moves --out report-yard_moves"
    both = Digest(LEAD, NIGHT, refit.items + watch.items)
    assert subject(both) == "fitwatch: news on 2 models (1 refit, 1 watch)"
    reminder = model_news("dock_loading", NIGHT, day_check(NIGHT, "refit", NIGHT - timedelta(3)),
                          None, [], AlertSettings(to=(LEAD,), remind_every_days=3))
    assert reminder is not None
    assert subject(Digest(LEAD, NIGHT, (reminder,))) == \
        "fitwatch: reminder, dock_loading still needs a refit"


def test_dedupe_key_fits_its_column() -> None:
    assert dedupe_key(LEAD, NIGHT) == f"night/2026-04-12/{LEAD}"
    long = "x" * 250 + "@example.com"
    key = dedupe_key(long, NIGHT)
    assert len(key) <= 200 and key != dedupe_key("y" + long[1:], NIGHT)


def test_a_digest_chart_names_the_models_it_shows_and_points_to_the_report_for_the_rest():
    names = [f"line_{i}" for i in range(6)]
    digest = _digest(*[day_check(NIGHT, "refit", NIGHT, model=n, model_id=i + 1)
                       for i, n in enumerate(names)])
    contexts = {n: _context(n) for n in names}
    shown = tuple(item.model for item in digest.items[:4])
    composed = compose(digest, contexts, key=dedupe_key(LEAD, NIGHT), chart_models=shown)
    left_out = [item.model for item in digest.items[4:]]
    assert f"For {', '.join(left_out)}, see 'fitwatch report'." in composed.text
    assert all(f"{m} (level 95 %)" in composed.html for m in shown)


def _restart_text(action: Action, check) -> str:
    news = model_news("dock_loading", NIGHT, check, None, [action],
                      AlertSettings(to=(LEAD,)))
    assert news is not None
    context = replace(_context(), version=action.version, version_from=NIGHT)
    msg, _ = _message(Digest(LEAD, NIGHT, (news,)), {"dock_loading": context})
    return _parse(msg).get_body(("plain",)).get_content()  # type: ignore[union-attr]


def test_the_first_mail_after_a_promotion_counts_only_the_days_under_the_new_version() -> None:
    # Issue 13: the first digest after a promotion said "26 of 26 ... over the last 14 days"
    # after one day; the coverage window restarts with the new version, so it holds one day.
    first_day = day_check(NIGHT, "ok", NIGHT, version_id=2, n=26, covered=26, window_n=26,
                          window_covered=26, window_coverage=1.0,
                          state=CheckState(fresh_from=NIGHT))
    text = _restart_text(Action("promote", NIGHT, "lead", "new layout", 2, 1), first_day)
    assert ("26 of 26 loads inside the interval on the 1 day under version 2 (from "
            "2026-04-12)") in text
    assert "over the last 14 days" not in text
    # a full window again after 14 days under it
    later = day_check(NIGHT, "ok", NIGHT - timedelta(days=13), version_id=2,
                      state=CheckState(fresh_from=NIGHT - timedelta(days=13)))
    assert "948 of 1000 loads inside the interval over the last 14 days" in \
        _restart_text(Action("promote", NIGHT, "lead", None, 2, 1), later)


def test_a_rollback_mail_names_the_version_that_came_back_and_its_new_number() -> None:
    check = day_check(NIGHT, "ok", NIGHT, version_id=4, state=CheckState(fresh_from=NIGHT))
    text = _restart_text(Action("rollback", NIGHT, "lead", "wrong window", 4, 3, copy_of=1),
                         check)
    assert ("lead rolled back to version 1 (wrong window): its line plans again, as version 4, "
            "from 2026-04-12") in text
    assert "on the 1 day under version 4" in text


def test_after_an_acknowledgement_the_window_counts_the_days_since() -> None:
    since = NIGHT - timedelta(days=2)
    check = day_check(NIGHT, "ok", since, state=CheckState(fresh_from=since))
    item = model_news("dock_loading", NIGHT, check, None,
                      [Action("ack", NIGHT, "lead", None, 1, 1)], AlertSettings(to=(LEAD,)))
    assert item is not None
    composed = compose(Digest(LEAD, NIGHT, (item,)),
                       {"dock_loading": replace(_context(), version_from=date(2026, 3, 9))},
                       key=dedupe_key(LEAD, NIGHT), chart_models=())
    assert ("inside the interval on the 3 days since the advice was acknowledged (2026-04-10)"
            in composed.text)
