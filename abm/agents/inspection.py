"""Inspection teams and command: Mesa agents and policies that put lanes and patrols on duty.

Teams work a daily shift. Command turns the teams into today's staffing: lanes
per station and hour, and extra interdiction chance per boarding point and time
band (a team patrolling a point for part of a band adds that part of its patrol
chance). Policies:

- ``fixed``: every team stays where the roster puts it;
- ``reactive``: each day a share of the flexible teams' lane-hours and patrol is
  moved toward the stations, boarding points and time bands with recent
  detections and interdictions (exponentially smoothed, as an agency sees them),
  keeping the flexible total constant;
- ``randomised``: each flexible team draws today's posting from its configured
  mixed strategy (weights over postings), so its presence is unpredictable.
"""

from __future__ import annotations

from typing import TYPE_CHECKING, Protocol

import mesa
import numpy as np

from ..port.day import DETECTED, INTERDICTED, Attempts, DayResult, Staffing
from ..port.layout import Layout
from ..world.references import hours_of
from ..world.schema import Roster, Team

if TYPE_CHECKING:
    from ..model import PortModel


def allocation(
    model: "PortModel", hours: tuple[int, int], lanes: dict[str, int], patrols: dict[str, float]
) -> tuple[np.ndarray, np.ndarray]:
    """Lanes (station x hour) and patrol chance (point x band) of one shift."""
    world, band_of_hour = model.world, model.layout.band_of_hour
    on_duty = np.zeros(24, dtype=bool)
    on_duty[hours_of(hours)] = True
    lane_grid = np.zeros((len(world.stations), 24), dtype=np.int64)
    for station, count in lanes.items():
        lane_grid[world.station_names.index(station), on_duty] = count
    n_bands = int(band_of_hour.max()) + 1
    band_cover = np.array([on_duty[band_of_hour == b].mean() for b in range(n_bands)])  # share of band on duty
    patrol = np.zeros((len(world.boarding_points), n_bands))
    for point, chance in patrols.items():
        patrol[world.point_names.index(point)] = chance * band_cover
    return lane_grid, patrol


class InspectionTeam(mesa.Agent):
    """One team on a daily shift: lanes it staffs at stations, boarding points it patrols."""

    model: "PortModel"

    def __init__(self, model: "PortModel", team: Team) -> None:
        super().__init__(model)
        self.name = team.name
        self.flexible = team.flexible
        self.lanes, self.patrol = allocation(model, team.hours, team.lanes, team.patrols)
        self.postings = [allocation(model, p.hours, p.lanes, p.patrols) for p in team.postings]
        weights = np.array([p.weight for p in team.postings], dtype=float)
        self.posting_weights = weights / weights.sum() if weights.size and weights.sum() > 0 else weights

    def contribute(self, staffing: Staffing) -> None:
        """Add this team's rostered lanes and patrols to today's staffing."""
        staffing.lanes += self.lanes
        staffing.patrol += self.patrol

    def contribute_posting(self, staffing: Staffing, rng: np.random.Generator) -> None:
        """Add one posting drawn from the team's mixed strategy (its roster when it has none)."""
        if not self.postings:
            self.contribute(staffing)
            return
        lanes, patrol = self.postings[int(rng.choice(len(self.postings), p=self.posting_weights))]
        staffing.lanes += lanes
        staffing.patrol += patrol


def _empty_staffing(layout: Layout) -> Staffing:
    return Staffing(
        lanes=np.zeros((layout.station_method.shape[0], 24), dtype=np.int64),
        patrol=np.zeros(layout.point_interdiction.shape),
    )


def _teams(model: "PortModel", flexible: bool) -> mesa.agent.AgentSet:
    return model.agents_by_type[InspectionTeam].select(lambda t: t.flexible == flexible)


class Command(Protocol):
    """A command policy."""

    name: str

    def staffing(self, model: "PortModel", day: int) -> Staffing:
        """Today's staffing."""

    def observe(self, model: "PortModel", attempts: Attempts, result: DayResult) -> None:
        """See the day's detections and interdictions (what an agency knows)."""


class FixedCommand:
    """Every team stays where the roster puts it."""

    name = "fixed"

    def staffing(self, model: "PortModel", day: int) -> Staffing:
        staffing = _empty_staffing(model.layout)
        model.agents_by_type[InspectionTeam].do("contribute", staffing)
        return staffing

    def observe(self, model: "PortModel", attempts: Attempts, result: DayResult) -> None:
        return None


class RandomisedCommand(FixedCommand):
    """Flexible teams draw their posting each day from a mixed strategy."""

    name = "randomised"

    def __init__(self, rng: np.random.Generator) -> None:
        self.rng = rng

    def staffing(self, model: "PortModel", day: int) -> Staffing:
        staffing = _empty_staffing(model.layout)
        _teams(model, flexible=False).do("contribute", staffing)
        _teams(model, flexible=True).do("contribute_posting", staffing, self.rng)
        return staffing


class ReactiveCommand:
    """Move a share of flexible capacity toward recent detections, at constant flexible totals."""

    name = "reactive"

    def __init__(self, roster: Roster, layout: Layout) -> None:
        self.share = roster.reactive.share
        self.smoothing = roster.reactive.smoothing
        n_bands = int(layout.band_of_hour.max()) + 1
        self.station_score = np.zeros((layout.station_method.shape[0], n_bands))
        self.point_score = np.zeros((layout.point_interdiction.shape[0], n_bands))

    def staffing(self, model: "PortModel", day: int) -> Staffing:
        layout = model.layout
        staffing = _empty_staffing(layout)
        _teams(model, flexible=False).do("contribute", staffing)
        flexible = _empty_staffing(layout)
        _teams(model, flexible=True).do("contribute", flexible)
        staffing.lanes += self._move_lanes(flexible.lanes, staffing.lanes, layout)
        staffing.patrol += self._move_patrol(flexible.patrol)
        return staffing

    def _move_lanes(self, rostered: np.ndarray, fixed: np.ndarray, layout: Layout) -> np.ndarray:
        """Move whole lane-hours from the flexible roster toward the station-hours that found most.

        ``share`` of the flexible lane-hours is taken from the rostered cells with
        the lowest smoothed score and given out one lane-hour at a time to the
        cells with the highest score per lane-hour already given (D'Hondt), within
        each station's physical lanes; what cannot be placed goes back.
        """
        moved = int(round(self.share * rostered.sum()))
        cell_score = self.station_score[:, layout.band_of_hour]  # station x hour
        if moved == 0 or cell_score.max() <= 0:
            return rostered
        lanes = rostered.copy().ravel()
        score = cell_score.ravel()
        taken: list[int] = []
        for cell in np.argsort(score, kind="stable"):
            while lanes[cell] > 0 and len(taken) < moved:
                lanes[cell] -= 1
                taken.append(int(cell))
        room = (np.maximum(layout.station_lanes[:, None] - fixed, 0)).ravel() - lanes
        given = np.zeros_like(score)
        for cell in taken:
            priority = np.where(room > 0, score / (given + 1.0), -np.inf)
            best = int(np.argmax(priority))
            target = best if priority[best] > 0 else cell  # nowhere better: the lane-hour stays put
            lanes[target] += 1
            room[target] -= 1
            given[target] += 1
        return lanes.reshape(rostered.shape)

    def _move_patrol(self, rostered: np.ndarray) -> np.ndarray:
        total = rostered.sum()
        if total <= 0 or self.point_score.sum() <= 0:
            return rostered
        return (1 - self.share) * rostered + self.share * total * self.point_score / self.point_score.sum()

    def observe(self, model: "PortModel", attempts: Attempts, result: DayResult) -> None:
        layout = model.layout
        res = result.attempts
        found = res.outcome == DETECTED
        stopped = res.outcome == INTERDICTED

        def band(mask: np.ndarray) -> np.ndarray:
            return layout.band_of_hour[np.floor(res.minute[mask] / 60.0).astype(np.int64) % 24]

        detections = np.zeros_like(self.station_score)
        np.add.at(detections, (res.station[found], band(found)), 1.0)
        interdictions = np.zeros_like(self.point_score)
        np.add.at(interdictions, (attempts.point[stopped], band(stopped)), 1.0)
        a = self.smoothing
        self.station_score = (1 - a) * self.station_score + a * detections
        self.point_score = (1 - a) * self.point_score + a * interdictions


def make_command(roster: Roster, layout: Layout, rng: np.random.Generator) -> Command:
    """The command policy a roster names."""
    if roster.command == "fixed":
        return FixedCommand()
    if roster.command == "reactive":
        return ReactiveCommand(roster, layout)
    if roster.command == "randomised":
        return RandomisedCommand(rng)
    raise ValueError(f"unknown command policy '{roster.command}'")
