"""Comparisons: t-intervals as scipy computes them, and paired differences tighter than unpaired under CRN."""

from __future__ import annotations

from collections.abc import Callable
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from scipy import stats

from abm.experiment.batch import run_batch
from abm.experiment.compare import (
    COMPARED_FIGURES,
    compare_store,
    format_comparison,
    mean_interval,
    paired_difference,
    unpaired_difference,
)

from .helpers import experiment, write_yaml


def test_mean_interval_is_the_student_t_interval() -> None:
    x = np.array([3.0, 5.0, 4.0, 8.0, 6.0])
    # scipy.stats.t.interval with the standard error of the mean is the textbook interval
    low, high = stats.t.interval(0.95, len(x) - 1, loc=x.mean(), scale=stats.sem(x))
    assert mean_interval(x) == pytest.approx((x.mean(), low, high))
    assert np.isnan(mean_interval([1.0])[1])


def test_unpaired_difference_is_welch_and_paired_is_the_paired_t() -> None:
    a, b = np.array([1.0, 2.0, 4.0, 7.0]), np.array([2.0, 2.5, 3.0])
    welch = stats.ttest_ind(a, b, equal_var=False).confidence_interval(0.95)
    assert unpaired_difference(a, b) == pytest.approx((a.mean() - b.mean(), welch.low, welch.high))
    x = pd.Series([10.0, 12.0, 9.0, 14.0], index=[0, 1, 2, 3])
    y = pd.Series([8.0, 11.5, 7.0, 12.0, 99.0], index=[0, 1, 2, 3, 4])  # replication 4 has no pair
    paired = stats.ttest_rel(x.to_numpy(), y.to_numpy()[:4]).confidence_interval(0.95)
    assert paired_difference(x, y) == pytest.approx(((x - y[:4]).mean(), paired.low, paired.high, 4))


@pytest.fixture(scope="module")
def crn_batch(tmp_path_factory: pytest.TempPathFactory) -> Path:
    folder = tmp_path_factory.mktemp("crn")
    path = write_yaml(folder / "experiment.yaml", experiment(days=6, replications=5))
    run_batch(path, folder / "out", show_progress=False)
    return folder / "out"


def test_paired_intervals_are_narrower_than_unpaired_under_common_random_numbers(crn_batch: Path) -> None:
    summary = pd.read_parquet(crn_batch / "summary.parquet")
    base = summary[summary["point"] == 0].set_index("replication")
    narrower = []
    for point in (1, 2):
        policy = summary[summary["point"] == point].set_index("replication")
        for figure in ("time_in_port_p95_min", "checks", "vehicles"):
            _, plow, phigh, pairs = paired_difference(policy[figure], base[figure])
            _, ulow, uhigh = unpaired_difference(policy[figure].to_numpy(), base[figure].to_numpy())
            assert pairs == 5
            narrower.append((phigh - plow) < (uhigh - ulow))
    assert all(narrower)


def test_comparison_table_has_every_point_and_figure(crn_batch: Path) -> None:
    table = compare_store(crn_batch)
    assert len(table) == 3 * len(COMPARED_FIGURES)
    assert list(table.columns[:3]) == ["point", "policy", "figure"]
    baseline = table[table["point"] == 0]
    assert baseline["compared_with"].isna().all() and baseline["difference"].isna().all()
    others = table[table["point"] > 0]
    assert (others["compared_with"] == 0).all() and (others["pairs"] == 5).all()
    assert (others["difference_low"] <= others["difference"]).all()
    assert (others["difference"] <= others["difference_high"]).all()
    text = format_comparison(table, ["policy"])
    assert "p000  policy=current  (baseline; 5 runs)" in text
    assert "p002  policy=night_surge  (vs p000; 5 runs)" in text
    assert "(truth)" in text and "(observed)" in text


def test_factorless_experiment_is_just_replications(tmp_path: Path, make_experiment: Callable[..., Path]) -> None:
    result = run_batch(make_experiment(experiment(days=2, factors=[])), tmp_path / "out", show_progress=False)
    assert len(result.summary) == 2 and result.comparison["compared_with"].isna().all()
    assert "(no factors)" in format_comparison(result.comparison, [])


def test_bounded_intervals_stay_within_what_the_quantity_can_take() -> None:
    from abm.experiment.compare import bounded_mean_interval

    counts = np.array([0.0, 0.0, 1.0, 9.0])  # skewed counts: the t-interval goes below zero
    assert mean_interval(counts)[1] < 0
    mean, low, high = bounded_mean_interval(counts, "log")
    # log-normal interval (Burnham et al. 1987; from memory): mean / C, mean x C, C = exp(t sqrt(ln(1 + cv^2)))
    t = stats.t.ppf(0.975, 3)
    c = np.exp(t * np.sqrt(np.log(1 + (stats.sem(counts) / counts.mean()) ** 2)))
    assert (mean, low, high) == pytest.approx((2.5, 2.5 / c, 2.5 * c))
    shares = np.array([0.0, 0.001, 0.004])
    assert mean_interval(shares)[1] < 0
    mean, low, high = bounded_mean_interval(shares, "logit")
    # delta method on the logit scale (e.g. Agresti, Categorical Data Analysis, 3rd ed., section 16.1; from memory)
    spread = stats.t.ppf(0.975, 2) * stats.sem(shares) / (mean * (1 - mean))
    assert low == pytest.approx(1 / (1 + np.exp(-(np.log(mean / (1 - mean)) - spread))))
    assert 0 < low < mean < high < 1
    assert bounded_mean_interval([0.0, 0.0, 0.0], "log") == (0.0, 0.0, 0.0)


def test_zero_spread_over_few_replications_is_not_exact() -> None:
    from abm.experiment.compare import compare_points

    summary = pd.DataFrame({
        "point": [0, 0, 0, 1, 1, 1], "replication": [0, 1, 2] * 2, "policy": ["a"] * 3 + ["b"] * 3,
        "crossings": [5.0, 7.0, 9.0, 4.0, 6.0, 8.0],  # the same difference (-1) in each of 3 replications
        "staff_hours": [100.0] * 3 + [120.0] * 3,  # set by the roster: the same every replication
    })
    table = compare_points(summary, ["policy"], {0: None, 1: 0}, ["crossings", "staff_hours"]).set_index("figure")
    row = table[table["point"] == 1]
    assert row.loc["crossings", "difference"] == -1 and np.isnan(row.loc["crossings", "difference_low"])
    assert row.loc["staff_hours", "difference_low"] == row.loc["staff_hours", "difference_high"] == 20
    assert "warning: only 3 replications per design point" in format_comparison(compare_points(
        summary, ["policy"], {0: None, 1: 0}, ["crossings"]), ["policy"])


def test_printed_numbers_have_about_three_significant_digits() -> None:
    from abm.experiment.compare import compare_points, readable

    assert [readable(v) for v in (4704.0, 145.8, 46.2, 8.4, 0.2, -0.0143)] == \
        ["4,704", "146", "46.2", "8.40", "0.200", "-0.0143"]
    assert readable(0.0) == readable(0.0, signed=True) == "0"  # an exact zero, not +0.0000
    assert readable(5.69, signed=True) == "+5.69" and readable(99.96) == "100"
    assert readable(0.000614, share=True) == "0.0614%" and readable(0.0004, True, True) == "+0.0400 pp"
    assert readable(0.000614, share=True, figures=2) == "0.061%"
    summary = pd.DataFrame({
        "point": [0] * 5 + [1] * 5, "replication": list(range(5)) * 2, "policy": ["a"] * 5 + ["b"] * 5,
        "detections": [40.0, 44.0, 50.0, 46.0, 51.0] * 2,  # the same in every pair: a difference of exactly 0
        "missed_departure_share": [0.0006, 0.0005, 0.0007, 0.0006, 0.0008, 0.001, 0.0009, 0.0011, 0.001, 0.0012],
    })
    text = format_comparison(compare_points(summary, ["policy"], {0: None, 1: 0},
                                            ["detections", "missed_departure_share"]), ["policy"])
    detections = next(line for line in text.splitlines()[-5:] if "Found in checks" in line)
    assert detections.split()[-4:] == ["0", "[0,", "0]", "(observed)"]
    missed = next(line for line in text.splitlines()[-5:] if "(% of vehicles)" in line)
    assert "0.104%" in missed and "+0.0400 pp" in missed and "0.0000" not in text
