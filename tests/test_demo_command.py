"""`undertow demo`'s three stages on small stand-ins for its files: calibrate, compare under the posterior, brief.

The real demo (the Kestrel Quay calibration and a year-long batch) takes minutes; here the command's
own code runs on the small reference world, so what is checked is the flow: every stage says what it
does, the batch's unknowns come from the calibration it has just made, the briefing answers from it,
and a resumed demo repeats no run. Properties of the command, no outside source.
"""

from __future__ import annotations

import json
import shutil
from pathlib import Path

import pandas as pd
import pytest
import yaml

import abm.demo
from abm.cli import main
from abm.experiment.single import run_to_directory
from abm.world import file_hash, load_world

ROOT = Path(__file__).resolve().parents[1]
SMALL_WORLD = ROOT / "worlds" / "reference" / "small_inflow" / "world.yaml"


@pytest.fixture
def small_demo(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> Path:
    files = tmp_path / "files"
    files.mkdir()
    shutil.copy(SMALL_WORLD, files / "world.yaml")
    records = files / "extract"
    run_to_directory(load_world(files / "world.yaml"), file_hash(files / "world.yaml"), 14, 8, records, warmup=7)
    calibration = {
        "name": "small demo calibration", "world": "world.yaml", "observed": {"path": "extract", "first_day": 7},
        "days": 14, "warmup_days": 7, "seed": 2, "summaries": ["detections_by_station", "repeat_frequencies"],
        "priors": [{"path": "adversary.arrivals_per_day", "dist": "uniform", "low": 2, "high": 12}],
        "method": {"name": "rejection", "draws": 60, "accept": 0.5}, "predictive_runs": 2, "self_check": 50,
    }
    experiment = {
        "name": "small demo", "world": "world.yaml", "days": 5, "warmup_days": 1, "replications": 2, "seed": 4,
        "factors": [{"name": "policy", "baseline": "current", "levels": [
            {"name": "current", "set": {}}, {"name": "more_quay", "set": {"stations.quay.selection.fraction": 0.7}}]}],
    }
    for name, data in (("calibration.yaml", calibration), ("experiment.yaml", experiment)):
        (files / name).write_text(yaml.safe_dump(data, sort_keys=False), encoding="utf-8")
    monkeypatch.setattr(abm.demo, "DEMO_CALIBRATION", files / "calibration.yaml")  # an absolute path wins
    monkeypatch.setattr(abm.demo, "DEMO_EXPERIMENT", files / "experiment.yaml")
    return tmp_path / "demo"


def test_the_demo_calibrates_compares_under_the_posterior_and_briefs(small_demo: Path, capsys) -> None:
    assert main(["demo", "--out", str(small_demo), "--workers", "2"]) == 0
    printed = capsys.readouterr().out
    for stage in ("1/3 calibrating", "2/3 comparing policies", "3/3 writing the briefing"):
        assert f"undertow demo: {stage}" in printed
    assert "persons who eventually crossed (some after earlier detections): " in printed and "self-check trials" in printed
    record = json.loads((small_demo / "batch" / "experiment.json").read_text(encoding="utf-8"))
    assert Path(record["calibration"]["folder"]) == (small_demo / "calibration").resolve()
    summary = pd.read_parquet(small_demo / "batch" / "summary.parquet")
    particles = pd.read_parquet(small_demo / "calibration" / "posterior.parquet")
    drawn = particles.loc[summary["posterior_draw"], "adversary.arrivals_per_day"].to_numpy()
    assert list(summary["adversary.arrivals_per_day"]) == list(drawn)
    html = (small_demo / "batch" / "briefing.html").read_text(encoding="utf-8")
    assert "How many are trying and getting through" in html and "Calibrated to the agency" in html
    # Again with --resume: every run is kept, nothing is simulated twice.
    assert main(["demo", "--out", str(small_demo), "--workers", "2", "--resume"]) == 0
    printed = capsys.readouterr().out
    assert "Candidate runs: 0 simulated now" in (small_demo / "calibration" / "summary.txt").read_text()
    assert "4 of 4 runs complete (0 run now)" in printed
