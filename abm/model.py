"""PortModel: one Mesa step is one operating day at the crossing.

Each day: new groups arrive in the area; command sets today's staffing from the
teams; waiting groups decide whether and how to attempt; the day engine runs
vehicles, boarding, checks and sailings; groups learn their outcomes; the
record book takes the day. Agents decide, the engine moves vehicles.

Random numbers come from one ``SeedSequence`` per run, spawned per purpose
(traffic, boarding, detection, agents), so changing a policy does not shift the
traffic stream, and the same world and seed give identical records.
"""

from __future__ import annotations

import mesa
import numpy as np

from .agents.behaviour import make_behaviour
from .agents.concealment import ConcealmentAgent, State, draw_group_sizes
from .agents.inspection import InspectionTeam, make_command
from .agents.options import OptionSpace
from .port.day import OUTCOME_NAMES, Attempts, DayEngine
from .port.layout import build_layout
from .records import RecordBook
from .world.schema import World

SEED_PURPOSES = ("traffic", "boarding", "detection", "agents")


def spawn_streams(seed: int | np.random.SeedSequence) -> dict[str, np.random.SeedSequence]:
    """One child SeedSequence per purpose, always in the same order."""
    root = seed if isinstance(seed, np.random.SeedSequence) else np.random.SeedSequence(seed)
    return dict(zip(SEED_PURPOSES, root.spawn(len(SEED_PURPOSES)), strict=True))


class PortModel(mesa.Model):
    """A freight crossing with concealment attempts and inspection, one step per day."""

    def __init__(self, world: World, seed: int | np.random.SeedSequence = 0) -> None:
        streams = spawn_streams(seed)
        arrivals_seq, decisions_seq = streams["agents"].spawn(2)
        super().__init__(rng=np.random.default_rng(decisions_seq))
        self.world = world
        self.layout = build_layout(world)
        self.options = OptionSpace.from_layout(self.layout)
        self.behaviour = make_behaviour(world, self.options)
        self.command = make_command(world.roster.command)
        self.engine = DayEngine(self.layout, streams["traffic"], streams["boarding"], streams["detection"])
        self.records = RecordBook(self.layout)
        self.arrivals_rng = np.random.default_rng(arrivals_seq)
        self.day = 0
        for team in world.roster.teams:
            InspectionTeam(self, team)

    @property
    def concealers(self) -> mesa.agent.AgentSet:
        """Groups still in the system."""
        return self.agents.select(agent_type=ConcealmentAgent)

    def persons_in_system(self) -> int:
        return int(sum(self.concealers.get("size")))

    def _new_groups(self, day: int) -> None:
        adversary = self.world.adversary
        n = int(self.arrivals_rng.poisson(adversary.arrivals_per_day))
        for size in draw_group_sizes(adversary, n, self.arrivals_rng):
            agent = ConcealmentAgent(self, int(size), day, self.behaviour)
            self.records.arrival(agent.unique_id, day, agent.size)

    def step(self) -> None:
        """Simulate one operating day."""
        day = self.day
        self._new_groups(day)
        staffing = self.command.staffing(self, day)
        attempting = self.concealers.select(lambda a: a.will_attempt(day))
        options = np.array(attempting.map("decide"), dtype=np.int64)
        point, band, vclass = self.options.unravel(options)
        sizes = np.array(attempting.get("size"), dtype=np.int64)
        attempts = Attempts(point.astype(np.int64), band.astype(np.int64), vclass.astype(np.int64), sizes)
        result = self.engine.run_day(day, attempts, staffing)

        agent_ids = np.array(attempting.get("unique_id"), dtype=np.int64)
        identification = self.world.adversary.identification
        refs: list[list[str | None] | None] = []
        attempting = list(attempting)  # a snapshot: agents that leave are removed below
        for agent, code in zip(attempting, result.attempts.outcome, strict=True):
            outcome = OUTCOME_NAMES[int(code)]
            refs.append(agent.identify(identification) if outcome in ("detected", "interdicted") else None)
            agent.after_outcome(outcome, day)
        for agent in attempting:
            if agent.state is not State.WAITING:
                self.records.exit(agent.unique_id, day, agent.state.value, agent.size, agent.encounters)
                agent.remove()
        self.records.add_day(
            result,
            agent_ids=agent_ids,
            persons=sizes,
            refs=refs,
            attempts_point=attempts.point,
            attempts_band=attempts.band,
            attempts_class=attempts.vehicle_class,
            staff_hours=staffing.staff_hours(),
            in_system=self.persons_in_system(),
        )
        self.day += 1
