"""Capture-frequency estimators: published check values, the ZTP regression fit, window and identity handling."""

import numpy as np
import pandas as pd
import pytest
from scipy import optimize
from scipy.special import gammaln

from abm.estimate import (
    capture_frequencies,
    chao,
    chao_bias_corrected,
    chao_from_frequencies,
    zelterman,
    ztp,
    ztp_regression,
    ztp_regression_from_counts,
)

from .synthetic import encounter_rows, encounters_from_frequencies, observed

# Police records of persons without residence status, 1995: van der Heijden, Bustami, Cruyff,
# Engbersen & van Houwelingen (2003), Statistical Modelling 3:305-322 [pub]; n = 1880, S = 2185.
POLICE_1995 = (1645, 183, 37, 13, 1, 1)


@pytest.fixture(scope="module")
def police() -> dict[str, pd.DataFrame]:
    return observed(encounters=encounters_from_frequencies(POLICE_1995))


def test_frequencies_round_trip_through_the_records(police):
    assert list(capture_frequencies(police)) == list(POLICE_1995)


def test_ztp_on_police_records(police):
    result = ztp(police)
    # van der Heijden et al. (2003): λ = 0.308619, N = 7080, SE 365.75 [pub]
    assert result.params["lambda"] == pytest.approx(0.308619, abs=1e-6)
    assert result.estimate == pytest.approx(7080, abs=0.5)
    assert result.se == pytest.approx(365.75, abs=0.01)
    assert result.observed == 1880
    assert result.undetected == pytest.approx(result.estimate - 1880)
    assert result.target.startswith("distinct")


def test_zelterman_on_police_records(police):
    result = zelterman(police)
    # van der Heijden et al. (2003); Böhning & Schön (2005), JRSS C 54: λ = 0.222492, N = 9425, SE 683.97 [pub]
    assert result.params["lambda"] == pytest.approx(0.222492, abs=1e-6)
    assert result.estimate == pytest.approx(9425, abs=0.5)
    assert result.se == pytest.approx(683.97, abs=0.01)


def test_chao_on_police_records(police):
    result = chao(police)
    # Chao (1987) formula on the police data: N = 9273.51, SE 662.59 [calc, REFERENCES.md]
    assert result.estimate == pytest.approx(9273.51, abs=0.005)
    assert result.se == pytest.approx(662.59, abs=0.005)
    # the log-normal interval stays above n and is skewed to the right
    assert 1880 < result.ci_low < result.estimate < result.ci_high
    assert result.ci_high - result.estimate > result.estimate - result.ci_low


def test_chao_bias_corrected_on_police_records(police):
    # n + f1(f1−1)/(2(f2+1)) = 9228.86 [calc, REFERENCES.md]
    assert chao_bias_corrected(police).estimate == pytest.approx(9228.86, abs=0.005)


def test_chao_interval_follows_the_lognormal_formula():
    # Chao (1987) log-normal interval with C = exp(z·sqrt(ln(1 + Var/f0²))), here at 95% (z = 1.96)
    result = chao_from_frequencies(POLICE_1995, level=0.95)
    f0 = result.estimate - 1880
    c = np.exp(1.959964 * np.sqrt(np.log(1 + result.se**2 / f0**2)))
    assert result.ci_low == pytest.approx(1880 + f0 / c, rel=1e-6)
    assert result.ci_high == pytest.approx(1880 + f0 * c, rel=1e-6)


def test_window_and_unidentified_encounters_are_respected():
    rows = [
        {"person_ref": "a", "day": 1}, {"person_ref": "a", "day": 2}, {"person_ref": "a", "day": 9},
        {"person_ref": "b", "day": 2}, {"person_ref": "b", "day": 3},
        {"person_ref": "c", "day": 3},
        {"person_ref": "", "day": 2}, {"person_ref": None, "day": 2},
    ]
    records = observed(encounters=encounter_rows(rows))
    assert list(capture_frequencies(records, (1, 3))) == [1, 2]
    result = chao(records, (1, 3))
    assert result.window == (1, 3)
    assert result.params["unidentified_encounters"] == 2
    assert result.estimate == pytest.approx(3 + 1 / 4)


def _ztp_counts(rng: np.random.Generator, n: int, groups: int) -> tuple[np.ndarray, np.ndarray]:
    group = rng.integers(0, groups, n)
    y = rng.poisson(np.exp(-0.6 + 0.5 * group))
    return y[y > 0], group[y > 0]


def test_ztp_regression_without_covariates_is_the_closed_form(police):
    plain = ztp(police)
    regression = ztp_regression(police, covariates=())
    assert regression.estimate == pytest.approx(plain.estimate, rel=1e-9)
    assert regression.se == pytest.approx(plain.se, rel=1e-7)
    assert np.exp(regression.params["coef:intercept"]) == pytest.approx(plain.params["lambda"], rel=1e-9)


def test_ztp_regression_matches_an_independent_fit_of_the_full_likelihood():
    rng = np.random.default_rng(20240601)
    y, group = _ztp_counts(rng, 3000, 3)
    classes = np.array(["box", "curtain", "reefer"])[group]
    rows = []
    for person, (count, cls) in enumerate(zip(y, classes)):
        rows += [{"person_ref": f"q{person}", "vehicle_class": cls, "day": 1 + j} for j in range(count)]
    result = ztp_regression(observed(encounters=encounter_rows(rows)))

    # Written here independently: the full zero-truncated Poisson log-likelihood, log y! included,
    # with dummies for 'curtain' and 'reefer' against 'box'.
    x = np.column_stack([np.ones(y.size), group == 1, group == 2]).astype(float)

    def negloglik(beta):
        lam = np.exp(x @ beta)
        return -np.sum(y * np.log(lam) - lam - gammaln(y + 1) - np.log(1 - np.exp(-lam)))

    fit = optimize.minimize(negloglik, np.zeros(3), method="BFGS", options={"gtol": 1e-10})
    lam = np.exp(x @ fit.x)
    assert result.estimate == pytest.approx(np.sum(1 / (1 - np.exp(-lam))), rel=1e-6)
    coefs = [result.params[k] for k in ("coef:intercept", "coef:vehicle_class=curtain", "coef:vehicle_class=reefer")]
    assert coefs == pytest.approx(fit.x, abs=1e-6)
    assert result.params["loglik"] == pytest.approx(-fit.fun, rel=1e-9)
    assert result.observed == y.size


def test_ztp_regression_from_counts_uses_the_first_encounter_covariate():
    rows = [
        {"person_ref": "a", "vehicle_class": "box", "day": 1},
        {"person_ref": "a", "vehicle_class": "tanker", "day": 2},
        {"person_ref": "b", "vehicle_class": "tanker", "day": 1},
        {"person_ref": "b", "vehicle_class": "tanker", "day": 3},
        {"person_ref": "c", "vehicle_class": "box", "day": 1},
        {"person_ref": "d", "vehicle_class": "tanker", "day": 1},
    ]
    result = ztp_regression(observed(encounters=encounter_rows(rows)))
    # a's first encounter was in a box: box {a: 2, c: 1}, tanker {b: 2, d: 1}, so both groups fit alike
    direct = ztp_regression_from_counts([2, 2, 1, 1], pd.DataFrame({"t": [0.0, 1.0, 0.0, 1.0]}))
    assert result.estimate == pytest.approx(direct.estimate, rel=1e-9)
    assert result.params["coef:vehicle_class=tanker"] == pytest.approx(0.0, abs=1e-6)
