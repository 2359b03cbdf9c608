"""An experiment whose unknowns come from a calibration's posterior (the experiment file's ``calibration:`` key).

Every check here is a property of the design (common random numbers, the
overlay order, reproducibility across executors, the digests); none is
against an outside source.
"""

from __future__ import annotations

import json
import shutil
from collections.abc import Callable
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd
import pytest

from abm.calibration import calibrate
from abm.experiment.batch import run_batch
from abm.experiment.design import ExperimentFileError, describe_experiment, load_plan
from abm.experiment.posterior import DRAW_COLUMN, POSTERIOR_TABLE, posterior_draws
from abm.experiment.store import EXPERIMENT_FILE, SUMMARY_TABLE, StoreError
from abm.experiment.single import run_to_directory
from abm.world import file_hash, load_world

from .helpers import ROOT, write_yaml
from .test_executors import _files

SMALL_WORLD = ROOT / "worlds" / "reference" / "small_inflow" / "world.yaml"
CALIBRATION = "calibration-out"  # the calibration folder's name beside each experiment file
UNKNOWNS = ("adversary.arrivals_per_day", "gate_fraction", "scan_factor")
SCAN_DETECTION = 0.7  # methods.scan.detection.default of the small world, which scan_factor multiplies
REPLICATIONS = 4


@pytest.fixture(scope="session")
def calibration_output(tmp_path_factory: pytest.TempPathFactory) -> Path:
    """A real, small calibration output: rejection ABC of three unknowns (one a multiplier) to a small-world run."""
    folder = tmp_path_factory.mktemp("calibrated")
    world = folder / "world.yaml"
    shutil.copy(SMALL_WORLD, world)
    target = folder / "target"
    run_to_directory(load_world(world), file_hash(world), 14, 101, target, warmup=3)
    priors = [
        {"path": "adversary.arrivals_per_day", "dist": "uniform", "low": 2, "high": 12},
        {"path": "stations.gate.selection.fraction", "name": "gate_fraction", "dist": "uniform", "low": 0.2,
         "high": 0.6},
        {"path": "methods.scan.detection", "name": "scan_factor", "multiply": True, "dist": "uniform", "low": 0.8,
         "high": 1.2},
    ]
    calibration = {
        "name": "small inflow (test)",
        "world": str(world),
        "observed": {"path": str(target), "first_day": 3},
        "days": 14,
        "warmup_days": 3,
        "seed": 5,
        "summaries": ["detections_by_station", "repeat_frequencies"],
        "priors": priors,
        "method": {"name": "rejection", "draws": 40, "accept": 0.25, "regression": False},
        "predictive_runs": 0,
        "self_check": 0,  # its coverage self-check is not what these tests are about
    }
    out = folder / CALIBRATION
    calibrate(write_yaml(folder / "calibration.yaml", calibration), out, figures=False)
    return out


def experiment_data(**changes: Any) -> dict[str, Any]:
    """Two design points x four replications; the factor sets the path of the unknown gate_fraction."""
    data: dict[str, Any] = {
        "name": "calibrated experiment (test)",
        "world": str(SMALL_WORLD),
        "days": 4,
        "warmup_days": 1,
        "replications": REPLICATIONS,
        "seed": 17,
        "calibration": CALIBRATION,
        "factors": [
            {"name": "gate_policy", "path": "stations.gate.selection.fraction", "levels": [0.3, 0.5], "baseline": 0.3}
        ],
    }
    data.update(changes)
    return data


@pytest.fixture
def calibrated_experiment(tmp_path: Path, calibration_output: Path) -> Callable[..., Path]:
    """An experiment file beside a copy of the calibration folder, in the test's folder."""
    shutil.copytree(calibration_output, tmp_path / CALIBRATION)

    def make(**changes: Any) -> Path:
        return write_yaml(tmp_path / "experiment.yaml", experiment_data(**changes))

    return make


@pytest.fixture(scope="module")
def batches(tmp_path_factory: pytest.TempPathFactory, calibration_output: Path) -> dict[str, Path]:
    """The same calibrated experiment through each executor (two workers where there are workers)."""
    folder = tmp_path_factory.mktemp("calibrated-batches")
    shutil.copytree(calibration_output, folder / CALIBRATION)
    path = write_yaml(folder / "experiment.yaml", experiment_data())
    outs = {}
    for name in ("serial", "processes", "dask"):
        out = folder / name
        result = run_batch(path, out, executor=name, workers=None if name == "serial" else 2, show_progress=False)
        assert result.failed == 0 and len(result.summary) == 2 * REPLICATIONS
        outs[name] = out
    return outs


def _run_records(batch: Path) -> dict[str, tuple[dict[str, Any], dict[str, Any]]]:
    """Each run's manifest values and world.json."""
    records = {}
    for run in sorted((batch / "runs").iterdir()):
        manifest = json.loads((run / "manifest.json").read_text(encoding="utf-8"))
        records[run.name] = (manifest["experiment_run"], json.loads((run / "world.json").read_text(encoding="utf-8")))
    return records


# -- (a) the draws -------------------------------------------------------------------------------


def test_replication_r_runs_the_same_posterior_particle_at_every_design_point(batches: dict[str, Path]) -> None:
    posterior = pd.read_parquet(batches["serial"].parent / CALIBRATION / POSTERIOR_TABLE)
    by_replication: dict[int, dict[str, Any]] = {}
    for run, world in _run_records(batches["serial"]).values():
        values = run["values"]
        drawn = {key: values[key] for key in (DRAW_COLUMN, *UNKNOWNS)}
        assert by_replication.setdefault(run["replication"], drawn) == drawn  # common random numbers
        particle = posterior.iloc[drawn[DRAW_COLUMN]]
        assert {u: float(particle[u]) for u in UNKNOWNS} == {u: drawn[u] for u in UNKNOWNS}  # a drawn row is a particle
        # The draw is written into the world before the point's changes: the factor wins on the path both set.
        assert world["adversary"]["arrivals_per_day"] == drawn["adversary.arrivals_per_day"]
        assert world["methods"][0]["detection"]["default"] == pytest.approx(SCAN_DETECTION * drawn["scan_factor"])
        assert world["stations"][0]["selection"]["fraction"] == values["gate_policy"]
    assert len(by_replication) == REPLICATIONS
    summary = pd.read_parquet(batches["serial"] / SUMMARY_TABLE)
    leading = ["run_id", "point", "replication", "gate_policy", "seed", DRAW_COLUMN, *UNKNOWNS]
    assert list(summary.columns[: len(leading)]) == leading
    assert list(summary[DRAW_COLUMN]) == [by_replication[r][DRAW_COLUMN] for r in summary["replication"]]


def test_the_batch_manifest_records_the_calibration_and_its_posterior(
    batches: dict[str, Path], calibration_output: Path
) -> None:
    record = json.loads((batches["serial"] / EXPERIMENT_FILE).read_text(encoding="utf-8"))
    calibration = record["calibration"]
    header = json.loads((calibration_output / "calibration.json").read_text(encoding="utf-8"))
    assert calibration["calibration_sha256"] == header["calibration_sha256"]
    assert calibration["folder"] == str((batches["serial"].parent / CALIBRATION).resolve())
    assert len(calibration["posterior_sha256"]) == 64 and len(calibration["draws"]) == REPLICATIONS
    assert [u["label"] for u in calibration["unknowns"]] == list(UNKNOWNS)


def test_draws_follow_the_weights_and_do_not_depend_on_how_many_replications() -> None:
    weights = np.array([0.0, 0.25, 0.0, 0.75])
    draws = posterior_draws(3, 400, weights)
    assert set(draws) == {1, 3}  # only particles with weight are drawn
    assert draws == posterior_draws(3, 400, weights)
    assert posterior_draws(3, 10, weights) == draws[:10]
    assert 0.65 < draws.count(3) / len(draws) < 0.85  # about 0.75 (binomial sd ~0.02 at n = 400)


def test_check_mentions_the_calibration(calibrated_experiment: Callable[..., Path]) -> None:
    text = describe_experiment(calibrated_experiment())
    assert "\n" not in text
    assert "unknowns from calibration small inflow (test)" in text and "3 parameters, 10 particles" in text


# -- (b) every executor gives the same tables ------------------------------------------------------


@pytest.mark.parametrize("executor", ["processes", "dask"])
def test_summary_tables_are_byte_identical_on_every_executor(batches: dict[str, Path], executor: str) -> None:
    assert (batches["serial"] / SUMMARY_TABLE).read_bytes() == (batches[executor] / SUMMARY_TABLE).read_bytes()
    serial, other = _files(batches["serial"] / "runs" / "p001-r03"), _files(batches[executor] / "runs" / "p001-r03")
    assert serial.keys() == other.keys() and "world.json" in serial
    for name in serial:
        if name != "manifest.json":  # it records the run's own folder; as data, the manifests agree
            assert serial[name] == other[name], name
    assert json.loads(serial["manifest.json"]) == json.loads(other["manifest.json"])


# -- (c) validation ------------------------------------------------------------------------------


def _rewrite_header(folder: Path, change: Callable[[dict[str, Any]], None]) -> None:
    header = folder / "calibration.json"
    record = json.loads(header.read_text(encoding="utf-8"))
    change(record)
    header.write_text(json.dumps(record), encoding="utf-8")


def _rewrite_posterior(folder: Path, change: Callable[[pd.DataFrame], pd.DataFrame]) -> None:
    table = folder / POSTERIOR_TABLE
    change(pd.read_parquet(table)).to_parquet(table)


def _move_gate_fraction(record: dict[str, Any], path: str) -> None:
    record["calibration"]["priors"][1]["path"] = path  # a named prior: its column stays gate_fraction


BREAKAGES: dict[str, tuple[Callable[[Path], Any], dict[str, Any], str]] = {
    "no folder": (lambda f: shutil.rmtree(f), {}, "no calibration folder at"),
    "no header": (lambda f: (f / "calibration.json").unlink(), {}, "no calibration.json in"),
    "unreadable header": (
        lambda f: (f / "calibration.json").write_text("{not json"), {}, "calibration.json: unreadable"
    ),
    "header of something else": (lambda f: (f / "calibration.json").write_text("{}"), {}, "not a calibration record"),
    "no posterior": (lambda f: (f / POSTERIOR_TABLE).unlink(), {}, "no posterior.parquet in"),
    "unreadable posterior": (
        lambda f: (f / POSTERIOR_TABLE).write_bytes(b"PAR1 not really"), {}, "posterior.parquet: unreadable"
    ),
    "path leads nowhere": (
        lambda f: _rewrite_header(f, lambda r: _move_gate_fraction(r, "stations.nowhere.selection.fraction")),
        {},
        "the unknown 'gate_fraction' is not in the experiment's world: no item named 'nowhere'",
    ),
    "path makes up a key": (
        lambda f: _rewrite_header(f, lambda r: _move_gate_fraction(r, "stations.gate.selection.share")),
        {},
        "the unknown 'gate_fraction' is not in the experiment's world: stations.gate.selection.share does not exist",
    ),
    "invalid world at a draw": (
        lambda f: _rewrite_posterior(f, lambda p: p.assign(**{"adversary.arrivals_per_day": -1.0})),
        {},
        "at design point 0 (gate_policy=0.3): in the world, adversary.arrivals_per_day",
    ),
    "a factor takes an unknown's column": (
        lambda f: None,
        {"factors": [{"name": "scan_factor", "path": "stations.quay.lanes", "levels": [2, 3]}]},
        "the unknown 'scan_factor' and factors[0] would share a run-table column",
    ),
    "an unnamed factor at an unknown's path": (
        lambda f: None,
        {"factors": [{"path": "adversary.arrivals_per_day", "levels": [4, 8]}]},
        "the unknown 'adversary.arrivals_per_day' and factors[0] would share a run-table column; give factors[0] "
        "another name",
    ),
    "a factor named like the draw column": (
        lambda f: None,
        {"factors": [{"name": DRAW_COLUMN, "path": "stations.quay.lanes", "levels": [2, 3]}]},
        f"'{DRAW_COLUMN}' is the run-table column of the posterior draw",
    ),
    "an unknown named like a run-table column": (
        lambda f: (
            _rewrite_header(f, lambda r: r["calibration"]["priors"][2].update(name="seed")),
            _rewrite_posterior(f, lambda p: p.rename(columns={"scan_factor": "seed"})),
        ),
        {},
        "the unknown 'seed' would take a run-table column",
    ),
}


@pytest.mark.parametrize("breakage", sorted(BREAKAGES))
def test_a_calibration_that_cannot_drive_the_unknowns_is_one_line_naming_the_key(
    calibrated_experiment: Callable[..., Path], breakage: str
) -> None:
    damage, changes, expected = BREAKAGES[breakage]
    path = calibrated_experiment(**changes)
    damage(path.parent / CALIBRATION)
    with pytest.raises(ExperimentFileError) as caught:
        load_plan(path)
    message = str(caught.value)
    assert "\n" not in message
    assert message.startswith(f"{path}: calibration: ")
    assert expected in message


# -- (d) resuming ------------------------------------------------------------------------------


def test_resume_runs_nothing_again_with_the_same_posterior_and_refuses_a_changed_one(
    batches: dict[str, Path], calibrated_experiment: Callable[..., Path], tmp_path: Path
) -> None:
    path = calibrated_experiment()
    out = tmp_path / "batch"
    shutil.copytree(batches["serial"], out)
    # The digest is of the particles' values and weights, not the file: the same posterior written again
    # (here with another compression, so other bytes) is the same posterior.
    table = tmp_path / CALIBRATION / POSTERIOR_TABLE
    before = table.read_bytes()
    pd.read_parquet(table).to_parquet(table, compression="gzip")
    assert table.read_bytes() != before
    result = run_batch(path, out, resume=True, show_progress=False)
    assert result.ran == 0 and result.failed == 0
    assert (out / SUMMARY_TABLE).read_bytes() == (batches["serial"] / SUMMARY_TABLE).read_bytes()

    uneven = np.arange(1, len(pd.read_parquet(table)) + 1)
    _rewrite_posterior(tmp_path / CALIBRATION, lambda p: p.assign(weight=uneven / uneven.sum()))
    with pytest.raises(StoreError) as caught:
        run_batch(path, out, resume=True, show_progress=False)
    assert "\n" not in str(caught.value) and "different posterior" in str(caught.value)
