"""Calibrating the port model to synthetic observed records of a run with a known inflow.

The small reference world (worlds/reference/small_inflow) with arrivals_per_day = 6 is run for
7 + 28 days; everything but the run's observed/ folder is deleted, and the inflow is calibrated
from a uniform(1, 20) prior on the observed summaries alone. The 90% credible interval must cover the
true inflow and the run's true crossings (persons who crossed in the 28 days), for static and for
adaptive behaviour. One interval covering once is a weak check on its own (a calibrated 90% interval
misses one time in ten), so each test also asks that the posterior learnt something: its SD is well
below the prior's (5.5 for uniform(1, 20)).

Settings are small so the two runs stay within about a minute on two cores: ABC-SMC with 20 particles
and two generations (static), rejection with 150 prior draws keeping 40% and the local-linear
adjustment (adaptive). The adjustment fits one slope per summary, so the summaries are few (6: detections
per station and the repeat-encounter frequencies): with many summaries and few draws the fit follows
the noise and the interval comes out too narrow.
"""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest

from abm.calibration import load_calibration, run_calibration
from abm.calibration.config import LATENT
from abm.calibration.simulator import CalibrationStoreError, ModelSimulator
from abm.experiment.executors import ProcessExecutor, SerialExecutor
from abm.experiment.worker import is_complete

from .helpers import TRUE_ARRIVALS, calibration_data, make_target, world_file, write_yaml

PRIOR_SD = 19 / np.sqrt(12)


@pytest.fixture(scope="module")
def executor():
    with ProcessExecutor(2) as pool:
        yield pool


def interval(result, quantity: str) -> tuple[float, float, float]:
    row = result.to_frame().set_index("quantity").loc[quantity]
    return float(row["low"]), float(row["high"]), float(row["sd"])


def test_static_inflow_by_abc_smc_covers_the_truth(tmp_path, executor, static_target):
    world, target, truth = static_target
    assert not (target / "truth").exists() and [p.name for p in target.iterdir()] == ["observed"]
    data = calibration_data(
        world, target, method={"name": "smc", "particles": 20, "generations": 2, "initial_draws": 60}, predictive_runs=6
    )
    result = run_calibration(load_calibration(write_yaml(tmp_path / "c.yaml", data)), tmp_path / "out", executor)
    low, high, sd = interval(result, "adversary.arrivals_per_day")
    assert low <= TRUE_ARRIVALS <= high and sd < PRIOR_SD / 2
    low, high, _ = interval(result, "crossings")
    assert low <= truth["crossings"] <= high
    assert len(result.posterior.generations) == 2
    # The store: each generation's simulations and particles, the tables, the figures; no run directories.
    out = tmp_path / "out"
    for k in (0, 1):
        particles = pd.read_parquet(out / f"gen-{k}" / "particles.parquet")
        assert len(particles) == 20 and particles["weight"].sum() == pytest.approx(1.0)
        simulations = pd.read_parquet(out / f"gen-{k}" / "simulations.parquet").set_index("simulation")
        assert set(particles["simulation"]) <= set(simulations.index)
        assert not any((out / label).exists() for label in particles["simulation"])
    for name in ("posterior.parquet", "posterior_summary.parquet", "diagnostics.parquet", "predictive_check.parquet",
                 "summary.txt", "figures/posterior.png", "figures/predictive_check.png"):
        assert (out / name).is_file(), name
    assert len(pd.read_parquet(out / "predictive" / "simulations.parquet")) == 6
    # The bound: at most 5 KB of disk per candidate by default (its journal row and its share of the tables).
    stages = [folder for folder in out.iterdir() if folder.is_dir() and folder.name != "figures"]
    size = sum(path.stat().st_size for folder in stages for path in folder.rglob("*") if path.is_file())
    simulations = sum(len(pd.read_parquet(folder / "simulations.parquet")) for folder in stages)
    assert size / simulations <= 5 * 1024
    assert "persons who eventually crossed (some after earlier detections): " in result.summary()


def test_adaptive_inflow_by_rejection_and_regression_covers_the_truth(tmp_path, executor):
    world = world_file(tmp_path, "adaptive")
    target, truth = make_target(tmp_path, world, seed=202)
    data = calibration_data(world, target, method={"name": "rejection", "draws": 150, "accept": 0.4}, predictive_runs=4)
    result = run_calibration(load_calibration(write_yaml(tmp_path / "c.yaml", data)), tmp_path / "out", executor, figures=False)
    low, high, sd = interval(result, "adversary.arrivals_per_day")
    assert low <= TRUE_ARRIVALS <= high and sd < PRIOR_SD / 2
    low, high, _ = interval(result, "crossings")
    assert low <= truth["crossings"] <= high
    assert result.posterior.final.theta_raw is not None, "the regression adjustment was applied"


def test_a_calibration_resumes_without_repeating_finished_runs(tmp_path, calibration_file):
    path = calibration_file()
    out = tmp_path / "out"
    first = run_calibration(load_calibration(path), out, SerialExecutor(), figures=False)
    assert (first.ran, first.reused) == (12 + 2, 0)
    with pytest.raises(CalibrationStoreError, match="--resume"):
        run_calibration(load_calibration(path), out, SerialExecutor())
    # Interrupted mid-round: the journal's lines hold 11 of the 12 draws and a last line cut short, the table of the
    # round and the particles were never written.
    table = out / "gen-0" / "simulations.parquet"
    rows = pd.read_parquet(table).to_dict("records")
    lines = [json.dumps({k: (v.item() if hasattr(v, "item") else v) for k, v in row.items()}) for row in rows
             if row["simulation"] != "gen-0/p000003"]
    (out / "gen-0" / "simulations.jsonl").write_text("\n".join(lines) + "\n" + lines[0][:40], encoding="utf-8")
    table.unlink()
    (out / "gen-0" / "particles.parquet").unlink()
    again = run_calibration(load_calibration(path), out, SerialExecutor(), resume=True, figures=False)
    assert (again.ran, again.reused) == (1, 12 + 2 - 1)
    np.testing.assert_array_equal(again.posterior.theta, first.posterior.theta)
    np.testing.assert_array_equal(again.posterior.latent, first.posterior.latent)
    # A changed calibration is refused in the same folder.
    changed = calibration_file(seed=6)
    with pytest.raises(CalibrationStoreError, match="different calibration"):
        run_calibration(load_calibration(changed), out, SerialExecutor(), resume=True)
    header = json.loads((out / "calibration.json").read_text())
    assert set(header["observed_summaries"]) == set(load_calibration(path).summary_spec.names())


def test_changed_settings_resume_on_the_runs_whose_draws_did_not_change(tmp_path, calibration_file):
    out = tmp_path / "out"
    first = run_calibration(load_calibration(calibration_file()), out, SerialExecutor(), figures=False)
    assert (first.ran, first.reused) == (12 + 2, 0)
    # Another accept share simulates nothing new for the prior draws.
    other = calibration_file(method={"name": "rejection", "draws": 12, "accept": 0.25, "regression": False})
    again = run_calibration(load_calibration(other), out, SerialExecutor(), resume=True, figures=False)
    assert again.reused >= 12 and again.ran <= 2  # only predictive runs at other posterior draws, if any
    assert (out / "gen-0" / "reference.parquet").is_file()
    # More draws: the prior is sampled row by row, so the first 12 draws are the same and only 4 are new.
    more = calibration_file(method={"name": "rejection", "draws": 16, "accept": 0.5, "regression": False})
    grown = run_calibration(load_calibration(more), out, SerialExecutor(), resume=True, figures=False)
    reference = pd.read_parquet(out / "gen-0" / "reference.parquet")
    first_reference = first.posterior.generations[0].reference
    assert len(reference) == 16
    np.testing.assert_array_equal(reference["adversary.arrivals_per_day"].to_numpy()[:12], first_reference.theta[:, 0])
    assert grown.ran - 2 <= 4 and grown.reused >= 12
    # Other summary statistics: a lean candidate kept only the old ones, so it runs again.
    fewer = calibration_file(summaries=["detections_by_station"], method={"name": "rejection", "draws": 16,
                                                                         "accept": 0.5, "regression": False})
    assert run_calibration(load_calibration(fewer), out, SerialExecutor(), resume=True, figures=False).ran >= 16
    # A changed seed changes every draw: refused, nothing removed.
    with pytest.raises(CalibrationStoreError, match="world, priors, seed or days changed"):
        run_calibration(load_calibration(calibration_file(seed=6)), out, SerialExecutor(), resume=True)


def test_kept_runs_are_whole_run_directories_and_serve_other_summaries(tmp_path, calibration_file):
    out = tmp_path / "out"
    first = run_calibration(load_calibration(calibration_file()), out, SerialExecutor(), figures=False, keep_runs=True)
    lean = run_calibration(load_calibration(calibration_file()), tmp_path / "lean", SerialExecutor(), figures=False)
    pd.testing.assert_frame_equal(first.posterior.sample_frame(), lean.posterior.sample_frame())
    # A worker's figures, computed in memory, are those read back from the run directory it kept.
    plan = load_calibration(calibration_file())
    reader = ModelSimulator(plan, out, SerialExecutor())
    names = [f"summary:{n}" for n in plan.summary_spec.names()]
    for row in pd.read_parquet(out / "gen-0" / "simulations.parquet").to_dict("records"):
        assert is_complete(out / row["simulation"], digests=True), row["simulation"]
        from_disk = reader.figures_from_directory(out / row["simulation"])
        assert [row[n] for n in names] == from_disk["summaries"]
        assert [row[k] for k in LATENT] == from_disk["latent"]
    assert not (tmp_path / "lean" / "gen-0" / "p000000").exists()
    # Fewer summaries: every kept run serves again, its summaries computed from its records.
    fewer = calibration_file(summaries=["detections_by_station"], method={"name": "rejection", "draws": 12,
                                                                         "accept": 0.25, "regression": False})
    again = run_calibration(load_calibration(fewer), out, SerialExecutor(), resume=True, figures=False, keep_runs=True)
    assert again.reused >= 12 and again.ran <= 2


def test_the_self_check_is_written_printed_and_warned_about(tmp_path, static_target):
    world, target, _ = static_target
    data = calibration_data(world, target, method={"name": "rejection", "draws": 60, "accept": 0.5}, self_check=50,
                            predictive_runs=0)
    result = run_calibration(load_calibration(write_yaml(tmp_path / "c.yaml", data)), tmp_path / "out", SerialExecutor(),
                             figures=False)
    table = pd.read_parquet(tmp_path / "out" / "self_check.parquet")
    assert list(table.columns) == ["quantity", "level", "trials", "covered", "coverage", "coverage_low", "coverage_high",
                                   "mean_width", "rmse"]
    assert list(table["quantity"]) == ["adversary.arrivals_per_day", "attempts", "persons", "crossings",
                                       "crossings_after_last_check"]
    assert (table["trials"] == 50).all() and table["coverage"].between(0, 1).all()
    text = (tmp_path / "out" / "summary.txt").read_text()
    assert "Self-check: leave-one-out cross-validation of this very rejection calibration" in text
    assert "distinct persons who tried: " in text and "self-check trials" in text
    assert text.count("warning: ") == len(result.warnings)
