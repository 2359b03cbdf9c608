"""``undertow new``: starter worlds of each kind and experiments for any world, valid and not overloaded.

Each starter world must pass ``check`` and show no overload in the load report
(abm.port.load, itself checked against M/M/c loads in tests/port/test_load_report.py);
each generated experiment must pass ``check`` against its world and run.
"""

from __future__ import annotations

import subprocess
import sys
from pathlib import Path

import pytest

from abm.experiment.design import load_plan
from abm.port.load import load_report
from abm.world import load_world

ROOT = Path(__file__).resolve().parents[1]
UNDERTOW = Path(sys.executable).parent / "undertow"


def undertow(*args: str, cwd: Path) -> subprocess.CompletedProcess:
    return subprocess.run([str(UNDERTOW), *args], capture_output=True, text=True, timeout=300, cwd=cwd)


@pytest.mark.parametrize("kind, service", [("ferry", "sailing"), ("rail", "train"), ("land", None)])
def test_new_world_passes_check_without_overload(tmp_path: Path, kind: str, service: str | None) -> None:
    made = undertow("new", "world", "--kind", kind, "start.yaml", cwd=tmp_path)
    assert made.returncode == 0, made.stderr
    assert "invented and illustrative" in made.stdout
    text = (tmp_path / "start.yaml").read_text(encoding="utf-8")
    assert "ILLUSTRATIVE" in text and text.count("#") > 20  # commented, labelled fictional
    checked = undertow("check", "start.yaml", cwd=tmp_path)
    assert checked.returncode == 0, checked.stderr
    assert "warning" not in checked.stdout + checked.stderr
    world = load_world(tmp_path / "start.yaml")
    assert (world.departures.service if world.departures else None) == service
    assert not load_report(world).overloaded


@pytest.mark.parametrize("world", ["starter-rail", "worlds/kestrel_quay/world.yaml", "worlds/corran_ridge/world.yaml",
                                   "worlds/stonechat_rail/world.yaml"])
def test_new_experiment_passes_check_for_any_world(tmp_path: Path, world: str) -> None:
    if world.startswith("starter-"):
        undertow("new", "world", "--kind", world.split("-")[1], "w.yaml", cwd=tmp_path)
        source = tmp_path / "w.yaml"
    else:
        source = ROOT / world
    (tmp_path / "sub").mkdir()
    made = undertow("new", "experiment", str(source), "sub/exp.yaml", cwd=tmp_path)
    assert made.returncode == 0, made.stderr
    checked = undertow("check", "sub/exp.yaml", cwd=tmp_path)
    assert checked.returncode == 0, checked.stderr
    plan = load_plan(tmp_path / "sub" / "exp.yaml")
    assert len(plan.points) == 3 and plan.spec.replications >= 5


def test_new_experiment_runs(tmp_path: Path) -> None:
    undertow("new", "world", "--kind", "land", "w.yaml", cwd=tmp_path)
    undertow("new", "experiment", "w.yaml", "e.yaml", cwd=tmp_path)
    text = (tmp_path / "e.yaml").read_text(encoding="utf-8")
    (tmp_path / "e.yaml").write_text(text.replace("days: 28 ", "days: 3 ").replace("warmup_days: 7", "warmup_days: 1")
                                     .replace("replications: 5", "replications: 1"), encoding="utf-8")
    ran = undertow("batch", "e.yaml", "--out", "b", cwd=tmp_path)
    assert ran.returncode == 0, ran.stderr
    assert "3 of 3 runs complete" in ran.stdout


@pytest.mark.parametrize("args, message", [
    (["new", "world", "--kind", "ferry", "exists.yaml"], "already exists"),
    (["new", "world", "--kind", "ferry", "start.txt"], "give a name ending in .yaml"),
    (["new", "world", "--kind", "ferry", "exists.yaml/x.yaml"], "is a file"),
    (["new", "experiment", "missing.yaml", "e.yaml"], "missing.yaml"),
    (["new", "world", "--kind", "ocean", "x.yaml"], "invalid choice"),
])
def test_new_refuses_in_one_line(tmp_path: Path, args: list[str], message: str) -> None:
    (tmp_path / "exists.yaml").write_text("kept\n", encoding="utf-8")
    result = undertow(*args, cwd=tmp_path)
    assert result.returncode == 2
    assert message in result.stderr and len(result.stderr.strip().splitlines()) == 1, result.stderr
    assert (tmp_path / "exists.yaml").read_text(encoding="utf-8") == "kept\n"
