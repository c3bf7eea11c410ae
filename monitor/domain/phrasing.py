"""Numbers as they read in sentences (significant digits, percentages, p-values), and the
phrases that more than one view must word alike."""

from __future__ import annotations

import math
from datetime import date
from typing import TYPE_CHECKING

if TYPE_CHECKING:  # only for the annotations: phrasing loads nothing heavy (numpy, the stats)
    from monitor.config import Wording
    from monitor.domain.version import Line, LineFigures


def fmt(value: float | None, digits: int = 3) -> str:
    """A number for a sentence: significant digits, no trailing noise; '—' when missing."""
    if value is None or (isinstance(value, float) and not math.isfinite(value)):
        return "—"
    if value == 0:
        return "0"
    magnitude = math.floor(math.log10(abs(value)))
    decimals = max(0, digits - 1 - magnitude)
    return f"{value:,.{decimals}f}"


def fmt_p(p: float | None) -> str:
    """A p-value as people read it: 'p = 0.034', 'p < 0.001'."""
    if p is None or (isinstance(p, float) and not math.isfinite(p)):
        return "p = —"
    if p < 0.001:
        return "p < 0.001"
    return f"p = {p:.3f}"


def counted(count: int, noun: str) -> str:
    """'1 row', '3,873 rows': a count with its noun, thousands separated."""
    return f"{count:,} {noun}" + ("" if count == 1 else "s")


def percent(value: float | None, decimals: int = 0) -> str:
    if value is None or (isinstance(value, float) and not math.isfinite(value)):
        return "—"
    return f"{100 * value:.{decimals}f} %"


def window_span(days: int, window_days: int, first: date, version: int | None) -> str:
    """Which days a rolling window's figures cover: 'over the last 14 days', or, while a restart
    lies inside it, only the days since: 'on the 1 day under version 5 (from 2026-04-21)' when
    a version took over (``version``), 'on the 3 days since the advice was acknowledged
    (2026-04-21)' otherwise."""
    if days >= window_days:
        return f"over the last {window_days} days"
    span = "the 1 day" if days == 1 else f"the {days} days"
    if version is not None:
        return f"on {span} under version {version} (from {first.isoformat()})"
    return f"on {span} since the advice was acknowledged ({first.isoformat()})"


def held_reason(since: date | None) -> str:
    """The first reason of each day a refit stands (``status`` leaves it out once a promotion,
    rollback or acknowledgement has released it)."""
    return (f"refit advised since {since.isoformat() if since else '—'}; this stands until a "
            "new version is promoted or the advice is acknowledged")


def fit_summary(line: Line | LineFigures, rows: str = "rows", unit: str = "") -> str:
    """How well a fitted line fits, in plain words (``model show`` and the model's page):
    'typical scatter around the line 5.824 min from 3,873 loads, explains 76.4 % of the
    variation'. The scatter is ``s``, the residual standard deviation; the share explained is
    R². Parts a version does not know (an imported one may lack ``n`` or R²) are left out."""
    unit = f" {unit}" if unit else ""
    counted = f" from {line.n:,} {rows}" if line.n else ""
    explained = (f", explains {percent(line.r_squared, 1)} of the variation"
                 if line.r_squared is not None else "")
    return f"typical scatter around the line {fmt(line.s, 4)}{unit}{counted}{explained}"


def amount(value: float, words: Wording, response: str) -> str:
    """'8.6 min' with a configured unit, else '8.6 (load_minutes)'."""
    if words.y_unit:
        return f"{fmt(abs(value), 2)} {words.y_unit}"
    return f"{fmt(abs(value), 2)} ({response})"
