"""Analyses over run directories: displacement (more to come: frontiers, estimator evaluation, sensitivity)."""

from .displacement import (
    DisplacementInputError,
    DisplacementResult,
    displacement_between_runs,
    displacement_within_run,
    write_displacement,
)

__all__ = [
    "DisplacementInputError",
    "DisplacementResult",
    "displacement_between_runs",
    "displacement_within_run",
    "write_displacement",
]
