"""Fixtures for the experiment tests."""

from __future__ import annotations

from collections.abc import Callable
from pathlib import Path
from typing import Any

import pytest

from .helpers import experiment, write_yaml


@pytest.fixture
def make_experiment(tmp_path: Path) -> Callable[..., Path]:
    """Write an experiment file into the test's folder: ``make_experiment(data, name="experiment.yaml")``."""

    def make(data: dict[str, Any] | None = None, name: str = "experiment.yaml") -> Path:
        return write_yaml(tmp_path / name, experiment() if data is None else data)

    return make
