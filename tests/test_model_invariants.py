"""Whole-model invariants of PortModel runs: conservation, vehicles, determinism, stream independence.

Every check here is an identity that must hold exactly for any world and seed
(nothing statistical), run on the demo world and on variants of it built with
``abm.world.parse_world`` from a modified copy of its YAML data.
"""

from __future__ import annotations

import copy
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd
import pytest
import yaml

from abm.experiment.single import run_to_directory, summarise
from abm.model import PortModel
from abm.port.day import DayResult
from abm.world import parse_world
from abm.world.schema import World

ROOT = Path(__file__).resolve().parents[1]
DEMO = ROOT / "worlds" / "kestrel_quay" / "world.yaml"
DEMO_DATA: dict[str, Any] = yaml.safe_load(DEMO.read_text(encoding="utf-8"))

DEMO_DAYS = 60
BUSY_DAYS = 30


def demo_data() -> dict[str, Any]:
    """A fresh deep copy of the demo world's data, safe to modify."""
    return copy.deepcopy(DEMO_DATA)


def busy_data() -> dict[str, Any]:
    """The demo world with many more attempts, bigger groups and frequent exits after encounters.

    Static behaviour (fixed option shares, which include options whose vehicles
    are full or do not pass in the chosen band), so no-vehicle failures are
    common; groups of up to six people compete for room in vehicles, and
    give-up / move-elsewhere exits happen often. (The demo run itself uses the
    behaviour the demo world ships with.)
    """
    data = demo_data()
    adv = data["adversary"]
    adv["behaviour"] = "static"
    adv["arrivals_per_day"] = 150
    adv["attempt_chance"] = 0.9
    adv["give_up"] = 0.1
    adv["move_elsewhere"] = 0.1
    adv["return_delay_days"] = 3
    adv["identification"] = 0.8
    adv["group_size"] = {1: 0.3, 2: 0.2, 3: 0.2, 4: 0.15, 6: 0.15}
    return data


def run_capturing(world: World, days: int, seed: int) -> tuple[PortModel, list[DayResult]]:
    """Run a model and keep each day's DayResult (the engine's own output, before records)."""
    model = PortModel(world, seed=seed)
    results: list[DayResult] = []
    original = model.engine.run_day

    def run_day(day, attempts, staffing):
        result = original(day, attempts, staffing)
        results.append(result)
        return result

    model.engine.run_day = run_day  # type: ignore[method-assign]
    for _ in range(days):
        model.step()
    return model, results


@pytest.fixture(scope="module", params=["demo", "busy"])
def run(request) -> dict[str, Any]:
    """One finished run per world variant with its tables."""
    if request.param == "demo":
        world, days = parse_world(demo_data(), "demo"), DEMO_DAYS
    else:
        world, days = parse_world(busy_data(), "busy"), BUSY_DAYS
    model, results = run_capturing(world, days, seed=11)
    book = model.records
    return {
        "name": request.param,
        "world": world,
        "days": days,
        "model": model,
        "results": results,
        "truth": book.truth_tables(),
        "observed": book.observed_tables(),
        "daily": book.daily_table(),
        "summary": summarise(book, days),
    }


# ------------------------------------------------------------------ 1. conservation


def test_runs_are_not_trivial(run):
    """Guard: the invariants below are only meaningful if every kind of outcome and exit occurs."""
    attempts, exits = run["truth"]["attempts"], run["truth"]["exits"]
    assert {"interdicted", "detected", "crossed"} <= set(attempts["outcome"])
    assert {"crossed", "gave_up", "displaced_out"} <= set(exits["state"])
    assert (run["observed"]["encounters"]["person_ref"] != "").any()
    if run["name"] == "busy":
        assert attempts["persons"].sum() > 10_000
        assert (attempts["outcome"] == "no_vehicle").sum() > 500


def test_person_attempts_split_into_outcomes_per_day(run):
    attempts, daily = run["truth"]["attempts"], run["daily"]
    assert list(daily["day"]) == list(range(run["days"]))
    outcomes = ["interdicted", "detected", "crossed", "no_vehicle"]
    by_outcome = attempts.pivot_table(index="day", columns="outcome", values="persons", aggfunc="sum", fill_value=0)
    by_outcome = by_outcome.reindex(index=range(run["days"]), columns=outcomes, fill_value=0)
    total = attempts.groupby("day")["persons"].sum().reindex(range(run["days"]), fill_value=0)
    # truth attempts table: every person-attempt has exactly one of the four outcomes
    assert set(attempts["outcome"]) <= set(outcomes)
    np.testing.assert_array_equal(total.to_numpy(), by_outcome[outcomes].sum(axis=1).to_numpy())
    # daily table agrees with the truth table, column by column
    np.testing.assert_array_equal(daily["truth_attempts"], total.to_numpy())
    np.testing.assert_array_equal(daily["interdictions"], by_outcome["interdicted"].to_numpy())
    np.testing.assert_array_equal(daily["detections"], by_outcome["detected"].to_numpy())
    np.testing.assert_array_equal(daily["truth_crossings"], by_outcome["crossed"].to_numpy())
    np.testing.assert_array_equal(daily["truth_no_vehicle"], by_outcome["no_vehicle"].to_numpy())
    np.testing.assert_array_equal(
        daily["truth_attempts"],
        daily["interdictions"] + daily["detections"] + daily["truth_crossings"] + daily["truth_no_vehicle"],
    )


def test_person_attempts_split_into_outcomes_in_total(run):
    s = run["summary"]
    assert s["attempts"] == s["interdictions"] + s["detections"] + s["crossings"] + s["no_vehicle"]
    assert s["attempts"] == int(run["daily"]["truth_attempts"].sum())


def test_persons_arrived_are_in_system_or_exited_each_day(run):
    truth, daily, days = run["truth"], run["daily"], run["days"]
    arrived = truth["arrivals"].groupby("day")["persons"].sum().reindex(range(days), fill_value=0).cumsum()
    exits = truth["exits"]
    left = exits.pivot_table(index="day", columns="state", values="persons", aggfunc="sum", fill_value=0)
    left = left.reindex(index=range(days), columns=["crossed", "gave_up", "displaced_out"], fill_value=0).cumsum()
    np.testing.assert_array_equal(
        arrived.to_numpy(), daily["truth_in_system"].to_numpy() + left.sum(axis=1).to_numpy()
    )
    # and at the end, in the summary's own terms
    s = run["summary"]
    assert s["arrived"] == s["in_system_at_end"] + s["crossings"] + s["gave_up"] + s["displaced_out"]
    assert s["in_system_at_end"] == run["model"].persons_in_system()
    # persons who crossed (truth attempts) are exactly the persons who exited as crossed
    assert s["crossings"] == int(exits.loc[exits["state"] == "crossed", "persons"].sum())


def test_every_group_exits_at_most_once_with_its_own_size(run):
    truth = run["truth"]
    exits, arrivals = truth["exits"], truth["arrivals"]
    assert exits["agent_id"].is_unique
    assert arrivals["agent_id"].is_unique
    size = arrivals.set_index("agent_id")["persons"]
    assert set(exits["agent_id"]) <= set(size.index)
    np.testing.assert_array_equal(exits["persons"].to_numpy(), size.loc[exits["agent_id"]].to_numpy())
    assert set(exits["state"]) <= {"crossed", "gave_up", "displaced_out"}
    # groups still in the model are exactly those that never exited
    still = set(run["model"].concealers.get("unique_id"))
    assert still == set(size.index) - set(exits["agent_id"])


def test_exited_agents_never_attempt_again(run):
    truth = run["truth"]
    attempts, exits = truth["attempts"], truth["exits"]
    merged = attempts.merge(exits[["agent_id", "day", "state"]], on="agent_id", how="inner", suffixes=("", "_exit"))
    assert (merged["day"] <= merged["day_exit"]).all(), "an agent attempted after it left the system"
    # the exit is caused by that day's attempt: crossed after crossing, gave up / moved after an encounter
    last = merged[merged["day"] == merged["day_exit"]]
    assert len(last) == len(exits)
    crossed = last["state"] == "crossed"
    assert (last.loc[crossed, "outcome"] == "crossed").all()
    assert last.loc[~crossed, "outcome"].isin(["detected", "interdicted"]).all()
    # nobody crosses twice and every crossing ends the group's stay
    assert attempts.loc[attempts["outcome"] == "crossed", "agent_id"].is_unique


def test_attempts_follow_the_agent_timeline(run):
    truth = run["truth"]
    attempts, arrivals = truth["attempts"], truth["arrivals"]
    adversary = run["world"].adversary
    # at most one attempt per group per day, never before the group arrived
    assert not attempts.duplicated(["agent_id", "day"]).any()
    arrival_day = arrivals.set_index("agent_id")["day"]
    assert (attempts["day"].to_numpy() >= arrival_day.loc[attempts["agent_id"]].to_numpy()).all()
    # group size is fixed for the whole stay
    np.testing.assert_array_equal(
        attempts["persons"].to_numpy(), arrivals.set_index("agent_id")["persons"].loc[attempts["agent_id"]].to_numpy()
    )
    # after an encounter the group waits return_delay_days (at least one day) before trying again
    ordered = attempts.sort_values(["agent_id", "day"], kind="stable")
    nxt = ordered.groupby("agent_id")["day"].shift(-1)
    encounter = ordered["outcome"].isin(["detected", "interdicted"]) & nxt.notna()
    gap = (nxt - ordered["day"])[encounter]
    assert (gap >= max(1, adversary.return_delay_days)).all()
    assert attempts["attempt_id"].is_unique
    assert list(attempts["attempt_id"]) == list(range(len(attempts)))


@pytest.mark.parametrize("kind,outcome", [("detection", "detected"), ("interdiction", "interdicted")])
def test_every_truth_encounter_has_a_matching_observed_encounter(run, kind, outcome):
    attempts = run["truth"]["attempts"]
    world = run["world"]
    encounters = run["observed"]["encounters"]
    found = attempts[attempts["outcome"] == outcome].set_index("attempt_id")
    seen = encounters[encounters["kind"] == kind]
    persons = seen.groupby("encounter_id").size()
    assert set(persons.index) == set(found.index)
    np.testing.assert_array_equal(persons.loc[found.index].to_numpy(), found["persons"].to_numpy())
    # each observed row carries the place, class and method of its truth attempt
    joined = seen.merge(found, left_on="encounter_id", right_index=True, how="left", suffixes=("", "_truth"))
    assert len(joined) == len(seen)
    if kind == "detection":
        assert (joined["place_kind"] == "station").all()
        assert (joined["place"] == joined["station"]).all()
        assert (joined["method"] == joined["method_truth"]).all()
        assert (joined["vehicle_class"] == joined["vehicle_class_truth"]).all()
        assert joined["place"].isin(world.station_names).all()
    else:
        assert (joined["place_kind"] == "boarding_point").all()
        assert (joined["place"] == joined["point"]).all()
        assert (joined["method"] == "").all()
        assert (found["station"] == "").all()
    # observed minute and day are the truth minute on the calendar
    absolute = joined["day_truth"] * 1440.0 + joined["minute_truth"]
    np.testing.assert_allclose(joined["day"] * 1440.0 + joined["minute"], absolute)


def test_observed_encounters_never_exceed_truth(run):
    attempts = run["truth"]["attempts"]
    encounters = run["observed"]["encounters"]
    truth_encounters = attempts[attempts["outcome"].isin(["detected", "interdicted"])]
    assert len(encounters) <= int(truth_encounters["persons"].sum())
    assert set(encounters["encounter_id"]) <= set(truth_encounters["attempt_id"])
    for kind, outcome in (("detection", "detected"), ("interdiction", "interdicted")):
        observed = int((encounters["kind"] == kind).sum())
        assert observed <= int(attempts.loc[attempts["outcome"] == outcome, "persons"].sum())
    # nothing that happened in truth without an encounter appears in observed records
    quiet = set(attempts.loc[attempts["outcome"].isin(["crossed", "no_vehicle"]), "attempt_id"])
    assert not quiet & set(encounters["encounter_id"])


def test_person_refs_link_only_one_group(run):
    """A pseudonymous reference always points at the same group (so repeat encounters link correctly)."""
    attempts = run["truth"]["attempts"].set_index("attempt_id")
    enc = run["observed"]["encounters"]
    named = enc[enc["person_ref"] != ""]
    assert len(named) > 0
    agents = attempts.loc[named["encounter_id"], "agent_id"].to_numpy()
    per_ref = pd.Series(agents, index=named["person_ref"].to_numpy()).groupby(level=0).nunique()
    assert (per_ref == 1).all()
    # within one encounter a reference appears once
    assert not named.duplicated(["encounter_id", "person_ref"]).any()


def test_daily_checks_match_observed_checks(run):
    checks, daily = run["observed"]["checks"], run["daily"]
    assert int(checks["checks"].sum()) == int(daily["checks"].sum())
    assert int(checks["alarms"].sum()) == int(daily["alarms"].sum())
    assert len(run["observed"]["false_alarms"]) == int(daily["false_alarms"].sum())
    assert (checks["checks"] <= checks["vehicles"]).all()
    assert (checks["alarms"] <= checks["checks"]).all()
    # every vehicle passes the first station exactly once
    first = run["world"].station_names[0]
    assert int(checks.loc[checks["station"] == first, "vehicles"].sum()) == int(daily["vehicles"].sum())


# ------------------------------------------------------------------ 2. vehicles


@pytest.fixture(scope="module")
def queue_log() -> list[dict[str, np.ndarray]]:
    """Arrivals and check times of every call of the station queue over 10 demo days."""
    calls: list[dict[str, np.ndarray]] = []
    mp = pytest.MonkeyPatch()
    import abm.port.day as day_module

    original = day_module.check_station

    def recording(*args):
        done = original(*args)
        calls.append({"arrival": done.arrival, "start": done.start, "end": done.end, "checked": done.checked})
        return done

    mp.setattr(day_module, "check_station", recording)
    try:
        run_capturing(parse_world(demo_data(), "demo"), 10, seed=5)
    finally:
        mp.undo()
    return calls


def test_no_vehicle_leaves_a_station_before_it_arrives(queue_log):
    assert len(queue_log) == 10 * len(DEMO_DATA["stations"])
    total_checked = 0
    for call in queue_log:
        a, s, e, c = call["arrival"], call["start"], call["end"], call["checked"]
        assert np.isfinite(s).all() and np.isfinite(e).all()
        assert (s >= a).all(), "a check started before the vehicle arrived"
        assert (e >= s).all(), "a check ended before it started"
        assert (e[c] > s[c]).all()
        np.testing.assert_array_equal(s[~c], a[~c])  # unchecked vehicles pass straight through
        np.testing.assert_array_equal(e[~c], a[~c])
        assert (np.diff(s[c]) >= 0).all(), "checks did not start in arrival order (FIFO)"
        total_checked += int(c.sum())
    assert total_checked > 10_000


@pytest.fixture(scope="module")
def demo_days() -> tuple[World, list[DayResult], PortModel]:
    world = parse_world(demo_data(), "demo")
    model, results = run_capturing(world, 20, seed=9)
    return world, results, model


def test_time_in_port_is_finite_and_respects_the_cutoff(demo_days):
    world, results, model = demo_days
    cutoff = world.departures.cutoff_minutes
    first_travel = world.stations[0].travel_minutes
    tip = model.records.time_in_port()
    assert tip.size == sum(r.traffic.size for r in results)
    assert np.isfinite(tip).all(), "a vehicle was stranded although sailings have room for everyone"
    assert (tip >= 0).all()
    # a vehicle must reach the first station and then check in cutoff minutes before its sailing
    assert tip.min() >= cutoff + first_travel - 1e-3
    for r in results:
        assert (r.time_in_port >= cutoff + first_travel - 1e-9).all()


def test_vehicles_leave_on_sailings_within_capacity(demo_days):
    world, results, _ = demo_days
    week = world.departures.week()
    sailing_minutes = np.array(sorted({minute for _, minute, _ in week}), dtype=float)
    capacity = {minute: terms.capacity or world.departures.capacity for _, minute, terms in week}
    leave = np.concatenate([r.traffic.arrival + r.time_in_port for r in results])
    of_day = np.mod(leave, 1440.0)
    assert np.isin(of_day, sailing_minutes).all(), "a vehicle left at a time with no sailing"
    times, counts = np.unique(leave, return_counts=True)
    for t, n in zip(times, counts, strict=True):
        assert n <= capacity[int(round(t % 1440.0))], f"sailing at absolute minute {t} over capacity"
    # every vehicle leaves after it arrived, and the missed flag covers every vehicle
    assert (leave > np.concatenate([r.traffic.arrival for r in results])).all()
    assert all(r.missed.shape == r.time_in_port.shape for r in results)


def test_world_without_departures_has_no_missed_departures():
    data = demo_data()
    data["departures"] = None
    world = parse_world(data, "no departures")
    model, results = run_capturing(world, 10, seed=4)
    missed = model.records.missed()
    assert missed.size == sum(r.traffic.size for r in results) > 0
    assert not missed.any()
    summary = summarise(model.records, 10)
    # nothing missed; the summary may also say "not applicable" (None) when there are no sailings
    assert summary["missed_departure_share"] in (0.0, None)
    assert (model.records.daily_table()["missed_departure_share"] == 0.0).all()
    tip = model.records.time_in_port()
    assert np.isfinite(tip).all()
    assert tip.min() >= world.stations[0].travel_minutes - 1e-3
    # people still cross when vehicles leave on clearance
    assert summary["crossings"] > 0


# ------------------------------------------------------------------ 4. determinism


def _files(run_dir: Path) -> dict[str, bytes]:
    paths = sorted(run_dir.glob("truth/*.parquet")) + sorted(run_dir.glob("observed/*.parquet")) + [run_dir / "daily.parquet"]
    return {str(p.relative_to(run_dir)): p.read_bytes() for p in paths}


def test_same_world_and_seed_give_byte_identical_records(tmp_path):
    world = parse_world(demo_data(), "demo")
    run_to_directory(world, "hash", 15, 21, tmp_path / "first")
    run_to_directory(world, "hash", 15, 21, tmp_path / "second")
    first, second = _files(tmp_path / "first"), _files(tmp_path / "second")
    assert set(first) == {
        "truth/attempts.parquet",
        "truth/arrivals.parquet",
        "truth/exits.parquet",
        "observed/stations.parquet",
        "observed/checks.parquet",
        "observed/encounters.parquet",
        "observed/false_alarms.parquet",
        "daily.parquet",
    }
    assert first.keys() == second.keys()
    for name in first:
        assert first[name] == second[name], f"{name} differs between two runs with the same seed"
    assert (tmp_path / "first" / "summary.json").read_bytes() == (tmp_path / "second" / "summary.json").read_bytes()


def test_different_seed_gives_different_records(tmp_path):
    world = parse_world(demo_data(), "demo")
    run_to_directory(world, "hash", 15, 21, tmp_path / "a")
    run_to_directory(world, "hash", 15, 22, tmp_path / "b")
    a, b = _files(tmp_path / "a"), _files(tmp_path / "b")
    for name in ("truth/attempts.parquet", "truth/arrivals.parquet", "observed/checks.parquet", "daily.parquet"):
        assert a[name] != b[name], f"{name} is the same under two different seeds"
    ta = pd.read_parquet(tmp_path / "a" / "truth" / "attempts.parquet")
    tb = pd.read_parquet(tmp_path / "b" / "truth" / "attempts.parquet")
    assert not ta.equals(tb)


# ------------------------------------------------------------------ 5. stream independence

INDEPENDENCE_DAYS = 20


@pytest.fixture(scope="module")
def baseline() -> tuple[PortModel, list[DayResult]]:
    return run_capturing(parse_world(_independence_data(), "baseline"), INDEPENDENCE_DAYS, seed=3)


@pytest.fixture(scope="module")
def more_selection() -> tuple[PortModel, list[DayResult]]:
    """The first station checks a larger fraction (0.2 -> 0.3; still within its capacity)."""
    data = _independence_data()
    assert data["stations"][0]["selection"]["fraction"] == 0.2
    data["stations"][0]["selection"]["fraction"] = 0.3
    return run_capturing(parse_world(data, "more selection"), INDEPENDENCE_DAYS, seed=3)


@pytest.fixture(scope="module")
def more_interdiction() -> tuple[PortModel, list[DayResult]]:
    """The upstream lay-by gets far more interdiction (0.01 -> 0.3 in every band)."""
    data = _independence_data()
    assert data["boarding_points"][0]["name"] == "north_lay_by"
    data["boarding_points"][0]["interdiction"] = {"default": 0.3}
    return run_capturing(parse_world(data, "more interdiction"), INDEPENDENCE_DAYS, seed=3)


def _independence_data() -> dict[str, Any]:
    """The demo world under fixed command, so staffing cannot react to what was found.

    (A reactive command moves lanes toward detections, which legitimately changes
    the checks; the traffic and the arrivals of people must still be identical.)
    """
    data = demo_data()
    data["roster"]["command"] = "fixed"
    return data


def _assert_same_traffic(a: tuple[PortModel, list[DayResult]], b: tuple[PortModel, list[DayResult]]) -> None:
    (ma, ra), (mb, rb) = a, b
    assert len(ra) == len(rb) == INDEPENDENCE_DAYS
    for x, y in zip(ra, rb, strict=True):
        np.testing.assert_array_equal(x.traffic.arrival, y.traffic.arrival)
        np.testing.assert_array_equal(x.traffic.vehicle_class, y.traffic.vehicle_class)
        np.testing.assert_array_equal(x.traffic.stops, y.traffic.stops)
    pd.testing.assert_series_equal(ma.records.daily_table()["vehicles"], mb.records.daily_table()["vehicles"])
    pd.testing.assert_frame_equal(ma.records.truth_tables()["arrivals"], mb.records.truth_tables()["arrivals"])


def _first_station(model: PortModel, by: list[str]) -> pd.DataFrame:
    checks = model.records.observed_tables()["checks"]
    first = model.world.station_names[0]
    return checks[checks["station"] == first].groupby(by, as_index=True)[["vehicles", "checks"]].sum()


def test_selection_fraction_leaves_traffic_and_arrivals_identical(baseline, more_selection):
    _assert_same_traffic(baseline, more_selection)
    # the change did something: more checks at the first station
    base, more = _first_station(baseline[0], ["station"]), _first_station(more_selection[0], ["station"])
    assert int(more["checks"].iloc[0]) > int(base["checks"].iloc[0])
    # the same vehicles pass the first station over the run
    assert int(more["vehicles"].iloc[0]) == int(base["vehicles"].iloc[0])


def test_selection_fraction_leaves_first_station_vehicles_per_hour_identical(baseline, more_selection):
    base = _first_station(baseline[0], ["day", "hour"])["vehicles"]
    more = _first_station(more_selection[0], ["day", "hour"])["vehicles"]
    pd.testing.assert_series_equal(base, more)


def test_interdiction_leaves_traffic_and_first_station_checks_identical(baseline, more_interdiction):
    _assert_same_traffic(baseline, more_interdiction)
    keys = ["day", "hour", "vehicle_class", "method"]
    pd.testing.assert_frame_equal(_first_station(baseline[0], keys), _first_station(more_interdiction[0], keys))
    # the change did something: more interdictions
    base = baseline[0].records.daily_table()["interdictions"].sum()
    more = more_interdiction[0].records.daily_table()["interdictions"].sum()
    assert more > base
