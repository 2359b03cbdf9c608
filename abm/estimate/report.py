"""Run every estimator on observed records (a run or an extract); print a table, write estimates.csv and .json."""

from __future__ import annotations

import json
import math
import os
from collections.abc import Callable, Mapping, Sequence
from functools import partial
from pathlib import Path
from typing import TextIO

import numpy as np
import pandas as pd

from ..atomic import write_atomically
from ..errors import InputError, refuse_unwritable
from .expansion import EXPANSION, Sensitivities, beta_for, expansion, expansion_name, selection_shares
from .frequency import (
    CHAO,
    CHAO_BC,
    ZELTERMAN,
    ZTP,
    ZTP_REGRESSION,
    chao,
    chao_bias_corrected,
    zelterman,
    ztp,
    ztp_regression,
)
from .inputs import Observed, load_tables, primary_stations, read_tables
from .removal import (
    CARLE_STRUB,
    RELATIVE,
    TWO_PASS,
    ZIPPIN,
    removal_carle_strub,
    removal_relative_sensitivity,
    removal_two_pass,
    removal_zippin,
)
from .results import DEFAULT_LEVEL, FRAME_COLUMNS, EstimateResult, EstimatorCannotRun, z_value
from .twosample import CHAPMAN, chapman
from .windows import Window, check_window, in_window

CSV_NAME, JSON_NAME = "estimates.csv", "estimates.json"


def relative_sensitivities(
    observed: Observed, window: Window, sensitivities: Sensitivities | None
) -> dict[str, float]:
    """Relative catchability per primary station: overall selection share × mean assumed sensitivity."""
    tables = load_tables(
        observed,
        {"stations": ["station", "position", "role", "method"], "checks": ["day", "station", "vehicles", "checks"]},
        RELATIVE,
    )
    stations = tables["stations"].set_index("station")
    checks = in_window(tables["checks"], window).assign(all="all")
    out = {}
    for station in primary_stations(tables["stations"], RELATIVE):
        a, b = beta_for(station, str(stations.loc[station, "method"]), sensitivities, RELATIVE)
        share = float(selection_shares(checks, station, ["all"], RELATIVE).iloc[0])
        out[station] = share * a / (a + b)
    return out


def run_all(
    observed: Observed,
    window: Window = None,
    level: float = DEFAULT_LEVEL,
    sensitivities: Sensitivities | None = None,
    *,
    rng: np.random.Generator | None = None,
    isolate: bool = False,
) -> tuple[list[EstimateResult], list[tuple[str, str]]]:
    """Every estimator that can run, and (name, reason) for each that cannot.

    With ``isolate`` an estimator that fails in an unforeseen way (any other
    error) is listed among those that cannot run, so it spoils no other.

    Without ``sensitivities`` (Beta(a, b) per station or check method) the
    expansion and the relative-sensitivity removal cannot run. The relative
    sensitivity of a station for removal is its selection share in the
    window times the mean of its Beta. ``rng`` adds bootstrap intervals to the
    expansions.
    """
    tables = read_tables(observed)
    window = check_window(window, "estimation")
    z_value(level, "estimation")

    def relative() -> EstimateResult:
        weights = relative_sensitivities(tables, window, sensitivities)
        return removal_relative_sensitivity(tables, window, level, sensitivities=weights)

    standard = (
        (CHAO, chao),
        (CHAO_BC, chao_bias_corrected),
        (ZELTERMAN, zelterman),
        (ZTP, ztp),
        (ZTP_REGRESSION, ztp_regression),
        (CHAPMAN, chapman),
        (TWO_PASS, removal_two_pass),
        (CARLE_STRUB, removal_carle_strub),
        (ZIPPIN, removal_zippin),
    )
    jobs: list[tuple[str, Callable[[], EstimateResult]]] = [
        (name, partial(fn, tables, window, level)) for name, fn in standard
    ]
    jobs.append((RELATIVE, relative))
    results: list[EstimateResult] = []
    failures: list[tuple[str, str]] = []
    try:
        needs = {"stations": ["station", "position", "role"]}
        stations = primary_stations(load_tables(tables, needs, EXPANSION)["stations"], EXPANSION)
    except EstimatorCannotRun as exc:
        failures.append((EXPANSION, exc.reason))
        stations = []
    except Exception as exc:
        if not isolate:
            raise
        failures.append((EXPANSION, f"{type(exc).__name__}: {exc}"))
        stations = []
    jobs += [
        (
            expansion_name(station),
            partial(expansion, tables, window, level, sensitivities=sensitivities, station=station, rng=rng),
        )
        for station in stations
    ]
    for name, job in jobs:
        try:
            results.append(job())
        except EstimatorCannotRun as exc:
            failures.append((name, exc.reason))
        except Exception as exc:
            if not isolate:
                raise
            failures.append((name, f"{type(exc).__name__}: {exc}"))
    return results, failures


def results_frame(results: Sequence[EstimateResult]) -> pd.DataFrame:
    """One row per result, with the columns of :meth:`EstimateResult.to_frame`."""
    if not results:
        return pd.DataFrame(columns=list(FRAME_COLUMNS))
    return pd.concat([r.to_frame() for r in results], ignore_index=True)


def format_table(results: Sequence[EstimateResult], failures: Sequence[tuple[str, str]], level: float) -> str:
    """The printed report: a table of estimates, then the estimators that cannot run and why."""
    pct = f"{100 * level:g}%"
    header = ("method", "target", "estimate", "SE", f"{pct} interval", "observed")
    rows = [
        (r.method, r.target, f"{r.estimate:.1f}", f"{r.se:.1f}", f"{r.ci_low:.1f} to {r.ci_high:.1f}", str(r.observed))
        for r in results
    ]
    lines = []
    if rows:
        widths = [max(len(row[i]) for row in [header, *rows]) for i in range(len(header))]
        right = {2, 3, 4, 5}  # numbers align right

        def line(cells: Sequence[str]) -> str:
            return "  ".join(c.rjust(w) if i in right else c.ljust(w) for i, (c, w) in enumerate(zip(cells, widths)))

        lines += [line(header), line(["-" * w for w in widths]), *(line(row) for row in rows)]
    else:
        lines.append("no estimator could run on these records")
    flagged = [(r.method, w) for r in results for w in r.warnings]
    if flagged:
        lines += ["", *(f"warning: {method}: {text}" for method, text in flagged)]
    if failures:
        lines += ["", "cannot run:"]
        lines += [f"  {name}: {reason}" for name, reason in failures]
    return "\n".join(lines)


def explain(results: Sequence[EstimateResult]) -> str:
    """Which question each group of estimators answers, which ones disagree and why, and what none can see."""
    lines = ["What these estimates answer:"]
    by_target: dict[str, list[EstimateResult]] = {}
    for result in results:
        by_target.setdefault(result.target, []).append(result)
    for target, group in by_target.items():
        names = ", ".join(r.method for r in group)
        lines.append(f"  how many {target}: {names}")
        low, high = max(group, key=lambda r: r.ci_low), min(group, key=lambda r: r.ci_high)
        if low.ci_low > high.ci_high:
            lines.append(f"    they disagree: {low.method} ({low.ci_low:.0f} to {low.ci_high:.0f}) and {high.method} "
                         f"({high.ci_low:.0f} to {high.ci_high:.0f}) do not overlap, so at least one's assumptions fail "
                         f"here: {low.method} assumes {_first(low)}; {high.method} assumes {_first(high)}")
    lines += [
        "  Every estimator assumes people are equally easy to find at each encounter or station; people who adapt,",
        "  hide deeper or travel in loads that hide them are found less, so these figures tend to undercount.",
        "  No record can see people who board after the last check: every figure here counts at most those who met",
        "  a check or an encounter. For everyone who tries, calibrate the model to these records (undertow calibrate).",
    ]
    return "\n".join(lines)


def _first(result: EstimateResult) -> str:
    """The first of an estimator's assumptions, as a clause."""
    text = result.assumptions[0] if result.assumptions else "what its source states"
    return text[:1].lower() + text[1:].rstrip(".")


def output_names(window: tuple[int, int] | None) -> tuple[str, str]:
    """File names for one window's estimates, so estimates of different windows never replace each other."""
    if window is None:
        return CSV_NAME, JSON_NAME
    stem = f"estimates_days_{window[0]}-{window[1]}"
    return f"{stem}.csv", f"{stem}.json"


def write_estimates(
    run_dir: str | os.PathLike[str],
    results: Sequence[EstimateResult],
    failures: Sequence[tuple[str, str]],
    *,
    window: Window,
    level: float,
) -> tuple[Path, Path]:
    """Write ``estimates.csv`` (one row per result) and ``estimates.json`` (results and failures) atomically."""
    base = Path(run_dir)
    csv_name, json_name = output_names(window)
    csv_path, json_path = base / csv_name, base / json_name
    table = results_frame(results).to_csv(index=False)
    write_atomically(csv_path, lambda tmp: tmp.write_text(table, encoding="utf-8", newline=""))
    document = {
        "window": None if window is None else list(window),
        "level": level,
        "estimates": [r.to_dict() for r in results],
        "cannot_run": [{"method": name, "reason": reason} for name, reason in failures],
    }
    # allow_nan=False: a NaN reaching the file is a fault, not a value
    text = json.dumps(document, indent=2, allow_nan=False) + "\n"
    write_atomically(json_path, lambda tmp: tmp.write_text(text, encoding="utf-8", newline=""))
    return csv_path, json_path


def parse_window(text: str) -> tuple[int, int]:
    """``START:END`` (days, inclusive) as a pair of ints."""
    try:
        start, end = (int(part) for part in text.split(":"))
    except ValueError:
        raise InputError(f"--window must be START:END in whole days, got '{text}'") from None
    if start > end:
        raise InputError(f"--window start {start} is after its end {end}")
    return start, end


def parse_sensitivity(text: str) -> tuple[str, tuple[float, float]]:
    """``NAME=A,B`` (station or check method, Beta parameters) as (name, (a, b))."""
    name, _, values = text.partition("=")
    try:
        a, b = (float(v) for v in values.split(","))
    except ValueError:
        raise InputError(f"--sensitivity must be NAME=A,B (a Beta(a, b) per station or method), got '{text}'") from None
    if not name or not (0 < a < math.inf and 0 < b < math.inf):
        raise InputError(f"--sensitivity needs a name and finite a, b > 0, got '{text}'")
    return name, (a, b)


def estimate_command(
    records: str,
    window: str | None = None,
    level: float = DEFAULT_LEVEL,
    sensitivity: Sequence[str] = (),
    seed: int | None = None,
    out: TextIO | None = None,
    out_dir: str | None = None,
) -> None:
    """What ``undertow estimate`` does: run every estimator, print the table, write the two files.

    ``records`` is a run directory or a folder of observed tables; the files go to ``out_dir``
    (created if missing; default ``records``). The records are read and checked before anything is written.
    """
    if not 0.0 < level < 1.0:
        raise InputError(f"--level must lie strictly between 0 and 1, got {level}")
    span = parse_window(window) if window is not None else None
    sensitivities = dict(parse_sensitivity(text) for text in sensitivity)
    tables = read_tables(records)
    _check_against_records(tables, span, sensitivities)
    rng = np.random.default_rng(seed) if seed is not None else None
    results, failures = run_all(tables, span, level, sensitivities or None, rng=rng)
    target = Path(records if out_dir is None else out_dir)
    refuse_unwritable(target)
    if target.exists() and not target.is_dir():
        raise InputError(f"--out {target} exists and is not a folder")
    target.mkdir(parents=True, exist_ok=True)
    csv_path, json_path = write_estimates(target, results, failures, window=span, level=level)
    print(format_table(results, failures, level), file=out)
    print(f"\n{explain(results)}", file=out)
    print(f"\nwrote {csv_path} and {json_path}", file=out)


def _check_against_records(
    tables: Mapping[str, pd.DataFrame], window: tuple[int, int] | None, sensitivities: Mapping[str, tuple[float, float]]
) -> None:
    """Options that name what the records do not hold are refused before anything runs."""
    stations = tables["stations"]
    known = sorted(set(stations["station"]) | set(stations["method"]) | set(tables["checks"]["method"]))
    for name in sensitivities:
        if name not in known:
            raise InputError(f"--sensitivity {name}: no station or check method of that name in the records "
                             f"(they hold {', '.join(known)})")
    if window is not None:
        days = pd.concat([tables["checks"]["day"], tables["encounters"]["day"]])
        if days.empty:
            return
        first, last = int(days.min()), int(days.max())
        if window[1] < first or window[0] > last or window[0] < 0:
            raise InputError(f"--window {window[0]}:{window[1]}: the records hold days {first} to {last}")
        if window[1] > last:
            raise InputError(f"--window {window[0]}:{window[1]} ends after the records' last day, {last}; "
                             f"use --window {window[0]}:{last}")
