"""The briefing's figures, drawn with matplotlib's object API on the Agg canvas (no pyplot, no GUI).

Readable in greyscale and by colour-blind readers: series take colours from
viridis (whose lightness rises monotonically, so they stay apart in grey) and
are told apart by markers and line styles as well; the heat map uses cividis
(designed to read the same under colour-vision deficiency) with every cell's
value printed in it. Every axis names its unit; every figure prints its record
set (truth or observed) and replication count in its footer, as its caption
does in the briefing.
"""

from __future__ import annotations

import io
import math
import textwrap
from collections.abc import Mapping, Sequence
from dataclasses import dataclass

import matplotlib
import numpy as np
import pandas as pd
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.figure import Figure
from matplotlib.patches import Rectangle
from matplotlib.text import Text
from matplotlib.transforms import Bbox
from matplotlib.ticker import NullFormatter

from ..experiment.compare import bounded_mean_interval
from ..world.words import GENERIC, Words
from .document import FigureBlock, number

DPI = 110
FIGURE_KEYS = frozenset({"frontier", "displacement", "daily", "estimators"})  # the FigureBlock keys drawn here
SERIES_COLOURS = [matplotlib.colormaps["viridis"](x) for x in (0.02, 0.45, 0.72, 0.88)]
MARKERS = ["o", "s", "^", "D"]
LINES = ["-", "--", ":", "-."]
STYLE = {
    "font.size": 9,
    "axes.titlesize": 9.5,
    "axes.labelsize": 9,
    "legend.fontsize": 8,
    "axes.spines.top": False,
    "axes.spines.right": False,
    "axes.grid": True,
    "grid.color": "#dddddd",
    "grid.linewidth": 0.6,
}


def _t(text: object) -> str:
    """Text for matplotlib: a '$' would start mathtext, so it is escaped."""
    return str(text).replace("$", r"\$")


FOOTER_INCHES = 0.3  # room kept at the bottom for the footer line
TITLE_CHARS = 36  # a heat-map panel title's line: about what a 3-inch panel holds at 9.5 points


def _figure(width: float, height: float) -> Figure:
    """A figure with constrained layout that keeps the bottom strip free for the footer."""
    fig = Figure(figsize=(width, height), layout="constrained")
    fig.get_layout_engine().set(rect=(0, FOOTER_INCHES / height, 1, 1 - FOOTER_INCHES / height))
    return fig


def _words(name: object) -> str:
    """A world name on an axis as words: "north_lay_by" -> "north lay by"."""
    return _t(str(name).replace("_", " "))


def _png(fig: Figure, footer: str) -> bytes:
    fig.text(0.01, 0.01, _t(footer), fontsize=7.5, color="#444444", ha="left", va="bottom")
    FigureCanvasAgg(fig)
    buffer = io.BytesIO()
    fig.savefig(buffer, format="png", dpi=DPI, bbox_inches="tight", pad_inches=0.08)  # nothing clipped at an edge
    return buffer.getvalue()


@dataclass(frozen=True)
class SeriesPoint:
    """One policy in one scenario on the frontier chart."""

    label: str
    time_in_port: tuple[float, float, float]  # mean, low, high
    detections: tuple[float, float, float]
    on_frontier: bool
    within: bool


def _err(triple: tuple[float, float, float]) -> list[list[float]]:
    mean, low, high = triple
    if not (math.isfinite(low) and math.isfinite(high)):
        return [[0.0], [0.0]]
    return [[mean - low], [high - mean]]


def _stack_labels(fig: Figure, ax, labels: Sequence) -> None:  # type: ignore[no-untyped-def]
    """Move marker labels up, one above another, until none overlaps another: policies with near means
    (a patrol policy that leaves detections and delay unchanged) would otherwise print their names on top
    of each other. A thin line joins each moved label to its marker; the axis grows to keep them inside."""
    FigureCanvasAgg(fig)
    fig.draw_without_rendering()  # lays the figure out, so the labels' extents are final
    renderer = fig.canvas.get_renderer()
    placed: list = []

    def extent(label) -> Bbox:  # type: ignore[no-untyped-def]
        return Text.get_window_extent(label, renderer)  # the text alone: an annotation's own extent has its line

    for label in sorted(labels, key=lambda a: (a.xy[1], a.xy[0])):  # lowest first, so labels stack upwards
        box = extent(label)
        for _ in range(len(labels)):  # a label never needs to pass more than every other one
            if not any(box.overlaps(other) for other in placed):
                break
            x, y = label.xyann
            label.xyann = (x, y + 1.2 * label.get_fontsize())  # one line of text and a gap
            box = extent(label)
        placed.append(box)
    if placed:
        top = max(box.y1 for box in placed)
        axes_top = ax.get_window_extent(renderer).y1
        if top > axes_top:  # room above the highest label, in data units
            low, high = ax.get_ylim()
            span = ax.get_window_extent(renderer).height
            ax.set_ylim(low, high + (top - axes_top + 4) / span * (high - low))


def frontier_figure(
    scenarios: Mapping[str, Sequence[SeriesPoint]],
    limits: Mapping[str, float],
    days: int,
    replications: int,
    words: Words = GENERIC,
) -> FigureBlock:
    """Detections against p95 time at the crossing, one marker and line style per scenario, frontier joined.

    ``limits`` maps a scenario to the p95 time at its delay limit; ``words`` are the crossing's own.
    """
    with matplotlib.rc_context(STYLE):
        fig = _figure(8, 4.8)
        ax = fig.add_subplot()
        labels = []
        for k, (scenario, points) in enumerate(scenarios.items()):
            colour, marker, line = SERIES_COLOURS[k % 4], MARKERS[k % 4], LINES[k % 4]
            for p in points:
                ax.errorbar(
                    p.time_in_port[0], p.detections[0], xerr=_err(p.time_in_port), yerr=_err(p.detections),
                    fmt=marker, color=colour, markersize=7 if p.on_frontier else 5,
                    markerfacecolor=colour if p.within else "white", capsize=2, linewidth=0.9,
                )
                labels.append(ax.annotate(
                    _t(p.label), (p.time_in_port[0], p.detections[0]), xytext=(5, 4), textcoords="offset points",
                    fontsize=7.5, color=colour if k else "#222222",
                    arrowprops={"arrowstyle": "-", "color": colour, "linewidth": 0.5, "shrinkA": 1, "shrinkB": 4,
                                "relpos": (0, 0.5)},  # from the label's left end, clear of labels below
                ))
            on = sorted((p for p in points if p.on_frontier), key=lambda p: p.time_in_port[0])
            ax.plot([p.time_in_port[0] for p in on], [p.detections[0] for p in on], linestyle=line, color=colour,
                    marker=marker, markersize=0, linewidth=1.4, label=_t(f"{scenario}: efficient frontier"))
            if scenario in limits and math.isfinite(limits[scenario]):
                ax.axvline(limits[scenario], color=colour, linestyle=line, linewidth=0.9, alpha=0.8,
                           label=_t(f"{scenario}: delay limit"))
        ax.set_xlabel(words.fill("{Time_at_site}, 95th percentile (minutes)"))
        ax.set_ylabel(f"Detections over {days} days (persons)")
        ax.set_title("Detections against delay; each marker a policy (hollow: outside the delay limits)")
        ax.legend(loc="best", frameon=True, framealpha=0.9)
        _stack_labels(fig, ax, labels)
        png = _png(fig, f"Source: observed records. Means over {replications} replications per policy, "
                        "bars 95% intervals. Model estimates, not counts.")
    return FigureBlock(
        "frontier", words.fill("Detections against {time_at_site}, with the efficient frontier"),
        f"Source: observed records (detections; 95th-percentile {words.time_at_site}). Each marker is one policy's mean "
        f"over {replications} replications with 95% intervals; the line joins the policies no other policy beats "
        "on both (the efficient frontier); the vertical line is the delay limit, and hollow markers lie outside "
        "the limits.",
        png, f"Scatter of detections against 95th-percentile {words.time_at_site} per policy, frontier joined",
    )


def heatmap_figure(
    panels: Sequence[tuple[str, pd.DataFrame, int, pd.DataFrame]],
    replications: int,
    cols: int,
    left_out: Sequence[str] = (),
) -> FigureBlock:
    """Change in attempt share (percentage points), boarding point x time band, one panel per comparison.

    ``panels``: (title, points x bands table of changes in percentage points, pairs, points x bands
    table of whether the change is beyond replication noise), row by row of ``cols`` panels (one row
    per scenario, one column per policy); ``left_out`` names comparisons not drawn.
    """
    cols = max(1, min(cols, len(panels)))
    rows = math.ceil(len(panels) / cols)
    span = max((float(np.nanmax(np.abs(t.to_numpy()))) for _, t, _, _ in panels), default=1.0) or 1.0
    cmap = matplotlib.colormaps["cividis"]
    with matplotlib.rc_context({**STYLE, "axes.grid": False}):
        fig = _figure(min(8.5, 3.0 * cols + 1.8), 2.6 * rows + 0.9)
        axes = fig.subplots(rows, cols, squeeze=False)
        image = None
        # panels of a row share their boarding points: named once, left of the row, so a second panel's names
        # and axis label do not run into the panel beside it
        shared = all(list(t.index) == list(panels[0][1].index) for _, t, _, _ in panels)
        for n, (ax, (title, table, _, beyond)) in enumerate(zip(axes.flat, panels)):
            first = n % cols == 0 or not shared
            values = table.to_numpy(dtype=float)
            image = ax.imshow(values, cmap=cmap, vmin=-span, vmax=span, aspect="auto")
            ax.set_xticks(range(table.shape[1]), [_words(c) for c in table.columns], rotation=30, ha="right")
            ax.set_yticks(range(table.shape[0]), [_words(i) for i in table.index] if first else [])
            # wrapped to the panel's width, so neighbouring titles do not run into each other
            ax.set_title(_t("\n".join(textwrap.fill(line, TITLE_CHARS) for line in title.split("\n"))))
            for (i, j), value in np.ndenumerate(values):
                shade = cmap((value + span) / (2 * span))
                light = 0.299 * shade[0] + 0.587 * shade[1] + 0.114 * shade[2] > 0.55
                real = bool(beyond.iloc[i, j])
                ax.text(j, i, number(value, "rate", signed=True) + ("*" if real else ""), ha="center", va="center",
                        fontsize=8, fontweight="bold" if real else "normal", color="black" if light else "white")
                if real:  # outlined: beyond replication noise
                    ax.add_patch(Rectangle((j - 0.5, i - 0.5), 1, 1, fill=False,
                                           edgecolor="#d62728", linewidth=1.6))
            ax.set_xlabel("Time band")
            if first:
                ax.set_ylabel("Boarding point")
        for ax in list(axes.flat)[len(panels):]:
            ax.set_visible(False)
        if image is not None:
            bar = fig.colorbar(image, ax=axes, fraction=0.05, pad=0.02)
            bar.set_label("Change in share of attempts\n(percentage points)")  # two lines: one outgrew the panel
        png = _png(fig, f"Source: truth (attempts). Mean over {replications} paired replications. "
                        "Model estimates, not counts.")
    return FigureBlock(
        "displacement", "Where attempts moved: change in attempt share against the baseline",
        "Source: truth records (every attempt's boarding point and time band, summarised days only). Each cell is "
        "the policy's share of attempting persons minus the baseline's, in percentage points, averaged over "
        f"{replications} paired replications (same seeds); cells of a panel sum to zero. Positive cells "
        "(lighter) gained attempts. Cells outlined in red and marked * differ from zero beyond replication noise "
        "(their paired 95% t-interval excludes zero); the others may be noise."
        + (f" Not drawn, for room: {'; '.join(left_out)}." if left_out else ""),
        png, "Heat maps of the change in attempt share by boarding point and time band against the baseline",
    )


@dataclass(frozen=True)
class DailyLine:
    """One policy's daily values in one scenario: rows day x replication of one column."""

    label: str
    column: str  # detections (observed) or truth_crossings (truth)
    frame: pd.DataFrame  # columns day, replication, value
    style: int  # index into the series styles
    dashed: bool


def _band(frame: pd.DataFrame, smooth: int, window: tuple[int, int]) -> pd.DataFrame:
    """Per-day mean and 95% interval (log scale: daily counts stay above zero) over replications in ``window``,
    after a trailing ``smooth``-day mean
    per run (taken over the whole run, so the window's first days average as many days as the rest)."""
    wide = frame.pivot(index="day", columns="replication", values="value").sort_index()
    if smooth > 1:
        wide = wide.rolling(smooth, min_periods=1).mean()
    wide = wide.loc[window[0] : window[1]]
    rows = [bounded_mean_interval(wide.loc[day].to_numpy(), "log") for day in wide.index]
    return pd.DataFrame(rows, index=wide.index, columns=["mean", "low", "high"])


def daily_figure(
    panels: Sequence[tuple[str, Sequence[DailyLine]]],
    day: int,
    intervention: str,
    window: tuple[int, int],
    smooth: int,
    replications: int,
    left_out: str = "",
) -> FigureBlock:
    """Daily detections (observed) and crossings (truth) around an intervention day, with replication bands.

    ``left_out`` says in a sentence which policies or scenarios are not drawn."""
    cols = min(len(panels), 2)
    rows = math.ceil(len(panels) / cols)
    with matplotlib.rc_context(STYLE):
        fig = _figure(8.5, 3.3 * rows + 1.1)
        axes = fig.subplots(rows, cols, squeeze=False, sharey=True)
        for ax, (title, lines) in zip(axes.flat, panels):
            for line in lines:
                band = _band(line.frame, smooth, window)
                colour = SERIES_COLOURS[line.style % 4]
                ax.plot(band.index, band["mean"], color=colour, linestyle="--" if line.dashed else "-",
                        marker=MARKERS[line.style % 4], markevery=max(1, len(band) // 8), markersize=4,
                        linewidth=1.3, label=_t(line.label))
                ax.fill_between(band.index, band["low"], band["high"], color=colour, alpha=0.18, linewidth=0)
            ax.axvline(day, color="#333333", linewidth=1, linestyle=":")
            ax.annotate(_t(f"day {day}: {intervention}"), (day, 1.0), xycoords=("data", "axes fraction"),
                        xytext=(3, -10), textcoords="offset points", fontsize=7.5)
            ax.set_title(_t(title))
            ax.set_xlabel("Day of the run")
            ax.set_ylabel(f"Persons a day ({smooth}-day mean)" if smooth > 1 else "Persons a day")
            ax.set_ylim(bottom=0)
        for ax in list(axes.flat)[len(panels):]:
            ax.set_visible(False)
        handles, labels = axes.flat[0].get_legend_handles_labels()
        fig.legend(handles, labels, loc="outside upper center", ncol=2, frameon=False)
        png = _png(fig, f"Source: detections observed, crossings truth. Mean over {replications} replications, "
                        "bands 95% intervals. Model estimates, not counts.")
    smoothing = f"trailing {smooth}-day means per run, then " if smooth > 1 else ""
    return FigureBlock(
        "daily", f"Detections and crossings around day {day}",
        f"Sources: detections are observed records, crossings are truth (the model's simulated ground truth). "
        f"Lines are {smoothing}the mean over {replications} replications; bands are 95% intervals over "
        f"replications. The dotted line marks the world's intervention on day {day} ({intervention}), in force "
        "under every policy." + (f" {left_out}" if left_out else ""),
        png, f"Daily detections and crossings around the intervention on day {day}",
    )


def estimator_figure(
    rows: Sequence[tuple[str, Mapping[str, np.ndarray]]],
    behaviours: Sequence[str],
    runs: int,
    left_out: str = "",
) -> FigureBlock:
    """Estimate / truth per estimator (rows) and behaviour model (markers), log scale, 1 marked."""
    height = 1.2 + 0.36 * len(rows)
    with matplotlib.rc_context(STYLE):
        fig = _figure(8, max(3.2, height))
        ax = fig.add_subplot()
        offsets = np.linspace(-0.22, 0.22, len(behaviours)) if len(behaviours) > 1 else np.zeros(1)
        rng = np.random.default_rng(0)  # fixed jitter, so the figure is the same every time
        undrawn: dict[str, int] = {}  # estimator -> runs whose ratio cannot sit on a log axis (none, zero)
        for k, behaviour in enumerate(behaviours):
            colour, marker = SERIES_COLOURS[k % 4], MARKERS[k % 4]
            labelled = False
            for i, (_, ratios) in enumerate(rows):
                values = np.asarray(ratios.get(behaviour, ()), dtype=float)
                drawable = np.isfinite(values) & (values > 0)
                if (~drawable).any():
                    undrawn[rows[i][0]] = undrawn.get(rows[i][0], 0) + int((~drawable).sum())
                values = values[drawable]
                if not values.size:
                    continue
                y = len(rows) - 1 - i + offsets[k]
                ax.scatter(values, y + rng.uniform(-0.05, 0.05, values.size), s=8, color=colour, alpha=0.35,
                           marker=marker, linewidths=0)
                mean, low, high = bounded_mean_interval(values, "log")  # ratios: drawn on a log axis
                err = [[mean - low], [high - mean]] if math.isfinite(low) and low > 0 else None
                ax.errorbar(mean, y, xerr=err, fmt=marker, color=colour, markersize=6, capsize=2,
                            label=None if labelled else _t(f"{behaviour} behaviour"))
                labelled = True
        ax.axvline(1.0, color="#333333", linewidth=1, linestyle="--")
        ax.set_xscale("log")
        shown = np.concatenate([np.asarray(r.get(b, ()), float) for _, r in rows for b in behaviours] + [[1.0]])
        shown = shown[np.isfinite(shown) & (shown > 0)]
        ticks = [2.0**k for k in range(math.floor(np.log2(shown.min())), math.ceil(np.log2(shown.max())) + 1)]
        ax.set_xticks(ticks, [f"{t:g}" for t in ticks])
        ax.xaxis.set_minor_formatter(NullFormatter())
        ax.set_yticks(range(len(rows)), [_t(label) for label, _ in reversed(rows)])
        ax.set_xlabel("Estimate / truth (ratio, log scale; 1 = exact)")
        ax.set_title("Estimate over truth: means with 95% intervals, dots single runs")
        ax.legend(loc="best", frameon=True, framealpha=0.9)
        png = _png(fig, f"Source: estimates from observed records over truth targets. {runs} runs in all. "
                        "Model estimates, not counts.")
    return FigureBlock(
        "estimators", "Estimator error by estimator and behaviour model",
        "Source: each estimate is computed from observed records only and divided by the truth quantity it "
        f"targets (model truth), over the summarised days of each of the batch's {runs} runs. Large markers are "
        "means with 95% intervals over runs, small dots single runs; the dashed line is estimate = truth. "
        "Estimators marked ≈ are compared with a truth that can only be counted approximately."
        + (" Not drawn (no estimate, or an estimate or truth of zero, which a ratio on a log scale cannot show): "
           + "; ".join(f"{name}, {n} run{'s' if n != 1 else ''}" for name, n in undrawn.items()) + "."
           if undrawn else "") + (f" {left_out}" if left_out else ""),
        png, "Dot plot of estimate over truth per estimator and behaviour model",
    )
