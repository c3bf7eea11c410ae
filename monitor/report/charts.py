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
from collections.abc import Iterator, Sequence
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
from monitor.report.series import (
    CoverageSeries,
    CusumSeries,
    ResidualSeries,
    ScatterSeries,
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


def _legend(ax: Axes) -> None:
    """The legend above the plot area, right-aligned, on the title's line: never over the data."""
    ax.legend(loc="lower right", bbox_to_anchor=(1.0, 1.0), ncols=4, borderaxespad=0.1,
              handlelength=1.6, columnspacing=1.0)


def nothing_yet(ax: Axes, title: str, message: str) -> None:
    """An empty panel that says why it is empty."""
    ax.set_title(title)
    ax.set_xticks([])
    ax.set_yticks([])
    ax.grid(False)
    ax.text(0.5, 0.5, message, ha="center", va="center", transform=ax.transAxes, color=GREY)


def draw_cusum(ax: Axes, series: CusumSeries, *, title: str = "Bias CUSUM") -> None:
    """Upper path above zero, lower path below, the limits ±h, signal days marked."""
    if series.empty:
        nothing_yet(ax, title, "nothing to show yet: no checked day with rows")
        return
    x = _x(series.days)
    ax.step(x, series.h, where="mid", color=INK, linestyle="--", linewidth=0.9, label="±h")
    ax.step(x, -series.h, where="mid", color=INK, linestyle="--", linewidth=0.9)
    ax.axhline(0.0, color=GREY, linewidth=0.6)
    ax.plot(x, series.upper, color=VERMILION, linewidth=1.4, marker=".", markersize=3,
            label="upper (y above plan)")
    ax.plot(x, series.lower, color=BLUE, linewidth=1.4, marker=".", markersize=3,
            label="lower (y below plan)")
    if series.signal.any():
        path = np.where(series.upper >= -series.lower, series.upper, series.lower)
        ax.plot(x[series.signal], path[series.signal], linestyle="none", marker="D",
                markersize=5, markerfacecolor="none", markeredgecolor=INK, label="signal")
    ax.set_title(title)
    ax.set_ylabel("CUSUM (sd units)")
    _legend(ax)
    _date_axis(ax)


def draw_coverage(ax: Axes, series: CoverageSeries, *, title: str = "Coverage") -> None:
    """Daily coverage points, the rolling window's Wilson band and the level L."""
    if series.empty:
        nothing_yet(ax, title, "nothing to show yet: no checked day with rows")
        return
    x = _x(series.days)
    band = np.isfinite(series.wilson_low) & np.isfinite(series.wilson_high)
    ax.fill_between(x, series.wilson_low, series.wilson_high, where=band, step="mid",
                    color=SKY, alpha=0.35, linewidth=0, label="window Wilson band")
    ax.step(x, series.window_coverage, where="mid", color=BLUE, linewidth=1.0,
            label="window coverage")
    ax.plot(x, series.coverage, linestyle="none", marker="o", markersize=3, color=INK,
            label="daily coverage")
    ax.axhline(series.level, color=ORANGE, linewidth=1.2, linestyle="-.",
               label=f"level L = {series.level:.0%}")
    low = np.nanmin(np.concatenate([series.coverage, series.wilson_low, [series.level]]))
    ax.set_ylim(max(0.0, min(low, 1.0) - 0.05), 1.02)
    ax.yaxis.set_major_formatter(mticker.PercentFormatter(1.0, decimals=0))
    ax.set_title(title)
    ax.set_ylabel("inside interval")
    _legend(ax)
    _date_axis(ax)


def alert_chart_png(checks: Sequence[DayCheck], level: float) -> bytes:
    """A compact two-panel PNG (640×360 px) for an alert e-mail.

    Top: the two CUSUM paths (upper as +, lower as −) against ±h; bottom: daily coverage against
    the level ``level`` with the rolling window's Wilson band. Days without rows are gaps.
    """
    with _figure(ALERT_SIZE) as fig:
        top, bottom = fig.subplots(2, 1, sharex=True)
        draw_cusum(top, cusum_series(checks))
        draw_coverage(bottom, coverage_series(checks, level))
        return png_bytes(fig)


@dataclass(frozen=True)
class ChartPanel:
    """One model's part of a digest chart."""

    model: str
    checks: Sequence[DayCheck]
    level: float


def digest_chart_png(panels: Sequence[ChartPanel]) -> bytes:
    """The alert chart for a digest: one :func:`alert_chart_png` pair of panels per model,
    stacked and titled with the model's name (640 px wide, 360 px per model)."""
    if len(panels) == 1:
        return alert_chart_png(panels[0].checks, panels[0].level)
    size = (ALERT_SIZE[0], ALERT_SIZE[1] * len(panels))
    with _figure(size) as fig:
        axes = fig.subplots(2 * len(panels), 1)
        for i, panel in enumerate(panels):
            draw_cusum(axes[2 * i], cusum_series(panel.checks),
                       title=f"{panel.model}: bias CUSUM")
            draw_coverage(axes[2 * i + 1], coverage_series(panel.checks, panel.level),
                          title=f"{panel.model}: coverage")
        return png_bytes(fig)


# the report's charts ---------------------------------------------------------------------------
_LINE_STYLES = {"active": (BLUE, "-", SKY), "candidate": (GREEN, "--", None)}


def draw_scatter(ax: Axes, series: ScatterSeries) -> None:
    """Rows (recent ones larger and filled), each version's line and band, fit ranges of x."""
    title = f"{series.y_label} against {series.x_label}"
    if series.empty:
        nothing_yet(ax, title, "nothing to show yet: no rows stored")
        return
    older = ~series.recent
    ax.plot(series.x[older], series.y[older], linestyle="none", marker="o", markersize=3,
            markerfacecolor="none", markeredgecolor=GREY, markeredgewidth=0.6, alpha=0.7,
            label="earlier rows")
    ax.plot(series.x[series.recent], series.y[series.recent], linestyle="none", marker="o",
            markersize=4, markerfacecolor=ORANGE, markeredgecolor=INK, markeredgewidth=0.4,
            label=f"rows since {series.recent_from}")
    for line in series.lines:
        colour, style, fill = _LINE_STYLES.get(line.state, (PURPLE, ":", None))
        name = f"version {line.number} ({line.state})"
        ax.plot(line.x, line.mean, color=colour, linestyle=style, linewidth=1.6, label=name)
        if fill is not None:
            ax.fill_between(line.x, line.lower, line.upper, color=fill, alpha=0.3, linewidth=0,
                            label=f"{line.level:.0%} prediction band, version {line.number}")
        else:
            ax.plot(line.x, line.lower, color=colour, linestyle=":", linewidth=1.0,
                    label=f"{line.level:.0%} prediction band, version {line.number}")
            ax.plot(line.x, line.upper, color=colour, linestyle=":", linewidth=1.0)
        for edge in (line.fit_x_min, line.fit_x_max):
            if edge is not None and np.isfinite(edge):
                ax.axvline(edge, color=colour, linestyle=(0, (1, 3)), linewidth=1.0)
    if any(line.fit_x_min is not None for line in series.lines):
        ax.plot([], [], color=INK, linestyle=(0, (1, 3)), linewidth=1.0,
                label="range of x in the fit window")
    ax.set_title(title)
    ax.set_xlabel(series.x_label)
    ax.set_ylabel(series.y_label)
    if series.note:
        ax.text(0.99, 0.02, series.note, ha="right", va="bottom", transform=ax.transAxes,
                color=GREY, fontsize=7)
    ax.legend(loc="upper left", ncols=2)


def draw_residuals(ax: Axes, series: ResidualSeries,
                   *, title: str = "Standardized predictive residuals") -> None:
    """Every scored row as a dot, the day means as a line, the interval's edges as ±limit."""
    if series.empty:
        nothing_yet(ax, title, "nothing to show yet: no checked day with rows")
        return
    x = _x(series.days)
    ax.axhline(0.0, color=GREY, linewidth=0.6)
    ax.step(x, series.limit, where="mid", color=INK, linestyle="--", linewidth=0.9,
            label="interval edge ±t")
    ax.step(x, -series.limit, where="mid", color=INK, linestyle="--", linewidth=0.9)
    rows = np.asarray(mdates.date2num(series.row_day.astype("datetime64[s]").astype(object)))
    ax.plot(rows, series.z, linestyle="none", marker=".", markersize=2.5, color=GREY,
            alpha=0.6, label="one row")
    ax.plot(x, series.day_mean, color=VERMILION, linewidth=1.3, marker="s", markersize=2.5,
            label="day mean")
    ax.set_title(title)
    ax.set_ylabel("(y − prediction) / its standard error")
    _legend(ax)
    _date_axis(ax)


def scatter_png(series: ScatterSeries) -> bytes:
    with _figure(SCATTER_SIZE) as fig:
        draw_scatter(fig.subplots(), series)
        return png_bytes(fig)


def coverage_png(series: CoverageSeries) -> bytes:
    with _figure(REPORT_SIZE) as fig:
        draw_coverage(fig.subplots(), series, title="Daily coverage of the prediction interval")
        return png_bytes(fig)


def cusum_png(series: CusumSeries) -> bytes:
    with _figure(REPORT_SIZE) as fig:
        draw_cusum(fig.subplots(), series, title="Bias CUSUM of the day residuals")
        return png_bytes(fig)


def residuals_png(series: ResidualSeries) -> bytes:
    with _figure(REPORT_SIZE) as fig:
        draw_residuals(fig.subplots(), series)
        return png_bytes(fig)
