"""Concealment attempts: Mesa agents, one per travelling group, that decide when and how to try.

An agent waits in the area, attempts on some days, and after each encounter
(interdiction or detection) is returned and may retry after a delay, give up or
move to a route outside the model. Each person in the group may be identified at
an encounter; an identified person carries a stable pseudonymous reference into
every later observed encounter, which is what capture-recapture estimators link.
"""

from __future__ import annotations

from enum import StrEnum
from typing import TYPE_CHECKING

import mesa
import numpy as np

from ..world.schema import Adversary

if TYPE_CHECKING:
    from ..model import PortModel


class State(StrEnum):
    """Where a group is. Every person is in exactly one state."""

    WAITING = "waiting"  # in the area; may attempt from ``ready_day``
    CROSSED = "crossed"
    GAVE_UP = "gave_up"
    DISPLACED = "displaced_out"  # moved to a route outside the model

    @property
    def in_system(self) -> bool:
        return self is State.WAITING


class ConcealmentAgent(mesa.Agent):
    """A group of people who try to cross hidden in a vehicle."""

    model: "PortModel"

    def __init__(self, model: "PortModel", size: int, arrival_day: int) -> None:
        super().__init__(model)
        self.size = size
        self.arrival_day = arrival_day
        self.ready_day = arrival_day
        self.state = State.WAITING
        self.encounters = 0
        self.person_refs: list[str | None] = [None] * size
        self.memory: object = None  # whatever the behaviour model keeps for this group
        self.option: int = -1
        model.behaviour.init_agent(self)

    def will_attempt(self, day: int) -> bool:
        """Today is one of the days this group tries (drawn with the daily attempt chance)."""
        if self.state is not State.WAITING or day < self.ready_day:
            return False
        return bool(self.model.rng.random() < self.model.world.adversary.attempt_chance)

    def identify(self, chance: float) -> list[str | None]:
        """At an encounter each not-yet-identified person is identified with ``chance``."""
        rng = self.model.rng
        for k, ref in enumerate(self.person_refs):
            if ref is None and rng.random() < chance:
                # a pseudonym from the agents' stream: stable, reveals nothing of the simulation
                self.person_refs[k] = f"P{int(rng.integers(16**10)):010x}"
        return list(self.person_refs)

    def after_outcome(self, outcome: str, day: int) -> None:
        """Move to the next state after today's attempt."""
        adversary: Adversary = self.model.world.adversary
        self.model.behaviour.learn(self, self.option, outcome, day)
        if outcome == "crossed":
            self.state = State.CROSSED
        elif outcome in ("interdicted", "detected"):
            self.encounters += 1
            give_up, move = exit_chances(adversary, self.encounters)
            u = self.model.rng.random()
            if u < give_up:
                self.state = State.GAVE_UP
            elif u < give_up + move:
                self.state = State.DISPLACED
            else:
                self.ready_day = day + max(1, adversary.return_delay_days)
        # no vehicle: still waiting, tries again another day


def exit_chances(adversary: Adversary, encounters: int) -> tuple[float, float]:
    """Give-up and move-elsewhere chances after the ``encounters``-th encounter (deterrence grows them)."""
    steps = max(encounters - 1, 0)
    give_up = min(1.0, adversary.give_up + adversary.deterrence.give_up_step * steps)
    move = min(1.0 - give_up, adversary.move_elsewhere + adversary.deterrence.move_elsewhere_step * steps)
    return give_up, move


def draw_group_sizes(adversary: Adversary, n: int, rng: np.random.Generator) -> np.ndarray:
    """Group sizes for n new groups."""
    sizes = np.array(sorted(adversary.group_size), dtype=np.int64)
    probs = np.array([adversary.group_size[s] for s in sizes])
    return sizes[np.minimum(np.searchsorted(np.cumsum(probs), rng.random(n), side="right"), sizes.size - 1)]
