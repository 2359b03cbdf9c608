"""The crossing's own words for its departures and its place, for every output people read.

The schema and the tables use generic names (departures, time at the crossing);
a world says what its departures are (``departures.service``: sailing, train,
convoy or slot) and, optionally, what its place is called (``site``: port,
terminal, border or crossing). Briefings, reports and command output say
"missed trains" and "time in the terminal" for a rail terminal, "missed
sailings" and "time in port" for a ferry port.
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass
from typing import Any

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
    departs: bool = True  # False where vehicles leave when cleared (a land border): nothing to book or miss

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

    def fill(self, text: str) -> str:
        """``text`` with its placeholders in these words: {service}, {services}, {missed}, {time_at_site},
        {site}, {the_site}; a capitalised placeholder ({Missed}) gives a capitalised word.

        >>> Words(service="train", site="terminal").fill("{Missed} and {time_at_site}")
        'Missed trains and time in the terminal'
        """
        values = {"service": self.service, "services": self.services, "missed": self.missed,
                  "time_at_site": self.time_at_site, "site": self.site, "the_site": self.the_site}
        values |= {key[0].upper() + key[1:]: value[0].upper() + value[1:] for key, value in values.items()}
        return text.format(**values)


GENERIC = Words(service="departure", site="crossing")  # when no world is at hand


def _words(service: str | None, site: str | None) -> Words:
    """Words for departures of kind ``service`` (None: a crossing without departures) at a ``site``."""
    default_site = "border" if service is None else "port" if service == "sailing" else "terminal"
    return Words(service=service or "departure", site=site or default_site, departs=service is not None)


def words_for(world: World | None) -> Words:
    """The display words of ``world`` (generic ones for ``None``)."""
    if world is None:
        return GENERIC
    return _words(world.departures.service if world.departures is not None else None, world.site)


def words_from_data(data: Mapping[str, Any]) -> Words:
    """The display words of a world given as its data, as a run's ``world.json`` holds it."""
    departures = data.get("departures")
    service = departures.get("service", "sailing") if isinstance(departures, Mapping) else None
    return _words(service, data.get("site"))
