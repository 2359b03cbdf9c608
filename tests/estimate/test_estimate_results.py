"""The results object, run_all and windows."""

import dataclasses

import numpy as np
import pandas as pd
import pytest

from abm.estimate import EstimateResult, by_window, chao, chao_from_frequencies, rolling_windows, run_all
from abm.estimate.results import FRAME_COLUMNS

from .synthetic import checks_table, encounter_rows, encounters_from_frequencies, observed, stations_table


def test_result_is_frozen_and_complete():
    result = chao_from_frequencies([30, 10, 4])
    assert isinstance(result, EstimateResult)
    with pytest.raises(dataclasses.FrozenInstanceError):
        result.estimate = 0.0
    assert result.undetected == pytest.approx(result.estimate - result.observed)
    assert result.level == 0.9 and result.ci_low < result.estimate < result.ci_high
    assert result.assumptions and all(isinstance(a, str) and "\n" not in a for a in result.assumptions)
    assert "Chao" in result.source


def test_to_frame_and_summary():
    result = chao_from_frequencies([30, 10, 4])
    frame = result.to_frame()
    assert list(frame.columns) == list(FRAME_COLUMNS) and len(frame) == 1
    assert frame.loc[0, "estimate"] == result.estimate and pd.isna(frame.loc[0, "window_start"])
    text = result.summary()
    assert result.method in text and "90% interval" in text and "assumptions:" in text


def test_by_window_runs_each_window():
    rows = [{"person_ref": f"p{i % 7}", "day": 1 + i % 10} for i in range(30)]
    records = observed(encounters=encounter_rows(rows))
    windows = rolling_windows((1, 10), 5)
    assert windows == [(1, 5), (6, 10)]
    frame, failures = by_window(chao, records, [*windows, (40, 41)])
    assert list(frame["window_start"]) == [1, 6]
    assert failures == [((40, 41), "no encounters in the window (days 40-41)")]


def _full_records():
    # 40 persons once, 12 twice, 4 three times; catches fall along the three primary stations.
    encounters = encounters_from_frequencies([40, 12, 4], days=10)
    places = np.array(["gate"] * 40 + ["yard"] * 24 + ["checkin"] * 12)
    encounters["place"] = places[np.random.default_rng(3).permutation(len(encounters))]
    checks = checks_table(
        [{"station": name, "vehicles": 1000, "checks": share} for name, share in (("gate", 200), ("yard", 300))]
        + [{"station": "checkin", "vehicles": 1000, "checks": 100}]
    )
    return observed(stations=stations_table(), checks=checks, encounters=encounters)


def test_run_all_lists_what_runs_and_what_cannot():
    results, failures = run_all(_full_records())
    names = [r.method for r in results]
    assert "Chao (1987) lower bound" in names and "Zippin (1956) removal MLE" in names
    reasons = dict(failures)
    assert "no sensitivities given" in reasons["Removal ML with known relative sensitivities"]
    assert "no sensitivities given" in reasons["Expansion by selection share and sensitivity at 'gate'"]
    assert all(np.isfinite([r.estimate, r.se, r.ci_low, r.ci_high]).all() for r in results)


def test_run_all_with_sensitivities():
    sensitivities = {"gate": (8, 2), "method_yard": (6, 4), "checkin": (5, 5)}
    results, failures = run_all(_full_records(), sensitivities=sensitivities, rng=np.random.default_rng(1))
    names = [r.method for r in results]
    assert "Removal ML with known relative sensitivities" in names
    assert sum(name.startswith("Expansion") for name in names) == 3
    gate = next(r for r in results if r.method.endswith("'gate'"))
    assert "boot_low" in gate.params
    assert not [f for f in failures if f[0].startswith("Expansion")]
