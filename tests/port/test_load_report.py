"""The load report: offered load per station and band, departures' capacity, and the warnings that follow.

Check values: the offered load of an M/M/c station is rho = lambda E[S] / c
(Hillier & Lieberman, Introduction to Operations Research, the M/M/s model;
REFERENCES.md, Queues); the targeted rule's selection chance is a normal tail,
computed with scipy; the report's selection and referral shares are checked
against the engine's own simulated counts; a planning ceiling of 0.95 is common
practice, no source.
"""

from __future__ import annotations

import copy
import subprocess
import sys
from pathlib import Path
from typing import Any

import numpy as np
import pytest
import yaml
from scipy.stats import norm

from abm.experiment.single import simulate
from abm.port.load import OVERLOAD, load_report
from abm.world import parse_world

ROOT = Path(__file__).resolve().parents[2]
UNDERTOW = Path(sys.executable).parent / "undertow"

# A fictional two-station terminal with a secondary search and two departures (illustrative numbers).
TERMINAL: dict[str, Any] = {
    "name": "Test terminal (illustrative)",
    "time_bands": {"night": [0, 8], "day": [8, 20], "evening": [20, 24]},
    "vehicle_classes": [{"name": "lorry", "share": 0.7, "capacity": 2, "risk_weight": 1.0},
                        {"name": "van", "share": 0.3, "capacity": 1, "risk_weight": 3.0}],
    "traffic": {"vehicles_per_day": 480, "hourly_profile": [1] * 24},
    "methods": [
        {"name": "scan", "service": {"dist": "exponential", "mean": 6.0}, "detection": {"default": 0.7},
         "false_alarm": 0.1},
        {"name": "sniff", "service": {"dist": "deterministic", "mean": 4.0}, "detection": {"default": 0.6},
         "false_alarm": 0.05},
        {"name": "search", "service": {"dist": "exponential", "mean": 30.0}, "detection": {"default": 0.95}},
    ],
    "stations": [
        {"name": "gate", "method": "scan", "lanes": 3, "selection": {"rule": "fraction", "fraction": 0.5},
         "refer_to": "shed"},
        {"name": "yard", "method": "sniff", "lanes": 2,
         "selection": {"rule": "targeted", "threshold": 0.5, "noise_sd": 1.0}, "refer_to": "shed"},
        {"name": "shed", "role": "secondary", "method": "search", "lanes": 3},
    ],
    "boarding_points": [{"name": "lay_by", "before_station": "gate", "stops": {"lorry": {"share": 0.1}}}],
    "departures": {"services": [{"time": "06:00", "capacity": 300}, {"time": "18:00", "capacity": 300}],
                   "cutoff_minutes": 30, "planned_minutes": 60},
    "roster": {"teams": [{"name": "all_day", "hours": [0, 24], "lanes": {"gate": 2, "yard": 1, "shed": 3}}]},
    "adversary": {"arrivals_per_day": 0, "attempt_chance": 0.0,
                  "static": {"point_shares": {"lay_by": 1.0}, "band_shares": {"night": 1.0},
                             "class_shares": {"lorry": 1.0}}},
}


def terminal(**changes: Any) -> dict[str, Any]:
    data = copy.deepcopy(TERMINAL)
    data.update(changes)
    return data


def test_mm2_reference_world_load_is_lambda_times_mean_service_over_lanes() -> None:
    # worlds/reference/mmc: lambda = 2/h, E[S] = 20 min, c = 2 -> rho = 2 * (1/3) / 2 = 1/3 (Hillier & Lieberman).
    report = load_report(parse_world(yaml.safe_load((ROOT / "worlds/reference/mmc/world.yaml").read_text())))
    assert report.stations["load"].tolist() == pytest.approx([1 / 3])
    assert report.warnings == []


def test_terminal_loads_by_hand() -> None:
    report = load_report(parse_world(terminal()))
    rows = report.stations.set_index(["station", "band"])
    rate = 480 / 24
    # gate: half of 20 vehicles/h, 6 minutes each, 2 lanes
    assert rows.loc[("gate", "day"), "load"] == pytest.approx(rate * 0.5 * 6 / (60 * 2))
    # yard: targeted, selected when log(w) + N(0, 1) > 0.5 (normal tail from scipy)
    chance = 0.7 * norm.sf(0.5 - np.log(1.0)) + 0.3 * norm.sf(0.5 - np.log(3.0))
    assert rows.loc[("yard", "day"), "arrivals_per_hour"] == pytest.approx(rate * chance)
    # shed: false alarms of both stations (detections need people; there are none)
    referred = rate * 0.5 * 0.1 + rate * chance * 0.05
    assert rows.loc[("shed", "day"), "arrivals_per_hour"] == pytest.approx(referred)
    assert rows.loc[("shed", "day"), "load"] == pytest.approx(referred * 30 / (60 * 3))
    # departures: ready 60 min after arrival; 06:00 takes those ready 17:30-05:30, i.e. 12 h of traffic
    assert report.departures["booked"].tolist() == pytest.approx([240.0, 240.0])
    assert report.departures["window"].tolist() == ["17:30-05:30", "05:30-17:30"]
    assert report.warnings == []


def test_report_agrees_with_the_simulated_checks() -> None:
    # The engine's own counts over 6 days: checks per station against the report's arrivals x 24 h.
    world = parse_world(terminal())
    report = load_report(world)
    expected = report.stations.groupby("station")["arrivals_per_hour"].mean() * 24 * 6
    records = simulate(world, days=6, seed=5).records
    checks = records.observed_tables()["checks"]
    for station in ("gate", "yard", "shed"):
        seen = float(checks.loc[checks["station"] == station, "checks"].sum())
        # Poisson-like counts: within 4 standard deviations
        assert abs(seen - expected[station]) < 4 * np.sqrt(expected[station]), station


def test_overloaded_station_and_short_departures_are_named() -> None:
    world = terminal(roster={"teams": [{"name": "all_day", "hours": [0, 24], "lanes": {"gate": 1, "yard": 1,
                                                                                         "shed": 3}},
                                       {"name": "day_extra", "hours": [8, 20], "lanes": {"gate": 1}}]},
                     departures={"services": [{"time": "06:00", "capacity": 200}, {"time": "18:00", "capacity": 300}],
                                 "cutoff_minutes": 30, "planned_minutes": 60})
    report = load_report(parse_world(world))
    text = "\n".join(report.warnings)
    # gate with one lane at night and in the evening: 10 x 6 / 60 = 1.0 >= 0.95; with two by day 0.5
    assert "station 'gate', night (00-08 h): offered load 1.00" in text
    assert "station 'gate', evening (20-24 h)" in text
    assert "station 'gate', day" not in text
    assert "sailing 06:00: about 240 vehicles" in text and "200 places" in text
    assert "sailing 18:00" not in text
    assert report.overflow_share == pytest.approx(40 / 480)
    assert all(w.startswith("warning: ") for w in report.warnings)


def test_no_lane_on_duty_while_selecting_is_a_warning() -> None:
    world = terminal(roster={"teams": [{"name": "days", "hours": [8, 20], "lanes": {"gate": 2, "yard": 1,
                                                                                       "shed": 3}}]})
    text = "\n".join(load_report(parse_world(world)).warnings)
    assert "station 'gate', night (00-08 h): vehicles are selected but no lane is on duty" in text


def test_daily_capacity_short_of_traffic() -> None:
    world = terminal(departures={"services": [{"time": "12:00", "capacity": 400}]})
    report = load_report(parse_world(world))
    assert "warning: sailings: 2,800 places a week for about 3,360 vehicles" in "\n".join(report.warnings)


def _write(path: Path, data: Any) -> Path:
    path.write_text(yaml.safe_dump(data, sort_keys=False), encoding="utf-8")
    return path


def test_check_prints_the_report_and_run_warns_once(tmp_path: Path) -> None:
    busy = _write(tmp_path / "busy.yaml", terminal(traffic={"vehicles_per_day": 960, "hourly_profile": [1] * 24}))
    check = subprocess.run([str(UNDERTOW), "check", str(busy)], capture_output=True, text=True, check=False)
    assert check.returncode == 0, check.stderr
    assert "Load on the busiest weekday" in check.stdout
    assert "offered load" in check.stdout and "warning: station 'gate'" in check.stdout
    run = subprocess.run([str(UNDERTOW), "run", str(busy), "--days", "1", "--out", str(tmp_path / "run")],
                         capture_output=True, text=True, check=False)
    assert run.returncode == 0, run.stderr
    gate_warnings = [line for line in run.stderr.splitlines() if line.startswith("warning: station 'gate'")]
    assert len(gate_warnings) == 3  # one per band, each once
    calm = _write(tmp_path / "calm.yaml", terminal())
    check = subprocess.run([str(UNDERTOW), "check", str(calm)], capture_output=True, text=True, check=False)
    assert "warning:" not in check.stdout and f"load below {OVERLOAD}" in check.stdout


def test_batch_gives_each_warning_once_naming_the_points_it_holds_for(tmp_path: Path) -> None:
    from abm.experiment.batch import run_batch

    _write(tmp_path / "world.yaml", terminal())
    experiment = _write(tmp_path / "experiment.yaml", {
        "kind": "experiment", "name": "load test (illustrative)", "world": "world.yaml", "days": 1,
        "warmup_days": 0, "replications": 2, "seed": 3,
        "factors": [{"name": "policy", "baseline": "current", "levels": [
            {"name": "current", "set": {}},
            {"name": "one_gate_lane", "set": {"roster.teams.all_day.lanes.gate": 1}}]}],
    })
    seen: list[str] = []
    run_batch(experiment, tmp_path / "batch", "serial", on_warning=seen.append)
    assert len(seen) == 3 and len(set(seen)) == 3  # gate's three bands, each once, though two runs use that world
    assert all(w.startswith("warning: station 'gate'") and w.endswith("(design points: policy='one_gate_lane')")
               for w in seen)


def test_enormous_traffic_is_overload_not_a_missing_lane() -> None:
    world = terminal(traffic={"vehicles_per_day": 1e9, "hourly_profile": [1] * 24})  # the schema's largest
    text = "\n".join(load_report(parse_world(world)).warnings)
    assert "no lane is on duty" not in text and "station 'gate', day (08-20 h): offered load" in text
