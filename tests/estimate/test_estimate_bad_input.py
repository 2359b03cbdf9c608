"""Every way the records can fail an estimator raises EstimatorCannotRun naming it, never a crash or a NaN."""

import re

import pytest

from abm.errors import InputError
from abm.estimate import (
    EstimatorCannotRun,
    chao,
    chao_bias_corrected,
    chapman,
    expansion,
    removal_carle_strub,
    removal_relative_sensitivity,
    removal_two_pass,
    removal_zippin,
    zelterman,
    ztp,
    ztp_regression,
)
from abm.estimate.expansion import expansion_name
from abm.estimate.frequency import CHAO, CHAO_BC, ZELTERMAN, ZTP, ZTP_REGRESSION
from abm.estimate.removal import CARLE_STRUB, RELATIVE, TWO_PASS, ZIPPIN
from abm.estimate.twosample import CHAPMAN

from .synthetic import checks_table, encounter_rows, encounters_from_frequencies, observed, stations_table

FREQUENCY = [
    (chao, CHAO),
    (chao_bias_corrected, CHAO_BC),
    (zelterman, ZELTERMAN),
    (ztp, ZTP),
    (ztp_regression, ZTP_REGRESSION),
]
PERSONS = [*FREQUENCY, (chapman, CHAPMAN)]
REMOVAL = [(removal_two_pass, TWO_PASS), (removal_carle_strub, CARLE_STRUB), (removal_zippin, ZIPPIN)]


def raises(estimator_name):
    """The error must start with the estimator's name."""
    return pytest.raises(EstimatorCannotRun, match=f"^{re.escape(estimator_name)} cannot run: ")


def test_cannot_run_is_an_input_error():
    assert issubclass(EstimatorCannotRun, InputError)


@pytest.mark.parametrize(("estimator", "name"), PERSONS + REMOVAL)
def test_empty_window(estimator, name):
    records = observed(stations=stations_table(), encounters=encounters_from_frequencies([5, 3]))
    with raises(name) as info:
        estimator(records, (50, 60))
    assert "no encounters in the window (days 50-60)" in str(info.value)


@pytest.mark.parametrize(("estimator", "name"), PERSONS)
def test_no_identified_persons(estimator, name):
    records = observed(encounters=encounter_rows([{"person_ref": ""}, {"person_ref": None, "day": 3}]))
    with raises(name) as info:
        estimator(records)
    assert "no identified persons" in str(info.value)


@pytest.mark.parametrize(("estimator", "name"), FREQUENCY)
def test_no_repeat_encounters(estimator, name):
    with raises(name) as info:
        estimator(observed(encounters=encounters_from_frequencies([7])))
    assert "nobody was seen more than once" in str(info.value)


@pytest.mark.parametrize(("estimator", "name"), [(chao, CHAO), (zelterman, ZELTERMAN)])
def test_f2_zero(estimator, name):
    with raises(name) as info:
        estimator(observed(encounters=encounters_from_frequencies([7, 0, 2])))
    assert "f2" in str(info.value)


def test_bias_corrected_chao_runs_with_f2_zero():
    result = chao_bias_corrected(observed(encounters=encounters_from_frequencies([7, 0, 2])))
    assert result.estimate == pytest.approx(9 + 7 * 6 / 2)


def test_chapman_without_recaptures():
    records = observed(encounters=encounter_rows([{"person_ref": "a", "day": 1}, {"person_ref": "b", "day": 2}]))
    with raises(CHAPMAN) as info:
        chapman(records)
    assert "m = 0" in str(info.value)


def test_chapman_one_day_window():
    with raises(CHAPMAN) as info:
        chapman(observed(encounters=encounters_from_frequencies([4, 2], days=1)), (1, 1))
    assert "cannot be split" in str(info.value)


def test_ztp_regression_level_without_repeats():
    rows = [{"person_ref": "a"}, {"person_ref": "a", "day": 2}, {"person_ref": "b"}]
    rows += [{"person_ref": "c", "vehicle_class": "tanker"}]
    with raises(ZTP_REGRESSION) as info:
        ztp_regression(observed(encounters=encounter_rows(rows)))
    assert "vehicle_class level 'tanker'" in str(info.value)


@pytest.mark.parametrize(("estimator", "name"), PERSONS + REMOVAL)
def test_missing_column(estimator, name):
    records = observed(stations=stations_table(), encounters=encounters_from_frequencies([5, 3]).drop(columns="day"))
    with raises(name) as info:
        estimator(records)
    assert "lacks column(s): day" in str(info.value)


@pytest.mark.parametrize(("estimator", "name"), REMOVAL)
def test_missing_table(estimator, name):
    records = observed(encounters=encounters_from_frequencies([5, 3]))
    del records["stations"]
    with raises(name) as info:
        estimator(records)
    assert "no observed table 'stations'" in str(info.value)


@pytest.mark.parametrize(("estimator", "name"), REMOVAL)
def test_one_primary_station(estimator, name):
    records = observed(stations=stations_table(["gate"]), encounters=encounter_rows([{}, {}]))
    with raises(name) as info:
        estimator(records)
    assert "at least two primary stations" in str(info.value)


def _catches(catches):
    rows = [{"place": place} for place, count in zip(("gate", "yard", "checkin"), catches) for _ in range(count)]
    return observed(stations=stations_table(), encounters=encounter_rows(rows))


def test_removal_catches_that_do_not_fall():
    with raises(TWO_PASS):
        removal_two_pass(_catches((10, 12, 3)))
    with raises(ZIPPIN) as info:
        removal_zippin(_catches((10, 12, 14)))
    assert "do not fall" in str(info.value)
    with raises(RELATIVE):
        removal_relative_sensitivity(_catches((10, 12, 14)), sensitivities={"gate": 1, "yard": 1, "checkin": 1})


def test_removal_relative_needs_every_station():
    with raises(RELATIVE) as info:
        removal_relative_sensitivity(_catches((30, 20, 10)), sensitivities={"gate": 1.0})
    assert "yard, checkin" in str(info.value)


def test_bad_window_and_level():
    records = observed(encounters=encounters_from_frequencies([5, 3]))
    with raises(CHAO) as info:
        chao(records, (9, 2))
    assert "after its end" in str(info.value)
    with raises(ZTP) as info:
        ztp(records, level=1.5)
    assert "confidence level" in str(info.value)


def test_run_directory_without_records(tmp_path):
    with raises(CHAO) as info:
        chao(tmp_path)
    assert "observed" in str(info.value)


EXPANSION = expansion_name("gate")


def _expansion_records(checks):
    return observed(
        stations=stations_table(), checks=checks_table(checks), encounters=encounter_rows([{"vehicle_class": "box"}])
    )


def test_expansion_without_sensitivities():
    with raises(EXPANSION) as info:
        expansion(_expansion_records([{"station": "gate", "vehicles": 10, "checks": 5}]), sensitivities=None)
    assert "no sensitivities given" in str(info.value)


def test_expansion_with_no_vehicle_checked():
    records = _expansion_records([{"station": "gate", "vehicles": 10, "checks": 0}])
    with raises(EXPANSION) as info:
        expansion(records, sensitivities={"gate": (2, 2)})
    assert "no vehicle was checked" in str(info.value)


def test_expansion_detection_in_an_unchecked_class():
    checks = [{"station": "gate", "vehicles": 10, "checks": 5, "vehicle_class": "tanker"}]
    with raises(EXPANSION) as info:
        expansion(_expansion_records(checks), sensitivities={"gate": (2, 2)})
    assert "where no vehicle was checked" in str(info.value)


def test_expansion_more_checks_than_vehicles_and_bad_beta():
    with raises(EXPANSION):
        expansion(_expansion_records([{"station": "gate", "vehicles": 3, "checks": 5}]), sensitivities={"gate": (2, 2)})
    records = _expansion_records([{"station": "gate", "vehicles": 10, "checks": 5}])
    with raises(EXPANSION) as info:
        expansion(records, sensitivities={"gate": (0, 2)})
    assert "a, b > 0" in str(info.value)


def test_expansion_at_a_secondary_station_or_without_detections():
    records = _expansion_records([{"station": "gate", "vehicles": 10, "checks": 5}])
    with raises(expansion_name("search")) as info:
        expansion(records, station="search", sensitivities={"search": (2, 2)})
    assert "secondary" in str(info.value)
    with raises(EXPANSION) as info:
        expansion(records, window=(5, 6), sensitivities={"gate": (2, 2)})
    assert "no row for station 'gate'" in str(info.value)
