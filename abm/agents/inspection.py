"""Inspection teams and command: Mesa agents that put lanes and patrols on duty.

Teams work a daily shift. Command turns the teams on duty into today's staffing:
lanes per station and hour, and extra interdiction chance per boarding point and
time band (a team patrolling a point for part of a band adds that part of its
patrol chance). The ``fixed`` command keeps every team where the roster put it.
"""

from __future__ import annotations

from typing import TYPE_CHECKING

import mesa
import numpy as np

from ..port.day import Staffing
from ..world.references import hours_of
from ..world.schema import Team

if TYPE_CHECKING:
    from ..model import PortModel


class InspectionTeam(mesa.Agent):
    """One team on a daily shift: lanes it staffs at stations, boarding points it patrols."""

    model: "PortModel"

    def __init__(self, model: "PortModel", team: Team) -> None:
        super().__init__(model)
        world = model.world
        self.name = team.name
        self.flexible = team.flexible
        on_duty = np.zeros(24, dtype=bool)
        on_duty[hours_of(team.hours)] = True
        self.on_duty = on_duty
        self.lanes = np.zeros((len(world.stations), 24), dtype=np.int64)
        for station, count in team.lanes.items():
            self.lanes[world.station_names.index(station), on_duty] = count
        band_of_hour = model.layout.band_of_hour
        n_bands = int(band_of_hour.max()) + 1
        # share of each band's hours this team is on duty
        band_cover = np.array([on_duty[band_of_hour == b].mean() for b in range(n_bands)])
        self.patrol = np.zeros((len(world.boarding_points), n_bands))
        for point, chance in team.patrols.items():
            self.patrol[world.point_names.index(point)] = chance * band_cover

    def contribute(self, staffing: Staffing) -> None:
        """Add this team's lanes and patrols to today's staffing."""
        staffing.lanes += self.lanes
        staffing.patrol += self.patrol


class FixedCommand:
    """Every team stays where the roster puts it."""

    name = "fixed"

    def staffing(self, model: "PortModel", day: int) -> Staffing:
        """Today's staffing from the teams on the roster."""
        layout = model.layout
        staffing = Staffing(
            lanes=np.zeros((layout.station_method.shape[0], 24), dtype=np.int64),
            patrol=np.zeros(layout.point_interdiction.shape),
        )
        model.agents_by_type[InspectionTeam].do("contribute", staffing)
        return staffing


def make_command(name: str) -> FixedCommand:
    """The command policy a world names."""
    if name == "fixed":
        return FixedCommand()
    raise ValueError(f"unknown command policy '{name}'")
