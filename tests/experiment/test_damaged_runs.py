"""Damaged stores: a complete run whose files no longer match its record is run again on --resume, refused by readers."""

from __future__ import annotations

from collections.abc import Callable
from pathlib import Path

import pandas as pd
import pytest

from abm.cli import main
from abm.run_files import FILES_RECORD, damage

from .helpers import experiment


def _cut(path: Path) -> None:
    data = path.read_bytes()
    path.write_bytes(data[: len(data) // 2])


@pytest.fixture
def batch(tmp_path: Path, make_experiment: Callable[..., Path]) -> tuple[Path, Path, pd.DataFrame]:
    path = make_experiment(experiment(days=3, factors=[]))
    out = tmp_path / "out"
    assert main(["batch", str(path), "--out", str(out)]) == 0
    return path, out, pd.read_parquet(out / "summary.parquet")


def test_every_run_records_its_files(batch: tuple[Path, Path, pd.DataFrame]) -> None:
    _, out, _ = batch
    for run_dir in (out / "runs").iterdir():
        assert (run_dir / FILES_RECORD).is_file() and damage(run_dir) is None


@pytest.mark.parametrize("harm", ["truncate", "remove", "rewrite"])
def test_resume_runs_a_damaged_run_again(batch: tuple[Path, Path, pd.DataFrame], harm: str,
                                         capsys: pytest.CaptureFixture[str]) -> None:
    path, out, summary = batch
    target = out / "runs" / "p000-r01" / "observed" / "checks.parquet"
    if harm == "truncate":
        _cut(target)
    elif harm == "remove":
        target.unlink()  # summary.json is still there: damaged, not complete
    else:
        data = bytearray(target.read_bytes())
        data[len(data) // 2] ^= 0xFF  # same size, other content
        target.write_bytes(bytes(data))
    assert damage(target.parent.parent) is not None
    capsys.readouterr()
    assert main(["batch", str(path), "--out", str(out), "--resume"]) == 0
    err = capsys.readouterr().err
    assert "warning: 1 damaged run is run again" in err and "checks.parquet" in err
    assert damage(target.parent.parent) is None
    again = pd.read_parquet(out / "summary.parquet")
    pd.testing.assert_frame_equal(again, summary)  # the same as the undamaged batch (runs are deterministic)


def test_readers_refuse_a_damaged_run_in_one_line(batch: tuple[Path, Path, pd.DataFrame],
                                                  capsys: pytest.CaptureFixture[str]) -> None:
    _, out, _ = batch
    run = out / "runs" / "p000-r00"
    _cut(run / "observed" / "encounters.parquet")
    _cut(run / "truth" / "attempts.parquet")
    for command in (["brief", str(out)], ["estimate", str(run), "--out", str(out / "est")],
                    ["compare", str(out / "runs" / "p000-r01"), str(run)]):
        capsys.readouterr()
        assert main(command) == 2, command
        err = capsys.readouterr().err
        assert err.count("\n") == 1 and ".parquet" in err and "damaged" in err, err
    assert not (out / "est").exists() and not (out / "briefing.html").exists()


def test_a_damaged_batch_record_is_named_not_an_internal_error(batch: tuple[Path, Path, pd.DataFrame],
                                                               capsys: pytest.CaptureFixture[str]) -> None:
    path, out, _ = batch
    (out / "experiment.json").write_text("{broken", encoding="utf-8")
    for command in (["brief", str(out)], ["batch", str(path), "--out", str(out), "--resume"]):
        capsys.readouterr()
        assert main(command) == 2
        err = capsys.readouterr().err
        assert err.count("\n") == 1 and "experiment.json: damaged" in err, err


def test_damaged_calibration_and_search_records_are_named(tmp_path: Path) -> None:
    from abm.analysis.policy_search.run import HEADER as SEARCH_HEADER
    from abm.analysis.policy_search import load_optimisation
    from abm.analysis.policy_search.run import _open_store
    from abm.calibration.config import load_calibration
    from abm.calibration.simulator import HEADER as CALIBRATION_HEADER
    from abm.calibration.simulator import CalibrationStore
    from abm.errors import InputError

    root = Path(__file__).resolve().parents[2] / "worlds" / "kestrel_quay"
    calibration, search = tmp_path / "calibration", tmp_path / "search"
    for folder, name in ((calibration, CALIBRATION_HEADER), (search, SEARCH_HEADER)):
        folder.mkdir()
        (folder / name).write_text("{broken", encoding="utf-8")
    with pytest.raises(InputError, match="damaged") as caught:
        CalibrationStore(calibration, load_calibration(root / "calibration.yaml")).open([], resume=True)
    assert CALIBRATION_HEADER in str(caught.value) and "\n" not in str(caught.value)
    with pytest.raises(InputError, match="damaged") as caught:
        _open_store(search, load_optimisation(root / "optimise.yaml"), [], resume=True)
    assert SEARCH_HEADER in str(caught.value) and "\n" not in str(caught.value)
