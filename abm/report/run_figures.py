"""The single-run report's figures, drawn as the batch briefing's are (:mod:`abm.report.figures`).

Same canvas, colours, markers and footer: series are told apart by marker and
line style as well as colour, every axis names its unit, and every figure
prints its record set in its footer and caption. A panel or figure drawn from
simulated truth says so in its title: an agency never sees it. One run gives
no intervals: the captions say what a batch of replications would add.
"""

from __future__ import annotations

from collections.abc import Sequence

import matplotlib
import numpy as np
import pandas as pd

from ..world.words import Words
from .document import FigureBlock
from .figures import LINES, MARKERS, SERIES_COLOURS, STYLE
from .figures import _figure, _png, _t, _words  # the batch figures' canvas, footer and text helpers

TRUTH_TITLE = "Simulated truth — an agency never sees this"
MAX_TIME_LABELS = 16  # departure times named under the departures figure (8.5 inches wide, labels at 45 degrees)
FIGURE_KEYS = frozenset({"run-daily", "run-boarding", "run-waits", "run-queues", "run-lanes", "run-departures"})
OUTCOMES = (("crossed", "crossed"), ("detected", "found at a check"), ("interdicted", "stopped at the point"),
            ("no_vehicle", "found no vehicle"))


def _style(k: int) -> dict[str, object]:
    """The k-th series' colour, marker and line style."""
    return {"color": SERIES_COLOURS[k % 4], "marker": MARKERS[k % 4], "linestyle": LINES[k % 4]}


def _lines(ax, frame: pd.DataFrame, columns: Sequence[tuple[str, str]], x: str = "day") -> None:  # type: ignore[no-untyped-def]
    """One line per (column, label) of ``frame`` against ``x``."""
    for k, (column, label) in enumerate(columns):
        ax.plot(frame[x], frame[column], markersize=3.5, linewidth=1.2, label=_t(label),
                markevery=max(1, len(frame) // 12), **_style(k))
    ax.set_ylim(bottom=0)
    ax.legend(loc="best", frameon=True, framealpha=0.9)


def daily_figure(daily: pd.DataFrame, arrivals: pd.Series, window: str) -> FigureBlock:
    """Four panels over the summarised days: vehicles and checks, false alarms, people found (observed);
    people arriving, attempting and crossing (truth)."""
    frame = daily.assign(truth_arrivals=arrivals.reindex(daily["day"]).fillna(0).to_numpy())
    panels = (
        ("Vehicles arriving and vehicles checked (observed)", "Vehicles a day",
         (("vehicles", "vehicles arriving"), ("checks", "vehicles checked"))),
        ("False alarms (observed)", "Vehicles a day", (("false_alarms", "alarms after which nothing was found"),)),
        ("People found (observed)", "Persons a day",
         (("detections", "found at checks"), ("interdictions", "stopped at boarding points"))),
        (TRUTH_TITLE, "Persons a day",
         (("truth_arrivals", "arriving to try"), ("truth_attempts", "attempts"), ("truth_crossings", "crossed"))),
    )
    with matplotlib.rc_context(STYLE):
        fig = _figure(8.5, 6.4)
        axes = fig.subplots(2, 2, sharex=True)
        for ax, (title, unit, columns) in zip(axes.flat, panels):
            _lines(ax, frame, columns)
            ax.set_title(_t(title))
            ax.set_ylabel(unit)
        for ax in axes[1]:
            ax.set_xlabel("Day of the run")
        png = _png(fig, "Sources: observed records (first three panels); simulated truth (last panel). One run, "
                        "no intervals. Model estimates, not counts.")
    return FigureBlock(
        "run-daily", "Day by day",
        f"Sources: vehicles, checks, false alarms and people found are observed records (daily.parquet); people "
        f"arriving to try, attempts and crossings are simulated truth, which an agency never sees. Over {window}. "
        "One run has no interval: day-to-day wobble is chance as much as anything; a batch of replications "
        "(undertow batch) gives intervals.",
        png, "Four panels of daily counts: vehicles and checks, false alarms, people found, and truth",
    )


def boarding_figure(table: pd.DataFrame, window: str) -> FigureBlock:
    """Persons attempting at each boarding point, split by what became of the attempt (truth)."""
    points = list(table.index)
    with matplotlib.rc_context(STYLE):
        fig = _figure(8, 1.6 + 0.45 * len(points))
        ax = fig.add_subplot()
        left = np.zeros(len(points))
        hatches = ("", "//", "..", "xx")
        for k, (outcome, label) in enumerate(OUTCOMES):
            values = table.get(outcome, pd.Series(0, index=points)).to_numpy(float)
            ax.barh(range(len(points)), values, left=left, color=SERIES_COLOURS[k % 4], hatch=hatches[k],
                    edgecolor="white", label=_t(label))
            left += values
        ax.set_yticks(range(len(points)), [_words(p) for p in points])
        ax.invert_yaxis()
        ax.set_xlabel("Person-attempts")
        ax.set_title(_t(f"Where attempts boarded and what became of them. {TRUTH_TITLE}"))
        ax.legend(loc="best", frameon=True, framealpha=0.9)
        png = _png(fig, "Source: simulated truth (truth/attempts). One run. Model estimates, not counts.")
    return FigureBlock(
        "run-boarding", "Where attempts boarded (simulated truth)",
        f"Source: simulated truth (every attempt's boarding point and outcome), which an agency never sees; over "
        f"{window}. A person who tries on several days counts once per attempt. One run, no interval.",
        png, "Stacked bars of person-attempts per boarding point by outcome",
    )


def _station_panels(hours: pd.DataFrame, stations: Sequence[str]):  # type: ignore[no-untyped-def]
    """A figure with one small panel per station (two columns) and the panels' axes, in station order."""
    cols = 2 if len(stations) > 1 else 1
    rows = -(-len(stations) // cols)
    fig = _figure(8.5, 2.3 * rows + 0.9)
    axes = fig.subplots(rows, cols, squeeze=False, sharex=True)
    for ax in list(axes.flat)[len(stations):]:
        ax.set_visible(False)
    # the hour axis is named under each column's lowest panel only
    return fig, [(ax, hours[hours["station"] == s].sort_values("hour"), s, i + cols >= len(stations))
                 for i, (ax, s) in enumerate(zip(axes.flat, stations))]


def waits_figure(hours: pd.DataFrame, stations: Sequence[str], window: str) -> FigureBlock:
    """Mean and 95th-percentile wait for a check, per station and hour of the day (observed)."""
    with matplotlib.rc_context(STYLE):
        fig, panels = _station_panels(hours, stations)
        for ax, rows, station, lowest in panels:
            for k, (column, label) in enumerate((("wait_mean_min", "mean"), ("wait_p95_min", "95th percentile"))):
                ax.plot(rows["hour"], rows[column], markersize=3.5, linewidth=1.2, label=label, **_style(k))
            ax.set_title(_words(station))
            ax.set_ylabel("Wait (minutes)")
            if lowest:
                ax.set_xlabel("Hour of the day the vehicle arrived")
            ax.set_xticks(range(0, 24, 3))
            ax.set_ylim(bottom=0)
        panels[0][0].legend(loc="best", frameon=True, framealpha=0.9)
        png = _png(fig, "Source: observed records (queue_hours.parquet). Checked vehicles only. One run. "
                        "Model estimates, not counts.")
    return FigureBlock(
        "run-waits", "Waits for a check by station and hour",
        f"Source: observed records (queue_hours.parquet): minutes from reaching the station to the check's start, "
        f"for vehicles checked, by the hour they arrived, pooled over {window}. The 95th percentile is of every "
        "such wait in that hour of the day; hours with no checks are gaps. One run, no interval.",
        png, "Small multiples of mean and 95th-percentile wait per hour, one panel per station",
    )


def _hour_lines(hours: pd.DataFrame, stations: Sequence[str], column: str, ylabel: str, title: str, limit: float | None):  # type: ignore[no-untyped-def]
    """One panel, one line per station of ``column`` across the hours of the day; returns the PNG."""
    with matplotlib.rc_context(STYLE):
        fig = _figure(8.5, 4.2)
        ax = fig.add_subplot()
        for k, station in enumerate(stations):
            rows = hours[hours["station"] == station].sort_values("hour")
            ax.plot(rows["hour"], rows[column], markersize=4, linewidth=1.2, label=_words(station),
                    color=SERIES_COLOURS[k % 4] if k < 4 else "#888888", marker=MARKERS[k % 4],
                    linestyle=LINES[(k // 4 + k) % 4])
        if limit is not None:
            ax.axhline(limit, color="#333333", linewidth=0.9, linestyle=":")
        ax.set_xticks(range(0, 24, 2))
        ax.set_xlabel("Hour of the day")
        ax.set_ylabel(ylabel)
        ax.set_ylim(bottom=0)
        ax.set_title(_t(title))
        ax.legend(loc="best", frameon=True, framealpha=0.9, ncol=2)
        return _png(fig, "Source: observed records (queue_hours.parquet). One run. Model estimates, not counts.")


def queues_figure(hours: pd.DataFrame, stations: Sequence[str], window: str) -> FigureBlock:
    """Mean number of vehicles waiting for a check, per station and hour of the day (observed)."""
    png = _hour_lines(hours, stations, "queue_mean", "Vehicles waiting (time average)",
                      "Queue length by station and hour of the day", None)
    return FigureBlock(
        "run-queues", "Queue length by station and hour",
        f"Source: observed records (queue_hours.parquet): the time-average number of vehicles waiting for a check "
        f"in each hour of the day, measured from each vehicle's arrival and check start (not inferred by Little's "
        f"law), averaged over {window}. One run, no interval.",
        png, "Lines of mean queue length per hour of the day, one per station",
    )


def lanes_figure(hours: pd.DataFrame, stations: Sequence[str], window: str) -> FigureBlock:
    """Share of staffed lane-minutes spent checking, per station and hour of the day (observed)."""
    png = _hour_lines(hours, stations, "utilisation", "Lane utilisation (busy / staffed)",
                      "Lane utilisation by station and hour of the day (dotted: every staffed lane busy)", 1.0)
    return FigureBlock(
        "run-lanes", "Lane utilisation by station and hour",
        f"Source: observed records (queue_hours.parquet): lane-minutes spent checking over lane-minutes on duty by "
        f"the roster, per hour of the day, pooled over {window}. Hours with no lane on duty are gaps; checks that "
        "run on past a roster's last hour can lift an hour above 1. One run, no interval.",
        png, "Lines of lane utilisation per hour of the day, one per station",
    )


def departures_figure(by_time: pd.DataFrame, words: Words, window: str) -> FigureBlock:
    """Vehicles booked on and missing each departure of the timetable, per day (observed)."""
    with matplotlib.rc_context(STYLE):
        fig = _figure(8.5, 5.6)
        top, bottom = fig.subplots(2, 1, sharex=True, height_ratios=(3, 2))
        x = np.arange(len(by_time))
        top.bar(x - 0.2, by_time["booked_per_day"], width=0.4, color=SERIES_COLOURS[2], label="booked on it")
        top.bar(x + 0.2, by_time["left_per_day"], width=0.4, color=SERIES_COLOURS[1], hatch="..", edgecolor="white",
                label="left on it")
        top.set_ylabel("Vehicles a day (mean)")
        top.set_title(_t(f"Vehicles booked on each {words.service}, and those that left on it"))
        top.set_ylim(0, 1.3 * max(float(by_time[["booked_per_day", "left_per_day"]].max().max()), 1.0))  # legend room
        top.legend(loc="upper center", ncol=2, frameon=True, framealpha=0.9)
        # on its own scale: a few a day beside hundreds would not show
        bottom.bar(x, by_time["missed_per_day"], width=0.6, color=SERIES_COLOURS[0], hatch="//", edgecolor="white")
        bottom.set_ylabel("Vehicles a day (mean)")
        bottom.set_title(_t(f"{words.missed.capitalize()}: booked on it but left later or not at all"))
        # many departures a day would overprint their labels: name at most MAX_TIME_LABELS, a tick on every bar
        step = -(-len(x) // MAX_TIME_LABELS)
        bottom.set_xticks(x[::step], [_t(t) for t in by_time.index[::step]], rotation=45, ha="right")
        bottom.set_xticks(x, minor=True)
        bottom.set_xlabel(_t(f"Scheduled {words.service}"))
        png = _png(fig, "Source: observed records (departures.parquet). One run. Model estimates, not counts.")
    return FigureBlock(
        "run-departures", f"{words.missed.capitalize()} by {words.service}",
        f"Source: observed records (departures.parquet): per scheduled {words.service}, the vehicles a day booked on "
        f"it (the first {words.service} whose cut-off they could make as planned), those that left on it, and (below, "
        f"on its own scale) those booked on it that left on a later one or not at all, mean over {window}. One run, "
        "no interval.",
        png, f"Bars of vehicles booked, left and missed per {words.service}",
    )
