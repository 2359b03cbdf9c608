"""`undertow run --warmup DAYS`: the warm-up means what a batch's ``warmup_days`` means.

Warm-up days are simulated first and left out of the summary (and of the
pooled queue table); the records keep every day. So a run of 4 warm-up days
and 6 days holds the very records of a 10-day run with the same seed, and only
its summary differs.
"""

from __future__ import annotations

import json
from pathlib import Path

import pandas as pd
import pytest

from abm.cli import main
from abm.records import DEPARTURES_FILE, QUEUE_HOURS_FILE, QUEUES_FILE

ROOT = Path(__file__).resolve().parents[1]
WORLD = ROOT / "worlds" / "kestrel_quay" / "world.yaml"
RECORDS = [
    "truth/attempts.parquet", "truth/arrivals.parquet", "truth/exits.parquet", "observed/checks.parquet",
    "observed/encounters.parquet", "observed/false_alarms.parquet", "observed/stations.parquet", "daily.parquet",
    "methods.parquet", QUEUES_FILE, DEPARTURES_FILE,
]


def _run(capsys: pytest.CaptureFixture[str], *argv: str | Path) -> tuple[int, str, str]:
    try:
        code = main([str(a) for a in argv])
    except SystemExit as exc:  # argparse's usage errors
        code = exc.code if isinstance(exc.code, int) else 1
    out, err = capsys.readouterr()
    return code, out, err


def test_warm_up_days_are_simulated_kept_in_the_records_and_left_out_of_the_summary(
    tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    warm, whole = tmp_path / "warm", tmp_path / "whole"
    code, out, _ = _run(capsys, "run", WORLD, "--days", "6", "--warmup", "4", "--seed", "2", "--out", warm)
    assert code == 0 and "6 days after a 4-day warm-up (days 4-9)" in out
    assert _run(capsys, "run", WORLD, "--days", "10", "--seed", "2", "--out", whole)[0] == 0
    for name in RECORDS:
        assert (warm / name).read_bytes() == (whole / name).read_bytes(), f"{name} differs"
    manifest = json.loads((warm / "manifest.json").read_text(encoding="utf-8"))
    assert (manifest["days"], manifest["warmup_days"]) == (6, 4)
    summary = json.loads((warm / "summary.json").read_text(encoding="utf-8"))
    daily = pd.read_parquet(warm / "daily.parquet")
    assert summary["warmup_days"] == 4 and summary["days"] == 6
    assert summary["vehicles"] == int(daily.loc[daily["day"] >= 4, "vehicles"].sum())
    assert summary["vehicles"] < json.loads((whole / "summary.json").read_text(encoding="utf-8"))["vehicles"]
    pooled = pd.read_parquet(warm / QUEUE_HOURS_FILE)
    assert set(pooled["first_day"]) == {4} and set(pooled["last_day"]) == {9}
    assert set(pd.read_parquet(whole / QUEUE_HOURS_FILE)["first_day"]) == {0}


@pytest.mark.parametrize("value", ["-1", "x", "2.5", ""])
def test_a_bad_warm_up_is_refused_in_one_line_naming_the_option(
    value: str, tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    code, _, err = _run(capsys, "run", WORLD, "--days", "3", f"--warmup={value}", "--out", tmp_path / "run")
    assert code == 2
    assert len(err.strip().splitlines()) == 1 and "--warmup" in err and "Traceback" not in err
    assert not (tmp_path / "run").exists()
