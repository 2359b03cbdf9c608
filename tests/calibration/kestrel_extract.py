"""The fictional agency extract the demo calibrates to, and the settings that made it.

``worlds/kestrel_quay/observed_extract/`` holds the observed tables (CSV) of one
run of the Kestrel Quay world with the unknowns below set to values the world
file does not state; the run's truth is not shipped. A test regenerates the
extract from these settings and compares it byte for byte, and another checks
that the shipped calibration recovers them. All numbers are invented and
illustrative.

To write the extract again after a change that alters records on purpose::

    .venv/bin/python tests/calibration/kestrel_extract.py worlds/kestrel_quay/observed_extract
"""

from __future__ import annotations

import sys
from pathlib import Path
from typing import Any

import yaml

from abm.experiment.single import run_to_directory
from abm.observed import OBSERVED_COLUMNS, read_observed
from abm.world import parse_world

ROOT = Path(__file__).resolve().parents[2]
WORLD = ROOT / "worlds" / "kestrel_quay" / "world.yaml"
EXTRACT = ROOT / "worlds" / "kestrel_quay" / "observed_extract"

# What the calibration must recover (the world file says 12 groups a day, rationality 2 and the probe as trialled).
TRUE_ARRIVALS_PER_DAY = 9.0
TRUE_RATIONALITY = 3.0
TRUE_PROBE_SENSITIVITY = 0.85  # a multiplier on every detection chance of the gas probe
SEED = 4242
DAYS = 70  # the records' days, 0 .. 69; the calibration reads days 14 .. 69
WARMUP = 14


def true_world() -> dict[str, Any]:
    """The demo world with the generating values of the unknowns."""
    data = yaml.safe_load(WORLD.read_text(encoding="utf-8"))
    data["adversary"]["arrivals_per_day"] = TRUE_ARRIVALS_PER_DAY
    data["adversary"]["adaptive"]["rationality"] = TRUE_RATIONALITY
    probe = next(m for m in data["methods"] if m["name"] == "gas_probe")
    probe["detection"] = {k: v * TRUE_PROBE_SENSITIVITY for k, v in probe["detection"].items()}
    return data


def make_run(folder: Path) -> dict[str, Any]:
    """Simulate the generating run into ``folder/run``; return its summary (the truth the test compares with)."""
    return run_to_directory(parse_world(true_world(), "<extract>"), "extract", DAYS - WARMUP, SEED, folder / "run",
                            warmup=WARMUP)


def write_extract(run_dir: Path, out: Path) -> None:
    """The run's observed tables as CSV files, one per table, as an agency would hand them over."""
    out.mkdir(parents=True, exist_ok=True)
    for name, frame in read_observed(run_dir).items():
        if "minute" in frame:  # an agency logs events to the minute
            frame = frame.assign(minute=frame["minute"].round(0))
        frame[list(OBSERVED_COLUMNS[name])].to_csv(out / f"{name}.csv", index=False, lineterminator="\n")


if __name__ == "__main__":
    import tempfile

    with tempfile.TemporaryDirectory() as tmp:
        summary = make_run(Path(tmp))
        write_extract(Path(tmp) / "run", Path(sys.argv[1]))
    print({k: summary[k] for k in ("attempts", "persons", "crossings", "crossings_after_last_check", "detections")})
