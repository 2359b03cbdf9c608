"""The briefing's word on load: can the baseline's stations and departures carry the traffic at all?

A policy comparison on an overloaded baseline is a comparison of queues, not of
checks; the reader must know before reading any figure. The load comes from
:func:`abm.port.load.load_report` on the world each design point ran.
"""

from __future__ import annotations

from typing import Any

from ..port.load import OVERLOAD, load_report
from ..world import parse_world
from .document import Bullets, Item, Paragraph
from .store_view import BatchView

PREFIX = "warning: "


def _warnings(world: dict[str, Any]) -> tuple[list[str], float]:
    report = load_report(parse_world(world, "world.json"))
    return [w.removeprefix(PREFIX) for w in report.warnings], report.overflow_share


def load_blocks(batch: BatchView, baseline_points: list[int]) -> list[Any]:
    """Paragraphs for the scenario section: the baseline's overloads (or that it has none) and each policy's new ones."""
    base_warnings, overflow = _warnings(batch.world)
    blocks: list[Any] = []
    if base_warnings:
        blocks.append(Paragraph(
            f"The baseline is overloaded at {len(base_warnings)} place{'s' if len(base_warnings) != 1 else ''} "
            f"(a fluid estimate from the world file on its busiest weekday; offered load of {OVERLOAD} or more, or "
            f"{batch.words.services} booked beyond their places):", lead="Load."))
        blocks.append(Bullets(tuple(Item(w) for w in base_warnings)))
        causes = []
        if overflow > 0:
            causes.append(f"about {overflow:.1%} of vehicles miss their booked {batch.words.service} for want of places "
                          f"alone, whatever the checks, so {batch.words.missed} here come partly from overload rather "
                          "than checks")
        if any(w.startswith("station") for w in base_warnings):
            causes.append(f"{batch.words.time_at_site} includes queues that grow through the overloaded bands because lanes are "
                          "short, beyond the checks' own time")
        if causes:
            text = "; ".join(causes)
            blocks.append(Paragraph(text[0].upper() + text[1:] + ". Policies are compared on this same baseline, "
                                    "so their differences include how each eases or worsens the overload; absolute "
                                    "delays overstate what checks alone cost."))
    else:
        w = batch.words
        carried = (f"Every station and {w.service} of the baseline carries its traffic (a fluid estimate from the world "
                   f"file on its busiest weekday: offered load below {OVERLOAD}, {w.services} within their places)."
                   if w.departs else
                   f"Every station of the baseline carries its traffic (a fluid estimate from the world file on its "
                   f"busiest weekday: offered load below {OVERLOAD}); vehicles leave on clearance.")
        blocks.append(Paragraph(carried, lead="Load."))
    added: dict[str, None] = {}  # in order, each once (a policy runs in every scenario)
    for point in batch.points.index:
        if point in baseline_points:
            continue
        for warning in _warnings(batch.point_world(int(point)))[0]:
            if warning not in base_warnings:
                added[f"{batch.policy_of(int(point))}: {warning}"] = None
    if added:
        blocks.append(Paragraph("Some policies overload what the baseline does not:"))
        blocks.append(Bullets(tuple(Item(text) for text in added)))
    return blocks
