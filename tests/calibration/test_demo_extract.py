"""The demo's agency extract: made by the settings in kestrel_extract.py, and what the calibration recovers.

The extract (worlds/kestrel_quay/observed_extract) must be exactly what those settings give, so that
the calibration test below checks recovery of known values. Recovery is judged by the calibration's
own 90% intervals (a property of the method: a calibrated interval holds the truth nine times in ten,
so one miss among several quantities would not by itself be a fault; these settings and seed are
fixed, so the outcome is too).
"""

from __future__ import annotations

from pathlib import Path

import pytest
import yaml

from abm.calibration import load_calibration, run_calibration
from abm.experiment.executors import ProcessExecutor

from .kestrel_extract import (
    EXTRACT, ROOT, TRUE_ARRIVALS_PER_DAY, TRUE_RATIONALITY, make_run, write_extract,
)

CALIBRATION = ROOT / "worlds" / "kestrel_quay" / "calibration.yaml"


@pytest.fixture(scope="module")
def generating_run(tmp_path_factory: pytest.TempPathFactory) -> tuple[Path, dict]:
    folder = tmp_path_factory.mktemp("extract")
    summary = make_run(folder)
    return folder / "run", summary


def test_the_shipped_extract_is_what_its_settings_make(generating_run, tmp_path: Path) -> None:
    run_dir, _ = generating_run
    write_extract(run_dir, tmp_path)
    shipped = sorted(p.name for p in EXTRACT.glob("*.csv"))
    assert shipped == ["checks.csv", "encounters.csv", "false_alarms.csv", "stations.csv"]
    for name in shipped:
        assert (tmp_path / name).read_bytes() == (EXTRACT / name).read_bytes(), name
    assert not (EXTRACT / "truth").exists() and not list(EXTRACT.glob("*.parquet"))


def test_the_shipped_calibration_recovers_what_made_the_extract(generating_run, tmp_path: Path) -> None:
    # The shipped calibration file as it stands, less its posterior predictive runs (they do not touch the
    # posterior or the self-check): 1500 candidate runs, a few minutes on two cores.
    _, truth = generating_run
    data = yaml.safe_load(CALIBRATION.read_text(encoding="utf-8"))
    data.update(predictive_runs=0, world=str(CALIBRATION.parent / data["world"]),
                observed={**data["observed"], "path": str(EXTRACT)})
    path = tmp_path / "calibration.yaml"
    path.write_text(yaml.safe_dump(data), encoding="utf-8")
    with ProcessExecutor(2) as pool:
        result = run_calibration(load_calibration(path), tmp_path / "out", pool, figures=False)
    posterior = result.to_frame().set_index("quantity")

    def inside(quantity: str, value: float) -> bool:
        return posterior.loc[quantity, "low"] <= value <= posterior.loc[quantity, "high"]

    assert inside("adversary.arrivals_per_day", TRUE_ARRIVALS_PER_DAY)
    assert inside("adversary.adaptive.rationality", TRUE_RATIONALITY)
    for quantity in ("attempts", "persons", "crossings", "crossings_after_last_check"):
        assert inside(quantity, truth[quantity]), (quantity, truth[quantity], posterior.loc[quantity])
    # The probe's sensitivity is not identified by these records, and the calibration says so instead of
    # claiming it: its posterior is nearly its prior (the truth, TRUE_PROBE_SENSITIVITY = 0.85, lies in the prior's lower tail).
    assert any(w.startswith("warning: probe_sensitivity: not identified") for w in result.warnings)
    prior = next(p for p in result.priors.priors if p.name == "probe_sensitivity")
    assert posterior.loc["probe_sensitivity", "sd"] > 0.9 * prior.sd()
    # Its own self-check finds its intervals close to nominal: no coverage warning.
    assert not [w for w in result.warnings if "self-check trials" in w], result.warnings
