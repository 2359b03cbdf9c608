"""PortModel: one Mesa step is one operating day at the crossing.

Each day: a scheduled intervention takes effect if one is due; new groups
arrive in the area; command sets today's staffing from the teams; behaviour
channels deliver what agents learnt since yesterday; waiting groups decide
whether and how to attempt; the day engine runs vehicles, boarding, checks and
departures; groups and command learn the outcomes; the record book takes the
day. Agents decide, the engine moves vehicles.

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
from .world.loader import policy_after
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
        arrivals_seq, decisions_seq, behaviour_seq, command_seq = streams["agents"].spawn(4)
        super().__init__(rng=np.random.default_rng(decisions_seq))
        self.base_world = world
        self.world = world
        self.layout = build_layout(world)
        self.options = OptionSpace.from_layout(self.layout)
        self.behaviour_rng = np.random.default_rng(behaviour_seq)
        self.behaviour = make_behaviour(world, self.options, self.behaviour_rng)
        self.command_rng = np.random.default_rng(command_seq)
        self.command = make_command(world.roster, self.layout, self.command_rng)
        self.engine = DayEngine(self.layout, streams["traffic"], streams["boarding"], streams["detection"])
        self.records = RecordBook(self.layout)
        self.arrivals_rng = np.random.default_rng(arrivals_seq)
        self.day = 0
        self.policy_name = "as rostered"
        self._in_system = 0
        self._due = {iv.day: i for i, iv in enumerate(world.interventions)}
        for team in world.roster.teams:
            InspectionTeam(self, team)

    @property
    def concealers(self) -> mesa.agent.AgentSet:
        """Groups still in the system."""
        return self.agents.select(agent_type=ConcealmentAgent)

    def persons_in_system(self) -> int:
        """People in groups still in the system (kept as groups arrive and leave)."""
        return self._in_system

    def apply_policy(self, world: World, name: str) -> None:
        """Switch to a changed world (same geography and option space) from today on."""
        self.world = world
        self.layout = build_layout(world)
        self.options = OptionSpace.from_layout(self.layout)
        self.engine.change_layout(self.layout)
        self.behaviour.refresh(world, self.options)
        if world.roster.command != self.command.name:
            self.command = make_command(world.roster, self.layout, self.command_rng)
        for team in list(self.agents.select(agent_type=InspectionTeam)):
            team.remove()
        for team in world.roster.teams:
            InspectionTeam(self, team)
        self.policy_name = name

    def _new_groups(self, day: int) -> None:
        adversary = self.world.adversary
        n = int(self.arrivals_rng.poisson(adversary.arrivals_per_day))
        sizes = draw_group_sizes(adversary, n, self.arrivals_rng)
        self.behaviour.arriving(sizes.shape[0])
        for size in sizes:
            agent = ConcealmentAgent(self, int(size), day)
            self.records.arrival(agent.unique_id, day, agent.size)
            self._in_system += agent.size

    def step(self) -> None:
        """Simulate one operating day."""
        day = self.day
        if day in self._due:
            index = self._due[day]
            self.apply_policy(policy_after(self.base_world, index), self.base_world.interventions[index].name)
        self._new_groups(day)
        staffing = self.command.staffing(self, day)
        self.behaviour.start_of_day(day, staffing, self.behaviour_rng)
        groups = self.agents_by_type.get(ConcealmentAgent, ())
        attempting = [agent for agent in groups if agent.will_attempt(day)]
        options = np.asarray(self.behaviour.choose(attempting, self.rng), dtype=np.int64)
        for agent, option in zip(attempting, options, strict=True):
            agent.option = int(option)
        point, band, vclass, depth = (index.astype(np.int64) for index in self.options.unravel(options))
        sizes = np.array([agent.size for agent in attempting], dtype=np.int64)
        attempts = Attempts(point, band, vclass, sizes, depth)
        result = self.engine.run_day(day, attempts, staffing)
        self.command.observe(self, attempts, result)

        agent_ids = np.array([agent.unique_id for agent in attempting], dtype=np.int64)
        outcomes = [OUTCOME_NAMES[int(code)] for code in result.attempts.outcome]
        identification = self.world.adversary.identification
        refs: list[list[str | None] | None] = []
        for agent, outcome in zip(attempting, outcomes, strict=True):
            refs.append(agent.identify(identification) if outcome in ("detected", "interdicted") else None)
            agent.after_outcome(outcome, day)
        self.behaviour.end_of_day(day, options, outcomes, sizes)
        for agent in attempting:
            if agent.state is not State.WAITING:
                self.records.exit(agent.unique_id, day, agent.state.value, agent.size, agent.encounters)
                self.behaviour.agent_left(agent)
                self._in_system -= agent.size
                agent.remove()
        self.records.add_day(
            result,
            agent_ids=agent_ids,
            persons=sizes,
            refs=refs,
            attempts_point=attempts.point,
            attempts_band=attempts.band,
            attempts_class=attempts.vehicle_class,
            attempts_depth=attempts.depth,
            staff_hours=staffing.staff_hours(),
            in_system=self.persons_in_system(),
        )
        self.day += 1
