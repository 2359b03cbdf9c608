"""Layered removal across primary stations: published examples, variants, and the station passes."""

import numpy as np
import pytest
from scipy import optimize

from abm.estimate import (
    removal_carle_strub,
    removal_carle_strub_from_catches,
    removal_catches,
    removal_relative_sensitivity,
    removal_relative_sensitivity_from_catches,
    removal_two_pass,
    removal_two_pass_from_catches,
    removal_zippin,
    removal_zippin_from_catches,
)

from abm.estimate.results import EstimatorCannotRun

from .synthetic import SECONDARY, STATIONS, encounter_rows, observed, stations_table

CARLE_STRUB_EXAMPLE = (38, 26, 12)  # Carle & Strub (1978) [pub]


def records_with_catches(catches, extra_rows=()):
    rows = [{"place": name} for name, count in zip(STATIONS, catches) for _ in range(count)]
    return observed(stations=stations_table(STATIONS[: len(catches)]), encounters=encounter_rows([*rows, *extra_rows]))


def test_two_pass_on_seber_example():
    # Seber (2002), Example 7.4: catches (79, 28) → N = 122, SE 8.8, p = 0.65 [pub]
    result = removal_two_pass(records_with_catches((79, 28)))
    assert result.estimate == pytest.approx(122, abs=0.5)
    assert result.se == pytest.approx(8.8, abs=0.05)
    assert result.params["p"] == pytest.approx(0.65, abs=0.005)
    assert result.observed == 107
    assert result.target == "attempts reaching station 'gate'"


def test_carle_strub_integer_search_gives_91():
    # Carle & Strub (1978): (38, 26, 12) → N = 91, p = 0.444, SE 9.7 [pub]. REFERENCES.md notes
    # 94.93 (continuous MLE) vs 93 vs 91: this integer search of the weighted likelihood gives 91.
    result = removal_carle_strub(records_with_catches(CARLE_STRUB_EXAMPLE))
    assert result.estimate == 91
    assert result.params["p"] == pytest.approx(0.444, abs=0.0005)
    assert result.se == pytest.approx(9.7, abs=0.05)


def test_zippin_continuous_mle_gives_94_93():
    # REFERENCES.md: the continuous MLE for (38, 26, 12) is 94.93 [calc]. 93 is the integer search of
    # Zippin's equation with a +0.5 term (not implemented); 91 is Carle & Strub above.
    result = removal_zippin(records_with_catches(CARLE_STRUB_EXAMPLE))
    assert result.estimate == pytest.approx(94.93, abs=0.005)
    k, t, x = 3, 76, 2 * 38 + 26
    n = result.estimate
    assert n * (k * n - x - t) ** k == pytest.approx((n - t) * (k * n - x) ** k, rel=1e-9)
    # Zippin variance (Seber 2002 eq. 7.23) at the estimate
    q = 1 - result.params["p"]
    variance = n * (1 - q**k) * q**k / ((1 - q**k) ** 2 - (k * (1 - q)) ** 2 * q ** (k - 1))
    assert result.se == pytest.approx(np.sqrt(variance), rel=1e-9)


def test_relative_sensitivity_with_equal_sensitivities_is_zippin():
    zippin = removal_zippin_from_catches(CARLE_STRUB_EXAMPLE)
    relative = removal_relative_sensitivity_from_catches(CARLE_STRUB_EXAMPLE, [0.3, 0.3, 0.3])
    assert relative.estimate == pytest.approx(zippin.estimate, rel=1e-9)
    assert relative.se == pytest.approx(zippin.se, rel=1e-6)


def test_relative_sensitivity_maximises_the_likelihood_given_t():
    catches, s = np.array([40, 30, 20]), np.array([1.0, 1.2, 0.9])

    # Independently: the catches given T are multinomial with cell chances π_i / Σπ.
    def negloglik(p):
        survive = np.cumprod(np.concatenate([[1.0], 1 - s[:-1] * p]))
        pi = s * p * survive
        return -np.sum(catches * np.log(pi / pi.sum()))

    bounds = (1e-6, 1 / s.max() - 1e-9)
    best = optimize.minimize_scalar(negloglik, bounds=bounds, method="bounded", options={"xatol": 1e-12})
    result = removal_relative_sensitivity_from_catches(catches, s)
    survive = np.cumprod(np.concatenate([[1.0], 1 - s * best.x]))
    assert result.estimate == pytest.approx(catches.sum() / (1 - survive[-1]), rel=1e-6)


def test_relative_sensitivity_on_records_is_keyed_by_station():
    records = records_with_catches(CARLE_STRUB_EXAMPLE)
    result = removal_relative_sensitivity(records, sensitivities={"gate": 2.0, "yard": 2.0, "checkin": 2.0})
    assert result.estimate == pytest.approx(94.93, abs=0.005)


def test_unreferred_secondary_and_boarding_point_encounters_are_not_passes():
    extra = [
        {"place": SECONDARY},
        {"place": "lay_by", "place_kind": "boarding_point", "kind": "interdiction"},
    ]
    records = records_with_catches(CARLE_STRUB_EXAMPLE, extra)
    records["stations"] = stations_table()  # three primaries and the secondary
    passes = removal_catches(records)
    assert passes.stations == STATIONS
    assert passes.catches == CARLE_STRUB_EXAMPLE
    result = removal_zippin(records)
    assert result.params["other_station_detections"] == 1
    assert result.params["boarding_point_encounters"] == 1
    assert result.observed == 76


def test_a_find_after_a_referral_counts_in_the_referring_stations_catch():
    """The referring pass removed the person: Carle & Strub's catches (38, 26, 12) with 5 + 2 of them found in search."""
    extra = [{"place": SECONDARY, "referred_by": "gate"}] * 5 + [{"place": SECONDARY, "referred_by": "checkin"}] * 2
    records = records_with_catches((33, 26, 10), extra)
    records["stations"] = stations_table()
    passes = removal_catches(records)
    assert passes.catches == CARLE_STRUB_EXAMPLE and passes.referred_detections == 7
    result = removal_zippin(records)
    assert result.estimate == pytest.approx(94.93, abs=0.005)  # Zippin on (38, 26, 12), as above
    assert result.params["referred_detections"] == 7 and result.params["other_station_detections"] == 0


def test_passes_follow_station_positions_not_table_order():
    records = records_with_catches((79, 28))
    records["stations"] = records["stations"].iloc[::-1].reset_index(drop=True)
    assert removal_two_pass(records).estimate == pytest.approx(79**2 / 51)


def test_two_pass_uses_only_the_first_two_passes():
    assert removal_two_pass_from_catches([79, 28, 5]).estimate == pytest.approx(79**2 / 51)


def test_all_caught_at_the_first_pass_is_a_degenerate_but_finite_estimate():
    result = removal_zippin_from_catches([50, 0, 0])
    assert (result.estimate, result.se, result.ci_low, result.ci_high) == (50, 0, 50, 50)
    assert removal_carle_strub_from_catches([50, 0, 0]).estimate == 50


def test_carle_strub_warns_where_zippin_refuses() -> None:
    # Zippin (1956): the ML estimate exists only when X > (k-1)T/2, i.e. catches fall on average.
    # (18, 13, 44): T = 75, X = 13 + 88 = 101 <= 75, so Zippin refuses; Carle & Strub still returns a number.
    with pytest.raises(EstimatorCannotRun, match="do not fall"):
        removal_zippin_from_catches((18, 13, 44))
    result = removal_carle_strub_from_catches((18, 13, 44))
    assert len(result.warnings) == 1 and "do not fall along the passes (18, 13, 44)" in result.warnings[0]
    assert "warning: catches do not fall" in result.summary()
    assert removal_carle_strub_from_catches(CARLE_STRUB_EXAMPLE).warnings == ()
