"""Behaviour models of concealment attempts, as swappable strategy objects.

A behaviour picks an option for an agent about to attempt and may learn from
outcomes. The model holds one behaviour object; per-agent memory, where a model
needs it, lives on the agent (``agent.memory``) and is created by ``init_agent``.
"""

from __future__ import annotations

from typing import TYPE_CHECKING, Protocol

import numpy as np

from ..world.schema import Adversary, World
from .options import OptionSpace

if TYPE_CHECKING:
    from .concealment import ConcealmentAgent


class Behaviour(Protocol):
    """What every behaviour model provides."""

    name: str

    def init_agent(self, agent: "ConcealmentAgent") -> None:
        """Give a new agent whatever memory the model needs."""

    def choose(self, agent: "ConcealmentAgent", rng: np.random.Generator) -> int:
        """Flat option index for the agent's attempt today."""

    def learn(self, agent: "ConcealmentAgent", option: int, outcome: str) -> None:
        """Take in the outcome of the agent's own attempt."""


class StaticBehaviour:
    """Fixed option probabilities: the classic assumption that people do not react to checking."""

    name = "static"

    def __init__(self, probabilities: np.ndarray) -> None:
        if probabilities.ndim != 1 or abs(probabilities.sum() - 1.0) > 1e-9:
            raise ValueError("option probabilities must be a vector summing to 1")
        self.probabilities = probabilities
        self._cumulative = np.cumsum(probabilities)

    @classmethod
    def from_world(cls, world: World, options: OptionSpace) -> "StaticBehaviour":
        """Option probabilities as the product of the world's point, band and class shares."""
        shares = world.adversary.static
        point = np.array([shares.point_shares.get(p, 0.0) for p in world.point_names])
        band = np.array([shares.band_shares.get(b, 0.0) for b in world.band_names])
        vclass = np.array([shares.class_shares.get(c, 0.0) for c in world.class_names])
        grid = point[:, None, None] * band[None, :, None] * vclass[None, None, :]
        flat = grid.reshape(options.size)
        return cls(flat / flat.sum())

    def init_agent(self, agent: "ConcealmentAgent") -> None:
        return None

    def choose(self, agent: "ConcealmentAgent", rng: np.random.Generator) -> int:
        # inverse-CDF draw: one uniform per choice, cheaper than Generator.choice per agent
        return int(min(np.searchsorted(self._cumulative, rng.random(), side="right"), self.probabilities.size - 1))

    def learn(self, agent: "ConcealmentAgent", option: int, outcome: str) -> None:
        return None


def make_behaviour(world: World, options: OptionSpace) -> Behaviour:
    """The behaviour model the world asks for."""
    adversary: Adversary = world.adversary
    if adversary.behaviour == "static":
        return StaticBehaviour.from_world(world, options)
    raise ValueError(f"unknown behaviour model '{adversary.behaviour}'")
