"""Fixtures for the calibration tests."""

from __future__ import annotations

from collections.abc import Callable
from pathlib import Path
from typing import Any

import pytest

from .helpers import calibration_data, make_target, world_file, write_yaml


@pytest.fixture(scope="session")
def static_target(tmp_path_factory: pytest.TempPathFactory) -> tuple[Path, Path, dict[str, Any]]:
    """The static small world, and a target run of it (seed 101): world file, target dir, its summary."""
    folder = tmp_path_factory.mktemp("static-target")
    world = world_file(folder, "static")
    target, summary = make_target(folder, world, seed=101)
    return world, target, summary


@pytest.fixture
def calibration_file(tmp_path: Path, static_target) -> Callable[..., Path]:
    """Write a calibration of the static target into the test's folder, with changed keys."""
    world, target, _ = static_target

    def make(**changes: Any) -> Path:
        return write_yaml(tmp_path / "calibration.yaml", calibration_data(world, target, **changes))

    return make
