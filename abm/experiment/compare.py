"""Per-design-point comparison of a batch: means, intervals, paired differences against the baseline.

Common random numbers give replication ``r`` of every design point the same
seed, so the difference between two points is best judged replication by
replication: the paired interval is a t-interval on the per-replication
differences, which is much narrower than comparing the two means as if they
were independent (Welch) whenever the runs share their randomness.
"""

from __future__ import annotations

import json
import math
from collections.abc import Mapping, Sequence
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd
from scipy import special  # Student-t quantiles without scipy.stats, whose import costs each worker about 0.45 s

from ..world.words import GENERIC, Words
from .single import SUMMARY_LABELS, SUMMARY_SOURCES

COMPARED_FIGURES = ("detections", "interdictions", "crossings", "displaced_out", "time_in_port_p95_min",
                    "missed_departure_share")
CONFIDENCE = 0.95
MIN_REPLICATIONS = 5  # below this, intervals over replications are shown with a warning (common practice, no source)
DETERMINISTIC = frozenset({"staff_hours"})  # set by the roster, the same in every replication
# Figures that cannot be negative (counts, times, rates) and shares bounded by 0 and 1; every summary figure is one.
NON_NEGATIVE = frozenset({*SUMMARY_SOURCES, "crossings_after_checks", "truth_past_checks", "est_crossings",
                          "on_time_per_day"})
INTERVAL_WORDS = {
    "log": "t-interval on the log scale (counts and times stay above zero)",
    "logit": "t-interval on the logit scale (shares stay between 0 and 1)",
    "t": "Student t-interval",
}


def figure_scale(figure: str) -> str:
    """The scale a figure's mean gets its interval on: logit for shares, log for other non-negative figures, else t."""
    if figure.endswith("_share"):
        return "logit"
    return "log" if figure in NON_NEGATIVE else "t"


def bounded_mean_interval(
    values: Sequence[float] | np.ndarray, scale: str = "t", confidence: float = CONFIDENCE
) -> tuple[float, float, float]:
    """Mean and an interval of the mean that stays within what the quantity can take.

    ``scale`` "log": the log-normal interval used for abundance estimates (Burnham
    et al. 1987, fish survival experiments; Chao 1987 uses the same form; from
    memory), mean / C to mean x C with C = exp(t sqrt(ln(1 + cv^2))), cv = SE / mean; "logit": the
    delta-method interval on the logit scale, expit(logit m +- t SE / (m (1 - m)));
    "t": the plain Student t-interval. A mean on the bound (all zeros, all ones)
    or with no spread gets the mean as both ends; fewer than two values, NaN ends.
    """
    if scale == "t":
        return mean_interval(values, confidence)
    x = np.asarray(values, dtype=float)
    x = x[np.isfinite(x)]
    if x.size < 2:
        return (float(x.mean()) if x.size else math.nan), math.nan, math.nan
    mean, se = float(x.mean()), float(x.std(ddof=1)) / math.sqrt(x.size)
    t = float(special.stdtrit(x.size - 1, 0.5 + confidence / 2))
    if se == 0 or mean <= 0 or (scale == "logit" and mean >= 1):
        return mean, mean, mean
    if scale == "log":
        c = math.exp(t * math.sqrt(math.log1p((se / mean) ** 2)))
        return mean, mean / c, mean * c
    centre, spread = math.log(mean / (1 - mean)), t * se / (mean * (1 - mean))
    return mean, float(special.expit(centre - spread)), float(special.expit(centre + spread))


def t_half_width(values: np.ndarray, confidence: float = CONFIDENCE) -> float:
    """Half the width of the Student-t interval of a mean over ``values`` (two or more): t(n − 1) · sd / sqrt(n)."""
    n = values.size
    return float(special.stdtrit(n - 1, 0.5 + confidence / 2)) * float(values.std(ddof=1)) / math.sqrt(n)


def mean_interval(
    values: Sequence[float] | np.ndarray, confidence: float = CONFIDENCE, *, finite_only: bool = True
) -> tuple[float, float, float]:
    """Mean and Student-t interval of the mean (n − 1 df); the bounds are NaN with fewer than two values.

    ``finite_only`` leaves NaN and infinite values out first (figures a run
    could not give); with False they stay in and carry into the mean and the
    bounds, so a NaN among the values gives NaN rather than the mean of the rest.
    """
    x = np.asarray(values, dtype=float)
    if finite_only:
        x = x[np.isfinite(x)]
    if x.size == 0:
        return math.nan, math.nan, math.nan
    mean = float(x.mean())
    if x.size < 2:
        return mean, math.nan, math.nan
    half = t_half_width(x, confidence)
    return mean, mean - half, mean + half


def wilson_interval(successes: int, n: int, confidence: float = 0.95) -> tuple[float, float]:
    """Wilson (1927) score interval for a binomial proportion (no continuity correction).

    centre = (x + z²/2) / (n + z²), half-width = z / (n + z²) · sqrt(x(n − x)/n + z²/4).
    """
    if n <= 0:
        return math.nan, math.nan
    z = float(special.ndtri(0.5 + confidence / 2))
    centre = (successes + z * z / 2) / (n + z * z)
    half = z / (n + z * z) * math.sqrt(successes * (n - successes) / n + z * z / 4)
    low = 0.0 if successes == 0 else max(0.0, centre - half)  # exact ends: rounding leaves ~1e-17 there
    high = 1.0 if successes == n else min(1.0, centre + half)
    return low, high


def paired_difference(
    a: pd.Series, b: pd.Series, confidence: float = CONFIDENCE
) -> tuple[float, float, float, int]:
    """Mean of ``a - b`` over the replications both have (series indexed by replication), its interval, pairs."""
    joined = pd.concat({"a": a.astype(float), "b": b.astype(float)}, axis=1, join="inner").dropna()
    mean, low, high = mean_interval((joined["a"] - joined["b"]).to_numpy(), confidence)
    return mean, low, high, len(joined)


def unpaired_difference(
    a: Sequence[float] | np.ndarray, b: Sequence[float] | np.ndarray, confidence: float = CONFIDENCE
) -> tuple[float, float, float]:
    """Difference of means with a Welch interval, as if the two samples were independent."""
    x, y = np.asarray(a, dtype=float), np.asarray(b, dtype=float)
    x, y = x[np.isfinite(x)], y[np.isfinite(y)]
    if x.size < 2 or y.size < 2:
        return float(x.mean() - y.mean()) if x.size and y.size else math.nan, math.nan, math.nan
    vx, vy = x.var(ddof=1) / x.size, y.var(ddof=1) / y.size
    diff = float(x.mean() - y.mean())
    if vx + vy == 0:
        return diff, diff, diff
    dof = (vx + vy) ** 2 / (vx**2 / (x.size - 1) + vy**2 / (y.size - 1))
    half = float(special.stdtrit(dof, 0.5 + confidence / 2) * math.sqrt(vx + vy))
    return diff, diff - half, diff + half


def compare_points(
    summary: pd.DataFrame,
    factors: Sequence[str],
    compare_to: Mapping[int, int | None],
    figures: Sequence[str] = COMPARED_FIGURES,
    confidence: float = CONFIDENCE,
) -> pd.DataFrame:
    """One row per design point and figure: mean and interval over replications, paired difference vs baseline.

    ``compare_to`` maps a point to the point it is compared with (None: it is a
    baseline, or the design has none). Points with no completed run are absent, and so is a figure no run has
    (missed departures at a land border): it is left out rather than shown as n/a everywhere.
    """
    figures = [f for f in figures if f in summary and summary[f].notna().any()]
    rows: list[dict[str, Any]] = []
    by_point = {int(point): group.set_index("replication") for point, group in summary.groupby("point", sort=True)}
    for point, group in by_point.items():
        base = compare_to.get(point)
        reference = by_point.get(base) if base is not None else None
        for figure in figures:
            values = group[figure].to_numpy(dtype=float)
            mean, low, high = bounded_mean_interval(values, figure_scale(figure), confidence)
            few = np.isfinite(values).sum() < MIN_REPLICATIONS and figure not in DETERMINISTIC
            if few and low == high:  # no spread over a few replications says nothing about the next one
                low = high = math.nan
            row: dict[str, Any] = {"point": point}
            row.update({f: group[f].iloc[0] for f in factors})
            row.update(
                {
                    "figure": figure,
                    "source": SUMMARY_SOURCES.get(figure, ""),
                    "runs": int(group[figure].notna().sum()),
                    "mean": mean,
                    "low": low,
                    "high": high,
                    "interval": figure_scale(figure),
                    "compared_with": base,
                    "difference": math.nan,
                    "difference_low": math.nan,
                    "difference_high": math.nan,
                    "pairs": 0,
                }
            )
            if reference is not None:
                diff, dlow, dhigh, pairs = paired_difference(group[figure], reference[figure], confidence)
                if dlow == dhigh and pairs < MIN_REPLICATIONS and figure not in DETERMINISTIC:
                    dlow = dhigh = math.nan  # the same difference in every one of a few replications is not exact
                row.update({"difference": diff, "difference_low": dlow, "difference_high": dhigh, "pairs": pairs})
            rows.append(row)
    columns = [
        "point", *factors, "figure", "source", "runs", "mean", "low", "high", "interval",
        "compared_with", "difference", "difference_low", "difference_high", "pairs",
    ]  # fmt: skip
    table = pd.DataFrame(rows, columns=columns)
    table["compared_with"] = table["compared_with"].astype("Int64")
    return table


def compare_store(
    out: str | Path, figures: Sequence[str] = COMPARED_FIGURES, confidence: float = CONFIDENCE
) -> pd.DataFrame:
    """The comparison of a finished batch folder (experiment.json and summary.parquet)."""
    out = Path(out)
    record = json.loads((out / "experiment.json").read_text(encoding="utf-8"))
    summary = pd.read_parquet(out / "summary.parquet")
    factors = [f["label"] for f in record["factors"]]
    compare_to = {p["point"]: p["compare_to"] for p in record["design"]}
    return compare_points(summary, factors, compare_to, figures, confidence)


def readable(x: Any, signed: bool = False, share: bool = False, figures: int = 3, scale: float | None = None) -> str:
    """A number for a terminal: about ``figures`` significant digits, whole numbers from 100 up, an exact zero as 0.

    ``share``: a share of 1 printed as a percentage (``signed``: percentage points, a change in a share).
    ``scale``: digits as for a number this large (a difference printed to its interval's precision, so a tiny
    difference in a wide interval does not show more digits than the interval).

    >>> readable(4704.0), readable(-0.2, True), readable(0.0, True), readable(8.4), readable(0.000614, share=True)
    ('4,704', '-0.200', '0', '8.40', '0.0614%')
    """
    if x is None or not math.isfinite(float(x)):
        return "n/a"
    value = 100 * float(x) if share else float(x)
    unit = (" pp" if signed else "%") if share else ""
    if value == 0:
        return f"0{unit}"
    if scale is not None and math.isfinite(scale):
        value_scale = max(abs(value), abs(100 * scale if share else scale))
    else:
        value_scale = abs(value)
    size = abs(float(f"{value_scale:.{figures}g}"))  # rounded first, so 99.96 counts as 100
    digits = 0 if size >= 10 ** (figures - 1) else figures - 1 - math.floor(math.log10(size))
    return f"{value:{'+' if signed else ''},.{digits}f}{unit}"


def format_comparison(table: pd.DataFrame, factors: Sequence[str], confidence: float = CONFIDENCE,
                      words: Words = GENERIC) -> str:
    """The comparison as a readable text table, one block per design point, figures in display labels."""
    pct = f"{confidence:.0%}"
    label = {f: words.fill(SUMMARY_LABELS.get(f, f)) for f in table["figure"].unique()} if len(table) else {}
    width = max([len(v) for v in label.values()] + [24]) + 2
    lines = [
        f"Per design point: mean and {pct} interval over replications ({INTERVAL_WORDS['log']}; for shares a",
        f"{INTERVAL_WORDS['logit']}); difference against the compared point, paired by replication (common random",
        "numbers; Student t-interval on the per-replication differences).",
    ]
    replications = int(table["runs"].min()) if len(table) else 0
    if replications < MIN_REPLICATIONS:
        lines.append(f"warning: only {replications} replication{'s' if replications != 1 else ''} per design point: "
                     f"these intervals are unreliable; run at least {MIN_REPLICATIONS} (replications: in the "
                     "experiment file)")
    baselines = set(table["compared_with"].dropna().astype(int))
    for point, block in table.groupby("point", sort=True):
        first = block.iloc[0]
        shown = "  ".join(f"{f}={first[f]}" for f in factors) or "(no factors)"
        base = first["compared_with"]
        role = "baseline; " if point in baselines else (f"vs p{int(base):03d}; " if not pd.isna(base) else "")
        lines.append("")
        lines.append(f"p{int(point):03d}  {shown}  ({role}{int(block['runs'].max())} runs)")
        header = f"  {'figure':<{width}}{'mean':>11}  {pct + ' interval':<24}"
        if not pd.isna(base):
            header += f"{'difference':>13}  {pct + ' interval'}"
        lines.append(header.rstrip())
        for _, row in block.iterrows():
            share = str(row["figure"]).endswith("_share")  # printed as a percentage, its changes in points

            def shown(key: str, signed: bool = False, scale: float | None = None) -> str:
                return readable(row[key], signed, share, scale=scale)

            interval = f"[{shown('low')}, {shown('high')}]"
            text = f"  {label[row['figure']]:<{width}}{shown('mean'):>11}  {interval:<24}"
            if not pd.isna(row["compared_with"]):
                dint = f"[{shown('difference_low', True)}, {shown('difference_high', True)}]"
                width_of = max(abs(float(row["difference_low"])), abs(float(row["difference_high"])))
                text += f"{shown('difference', True, width_of):>13}  {dint:<24}"
            lines.append(f"{text.rstrip()}  ({row['source']})" if row["source"] else text.rstrip())
    lines.append("")
    lines.append("(truth = simulated ground truth; observed = what an agency would hold. Model estimates, not counts.)")
    return "\n".join(lines)
