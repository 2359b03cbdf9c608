"""Expansion by selection share and assumed sensitivity: a hand-worked case, units, strata and the bootstrap."""

import numpy as np
import pytest

from abm.estimate import EstimatorCannotRun, expansion

from .synthetic import checks_table, encounter_rows, observed, stations_table

# At 'gate': box 20 of 100 vehicles checked (share 0.2), curtain 25 of 50 (0.5).
CHECKS = [
    {"station": "gate", "vehicle_class": "box", "vehicles": 60, "checks": 12},
    {"station": "gate", "vehicle_class": "box", "vehicles": 40, "checks": 8, "day": 2},
    {"station": "gate", "vehicle_class": "curtain", "vehicles": 50, "checks": 25},
    {"station": "yard", "vehicle_class": "box", "vehicles": 100, "checks": 100},
]
# Detected at 'gate': a group of two and a single in boxes, a single in a curtain-sider; one at 'yard'.
DETECTIONS = [
    {"encounter_id": 1, "vehicle_class": "box"},
    {"encounter_id": 1, "vehicle_class": "box"},
    {"encounter_id": 2, "vehicle_class": "box"},
    {"encounter_id": 3, "vehicle_class": "curtain"},
    {"encounter_id": 4, "vehicle_class": "box", "place": "yard"},
]
SENSITIVITY = {"method_gate": (8.0, 2.0), "yard": (9.0, 1.0)}  # Beta(8, 2): mean 0.8


def records(checks=CHECKS, detections=DETECTIONS):
    frame = encounter_rows(detections)
    frame["encounter_id"] = [row["encounter_id"] for row in detections]
    return observed(stations=stations_table(), checks=checks_table(checks), encounters=frame)


def test_hand_worked_expansion_at_the_first_station():
    result = expansion(records(), sensitivities=SENSITIVITY)
    # Horvitz-Thompson: 3/(0.2·0.8) + 1/(0.5·0.8) = 21.25 persons reaching 'gate'
    assert result.estimate == pytest.approx(21.25)
    assert result.observed == 4
    assert result.params["in_unchecked_vehicles"] == pytest.approx(21.25 - 4 / 0.8)
    assert result.params["missed_in_checks"] == pytest.approx(4 / 0.8 - 4)
    s_var = 8 * 2 / (10**2 * 11)
    variance = 0.84 / 0.16**2 * (2**2 + 1) + 0.6 / 0.4**2 * 1 + (21.25 / 0.8) ** 2 * s_var
    assert result.se == pytest.approx(np.sqrt(variance))
    assert result.target == "attempts reaching station 'gate'"
    assert result.ci_low >= result.observed


def test_vehicles_count_each_group_once():
    result = expansion(records(), sensitivities=SENSITIVITY, unit="vehicles")
    assert result.estimate == pytest.approx(2 / 0.16 + 1 / 0.4)
    assert result.observed == 3
    assert result.target == "vehicles with people reaching station 'gate'"


def test_station_sensitivity_takes_precedence_and_every_vehicle_checked_reduces_to_d_over_s():
    # Every vehicle is checked at 'yard': nothing is unchecked, so the estimate is D / s.
    result = expansion(records(), station="yard", sensitivities=SENSITIVITY)
    assert result.estimate == pytest.approx(1 / 0.9)
    assert result.params["in_unchecked_vehicles"] == pytest.approx(0.0)


def test_hour_strata_use_the_hour_of_each_detection():
    checks = [
        {"station": "gate", "hour": 10, "vehicles": 100, "checks": 10},
        {"station": "gate", "hour": 2, "vehicles": 100, "checks": 50},
    ]
    detections = [{"encounter_id": 1, "minute": 630.0}, {"encounter_id": 2, "minute": 1440.0 + 150.0}]
    by_hour = expansion(records(checks, detections), sensitivities={"gate": (1e6, 1.0)}, by_hour=True)
    assert by_hour.estimate == pytest.approx(1 / 0.1 + 1 / 0.5, rel=1e-5)  # past midnight: hour 2
    pooled = expansion(records(checks, detections), sensitivities={"gate": (1e6, 1.0)})
    assert pooled.estimate == pytest.approx(2 / 0.3, rel=1e-5)


def test_bootstrap_is_seeded_and_close_to_the_delta_interval():
    checks = [{"station": "gate", "vehicles": 5000, "checks": 1000}]
    detections = [{"encounter_id": i} for i in range(200)]
    data = records(checks, detections)
    first = expansion(data, sensitivities={"gate": (800, 200)}, rng=np.random.default_rng(7))
    again = expansion(data, sensitivities={"gate": (800, 200)}, rng=np.random.default_rng(7))
    assert first == again
    low, high = first.params["boot_low"], first.params["boot_high"]
    assert low < first.estimate < high
    assert (high - low) == pytest.approx(first.ci_high - first.ci_low, rel=0.15)


def test_no_sensitivity_for_the_station_cannot_run():
    with pytest.raises(EstimatorCannotRun, match="Expansion .* no sensitivity given for station 'checkin'"):
        expansion(records(), station="checkin", sensitivities=SENSITIVITY)
