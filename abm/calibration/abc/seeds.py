"""Seeds and labels of an ABC run: one integer seed replays every draw and every simulation.

The algorithm's own draws in stage t come from ``SeedSequence(seed, spawn_key=(1, t))``;
simulation i of stage t gets the seed
``SeedSequence(seed, spawn_key=(2, t, i)).generate_state(1)[0]``. So a
calibration replays exactly, and a store that keeps finished simulations can
resume one.
"""

from __future__ import annotations

import numpy as np

# Spawn-key purposes (see the module docstring).
_PROPOSE, _SIMULATE = 1, 2
PREDICTIVE_STAGE = 1000  # the stage number of posterior predictive simulations


def stage_rng(seed: int, stage: int) -> np.random.Generator:
    """The algorithm's own generator for one stage (generation, or the predictive stage)."""
    return np.random.default_rng(np.random.SeedSequence(seed, spawn_key=(_PROPOSE, stage)))


def simulation_seeds(seed: int, stage: int, start: int, n: int) -> np.ndarray:
    """Seeds of simulations ``start .. start + n - 1`` of a stage (each from its own spawn key)."""
    return np.array(
        [int(np.random.SeedSequence(seed, spawn_key=(_SIMULATE, stage, i)).generate_state(1)[0]) for i in range(start, start + n)],
        dtype=np.int64,
    )


def stage_label(stage: int) -> str:
    return "predictive" if stage == PREDICTIVE_STAGE else f"gen-{stage}"


def labels_for(stage: int, start: int, n: int) -> list[str]:
    """``gen-<t>/p<i>``: where a simulation belongs (the port adapter makes these run directories)."""
    return [f"{stage_label(stage)}/p{i:06d}" for i in range(start, start + n)]
