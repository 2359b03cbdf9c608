"""`undertow run`: a complete run directory, a printed table, and one-line errors with exit code 2."""

from __future__ import annotations

import contextlib
import hashlib
import io
import json
import os
import subprocess
import sys
from pathlib import Path

import pandas as pd
import pytest
import yaml

from abm.cli import main
from abm.experiment.single import SUMMARY_LABELS
from abm.world import load_world
from abm.world.words import words_for

ROOT = Path(__file__).resolve().parents[1]
DEMO = ROOT / "worlds" / "kestrel_quay" / "world.yaml"
UNDERTOW = Path(sys.executable).parent / "undertow"

RECORD_FILES = [
    "truth/attempts.parquet",
    "truth/arrivals.parquet",
    "truth/exits.parquet",
    "observed/stations.parquet",
    "observed/checks.parquet",
    "observed/encounters.parquet",
    "observed/false_alarms.parquet",
    "daily.parquet",
]
SUMMARY_KEYS = [
    "attempts",
    "interdictions",
    "detections",
    "crossings",
    "displaced_out",
    "gave_up",
    "vehicles",
    "checks",
    "false_alarms",
    "time_in_port_p50_min",
    "time_in_port_p95_min",
    "missed_departure_share",
]


def invoke(capsys: pytest.CaptureFixture[str], *argv: str | Path) -> tuple[int, str, str]:
    """Run ``abm.cli.main`` in process; argparse's usage errors leave through SystemExit, counted alike."""
    try:
        code = main([str(a) for a in argv])
    except SystemExit as exc:  # what the console script would turn into the exit code
        code = exc.code if isinstance(exc.code, int) else 1
    out, err = capsys.readouterr()
    return code, out, err


def snapshot(directory: Path) -> dict[str, bytes]:
    """Every file under a directory, by relative path, with its bytes."""
    return {str(p.relative_to(directory)): p.read_bytes() for p in sorted(directory.rglob("*")) if p.is_file()}


def run_args(out: Path, days: str = "5", seed: str = "1", world: Path | str = DEMO) -> list[str]:
    return ["run", str(world), "--days", days, "--seed", seed, "--out", str(out)]


@pytest.fixture(scope="module")
def first_run(tmp_path_factory) -> dict:
    """One in-process `undertow run` of the demo world for 5 days."""
    out = tmp_path_factory.mktemp("runs") / "demo-5"
    stdout, stderr = io.StringIO(), io.StringIO()
    with contextlib.redirect_stdout(stdout), contextlib.redirect_stderr(stderr):
        code = main(run_args(out))
    return {"out": out, "code": code, "stdout": stdout.getvalue(), "stderr": stderr.getvalue()}


def test_run_exits_zero_and_writes_every_file(first_run):
    assert first_run["code"] == 0, first_run["stderr"]
    out = first_run["out"]
    for name in RECORD_FILES + ["manifest.json", "summary.json"]:
        assert (out / name).is_file(), f"{name} missing from the run directory"
    # written under a temporary name and renamed: nothing partial or temporary is left behind
    assert not list(out.parent.glob(".*partial*"))
    assert not [p for p in out.rglob(".*") if p.is_file()]
    for name in RECORD_FILES:
        frame = pd.read_parquet(out / name)
        assert list(frame.columns), name
    daily = pd.read_parquet(out / "daily.parquet")
    assert list(daily["day"]) == [0, 1, 2, 3, 4]


def test_manifest_records_world_hash_seed_days_packages_and_command(first_run):
    manifest = json.loads((first_run["out"] / "manifest.json").read_text(encoding="utf-8"))
    assert manifest["world_sha256"] == hashlib.sha256(DEMO.read_bytes()).hexdigest()
    assert manifest["seed"] == 1
    assert manifest["days"] == 5
    packages = manifest["packages"]
    assert isinstance(packages, dict)
    for name in ("python", "numpy", "pandas", "mesa", "pyarrow", "undertow"):
        assert packages.get(name) and packages[name] != "not installed", name
    command = manifest["command"]
    assert isinstance(command, list) and command and command[0] == "undertow"


def test_manifest_command_is_the_command_that_was_run(tmp_path, capsys, monkeypatch):
    monkeypatch.setattr(sys, "argv", ["host-program", "--host-flag"])
    out = tmp_path / "run"
    argv = run_args(out, days="1")
    code, _, err = invoke(capsys, *argv)
    assert code == 0, err
    manifest = json.loads((out / "manifest.json").read_text(encoding="utf-8"))
    assert manifest["command"] == ["undertow", *argv]


def test_summary_has_the_headline_figures(first_run):
    summary = json.loads((first_run["out"] / "summary.json").read_text(encoding="utf-8"))
    for key in SUMMARY_KEYS:
        assert key in summary, f"summary.json lacks {key}"
    for key in SUMMARY_KEYS:
        assert isinstance(summary[key], (int, float)), key
    assert summary["vehicles"] > 10_000
    assert 0 < summary["checks"] <= summary["vehicles"]
    assert summary["time_in_port_p50_min"] <= summary["time_in_port_p95_min"]
    assert 0.0 <= summary["missed_departure_share"] <= 1.0
    assert summary["attempts"] == summary["interdictions"] + summary["detections"] + summary["crossings"] + summary["no_vehicle"]
    # every figure says which record set it comes from
    assert set(SUMMARY_KEYS) <= set(summary["sources"])
    assert set(summary["sources"].values()) <= {"truth", "observed"}
    # the summary agrees with the records it was built from
    daily = pd.read_parquet(first_run["out"] / "daily.parquet")
    assert summary["vehicles"] == int(daily["vehicles"].sum())
    attempts = pd.read_parquet(first_run["out"] / "truth" / "attempts.parquet")
    assert summary["attempts"] == int(attempts["persons"].sum())


def test_run_prints_the_summary_table(first_run):
    text = first_run["stdout"]
    lines = text.splitlines()
    assert "5 days, seed 1" in lines[0] and str(first_run["out"]) in lines[0]
    summary = json.loads((first_run["out"] / "summary.json").read_text(encoding="utf-8"))
    words = words_for(load_world(ROOT / "worlds/kestrel_quay/world.yaml"))
    for key in SUMMARY_KEYS:  # each figure by its display label, in the world's words, with its record set
        label = words.fill(SUMMARY_LABELS[key])
        row = next((line for line in lines if line.strip().startswith(label + "  ")), None)
        assert row is not None, f"table has no row for {key} ({label})"
        assert row.split()[-1] == summary["sources"][key]
    assert "Time in port, 95th percentile (minutes)" in text and "Missed sailings (% of vehicles)" in text
    assert f"{summary['vehicles']:,}" in text
    assert "Traceback" not in first_run["stderr"]


def test_running_into_an_existing_directory_exits_2_and_keeps_the_first_run(first_run, capsys):
    out = first_run["out"]
    before = snapshot(out)
    code, stdout, err = invoke(capsys, *run_args(out, seed="2"))
    assert code == 2
    assert len(err.strip().splitlines()) == 1, err
    assert str(out) in err and "Traceback" not in err
    assert snapshot(out) == before, "the first run directory was changed"
    assert not list(out.parent.glob(f".{out.name}*"))


@pytest.mark.parametrize(
    "argv,needle",
    [
        (["--days", "0"], "--days"),
        (["--days", "-3"], "--days"),
        (["--days", "five"], "--days"),
        (["--seed", "x"], "--seed"),
        (["--seed", "-1"], "--seed"),
    ],
    ids=["days-0", "days-negative", "days-text", "seed-text", "seed-negative"],
)
def test_bad_arguments_exit_2_with_one_line(tmp_path, capsys, argv, needle):
    out = tmp_path / "never"
    args = ["run", str(DEMO), "--out", str(out), *argv]
    code, stdout, err = invoke(capsys, *args)
    assert code == 2
    assert len(err.strip().splitlines()) == 1, err
    assert needle in err and "Traceback" not in err
    assert not out.exists()


def test_missing_world_exits_2_with_one_line(tmp_path, capsys):
    missing = tmp_path / "nowhere" / "world.yaml"
    out = tmp_path / "never"
    code, stdout, err = invoke(capsys, *run_args(out, world=missing))
    assert code == 2
    lines = err.strip().splitlines()
    assert len(lines) == 1, err
    assert str(missing) in lines[0] and "not found" in lines[0]
    assert "Traceback" not in err
    assert not out.exists()


def test_console_script_runs(tmp_path):
    """The installed `undertow` entry point, as a user would run it."""
    assert UNDERTOW.exists(), f"no console script at {UNDERTOW}"
    out = tmp_path / "cli-run"
    argv = [str(UNDERTOW), *run_args(out, days="2", seed="3")]
    proc = subprocess.run(argv, capture_output=True, text=True, timeout=120, cwd=tmp_path)
    assert proc.returncode == 0, proc.stderr
    assert "Traceback" not in proc.stderr
    assert "2 days, seed 3" in proc.stdout
    for name in RECORD_FILES + ["manifest.json", "summary.json"]:
        assert (out / name).is_file(), name
    manifest = json.loads((out / "manifest.json").read_text(encoding="utf-8"))
    assert manifest["command"] == ["undertow", *argv[1:]]
    assert manifest["seed"] == 3 and manifest["days"] == 2
    # and a usage error from the real process: exit 2, one line, no traceback
    bad = subprocess.run([str(UNDERTOW), *run_args(tmp_path / "bad", days="0")], capture_output=True, text=True, timeout=120)
    assert bad.returncode == 2
    assert len(bad.stderr.strip().splitlines()) == 1 and "Traceback" not in bad.stderr


@pytest.mark.parametrize("name, kind, command", [
    ("calibration.yaml", "calibration", "calibrate"), ("optimise.yaml", "optimisation", "optimise"),
    ("experiment.yaml", "experiment", "batch"),
])
def test_check_takes_every_kind_and_run_points_elsewhere(name: str, kind: str, command: str, tmp_path: Path) -> None:
    path = ROOT / "worlds" / "kestrel_quay" / name
    check = subprocess.run([str(UNDERTOW), "check", str(path)], capture_output=True, text=True, check=False)
    assert check.returncode == 0, check.stderr
    assert f"ok ({kind}" in check.stdout
    run = subprocess.run([str(UNDERTOW), "run", str(path), "--out", str(tmp_path / "r")], capture_output=True,
                         text=True, check=False)
    assert run.returncode == 2 and f"undertow {command} {path} --out DIR" in run.stderr
    assert not (tmp_path / "r").exists()


def test_check_refuses_an_unknown_kind(tmp_path: Path) -> None:
    path = tmp_path / "odd.yaml"
    path.write_text("kind: banana\n", encoding="utf-8")
    result = subprocess.run([str(UNDERTOW), "check", str(path)], capture_output=True, text=True, check=False)
    assert result.returncode == 2
    assert result.stderr.strip() == (f"undertow check: {path}: kind: expected one of world, experiment, "
                                     "calibration, optimisation, got 'banana'")


def test_former_internal_errors_are_one_line_refusals(tmp_path: Path) -> None:
    # Each of these used to end in "internal error" (exit 1) or hang: zero posting weights under randomised
    # command, a mutation outside scipy's [0, 2], a FIFO given as a file, a malformed scheduler address.
    world = yaml.safe_load(DEMO.read_text(encoding="utf-8"))
    world["roster"]["command"] = "randomised"
    for posting in world["roster"]["teams"][2]["postings"]:
        posting["weight"] = 0
    zero = tmp_path / "zero.yaml"
    zero.write_text(yaml.safe_dump(world), encoding="utf-8")
    optimisation = yaml.safe_load((ROOT / "worlds" / "kestrel_quay" / "optimise.yaml").read_text(encoding="utf-8"))
    optimisation["world"] = str(DEMO)
    optimisation["search"]["mutation"] = [0.5, 3.0]
    mutation = tmp_path / "mutation.yaml"
    mutation.write_text(yaml.safe_dump(optimisation), encoding="utf-8")
    fifo = tmp_path / "fifo.yaml"
    os.mkfifo(fifo)
    experiment = ROOT / "worlds" / "kestrel_quay" / "experiment.yaml"
    for command, needle in (
        (["run", str(zero), "--days", "1", "--out", str(tmp_path / "r")], "roster.teams[2].postings: the weights sum to 0"),
        (["check", str(mutation)], "search.mutation: expected 0 <= low <= high <= 2"),
        (["check", str(fifo)], "not a regular file"),
        (["batch", str(experiment), "--out", str(tmp_path / "b"), "--scheduler", "no address"],
         "--scheduler: expected an address like tcp://HOST:PORT"),
    ):
        result = subprocess.run([str(UNDERTOW), *command], capture_output=True, text=True, timeout=60, check=False)
        assert result.returncode == 2 and needle in result.stderr and result.stderr.count("\n") == 1, result.stderr
    assert not (tmp_path / "r").exists() and not (tmp_path / "b").exists()


def test_a_users_own_partial_folder_survives_a_run(tmp_path: Path) -> None:
    mine = tmp_path / ".myrun.partial"
    mine.mkdir()
    (mine / "notes.txt").write_text("the user's own", encoding="utf-8")
    assert main(["run", str(DEMO), "--days", "1", "--out", str(tmp_path / "myrun")]) == 0
    assert (mine / "notes.txt").read_text(encoding="utf-8") == "the user's own"
    assert sorted(p.name for p in tmp_path.iterdir()) == [".myrun.partial", "myrun"]  # no staging left behind


def test_plans_too_large_are_refused_before_anything_runs(tmp_path: Path) -> None:
    # A world of 5e8 lorries a day, a run of a billion days, ten million replications: each passes the schema,
    # each is refused in one line naming the key within a few seconds (budget rates: abm.experiment.budget).
    world = yaml.safe_load(DEMO.read_text(encoding="utf-8"))
    world["traffic"]["vehicles_per_day"] = 5e8
    huge = tmp_path / "huge.yaml"
    huge.write_text(yaml.safe_dump(world), encoding="utf-8")
    experiment = yaml.safe_load((ROOT / "worlds" / "kestrel_quay" / "experiment.yaml").read_text(encoding="utf-8"))
    experiment["world"] = str(DEMO)
    experiment["replications"] = 10**7
    many = tmp_path / "many.yaml"
    many.write_text(yaml.safe_dump(experiment), encoding="utf-8")
    calibration = yaml.safe_load((ROOT / "worlds" / "kestrel_quay" / "calibration.yaml").read_text(encoding="utf-8"))
    calibration["world"] = str(DEMO)
    calibration["observed"]["path"] = str(ROOT / "worlds" / "kestrel_quay" / "observed_extract")
    calibration["method"]["draws"] = 10**8
    draws = tmp_path / "draws.yaml"
    draws.write_text(yaml.safe_dump(calibration), encoding="utf-8")
    optimisation = yaml.safe_load((ROOT / "worlds" / "kestrel_quay" / "optimise.yaml").read_text(encoding="utf-8"))
    optimisation["world"] = str(DEMO)
    optimisation["search"]["popsize"] = 10**7
    popsize = tmp_path / "popsize.yaml"
    popsize.write_text(yaml.safe_dump(optimisation), encoding="utf-8")
    for command, key in (
        (["run", str(huge), "--days", "3", "--out", str(tmp_path / "a")], "traffic.vehicles_per_day: one run would need"),
        (["run", str(DEMO), "--days", str(10**9), "--out", str(tmp_path / "b")], "--days: one run would need"),
        (["check", str(many)], "replications: 30,000,000 runs is more than 100,000"),
        (["batch", str(many), "--out", str(tmp_path / "c"), "--allow-large"], "replications: the records would need"),
        (["calibrate", str(draws), "--check"], "method.draws: 100,000,020 runs is more than 100,000"),  # 20 predictive
        (["optimise", str(popsize), "--check"], "search.popsize: "),
    ):
        result = subprocess.run([str(UNDERTOW), *command], capture_output=True, text=True, timeout=60, check=False)
        assert result.returncode == 2 and key in result.stderr and result.stderr.count("\n") == 1, result.stderr
    assert not any((tmp_path / name).exists() for name in "abc")


@pytest.mark.parametrize("command", [
    ["run", "worlds/kestrel_quay/world.yaml", "--days", "2"], ["batch", "worlds/kestrel_quay/experiment.yaml"],
    ["calibrate", "worlds/kestrel_quay/calibration.yaml"], ["optimise", "worlds/kestrel_quay/optimise.yaml"],
    ["estimate", "worlds/kestrel_quay/observed_extract"],
])
def test_an_out_that_cannot_be_made_is_refused_before_any_work(command: list[str], tmp_path: Path,
                                                               capsys: pytest.CaptureFixture[str]) -> None:
    blocker = tmp_path / "a_file"
    blocker.write_text("", encoding="utf-8")
    args = [command[0], str(ROOT / command[1]), *command[2:], "--out", str(blocker / "sub")]
    assert main(args) == 2
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and "a_file is a file, so no folder can be made there" in err, err
