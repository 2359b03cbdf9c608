"""Alarms refer vehicles to secondary search, and the records say which station referred each find.

An agency knows which of its own stations sent a vehicle to secondary search,
so a detection there carries ``referred_by`` in the observed encounters.
"""

from __future__ import annotations

import pandas as pd
from scipy.stats import binomtest

from abm.experiment.single import simulate
from abm.world import parse_world


def referral_world() -> dict:
    """Two primary stations that only raise alarms (they find nobody) and one search that finds everyone.

    ``first`` checks half the vehicles and refers every one it checks (skipping
    ``second``); ``second`` checks and refers all the rest.
    """
    alarm = {"service": {"dist": "deterministic", "mean": 0.1}, "detection": {"default": 0.0}, "false_alarm": 1.0}
    return {
        "name": "referrals (test)",
        "time_bands": {"all_day": [0, 24]},
        "vehicle_classes": [{"name": "lorry", "share": 1.0, "capacity": 500}],
        "traffic": {"vehicles_per_day": 200, "hourly_profile": [1] * 24},
        "methods": [
            {"name": "sensor", **alarm},
            {"name": "search", "service": {"dist": "deterministic", "mean": 0.1}, "detection": {"default": 1.0}},
        ],
        "stations": [
            {"name": "first", "method": "sensor", "lanes": 5, "selection": {"rule": "fraction", "fraction": 0.5},
             "refer_to": "search_area"},
            {"name": "second", "method": "sensor", "lanes": 5, "selection": {"rule": "all"}, "refer_to": "search_area"},
            {"name": "search_area", "role": "secondary", "method": "search", "lanes": 10},
        ],  # fmt: skip
        "boarding_points": [{"name": "lay_by", "before_station": "first", "stops": {"lorry": {"share": 1.0}},
                             "interdiction": {"default": 0.1}}],
        "roster": {"teams": [{"name": "all", "hours": [0, 24], "lanes": {"first": 5, "second": 5, "search_area": 10}}]},
        "adversary": {
            "arrivals_per_day": 20,
            "attempt_chance": 1.0,
            "return_delay_days": 1,
            "behaviour": "static",
            "static": {"point_shares": {"lay_by": 1.0}, "band_shares": {"all_day": 1.0}, "class_shares": {"lorry": 1.0}},
        },
    }


def test_every_find_at_the_search_area_names_the_station_that_referred_it() -> None:
    model = simulate(parse_world(referral_world()), 30, seed=3)
    encounters = model.records.observed_tables()["encounters"]
    found = encounters[encounters["kind"] == "detection"]
    assert len(found) > 300
    assert set(found["place"]) == {"search_area"}  # the sensors find nobody themselves
    assert set(found["referred_by"]) == {"first", "second"}
    # a vehicle is checked (and referred) by the first station with chance 0.5, else by the second;
    # groups are found together, so count one per encounter (binomial test, SciPy's reference)
    per_group = found.drop_duplicates("encounter_id")
    from_first = int((per_group["referred_by"] == "first").sum())
    assert binomtest(from_first, len(per_group), 0.5).pvalue > 1e-3
    interdicted = encounters[encounters["kind"] == "interdiction"]
    assert len(interdicted) > 0 and (interdicted["referred_by"] == "").all()


def test_records_written_before_referrals_were_recorded_still_read() -> None:
    from abm.observed import conform

    old = pd.DataFrame({"encounter_id": [1], "day": [0], "minute": [5.0], "kind": ["detection"], "place": ["gate"],
                        "place_kind": ["station"], "vehicle_class": ["lorry"], "method": ["look"], "person_ref": [""]})  # fmt: skip
    assert conform("encounters", old)["referred_by"].tolist() == [""]
