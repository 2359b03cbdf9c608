"""The engine's compiled shortcuts against the plain definitions they replace.

Each shortcut must give exactly (bit for bit) what the slower formulation
gives, because records are compared byte for byte across runs and executors:

- vehicle classes: NumPy's own ``Generator.choice(k, p=...)`` on the same
  stream is the reference (its algorithm: numpy/random/_generator.pyx, choice:
  normalised cumulative shares searched with ``side="right"``);
- the daily time-in-port median and p95: NumPy's own ``percentile``;
- a station's arrival order: NumPy's stable ``argsort``;
- durations drawn with in-place arithmetic: the plain expressions, bit for bit;
- a boarding pick drawn in compiled code: NumPy's ``Generator.integers`` on the same stream;
- cargo, boarding candidates, lanes on duty: the definitions in their
  docstrings, written out in numpy or as a minute-by-minute scan.
"""

from __future__ import annotations

import numba
import numpy as np
import pytest

from abm.agents.behaviour import logit_probabilities
from abm.port.boarding import fitting_vehicles, stopping_vehicles
from abm.port.checks import sample_duration
from abm.port.queues import MINUTES_PER_HOUR, arrival_order, duty_tables, earliest_fit
from abm.port.tallies import count_checks
from abm.port.traffic import _cargo_of, draw_classes
from abm.records import median_and_p95


@pytest.mark.parametrize("seed", range(20))
def test_classes_are_numpys_choice_on_the_same_stream(seed: int) -> None:
    rng = np.random.default_rng(seed)
    share = rng.random(int(rng.integers(1, 9)))
    share /= share.sum()
    reference = np.random.default_rng(1000 + seed).choice(share.size, size=5000, p=share)
    ours = draw_classes(share, np.random.default_rng(1000 + seed).random(5000))
    np.testing.assert_array_equal(ours, reference)
    assert ours.dtype == np.int64


def test_cargo_is_the_first_type_whose_cumulative_share_exceeds_the_uniform() -> None:
    rng = np.random.default_rng(7)
    cum = np.cumsum(rng.random((4, 6)), axis=1)
    cum /= cum[:, -1:]
    cum[:, 2] = cum[:, 1]  # a cargo type with no share in any class is never drawn
    u, vclass = rng.random(20_000), rng.integers(0, 4, 20_000)
    expected = np.minimum((u[:, None] >= cum[vclass]).sum(axis=1), cum.shape[1] - 1)
    got = _cargo_of(u, vclass, cum)
    np.testing.assert_array_equal(got, expected)
    assert not (got == 2).any()


def test_boarding_candidates_are_the_vehicles_that_stop_fit_and_pass_in_the_band() -> None:
    rng = np.random.default_rng(3)
    n = 3000
    stops, vclass = rng.random(n) < 0.6, rng.integers(0, 4, n)
    rows = np.sort(rng.choice(n, size=2000, replace=False))  # the vehicles passing this point
    next_arrival = np.sort(rng.random(rows.size) * 1440.0) + 1440.0  # the second day of a run
    lead = 25.0
    capacity = np.array([2, 3, 4, 5])
    aboard = rng.integers(0, 3, n)
    band_of_hour = np.repeat([0, 1, 2, 0], 6)  # night, morning, afternoon, night again
    band_now = band_of_hour[np.floor((next_arrival - lead) / 60.0).astype(np.int64) % 24]
    room = capacity[vclass[rows]] - aboard[rows]
    stopping = stopping_vehicles(rows, stops, vclass, next_arrival, lead, band_of_hour)
    np.testing.assert_array_equal(stopping[0], np.flatnonzero(stops[rows]))
    for want_class in range(4):
        for band in range(3):
            for size in (1, 3):
                expected = np.flatnonzero(stops[rows] & (vclass[rows] == want_class) & (band_now == band) & (room >= size))
                got = fitting_vehicles(*stopping, capacity, aboard, want_class, band, size)
                np.testing.assert_array_equal(got, expected)


def scan_earliest_fit(t: float, duration: float, lane: int, day_roster: np.ndarray, origin: float) -> float:
    """The definition, minute by minute: the first start >= t from which the lane is on duty for the whole check.

    Starts are tried at t and at every later hour boundary (a stretch on duty
    can only begin there); a check fits when every hour it touches has the
    lane on duty. Two days are enough: the roster repeats every day.
    """
    first_hour = max(int((t - origin) // MINUTES_PER_HOUR), 0)
    starts = [t] + [origin + h * MINUTES_PER_HOUR for h in range(first_hour + 1, first_hour + 49)]
    for begin in starts:
        if begin < t:
            continue
        h0 = int((begin - origin) // MINUTES_PER_HOUR)
        end = begin + duration
        h1 = int(np.ceil((end - origin) / MINUTES_PER_HOUR))
        touched = range(h0, max(h1, h0 + 1))
        if all(day_roster[h % 24] > lane for h in touched):
            return begin
        if all(day_roster[h % 24] > lane for h in range(h0, h0 + 24)):
            return begin  # on duty all day: any check fits, however long
    return np.inf


@pytest.mark.parametrize("seed", range(8))
def test_duty_tables_give_the_earliest_fit_of_a_minute_scan(seed: int) -> None:
    rng = np.random.default_rng(seed)
    lanes = 4
    day_roster = rng.integers(0, lanes + 1, 24)
    if seed == 0:
        day_roster[:] = lanes  # everyone on duty all day
    until_on, stays_on = duty_tables(day_roster, lanes)
    origin = 1440.0 * int(rng.integers(0, 5))
    for _ in range(300):
        t = origin + float(rng.random() * 3000.0)
        duration = float(rng.choice([0.5, 5.0, 59.0, 61.0, 150.0, 2000.0]))
        lane = int(rng.integers(0, lanes))
        assert earliest_fit(t, duration, lane, until_on, stays_on, origin) == scan_earliest_fit(
            t, duration, lane, day_roster, origin
        ), (t, duration, lane, day_roster.tolist())


def test_logit_rows_are_the_single_chooser_probabilities() -> None:
    """Choosers decided together (one row each) get exactly what each would get alone."""
    rng = np.random.default_rng(11)
    utility = rng.normal(size=(9, 60))
    valid = rng.random((9, 60)) < 0.7
    together = logit_probabilities(utility, 2.0, valid, 0.05)
    for row in range(9):
        np.testing.assert_array_equal(together[row], logit_probabilities(utility[row], 2.0, valid[row], 0.05))


@pytest.mark.parametrize("seed", range(6))
def test_daily_median_and_p95_are_numpys_percentiles(seed: int) -> None:
    rng = np.random.default_rng(seed)
    for n in (1, 2, 3, 19, 20, 21, 2999, 3000):
        minutes = rng.lognormal(4.0, 1.0, n)
        if seed % 2:
            minutes = np.round(minutes)  # ties
        assert median_and_p95(minutes) == tuple(np.percentile(minutes, [50, 95]).tolist())


def test_check_counts_are_bincounts_of_the_keys() -> None:
    rng = np.random.default_rng(5)
    n_s, n_c, n_m = 4, 5, 6
    hour, s, c, m = rng.integers(48, 80, 9000), rng.integers(0, n_s, 9000), rng.integers(0, n_c, 9000), rng.integers(0, n_m, 9000)
    key = ((hour * n_s + s) * n_c + c) * n_m + m
    checked, alarm = rng.random(9000) < 0.3, rng.random(9000) < 0.05
    present, index = np.unique(key, return_inverse=True)
    day, hour_of_day, station, vclass, method, vehicles, checks, alarms = count_checks(key, checked, alarm, n_s, n_c, n_m)
    np.testing.assert_array_equal(((day * 24 + hour_of_day) * n_s + station) * n_c * n_m + vclass * n_m + method, present)
    np.testing.assert_array_equal(vehicles, np.bincount(index))
    np.testing.assert_array_equal(checks, np.bincount(index[checked], minlength=present.size))
    np.testing.assert_array_equal(alarms, np.bincount(index[alarm], minlength=present.size))


@pytest.mark.parametrize("seed", range(10))
def test_arrival_order_is_numpys_stable_argsort(seed: int) -> None:
    rng = np.random.default_rng(seed)
    n = int(rng.integers(0, 3000))
    arrival = np.sort(np.round(rng.random(n) * 1440.0))  # rounded: many ties
    held = rng.random(n) < 0.2
    arrival[held] += np.round(rng.exponential(20.0, int(held.sum())))  # nearly sorted, as after a station
    # reversed and shuffled, they exceed the insertion sort's budget and take the merge sort
    for case in (arrival, np.sort(arrival), arrival[::-1].copy(), rng.permutation(arrival)):
        np.testing.assert_array_equal(arrival_order(case), np.argsort(case, kind="stable"))


@numba.njit
def _compiled_picks(rng: np.random.Generator, counts: np.ndarray) -> np.ndarray:
    picks = np.empty(counts.shape[0], dtype=np.int64)
    for i in range(counts.shape[0]):
        picks[i] = rng.integers(0, counts[i])
    return picks


def test_compiled_boarding_picks_are_numpys_integers_on_the_same_stream() -> None:
    counts = np.random.default_rng(0).integers(1, 5000, 2000)  # a count of 1 draws nothing in either
    python, compiled = np.random.default_rng(11), np.random.default_rng(11)
    expected = [python.integers(k) for k in counts]
    np.testing.assert_array_equal(_compiled_picks(compiled, counts), expected)
    assert compiled.random() == python.random()  # and the stream goes on where NumPy's does


@pytest.mark.parametrize("dist", ["exponential", "lognormal", "uniform"])
def test_durations_computed_in_place_are_the_plain_expressions(dist: str) -> None:
    for mean, cv, spread in [(3.0, 0.2, 0.5), (np.float64(47.3), 1.3, 0.9), (0.1, 0.01, 0.0)]:
        got = sample_duration(dist, mean, cv, spread, 5000, np.random.default_rng(3))
        rng = np.random.default_rng(3)
        if dist == "exponential":
            expected = mean * rng.standard_exponential(5000)
        elif dist == "lognormal":
            sigma2 = np.log1p(cv * cv)
            expected = np.exp(np.log(mean) - sigma2 / 2 + np.sqrt(sigma2) * rng.standard_normal(5000))
        else:
            expected = mean * (1.0 + spread * (2.0 * rng.random(5000) - 1.0))
        assert got.tobytes() == expected.tobytes()
