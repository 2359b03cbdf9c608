"""Departures of any kind: generated timetables, weekdays, metres, per-departure cut-offs, delays and cancellations.

Check values are hand-made: a timetable written out by hand, small boarding
examples worked on paper, and the engine's own runs compared with and without
delays (a delay may change when vehicles leave, nothing else). The share of late
departures is checked against the binomial spread of its count (scipy).
"""

from __future__ import annotations

import copy
from typing import Any

import numpy as np
import pandas as pd
import pytest
from scipy.stats import binom

from abm.model import PortModel
from abm.port.day import DayResult
from abm.port.departures import board_departures, build_timetable
from abm.world import parse_world
from abm.world.words import words_for

from .test_load_report import terminal


def run_days(data: dict[str, Any], days: int, seed: int = 3) -> tuple[PortModel, list[DayResult]]:
    """A model of ``data`` run ``days`` days, with each day's engine output kept."""
    model = PortModel(parse_world(data), seed=seed)
    results: list[DayResult] = []
    original = model.engine.run_day

    def run_day(day, attempts, staffing):  # noqa: ANN001, ANN202 - the engine's own signature
        results.append(original(day, attempts, staffing))
        return results[-1]

    model.engine.run_day = run_day  # type: ignore[method-assign]
    for _ in range(days):
        model.step()
    return model, results


def leave_minutes(results: list[DayResult]) -> np.ndarray:
    return np.concatenate([r.traffic.arrival + r.time_in_port for r in results])


def with_departures(**departures: Any) -> dict[str, Any]:
    data = terminal()
    data["departures"] = {"cutoff_minutes": 30, "planned_minutes": 60, **departures}
    return data


def test_generated_timetable_equals_the_hand_written_list() -> None:
    generated = parse_world(with_departures(service="train", capacity=50, timetable=[
        {"first": "06:00", "last": "22:00", "headway_minutes": 240, "days": ["mon", "tue", "wed", "thu", "fri"]},
        {"first": "22:30", "last": "01:30", "headway_minutes": 90, "days": ["sat"]},  # runs past midnight
    ]))
    by_hand = {(d, m) for d in range(5) for m in (360, 600, 840, 1080, 1320)}  # 06:00 10:00 14:00 18:00 22:00
    by_hand |= {(5, 1350), (6, 90)}  # Sat 22:30, then 00:00 and 01:30 on Sunday
    by_hand |= {(6, 0)}
    assert {(w, m) for w, m, _ in generated.departures.week()} == by_hand
    listed = parse_world(with_departures(service="train", capacity=50, services=[
        {"time": f"{m // 60:02d}:{m % 60:02d}", "days": [("mon", "tue", "wed", "thu", "fri", "sat", "sun")[d]]}
        for d, m in sorted(by_hand)
    ]))
    a, b = build_timetable(generated), build_timetable(listed)
    for w in range(7):
        assert a.minute[w].tolist() == b.minute[w].tolist()


def test_weekday_services_leave_only_on_their_days_and_records_match_the_listed_form() -> None:
    pattern = with_departures(capacity=600, timetable=[{"first": "09:00", "last": "21:00", "headway_minutes": 720,
                                                        "days": ["mon", "thu"]}])
    listed = with_departures(capacity=600, services=[{"time": "09:00", "days": ["mon", "thu"]},
                                                     {"time": "21:00", "days": ["mon", "thu"]}])
    model_a, days_a = run_days(pattern, 14)
    model_b, days_b = run_days(listed, 14)
    leave = leave_minutes(days_a)
    leave = leave[np.isfinite(leave)]
    assert set((leave // 1440 % 7).astype(int)) <= {0, 3}
    assert set(np.round(leave % 1440).astype(int)) <= {540, 1260}
    np.testing.assert_array_equal(leave_minutes(days_a), leave_minutes(days_b))
    pd.testing.assert_frame_equal(model_a.records.observed_tables()["checks"],
                                  model_b.records.observed_tables()["checks"])


def test_boarding_by_metres_and_places_worked_by_hand() -> None:
    # Two departures closing at 100 and 200; 30 m and 2 places on the first. Vehicles of 20, 20, 10 m ready at 0.
    close = np.array([100.0, 200.0])
    places, metres = np.array([2.0, 5.0]), np.array([30.0, 100.0])
    chosen = board_departures(np.array([0.0, 0.0, 0.0]), np.array([20.0, 20.0, 10.0]), close, places, metres)
    assert chosen.tolist() == [0, 1, 0]  # the second 20 m lorry does not fit the 10 m left; the 10 m van does
    assert places.tolist() == [0.0, 4.0] and metres.tolist() == [0.0, 80.0]


def test_a_departure_with_a_longer_cutoff_closes_earlier_than_the_next() -> None:
    # The second departure's check-in closes (at 90) before the first's (at 100): a vehicle ready at 95 takes
    # the first; one ready at 150 makes neither, and the third departure closes at 300.
    close = np.array([100.0, 90.0, 300.0])
    chosen = board_departures(np.array([95.0, 150.0]), np.zeros(2), close, np.full(3, 9.0), np.full(3, np.inf))
    assert chosen.tolist() == [0, 2]


def test_metres_are_never_overfilled_in_a_run() -> None:
    data = with_departures(length_metres=400, services=[{"time": "06:00"}, {"time": "18:00"}])
    data["vehicle_classes"][0]["length_metres"] = 16.5
    data["vehicle_classes"][1]["length_metres"] = 7.0
    model, results = run_days(data, 10)
    length = np.concatenate([np.where(r.traffic.vehicle_class == 0, 16.5, 7.0) for r in results])
    leave = leave_minutes(results)
    frame = pd.DataFrame({"leave": leave, "length": length}).dropna()
    assert frame.groupby("leave")["length"].sum().max() <= 400 + 1e-9
    assert frame.groupby("leave")["length"].sum().max() > 380  # the departures do fill up: the limit binds


def test_delays_change_only_when_vehicles_leave_and_reproduce_with_the_seed() -> None:
    base = with_departures(capacity=600, services=[{"time": "06:00"}, {"time": "18:00"}])
    late = with_departures(capacity=600, services=[{"time": "06:00"}, {"time": "18:00"}],
                           delay={"chance": 0.3, "dist": "exponential", "mean": 40})
    model_base, days_base = run_days(base, 28)
    model_late, days_late = run_days(late, 28)
    _, days_again = run_days(late, 28)
    np.testing.assert_array_equal(leave_minutes(days_late), leave_minutes(days_again))
    for name, table in model_base.records.observed_tables().items():
        pd.testing.assert_frame_equal(table, model_late.records.observed_tables()[name], obj=name)
    assert all((a.missed == b.missed).all() for a, b in zip(days_base, days_late, strict=True))
    extra = leave_minutes(days_late) - leave_minutes(days_base)
    assert (extra >= 0).all()
    # the share of late departures among the 56 of the run (some leave nobody: count them by their vehicles)
    lateness = pd.Series(extra, index=leave_minutes(days_base)).groupby(level=0).first()
    late_count = int((lateness > 0).sum())
    low, high = binom.ppf([0.001, 0.999], lateness.size, 0.3)
    assert low <= late_count <= high


def test_a_cancelled_departure_takes_nobody_and_its_bookings_miss_it() -> None:
    data = with_departures(capacity=600, services=[{"time": "06:00", "cancellation": 1.0}, {"time": "18:00"}])
    _, results = run_days(data, 7)
    leave = leave_minutes(results)
    assert not np.isclose(leave % 1440, 360).any()
    missed = np.concatenate([r.missed for r in results])
    # booked on the first departure closing (05:30 or 17:30) at or after arrival + 60 minutes, whatever the room
    closes = (np.arange(10)[:, None] * 1440 + np.array([330.0, 1050.0])).ravel()
    planned = np.concatenate([r.traffic.arrival for r in results]) + 60
    booked_leaves = closes[np.searchsorted(closes, planned, side="left")] + 30
    np.testing.assert_array_equal(missed, leave > booked_leaves)
    assert missed[booked_leaves % 1440 == 360].mean() > 0.9  # the cancelled morning's bookings (bar early check-ins)


def test_outputs_use_the_worlds_word() -> None:
    train = parse_world(with_departures(service="train", capacity=10, services=[{"time": "12:00"}]))
    assert (words_for(train).missed, words_for(train).time_at_site) == ("missed trains", "time in the terminal")
    assert words_for(parse_world(with_departures(capacity=10, services=[{"time": "12:00"}]))).time_at_site == \
        "time in port"
    border = copy.deepcopy(terminal())
    border["departures"] = None
    assert words_for(parse_world(border)).time_at_site == "time at the border"


def test_delay_draws_do_not_disturb_other_numbers() -> None:
    # A cancellation chance of zero still draws (the world sets a delay): arrivals and checks are those of the base.
    base, _ = run_days(with_departures(capacity=600, services=[{"time": "06:00"}]), 7, seed=11)
    drawn, _ = run_days(with_departures(capacity=600, services=[{"time": "06:00"}],
                                        delay={"chance": 0.0, "dist": "exponential", "mean": 10}), 7, seed=11)
    for name, table in base.records.observed_tables().items():
        pd.testing.assert_frame_equal(table, drawn.records.observed_tables()[name], obj=name)


@pytest.mark.parametrize("bad, message", [
    ({"services": [], "timetable": []}, "at least one entry"),
    ({"timetable": [{"first": "06:00", "last": "08:00", "headway_minutes": 0.5}]}, "greater than or equal to 1"),
    ({"delay": {"chance": 0.2, "dist": "gamma", "mean": 5}}, "needs cv > 0"),
])
def test_bad_departures_are_refused(bad: dict[str, Any], message: str) -> None:
    data = with_departures(capacity=10, services=[{"time": "12:00"}])
    data["departures"].update(bad)
    with pytest.raises(Exception, match=message):
        parse_world(data)


def test_load_report_books_departures_as_the_engine_does() -> None:
    # 02:30's check-in closes at 01:00, before 02:15's (01:45), and it leaves later: no vehicle ever books it.
    from abm.port.load import load_report

    data = with_departures(capacity=400, services=[{"time": "02:15"}, {"time": "02:30", "cutoff_minutes": 90},
                                                   {"time": "08:00"}, {"time": "14:00"}, {"time": "20:00"}])
    report = load_report(parse_world(data)).departures.set_index("departure")
    assert report.loc["02:30", "booked"] == 0 and report.loc["02:30", "window"] == "none"
    model, _ = run_days(data, 21)
    simulated = model.records.departures_table()
    simulated = simulated[simulated["day"] >= 2].groupby("time")["booked"].mean()  # past the first days' filling
    assert simulated["02:30"] == 0
    for time in ("02:15", "08:00", "14:00", "20:00"):  # Poisson counts: within 4 standard errors of 19 days' mean
        expected = report.loc[time, "booked"]
        assert abs(simulated[time] - expected) < 4 * np.sqrt(expected / 19), time


def test_a_day_short_of_places_is_a_warning() -> None:
    from abm.port.load import load_report

    data = with_departures(capacity=100, timetable=[{"first": "00:00", "last": "23:59", "headway_minutes": 240}])
    data["traffic"]["weekday_factors"] = [1.0, 1.0, 1.0, 1.0, 1.4, 0.5, 0.5]  # 480 a day, 672 on Friday; 600 places
    text = "\n".join(load_report(parse_world(data)).warnings)
    assert "sailings on Fri: 600 places for about 672 vehicles" in text
    assert "sailings on Thu" not in text and "places a week" not in text
