"""What every briefing section shares: the batch and its tables (:class:`Context`) and the words for figures."""

from __future__ import annotations

import math
from dataclasses import dataclass

import pandas as pd

from ..analysis.policy_table import DelayLimits
from ..world.words import Words
from .document import excludes_zero, interval, is_number, number, with_interval
from .evidence import Evidence
from .store_view import BatchView
from .tables import MEASURE, Measure, Stakeholder, worded


BEHAVIOUR_WORDS = {
    "static": "people choose where, when and on which vehicle to try with fixed shares (the classic assumption)",
    "adaptive": "people learn which options are risky from their own outcomes, from peers and from rumour, "
                "forget slowly, and move away from what gets them caught",
    "reinforcement": "a facilitation network learns shared propensities from outcomes (Roth-Erev reinforcement)",
}

SAFETY = (
    "People hidden in vehicles risk suffocation, heat, cold and crushing. A policy that displaces attempts can push "
    "people toward more dangerous boarding — moving vehicles, sealed or refrigerated loads, remote lay-bys — "
    "toward hiding deeper in the load, or to routes outside this crossing where nobody is looking out for them. "
    "Every figure here is a model estimate, not "
    "a count of real people, from a fictional world whose numbers are illustrative. Nothing in this briefing "
    "replaces the law, safeguarding duties toward people found in vehicles, or the agencies' own licensed practice "
    "and procedures; defer to them."
)


@dataclass
class Context:
    """Everything the section builders share."""

    batch: BatchView
    evidence: Evidence
    runs: pd.DataFrame
    table: pd.DataFrame
    means: pd.DataFrame
    status: pd.DataFrame
    best: dict[tuple, int]
    on_frontier: pd.Series
    limits: DelayLimits
    contrast: pd.DataFrame
    scenario_points: dict[tuple, list[int]]
    drivers: pd.DataFrame | None = None  # PRCC per output and range factor (sampled designs)
    drivers_problem: str = ""  # why PRCC could not be computed

    @property
    def words(self) -> Words:
        """The crossing's own words ("missed trains", "time in the terminal")."""
        return self.batch.words

    @property
    def measure(self) -> dict[str, Measure]:
        """Every measure by key, labelled in the crossing's words."""
        return worded(self.words)

    def stakeholder_name(self, s: Stakeholder) -> str:
        """A stakeholder's display name in the crossing's words ("Terminal operator")."""
        return self.words.fill(s.label or s.name)

    @property
    def baseline_name(self) -> str:
        """The baseline policy's display label."""
        if self.batch.policy is None:
            return str(self.batch.baseline)
        return self.batch.policy_label(self.batch.baseline)

    def cell(self, point: int, figure: str) -> pd.Series | None:
        """The comparison row of one point and measure."""
        rows = self.table[(self.table["point"] == point) & (self.table["figure"] == figure)]
        return rows.iloc[0] if len(rows) else None

    def primary(self) -> tuple:
        """The scenario headlines speak about: adaptive behaviour when the batch has it, else the first."""
        keys = list(self.scenario_points)
        if self.batch.behaviour is not None:
            at = self.batch.scenario_labels.index(self.batch.behaviour)
            for key in keys:
                if str(key[at]) == "adaptive":
                    return key
        return keys[0]

    def baseline_point(self, scenario: tuple) -> int | None:
        return next((p for p in self.scenario_points[scenario] if self.batch.compare_to.get(p) is None), None)

    def scenario_text(self, scenario: tuple) -> str:
        """The scenario in words ("adaptive behaviour"); "all runs" when nothing but the policy varies."""
        if not self.batch.scenario_labels:
            return "all runs"
        return self.batch.scenario_name(self.scenario_points[scenario][0])

    def under(self, scenario: tuple) -> str:
        """ "Under adaptive behaviour, " (or "Across all runs, "): the opening of a sentence about a scenario."""
        return f"Under {self.scenario_text(scenario)}, " if self.batch.scenario_labels else "Across all runs, "


# -- words ----------------------------------------------------------------------------------------


def value_text(ctx: Context, point: int, figure: str) -> str:
    row = ctx.cell(point, figure)
    kind = MEASURE[figure].kind
    return "n/a" if row is None else with_interval(row["mean"], row["low"], row["high"], kind)


def effect_text(ctx: Context, point: int, figure: str) -> str:
    """A paired difference against the baseline with its interval and a reading."""
    row = ctx.cell(point, figure)
    if row is None or not is_number(row["difference"]):
        return "n/a"
    kind = MEASURE[figure].kind
    text = (f"{number(row['difference'], kind, signed=True)} against {ctx.baseline_name} (paired 95% interval "
            f"{interval(row['difference_low'], row['difference_high'], kind, signed=True)}")
    if is_number(row["difference_low"]) and not excludes_zero(row["difference_low"], row["difference_high"]):
        text += ": not distinguishable from no change"
    return text + ")"


def delay_change_text(ctx: Context, point: int, short: bool = False) -> str:
    """How a point changes the delay against its baseline: the p95 time at the crossing and, where vehicles book
    departures, the missed share ("95th-percentile time in port +3.9%, missed sailings +0.2 percentage points");
    ``short`` for a table cell ("p95 +3.9%, missed +0.2 pp")."""
    s = ctx.status.loc[point]
    tip = number(s["time_in_port_change"], "relative", True)
    text = f"p95 {tip}" if short else f"95th-percentile {ctx.words.time_at_site} {tip}"
    if not ctx.words.departs:  # a land border: vehicles leave when cleared, nothing to miss
        return text
    missed = number(s["missed_change_points"], "ratio", True)
    return text + (f", missed {missed} pp" if short else f", {ctx.words.missed} {missed} percentage points")


def capitalised(text: str) -> str:
    """Upper-case the first letter of a caption ("static behaviour: ..." -> "Static behaviour: ...")."""
    return text[:1].upper() + text[1:]


def uncapitalised(text: str) -> str:
    """A generated sentence continuing after a colon: its leading article in lower case."""
    return "the " + text[4:] if text.startswith("The ") else text


def percent(share: float) -> str:
    """A share as a whole percentage ("87%"); "n/a" when it is not a number."""
    return f"{100 * float(share):.0f}%" if math.isfinite(float(share)) else "n/a"


def level_list(batch: BatchView, label: str) -> list[str]:
    factor = batch.factor(label)
    items = []
    for level in factor.levels:
        note = factor.notes.get(str(level)) or (BEHAVIOUR_WORDS.get(str(level), "") if label == batch.behaviour else "")
        base = " (baseline)" if label == batch.policy and str(level) == str(batch.baseline) else ""
        shown = batch.policy_label(level) if label == batch.policy else str(level)
        key = f" [{level}]" if shown != str(level) else ""
        items.append(f"{shown}{key}{base}" + (f": {note}" if note else ""))
    return items


def intervention_of(batch: BatchView) -> tuple[int, str] | None:
    """The first intervention that takes effect inside the runs (after day 0, before the last day)."""
    for iv in sorted(batch.world.get("interventions", []), key=lambda i: i["day"]):
        if 0 < int(iv["day"]) <= batch.end_day:
            return int(iv["day"]), str(iv["name"])
    return None


def gain_point(ctx: Context, scenario: tuple) -> int | None:
    """The policy whose gain the displacement sentence examines: the best within limits, else the top detector."""
    best = ctx.best.get(scenario)
    if best is not None and ctx.batch.compare_to.get(best) is not None:
        return best
    others = [p for p in ctx.scenario_points[scenario] if ctx.batch.compare_to.get(p) is not None]
    return max(others, key=lambda p: ctx.means.loc[p, "detections"]) if others else None
