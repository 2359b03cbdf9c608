"""Two-sample capture–recapture: Petersen and Chapman (Seber 1982) on identified persons.

On observed records the two samples are the two halves of the window: M
persons identified in the first half, n in the second, m in both. The
estimate is of distinct identifiable persons at risk across the window;
``observed`` is M + n − m, the persons identified in it.
"""

from __future__ import annotations

import dataclasses

from .inputs import Observed, load_tables
from .results import DEFAULT_LEVEL, EstimateResult, EstimatorCannotRun, make_result
from .windows import Window, check_window, identified_in_window, in_window, span_of, split_window, window_text

CHAPMAN = "Chapman (1951) two-sample estimator"
SOURCE = "Chapman (1951); variance Seber (1982), The Estimation of Animal Abundance, 2nd ed."
TARGET = "distinct identifiable persons at risk"
ASSUMPTIONS = (
    "closed population: the same persons are at risk in both halves of the window",
    "being encountered in the first half does not change the chance of an encounter in the second",
    "every person has the same chance of an encounter within each half",
    "all encounters of a person carry one person_ref; unidentified encounters are left out",
)


def chapman_from_counts(first: int, second: int, both: int, level: float = DEFAULT_LEVEL) -> EstimateResult:
    """Chapman N = (M+1)(n+1)/(m+1) − 1 with Seber's variance and a Wald interval.

    ``first`` = M marked in the first sample, ``second`` = n caught in the
    second, ``both`` = m recaptured. The Petersen estimate M·n/m is reported
    among the parameters.
    """
    counts = {"M": first, "n": second, "m": both}
    if any(int(v) != v or v < 0 for v in counts.values()):
        raise EstimatorCannotRun(CHAPMAN, f"sample counts must be non-negative whole numbers, got {counts}")
    if first == 0 or second == 0:
        raise EstimatorCannotRun(CHAPMAN, f"each sample needs at least one person (M = {first}, n = {second})")
    if both > min(first, second):
        raise EstimatorCannotRun(CHAPMAN, f"recaptures m = {both} exceed a sample (M = {first}, n = {second})")
    if both == 0:
        raise EstimatorCannotRun(CHAPMAN, "no person was encountered in both samples (m = 0)")
    estimate = (first + 1) * (second + 1) / (both + 1) - 1
    variance = (first + 1) * (second + 1) * (first - both) * (second - both) / ((both + 1) ** 2 * (both + 2))
    return make_result(
        method=CHAPMAN,
        source=SOURCE,
        target=TARGET,
        estimate=estimate,
        observed=first + second - both,
        variance=variance,
        level=level,
        interval="wald",
        assumptions=ASSUMPTIONS,
        parameters={"M": first, "n": second, "m": both, "petersen": first * second / both},
    )


def chapman(observed: Observed, window: Window = None, level: float = DEFAULT_LEVEL) -> EstimateResult:
    """Chapman on the first vs second half of the window (all days in the records when None).

    The first half takes the middle day when the window has an odd number of days.
    """
    window = check_window(window, CHAPMAN)
    tables = load_tables(observed, {"encounters": ["day", "person_ref"]}, CHAPMAN)
    encounters = tables["encounters"]
    span = window if window is not None else span_of(tables, CHAPMAN)
    _, known = identified_in_window(encounters, span, CHAPMAN)
    early, late = split_window(span, CHAPMAN)
    first = set(in_window(known, early)["person_ref"])
    second = set(in_window(known, late)["person_ref"])
    result = chapman_from_counts(len(first), len(second), len(first & second), level)
    halves = f"samples: {window_text(early)} and {window_text(late)}"
    return dataclasses.replace(result, window=window, assumptions=result.assumptions + (halves,))
