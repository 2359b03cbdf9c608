"""`undertow check` on experiment files: every problem is exit 2 and one line naming the file and the key.

Each broken experiment is the small test experiment with one thing broken.
"""

from __future__ import annotations

import copy
import subprocess
from pathlib import Path
from typing import Any

import pytest

from abm.cli import main

from .helpers import DEMO_WORLD, POLICY_FACTOR, ROOT, experiment, undertow_command, write_yaml


def check(capsys: pytest.CaptureFixture[str], *paths: Path) -> tuple[int, str, str]:
    code = main(["check", *map(str, paths)])
    out, err = capsys.readouterr()
    return code, out, err


def assert_one_line(code: int, err: str, file: Path, key: str, *fragments: str) -> None:
    assert code == 2, err
    lines = err.splitlines()
    assert len(lines) == 1 and "Traceback" not in err, err
    prefix = f"undertow check: {file}: {key}: " if key else f"undertow check: {file}: "
    assert lines[0].startswith(prefix), f"expected {prefix!r} at the start of {lines[0]!r}"
    for fragment in fragments:
        assert fragment in lines[0], f"expected {fragment!r} in {lines[0]!r}"


def _policy(*levels: dict[str, Any], baseline: str | None = "current") -> dict[str, Any]:
    factor: dict[str, Any] = {"name": "policy", "levels": [{"name": "current", "set": {}}, *levels]}
    if baseline is not None:
        factor["baseline"] = baseline
    return factor


def _with_factor_key(key: str, value: Any) -> list[dict[str, Any]]:
    factor = copy.deepcopy(POLICY_FACTOR)
    factor[key] = value
    return [factor]


CASES: list[tuple[str, dict[str, Any], str, tuple[str, ...]]] = [
    (
        "unknown-top-key",
        experiment(replicatons=3),
        "replicatons",
        ("unknown key 'replicatons'", "did you mean 'replications'"),
    ),
    (
        "unknown-factor-key",
        experiment(factors=_with_factor_key("levles", [1])),
        "factors[0].levles",
        ("did you mean 'levels'",),
    ),
    (
        "unknown-bundle-key",
        experiment(factors=[_policy({"name": "x", "sett": {}})]),
        "factors[0].levels[1].sett",
        ("did you mean 'set'",),
    ),
    ("missing-days", experiment(days=None), "days", ("required key is missing",)),
    ("days-not-a-number", experiment(days="thirty"), "days", ("expected a number", "thirty")),
    ("unknown-design", experiment(design="lhs"), "design", ("latin_hypercube", "'lhs'")),
    (
        "bad-path-factor",
        experiment(factors=[{"path": "stations.gate_imagin.selection.fraction", "levels": [0.2]}]),
        "factors[0].path",
        ("no item named 'gate_imagin'", "gate_imaging"),
    ),
    (
        "bad-path-in-bundle",
        experiment(factors=[_policy({"name": "x", "set": {"adversary.attempt_chance.daily": 0.3}})]),
        "factors[0].levels[1].set.adversary.attempt_chance.daily",
        ("holds a value, not a section",),
    ),
    (
        "misspelt-section-in-path",
        experiment(factors=[{"path": "stations.gate_imaging.selectoin.fraction", "levels": [0.2]}]),
        "factors[0].levels[0]",
        ("selectoin", "did you mean 'selection'"),
    ),
    (
        "level-of-wrong-type",
        experiment(factors=[{"path": "stations.gate_imaging.selection.fraction", "levels": [0.2, "high"]}]),
        "factors[0].levels[1]",
        ("stations[0].selection.fraction", "expected a number", "'high'"),
    ),
    (
        "level-out-of-range",
        experiment(factors=[{"path": "stations.gate_imaging.selection.fraction", "levels": [0.2, 1.5]}]),
        "factors[0].levels[1]",
        ("stations[0].selection.fraction", "less than or equal to 1", "1.5"),
    ),
    (
        "bundle-value-out-of-range",
        experiment(factors=[_policy({"name": "x", "set": {"adversary.attempt_chance": -0.1}})]),
        "factors[0].levels[1]",
        ("adversary.attempt_chance", "greater than or equal to 0"),
    ),
    (
        "behaviour-not-a-model",
        experiment(factors=[{"path": "adversary.behaviour", "levels": ["static", "psychic"]}]),
        "factors[0].levels[1]",
        ("adversary.behaviour", "psychic"),
    ),
    (
        "range-end-out-of-range",
        experiment(
            design="latin_hypercube",
            samples=4,
            factors=[{"path": "stations.gate_imaging.selection.fraction", "range": [0.1, 1.2]}],
        ),
        "factors[0].range",
        ("at the high end", "less than or equal to 1"),
    ),
    (
        "baseline-not-a-level",
        experiment(factors=_with_factor_key("baseline", "nightly")),
        "factors[0].baseline",
        ("'nightly'",),
    ),
    (
        "range-in-factorial",
        experiment(factors=[{"path": "adversary.attempt_chance", "range": [0.2, 0.6]}]),
        "factors[0].range",
        ("full_factorial design takes levels",),
    ),
    (
        "levels-in-sampled-design",
        experiment(design="latin_hypercube", samples=4),
        "factors[0].levels",
        ("samples ranges",),
    ),
    (
        "sampled-without-samples",
        experiment(design="sobol", factors=[{"path": "adversary.attempt_chance", "range": [0.2, 0.6]}]),
        "samples",
        ("needs samples",),
    ),
    (
        "sobol-not-power-of-two",
        experiment(design="sobol", samples=6, factors=[{"path": "adversary.attempt_chance", "range": [0.2, 0.6]}]),
        "samples",
        ("power of two",),
    ),
    (
        "repeated-level",
        experiment(factors=[{"path": "adversary.attempt_chance", "levels": [0.2, 0.2]}]),
        "factors[0].levels[1]",
        ("repeats",),
    ),
    (
        "factor-named-like-a-column",
        experiment(factors=[{"name": "detections", "path": "adversary.attempt_chance", "levels": [0.2]}]),
        "factors[0].name",
        ("run-table column",),
    ),
    (
        "two-factors-one-value",
        experiment(
            factors=[
                {"path": "stations.gate_imaging.selection.fraction", "levels": [0.2, 0.3]},
                {"path": "stations[0].selection", "levels": [{"rule": "all"}]},
            ]
        ),
        "factors[1]",
        ("factors[0] also changes",),
    ),
    (
        # each level is valid alone; together they break a rule of the world (give_up + move_elsewhere <= 1)
        "invalid-combination",
        experiment(
            factors=[
                {"path": "adversary.give_up", "levels": [0.1, 0.7]},
                {"path": "adversary.move_elsewhere", "levels": [0.1, 0.6]},
            ]
        ),
        "factors",
        ("design point 3", "must not exceed 1"),
    ),
]


@pytest.mark.parametrize(("data", "key", "fragments"), [c[1:] for c in CASES], ids=[c[0] for c in CASES])
def test_bad_experiment_is_one_line_exit_2(
    tmp_path: Path, capsys: pytest.CaptureFixture[str], data: dict[str, Any], key: str, fragments: tuple[str, ...]
) -> None:
    path = write_yaml(tmp_path / "experiment.yaml", data)
    code, out, err = check(capsys, path)
    assert_one_line(code, err, path, key, *fragments)
    assert out == ""


def test_missing_world_names_the_world_key(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    path = write_yaml(tmp_path / "experiment.yaml", experiment(world="no_such_world.yaml"))
    code, _, err = check(capsys, path)
    assert_one_line(code, err, path, "world", "no world file", "no_such_world.yaml")


def test_world_path_is_relative_to_the_experiment_file(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    (tmp_path / "worlds").mkdir()
    (tmp_path / "worlds" / "w.yaml").write_text(DEMO_WORLD.read_text(encoding="utf-8"), encoding="utf-8")
    path = write_yaml(tmp_path / "worlds" / "experiment.yaml", experiment(world="w.yaml"))
    code, out, err = check(capsys, path)
    assert code == 0, err
    assert "3 design points x 2 replications = 6 runs" in out


def test_a_broken_world_is_blamed_on_the_world_file(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    world = tmp_path / "world.yaml"
    world.write_text(DEMO_WORLD.read_text(encoding="utf-8").replace("lanes: 4", "lanes: many", 1), encoding="utf-8")
    path = write_yaml(tmp_path / "experiment.yaml", experiment(world="world.yaml"))
    code, _, err = check(capsys, path)
    assert_one_line(code, err, world, "stations[0].lanes", "many")


def test_shipped_experiments_check_ok_and_worlds_still_check_as_worlds() -> None:
    shipped = sorted((ROOT / "worlds").glob("**/experiment*.yaml"))
    assert len(shipped) >= 2
    result = subprocess.run(
        [*undertow_command(), "check", *map(str, shipped), str(DEMO_WORLD)],
        capture_output=True,
        text=True,
        timeout=120,
        check=False,
    )
    assert result.returncode == 0, result.stderr
    lines = [line for line in result.stdout.splitlines() if ": ok (" in line]  # the rest is the load report
    assert len(lines) == len(shipped) + 1
    assert all("ok (experiment" in line for line in lines[:-1])
    assert "ok (Kestrel Quay" in lines[-1] and "stations" in lines[-1]


def test_bad_experiment_from_the_command_line(tmp_path: Path) -> None:
    path = write_yaml(
        tmp_path / "experiment.yaml",
        experiment(factors=[{"path": "stations.gate_imaging.selection.fraction", "levels": [1.5]}]),
    )
    command = [*undertow_command(), "check", str(path)]
    result = subprocess.run(command, capture_output=True, text=True, timeout=120, check=False)
    assert_one_line(result.returncode, result.stderr, path, "factors[0].levels[0]", "1.5")
