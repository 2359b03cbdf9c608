"""Detection at a checked station against the binomial law.

A purpose-built world: one vehicle class holding one person, one station that
checks every vehicle (selection rule ``all``, no secondary search, no false
alarms), an upstream boarding point every attempt uses, no interdiction, and
plenty of vehicles for every attempt. Each occupied vehicle is then checked
once with its own uniform draw, so the number detected among n occupied
vehicles is Binomial(n, p) for the method's detection chance p.

Reference for the interval: ``scipy.stats.binom`` (SciPy's reference
implementation of the binomial distribution; ``binom.interval(0.999, n, p)``
is the central 99.9% interval).
"""

from __future__ import annotations

from typing import Any

import numpy as np
import pytest
from scipy.stats import binom

from abm.experiment.single import simulate, summarise
from abm.world import parse_world

DAYS = 12


def detection_world(p: float, groups_per_day: float = 300.0, upstream_share: float = 1.0) -> dict[str, Any]:
    """A world where every upstream boarder rides a vehicle that one station checks at 100%."""
    point_shares = {"upstream": upstream_share}
    if upstream_share < 1.0:
        point_shares["yard"] = 1.0 - upstream_share
    return {
        "name": f"Detection check p={p}",
        "time_bands": {"all_day": [0, 24]},
        "vehicle_classes": [{"name": "lorry", "share": 1.0, "capacity": 1}],
        "traffic": {"vehicles_per_day": 2400, "hourly_profile": [1] * 24},
        "methods": [
            {
                "name": "portal",
                "service": {"dist": "deterministic", "mean": 0.5},
                "detection": {"default": p},
                "false_alarm": 0.0,
            }
        ],
        "stations": [{"name": "gate", "method": "portal", "lanes": 2, "selection": {"rule": "all"}}],
        "boarding_points": [
            {"name": "upstream", "before_station": "gate", "lead_minutes": 30, "stops": {"lorry": {"share": 1.0}}},
            {"name": "yard", "before_station": "departure", "stops": {"lorry": {"share": 1.0}}},
        ],
        "roster": {"teams": [{"name": "always", "hours": [0, 24], "lanes": {"gate": 2}}]},
        "adversary": {
            "arrivals_per_day": groups_per_day,
            "group_size": {1: 1.0},
            "attempt_chance": 1.0,
            "return_delay_days": 1,
            "identification": 0.5,
            "static": {
                "point_shares": point_shares,
                "band_shares": {"all_day": 1.0},
                "class_shares": {"lorry": 1.0},
            },
        },
    }


def run(p: float, seed: int, **kwargs: Any) -> dict[str, Any]:
    model = simulate(parse_world(detection_world(p, **kwargs), f"p={p}"), DAYS, seed)
    book = model.records
    return {"truth": book.truth_tables(), "observed": book.observed_tables(), "summary": summarise(book, DAYS)}


def test_world_meets_the_binomial_assumptions():
    r = run(0.4, seed=1)
    s, attempts = r["summary"], r["truth"]["attempts"]
    assert s["interdictions"] == 0
    assert s["no_vehicle"] == 0  # always a free vehicle, so every attempt boards
    assert s["false_alarms"] == 0
    assert s["checks"] == s["vehicles"]  # 100% selection
    assert set(attempts["point"]) == {"upstream"}
    assert (attempts["persons"] == 1).all()
    # capacity 1 and groups of 1: each boarded attempt is a distinct occupied vehicle
    assert set(attempts["outcome"]) == {"detected", "crossed"}


@pytest.mark.parametrize("p,seed", [(0.15, 2), (0.4, 3), (0.72, 4), (0.9, 5)])
def test_detected_share_of_occupied_checked_vehicles_is_binomial(p, seed):
    r = run(p, seed)
    attempts = r["truth"]["attempts"]
    occupied = int(attempts["outcome"].isin(["detected", "crossed"]).sum())
    detected = int((attempts["outcome"] == "detected").sum())
    assert occupied > 3000
    low, high = binom.interval(0.999, occupied, p)
    assert low <= detected <= high, f"{detected} of {occupied} detected; 99.9% binomial interval [{low}, {high}]"
    # the observed record holds exactly those detections, at the station, by the portal
    enc = r["observed"]["encounters"]
    assert len(enc) == detected
    assert set(enc["kind"]) == {"detection"}
    assert set(enc["place"]) == {"gate"} and set(enc["method"]) == {"portal"}


def test_nobody_is_detected_when_detection_chance_is_zero():
    r = run(0.0, seed=6)
    s = r["summary"]
    assert s["attempts"] > 3000
    assert s["detections"] == 0
    assert len(r["observed"]["encounters"]) == 0
    assert s["alarms"] == 0
    assert s["crossings"] == s["attempts"]


def test_everybody_boarding_upstream_is_detected_when_detection_chance_is_one():
    r = run(1.0, seed=7, upstream_share=0.6)
    attempts = r["truth"]["attempts"]
    upstream = attempts[attempts["point"] == "upstream"]
    yard = attempts[attempts["point"] == "yard"]
    assert len(upstream) > 2000 and len(yard) > 1000
    assert (upstream["outcome"] == "detected").all()
    assert (upstream["station"] == "gate").all()
    # boarding after the last station means no station ever sees the person
    assert (yard["outcome"] == "crossed").all()
    enc = r["observed"]["encounters"]
    assert len(enc) == int(upstream["persons"].sum())
    assert set(enc["encounter_id"]) == set(upstream["attempt_id"])


def test_observed_detections_match_the_alarms_when_checks_are_perfect():
    """With no false alarms and no referral, every alarm is a detection of one person."""
    r = run(0.5, seed=8)
    checks = r["observed"]["checks"]
    assert int(checks["alarms"].sum()) == len(r["observed"]["encounters"]) == r["summary"]["detections"]
    assert np.all(checks["checks"] == checks["vehicles"])
