"""The report's charts of single rows: the response against its one predictor with the versions'
lines (one-predictor models), observed against planned with each row's prediction interval, and
the standardized residuals against each predictor (a panel per predictor).

Like :mod:`monitor.report.charts` (whose canvas and style they use), every function says in its
caption what it drew, as it draws it.
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np
from matplotlib.axes import Axes
from matplotlib.collections import LineCollection
from matplotlib.figure import Figure

from monitor.report.charts import (
    BLUE,
    GREEN,
    GREY,
    INK,
    ORANGE,
    PURPLE,
    ROWS,
    SCATTER_SIZE,
    SKY,
    VERMILION,
    Caption,
    Chart,
    Nouns,
    drawn,
    listed,
    nothing_yet,
    percent,
    versions_named,
)
from monitor.report.series import ScatterSeries, ScoredRows

PANEL_HEIGHT = 260  # pixels per row of residual panels
PANELS_PER_ROW = 2
_LINE_STYLES = {"active": (BLUE, "-", SKY), "candidate": (GREEN, "--", None)}


def _levels(rows: ScoredRows) -> str:
    return listed(sorted({percent(s.level) for s in rows.scorers}))


def _outside(n: int, nouns: Nouns, where: str) -> str:
    if n == 0:
        return "None of them fell outside its interval."
    if n == 1:
        return f"1 {nouns.row} fell outside its interval{where}."
    return f"{n} {nouns.rows} fell outside their intervals{where}."


def draw_scatter(ax: Axes, series: ScatterSeries, *, caption: Caption | None = None,
                 nouns: Nouns = ROWS) -> None:
    """Rows (recent ones larger and filled), each version's line and band, fit ranges of x."""
    title = f"{series.y_label} against {series.x_label}"
    if series.empty:
        nothing_yet(ax, title, f"nothing to show yet: no {nouns.rows} stored", caption)
        return
    say = caption.say if caption is not None else (lambda _: None)
    older, recent = ~series.recent, series.recent
    if older.any():
        ax.plot(series.x[older], series.y[older], linestyle="none", marker="o", markersize=3,
                markerfacecolor="none", markeredgecolor=GREY, markeredgewidth=0.6, alpha=0.7,
                label=f"{nouns.rows} before {series.recent_from}")
    if recent.any():
        ax.plot(series.x[recent], series.y[recent], linestyle="none", marker="o",
                markersize=4, markerfacecolor=ORANGE, markeredgecolor=INK, markeredgewidth=0.4,
                label=f"{nouns.rows} since {series.recent_from}")
    n, m = len(series.y), int(recent.sum())
    if n:
        say(f"Each circle is one {nouns.row} ({n} in all), at its {series.x_label} (across) "
            f"and {series.y_label} (up); "
            + (f"all are from {series.recent_from} on, the coverage window." if m == n else
               f"the {m} filled ones are from {series.recent_from} on, the coverage window."
               if m else f"none is from the coverage window (from {series.recent_from})."))
    ranges = False
    for line in series.lines:
        colour, style, fill = _LINE_STYLES.get(line.state, (PURPLE, ":", None))
        name = f"version {line.number} ({line.state})"
        ax.plot(line.x, line.mean, color=colour, linestyle=style, linewidth=1.6, label=name)
        band = f"{percent(line.level)} prediction band, version {line.number}"
        if fill is not None:
            ax.fill_between(line.x, line.lower, line.upper, color=fill, alpha=0.3, linewidth=0,
                            label=band)
            shape = "shaded band"
        else:
            ax.plot(line.x, line.lower, color=colour, linestyle=":", linewidth=1.0, label=band)
            ax.plot(line.x, line.upper, color=colour, linestyle=":", linewidth=1.0)
            shape = "dotted lines either side"
        kind = "solid" if style == "-" else "dashed" if style == "--" else "dotted"
        say(f"The {kind} line is {name}'s planned value, the {shape} its {percent(line.level)} "
            "prediction interval.")
        for edge in (line.fit_x_min, line.fit_x_max):
            if edge is not None and np.isfinite(edge):
                ax.axvline(edge, color=colour, linestyle=(0, (1, 3)), linewidth=1.0)
                ranges = True
    if ranges:
        ax.plot([], [], color=INK, linestyle=(0, (1, 3)), linewidth=1.0,
                label=f"range of {series.x_label} in the fit window")
        say(f"Dotted vertical lines mark the range of {series.x_label} in each version's fit "
            "window, in the version's colour.")
    if series.note:
        ax.text(0.99, 0.02, series.note, ha="right", va="bottom", transform=ax.transAxes,
                color=GREY, fontsize=7)
        say(f"No line is drawn: {series.note}.")
    ax.set_title(title)
    ax.set_xlabel(series.x_label)
    ax.set_ylabel(series.y_label)
    ax.legend(loc="upper left", ncols=2)


def draw_planned(ax: Axes, rows: ScoredRows, *, y_label: str, caption: Caption | None = None,
                 nouns: Nouns = ROWS) -> None:
    """Observed against planned: one dot per row, its prediction interval as a vertical bar
    through it, the diagonal where observed equals planned; rows outside their interval filled."""
    title = f"{y_label}: observed against planned"
    if rows.empty:
        nothing_yet(ax, title, f"nothing to show yet: no checked day with {nouns.rows}", caption)
        return
    say = caption.say if caption is not None else (lambda _: None)
    bars = np.stack([np.column_stack([rows.planned, rows.lower]),
                     np.column_stack([rows.planned, rows.upper])], axis=1)
    ax.add_collection(LineCollection(list(bars), colors=SKY, linewidths=1.2, alpha=0.6,
                                     label=f"{_levels(rows)} prediction interval"))
    edges = np.concatenate([rows.lower, rows.upper, rows.y])
    lo, hi = float(edges.min()), float(edges.max())
    ax.plot([lo, hi], [lo, hi], color=INK, linewidth=1.0, label="observed = planned")
    inside, outside = rows.inside, ~rows.inside
    ax.plot(rows.planned[inside], rows.y[inside], linestyle="none", marker="o", markersize=3,
            markerfacecolor="none", markeredgecolor=GREY, markeredgewidth=0.7,
            label="inside its interval")
    if outside.any():
        ax.plot(rows.planned[outside], rows.y[outside], linestyle="none", marker="o",
                markersize=4, markerfacecolor=VERMILION, markeredgecolor=INK,
                markeredgewidth=0.4, label="outside its interval")
    numbers = [s.number for s in rows.scorers]
    say(f"Each circle is one {nouns.row} of a checked day ({len(rows)} in all): its planned "
        f"value across, its observed {y_label} up, planned by {versions_named(numbers)} as the "
        f"checks scored them. The solid diagonal is observed = planned; the vertical bar "
        f"through each circle is that {nouns.row}'s {_levels(rows)} prediction interval.")
    say(_outside(int(outside.sum()), nouns, " (filled circles)"))
    ax.autoscale_view()
    ax.set_title(title)
    ax.set_xlabel(f"planned {y_label}")
    ax.set_ylabel(f"observed {y_label}")
    ax.legend(loc="upper left")


def draw_predictor_residuals(fig: Figure, rows: ScoredRows, predictors: Sequence[str], *,
                             caption: Caption | None = None, nouns: Nouns = ROWS) -> None:
    """One panel per predictor: each row's standardized residual against that predictor."""
    k = len(predictors)
    ncols = min(k, PANELS_PER_ROW)
    nrows = -(-k // ncols)
    grid = fig.subplots(nrows, ncols, squeeze=False)
    for spare in grid.flat[k:]:
        spare.set_axis_off()
    if rows.empty:
        for i, name in enumerate(predictors):
            nothing_yet(grid.flat[i], f"residuals against {name}",
                        f"nothing to show yet: no checked day with {nouns.rows}",
                        caption if i == 0 else None)
        return
    say = caption.say if caption is not None else (lambda _: None)
    outside = ~rows.inside
    several = len({round(s.limit, 12) for s in rows.scorers}) > 1
    for i, name in enumerate(predictors):
        ax: Axes = grid.flat[i]
        ax.axhline(0.0, color=GREY, linewidth=0.6)
        for s in rows.scorers:
            label = f"±t, version {s.number}" if several else "interval edge ±t"
            for sign in (1, -1):
                ax.axhline(sign * s.limit, color=INK, linestyle="--", linewidth=0.9,
                           label=label if sign == 1 else None)
        ax.plot(rows.x[~outside, i], rows.z[~outside], linestyle="none", marker="o",
                markersize=2.5, markerfacecolor="none", markeredgecolor=GREY,
                markeredgewidth=0.6, label="inside its interval")
        if outside.any():
            ax.plot(rows.x[outside, i], rows.z[outside], linestyle="none", marker="o",
                    markersize=3.5, markerfacecolor=VERMILION, markeredgecolor=INK,
                    markeredgewidth=0.4, label="outside its interval")
        ax.set_title(f"residuals against {name}")
        ax.set_xlabel(name)
        ax.set_ylabel("(y − planned) / its s.e." if i % ncols == 0 else "")
        reach = float(np.nanmax(np.abs(rows.z))) if len(rows) else 0.0
        top = max([reach, *(s.limit for s in rows.scorers)]) * 1.15
        ax.set_ylim(-top, top)
        if i == 0:  # one legend for all panels, above them on the right
            fig.legend(handles=ax.get_legend_handles_labels()[0], loc="outside upper right",
                       ncols=3, handlelength=1.6, columnspacing=1.0)
    numbers = [s.number for s in rows.scorers]
    say(f"One panel per predictor ({listed(list(predictors))}): the standardized predictive "
        f"residual of each of the {len(rows)} {nouns.rows} of the checked days, (observed − "
        f"planned) divided by its prediction standard error, against that predictor's value; "
        f"scored by {versions_named(numbers)} as the checks scored them.")
    edges = ("Dashed lines: each version's interval edges ±t" if several
             else "Dashed lines: the interval's edges ±t")
    say(f"{edges}. " + _outside(int(outside.sum()), nouns, " (filled circles)"))


def scatter_chart(series: ScatterSeries, nouns: Nouns) -> Chart:
    def draw(fig: Figure, caption: Caption) -> None:
        draw_scatter(fig.subplots(), series, caption=caption, nouns=nouns)

    return drawn("scatter.png", SCATTER_SIZE,
                 f"{series.y_label} against {series.x_label} with the versions' lines", draw)


def planned_chart(rows: ScoredRows, y_label: str, nouns: Nouns) -> Chart:
    def draw(fig: Figure, caption: Caption) -> None:
        draw_planned(fig.subplots(), rows, y_label=y_label, caption=caption, nouns=nouns)

    return drawn("planned.png", SCATTER_SIZE, f"observed {y_label} against planned", draw)


def predictor_residuals_chart(rows: ScoredRows, predictors: Sequence[str],
                              nouns: Nouns) -> Chart:
    nrows = -(-len(predictors) // PANELS_PER_ROW)
    size = (SCATTER_SIZE[0], PANEL_HEIGHT * nrows)

    def draw(fig: Figure, caption: Caption) -> None:
        draw_predictor_residuals(fig, rows, predictors, caption=caption, nouns=nouns)

    return drawn("residuals_by_predictor.png", size,
                 "standardized residuals against " + listed(list(predictors)), draw)
