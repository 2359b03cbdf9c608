"""Windows of days: checking them, selecting rows, splitting, and running an estimator over many."""

from __future__ import annotations

from collections.abc import Callable, Iterable, Mapping

import pandas as pd

from ..errors import InputError
from .inputs import Observed, identified, read_tables
from .results import EstimateResult, EstimatorCannotRun

Window = tuple[int, int] | None
"""Days ``(start, end)``, both inclusive; ``None`` for every day in the records."""


def check_window(window: Window, estimator: str) -> Window:
    """The window as a tuple of two ints with start <= end, or None."""
    if window is None:
        return None
    try:
        start, end = (int(day) for day in window)
    except (TypeError, ValueError) as exc:
        raise EstimatorCannotRun(estimator, f"a window is two whole days (start, end), got {window!r}") from exc
    if start > end:
        raise EstimatorCannotRun(estimator, f"window start {start} is after its end {end}")
    return start, end


def window_text(window: Window) -> str:
    """The window as readable text."""
    return "all days" if window is None else f"days {window[0]}-{window[1]}"


def in_window(frame: pd.DataFrame, window: Window) -> pd.DataFrame:
    """Rows of a table with a ``day`` column that fall in the window."""
    if window is None:
        return frame
    return frame[(frame["day"] >= window[0]) & (frame["day"] <= window[1])]


def span_of(tables: Mapping[str, pd.DataFrame], estimator: str) -> tuple[int, int]:
    """First and last day that appear in the checks or encounters tables given."""
    days = [tables[name]["day"] for name in ("checks", "encounters") if name in tables and len(tables[name])]
    if not days:
        raise EstimatorCannotRun(estimator, "the records hold no day with checks or encounters")
    all_days = pd.concat(days)
    return int(all_days.min()), int(all_days.max())


def split_window(window: tuple[int, int], estimator: str) -> tuple[tuple[int, int], tuple[int, int]]:
    """First and second half of a window; the first half takes the middle day when the count is odd."""
    start, end = window
    if start == end:
        raise EstimatorCannotRun(estimator, f"the window (day {start}) is one day and cannot be split in two")
    middle = start + (end - start) // 2
    return (start, middle), (middle + 1, end)


def rolling_windows(span: tuple[int, int], length: int, step: int | None = None) -> list[tuple[int, int]]:
    """Windows of ``length`` days every ``step`` days (default: back to back) that fit in ``span``."""
    if length < 1 or (step is not None and step < 1):
        raise InputError("window length and step must be at least 1 day")
    step = length if step is None else step
    return [(start, start + length - 1) for start in range(span[0], span[1] - length + 2, step)]


def by_window(
    estimator: Callable[..., EstimateResult],
    observed: Observed,
    windows: Iterable[Window],
    **kwargs: object,
) -> tuple[pd.DataFrame, list[tuple[Window, str]]]:
    """Run one estimator on each window: a DataFrame of results, and (window, reason) for those that cannot run."""
    tables = read_tables(observed)
    frames, failures = [], []
    for window in windows:
        try:
            frames.append(estimator(tables, window, **kwargs).to_frame())
        except EstimatorCannotRun as exc:
            failures.append((window, exc.reason))
    frame = pd.concat(frames, ignore_index=True) if frames else pd.DataFrame()
    return frame, failures


def identified_in_window(encounters: pd.DataFrame, window: Window, estimator: str) -> tuple[pd.DataFrame, pd.DataFrame]:
    """The encounters in ``window`` and those of them that are identified; EstimatorCannotRun if either is empty."""
    encounters = in_window(encounters, window)
    if encounters.empty:
        raise EstimatorCannotRun(estimator, f"no encounters in the window ({window_text(window)})")
    known = identified(encounters)
    if known.empty:
        raise EstimatorCannotRun(estimator, f"no identified persons in the window ({window_text(window)})")
    return encounters, known
