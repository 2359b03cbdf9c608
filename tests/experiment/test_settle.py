"""The coordinator's side of every answer: a shipped run lands whole, a run it cannot read back is a failure."""

from __future__ import annotations

from pathlib import Path

from abm.experiment.worker import RunTask, execute_run, is_complete, settle
from abm.world import file_hash, read_yaml_mapping

from .helpers import ROOT

WORLD = ROOT / "worlds" / "reference" / "small_inflow" / "world.yaml"


def task(out: Path, **changes: object) -> RunTask:
    fields = dict(run_id="r", point=0, replication=0, seed=3, days=2, warmup=0, world=read_yaml_mapping(WORLD),
                  world_sha256=file_hash(WORLD), out=str(out))
    fields.update(changes)
    return RunTask(**fields)  # type: ignore[arg-type]


def test_a_shipped_run_lands_whole_and_equals_one_written_in_place(tmp_path: Path) -> None:
    shipped, in_place = task(tmp_path / "shipped", ship=True), task(tmp_path / "in_place")
    answer = execute_run(shipped)
    assert answer["ok"] and "files" in answer and not (tmp_path / "shipped").exists()  # the worker wrote nothing here
    assert settle(shipped, answer)["ok"] and is_complete(tmp_path / "shipped", digests=True)
    assert settle(in_place, execute_run(in_place))["ok"]
    names = sorted(p.relative_to(tmp_path / "shipped") for p in (tmp_path / "shipped").rglob("*") if p.is_file())
    assert names == sorted(p.relative_to(tmp_path / "in_place") for p in (tmp_path / "in_place").rglob("*")
                           if p.is_file())
    for name in names:  # byte for byte: no file names the folder it was written in
        assert (tmp_path / "shipped" / name).read_bytes() == (tmp_path / "in_place" / name).read_bytes(), name


def test_a_run_reported_written_but_not_here_is_a_failure(tmp_path: Path) -> None:
    elsewhere = task(tmp_path / "elsewhere")
    answer = settle(elsewhere, {"run_id": "r", "ok": True, "summary": {}})  # as from a worker with another disk
    assert not answer["ok"] and "cannot read it back whole" in answer["error"]


def test_shipped_files_that_cannot_be_written_are_a_failure_not_a_crash(tmp_path: Path) -> None:
    out = tmp_path / "taken"
    (out / "something").mkdir(parents=True)  # not a run, and not empty: the rename cannot replace it
    shipped = task(out, ship=True)
    answer = settle(shipped, execute_run(shipped))
    assert not answer["ok"] and "could not be written here" in answer["error"]
    assert (out / "something").is_dir() and not [p for p in tmp_path.iterdir() if p.name.startswith(".")]
