"""Behaviour models of concealment attempts, as swappable strategy objects.

A behaviour picks an option (boarding point x time band x vehicle class) for an
agent about to attempt and may learn from outcomes. The model holds one
behaviour object; per-agent memory lives on the agent (``agent.memory``).

- ``static``: fixed option probabilities, the classic assumption that people do
  not react to checking.
- ``adaptive``: perceived risk of each option learnt with a Beta-Bernoulli update
  with forgetting, from the agent's own outcomes, from peers on a social network
  (with a delay) and from a shared rumour channel (lagged, noisy aggregate
  outcomes), optionally with a noisy cue of patrol presence; choice by a logit
  (quantal-response) rule with a small exploration share.
- ``reinforcement``: Roth-Erev reinforcement learning (Roth & Erev 1995, Games and
  Economic Behavior 8:164-212; Erev & Roth 1998, American Economic Review
  88:848-881) of propensities shared by the population, as a facilitation
  network would learn which options work: payoffs add to the chosen option's
  propensity, an experimentation share spreads to the others, recency forgets.
"""

from __future__ import annotations

from collections import defaultdict, deque
from collections.abc import Sequence
from dataclasses import dataclass
from typing import TYPE_CHECKING, Protocol

import numpy as np

from ..port.day import Staffing
from ..world.schema import World
from .options import OptionSpace
from .sampling import LARGEST_POPULATION, samples_without_replacement

if TYPE_CHECKING:
    from .concealment import ConcealmentAgent

CAUGHT = ("interdicted", "detected")


def logit_probabilities(utility: np.ndarray, rationality: float, valid: np.ndarray, exploration: float = 0.0) -> np.ndarray:
    """Quantal-response choice probabilities over valid options, mixed with uniform exploration.

    P_j = (1 - e) * exp(lambda u_j) / sum_k exp(lambda u_k) + e / K over the K valid options.
    ``utility`` and ``valid`` may hold one row per chooser (options on the last axis).
    """
    z = np.where(valid, rationality * utility, -np.inf)
    # invalid options already hold -inf, so the plain maximum is the maximum over valid ones (and faster)
    z = z - z.max(axis=-1, keepdims=True, initial=-np.inf)
    weights = np.exp(z)
    logit = weights / weights.sum(axis=-1, keepdims=True)
    uniform = valid / valid.sum(axis=-1, keepdims=True)
    return (1.0 - exploration) * logit + exploration * uniform


def _draw(probabilities: np.ndarray, rng: np.random.Generator) -> np.ndarray:
    """One option per row of ``probabilities`` (choosers x options) by inverse CDF: one uniform per choice."""
    scaled = rng.random(probabilities.shape[0]) * probabilities.sum(axis=1)
    # cumulative sums are non-decreasing: counting those <= u is searchsorted(side="right")
    index = (np.cumsum(probabilities, axis=1) <= scaled[:, None]).sum(axis=1)
    return np.minimum(index, probabilities.shape[1] - 1)


class Behaviour(Protocol):
    """What every behaviour model provides."""

    name: str

    def refresh(self, world: World, options: OptionSpace) -> None:
        """Take the world's (possibly changed) parameters."""

    def arriving(self, n: int) -> None:
        """``n`` new agents are about to be made, one after another (the next ``init_agent`` calls)."""

    def init_agent(self, agent: "ConcealmentAgent") -> None:
        """Give a new agent whatever memory the model needs."""

    def start_of_day(self, day: int, staffing: Staffing, rng: np.random.Generator) -> None:
        """Deliver what agents learn before they decide today."""

    def choose(self, agents: Sequence["ConcealmentAgent"], rng: np.random.Generator) -> np.ndarray:
        """Flat option index of each agent's attempt today (one uniform from ``rng`` per agent, in order)."""

    def learn(self, agent: "ConcealmentAgent", option: int, outcome: str, day: int) -> None:
        """Take in the outcome of the agent's own attempt."""

    def end_of_day(self, day: int, options: np.ndarray, outcomes: list[str], persons: np.ndarray) -> None:
        """See the day's outcomes as a whole (for channels shared by everyone)."""

    def agent_left(self, agent: "ConcealmentAgent") -> None:
        """Forget an agent that left the system."""


class _Quiet:
    """No-op hooks for behaviours that do not need them."""

    def arriving(self, n: int) -> None:
        return None

    def init_agent(self, agent: "ConcealmentAgent") -> None:
        return None

    def start_of_day(self, day: int, staffing: Staffing, rng: np.random.Generator) -> None:
        return None

    def learn(self, agent: "ConcealmentAgent", option: int, outcome: str, day: int) -> None:
        return None

    def end_of_day(self, day: int, options: np.ndarray, outcomes: list[str], persons: np.ndarray) -> None:
        return None

    def agent_left(self, agent: "ConcealmentAgent") -> None:
        return None


class StaticBehaviour(_Quiet):
    """Fixed option probabilities: the product of the world's point, band, class and depth shares.

    Without depth shares every attempt hides at the first (shallowest) level.
    """

    name = "static"

    def __init__(self, world: World, options: OptionSpace) -> None:
        self.refresh(world, options)

    def refresh(self, world: World, options: OptionSpace) -> None:
        shares = world.adversary.static
        point = np.array([shares.point_shares.get(p, 0.0) for p in world.point_names])
        band = np.array([shares.band_shares.get(b, 0.0) for b in world.band_names])
        vclass = np.array([shares.class_shares.get(c, 0.0) for c in world.class_names])
        depth = np.array([shares.depth_shares.get(d, 0.0) for d in world.depth_names])
        if not shares.depth_shares:
            depth[0] = 1.0
        product = point[:, None, None, None] * band[None, :, None, None] * vclass[None, None, :, None]
        flat = (product * depth[None, None, None, :]).reshape(options.size)
        self.probabilities = flat / flat.sum()

    def choose(self, agents: Sequence["ConcealmentAgent"], rng: np.random.Generator) -> np.ndarray:
        return _draw(np.broadcast_to(self.probabilities, (len(agents), self.probabilities.size)), rng)


@dataclass
class Beliefs:
    """One agent's own and peer evidence about each option: decayed counts of being caught and of crossing."""

    caught: np.ndarray
    crossed: np.ndarray
    day: int  # day the counts were last decayed to


class AdaptiveBehaviour:
    """Learnt risk per option (Beta-Bernoulli with forgetting) and logit choice."""

    name = "adaptive"

    def __init__(self, world: World, options: OptionSpace, rng: np.random.Generator) -> None:
        self.refresh(world, options)
        # who hears whom: an undirected graph as adjacency (insertion-ordered, so peers hear in a fixed order)
        self.network: dict[int, dict[int, None]] = {}
        self._network_rng = rng
        self._messages: dict[int, list[tuple[int, int, bool]]] = defaultdict(list)
        self._agents: dict[int, "ConcealmentAgent"] = {}
        self._rumour_caught = np.zeros(options.size)
        self._rumour_crossed = np.zeros(options.size)
        self._history: dict[int, tuple[np.ndarray, np.ndarray]] = {}
        self._presence = np.zeros(options.size)
        self._links_ahead: deque[tuple[int, list[int]]] = deque()  # (groups present, peers) drawn by arriving

    def refresh(self, world: World, options: OptionSpace) -> None:
        self.params = world.adversary.adaptive
        self.options = options
        self._valid_by_size: dict[int, np.ndarray] = {}
        waiting = np.array([self.params.band_waiting.get(b, 0.0) for b in world.band_names])
        # everything in the utility but perceived risk, which is what is learnt
        self.base_utility = -options.effort - self.params.hazard_aversion * options.hazard - waiting[options.band]

    # -- memory -------------------------------------------------------------------------
    def arriving(self, n: int) -> None:
        """Draw the links of the next ``n`` newcomers in one compiled call (the numbers ``init_agent`` would draw).

        The i-th newcomer finds ``i`` more groups present than are now (nobody leaves while groups arrive).
        """
        present = len(self._agents) + np.arange(n, dtype=np.int64)
        if n == 0 or present[-1] > LARGEST_POPULATION:
            return  # init_agent draws them itself
        degree = np.minimum(self.params.network_degree, present)
        peers = samples_without_replacement(self._network_rng, present, degree).tolist()  # ints index the list faster
        ends = np.cumsum(degree)
        for count, end, size in zip(present.tolist(), ends.tolist(), degree.tolist(), strict=True):
            self._links_ahead.append((count, peers[end - size : end]))

    def init_agent(self, agent: "ConcealmentAgent") -> None:
        k = self.options.size
        day = agent.arrival_day
        agent.memory = Beliefs(np.zeros(k), np.zeros(k), day)
        present = list(self._agents)  # groups leave the network when they leave the area
        links = self.network.setdefault(agent.unique_id, {})
        self._agents[agent.unique_id] = agent
        if self._links_ahead:
            count, chosen = self._links_ahead.popleft()
            if count != len(present):
                raise RuntimeError(f"links drawn for {count} groups present, but {len(present)} are")
        else:
            degree = min(self.params.network_degree, len(present))
            # choice over the count draws exactly what choice over the ids would, without building an array
            chosen = self._network_rng.choice(len(present), size=degree, replace=False) if degree else ()
        # links to random groups already in the area: a growing random network
        for index in chosen:
            peer = present[index]
            links[peer] = None
            self.network[peer][agent.unique_id] = None

    def _decayed(self, beliefs: Beliefs, day: int) -> Beliefs:
        if day > beliefs.day:
            factor = self.params.forgetting ** (day - beliefs.day)
            beliefs.caught *= factor
            beliefs.crossed *= factor
            beliefs.day = day
        return beliefs

    def posterior(self, agent: "ConcealmentAgent", day: int) -> tuple[np.ndarray, np.ndarray]:
        """Beta(alpha, beta) belief about the chance of being caught, per option.

        Prior + own and peer evidence + weighted rumour; the rumour is what
        circulates in the area, so a newcomer hears it at once.
        """
        alpha, beta = self._posteriors([self._decayed(agent.memory, day)])
        return alpha[0], beta[0]

    def _posteriors(self, beliefs: Sequence[Beliefs]) -> tuple[np.ndarray, np.ndarray]:
        """:meth:`posterior` of already decayed beliefs, one row each."""
        p = self.params
        alpha = p.prior_caught + np.array([b.caught for b in beliefs]) + p.rumour_weight * self._rumour_caught
        beta = p.prior_crossed + np.array([b.crossed for b in beliefs]) + p.rumour_weight * self._rumour_crossed
        return alpha, beta

    def perceived_risk(self, agent: "ConcealmentAgent", day: int) -> np.ndarray:
        """Posterior mean chance of being caught, per option."""
        alpha, beta = self.posterior(agent, day)
        return alpha / (alpha + beta)

    # -- daily channels -----------------------------------------------------------------
    def start_of_day(self, day: int, staffing: Staffing, rng: np.random.Generator) -> None:
        weight, agents = self.params.peer_weight, self._agents
        for target, option, caught in self._messages.pop(day, []):
            agent = agents.get(target)
            if agent is not None:
                beliefs = agent.memory
                if beliefs.day < day:  # decayed once a day, however many messages it gets
                    self._decayed(beliefs, day)
                (beliefs.caught if caught else beliefs.crossed)[option] += weight
        lagged = self._history.pop(day - self.params.rumour_delay_days, None)
        f = self.params.forgetting
        self._rumour_caught *= f
        self._rumour_crossed *= f
        if lagged is not None:
            noise = np.exp(self.params.rumour_noise * rng.standard_normal(2))
            self._rumour_caught += noise[0] * lagged[0]
            self._rumour_crossed += noise[1] * lagged[1]
        if self.params.presence_weight > 0:
            patrol = staffing.patrol[self.options.point, self.options.band]
            seen = patrol + self.params.presence_noise * rng.standard_normal(patrol.shape)
            self._presence = self.params.presence_weight * np.clip(seen, 0.0, 1.0)

    def choose(self, agents: Sequence["ConcealmentAgent"], rng: np.random.Generator) -> np.ndarray:
        if not agents:
            return np.zeros(0, dtype=np.int64)
        day, p = agents[0].model.day, self.params
        # perceived_risk of every chooser at once, one row each
        alpha, beta = self._posteriors([self._decayed(agent.memory, day) for agent in agents])
        risk = np.minimum(alpha / (alpha + beta) + self._presence, 1.0)
        utility = self.base_utility - p.detection_cost * risk
        valid = np.array([self._fits(agent.size) for agent in agents])
        probabilities = logit_probabilities(utility, p.rationality, valid, p.exploration)
        return _draw(probabilities, rng)

    def _fits(self, size: int) -> np.ndarray:
        """Options a group of ``size`` may choose (kept per size until the option space changes)."""
        if size not in self._valid_by_size:
            valid = self.options.valid_for(size)
            # no class fits the group: it still tries, and finds no vehicle
            self._valid_by_size[size] = valid if valid.any() else self.options.valid
        return self._valid_by_size[size]

    def learn(self, agent: "ConcealmentAgent", option: int, outcome: str, day: int) -> None:
        if outcome == "no_vehicle":
            return  # says nothing about the risk of being caught
        caught = outcome in CAUGHT
        beliefs = self._decayed(agent.memory, day)
        (beliefs.caught if caught else beliefs.crossed)[option] += self.params.own_weight
        if self.params.peer_weight > 0 and agent.unique_id in self.network:
            deliver = day + max(1, self.params.peer_delay_days)
            for peer in self.network[agent.unique_id]:
                self._messages[deliver].append((peer, option, caught))

    def end_of_day(self, day: int, options: np.ndarray, outcomes: list[str], persons: np.ndarray) -> None:
        k = self.options.size
        caught = np.array([o in CAUGHT for o in outcomes], dtype=bool)
        crossed = np.array([o == "crossed" for o in outcomes], dtype=bool)
        self._history[day] = (
            np.bincount(options[caught], minlength=k).astype(float),
            np.bincount(options[crossed], minlength=k).astype(float),
        )

    def agent_left(self, agent: "ConcealmentAgent") -> None:
        self._agents.pop(agent.unique_id, None)
        for peer in self.network.pop(agent.unique_id, {}):
            del self.network[peer][agent.unique_id]


class ReinforcementBehaviour(_Quiet):
    """Roth-Erev reinforcement of propensities shared by the whole population."""

    name = "reinforcement"

    def __init__(self, world: World, options: OptionSpace) -> None:
        self.refresh(world, options)
        self.propensity = np.where(options.valid, self.params.initial_propensity, 0.0)

    def refresh(self, world: World, options: OptionSpace) -> None:
        self.params = world.adversary.reinforcement
        self.options = options

    def choose(self, agents: Sequence["ConcealmentAgent"], rng: np.random.Generator) -> np.ndarray:
        if not agents:  # a day when nobody attempts
            return np.zeros(0, dtype=np.int64)
        rows = [self.propensity * self.options.valid_for(agent.size) for agent in agents]
        weights = np.array([fits if fits.sum() > 0 else self.propensity for fits in rows]).reshape(len(agents), -1)
        return _draw(weights, rng)

    def end_of_day(self, day: int, options: np.ndarray, outcomes: list[str], persons: np.ndarray) -> None:
        p = self.params
        payoff = {"crossed": p.payoff_crossed, "no_vehicle": p.payoff_no_vehicle}
        valid = self.options.valid
        others = max(int(valid.sum()) - 1, 1)
        for option, outcome in zip(options, outcomes, strict=True):
            reward = payoff.get(outcome, p.payoff_caught)
            # Erev & Roth (1998) update: recency forgets, experimentation spreads the payoff
            spread = np.where(valid, reward * p.experimentation / others, 0.0)
            spread[option] = reward * (1.0 - p.experimentation)
            self.propensity = (1.0 - p.recency) * self.propensity + spread
        # keep every valid option reachable: propensities must stay positive
        floor = 1e-9 * p.initial_propensity
        self.propensity = np.where(valid, np.maximum(self.propensity, floor), 0.0)


def make_behaviour(world: World, options: OptionSpace, rng: np.random.Generator) -> Behaviour:
    """The behaviour model the world asks for."""
    name = world.adversary.behaviour
    if name == "static":
        return StaticBehaviour(world, options)
    if name == "adaptive":
        return AdaptiveBehaviour(world, options, rng)
    if name == "reinforcement":
        return ReinforcementBehaviour(world, options)
    raise ValueError(f"unknown behaviour model '{name}'")
