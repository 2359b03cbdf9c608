"""Chapman's two-sample estimator: published examples, and the halves of a window on observed records."""

import pytest

from abm.estimate import chapman, chapman_from_counts

from .synthetic import encounter_rows, observed


@pytest.mark.parametrize(
    ("marked", "caught", "recaptured", "estimate", "se"),
    [
        (500, 149, 7, 9393, 3022),  # Seber (2002), Tables 3.7-3.8 [pub]
        (1000, 243, 21, 11101, 2184),  # Seber (2002) [pub]
    ],
)
def test_chapman_on_seber_examples(marked, caught, recaptured, estimate, se):
    result = chapman_from_counts(marked, caught, recaptured)
    assert result.estimate == pytest.approx(estimate, abs=0.5)
    assert result.se == pytest.approx(se, abs=0.5)
    assert result.observed == marked + caught - recaptured


def test_chapman_on_pine_example():
    # Pine et al. (2013), Box 11.2: M=421, n=332, m=88 → 1578, 95% CI 1330-1826 [pub]
    result = chapman_from_counts(421, 332, 88, level=0.95)
    assert result.estimate == pytest.approx(1578, abs=0.5)
    assert (result.ci_low, result.ci_high) == pytest.approx((1330, 1826), abs=0.5)
    assert result.params["petersen"] == pytest.approx(421 * 332 / 88)


def test_chapman_on_records_splits_the_window_in_halves():
    # Window days 1-4: first half 1-2, second half 3-4. Persons a, b, c early; b, c, d, e late.
    rows = [
        {"person_ref": "a", "day": 1}, {"person_ref": "b", "day": 2}, {"person_ref": "c", "day": 2},
        {"person_ref": "b", "day": 3}, {"person_ref": "c", "day": 4}, {"person_ref": "d", "day": 4},
        {"person_ref": "e", "day": 3}, {"person_ref": "f", "day": 5},
    ]
    records = observed(encounters=encounter_rows(rows))
    result = chapman(records, (1, 4))
    assert (result.params["M"], result.params["n"], result.params["m"]) == (3, 4, 2)
    assert result.estimate == pytest.approx(4 * 5 / 3 - 1)
    assert any("days 1-2 and days 3-4" in a for a in result.assumptions)
    # without a window the span of the records (days 1-5) is split 1-3 / 4-5
    whole = chapman(records)
    assert (whole.params["M"], whole.params["n"], whole.params["m"]) == (4, 3, 1)
    assert whole.window is None
