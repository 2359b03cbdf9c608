"""`undertow export`: a run's or a batch's tables as CSV or one workbook, with the same values as the Parquet tables."""

from __future__ import annotations

import contextlib
import io
import json
import os
import shutil
import socket
import sys
import time
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
import yaml

from abm.cli import main
from abm.experiment.export import EXPORT_RECORD, Part, Table, unique_names, write_xlsx

ROOT = Path(__file__).resolve().parents[1]
DEMO = ROOT / "worlds" / "kestrel_quay" / "world.yaml"

# Two policies, two replications of two days after a day's warm-up: four runs, a few seconds in all.
EXPERIMENT = {
    "kind": "experiment",
    "name": "export test (illustrative)",
    "world": str(DEMO),
    "days": 2,
    "warmup_days": 1,
    "replications": 2,
    "seed": 3,
    "factors": [{
        "name": "policy",
        "baseline": "current",
        "levels": [
            {"name": "current", "set": {}},
            {"name": "double_imaging", "set": {"stations.gate_imaging.selection.fraction": 0.4}},
        ],
    }],
}


def invoke(capsys: pytest.CaptureFixture[str], *argv: str | Path) -> tuple[int, str, str]:
    """Run ``abm.cli.main`` in process; argparse's usage errors leave through SystemExit, counted alike."""
    try:
        code = main([str(a) for a in argv])
    except SystemExit as exc:
        code = exc.code if isinstance(exc.code, int) else 1
    out, err = capsys.readouterr()
    return code, out, err


def quietly(*argv: str | Path) -> int:
    """A command whose output no test reads (for module fixtures, where capsys is not at hand)."""
    with contextlib.redirect_stdout(io.StringIO()), contextlib.redirect_stderr(io.StringIO()):
        return main([str(a) for a in argv])


@pytest.fixture(scope="module")
def run_dir(tmp_path_factory: pytest.TempPathFactory) -> Path:
    out = tmp_path_factory.mktemp("export") / "run"
    assert quietly("run", DEMO, "--days", "3", "--seed", "1", "--out", out) == 0
    return out


@pytest.fixture(scope="module")
def batch_dir(tmp_path_factory: pytest.TempPathFactory) -> Path:
    folder = tmp_path_factory.mktemp("export")
    experiment = folder / "experiment.yaml"
    experiment.write_text(yaml.safe_dump(EXPERIMENT), encoding="utf-8")
    assert quietly("batch", experiment, "--out", folder / "batch") == 0
    return folder / "batch"


def run_parquet(run: Path) -> dict[str, Path]:
    """A run's Parquet tables by the name export gives them (truth/attempts.parquet -> truth_attempts)."""
    return {p.relative_to(run).with_suffix("").as_posix().replace("/", "_"): p for p in run.rglob("*.parquet")}


def text(value: object) -> str:
    return "" if value is None or (not isinstance(value, str) and pd.isna(value)) else str(value)


# openpyxl writes numbers to 16 significant digits ("%.16g"), one short of what a double can need; CSV keeps all 17.
WORKBOOK_RTOL = 1e-15


def assert_same_values(expected: pd.DataFrame, got: pd.DataFrame, where: str, rtol: float = 0.0) -> None:
    """Same columns, rows and values; types may differ (CSV keeps none), and a missing value is an empty cell.

    Numbers are equal exactly unless ``rtol`` allows for a workbook's 16 digits.
    """
    assert list(got.columns) == list(expected.columns), where
    assert len(got) == len(expected), where
    for column in expected.columns:
        want, have = expected[column].reset_index(drop=True), got[column].reset_index(drop=True)
        if pd.api.types.is_bool_dtype(want):
            assert [text(v) for v in have] == [text(v) for v in want], f"{where}: {column}"
        elif pd.api.types.is_numeric_dtype(want):
            have = pd.to_numeric(have.map(lambda v: np.nan if text(v) == "" else v))
            np.testing.assert_allclose(have.to_numpy(float), want.to_numpy(float, na_value=np.nan), rtol=rtol,
                                       atol=0, equal_nan=True, err_msg=f"{where}: {column}")
        else:  # text: empty and missing are alike in a CSV file
            assert [text(v) for v in have] == [text(v) for v in want], f"{where}: {column}"


def read_csv(path: Path) -> pd.DataFrame:
    return pd.read_csv(path, dtype=str, keep_default_na=False)  # the file's own text, nothing guessed


def test_run_csv_holds_every_parquet_table_with_the_same_values(run_dir: Path, tmp_path: Path, capsys) -> None:
    out = tmp_path / "csv"
    code, stdout, err = invoke(capsys, "export", run_dir, "--out", out)
    assert code == 0, err
    tables = run_parquet(run_dir)
    assert len(tables) == 12  # truth 3, observed 4, daily, methods, queues, queue_hours, departures
    assert stdout.splitlines()[0] == f"Wrote {len(tables) + 1} tables ({len(tables) + 1} CSV files) to {out}"
    for name, path in tables.items():
        assert_same_values(pd.read_parquet(path), read_csv(out / f"{name}.csv"), name)
    summary = json.loads((run_dir / "summary.json").read_text(encoding="utf-8"))
    figures = read_csv(out / "summary.csv").set_index("figure")
    assert set(figures.index) == set(summary) - {"sources"}
    for key, value in summary.items():
        if key != "sources":
            assert figures.loc[key, "value"] == ("" if value is None else str(value)), key
            assert figures.loc[key, "source"] == summary["sources"].get(key, ""), key
    record = json.loads((out / EXPORT_RECORD).read_text(encoding="utf-8"))
    assert record["kind"] == "run" and record["format"] == "csv"
    assert sorted(record["files"]) == sorted(f"{name}.csv" for name in [*tables, "summary"])


def test_run_workbook_has_a_sheet_per_table_with_the_same_values(run_dir: Path, tmp_path: Path, capsys) -> None:
    out = tmp_path / "xlsx"
    code, stdout, err = invoke(capsys, "export", run_dir, "--format", "xlsx", "--out", out)
    assert code == 0, err
    workbook = out / f"{run_dir.name}.xlsx"
    assert stdout.startswith(f"Wrote {len(run_parquet(run_dir)) + 1} tables to {workbook}")
    sheets = pd.read_excel(workbook, sheet_name=None, dtype=object)
    assert list(sheets)[0] == "contents"
    assert all(len(name) <= 31 for name in sheets) and len({n.casefold() for n in sheets}) == len(sheets)
    for name, path in run_parquet(run_dir).items():
        assert_same_values(pd.read_parquet(path), sheets[name], name, WORKBOOK_RTOL)
    assert list(sheets["contents"]["sheet"]) == list(sheets)[1:]


def test_batch_csv_stacks_every_run_with_its_id_point_and_replication(batch_dir: Path, tmp_path: Path,
                                                                      capsys) -> None:
    out = tmp_path / "csv"
    code, stdout, err = invoke(capsys, "export", batch_dir, "--out", out)
    assert code == 0, err
    assert stdout.startswith("Wrote ")
    run_ids = sorted(p.name for p in (batch_dir / "runs").iterdir())
    summary = pd.read_parquet(batch_dir / "summary.parquet")
    assert sorted(summary["run_id"]) == run_ids and len(run_ids) == 4
    assert_same_values(summary, read_csv(out / "summary.csv"), "summary")
    assert_same_values(pd.read_parquet(batch_dir / "failures.parquet"), read_csv(out / "failures.csv"), "failures")
    where = summary.set_index("run_id")[["point", "replication"]]
    for name in run_parquet(batch_dir / "runs" / run_ids[0]):
        table = read_csv(out / f"{name}.csv")
        assert list(table.columns[:3]) == ["run_id", "design_point", "replication"], name
        assert sorted(set(table["run_id"])) == [r for r in run_ids if len(pd.read_parquet(
            run_parquet(batch_dir / "runs" / r)[name]))], name
        for run_id, rows in table.groupby("run_id", sort=True):
            assert set(rows["design_point"]) == {str(where.loc[run_id, "point"])}, name
            assert set(rows["replication"]) == {str(where.loc[run_id, "replication"])}, name
            own = pd.read_parquet(run_parquet(batch_dir / "runs" / run_id)[name])
            assert_same_values(own, rows.drop(columns=["run_id", "design_point", "replication"]), f"{name} {run_id}")
    design = read_csv(out / "design.csv")
    assert list(design["point"]) == ["0", "1"] and list(design["policy"]) == ["current", "double_imaging"]
    assert list(design["compare_to"]) == ["", "0"]


def test_batch_workbook_names_each_sheet_once_and_keeps_run_ids(batch_dir: Path, tmp_path: Path, capsys) -> None:
    out = tmp_path / "xlsx"
    code, stdout, err = invoke(capsys, "export", batch_dir, "--format", "xlsx", "--out", out)
    assert code == 0, err
    sheets = pd.read_excel(out / f"{batch_dir.name}.xlsx", sheet_name=None, dtype=object)
    assert {"contents", "summary", "design", "failures", "truth_attempts", "observed_encounters"} <= set(sheets)
    assert all(len(name) <= 31 for name in sheets)
    assert_same_values(pd.read_parquet(batch_dir / "summary.parquet"), sheets["summary"], "summary", WORKBOOK_RTOL)
    assert set(sheets["daily"]["run_id"]) == {p.name for p in (batch_dir / "runs").iterdir()}


def test_default_out_is_an_export_folder_inside_dir_and_a_second_export_replaces_its_own_files(
    batch_dir: Path, tmp_path: Path, capsys
) -> None:
    batch = tmp_path / "batch"
    shutil.copytree(batch_dir, batch)
    assert invoke(capsys, "export", batch)[0] == 0
    out = batch / "export"
    (out / "notes.txt").write_text("mine", encoding="utf-8")
    # a file an earlier export wrote for a table that is gone since: removed, as it would pass for current
    (out / "gone.csv").write_text("a\n1\n", encoding="utf-8")
    record = json.loads((out / EXPORT_RECORD).read_text(encoding="utf-8"))
    record["files"]["gone.csv"] = {"sha256": None, "format": "csv"}
    (out / EXPORT_RECORD).write_text(json.dumps(record), encoding="utf-8")
    code, stdout, err = invoke(capsys, "export", batch)
    assert code == 0, err
    assert not (out / "gone.csv").exists()
    assert (out / "notes.txt").read_text(encoding="utf-8") == "mine"
    assert invoke(capsys, "export", batch, "--format", "xlsx")[0] == 0  # both formats side by side
    assert (out / "daily.csv").is_file() and (out / "batch.xlsx").is_file()


def one_line_refusal(code: int, err: str, *needles: str) -> None:
    lines = err.strip().splitlines()
    assert code == 2 and len(lines) == 1, err
    assert lines[0].startswith("undertow export: ") and "Traceback" not in err
    for needle in needles:
        assert needle in lines[0], lines[0]


def test_files_export_did_not_write_or_that_changed_are_never_overwritten(run_dir: Path, tmp_path: Path,
                                                                          capsys) -> None:
    out = tmp_path / "out"
    out.mkdir()
    (out / "daily.csv").write_text("my own\n", encoding="utf-8")
    one_line_refusal(*invoke(capsys, "export", run_dir, "--out", out)[::2], "--out", "daily.csv", "not written")
    assert (out / "daily.csv").read_text(encoding="utf-8") == "my own\n"
    assert sorted(p.name for p in out.iterdir()) == ["daily.csv"]

    out = tmp_path / "again"
    assert invoke(capsys, "export", run_dir, "--out", out)[0] == 0
    with (out / "daily.csv").open("a", encoding="utf-8") as handle:
        handle.write("an edit\n")
    one_line_refusal(*invoke(capsys, "export", run_dir, "--out", out)[::2], "daily.csv", "changed since")
    assert (out / "daily.csv").read_text(encoding="utf-8").endswith("an edit\n")

    foreign = tmp_path / "foreign"
    foreign.mkdir()
    (foreign / EXPORT_RECORD).write_text("{}", encoding="utf-8")
    one_line_refusal(*invoke(capsys, "export", run_dir, "--out", foreign)[::2], EXPORT_RECORD)
    assert (foreign / EXPORT_RECORD).read_text(encoding="utf-8") == "{}"


def _damage_run(run_dir: Path, tmp_path: Path) -> Path:
    damaged = tmp_path / "damaged"
    shutil.copytree(run_dir, damaged)
    path = damaged / "truth" / "attempts.parquet"
    path.write_bytes(path.read_bytes()[:-10])
    return damaged


@pytest.mark.parametrize("case", ["missing", "a file", "not a run", "damaged run", "bad format", "out is a file"])
def test_bad_input_exits_2_with_one_line_naming_it(case: str, run_dir: Path, tmp_path: Path, capsys) -> None:
    argv: list[str | Path]
    if case == "missing":
        argv, needle = [tmp_path / "nowhere"], str(tmp_path / "nowhere")
    elif case == "a file":
        (tmp_path / "world.yaml").write_text("name: x\n", encoding="utf-8")
        argv, needle = [tmp_path / "world.yaml"], "is a file"
    elif case == "not a run":
        (tmp_path / "plain").mkdir()
        argv, needle = [tmp_path / "plain"], "holds no run"
    elif case == "damaged run":
        damaged = _damage_run(run_dir, tmp_path)
        argv, needle = [damaged], str(damaged / "truth" / "attempts.parquet")
    elif case == "bad format":
        argv, needle = [run_dir, "--format", "ods"], "--format"
    else:
        (tmp_path / "taken").write_text("x", encoding="utf-8")
        argv, needle = [run_dir, "--out", tmp_path / "taken"], "--out"
    before = sorted(tmp_path.rglob("*"))
    one_line_refusal(*invoke(capsys, "export", *argv)[::2], needle)
    assert sorted(tmp_path.rglob("*")) == before, "a refused export wrote something"
    assert not (run_dir / "export").exists()


def test_a_damaged_or_busy_batch_is_refused(batch_dir: Path, tmp_path: Path, capsys) -> None:
    batch = tmp_path / "batch"
    shutil.copytree(batch_dir, batch)
    lock = batch / ".undertow.lock"
    lock.write_text(json.dumps({"pid": os.getpid(), "host": socket.gethostname(), "since": time.time()}))
    one_line_refusal(*invoke(capsys, "export", batch)[::2], "another undertow command")
    lock.unlink()
    daily = sorted((batch / "runs").iterdir())[1] / "daily.parquet"
    daily.write_bytes(daily.read_bytes() + b"\0")
    one_line_refusal(*invoke(capsys, "export", batch)[::2], str(daily))
    shutil.rmtree(daily.parent)
    one_line_refusal(*invoke(capsys, "export", batch)[::2], daily.parent.name, "--resume")
    assert not (batch / "export").exists()


def test_xlsx_without_openpyxl_says_how_to_install_it(run_dir: Path, tmp_path: Path, capsys,
                                                       monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.setitem(sys.modules, "openpyxl", None)  # import openpyxl now raises ImportError
    one_line_refusal(*invoke(capsys, "export", run_dir, "--format", "xlsx", "--out", tmp_path / "x")[::2],
                     "undertow[xlsx]")
    assert not (tmp_path / "x").exists()


def test_sheet_names_are_short_unique_and_leave_room_for_the_contents() -> None:
    names = unique_names(["a" * 40, "a" * 35, "Daily", "daily", "contents", "runs/*/x?"])
    assert all(len(name) <= 31 for name in names)
    assert len({name.casefold() for name in names}) == len(names)
    assert "contents" not in names and names[2] == "Daily" and names[5] == "runs___x_"


def test_text_that_looks_like_a_formula_stays_text(tmp_path: Path) -> None:
    import openpyxl

    frame = pd.DataFrame({"label": ["=1+1", "plain"], "value": [1.5, np.nan]})
    table = Table("levels", "test", [Part(frame=frame)])
    table.measure()
    write_xlsx([table], tmp_path / "book.xlsx", tmp_path)
    sheet = openpyxl.load_workbook(tmp_path / "book.xlsx")["levels"]
    assert sheet["A2"].value == "=1+1" and sheet["A2"].data_type == "s"
    assert sheet["B2"].value == 1.5 and sheet["B3"].value is None
