"""PNG charts drawn with matplotlib's Agg canvas (object API, no pyplot, no GUI).

Each Figure gets its own ``FigureCanvasAgg``, so the process-wide backend is never touched and
no display is needed.

Each ``draw_*`` function takes a prepared series from :mod:`monitor.report.series` and an Axes;
each ``*_png`` function builds a Figure, draws and returns the PNG bytes. Output is byte-stable
for the same input: fixed size and dpi, fonts that ship with matplotlib (DejaVu Sans), and no
``Software`` entry in the PNG metadata (Agg writes no creation time into PNGs).
"""

from __future__ import annotations

import io
from collections.abc import Callable, Iterator, Sequence
from contextlib import contextmanager
from dataclasses import dataclass
from datetime import date
from typing import TYPE_CHECKING, Any

import matplotlib
import matplotlib.dates as mdates
import matplotlib.ticker as mticker
import numpy as np
from matplotlib.axes import Axes
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.figure import Figure

if TYPE_CHECKING:
    from matplotlib.typing import RcKeyType

from monitor.domain.check import DayCheck
from monitor.report.marks import PLURALS, Mark
from monitor.report.series import (
    CoverageSeries,
    CusumSeries,
    LimitShareSeries,
    ResidualSeries,
    coverage_series,
    cusum_series,
)

# Okabe & Ito (2008), "Color Universal Design": distinguishable with the common colour-vision
# deficiencies. Roles, not meanings: nothing here encodes a status by colour alone.
INK = "#000000"
ORANGE = "#E69F00"
SKY = "#56B4E9"
GREEN = "#009E73"
BLUE = "#0072B2"
VERMILION = "#D55E00"
PURPLE = "#CC79A7"
GREY = "#8C8C8C"

ALERT_SIZE = (640, 360)  # pixels, width × height
REPORT_SIZE = (800, 400)
SCATTER_SIZE = (800, 520)
GLANCE_SIZE = (360, 140)  # the small chart of a model on the team page
SHARE_TOP = 2.0  # its axis: up to twice a chart's limit
DPI = 100

_STYLE: dict[RcKeyType, Any] = {
    "font.family": "DejaVu Sans",
    "font.size": 8,
    "axes.titlesize": 9,
    "axes.titlelocation": "left",
    "axes.labelsize": 8,
    "axes.edgecolor": "#444444",
    "axes.grid": True,
    "grid.color": "#DDDDDD",
    "grid.linewidth": 0.6,
    "legend.fontsize": 7,
    "legend.frameon": False,
    "xtick.labelsize": 7,
    "ytick.labelsize": 7,
    "figure.facecolor": "white",
    "savefig.facecolor": "white",
    # labels are column and model names, never formulas: a name like "cost $ (net)" or
    # "$x_1$" is drawn as typed instead of going to mathtext (which fails on most of them)
    "text.parse_math": False,
}


@contextmanager
def _figure(size: tuple[int, int]) -> Iterator[Figure]:
    """A Figure of ``size`` pixels with our style; matplotlib's rc state is restored on exit."""
    with matplotlib.rc_context(_STYLE):
        fig = Figure(figsize=(size[0] / DPI, size[1] / DPI), dpi=DPI, layout="constrained")
        FigureCanvasAgg(fig)
        yield fig


def png_bytes(fig: Figure) -> bytes:
    """The figure as PNG, without metadata that changes between runs or machines."""
    buffer = io.BytesIO()
    fig.savefig(buffer, format="png", dpi=DPI, metadata={"Software": None})
    return buffer.getvalue()


def _date_axis(ax: Axes) -> None:
    locator = mdates.AutoDateLocator(minticks=3, maxticks=7)
    ax.xaxis.set_major_locator(locator)
    ax.xaxis.set_major_formatter(mdates.ConciseDateFormatter(locator))


def _x(days: Sequence[date]) -> np.ndarray:
    return np.asarray(mdates.date2num(list(days)), dtype=float) if days else np.array([])


def legend_above(ax: Axes, ncols: int = 4) -> None:
    """The legend above the plot area, right-aligned, on the title's line: never over the data."""
    ax.legend(loc="lower right", bbox_to_anchor=(1.0, 1.0), ncols=ncols, borderaxespad=0.1,
              handlelength=1.6, columnspacing=1.0)


def plural(n: int, one: str, many: str) -> str:
    return f"{n} {one if n == 1 else many}"


def percent(share: float) -> str:
    """0.95 -> '95 %' (the project's way of writing a level)."""
    return f"{share * 100:g} %"


def listed(items: Sequence[str]) -> str:
    """'a', 'a and b', 'a, b and c'."""
    return items[0] if len(items) == 1 else ", ".join(items[:-1]) + " and " + items[-1]


class Caption:
    """What a chart draws, in sentences, said by the code that draws it (the page prints it).

    Each drawing function says each element as it adds it, so a caption never describes an
    element the chart does not show (a line that was not drawn, a legend entry with no data).
    """

    def __init__(self) -> None:
        self._sentences: list[str] = []

    def say(self, sentence: str) -> None:
        self._sentences.append(sentence)

    @property
    def text(self) -> str:
        return " ".join(self._sentences)


@dataclass(frozen=True)
class Nouns:
    """What one row is called in captions ('load', 'loads')."""

    row: str = "row"
    rows: str = "rows"


ROWS = Nouns()  # the default: rows are called rows


def nothing_yet(ax: Axes, title: str, message: str, caption: Caption | None = None) -> None:
    """An empty panel that says why it is empty."""
    ax.set_title(title)
    ax.set_xticks([])
    ax.set_yticks([])
    ax.grid(False)
    ax.text(0.5, 0.5, message, ha="center", va="center", transform=ax.transAxes, color=GREY)
    if caption is not None:
        caption.say(message[0].upper() + message[1:] + ".")


# marks of what people did -----------------------------------------------------------------------
# (colour, line style) per audit action; the legend names each, so colour is never the only cue
MARK_STYLES: dict[str, tuple[str, Any]] = {
    "promote": (GREEN, "-"),
    "rollback": (GREEN, (0, (5, 2))),
    "ack": (PURPLE, (0, (1, 1.5))),
    "correct": (GREY, (0, (4, 1.5, 1, 1.5))),
}
MARKS_LISTED = 6  # a caption names this many marks, then counts the rest


def draw_marks(ax: Axes, marks: Sequence[Mark], caption: Caption | None = None) -> None:
    """A vertical line on the day each action took effect, one legend entry per kind."""
    labelled: set[str] = set()
    for mark in marks:
        colour, style = MARK_STYLES[mark.action]
        label = None if mark.action in labelled else mark.noun
        labelled.add(mark.action)
        ax.axvline(float(mdates.date2num(mark.day)), color=colour, linestyle=style,
                   linewidth=1.3, label=label, zorder=1.5)
    if caption is not None and marks:
        named = [f"{m.text} from {m.day}" for m in marks[:MARKS_LISTED]]
        if len(marks) > MARKS_LISTED:
            named.append(plural(len(marks) - MARKS_LISTED, "more action", "more actions"))
        kinds = listed([PLURALS[a] for a in MARK_STYLES if a in labelled])
        caption.say(f"Vertical lines mark {kinds} on the day each took effect: "
                    f"{'; '.join(named)}.")


# time charts ------------------------------------------------------------------------------------
def draw_cusum(ax: Axes, series: CusumSeries, *, title: str = "Bias CUSUM",
               marks: Sequence[Mark] = (), caption: Caption | None = None,
               nouns: Nouns = ROWS) -> None:
    """Upper path above zero, lower path below, the limits ±h, signal days marked."""
    if series.empty:
        nothing_yet(ax, title, f"nothing to show yet: no checked day with {nouns.rows}", caption)
        return
    say = caption.say if caption is not None else (lambda _: None)
    x = _x(series.days)
    ax.step(x, series.h, where="mid", color=INK, linestyle="--", linewidth=0.9, label="±h")
    ax.step(x, -series.h, where="mid", color=INK, linestyle="--", linewidth=0.9)
    ax.axhline(0.0, color=GREY, linewidth=0.6)
    ax.plot(x, series.upper, color=VERMILION, linewidth=1.4, marker=".", markersize=3,
            label="upper (y above plan)")
    ax.plot(x, series.lower, color=BLUE, linewidth=1.4, marker=".", markersize=3,
            label="lower (y below plan)")
    say(f"The upper path (above zero) grows while {nouns.rows} run above their planned values, "
        "the lower path (below zero) while they run below; dashed lines are the limits ±h "
        f"(days without {nouns.rows} are gaps).")
    if series.signal.any():
        path = np.where(series.upper >= -series.lower, series.upper, series.lower)
        ax.plot(x[series.signal], path[series.signal], linestyle="none", marker="D",
                markersize=5, markerfacecolor="none", markeredgecolor=INK, label="signal")
        days = series.signal_days
        say(f"Diamonds mark the {plural(len(days), 'day', 'days')} the chart signalled, the "
            f"first {days[0]}.")
    else:
        say("The chart did not signal in this period.")
    draw_marks(ax, marks, caption)
    ax.set_title(title)
    ax.set_ylabel("CUSUM (sd units)")
    legend_above(ax)
    _date_axis(ax)


def draw_coverage(ax: Axes, series: CoverageSeries, *, title: str = "Coverage",
                  marks: Sequence[Mark] = (), caption: Caption | None = None,
                  nouns: Nouns = ROWS) -> None:
    """Daily coverage points, the rolling window's Wilson band and the level L."""
    if series.empty:
        nothing_yet(ax, title, f"nothing to show yet: no checked day with {nouns.rows}", caption)
        return
    say = caption.say if caption is not None else (lambda _: None)
    x = _x(series.days)
    band = np.isfinite(series.wilson_low) & np.isfinite(series.wilson_high)
    ax.plot(x, series.coverage, linestyle="none", marker="o", markersize=3, color=INK,
            label="daily coverage", zorder=3)
    say(f"Dots: the share of each day's {nouns.rows} inside the prediction interval (days "
        f"without {nouns.rows} are left empty).")
    if band.any():
        ax.fill_between(x, series.wilson_low, series.wilson_high, where=band, step="mid",
                        color=SKY, alpha=0.35, linewidth=0, label="window Wilson band")
        ax.step(x, series.window_coverage, where="mid", color=BLUE, linewidth=1.0,
                label="window coverage")
        say("Step line and shaded band: coverage over the rolling window "
            f"{'' if series.window_days is None else f'of {series.window_days} days '}"
            "with its Wilson score interval.")
    ax.axhline(series.level, color=ORANGE, linewidth=1.2, linestyle="-.",
               label=f"level L = {series.level:.0%}")
    say(f"Dash-dot line: the level L = {percent(series.level)}.")
    draw_marks(ax, marks, caption)
    low = np.nanmin(np.concatenate([series.coverage, series.wilson_low, [series.level]]))
    ax.set_ylim(max(0.0, min(low, 1.0) - 0.05), 1.02)
    ax.yaxis.set_major_formatter(mticker.PercentFormatter(1.0, decimals=0))
    ax.set_title(title)
    ax.set_ylabel("inside interval")
    legend_above(ax)
    _date_axis(ax)


def versions_named(numbers: Sequence[int]) -> str:
    """'version 1', 'versions 1 and 2'."""
    return ("version " if len(numbers) == 1 else "versions ") + listed([str(n) for n in numbers])


def draw_residuals(ax: Axes, series: ResidualSeries,
                   *, title: str = "Standardized predictive residuals",
                   marks: Sequence[Mark] = (), caption: Caption | None = None,
                   nouns: Nouns = ROWS, scorers: Sequence[int] = ()) -> None:
    """Every scored row as a dot, the day means as a line, the interval's edges as ±limit."""
    if series.empty:
        nothing_yet(ax, title, f"nothing to show yet: no checked day with {nouns.rows}", caption)
        return
    say = caption.say if caption is not None else (lambda _: None)
    x = _x(series.days)
    ax.axhline(0.0, color=GREY, linewidth=0.6)
    ax.step(x, series.limit, where="mid", color=INK, linestyle="--", linewidth=0.9,
            label="interval edge ±t")
    ax.step(x, -series.limit, where="mid", color=INK, linestyle="--", linewidth=0.9)
    rows = np.asarray(mdates.date2num(series.row_day.astype("datetime64[s]").astype(object)))
    ax.plot(rows, series.z, linestyle="none", marker=".", markersize=2.5, color=GREY,
            alpha=0.6, label=f"one {nouns.row}")
    ax.plot(x, series.day_mean, color=VERMILION, linewidth=1.3, marker="s", markersize=2.5,
            label="day mean")
    by = f", scored by {versions_named(scorers)} as the checks scored them" if scorers else ""
    say(f"Grey dots: the standardized predictive residual of each of the "
        f"{len(series.z)} {nouns.rows} of the checked days, (observed − planned) divided by its "
        f"prediction standard error{by}. Line with squares: their mean per day. Dashed lines: "
        "the interval's edges ±t, so dots beyond them fell outside the prediction interval "
        f"({_how_many(int((~series.inside).sum()))}).")
    draw_marks(ax, marks, caption)
    ax.set_title(title)
    ax.set_ylabel("(y − planned) / its standard error")
    legend_above(ax)
    _date_axis(ax)


def _how_many(n: int) -> str:
    return "none did" if n == 0 else "1 did" if n == 1 else f"{n} did"


def draw_limit_share(ax: Axes, series: LimitShareSeries, *, marks: Sequence[Mark] = (),
                     caption: Caption | None = None) -> None:
    """The two charts' nearness to their limits (1 = refit), the watch share, the marks; the
    axis stops at ``SHARE_TOP`` (a chart far past its limit says no more by rising further)."""
    if series.empty:
        nothing_yet(ax, "", "not checked yet", caption)
        return
    say = caption.say if caption is not None else (lambda _: None)
    x = _x(series.days)
    ax.axhline(1.0, color=INK, linewidth=0.9, linestyle="--", label="limit (refit)")
    ax.axhline(series.watch, color=ORANGE, linewidth=0.9, linestyle="-.", label="watch")
    ax.step(x, np.minimum(series.bias, SHARE_TOP), where="mid", color=VERMILION,
            linewidth=1.3, label="bias chart")
    drawn = ["the bias chart (solid)"]
    if np.isfinite(series.slope).any():
        ax.step(x, np.minimum(series.slope, SHARE_TOP), where="mid", color=BLUE, linewidth=1.1,
                linestyle=(0, (3, 1)), label="slope chart")
        drawn.append("the within-day slope chart (dashed)")
    say(f"{series.days[0]} to {series.days[-1]}: {' and '.join(drawn)} as a share of the "
        f"limit; dashed line 100 % (refit), dash-dot line {percent(series.watch)} (watch).")
    if np.nanmax(np.concatenate([series.bias, series.slope])) > SHARE_TOP:
        say(f"Values above {percent(SHARE_TOP)} are drawn at the top.")
    draw_marks(ax, marks, caption)
    ax.set_ylim(0.0, SHARE_TOP * 1.04)
    ax.yaxis.set_major_locator(mticker.FixedLocator([0.0, 1.0, SHARE_TOP]))
    ax.yaxis.set_major_formatter(mticker.PercentFormatter(1.0, decimals=0))
    ax.tick_params(labelsize=6)
    locator = mdates.AutoDateLocator(minticks=2, maxticks=4)
    ax.xaxis.set_major_locator(locator)
    ax.xaxis.set_major_formatter(mdates.ConciseDateFormatter(locator))


# the e-mail chart -------------------------------------------------------------------------------
def alert_chart_png(checks: Sequence[DayCheck], level: float,
                    marks: Sequence[Mark] = ()) -> bytes:
    """A compact two-panel PNG (640×360 px) for an alert e-mail.

    Top: the two CUSUM paths (upper as +, lower as −) against ±h; bottom: daily coverage against
    the level ``level`` with the rolling window's Wilson band. Days without rows are gaps;
    promotions, rollbacks, acknowledgements and corrections are vertical lines on both.
    """
    with _figure(ALERT_SIZE) as fig:
        top, bottom = fig.subplots(2, 1, sharex=True)
        draw_cusum(top, cusum_series(checks), marks=marks)
        draw_coverage(bottom, coverage_series(checks, level), marks=marks)
        return png_bytes(fig)


@dataclass(frozen=True)
class ChartPanel:
    """One model's part of a digest chart."""

    model: str
    checks: Sequence[DayCheck]
    level: float
    marks: Sequence[Mark] = ()


def digest_chart_png(panels: Sequence[ChartPanel]) -> bytes:
    """The alert chart for a digest: one :func:`alert_chart_png` pair of panels per model,
    stacked and titled with the model's name (640 px wide, 360 px per model)."""
    if len(panels) == 1:
        return alert_chart_png(panels[0].checks, panels[0].level, panels[0].marks)
    size = (ALERT_SIZE[0], ALERT_SIZE[1] * len(panels))
    with _figure(size) as fig:
        axes = fig.subplots(2 * len(panels), 1)
        for i, panel in enumerate(panels):
            draw_cusum(axes[2 * i], cusum_series(panel.checks),
                       title=f"{panel.model}: bias CUSUM", marks=panel.marks)
            draw_coverage(axes[2 * i + 1], coverage_series(panel.checks, panel.level),
                          title=f"{panel.model}: coverage", marks=panel.marks)
        return png_bytes(fig)


# the report's pictures --------------------------------------------------------------------------
@dataclass(frozen=True)
class Chart:
    """One picture of a page: its file name, its PNG, and what it shows in words."""

    file: str
    png: bytes
    caption: str
    alt: str


def drawn(file: str, size: tuple[int, int], alt: str,
          draw: Callable[[Figure, Caption], None]) -> Chart:
    """Draw a figure of ``size`` pixels with ``draw(fig, caption)`` and keep what it said."""
    caption = Caption()
    with _figure(size) as fig:
        draw(fig, caption)
        return Chart(file, png_bytes(fig), caption.text, alt)


def glance_chart(file: str, series: LimitShareSeries, marks: Sequence[Mark],
                 model: str) -> Chart:
    """The team page's small chart of one model (:func:`draw_limit_share`)."""
    def draw(fig: Figure, caption: Caption) -> None:
        draw_limit_share(fig.subplots(), series, marks=marks, caption=caption)

    chart = drawn(file, GLANCE_SIZE, "", draw)
    return Chart(chart.file, chart.png, chart.caption, f"{model}: {chart.caption}")


def coverage_chart(series: CoverageSeries, marks: Sequence[Mark], nouns: Nouns) -> Chart:
    def draw(fig: Figure, caption: Caption) -> None:
        draw_coverage(fig.subplots(), series, title="Daily coverage of the prediction interval",
                      marks=marks, caption=caption, nouns=nouns)

    return drawn("coverage.png", REPORT_SIZE, "daily coverage of the prediction interval", draw)


def cusum_chart(series: CusumSeries, marks: Sequence[Mark], nouns: Nouns) -> Chart:
    def draw(fig: Figure, caption: Caption) -> None:
        draw_cusum(fig.subplots(), series, title="Bias CUSUM of the day residuals", marks=marks,
                   caption=caption, nouns=nouns)

    return drawn("cusum.png", REPORT_SIZE, "bias CUSUM paths against their limits", draw)


def residuals_chart(series: ResidualSeries, marks: Sequence[Mark], nouns: Nouns,
                    scorers: Sequence[int]) -> Chart:
    def draw(fig: Figure, caption: Caption) -> None:
        draw_residuals(fig.subplots(), series, marks=marks, caption=caption, nouns=nouns,
                       scorers=scorers)

    return drawn("residuals.png", REPORT_SIZE, "standardized predictive residuals over time",
                 draw)
