"""The briefing's bottom line: at most three plain sentences a decision-maker reads first.

Which policy, and whether its gain in detections is distinguishable from
chance; what it costs (staff-hours, the 95th percentile of time at the
crossing, missed departures); and what it does to the people who try
(crossings, crossings of people who boarded after the last check, people
pushed out of the crossing, the hazard of where and how deep they board).
It speaks about the headline scenario (adaptive behaviour when the batch has
it), with the same figures as the comparison table.

The rules (no figure may look more certain than its evidence):

* a policy is "the policy to prefer" only when its paired interval on
  detections against the baseline excludes zero; otherwise the line opens with
  "no policy is shown to detect more than <baseline>" and names the
  highest-mean policy only as the largest gain not distinguishable from chance;
* every harm figure the named policy worsens beyond chance (paired interval
  excluding zero, in the harmful direction) is said, in the same sentences.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import TYPE_CHECKING

from .context import delay_change_text
from .document import excludes_zero, interval, is_number, number
from .tables import MEASURE, is_within

if TYPE_CHECKING:
    from .context import Context

# The figures that measure harm to the people who try, as the third sentence names them (all lower is better).
HARMS: tuple[tuple[str, str], ...] = (
    ("crossings", "crossings"),
    ("crossings_after_checks", "crossings of people who boarded after the last check"),
    ("displaced_out", "the number pushed out of the crossing to other routes"),
    ("hazard_weighted_share", "the hazard of where and how deep they board (a 0–1 score)"),
)


@dataclass(frozen=True)
class Effect:
    """A paired difference against the baseline as the bottom line quotes it."""

    text: str  # "+12 (95% interval +4 to +20)"
    difference: float
    sure: bool  # the paired interval excludes zero

    def worse(self, figure: str) -> bool:
        """True when the change is beyond chance and in the direction that is worse on ``figure``."""
        return self.sure and self.difference * MEASURE[figure].better < 0

    def better(self, figure: str) -> bool:
        return self.sure and self.difference * MEASURE[figure].better > 0


def _change(ctx: "Context", point: int, figure: str) -> Effect | None:
    """The paired difference of ``point`` against its baseline on ``figure``; None without the figure."""
    row = ctx.cell(point, figure)
    if row is None or not is_number(row["difference"]):
        return None
    kind = MEASURE[figure].kind
    diff = float(row["difference"])
    shown = number(diff, kind, signed=True)
    if not is_number(row["difference_low"]):
        return Effect(f"{shown} (no interval: too few replications)", diff, False)
    # A difference that is the same in every replication (staff-hours) is exact: no interval to quote, and it
    # is "sure" only when it is not zero.
    sure = excludes_zero(row["difference_low"], row["difference_high"])
    if float(row["difference_low"]) == float(row["difference_high"]):
        return Effect(shown, diff, sure)
    spread = interval(row["difference_low"], row["difference_high"], kind, True, like=diff)
    return Effect(f"{shown} (95% interval {spread})", diff, sure)


def named_policy(ctx: "Context", scenario: tuple) -> tuple[int | None, bool]:
    """The policy the bottom line names in a scenario, and whether its detection gain is beyond chance.

    Among the policies within the delay limits: the one detecting most of those whose gain on the baseline is
    distinguishable from chance; failing that, the one detecting most on average when it detects more than
    the baseline (named, but not preferred); else None.
    """
    candidates = []
    for point in ctx.scenario_points[scenario]:
        if ctx.batch.compare_to.get(point) is None or not is_within(ctx.status, point):
            continue
        effect = _change(ctx, point, "detections")
        if effect is not None and effect.difference > 0:
            candidates.append((point, effect))
    if not candidates:
        return None, False
    sure = [(p, e) for p, e in candidates if e.sure]
    point, effect = max(sure or candidates, key=lambda pe: (pe[1].difference, -pe[0]))
    return point, effect.sure


def _other_behaviour(ctx: "Context", scenario: tuple, best: int, sure: bool) -> str:
    """"; under static behaviour ... " when the batch also ran the same policy under another behaviour model
    (saying the answer depends on the assumption when the gain is clear under one model and not the other)."""
    if ctx.batch.behaviour is None:
        return ""
    parts, differs = [], False
    for other, points in ctx.scenario_points.items():
        if other == scenario:
            continue
        twin = next((p for p in points if ctx.batch.policy_of(p) == ctx.batch.policy_of(best)), None)
        change = _change(ctx, twin, "detections") if twin is not None else None
        if change is not None:
            reading = "" if change.sure else ", not distinguishable from chance"
            parts.append(f"under {ctx.scenario_text(other)} it changes detections by {change.text}{reading}")
            differs = differs or change.sure != sure
    if not parts:
        return ""
    return "; " + "; ".join(parts) + (", so the answer depends on how people are assumed to behave" if differs else "")


def _lead(ctx: "Context", scenario: tuple, point: int, sure: bool) -> str:
    """The first sentence: the policy to prefer, or that none is shown to detect more than the baseline."""
    under, policy, days = ctx.under(scenario), ctx.batch.policy_of(point), ctx.batch.days
    detections = _change(ctx, point, "detections")
    assert detections is not None  # named_policy only names a policy with a detection change
    other = _other_behaviour(ctx, scenario, point, sure)
    if sure:
        return (f"{under}{policy} is the policy to prefer within the delay limits: against {ctx.baseline_name} it "
                f"changes detections by {detections.text} people over {days} days{other}.")
    return (f"{under}no policy is shown to detect more than {ctx.baseline_name} within the delay limits: the largest "
            f"(not distinguishable from chance) gain is under {policy}: {detections.text} detections over {days} days"
            f"{other}.")


def _staff(ctx: "Context", point: int) -> str:
    """ "needs no extra staff-hours" / "needs 336 more staff-hours over the 28 days"; "" without the figure."""
    row = ctx.cell(point, "staff_hours")
    if row is None or not is_number(row["difference"]):
        return ""
    diff, low, high = (float(row[k]) for k in ("difference", "difference_low", "difference_high"))
    exact = not (is_number(low) and is_number(high)) or low == high  # a roster's hours: the same every replication
    if diff == 0 and exact:
        return "needs no extra staff-hours"
    more = "more" if diff > 0 else "fewer"
    text = f"needs {number(abs(diff), 'hours')} {more} staff-hours over the {ctx.batch.days} days"
    return text if exact else text + f" (95% interval {interval(low, high, 'hours', True)})"


def _costs(ctx: "Context", point: int, subject: str) -> str:
    """The second sentence: staff-hours and the delay the policy adds."""
    costs = [part for part in (_staff(ctx, point),) if part]
    status = ctx.status.loc[point] if point in ctx.status.index else None
    if status is not None and is_number(status["time_in_port_change"]):
        costs.append(f"changes the delay ({delay_change_text(ctx, point)})")
    return f"{subject} {' and '.join(costs)}." if costs else ""


def _listed(parts: list[str]) -> str:
    return parts[0] if len(parts) == 1 else ", ".join(parts[:-1]) + " and " + parts[-1]


def _people(ctx: "Context", point: int) -> str:
    """The third sentence: each harm figure, those worsened beyond chance first."""
    effects = [(figure, words, e) for figure, words in HARMS if (e := _change(ctx, point, figure)) is not None]
    if not effects:
        return ""
    worse = [f"{words} by {e.text}" for figure, words, e in effects if e.worse(figure)]
    better = [f"{words} by {e.text}" for figure, words, e in effects if e.better(figure)]
    unclear = [f"{words} by {e.text}" for figure, words, e in effects if not e.sure]
    parts = []
    if worse:
        parts.append(f"raises {_listed(worse)}, beyond what chance could give")
    if better:
        parts.append(f"lowers {_listed(better)}, beyond what chance could give")
    if unclear:
        reading = {1: "not", 2: "neither"}.get(len(unclear), "none") + " distinguishable from chance"
        parts.append(f"changes {_listed(unclear)}, {reading}")
    return f"For the people who try, it {'; it '.join(parts)}."


def bottom_line(ctx: "Context") -> str:
    """At most three sentences: the policy and its gain, its cost, its effect on the people who try."""
    scenario = ctx.primary()
    under = ctx.under(scenario)
    others = [p for p in ctx.scenario_points[scenario] if ctx.batch.compare_to.get(p) is not None]
    if ctx.batch.policy is None or not others:
        return ("This batch compares no policies with a baseline; see the tables for each design point's figures, "
                "which are model estimates, not counts.")
    point, sure = named_policy(ctx, scenario)
    if point is None:
        return (f"{under}no policy tested finds more people than {ctx.baseline_name} within the delay limits "
                f"({ctx.limits.describe(ctx.baseline_name, ctx.words)}), so the evidence here does not favour a change. "
                "Every figure is a model estimate, not a count.")
    subject = "It" if sure else ctx.batch.policy_of(point)  # after "no policy is shown ...", "it" would be unclear
    parts = (_lead(ctx, scenario, point, sure), _costs(ctx, point, subject), _people(ctx, point))
    return " ".join(part for part in parts if part)
