"""The crossing's own words for its departures and its place, for every output people read.

The schema and the tables use generic names (departures, time at the crossing);
a world says what its departures are (``departures.service``: sailing, train,
convoy or slot) and, optionally, what its place is called (``site``: port,
terminal, border or crossing). Briefings, reports and command output say
"missed trains" and "time in the terminal" for a rail terminal, "missed
sailings" and "time in port" for a ferry port.
"""

from __future__ import annotations

from dataclasses import dataclass

from .schema import World

# How each place word reads after "time": "time in port", "time in the terminal".
_TIME_PHRASE = {"port": "in port", "terminal": "in the terminal", "border": "at the border", "crossing": "at the crossing"}


@dataclass(frozen=True)
class Words:
    """Display words of one world.

    >>> w = Words(service="train", site="terminal")
    >>> w.missed, w.time_at_site, w.the_site
    ('missed trains', 'time in the terminal', 'the terminal')
    """

    service: str  # one departure: "sailing", "train", "convoy", "slot"; "departure" in a world without them
    site: str  # "port", "terminal", "border" or "crossing"

    @property
    def services(self) -> str:
        """The plural: "sailings", "trains"."""
        return self.service + "s"

    @property
    def missed(self) -> str:
        """Vehicles that left on a later departure than booked: "missed sailings"."""
        return "missed " + self.services

    @property
    def time_at_site(self) -> str:
        """A vehicle's time from arrival to leaving: "time in port", "time at the border"."""
        return "time " + _TIME_PHRASE[self.site]

    @property
    def the_site(self) -> str:
        """The place with its article: "the port", "the terminal"."""
        return "the " + self.site


GENERIC = Words(service="departure", site="crossing")  # when no world is at hand


def words_for(world: World | None) -> Words:
    """The display words of ``world`` (generic ones for ``None``)."""
    if world is None:
        return GENERIC
    dep = world.departures
    service = getattr(dep, "service", "sailing") if dep is not None else "departure"  # main: dep.service
    site = getattr(world, "site", None) or ("border" if dep is None else "port" if service == "sailing" else "terminal")
    return Words(service=service, site=site)
