"""Priors (densities, truncation, transforms) and summary statistics of hand-built observed tables."""

from __future__ import annotations

import math

import numpy as np
import pandas as pd
import pytest
from scipy import integrate, stats

from abm.calibration.priors import Prior, PriorError, PriorSet
from abm.calibration.summaries import SummaryError, SummarySpec
from abm.observed import conform


@pytest.mark.parametrize(
    "prior",
    [
        Prior.make("u", "uniform", low=1.0, high=20.0),
        Prior.make("l", "loguniform", low=0.1, high=10.0),
        Prior.make("n", "normal", mean=1.0, sd=0.2, bounds=(0.7, 1.15)),
        Prior.make("g", "gamma", shape=4.0, rate=0.3, bounds=(1.0, 60.0)),
        Prior.make("g2", "gamma", shape=2.0, rate=0.5),
    ],
    ids=lambda p: p.name,
)
def test_prior_density_integrates_to_one_and_draws_stay_inside(prior):
    low, high = prior.support()
    upper = high if math.isfinite(high) else float(prior.family().ppf(1 - 1e-12))
    total, _ = integrate.quad(lambda x: float(prior.pdf(np.array([x]))[0]), low, upper, limit=200)
    assert total == pytest.approx(1.0, abs=1e-6)
    draws = prior.sample(np.random.default_rng(1), 20_000)
    assert draws.min() >= low and draws.max() <= high
    # The draws follow the truncated distribution: compare with its distribution function (Kolmogorov-Smirnov).
    family = prior.family()
    lo, hi = family.cdf(low), family.cdf(high)
    assert stats.kstest(draws, lambda x: (family.cdf(x) - lo) / (hi - lo)).pvalue > 0.001
    z = prior.to_scale(draws)
    np.testing.assert_allclose(prior.from_scale(z), draws, rtol=1e-9, atol=1e-9)


def test_transforms_follow_the_support():
    assert Prior.make("a", "uniform", low=0.0, high=1.0).transform() == "logit"
    assert Prior.make("b", "gamma", shape=2.0, rate=1.0).transform() == "log"
    assert Prior.make("c", "normal", mean=0.0, sd=1.0).transform() == "identity"
    assert Prior.make("d", "normal", mean=0.0, sd=1.0, bounds=(-1.0, 2.0)).transform() == "logit"


@pytest.mark.parametrize(
    ("make", "message"),
    [
        (lambda: Prior.make("x", "uniform", low=2.0, high=1.0), "low < high"),
        (lambda: Prior.make("x", "loguniform", low=0.0, high=1.0), "0 < low"),
        (lambda: Prior.make("x", "normal", mean=0.0, sd=0.0), "sd > 0"),
        (lambda: Prior.make("x", "gamma", shape=1.0, rate=-1.0), "rate > 0"),
        (lambda: Prior.make("x", "gamma", shape=1.0), "takes shape, rate"),
        (lambda: Prior.make("x", "beta", a=1.0, b=1.0), "unknown distribution"),
        (lambda: Prior.make("x", "uniform", low=0.0, high=1.0, bounds=(2.0, 3.0)), "none of the"),
        (lambda: PriorSet.of([Prior.make("x", "uniform", low=0.0, high=1.0)] * 2), "repeated"),
    ],
)
def test_bad_priors_are_refused(make, message):
    with pytest.raises(PriorError, match=message):
        make()


def encounters(rows):
    columns = ["encounter_id", "day", "minute", "kind", "place", "place_kind", "vehicle_class", "method", "person_ref"]
    return conform("encounters", pd.DataFrame(rows, columns=columns))


def checks(rows):
    columns = ["day", "hour", "station", "vehicle_class", "method", "vehicles", "checks", "alarms"]
    return conform("checks", pd.DataFrame(rows, columns=columns))


def test_summaries_of_hand_built_records():
    # Window: days 7..15 (9 days: week 0 = days 7..13, week 1 = days 14..15). Day 6 and day 16 lie outside.
    enc = encounters(
        [
            (1, 6, 10.0, "detection", "gate", "station", "lorry", "scan", "p1"),  # before the window
            (2, 7, 10.0, "detection", "gate", "station", "lorry", "scan", "p1"),
            (3, 8, 10.0, "detection", "quay", "station", "lorry", "scan", "p1"),
            (4, 9, 10.0, "interdiction", "quay_fence", "boarding_point", "", "", "p2"),
            (5, 14, 10.0, "detection", "quay", "station", "lorry", "scan", "p2"),
            (6, 15, 10.0, "detection", "quay", "station", "lorry", "scan", ""),  # not identified
            (6, 15, 10.0, "detection", "quay", "station", "lorry", "scan", "p3"),  # a group of two
            (7, 15, 20.0, "detection", "gate", "station", "lorry", "scan", "p4"),
            (8, 15, 30.0, "interdiction", "quay_fence", "boarding_point", "", "", "p4"),
            (9, 15, 40.0, "detection", "gate", "station", "lorry", "scan", "p4"),
            (10, 16, 10.0, "detection", "gate", "station", "lorry", "scan", "p5"),  # after the window
        ]
    )
    chk = checks([(7, 0, "gate", "lorry", "scan", 10, 4, 1), (14, 5, "quay", "lorry", "scan", 10, 6, 0), (16, 0, "gate", "lorry", "scan", 10, 9, 0)])
    spec = SummarySpec(
        ("detections_by_station", "detections_week", "interdictions_week", "interdictions_by_point", "checks_by_station_week",
         "detections_per_check", "repeat_frequencies"),
        days=9,
        stations=("gate", "quay"),
        points=("upstream_park", "quay_fence"),
    )
    values = dict(zip(spec.names(), spec.compute({"encounters": enc, "checks": chk}, first_day=7), strict=True))
    assert values["detections:gate"] == 3 and values["detections:quay"] == 4
    assert (values["detections:week0"], values["detections:week1"]) == (2, 5)
    assert (values["interdictions:week0"], values["interdictions:week1"]) == (1, 1)
    assert (values["interdictions:upstream_park"], values["interdictions:quay_fence"]) == (0, 2)
    assert [values[f"checks:{s}:week{w}"] for s in ("gate", "quay") for w in (0, 1)] == [4, 0, 0, 6]
    assert values["detections_per_1000_checks:gate"] == pytest.approx(750.0)
    # Identified persons and their distinct encounters: p1 2 (day 6 lies outside), p2 2, p3 1, p4 3.
    assert (values["f1"], values["f2"], values["f3plus"]) == (1, 2, 1)
    assert values["share_seen_twice_or_more"] == pytest.approx(3 / 4)


def test_summary_groups_are_checked():
    with pytest.raises(SummaryError, match="unknown summary group"):
        SummarySpec(("detections_by_hour",), 7, ("gate",), ())
